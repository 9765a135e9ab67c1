"""Average derivative estimation (ADE), density-weighted or with kernel scores."""

from __future__ import annotations

from collections.abc import Iterator
from numbers import Integral, Real

import numpy as np
from sklearn.utils._param_validation import Interval

from .._validation import check_sample_count
from ..moments import (
    DEFAULT_RANK_TOLERANCE,
    Slices,
    Whitening,
    _is_discrete,
    check_slice_sizes,
    slice_response,
    weighted_mean,
)
from ._base import SubspaceEstimator
from ._local import response_columns

# Rows per chunk are chosen so one (rows x n) block of kernel values holds
# about this many floats (16 MB in float64); a few such blocks are alive at once.
_PAIR_CHUNK_ELEMENTS = 1 << 21


def rule_of_thumb_bandwidth(n_samples: int, n_features: int) -> float:
    """Normal-reference bandwidth for sphered data, ``(4 / ((p + 2) n))^(1/(p + 4))``.

    Silverman's rule of thumb for a Gaussian kernel on data with identity
    covariance (Silverman 1986, eq. 4.14, from memory); common practice for
    kernel density estimation, used here for the kernel score and the
    density weights.
    """
    return float((4.0 / ((n_features + 2) * n_samples)) ** (1.0 / (n_features + 4)))


