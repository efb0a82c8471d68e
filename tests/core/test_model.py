"""The typed fitted model (service/core/model.py): what it keeps of a fit, the stored
residual summary and the marking of a body's models for signing.

References: statsmodels OLS for the coefficients, (X'X)^-1 and the leverages; numpy
quantiles for the stored residual summary.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from service.core import model
from service.core.cvplus import NoStoredFits
from service.core.data import prepare
from service.core.spec import Levels
from service.selection.entries import fitted_model

from tests.typed import spec_of


def depot_fit():
    """Invented: minutes a depot needs to load a truck, by pallets and loading bay; the
    log-log model with the bay as a categorical fitted on all rows: (specification, design,
    fit, rows)."""
    rng = np.random.default_rng(3)
    n = 50
    pallets = rng.uniform(2, 30, n)
    bay = rng.choice(["east", "north", "west"], n)
    minutes = np.exp(1.0 + 0.6 * np.log(pallets) + 0.1 * (bay == "west") + rng.normal(0, 0.1, n))
    cols = {"minutes": minutes.tolist(), "pallets": pallets.tolist(), "bay": bay.tolist()}
    prep = prepare({"columns": cols}, "minutes", ["pallets", "bay"], ["bay"])
    spec = spec_of(
        {
            "response": {"column": "minutes", "transform": {"name": "log"}},
            "predictors": [
                {"column": "pallets", "transform": {"name": "log"}},
                {"column": "bay", "transform": {"name": "categorical"}},
            ],
        }
    )
    concrete, design, fit, _ = fitted_model(spec, prep)
    return concrete, design, fit, prep


@pytest.fixture(scope="module")
def built():
    concrete, design, fit, prep = depot_fit()
    m = model.build_model(
        concrete, design, fit, prep, "test-version", None, NoStoredFits("none kept"), []
    )
    return m, design, prep


def test_the_model_keeps_the_fit_statsmodels_computes(built):
    m, design, prep = built
    # source: statsmodels OLS on the same design (reference library); rel 1e-9
    ref = sm.OLS(np.log(prep.y), design.X).fit()
    np.testing.assert_allclose(m.coef, ref.params, rtol=1e-9)
    np.testing.assert_allclose(m.xtx_inverse, ref.normalized_cov_params, rtol=1e-8)
    assert m.residual_variance == pytest.approx(ref.scale, rel=1e-9)
    assert m.df_residual == ref.df_resid and m.n == prep.n
    np.testing.assert_allclose(m.residuals, ref.resid, rtol=1e-9, atol=1e-12)
    # source: statsmodels OLSInfluence hat-matrix diagonal
    lev = ref.get_influence().hat_matrix_diag
    assert m.max_leverage == pytest.approx(float(np.max(lev)), rel=1e-9)
    assert m.terms == tuple(design.names) and m.residual_kind == "all"
    x = prep.numeric["pallets"]
    assert m.training_range == {"pallets": (float(x.min()), float(x.max()))}
    assert m.levels["bay"] == Levels(("east", "north", "west"), "east")
    assert m.conditions_failed == () and m.cv_plus is None and m.cv_plus_missing == "none kept"
    assert m.issued is not None and m.issued.response_range == (prep.y.min(), prep.y.max())
    assert m.profile is not None and m.profile.rows == prep.n


def test_a_model_that_records_nothing_of_cv_plus_says_why():
    m = model.Model(
        spec_of({"response": {"column": "y"}, "predictors": [{"column": "x"}]}),
        ("intercept", "x"),
        np.zeros(2),
        np.eye(2),
        1.0,
        3,
        {},
        np.zeros(5),
        "all",
        {"x": (0.0, 1.0)},
        0.5,
    )
    assert m.cv_plus is None and m.cv_plus_missing == model.NO_CV_PLUS
    assert m.conditions_failed is None and m.issued is None


def test_many_residuals_are_kept_as_evenly_spaced_quantiles():
    rng = np.random.default_rng(0)
    e = rng.normal(0, 1, 10 * model.MAX_STORED_RESIDUALS)
    kind, values = model.stored_residuals(e)
    assert kind == "quantiles" and len(values) == model.MAX_STORED_RESIDUALS
    # source: numpy.quantile (Hazen positions (k - 0.5)/m), the same order statistics
    m = model.MAX_STORED_RESIDUALS
    ref = np.quantile(e, (np.arange(m) + 0.5) / m, method="hazen")
    np.testing.assert_allclose(values, ref, rtol=1e-12, atol=1e-12)
    # the smearing factor of a log model barely moves (rel 1e-3, the spacing of the quantiles)
    assert np.mean(np.exp(values)) == pytest.approx(np.mean(np.exp(e)), rel=1e-3)
    kind, values = model.stored_residuals(e[:7])
    assert kind == "all" and values.tolist() == e[:7].tolist()


def test_library_versions_are_this_process_s():
    import scipy
    import statsmodels

    v = model.library_versions()
    assert (v.numpy, v.scipy, v.statsmodels) == (
        np.__version__,
        scipy.__version__,
        statsmodels.__version__,
    )
