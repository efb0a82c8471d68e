"""The ``source`` of every method the JSON reports: the method's name, a colon, and the
published reference (author, year), several separated by semicolons.

One table, so tests, bands, intervals, estimated scales and plot curves cite the same way
and never name the library call that computes them.
"""

from __future__ import annotations

from dataclasses import dataclass, fields


def cite(method: str, *references: str) -> str:
    """``method: ref1; ref2``."""
    return f"{method}: {'; '.join(references)}"


RESET = cite("Ramsey RESET test", "Ramsey (1969)")
RAINBOW = cite("rainbow test", "Utts (1982)")
CURVATURE = cite(
    "curvature t-test of an added squared term, read from partial residuals",
    "Mallows (1986)",
    "Frisch & Waugh (1933)",
    "Lovell (1963)",
)
SHAPIRO_WILK = cite("Shapiro-Wilk test", "Shapiro & Wilk (1965)")
JARQUE_BERA = cite("Jarque-Bera test", "Jarque & Bera (1980)")
ANDERSON_DARLING = cite("Anderson-Darling test", "Anderson & Darling (1952)")
BREUSCH_PAGAN = cite(
    "Breusch-Pagan test, studentised form", "Breusch & Pagan (1979)", "Koenker (1981)"
)
WHITE = cite("White test", "White (1980)")
DURBIN_WATSON = cite("Durbin-Watson statistic", "Durbin & Watson (1950, 1951)")
BREUSCH_GODFREY = cite("Breusch-Godfrey test", "Breusch (1978)", "Godfrey (1978)")
LJUNG_BOX = cite("Ljung-Box test", "Ljung & Box (1978)")
GVIF = cite(
    "generalised variance inflation factor (the VIF for one column)", "Fox & Monette (1992)"
)
CONDITION_NUMBER = cite(
    "condition number of the column-scaled design", "Belsley, Kuh & Welsch (1980)"
)
COOKS_DISTANCE = cite("Cook's distance", "Cook (1977)")
LEVERAGE = cite("leverage (hat values)", "Hoaglin & Welsch (1978)")
DFFITS = cite("DFFITS", "Belsley, Kuh & Welsch (1980)")
OUTLIER_TEST = cite(
    "Bonferroni test of the largest externally studentised residual", "Cook & Weisberg (1982)"
)
ONE_SE_BAND = cite(
    "one-standard-error rule",
    "Breiman, Friedman, Olshen & Stone (1984), Classification and Regression Trees, sec. 3.4.3",
    "Hastie, Tibshirani & Friedman (2009), The Elements of Statistical Learning, 2nd ed., "
    "sec. 7.10",
)


@dataclass(frozen=True)
class _ByMethod:
    """A table of sources, one field per method name: ``TABLE[name]`` is the source of the
    method ``name`` (KeyError for a name the table does not hold)."""

    def __getitem__(self, name: str) -> str:
        if name not in {f.name for f in fields(self)}:
            raise KeyError(name)
        text: str = getattr(self, name)
        return text

    def get(self, name: str, default: str) -> str:
        """The source of ``name``, or ``default`` when the table does not hold it."""
        try:
            return self[name]
        except KeyError:
            return default


@dataclass(frozen=True)
class LambdaSources(_ByMethod):
    """How a response lambda is estimated, per transform family."""

    box_cox: str
    yeo_johnson: str


@dataclass(frozen=True)
class PowerSources(_ByMethod):
    """How a predictor power is estimated, per path of the estimate."""

    box_tidwell: str
    profile: str


@dataclass(frozen=True)
class StandardErrorSources(_ByMethod):
    """Where each kind of coefficient standard error comes from."""

    classical: str
    hc3: str
    hac: str


@dataclass(frozen=True)
class PredictionIntervalSources(_ByMethod):
    """Where each prediction-interval method comes from."""

    normal: str
    cv_plus: str


LAMBDA = LambdaSources(
    box_cox=cite(
        "profile likelihood of the Box-Cox lambda, likelihood-ratio interval", "Box & Cox (1964)"
    ),
    yeo_johnson=cite(
        "profile likelihood of the Yeo-Johnson lambda, likelihood-ratio interval",
        "Yeo & Johnson (2000)",
    ),
)
POWER = PowerSources(
    box_tidwell=cite(
        "Box-Tidwell iteration for a predictor power, Wald interval", "Box & Tidwell (1962)"
    ),
    profile=cite(
        "profile residual sum of squares over a predictor power, Wald interval",
        "Box & Tidwell (1962)",
    ),
)
STANDARD_ERRORS = StandardErrorSources(
    classical=cite("least-squares standard errors, t intervals", "Student (1908)", "Fisher (1925)"),
    hc3=cite("HC3 heteroscedasticity-consistent standard errors", "MacKinnon & White (1985)"),
    hac=cite("Newey-West HAC standard errors", "Newey & West (1987)"),
)
PREDICTION_INTERVAL = PredictionIntervalSources(
    normal=cite(
        "least-squares prediction interval on the model scale (Student t) mapped through the "
        "inverse transform, with the smeared mean",
        "Student (1908)",
        "Duan (1983)",
    ),
    cv_plus=cite(
        "CV+ interval from the out-of-fold residuals, end points mapped through each fold's "
        "inverse transform, with the smeared mean",
        "Barber, Candes, Ramdas & Tibshirani (2021)",
        "Duan (1983)",
    ),
)
BAND_CONDITIONS = cite(
    "Bonferroni inequality over every test that can reorder the band", "Dunn (1961)"
)
LOWESS = cite("LOWESS smoother", "Cleveland (1979)")
ENVELOPE_SIMULATED = cite("simulated envelope of ordered normal residuals", "Atkinson (1981)")
ENVELOPE_EXACT = cite(
    "quantiles of normal order statistics", "David & Nagaraja (2003), Order Statistics"
)
QUARTILE_LINE = cite(
    "reference line through the quartiles",
    "Chambers, Cleveland, Kleiner & Tukey (1983), Graphical Methods for Data Analysis",
)
BOOTSTRAP = cite("bootstrap of rows", "Efron (1979)")
NESTED_CV = cite("nested cross-validation of the whole selection", "Varma & Simon (2006)")
