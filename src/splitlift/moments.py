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

# Rows per chunk are chosen so a centred chunk holds about this many floats
# (512 kB in float64: it stays in cache while it is multiplied).
_CHUNK_ELEMENTS = 1 << 16


class CollinearityWarning(UserWarning):
    """The input covariance is singular or nearly so; estimation used its well-conditioned part."""


def _row_chunks(n_rows: int, n_columns: int, elements: int = _CHUNK_ELEMENTS
                ) -> Iterator[slice]:
    step = max(1, elements // max(n_columns, 1))
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


def scatter_about(X: np.ndarray, mean: np.ndarray, weights=None) -> np.ndarray:
    """Return ``sum_i w_i (x_i - mean)(x_i - mean)^T``, fast where that is safe.

    The raw product ``X^T W X - (Σw) mean mean^T`` costs one matrix product
    but loses precision to cancellation when a column's mean dominates its
    spread; it is used only while every ``mean_j^2`` is at most 90 % of the
    column's weighted second moment (at most a tenfold loss of relative
    precision), and a chunked centred product is used otherwise.
    """
    if weights is None:
        second, total = X.T @ X, X.shape[0]
    else:
        second, total = np.zeros((X.shape[1], X.shape[1])), float(weights.sum())
        for rows in _row_chunks(X.shape[0], X.shape[1]):
            second += (X[rows] * weights[rows, None]).T @ X[rows]
    if np.all(total * mean**2 <= 0.9 * np.diag(second)):
        return second - total * np.outer(mean, mean)
    return centred_cross_product(X, mean, weights)


def weighted_mean(X: np.ndarray, weights=None) -> np.ndarray:
    """Column means of ``X``, weighted by ``weights`` when given (one matrix-vector product)."""
    if weights is None:
        return np.ones(X.shape[0]) @ X / X.shape[0]
    return weights @ X / weights.sum()


def covariance(X: np.ndarray, mean: np.ndarray, weights=None) -> np.ndarray:
    """Population covariance (divisor ``Σ w``, n unweighted) of ``X`` in one pass."""
    total = X.shape[0] if weights is None else weights.sum()
    return scatter_about(X, mean, weights) / total


def column_location_scale(X: np.ndarray, sample_weight=None) -> tuple[np.ndarray, np.ndarray]:
    """Column means and population standard deviations, safe at any magnitude.

    Data near the ends of the float range (entries around 1e±300) overflow or
    underflow when squared; such columns are first divided by a power of two
    near their largest absolute entry (exact in binary floating point), and
    the results are scaled back, so no finite column is ever mistaken for a
    constant one or given an infinite spread. With ``sample_weight`` the
    moments are weighted (frequency weights: an integer weight counts as
    that many copies of the row).
    """
    magnitude = power_of_two_scale(X)
    scaled = X if np.all(magnitude == 1.0) else X / magnitude
    if sample_weight is None:
        return scaled.mean(axis=0) * magnitude, scaled.std(axis=0) * magnitude
    mean = weighted_mean(scaled, sample_weight)
    variance = sample_weight @ (scaled - mean) ** 2 / sample_weight.sum()
    return mean * magnitude, np.sqrt(variance) * magnitude


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
    def fit(cls, X: np.ndarray, tolerance: float = DEFAULT_RANK_TOLERANCE,
            sample_weight=None) -> Whitening:
        """Estimate mean, covariance and whitening matrix of ``X`` (weighted when asked)."""
        mean = weighted_mean(X, sample_weight)
        return cls.from_moments(mean, covariance(X, mean, sample_weight), tolerance)

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
class SliceScheme:
    """A fixed rule that assigns rows to slices, so that batches and blocks agree.

    Slices are numbered in response order. ``kind="count"``: interior
    ``edges`` ``e_1 < ... < e_{H-1}``; a row with response ``v`` goes to
    slice ``#{k : e_k <= v}``, so slice ``h`` holds ``e_h <= y < e_{h+1}``.
    ``kind="value"``: one slice per entry of the sorted ``values``.

    Attributes
    ----------
    kind : {"count", "value"}
    edges : ndarray of shape (H - 1,) or None
    values : ndarray of shape (H,) or None
    """

    kind: str
    edges: np.ndarray | None = None
    values: np.ndarray | None = None

    @property
    def n_slices(self) -> int:
        return int(self.edges.size + 1 if self.kind == "count" else self.values.size)

    def labels(self, y: np.ndarray) -> np.ndarray:
        """Slice index of every response value; an unknown class label is an error."""
        if self.kind == "count":
            return slice_of(y, self.edges)
        positions = np.searchsorted(self.values, y)
        known = positions < self.values.size
        known[known] = self.values[positions[known]] == y[known]
        if not known.all():
            unknown = y[np.argmin(known)]
            raise ValueError(
                f"response value {_plain(unknown)!r} is not among the slice values "
                f"{[_plain(v) for v in self.values[:10]]}; slice by value only with a response "
                "whose values are all known."
            )
        return positions

    def describe(self, index: int) -> str:
        """Human-readable extent of slice ``index``."""
        if self.kind == "value":
            return f"response value {_plain(self.values[index])!r}"
        low = "-inf" if index == 0 else f"{self.edges[index - 1]:.6g}"
        high = "inf" if index == self.edges.size else f"{self.edges[index]:.6g}"
        return f"slice {index} (y in [{low}, {high}))"

    def same_as(self, other: SliceScheme) -> bool:
        if self.kind != other.kind:
            return False
        if self.kind == "count":
            return np.array_equal(self.edges, other.edges)
        return self.values.size == other.values.size and bool(np.all(self.values == other.values))


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value


@dataclass(frozen=True)
class Slices:
    """A partition of the sample by the response.

    Attributes
    ----------
    labels : ndarray of shape (n,)
        Slice index of each row, in ``0 .. n_slices - 1``; slices are ordered
        by response value (by sorted class value for a discrete response).
    counts : ndarray of shape (n_slices,)
        Rows per slice; their total sample weight when the slicing was weighted.
    kind : {"count", "value"}
        Equal-count slices of the sorted response, or one slice per value.
    values : ndarray
        For ``kind="value"``, the response value of each slice.
    edges : ndarray
        For ``kind="count"``, the interior edges (see :class:`SliceScheme`).
    """

    labels: np.ndarray
    counts: np.ndarray
    kind: str
    values: np.ndarray | None = None
    edges: np.ndarray | None = None

    @property
    def n_slices(self) -> int:
        return int(self.counts.size)

    @property
    def proportions(self) -> np.ndarray:
        return self.counts / self.counts.sum()

    @property
    def scheme(self) -> SliceScheme:
        """The rule behind this partition, reusable on further data."""
        return SliceScheme(self.kind, self.edges, self.values)

    def indicator(self) -> sparse.csr_array:
        """Sparse (n_slices, n) 0/1 matrix; ``indicator() @ X`` gives slice sums."""
        n = self.labels.size
        ones = np.ones(n)
        return sparse.csr_array((ones, (self.labels, np.arange(n))), shape=(self.n_slices, n))

    def sums(self, X: np.ndarray, weights=None) -> np.ndarray:
        """(Weighted) column sums of ``X`` within each slice, shape (n_slices, d), one pass."""
        return slice_sums(X, self.labels, self.n_slices, weights)

    def means(self, X: np.ndarray) -> np.ndarray:
        """Column means of ``X`` within each slice, shape (n_slices, d)."""
        return self.sums(X) / self.counts[:, None]

    def members(self) -> Iterator[np.ndarray]:
        """Row indices of each slice in turn (one stable sort of the labels)."""
        order = np.argsort(self.labels, kind="stable")
        stops = np.cumsum(np.bincount(self.labels, minlength=self.n_slices))
        starts = np.concatenate([[0], stops[:-1]])
        for start, stop in zip(starts, stops, strict=True):
            yield order[start:stop]


def slice_sums(X: np.ndarray, labels: np.ndarray, n_slices: int, weights=None) -> np.ndarray:
    """Column sums of ``w_i x_i`` grouped by ``labels``, shape (n_slices, d), in one pass.

    A sparse 0/1 (or weight) indicator in compressed-column form, one entry
    per row, is built without sorting and multiplied with ``X``.
    """
    entries = np.ones(labels.size) if weights is None else weights
    indicator = sparse.csc_array((entries, labels, np.arange(labels.size + 1)),
                                 shape=(n_slices, labels.size))
    return np.asarray(indicator @ X)


def _is_discrete(y: np.ndarray) -> bool:
    return y.dtype.kind not in "fiuc" or y.dtype.kind == "b"


def slice_response(y, n_slices: int, slicing: str = "auto", weights=None) -> Slices:
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
    weights : ndarray of shape (n,), optional
        Positive frequency weights: slices then hold equal total weight,
        and integer weights slice exactly as the rows repeated that often.

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
            counts = np.bincount(inverse.ravel(), weights, minlength=values.size)
            return Slices(inverse.ravel(), counts, "value", values)
    y = y.astype(float, copy=False)
    _refuse_constant(2 if y.min() < y.max() else 1)
    total = y.size if weights is None else float(weights.sum())
    if total < n_slices:  # else ties may merge slices; check_slice_weights judges the rest
        size = f"n_samples = {y.size}" if weights is None else f"the total weight {total:g}"
        raise ValueError(
            f"{size} is too few for {n_slices} slices (need at least 2 rows per slice, "
            f"{2 * n_slices} rows); lower n_slices or pass more data."
        )
    return slices_from_edges(y, equal_count_edges(y, n_slices, weights), weights)


def _refuse_constant(n_distinct: int) -> None:
    if n_distinct < 2:
        raise ValueError(
            "the response y is constant, so no direction can explain it; "
            "check that the right target column was passed."
        )


def array_split_starts(n_rows: int, n_slices: int) -> np.ndarray:
    """Start positions of parts 1 .. H-1 when ``np.array_split`` cuts ``n_rows`` into H parts."""
    sizes = np.full(n_slices, n_rows // n_slices)
    sizes[: n_rows % n_slices] += 1
    return np.cumsum(sizes)[:-1]


def equal_count_edges(y: np.ndarray, n_slices: int, weights=None) -> np.ndarray:
    """Interior edges of equal-count slices of ``y`` (see :class:`SliceScheme`).

    Each edge is the response value at which a slice of the sorted response
    starts (``np.array_split`` positions); repeated edges (ties) are merged
    and an edge at the minimum is dropped, so every slice is non-empty. With
    frequency ``weights`` the positions count total weight: integer weights
    give the edges of the rows repeated that often, other weights the
    weighted quantiles at ``k / n_slices``.
    """
    if weights is None:
        starts = array_split_starts(y.size, n_slices)
        boundaries = order_statistics(y, starts)  # partial sorts, no full argsort
        lowest = y.min()
    else:
        order = np.argsort(y)  # ties need no order: only values are read
        cumulative = np.cumsum(weights[order])
        total = cumulative[-1]
        integral = np.all(weights == np.round(weights)) and total < 2**53
        starts = (array_split_starts(int(round(total)), n_slices) if integral
                  else total * np.arange(1, n_slices) / n_slices)
        # the first sorted row whose cumulative weight passes each start position
        found = np.minimum(np.searchsorted(cumulative, starts, side="right"), y.size - 1)
        boundaries = y[order][found]
        lowest = y[order][0]
    edges = np.unique(boundaries)
    return edges[1:] if edges.size and edges[0] <= lowest else edges


#: Up to this many edges, slices are found by one comparison pass per edge.
_COMPARED_EDGES = 32


def slice_of(y: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Slice index of every value: the number of edges at or below it.

    Equal to ``np.searchsorted(edges, y, side="right")``; for a few edges,
    one vectorised comparison per edge on a byte counter is several times
    faster than a binary search per value.
    """
    y = y.astype(float, copy=False)
    if edges.size > _COMPARED_EDGES:
        return np.searchsorted(edges, y, side="right")
    counter = np.zeros(y.shape, np.uint8)
    for edge in edges:
        np.add(counter, y >= edge, out=counter, casting="unsafe")
    return counter.astype(np.intp)


def order_statistics(values: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """``np.sort(values)[positions]`` for sorted, distinct ``positions``, without a full sort.

    One copy of the values is partitioned in place at the middle wanted
    position, then each side at its own middle, and so on: every level
    reads the values once, where numpy's many-``kth`` partition costs
    several times more.
    """
    arranged = np.array(values, copy=True)

    def select(low: int, high: int, first: int, stop: int) -> None:
        if first >= stop:
            return
        middle = (first + stop) // 2
        kth = int(positions[middle])
        arranged[low:high].partition(kth - low)
        select(low, kth, first, middle)
        select(kth + 1, high, middle + 1, stop)

    select(0, arranged.size, 0, len(positions))
    return arranged[positions]


def slices_from_edges(y: np.ndarray, edges: np.ndarray, weights=None) -> Slices:
    """Assign rows to the slices bounded by ``edges``; slices may come out empty."""
    labels = slice_of(y, edges)
    counts = np.bincount(labels, weights, minlength=edges.size + 1)
    return Slices(labels, counts, "count", edges=np.asarray(edges, dtype=float))


def check_slice_edges(edges) -> np.ndarray:
    """Validate user-given slice edges: finite, strictly increasing, at least one."""
    array = np.asarray(edges, dtype=float)
    if array.ndim != 1 or array.size == 0:
        raise ValueError(
            f"slice_edges must be a 1-D sequence of at least one cut point, got shape "
            f"{array.shape}; H slices need H - 1 edges."
        )
    if not np.all(np.isfinite(array)):
        raise ValueError("slice_edges contains NaN or infinite values; pass finite cut points.")
    if np.any(np.diff(array) <= 0):
        raise ValueError(
            "slice_edges must be strictly increasing (slice h holds edge[h-1] <= y < edge[h]); "
            "sort them and drop repeats."
        )
    return array


def check_slice_sizes(slices: Slices, n_slices_requested: int) -> None:
    """Refuse slices with fewer than two rows (too little data or a rare value)."""
    check_slice_weights(slices.counts, slices.scheme, n_slices_requested, slices.labels.size)


def check_slice_weights(totals: np.ndarray, scheme: SliceScheme, n_slices_requested: int,
                        n_rows: int, edges_given: bool = False) -> None:
    """Refuse a slice holding fewer than two rows (total frequency weight below 2)."""
    small = int(np.argmin(totals))
    if totals[small] >= 2:
        return
    if scheme.kind == "count" and not edges_given:
        raise ValueError(
            f"n_samples = {n_rows} is too few for {n_slices_requested} slices "
            "(need at least 2 rows per slice); lower n_slices or pass more data."
        )
    if scheme.kind == "count":
        raise ValueError(
            f"the slice edges leave {scheme.describe(small)} with {totals[small]:g} rows, but "
            "every slice needs at least 2; remove or move that edge (or fit without "
            "slice_edges to slice by equal counts)."
        )
    value = _plain(scheme.values[small])
    if totals[small] == 1:
        raise ValueError(
            f"response value {value!r} occurs in a single row, but every slice "
            "needs at least 2 rows; merge rare values or drop those rows."
        )
    raise ValueError(
        f"response value {value!r} carries a total sample weight of {totals[small]:g}, but "
        "every slice needs at least 2 (weights count rows); merge rare values, drop those "
        "rows, or scale the weights so that they count rows."
    )


def slice_scatters(X: np.ndarray, labels: np.ndarray, n_slices: int, weights=None
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weight, mean and centred scatter of ``X`` within each slice.

    Returns arrays of shape (n_slices,), (n_slices, d) and (n_slices, d, d).
    Rows are gathered slice by slice (``np.compress``, no sort), so the loop
    runs over slices, never over rows; an empty slice gets zeros.
    """
    d = X.shape[1]
    totals, means = np.zeros(n_slices), np.zeros((n_slices, d))
    scatters = np.zeros((n_slices, d, d))
    for index in range(n_slices):
        members = labels == index
        block = np.compress(members, X, axis=0)
        if block.shape[0] == 0:
            continue
        block_weights = None if weights is None else weights[members]
        totals[index] = block.shape[0] if weights is None else block_weights.sum()
        means[index] = weighted_mean(block, block_weights)
        scatters[index] = scatter_about(block, means[index], block_weights)
    return totals, means, scatters


def slice_covariances(X: np.ndarray, slices: Slices, mean: np.ndarray) -> np.ndarray:
    """Unbiased (divisor ``n_h - 1``) covariance of ``X`` within each slice.

    Returns an array of shape (n_slices, d, d); every slice needs two rows
    (see :func:`check_slice_sizes`). ``mean`` is accepted for compatibility;
    each slice is centred on its own mean.
    """
    totals, _, scatters = slice_scatters(X, slices.labels, slices.n_slices)
    return scatters / (totals - 1)[:, None, None]
