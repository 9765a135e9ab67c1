"""DirectionLift: a scikit-learn transformer that puts ``x ↦ A x`` in front of a forest."""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin, clone
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import HasMethods, Interval, StrOptions
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted, validate_data

from ._validation import check_sample_weight
from .dask_support import (
    LINEARITY_SAMPLE_ROWS,
    is_dask_collection,
    lifted_extent,
    location_scale,
    register_features,
    sample_of,
    transform_lazily,
)
from .estimators import SlicedInverse
from .estimators._base import FLOAT_DTYPES
from .lift import LiftMatrix
from .linearity import check_linearity
from .loadings import loadings_frame
from .moments import column_location_scale


class DirectionLift(TransformerMixin, BaseEstimator):
    """Estimate a relevant subspace and lift the inputs onto split directions.

    ``fit`` fits a clone of ``estimator``, builds a :class:`LiftMatrix` around
    its subspace, and ``transform`` returns the lifted features, one column
    per split direction (named ``subspace_<i>`` inside the estimated subspace and
    ``complement_<i>`` in its complement), after
    the (standardised) inputs when ``keep_inputs``.

    Which forests the weights reach: ``complement_weight``, ``weight_power``
    and the weights inside the subspace change the fitted model only for
    forests that choose cut directions at random in proportion to a width or
    a column count. The STIT forest (:class:`StitForestRegressor`,
    :class:`StitForestClassifier`) honours them with ``weight_form="scale"``;
    random-column forests (scikit-learn's random and extra-trees forests with
    ``max_features < 1``) honour them only with ``weight_form="repeat"``.
    Split-searching forests ignore them: a tree that searches every column
    for its best cut (``RandomForestRegressor`` and ``ExtraTreesRegressor``
    with their default ``max_features=1.0``, ``HistGradientBoosting*``,
    gradient boosting) is unchanged by rescaling a column, so for those only
    the directions matter, never their weights.

    Parameters
    ----------
    estimator : subspace estimator, default None
        Any splitlift estimator (``basis_``, ``eigenvalues_``); None means
        ``SlicedInverse()``. A clone is fitted, the original is untouched.
    complement_weight : float in (0, 1), default 0.05
        Weight of the orthogonal complement of the estimated subspace; it is
        the lift's leakage with respect to that subspace.
    n_in_subspace : int, optional
        Directions inside the subspace; see :meth:`LiftMatrix.from_subspace`.
    weight_power : float, default 0
        Weights inside the subspace ∝ eigenvalue ** weight_power.
    standardize : bool, default True
        Centre and scale each column to unit variance before estimating and
        lifting (a zero-variance column keeps scale 1). The lift, its angles
        and its leakage then live in standardised coordinates.
    weight_form : {"scale", "repeat"}, default "scale"
        How the direction weights reach the forest. ``"scale"``: one column
        per direction, scaled by its weight (``X @ A.T``); honoured by
        forests whose cut rates follow the width of a cell, such as
        :class:`StitForestRegressor` and other Mondrian forests, and by
        distance-based learners. ``"repeat"``: unit directions repeated in
        proportion to their weights (:meth:`LiftMatrix.repeated`); honoured
        by forests that draw candidate columns at random per split
        (``max_features < 1`` in scikit-learn's random and extra-trees
        forests). Split-searching trees that look at every column (CART
        with ``max_features=None``, gradient boosting by default) ignore
        both forms' weights and see only the directions.
    n_columns : int, optional
        Number of output columns for ``weight_form="repeat"``; default four
        per direction.
    random_state : int, RandomState or None, default None
        Passed to :meth:`LiftMatrix.from_subspace` (None: deterministic
        spread of directions), and to the estimator (and through it to its
        ``dim="auto"`` rule) when the estimator's own ``random_state`` is
        None, so one seed makes the whole fit reproducible.
    keep_inputs : bool, default False
        Return the (standardised) input columns, under their own names,
        followed by the lifted directions, so a forest can cut along both the
        axes and the learned directions. Saved with the lift, so
        :meth:`LiftMatrix.apply` and ``splitlift transform`` return the same
        columns under the same names.

    Attributes
    ----------
    estimator_ : fitted subspace estimator
    lift_ : LiftMatrix
        The lift, acting on standardised inputs when ``standardize``.
    subspace_basis_ : ndarray of shape (n_features_in_, dim_)
        Orthonormal basis of the estimated subspace, in lift coordinates.
    output_matrix_ : ndarray of shape (n_output, n_features_in_)
        The matrix ``transform`` applies (``lift_.matrix`` or its repeated
        form, below an identity block when ``keep_inputs``).
    mean_, scale_ : ndarray of shape (n_features_in_,)
        Standardisation; zeros and ones when ``standardize=False``.
    n_samples_fit_ : int
        Rows fitted on (with positive weight).
    lifted_extent_ : float
        Sum over the lift's directions of the training data's extent along
        them: the clock rate of a STIT tree's root cell (``1 / lifted_extent_``
        is the expected time of its first cut).
    loadings_, standardised_loadings_ : pandas.DataFrame
        Directions x features tables of the estimated subspace, by name.
    linearity_ : splitlift.linearity.LinearityCheck
        How far the standardised inputs are from the moment methods'
        linearity condition, along the estimated subspace.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names (pandas).

    See Also
    --------
    LiftMatrix.from_subspace : how the lift is built.
    StitForestRegressor : a forest that honours the weights.
    splitlift.selection.DirectionLiftCV : choose between raw inputs and lifts by
        cross-validation.

    Examples
    --------
    >>> import numpy as np
    >>> from sklearn.ensemble import RandomForestRegressor
    >>> from sklearn.pipeline import make_pipeline
    >>> from splitlift import DirectionLift
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((400, 6))
    >>> y = np.sin(X[:, 0] + X[:, 1]) + 0.05 * rng.standard_normal(400)
    >>> model = make_pipeline(DirectionLift(), RandomForestRegressor(n_estimators=20))
    >>> model.fit(X, y).predict(X[:2]).shape
    (2,)
    """

    _parameter_constraints: dict = {
        "estimator": [HasMethods(["fit"]), None],
        "complement_weight": [Interval(Real, 0, 1, closed="neither")],
        "n_in_subspace": [Interval(Integral, 1, None, closed="left"), None],
        "weight_power": [Interval(Real, None, None, closed="neither")],
        "standardize": ["boolean"],
        "weight_form": [StrOptions({"scale", "repeat"})],
        "n_columns": [Interval(Integral, 1, None, closed="left"), None],
        "random_state": ["random_state"],
        "keep_inputs": ["boolean"],
    }

    def __init__(
        self,
        estimator=None,
        complement_weight=0.05,
        n_in_subspace=None,
        weight_power=0.0,
        standardize=True,
        weight_form="scale",
        n_columns=None,
        random_state=None,
        keep_inputs=False,
    ):
        self.estimator = estimator
        self.complement_weight = complement_weight
        self.n_in_subspace = n_in_subspace
        self.weight_power = weight_power
        self.standardize = standardize
        self.weight_form = weight_form
        self.n_columns = n_columns
        self.random_state = random_state
        self.keep_inputs = keep_inputs

    def fit(self, X, y, sample_weight=None):
        """Fit the estimator on (standardised) X and build the lift.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features), or a Dask array or DataFrame
            Dask input is never loaded whole (see :mod:`splitlift.dask_support`).
        y : array-like of shape (n_samples,)
            Numeric response or class labels (as the estimator allows).
        sample_weight : array-like of shape (n_samples,), optional
            Frequency weights, used by the standardisation and passed to the
            estimator (integer weights give the fit on repeated rows).
            Requested through metadata routing with
            ``set_fit_request(sample_weight=True)``.

        Returns
        -------
        self
        """
        self._validate_params()
        lazy = is_dask_collection(X)
        if lazy:
            standardised = self._fit_standardisation_lazily(X, sample_weight)
        else:
            X = validate_data(self, X, dtype=float)
            sample_weight = check_sample_weight(sample_weight, X.shape[0])
            standardised = self._fit_standardisation(X, sample_weight)
        estimator = clone(SlicedInverse() if self.estimator is None else self.estimator)
        weighted = {} if sample_weight is None else {"sample_weight": sample_weight}
        self.estimator_ = _seed_estimator(estimator, self.random_state).fit(
            standardised, y, **weighted)
        self.subspace_basis_ = self.estimator_.basis_
        names = getattr(self, "feature_names_in_", None)
        self.lift_ = LiftMatrix.from_subspace(
            self.subspace_basis_,
            complement_weight=self.complement_weight,
            n_in_subspace=self.n_in_subspace,
            eigenvalues=self.estimator_.eigenvalues_,
            weight_power=self.weight_power,
            random_state=self.random_state,
            feature_names=None if names is None else list(names),
            metadata={"estimator": type(self.estimator_).__name__,
                      "standardized": bool(self.standardize),
                      "weight_form": self.weight_form, "n_columns": self.n_columns,
                      "keep_inputs": bool(self.keep_inputs)},
            input_mean=self.mean_ if self.standardize else None,
            input_scale=self.scale_ if self.standardize else None,
        )
        self.output_matrix_ = self.lift_.output_matrix()
        # the STIT clock rate of the root cell: sets the scale of a suggested lifetime
        if lazy:  # one more pass for the extent; the diagnostics read a sample of the rows
            self.lifted_extent_ = lifted_extent(standardised, self.lift_.matrix)
            self.linearity_ = check_linearity(
                np.asarray(sample_of(standardised, LINEARITY_SAMPLE_ROWS)), self.subspace_basis_)
        else:
            self.lifted_extent_ = float(np.sum(np.ptp(standardised @ self.lift_.matrix.T,
                                                      axis=0)))
            self.n_samples_fit_ = X.shape[0] if sample_weight is None else int(
                np.count_nonzero(sample_weight))
            self.linearity_ = check_linearity(standardised, self.subspace_basis_)
        return self

    def _fit_standardisation(self, X: np.ndarray, sample_weight=None) -> np.ndarray:
        d = X.shape[1]
        if not self.standardize:
            self.mean_, self.scale_ = np.zeros(d), np.ones(d)
            return X
        self.mean_, scale = column_location_scale(X, sample_weight)
        self.scale_ = np.where(scale > 0, scale, 1.0)
        return _standardise(X, self.mean_, self.scale_)

    def _fit_standardisation_lazily(self, X, sample_weight):
        """Dask input: one pass for the column moments; the standardised data stay lazy."""
        register_features(self, X, reset=True)
        mean, scale, self.n_samples_fit_ = location_scale(X, sample_weight)
        d = mean.size
        if not self.standardize:
            self.mean_, self.scale_ = np.zeros(d), np.ones(d)
            return X
        self.mean_, self.scale_ = mean, np.where(scale > 0, scale, 1.0)
        return _standardise(X, self.mean_, self.scale_)

    def transform(self, X) -> np.ndarray:
        """Lifted features ``((X - mean_) / scale_) @ output_matrix_.T``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_output)
            float32 for float32 input, else float64. Dask input gives a lazy
            Dask array, or a Dask DataFrame named by ``get_feature_names_out()``.
        """
        check_is_fitted(self, "lift_")
        return _lifted(self, X)

    def reference_in_lift_coordinates(self, reference) -> np.ndarray:
        """Map a subspace given in input coordinates to the lift's coordinates.

        See :meth:`LiftMatrix.reference_in_lift_coordinates`; the scales are
        those of the standardisation (ones when ``standardize=False``).

        Parameters
        ----------
        reference : array-like of shape (n_features_in_, k)

        Returns
        -------
        ndarray of shape (n_features_in_, k), orthonormal columns
        """
        check_is_fitted(self, "lift_")
        return self.lift_.reference_in_lift_coordinates(reference)

    def save(self, path) -> None:
        """Save the fitted lift for production use, atomically.

        The file holds the matrix, the standardisation, the feature names,
        the estimator and its settings, this lift's settings and the
        diagnostic report; :meth:`LiftMatrix.load` reads it back and
        :meth:`LiftMatrix.apply` reproduces :meth:`transform` exactly
        (``weight_form="scale"``; the repeated form is rebuilt with
        ``LiftMatrix.repeated(n_columns)``).

        Parameters
        ----------
        path : str or Path
        """
        check_is_fitted(self, "lift_")
        report = self.report()
        settings = {k: _json_safe(v) for k, v in self.get_params(deep=False).items()
                    if k != "estimator"}
        self.lift_.with_metadata(
            estimator=type(self.estimator_).__name__,
            estimator_params={k: _json_safe(v)
                              for k, v in self.estimator_.get_params(deep=False).items()},
            lift_params=settings,
            output_columns=int(self.output_matrix_.shape[0]),
            diagnostics=report.to_dict(),
            report_text=str(report),
        ).save(path)

    def report(self, reference=None, stability=None):
        """Diagnostic report of the fitted lift.

        Parameters
        ----------
        reference : array-like of shape (n_features_in_, k), optional
            A known subspace in input coordinates (columns spanning it); the
            report then gives principal angles and leakage with respect to it.
        stability : SubspaceStability, optional
            Result of ``splitlift.stability(self, X, y)``; the report then
            shows bootstrap angle quantiles and the leakage of the lift with
            respect to the bootstrap subspaces.

        Returns
        -------
        splitlift.report.LiftReport
            ``str()`` reads as a table; ``to_dict()`` is JSON-serialisable.
        """
        from .report import LiftReport

        return LiftReport.from_direction_lift(self, reference, stability)

    @property
    def loadings_(self):
        """Directions x features table (DataFrame) of the estimated subspace, inputs as given.

        One row per estimated direction, of unit length with its largest
        loading positive; columns named after the features. Coefficients on
        the inputs in their own units: compare across features with
        ``standardised_loadings_``.
        """
        check_is_fitted(self, "lift_")
        return loadings_frame(self.subspace_basis_, getattr(self, "feature_names_in_", None),
                              scale=self.scale_)

    @property
    def standardised_loadings_(self):
        """The directions' weights per standard deviation of each feature (unit length)."""
        check_is_fitted(self, "lift_")
        spread = self.estimator_._feature_scale
        return loadings_frame(self.subspace_basis_, getattr(self, "feature_names_in_", None),
                              scale=1.0 / np.where(spread > 0, spread, 1.0))


    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        """Output names: the inputs' names when kept, then ``subspace_<i>``, ``complement_<i>``.

        Parameters
        ----------
        input_features : array-like of str, optional
            Input names; default ``feature_names_in_``, else ``x0``, ``x1``, ...

        Returns
        -------
        ndarray of str
        """
        check_is_fitted(self, "lift_")
        inputs = _check_feature_names_in(self, input_features)
        return np.asarray(self.lift_.output_feature_names(list(inputs)), dtype=object)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags


