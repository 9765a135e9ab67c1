"""Fitted interface shared by every subspace estimator."""

from __future__ import annotations

import inspect
import warnings
from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator, ClassNamePrefixFeaturesOutMixin, TransformerMixin
from sklearn.utils import assert_all_finite
from sklearn.utils._param_validation import HasMethods, Interval, StrOptions
from sklearn.utils.metaestimators import available_if
from sklearn.utils.validation import check_is_fitted, validate_data

from .._validation import check_dim, check_sample_count, check_sample_weight
from ..dimension import RULES, SequentialChiSquare, resolve_rule
from ..geometry import canonical_basis
from ..loadings import loadings_frame
from ..moments import (
    CollinearityWarning,
    SliceScheme,
    Whitening,
    _is_discrete,
    check_slice_edges,
    check_slice_weights,
    column_location_scale,
    constant_columns,
    covariance,
    slice_response,
    slices_from_edges,
    weighted_mean,
)
from ..sufficient_statistics import (
    GroupMoments,
    MomentStatistics,
    ScalarMoments,
    block_statistics,
    safe_column_scale,
)

#: Input dtypes kept by ``transform`` (anything else becomes float64).
FLOAT_DTYPES = (np.float64, np.float32)

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
    #: Whether an in-memory fit checks X for NaN and infinity itself, at no cost
    #: where its statistics prove X finite (moment methods, see ``_statistics``).
    _proves_finite_inputs = False
    #: Whether rows enter weighted by the response value (not only its order).
    _weights_rows_by_response = False
    #: Whether neighbourhoods are measured in standardised (not whitened) inputs.
    _neighbourhoods_in_standardised_inputs = False
    #: Dimension rules that make sense for the method, and the default one.
    _dim_rules = frozenset({"permutation", "ladle", "cv"})
    _default_dim_rule = "ladle"

    def fit(self, X, y, sample_weight=None):
        """Estimate the subspace.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features), or a Dask array or DataFrame
            Dask input is never loaded whole: moment methods reduce blockwise
            statistics, gradient methods fit on a random sample of rows (see
            :mod:`splitlift.dask_support`).
        y : array-like of shape (n_samples,), or a Dask array or Series
        sample_weight : array-like of shape (n_samples,), optional
            Non-negative frequency weights: an integer weight counts as that
            many copies of the row, so integer weights give exactly the fit
            on the repeated rows (for the moment methods; the gradient
            methods weight their local fits and averages, see their notes).
            Zero-weight rows are left out. Requested through scikit-learn's
            metadata routing with ``set_fit_request(sample_weight=True)``.

        Returns
        -------
        self
        """
        self._validate_params()
        from ..dask_support import is_dask_collection

        if any(is_dask_collection(part) for part in (X, y, sample_weight)):
            from ..dask_support import fit_on_dask

            return fit_on_dask(self, X, y, sample_weight)
        X, y, weights = self._validated(X, y, sample_weight, reset=True,
                                        finite=not self._proves_finite_inputs)
        self._check_dim_setting(X.shape[1])
        self.row_sample_ = None  # all rows were in memory
        eigenvalues, directions = self._scale_safe_decomposition(X, y, weights)
        self._set_estimate(eigenvalues, directions, X, y, weights)
        self.fit_warnings_ = _issue(self._quality_reasons(X, y, weights))
        self._feature_scale = self._feature_spread(X, weights)
        return self

    def _feature_spread(self, X, weights) -> np.ndarray:
        """Standard deviation of every input column (for ``standardised_loadings_``)."""
        return column_location_scale(X / self.column_scale_, weights)[1] * self.column_scale_

    def _validated(self, X, y, sample_weight, reset: bool, finite: bool = True):
        """Checked float inputs, response and weights; zero-weight rows dropped.

        ``finite=False`` leaves NaN and infinity in ``X`` to the caller, which
        must refuse them before using ``X`` (:meth:`_refuse_non_finite`).
        """
        X, y = validate_data(self, X, y, dtype=float, reset=reset,
                             ensure_all_finite=finite)
        if not self._accepts_labels:
            y = _numeric_response(y, type(self).__name__)
        if y.dtype.kind in "fc" and not np.all(np.isfinite(y)):
            raise ValueError("y contains NaN or infinite values; drop or impute those rows.")
        weights = check_sample_weight(sample_weight, X.shape[0])
        if weights is not None and not np.all(weights > 0):
            kept = weights > 0  # a zero weight is a row that is not there
            X, y, weights = X[kept], y[kept], weights[kept]
        check_sample_count(X.shape[0])
        return X, y, weights

    def _refuse_non_finite(self, X) -> None:
        """scikit-learn's error for NaN or infinity in ``X``, as ``validate_data`` gives it."""
        assert_all_finite(X, input_name="X", estimator_name=type(self).__name__)

    def _check_dim_setting(self, n_features: int) -> None:
        """Refuse an impossible ``dim`` or rule before any heavy work."""
        if isinstance(self.dim, str):
            resolve_rule(getattr(self, "dim_rule", None), self)
        else:
            check_dim(self.dim, n_features)

    def _set_estimate(self, eigenvalues, directions, X=None, y=None, weights=None) -> None:
        """Keep the leading directions; ``X is None`` when only statistics were seen."""
        self.eigenvalues_ = eigenvalues
        self.directions_ = directions
        usable = int(np.sum(np.linalg.norm(directions, axis=0) > 0))
        self._n_usable = usable  # rules never try more directions than the method gives
        self.dim_test_ = None
        if isinstance(self.dim, str):
            rule = resolve_rule(getattr(self, "dim_rule", None), self)
            if X is None and not (isinstance(rule, SequentialChiSquare) and not rule.weighted):
                raise ValueError(
                    f"dim='auto' with {type(rule).__name__} refits the estimator on the rows, "
                    "which partial_fit and Dask fits do not keep in memory; use "
                    "dim_rule='chi2' (SlicedInverse, HessianDirections) or a fixed dim."
                )
            with warnings.catch_warnings():  # resampled fits repeat this fit's warnings
                warnings.simplefilter("ignore", EstimationWarning)
                warnings.simplefilter("ignore", CollinearityWarning)
                dim, self.dim_test_ = rule.select(self, X, y, **_weight_argument(rule, weights))
            dim = min(dim, usable)
        else:
            dim = check_dim(self.dim, directions.shape[0])
            if dim > usable:
                raise ValueError(
                    f"dim={dim} exceeds the {usable} directions left after dropping constant "
                    f"or collinear columns; choose dim <= {usable} or remove redundant columns."
                )
        self.dim_ = dim
        self.basis_ = _orthonormal_basis(directions, dim, eigenvalues)

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

    def _scale_safe_decomposition(self, X, y, weights=None):
        """Eigen-decompose, first bringing columns near the float limits to unit size.

        Columns whose squares would leave the float range are divided by a
        power of two (exact; see
        :func:`splitlift.sufficient_statistics.safe_column_scale`), so second
        moments neither overflow nor underflow; the directions are mapped
        back (``β_x = β / scale``, then scaled to unit length). Fitted
        attributes such as ``whitening_`` then refer to the rescaled
        columns, ``column_scale_`` holds the factors (ones for ordinary data).
        """
        eigenvalues, directions, scale = self._scaled_decomposition(X, y, weights)
        return self._in_input_units(eigenvalues, directions, scale)

    def _scaled_decomposition(self, X, y, weights):
        scale = safe_column_scale(X)[0]
        rescaled = not np.all(scale == 1.0)
        eigenvalues, directions = self._eigen_decomposition(X / scale if rescaled else X, y,
                                                            weights)
        return eigenvalues, directions, scale

    def _in_input_units(self, eigenvalues, directions, column_scale):
        """Refuse a degenerate method matrix; map rescaled directions to input columns."""
        self.column_scale_ = column_scale
        if not (np.all(np.isfinite(eigenvalues)) and np.any(eigenvalues != 0)):
            raise ValueError(
                f"{type(self).__name__} found no direction at all: its method matrix is "
                + ("not finite" if not np.all(np.isfinite(eigenvalues)) else "exactly zero")
                + ". The response may not depend on X in a way this method sees; try "
                "another estimator (GradientOuterProduct sees most kinds of dependence) "
                "or check the data."
            )
        if not np.all(column_scale == 1.0):  # unit columns: squares near 1e±300 would underflow
            directions = directions / column_scale[:, None]
            largest = np.max(np.abs(directions), axis=0)
            directions = directions / np.where(largest > 0, largest, 1.0)
            directions /= np.maximum(np.linalg.norm(directions, axis=0), 1.0)
        return eigenvalues, directions

    def _quality_reasons(self, X, y, weights) -> list[str]:
        """Reasons to doubt a fit on the rows ``X, y`` (quiet degradation made loud)."""
        n, d = X.shape
        reasons = [_few_rows(n, d)]
        numeric = not _is_discrete(y)
        if numeric and self._weights_rows_by_response:
            reasons.append(self._heavy_tail(self._response_summary(y, weights)))
        if numeric and y.size:
            reasons.append(_dominant_value(_largest_value_share(y, weights)))
        if self._neighbourhoods_in_standardised_inputs and d > 1:
            reasons.append(_ill_conditioned(X / self.column_scale_, weights))
        return [reason for reason in reasons if reason] + self._method_warnings()

    def _response_summary(self, y, weights) -> ScalarMoments:
        response = getattr(getattr(self, "statistics_", None), "response", None)
        if response is not None:  # pHd gathered them already, from these very rows
            return response.response
        return ScalarMoments.of(y.astype(float), weights)

    def _heavy_tail(self, response: ScalarMoments) -> str | None:
        kurtosis = response.excess_kurtosis()
        if kurtosis <= HEAVY_TAIL_KURTOSIS:
            return None
        return (
            f"the response is heavy-tailed (excess kurtosis {kurtosis:.3g} > "
            f"{HEAVY_TAIL_KURTOSIS:g}); {type(self).__name__} weights rows by the "
            "response value, so a few extreme rows can dominate. Fit a transformed "
            "response (log or ranks) or use SlicedInverse/SlicedAverageVariance, "
            "which only use the order of y."
        )

    def transform(self, X) -> np.ndarray:
        """Project onto the estimated subspace, ``X @ basis_``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, dim_)
            float32 for float32 input, else float64; a lazy Dask collection
            for Dask input.
        """
        check_is_fitted(self, "basis_")
        from ..dask_support import is_dask_collection, transform_lazily

        if is_dask_collection(X):
            return transform_lazily(self, X, self._project)
        return self._project(validate_data(self, X, dtype=FLOAT_DTYPES, reset=False))

    def _project(self, X: np.ndarray) -> np.ndarray:
        return X @ self.basis_.astype(X.dtype, copy=False)  # float32 stays float32

    @property
    def _n_features_out(self) -> int:
        return self.dim_

    def _method_warnings(self) -> list[str]:
        """Method-specific reasons to doubt the fit, found by ``_eigen_decomposition``."""
        return []

    def _eigen_decomposition(self, X, y, weights):  # pragma: no cover - abstract
        raise NotImplementedError

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags


