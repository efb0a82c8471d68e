"""Short, specific cautions, each given only where it applies to the request."""

from __future__ import annotations

EXTRAPOLATION = (
    "Predictions outside the range of the data are extrapolations that the fit does not "
    "support; back-transforms (exp, powers) magnify their error."
)

_SCORED = {
    "rmse": "RMSE scores the smeared mean (Duan 1983)",
    "mae": "MAE scores the median (the plain inverse)",
    "mape": "MAPE scores the median (the plain inverse)",
}
_OTHER = {
    "rmse": "metric 'mae' or 'mape' scores medians instead",
    "mae": "metric 'rmse' scores the smeared mean instead",
    "mape": "metric 'rmse' scores the smeared mean instead",
}


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
        if metric in _SCORED:
            out.append(
                f"The cross-validated {_SCORED[metric]} on the original scale; {_OTHER[metric]}."
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
