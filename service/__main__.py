"""Command line: ``python -m service [--host H] [--port P]`` starts the API."""

from __future__ import annotations

import argparse
import os
import sys


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    from .settings import get_settings

    s = get_settings()
    ap = argparse.ArgumentParser(prog="python -m service", description="Run the Bestscale API.")
    ap.add_argument("--host", default=s.host)
    ap.add_argument("--port", type=int, default=s.port)
    ap.add_argument("--workers", type=int, default=s.workers)
    args = ap.parse_args(argv)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, str(s.blas_threads))
    import logging

    import uvicorn

    logging.basicConfig(level=s.log_level.upper(), format="%(message)s")

    uvicorn.run("service.app:app", host=args.host, port=args.port, workers=args.workers,
                log_level=s.log_level, server_header=False)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