class MomentEstimator(SubspaceEstimator):
    """Base of the moment methods: whiten, build a symmetric method matrix, eigen-decompose.

    Every fit goes through :class:`~splitlift.sufficient_statistics.MomentStatistics`:
    an in-memory fit computes them from one block, :meth:`partial_fit`
    merges one block per batch, and a Dask fit reduces one block per chunk;
    the estimate is then made from the statistics alone, in one way.
    Subclasses implement :meth:`_method_matrix` in whitened coordinates and
    may override :meth:`_order` (descending by default).
    """

    _proves_finite_inputs = True

    _parameter_constraints: dict = {
        **SubspaceEstimator._parameter_constraints,
        "rank_tolerance": [Interval(Real, 0, 1, closed="neither")],
    }

    #: Which statistics the method needs: slice scatters (SAVE), response co-moments (pHd).
    _slice_scatter = False
    _response_moments = False

    @available_if(lambda self: not getattr(self, "residuals", False))
    def partial_fit(self, X, y, sample_weight=None):
        """Add one batch of rows to the statistics and update the estimate.

        Not available for residual-based pHd (``residuals=True``), which needs
        the least-squares fit before its weighted moment: two passes over the
        data (``fit`` makes them, in memory or on Dask input).

        The statistics of the batch are merged exactly with those of the
        earlier batches (and of a preceding :meth:`fit`), so fitting batch
        by batch gives the fit on all rows at once whenever the slices agree:
        pass ``slice_edges`` (for instance the ``slice_edges_`` of a fit on a
        sample), or let the first batch fix them. A response sliced by value
        gains a slice for every new value. Until every slice holds two rows,
        the estimate leaves the short slices out, with a warning.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
            Same columns (and names) in every batch.
        y : array-like of shape (n_samples,)
        sample_weight : array-like of shape (n_samples,), optional
            Frequency weights, as in :meth:`fit`.

        Returns
        -------
        self

        Examples
        --------
        >>> import numpy as np
        >>> from splitlift import SlicedInverse
        >>> rng = np.random.default_rng(0)
        >>> X = rng.standard_normal((3000, 4))
        >>> y = X[:, 0] + 0.1 * rng.standard_normal(3000)
        >>> est = SlicedInverse(dim=1, slice_edges=[-1.0, 0.0, 1.0])
        >>> for rows in np.array_split(np.arange(3000), 3):
        ...     est = est.partial_fit(X[rows], y[rows])
        >>> int(np.argmax(np.abs(est.basis_[:, 0]))), est.n_samples_seen_
        (0, 3000)
        """
        from ..dask_support import is_dask_collection

        first = not hasattr(self, "statistics_")
        if first:
            self._validate_params()
        if any(is_dask_collection(part) for part in (X, y, sample_weight)):
            raise ValueError(
                "partial_fit takes in-memory batches; pass a Dask collection to fit, which "
                "reduces it chunk by chunk without loading it."
            )
        X, y, weights = self._validated(X, y, sample_weight, reset=first)
        self._check_statistics_only_fit(X.shape[1])
        previous = None if first else self.statistics_
        batch = self._block_statistics(X, y, weights, previous)
        state = dict(self.__dict__)
        try:  # a batch that cannot be estimated leaves the estimator as it was
            self._fit_statistics(batch if first else previous.merge(batch), strict=False)
        except BaseException:
            self.__dict__.clear()
            self.__dict__.update(state)
            raise
        return self

    def _check_statistics_only_fit(self, n_features: int) -> None:
        """Refuse settings that need the rows in memory (partial_fit, Dask)."""
        self._check_dim_setting(n_features)
        if isinstance(self.dim, str):
            _refuse_rule_without_rows(resolve_rule(getattr(self, "dim_rule", None), self))

    def _fit_statistics(self, statistics: MomentStatistics, strict: bool) -> None:
        """Make the estimate from statistics alone (partial_fit and Dask fits)."""
        eigenvalues, directions = self._in_input_units(
            *self._decompose(statistics, strict), statistics.column_scale)
        self._set_estimate(eigenvalues, directions)
        self.fit_warnings_ = _issue(self._statistics_reasons(statistics))
        self._feature_scale = self._feature_spread(None, None)

    def _feature_spread(self, X, weights) -> np.ndarray:
        """Standard deviations from the statistics: no further pass over the data."""
        spread = np.sqrt(np.clip(np.diag(self.statistics_.covariance), 0.0, None))
        return spread * self.statistics_.column_scale

    def _scaled_decomposition(self, X, y, weights):
        statistics = self._statistics(X, y, weights)
        return *self._decompose(statistics, strict=True), statistics.column_scale

    def _statistics(self, X, y, weights) -> MomentStatistics:
        """Statistics of in-memory rows: one block (pHd with residuals adds a second pass)."""
        scheme, labels = self._slicing(y, weights)
        # X was not checked for NaN and infinity: a finite sum of squares per column
        # proves every entry finite, so only the fallback path pays for a check
        return block_statistics(X, y, weights, scheme=scheme, labels=labels,
                                slice_scatter=self._slice_scatter,
                                response=self._response_moments,
                                check_finite=self._refuse_non_finite)

    def _block_statistics(self, X, y, weights, previous: MomentStatistics | None):
        """Statistics of one batch, sliced as the earlier batches were."""
        scheme = self._batch_scheme(y, weights, None if previous is None else previous.scheme)
        return block_statistics(X, y, weights, scheme=scheme, slice_scatter=self._slice_scatter,
                                response=self._response_moments)

    def _slicing(self, y, weights):
        """Slice scheme and labels for an in-memory fit (none for unsliced methods)."""
        return None, None

    def _batch_scheme(self, y, weights, previous):
        return None

    def _decompose(self, statistics: MomentStatistics, strict: bool):
        """Eigen-pairs of the method matrix, directions in (rescaled) input coordinates."""
        self.statistics_ = statistics
        self.n_samples_seen_ = statistics.n_rows
        self.whitening_ = Whitening.from_moments(statistics.mean, statistics.covariance,
                                                 self.rank_tolerance)
        matrix = self._method_matrix(statistics, self.whitening_, strict)
        self.method_matrix_ = matrix
        values, vectors = np.linalg.eigh((matrix + matrix.T) / 2)
        order = self._order(values)
        d, rank = statistics.n_features, self.whitening_.rank
        eigenvalues = np.zeros(d)
        eigenvalues[:rank] = values[order]
        directions = np.zeros((d, d))
        directions[:, :rank] = _largest_entry_positive(self.whitening_.to_input(vectors[:, order]))
        return eigenvalues, directions

    def _statistics_reasons(self, statistics: MomentStatistics) -> list[str]:
        """Reasons to doubt a fit made from statistics alone."""
        reasons = [_few_rows(statistics.n_rows, statistics.n_features)]
        if self._weights_rows_by_response and statistics.response is not None:
            reasons.append(self._heavy_tail(statistics.response.response))
        scheme = statistics.scheme
        if scheme is not None and scheme.kind == "value" and not _is_discrete(scheme.values):
            reasons.append(_dominant_value(statistics.slices.weight.max() / statistics.weight))
        return [reason for reason in reasons if reason] + self._method_warnings()

    @staticmethod
    def _order(values: np.ndarray) -> np.ndarray:
        return np.argsort(-values, kind="stable")

    def _method_matrix(self, statistics, whitening, strict):  # pragma: no cover - abstract
        raise NotImplementedError


