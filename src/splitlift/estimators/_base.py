"""Fitted interface shared by every subspace estimator."""

from __future__ import annotations

import warnings
from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator, ClassNamePrefixFeaturesOutMixin, TransformerMixin
from sklearn.utils._param_validation import HasMethods, Interval, StrOptions
from sklearn.utils.validation import check_is_fitted, validate_data

from .._validation import check_dim, check_sample_count
from ..dimension import RULES, resolve_rule
from ..loadings import loadings_frame
from ..moments import (
    CollinearityWarning,
    Whitening,
    _is_discrete,
    check_slice_sizes,
    column_location_scale,
    constant_columns,
    power_of_two_scale,
    slice_response,
)

#: Rows per feature below which every estimate is flagged as unreliable
#: (common practice for moment and smoothing estimators, not a sharp limit).
MIN_ROWS_PER_FEATURE = 10

#: Excess kurtosis of a numeric response above which methods that weight rows
#: by the response value (pHd, OPG, ADE) are flagged; a normal response has 0,
#: an exponential one 6 (common practice threshold).
HEAVY_TAIL_KURTOSIS = 20.0

#: Share of rows holding one response value above which slicing is flagged.
DOMINANT_VALUE_SHARE = 0.5

#: Condition index (square root of the ratio of the extreme eigenvalues of the
#: correlation matrix) above which inputs count as ill-conditioned; 30 is the
#: rule of thumb of Belsley, Kuh & Welsch (1980), from memory.
CONDITION_INDEX_LIMIT = 30.0


