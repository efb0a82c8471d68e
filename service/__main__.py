"""Command line: ``python -m service [--host H] [--port P]`` starts the API;
``python -m service select --data FILE ...`` runs one selection in-process (see service/cli.py)."""

from __future__ import annotations

import argparse
import os
import sys


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] == "select":
        from .app import limit_blas_threads
        from .cli import select_main
        from .settings import get_settings as _gs

        limit_blas_threads(_gs().blas_threads)
        return select_main(argv[1:])
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