class SlicedMomentEstimator(MomentEstimator):
    """Moment method whose matrix is built from slices of the response."""

    #: Eigenvalues do not depend on the units of X or y (used by the ladle).
    _scale_free_eigenvalues = True

    _parameter_constraints: dict = {
        **MomentEstimator._parameter_constraints,
        "n_slices": [Interval(Integral, 2, None, closed="left")],
        "slicing": [StrOptions({"auto", "count", "value"})],
        "slice_edges": ["array-like", None],
    }

    def _slicing(self, y, weights):
        if self.slice_edges is None:
            slices = slice_response(y, self.n_slices, self.slicing, weights)
        else:
            slices = slices_from_edges(self._numeric_for_edges(y), self._edges(), weights)
        return slices.scheme, slices.labels

    def _batch_scheme(self, y, weights, previous):
        if self.slice_edges is not None:
            self._numeric_for_edges(y)
            return SliceScheme("count", edges=self._edges())
        if previous is None:  # the first batch fixes the kind of slicing and any edges
            return slice_response(y, self.n_slices, self.slicing, weights).scheme
        if previous.kind == "count":
            self._numeric_for_edges(y)
            return previous
        return SliceScheme("value", values=np.unique(y))

    def _edges(self) -> np.ndarray:
        return check_slice_edges(self.slice_edges)

    @staticmethod
    def _numeric_for_edges(y) -> np.ndarray:
        if _is_discrete(y):
            raise ValueError(
                "slice edges cut a numeric response, but y holds class labels; class labels "
                "are sliced by value (leave slice_edges unset and start afresh)."
            )
        return y.astype(float, copy=False)

    def _usable_slices(self, statistics: MomentStatistics, strict: bool) -> GroupMoments:
        """The slices that enter the estimate: all (checked) when ``strict``, else those
        holding two rows; the others are named by :meth:`_method_warnings`."""
        slices, scheme = statistics.slices, statistics.scheme
        if strict:
            check_slice_weights(slices.weight, scheme, self.n_slices, statistics.n_rows,
                                edges_given=self.slice_edges is not None)
        kept = slices.weight >= 2
        self._short_slices = [scheme.describe(int(i)) for i in np.flatnonzero(~kept)]
        if not kept.any():
            raise ValueError(
                f"none of the {kept.size} slices holds 2 rows yet, so there is nothing to "
                "estimate; pass more rows, or batches that cover more of the response's range."
            )
        self.n_slices_ = int(kept.sum())
        self.slice_edges_ = scheme.edges
        return GroupMoments(slices.weight[kept], slices.rows[kept], slices.shift,
                            slices.mean[kept],
                            None if slices.scatter is None else slices.scatter[kept])

    def _method_warnings(self) -> list[str]:
        if not getattr(self, "_short_slices", None):
            return []
        return [
            f"{len(self._short_slices)} slice(s) hold fewer than 2 rows so far and are left out "
            f"of the estimate ({', '.join(self._short_slices[:5])}); later batches may fill "
            "them, or choose wider slice edges."
        ]


