"""Short, specific cautions that travel with every selection result."""

from __future__ import annotations


def selection_cautions(metric: str, any_transformed_response: bool) -> list[str]:
    out = [
        "P-values and confidence intervals are conditional on the selected specification; "
        "because the scale was chosen from these data they are optimistic.",
        "Predictions outside the range of the data are extrapolations that the fit does not "
        "support; back-transforms (exp, powers) magnify their error.",
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
    if metric == "rmse":
        out.append(
            "The cross-validated error scores the smeared mean on the original scale; "
            "use metric 'mae' to score medians instead."
        )
    return out
