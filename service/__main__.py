"""Command line: ``python -m service [--host H] [--port P] [--workers N]`` starts the API;
``python -m service select --data FILE ...`` runs one selection in-process (see service/cli.py).

Settings come from ``BESTSCALE_*`` variables (service/settings.py); the flags override the
three listed.  With several workers, Prometheus metrics are shared through a fresh directory
(``PROMETHEUS_MULTIPROC_DIR``) created here before the workers start and removed at exit.

The service's own modules, pydantic and uvicorn are imported inside the functions that use
them: numpy reads the BLAS thread variables once, when it is first imported, so
:func:`_pin_blas` must run before anything loads it (the settings module loads no numpy for
this reason; tests/test_main.py checks it).
"""

from __future__ import annotations

import argparse
import glob
import ipaddress
import os
import shutil
import sys
import tempfile


def _settings_or_exit():
    from pydantic import ValidationError

    from .settings import describe_error, get_settings

    try:
        return get_settings()
    except ValidationError as exc:
        print("invalid settings:\n" + describe_error(exc), file=sys.stderr)
        raise SystemExit(2) from None


def _pin_blas(n: int) -> None:
    # before numpy is imported by anything: the libraries read these once at load time
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, str(n))


def metrics_dir(workers: int) -> tuple[str | None, bool]:
    """The multiprocess metrics directory for ``workers`` processes, and whether it is ours
    to remove.  One worker needs none; an operator's directory is emptied of stale files."""
    if workers <= 1:
        return None, False
    given = os.environ.get("PROMETHEUS_MULTIPROC_DIR")
    if given:
        os.makedirs(given, exist_ok=True)
        for path in glob.glob(os.path.join(given, "*.db")):
            os.remove(path)  # values of an earlier run would be added to this one's
        return given, False
    path = tempfile.mkdtemp(prefix="bestscale-metrics-")
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = path
    return path, True


def is_loopback(host: str) -> bool:
    """Whether ``host`` only accepts connections from this machine."""
    if host.strip("[]").lower() in ("localhost", "localhost."):
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False  # a host name: it may resolve to any interface


def exposure_warning(host: str, token: str | None) -> str | None:
    """One warning line when the API is reachable from other machines without a token."""
    if token or is_loopback(host):
        return None
    return (
        f"bestscale: WARNING: listening on {host} without BESTSCALE_API_TOKEN: anyone who can "
        "reach this address can use the API; set BESTSCALE_API_TOKEN (16 or more characters) "
        "and, for browsers, BESTSCALE_CORS_ORIGINS (README: Deployment)"
    )


def serve_parser(host: str, port: int, workers: int) -> argparse.ArgumentParser:
    """The flags of ``python -m service`` (defaults from the BESTSCALE_* settings)."""
    from .cli import whole_number

    ap = argparse.ArgumentParser(
        prog="python -m service",
        usage="python -m service [--host H] [--port P] [--workers N]\n"
        "       python -m service select --data FILE --response Y --predictors A,B [...]",
        description="Run the Bestscale API (HTTP, JSON), or with the 'select' command one "
        "selection without a server.",
        epilog=(
            "commands:\n"
            "  (none)  run the API server with the flags above\n"
            "  select  run one selection (or one per segment, on a Dask cluster) in-process\n"
            "          and write the JSON the API returns; 'python -m service select --help'\n"
            "          lists its flags\n\n"
            "Settings come from BESTSCALE_* environment variables (README: Settings); the\n"
            "flags above override BESTSCALE_HOST, BESTSCALE_PORT and BESTSCALE_WORKERS."
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    ap.add_argument(
        "--host",
        default=host,
        metavar="H",
        help=f"IP address or host name to listen on (default {host}, this machine only)",
    )
    ap.add_argument(
        "--port",
        type=whole_number,
        default=port,
        metavar="P",
        help=f"TCP port, 1-65535 (default {port})",
    )
    ap.add_argument(
        "--workers",
        type=whole_number,
        default=workers,
        metavar="N",
        help=f"server processes, 1-64 (default {workers}: BESTSCALE_WORKERS, else one per "
        "core this process may use)",
    )
    return ap


def serve(argv: list[str]) -> int:
    s = _settings_or_exit()
    ap = serve_parser(s.host, s.port, s.server_processes())
    args = ap.parse_args(argv)
    if not 1 <= args.workers <= 64:
        ap.error(f"--workers {args.workers}: give a number of processes from 1 to 64")
    if not 1 <= args.port <= 65535:
        ap.error(f"--port {args.port}: give a TCP port from 1 to 65535")
    warning = exposure_warning(args.host, s.token())
    if warning:
        print(warning, file=sys.stderr, flush=True)
    _pin_blas(s.blas_threads)
    directory, ours = metrics_dir(args.workers)
    import uvicorn

    from .api.logs import logging_config

    try:
        uvicorn.run(
            "service.app:app",
            host=args.host,
            port=args.port,
            workers=args.workers,
            log_level=s.log_level,
            log_config=logging_config(s.log_level),
            access_log=False,
            server_header=False,
            timeout_graceful_shutdown=30,
            http="service.server:GuardedH11",  # header-read timeout and connection cap
        )
    finally:
        if ours and directory:
            shutil.rmtree(directory, ignore_errors=True)
    return 0


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] == "select":
        s = _settings_or_exit()
        _pin_blas(s.blas_threads)
        from .app import limit_blas_threads
        from .cli import select_main

        limit_blas_threads(s.blas_threads)
        return select_main(argv[1:])
    return serve(argv)


if __name__ == "__main__":
    raise SystemExit(main())
