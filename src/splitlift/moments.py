"""Shared numerics of the moment-based estimators: whitening and slicing.

Every moment method (SIR, SAVE, pHd) reads the data through this module, so
centring, the covariance, its whitening and the slice statistics are
computed once and in one way. The costly steps are single passes over ``X``
in row chunks (no Python loop over rows); memory beyond ``X`` itself stays
at one chunk plus a few ``(n,)`` vectors.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from scipy import sparse

#: Relative eigenvalue tolerance below which a covariance direction is treated
#: as degenerate (constant or collinear columns). With 1e-10 the whitened
#: coordinates keep about six significant digits in float64.
DEFAULT_RANK_TOLERANCE = 1e-10

#: A column whose standard deviation is at most this multiple of its mean
#: absolute level carries only round-off: it is treated as constant.
CONSTANT_TOLERANCE = 1e-12

# Up to this many slices, slice sums use dense indicator blocks (else sparse).
_DENSE_INDICATOR_SLICES = 64

# Rows per chunk are chosen so a centred chunk holds about this many floats.
_CHUNK_ELEMENTS = 1 << 20


class CollinearityWarning(UserWarning):
    """The input covariance is singular or nearly so; estimation used its well-conditioned part."""


def _row_chunks(n_rows: int, n_columns: int) -> Iterator[slice]:
    step = max(1, _CHUNK_ELEMENTS // max(n_columns, 1))
    for start in range(0, n_rows, step):
        yield slice(start, min(start + step, n_rows))


def centred_cross_product(X: np.ndarray, mean: np.ndarray, weights=None) -> np.ndarray:
    """Return ``sum_i w_i (x_i - mean)(x_i - mean)^T`` in one chunked pass.

    Parameters
    ----------
    X : ndarray of shape (n, d)
    mean : ndarray of shape (d,)
    weights : ndarray of shape (n,), optional
        Row weights ``w_i``; all ones when omitted.
    """
    d = X.shape[1]
    total = np.zeros((d, d))
    for rows in _row_chunks(X.shape[0], d):
        centred = X[rows] - mean
        weighted = centred if weights is None else centred * weights[rows, None]
        total += weighted.T @ centred
    return total


def covariance(X: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Population covariance (divisor n) of ``X`` in one pass.

    The raw product ``X^T X / n - mean mean^T`` costs one matrix product but
    loses precision to cancellation when a column's mean dominates its
    spread; it is used only while every ``mean_j^2`` is at most 90 % of the
    column's second moment (at most a tenfold loss of relative precision),
    and a chunked centred product is used otherwise.
    """
    n = X.shape[0]
    second = X.T @ X / n
    if np.all(mean**2 <= 0.9 * np.diag(second)):
        return second - np.outer(mean, mean)
    return centred_cross_product(X, mean) / n


