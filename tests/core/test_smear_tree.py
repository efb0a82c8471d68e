"""Smeared means of power back-transforms (service/core/_smear_tree.py): the binned series and
the one-block root series within their stated bound of the exact mean written out.

Reference: Duan (1983) "Smearing estimate", JASA 78:605-610: E[y | x0] ~ (1/n) sum_i
g^-1(x0'b + e_i), written out below as a plain numpy double sum (broadcasting) with each
inverse from its definition and the clipping rules the transforms document (a clip counts
as 0, an undefined term is left out of the mean); a 40-digit mpmath sum where the bound is
tight.

Tolerance (fixed in advance): the stated bound BIN_RTOL (1e-12) relative, plus rounding:
16 units of 2^-52 of each term's size times (1 + its condition number |p| (|gamma| +
|delta eta| + |delta e_i|) / base_i), since the reference and the fast path round each base
differently and the power multiplies that rounding by |p|.
"""

from __future__ import annotations

import itertools
import math
import zlib

import mpmath
import numpy as np
import pytest
from service.core import _smear_tree as st
from service.core import retransform
from service.core import transforms as tr

from tests.core.test_predict import column, issue
from tests.core.written_out import inverse_written_out

EPS = np.finfo(float).eps


def _plain_mean(t, eta, e):
    """(mean over the defined terms, allowed error) for every eta: the O(m n) double sum."""
    z = eta[:, None] + e[None, :]
    terms = inverse_written_out(t, z)
    defined = ~np.isnan(terms)
    count = defined.sum(axis=1)
    mean = np.where(defined, terms, 0.0).sum(axis=1) / np.maximum(count, 1)
    mean = np.where(count > 0, mean, np.nan)
    # rounding: each base's relative rounding error times |p|, in each term
    _beta, gamma, delta, p, _zero = st.power_form(t)
    base = gamma + delta * z
    with np.errstate(all="ignore"):
        cond = abs(p) * (abs(gamma) + abs(delta * eta)[:, None] + abs(delta * e)[None, :]) / base
        size = np.where(defined & (base > 0), np.abs(terms) * (1 + cond), 0.0)
    slack = 16 * EPS * size.sum(axis=1) / np.maximum(count, 1)
    return mean, st.BIN_RTOL * np.abs(mean) + slack


def _residuals(kind: str, n: int, rng) -> np.ndarray:
    if kind == "normal":
        e = rng.normal(0, 0.6, n)
    elif kind == "skewed":  # lognormal: a long right tail
        e = rng.lognormal(0.0, 1.0, n) * 0.3
    else:  # heavy tails: Student t with 2 degrees of freedom
        e = rng.standard_t(2, n) * 0.3
    return e - e.mean()


FAMILIES = [
    pytest.param(tr.Transform("square"), 0.6, id="square"),
    pytest.param(tr.Transform("reciprocal"), 1.2, id="reciprocal"),
    pytest.param(tr.Transform("power", exponent=0.5), 0.8, id="power 0.5"),
    pytest.param(tr.Transform("power", exponent=1 / 3), 0.8, id="power 1/3"),
    pytest.param(tr.Transform("power", exponent=-0.5), 1.2, id="power -0.5"),
    pytest.param(tr.Transform("power", exponent=-2.0), 1.2, id="power -2"),
    pytest.param(tr.Transform("power", exponent=3.0), 0.8, id="power 3"),
    pytest.param(tr.Transform("power", exponent=0.999), 0.8, id="power near 1"),
    pytest.param(tr.Transform("box_cox", lam=0.001), 0.5, id="box_cox 0.001"),
    pytest.param(tr.Transform("box_cox", lam=-0.001), 0.5, id="box_cox -0.001"),
    pytest.param(tr.Transform("box_cox", lam=0.05), 0.5, id="box_cox 0.05"),
    pytest.param(tr.Transform("box_cox", lam=0.4), -1.0, id="box_cox 0.4 clip"),
    pytest.param(tr.Transform("box_cox", lam=1.0), -0.5, id="box_cox 1"),
    pytest.param(tr.Transform("box_cox", lam=0.98), -0.5, id="box_cox near 1"),
    pytest.param(tr.Transform("box_cox", lam=2.5), -0.2, id="box_cox 2.5"),
    pytest.param(tr.Transform("box_cox", lam=-0.7), 0.6, id="box_cox -0.7 pole"),
    pytest.param(tr.Transform("box_cox", lam=-2.5), 0.2, id="box_cox -2.5 pole"),
]


