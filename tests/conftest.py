"""Shared test set-up: single-threaded BLAS, as the service runs it."""

from threadpoolctl import threadpool_limits

threadpool_limits(limits=1)