def _refuse_rule_without_rows(rule) -> None:
    if not (isinstance(rule, SequentialChiSquare) and not rule.weighted):
        raise ValueError(
            f"dim='auto' with {type(rule).__name__} needs the rows in memory (it refits the "
            "estimator on them), which partial_fit and Dask fits do not keep; use "
            "dim_rule='chi2' (SlicedInverse, HessianDirections) or a fixed dim."
        )


#: Eigenvalues equal to this relative precision count as tied (their directions
#: are then defined only as a subspace).
TIE_TOLERANCE = 1e-8


def _orthonormal_basis(directions: np.ndarray, dim: int, eigenvalues: np.ndarray) -> np.ndarray:
    """Orthonormal basis of the first ``dim`` directions, the same whichever eigenvectors
    a solver returned for tied eigenvalues.

    QR keeps the span of every leading group of directions; within a group
    of tied eigenvalues only their joint span is defined, so its columns are
    replaced by a canonical basis of it
    (:func:`splitlift.geometry.canonical_basis`). When a tie
    straddles ``dim`` (the data do not single out the subspace), the leading
    columns of that canonical basis are kept, a reproducible choice.
    """
    if dim == 0:
        return np.zeros((directions.shape[0], 0))
    usable = int(np.sum(np.linalg.norm(directions, axis=0) > 0))
    size = np.abs(eigenvalues[:usable])
    tolerance = TIE_TOLERANCE * max(float(size.max()), np.finfo(float).tiny)
    tied = np.abs(np.diff(size)) <= tolerance  # tied[i]: eigenvalues i and i + 1 tie
    stop = dim
    while stop < usable and tied[stop - 1]:
        stop += 1
    basis = np.linalg.qr(directions[:, :stop])[0]
    start = 0
    for end in range(1, stop + 1):
        if end < stop and tied[end - 1]:
            continue
        if end - start > 1:
            group = basis[:, start:end]
            basis[:, start:end] = canonical_basis(group @ group.T, end - start)
        start = end
    return basis[:, :dim]