@pytest.mark.parametrize("t, centre", FAMILIES)
@pytest.mark.parametrize("kind", ["normal", "skewed", "heavy"])
def test_binned_smearing_within_its_stated_bound(t, centre, kind):
    rng = np.random.default_rng(zlib.crc32(f"{t.label('y')} {kind}".encode()))
    e = _residuals(kind, 900, rng)
    singular = st.power_form(t)
    _beta, gamma, delta, _p, _zero = singular
    sing = -gamma / delta  # the z where the base is 0
    eta = rng.uniform(centre - 1.5, centre + 1.5, 300)
    # and etas that put one term within 1e-9 .. 1e-3 of the singular point, on either side
    near = sing - rng.choice(e, 60) + rng.choice([-1, 1], 60) * 10 ** rng.uniform(-9, -3, 60)
    eta = np.concatenate([eta, near])
    want, allowed = _plain_mean(t, eta, e)
    got = st.smear_power_binned(eta, e, *singular)
    # source: Duan (1983) double sum written out; bound BIN_RTOL plus rounding (module doc)
    assert np.array_equal(np.isnan(got), np.isnan(want))
    assert np.array_equal(np.isinf(got), np.isinf(want))  # a sum past the float range
    ok = np.isfinite(want)
    assert ok.sum() >= 200
    assert np.all(np.abs(got[ok] - want[ok]) <= allowed[ok])
    # the service's entry point (root series where it applies, bins elsewhere) too
    via = retransform.smeared_mean(t, eta, e)
    assert np.array_equal(np.isnan(via), ~ok)
    assert np.all(np.abs(via[ok] - want[ok]) <= allowed[ok])


@pytest.mark.parametrize(
    "t, centre",
    [
        pytest.param(tr.Transform("square"), 0.6, id="square"),
        pytest.param(tr.Transform("box_cox", lam=0.4), -1.0, id="box_cox 0.4 clip"),
        pytest.param(tr.Transform("reciprocal"), 1.2, id="reciprocal"),
    ],
)
def test_nested_levels_within_the_bound_with_and_without_a_clip(t, centre):
    """5,000 residuals: two levels of bins (256 and 32 values), so failed coarse bins are
    tried as finer ones; a clip (terms past it are 0 and all count) and a pole (terms past
    it left out of the count) take different tallies."""
    rng = np.random.default_rng(41)
    e = _residuals("heavy", 5000, rng)
    assert st.bin_sizes(e.size) == [256, 32]
    singular = st.power_form(t)
    _beta, gamma, delta, _p, _zero = singular
    near = -gamma / delta - rng.choice(e, 40) + rng.choice([-1, 1], 40) * 10.0**-6
    eta = np.concatenate([rng.uniform(centre - 1.5, centre + 1.5, 160), near])
    want, allowed = _plain_mean(t, eta, e)
    got = st.smear_power_binned(eta, e, *singular)
    # source: Duan (1983) double sum written out; bound BIN_RTOL plus rounding (module doc)
    assert np.array_equal(np.isnan(got), np.isnan(want))
    ok = np.isfinite(want)
    assert ok.sum() >= 150
    assert np.all(np.abs(got[ok] - want[ok]) <= allowed[ok])


def _mp_smear(eta, e, beta, gamma, delta, p, zero):
    mpmath.mp.dps = 40
    out = []
    for h in eta:
        tot, cnt = mpmath.mpf(0), 0
        for v in e:
            base = mpmath.mpf(gamma) + mpmath.mpf(delta) * mpmath.mpf(h) + mpmath.mpf(delta * v)
            if base > 0:
                tot += mpmath.mpf(beta) * base ** mpmath.mpf(p)
                cnt += 1
            elif zero:
                cnt += 1
        out.append(float(tot / cnt) if cnt else math.nan)
    return np.array(out)


