"""Outer product of gradients (OPG) and its refined version."""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import Interval

from .._validation import check_sample_count
from ..moments import Whitening
from ._base import SubspaceEstimator
from ._local import (
    Standardisation,
    chunk_size,
    gaussian_weights,
    local_linear_gradients,
    neighbour_shares,
    neighbourhoods,
    response_columns,
)

#: Anchors used by default: gradients are estimated at up to this many rows.
DEFAULT_MAX_ANCHORS = 4000


def default_n_neighbors(n_samples: int, n_features: int) -> int:
    """Neighbourhood size used when ``n_neighbors=None``.

    ``k = max(4 (p + 1), ceil(n^(4 / (p + 4))))``, capped at ``n``: at least
    four rows per coefficient of a local linear fit in ``p`` standardised
    features, growing like the neighbour count ``n h^p`` of the usual
    bandwidth rate ``h ∝ n^(-1/(p+4))`` when that is larger (common practice
    for local linear smoothing, not a tuned optimum).
    """
    rule = max(4 * (n_features + 1), int(np.ceil(n_samples ** (4.0 / (n_features + 4)))))
    return int(min(n_samples, rule))


class GradientOuterProduct(SubspaceEstimator):
    """Outer product of gradients (OPG), optionally refined.

    Gradients of the regression function are estimated by kernel-weighted
    local linear fits at anchor rows; the subspace is spanned by the leading
    eigenvectors of their averaged outer product. Unlike the moment methods
    this needs no linearity condition on the inputs, and it sees symmetric
    dependence such as ``y = (b^T x)^2``.

    Parameters
    ----------
    dim : int or "auto", default 2
        Dimension of the estimated subspace (1 <= dim <= n_features).
        ``"auto"`` lets the shared dimension rule choose it (see
        :mod:`splitlift.dimension`); it needs ``refine=0``, since refined
        neighbourhoods follow a fixed number of directions.
    dim_rule : {"permutation", "ladle", "cv"} or rule object, default None
        Rule for ``dim="auto"``; None means the ladle (Luo & Li 2016), see
        :mod:`splitlift.dimension`.
    n_neighbors : int or None, default None
        Rows in each local linear fit, the anchor included. None uses
        :func:`default_n_neighbors`, ``max(4 (p + 1), ceil(n^(4/(p+4))))``
        capped at ``n``. Must not exceed the number of rows.
    bandwidth : float or None, default None
        Gaussian kernel bandwidth, in the coordinates where neighbourhoods
        are measured (standardised inputs; sphered index coordinates during
        refinement). None gives each anchor the distance to its farthest
        neighbour, an adaptive nearest-neighbour bandwidth.
    n_anchors : int or None, default None
        Rows at which gradients are estimated, drawn without replacement
        (all rows when it is at least ``n``). None uses
        ``min(n, 4000)``. Every row still serves as a neighbour, so fewer
        anchors do not coarsen the local fits; they only average fewer
        gradients. The estimated outer product has Monte Carlo error of order
        ``n_anchors^(-1/2)`` on top of the smoothing error, while the cost of
        the neighbour search and the fits grows linearly in ``n_anchors``.
    refine : int, default 0
        Iterations of refined OPG: each measures neighbourhoods along the
        current ``dim`` directions only, then re-estimates the gradients.
        Sharper when the response varies fast along the subspace; each
        iteration costs about one more pass.
    sample_rows : int or None, default None
        Dask input only: the fit uses a uniform random sample of at most this
        many rows, loaded into memory (neighbours need rows at hand); None
        means 100 000. Recorded in ``row_sample_``.
    random_state : int, RandomState instance or None, default None
        Seeds the anchor subsample, the row sample of Dask input, and the
        resampling of the ``dim="auto"`` rule when the rule's own
        ``random_state`` is None.

    Attributes
    ----------
    basis_ : ndarray of shape (n_features_in_, dim_)
        Orthonormal basis of the estimated subspace, input coordinates.
    directions_ : ndarray of shape (n_features_in_, n_features_in_)
        Unit input directions ``v_k / scale`` from the eigenvectors ``v_k`` of
        ``outer_product_``, ordered like ``eigenvalues_``; a zero column
        stands for a constant input column.
    eigenvalues_ : ndarray of shape (n_features_in_,)
        Eigenvalues of ``outer_product_``, descending.
    outer_product_ : ndarray of shape (n_features_in_, n_features_in_)
        Averaged outer product of the estimated gradients in standardised
        coordinates (summed over class indicators for class labels).
    dim_ : int
    n_neighbors_ : int
        Neighbourhood size used.
    anchor_indices_ : ndarray of int
        Training rows at which gradients were estimated.
    row_sample_ : dict or None
        For Dask input, the row sample fitted on: ``rows_total``,
        ``rows_used`` and ``random_state``; None for in-memory input.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names.

    See Also
    --------
    AverageDerivative : one kernel average of the gradient, quadratic in n.
    SlicedInverse : faster, but needs roughly elliptical inputs.

    Notes
    -----
    Inputs are standardised column by column. At anchor ``x_i`` the slope
    ``b_i`` of the weighted least-squares fit of ``y_j`` on ``z_j - z_i``
    over its ``k`` nearest neighbours, with weights
    ``exp(-‖z_j - z_i‖² / (2 h²))``, estimates the gradient in standardised
    coordinates. The method matrix is ``M = (1/m) Σ_i b_i b_i^T`` over the
    ``m`` anchors. For ``y = g(B^T x) + ε`` every gradient lies in
    ``span(B)`` (in standardised coordinates, ``span(D B)`` with ``D`` the
    column scales), so the leading eigenvectors ``v_k`` of ``M`` estimate it
    (Xia et al. 2002) and ``D^{-1} v_k`` are the input directions. ``M`` is
    decomposed in standardised coordinates because there the estimate does
    not depend on the units of the columns. Refined
    OPG (Xia 2007) replaces the distance by ``‖V^T (x_j - x_i)‖``, with
    ``V`` the current directions sphered to unit covariance, so that the
    neighbourhoods shrink only along the subspace.

    Class labels (non-numeric or boolean ``y``) are fitted as one indicator
    column per class and their outer products summed. Integer ``y`` is
    treated as a numeric response; pass class codes as strings to have
    them treated as classes.

    The neighbour search uses scikit-learn's :class:`~sklearn.neighbors.NearestNeighbors`;
    anchors are processed in chunks, so memory is ``O(n k)``.
    Each local normal equation gets a tiny relative ridge
    (:data:`splitlift.estimators._local.LOCAL_RIDGE`) so that degenerate
    neighbourhoods stay solvable.

    References
    ----------
    Xia, Y., Tong, H., Li, W. K. and Zhu, L.-X. (2002). An adaptive
    estimation of dimension reduction space. Journal of the Royal
    Statistical Society, Series B 64, 363-410.

    Xia, Y. (2007). A constructive approach to the estimation of dimension
    reduction directions. The Annals of Statistics 35, 2654-2690.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import GradientOuterProduct
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((1000, 4))
    >>> y = (X[:, 0] + X[:, 1]) ** 2 + 0.1 * rng.standard_normal(1000)
    >>> est = GradientOuterProduct(dim=1).fit(X, y)
    >>> np.round(np.abs(est.basis_[:, 0]), 1).tolist()
    [0.7, 0.7, 0.0, 0.0]
    """

    _parameter_constraints: dict = {
        **SubspaceEstimator._parameter_constraints,
        "n_neighbors": [Interval(Integral, 2, None, closed="left"), None],
        "bandwidth": [Interval(Real, 0, None, closed="neither"), None],
        "n_anchors": [Interval(Integral, 1, None, closed="left"), None],
        "refine": [Interval(Integral, 0, None, closed="left")],
        "sample_rows": [Interval(Integral, 1, None, closed="left"), None],
        "random_state": ["random_state"],
    }

    _weights_rows_by_response = True
    _neighbourhoods_in_standardised_inputs = True

    def __init__(
        self,
        dim=2,
        dim_rule=None,
        n_neighbors=None,
        bandwidth=None,
        n_anchors=None,
        refine=0,
        sample_rows=None,
        random_state=None,
    ):
        self.dim = dim
        self.dim_rule = dim_rule
        self.n_neighbors = n_neighbors
        self.bandwidth = bandwidth
        self.n_anchors = n_anchors
        self.refine = refine
        self.sample_rows = sample_rows
        self.random_state = random_state

    def _eigen_decomposition(self, X, y, weights=None):
        n = X.shape[0]
        check_sample_count(n, 3)
        if self.refine and isinstance(self.dim, str):
            raise ValueError(
                "refine > 0 needs an integer dim, because refined neighbourhoods follow dim "
                "directions; pass dim=k, or use dim='auto' with refine=0."
            )
        standardisation = Standardisation.fit(X, weights)
        Z = standardisation.transform(X)
        responses, _ = response_columns(y)
        # with frequency weights the sample holds sum(w) rows, as if repeated
        size = n if weights is None else max(int(round(weights.sum())), 1)
        self.n_neighbors_ = self._neighbourhood_size(size, Z.shape[1])
        self.anchor_indices_ = self._anchors(n, size)

        gradients = self._anchor_gradients(Z, Z, responses, weights)
        # with weights each anchor's outer products count its weight
        self._anchor_weights = None if weights is None else weights[self.anchor_indices_]
        for _ in range(self.refine):
            values, vectors = _descending_eigh(
                _average_outer_product(gradients, self._anchor_weights))
            # index values V^T z, sphered within the subspace
            index = Z @ vectors[:, : self.dim]
            sphered = Whitening.fit(index, sample_weight=weights).transform(index)
            gradients = self._anchor_gradients(sphered, Z, responses, weights)

        # kept for resampling rules, which reuse the local fits instead of refitting
        self._gradients, self._standardisation = gradients, standardisation
        outer = _average_outer_product(gradients, self._anchor_weights)
        self.outer_product_ = standardisation.embed(standardisation.embed(outer).T).T
        return self._eigen_pairs(outer)

    def _eigen_pairs(self, outer: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        values, vectors = _descending_eigh(outer)
        d, rank = self._standardisation.kept.size, self._standardisation.rank
        eigenvalues = np.zeros(d)
        eigenvalues[:rank] = values
        directions = np.zeros((d, d))
        directions[:, :rank] = self._standardisation.directions_to_input(vectors)
        return eigenvalues, directions

    def _resampled_directions(self, generator) -> np.ndarray:
        """Directions from the anchors' gradients drawn with replacement, without refitting.

        Serves the fast resampling rules (``dim="auto"``, stability): the
        neighbour graph and the local fits are reused, so a replicate costs
        one (p, p) eigen-decomposition. It captures the variation of the
        average over anchors, not that of the local fits themselves.
        """
        picks = generator.randint(0, self._gradients.shape[0], self._gradients.shape[0])
        weights = None if self._anchor_weights is None else self._anchor_weights[picks]
        return self._eigen_pairs(_average_outer_product(self._gradients[picks], weights))[1]

    def _neighbourhood_size(self, n: int, p: int) -> int:
        if self.n_neighbors is None:
            return default_n_neighbors(n, p)
        if self.n_neighbors > n:
            raise ValueError(
                f"n_neighbors={self.n_neighbors} exceeds n_samples = {n}; choose "
                f"n_neighbors <= {n} or leave it as None for the default rule."
            )
        return int(self.n_neighbors)

    def _anchors(self, n: int, size: int | None = None) -> np.ndarray:
        count = min(DEFAULT_MAX_ANCHORS, n) if self.n_anchors is None else self.n_anchors
        if count >= (n if size is None else min(n, size)):
            return np.arange(n)
        rng = check_random_state(self.random_state)
        return np.sort(rng.choice(n, size=min(count, n), replace=False))

    def _anchor_gradients(self, metric_points, Z, responses, weights=None) -> np.ndarray:
        """Local linear gradients at the anchors, standardised coordinates, shape (m, q, p).

        With frequency weights a neighbourhood holds ``n_neighbors`` units of
        weight (the farthest row counted in part), as the repeated rows
        would, and each neighbour's kernel weight is multiplied by its share.
        """
        k = self.n_neighbors_
        rows_needed = k if weights is None else min(Z.shape[0], k)
        chunk = chunk_size(rows_needed, max(Z.shape[1], responses.shape[1]))
        blocks = []
        for rows, distances, indices in neighbourhoods(
            metric_points, self.anchor_indices_, rows_needed, chunk
        ):
            shares = None if weights is None else neighbour_shares(weights[indices], k)
            kernel = gaussian_weights(distances, self.bandwidth, shares)
            local = kernel if shares is None else kernel * shares
            blocks.append(local_linear_gradients(Z, responses, rows, indices, local))
        return np.concatenate(blocks)


def _average_outer_product(gradients: np.ndarray, anchor_weights=None) -> np.ndarray:
    """``(1/m) Σ_i Σ_c b_ic b_ic^T`` over anchors i and response columns c (weighted: by w_i)."""
    flat = gradients.reshape(-1, gradients.shape[-1])
    if anchor_weights is None:
        return flat.T @ flat / gradients.shape[0]
    weighted = flat * np.repeat(anchor_weights, gradients.shape[1])[:, None]
    return weighted.T @ flat / anchor_weights.sum()


def _descending_eigh(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    values, vectors = np.linalg.eigh((matrix + matrix.T) / 2)
    order = np.argsort(-values, kind="stable")
    return np.clip(values[order], 0.0, None), vectors[:, order]
