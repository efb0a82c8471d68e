"""Reading a model artifact back (service/api/artifact.py): an edited, damaged or forged
artifact is refused with a problem naming its field; one as issued loads unchanged.

References: the artifact's own checksum (SHA-256 over the canonical JSON,
service/api/render/model.py) recomputed for edits a client could make consistently.
"""

from __future__ import annotations

import numpy as np
import pytest
from service.api.artifact import MODEL, load_model
from service.api.render import contract
from service.api.render.model import checksum
from service.core import model as m
from service.core.errors import InputError, Location

from tests.core.test_predict import income_site_artifact
from tests.typed import predictors, responses


@pytest.fixture
def artifact():
    return income_site_artifact(np.random.default_rng(7))


def reseal(art: dict) -> dict:
    art["checksum"] = checksum(art)
    return art


def where_of(exc: pytest.ExceptionInfo) -> list[Location]:
    return [fp.where for fp in exc.value.problems]


def test_wrong_format_version(artifact):
    artifact["format_version"] = 99
    with pytest.raises(InputError) as exc:
        load_model(artifact)
    assert where_of(exc) == [MODEL.at("format_version")]


def test_tampered_coefficient_fails_checksum(artifact):
    artifact["coefficients"][1] += 1e-9
    with pytest.raises(InputError) as exc:
        load_model(artifact)
    assert where_of(exc) == [MODEL.at("checksum")]
    assert "modified after it was issued" in exc.value.detail


def test_missing_checksum(artifact):
    del artifact["checksum"]
    with pytest.raises(InputError) as exc:
        load_model(artifact)
    assert where_of(exc) == [MODEL.at("checksum")]


def test_non_finite_number_points_at_it(artifact):
    artifact["xtx_inverse"][1][0] = float("nan")
    with pytest.raises(InputError) as exc:
        load_model(artifact)
    assert where_of(exc) == [MODEL.at("xtx_inverse", 1, 0)]


@pytest.mark.parametrize(
    "edit, ptr",
    [
        pytest.param(lambda a: a["xtx_inverse"].pop(), MODEL.at("xtx_inverse"), id="matrix rows"),
        pytest.param(
            lambda a: a["coefficients"].append(1.0), MODEL.at("coefficients"), id="coef length"
        ),
        pytest.param(lambda a: a["terms"].reverse(), MODEL.at("terms"), id="terms order"),
        pytest.param(lambda a: a.update(df_residual=0), MODEL.at("df_residual"), id="df"),
        pytest.param(
            lambda a: a["residuals"].update(values=[]), MODEL.at("residuals"), id="no residuals"
        ),
        pytest.param(
            lambda a: a["training_range"].pop("income"),
            MODEL.at("training_range", "income"),
            id="range missing",
        ),
        pytest.param(
            lambda a: a["levels"]["site"].update(reference="east"),
            MODEL.at("levels", "site", "reference"),
            id="bad reference",
        ),
        pytest.param(
            lambda a: a["specification"]["response"]["transform"].update(name="cube"),
            MODEL.at("specification", "response", "transform", "name"),
            id="unknown transform",
        ),
        pytest.param(lambda a: a.update(max_leverage=3.0), MODEL.at("max_leverage"), id="leverage"),
    ],
)
def test_inconsistent_artifact_even_with_valid_checksum(artifact, edit, ptr):
    edit(artifact)
    with pytest.raises(InputError) as exc:
        load_model(reseal(artifact))
    assert where_of(exc) == [ptr]


@pytest.fixture(scope="module")
def selected():
    """A selection's rank-1 model, typed, with its CV+ fits and its training profile
    (invented: minutes to unload a truck by pallets and dock)."""
    from service.core.data import prepare
    from service.selection.search import select
    from service.selection.search_setup import SearchOptions

    g = np.random.default_rng(11)
    n = 80
    pallets = g.uniform(2, 30, n)
    dock = g.choice(["a", "b", "c"], n)
    minutes = np.exp(0.8 + 0.5 * np.log(pallets) + 0.2 * (dock == "c") + g.normal(0, 0.3, n))
    cols = {"minutes": minutes.tolist(), "pallets": pallets.tolist(), "dock": dock.tolist()}
    prep = prepare({"columns": cols}, "minutes", ["pallets", "dock"], ["dock"])
    opts = SearchOptions(
        response_transforms=responses(["identity", "log"]),
        predictor_transforms=predictors(["identity", "log"]),
        top=1,
    )
    typed = select(prep, opts, "test").body.ranking[0].model
    assert isinstance(typed, m.Model)
    return typed


def test_an_issued_artifact_reads_back_as_the_model_it_was_written_from(selected):
    import json

    keys = ("k", {"k": b"a key of this service"})
    wire = json.loads(json.dumps(contract(m.Signing(selected, keys))))
    back = load_model(wire, keys)
    np.testing.assert_array_equal(back.coef, selected.coef)
    np.testing.assert_array_equal(back.xtx_inverse, selected.xtx_inverse)
    np.testing.assert_array_equal(back.residuals, selected.residuals)
    assert back.spec == selected.spec and back.terms == selected.terms
    assert back.training_range == selected.training_range and back.levels == selected.levels
    assert back.conditions_failed == selected.conditions_failed and back.n == selected.n
    assert back.profile == selected.profile  # the training rows' profile, for drift
    cv, was = back.cv_plus, selected.cv_plus
    assert cv is not None and was is not None
    np.testing.assert_array_equal(cv.coefficients, was.coefficients)
    np.testing.assert_array_equal(cv.abs_resid, was.abs_resid)
    np.testing.assert_array_equal(cv.fold, was.fold)
    assert (cv.transforms, cv.kind, cv.scheme, cv.rows) == (
        was.transforms,
        was.kind,
        was.scheme,
        was.rows,
    )
    assert back.issued is None  # what the prediction does not need is not read


def test_an_artifact_from_before_profiles_and_cv_plus_still_loads(selected):
    old = contract(selected)
    for field in ("data_profile", "cv_plus", "conditions_failed"):
        del old[field]
    back = load_model(reseal(old))
    assert back.profile is None and back.cv_plus is None and back.conditions_failed is None
    assert back.cv_plus_missing == m.NO_CV_PLUS


@pytest.mark.parametrize(
    ("edit", "where"),
    [
        (lambda p: p.update(rows=0), ("data_profile",)),
        (lambda p: p["response"]["edges"].reverse(), ("data_profile", "response")),
        (lambda p: p["response"].update(shares=[2.0]), ("data_profile", "response")),
        (
            lambda p: p["predictors"].update(depth={"kind": "numeric"}),
            ("data_profile", "predictors", "depth"),
        ),
        (
            lambda p: p["predictors"]["dock"].update(kind="numeric"),
            ("data_profile", "predictors", "dock"),
        ),
        (
            lambda p: p["predictors"]["dock"].update(shares=[0.5]),
            ("data_profile", "predictors", "dock", "shares"),
        ),
    ],
    ids=["rows", "edges-order", "shares", "unknown-column", "wrong-kind", "level-shares"],
)
def test_a_damaged_profile_is_refused_where_it_is_damaged(selected, edit, where):
    art = contract(selected)
    edit(art["data_profile"])
    with pytest.raises(InputError) as exc:
        load_model(reseal(art))
    assert where_of(exc) == [MODEL.at(*where)]
    assert "data_profile" in exc.value.detail
