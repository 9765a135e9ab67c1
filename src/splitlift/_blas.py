"""BLAS on one thread for the thin products that compiled, threaded passes follow."""

from __future__ import annotations

from functools import cache

from threadpoolctl import ThreadpoolController


@cache
def _controller() -> ThreadpoolController:
    return ThreadpoolController()


def one_blas_thread():
    """A context in which BLAS runs on one thread (threadpoolctl), restored afterwards.

    OpenBLAS's worker threads spin for a while after a product. On a small
    machine they then take the cores from the compiled threads that follow:
    they made a 40 ms forest prediction take 65 ms, and the compiled pass of
    pHd at n = 1e6, d = 20 take 50 ms instead of 34, on two cores. A thin
    product (few columns, so a small output) gains little from BLAS threads:
    ``X.T @ X`` at that size took 24 ms on one thread and on two.
    """
    return _controller().limit(limits=1, user_api="blas")
