"""Benchmark (run by hand): scoring of estimated lambda / power candidates and smearing, the
batched paths against the ones they replaced, "before" and "after" alternating in the same run.

"before" puts back, by patching, what the engine did before:

- the held-out side of every candidate with per-fold lambdas or powers formed one candidate
  and one fold at a time (``Scorer._estimated_many`` takes none, so ``Scorer.score_many``
  runs each one's ``_held_out`` and ``_errors`` as it did);
- every all-rows lambda through ``likelihood.estimate_lambda`` (a grid and scipy's bounded
  Brent per design: ``likelihood.many_lambdas`` takes none);
- the etas the root smearing series leaves summed by the exact double sum
  (``_smear_tree._exact_pairs`` in blocks, in place of ``_binned_pairs``);
- the series' remainder limit summed term by term on the grid per exponent and cached by
  value (the earlier ``_rho_ok``, copied below); the demo repeats the same data, so its
  cache is warm after the first run, which favours "before" (a request with new data
  pays about 0.3 ms per new exponent, ~250 per demo-sized request).

In both columns (not patched back): the stacked lambda profiles' fewer passes and X'z on
slices.  Parts timed: the demo's default selection in process (``service/demo``), and the
2,000-row x 1-predictor default selection (``tests/benchmarks/smearing.request``).  Prints
best-of-``--runs`` CPU seconds (``time.process_time``) beside wall seconds (the machine is
shared), the ratio, and the largest relative change of any number in the selection bodies.

    python tests/benchmarks/estimated.py [--runs 3]
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from contextlib import contextmanager
from functools import lru_cache

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import machine, pin_blas

pin_blas(1)

import numpy as np
from service.api.encode import to_jsonable
from service.api.options import selection_job, service
from service.api.schemas import SelectionRequest
from service.core import _smear_tree as st
from service.core import fastcv
from service.demo import demo_request
from service.selection.request import run_selection
from tests.benchmarks.engine import compare as engine_compare
from tests.benchmarks.smearing import request


@lru_cache(maxsize=4096)
def _rho_ok_summed(p: float, J: int, rtol: float) -> float:
    """The remainder limit as it was found before: the tail summed to max(J, |p| + 1)
    terms on the grid, a geometric bound after that."""
    poly = p >= 0 and abs(p - round(p)) < 1e-12
    if poly and round(p) < J:
        return 0.9
    t0 = round(p) if poly else max(J, math.ceil(abs(p)) + 1)
    j = np.arange(t0)
    acc = np.concatenate([[0.0], np.cumsum(np.log(np.maximum(np.abs(p - j), 1e-300) / (j + 1)))])
    logs = acc[J : t0 + 1]
    q = max(1.0, (t0 - p) / (t0 + 1))
    rho = st._RHO_GRID
    expo = logs[None, :] + (J + np.arange(len(logs)))[None, :] * np.log(rho)[:, None]
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        terms = np.exp(np.minimum(expo, 700.0))
        tail = terms[:, :-1].sum(axis=1)
        last = terms[:, -1]
        tail = tail + (last if poly else np.where(rho * q < 1, last / (1.0 - rho * q), np.inf))
        tail = np.where(np.max(expo, axis=1) > 700, np.inf, tail)
        m = (1.0 - rho) ** p if p > 0 else (1.0 + rho) ** p
        ok = tail / m <= rtol
    if not ok[0]:
        return 0.0
    bad = np.flatnonzero(~ok)
    return float(rho[bad[0] - 1] if bad.size else rho[-1])


def _rho_ok_many_summed(p, terms=st.J, rtol=st.TREE_RTOL):
    return np.array([_rho_ok_summed(round(float(v), 12), terms, rtol) for v in np.asarray(p)])


def _exact_pairs_blocked(gi, eta, e, beta, gamma, delta, p, zero):
    out = np.empty(eta.size)
    step = max(1, (1 << 20) // e.shape[1])
    for a in range(0, eta.size, step):
        g = gi[a : a + step]
        out[a : a + step] = st._exact_pairs(
            gamma[g] + delta[g] * eta[a : a + step], delta[g, None] * e[g], beta[g], p[g], zero[g]
        )
    return out


@contextmanager
def before():
    saved = (
        fastcv.Scorer._estimated_many,
        fastcv.many_lambdas,
        st._binned_pairs,
        st.rho_ok_many,
    )
    fastcv.Scorer._estimated_many = lambda self, items: {}
    fastcv.many_lambdas = lambda family, y, designs: [None] * len(designs)
    st._binned_pairs = _exact_pairs_blocked
    st.rho_ok_many = _rho_ok_many_summed
    try:
        yield
    finally:
        (
            fastcv.Scorer._estimated_many,
            fastcv.many_lambdas,
            st._binned_pairs,
            st.rho_ok_many,
        ) = saved


def compare(label, fn, runs):
    engine_compare(label, fn, runs, before)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args()
    print(machine())
    demo = SelectionRequest.model_validate(demo_request())
    small = request(2000)
    compare(
        "demo default selection, in process",
        lambda: to_jsonable(run_selection(selection_job(demo), service())),
        args.runs,
    )
    compare(
        "2,000 x 1 default selection, in process",
        lambda: to_jsonable(run_selection(selection_job(small), service())),
        args.runs,
    )


if __name__ == "__main__":
    main()
