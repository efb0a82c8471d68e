"""Shared test set-up: single-threaded BLAS, as the service runs it."""

import scipy.linalg  # noqa: F401  (loaded first so the BLAS limit below reaches scipy's BLAS too)
from threadpoolctl import threadpool_limits

threadpool_limits(limits=1)