@pytest.mark.parametrize(
    "t, centre",
    [
        pytest.param(tr.Transform("reciprocal"), 2.5, id="reciprocal"),
        pytest.param(tr.Transform("box_cox", lam=-0.7), 0.6, id="box_cox-pole"),
        pytest.param(tr.Transform("box_cox", lam=0.3), 3.0, id="box_cox-far"),
    ],
)
def test_series_against_a_40_digit_sum(t, centre):
    rng = np.random.default_rng(17)
    e = rng.normal(0, 0.8, 400)
    e -= e.mean()
    eta = rng.uniform(centre - 1.5, centre + 1.5, 60)
    form = st.power_form(t)
    beta, gamma, delta, p, _zero = form
    # every defined base above 1e-2: the rounding of a base is not the series' error
    keep = [np.all((b := gamma + delta * (h + e))[b > 0] > 1e-2) for h in eta]
    eta = eta[np.array(keep)]
    assert eta.size >= 10
    ref = _mp_smear(eta, e, *form)
    ok = np.isfinite(ref)
    binned = st.smear_power_binned(eta, e, *form)
    root, done = st.smear_power_root(eta, e, beta, gamma, delta, p)
    # source: 40-digit mpmath sum of the smearing terms; the stated bound plus 1e-13 rounding
    assert np.all(np.abs(binned[ok] - ref[ok]) <= (st.BIN_RTOL + 1e-13) * np.abs(ref[ok]))
    good = ok & done
    assert np.all(np.abs(root[good] - ref[good]) <= (st.TREE_RTOL + 1e-13) * np.abs(ref[good]))


@pytest.mark.parametrize("J, rtol", [(st.J, st.TREE_RTOL), (st.BIN_J, st.BIN_RTOL)])
def test_rho_limit_meets_the_bound(J, rtol):
    # source: direct summation of the binomial series tail sum_{t>=J} |C(p,t)| rho^t to
    # t = J + 3000 (rho < 1, terms decay geometrically), divided by min (1 +- rho)^p
    for p in (0.5, -1.0, -2.0, 2.5, 1 / 0.3, -1 / 0.7, 12.0, 45.5):
        rho = st._rho_ok(p, J, rtol)
        assert 0.0 < rho < 1.0
        c = 1.0
        tail = 0.0
        for t in range(J + 3000):
            if t >= J:
                tail += abs(c) * rho**t
            c = c * (p - t) / (t + 1)
        m = (1 - rho) ** p if p > 0 else (1 + rho) ** p
        assert tail / m <= rtol * (1 + 1e-9)


def test_kept_rho_limits_are_the_closed_form_of_each_exponent(monkeypatch):
    """The limits kept per exponent are the closed form's, whether found now, kept from an
    earlier call (in any order and shape, repeated exponents) or found again after the kept
    values were dropped at the size limit."""
    monkeypatch.setattr(st, "_KEPT", {})
    monkeypatch.setattr(st, "_KEPT_MAX", 40)
    rng = np.random.default_rng(21)
    for J, rtol in ((st.J, st.TREE_RTOL), (st.BIN_J, st.BIN_RTOL)):
        for _ in range(6):
            p = np.concatenate([rng.choice([0.5, -1.0, 2.0, 3.0], 5), 1 / rng.uniform(-3, 3, 9)])
            p = rng.permutation(np.concatenate([p, p[:4]]))
            # source: the closed form of the bound (checked by direct summation above)
            want = st.rho_ok_closed_form(p, J, rtol)
            np.testing.assert_array_equal(st.rho_ok_many(p, J, rtol), want)
            np.testing.assert_array_equal(st.rho_ok_many(p[::-1], J, rtol), want[::-1])
            assert st._rho_ok(float(p[0]), J, rtol) == want[0]
            assert len(st._KEPT) <= 40


def test_root_moments_are_the_power_sums_written_out():
    rng = np.random.default_rng(22)
    u = rng.uniform(-1, 1, (5, 301))
    got = st._moment_sums(u, st.J)
    # source: sum_i u_i^t written out with numpy's power, t < J (|u| <= 1: sums of size <= n)
    want = np.stack([np.sum(u**t, axis=1) for t in range(st.J)], axis=1)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12 * u.shape[1])
    assert np.array_equal(got[:, 0], np.full(5, 301.0))


