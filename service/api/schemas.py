"""Request bodies of the HTTP contract (pydantic).  Responses are plain dicts built by the core."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

TransformName = Literal["identity", "log", "sqrt", "reciprocal", "square", "power", "box_cox",
                        "yeo_johnson", "categorical"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, populate_by_name=True)


class DataIn(_Strict):
    """The table: exactly one of ``columns``, ``records`` or ``csv``; ``null`` marks a missing value."""

    columns: dict[str, list[Any]] | None = Field(
        None, description="column-oriented: {name: [v, ...]}; the preferred, fastest layout",
        examples=[{"cost": [120.5, 98.0], "length_m": [40, 25]}])
    records: list[dict[str, Any]] | None = Field(
        None, description="row-oriented: [{name: v, ...}, ...]")
    csv: str | None = Field(None, description="CSV text with a header row; empty cells are missing")

    @model_validator(mode="after")
    def _exactly_one(self):
        given = [k for k in ("columns", "records", "csv") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("data needs exactly one of 'columns', 'records' or 'csv' "
                             f"(got {', '.join(given) if given else 'none'})")
        return self

    def as_dict(self) -> dict:
        return {"columns": self.columns, "records": self.records, "csv": self.csv}


class TransformIn(_Strict):
    """A transformation: ``{"name": NAME, ...parameters}``."""

    name: TransformName
    shift: float | None = Field(None, description="log only: added before the log")
    exponent: float | None = Field(None, description="power only: the exponent (not 0)")
    lambda_: float | None = Field(None, alias="lambda", ge=-5, le=5,
                                  description="box_cox / yeo_johnson: fixed lambda; omit to estimate")
    reference: str | None = Field(None, description="categorical only: the baseline level")
    estimated: bool | None = Field(None, description="set by the service when a parameter was "
                                   "estimated from data; ignored on input")

    @model_validator(mode="after")
    def _params(self):
        if self.name == "power":
            if self.exponent is None:
                raise ValueError("power needs an 'exponent'")
            if abs(self.exponent) < 1e-12 or abs(self.exponent) > 10:
                raise ValueError("power 'exponent' must be non-zero and within [-10, 10] (use log for 0)")
        elif self.exponent is not None:
            raise ValueError(f"'exponent' applies only to power, not {self.name}")
        if self.shift is not None and self.name != "log":
            raise ValueError(f"'shift' applies only to log, not {self.name}")
        if self.lambda_ is not None and self.name not in ("box_cox", "yeo_johnson"):
            raise ValueError(f"'lambda' applies only to box_cox and yeo_johnson, not {self.name}")
        if self.reference is not None and self.name != "categorical":
            raise ValueError(f"'reference' applies only to categorical, not {self.name}")
        return self

    def as_dict(self) -> dict:
        d: dict = {"name": self.name}
        if self.shift is not None:
            d["shift"] = self.shift
        if self.exponent is not None:
            d["exponent"] = self.exponent
        if self.lambda_ is not None:
            d["lambda"] = self.lambda_
        if self.reference is not None:
            d["reference"] = self.reference
        return d


class ResponseSpecIn(_Strict):
    column: str
    transform: TransformIn = Field(default_factory=lambda: TransformIn(name="identity"))


class PredictorSpecIn(_Strict):
    column: str
    transform: TransformIn = Field(default_factory=lambda: TransformIn(name="identity"))


class SpecificationIn(_Strict):
    """A structured model specification (no formula strings)."""

    response: ResponseSpecIn
    predictors: list[PredictorSpecIn] = Field(..., min_length=1)
    intercept: bool = True

    def as_dict(self) -> dict:
        return {"response": {"column": self.response.column,
                             "transform": self.response.transform.as_dict()},
                "predictors": [{"column": p.column, "transform": p.transform.as_dict()}
                               for p in self.predictors],
                "intercept": self.intercept}


class ValidationIn(_Strict):
    folds: int = Field(5, ge=2, le=50, description="K in K-fold cross-validation")
    repeats: int = Field(1, ge=1, le=50, description="repeated K-fold: number of partitions")
    seed: int = Field(0, ge=0, le=2**32 - 1, description="seed of the partitions")
    metric: Literal["rmse", "mae", "mape"] = Field(
        "rmse", description="error on the original response scale: rmse scores the smeared mean, "
        "mae and mape the median (naive inverse)")


class TransformsIn(_Strict):
    response: list[TransformName | TransformIn] | None = Field(
        None, description="response transforms to search (names or full transforms); "
        "default: every applicable one")
    predictors: list[TransformName | TransformIn] | dict[str, list[TransformName | TransformIn]] | None = Field(
        None, description="numeric predictor transforms to search: one list for all, or "
        "{column: list}; default: identity, log, sqrt, reciprocal, square where applicable")


class LimitsIn(_Strict):
    max_candidates: int | None = Field(None, ge=1, description="most candidates to score")
    time_limit_s: float | None = Field(None, gt=0, description="stop the search after this many seconds")


class SelectionRequest(_Strict):
    data: DataIn
    response: str = Field(..., description="response column")
    predictors: list[str] = Field(..., min_length=1, description="predictor columns; non-numeric ones are categorical")
    categorical: list[str] = Field(default_factory=list, description="predictors to treat as categorical even if numeric")
    order: str | None = Field(None, description="column giving observation order; enables independence tests")
    transforms: TransformsIn = Field(default_factory=TransformsIn)
    validation: ValidationIn = Field(default_factory=ValidationIn)
    alpha: float = Field(0.05, gt=0, lt=0.5, description="significance level of condition tests")
    top: int = Field(5, ge=1, le=100, description="ranked specifications to return")
    limits: LimitsIn = Field(default_factory=LimitsIn)
    intercept: bool = Field(True, description="fit an intercept")
    group_by: str | None = Field(None, description="run one selection per value of this column")
    units: dict[str, str] = Field(default_factory=dict, description="{column: unit text} used in "
                                  "interpretation sentences, e.g. {'pipe_length_m': 'metre'}")
    incumbent: SpecificationIn | None = Field(
        None, description="the specification in use (e.g. last month's), scored on the same "
        "folds; the response tells whether to keep it")


def transform_items(items) -> list | dict | None:
    """TransformsIn lists as plain names / dicts for the core."""
    if items is None:
        return None
    if isinstance(items, dict):
        return {k: transform_items(v) for k, v in items.items()}
    return [i if isinstance(i, str) else i.as_dict() for i in items]

