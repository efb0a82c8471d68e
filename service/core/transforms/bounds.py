"""Numbers every family and the request schema share: parameter bounds, floors, the ladder."""

from __future__ import annotations

import numpy as np

#: the ladder of powers (Tukey 1977): -1 reciprocal, -0.5, 0 log, 0.5 sqrt, 1 identity, 2 square
LADDER = (-1.0, -0.5, 0.0, 0.5, 1.0, 2.0)
#: how close a power must be to a rung to be read as that rung
LADDER_EPS = float(np.spacing(1.0)) * 64
# Box-Cox / Yeo-Johnson lambdas with |lambda| below this are the log (lambda 0), and a
# Yeo-Johnson lambda this close to 2 is 2: the inverses raise to the power 1/lambda, whose
# cost and range grow without bound as lambda -> 0, while the scale differs from the log's
# by less than lambda (log y)^2 / 2.  A power exponent must be at least this far from 0.
PARAM_FLOOR = 1e-3
EXPONENT_FLOOR = PARAM_FLOOR

#: bounds of the parameters a request may send (the request schema uses the same numbers)
SHIFT_BOUND = 1e15
EXPONENT_BOUND = 10.0
LAMBDA_BOUND = 5.0
REFERENCE_MAX_CHARS = 256
