"""Partition trees cut along lifted directions: storage, growth from data, routing.

A tree lives in flat arrays indexed by node id. Ids are assigned breadth
first, so a parent always precedes its children and the nodes of one depth
are contiguous. Every routine here works level by level on whole batches of
points with numpy; the only Python loop runs over depth levels.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(eq=False)
class StitTree:
    """One tree of a STIT forest, as flat arrays over its nodes.

    Node 0 is the root; ids are breadth first. A point ``x`` with lifted
    coordinates ``z = A x`` reaches the left child of an internal node when
    ``z[direction] <= offset`` and the right child otherwise.

    Attributes
    ----------
    direction : ndarray of int, shape (n_nodes,)
        Index ``i`` of the lift row ``a_i`` that cuts the node; -1 at a leaf.
    offset : ndarray of float, shape (n_nodes,)
        Cut offset ``c`` of the hyperplane ``a_i · x = c``; NaN at a leaf.
    left, right : ndarray of int, shape (n_nodes,)
        Child ids; -1 at a leaf.
    parent : ndarray of int, shape (n_nodes,)
        Parent id; -1 at the root.
    depth : ndarray of int, shape (n_nodes,)
    birth_time : ndarray of float, shape (n_nodes,)
        Time at which the cell appeared (0 at the root); it is the parent's
        ``split_time``.
    split_time : ndarray of float, shape (n_nodes,)
        Time at which the cell was cut; ``inf`` at a leaf. The tree at any
        smaller lifetime ``t`` is this tree pruned to the nodes born at or
        before ``t``.
    n_node_samples : ndarray of int, shape (n_nodes,)
        Training points in each cell.
    value : ndarray of float, shape (n_nodes, n_outputs)
        Mean training target of each cell (class frequencies for a
        classifier); an empty cell holds the value of its nearest non-empty
        ancestor.
    lifetime : float
        Lifetime the tree was grown to.
    """

    direction: np.ndarray
    offset: np.ndarray
    left: np.ndarray
    right: np.ndarray
    parent: np.ndarray
    depth: np.ndarray
    birth_time: np.ndarray
    split_time: np.ndarray
    n_node_samples: np.ndarray
    value: np.ndarray
    lifetime: float

    def __post_init__(self):
        # 32-bit node indices keep trees small to store and to ship between processes
        for name in ("direction", "left", "right", "parent", "depth", "n_node_samples"):
            setattr(self, name, np.asarray(getattr(self, name), dtype=np.int32))

    @property
    def n_nodes(self) -> int:
        return int(self.direction.size)

    @property
    def n_leaves(self) -> int:
        return int(np.count_nonzero(self.direction < 0))

    @property
    def max_depth(self) -> int:
        return int(self.depth.max())

    def cuts(self) -> tuple[np.ndarray, np.ndarray]:
        """Direction index and offset of every cut, internal nodes in id order.

        Returns
        -------
        direction : ndarray of int, shape (n_cuts,)
        offset : ndarray of float, shape (n_cuts,)
            The cut of node ``k = np.flatnonzero(tree.direction >= 0)[j]`` is
            the hyperplane ``a_{direction[j]} · x = offset[j]`` restricted to
            that node's cell.
        """
        internal = self.direction >= 0
        return self.direction[internal].copy(), self.offset[internal].copy()

    def with_statistics(self, counts: np.ndarray, sums: np.ndarray) -> StitTree:
        """A copy with node counts and values recomputed from target sums."""
        return _replace(self, n_node_samples=counts, value=fill_empty_values(self, counts, sums))


def _replace(tree: StitTree, **changes) -> StitTree:
    fields = {name: getattr(tree, name) for name in tree.__dataclass_fields__}
    fields.update(changes)
    return StitTree(**fields)


def grow_from_data(
    lifted: np.ndarray, targets: np.ndarray, lifetime: float, rng: np.random.Generator
) -> StitTree:
    """Grow a Mondrian tree on lifted points, with clock rates from the data extent.

    Parameters
    ----------
    lifted : ndarray of shape (n_samples, n_directions)
        Training points in lifted coordinates ``z = A x``.
    targets : ndarray of shape (n_samples, n_outputs)
        Regression targets, or one-hot class indicators.
    lifetime : float
        Lifetime λ, possibly ``inf`` (grow until every leaf holds one
        distinct point).
    rng : numpy Generator

    Notes
    -----
    A cell with training points ``Z_C`` has widths
    ``w_i = max Z_C[:, i] - min Z_C[:, i]`` and rate ``Σ_i w_i``. It is cut
    after an exponential waiting time of that rate if the cut time stays
    within λ, along direction i with probability ``w_i / Σ w``, at an offset
    uniform on ``[min, max]`` (Lakshminarayanan, Roy & Teh 2014). All cells
    of one depth are handled at once: the active points are kept sorted by
    cell, so widths, counts and target sums are segment reductions
    (``np.minimum.reduceat`` and friends) over contiguous blocks.
    """
    lifted = np.ascontiguousarray(lifted, dtype=float)
    n_rows = lifted.shape[0]
    order = np.arange(n_rows)  # active rows, grouped by cell
    starts = np.zeros(1, dtype=np.intp)  # first position of each cell of this depth
    births = np.zeros(1)
    parents = np.full(1, -1, dtype=np.intp)
    leaf_of_row = np.empty(n_rows, dtype=np.intp)
    first_id, depth = 0, 0
    levels: list[dict[str, np.ndarray]] = []
    while starts.size:
        n_cells = starts.size
        points = np.take(lifted, order, axis=0)
        lower = np.minimum.reduceat(points, starts, axis=0)
        upper = np.maximum.reduceat(points, starts, axis=0)
        widths = upper - lower
        rates = widths.sum(axis=1)

        draws = rng.standard_exponential(n_cells)
        positive = rates > 0
        waits = np.full(n_cells, np.inf)
        waits[positive] = draws[positive] / rates[positive]
        split_times = births + waits
        splitting = positive & (split_times <= lifetime)
        n_split = int(np.count_nonzero(splitting))

        chosen = _draw_directions(widths[splitting], rates[splitting], rng)
        low = lower[splitting, chosen]
        high = upper[splitting, chosen]
        offsets = low + rng.random(n_split) * widths[splitting, chosen]
        # rounding may put the offset on the upper end; the lower end keeps both sides non-empty
        offsets = np.where(offsets < high, offsets, low)

        ids = first_id + np.arange(n_cells)
        child_base = first_id + n_cells
        level = {
            "direction": np.full(n_cells, -1, dtype=np.intp),
            "offset": np.full(n_cells, np.nan),
            "left": np.full(n_cells, -1, dtype=np.intp),
            "right": np.full(n_cells, -1, dtype=np.intp),
            "parent": parents,
            "depth": np.full(n_cells, depth, dtype=np.intp),
            "birth_time": births,
            "split_time": np.where(splitting, split_times, np.inf),
        }
        level["direction"][splitting] = chosen
        level["offset"][splitting] = offsets
        level["left"][splitting] = child_base + 2 * np.arange(n_split)
        level["right"][splitting] = child_base + 2 * np.arange(n_split) + 1
        levels.append(level)

        # rows of final cells drop out; the others move to their child cells
        counts = np.diff(np.append(starts, order.size))
        cell_of_row = np.repeat(np.arange(n_cells), counts)
        keep = splitting[cell_of_row]
        leaf_of_row[order[~keep]] = ids[cell_of_row[~keep]]
        rows = order[keep]
        row_rank = (np.cumsum(splitting) - 1)[cell_of_row[keep]]
        go_right = _coordinates(lifted, rows, chosen[row_rank]) > offsets[row_rank]
        slot = 2 * row_rank + go_right
        order = rows[np.argsort(slot, kind="stable")]
        child_counts = np.bincount(slot, minlength=2 * n_split)
        starts = (np.cumsum(child_counts) - child_counts).astype(np.intp)
        births = np.repeat(split_times[splitting], 2)
        parents = np.repeat(ids[splitting], 2)
        first_id, depth = child_base, depth + 1

    merged = {key: np.concatenate([level[key] for level in levels]) for key in levels[0]}
    tree = StitTree(
        **merged,
        n_node_samples=np.zeros(first_id, dtype=np.intp),
        value=np.zeros((first_id, targets.shape[1])),
        lifetime=float(lifetime),
    )
    counts, sums = _sums_from_leaves(tree, leaf_of_row, targets)
    return _replace(tree, n_node_samples=counts, value=sums / counts[:, None])


def _sums_from_leaves(tree: StitTree, leaf_of_row: np.ndarray, targets: np.ndarray):
    """Counts and target sums of every node, from the leaf each row ended in."""
    counts = np.bincount(leaf_of_row, minlength=tree.n_nodes)
    sums = np.column_stack([
        np.bincount(leaf_of_row, weights=column, minlength=tree.n_nodes) for column in targets.T
    ]).reshape(tree.n_nodes, targets.shape[1])
    # a cut cell holds exactly the points of its two children; deepest cuts first
    for level in range(tree.max_depth - 1, -1, -1):
        cut = np.flatnonzero((tree.depth == level) & (tree.direction >= 0))
        counts[cut] = counts[tree.left[cut]] + counts[tree.right[cut]]
        sums[cut] = sums[tree.left[cut]] + sums[tree.right[cut]]
    return counts, sums


def _draw_directions(widths: np.ndarray, rates: np.ndarray, rng: np.random.Generator):
    """Per row, an index drawn with probability proportional to the widths."""
    n_rows, n_directions = widths.shape
    if n_rows == 0:
        return np.zeros(0, dtype=np.intp)
    targets = rng.random(n_rows) * rates
    chosen = np.count_nonzero(np.cumsum(widths, axis=1) <= targets[:, None], axis=1)
    # rounding can push the target to the total: take the last positive width then
    last_positive = n_directions - 1 - np.argmax(widths[:, ::-1] > 0, axis=1)
    return np.minimum(chosen, last_positive)


def _coordinates(lifted: np.ndarray, rows: np.ndarray, columns: np.ndarray) -> np.ndarray:
    """``lifted[rows, columns]`` for a C-contiguous array; ``np.take`` gathers faster."""
    return np.take(lifted.reshape(-1), rows * lifted.shape[1] + columns)


def _children(tree: StitTree, lifted: np.ndarray, rows: np.ndarray, nodes: np.ndarray):
    """Child reached by each point ``lifted[rows]`` from its internal node."""
    go_right = _coordinates(lifted, rows, tree.direction[nodes]) > tree.offset[nodes]
    return np.where(go_right, tree.right[nodes], tree.left[nodes])


def _internal_at(tree: StitTree, lifetime: float | None) -> np.ndarray:
    internal = tree.direction >= 0
    if lifetime is not None:
        internal &= tree.split_time <= lifetime
    return internal


def apply_tree(tree: StitTree, lifted: np.ndarray, lifetime: float | None = None) -> np.ndarray:
    """Leaf id of every point; with ``lifetime``, leaves of the tree pruned there."""
    lifted = np.ascontiguousarray(lifted, dtype=float)
    internal = _internal_at(tree, lifetime)
    node = np.zeros(lifted.shape[0], dtype=np.intp)
    active = np.flatnonzero(internal[node])
    while active.size:
        current = node[active]
        node[active] = _children(tree, lifted, active, current)
        active = active[internal[node[active]]]
    return node


def node_statistics(
    tree: StitTree, lifted: np.ndarray, targets: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Counts and target sums of the given points in every node of the tree."""
    lifted = np.ascontiguousarray(lifted, dtype=float)
    counts = np.zeros(tree.n_nodes, dtype=np.intp)
    sums = np.zeros((tree.n_nodes, targets.shape[1]))
    internal = tree.direction >= 0
    node = np.zeros(lifted.shape[0], dtype=np.intp)
    active = np.arange(lifted.shape[0])
    while active.size:
        current = node[active]
        counts += np.bincount(current, minlength=tree.n_nodes)
        for column in range(targets.shape[1]):
            sums[:, column] += np.bincount(
                current, weights=targets[active, column], minlength=tree.n_nodes
            )
        inner = internal[current]
        active, current = active[inner], current[inner]
        node[active] = _children(tree, lifted, active, current)
    return counts, sums


