"""Shared test set-up: single-threaded BLAS, as the service runs it."""

import scipy.linalg  # noqa: F401  (load scipy's own BLAS so the limit below covers it too)
from threadpoolctl import threadpool_limits

threadpool_limits(limits=1)
