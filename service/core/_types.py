"""Type aliases shared by the core modules (annotations only, no behaviour)."""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any, TypeAlias

import numpy as np
from numpy.typing import NDArray

FloatArray: TypeAlias = NDArray[np.float64]
BoolArray: TypeAlias = NDArray[np.bool_]
AnyArray: TypeAlias = NDArray[Any]
# mapper(fn, items): the results of fn over items in order (builtin map or a process pool)
Mapper: TypeAlias = Callable[[Callable[[Any], Any], Iterable[Any]], Iterable[Any]]
