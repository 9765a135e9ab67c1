"""Principal Hessian directions."""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..moments import DEFAULT_RANK_TOLERANCE, Whitening
from ..sufficient_statistics import MomentStatistics, ResponseMoments
from ._base import MomentEstimator

#: Residuals smaller than this fraction of the response's spread (a thousand
#: times the float precision) are rounding error: y is fitted exactly.
EXACT_FIT_TOLERANCE = 1e3 * np.finfo(float).eps


class HessianDirections(MomentEstimator):
    """Principal Hessian directions (pHd).

    Parameters
    ----------
    dim : int or "auto", default 2
        Dimension of the estimated subspace, or ``"auto"``.
    dim_rule : {"chi2", "permutation", "ladle", "cv"} or rule object, default None
        Rule for ``dim="auto"``; None means ``"chi2"``, the test of Li (1992).
    residuals : bool, default False
        False: response-based pHd, weights ``y - ȳ``. True: residual-based
        pHd, weights the residuals of an ordinary least-squares fit of y on
        X, which removes the linear trend so that curvature stands out.
    rank_tolerance : float, default 1e-10
        See :class:`SlicedInverse`.
    random_state : int, RandomState instance or None, default None
        Seeds the resampling of the ``dim="auto"`` rule (bootstrap,
        permutations or folds) when the rule's own ``random_state`` is None,
        so that one seed makes the whole fit reproducible.

    Attributes
    ----------
    basis_ : ndarray of shape (n_features_in_, dim_)
    directions_ : ndarray of shape (n_features_in_, n_features_in_)
    eigenvalues_ : ndarray of shape (n_features_in_,)
        Signed eigenvalues of ``E[(y - ȳ) Z Z^T]``, ordered by decreasing
        absolute value.
    dim_ : int
    whitening_ : splitlift.moments.Whitening
    method_matrix_ : ndarray
    statistics_ : splitlift.sufficient_statistics.MomentStatistics
        The mergeable statistics the estimate was made from.
    n_samples_seen_ : int
    fit_warnings_ : list of str

    See Also
    --------
    SlicedInverse, SlicedAverageVariance

    Notes
    -----
    By Stein's lemma, with Gaussian X the matrix ``E[(y - ȳ) Z Z^T]`` is the
    average Hessian of the regression function in whitened coordinates, so
    its eigenvectors with the largest absolute eigenvalues span directions
    of curvature. A purely linear trend is invisible to the response-based
    version; the residual-based version is the usual remedy. Needs a
    numeric response.

    References
    ----------
    Li, K.-C. (1992). On principal Hessian directions for data visualization
    and dimension reduction: another application of Stein's lemma. Journal
    of the American Statistical Association 87, 1025-1039.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import HessianDirections
    >>> rng = np.random.default_rng(2)
    >>> X = rng.standard_normal((2000, 4))
    >>> y = X[:, 1] ** 2 + 0.1 * rng.standard_normal(2000)
    >>> est = HessianDirections(dim=1).fit(X, y)
    >>> int(np.argmax(np.abs(est.basis_[:, 0])))
    1
    """

    _parameter_constraints: dict = {
        **MomentEstimator._parameter_constraints,
        "residuals": ["boolean"],
    }
    _accepts_labels = False
    _weights_rows_by_response = True
    _dim_rules = frozenset({"chi2", "permutation", "ladle", "cv"})
    _default_dim_rule = "chi2"

    def __init__(self, dim=2, dim_rule=None, residuals=False,
                 rank_tolerance=DEFAULT_RANK_TOLERANCE, random_state=None):
        self.dim = dim
        self.dim_rule = dim_rule
        self.residuals = residuals
        self.rank_tolerance = rank_tolerance
        self.random_state = random_state

    _response_moments = True

    def _statistics(self, X, y, weights) -> MomentStatistics:
        statistics = super()._statistics(X, y, weights)
        _refuse_constant_response(statistics)
        if not self.residuals:
            return statistics
        # second pass: co-moments of the OLS residuals, about centres known from the first
        slope, centre = self.residual_slope(statistics)
        scaled = X if np.all(statistics.column_scale == 1.0) else X / statistics.column_scale
        residuals = y - scaled @ slope
        return statistics.with_residuals(ResponseMoments.about(
            scaled, residuals, weights, statistics.mean, centre))

    def residual_slope(self, statistics: MomentStatistics) -> tuple[np.ndarray, float]:
        """OLS slope ``Σ^+ Cov(x, y)`` (rescaled columns) and the mean residual ``ȳ - mean·slope``.

        ``Σ^+`` is the pseudo-inverse of the covariance on its
        well-conditioned part, ``W^T W`` with the whitening ``W``.
        """
        whitening = Whitening.from_moments(statistics.mean, statistics.covariance,
                                           self.rank_tolerance)
        covariance_xy = statistics.response.cross / statistics.weight
        slope = whitening.matrix.T @ (whitening.matrix @ covariance_xy)
        return slope, statistics.response.response.raw_mean - statistics.mean @ slope

    def _method_matrix(self, statistics, whitening, strict):
        moments = statistics.residuals if self.residuals else statistics.response
        _refuse_constant_response(statistics)
        if self.residuals and moments.response.variance <= (
                EXACT_FIT_TOLERANCE**2 * statistics.response.response.variance):
            raise ValueError(
                "the least-squares fit of y on X leaves no residual (y is a linear function "
                "of X, or there are no more rows than columns), so residual-based pHd has "
                "nothing to find; use residuals=False, or a linear model."
            )
        self._weight_variance = moments.response.variance
        return whitening.whiten_moment(moments.weighted_scatter / statistics.weight)

    def _chi_square_tests(self, X, y, weighted: bool,
                          sample_weight=None) -> list[tuple[float, int, float]]:
        """Tests of ``dim = k``: ``n Σ_{j>k} λ_j^2 / (2 Var(w)) ~ χ²((r-k)(r-k+1)/2)``.

        ``w`` are the pHd weights (centred response or OLS residuals); valid
        for normal X (Li 1992, Theorem 4.1; from memory). No weighted form.
        """
        if weighted:
            raise ValueError(
                "the weighted chi-square rule exists for SIR only; use dim_rule='chi2'."
            )
        n, rank = self.statistics_.weight, self.whitening_.rank
        squares = self.eigenvalues_[:rank] ** 2
        tests = []
        for k in range(rank):
            statistic = float(n * squares[k:].sum() / (2 * self._weight_variance))
            df = (rank - k) * (rank - k + 1) // 2
            tests.append((statistic, df, float(stats.chi2.sf(statistic, df))))
        return tests

    @staticmethod
    def _order(values):
        return np.argsort(-np.abs(values), kind="stable")


def _refuse_constant_response(statistics: MomentStatistics) -> None:
    if statistics.response.response.second == 0:
        raise ValueError(
            "the response y is constant, so no direction can explain it; "
            "check that the right target column was passed."
        )
