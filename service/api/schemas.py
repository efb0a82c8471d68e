"""Request bodies of the HTTP contract (pydantic).  Responses are plain dicts built by the core
(their schemas for the OpenAPI document are in responses.py).

Validation is strict: JSON types must match (``"5"`` is not an integer, ``"0.05"`` not a
number, ``1`` not a boolean), numbers must be finite, unknown fields are refused.  Rules that
need the table (a column exists, a value is positive) are the core's.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    StringConstraints,
    field_validator,
    model_validator,
)

from ..core import transforms as tr
from ..core.conditions import DEFAULT_ALPHA
from ..core.data import DecodedColumns
from ..core.errors import InputError, Option
from ..core.folds import DEFAULT_SEED
from ..selection.defaults import (
    DEFAULT_FOLDS,
    DEFAULT_METRIC,
    DEFAULT_REPEATS,
    DEFAULT_SCHEME,
    DEFAULT_STRATEGY,
    DEFAULT_TOP,
)
from ..selection.plots import PLOT_MAX_POINTS
from ..selection.strategy import EXHAUSTIVE_LIMIT

if TYPE_CHECKING:
    TransformName = str
else:  # the registry's names, in its order (the enum of the OpenAPI document)
    TransformName = Literal[tr.ALL_NAMES]
ColumnName = Annotated[str, StringConstraints(min_length=1, max_length=256)]


class _Strict(BaseModel):
    model_config = ConfigDict(
        extra="forbid", allow_inf_nan=False, populate_by_name=True, strict=True
    )


class DataIn(_Strict):
    """The table: exactly one of ``columns``, ``records`` or ``csv``; ``null`` marks a missing value."""

    columns: dict[str, list[Any]] | None = Field(
        None,
        description="column-oriented: {name: [v, ...]} with one value per row in every "
        "column; the preferred, fastest layout. Values are numbers, strings (categorical "
        "levels) or null (missing)",
        examples=[
            {
                "repair_cost": [1520.5, 980.0, 4310.2],
                "pipe_length_m": [40, 25, 120],
                "soil": ["clay", "loam", "clay"],
            }
        ],
    )
    records: list[dict[str, Any]] | None = Field(
        None,
        description="row-oriented: [{name: v, ...}, ...]; a key missing from a record "
        "is an error, null is a missing value",
        examples=[
            [
                {"repair_cost": 1520.5, "pipe_length_m": 40, "soil": "clay"},
                {"repair_cost": 980.0, "pipe_length_m": 25, "soil": "loam"},
            ]
        ],
    )
    csv: str | None = Field(
        None,
        min_length=1,
        description="CSV text with a header row (comma-separated, RFC 4180 "
        "quoting); empty cells are missing",
        examples=["repair_cost,pipe_length_m,soil\n1520.5,40,clay\n980.0,25,loam\n"],
    )

    @field_validator("columns", mode="wrap")
    @classmethod
    def _decoded(cls, value: Any, handler: Any) -> Any:
        """Columns decoded from an uploaded typed file are already typed (numeric columns
        as float64 arrays, no Python object per cell): kept as they are.  A JSON body
        cannot produce them, so what a caller sends is validated as declared."""
        if isinstance(value, DecodedColumns):
            return value
        return handler(value)

    @model_validator(mode="after")
    def _exactly_one(self):
        given = [k for k in ("columns", "records", "csv") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError(
                "data needs exactly one of 'columns', 'records' or 'csv' "
                f"(got {', '.join(given) if given else 'none'})"
            )
        return self

    def as_dict(self) -> dict:
        return {"columns": self.columns, "records": self.records, "csv": self.csv}


class TransformIn(_Strict):
    """A transformation: ``{"name": NAME, ...parameters}``.  ``shift`` applies only to log,
    ``exponent`` only to power (and is required there), ``lambda`` only to box_cox and
    yeo_johnson, ``reference`` only to categorical."""

    name: TransformName = Field(
        ..., description="transform name (GET /v1/transforms lists them)", examples=["log"]
    )
    shift: (
        Annotated[float, Field(ge=-tr.SHIFT_BOUND, le=tr.SHIFT_BOUND)] | Literal["auto"] | None
    ) = Field(
        None,
        description="log only: a constant added before the log (log(x + shift)), or "
        '"auto" to let the service choose one when the column has zeros (half the '
        "smallest positive value). An explicitly requested log without a shift needs "
        "values > 0; a column with zeros or negatives is then a 422 naming the first row",
        examples=[0.5, "auto"],
    )
    exponent: float | None = Field(
        None,
        ge=-tr.EXPONENT_BOUND,
        le=tr.EXPONENT_BOUND,
        description="power only: the exponent, with 0.001 <= |exponent| <= 10 "
        "(use log for 0); required in a specification, "
        "omitted in transforms.predictors to estimate the power",
        examples=[0.5],
    )
    lambda_: float | None = Field(
        None,
        alias="lambda",
        ge=-tr.LAMBDA_BOUND,
        le=tr.LAMBDA_BOUND,
        description="box_cox / yeo_johnson: a fixed lambda in [-5, 5]; "
        "|lambda| < 0.001 is treated as 0 (the log), and for yeo_johnson |lambda - 2| < "
        "0.001 as 2, also for estimated lambdas; omit to estimate it from the data",
        examples=[0.25],
    )
    reference: str | None = Field(
        None,
        min_length=1,
        max_length=tr.REFERENCE_MAX_CHARS,
        description="categorical only: the baseline level",
        examples=["clay"],
    )
    estimated: bool | None = Field(
        None,
        description="in a response: the service estimated "
        "this parameter from the data. In transforms.predictors, "
        "{'name': 'power', 'estimated': true} (no exponent) asks the "
        "search to estimate the predictor's power (Box-Tidwell); "
        "elsewhere it is informational",
    )

    @model_validator(mode="after")
    def _params(self):
        if self.name == "power":
            if self.exponent is None:  # a search option: estimate the power (specifications
                return self  # refuse it, see _FixedPower)
            if abs(self.exponent) < tr.EXPONENT_FLOOR:
                raise ValueError(
                    f"power 'exponent' {self.exponent:g} is too close to 0: it must satisfy "
                    f"{tr.EXPONENT_FLOOR:g} <= |exponent| <= {tr.EXPONENT_BOUND:g} (use log, the limit at 0)"
                )
        for field, value in (  # the families that take each parameter, from the registry
            ("exponent", self.exponent),
            ("shift", self.shift),
            ("lambda", self.lambda_),
            ("reference", self.reference),
        ):
            owners = tr.families_with_parameter(field)
            if value is not None and self.name not in owners:
                raise ValueError(
                    f"'{field}' applies only to {' and '.join(owners)}, not {self.name}"
                )
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


class _FixedPower(_Strict):
    """A specification's transform must be complete: a power needs its exponent."""

    @model_validator(mode="after")
    def _fixed(self):
        if self.transform.name == "power" and self.transform.exponent is None:
            raise ValueError(
                "a power in a specification needs its 'exponent' (to estimate one "
                "from the data, search with transforms.predictors: "
                "{'name': 'power', 'estimated': true})"
            )
        return self