def fill_empty_values(tree: StitTree, counts: np.ndarray, sums: np.ndarray) -> np.ndarray:
    """Node means; an empty node takes the value of its nearest non-empty ancestor.

    If the root itself is empty (no training point reached the tree) every
    node gets zeros.
    """
    values = np.zeros_like(sums, dtype=float)
    filled = counts > 0
    values[filled] = sums[filled] / counts[filled, None]
    # parents precede children, so filling depth by depth sees ancestors first
    for level in range(1, tree.max_depth + 1):
        empty = np.flatnonzero((tree.depth == level) & ~filled)
        values[empty] = values[tree.parent[empty]]
    return values


def predict_along_lifetimes(
    tree: StitTree, lifted: np.ndarray, lifetimes: np.ndarray
) -> np.ndarray:
    """Predictions of the tree pruned at each lifetime, from one pass down the tree.

    Parameters
    ----------
    lifetimes : ndarray of shape (n_lifetimes,)
        Ascending; no larger than the tree's own lifetime to be meaningful.

    Returns
    -------
    ndarray of shape (n_points, n_lifetimes, n_outputs)

    Notes
    -----
    Mondrian trees are nested in the lifetime: a node is a leaf of the tree
    at lifetime t exactly when ``birth_time <= t < split_time``. Along the
    path of a point these intervals partition the time axis, so each
    lifetime is served by exactly one node of the path.
    """
    lifted = np.ascontiguousarray(lifted, dtype=float)
    grid = np.asarray(lifetimes, dtype=float)
    n_grid = grid.size
    result = np.empty((lifted.shape[0], n_grid, tree.value.shape[1]))
    node = np.zeros(lifted.shape[0], dtype=np.intp)
    active = np.arange(lifted.shape[0])
    while active.size:
        current = node[active]
        first = np.searchsorted(grid, tree.birth_time[current], side="left")
        split = tree.split_time[current]
        stop = np.where(np.isinf(split), n_grid, np.searchsorted(grid, split, side="left"))
        served = (np.arange(n_grid) >= first[:, None]) & (np.arange(n_grid) < stop[:, None])
        rows, columns = np.nonzero(served)
        result[active[rows], columns] = tree.value[current[rows]]
        deeper = stop < n_grid
        active, current = active[deeper], current[deeper]
        node[active] = _children(tree, lifted, active, current)
    return result


def prune(tree: StitTree, lifetime: float) -> StitTree:
    """The tree at a smaller lifetime: drop cells born later, turn late cuts into leaves."""
    kept = tree.birth_time <= lifetime
    new_id = np.cumsum(kept) - 1
    internal = kept & (tree.direction >= 0) & (tree.split_time <= lifetime)
    ids = np.flatnonzero(kept)

    def remap(children: np.ndarray) -> np.ndarray:
        return np.where(internal[ids], new_id[np.maximum(children[ids], 0)], -1)

    return StitTree(
        direction=np.where(internal[ids], tree.direction[ids], -1),
        offset=np.where(internal[ids], tree.offset[ids], np.nan),
        left=remap(tree.left),
        right=remap(tree.right),
        parent=np.where(tree.parent[ids] >= 0, new_id[np.maximum(tree.parent[ids], 0)], -1),
        depth=tree.depth[ids],
        birth_time=tree.birth_time[ids],
        split_time=np.where(internal[ids], tree.split_time[ids], np.inf),
        n_node_samples=tree.n_node_samples[ids],
        value=tree.value[ids],
        lifetime=float(lifetime),
    )
