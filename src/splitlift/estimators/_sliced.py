"""Sliced inverse regression and sliced average variance estimation."""

from __future__ import annotations

import numpy as np

from ..moments import DEFAULT_RANK_TOLERANCE, slice_covariances
from ._base import SlicedMomentEstimator


class SlicedInverse(SlicedMomentEstimator):
    """Sliced inverse regression (SIR).

    Estimates the subspace spanned by the inverse regression curve
    ``E[Z | y]`` of the whitened inputs ``Z``.

    Parameters
    ----------
    n_slices : int, default 10
        Number of equal-count slices of a continuous response.
    dim : int, default 2
        Dimension of the estimated subspace (1 <= dim <= n_features).
    slicing : {"auto", "count", "value"}, default "auto"
        How the response is sliced; see :func:`splitlift.moments.slice_response`.
        Class labels are always sliced by value.
    rank_tolerance : float, default 1e-10
        Relative eigenvalue tolerance of the input covariance: directions
        below it (constant or collinear columns) are left out of the
        estimate, with a :class:`~splitlift.moments.CollinearityWarning`.

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
    whitening_ : splitlift.moments.Whitening
    method_matrix_ : ndarray
        ``Σ_h p_h m_h m_h^T`` in whitened coordinates.

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

    def __init__(self, n_slices=10, dim=2, slicing="auto", rank_tolerance=DEFAULT_RANK_TOLERANCE):
        self.n_slices = n_slices
        self.dim = dim
        self.slicing = slicing
        self.rank_tolerance = rank_tolerance

    def _method_matrix(self, X, y, whitening):
        slices = self._slices(y)
        means = (slices.means(X) - whitening.mean) @ whitening.matrix.T
        return (means * slices.proportions[:, None]).T @ means


class SlicedAverageVariance(SlicedMomentEstimator):
    """Sliced average variance estimation (SAVE).

    Parameters
    ----------
    n_slices : int, default 5
        Number of equal-count slices. SAVE estimates a covariance in each
        slice, so it wants more rows per slice than SIR (common practice).
    dim : int, default 2
    slicing : {"auto", "count", "value"}, default "auto"
    rank_tolerance : float, default 1e-10
        See :class:`SlicedInverse`.

    Attributes
    ----------
    basis_, directions_, eigenvalues_, dim_, n_slices_, whitening_, method_matrix_
        As for :class:`SlicedInverse`; the method matrix is
        ``Σ_h p_h (I - V_h)^2``.

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

    def __init__(self, n_slices=5, dim=2, slicing="auto", rank_tolerance=DEFAULT_RANK_TOLERANCE):
        self.n_slices = n_slices
        self.dim = dim
        self.slicing = slicing
        self.rank_tolerance = rank_tolerance

    def _method_matrix(self, X, y, whitening):
        slices = self._slices(y)
        covariances = np.stack(
            [whitening.whiten_moment(c) for c in slice_covariances(X, slices, whitening.mean)]
        )
        deviations = np.eye(whitening.rank) - covariances
        squared = deviations @ deviations
        return np.tensordot(slices.proportions, squared, axes=1)