def column_location_scale(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column means and population standard deviations, safe at any magnitude.

    Data near the ends of the float range (entries around 1e±300) overflow or
    underflow when squared; such columns are first divided by a power of two
    near their largest absolute entry (exact in binary floating point), and
    the results are scaled back, so no finite column is ever mistaken for a
    constant one or given an infinite spread.
    """
    magnitude = power_of_two_scale(X)
    if np.all(magnitude == 1.0):
        return X.mean(axis=0), X.std(axis=0)
    scaled = X / magnitude
    return scaled.mean(axis=0) * magnitude, scaled.std(axis=0) * magnitude


#: Columns whose largest absolute entry lies outside [2^-SAFE, 2^SAFE] are
#: rescaled before any second moment is formed (their squares would leave
#: the float range).
_SAFE_EXPONENT = 480


def power_of_two_scale(X: np.ndarray) -> np.ndarray:
    """Per-column power of two that brings extreme columns near unit size.

    Ones for every column whose largest absolute entry is within
    ``2^±480`` (ordinary data); elsewhere ``2^e`` with ``e`` the exponent of
    that entry, so dividing by it is exact and never overflows.
    """
    largest = np.max(np.abs(X), axis=0) if X.shape[0] else np.zeros(X.shape[1])
    _, exponents = np.frexp(largest)
    extreme = (largest > 0) & (np.abs(exponents) > _SAFE_EXPONENT)
    return np.where(extreme, np.ldexp(1.0, exponents), 1.0)


def constant_columns(mean: np.ndarray, spread: np.ndarray) -> np.ndarray:
    """Columns whose spread is zero or only round-off relative to their level."""
    return ~(spread > CONSTANT_TOLERANCE * np.abs(mean))


@dataclass(frozen=True)
class Whitening:
    """Centring and whitening of the inputs, ``z = W (x - mean)``.

    ``W`` has shape (r, d) with ``W Σ W^T = I_r``, where ``Σ`` is the
    population covariance (divisor n, as in Li 1991). The rank is judged on
    the correlation scale, so that it does not depend on the units of the
    columns: constant columns (zero spread, or only round-off relative to
    their level) are left out, and ``r`` counts the eigenvalues of the
    correlation matrix of the others above ``tolerance`` times the largest.
    ``W = Λ^{-1/2} V^T D^{-1}`` with ``D`` the column standard deviations and
    ``V Λ V^T`` the kept part of the correlation matrix, so ``z`` is unchanged
    when a column is rescaled: every method built on ``z`` is equivariant
    under invertible column scaling. When ``r < d`` (constant or collinear
    columns) estimation happens in the r-dimensional well-conditioned part;
    directions map back to input coordinates with :meth:`to_input`.

    Attributes
    ----------
    mean : ndarray of shape (d,)
    covariance : ndarray of shape (d, d)
    matrix : ndarray of shape (r, d)
        The whitening matrix ``W``.
    rank : int
    tolerance : float
    """

    mean: np.ndarray
    covariance: np.ndarray
    matrix: np.ndarray
    rank: int
    tolerance: float

    @classmethod
    def fit(cls, X: np.ndarray, tolerance: float = DEFAULT_RANK_TOLERANCE) -> Whitening:
        """Estimate mean, covariance and whitening matrix of ``X``."""
        mean = np.ones(X.shape[0]) @ X / X.shape[0]
        return cls.from_moments(mean, covariance(X, mean), tolerance)

    @classmethod
    def from_moments(cls, mean, covariance, tolerance: float = DEFAULT_RANK_TOLERANCE):
        """Build the whitening from a known mean and covariance."""
        d = covariance.shape[0]
        spread = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
        varying = ~constant_columns(mean, spread)
        if not varying.any():
            raise ValueError(
                "every input column is constant, so there is no direction to estimate; "
                "pass features that vary."
            )
        inverse_spread = 1.0 / spread[varying]
        correlation = covariance[np.ix_(varying, varying)] * np.outer(inverse_spread,
                                                                      inverse_spread)
        values, vectors = np.linalg.eigh(correlation)
        kept = values > tolerance * values[-1]
        rank = int(kept.sum())
        _warn_degenerate_columns(varying, rank, tolerance)
        matrix = np.zeros((rank, d))
        matrix[:, varying] = (vectors[:, kept] / np.sqrt(values[kept])).T * inverse_spread
        return cls(mean, covariance, matrix, rank, float(tolerance))

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Whitened coordinates ``(X - mean) W^T`` of shape (n, r)."""
        return (X - self.mean) @ self.matrix.T

    def to_input(self, whitened_directions: np.ndarray) -> np.ndarray:
        """Map directions ``η`` of whitened space to input directions ``W^T η``.

        These are the published (un-orthonormalised) directions
        ``β = Σ^{-1/2} η`` up to a rotation of whitened space, which leaves the
        methods' eigenvalues unchanged: ``β^T x`` is the corresponding summary.
        """
        return self.matrix.T @ whitened_directions

    def whiten_moment(self, moment: np.ndarray) -> np.ndarray:
        """Express a (d, d) second moment of ``x - mean`` in whitened coordinates."""
        return self.matrix @ moment @ self.matrix.T


def _warn_degenerate_columns(varying: np.ndarray, rank: int, tolerance: float) -> None:
    constant = np.flatnonzero(~varying).tolist()
    collinear = int(varying.sum()) - rank
    if not constant and not collinear:
        return
    parts = []
    if constant:
        parts.append(f"constant columns {constant} are left out")
    if collinear:
        parts.append(
            f"{collinear} direction(s) of the other columns are collinear (correlation "
            f"eigenvalues below {tolerance:g} times the largest) and are left out"
        )
    warnings.warn(
        f"the input covariance has rank {rank} < {varying.size}: " + "; ".join(parts)
        + ". The subspace is estimated in the well-conditioned part; drop redundant "
        "columns to silence this.",
        CollinearityWarning,
        stacklevel=4,
    )


@dataclass(frozen=True)
class Slices:
    """A partition of the sample by the response.

    Attributes
    ----------
    labels : ndarray of shape (n,)
        Slice index of each row, in ``0 .. n_slices - 1``; slices are ordered
        by response value (by sorted class value for a discrete response).
    counts : ndarray of shape (n_slices,)
    kind : {"count", "value"}
        Equal-count slices of the sorted response, or one slice per value.
    values : ndarray
        For ``kind="value"``, the response value of each slice.
    """

    labels: np.ndarray
    counts: np.ndarray
    kind: str
    values: np.ndarray | None = None

    @property
    def n_slices(self) -> int:
        return int(self.counts.size)

    @property
    def proportions(self) -> np.ndarray:
        return self.counts / self.counts.sum()

    def indicator(self) -> sparse.csr_array:
        """Sparse (n_slices, n) 0/1 matrix; ``indicator() @ X`` gives slice sums."""
        n = self.labels.size
        ones = np.ones(n)
        return sparse.csr_array((ones, (self.labels, np.arange(n))), shape=(self.n_slices, n))

    def sums(self, X: np.ndarray) -> np.ndarray:
        """Column sums of ``X`` within each slice, shape (n_slices, d), in one pass."""
        if self.n_slices > _DENSE_INDICATOR_SLICES:
            return np.asarray(self.indicator() @ X)
        # few slices: dense 0/1 blocks turn the sums into fast matrix products
        totals = np.zeros((self.n_slices, X.shape[1]))
        slice_ids = np.arange(self.n_slices)[:, None]
        for rows in _row_chunks(X.shape[0], self.n_slices):
            block = (self.labels[rows] == slice_ids).astype(X.dtype)
            totals += block @ X[rows]
        return totals

    def means(self, X: np.ndarray) -> np.ndarray:
        """Column means of ``X`` within each slice, shape (n_slices, d)."""
        return self.sums(X) / self.counts[:, None]

    def members(self) -> Iterator[np.ndarray]:
        """Row indices of each slice in turn (one stable sort of the labels)."""
        order = np.argsort(self.labels, kind="stable")
        stops = np.cumsum(self.counts)
        starts = stops - self.counts
        for start, stop in zip(starts, stops, strict=True):
            yield order[start:stop]


def _is_discrete(y: np.ndarray) -> bool:
    return y.dtype.kind not in "fiuc" or y.dtype.kind == "b"


def slice_response(y, n_slices: int, slicing: str = "auto") -> Slices:
    """Partition rows by the response.

    Parameters
    ----------
    y : array-like of shape (n,)
        Numeric response, or class labels of any dtype.
    n_slices : int
        Number of equal-count slices for a continuous response.
    slicing : {"auto", "count", "value"}
        ``"count"``: sort the response and split it as ``np.array_split``
        would; tied responses are kept together in the later slice, so a
        slice may grow or vanish only where the response has ties.
        ``"value"``: one slice per distinct value. ``"auto"``: by value for
        non-numeric or boolean labels and for integer responses with at
        most ``n_slices`` distinct values, else by count.

    Returns
    -------
    Slices
    """
    y = np.asarray(y)
    if slicing not in ("auto", "count", "value"):
        raise ValueError(f"slicing must be 'auto', 'count' or 'value', got {slicing!r}.")
    discrete = _is_discrete(y)
    if slicing == "count" and discrete:
        raise ValueError(
            "slicing='count' needs a numeric response; class labels are sliced by value "
            "(use slicing='value' or 'auto')."
        )
    # Integer responses are often codes with few values; counting their
    # distinct values costs a sort, so floats skip it (ties stay together).
    by_value = slicing == "value" or discrete or (slicing == "auto" and y.dtype.kind in "iu")
    if by_value:
        values, inverse = np.unique(y, return_inverse=True)
        _refuse_constant(values.size)
        if slicing == "value" or discrete or values.size <= n_slices:
            counts = np.bincount(inverse.ravel(), minlength=values.size)
            return Slices(inverse.ravel(), counts, "value", values)
    y = y.astype(float, copy=False)
    _refuse_constant(2 if y.min() < y.max() else 1)
    if y.size < 2 * n_slices:
        raise ValueError(
            f"n_samples = {y.size} is too few for {n_slices} slices (need at least 2 rows "
            f"per slice, {2 * n_slices} rows); lower n_slices or pass more data."
        )
    return _equal_count_slices(y, n_slices)


def _refuse_constant(n_distinct: int) -> None:
    if n_distinct < 2:
        raise ValueError(
            "the response y is constant, so no direction can explain it; "
            "check that the right target column was passed."
        )


def _equal_count_slices(y: np.ndarray, n_slices: int) -> Slices:
    n = y.size
    sizes = np.full(n_slices, n // n_slices)
    sizes[: n % n_slices] += 1
    starts = np.cumsum(sizes)[:-1]
    # The value at each slice start, from a partial sort (no full argsort).
    boundaries = np.partition(y, starts)[starts]
    labels = np.searchsorted(boundaries, y, side="right")
    counts = np.bincount(labels, minlength=n_slices)
    if np.any(counts == 0):  # ties swallowed a whole slice: renumber the rest
        renumber = np.cumsum(counts > 0) - 1
        labels = renumber[labels]
        counts = counts[counts > 0]
    return Slices(labels, counts, "count")


def check_slice_sizes(slices: Slices, n_slices_requested: int) -> None:
    """Refuse slices with fewer than two rows (too little data or a rare value)."""
    small = int(np.argmin(slices.counts))
    if slices.counts[small] >= 2:
        return
    if slices.kind == "count":
        raise ValueError(
            f"n_samples = {slices.labels.size} is too few for {n_slices_requested} slices "
            "(need at least 2 rows per slice); lower n_slices or pass more data."
        )
    value = slices.values[small]
    value = value.item() if isinstance(value, np.generic) else value
    raise ValueError(
        f"response value {value!r} occurs in a single row, but every slice "
        "needs at least 2 rows; merge rare values or drop those rows."
    )


def slice_covariances(X: np.ndarray, slices: Slices, mean: np.ndarray) -> np.ndarray:
    """Unbiased (divisor ``n_h - 1``) covariance of ``X`` within each slice.

    Returns an array of shape (n_slices, d, d). Rows are gathered slice by
    slice, so the loop runs over slices, never over rows. Every slice needs
    two rows (see :func:`check_slice_sizes`).
    """
    d = X.shape[1]
    covariances = np.empty((slices.n_slices, d, d))
    for index, rows in enumerate(slices.members()):
        block = X[rows] - mean
        block -= block.mean(axis=0)
        covariances[index] = block.T @ block / (rows.size - 1)
    return covariances