class ResponseSpecIn(_FixedPower):
    column: ColumnName = Field(..., description="the response column", examples=["repair_cost"])
    transform: TransformIn = Field(
        default_factory=lambda: TransformIn(name="identity"),
        description="its transform; default identity (categorical is for predictors only)",
    )

    @model_validator(mode="after")
    def _numeric(self):
        if self.transform.name == "categorical":
            raise ValueError(
                "the response cannot be categorical: it is modelled as a number; give it a "
                "numeric transform such as identity or log"
            )
        return self


class PredictorSpecIn(_FixedPower):
    column: ColumnName = Field(..., description="a predictor column", examples=["pipe_length_m"])
    transform: TransformIn = Field(
        default_factory=lambda: TransformIn(name="identity"),
        description="its transform; default identity ('categorical' for a grouping column)",
    )


class SpecificationIn(_Strict):
    """A structured model specification (no formula strings)."""

    response: ResponseSpecIn = Field(..., description="the response and its transform")
    predictors: list[PredictorSpecIn] = Field(
        ..., min_length=1, description="the predictors and their transforms"
    )
    intercept: bool = Field(True, description="fit an intercept")

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "response": {"column": "repair_cost", "transform": {"name": "log"}},
                    "predictors": [
                        {"column": "pipe_length_m", "transform": {"name": "log"}},
                        {"column": "pipe_age_years", "transform": {"name": "identity"}},
                        {
                            "column": "soil",
                            "transform": {"name": "categorical", "reference": "clay"},
                        },
                    ],
                    "intercept": True,
                }
            ]
        }
    )

    def as_dict(self) -> dict:
        return {
            "response": {
                "column": self.response.column,
                "transform": self.response.transform.as_dict(),
            },
            "predictors": [
                {"column": p.column, "transform": p.transform.as_dict()} for p in self.predictors
            ],
            "intercept": self.intercept,
        }


