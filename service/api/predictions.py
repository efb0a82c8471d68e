"""POST /v1/predictions: predictions on the original scale from a model the service issued."""

from __future__ import annotations

from typing import Any, Literal

from fastapi import APIRouter
from pydantic import BaseModel, ConfigDict, Field

from ..core.predict import load_model, predict
from ..selection.cautions import prediction_cautions
from ..settings import get_settings
from .encode import JSONBody
from .intake import check_table
from .middleware import note_result
from .pool import compute_slot
from .routing import StrictRoute
from .schemas import DataIn

router = APIRouter(route_class=StrictRoute)


class PredictionRequest(BaseModel):
    """A model artifact exactly as issued (``ranking[i].model``), rows to predict, a level."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, strict=True)

    model: dict[str, Any] = Field(..., description="a ranking entry's 'model', sent back unchanged")
    data: DataIn = Field(..., description="rows to predict: every predictor column of the model")
    interval: float = Field(0.95, gt=0, lt=1, description="coverage of the prediction interval")
    interval_method: Literal["normal", "cv_plus"] | None = Field(
        None,
        description="normal: t interval on the model scale (normal errors); cv_plus: CV+ "
        "interval from the out-of-fold residuals stored in the model (no normality needed). "
        "Left out: cv_plus when normality fails on the model's entry, else normal",
    )


def run_prediction_request(req: PredictionRequest) -> dict:
    data = req.data.as_dict()
    check_table(data)
    model = load_model(req.model, get_settings().model_keys())
    out = predict(model, data, req.interval, req.interval_method)
    out["cautions"] = prediction_cautions(
        not model.spec.response_transform.is_identity,
        any(p["extrapolation"] for p in out["predictions"]),
    )
    return out


@router.post(
    "/v1/predictions",
    response_class=JSONBody,
    tags=["prediction"],
    summary="Mean, median and prediction interval on the original scale from a model",
)
def post_predictions(req: PredictionRequest):
    with compute_slot():
        body = run_prediction_request(req)
    note_result(body)
    return JSONBody(body)
