"""STIT forests: Mondrian forests run on lifted coordinates ``z = A x``.

A Mondrian process on ``z = A x`` is, seen in x-space, a STIT tessellation
whose directional distribution has atoms ``±a_i/‖a_i‖`` with weights
``‖a_i‖``. The estimators below average such random partitions; growth,
routing and the choice of the lifetime run in compiled kernels
(:mod:`splitlift.forest._compiled`).
"""

from __future__ import annotations

import warnings
from functools import partial
from numbers import Integral, Real

import numpy as np
from joblib import Parallel, delayed, effective_n_jobs
from joblib.parallel import ThreadingBackend, get_active_backend
from scipy.spatial import cKDTree
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import Interval, StrOptions
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from .._blas import one_blas_thread
from .._progress import threaded_map, threaded_sum
from .._validation import check_finite_matrix, check_sample_weight
from ..lift import LiftMatrix
from . import _compiled
from ._lifetime import lifetime_grid
from ._lifting import Lifting, binary_exponent, times_power_of_two
from ._tree import Forest, NodeStore, StitTree, on_lifted_clock, prune_all, tree_from_growth
from ._window import grow_in_window, window_widths

_SEED_BOUND = np.iinfo(np.int32).max
# A constant column of a data-derived window gets a side of this length.
_FLAT_SIDE = 1.0
# Query points are routed in blocks of about this many, each through every tree in
# turn; a point's sum over trees is then the same for any block size and any n_jobs.
_BLOCK = 2048
# Trees per batch when scoring lifetimes; fixed, so sums do not depend on n_jobs.
_TREES_PER_BATCH = 8
# Bytes of one batch's leave-one-out predictions (points x lifetimes x outputs).
_TUNING_BYTES = 1 << 27
# trees of a batch share node stores of at most about this size (see _grow_data_batch)
_STORE_BYTES = 1 << 28
# Points per leaf of the k-d ordering that keeps a cell's training points close in memory.
_LOCALITY_LEAF = 8


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
            raise ValueError(_NEVER_STOPS)
        return float(self.lifetime)

    # ------------------------------------------------------------------ fitting
    def _fit_targets(self, X: np.ndarray, targets: np.ndarray, sample_weight=None):
        weights = check_sample_weight(sample_weight, X.shape[0])
        if weights is None:
            weights = np.ones(X.shape[0])
        else:  # a row of weight zero counts for nothing: not even for the data's extent
            kept = weights > 0
            X, targets, weights = X[kept], targets[kept], weights[kept]
        lifting = Lifting(self.lift, X.shape[1])
        window = self._check_window(X)
        lifetime = self._check_lifetime()
        lifted = _lift_in_one_blas_thread(lifting, X)
        seeds = check_random_state(self.random_state).randint(_SEED_BOUND, size=self.n_trees)
        # the directions in input coordinates: z(x) = linear @ (x - center) + lifted_center
        if window is None:
            half_low, half_high = X.min(axis=0) / 2, X.max(axis=0) / 2  # (halves: no overflow)
            center, steps = half_high + half_low, half_high - half_low
        else:
            center, steps = window[0] / 2 + window[1] / 2, window[1] / 2 - window[0] / 2
        linear, lifted_center = lifting.affine_form(center, np.where(steps > 0, steps, 1.0))
        if window is None:
            trees, exponent, grid, path = self._grow_on_data(lifted, targets, weights,
                                                             lifetime, seeds)
        else:
            trees, exponent, grid, path = self._grow_in_window(
                linear, lifted_center, steps, lifted, targets, weights, lifetime, seeds)
        self.lift_matrix_ = linear
        self._lifting = lifting
        self._forest = Forest([on_lifted_clock(tree, exponent) for tree in trees])
        self.window_ = window
        self.lifetime_grid_ = None if grid is None else times_power_of_two(grid, -exponent)
        self.lifetime_path_ = path
        if lifetime is None:
            chosen = self._forest.trees[0].lifetime
            self.lifetime_ = float(chosen)
            _warn_if_out_of_range(self.lifetime_, float(times_power_of_two(chosen, exponent)),
                                  exponent)
        else:
            self.lifetime_ = lifetime
        self.n_leaves_ = self._forest.n_leaves()
        return self

    def _grow_on_data(self, lifted, targets, weights, lifetime, seeds):
        """Trees grown on the data's extent, on a rescaled clock; with the tuning path."""
        n_samples = lifted.shape[0]
        exponent = binary_exponent(max(float(lifted.max()), -float(lifted.min())))
        rescaled = times_power_of_two(lifted, -exponent)
        order = _locality_order(rescaled)  # keeps each cell's points close in memory
        rows = np.ascontiguousarray(rescaled[order])
        columns = np.ascontiguousarray(rows.T)
        targets = np.ascontiguousarray(targets[order])
        weights = np.ascontiguousarray(weights[order])
        lowest, highest = columns.min(axis=1), columns.max(axis=1)  # (contiguous: faster)
        root_box = np.concatenate([lowest, highest])  # the same root cell for every tree
        root_rate = float((highest - lowest).sum())
        tuning = lifetime is None and root_rate > 0 and n_samples > 1
        grid = lifetime_grid(root_rate, n_samples, rows.shape[1], "data") if tuning else None
        if lifetime is None:
            grow_to = np.inf  # the grid ends at inf; without tuning every lifetime is alike
        else:
            grow_to = float(np.ldexp(lifetime, exponent))
        grown = self._parallel(_grow_data_batch, rows, columns, root_box, targets, weights,
                               grow_to, exponent, tuning, seeds)
        trees = [tree for tree, _, _ in grown]
        if not tuning:
            return trees, exponent, None, None
        chosen, path = self._tune(trees, [layout for _, layout, _ in grown], targets, weights,
                                  grid)
        if np.isinf(chosen):  # at inf every grown tree is its own pruned tree
            return trees, exponent, grid, path
        stores = list({id(store): store for _, _, store in grown}.values())  # in tree order
        del grown, trees  # the stores shrink in place, which their views would forbid
        pruned = threaded_map(lambda store: store.pruned_trees(chosen), stores,
                              effective_n_jobs(self.n_jobs))
        return [tree for batch in pruned for tree in batch], exponent, grid, path

    def _grow_in_window(self, linear, lifted_center, half, lifted, targets, weights, lifetime,
                        seeds):
        """The exact STIT partitions of the window, filled with the training points.

        ``half`` holds the window's half sides; its centre is lifted to
        ``lifted_center`` and ``linear`` maps input offsets from the centre.
        """
        # grow in the centred window divided by 2**side_exponent, with normals divided by
        # 2**normal_exponent; both powers of two, so widths and times stay in range
        side_exponent = binary_exponent(float(half.max()))
        normal_exponent = binary_exponent(float(np.max(np.abs(linear))))
        exponent = side_exponent + normal_exponent
        normals = np.ldexp(linear, -normal_exponent)
        upper = np.ldexp(half, -side_exponent)
        grid = path = None
        if lifetime is None:
            root_rate = float(window_widths(normals, -upper, upper).sum())
            grid = lifetime_grid(root_rate, lifted.shape[0], linear.shape[1], "window")
            grow_to = grid[-1]
        else:
            grow_to = float(np.ldexp(lifetime, exponent))
            if np.isinf(grow_to):
                raise ValueError(_NEVER_STOPS)
        partitions = self._parallel(_grow_window_batch, normals, upper, grow_to, exponent,
                                    lifted_center, seeds, prefer="processes")
        leaves = Forest(partitions).apply(lifted)
        leaves = [np.ascontiguousarray(leaves[:, k]) for k in range(len(partitions))]
        trees = [_filled(tree, leaves[k], targets, weights)
                 for k, tree in enumerate(partitions)]
        if lifetime is None:
            if lifted.shape[0] < 2:
                chosen, path = grid[0], None  # one point: every cell predicts the same value
            else:
                layouts = [_layout_of(tree, leaves[k]) for k, tree in enumerate(trees)]
                chosen, path = self._tune(trees, layouts, targets, weights, grid)
            trees = prune_all(trees, chosen, effective_n_jobs(self.n_jobs))
        return trees, exponent, grid, path

    def _tune(self, trees: list[StitTree], layouts: list[tuple], targets, weights, grid):
        """The grid lifetime with the smallest leave-one-out error, and the error path.

        ``layouts`` hold each tree's subtree layout (``_compiled.subtree_layout``).

        Trees are summed in batches of fixed size, in order, so the path is
        the same for any ``n_jobs``.
        """
        n_samples, n_outputs = targets.shape
        # outputs in groups, so that one batch's predictions stay within _TUNING_BYTES
        group = max(1, _TUNING_BYTES // (8 * n_samples * grid.size))
        errors = np.zeros(grid.size)
        weights_equal = bool(np.all(weights == weights[0]))
        for first in range(0, n_outputs, group):
            outputs = slice(first, first + group)
            part = np.ascontiguousarray(targets[:, outputs])
            # centred, so that the difference arrays' running sums carry no large offset
            centre = np.average(part, axis=0, weights=weights)
            part = part - centre
            shared = dict(outputs=outputs, targets=part, centre=centre, weights=weights,
                          weights_equal=weights_equal, grid=grid)
            batches = [(trees[start : start + _TREES_PER_BATCH],
                        layouts[start : start + _TREES_PER_BATCH])
                       for start in range(0, len(trees), _TREES_PER_BATCH)]
            if _joblib_would_use_threads():  # (see _parallel)
                total = threaded_sum(partial(_leave_one_out_batch, **shared), batches,
                                     max(1, effective_n_jobs(self.n_jobs)))
            else:  # a backend the caller configured gets each batch's trees only
                results = Parallel(n_jobs=self.n_jobs, prefer="threads", return_as="generator")(
                    delayed(_leave_one_out_batch)(batch, **shared) for batch in batches)
                total = next(results)
                for result in results:
                    total += result
            errors += _compiled.squared_errors_over_lifetimes(total, part, weights,
                                                              len(trees))
        path = errors / weights.sum()
        return float(grid[int(np.argmin(path))]), path

    def _parallel(self, batch_function, *args, prefer: str = "threads") -> list:
        """Run ``batch_function`` over batches of the seeds (the last argument), in order.

        The compiled kernels release the GIL, so threads run them in
        parallel; window growth is Python and runs in processes.
        """
        *shared, seeds = args
        n_jobs = max(1, effective_n_jobs(self.n_jobs))
        batches = _shrinking_batches(list(seeds), n_jobs)
        if prefer == "threads" and _joblib_would_use_threads():
            # the same threads without joblib's result loop, which polls in 10 ms sleeps
            # (a caller's other backend, such as Dask's, still gets the work)
            results = threaded_map(lambda batch: batch_function(*shared, batch), batches,
                                   n_jobs)
        else:
            results = Parallel(n_jobs=self.n_jobs, prefer=prefer)(
                delayed(batch_function)(*shared, batch) for batch in batches
            )
        return [item for batch in results for item in batch]

    # ---------------------------------------------------------------- routing
    @property
    def trees_(self) -> list[StitTree]:
        check_is_fitted(self)
        return list(self._forest.trees)

    def _lifted(self, X) -> np.ndarray:
        check_is_fitted(self)
        X = validate_data(self, X, dtype=np.float64, reset=False)
        return np.require(_lift_in_one_blas_thread(self._lifting, X), requirements=["C", "W"])

    def _in_blocks(self, method: str, lifted: np.ndarray) -> np.ndarray:
        """``Forest.<method>`` over blocks of points, in k-d order.

        Neighbouring points share most of their paths, so routing them one
        after the other keeps those tree nodes in the cache. Each point's sum
        runs over the trees in order, whatever the blocks.
        """
        order = _locality_order(lifted)
        rows = np.ascontiguousarray(lifted[order])
        jobs = effective_n_jobs(self.n_jobs)
        # up to four blocks per job, a multiple of the jobs so that none waits on a straggler
        n_blocks = min(4 * jobs, -(-rows.shape[0] // _BLOCK))
        n_blocks = -(-n_blocks // jobs) * jobs if n_blocks > 1 else 1
        block = max(1, -(-rows.shape[0] // n_blocks))
        blocks = [rows[first : first + block] for first in range(0, rows.shape[0], block)]
        parts = threaded_map(getattr(self._forest, method), blocks, jobs)
        result = np.empty((rows.shape[0], parts[0].shape[1]), dtype=parts[0].dtype)
        result[order] = np.concatenate(parts)
        return result

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
        return self._in_blocks("apply", self._lifted(X)).astype(np.intp)

    def _mean_prediction(self, X) -> np.ndarray:
        return self._in_blocks("value_sum", self._lifted(X)) / self._forest.n_trees


_NEVER_STOPS = (
    "lifetime=np.inf never stops in a window, whose cells do not run out of points; give a "
    "finite lifetime (at most about 1e300 times the window's size), lifetime='auto', or "
    "use extent='data'."
)


def _lift_in_one_blas_thread(lifting: Lifting, X: np.ndarray) -> np.ndarray:
    """``lifting(X)`` with BLAS on one thread: the lift is one thin product, and the
    routing or growth threads that follow need the cores (see :func:`one_blas_thread`)."""
    with one_blas_thread():
        return lifting(X)


def _shrinking_batches(items: list, n_jobs: int) -> list[list]:
    """``items`` in consecutive batches, each a ``1 / (2 n_jobs)`` share of those left.

    Guided self-scheduling (Polychronopoulos & Kuck 1987): large batches
    first, single items last, so no thread idles long at the end while
    another finishes a large batch.
    """
    batches, start = [], 0
    while start < len(items):
        size = -(-(len(items) - start) // (2 * n_jobs))
        batches.append(items[start : start + size])
        start += size
    return batches


def _joblib_would_use_threads() -> bool:
    """Whether joblib, asked for threads here, would use its threading backend: no
    other backend (processes, Dask) is configured by the caller."""
    return isinstance(get_active_backend(prefer="threads")[0], ThreadingBackend)


def _locality_order(points: np.ndarray) -> np.ndarray:
    """A permutation listing the points leaf by leaf of a k-d tree (scipy's cKDTree)."""
    if points.shape[0] <= _LOCALITY_LEAF:
        return np.arange(points.shape[0])
    return cKDTree(points, leafsize=_LOCALITY_LEAF, balanced_tree=False, compact_nodes=False,
                   copy_data=False).indices


def _warn_if_out_of_range(lifetime: float, rescaled: float, exponent: int) -> None:
    """Say so when the chosen lifetime is not a normal double in the data's units."""
    if lifetime == 0 or not np.isfinite(lifetime) or abs(lifetime) < np.finfo(float).tiny:
        if np.isinf(rescaled):
            return  # full growth: inf is exact
        warnings.warn(
            f"the chosen lifetime is {rescaled:.6g} × 2**{-exponent} in the units of the "
            f"lifted data, which is {lifetime!r} as a double: outside the normal range at "
            "this data scale. The forest keeps its clock on data rescaled by a power of two, "
            "so its partitions and predictions are exact; only lifetime_ and "
            "lifetime_grid_ are rounded. Rescale X towards unit size to read them exactly.",
            UserWarning, stacklevel=4,
        )


# ---------------------------------------------------------------- batch workers
def _grow_data_batch(rows, columns, root_box, targets, weights, lifetime, exponent,
                     keep_layout, seeds):
    """Grown trees (offsets in lifted units, times on the rescaled clock), each with its
    subtree layout if ``keep_layout`` (else None; see ``_compiled.subtree_layout``) and
    the store that holds it.

    Trees are packed into shared stores of at most about ``_STORE_BYTES``: a
    new store opens when the free room is less than a tree could need
    (2 n - 1 nodes: every cut splits the points of its cell). Trees grown to
    the end on distinct points fill that room; at a finite lifetime they
    need far less, and the room they leave is never touched, so never mapped.
    """
    n_samples, n_outputs = rows.shape[0], targets.shape[1]
    capacity = 2 * n_samples - 1
    per_store = max(1, min(len(seeds),
                           _STORE_BYTES // (capacity * NodeStore.node_bytes(n_outputs))))
    store = None
    leaf_of_point = np.empty(n_samples, np.int32)
    # the layouts that scoring reads after growth, when it does; growth writes them
    first_positions = np.empty((len(seeds) if keep_layout else 0, capacity), np.int32)
    # (unsigned point ids: the scoring loop indexes with them without wraparound code)
    point_orders = np.empty((len(seeds) if keep_layout else 0, n_samples), np.uint32)
    not_kept = np.empty(0, np.int32), np.empty(0, np.uint32)  # (empty: growth writes none)
    workspace = _compiled.growth_workspace(*rows.shape)
    totals = np.empty(capacity)
    grown = []
    for number, seed in enumerate(seeds):
        if store is None or store.free < capacity:
            store = NodeStore(capacity * per_store, n_outputs)
        layout = (first_positions[number], point_orders[number]) if keep_layout else not_kept
        n_nodes = _compiled.grow_from_data(rows, columns, root_box, lifetime,
                                           np.random.default_rng(seed), exponent,
                                           *store.room(), leaf_of_point, workspace, *layout)
        routing, parent, split_time, counts, value = store.take(n_nodes)
        _compiled.node_values(parent, leaf_of_point, targets, weights, counts, value, totals)
        tree = tree_from_growth(routing, parent, split_time, counts, value, lifetime)
        grown.append((tree, (layout[0][:n_nodes], layout[1]) if keep_layout else None, store))
    return grown


def _grow_window_batch(normals, upper, lifetime, exponent, lifted_center, seeds):
    """Window partitions (offsets in lifted units, times on the rescaled clock), unfilled."""
    partitions = []
    for seed in seeds:
        nodes = grow_in_window(normals, -upper, upper, lifetime, np.random.default_rng(seed))
        direction = nodes["direction"]
        offset = np.ldexp(nodes["offset"], exponent) + lifted_center[np.maximum(direction, 0)]
        routing = _compiled.routing_records(direction, offset, nodes["left"], 0)
        n_nodes = direction.size
        partitions.append(tree_from_growth(
            routing, nodes["parent"], nodes["split_time"], np.zeros(n_nodes, np.int32),
            np.zeros((n_nodes, 0)), lifetime))
    return partitions


def _leave_one_out_batch(batch, into=None, *, outputs, targets, centre, weights,
                         weights_equal, grid):
    """Sum over a batch's trees of the leave-one-out predictions minus ``centre``, as
    differences along the grid, shape (outputs, grid, n); ``targets`` are centred on it
    too. ``batch`` holds the trees and their subtree layouts. Written into ``into`` if
    given (an array of that shape), else into a fresh array."""
    shape = (targets.shape[1], grid.size, targets.shape[0])
    if into is None:
        differences = np.zeros(shape)
    else:
        differences = into
        differences.fill(0.0)
    for tree, layout in zip(*batch, strict=True):
        value = tree.value[:, outputs] - centre
        _compiled.add_leave_one_out(tree.routing, tree.parent, tree.split_time,
                                    tree.n_node_samples, value, *layout, targets, weights,
                                    weights_equal, grid, differences)
    return differences


def _layout_of(tree: StitTree, leaf_of_point: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A filled tree's subtree layout, built from the leaf of every training point."""
    first_position = np.empty(tree.n_nodes, np.int32)
    point_order = np.empty(leaf_of_point.size, np.uint32)
    _compiled.subtree_layout(tree.routing, tree.n_node_samples, leaf_of_point, first_position,
                             point_order)
    return first_position, point_order


def _filled(tree: StitTree, leaf_of_point: np.ndarray, targets: np.ndarray,
            weights: np.ndarray) -> StitTree:
    counts = np.empty(tree.n_nodes, np.int32)
    value = np.empty((tree.n_nodes, targets.shape[1]))
    _compiled.node_values(tree.parent, leaf_of_point, targets, weights, counts, value,
                          np.empty(tree.n_nodes))
    return tree_from_growth(tree.routing, tree.parent, tree.split_time, counts, value,
                            tree.lifetime)


_SHARED_PARAMETERS = """
    lifetime : "auto" or float in (0, inf], default "auto"
        Lifetime λ of the Mondrian process, in the units of the lifted
        coordinates ``z``. ``np.inf`` (data mode only) grows each tree until
        every leaf holds a single distinct training point. ``"auto"`` grows
        the trees once (to ``inf`` in data mode, to the largest grid
        lifetime in window mode) and picks the grid lifetime whose pruned
        forest has the smallest leave-one-out error; the forest at that λ is
        the grown forest pruned at the node birth times, since Mondrian
        trees are nested in λ. Leave-one-out is honest here because a
        partition depends on X only, never on y: each training point is
        predicted by the other training points of its cell (of its nearest
        ancestor cell when it is alone). The grid has 30 values log-spaced
        in ``λ R`` from 0.25 up to ``n`` (data mode, followed by ``inf``) or
        ``d (n^{1/d} - 1)`` (window mode), ``R`` being the clock rate of the
        whole domain; the choice is made on the lifted data rescaled by a
        power of two, so a common scale of the data does not change it.
    n_trees : int, default 100
        Number of trees.
    lift : LiftMatrix or array-like of shape (n_directions, n_features), default None
        Split directions as rows. A LiftMatrix acts through its own
        :meth:`~splitlift.LiftMatrix.apply`, standardisation included, so the
        forest sees the coordinates ``ApplyLift(lift)`` would give it. An
        array is used as given: ``z = X @ lift.T``, its row norms being the
        directions' weights. None means the input columns (the axis-aligned
        Mondrian forest, ``A = I``). Must have rank ``n_features``. The
        clock runs at ``Σ_i width_i``, so a LiftMatrix (row norms summing to
        1) needs a lifetime about ``n_features`` times longer than ``A = I``
        for partitions of similar size.
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
        Seeds every tree (one seed per tree, drawn up front).
    n_jobs : int, default None
        Threads: growth, scoring and routing run in compiled code that
        releases the GIL (window mode grows its partitions in worker
        processes). None means 1 (unless in a joblib context), -1 all
        cores. A joblib backend configured by the caller, such as Dask's,
        receives the batches of trees to grow and to score. Results do not
        depend on it.
"""

_SHARED_ATTRIBUTES = """
    trees_ : list of StitTree
        The fitted trees (views of the forest's node arrays): cut offsets
        in lifted units, times in the units of λ; in window mode their cuts
        (direction index, offset) are in ``tree.cuts()``.
    n_leaves_ : ndarray of int, shape (n_trees,)
        Leaves per tree; in window mode the cells of the window's partition,
        empty ones included.
    lifetime_ : float
        The lifetime used (the chosen one for ``lifetime="auto"``).
    lifetime_grid_ : ndarray or None
        Lifetimes tried by ``lifetime="auto"``; None otherwise.
    lifetime_path_ : ndarray or None
        Mean leave-one-out squared error of the training points per grid
        lifetime (the Brier score for a classifier); None unless
        ``lifetime="auto"`` (and the data have more than one distinct row).
    lift_matrix_ : ndarray of shape (n_directions, n_features)
        The directions the trees cut along, in input coordinates: lifted
        coordinate i is ``lift_matrix_[i] @ x`` plus a constant (nonzero
        when a LiftMatrix centres its inputs; read off its ``apply``).
    window_ : ndarray of shape (2, n_features) or None
        The window (window mode), else None.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when X had string column names.
"""

_SHARED_NOTES = """
    A Mondrian process (Roy & Teh 2008) run on ``z = A x`` is a STIT
    tessellation of x-space whose directional distribution has atoms
    ``±a_i/‖a_i‖`` with weights ``‖a_i‖`` (Nagel & Weiss 2005; O'Reilly &
    Tran 2022 simulate STIT this way, by lifting). A cell is cut after an
    exponential time of rate ``Σ_i width_i``, along ``a_i`` with
    probability ∝ ``width_i``, at a uniform offset.

    Growth and routing are compiled with numba and cached on disk: the first
    use on a machine compiles once, and a fresh process then pays only the
    loading of the cached code. In data mode each cell keeps a box that may
    be larger than its points' extent, and runs the Mondrian clock of that
    box; a proposed cut that misses the cell's points tightens the box along
    that direction and the clock runs on. This is exact, because a Mondrian
    process restricted to a sub-box is a Mondrian process on that sub-box,
    and each proposal costs one pass over a single lifted column. Points are
    routed in k-d order, several in lockstep, one tree at a time. Window
    mode computes exact cell polytopes in Python, cell by cell, and is meant
    for small windows and lifetimes.

    In data mode every leaf holds training points. In window mode a cell
    may hold none; a point reaching it is predicted by the nearest ancestor
    cell that holds some. Points outside the window are routed by the same
    cuts, as if the cells extended beyond it.

    Sample weights are frequency weights on the leaf values: a leaf predicts
    the weighted mean of its training targets (weighted class frequencies
    for labels), and ``lifetime="auto"`` scores the weighted leave-one-out
    error, each row left out with its whole weight. Rows of weight zero are
    dropped before anything else, so they do not even widen the data's
    extent. A window partition ignores the data, so there an integer weight
    gives exactly the forest grown on that many copies of the row (up to the
    order of summation). In data mode, growth visits the cells in an order
    that depends on how many rows they hold, so copies and weights give
    other random draws of the same trees. Pass weights in a pipeline with
    ``pipeline.fit(X, y, stitforestregressor__sample_weight=w)``, or request
    them through scikit-learn's metadata routing (``set_fit_request``).

    References
    ----------
    Roy, D. M. and Teh, Y. W. (2008). The Mondrian process. NeurIPS 21.

    Nagel, W. and Weiss, V. (2005). Crack STIT tessellations: characterization
    of stationary random tessellations stable with respect to iteration.
    Advances in Applied Probability 37, 859-883.

    Lakshminarayanan, B., Roy, D. M. and Teh, Y. W. (2014). Mondrian forests:
    efficient online random forests. NeurIPS 27.

    O'Reilly, E. and Tran, N. M. (2022). Stochastic geometry to generalize the
    Mondrian process. SIAM Journal on Mathematics of Data Science
    (arXiv:2002.00797).

    Mourtada, J., Gaïffas, S. and Scornet, E. (2020). Minimax optimal rates for
    Mondrian trees and forests. Annals of Statistics 48, 2253-2276.

    O'Reilly, E. and Tran, N. M. (2024). Minimax rates for high-dimensional
    random tessellation forests. Journal of Machine Learning Research 25(89),
    1-32 (arXiv:2109.10541, 2021).

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

    def fit(self, X, y, sample_weight=None):
        """Grow the forest.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
        sample_weight : array-like of shape (n_samples,), optional
            Frequency weights (see the class notes).

        Returns
        -------
        self
        """
        self._validate_params()
        X, y = validate_data(self, X, y, dtype=np.float64, y_numeric=True)
        return self._fit_targets(X, y.astype(float)[:, None], sample_weight)

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

    def fit(self, X, y, sample_weight=None):
        """Grow the forest.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
            Class labels.
        sample_weight : array-like of shape (n_samples,), optional
            Frequency weights (see the class notes); leaf class frequencies
            are weighted.

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
        return self._fit_targets(X, indicators, sample_weight)

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
