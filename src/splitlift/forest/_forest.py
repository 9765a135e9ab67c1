"""STIT forests: Mondrian forests run on lifted coordinates ``z = A x``.

A Mondrian process on ``z = A x`` is, seen in x-space, a STIT tessellation
whose directional distribution has atoms ``±a_i/‖a_i‖`` with weights
``‖a_i‖``. The estimators below average such random partitions.
"""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np
from joblib import Parallel, delayed
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.model_selection import KFold
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import Interval, StrOptions
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from .._validation import check_finite_matrix
from ..lift import LiftMatrix
from ._lifetime import N_FOLDS, lifetime_grid
from ._tree import (
    StitTree,
    apply_tree,
    grow_from_data,
    node_statistics,
    predict_along_lifetimes,
    prune,
)
from ._window import grow_in_window, window_widths

_SEED_BOUND = np.iinfo(np.int32).max
# Trees are summed in batches of fixed size, so floating-point sums (and hence
# every result) are the same for any n_jobs.
_BATCH_SIZE = 8
# A constant column of a data-derived window gets a side of this length.
_FLAT_SIDE = 1.0


def _batches(items: list, size: int = _BATCH_SIZE) -> list[list]:
    return [items[start : start + size] for start in range(0, len(items), size)]


class _StitForest(BaseEstimator):
    """Shared fitting, routing and tuning; subclasses turn targets into outputs."""

    _parameter_constraints: dict = {
        "lifetime": [StrOptions({"auto"}), Interval(Real, 0, np.inf, closed="right")],
        "n_trees": [Interval(Integral, 1, None, closed="left")],
        "lift": [LiftMatrix, "array-like", None],
        "extent": [StrOptions({"data", "window"})],
        "window": ["array-like", None],
        "random_state": ["random_state"],
        "n_jobs": [Integral, None],
    }

    def __init__(
        self,
        lifetime="auto",
        n_trees=100,
        lift=None,
        extent="data",
        window=None,
        random_state=None,
        n_jobs=None,
    ):
        self.lifetime = lifetime
        self.n_trees = n_trees
        self.lift = lift
        self.extent = extent
        self.window = window
        self.random_state = random_state
        self.n_jobs = n_jobs

    # ------------------------------------------------------------ input checks
    def _check_lift(self, n_features: int) -> np.ndarray:
        if self.lift is None:
            return np.eye(n_features)
        if isinstance(self.lift, LiftMatrix):
            matrix = np.array(self.lift.matrix)
        else:
            matrix = check_finite_matrix(self.lift, "lift")
        if matrix.shape[1] != n_features:
            raise ValueError(
                f"lift has {matrix.shape[1]} columns but X has {n_features} features; pass a "
                f"(n_directions, {n_features}) matrix whose rows are directions in input "
                "coordinates."
            )
        norms = np.linalg.norm(matrix, axis=1)
        if np.any(norms == 0):
            raise ValueError(
                f"lift row {int(np.argmin(norms))} is zero; every row must be a direction."
            )
        rank = int(np.linalg.matrix_rank(matrix))
        if rank < n_features:
            raise ValueError(
                f"lift has rank {rank} < {n_features} features, so cells would be unbounded "
                "along its null space; add directions spanning the rest of the space (for "
                "instance LiftMatrix.from_subspace with complement_weight > 0)."
            )
        return matrix

    def _check_window(self, X: np.ndarray) -> np.ndarray | None:
        if self.extent == "data":
            if self.window is not None:
                raise ValueError(
                    "window is only used with extent='window'; pass extent='window' for the "
                    "exact partition of that box, or drop the window."
                )
            return None
        if self.window is None:
            lower, upper = X.min(axis=0), X.max(axis=0)
            flat = upper == lower
            lower = np.where(flat, lower - _FLAT_SIDE / 2, lower)
            upper = np.where(flat, upper + _FLAT_SIDE / 2, upper)
            return np.vstack([lower, upper])
        box = check_finite_matrix(self.window, "window")
        if box.shape != (2, X.shape[1]):
            raise ValueError(
                f"window must have shape (2, {X.shape[1]}): the lower corner in the first "
                f"row and the upper corner in the second; got shape {box.shape}."
            )
        if np.any(box[0] >= box[1]):
            side = int(np.argmax(box[0] >= box[1]))
            raise ValueError(
                f"window side {side} is empty (lower {box[0, side]:g} >= upper "
                f"{box[1, side]:g}); every lower corner entry must be below the upper one."
            )
        outside = np.any((X < box[0]) | (X > box[1]), axis=1)
        if np.any(outside):
            raise ValueError(
                f"window does not contain the data: {int(outside.sum())} of {X.shape[0]} "
                f"training points lie outside it (the first is row {int(np.argmax(outside))}); "
                "widen the window to cover X or drop those rows."
            )
        return box

    def _check_lifetime(self) -> float | None:
        if self.lifetime == "auto":
            return None
        if self.extent == "window" and np.isinf(self.lifetime):
            raise ValueError(
                "lifetime=np.inf never stops in a window, whose cells do not run out of "
                "points; give a finite lifetime, lifetime='auto', or use extent='data'."
            )
        return float(self.lifetime)

    # ------------------------------------------------------------------ fitting
    def _fit_targets(self, X: np.ndarray, targets: np.ndarray):
        matrix = self._check_lift(X.shape[1])
        window = self._check_window(X)
        lifetime = self._check_lifetime()
        lifted = X @ matrix.T
        rng = check_random_state(self.random_state)
        seeds = list(rng.randint(_SEED_BOUND, size=self.n_trees))

        self.lift_matrix_ = matrix
        self.window_ = window
        self.lifetime_grid_ = self.lifetime_path_ = None
        if window is None:
            if lifetime is None:
                lifetime = self._tune_on_data(lifted, targets, rng)
            trees = self._parallel(_grow_data_batch, lifted, targets, lifetime, seeds,
                                   prefer="processes")
        else:
            if lifetime is None:
                grid = lifetime_grid(
                    float(window_widths(matrix, window[0], window[1]).sum()),
                    *X.shape, "window",
                )
                partitions = self._parallel(_grow_window_batch, matrix, window, grid[-1], seeds,
                                            prefer="processes")
                lifetime = self._tune_in_window(partitions, lifted, targets, grid, rng)
                partitions = [prune(tree, lifetime) for tree in partitions]
            else:
                partitions = self._parallel(_grow_window_batch, matrix, window, lifetime, seeds,
                                            prefer="processes")
            trees = self._parallel(_fill_batch, lifted, targets, partitions)
        self.lifetime_ = float(lifetime)
        self.trees_ = trees
        self.n_leaves_ = np.array([tree.n_leaves for tree in trees])
        return self

    def _parallel(self, batch_function, *args, prefer: str = "threads") -> list:
        """Run ``batch_function`` over fixed-size batches of the last argument, in order.

        Growth holds the GIL (segment reductions) and runs in processes;
        routing mostly releases it and runs in threads, which avoids copying
        the trees.
        """
        *shared, items = args
        results = Parallel(n_jobs=self.n_jobs, prefer=prefer)(
            delayed(batch_function)(*shared, batch) for batch in _batches(list(items))
        )
        return [item for batch in results for item in batch]

    def _folds(self, n_samples: int, rng) -> list:
        seed = rng.randint(_SEED_BOUND)
        splitter = KFold(min(N_FOLDS, n_samples), shuffle=True, random_state=seed)
        return list(splitter.split(np.zeros((n_samples, 1))))

    def _tune_on_data(self, lifted, targets, rng) -> float:
        n_samples = lifted.shape[0]
        root_rate = float(np.ptp(lifted, axis=0).sum())
        if root_rate == 0 or n_samples < 2:
            return np.inf  # every lifetime gives the same single cell
        grid = lifetime_grid(root_rate, n_samples, lifted.shape[1], "data")
        errors = np.zeros(grid.size)
        for train, test in self._folds(n_samples, rng):
            seeds = list(rng.randint(_SEED_BOUND, size=self.n_trees))
            sums = Parallel(n_jobs=self.n_jobs, prefer="processes")(
                delayed(_grid_predictions_of_grown)(
                    lifted[train], targets[train], lifted[test], grid, batch
                )
                for batch in _batches(seeds)
            )
            errors += _squared_errors(sum(sums) / self.n_trees, targets[test])
        return self._record_path(grid, errors / n_samples)

    def _tune_in_window(self, partitions, lifted, targets, grid, rng) -> float:
        n_samples = lifted.shape[0]
        if n_samples < 2:
            return float(grid[0])  # one point: every cell predicts the same value
        errors = np.zeros(grid.size)
        for train, test in self._folds(n_samples, rng):
            sums = Parallel(n_jobs=self.n_jobs, prefer="processes")(
                delayed(_grid_predictions_of_partitions)(
                    batch, lifted[train], targets[train], lifted[test], grid
                )
                for batch in _batches(partitions)
            )
            errors += _squared_errors(sum(sums) / self.n_trees, targets[test])
        return self._record_path(grid, errors / n_samples)

    def _record_path(self, grid: np.ndarray, errors: np.ndarray) -> float:
        self.lifetime_grid_ = grid
        self.lifetime_path_ = errors
        return float(grid[int(np.argmin(errors))])

    # ---------------------------------------------------------------- routing
    def _lifted(self, X) -> np.ndarray:
        check_is_fitted(self)
        X = validate_data(self, X, dtype=np.float64, reset=False)
        return X @ self.lift_matrix_.T

    def apply(self, X) -> np.ndarray:
        """Leaf of every point in every tree.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)

        Returns
        -------
        ndarray of int, shape (n_samples, n_trees)
            Node ids of the leaves, in each tree's own numbering (see
            :class:`StitTree`).
        """
        lifted = self._lifted(X)
        leaves = self._parallel(_apply_batch, lifted, self.trees_)
        return np.column_stack(leaves)

    def _mean_prediction(self, X) -> np.ndarray:
        lifted = self._lifted(X)
        sums = Parallel(n_jobs=self.n_jobs, prefer="threads")(
            delayed(_value_sum)(batch, lifted) for batch in _batches(self.trees_)
        )
        return sum(sums) / len(self.trees_)


