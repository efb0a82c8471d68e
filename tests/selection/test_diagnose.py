"""One specification as sent (service/selection/diagnose.py): its cross-validated error, entry
and plot data, and requests it refuses with the field to fix.

References: the shared reference checks (CHECKS_PUBLIC, engel `log(foodexp) on log(income)`:
slope 0.85589699, CV RMSE pooled smearing 118.9974 under KFold(5, shuffle=True,
random_state=0), Breusch-Pagan Koenker p 1.769e-4); statsmodels OLS residuals for the plot
points.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from service.core.data import prepare
from service.core.errors import CandidateFailure, Cell, InputError, ModelFailure, SpecField
from service.core.spec import resolve_predictor_transforms
from service.selection.diagnose import diagnose_specification
from service.selection.search_setup import SearchOptions

from tests.typed import sent, spec_of


@pytest.fixture(scope="module")
def engel():
    d = sm.datasets.engel.load_pandas().data  # source: statsmodels.datasets.engel
    cols = {"foodexp": d.foodexp.tolist(), "income": d.income.tolist()}
    return prepare({"columns": cols}, "foodexp", ["income"]), d


def _spec(rt="log", pt="log"):
    return {
        "response": {"column": "foodexp", "transform": {"name": rt}},
        "predictors": [{"column": "income", "transform": {"name": pt}}],
    }


def test_engel_log_log_matches_the_reference_sheet(engel):
    prep, d = engel
    entry, plots = diagnose_specification(prep, sent(_spec()), SearchOptions(), "test")
    # source: CHECKS_PUBLIC engel log-log: slope 0.85589699 (rel 1e-9), CV RMSE pooled
    # smearing 118.9974 (rel 1e-6, same folds), Breusch-Pagan Koenker p 1.769e-4
    assert entry.coefficients[1].estimate == pytest.approx(0.85589699, rel=1e-7)
    assert entry.cv.value == pytest.approx(118.9974, rel=1e-6)
    bp = next(t for t in entry.conditions.equal_variance.tests if t.name.startswith("Breusch"))
    assert bp.p_value == pytest.approx(1.769e-4, rel=1e-3)
    assert "equal_variance" in entry.score.parts.conditions_failed
    assert entry.score.parts.within_one_se and entry.score.cv_ratio == 1.0
    # plot points are the residuals of the same fit
    ref = sm.OLS(np.log(d.foodexp), sm.add_constant(np.log(d.income))).fit()
    pts = plots.residuals_fitted.points
    np.testing.assert_allclose(pts.y, ref.resid.to_numpy()[np.asarray(pts.row) - 1], rtol=1e-9)


def test_an_untransformed_spec_matches_its_reference_value(engel):
    prep, _ = engel
    entry, _ = diagnose_specification(
        prep, sent(_spec("identity", "identity")), SearchOptions(), "t"
    )
    # source: CHECKS_PUBLIC engel `foodexp on income`: CV RMSE pooled 132.7541
    assert entry.cv.value == pytest.approx(132.7541, rel=1e-6)


@pytest.mark.parametrize(
    "spec, ptr",
    [
        (_spec(pt="categorical"), SpecField.of_predictor(0, "transform")),
        (_spec(pt="box_cox"), SpecField.of_predictor(0, "transform", "lambda")),
    ],
)
def test_requests_the_columns_cannot_take_point_at_the_field(engel, spec, ptr):
    prep, _ = engel
    with pytest.raises(InputError) as exc:
        diagnose_specification(prep, sent(spec), SearchOptions(), "t")
    assert exc.value.problems[-1].where == ptr


def test_an_unestimated_predictor_lambda_is_refused_in_the_search_s_words(engel):
    prep, _ = engel
    spec = _spec(pt="box_cox")
    with pytest.raises(InputError) as exc:
        diagnose_specification(prep, sent(spec), SearchOptions(), "t")
    with pytest.raises(CandidateFailure) as failure:
        resolve_predictor_transforms(spec_of(spec), prep)
    assert exc.value.problems[-1].detail == failure.value.reason
    assert failure.value.reason == "box_cox of a predictor needs an explicit lambda"


def test_a_transform_outside_the_domain_points_at_the_cell_then_the_transform():
    y = [3.0, 0.0, 4.5, 6.1, 2.2, 8.0, 5.5, 7.1, 3.3, 4.4]
    x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0]
    prep = prepare({"columns": {"foodexp": y, "income": x}}, "foodexp", ["income"])
    with pytest.raises(InputError) as exc:
        diagnose_specification(prep, sent(_spec("log", "identity")), SearchOptions(), "t")
    places = [p.where for p in exc.value.problems]
    assert places == [Cell("foodexp", 1, "columns"), SpecField.response("transform")]


def test_a_design_that_cannot_be_fitted_is_a_model_failure():
    x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0, 11.0, 12.0]
    cols = {"foodexp": [v * 2 + (v % 3) for v in x], "income": x, "twice": [2 * v for v in x]}
    prep = prepare({"columns": cols}, "foodexp", ["income", "twice"])
    spec = {
        "response": {"column": "foodexp"},
        "predictors": [{"column": "income"}, {"column": "twice"}],
    }
    with pytest.raises(ModelFailure, match="rank-deficient"):
        diagnose_specification(prep, sent(spec), SearchOptions(), "t")


@pytest.mark.parametrize(
    "name, fragment",
    [
        ("categorical", "is numeric; list it in 'categorical'"),
        ("box_cox", "needs an explicit lambda"),
        ("reciprocal", None),  # income has no zeros: accepted by both
    ],
)
def test_a_predictor_transform_is_judged_alike_by_the_search_and_the_diagnosis(
    engel, name, fragment
):
    from service.selection.candidates import predictor_candidates

    from tests.typed import predictors

    prep, _ = engel
    errors = []
    for run in (
        lambda: diagnose_specification(prep, sent(_spec(pt=name)), SearchOptions(), "t"),
        lambda: predictor_candidates(prep, predictors([name])),
    ):
        try:
            run()
            errors.append(None)
        except InputError as exc:
            errors.append(exc.problems[-1].detail)
    if fragment is None:
        assert errors == [None, None]
        return
    # the same rule and words (the search adds what to send instead of a lambda)
    assert all(e is not None and fragment in e for e in errors)
    assert errors[1].startswith(errors[0])
