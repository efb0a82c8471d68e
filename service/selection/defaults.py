"""Defaults of a request's options, written here once: the request schema, the service
settings and :class:`~service.selection.search_setup.SearchOptions` refer to them (the
significance level is the core's ``conditions.DEFAULT_ALPHA``, the fold seed
``folds.DEFAULT_SEED``).

A module of plain constants that imports nothing, so ``service/settings.py`` can read them
without loading numpy: ``python -m service`` reads the settings before it sets the BLAS
thread variables, which numpy reads once, when it is first imported.
"""

from __future__ import annotations

from typing import Final

DEFAULT_FOLDS: Final = 5
DEFAULT_REPEATS: Final = 1
DEFAULT_METRIC: Final = "rmse"
DEFAULT_SCHEME: Final = "random"
DEFAULT_TOP: Final = 5
DEFAULT_MAX_CANDIDATES: Final = 5000
DEFAULT_TIME_LIMIT_S: Final = 60.0
DEFAULT_STRATEGY: Final = "auto"
