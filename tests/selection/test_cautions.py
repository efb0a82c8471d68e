"""Cautions (service/selection/cautions.py): each given only where it applies.

Source: product rule (where results can mislead a decision the output says so: selection
makes p-values optimistic, association is not causation, mean versus median on a transformed
response, no extrapolation) and Duan (1983) for what the smeared mean rests on.
"""

from __future__ import annotations

from typing import get_args

from service.api.schemas import ValidationIn
from service.selection.cautions import (
    EXTRAPOLATION,
    READINGS,
    prediction_cautions,
    selection_cautions,
)


def test_cautions_only_where_they_apply():
    # source: product rule (cautions that apply to the request, naming the metric used)

    rmse = selection_cautions("rmse", True)
    assert EXTRAPOLATION not in rmse  # a selection makes no predictions
    assert any("RMSE scores the smeared mean" in c for c in rmse)
    assert any("MAE scores the median" in c for c in selection_cautions("mae", True))
    assert not any("median" in c for c in selection_cautions("rmse", False))
    assert prediction_cautions(False, True) == [EXTRAPOLATION]
    assert prediction_cautions(False, False) == []


def test_every_selection_names_optimism_and_association():
    for metric in ("rmse", "mae", "mape"):
        for transformed in (True, False):
            text = " ".join(selection_cautions(metric, transformed))
            assert "optimistic" in text and "not the effect" in text


def test_on_an_untransformed_response_mean_and_median_are_not_mentioned():
    assert not any("median" in c for c in selection_cautions("mae", False))
    assert len(selection_cautions("mae", True)) == len(selection_cautions("mae", False)) + 2


def test_prediction_cautions_in_their_order():
    both = prediction_cautions(True, True)
    assert both[0] == EXTRAPOLATION and "Duan 1983" in both[1] and len(both) == 2
    assert prediction_cautions(True, False) == both[1:]


def test_every_metric_a_request_may_name_has_its_reading():
    allowed = set(get_args(ValidationIn.model_fields["metric"].annotation))
    assert {r.metric for r in READINGS} == allowed
    for r in READINGS:
        # the scored prediction: RMSE the mean, MAE and MAPE the median (Duan 1983; common
        # practice for absolute errors)
        (line,) = [c for c in selection_cautions(r.metric, True) if "cross-validated" in c]
        assert r.metric.upper() in line and r.instead in line
