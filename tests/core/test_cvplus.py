"""CV+ prediction intervals: the construction, the stored fits, the default and coverage."""

from __future__ import annotations

import copy
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.api.render.model import checksum
from service.app import app
from service.core import cvplus
from service.core import transforms as tr
from service.core.cvresult import OutOfFold
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import KFold

from tests.typed import tf

client = TestClient(app, raise_server_exceptions=False)


def _data(seed: int, n: int, errors: str = "t3") -> dict[str, list[float]]:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 10.0, n)
    if errors == "t3":
        y = 10.0 + 2.0 * x + 3.0 * rng.standard_t(3, n)
    else:  # log-normal: positive, for scales that need it
        y = np.exp(1.0 + 0.15 * x + 0.4 * rng.normal(0.0, 1.0, n))
    return {"x": x.tolist(), "y": y.tolist()}


def _diagnose(cols, response, folds=5, seed=0, scheme="random"):
    r = client.post(
        "/v1/diagnostics",
        json={
            "data": {"columns": cols},
            "specification": {
                "response": {"column": "y", "transform": response},
                "predictors": [{"column": "x", "transform": {"name": "identity"}}],
            },
            "validation": {"folds": folds, "seed": seed, "scheme": scheme},
        },
    )
    assert r.status_code == 200, r.text
    return r.json()


def _predict(model, x0, level=0.9, method=None):
    body = {"model": model, "data": {"columns": {"x": list(x0)}}, "interval": level}
    if method is not None:
        body["interval_method"] = method
    return client.post("/v1/predictions", json=body)


def _reference(x, z, x0, folds, seed, level):
    """CV+ as Barber, Candes, Ramdas & Tibshirani (2021) define it, written out directly."""
    # source: Barber et al. 2021, Ann. Statist. 49(1), section 4 (CV+): fits mu_{-S_k} on
    # all folds but k, R_i = |Y_i - mu_{-S_k(i)}(X_i)|, lower = floor(alpha (n+1))-th
    # smallest of mu_{-S_k(i)}(x) - R_i, upper = ceil((1 - alpha)(n+1))-th smallest of
    # mu_{-S_k(i)}(x) + R_i.  Folds: scikit-learn KFold(shuffle=True), which the service's
    # first repeat equals (DEVELOPERS.md, Folds).
    n = z.size
    alpha = 1.0 - level
    X, X0 = x.reshape(-1, 1), np.asarray(x0).reshape(-1, 1)
    lows, highs = [], []
    for train, test in KFold(folds, shuffle=True, random_state=seed).split(X):
        m = LinearRegression().fit(X[train], z[train])
        r = np.abs(z[test] - m.predict(X[test]))
        mu = m.predict(X0)
        lows.append(mu[:, None] - r[None, :])
        highs.append(mu[:, None] + r[None, :])
    lo, hi = np.sort(np.hstack(lows), axis=1), np.sort(np.hstack(highs), axis=1)
    k_lo, k_hi = math.floor(alpha * (n + 1)), math.ceil((1 - alpha) * (n + 1))
    return lo[:, k_lo - 1], hi[:, k_hi - 1]


@pytest.mark.parametrize(
    ("response", "forward", "inverse"),
    [({"name": "identity"}, lambda y: y, lambda z: z), ({"name": "log"}, np.log, np.exp)],
)
def test_cv_plus_equals_the_published_construction(response, forward, inverse):
    cols = _data(1, 83, "t3" if response["name"] == "identity" else "lognormal")
    body = _diagnose(cols, response, folds=7, seed=4)
    x0 = [1.5, 4.0, 9.5]
    r = _predict(body["model"], x0, 0.9, "cv_plus")
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["interval_method"] == "cv_plus"
    assert out["interval_method_reason"] == "asked for in the request"
    lo, hi = _reference(np.array(cols["x"]), forward(np.array(cols["y"])), x0, 7, 4, 0.9)
    got = out["predictions"]
    np.testing.assert_allclose([p["model_scale"]["interval_low"] for p in got], lo, rtol=1e-9)
    np.testing.assert_allclose([p["model_scale"]["interval_high"] for p in got], hi, rtol=1e-9)
    # the original-scale ends are the model-scale ends back-transformed
    np.testing.assert_allclose([p["lower"] for p in got], inverse(lo), rtol=1e-9)
    np.testing.assert_allclose([p["upper"] for p in got], inverse(hi), rtol=1e-9)


