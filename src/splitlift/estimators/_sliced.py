"""Sliced inverse regression and sliced average variance estimation."""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..dimension import satterthwaite_p_value
from ..moments import DEFAULT_RANK_TOLERANCE, _row_chunks
from ._base import SlicedMomentEstimator


class SlicedInverse(SlicedMomentEstimator):
    """Sliced inverse regression (SIR).

    Estimates the subspace spanned by the inverse regression curve
    ``E[Z | y]`` of the whitened inputs ``Z``.

    Parameters
    ----------
    n_slices : int, default 10
        Number of equal-count slices of a continuous response.
    dim : int or "auto", default 2
        Dimension of the estimated subspace (1 <= dim <= n_features), or
        ``"auto"`` to let ``dim_rule`` choose it (0 allowed).
    dim_rule : {"chi2", "weighted_chi2", "permutation", "ladle", "cv"} or rule, default None
        Rule for ``dim="auto"``; None means ``"chi2"``, the sequential
        chi-square test of Li (1991); ``"weighted_chi2"`` drops its normality
        assumption (Bura & Cook 2001). See :mod:`splitlift.dimension`.
    slicing : {"auto", "count", "value"}, default "auto"
        How the response is sliced; see :func:`splitlift.moments.slice_response`.
        Class labels are always sliced by value.
    slice_edges : array-like of shape (H - 1,), optional
        Fixed interior cut points of a numeric response: slice ``h`` holds
        ``slice_edges[h-1] <= y < slice_edges[h]`` (``n_slices`` is then
        ignored). Use them to make :meth:`partial_fit` batches, Dask fits and
        in-memory fits slice alike, e.g. the ``slice_edges_`` of an earlier
        fit. Every slice must receive at least two rows.
    rank_tolerance : float, default 1e-10
        Relative eigenvalue tolerance of the input covariance: directions
        below it (constant or collinear columns) are left out of the
        estimate, with a :class:`~splitlift.moments.CollinearityWarning`.
    random_state : int, RandomState instance or None, default None
        Seeds the resampling of the ``dim="auto"`` rule (bootstrap,
        permutations or folds) when the rule's own ``random_state`` is None,
        so that one seed makes the whole fit reproducible.

    Attributes
    ----------
    basis_ : ndarray of shape (n_features_in_, dim_)
        Orthonormal basis of the estimated subspace, input coordinates.
    directions_ : ndarray of shape (n_features_in_, n_features_in_)
        Published SIR directions ``Σ^{-1/2} η_k`` as columns.
    eigenvalues_ : ndarray of shape (n_features_in_,)
        Eigenvalues of ``Cov(E[Z | y])``, descending.
    dim_ : int
    n_slices_ : int
        Slices actually used (fewer than asked when ties merge slices or
        the response has few values).
    slice_edges_ : ndarray or None
        Interior edges of the slices used (None when sliced by value); pass
        them as ``slice_edges`` to slice other data alike.
    whitening_ : splitlift.moments.Whitening
    method_matrix_ : ndarray
        ``Σ_h p_h m_h m_h^T`` in whitened coordinates.
    statistics_ : splitlift.sufficient_statistics.MomentStatistics
        The mergeable statistics the estimate was made from.
    n_samples_seen_ : int
        Rows (with positive weight) behind the estimate.
    fit_warnings_ : list of str
        Reasons to doubt the estimate (each also issued as a warning).

    See Also
    --------
    SlicedAverageVariance : also sees symmetric dependence.
    HessianDirections : principal Hessian directions.

    Notes
    -----
    With slice proportions ``p_h`` and whitened slice means ``m_h``, the
    method matrix is ``M = Σ_h p_h m_h m_h^T`` and the directions are
    ``Σ^{-1/2}`` times its leading eigenvectors. Under the linearity
    condition (roughly elliptical X) ``E[Z | y]`` lies in the central
    subspace. SIR misses symmetric dependence such as ``y = (b^T x)^2``,
    where ``E[Z | y] = 0``.

    References
    ----------
    Li, K.-C. (1991). Sliced inverse regression for dimension reduction.
    Journal of the American Statistical Association 86, 316-327.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import SlicedInverse
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((500, 5))
    >>> y = X[:, 0] + X[:, 1] + 0.1 * rng.standard_normal(500)
    >>> est = SlicedInverse(dim=1).fit(X, y)
    >>> np.round(np.abs(est.basis_[:, 0]), 1).tolist()
    [0.7, 0.7, 0.0, 0.0, 0.0]
    """

    _dim_rules = frozenset({"chi2", "weighted_chi2", "permutation", "ladle", "cv"})
    _default_dim_rule = "chi2"

    def __init__(self, n_slices=10, dim=2, dim_rule=None, slicing="auto", slice_edges=None,
                 rank_tolerance=DEFAULT_RANK_TOLERANCE, random_state=None):
        self.n_slices = n_slices
        self.dim = dim
        self.dim_rule = dim_rule
        self.slicing = slicing
        self.slice_edges = slice_edges
        self.rank_tolerance = rank_tolerance
        self.random_state = random_state

    def _method_matrix(self, statistics, whitening, strict):
        slices = self._usable_slices(statistics, strict)
        proportions = slices.weight / statistics.weight
        means = statistics.deviations(slices) @ whitening.matrix.T
        self._slice_fit = (proportions, means)
        return (means * proportions[:, None]).T @ means

    def _chi_square_tests(self, X, y, weighted: bool,
                          sample_weight=None) -> list[tuple[float, int, float]]:
        """Sequential tests of ``dim = k`` for k = 0 .. min(r, H - 1) - 1.

        Unweighted: ``n Σ_{j>k} λ_j ~ χ²((r - k)(H - k - 1))`` for normal X
        (Li 1991, Theorem 5.1). Weighted: the same statistic against
        ``Σ ω_j χ²_1``, the ``ω_j`` being the eigenvalues of the covariance of
        ``Γ_0^T z_i ⊗ Ψ_0^T D_p^{-1/2} J_i`` (Bura & Cook 2001), where
        ``Γ_0, Ψ_0`` span the left and right singular spaces of the scaled
        slice-mean matrix beyond the first k and ``J_i`` is the slice
        indicator of row i.
        """
        proportions, means = self._slice_fit
        n, rank, n_slices = self.statistics_.weight, self.whitening_.rank, proportions.size
        root_p = np.sqrt(proportions)
        scaled = means.T * root_p  # (r, H); its squared singular values are the λ_j
        left, singular, right_t = np.linalg.svd(scaled, full_matrices=True)
        eigen = np.zeros(rank)
        eigen[: singular.size] = singular**2
        if weighted:  # needs every row: its slice and whitened coordinates
            labels = self.statistics_.scheme.labels(y)
            Z = self.whitening_.transform(X / self.column_scale_)
        tests = []
        for k in range(min(rank, n_slices - 1)):
            statistic = float(n * eigen[k:].sum())
            df = (rank - k) * (n_slices - k - 1)
            if not weighted:
                tests.append((statistic, df, float(stats.chi2.sf(statistic, df))))
                continue
            outside_right = right_t[k:].T  # (H, H - k), contains sqrt(p)
            projector = outside_right @ outside_right.T - np.outer(root_p, root_p)
            values, vectors = np.linalg.eigh(projector)
            psi = vectors[:, values > 0.5]  # (H, H - k - 1)
            row_factor = psi[labels] / root_p[labels, None]
            covariance = _kronecker_covariance(Z @ left[:, k:], row_factor, sample_weight)
            weights = np.linalg.eigvalsh(covariance)
            tests.append((statistic, df, satterthwaite_p_value(statistic, weights)))
        return tests


