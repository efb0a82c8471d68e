"""Simulation study: how often the search ranks the generating scale first (run by hand).

    python tests/benchmarks/recovery.py [--seeds 20] [--n 100,300,1000] [--workers 2]
                                         [--processes name,...] [--log results.jsonl]

Every process has a known right scale (the data are generated on it).  Each run is a
default selection (5 folds, 1 repeat, default transforms) and counts as a hit when rank 1
is the generating scale.  Prints a table (process x n: share of hits), the overall share,
the share at n >= 300, and the share of identity-scale processes left untransformed.  The
table in README.md ("How a ranking is decided") comes from this script.

The targets (design choice of the ranking rule): the generating scale first in >= 97% of
runs overall and >= 90% for every process at n >= 300; identity-scale data left
untransformed in >= 95%.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from multiprocessing import get_context
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.api.encode import to_jsonable
from service.core.data import prepare
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from tests.typed import responses

ID = "identity"


def _u(rng, n, lo, hi):
    return rng.uniform(lo, hi, n)


# name -> (generator(rng, n) -> (columns, response, predictors, categorical), expected)
# expected: (response transform, {predictor: transform}).  The ladder has no cube root, so
# the cube-root law is searched with the bare name "power" added to the default response
# list (it offers the fixed exponents -1/2 and 1/3), as a caller who knows the law would.
def _log_response(rng, n):
    x1, x2 = _u(rng, n, 0, 3), _u(rng, n, 0, 3)
    y = np.exp(1 + 0.8 * x1 + 0.5 * x2 + rng.normal(0, 0.3, n))
    return {"y": y, "x1": x1, "x2": x2}, ["x1", "x2"], []


def _sqrt_response(rng, n):
    x = _u(rng, n, 0, 10)
    y = (2 + 1.5 * x + rng.normal(0, 0.6, n)) ** 2
    return {"y": y, "x": x}, ["x"], []


def _reciprocal_response(rng, n):
    x = _u(rng, n, 0, 10)
    y = 1.0 / (0.2 + 0.1 * x + rng.normal(0, 0.02, n))
    return {"y": y, "x": x}, ["x"], []


def _cube_root_law(rng, n):
    d, h = _u(rng, n, 8, 20), _u(rng, n, 60, 90)
    v = (0.1 + 0.15 * d + 0.015 * h + rng.normal(0, 0.08, n)) ** 3
    return {"v": v, "d": d, "h": h}, ["d", "h"], []


def _power_law(rng, n):
    x = np.exp(_u(rng, n, 0, np.log(200)))
    y = np.exp(0.5 + 1.5 * np.log(x) + rng.normal(0, 0.3, n))
    return {"y": y, "x": x}, ["x"], []


def _log_predictor(rng, n):
    x = np.exp(_u(rng, n, 0, np.log(500)))
    y = 2 + 3 * np.log(x) + rng.normal(0, 1.0, n)
    return {"y": y, "x": x}, ["x"], []


def _sqrt_predictor(rng, n):
    x = _u(rng, n, 0.5, 100)
    y = 1 + 2 * np.sqrt(x) + rng.normal(0, 0.6, n)
    return {"y": y, "x": x}, ["x"], []


def _reciprocal_predictor(rng, n):
    x = _u(rng, n, 0.5, 10)
    y = 1 + 5 / x + rng.normal(0, 0.3, n)
    return {"y": y, "x": x}, ["x"], []


def _quadratic(rng, n):
    x = _u(rng, n, 0.5, 10)
    y = 1 + 0.5 * x**2 + rng.normal(0, 2.0, n)
    return {"y": y, "x": x}, ["x"], []


def _categorical_log(rng, n):
    x = _u(rng, n, 0, 3)
    g = rng.choice(np.array(["a", "b", "c"]), n)
    eff = np.select([g == "b", g == "c"], [0.4, -0.3], 0.0)
    y = np.exp(1 + 0.7 * x + eff + rng.normal(0, 0.3, n))
    return {"y": y, "x": x, "g": g}, ["x", "g"], ["g"]


def _identity3(rng, n):
    x1, x2, x3 = _u(rng, n, 1, 10), _u(rng, n, 1, 10), _u(rng, n, 1, 10)
    y = 1 + x1 + 2 * x2 - x3 + rng.normal(0, 1.5, n)
    return {"y": y, "x1": x1, "x2": x2, "x3": x3}, ["x1", "x2", "x3"], []


def _negative(rng, n):
    x = _u(rng, n, -5, 5)
    y = -5 + 2 * x + rng.normal(0, 1.5, n)
    return {"y": y, "x": x}, ["x"], []


def _heavy_tails(rng, n):
    x = _u(rng, n, 1, 10)
    y = 30 + 2 * x + rng.standard_t(3, n)
    return {"y": y, "x": x}, ["x"], []


def _mixed(rng, n):
    x1 = np.exp(_u(rng, n, 0, np.log(300)))
    x2 = _u(rng, n, 0, 50)
    y = np.exp(1 + 0.7 * np.log(x1) + 0.03 * x2 + rng.normal(0, 0.3, n))
    return {"y": y, "x1": x1, "x2": x2}, ["x1", "x2"], []


PROCESSES = {
    "log response": (_log_response, ("log", {"x1": ID, "x2": ID})),
    "sqrt response": (_sqrt_response, ("sqrt", {"x": ID})),
    "reciprocal response": (_reciprocal_response, ("reciprocal", {"x": ID})),
    "cube-root law": (_cube_root_law, ("power 1/3", {"d": ID, "h": ID})),
    "log-log power law": (_power_law, ("log", {"x": "log"})),
    "log predictor": (_log_predictor, (ID, {"x": "log"})),
    "sqrt predictor": (_sqrt_predictor, (ID, {"x": "sqrt"})),
    "reciprocal predictor": (_reciprocal_predictor, (ID, {"x": "reciprocal"})),
    "quadratic term": (_quadratic, (ID, {"x": "square"})),
    "categorical, log response": (_categorical_log, ("log", {"x": ID, "g": "categorical"})),
    "identity, 3 predictors": (_identity3, (ID, {"x1": ID, "x2": ID, "x3": ID})),
    "negative responses": (_negative, (ID, {"x": ID})),
    "identity, heavy tails": (_heavy_tails, (ID, {"x": ID})),
    "mixed": (_mixed, ("log", {"x1": "log", "x2": ID})),
}
OPTIONS = {
    "cube-root law": {
        "response_transforms": responses(
            ["identity", "log", "sqrt", "reciprocal", "square", "box_cox", "power"]
        )
    }
}
IDENTITY_PROCESSES = ("identity, 3 predictors", "negative responses", "identity, heavy tails")


def _data(name: str, n: int, seed: int):
    gen, _ = PROCESSES[name]
    rng = np.random.default_rng([seed, n, sorted(PROCESSES).index(name)])
    cols, preds, cats = gen(rng, n)
    resp = next(k for k in cols if k not in preds)
    data = {k: (v.tolist() if v.dtype != object else list(v)) for k, v in cols.items()}
    data = {k: [str(x) for x in v] if k in cats else v for k, v in data.items()}
    return prepare({"columns": data}, resp, preds, cats)


def matches(entry: dict, expected) -> bool:
    resp, preds = expected
    spec = entry["specification"]
    rt = spec["response"]["transform"]
    if resp == "power 1/3":
        ok = rt["name"] == "power" and abs(rt["exponent"] - 1 / 3) < 1e-9
    else:
        ok = rt["name"] == resp and not rt.get("shift")
    got = {p["column"]: p["transform"]["name"] for p in spec["predictors"]}
    return ok and got == preds


def _label(entry: dict) -> str:
    spec = entry["specification"]
    return (
        spec["response"]["transform"]["name"]
        + " ~ "
        + ", ".join(p["transform"]["name"] for p in spec["predictors"])
    )


def _why(out: dict, expected) -> str:
    """Where the generating scale stands when it is not first (for the list of misses)."""
    first = out["ranking"][0]["score"]["parts"]
    lowest = out["search"]["band"]["lowest_cv_value"]
    text = (
        f"rank 1 cv/lowest {first['cv_value'] / lowest:.4f}, "
        f"fails {first.get('conditions_failed')}; generating scale "
    )
    for e in out["ranking"]:
        if matches(e, expected):
            p = e["score"]["parts"]
            return text + (
                f"rank {e['rank']}, cv/lowest {p['cv_value'] / lowest:.4f}, "
                f"{'in' if p['within_one_se'] else 'outside'} the band, "
                f"fails {p.get('conditions_failed')}"
            )
    return text + "not listed"


def one_run(task) -> tuple[str, int, int, bool, str, str]:
    name, n, seed = task
    prep = _data(name, n, seed)
    opts = SearchOptions(seed=seed)
    if name in OPTIONS:
        opts = SearchOptions(seed=seed, **OPTIONS[name])
    out = to_jsonable(run_selection(prep, opts, "study"))
    first = out["ranking"][0]
    hit = matches(first, PROCESSES[name][1])
    return name, n, seed, hit, _label(first), "" if hit else _why(out, PROCESSES[name][1])


def study(names, ns, seeds, workers=1, mapper=None, log: str | None = None) -> list:
    """Run every (process, n, seed), seed by seed (a stopped run leaves whole seeds done).

    With ``log`` each result is appended to that JSON-lines file as it arrives, and
    results already in it are not run again (a long study can be resumed).
    """
    tasks = [(name, n, s) for s in range(seeds) for name in names for n in ns]
    done: dict[tuple, tuple] = {}
    if log and Path(log).exists():
        for line in Path(log).read_text().splitlines():
            r = tuple(json.loads(line))
            done[tuple(r[:3])] = r
    todo = [t for t in tasks if t not in done]
    sink = open(log, "a") if log else None  # noqa: SIM115 (closed below)

    def keep(r):
        done[tuple(r[:3])] = r
        if sink:
            sink.write(json.dumps(list(r)) + "\n")
            sink.flush()

    try:
        if mapper is not None:
            for r in mapper(one_run, todo):
                keep(r)
        elif workers > 1:
            for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
                os.environ.setdefault(var, "1")  # one thread per worker on a shared machine
            with get_context("forkserver").Pool(workers) as pool:
                for r in pool.imap(one_run, todo, chunksize=1):
                    keep(r)
        else:
            for t in todo:
                keep(one_run(t))
    finally:
        if sink:
            sink.close()
    return [done[t] for t in tasks if t in done]


def table(results, ns) -> str:
    names = list(dict.fromkeys(r[0] for r in results))
    lines = ["| process | " + " | ".join(f"n = {n}" for n in ns) + " |"]
    lines.append("|---|" + "---|" * len(ns))
    for name in names:
        cells = []
        for n in ns:
            hits = [r[3] for r in results if r[0] == name and r[1] == n]
            cells.append(f"{sum(hits)}/{len(hits)}" if hits else "")
        lines.append(f"| {name} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


def summary(results) -> dict:
    def share(rs):
        return sum(r[3] for r in rs) / len(rs) if rs else float("nan")

    big = [r for r in results if r[1] >= 300]
    per = {}
    for name in dict.fromkeys(r[0] for r in big):
        per[name] = share([r for r in big if r[0] == name])
    ident = [r for r in results if r[0] in IDENTITY_PROCESSES]
    untransformed = [
        r
        for r in ident
        if r[4].split(" ~ ")[0] == ID and set(r[4].split(" ~ ")[1].split(", ")) == {ID}
    ]
    return {
        "overall": share(results),
        "n>=300": share(big),
        "worst process at n>=300": min(per.items(), key=lambda kv: kv[1]) if per else None,
        "identity left untransformed": len(untransformed) / len(ident) if ident else float("nan"),
        "runs": len(results),
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seeds", type=int, default=20)
    ap.add_argument("--n", default="100,300,1000")
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--processes", default="")
    ap.add_argument("--log", default=None, help="JSON-lines file of results (resumable)")
    args = ap.parse_args(argv)
    ns = [int(v) for v in args.n.split(",")]
    names = [p for p in args.processes.split(",") if p] or list(PROCESSES)
    t0 = time.perf_counter()
    results = study(names, ns, args.seeds, args.workers, log=args.log)
    print(table(results, ns))
    print()
    for k, v in summary(results).items():
        print(f"{k}: {v}")
    misses = [r for r in results if not r[3]]
    if misses:
        print("\nmisses (process, n, seed, rank 1):")
        for r in misses:
            print(f"  {r[0]}, n={r[1]}, seed={r[2]}: {r[4]} ({r[5]})")
    print(f"\n{len(results)} selections in {time.perf_counter() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
