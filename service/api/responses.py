"""Response bodies of the HTTP contract, as JSON Schema for the OpenAPI document.

The core builds responses as plain dicts; these models only describe them (service/api/openapi.py
puts their schemas in the document, and the fuzz tests check every response against them).
Every object admits more fields than listed: the contract only ever adds fields.  Numbers are
finite or ``null``.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

Num = float | None  # a finite number, or null where it cannot be computed


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class ProblemItem(_Open):
    pointer: str = Field(
        ..., description="JSON Pointer (RFC 6901) into the request; '' is the whole body"
    )
    detail: str = Field(..., description="what is wrong there, in one sentence")


class Problem(_Open):
    """RFC 9457 problem details (media type application/problem+json)."""

    type: str = Field(..., description="problem type URI, urn:bestscale:problem:<kind>")
    title: str = Field(..., description="short summary of the problem type")
    status: int = Field(..., ge=400, le=599, description="the HTTP status code")
    detail: str = Field(..., description="what went wrong with this request, in one sentence")
    errors: list[ProblemItem] = Field(..., description="one entry per offending field")
    request_id: str | None = Field(None, description="the request's X-Request-ID")
    instance: str | None = Field(None, description="the request path")


class TransformOut(_Open):
    name: str = Field(..., description="transform name (see GET /v1/transforms)")


class ColumnSpecOut(_Open):
    column: str
    transform: TransformOut


class SpecificationOut(_Open):
    response: ColumnSpecOut
    predictors: list[ColumnSpecOut]
    intercept: bool


class DataSummary(_Open):
    rows_received: int = Field(..., ge=0)
    rows_used: int = Field(..., ge=0)
    rows_dropped: int = Field(..., ge=0)
    dropped: list[dict[str, Any]] = Field(..., description="dropped rows and why (capped)")


class SearchSummary(_Open):
    complete: bool = Field(
        ...,
        description="false when the search stopped at a limit before "
        "every candidate was scored; the ranking is the best so far",
    )
    elapsed_s: float = Field(..., ge=0)
    candidates_considered: int | None = Field(None, ge=0)
    candidates_scored: int | None = Field(None, ge=0)
    band: dict[str, Any] | None = Field(
        None,
        description="the one band of the ranking: lowest_cv_value, std_error_of_lowest, "
        "threshold (the lowest CV error plus the standard error of the lowest-error "
        "candidate), rule and source",
    )
    distinct_scales: dict[str, Any] | None = Field(
        None,
        description="how estimated scales were listed: read_as_ladder (estimates whose 95% "
        "interval holds a ladder value, listed as that value), estimated_listed, "
        "estimated_not_listed, rule",
    )
    box_cox: dict[str, Any] | None = Field(
        None,
        description="the response's Box-Cox lambda on the untransformed predictors with its "
        "95% interval; when rank 1's response scale differs, on_rank_1_design and a context "
        "sentence (lambda depends on the predictor scales)",
    )


class CVOut(_Open):
    metric: Literal["rmse", "mae", "mape"]
    value: Num
    std_error: Num
    scale: Literal["original"]
    folds: int
    repeats: int
    scheme: Literal["random", "blocked"] = Field(
        "random", description="how the folds were formed (validation.scheme)"
    )


class FitOut(_Open):
    n: int
    r_squared: Num
    adj_r_squared: Num
    residual_sd: Num = Field(
        ..., description="residual standard deviation on the model (response-transform) scale"
    )
    df_residual: int | float
    log_likelihood_original_scale: Num
    aic_original_scale: Num
    bic_original_scale: Num


class CoefficientOut(_Open):
    term: str
    estimate: Num
    std_error: Num
    t_statistic: Num
    p_value: Num
    ci_low: Num
    ci_high: Num
    std_error_hc3: Num = Field(
        None, description="HC3 heteroscedasticity-consistent standard error (every entry)"
    )
    t_statistic_hc3: Num = None
    p_value_hc3: Num = Field(None, description="t with the residual degrees of freedom")
    ci_low_hc3: Num = None
    ci_high_hc3: Num = None
    std_error_hac: Num = Field(
        None,
        description="Newey-West HAC standard error; only with an order column "
        "(lags in inference.hac_lags)",
    )
    t_statistic_hac: Num = None
    p_value_hac: Num = None
    ci_low_hac: Num = None
    ci_high_hac: Num = None


class InferenceOut(_Open):
    """Which standard errors the interpretation sentences and the report use."""

    standard_errors: Literal["classical", "hc3", "hac"] = Field(
        ...,
        description="hac when independence fails in the order column's order, hc3 when "
        "equal variance fails, otherwise classical",
    )
    reason: str
    hac_lags: int | None = Field(
        None, description="Newey-West lags, floor(4 (n/100)^(2/9)); only with an order column"
    )
    hac_lag_rule: str | None = None
    prediction_intervals: Literal["normal", "cv_plus"] = Field(
        ...,
        description="interval_method /v1/predictions uses for this entry's model when the "
        "request leaves it out: cv_plus when normality fails, otherwise normal",
    )
    prediction_interval_reason: str = Field(..., description="why, in one clause")


class ConditionTestOut(_Open):
    name: str
    statistic: Num
    p_value: Num


class ConditionOut(_Open):
    holds: bool | None = Field(..., description="null where the condition cannot be tested")
    tests: list[ConditionTestOut]
    note: str


class ConditionsOut(_Open):
    linearity: ConditionOut
    normality: ConditionOut
    equal_variance: ConditionOut
    independence: ConditionOut
    multicollinearity: ConditionOut
    influence: ConditionOut


class ScoreOut(_Open):
    """How the rank was decided.  There is no single score value: the order is the band
    rule (``search.band``), then simplicity, conditions and error, as ``parts`` states."""

    cv_ratio: Num = Field(
        ..., description="this entry's CV error divided by the lowest in the list (1 = lowest)"
    )
    parts: dict[str, Any] = Field(
        ...,
        description="the numbers and the rule that placed it: cv_value, best_cv_value, "
        "one_se_threshold (the request's one band threshold), within_one_se, simplicity "
        "{estimated, readability, transformed_columns}, conditions_failed, rule",
    )


class EntryOut(_Open):
    """One specification with its fit, diagnostics and model artifact."""

    specification: SpecificationOut
    equation: str
    cv: CVOut
    fit: FitOut
    coefficients: list[CoefficientOut]
    conditions: ConditionsOut
    score: ScoreOut
    inference: InferenceOut
    interpretation: list[str]
    model: dict[str, Any] = Field(
        ...,
        description="self-contained fitted model; send it back unchanged to POST /v1/predictions",
    )
    warnings: list[str]


class RankedEntryOut(EntryOut):
    rank: int = Field(..., ge=1, description="1 = best")


class DifferenceOut(_Open):
    value: Num
    std_error: Num


class IncumbentOut(_Open):
    specification: dict[str, Any] | None
    rank: int | None
    cv: CVOut | None
    difference: DifferenceOut | None
    decision: Literal["keep", "switch"]
    reason: str


class SelectionResponse(_Open):
    """The ranking (or, with group_by, one body per group under ``groups``)."""

    service_version: str
    data: DataSummary
    search: SearchSummary
    ranking: list[RankedEntryOut]
    incumbent: IncumbentOut | None = None
    groups: dict[str, dict[str, Any]] | None = Field(
        None,
        description="with group_by: group value -> a selection body without groups, or "
        "{'problem': Problem} for a group that could not be modelled",
    )
    trust: dict[str, Any] | None = None
    cautions: list[str]
    warnings: list[str]


class ModelScaleOut(_Open):
    mean: Num = Field(..., description="fitted mean of the transformed response")
    interval_low: Num = Field(..., description="low end of the prediction interval")
    interval_high: Num = Field(..., description="high end of the prediction interval")


class PredictionOut(_Open):
    mean: Num = Field(..., description="smeared mean on the original scale")
    median: Num = Field(..., description="median (plain inverse) on the original scale")
    lower: Num
    upper: Num
    model_scale: ModelScaleOut = Field(
        ..., description="the prediction on the model (response-transform) scale"
    )
    extrapolation: bool = Field(
        ..., description="true when the row lies outside the training range or has high leverage"
    )


class PredictionsResponse(_Open):
    predictions: list[PredictionOut] = Field(..., description="one per input row, in order")
    interval: float = Field(..., description="coverage of the prediction intervals")
    interval_method: Literal["normal", "cv_plus"] = Field(
        ...,
        description="normal: t interval on the model scale; cv_plus: CV+ (Barber, Candes, "
        "Ramdas & Tibshirani 2021) from the model's out-of-fold residuals",
    )
    interval_method_reason: str = Field(
        ...,
        description="why, in one clause: asked for in the request, or the model's condition "
        "results (cv_plus when normality fails)",
    )
    warnings: list[str]
    cautions: list[str] = Field(
        ...,
        description="only those that apply: extrapolation when a row is flagged, mean "
        "versus median when the response is transformed",
    )


class PlotsOut(_Open):
    residuals_fitted: dict[str, Any]
    normal_quantiles: dict[str, Any]
    spread_fitted: dict[str, Any]
    influence: dict[str, Any]
    partial_residuals: list[dict[str, Any]]


class DiagnosticsResponse(EntryOut):
    service_version: str
    data: DataSummary
    plots: PlotsOut


class TransformInfo(_Open):
    name: str
    parameters: list[Any]
    domain: str
    reading: str


class TransformsResponse(_Open):
    transforms: list[TransformInfo]
    ladder: list[float]


class HealthResponse(_Open):
    status: Literal["ok"]
    service_version: str


RESPONSE_MODELS = (
    Problem,
    SelectionResponse,
    PredictionsResponse,
    DiagnosticsResponse,
    TransformsResponse,
    HealthResponse,
)