def _largest_entry_positive(directions: np.ndarray) -> np.ndarray:
    """Flip each column so that its largest entry is positive (a reproducible sign)."""
    if directions.size == 0:
        return directions
    rows = np.argmax(np.abs(directions), axis=0)
    signs = np.sign(directions[rows, np.arange(directions.shape[1])])
    return directions * np.where(signs == 0, 1.0, signs)


def _weight_argument(rule, weights) -> dict:
    """``{"sample_weight": weights}`` for a rule that takes them; an error if it cannot."""
    if weights is None:
        return {}
    if "sample_weight" in inspect.signature(rule.select).parameters:
        return {"sample_weight": weights}
    raise ValueError(
        f"the dimension rule {type(rule).__name__} takes no sample weights; fit without "
        "sample_weight, use a fixed dim, or a rule that does (chi2, weighted_chi2, "
        "permutation, ladle)."
    )


def _issue(reasons: list[str]) -> list[str]:
    for reason in reasons:
        warnings.warn(reason, EstimationWarning, stacklevel=4)
    return reasons


def _few_rows(n: int, d: int) -> str | None:
    if n >= MIN_ROWS_PER_FEATURE * d:
        return None
    return (
        f"only {n} rows for {d} features (fewer than {MIN_ROWS_PER_FEATURE} per "
        "feature): subspace estimates are unreliable at this size. Collect more data "
        "or use fewer features, and check splitlift.stability() before trusting it."
    )


