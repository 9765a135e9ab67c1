"""Mergeable sufficient statistics of the moment methods (SIR, SAVE, pHd).

A moment method needs only weighted counts, means and centred scatters of
the inputs (overall, and per slice for SIR and SAVE) and, for pHd, the
co-moments of the response with the inputs. These are computed on a block
of rows in float64 and merged exactly in any order with the pairwise
updates of Chan, Golub & LeVeque (1979), extended to third-order co-moments
as in Pébay (2008). Each block is centred on its own means, so large column
means never cancel against small spreads, whatever the order of the
blocks. One core thus serves in-memory fits (one block), ``partial_fit``
batches and Dask collections (one block per chunk, merged as a tree), and the
estimators turn the merged statistics into their method matrices.

Weights are frequency weights: an integer weight counts as that many copies
of the row, so integer weights give exactly the statistics of the repeated
rows.

References
----------
Chan, T. F., Golub, G. H. and LeVeque, R. J. (1979). Updating formulae and a
pairwise algorithm for computing sample variances. Technical report
STAN-CS-79-773, Stanford University.

Pébay, P. (2008). Formulas for robust, one-pass parallel computation of
covariances and arbitrary-order statistical moments. Technical report
SAND2008-6212, Sandia National Laboratories.
"""

from __future__ import annotations

from contextlib import nullcontext
from dataclasses import dataclass, replace

import numpy as np

from ._blas import one_blas_thread
from .moments import (
    SliceScheme,
    _row_chunks,
    power_of_two_scale,
    scatter_about,
    slice_scatters,
    slice_sums,
    weighted_mean,
)

# Rows that _one_product_likely looks at.
_SCREEN_ROWS = 1024
# products X^T X of at most this many columns run on one BLAS thread (see _blas)
_THIN_COLUMNS = 64

# Column sums of squares inside this range cannot overflow or underflow in
# any product the methods form; outside it the block is rescaled by powers
# of two (power_of_two_scale), which is exact.
_SAFE_SQUARES = (2.0**-900, 2.0**960)


def _moment_kernels():
    """The compiled kernels, imported on first use: numba takes half a second to load."""
    from . import _moment_kernels

    return _moment_kernels