def test_per_fold_box_cox_scales_are_stored_and_each_fold_back_transforms_its_own():
    cols = _data(2, 120, "lognormal")
    body = _diagnose(cols, {"name": "box_cox"})
    block = body["model"]["cv_plus"]
    lams = [f["response_transform"]["lambda"] for f in block["fold_fits"]]
    assert len(set(lams)) == 5  # estimated inside every training fold
    assert lams == pytest.approx(body["estimates"]["response_lambda"]["per_fold"], rel=1e-12)
    x0 = np.array([2.0, 8.0])
    out = _predict(body["model"], x0, 0.8, "cv_plus").json()
    # source: Barber et al. 2021 section 4 with the algorithm "estimate lambda, then fit":
    # the candidates are mapped through their own fold's inverse, then ranked (written out)
    y = np.array(cols["y"])
    fold, vals = np.array(block["residuals"]["fold"]), np.array(block["residuals"]["values"])
    lows, highs = [], []
    for i in range(vals.size):
        f = block["fold_fits"][fold[i]]
        t = tf(f["response_transform"])
        mu = f["coefficients"][0] + f["coefficients"][1] * x0
        lows.append(t.inverse(mu - vals[i]))
        highs.append(t.inverse(mu + vals[i]))
    lows = np.where(np.isnan(lows), -np.inf, lows)
    highs = np.where(np.isnan(highs), np.inf, highs)
    n = y.size
    k_lo, k_hi = math.floor(0.2 * (n + 1)), math.ceil(0.8 * (n + 1))
    np.testing.assert_allclose(
        [p["lower"] for p in out["predictions"]], np.sort(lows, axis=0)[k_lo - 1], rtol=1e-9
    )
    np.testing.assert_allclose(
        [p["upper"] for p in out["predictions"]], np.sort(highs, axis=0)[k_hi - 1], rtol=1e-9
    )


def test_default_follows_normality_of_the_entry():
    normal_rows = {"x": np.linspace(1, 10, 60).tolist()}
    rng = np.random.default_rng(5)
    normal_rows["y"] = (3 + 2 * np.array(normal_rows["x"]) + rng.normal(0, 1, 60)).tolist()
    ok = _diagnose(normal_rows, {"name": "identity"})
    assert ok["conditions"]["normality"]["holds"] is True
    assert ok["inference"]["prediction_intervals"] == "normal"
    out = _predict(ok["model"], [2.0]).json()
    assert out["interval_method"] == "normal"
    assert "not rejected" in out["interval_method_reason"]

    heavy = _data(6, 200)
    bad = _diagnose(heavy, {"name": "identity"})
    assert bad["conditions"]["normality"]["holds"] is False
    assert bad["inference"]["prediction_intervals"] == "cv_plus"
    assert "normality" in bad["model"]["conditions_failed"]
    out = _predict(bad["model"], [2.0]).json()
    assert out["interval_method"] == "cv_plus"
    assert out["interval_method_reason"].startswith("normality fails on this entry")
    asked = _predict(bad["model"], [2.0], method="normal").json()
    assert asked["interval_method"] == "normal"
    assert asked["predictions"][0]["lower"] != out["predictions"][0]["lower"]


def _resigned(model, edit):
    m = copy.deepcopy(model)
    edit(m)
    m.pop("signature", None)
    m["checksum"] = checksum(m)
    return m