class EstimationWarning(UserWarning):
    """The fit ran, but the data make the estimate unreliable; the message says what to do."""


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
    loadings_, standardised_loadings_ : pandas.DataFrame
        Directions x features tables of ``basis_`` (see the properties).
    fit_warnings_ : list of str
        Reasons, found while fitting, to doubt this estimate (each also
        issued as an :class:`EstimationWarning`); empty when none.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names.
    """

    _parameter_constraints: dict = {
        "dim": [Interval(Integral, 1, None, closed="left"), StrOptions({"auto"})],
        "dim_rule": [StrOptions(set(RULES)), HasMethods(["select"]), None],
        "random_state": ["random_state"],
    }

    #: Whether ``y`` may be class labels of any dtype.
    _accepts_labels = True
    #: Whether rows enter weighted by the response value (not only its order).
    _weights_rows_by_response = False
    #: Whether neighbourhoods are measured in standardised (not whitened) inputs.
    _neighbourhoods_in_standardised_inputs = False
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
        eigenvalues, directions = self._scale_safe_decomposition(X, y)
        self.eigenvalues_ = eigenvalues
        self.directions_ = directions
        usable = int(np.sum(np.linalg.norm(directions, axis=0) > 0))
        self._n_usable = usable  # rules never try more directions than the method gives
        self.dim_test_ = None
        if automatic:
            with warnings.catch_warnings():  # resampled fits repeat this fit's warnings
                warnings.simplefilter("ignore", EstimationWarning)
                warnings.simplefilter("ignore", CollinearityWarning)
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
        self.fit_warnings_ = self._quality_warnings(X, y)
        self._feature_scale = column_location_scale(X / self.column_scale_)[1] * \
            self.column_scale_
        return self

    @property
    def loadings_(self):
        """Directions x features table (DataFrame) of ``basis_``, inputs as given.

        Each row is a direction of unit length with its largest loading
        positive; columns are named after the features (``x0, x1, ...`` when
        the data had no names). See also ``standardised_loadings_``.
        """
        check_is_fitted(self, "basis_")
        return loadings_frame(self.basis_, getattr(self, "feature_names_in_", None))

    @property
    def standardised_loadings_(self):
        """``loadings_`` per standard deviation of each feature: comparable across units.

        Direction ``β`` acts on the standardised column ``x_j / sd_j`` with
        weight ``β_j sd_j``; these weights, scaled to unit length, show which
        features matter whatever their units.
        """
        check_is_fitted(self, "basis_")
        return loadings_frame(self.basis_, getattr(self, "feature_names_in_", None),
                              scale=1.0 / np.where(self._feature_scale > 0,
                                                   self._feature_scale, 1.0))

    def _scale_safe_decomposition(self, X, y):
        """Eigen-decompose, first bringing columns near the float limits to unit size.

        Columns whose largest entry is beyond ``2^±480`` are divided by a
        power of two (exact), so second moments neither overflow nor
        underflow; the directions are mapped back (``β_x = β / scale``, then
        scaled to unit length).
        Fitted attributes such as ``whitening_`` then refer to the rescaled
        columns, ``column_scale_`` holds the factors (ones for ordinary data).
        """
        self.column_scale_ = power_of_two_scale(X)
        rescaled = not np.all(self.column_scale_ == 1.0)
        eigenvalues, directions = self._eigen_decomposition(
            X / self.column_scale_ if rescaled else X, y)
        if not (np.all(np.isfinite(eigenvalues)) and np.any(eigenvalues != 0)):
            raise ValueError(
                f"{type(self).__name__} found no direction at all: its method matrix is "
                + ("not finite" if not np.all(np.isfinite(eigenvalues)) else "exactly zero")
                + ". The response may not depend on X in a way this method sees; try "
                "another estimator (GradientOuterProduct sees most kinds of dependence) "
                "or check the data."
            )
        if rescaled:  # then unit columns: squares of entries near 1e±300 would underflow
            directions = directions / self.column_scale_[:, None]
            largest = np.max(np.abs(directions), axis=0)
            directions = directions / np.where(largest > 0, largest, 1.0)
            directions /= np.maximum(np.linalg.norm(directions, axis=0), 1.0)
        return eigenvalues, directions

    def _quality_warnings(self, X, y) -> list[str]:
        """Issue and return the reasons to doubt this fit (quiet degradation made loud)."""
        n, d = X.shape
        reasons = []
        if n < MIN_ROWS_PER_FEATURE * d:
            reasons.append(
                f"only {n} rows for {d} features (fewer than {MIN_ROWS_PER_FEATURE} per "
                "feature): subspace estimates are unreliable at this size. Collect more data "
                "or use fewer features, and check splitlift.stability() before trusting it."
            )
        numeric = not _is_discrete(y)
        if numeric and self._weights_rows_by_response:
            standardised = y.astype(float) / np.max(np.abs(y))  # no overflow in the 4th power
            centred = standardised - standardised.mean()
            spread = np.mean(centred**2)
            kurtosis = np.mean(centred**4) / spread**2 - 3.0 if spread > 0 else 0.0
            if kurtosis > HEAVY_TAIL_KURTOSIS:
                reasons.append(
                    f"the response is heavy-tailed (excess kurtosis {kurtosis:.3g} > "
                    f"{HEAVY_TAIL_KURTOSIS:g}); {type(self).__name__} weights rows by the "
                    "response value, so a few extreme rows can dominate. Fit a transformed "
                    "response (log or ranks) or use SlicedInverse/SlicedAverageVariance, "
                    "which only use the order of y."
                )
        if numeric and y.size:
            _, counts = np.unique(y, return_counts=True)
            share = counts.max() / y.size
            if share > DOMINANT_VALUE_SHARE:
                reasons.append(
                    f"one response value holds {share:.0%} of the rows, so most slices or "
                    "local fits see a constant response. Model the rows with other values "
                    "separately, or treat y as class labels (pass it as strings)."
                )
        if self._neighbourhoods_in_standardised_inputs and d > 1:
            safe = X / self.column_scale_
            varying = ~constant_columns(safe.mean(axis=0), safe.std(axis=0))
            if varying.sum() > 1:
                values = np.linalg.eigvalsh(np.corrcoef(safe[:, varying], rowvar=False))
                index = np.sqrt(values[-1] / max(values[0], np.finfo(float).tiny))
                if index > CONDITION_INDEX_LIMIT:
                    reasons.append(
                        f"the inputs are strongly correlated (condition index {index:.3g} > "
                        f"{CONDITION_INDEX_LIMIT:g}), so neighbourhoods stretch along few "
                        "directions and local gradients are unstable. Whiten or drop "
                        "redundant columns first (e.g. PCA with whiten=True), or use a "
                        "moment method (SlicedInverse), which whitens itself."
                    )
        reasons += self._method_warnings()
        for reason in reasons:
            warnings.warn(reason, EstimationWarning, stacklevel=3)
        return reasons

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

    def _method_warnings(self) -> list[str]:
        """Method-specific reasons to doubt the fit, found by ``_eigen_decomposition``."""
        return []

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
