"""Short, specific cautions, each given only where it applies to the request."""

from __future__ import annotations

from dataclasses import dataclass

EXTRAPOLATION = (
    "Predictions outside the range of the data are extrapolations that the fit does not "
    "support; back-transforms (exp, powers) magnify their error."
)


@dataclass(frozen=True)
class MetricReading:
    """What a cross-validation ``metric`` scores on the original scale, and the metric that
    scores the other prediction."""

    metric: str
    scores: str
    instead: str


READINGS = (
    MetricReading(
        "rmse",
        "RMSE scores the smeared mean (Duan 1983)",
        "metric 'mae' or 'mape' scores medians instead",
    ),
    MetricReading(
        "mae",
        "MAE scores the median (the plain inverse)",
        "metric 'rmse' scores the smeared mean instead",
    ),
    MetricReading(
        "mape",
        "MAPE scores the median (the plain inverse)",
        "metric 'rmse' scores the smeared mean instead",
    ),
)


def selection_cautions(metric: str, any_transformed_response: bool) -> list[str]:
    """Cautions of a selection: no predictions are made, so no extrapolation caution; the
    mean-versus-median caution only when some ranked response is transformed (on an
    untransformed response mean and median predictions coincide), naming ``metric``."""
    out = [
        "P-values and confidence intervals are conditional on the selected specification; "
        "because the scale was chosen from these data they are optimistic.",
        "Coefficients describe associations in these data, not the effect of changing a "
        "predictor; omitted variables and reverse dependence remain possible.",
        "Check the chosen scale against what you know about the process before acting on it; "
        "this ranking is an aid to your own review, not a substitute for it.",
    ]
    if any_transformed_response:
        out.insert(
            1,
            "On a transformed response the plain inverse gives a median; the mean "
            "(Duan smearing) relies on the residual distribution staying the same "
            "across predictor values.",
        )
        reading = next((r for r in READINGS if r.metric == metric), None)
        if reading is not None:
            out.append(
                f"The cross-validated {reading.scores} on the original scale; {reading.instead}."
            )
    return out


def prediction_cautions(transformed_response: bool, any_extrapolation: bool) -> list[str]:
    """Cautions of a prediction response: extrapolation only when some row is flagged."""
    out = []
    if any_extrapolation:
        out.append(EXTRAPOLATION)
    if transformed_response:
        out.append(
            "On a transformed response 'median' is the plain inverse and 'mean' the smeared "
            "mean (Duan 1983), which relies on the residual distribution staying the same "
            "across predictor values."
        )
    return out
