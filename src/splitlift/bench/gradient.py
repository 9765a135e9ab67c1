"""Speed and memory benchmark of the gradient-based estimators.

Run on synthetic multi-index data with a known subspace, so that accuracy
(the largest principal angle to the truth) is reported beside time and
memory. Meant for ``splitlift bench``, not for the timed test suite.
"""

from __future__ import annotations

import numpy as np

from ..estimators import AverageDerivative, GradientOuterProduct
from ..geometry import principal_angles
from ._timing import timed_with_memory


def synthetic_index_data(n_samples: int, n_features: int, n_indices: int, seed: int = 0):
    """Synthetic Gaussian inputs and a response driven by ``n_indices`` hidden directions.

    With index values ``t = B^T x`` for a random orthonormal ``B`` (d x s),
    the response is ``t_1^2 + 2 sin(t_2) + t_3 + ...`` (the pattern repeats
    with period 3) plus Gaussian noise of standard deviation 0.2. With one
    index it is ``exp(t_1 / 2)`` plus noise, a monotone single-index model.

    Returns
    -------
    X : ndarray of shape (n_samples, n_features)
    y : ndarray of shape (n_samples,)
    basis : ndarray of shape (n_features, n_indices)
    """
    rng = np.random.default_rng(seed)
    basis = np.linalg.qr(rng.standard_normal((n_features, n_indices)))[0]
    X = rng.standard_normal((n_samples, n_features))
    index = X @ basis
    if n_indices == 1:
        signal = np.exp(index[:, 0] / 2)
    else:
        parts = (np.square, lambda t: 2 * np.sin(t), lambda t: t)
        signal = sum(parts[j % 3](index[:, j]) for j in range(n_indices))
    y = signal + 0.2 * rng.standard_normal(n_samples)
    return X, y, basis


def _measure(estimator, X, y, basis) -> dict:
    seconds, peak = timed_with_memory(lambda: estimator.fit(X, y))
    return {
        "n_samples": int(X.shape[0]),
        "n_features": int(X.shape[1]),
        "dim": int(estimator.dim_),
        "seconds": round(seconds, 3),
        "largest_angle_degrees": round(
            float(np.degrees(principal_angles(estimator.basis_, basis)[0])), 3
        ),
        "peak_memory_mb": round(peak / 2**20, 1),
        "data_memory_mb": round(X.nbytes / 2**20, 1),
    }


def benchmark_gradient_methods(
    n_opg: int = 100_000,
    n_ade: int = 20_000,
    n_features: int = 20,
    dim: int = 3,
    seed: int = 0,
) -> dict:
    """Time the outer product of gradients and density-weighted ADE with their defaults.

    Parameters
    ----------
    n_opg : int, default 100_000
        Rows for :class:`GradientOuterProduct` (``dim`` hidden directions).
    n_ade : int, default 20_000
        Rows for density-weighted :class:`AverageDerivative` (one hidden
        direction; the method is quadratic in the number of rows).
    n_features : int, default 20
    dim : int, default 3
    seed : int, default 0

    Returns
    -------
    dict
        ``{"outer_product_of_gradients": {...}, "average_derivative": {...}}``,
        each with ``seconds`` (wall time of ``fit``), ``largest_angle_degrees``
        (to the true subspace), ``peak_memory_mb`` (peak of memory allocated
        during ``fit``, by :mod:`tracemalloc`), ``data_memory_mb`` (the size
        of ``X``) and the problem size. The synthetic data are described in
        :func:`synthetic_index_data`.

    Examples
    --------
    >>> result = benchmark_gradient_methods(n_opg=2000, n_ade=500, n_features=5, dim=2)
    >>> sorted(result["outer_product_of_gradients"])[:3]
    ['data_memory_mb', 'dim', 'largest_angle_degrees']
    """
    X, y, basis = synthetic_index_data(n_opg, n_features, dim, seed)
    opg = _measure(GradientOuterProduct(dim=dim, random_state=seed), X, y, basis)
    X, y, basis = synthetic_index_data(n_ade, n_features, 1, seed)
    ade = _measure(AverageDerivative(dim=1), X, y, basis)
    return {"outer_product_of_gradients": opg, "average_derivative": ade}