def test_refusals_name_the_field_the_value_and_the_fix():
    body = _diagnose(_data(7, 60), {"name": "identity"})
    r = _predict(body["model"], [2.0], method="bootstrap")
    assert r.status_code == 422
    assert r.headers["content-type"].startswith("application/problem+json")
    err = r.json()["errors"][0]
    assert err["pointer"] == "/interval_method" and "bootstrap" in err["detail"]
    # an artifact issued without the stored fits (before CV+) asked for cv_plus
    old = _resigned(body["model"], lambda m: (m.pop("cv_plus"), m.pop("conditions_failed")))
    r = _predict(old, [2.0], method="cv_plus")
    assert r.status_code == 422
    err = r.json()["errors"][0]
    assert err["pointer"] == "/interval_method"
    assert "'normal'" in err["detail"] and "refit" in err["detail"]
    # ... and without asking: normal theory, saying why
    out = _predict(old, [2.0]).json()
    assert out["interval_method"] == "normal"
    assert "does not record" in out["interval_method_reason"]
    # damaged blocks point into the model
    for edit, ptr in [
        (
            lambda m: m["cv_plus"]["residuals"]["fold"].__setitem__(0, 99),
            "/model/cv_plus/residuals",
        ),
        (
            lambda m: m["cv_plus"]["residuals"]["values"].__setitem__(0, -1.0),
            "/model/cv_plus/residuals",
        ),
        (lambda m: m["cv_plus"]["fold_fits"].pop(), "/model/cv_plus/fold_fits"),
        (
            lambda m: m["cv_plus"]["fold_fits"][0]["coefficients"].pop(),
            "/model/cv_plus/fold_fits/0/coefficients",
        ),
        (lambda m: m.__setitem__("conditions_failed", ["luck"]), "/model/conditions_failed"),
    ]:
        r = _predict(_resigned(body["model"], edit), [2.0], method="cv_plus")
        assert r.status_code == 422, r.text
        assert r.json()["errors"][0]["pointer"] == ptr
    # too few residuals for the level: null limits, said so
    r = _predict(body["model"], [2.0], level=0.99, method="cv_plus").json()
    assert r["predictions"][0]["lower"] is None and r["predictions"][0]["upper"] is None
    assert any("no finite limits" in w for w in r["warnings"])


def test_thinning_keeps_each_folds_share_and_quantiles():
    rng = np.random.default_rng(0)
    n, K = 5003, 5
    fold = rng.permutation(np.arange(n) % K)
    resid = rng.standard_t(3, n)
    oof = OutOfFold(fold, resid, np.zeros((K, 2)), [tr.Transform("identity")] * K)
    kind, f, v = cvplus.thinned(oof)
    assert kind == "quantiles" and f.size == v.size == cvplus.MAX_ROWS
    for k in range(K):
        share = np.sum(f == k) / cvplus.MAX_ROWS
        assert share == pytest.approx(np.sum(fold == k) / n, abs=1 / cvplus.MAX_ROWS)
        # source: evenly spaced order statistics reproduce the fold's quantiles
        a = np.abs(resid[fold == k])
        assert np.quantile(v[f == k], 0.9) == pytest.approx(np.quantile(a, 0.9), rel=0.02)
    small = OutOfFold(fold[:100], resid[:100], np.zeros((K, 2)), [tr.Transform("identity")] * K)
    kind, f, v = cvplus.thinned(small)
    assert kind == "all" and np.array_equal(v, np.abs(resid[:100]))


def test_ranks_follow_the_paper():
    # source: Barber et al. 2021 section 1.1: q+ is the ceil((1-alpha)(n+1))-th smallest,
    # q- the floor(alpha (n+1))-th smallest
    assert cvplus.ranks(19, 0.9) == (2, 18)
    assert cvplus.ranks(100, 0.9) == (10, 91)
    assert cvplus.ranks(10, 0.95) == (0, 11)  # both ends infinite at n = 10


def test_seeded_coverage_of_90_percent_intervals():
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
    from robust_coverage import pi_coverage

    # seeded: 4 training sets of 300 rows per case, 2,000 fresh rows each
    for case in ("t3", "growing", "powers"):
        c = pi_coverage(case, 4, 300, fresh=2000, level=0.9, seed=3)
        mean = float(np.mean(c["cv_plus"]))
        # source: Barber et al. 2021 Theorem 4: coverage >= 1 - 2 alpha - min{2(1-1/K)/(n/K+1),
        # (1-K/n)/(K+1)} = 0.8 - 0.0265 for any error law; the same paper's simulations show
        # CV+ near 1 - alpha, and 8,000 fresh rows give a binomial SE under 0.5 points
        # (conditional coverage varies by about 2 points between training sets)
        assert mean >= 0.8 - 0.0265
        assert 0.86 <= mean <= 0.94, (case, c)


