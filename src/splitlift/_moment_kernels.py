"""Compiled one-pass products for the moment methods (SIR, SAVE, pHd).

A moment method needs, per slice of the response, the row count, the
mean and the scatter ``Σ (x - m)(x - m)^T`` (SAVE); pHd needs ``Σ e x x^T``
for the centred response ``e``. BLAS forms one product fast but cannot
group rows: the slices' products then cost a gather of each slice's rows
(``np.compress``), which reads and writes the whole matrix again, and the
sums more passes. These kernels read every row once and add it to its
slice's accumulators, which stay in the core's cache.

Rows are split into a fixed number of parts (a function of the row count,
never of the machine), each part summed by one thread, and the parts added
in order, so results do not depend on the number of cores. Kernels are
compiled once by numba and cached on disk, and they release the GIL.
"""

from __future__ import annotations

import numpy as np
from joblib import cpu_count
from numba import njit

from ._progress import threaded_map

#: Rows per part: a part is worth a thread only when it is this long.
_PART_ROWS = 1 << 16
#: At most this many parts (and threads).
_MAX_PARTS = 8


@njit(cache=True, nogil=True)
def _first_rows(X, labels, n_groups):
    """The first row of every group (zeros for a group with no row)."""
    shift = np.zeros((n_groups, X.shape[1]))
    seen = np.zeros(n_groups, np.bool_)
    missing = n_groups
    for i in range(X.shape[0]):
        group = labels[i]
        if not seen[group]:
            seen[group] = True
            shift[group] = X[i]
            missing -= 1
            if missing == 0:
                break
    return shift


@njit(cache=True, nogil=True)
def _grouped_part(X, labels, shift, start, stop):
    n_groups, d = shift.shape
    counts = np.zeros(n_groups)
    sums = np.zeros((n_groups, d))
    products = np.zeros((n_groups, d, d))
    centred = np.empty(d)
    for i in range(start, stop):
        group = labels[i]
        counts[group] += 1.0
        for j in range(d):
            centred[j] = X[i, j] - shift[group, j]
            sums[group, j] += centred[j]
        for j in range(d):
            value = centred[j]
            # the full square, not a triangle: a fixed-length inner loop vectorises
            for k in range(d):
                products[group, j, k] += value * centred[k]
    return counts, sums, products


@njit(cache=True, nogil=True)
def _response_part(X, y, scale, centre, start, stop):
    d = X.shape[1]
    sums = np.zeros(d)
    cross = np.zeros(d)
    products = np.zeros((d, d))
    powers = np.zeros(4)
    weighted = np.empty(d)
    for i in range(start, stop):
        # e = y - ȳ, formed as ScalarMoments forms it: on y / scale, then scaled back
        # (exact, the scale being a power of two)
        scaled = y[i] / scale - centre
        square = scaled * scaled
        powers[0] += scaled
        powers[1] += square
        powers[2] += square * scaled
        powers[3] += square * square
        weight = scaled * scale
        for j in range(d):
            value = X[i, j]
            sums[j] += value
            weighted[j] = weight * value
            cross[j] += weighted[j]
        for j in range(d):
            factor = weighted[j]
            for k in range(d):
                products[j, k] += factor * X[i, k]
    return sums, cross, products, powers


def _parts(n_rows: int) -> list[tuple[int, int]]:
    count = int(min(_MAX_PARTS, max(1, n_rows // _PART_ROWS)))
    edges = np.linspace(0, n_rows, count + 1).astype(np.int64)
    return list(zip(edges[:-1].tolist(), edges[1:].tolist(), strict=True))


def _summed(kernel, *arguments, n_rows: int) -> tuple:
    """Run ``kernel(*arguments, start, stop)`` on every part and add the results in order."""
    results = threaded_map(lambda part: kernel(*arguments, *part), _parts(n_rows), cpu_count())
    total = list(results[0])
    for result in results[1:]:
        for index, value in enumerate(result):
            total[index] = total[index] + value
    return tuple(total)


def grouped_scatters(X: np.ndarray, labels: np.ndarray, n_groups: int
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row count, mean and centred scatter ``Σ (x - m_g)(x - m_g)^T`` of every group.

    Each group's rows are summed about that group's first row, so no large
    mean cancels: with ``s`` and ``P`` the sums and products about a shift
    ``K``, the mean is ``K + s / c`` and the scatter ``P - s s^T / c``, whose
    error grows with ``(m_g - K)^2`` against the spread instead of ``m_g^2``
    (the shifted-data algorithm, Chan, Golub & LeVeque 1983).

    Parameters
    ----------
    X : ndarray of shape (n, d), float64
    labels : ndarray of shape (n,), integers in ``[0, n_groups)``
    n_groups : int

    Returns
    -------
    counts : ndarray of shape (n_groups,)
    means : ndarray of shape (n_groups, d)
        Zeros for an empty group.
    scatters : ndarray of shape (n_groups, d, d)
    """
    X = np.require(X, np.float64, "C")
    labels = np.require(labels, np.intp, "C")
    shift = _first_rows(X, labels, int(n_groups))
    counts, sums, products = _summed(_grouped_part, X, labels, shift, n_rows=X.shape[0])
    share = np.divide(sums, counts[:, None], out=np.zeros_like(sums), where=counts[:, None] > 0)
    scatters = products - share[:, :, None] * sums[:, None, :]
    return counts, np.where(counts[:, None] > 0, shift + share, 0.0), scatters


def response_products(X: np.ndarray, y: np.ndarray, scale: float, centre: float
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``Σ x``, ``Σ e x``, ``Σ e x x^T`` and the power sums of ``e = y - ȳ``, in one pass.

    ``e`` is formed as :class:`~splitlift.sufficient_statistics.ScalarMoments`
    forms it: ``c = y / scale - centre``, ``e = c scale``, with ``scale`` a
    power of two and ``centre`` the mean of ``y / scale``.

    Parameters
    ----------
    X : ndarray of shape (n, d), float64
    y : ndarray of shape (n,)
    scale, centre : float

    Returns
    -------
    sums, cross : ndarrays of shape (d,)
    products : ndarray of shape (d, d)
    powers : ndarray of shape (4,)
        ``Σ c``, ``Σ c^2``, ``Σ c^3`` and ``Σ c^4``.
    """
    X = np.require(X, np.float64, "C")
    y = np.require(y, np.float64, "C")
    return _summed(_response_part, X, y, float(scale), float(centre), n_rows=X.shape[0])