class ApplyLift(TransformerMixin, BaseEstimator):
    """Apply a fixed, already built lift, ``X ↦ lift.apply(X)``.

    For production pipelines (a lift loaded with :meth:`LiftMatrix.load`)
    and for hand-made direction matrices. Fitting learns nothing but checks
    the number of columns.

    Parameters
    ----------
    lift : LiftMatrix or array-like of shape (m, d)
        An array is wrapped in a :class:`LiftMatrix` (normalised, rank d).

    Attributes
    ----------
    lift_ : LiftMatrix
    n_features_in_ : int

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import ApplyLift, LiftMatrix
    >>> ApplyLift(LiftMatrix.axis(2)).fit_transform(np.ones((1, 2))).tolist()
    [[0.5, 0.5]]
    """

    _parameter_constraints: dict = {"lift": ["array-like", HasMethods(["apply"])]}

    def __init__(self, lift):
        self.lift = lift

    def fit(self, X, y=None):
        """Check that X has the lift's columns; nothing is learned from the data."""
        self._validate_params()
        X = validate_data(self, X, dtype=float)
        lift = self.lift if isinstance(self.lift, LiftMatrix) else LiftMatrix(self.lift)
        if lift.n_features != X.shape[1]:
            raise ValueError(
                f"the lift has {lift.n_features} columns but X has {X.shape[1]} features."
            )
        self.lift_ = lift
        return self

    def transform(self, X) -> np.ndarray:
        """Lifted features of X (float32 kept; lazy for Dask input, as DirectionLift)."""
        check_is_fitted(self, "lift_")
        return _lifted(self, X)

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        """Output column names, as :meth:`LiftMatrix.output_feature_names` gives them.

        Parameters
        ----------
        input_features : array-like of str, optional
            Input names, used when the lift keeps its inputs.

        Returns
        -------
        ndarray of str
        """
        check_is_fitted(self, "lift_")
        names = None if input_features is None else list(input_features)
        return np.asarray(self.lift_.output_feature_names(names), dtype=object)


def _lifted(transformer, X):
    """``lift_.apply`` (one code path for every place a lift is applied), keeping float32
    and staying lazy for Dask input."""
    if is_dask_collection(X):
        return transform_lazily(transformer, X, transformer.lift_.apply)
    X = validate_data(transformer, X, dtype=FLOAT_DTYPES, reset=False)
    return transformer.lift_.apply(X).astype(X.dtype, copy=False)


def _standardise(X: np.ndarray, mean: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """``(X - mean) / scale`` without overflow: dividing first keeps finite rows finite."""
    return X / scale - mean / scale


def _seed_estimator(estimator, random_state):
    """Give an unseeded estimator the transformer's seed, so one seed fixes the whole fit."""
    params = estimator.get_params(deep=False)
    if random_state is None or "random_state" not in params or params["random_state"] is not None:
        return estimator
    seed = random_state if isinstance(random_state, Integral) else \
        check_random_state(random_state).randint(np.iinfo(np.int32).max)
    return estimator.set_params(random_state=seed)


def _json_safe(value):
    """A JSON-friendly form of a parameter value (its repr when not a plain scalar)."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return repr(value)