class SlicedAverageVariance(SlicedMomentEstimator):
    """Sliced average variance estimation (SAVE).

    Parameters
    ----------
    n_slices : int, default 5
        Number of equal-count slices. SAVE estimates a covariance in each
        slice, so it wants more rows per slice than SIR (common practice).
    dim : int or "auto", default 2
    dim_rule : {"permutation", "ladle", "cv"} or rule object, default None
        Rule for ``dim="auto"``; None means the ladle (Luo & Li 2016).
    slicing : {"auto", "count", "value"}, default "auto"
    slice_edges : array-like of shape (H - 1,), optional
        See :class:`SlicedInverse`.
    rank_tolerance : float, default 1e-10
        See :class:`SlicedInverse`.
    random_state : int, RandomState instance or None, default None
        Seeds the resampling of the ``dim="auto"`` rule (bootstrap,
        permutations or folds) when the rule's own ``random_state`` is None,
        so that one seed makes the whole fit reproducible.

    Attributes
    ----------
    basis_, directions_, eigenvalues_, dim_, n_slices_, slice_edges_, whitening_
        As for :class:`SlicedInverse`.
    method_matrix_ : ndarray
        ``Σ_h p_h (I - V_h)^2`` in whitened coordinates.
    statistics_, n_samples_seen_, fit_warnings_
        As for :class:`SlicedInverse`.

    See Also
    --------
    SlicedInverse, HessianDirections

    Notes
    -----
    ``V_h`` is the unbiased (divisor ``n_h - 1``) covariance of the whitened
    inputs within slice h; the directions are ``Σ^{-1/2}`` times the leading
    eigenvectors of ``M = Σ_h p_h (I - V_h)^2``. SAVE needs the linearity
    and constant-variance conditions on X and recovers symmetric dependence
    that SIR misses.

    References
    ----------
    Cook, R. D. and Weisberg, S. (1991). Discussion of "Sliced inverse
    regression for dimension reduction". Journal of the American
    Statistical Association 86, 328-332.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import SlicedAverageVariance
    >>> rng = np.random.default_rng(1)
    >>> X = rng.standard_normal((2000, 4))
    >>> y = X[:, 2] ** 2 + 0.1 * rng.standard_normal(2000)
    >>> est = SlicedAverageVariance(dim=1).fit(X, y)
    >>> int(np.argmax(np.abs(est.basis_[:, 0])))
    2
    """

    _slice_scatter = True

    def __init__(self, n_slices=5, dim=2, dim_rule=None, slicing="auto", slice_edges=None,
                 rank_tolerance=DEFAULT_RANK_TOLERANCE, random_state=None):
        self.n_slices = n_slices
        self.dim = dim
        self.dim_rule = dim_rule
        self.slicing = slicing
        self.slice_edges = slice_edges
        self.rank_tolerance = rank_tolerance
        self.random_state = random_state

    def _method_matrix(self, statistics, whitening, strict):
        slices = self._usable_slices(statistics, strict)
        # unbiased within-slice covariances (divisor n_h - 1; frequency weights)
        covariances = slices.scatter / (slices.weight - 1)[:, None, None]
        whitened = whitening.matrix @ covariances @ whitening.matrix.T
        deviations = np.eye(whitening.rank) - whitened
        squared = deviations @ deviations
        return np.tensordot(slices.weight / statistics.weight, squared, axes=1)


def _kronecker_covariance(left: np.ndarray, right: np.ndarray, weights=None) -> np.ndarray:
    """(Weighted) covariance of the rows ``left_i ⊗ right_i``, accumulated in row chunks."""
    width = left.shape[1] * right.shape[1]
    total, second = np.zeros(width), np.zeros((width, width))
    for rows in _row_chunks(left.shape[0], width):
        products = (left[rows, :, None] * right[rows, None, :]).reshape(-1, width)
        weighted = products if weights is None else products * weights[rows, None]
        total += weighted.sum(axis=0)
        second += weighted.T @ products
    count = left.shape[0] if weights is None else weights.sum()
    mean = total / count
    return second / count - np.outer(mean, mean)