class ValidationIn(_Strict):
    folds: int = Field(
        DEFAULT_FOLDS, ge=2, le=50, description="K in K-fold cross-validation", examples=[5]
    )
    repeats: int = Field(
        DEFAULT_REPEATS,
        ge=1,
        le=50,
        description="repeated K-fold: number of partitions",
        examples=[2],
    )
    seed: int = Field(
        DEFAULT_SEED,
        ge=0,
        le=2**32 - 1,
        description="seed of the partitions (the same "
        "seed gives the same folds and so the same ranking)",
        examples=[0],
    )
    metric: Literal["rmse", "mae", "mape"] = Field(
        DEFAULT_METRIC,
        description="error on the original response scale: rmse scores the smeared mean, "
        "mae and mape the median (naive inverse)",
        examples=["rmse"],
    )
    scheme: Literal["random", "blocked"] = Field(
        DEFAULT_SCHEME,
        description="random: shuffled K-fold (seeded); blocked: K contiguous folds in the "
        "order of the 'order' column (row order without one), for ordered data whose "
        "neighbours are correlated; blocked has one partition, so repeats must be 1",
        examples=["random"],
    )

    def check_scheme(self) -> None:
        """Options that contradict the fold scheme: a 422 naming the field."""
        if self.scheme == "blocked" and self.repeats != 1:
            raise InputError.at(
                Option("validation.repeats"),
                f"repeats {self.repeats} cannot be used with validation.scheme 'blocked': "
                "contiguous folds form a single partition; send repeats 1 or scheme 'random'",
            )


TransformChoice = TransformName | TransformIn


class TransformsIn(_Strict):
    response: list[TransformChoice] | None = Field(
        None,
        description="response transforms to search (names or full transforms); "
        "default: every applicable one",
        examples=[["identity", "log", "sqrt", "box_cox"]],
    )
    predictors: list[TransformChoice] | dict[str, list[TransformChoice]] | None = Field(
        None,
        description="numeric predictor transforms to search: one list for all, or "
        "{column: list}; default: identity, log, sqrt, reciprocal, square where applicable",
        examples=[
            ["identity", "log"],
            {"pipe_length_m": ["identity", "log"], "pipe_age_years": ["identity"]},
        ],
    )


class TrustIn(_Strict):
    """Optional (costly) measures of how much to trust the choice."""

    stability: bool = Field(
        False,
        description="share of bootstrap resamples in which the "
        "returned rank-1 specification is still ranked first, with the runner-up",
    )
    optimism: bool = Field(
        False,
        description="gap between the winner's CV error and a nested "
        "cross-validation estimate of the whole selection procedure's error",
    )
    resamples: int | None = Field(
        None, ge=1, le=1000, description="bootstrap resamples for stability (default 20)"
    )


