"""Fitted interface shared by every subspace estimator."""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator, ClassNamePrefixFeaturesOutMixin, TransformerMixin
from sklearn.utils._param_validation import HasMethods, Interval, StrOptions
from sklearn.utils.validation import check_is_fitted, validate_data

from .._validation import check_dim, check_sample_count
from ..dimension import RULES, resolve_rule
from ..moments import Whitening, check_slice_sizes, slice_response


class SubspaceEstimator(ClassNamePrefixFeaturesOutMixin, TransformerMixin, BaseEstimator):
    """Base class: estimate a relevant subspace from ``(X, y)``.

    Subclasses implement :meth:`_eigen_decomposition`, which returns the
    eigenvalues (length d, in the subclass's order) and the matching input
    directions as columns. This class validates the data, keeps the leading
    ``dim`` directions and orthonormalises them.

    Attributes
    ----------
    basis_ : ndarray of shape (n_features_in_, dim_)
        Orthonormal basis of the estimated subspace, input coordinates.
    directions_ : ndarray of shape (n_features_in_, n_features_in_)
        The method's published, un-orthonormalised directions as columns,
        ordered like ``eigenvalues_``; a zero column stands for a direction
        dropped by the collinearity tolerance.
    eigenvalues_ : ndarray of shape (n_features_in_,)
    dim_ : int
        The dimension used; with ``dim="auto"`` the rule's choice, possibly
        0 (no detectable structure; ``basis_`` then has no columns).
    dim_test_ : splitlift.dimension.DimensionTest or None
        The table of the dimension rule when ``dim="auto"``.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names.
    """

    _parameter_constraints: dict = {
        "dim": [Interval(Integral, 1, None, closed="left"), StrOptions({"auto"})],
        "dim_rule": [StrOptions(set(RULES)), HasMethods(["select"]), None],
    }

    #: Whether ``y`` may be class labels of any dtype.
    _accepts_labels = True
    #: Dimension rules that make sense for the method, and the default one.
    _dim_rules = frozenset({"permutation", "ladle", "cv"})
    _default_dim_rule = "ladle"

    def fit(self, X, y):
        """Estimate the subspace.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        self
        """
        self._validate_params()
        X, y = validate_data(self, X, y, dtype=float)
        if not self._accepts_labels:
            y = _numeric_response(y, type(self).__name__)
        if y.dtype.kind in "fc" and not np.all(np.isfinite(y)):
            raise ValueError("y contains NaN or infinite values; drop or impute those rows.")
        check_sample_count(X.shape[0])
        automatic = isinstance(self.dim, str)
        rule = resolve_rule(getattr(self, "dim_rule", None), self) if automatic else None
        dim = None if automatic else check_dim(self.dim, X.shape[1])
        eigenvalues, directions = self._eigen_decomposition(X, y)
        self.eigenvalues_ = eigenvalues
        self.directions_ = directions
        usable = int(np.sum(np.linalg.norm(directions, axis=0) > 0))
        self._n_usable = usable  # rules never try more directions than the method gives
        self.dim_test_ = None
        if automatic:
            dim, self.dim_test_ = rule.select(self, X, y)
            dim = min(dim, usable)
        elif dim > usable:
            raise ValueError(
                f"dim={dim} exceeds the {usable} directions left after dropping constant or "
                f"collinear columns; choose dim <= {usable} or remove redundant columns."
            )
        self.dim_ = dim
        self.basis_ = (np.linalg.qr(directions[:, :dim])[0] if dim
                       else np.zeros((directions.shape[0], 0)))
        return self

    def transform(self, X) -> np.ndarray:
        """Project onto the estimated subspace, ``X @ basis_``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, dim_)
        """
        check_is_fitted(self, "basis_")
        X = validate_data(self, X, dtype=float, reset=False)
        return X @ self.basis_

    @property
    def _n_features_out(self) -> int:
        return self.dim_

    def _eigen_decomposition(self, X, y):  # pragma: no cover - abstract
        raise NotImplementedError

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags


class MomentEstimator(SubspaceEstimator):
    """Base of the moment methods: whiten, build a symmetric method matrix, eigen-decompose.

    Subclasses implement :meth:`_method_matrix` in whitened coordinates and
    may override :meth:`_order` (descending by default).
    """

    _parameter_constraints: dict = {
        **SubspaceEstimator._parameter_constraints,
        "rank_tolerance": [Interval(Real, 0, 1, closed="neither")],
    }

    def _eigen_decomposition(self, X, y):
        self.whitening_ = Whitening.fit(X, self.rank_tolerance)
        matrix = self._method_matrix(X, y, self.whitening_)
        self.method_matrix_ = matrix
        values, vectors = np.linalg.eigh((matrix + matrix.T) / 2)
        order = self._order(values)
        d, rank = X.shape[1], self.whitening_.rank
        eigenvalues = np.zeros(d)
        eigenvalues[:rank] = values[order]
        directions = np.zeros((d, d))
        directions[:, :rank] = self.whitening_.to_input(vectors[:, order])
        return eigenvalues, directions

    @staticmethod
    def _order(values: np.ndarray) -> np.ndarray:
        return np.argsort(-values, kind="stable")

    def _method_matrix(self, X, y, whitening):  # pragma: no cover - abstract
        raise NotImplementedError


class SlicedMomentEstimator(MomentEstimator):
    """Moment method whose matrix is built from slices of the response."""

    #: Eigenvalues do not depend on the units of X or y (used by the ladle).
    _scale_free_eigenvalues = True

    _parameter_constraints: dict = {
        **MomentEstimator._parameter_constraints,
        "n_slices": [Interval(Integral, 2, None, closed="left")],
        "slicing": [StrOptions({"auto", "count", "value"})],
    }

    def _slices(self, y):
        slices = slice_response(y, self.n_slices, self.slicing)
        check_slice_sizes(slices, self.n_slices)
        self.n_slices_ = slices.n_slices
        return slices


def _numeric_response(y: np.ndarray, method: str) -> np.ndarray:
    """Convert ``y`` to floats, or explain that the method needs a numeric response."""
    try:
        return y.astype(float)
    except (TypeError, ValueError):
        raise ValueError(
            f"{method} needs a numeric response, but y holds labels such as {y[0]!r}; "
            "use SlicedInverse or SlicedAverageVariance for class labels, or encode them."
        ) from None
