"""Specifications and design matrices (service/core/spec.py).

References: pandas.get_dummies(drop_first=True) for treatment dummies (levels in sorted order,
the first one the reference); numpy for the transformed columns; the JSON form of a
specification in the HTTP contract (round trip).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from service.core import transforms as tr
from service.core.data import prepare
from service.core.errors import CandidateFailure, InputError, SpecField
from service.core.spec import (
    Columns,
    Levels,
    PredictorSpec,
    Specification,
    build_design,
    resolve_predictor_transforms,
    term_label,
    term_names,
)


def _prep(n=40, seed=1, with_zero=False):
    rng = np.random.default_rng(seed)
    soil = rng.choice(["sand", "clay", "loam", "peat"], n)
    x = rng.uniform(1, 10, n)
    if with_zero:
        x[3] = 0.0
    y = np.exp(1 + 0.2 * x + rng.normal(0, 0.1, n))
    cols = {"y": y.tolist(), "x": x.tolist(), "soil": soil.tolist()}
    return prepare({"columns": cols}, "y", ["x", "soil"], ["soil"]), soil, x


def _spec(xt=None, soil=None, intercept=True):
    return Specification(
        "y",
        tr.Transform("log"),
        (
            PredictorSpec("x", xt or tr.Transform("identity")),
            PredictorSpec("soil", soil or tr.Transform("categorical")),
        ),
        intercept,
    )


def test_treatment_dummies_equal_pandas_get_dummies():
    prep, soil, x = _prep()
    d = build_design(_spec(), prep)
    # source: pandas.get_dummies(drop_first=True) (sorted levels, first one dropped)
    ref = pd.get_dummies(
        pd.Series(soil, name="soil"), prefix="soil", prefix_sep="=", drop_first=True
    )
    assert d.names[2:] == list(ref.columns) == ["soil=loam", "soil=peat", "soil=sand"]
    np.testing.assert_array_equal(d.X[:, 2:], ref.to_numpy(float))
    np.testing.assert_array_equal(d.X[:, 0], np.ones(40))
    np.testing.assert_array_equal(d.X[:, 1], x)
    assert d.levels["soil"] == Levels(("clay", "loam", "peat", "sand"), "clay")
    assert [t.kind for t in d.terms] == ["numeric", "categorical"]
    assert d.terms[1].indices == (2, 3, 4)


def test_chosen_reference_level_drops_that_level():
    prep, soil, _ = _prep()
    d = build_design(_spec(soil=tr.Transform("categorical", reference="peat")), prep)
    # source: pandas.get_dummies without drop_first, the 'peat' column removed
    ref = pd.get_dummies(pd.Series(soil), prefix="soil", prefix_sep="=").drop(columns="soil=peat")
    assert d.names[2:] == list(ref.columns)
    np.testing.assert_array_equal(d.X[:, 2:], ref.to_numpy(float))


def test_new_rows_get_the_stored_levels_whatever_levels_they_hold():
    prep, _, _ = _prep()
    spec = _spec(xt=tr.Transform("log", shift=0.0))
    fitted = build_design(spec, prep)
    # new rows hold two of the four levels; their design keeps the model's columns
    new = Columns(
        3,
        {"x": np.array([2.0, 3.0, 4.0])},
        {"soil": np.array(["peat", "clay", "peat"], dtype=object)},
    )
    d = build_design(spec, new, levels=fitted.levels)
    assert d.names == fitted.names == term_names(spec, fitted.levels)
    # source: pandas.get_dummies over the stored categories (reference 'clay' dropped)
    cat = pd.Categorical(["peat", "clay", "peat"], categories=["clay", "loam", "peat", "sand"])
    ref = pd.get_dummies(cat, drop_first=True).to_numpy(float)
    np.testing.assert_array_equal(d.X[:, 2:], ref)
    np.testing.assert_allclose(d.X[:, 1], np.log([2.0, 3.0, 4.0]), rtol=0)
    # the rows' own levels would give other columns: the stored ones are what a model needs
    assert build_design(spec, new).names == ["intercept", "log(x)", "soil=peat"]


def test_unknown_reference_level_names_the_field():
    prep, _, _ = _prep()
    with pytest.raises(InputError) as exc:
        build_design(_spec(soil=tr.Transform("categorical", reference="chalk")), prep)
    assert exc.value.problems[0].where == SpecField.of_predictor(1, "transform", "reference")
    assert "'chalk'" in exc.value.detail


def test_transformed_columns_and_domain_failures():
    prep, _, x = _prep()
    d = build_design(_spec(xt=tr.Transform("power", exponent=0.5), intercept=False), prep)
    # source: numpy sqrt (x^0.5); no intercept column
    np.testing.assert_allclose(d.X[:, 0], np.sqrt(x), rtol=1e-15)
    assert d.names[0] == "power(x, exponent=0.5)"
    prep0, _, _ = _prep(with_zero=True)
    with pytest.raises(CandidateFailure):
        build_design(_spec(xt=tr.Transform("reciprocal")), prep0)  # 1/0 for row 3


def test_cache_computes_each_column_once():
    prep, _, _ = _prep()
    cache: dict = {}
    build_design(_spec(xt=tr.Transform("log", shift=0.0)), prep, cache)
    key = ("x", tr.Transform("log", shift=0.0))
    cache[key] = cache[key] * 0 + 7.0  # a cached column is used as it is
    assert np.all(
        build_design(_spec(xt=tr.Transform("log", shift=0.0)), prep, cache).X[:, 1] == 7.0
    )


def test_written_alike_and_key():
    s = _spec(xt=tr.Transform("box_cox", lam=0.25))
    assert s.written_alike() == s and s.written_alike().key == s.key
    # a log's zero shift is written as a plain log: the two are written alike, yet they are
    # different keys (the search holds both apart)
    zero, unset = _spec(xt=tr.Transform("log", shift=0.0)), _spec(xt=tr.Transform("log"))
    assert zero.written_alike() == unset.written_alike() and zero.key != unset.key
    marked = _spec(xt=tr.Transform("power", exponent=0.5, estimated=True))
    assert marked.written_alike() != _spec(xt=tr.Transform("power", exponent=0.5)).written_alike()


def test_simpler_specifications_sort_first():
    ident = _spec()
    logx = _spec(xt=tr.Transform("log", shift=0.0))
    est = Specification("y", tr.Transform("box_cox"), ident.predictors)
    # documented order: fewer estimated parameters, then cheaper transforms, then fewer of them
    assert ident.simplicity() < logx.simplicity() < est.simplicity()
    assert est.simplicity()[0] == 1  # one lambda estimated from the response
    # kept by the instance: asked again, the same answer; equality and hashing unchanged
    again = Specification("y", tr.Transform("box_cox"), ident.predictors)
    assert est.simplicity() == again.simplicity() and est == again
    assert hash(est) == hash(Specification("y", tr.Transform("box_cox"), ident.predictors))


def test_log_of_a_column_with_zeros_gets_a_shift_from_the_column_alone():
    prep, _, x = _prep(with_zero=True)
    out = resolve_predictor_transforms(_spec(xt=tr.Transform("log")), prep)
    t = out.predictors[0].transform
    assert t.is_fitted and t.shift > 0
    assert np.all(np.isfinite(t.forward(x)))
    with pytest.raises(CandidateFailure, match="explicit lambda"):
        resolve_predictor_transforms(_spec(xt=tr.Transform("box_cox")), prep)


def test_term_label_is_column_equals_level():
    assert term_label("soil", "loam") == "soil=loam"


def test_levels_name_the_dummies_of_every_level_but_the_reference():
    lv = Levels(("clay", "loam", "sand"), "loam")
    # source: pandas.get_dummies with the reference column dropped (treatment coding)
    import pandas as pd

    dummies = pd.get_dummies(pd.Categorical(["clay", "loam", "sand"])).drop(columns="loam")
    assert lv.others == tuple(dummies.columns)