class LimitsIn(_Strict):
    max_candidates: int | None = Field(
        None,
        ge=1,
        description="most candidates to score (the service's limit applies; 422 past it)",
        examples=[500],
    )
    time_limit_s: float | None = Field(
        None,
        gt=0,
        description="stop the search after this many "
        "seconds and return the best ranking so far with "
        "search.complete = false (503 if no candidate finished); "
        "the service's limit applies",
        examples=[30],
    )


class SelectionRequest(_Strict):
    data: DataIn = Field(..., description="the table")
    response: ColumnName = Field(..., description="response column", examples=["repair_cost"])
    predictors: list[ColumnName] = Field(
        ...,
        min_length=1,
        description="predictor columns; non-numeric ones are categorical",
        examples=[["pipe_length_m", "pipe_age_years", "soil"]],
    )
    categorical: list[ColumnName] = Field(
        default_factory=list,
        description="predictors to treat as categorical even if numeric",
        examples=[["district"]],
    )
    order: ColumnName | None = Field(
        None,
        description="column giving observation order (time, sequence); enables independence tests",
        examples=["repair_date"],
    )
    transforms: TransformsIn = Field(
        default_factory=TransformsIn, description="which transforms to search"
    )
    validation: ValidationIn = Field(
        default_factory=ValidationIn, description="cross-validation settings"
    )
    alpha: float = Field(
        DEFAULT_ALPHA,
        gt=0,
        lt=0.5,
        description="significance level of condition tests",
        examples=[0.05],
    )
    top: int = Field(
        DEFAULT_TOP, ge=1, le=100, description="ranked specifications to return", examples=[5]
    )
    limits: LimitsIn = Field(default_factory=LimitsIn, description="search budget")
    trust: TrustIn = Field(
        default_factory=TrustIn,
        description="optional stability and "
        "optimism measures (they repeat the search, so they cost more)",
    )
    intercept: bool = Field(True, description="fit an intercept")
    group_by: ColumnName | None = Field(
        None, description="run one selection per value of this column", examples=["region"]
    )
    units: dict[str, Annotated[str, StringConstraints(max_length=100)]] = Field(
        default_factory=dict,
        description="{column: unit text} used in interpretation sentences",
        examples=[{"pipe_length_m": "metre", "repair_cost": "currency units"}],
    )
    strategy: Literal["auto", "exhaustive", "screened"] = Field(
        DEFAULT_STRATEGY,
        description="how the candidate space is searched: 'exhaustive' scores every "
        "candidate, simplest first, until a limit; 'screened' screens each predictor's scale on "
        "the model scale and descends over combinations (see search.strategy in the response); "
        f"'auto' is exhaustive up to {EXHAUSTIVE_LIMIT} candidates and screened past that",
        examples=["auto"],
    )
    incumbent: SpecificationIn | None = Field(
        None,
        description="the specification in use (e.g. last month's), scored on the same "
        "folds; the response tells whether to keep it",
    )


class DiagnosticsRequest(_Strict):
    # POST /v1/diagnostics (no docstring: it would become the schema's description)
    data: DataIn
    specification: SpecificationIn
    alpha: float = Field(
        DEFAULT_ALPHA, gt=0, lt=0.5, description="significance level of condition tests"
    )
    order: str | None = Field(
        None, description="column giving observation order; enables independence tests"
    )
    categorical: list[str] = Field(
        default_factory=list, description="predictors to treat as categorical even if numeric"
    )
    validation: ValidationIn = Field(default_factory=ValidationIn)
    units: dict[str, str] = Field(default_factory=dict)
    max_points: int = Field(
        PLOT_MAX_POINTS,
        ge=50,
        le=20000,
        description="points per plot (thinned for plotting only; tests use every row)",
    )


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
