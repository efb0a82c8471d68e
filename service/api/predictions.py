"""POST /v1/predictions: predictions on the original scale from a model the service issued."""

from __future__ import annotations

from fastapi import APIRouter

from ..core.predict import predict
from ..selection.cautions import prediction_cautions
from ..settings import get_settings
from .artifact import load_model
from .encode import JSONBody
from .middleware import note_result
from .options import prediction_job
from .pool import compute_slot
from .render import contract
from .routing import StrictRoute
from .schemas import PredictionRequest

router = APIRouter(route_class=StrictRoute)


def run_prediction_request(req: PredictionRequest) -> dict:
    job = prediction_job(req)
    model = load_model(job.model, get_settings().model_keys())
    result = predict(model, job.data, job.interval, job.interval_method)
    out: dict = contract(result)
    out["cautions"] = prediction_cautions(
        not model.spec.response_transform.is_identity, bool(result.extrapolation.any())
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