def _outer(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    return u[..., :, None] * v[..., None, :]


@dataclass(frozen=True)
class GroupMoments:
    """Weight, mean and centred scatter of the rows in each of G groups.

    Means are kept relative to a ``shift`` common to the groups (zero, or
    near the data's mean when that dominates the spread), so that
    differences of means, which SIR needs, do not lose digits to a large
    offset. Two sets of groups with different shifts merge exactly: the
    difference of two nearby shifts is exact in floating point.

    Attributes
    ----------
    weight : ndarray of shape (G,)
        Total frequency weight of each group.
    rows : ndarray of shape (G,)
        Rows with positive weight in each group.
    shift : ndarray of shape (d,)
    mean : ndarray of shape (G, d)
        Means minus ``shift``.
    scatter : ndarray of shape (G, d, d) or None
        ``Σ w (x - mean)(x - mean)^T`` within each group, when kept.
    """

    weight: np.ndarray
    rows: np.ndarray
    shift: np.ndarray
    mean: np.ndarray
    scatter: np.ndarray | None

    @property
    def n_groups(self) -> int:
        return int(self.weight.size)

    @property
    def absolute_mean(self) -> np.ndarray:
        return self.shift + self.mean

    def relative_to(self, shift: np.ndarray) -> GroupMoments:
        """The same groups with means relative to ``shift``."""
        if np.array_equal(shift, self.shift):
            return self
        return replace(self, shift=shift, mean=self.mean + (self.shift - shift))

    def merge(self, other: GroupMoments) -> GroupMoments:
        """Group-by-group union of two sets of rows (Chan, Golub & LeVeque 1979)."""
        other = other.relative_to(self.shift)
        total = self.weight + other.weight
        share = np.divide(other.weight, total, out=np.zeros_like(total), where=total > 0)
        delta = other.mean - self.mean
        mean = self.mean + share[:, None] * delta
        scatter = None
        if self.scatter is not None and other.scatter is not None:
            scatter = self.scatter + other.scatter + (self.weight * share)[:, None, None] * _outer(
                delta, delta)
        return GroupMoments(total, self.rows + other.rows, self.shift, mean, scatter)

    def pooled(self) -> GroupMoments:
        """All groups as one (the between-group scatter added to the within-group one)."""
        total = self.weight.sum()
        mean = self.weight @ self.mean / total
        deviations = self.mean - mean
        scatter = None
        if self.scatter is not None:
            scatter = (self.scatter.sum(axis=0) + (deviations * self.weight[:, None]).T
                       @ deviations)[None]
        return GroupMoments(np.array([total]), np.array([self.rows.sum()]), self.shift,
                            mean[None], scatter)

    def rescaled(self, factor: np.ndarray) -> GroupMoments:
        """The moments of the columns multiplied by ``factor``."""
        scatter = None if self.scatter is None else self.scatter * np.outer(factor, factor)
        return replace(self, shift=self.shift * factor, mean=self.mean * factor,
                       scatter=scatter)

    def placed(self, positions: np.ndarray, n_groups: int) -> GroupMoments:
        """These groups at ``positions`` among ``n_groups`` groups, empty groups elsewhere."""
        d = self.mean.shape[1]
        weight, rows = np.zeros(n_groups), np.zeros(n_groups, dtype=np.int64)
        mean = np.zeros((n_groups, d))
        weight[positions], rows[positions], mean[positions] = self.weight, self.rows, self.mean
        scatter = None
        if self.scatter is not None:
            scatter = np.zeros((n_groups, d, d))
            scatter[positions] = self.scatter
        return GroupMoments(weight, rows, self.shift, mean, scatter)


@dataclass(frozen=True)
class ScalarMoments:
    """Weight, mean and central power sums (orders 2 to 4) of one variable.

    The sums are of ``v / scale``, ``scale`` a power of two near the largest
    absolute value, so that fourth powers stay in the float range.
    """

    weight: float
    mean: float
    second: float
    third: float
    fourth: float
    scale: float

    @classmethod
    def of(cls, values: np.ndarray, weights=None) -> ScalarMoments:
        if values.size == 0:
            return cls(0.0, 0.0, 0.0, 0.0, 0.0, 1.0)
        total, mean, scale, scaled = cls.location(values, weights)
        centred = scaled - mean
        square = centred * centred
        weighted = square if weights is None else square * weights
        sums = [weighted.sum(), weighted @ centred, weighted @ square]
        return cls(total, mean, *(float(v) for v in sums), scale)

    @staticmethod
    def location(values: np.ndarray, weights=None
                 ) -> tuple[float, float, float, np.ndarray]:
        """``(weight, mean, scale, values / scale)`` of :meth:`of`: ``scale`` is the
        power of two near the largest absolute value, ``mean`` that of ``values / scale``."""
        largest = max(float(values.max()), -float(values.min()))
        scale = float(np.ldexp(1.0, np.frexp(largest)[1])) if largest > 0 else 1.0
        scaled = values / scale
        total = float(values.size if weights is None else weights.sum())
        return total, float(scaled.sum() / total if weights is None
                            else weights @ scaled / total), scale, scaled

    @property
    def raw_mean(self) -> float:
        return self.mean * self.scale

    @property
    def variance(self) -> float:
        """Population variance, in the units of the variable."""
        return self.second / self.weight * self.scale**2

    def excess_kurtosis(self) -> float:
        """``m4 / m2^2 - 3`` (0 for a normal variable; 0 when the variable is constant)."""
        if self.second <= 0:
            return 0.0
        return self.fourth * self.weight / self.second**2 - 3.0

    def _at_scale(self, scale: float) -> ScalarMoments:
        f = self.scale / scale
        return ScalarMoments(self.weight, self.mean * f, self.second * f**2, self.third * f**3,
                             self.fourth * f**4, scale)

    def merge(self, other: ScalarMoments) -> ScalarMoments:
        """Union of two samples (Pébay 2008, eqs. 1.1-1.4 for orders 2-4, weighted form)."""
        if self.weight == 0 or other.weight == 0:
            return other if self.weight == 0 else self
        scale = max(self.scale, other.scale)
        a, b = self._at_scale(scale), other._at_scale(scale)
        na, nb = a.weight, b.weight
        n = na + nb
        delta = b.mean - a.mean
        second = a.second + b.second + delta**2 * na * nb / n
        third = (a.third + b.third + delta**3 * na * nb * (na - nb) / n**2
                 + 3 * delta * (na * b.second - nb * a.second) / n)
        fourth = (a.fourth + b.fourth
                  + delta**4 * na * nb * (na**2 - na * nb + nb**2) / n**3
                  + 6 * delta**2 * (na**2 * b.second + nb**2 * a.second) / n**2
                  + 4 * delta * (na * b.third - nb * a.third) / n)
        return ScalarMoments(n, a.mean + delta * nb / n, second, third, fourth, scale)


@dataclass(frozen=True)
class ResponseMoments:
    """Co-moments of a numeric response with the inputs (what pHd needs).

    With ``e = y - ȳ`` and ``u = x - mean`` (means of the same rows):
    ``cross = Σ w e u`` and ``weighted_scatter = Σ w e u u^T``.
    """

    response: ScalarMoments
    cross: np.ndarray
    weighted_scatter: np.ndarray

    @classmethod
    def of(cls, X: np.ndarray, y: np.ndarray, weights, inputs: GroupMoments) -> ResponseMoments:
        """Co-moments of ``y`` with the rows of ``X``, whose moments are ``inputs``."""
        response = ScalarMoments.of(y, weights)
        return cls.about(X, y, weights, inputs.absolute_mean[0], response.raw_mean, response)

    @classmethod
    def from_products(cls, response: ScalarMoments, mean: np.ndarray, raw_cross: np.ndarray,
                      weighted_products: np.ndarray, total: float) -> ResponseMoments:
        """Unweighted co-moments from uncentred products, for inputs whose means do not
        dominate their spread (:func:`_shift_for` gives zero).

        With ``e = y - ȳ`` (``response`` holds the moments of y), ``c`` the input
        means, ``g = Σ e x`` (``raw_cross``), ``Σ e x x^T`` (``weighted_products``)
        and ``Σ e`` (``total``):
        ``Σ e (x - c) = g - (Σ e) c`` and ``Σ e (x - c)(x - c)^T = Σ e x x^T - g c^T
        - c g^T + (Σ e) c c^T``. The correction terms cancel part of the raw sum,
        which costs digits as the means grow against the spread; at the
        condition's edge (means near 3 standard deviations) about one digit
        was lost against the centred path in a check, as in
        :func:`splitlift.moments.scatter_about`.
        """
        scatter = (weighted_products - _outer(raw_cross, mean) - _outer(mean, raw_cross)
                   + total * _outer(mean, mean))
        return cls(response, raw_cross - total * mean, scatter)

    @classmethod
    def about(cls, X: np.ndarray, y: np.ndarray, weights, centre: np.ndarray,
              response_centre: float, response: ScalarMoments | None = None) -> ResponseMoments:
        """Co-moments about given centres (of a second pass: they add up, :meth:`added`)."""
        centred = y - response_centre
        weighted = centred if weights is None else centred * weights
        cross, scatter = np.zeros(X.shape[1]), np.zeros((X.shape[1], X.shape[1]))
        for rows in _row_chunks(X.shape[0], X.shape[1]):
            block = X[rows] - centre  # centred chunk by chunk: no offset cancels
            cross += weighted[rows] @ block
            scatter += (block * weighted[rows, None]).T @ block
        return cls(ScalarMoments.of(y, weights) if response is None else response, cross,
                   scatter)

    def added(self, other: ResponseMoments) -> ResponseMoments:
        """Union of two blocks whose co-moments are about the same fixed centres."""
        return ResponseMoments(self.response.merge(other.response), self.cross + other.cross,
                               self.weighted_scatter + other.weighted_scatter)

    def rescaled(self, factor: np.ndarray) -> ResponseMoments:
        return replace(self, cross=self.cross * factor,
                       weighted_scatter=self.weighted_scatter * np.outer(factor, factor))

    def merge(self, other: ResponseMoments, inputs: GroupMoments,
              other_inputs: GroupMoments) -> ResponseMoments:
        """Union of two samples; ``inputs`` are the input moments of each (Pébay 2008).

        With ``a = m_a - m`` and ``α = ȳ_a - ȳ`` the shifts of one part to the
        merged means, ``Σ_a w (e + α)(u + a)(u + a)^T`` expands to
        ``R_a + G_a a^T + a G_a^T + α S_a + α W_a a a^T`` (terms linear in
        the centred ``e`` or ``u`` vanish); likewise for the other part.
        """
        wa, wb = inputs.weight[0], other_inputs.weight[0]
        if wa == 0 or wb == 0:
            return other if wa == 0 else self
        total = wa + wb
        delta_x = other_inputs.relative_to(inputs.shift).mean[0] - inputs.mean[0]
        delta_y = other.response.raw_mean - self.response.raw_mean
        shift_a, shift_b = -wb / total * delta_x, wa / total * delta_x
        offset_a, offset_b = -wb / total * delta_y, wa / total * delta_y
        cross = self.cross + other.cross + wa * wb / total * delta_y * delta_x
        scatter = (self.weighted_scatter + other.weighted_scatter
                   + _outer(self.cross, shift_a) + _outer(shift_a, self.cross)
                   + _outer(other.cross, shift_b) + _outer(shift_b, other.cross)
                   + offset_a * inputs.scatter[0] + offset_b * other_inputs.scatter[0]
                   + wa * wb * (wa - wb) / total**2 * delta_y * _outer(delta_x, delta_x))
        return ResponseMoments(self.response.merge(other.response), cross, scatter)


@dataclass(frozen=True)
class MomentStatistics:
    """Everything a moment method needs from the data, mergeable across blocks.

    Attributes
    ----------
    column_scale : ndarray of shape (d,)
        Powers of two; every moment is of ``X / column_scale`` (ones for
        ordinary data, see :func:`splitlift.moments.power_of_two_scale`).
    inputs : GroupMoments
        One group: weight, mean and scatter of all rows.
    slices : GroupMoments or None
        One group per slice (scatter kept for SAVE), for sliced methods.
    scheme : SliceScheme or None
        The rule that assigned rows to ``slices``.
    response : ResponseMoments or None
        Co-moments of a numeric response with the inputs, for pHd.
    residuals : ResponseMoments or None
        Co-moments of the least-squares residuals of the response with the
        inputs, about the overall means (residual-based pHd; a second pass).
    """

    column_scale: np.ndarray
    inputs: GroupMoments
    slices: GroupMoments | None = None
    scheme: SliceScheme | None = None
    response: ResponseMoments | None = None
    residuals: ResponseMoments | None = None

    @property
    def n_features(self) -> int:
        return int(self.column_scale.size)

    @property
    def weight(self) -> float:
        """Total frequency weight (the number of rows when unweighted)."""
        return float(self.inputs.weight[0])

    @property
    def n_rows(self) -> int:
        return int(self.inputs.rows[0])

    @property
    def mean(self) -> np.ndarray:
        """Column means of ``X / column_scale``."""
        return self.inputs.absolute_mean[0]

    def deviations(self, groups: GroupMoments) -> np.ndarray:
        """Group means minus the overall mean, (G, d), without losing digits to an offset."""
        return groups.relative_to(self.inputs.shift).mean - self.inputs.mean[0]

    @property
    def covariance(self) -> np.ndarray:
        """Population covariance (divisor ``Σ w``) of ``X / column_scale``."""
        return self.inputs.scatter[0] / self.weight

    def at_scale(self, scale: np.ndarray) -> MomentStatistics:
        """The same statistics expressed for ``X / scale`` (``scale`` powers of two)."""
        if np.array_equal(scale, self.column_scale):
            return self
        factor = self.column_scale / scale
        return replace(
            self, column_scale=scale, inputs=self.inputs.rescaled(factor),
            slices=None if self.slices is None else self.slices.rescaled(factor),
            response=None if self.response is None else self.response.rescaled(factor),
            residuals=None if self.residuals is None else self.residuals.rescaled(factor),
        )

    def merge(self, other: MomentStatistics) -> MomentStatistics:
        """Statistics of the union of the rows of two blocks."""
        if other.n_features != self.n_features:
            raise ValueError(
                f"cannot merge statistics of {self.n_features} and {other.n_features} features; "
                "every batch must have the same columns."
            )
        if (self.slices is None) != (other.slices is None) or (
                self.response is None) != (other.response is None):
            raise ValueError("cannot merge statistics gathered for different methods.")
        if self.residuals is not None or other.residuals is not None:
            raise ValueError("residual co-moments are about fixed centres and do not merge.")
        scale = np.maximum(self.column_scale, other.column_scale)
        a, b = self.at_scale(scale), other.at_scale(scale)
        scheme, slices = a.scheme, None
        if a.slices is not None:
            scheme, slices = _merge_slices(a.scheme, a.slices, b.scheme, b.slices)
        response = None
        if a.response is not None:
            response = a.response.merge(b.response, a.inputs, b.inputs)
        return MomentStatistics(scale, a.inputs.merge(b.inputs), slices, scheme, response)

    def with_residuals(self, residuals: ResponseMoments) -> MomentStatistics:
        """These statistics with the residual co-moments of a second pass added."""
        return replace(self, residuals=residuals)


def _merge_slices(scheme_a: SliceScheme, slices_a: GroupMoments, scheme_b: SliceScheme,
                  slices_b: GroupMoments) -> tuple[SliceScheme, GroupMoments]:
    if scheme_a.same_as(scheme_b):
        return scheme_a, slices_a.merge(slices_b)
    if scheme_a.kind == "value" and scheme_b.kind == "value":
        try:
            values = np.union1d(scheme_a.values, scheme_b.values)
        except TypeError:
            raise ValueError(
                "cannot merge slices of response values that do not compare "
                f"({scheme_a.values.dtype} and {scheme_b.values.dtype}); pass class labels of "
                "one type in every batch."
            ) from None
        placed_a = slices_a.placed(np.searchsorted(values, scheme_a.values), values.size)
        placed_b = slices_b.placed(np.searchsorted(values, scheme_b.values), values.size)
        return SliceScheme("value", values=values), placed_a.merge(placed_b)
    raise ValueError(
        "cannot merge statistics sliced differently (by value and by count, or with "
        "different slice edges); give every batch the same slice_edges."
    )


def merge_all(parts) -> MomentStatistics:
    """Merge any number of statistics pairwise, as a balanced tree."""
    parts = list(parts)
    if not parts:
        raise ValueError("no statistics to merge: the data have no rows.")
    while len(parts) > 1:
        parts = [parts[i].merge(parts[i + 1]) if i + 1 < len(parts) else parts[i]
                 for i in range(0, len(parts), 2)]
    return parts[0]


def safe_column_scale(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column scales that keep every product in the float range, and the columns' squares.

    Ones for ordinary columns; where a column's sum of squares leaves a safe
    range (or is zero: a zero column, or squares that underflowed) the exact
    power-of-two rule of :func:`splitlift.moments.power_of_two_scale` is
    applied. Returns ``(scale, squares)`` with the sums of squares of
    ``X / scale``.
    """
    squares = np.einsum("ij,ij->j", X, X)
    if X.shape[0] == 0 or _in_safe_range(squares):
        return np.ones(X.shape[1]), squares
    scale = power_of_two_scale(X)
    return scale, np.einsum("ij,ij->j", X / scale, X / scale)


def _in_safe_range(squares: np.ndarray) -> bool:
    """Every column's sum of squares inside ``_SAFE_SQUARES`` (False for NaN)."""
    low, high = _SAFE_SQUARES
    return bool(np.all((squares >= low) & (squares <= high)))


def _raw_sums_accurate(mean: np.ndarray, squares: np.ndarray, n_rows: int) -> bool:
    """Squares in the safe range and no mean dominating its spread (:func:`_shift_for`
    zero): uncentred sums and products are then accurate."""
    return _in_safe_range(squares) and not np.any(_shift_for(mean, squares, n_rows))


def _shift_for(mean: np.ndarray, squares: np.ndarray, n_rows: int) -> np.ndarray:
    """Zero while no column's mean dominates its spread (raw sums lose at most a digit,
    as in :func:`splitlift.moments.scatter_about`), else the block's mean."""
    if n_rows == 0 or np.all(n_rows * mean**2 <= 0.9 * squares):
        return np.zeros_like(mean)
    return mean


def _shifted_sums(X, shift, weights, labels, n_slices, sums):
    """``Σ w (x - shift)``, ``Σ w (x - shift)(x - shift)^T`` and the slice sums, one pass.

    With a zero shift (``sums`` then already known) these are single matrix
    products over ``X``; else the rows are shifted chunk by chunk (each chunk
    stays in cache).
    """
    d = X.shape[1]
    if not np.any(shift):
        second = scatter_about(X, np.zeros(d), weights) if weights is not None else X.T @ X
        groups = None if labels is None else slice_sums(X, labels, n_slices, weights)
        return sums, second, groups
    sums, second = np.zeros(d), np.zeros((d, d))
    groups = None if labels is None else np.zeros((n_slices, d))
    for rows in _row_chunks(X.shape[0], d):
        block = X[rows] - shift
        weighted = block if weights is None else block * weights[rows, None]
        sums += weighted.sum(axis=0)
        second += weighted.T @ block
        if labels is not None:
            groups += slice_sums(block, labels[rows], n_slices,
                                 None if weights is None else weights[rows])
    return sums, second, groups


def block_statistics(X: np.ndarray, y=None, weights=None, *, scheme: SliceScheme | None = None,
                     labels=None, slice_scatter: bool = False,
                     response: bool = False, check_finite=None) -> MomentStatistics:
    """Sufficient statistics of one block of rows.

    Parameters
    ----------
    X : ndarray of shape (n, d)
        Finite inputs (any float dtype; accumulated in float64).
    y : ndarray of shape (n,), optional
        Response; needed for slices and for response co-moments.
    weights : ndarray of shape (n,), optional
        Non-negative frequency weights; rows of weight zero are left out.
    scheme : SliceScheme, optional
        Slice the rows by ``y`` with this rule (SIR, SAVE).
    labels : ndarray of shape (n,), optional
        Slice labels already computed with ``scheme``.
    slice_scatter : bool
        Keep each slice's scatter (SAVE).
    response : bool
        Keep the co-moments of the numeric response with the inputs (pHd).
    check_finite : callable, optional
        For ``X`` not yet checked for NaN and infinity: called with ``X``
        (and expected to raise) unless the one-product path succeeds, whose
        finite, safe-range sums of squares prove every entry finite.
    """
    if weights is not None and not np.all(weights > 0):
        kept = weights > 0
        X, weights = X[kept], weights[kept]
        y = None if y is None else y[kept]
        labels = None if labels is None else labels[kept]
    X = np.asarray(X, dtype=np.float64)
    n, d = X.shape
    if weights is None and n and _one_product_likely(X):
        fast = (_unshifted_slice_scatters(X, y, scheme, labels, response) if slice_scatter
                else _unshifted_statistics(X, y, scheme, labels, response))
        if fast is not None:
            return fast
    if check_finite is not None:
        check_finite(X)
    column_scale, squares = safe_column_scale(X)
    if not np.all(column_scale == 1.0):
        X = X / column_scale
    total = float(n if weights is None else weights.sum())
    mean = weighted_mean(X, weights) if n else np.zeros(d)
    shift = _shift_for(mean, squares, n)
    n_slices = 0 if scheme is None else scheme.n_slices
    if scheme is not None and labels is None:
        labels = scheme.labels(y)
    rows = None if scheme is None else np.bincount(labels, minlength=n_slices)
    slices = None
    if slice_scatter:  # SAVE: every slice's own scatter; the inputs' moments pool them
        totals, means, scatters = slice_scatters(X - shift if np.any(shift) else X, labels,
                                                 n_slices, weights)
        slices = GroupMoments(totals, rows, shift, means, scatters)
        inputs = slices.pooled() if n else _empty(d, shift)
    else:
        sums, second, groups = _shifted_sums(X, shift, weights, labels, n_slices, mean * total)
        if n == 0:
            inputs = _empty(d, shift)
        else:
            mean = sums / total
            inputs = GroupMoments(np.array([total]), np.array([n]), shift, mean[None],
                                  (second - total * np.outer(mean, mean))[None])
        if scheme is not None:
            totals = (rows if weights is None else np.bincount(
                labels, weights, minlength=n_slices)).astype(float)
            means = np.divide(groups, totals[:, None], out=np.zeros_like(groups),
                              where=totals[:, None] > 0)
            slices = GroupMoments(totals, rows, shift, means, None)
    moments = None
    if response:
        moments = ResponseMoments.of(X, np.asarray(y, dtype=np.float64), weights, inputs)
    return MomentStatistics(column_scale, inputs, slices, scheme, moments)


def _one_product_likely(X: np.ndarray) -> bool:
    """Whether the first rows pass the checks of the one-product path.

    Only a guess that saves work: data with large means or extreme columns
    (years, prices, an empty indicator) go straight to the general path
    instead of paying for a product first; the path checks exactly anyway.
    """
    head = X[:_SCREEN_ROWS]
    squares = np.einsum("ij,ij->j", head, head)
    return _raw_sums_accurate(head.mean(axis=0), squares, head.shape[0])


def _one_blas_thread_if_thin(n_columns: int):
    """:func:`splitlift._blas.one_blas_thread` for at most ``_THIN_COLUMNS`` columns."""
    return one_blas_thread() if n_columns <= _THIN_COLUMNS else nullcontext()


def _unshifted_statistics(X, y, scheme, labels, response: bool) -> MomentStatistics | None:
    """Unweighted statistics from one symmetric product and one more pass, or None.

    The common case: every column's sum of squares lies in the safe range and
    no column's mean dominates its spread, so uncentred sums are accurate
    (see :func:`_shift_for`). The sums of squares are then the diagonal of
    ``X^T X``, and the column sums come with the slice sums (SIR) or the
    response cross-products (pHd) instead of in passes of their own. None
    sends the caller down the general, shifted path.
    """
    n, d = X.shape
    # (one BLAS thread for a thin product: its spinning workers would slow the compiled
    # pass that follows)
    with np.errstate(over="ignore", invalid="ignore"), _one_blas_thread_if_thin(d):
        second = X.T @ X  # extreme columns: checked next
    squares = np.diag(second)
    if not _in_safe_range(squares):  # before any sums are formed from extreme columns
        return None
    if response:  # Σ x, Σ e x, Σ e x x^T and the moments of e = y - ȳ in one compiled pass
        y = np.asarray(y, dtype=np.float64)
        total, centre, scale, _ = ScalarMoments.location(y)
        sums, raw_cross, weighted_products, powers = _moment_kernels().response_products(
            X, y, scale, centre)
        response_moments = ScalarMoments(total, centre, *powers[1:].tolist(), scale)
    if scheme is not None:
        labels = scheme.labels(y) if labels is None else labels
        groups = slice_sums(X, labels, scheme.n_slices)
        sums = groups.sum(axis=0)
    elif not response:
        sums = X.sum(axis=0)
    mean = sums / n
    if np.any(_shift_for(mean, squares, n)):
        return None
    zero = np.zeros(d)
    inputs = GroupMoments(np.array([float(n)]), np.array([n]), zero, mean[None],
                          (second - n * np.outer(mean, mean))[None])
    slices = moments = None
    if scheme is not None:
        rows = np.bincount(labels, minlength=scheme.n_slices)
        totals = rows.astype(float)
        means = np.divide(groups, totals[:, None], out=np.zeros_like(groups),
                          where=totals[:, None] > 0)
        slices = GroupMoments(totals, rows, zero, means, None)
    if response:
        moments = ResponseMoments.from_products(response_moments, mean, raw_cross,
                                                weighted_products, float(powers[0]) * scale)
    return MomentStatistics(np.ones(d), inputs, slices, scheme, moments)


def _unshifted_slice_scatters(X, y, scheme, labels, response: bool
                              ) -> MomentStatistics | None:
    """SAVE's unweighted statistics straight from the slices' own scatters, or None.

    One compiled pass adds every row to its slice's sums and products
    (:func:`splitlift._moment_kernels.grouped_scatters`), and pooling the
    slices gives the inputs' moments, so no pass of its own computes the
    column means and squares; these are checked afterwards, as in
    :func:`_unshifted_statistics`.
    """
    n, d = X.shape
    labels = scheme.labels(y) if labels is None else labels
    with np.errstate(over="ignore", invalid="ignore"):  # extreme columns: checked below
        totals, means, scatters = _moment_kernels().grouped_scatters(X, labels,
                                                                      scheme.n_slices)
        slices = GroupMoments(totals, totals.astype(np.int64), np.zeros(d), means, scatters)
        inputs = slices.pooled()
        squares = np.diag(inputs.scatter[0]) + n * inputs.mean[0] ** 2
    if not _raw_sums_accurate(inputs.mean[0], squares, n):
        return None
    moments = None
    if response:
        moments = ResponseMoments.of(X, np.asarray(y, dtype=np.float64), None, inputs)
    return MomentStatistics(np.ones(d), inputs, slices, scheme, moments)


def _empty(d: int, shift: np.ndarray) -> GroupMoments:
    return GroupMoments(np.zeros(1), np.zeros(1, dtype=np.int64), shift, np.zeros((1, d)),
                        np.zeros((1, d, d)))