def test_bins_cover_every_residual_once_and_levels_nest():
    for n in (1, 7, 32, 33, 1600, 2049, 70_000):
        sizes = st.bin_sizes(n)
        assert sizes[-1] == st.BIN_LEAF
        assert all(a == b * st.BIN_SPLIT for a, b in itertools.pairwise(sizes))
        assert -(-n // sizes[0]) <= st.BIN_TOP
    rng = np.random.default_rng(3)
    s = np.sort(rng.normal(size=1000))
    bins = st._Bins(s, 0.5, st.bin_sizes(1000))
    for lev in range(len(bins.sizes)):
        # source: counting; the zeroth moment of each bin is its number of residuals
        assert bins.cnt[lev].sum() == 1000
        np.testing.assert_array_equal(bins.coef[lev][0], bins.cnt[lev])


def test_a_few_etas_use_the_exact_sum_and_all_undefined_is_nan():
    e = np.array([-1.0, 0.5, 1.0])
    got = st.smear_power_binned(
        np.array([0.2, -5.0]), e, *st.power_form(tr.Transform("reciprocal"))
    )
    # source: the definition written out: 1/(0.2 + 0.5) and 1/(0.2 + 1.0) averaged; the first
    # term (z = -0.8, unbounded y) is left out; at eta = -5 no term is defined
    assert got[0] == pytest.approx((1 / 0.7 + 1 / 1.2) / 2, rel=1e-14)
    assert np.isnan(got[1])


@pytest.mark.parametrize(
    "rt",
    [
        pytest.param({"name": "reciprocal"}, id="reciprocal"),
        pytest.param({"name": "power", "exponent": -0.5}, id="power -0.5"),
        pytest.param({"name": "box_cox"}, id="box_cox"),
    ],
)
def test_predictions_use_the_same_bounded_smearing(rt):
    rng = np.random.default_rng(11)
    n = 300
    x = rng.uniform(1, 6, n)
    y = np.exp(0.5 + 0.3 * x + rng.standard_t(3, n) * 0.15)
    art, spec, fit, _ = issue({"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "log"})], rt)
    from service.api.artifact import load_model
    from service.api.render import contract
    from service.core.predict import predict

    x0 = np.linspace(1, 6, 200)
    out = contract(predict(load_model(art), {"columns": {"x": x0.tolist()}}))
    t = spec.response_transform
    eta = fit.coef[0] + fit.coef[1] * np.log(x0)
    want, allowed = _plain_mean(t, eta, fit.resid)
    # source: Duan (1983) double sum over the stored residuals, written out
    assert np.all(np.abs(column(out, "mean") - want) <= allowed)


def _plain_yeo_johnson(lam, eta, e):
    """(mean over the defined terms, allowed error) of the Yeo & Johnson (2000) inverse written
    out: z >= 0: (1 + lam z)^(1/lam) - 1 (exp(z) - 1 at lam 0), z < 0:
    1 - (1 - (2 - lam) z)^(1/(2 - lam)) (1 - exp(-z) at lam 2); nan past a pole."""
    z = eta[:, None] + e[None, :]
    with np.errstate(all="ignore"):
        if lam == 0:
            up, pos_part, cond_up = np.exp(z) - 1, np.exp(z), 1 + np.abs(z)
        else:
            b = 1 + lam * z
            pos_part = np.where(b > 0, np.where(b > 0, b, 1.0) ** (1 / lam), np.nan)
            up = pos_part - 1
            cond_up = abs(1 / lam) * (1 + np.abs(lam * eta)[:, None] + np.abs(lam * e)) / b
        if lam == 2:
            down, neg_part, cond_down = 1 - np.exp(-z), np.exp(-z), 1 + np.abs(z)
        else:
            b = 1 - (2 - lam) * z
            neg_part = np.where(b > 0, np.where(b > 0, b, 1.0) ** (1 / (2 - lam)), np.nan)
            down = 1 - neg_part
            d = abs(2 - lam)
            cond_down = abs(1 / (2 - lam)) * (1 + d * np.abs(eta)[:, None] + d * np.abs(e)) / b
        pos = z >= 0
        terms = np.where(pos, up, down)
        power = np.where(pos, pos_part, neg_part)  # 1 + |y| on either branch
        cond = np.where(pos, cond_up, cond_down)
    defined = ~np.isnan(terms)
    count = np.maximum(defined.sum(axis=1), 1)
    with np.errstate(all="ignore"):
        mean = np.where(defined, terms, 0.0).sum(axis=1) / count
        scale = np.where(defined, power, 0.0).sum(axis=1) / count
        slack = 16 * EPS * np.where(defined, power * (1 + np.abs(cond)), 0.0).sum(axis=1) / count
    mean = np.where(defined.any(axis=1), mean, np.nan)
    return mean, st.BIN_RTOL * scale + slack


@pytest.mark.parametrize(
    "lam", [0.0, 0.001, -0.001, 0.5, 0.999, 1.0, 1.5, 1.999, 2.0, 2.5, -0.8, -2.0, 3.5]
)
@pytest.mark.parametrize("kind", ["normal", "skewed", "heavy"])
def test_yeo_johnson_smearing_within_its_stated_bound(lam, kind):
    t = tr.Transform("yeo_johnson", lam=lam)  # 0.999 and 1.999 stay (only |lam - 2| < 1e-3 snaps)
    rng = np.random.default_rng(zlib.crc32(f"yj {lam} {kind}".encode()))
    e = _residuals(kind, 800, rng)
    eta = rng.uniform(-1.5, 1.5, 300)
    # etas that put a term 1e-9 .. 1e-3 from the branch point z = 0 and from a pole
    sings = [0.0, *t.inverse_singularities()]
    near = [
        s - rng.choice(e, 30) + rng.choice([-1, 1], 30) * 10 ** rng.uniform(-9, -3, 30)
        for s in sings
    ]
    eta = np.concatenate([eta, *near])
    want, allowed = _plain_yeo_johnson(t.lam, eta, e)
    got = st.smear_yeo_johnson(eta, e, t.lam)
    # source: Yeo & Johnson (2000) inverse and Duan (1983) double sum written out; the stated
    # bound 1e-12 mean(1 + |y_i|) plus rounding (module doc)
    ok = np.isfinite(want)
    assert np.array_equal(np.isfinite(got), ok)
    assert ok.sum() >= 250
    assert np.all(np.abs(got[ok] - want[ok]) <= allowed[ok])
    via = retransform.smeared_mean(t, eta, e)
    assert np.all(np.abs(via[ok] - want[ok]) <= allowed[ok])


@pytest.mark.parametrize("exact_cells", [st.GROUP_EXACT_CELLS, 0])
def test_many_groups_at_once_within_the_bound_and_equal_to_one_group_at_a_time(
    exact_cells, monkeypatch
):
    """Groups of every power form side by side (as the scorer smears all folds of all
    candidates at once), some next to a pole or a clip: each row within the bound of the
    mean written out, and equal to the one-group call; ``exact_cells`` 0 sends every group's
    etas left by the root series to the binned series instead of the double sum."""
    monkeypatch.setattr(st, "GROUP_EXACT_CELLS", exact_cells)
    rng = np.random.default_rng(11)
    forms = [t for t, _c in (p.values for p in FAMILIES)]
    centres = [c for _t, c in (p.values for p in FAMILIES)]
    m, n = 40, 97
    ts, etas, es = [], [], []
    for t, centre in zip(forms * 2, centres * 2, strict=True):
        ts.append(t)
        etas.append(centre + rng.normal(0, 0.5, m))
        es.append(_residuals(["normal", "skewed", "heavy"][len(ts) % 3], n, rng))
    eta, e = np.stack(etas), np.stack(es)
    f = np.array([st.power_form(t) for t in ts], dtype=float)
    got = st.smear_power_many(eta, e, f[:, 0], f[:, 1], f[:, 2], f[:, 3], f[:, 4] > 0)
    for g, t in enumerate(ts):
        want, tol = _plain_mean(t, eta[g], e[g])
        # source: Duan (1983) smearing written out (the double sum), within BIN_RTOL + rounding
        assert np.array_equal(np.isnan(got[g]), np.isnan(want)), t
        ok = ~np.isnan(want)
        assert np.all(np.abs(got[g][ok] - want[ok]) <= tol[ok]), t
        one = retransform.smeared_mean(t, eta[g], e[g])
        np.testing.assert_allclose(got[g][ok], one[ok], rtol=1e-13)


def test_smeared_means_of_mixed_scales_equal_one_call_each():
    rng = np.random.default_rng(12)
    ts = [
        tr.Transform("identity"),
        tr.Transform("log", shift=2.0),
        tr.Transform("sqrt"),
        tr.Transform("square"),
        tr.Transform("box_cox", lam=0.3),
        tr.Transform("box_cox", lam=0.0),
        tr.Transform("yeo_johnson", lam=0.4),
        tr.Transform("reciprocal"),
    ]
    eta = np.stack([rng.normal(2.0, 0.5, 30) for _ in ts])
    e = np.stack([_residuals("skewed", 80, rng) for _ in ts])
    got = retransform.smeared_means(ts, eta, e)
    for g, t in enumerate(ts):
        # source: retransform.smeared_mean one group at a time (checked against the
        # double sum written out above and in test_retransform)
        np.testing.assert_allclose(got[g], retransform.smeared_mean(t, eta[g], e[g]), rtol=1e-13)


@pytest.mark.parametrize(
    "t, centre",
    [
        pytest.param(tr.Transform("square"), 0.6, id="square (one exponent, clip)"),
        pytest.param(tr.Transform("reciprocal"), 1.2, id="reciprocal (one exponent, pole)"),
        pytest.param(None, None, id="mixed Box-Cox lambdas"),
    ],
)
def test_many_groups_binned_pairs_within_the_bound_of_the_double_sum(t, centre):
    """The etas the root series leaves, of many groups at once, by one level of bins
    (``_binned_pairs``): each within the stated bound of the mean written out, with etas
    right at and across the clip or pole, n not a multiple of the bin size."""
    rng = np.random.default_rng(zlib.crc32(f"pairs/{t}".encode()))
    n, m = 203, 25
    if t is None:  # lambdas as estimated per fold: near 0 (huge |p|), moderate, negative
        ts = [
            tr.Transform("box_cox", lam=v)
            for v in (0.0014, -0.0023, 0.3, -0.3, 0.41, -0.7, 1.5, 0.02)
        ]
        centres = [0.5, 0.5, -1.0, 0.6, -1.0, 0.6, -0.5, 0.5]
    else:
        ts, centres = [t] * 6, [centre] * 6
    etas, es = [], []
    for g, (tg, c) in enumerate(zip(ts, centres, strict=True)):
        e = _residuals(["normal", "skewed", "heavy"][g % 3], n, rng)
        sing = tg.inverse_singularities()
        eta = c + rng.normal(0, 1.0, m)
        if sing:  # a few etas that put the singular point among the residuals, just off a term
            eta[:5] = (
                sing[0] - rng.choice(e, 5) + rng.choice([-1, 1], 5) * 10 ** rng.uniform(-9, -3, 5)
            )
        etas.append(eta)
        es.append(e)
    eta, e = np.stack(etas), np.stack(es)
    f = np.array([st.power_form(tg) for tg in ts], dtype=float)
    gi, ji = np.nonzero(np.ones_like(eta, dtype=bool))
    got = st._binned_pairs(gi, eta[gi, ji], e, f[:, 0], f[:, 1], f[:, 2], f[:, 3], f[:, 4] > 0)
    got = got.reshape(eta.shape)
    for g, tg in enumerate(ts):
        want, tol = _plain_mean(tg, eta[g], e[g])
        # source: Duan (1983) smearing written out (the double sum), within BIN_RTOL + rounding
        assert np.array_equal(np.isnan(got[g]), np.isnan(want)), tg
        assert np.array_equal(np.isinf(got[g]), np.isinf(want)), tg  # overflow in both
        ok = np.isfinite(want)
        assert ok.sum() >= m - 5, tg
        assert np.all(np.abs(got[g][ok] - want[ok]) <= tol[ok]), tg
        ex = st.exact_power(eta[g], e[g], *st.power_form(tg))
        # source: the exact O(m n) sum of the module (same clip and count rules)
        np.testing.assert_allclose(got[g][ok], ex[ok], rtol=1e-11)


@pytest.mark.parametrize("threshold", [0, 1 << 60], ids=["binned", "summed"])
def test_many_groups_take_the_binned_or_summed_path_by_size_with_the_same_means(
    monkeypatch, threshold
):
    """Whichever path ``smear_power_many`` takes for the etas the root series leaves (the
    binned series past BINNED_PAIRS_MIN_CELLS terms, the double sum below), each mean is
    within the stated bound of the mean written out."""
    monkeypatch.setattr(st, "BINNED_PAIRS_MIN_CELLS", threshold)
    rng = np.random.default_rng(zlib.crc32(b"pairs-by-size"))
    ts = [tr.Transform("reciprocal"), tr.Transform("box_cox", lam=-0.3), tr.Transform("square")]
    n, m = 118, 4
    e = np.stack([_residuals(k, n, rng) for k in ("normal", "skewed", "heavy")])
    eta = np.stack([c + rng.normal(0, 0.3, m) for c in (1.2, 0.6, 0.6)])
    f = np.array([st.power_form(t) for t in ts], dtype=float)
    got = st.smear_power_many(eta, e, f[:, 0], f[:, 1], f[:, 2], f[:, 3], f[:, 4] > 0)
    for g, t in enumerate(ts):
        want, tol = _plain_mean(t, eta[g], e[g])
        ok = np.isfinite(want)
        # source: Duan (1983) smearing written out (the double sum), within BIN_RTOL + rounding
        assert np.array_equal(np.isnan(got[g]), np.isnan(want)), t
        assert np.all(np.abs(got[g][ok] - want[ok]) <= tol[ok]), t
