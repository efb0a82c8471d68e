"""Benchmark (run by hand): the 2,000-row x 1-predictor default selection as the route answers
it in process (typed options, ``run_selection``, ``to_jsonable``, orjson), with the model
artifacts unsigned and signed, "before" and "after" alternating in the same run.

"before" puts back, by patching, what the request did before the small-request work:

- every listed model dumped to canonical JSON three times when signed, twice unsigned
  (checksum in ``build_model``, again after the CV+ block, again for the signature);
- ``to_jsonable`` walking every number of the body one call at a time, asking the
  renderers' dispatcher about every item (no answer kept per type);
- power-form smearing with a clip tallying term counts and masking term by term in the
  finest failed bins (``_binned_block`` with ``clip=False``, the computation it did before),
  and the series' remainder limit found again for every group (``rho_ok_many`` as its
  closed form, nothing kept per exponent);
- every all-rows predictor power estimated again where the screening step had estimated
  the same inputs (``PowerFits.get`` finding nothing), and every all-rows lambda with its
  interval estimated each time it is asked for (``KeptLambdas``);
- the conditions' F, chi-squared and t tail probabilities through ``scipy.stats``'
  distribution objects, and Jarque-Bera's skewness and kurtosis through ``scipy.stats``
  (statsmodels' route).

Two smaller changes are in both columns (not patched back): the root series forms its
moments only when an eta takes it, and stored residuals leave numpy through ``tolist``.

Prints best-of-``--runs`` CPU seconds (``time.process_time``) beside wall seconds (the machine
is shared), the ratio, the canonical dumps per request, and the largest relative change of
any number in the body (signatures and checksums aside, which must be equal too: the bodies
are compared as JSON).  ``--profile`` adds the after path's cProfile (tottime, top 25).

    python tests/benchmarks/small_request.py [--runs 5] [--rows 2000] [--profile]
"""

from __future__ import annotations

import argparse
import cProfile
import math
import os
import pstats
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas

pin_blas(1)

import numpy as np
import orjson
from scipy import stats
from service.api import encode, render
from service.api.options import selection_job
from service.api.render import model as rm
from service.api.schemas import SelectionRequest
from service.core import _condition_tests as ct
from service.core import _smear_tree as st
from service.core.likelihood import estimate_lambda
from service.selection import candidates as cand
from service.selection import search
from service.selection.request import Service, run_selection
from service.version import __version__
from tests.benchmarks.smearing import largest_change, request

KEYS = ("bench", {"bench": b"a key of this benchmark, 32+ characters long"})