def _dominant_value(share: float) -> str | None:
    if share <= DOMINANT_VALUE_SHARE:
        return None
    return (
        f"one response value holds {share:.0%} of the rows, so most slices or "
        "local fits see a constant response. Model the rows with other values "
        "separately, or treat y as class labels (pass it as strings)."
    )


def _largest_value_share(y: np.ndarray, weights) -> float:
    """Share of the rows (or weight) held by the most frequent value of ``y``.

    A value holding more than half of the rows (weight) must be the
    (weighted) median, so counting the median's rows decides it: one
    partial sort unweighted, one sort weighted.
    """
    if weights is None:
        median = np.partition(y, y.size // 2)[y.size // 2]
        return float(np.count_nonzero(y == median) / y.size)
    order = np.argsort(y)
    cumulative = np.cumsum(weights[order])
    median = y[order][min(np.searchsorted(cumulative, cumulative[-1] / 2), y.size - 1)]
    return float(weights[y == median].sum() / cumulative[-1])


def _ill_conditioned(X: np.ndarray, weights) -> str | None:
    mean, spread = column_location_scale(X, weights)
    varying = ~constant_columns(mean, spread)
    if varying.sum() <= 1:
        return None
    kept = X[:, varying]
    scatter = covariance(kept, weighted_mean(kept, weights), weights)
    inverse_spread = 1.0 / np.sqrt(np.diag(scatter))
    values = np.linalg.eigvalsh(scatter * np.outer(inverse_spread, inverse_spread))
    with np.errstate(over="ignore"):  # an exactly singular matrix: an infinite index
        index = np.sqrt(values[-1] / max(values[0], np.finfo(float).tiny))
    if index <= CONDITION_INDEX_LIMIT:
        return None
    return (
        f"the inputs are strongly correlated (condition index {index:.3g} > "
        f"{CONDITION_INDEX_LIMIT:g}), so neighbourhoods stretch along few "
        "directions and local gradients are unstable. Whiten or drop "
        "redundant columns first (e.g. PCA with whiten=True), or use a "
        "moment method (SlicedInverse), which whitens itself."
    )


def _numeric_response(y: np.ndarray, method: str) -> np.ndarray:
    """Convert ``y`` to floats, or explain that the method needs a numeric response."""
    try:
        return y.astype(float)
    except (TypeError, ValueError):
        raise ValueError(
            f"{method} needs a numeric response, but y holds labels such as {y[0]!r}; "
            "use SlicedInverse or SlicedAverageVariance for class labels, or encode them."
        ) from None