def test_selection_entries_store_the_searchs_own_folds():
    cols = _data(8, 90, "lognormal")
    cols["w"] = np.random.default_rng(9).uniform(1, 5, 90).tolist()
    r = client.post(
        "/v1/selections",
        json={
            "data": {"columns": cols},
            "response": "y",
            "predictors": ["x", "w"],
            "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
            "validation": {"folds": 6, "seed": 11, "repeats": 2},
            "top": 3,
        },
    )
    assert r.status_code == 200, r.text
    for entry in r.json()["ranking"]:
        spec = entry["specification"]
        rt = tf(spec["response"]["transform"])
        z = rt.forward(np.array(cols["y"]))
        X = np.column_stack(
            [tf(p["transform"]).forward(np.array(cols[p["column"]])) for p in spec["predictors"]]
        )
        x0 = X[:4]
        # the service's first repeat on its seed equals KFold(shuffle=True, random_state=seed)
        lows, highs = [], []
        for train, test in KFold(6, shuffle=True, random_state=11).split(X):
            m = LinearRegression().fit(X[train], z[train])
            res = np.abs(z[test] - m.predict(X[test]))
            lows.append(m.predict(x0)[:, None] - res[None, :])
            highs.append(m.predict(x0)[:, None] + res[None, :])
        # source: Barber et al. 2021 section 4 (CV+), level 0.9 with n = 90: ranks 9 and 82
        lo = np.sort(np.hstack(lows), axis=1)[:, 8]
        hi = np.sort(np.hstack(highs), axis=1)[:, 81]
        rows = {p["column"]: cols[p["column"]][:4] for p in spec["predictors"]}
        body = {"model": entry["model"], "data": {"columns": rows}, "interval": 0.9}
        out = client.post("/v1/predictions", json=body | {"interval_method": "cv_plus"}).json()
        got = out["predictions"]
        np.testing.assert_allclose([p["model_scale"]["interval_low"] for p in got], lo, rtol=1e-8)
        np.testing.assert_allclose([p["model_scale"]["interval_high"] for p in got], hi, rtol=1e-8)


def test_report_names_each_entrys_interval_method():
    body = {
        "data": {"columns": _data(6, 200)},
        "response": "y",
        "predictors": ["x"],
        "transforms": {"response": ["identity"], "predictors": ["identity", "log"]},
    }
    sel = client.post("/v1/selections", json=body).json()["ranking"]
    page = client.post("/v1/reports", json=body).text
    n_cv = sum(e["inference"]["prediction_intervals"] == "cv_plus" for e in sel)
    assert n_cv >= 1
    line = "CV+ (from the out-of-fold residuals; no normality needed): normality fails"
    assert page.count(line) == n_cv
    assert page.count("Prediction intervals") == len(sel)