def item_walk(obj):
    """``to_jsonable`` as it was: one call per item of every list."""
    if isinstance(obj, dict):
        return {str(k): item_walk(v) for k, v in obj.items() if not str(k).startswith("_")}
    if isinstance(obj, (list, tuple)):
        return [item_walk(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [item_walk(v) for v in obj.tolist()]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        if not math.isfinite(f):
            raise ValueError("non-finite number in a response body")
        return f
    if render.renders(obj):  # typed results: their contract form, walked the same way
        return item_walk(render.contract(obj))
    return encode.to_jsonable(obj)


def dispatch_renders(result) -> bool:
    """``render.renders`` as it was: the dispatcher asked for every item."""
    return render.contract.dispatch(type(result)) is not render.contract.dispatch(object)


class Before:
    """Patches that restore the earlier paths while the block runs."""

    def __enter__(self):
        self.saved = (rm.sealed, rm.sign, st._binned_block)
        sealed, sign, block = self.saved
        self.saved_more = (
            cand.PowerFits.get,
            search.KeptLambdas.estimate,
            ct.f_sf,
            ct.chi2_sf,
            ct.t_sf,
            ct.skew_kurtosis,
            render.renders,
            encode.renders,
            st.rho_ok_many,
        )
        st.rho_ok_many = st.rho_ok_closed_form
        cand.PowerFits.get = lambda self, *a: None
        render.renders = encode.renders = dispatch_renders
        search.KeptLambdas.estimate = lambda self, f, y, X: estimate_lambda(f, y, X)
        ct.f_sf = lambda x, a, b: float(stats.f.sf(x, a, b))
        ct.chi2_sf = lambda x, a: float(stats.chi2.sf(x, a))
        ct.t_sf = lambda x, a: float(stats.t.sf(x, a))
        ct.skew_kurtosis = lambda e: (stats.skew(e), 3 + stats.kurtosis(e))

        def sealed_twice(m):  # the checksum of the model as built, again after its CV+ block
            rm.canonical_bytes(rm.artifact(m))
            return sealed(m)

        def sign_dumping(body, keys, raw=None):  # the signature over a fresh dump
            return sign(body, keys)

        def block_counting(*a, **k):
            return block(*a, **{**k, "clip": False})

        rm.sealed, rm.sign = sealed_twice, sign_dumping
        st._binned_block = block_counting
        return self

    def __exit__(self, *exc):
        rm.sealed, rm.sign, st._binned_block = self.saved
        (
            cand.PowerFits.get,
            search.KeptLambdas.estimate,
            ct.f_sf,
            ct.chi2_sf,
            ct.t_sf,
            ct.skew_kurtosis,
            render.renders,
            encode.renders,
            st.rho_ok_many,
        ) = self.saved_more


def answer(req: SelectionRequest, keys, walk) -> bytes:
    """What the route writes: the selection body, rendered and encoded."""
    body = run_selection(selection_job(req), Service(__version__, keys))
    return orjson.dumps(walk(body))


def count_dumps(fn) -> int:
    calls = [0]
    real = rm.canonical_bytes

    def counted(body):
        calls[0] += 1
        return real(body)

    rm.canonical_bytes = counted
    try:
        fn()
    finally:
        rm.canonical_bytes = real
    return calls[0]


def compare(req: SelectionRequest, runs: int) -> None:
    for label, keys in (("unsigned", None), ("signed", KEYS)):
        best = {"before": [math.inf, math.inf], "after": [math.inf, math.inf]}
        out = {}
        dumps = {}
        for _ in range(runs):
            for mode in ("before", "after"):
                if mode == "before":
                    with Before(), Timer() as t:
                        out[mode] = answer(req, keys, item_walk)
                else:
                    with Timer() as t:
                        out[mode] = answer(req, keys, encode.to_jsonable)
                best[mode][0] = min(best[mode][0], t.cpu)
                best[mode][1] = min(best[mode][1], t.wall)
        with Before():
            dumps["before"] = count_dumps(lambda k=keys: answer(req, k, item_walk))
        dumps["after"] = count_dumps(lambda k=keys: answer(req, k, encode.to_jsonable))
        print(f"- {label} artifacts")
        for mode, (cpu, wall) in best.items():
            print(
                f"  {mode:6s} {cpu:6.3f} s CPU {wall:6.3f} s wall (best of {runs}); "
                f"{dumps[mode]} canonical dumps"
            )
        a, b = orjson.loads(out["before"]), orjson.loads(out["after"])
        sigs = [(e["model"]["checksum"], e["model"]["signature"]) for e in a["ranking"]] == [
            (e["model"]["checksum"], e["model"]["signature"]) for e in b["ranking"]
        ]
        print(
            f"  ratio (CPU) {best['before'][0] / best['after'][0]:.2f}x; same checksums and "
            f"signatures: {sigs}; largest relative change of any number "
            f"{largest_change(a, b):.1e}"
        )


def profile(req: SelectionRequest) -> None:
    prof = cProfile.Profile()
    prof.enable()
    answer(req, KEYS, encode.to_jsonable)
    prof.disable()
    pstats.Stats(prof).sort_stats("tottime").print_stats(25)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--rows", type=int, default=2000)
    ap.add_argument("--profile", action="store_true")
    args = ap.parse_args()
    print(machine())
    req = request(args.rows)
    answer(req, None, encode.to_jsonable)  # imports and caches
    print(f"the {args.rows} x 1 default request, answered in process")
    compare(req, args.runs)
    if args.profile:
        profile(req)


if __name__ == "__main__":
    main()
