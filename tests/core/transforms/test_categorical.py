"""The categorical family: levels, not numbers."""

from __future__ import annotations

import numpy as np
import pytest
from service.api.render.transforms import catalogue
from service.core.transforms import NUMERIC_NAMES, Transform, read_back, written_alike


def test_categorical_has_no_numeric_map():
    t = Transform("categorical", reference="loam")
    for call in (
        lambda: t.forward(np.array([1.0])),
        lambda: t.inverse(np.array([1.0])),
        lambda: t.inverse_derivative(np.array([1.0])),
        lambda: t.derivative(np.array([1.0])),
        lambda: t.log_jacobian(np.array([1.0])),
        t.inverse_singularities,
    ):
        with pytest.raises(ValueError, match="'categorical' has no"):
            call()


def test_categorical_round_trips_its_reference_and_reads_as_the_column():
    t = Transform("categorical", reference="loam")
    assert read_back(t) == t and written_alike(t) == t
    assert read_back(Transform("categorical")) == Transform("categorical")
    assert t.label("soil") == "soil"
    assert t.domain_problem(np.array(["a", "b"], dtype=object), "soil", "predictor") is None


def test_categorical_applies_to_predictors_only():
    entry = next(e for e in catalogue() if e["name"] == "categorical")
    assert entry["applies_to"] == ["predictor"]
    assert "categorical" not in NUMERIC_NAMES