def _power_entry(seed=6, n=200, folds=5, vseed=0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    y = 10 + 2 * x**1.7 + 3 * rng.standard_t(3, n)
    r = client.post(
        "/v1/selections",
        json={
            "data": {"columns": {"x": x.tolist(), "y": y.tolist()}},
            "response": "y",
            "predictors": ["x"],
            "transforms": {"response": ["identity"], "predictors": ["identity", {"name": "power"}]},
            "validation": {"folds": folds, "seed": vseed},
        },
    )
    assert r.status_code == 200, r.text
    est = [
        e
        for e in r.json()["ranking"]
        if e["specification"]["predictors"][0]["transform"]["name"] == "power"
    ]
    assert est, "the estimated power is listed"
    return x, y, est[0]


def _profile_power(x, z):
    """Least-squares power of x for z = b0 + b1 (x^a - 1)/a, by a bounded scalar search of
    the profile residual sum of squares (scipy), independent of the service's iteration."""
    from scipy.optimize import minimize_scalar

    def rss(a):
        X = np.column_stack([np.ones_like(x), np.expm1(a * np.log(x)) / a])
        return float(np.sum((z - X @ np.linalg.lstsq(X, z, rcond=None)[0]) ** 2))

    return minimize_scalar(rss, bounds=(-3, 3), method="bounded", options={"xatol": 1e-10}).x


def test_entries_with_per_fold_predictor_powers_get_cv_plus():
    x, y, entry = _power_entry()
    assert entry["conditions"]["normality"]["holds"] is False
    block = entry["model"]["cv_plus"]
    assert block["available"] is True
    fp = block["fold_powers"]
    assert fp["columns"] == ["x"] and fp["form"] == "box_cox"
    per_fold = entry["estimates"]["predictor_powers"]["x"]["per_fold"]
    assert [v[0] for v in fp["values"]] == pytest.approx(per_fold, rel=1e-12)
    assert len({v[0] for v in fp["values"]}) == 5  # estimated inside every training fold
    assert entry["inference"]["prediction_intervals"] == "cv_plus"
    x0 = np.array([1.5, 4.0, 9.5])
    out = _predict(entry["model"], x0, 0.9).json()
    assert out["interval_method"] == "cv_plus"
    assert out["interval_method_reason"].startswith("normality fails on this entry")
    # source: Barber et al. 2021 section 4 (CV+) for the algorithm "estimate the power of x,
    # then fit", written out: scikit-learn KFold(shuffle=True) (the service's first repeat),
    # in every training fold the profile least-squares power (scipy) and the linear fit
    # (scikit-learn) on (x^a - 1)/a, R_i on the fold that held row i out
    lows, highs, powers = [], [], []
    for train, test in KFold(5, shuffle=True, random_state=0).split(x):
        a = _profile_power(x[train], y[train])
        powers.append(a)
        w = np.expm1(a * np.log(x)) / a
        m = LinearRegression().fit(w[train, None], y[train])
        r = np.abs(y[test] - m.predict(w[test, None]))
        mu = m.predict((np.expm1(a * np.log(x0)) / a)[:, None])
        lows.append(mu[:, None] - r[None, :])
        highs.append(mu[:, None] + r[None, :])
    n = x.size
    k_lo, k_hi = math.floor(0.1 * (n + 1)), math.ceil(0.9 * (n + 1))
    lo = np.sort(np.hstack(lows), axis=1)[:, k_lo - 1]
    hi = np.sort(np.hstack(highs), axis=1)[:, k_hi - 1]
    # the service's Box-Tidwell steps stop below 1e-6, the scalar search at 1e-10
    assert [v[0] for v in fp["values"]] == pytest.approx(powers, abs=1e-5)
    got = out["predictions"]
    np.testing.assert_allclose([p["lower"] for p in got], lo, rtol=1e-6)
    np.testing.assert_allclose([p["upper"] for p in got], hi, rtol=1e-6)
    normal = _predict(entry["model"], x0, 0.9, "normal").json()["predictions"]
    assert [p["lower"] for p in normal] != [p["lower"] for p in got]


def test_models_issued_before_fold_powers_were_stored_keep_their_reason():
    _, _, entry = _power_entry()
    why = (
        "the entry's predictor powers were estimated inside every fold, and CV+ fits are "
        "stored only for predictor scales fixed across folds"
    )
    old = _resigned(
        entry["model"], lambda m: m.__setitem__("cv_plus", {"available": False, "reason": why})
    )
    out = _predict(old, [2.0]).json()
    assert out["interval_method"] == "normal"
    assert out["interval_method_reason"] == (
        f"normality fails on this entry, but CV+ is not available ({why})"
    )
    r = _predict(old, [2.0], method="cv_plus")
    assert r.status_code == 422
    assert why in r.json()["errors"][0]["detail"]


def test_damaged_fold_powers_point_into_the_model():
    _, _, entry = _power_entry()
    model = entry["model"]

    def fp(m):
        return m["cv_plus"]["fold_powers"]

    for edit, ptr in [
        (lambda m: fp(m).__setitem__("form", "plain"), "/model/cv_plus/fold_powers"),
        (lambda m: fp(m).__setitem__("columns", ["y"]), "/model/cv_plus/fold_powers/columns"),
        (lambda m: fp(m).__setitem__("columns", []), "/model/cv_plus/fold_powers/columns"),
        (lambda m: fp(m)["values"].pop(), "/model/cv_plus/fold_powers/values"),
        (lambda m: fp(m)["values"][0].__setitem__(0, 7.5), "/model/cv_plus/fold_powers/values"),
        (lambda m: fp(m)["values"][1].append(1.0), "/model/cv_plus/fold_powers/values"),
        (lambda m: fp(m).__setitem__("values", [[1.0]] * 51), "/model/cv_plus/fold_powers/values"),
    ]:
        r = _predict(_resigned(model, edit), [2.0], method="cv_plus")
        assert r.status_code == 422, r.text
        assert r.json()["errors"][0]["pointer"] == ptr, r.json()
        assert (
            "damaged or forged" in r.json()["errors"][0]["detail"]
            or "at most" in (r.json()["errors"][0]["detail"])
        )


def test_a_fold_power_undefined_at_the_row_gives_null_limits_and_says_why():
    _, _, entry = _power_entry()
    # a fold whose power is at or below 0 cannot take x = 0, where the entry's own power
    # (about 1.7) can; the other rows keep their limits
    m = _resigned(
        entry["model"], lambda m: m["cv_plus"]["fold_powers"]["values"][2].__setitem__(0, -0.4)
    )
    out = _predict(m, [0.0, 3.0], 0.9, "cv_plus").json()
    first, second = out["predictions"]
    assert first["lower"] is None and first["upper"] is None and first["median"] is not None
    assert second["lower"] is not None and second["upper"] is not None
    assert any("power of 'x' estimated in some fold is not defined" in w for w in out["warnings"])


def test_oversized_cv_plus_lists_are_refused_before_reading_them():
    body = _diagnose(_data(7, 60), {"name": "identity"})

    def grow(m):
        m["cv_plus"]["residuals"]["values"] = [1.0] * (cvplus.MAX_ROWS + 1)

    r = _predict(_resigned(body["model"], grow), [2.0])
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/model/cv_plus/residuals/values"
    assert str(cvplus.MAX_ROWS) in r.json()["errors"][0]["detail"]


@pytest.mark.parametrize("seed", range(6))
def test_fast_order_statistics_equal_a_full_sort(seed):
    rng = np.random.default_rng(seed)
    K, n = int(rng.integers(2, 11)), int(rng.integers(12, 400))
    fold = rng.permutation(np.arange(n) % K)
    R = np.abs(rng.standard_t(3, n)) * 10 ** rng.uniform(-3, 6)
    if seed % 2:
        R = np.round(R, 1)  # ties
    B = rng.normal(size=(K, 3)) * 10 ** rng.uniform(-3, 6)
    X0 = rng.normal(size=(40, 3))
    ident = tr.Transform("identity")
    _, _, lo, hi = cvplus.intervals(B, [ident] * K, fold, R, X0, 0.9, ident)
    # source: the order statistics of the CV+ definition taken by sorting all n candidates
    c = (X0 @ B.T)[:, fold]
    k_lo, k_hi = cvplus.ranks(n, 0.9)
    np.testing.assert_allclose(lo, np.sort(c - R, axis=1)[:, k_lo - 1], rtol=1e-12)
    np.testing.assert_allclose(hi, np.sort(c + R, axis=1)[:, k_hi - 1], rtol=1e-12)


def _per_fold_scales(rng, family, K):
    if family == "log":
        return [tr.Transform("log", shift=float(s)) for s in rng.uniform(0.01, 3.0, K)]
    lo, hi = {"box_cox": (-1.5, 1.5), "yeo_johnson": (-1.0, 3.0)}[family]
    return [tr.Transform(family, lam=float(v), estimated=True) for v in rng.uniform(lo, hi, K)]


@pytest.mark.parametrize("seed", range(9))
def test_per_fold_scales_order_statistics_equal_a_full_sort(seed):
    rng = np.random.default_rng(100 + seed)
    family = ("box_cox", "log", "yeo_johnson")[seed % 3]
    K, n = int(rng.integers(2, 11)), int(rng.integers(12, 500))
    fold = rng.permutation(np.arange(n) % K)
    R = np.abs(rng.standard_t(3, n)) * 10 ** rng.uniform(-2, 0.5)
    if seed % 2:
        R = np.round(R, 1)  # ties
    ts = _per_fold_scales(rng, family, K)
    B = rng.normal(size=(K, 3)) * 0.5
    B[:, 0] += rng.uniform(-1, 3)
    X0 = np.column_stack([np.ones(60), rng.normal(size=(60, 2))])
    X0[:5] *= 40.0  # rows whose candidates reach past poles, clips and overflow
    model_t = ts[0]
    for level in (0.5, 0.8, 0.9):
        fast = cvplus.intervals(B, ts, fold, R, X0, level, model_t)
        # source: the order statistics of the CV+ definition, every candidate mapped through
        # its own fold's inverse and all n sorted (the rows x residuals matrix)
        full = cvplus.intervals(B, ts, fold, R, X0, level, model_t, fast=False)
        for got, want in zip(fast, full, strict=True):
            assert np.array_equal(np.isnan(got), np.isnan(want))
            assert np.array_equal(np.isinf(got), np.isinf(want))
            ok = np.isfinite(want)
            np.testing.assert_allclose(got[ok], want[ok], rtol=1e-12, atol=0)


@pytest.mark.parametrize(
    ("family", "lams"),
    [
        ("box_cox", (-1.0, -0.8)),  # a pole: past it the response is unbounded
        ("box_cox", (0.9, 1.3)),  # clipped at 0 below -1/lambda
        ("yeo_johnson", (-0.7, -0.4)),  # a pole above
        ("yeo_johnson", (2.6, 3.0)),  # a limit below
    ],
)
def test_per_fold_scales_reach_the_edges_of_their_inverses(family, lams):
    # candidates past a pole or a branch limit have no inverse and count as beyond every
    # value (-inf for the lower end, +inf for the upper), clipped ones as the clip value
    ts = [tr.Transform(family, lam=v, estimated=True) for v in lams]
    fold = np.array([0, 1] * 50)
    R = np.round(np.linspace(0.05, 4.0, 100), 1)  # ties
    B = np.array([[0.3, 0.9], [0.2, 1.1]])
    X0 = np.column_stack([np.ones(41), np.linspace(-4.0, 4.0, 41)])
    edges = 0
    for level in (0.5, 0.8, 0.95):
        fast = cvplus.intervals(B, ts, fold, R, X0, level, ts[0])
        full = cvplus.intervals(B, ts, fold, R, X0, level, ts[0], fast=False)
        for got, want in zip(fast, full, strict=True):
            np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)  # nan / inf alike
        edges += int(np.sum(~np.isfinite(fast[0]) | ~np.isfinite(fast[1])))
        edges += int(np.sum(fast[0] == 0.0))
    assert edges > 0, "some rows reach an edge of an inverse"
    for t in ts:
        a, b, ga, gb = cvplus.defined_interval(t)
        inside = t.inverse(np.array([a, b]))
        with np.errstate(over="ignore"):  # past the largest float: inf, no inverse either
            outside = t.inverse(np.array([np.nextafter(a, -np.inf), np.nextafter(b, np.inf)]))
        assert np.all(np.isfinite(inside)) and list(inside) == [ga, gb]
        assert a == -np.finfo(float).max or np.isnan(outside[0])
        assert b == np.finfo(float).max or np.isnan(outside[1])


