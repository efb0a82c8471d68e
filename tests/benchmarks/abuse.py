"""Hostile requests against a real server: status, seconds, peak memory growth, /healthz.

Run by hand: ``python tests/benchmarks/abuse.py [--source DIR] [--set NAME=VALUE ...]``.
``--source`` points at another checkout of the service (for example the commit before a
change) so the same cases give before/after figures on one machine in one session; the
ratios printed at the end compare against a baseline file written by an earlier run
(``--save FILE`` / ``--baseline FILE``).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "api"))

import abuse_harness as h

CASES = {
    "1 parquet 5M rows": lambda: h.case_parquet_bomb(5_000_000),
    "2 columns 20000": lambda: h.case_many_columns(20_000),
    "2 csv header 30000 dup": lambda: h.case_csv_duplicate_header(30_000),
    "3 level 200k chars top100": lambda: h.case_long_level(200_000),
    "4 box_cox lambda 5e-6": lambda: h.case_tiny_lambda(5e-6),
    "4 power exponent 1e-5": lambda: h.case_tiny_power(1e-5),
    "5 forged coefficient": lambda: h.case_forged_model("coefficient"),
    "5 forged variance 1e300": lambda: h.case_forged_model("variance"),
    "5 forged exponent 1e-300": lambda: h.case_forged_model("exponent"),
    "5 forged 200k residuals": lambda: h.case_forged_model("residuals"),
    "6 deadline 4 s + trust": lambda: h.case_deadline(4.0),
    "7 nesting 970": lambda: h.case_deep_nesting(970),
    "11 repeated options part": h.case_repeated_options,
    "11 unclosed multipart": h.case_unclosed_multipart,
    "12 length + chunked": h.case_length_and_chunked,
}


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--source", help="checkout to run the server from")
    ap.add_argument("--set", action="append", default=[], help="BESTSCALE_ setting NAME=VALUE")
    ap.add_argument("--only", help="run the cases whose name contains this text")
    ap.add_argument("--save", help="write the figures as JSON")
    ap.add_argument("--baseline", help="JSON from an earlier run: print ratios against it")
    args = ap.parse_args()
    env = {"BESTSCALE_" + k.upper(): v for k, _, v in (s.partition("=") for s in args.set)}
    base = json.loads(Path(args.baseline).read_text()) if args.baseline else {}
    out = {}
    print(f"{'case':30} {'status':>6} {'s':>8} {'MB':>8} {'health s':>9}  detail")
    for name, make in CASES.items():
        if args.only and args.only not in name:
            continue
        server = h.Server(env, args.source)
        try:
            run, _ = make()
            m = h.measure(server, run)
        finally:
            server.close()
        out[name] = m.__dict__
        ratio = ""
        if name in base and base[name]["seconds"] > 0:
            b = base[name]
            ratio = f"  time x{m.seconds / b['seconds']:.3g} (was {b['seconds']:.3g} s, " + (
                f"{b['rss_growth_mb']:.0f} MB, status {b['status']})"
            )
        print(
            f"{name:30} {m.status:>6} {m.seconds:>8.2f} {m.rss_growth_mb:>8.0f} "
            f"{m.health_max_s:>9.2f}  {m.detail[:70]}{ratio}",
            flush=True,
        )
    slow = h.Server(env, args.source)
    try:
        still = h.slow_headers(slow, 20, 2.0, 12.0)
    finally:
        slow.close()
    print(f"8 slow headers: {still} of 20 connections still open after 12 s")
    out["8 slow headers open of 20"] = {"status": still, "seconds": 12.0, "rss_growth_mb": 0}
    if args.save:
        Path(args.save).write_text(json.dumps(out, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
