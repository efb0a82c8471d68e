# The README's install-and-run command, step for step (tests/test_readme_commands.py checks it):
#   pip install --require-hashes -r locks/runtime.txt && pip install --no-deps . && python -m service
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    PYTHONUNBUFFERED=1 \
    OPENBLAS_NUM_THREADS=1 \
    OMP_NUM_THREADS=1 \
    MKL_NUM_THREADS=1 \
    BESTSCALE_BLAS_THREADS=1 \
    BESTSCALE_HOST=0.0.0.0 \
    BESTSCALE_PORT=8000

WORKDIR /app
COPY locks ./locks
RUN pip install --require-hashes -r locks/runtime.txt
COPY pyproject.toml README.md ./
COPY service ./service
RUN pip install --no-deps . \
 && useradd --create-home --uid 10001 bestscale

USER bestscale
EXPOSE 8000
HEALTHCHECK --interval=30s --timeout=5s --start-period=10s --retries=3 \
  CMD python -c "import sys, urllib.request; sys.exit(0 if urllib.request.urlopen('http://127.0.0.1:8000/healthz', timeout=4).status == 200 else 1)"
CMD ["python", "-m", "service"]