class AverageDerivative(SubspaceEstimator):
    """Average derivative estimation (ADE), optionally score-based slicing.

    Estimates the average gradient of the regression function from kernel
    estimates of the input density, without fitting the regression itself.
    For ``y = g(b^T x) + ε`` the average gradient is a multiple of ``b``;
    applied to slice indicators of the response it gives several vectors in
    the relevant subspace.

    Parameters
    ----------
    dim : int or "auto", default 1
        Dimension of the estimated subspace. Without slicing ADE yields a
        single direction; with ``n_slices`` (or class labels) up to the
        number of slices minus one. ``"auto"`` chooses it with ``dim_rule``.
    dim_rule : {"permutation", "ladle", "cv"} or rule object, default None
        Rule for ``dim="auto"``; None means the ladle
        (:mod:`splitlift.dimension`).
    bandwidth : float or None, default None
        Gaussian kernel bandwidth in sphered (whitened) coordinates. None uses
        :func:`rule_of_thumb_bandwidth`, ``(4 / ((p + 2) n))^(1/(p+4))``.
    density_weighted : bool, default True
        True: density-weighted ADE ``E[p(x) ∇f(x)]`` by its pairwise
        U-statistic (Powell, Stock & Stoker 1989), no trimming needed.
        False: classical ADE ``E[∇f(x)]`` from the kernel score, with the
        lowest-density points trimmed (Härdle & Stoker 1989).
    n_slices : int or None, default None
        None: use the numeric response itself. An integer: apply ADE to the
        indicators of equal-count response slices (score-based slicing).
        Class labels are always used as one indicator per class.
    trim : float, default 0.05
        Classical ADE only: fraction of rows with the lowest estimated
        density that are left out of the average, where the estimated score
        is unreliable. Must lie in [0, 1). Ignored when
        ``density_weighted=True``.
    sample_rows : int or None, default None
        Dask input only: the fit uses a uniform random sample of at most this
        many rows, loaded into memory (the pairwise sums are quadratic in
        the rows); None means 20 000. Recorded in ``row_sample_``.
    random_state : int, RandomState instance or None, default None
        Seeds the row sample of Dask input and the resampling of the
        ``dim="auto"`` rule (bootstrap, permutations or folds) when the
        rule's own ``random_state`` is None, so that one seed makes the
        whole fit reproducible.

    Attributes
    ----------
    basis_ : ndarray of shape (n_features_in_, dim_)
        Orthonormal basis of the estimated subspace, input coordinates.
    directions_ : ndarray of shape (n_features_in_, n_features_in_)
        Unit eigenvectors of the method matrix as columns, ordered like
        ``eigenvalues_``; zero columns beyond the directions the method can
        give (and for constant input columns). Without slicing the first
        column points along ``average_derivatives_[0]``.
    eigenvalues_ : ndarray of shape (n_features_in_,)
        Eigenvalues of the method matrix, descending.
    average_derivatives_ : ndarray of shape (n_responses, n_features_in_)
        The estimated average derivatives in input coordinates, one row per
        response column (the centred response, or each slice indicator).
    bandwidth_ : float
        Bandwidth used.
    effective_neighbours_ : float
        Mean kernel weight of the other rows around each row; below 0.01 the
        estimate rests on a few pairs (warned), below 1e-10 it is refused.
    whitening_ : splitlift.moments.Whitening
        The sphering of the inputs; constant or collinear columns are left
        out at its default tolerance, with a
        :class:`~splitlift.moments.CollinearityWarning`.
    n_slices_ : int
        Slices used (1 without slicing).
    dim_ : int
    row_sample_ : dict or None
        For Dask input, the row sample fitted on: ``rows_total``,
        ``rows_used`` and ``random_state``; None for in-memory input.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names.

    See Also
    --------
    GradientOuterProduct : local gradients, several directions from one response.
    SlicedInverse : slice means of the inputs; the Gaussian special case of score slicing.

    Notes
    -----
    Inputs are sphered, ``z = W (x - mean)`` with unit covariance (the
    shared :class:`~splitlift.moments.Whitening`): for Gaussian inputs a
    Gaussian kernel then smooths the density without turning the estimated
    direction, whatever the bandwidth, which per-column scaling of
    correlated inputs would not do. ``h`` is the bandwidth,
    ``K_ij = exp(-‖z_i - z_j‖² / (2 h²))`` and ``r_i`` a centred response
    column. Density-weighted ADE is the U-statistic

    ``δ = c / (n (n - 1)) Σ_{i≠j} K_ij (z_i - z_j)(r_i - r_j)``,
    ``c = (2π)^(-p/2) h^(-(p+2))``,

    an estimate of ``E[p(z) ∇f]``; it equals ``2 c / (n(n-1)) Z^T (D - K) r``
    with ``D`` the row sums of ``K``, computed in row chunks, so memory is
    ``O(n)`` per chunk row and never ``O(n²)``. Classical ADE averages
    ``ŝ_i r_i`` over the rows kept by trimming, with the leave-one-out
    kernel score ``ŝ_i = (z_i - Σ_{j≠i} K_ij z_j / Σ_{j≠i} K_ij) / h²``, an
    estimate of ``-∇ log p``. Gradients map to input coordinates by the
    chain rule, ``∇_x f = W^T ∇_z f``. Both cost ``O(n² p)`` time.

    Silverman's rule targets density estimation; in many dimensions it gives
    small bandwidths and noisy averages, and a larger ``bandwidth`` (around
    1) is often more accurate for roughly Gaussian inputs.

    With slices ``h`` of proportion ``p_h`` and average derivatives ``δ_h``
    of their centred indicators, the method matrix is
    ``M = Σ_h δ_h δ_h^T / p_h``, the covariance of the slice means of the
    score (Babichev & Bach 2018); it has rank at most ``n_slices - 1``.
    Without slicing ``M = δ δ^T``. With Gaussian inputs the score is linear,
    so by Stein's lemma ``E[∇f]`` is the least-squares slope and score
    slicing reduces to sliced inverse regression.

    References
    ----------
    Härdle, W. and Stoker, T. M. (1989). Investigating smooth multiple
    regression by the method of average derivatives. Journal of the
    American Statistical Association 84, 986-995.

    Powell, J. L., Stock, J. H. and Stoker, T. M. (1989). Semiparametric
    estimation of index coefficients. Econometrica 57, 1403-1430.

    Babichev, D. and Bach, F. (2018). Slice inverse regression with score
    functions. Electronic Journal of Statistics 12, 1507-1543.

    Silverman, B. W. (1986). Density Estimation for Statistics and Data
    Analysis. Chapman & Hall, London.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import AverageDerivative
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((1000, 4))
    >>> y = np.exp(0.5 * (X[:, 0] + X[:, 2])) + 0.1 * rng.standard_normal(1000)
    >>> est = AverageDerivative().fit(X, y)
    >>> np.round(np.abs(est.basis_[:, 0]), 1).tolist()
    [0.7, 0.0, 0.7, 0.0]
    """

    _parameter_constraints: dict = {
        **SubspaceEstimator._parameter_constraints,
        "bandwidth": [Interval(Real, 0, None, closed="neither"), None],
        "density_weighted": ["boolean"],
        "n_slices": [Interval(Integral, 2, None, closed="left"), None],
        "trim": [Interval(Real, 0, 1, closed="left")],
        "sample_rows": [Interval(Integral, 1, None, closed="left"), None],
    }

    _weights_rows_by_response = True

    def __init__(self, dim=1, dim_rule=None, bandwidth=None, density_weighted=True,
                 n_slices=None, trim=0.05, sample_rows=None, random_state=None):
        self.dim = dim
        self.dim_rule = dim_rule
        self.bandwidth = bandwidth
        self.density_weighted = density_weighted
        self.n_slices = n_slices
        self.trim = trim
        self.sample_rows = sample_rows
        self.random_state = random_state

    def _eigen_decomposition(self, X, y, weights=None):
        n = X.shape[0]
        check_sample_count(n, 3)
        whitening = self.whitening_ = Whitening.fit(X, DEFAULT_RANK_TOLERANCE, weights)
        Z = whitening.transform(X)
        responses, proportions = self._responses(y, weights)
        available = self._available_directions(proportions, whitening.rank)
        size = n if weights is None else float(weights.sum())  # rows, as if repeated
        self.bandwidth_ = (
            rule_of_thumb_bandwidth(size, Z.shape[1]) if self.bandwidth is None
            else self.bandwidth
        )
        if self.density_weighted:
            left, right, neighbours = _density_weighted_derivatives(Z, responses, self.bandwidth_,
                                                                    weights)
        else:
            left, right, neighbours = _kernel_score_derivatives(Z, responses, self.bandwidth_,
                                                                self.trim, weights)
        derivatives = left.T @ right
        _refuse_degenerate(derivatives, neighbours, self.bandwidth_, n, Z.shape[1])
        self.effective_neighbours_ = neighbours
        # chain rule for z = W (x - mean): the input gradient is W^T times the sphered one
        self.average_derivatives_ = whitening.to_input(derivatives.T).T
        # kept for resampling rules, which reuse the kernel sums instead of refitting
        self._row_factors, self._proportions, self._available = (left, right), proportions, \
            available
        return self._eigen_pairs(derivatives)

    def _eigen_pairs(self, derivatives: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Decompose in sphered coordinates, where it does not depend on column units."""
        values, sphered = self._directions(derivatives, self._proportions, self._available)
        d = self.whitening_.matrix.shape[1]
        eigenvalues, directions = np.zeros(d), np.zeros((d, d))
        eigenvalues[: self._available] = values
        directions[:, : self._available] = self.whitening_.to_input(sphered)
        norms = np.linalg.norm(directions, axis=0)
        return eigenvalues, directions / np.where(norms > 0, norms, 1.0)

    def _resampled_directions(self, generator) -> np.ndarray:
        """Directions from the rows' terms of the estimate drawn with replacement, no refit.

        The estimate is a sum of one term per row; a replicate redraws the
        rows of that sum and keeps each row's kernel sums over the full
        sample, so it costs one small eigen-decomposition instead of a
        quadratic refit (an approximation to the bootstrap of the U-statistic).
        """
        left, right = self._row_factors
        picks = generator.randint(0, left.shape[0], left.shape[0])
        return self._eigen_pairs(left[picks].T @ right[picks])[1]

    def _method_warnings(self) -> list[str]:
        if self.effective_neighbours_ >= FEW_NEIGHBOURS:
            return []
        return [
            f"the kernel at bandwidth {self.bandwidth_:.3g} gives each row only "
            f"{self.effective_neighbours_:.2g} effective neighbours (fewer than "
            f"{FEW_NEIGHBOURS:g}), so the average derivative rests on a few pairs of rows. "
            "Pass a larger bandwidth, use fewer features or more rows, or use "
            "GradientOuterProduct or SlicedInverse."
        ]

    def _responses(self, y, weights=None) -> tuple[np.ndarray, np.ndarray | None]:
        """Centred response columns and, when sliced, the slice proportions."""
        if self.n_slices is None and not _is_discrete(y):
            column, _ = response_columns(y)
            self.n_slices_ = 1
            return column - weighted_mean(column, weights), None
        slices: Slices = slice_response(y, self.n_slices or 2, "auto", weights)
        check_slice_sizes(slices, self.n_slices or slices.n_slices)
        self.n_slices_ = slices.n_slices
        indicators = slices.indicator().T.toarray()
        return indicators - slices.proportions, slices.proportions

    def _available_directions(self, proportions, rank: int) -> int:
        if proportions is None:
            available = 1
            hint = "set n_slices (e.g. n_slices=5) for more directions, or choose dim=1"
        else:
            available = min(proportions.size - 1, rank)
            hint = (
                f"with {proportions.size} slices and {rank} well-conditioned input directions "
                f"at most {available} exist; raise n_slices or lower dim"
            )
        if not isinstance(self.dim, str) and self.dim > available:
            raise ValueError(
                f"dim={self.dim} exceeds the {available} direction(s) average derivative "
                f"estimation can give here; {hint}."
            )
        return available

    @staticmethod
    def _directions(derivatives, proportions, available):
        """Leading ``available`` eigen-pairs of the derivatives' (scaled) outer product."""
        if proportions is None:
            matrix = np.outer(derivatives[0], derivatives[0])
        else:
            scaled = derivatives / np.sqrt(proportions)[:, None]
            matrix = scaled.T @ scaled
        values, vectors = np.linalg.eigh((matrix + matrix.T) / 2)
        order = np.argsort(-values, kind="stable")[:available]
        values, vectors = np.clip(values[order], 0.0, None), vectors[:, order]
        if proportions is None and vectors[:, 0] @ derivatives[0] < 0:
            vectors = -vectors
        return values, vectors


#: Mean number of effective kernel neighbours per row (``Σ_{j≠i} K_ij``) below
#: which the estimate rests on a handful of pairs: warned (it ended 20-80
#: degrees off in simulations at such values), and below the second value
#: refused, since it is then round-off (calibrated on Gaussian designs).
FEW_NEIGHBOURS, NO_NEIGHBOURS = 1e-2, 1e-10


def _refuse_degenerate(derivatives: np.ndarray, neighbours: float, bandwidth: float,
                       n: int, p: int) -> None:
    """Fail when the kernel weights (nearly) all underflowed, leaving nothing to decompose."""
    finite = np.all(np.isfinite(derivatives))
    if finite and np.any(derivatives != 0) and neighbours >= NO_NEIGHBOURS:
        return
    raise ValueError(
        f"average derivative estimation is degenerate here: with n = {n} rows in {p} "
        f"sphered dimensions the kernel at bandwidth {bandwidth:.3g} gives each row "
        f"{neighbours:.2g} effective neighbours, so the estimated average derivative is "
        + ("not finite" if not finite else "round-off")
        + ". Pass a larger bandwidth (e.g. bandwidth=2.0), use fewer features, or use "
        "another estimator (SlicedInverse or GradientOuterProduct)."
    )


def _pair_blocks(Z: np.ndarray, bandwidth: float) -> Iterator[tuple[slice, np.ndarray]]:
    """Row blocks of squared kernel arguments ``‖z_i - z_j‖² / h²``, all j, in chunks."""
    n = Z.shape[0]
    squared_norms = np.einsum("ij,ij->i", Z, Z)
    step = max(1, _PAIR_CHUNK_ELEMENTS // n)
    for start in range(0, n, step):
        rows = slice(start, min(start + step, n))
        block = Z[rows] @ Z.T
        block *= -2.0
        block += squared_norms[rows, None]
        block += squared_norms[None, :]
        np.maximum(block, 0.0, out=block)
        block /= bandwidth**2
        yield rows, block


def _density_weighted_derivatives(Z, responses, bandwidth, weights=None):
    """Powell-Stock-Stoker U-statistic for each response column, as row factors.

    Returns ``(left, right, neighbours)``: the derivatives, shape (q, p), are
    ``left.T @ right``, a sum of one term per row (which resampling rules
    reuse), and ``neighbours`` is the mean of ``Σ_{j≠i} K_ij``. With
    frequency weights ``w`` the pairs of the repeated sample are summed,
    ``Σ_{i,j} w_i w_j K_ij (z_i - z_j)(r_i - r_j)`` over ``W (W - 1)`` pairs,
    copies of one row adding nothing but their count.
    """
    n, p = Z.shape
    w = np.ones(n) if weights is None else weights
    total = w.sum()
    weighted_responses = responses * w[:, None]
    laplacian_product = np.zeros((n, responses.shape[1]))
    neighbours = 0.0
    for rows, block in _pair_blocks(Z, bandwidth):
        kernel = np.exp(-0.5 * block, out=block)
        around = kernel @ w
        # rows of (D - K) r: the self pair cancels, so no diagonal fix is needed
        laplacian_product[rows] = around[:, None] * responses[rows]
        laplacian_product[rows] -= kernel @ weighted_responses
        laplacian_product[rows] *= w[rows, None]
        neighbours += w[rows] @ (around - 1.0)  # a row is not its own neighbour
    constant = (2 * np.pi) ** (-p / 2) * bandwidth ** (-(p + 2))
    factor = 2 * constant / (total * (total - 1))
    return factor * laplacian_product, Z, max(neighbours / total, 0.0)


def _kernel_score_derivatives(Z, responses, bandwidth, trim, weights=None):
    """Härdle-Stoker trimmed kernel-score average for each response column, as row factors.

    Returns ``(left, right, neighbours)`` as :func:`_density_weighted_derivatives`.
    With frequency weights a row's other copies (``w_i - 1`` of them, at
    distance zero) count among its neighbours, as in the repeated sample.
    """
    n = Z.shape[0]
    w = np.ones(n) if weights is None else weights
    copies = np.maximum(w - 1.0, 0.0)
    scores = np.empty_like(Z)
    log_density = np.empty(n)
    for rows, block in _pair_blocks(Z, bandwidth):
        local = np.arange(rows.stop - rows.start)
        block[local, np.arange(rows.start, rows.stop)] = np.inf  # leave one out
        # shift by the nearest neighbour so the weights cannot all underflow
        nearest = np.where(copies[rows] > 0, 0.0, block.min(axis=1))
        kernel = np.exp(-0.5 * (block - nearest[:, None]), out=block)
        totals = kernel @ w + copies[rows]
        around = kernel @ (Z * w[:, None]) + copies[rows, None] * Z[rows]
        scores[rows] = (Z[rows] - around / totals[:, None]) / bandwidth**2
        log_density[rows] = np.log(totals) - 0.5 * nearest
    kept = (log_density >= _repeated_quantile(log_density, w, trim) if trim > 0
            else np.ones(n, bool))
    left = responses * (kept * w / w.sum())[:, None]
    return left, scores, float(w @ np.exp(log_density) / w.sum())


def _repeated_quantile(values: np.ndarray, weights: np.ndarray, level: float) -> float:
    """``np.quantile`` (linear) of ``values`` repeated ``weights`` times, without repeating."""
    order = np.argsort(values, kind="stable")
    ordered, cumulative = values[order], np.cumsum(weights[order])
    position = level * (cumulative[-1] - 1)
    low, high = np.floor(position), np.ceil(position)
    at = np.minimum(np.searchsorted(cumulative, [low, high], side="right"), values.size - 1)
    return float(ordered[at[0]] + (position - low) * (ordered[at[1]] - ordered[at[0]]))