@pytest.mark.parametrize("boxcox_form", [True, False])
def test_fold_powers_with_per_fold_log_shifts_equal_a_full_sort(boxcox_form):
    rng = np.random.default_rng(41)
    K, n, m = 4, 300, 50
    fold = rng.permutation(np.arange(n) % K)
    R = np.round(np.abs(rng.standard_t(3, n)) * 0.3, 2)  # ties
    powers = rng.uniform(0.5, 2.0, (K, 1))
    fp = cvplus.FoldPowers(("x",), (2,), powers, boxcox_form)
    B = np.column_stack([rng.uniform(1, 2, K), rng.normal(0, 0.1, K), rng.uniform(0.1, 0.3, K)])
    x = rng.uniform(0.5, 8.0, m)
    X0 = np.column_stack([np.ones(m), rng.normal(size=m), x**1.3])  # entry's own column
    # source: fold k's design written out: its own power of x, (x^a - 1)/a or x^a
    for k in range(K):
        a = powers[k, 0]
        w = (x**a - 1) / a if boxcox_form else x**a
        want = np.column_stack([X0[:, :2], w]) @ B[k]
        np.testing.assert_allclose(fp.fold_means(X0, B, x[:, None])[:, k], want, rtol=1e-12)
    ts = [tr.Transform("log", shift=float(s), estimated=True) for s in rng.uniform(0.1, 1, K)]
    fast = cvplus.intervals(B, ts, fold, R, X0, 0.9, ts[0], fp, x[:, None])
    full = cvplus.intervals(B, ts, fold, R, X0, 0.9, ts[0], fp, x[:, None], fast=False)
    for got, want in zip(fast, full, strict=True):
        np.testing.assert_allclose(got, want, rtol=1e-12)