# ---------------------------------------------------------------- batch workers
def _grow_data_batch(lifted, targets, lifetime, seeds) -> list[StitTree]:
    return [grow_from_data(lifted, targets, lifetime, np.random.default_rng(s)) for s in seeds]


def _grow_window_batch(matrix, window, lifetime, seeds) -> list[StitTree]:
    return [
        grow_in_window(matrix, window[0], window[1], lifetime, np.random.default_rng(s))
        for s in seeds
    ]


def _fill_batch(lifted, targets, partitions) -> list[StitTree]:
    return [tree.with_statistics(*node_statistics(tree, lifted, targets)) for tree in partitions]


def _apply_batch(lifted, trees) -> list[np.ndarray]:
    return [apply_tree(tree, lifted) for tree in trees]


def _value_sum(trees, lifted) -> np.ndarray:
    total = 0.0
    for tree in trees:
        total = total + tree.value[apply_tree(tree, lifted)]
    return total


def _grid_predictions_of_grown(train, train_targets, test, grid, seeds) -> np.ndarray:
    total = 0.0
    for seed in seeds:
        tree = grow_from_data(train, train_targets, grid[-1], np.random.default_rng(seed))
        total = total + predict_along_lifetimes(tree, test, grid)
    return total


def _grid_predictions_of_partitions(partitions, train, train_targets, test, grid):
    total = 0.0
    for tree in partitions:
        filled = tree.with_statistics(*node_statistics(tree, train, train_targets))
        total = total + predict_along_lifetimes(filled, test, grid)
    return total


def _squared_errors(predictions: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """Summed squared error per lifetime; predictions (n, n_lifetimes, n_outputs)."""
    return ((predictions - targets[:, None, :]) ** 2).sum(axis=(0, 2))


_SHARED_PARAMETERS = """
    lifetime : "auto" or float in (0, inf], default "auto"
        Lifetime λ of the Mondrian process, in the units of ``z = A x``.
        ``np.inf`` (data mode only) grows each tree until every leaf holds
        a single distinct training point. ``"auto"`` picks λ by 5-fold
        cross-validation: per fold, trees are grown once to the largest
        lifetime of the grid and every grid value is scored by pruning them
        at the node birth times (the trees are nested in λ); the grid has
        30 values log-spaced in ``λ R`` from 0.25 up to ``n`` (data mode,
        followed by ``inf``) or ``d (n^{1/d} - 1)`` (window mode), ``R``
        being the clock rate of the whole domain. The score is the
        out-of-fold squared error of the forest prediction.
    n_trees : int, default 100
        Number of trees.
    lift : LiftMatrix or array-like of shape (n_directions, n_features), default None
        Split directions as rows. An array is used as given: its row norms
        are the directions' weights. None means the input columns
        (the axis-aligned Mondrian forest, ``A = I``). Must have rank
        ``n_features``. The clock runs at ``Σ_i width_i``, so a LiftMatrix
        (row norms summing to 1) needs a lifetime about ``n_features``
        times longer than ``A = I`` for partitions of similar size.
    extent : {"data", "window"}, default "data"
        ``"data"``: a cell's width along ``a_i`` is the extent of the
        training points inside it (the practical variant; leaves are never
        empty). ``"window"``: the exact STIT of the box ``window``, each
        width computed over the cell polytope; the partition does not
        depend on the data, whose points only fill the cells.
    window : array-like of shape (2, n_features), default None
        Lower corner (first row) and upper corner (second row) of the box,
        in input coordinates; it must contain the training data. Only with
        ``extent="window"``; None there means the bounding box of the
        training data (a constant column gets a side of length 1).
    random_state : int, RandomState instance or None, default None
        Seeds every tree (one seed per tree, drawn up front) and the folds.
    n_jobs : int, default None
        Parallel jobs of joblib: trees grow in worker processes and are
        routed in threads. None means 1 (unless in a joblib context), -1
        all cores. Results do not depend on it.
"""

_SHARED_ATTRIBUTES = """
    trees_ : list of StitTree
        The fitted trees; in window mode their cuts (direction index,
        offset) are in ``tree.cuts()``.
    n_leaves_ : ndarray of int, shape (n_trees,)
        Leaves per tree; in window mode the cells of the window's partition,
        empty ones included.
    lifetime_ : float
        The lifetime used (the chosen one for ``lifetime="auto"``).
    lifetime_grid_ : ndarray or None
        Lifetimes tried by ``lifetime="auto"``; None otherwise.
    lifetime_path_ : ndarray or None
        Mean out-of-fold squared error per grid lifetime (the Brier score for
        a classifier); None unless ``lifetime="auto"``.
    lift_matrix_ : ndarray of shape (n_directions, n_features)
        The directions ``A`` the trees cut along.
    window_ : ndarray of shape (2, n_features) or None
        The window (window mode), else None.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when X had string column names.
"""

_SHARED_NOTES = """
    A Mondrian process run on ``z = A x`` is a STIT tessellation of x-space
    whose directional distribution has atoms ``±a_i/‖a_i‖`` with weights
    ``‖a_i‖`` (Nagel & Weiss 2005). A cell is cut after an exponential time
    of rate ``Σ_i width_i``, along ``a_i`` with probability ∝ ``width_i``,
    at a uniform offset. Growth and routing handle all cells of one depth at
    once with numpy; window mode grows cell by cell and is meant for small
    windows and lifetimes.

    In data mode every leaf holds training points. In window mode a cell
    may hold none; a point reaching it is predicted by the nearest ancestor
    cell that holds some. Points outside the window are routed by the same
    cuts, as if the cells extended beyond it.

    References
    ----------
    Lakshminarayanan, B., Roy, D. M. and Teh, Y. W. (2014). Mondrian forests:
    efficient online random forests. NeurIPS 27.

    Nagel, W. and Weiss, V. (2005). Crack STIT tessellations: characterization
    of stationary random tessellations stable with respect to iteration.
    Advances in Applied Probability 37, 859-883.

    Mourtada, J., Gaïffas, S. and Scornet, E. (2020). Minimax optimal rates for
    Mondrian trees and forests. Annals of Statistics 48, 2253-2276.

    O'Reilly, E. and Tran, N. M. (2024). Minimax rates for high-dimensional
    random tessellation forests. Journal of Machine Learning Research 25(89),
    1-32.

    O'Reilly, E. (2024). Statistical advantages of oblique randomized decision
    trees and forests. arXiv:2407.02458 (risk bounds in terms of the leakage
    of the lift for ridge functions).
"""


class StitForestRegressor(RegressorMixin, _StitForest):
    __doc__ = (
        """Random forest of STIT tessellations cut along the rows of a lift.

    The prediction is the mean over trees of the mean training response in
    the leaf (cell) containing the point.

    Parameters
    ----------"""
        + _SHARED_PARAMETERS
        + """
    Attributes
    ----------"""
        + _SHARED_ATTRIBUTES
        + """
    See Also
    --------
    StitForestClassifier : the same forest for class labels.
    LiftMatrix : weighted split directions built around a subspace.
    theory_lifetime : the lifetime scaling of the error-rate theory.

    Notes
    -----"""
        + _SHARED_NOTES
        + """
    Examples
    --------
    >>> import numpy as np
    >>> from splitlift.forest import StitForestRegressor
    >>> rng = np.random.default_rng(0)
    >>> X = rng.uniform(-1, 1, size=(300, 3))
    >>> y = np.sin(3 * (X[:, 0] + X[:, 1]))  # synthetic ridge function
    >>> forest = StitForestRegressor(lifetime=np.inf, n_trees=20, random_state=0).fit(X, y)
    >>> forest.apply(X[:2]).shape
    (2, 20)
    >>> bool(forest.score(X, y) > 0.9)
    True
    """
    )

    def fit(self, X, y):
        """Grow the forest.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        self
        """
        self._validate_params()
        X, y = validate_data(self, X, y, dtype=np.float64, y_numeric=True)
        return self._fit_targets(X, y.astype(float)[:, None])

    def predict(self, X) -> np.ndarray:
        """Mean over trees of the leaf means.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)

        Returns
        -------
        ndarray of shape (n_samples,)
        """
        return self._mean_prediction(X)[:, 0]


class StitForestClassifier(ClassifierMixin, _StitForest):
    __doc__ = (
        """Random forest of STIT tessellations cut along the rows of a lift, for labels.

    Class probabilities are the mean over trees of the class frequencies of
    the training points in the leaf (cell) containing the point.

    Parameters
    ----------"""
        + _SHARED_PARAMETERS
        + """
    Attributes
    ----------
    classes_ : ndarray of shape (n_classes,)"""
        + _SHARED_ATTRIBUTES
        + """
    See Also
    --------
    StitForestRegressor : the same forest for a numeric response.

    Notes
    -----"""
        + _SHARED_NOTES
        + """
    Examples
    --------
    >>> import numpy as np
    >>> from splitlift.forest import StitForestClassifier
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(300, 2))
    >>> y = np.where(X[:, 0] - X[:, 1] > 0, "up", "down")  # synthetic labels
    >>> forest = StitForestClassifier(n_trees=20, random_state=0).fit(X, y)
    >>> forest.predict_proba(X[:3]).shape
    (3, 2)
    >>> bool(forest.score(X, y) > 0.9)
    True
    """
    )

    def fit(self, X, y):
        """Grow the forest.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
            Class labels.

        Returns
        -------
        self
        """
        self._validate_params()
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        self.classes_, encoded = np.unique(y, return_inverse=True)
        indicators = np.zeros((y.shape[0], self.classes_.size))
        indicators[np.arange(y.shape[0]), encoded] = 1.0
        return self._fit_targets(X, indicators)

    def predict_proba(self, X) -> np.ndarray:
        """Mean over trees of the leaf class frequencies.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)

        Returns
        -------
        ndarray of shape (n_samples, n_classes)
            Columns ordered as ``classes_``.
        """
        return self._mean_prediction(X)

    def predict(self, X) -> np.ndarray:
        """Most probable class (the first of ``classes_`` on ties).

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)

        Returns
        -------
        ndarray of shape (n_samples,)
        """
        probabilities = self.predict_proba(X)
        return self.classes_[np.argmax(probabilities, axis=1)]
