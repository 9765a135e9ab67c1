"""Storage of STIT trees: one tree as a view, a whole forest as flat arrays.

A tree lives in arrays indexed by node id. Node 0 is the root, a node's two
children are consecutive (``right = left + 1``) and every child has a larger
id than its parent. A forest concatenates its trees' arrays; node ids stay
local to their tree. Per node that is 32 bytes plus the value (8 bytes per
output): direction and left child (int32), offset and split time (float64),
parent and training count (int32).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _compiled


@dataclass(eq=False)
class StitTree:
    """One tree of a STIT forest, as arrays over its nodes.

    A point ``x`` with lifted coordinates ``z`` reaches the left child of an
    internal node when ``z[direction] <= offset`` and the right child
    otherwise.

    Attributes
    ----------
    direction : ndarray of int32, shape (n_nodes,)
        Index ``i`` of the lifted coordinate ``z_i`` that cuts the node; -1
        at a leaf.
    offset : ndarray of float, shape (n_nodes,)
        Cut offset ``c`` of the hyperplane ``z_i = c``; NaN at a leaf.
    left : ndarray of int32, shape (n_nodes,)
        Left child id (the right child is ``left + 1``); -1 at a leaf.
    parent : ndarray of int32, shape (n_nodes,)
        Parent id; -1 at the root.
    split_time : ndarray of float, shape (n_nodes,)
        Time at which the cell was cut; ``inf`` at a leaf. A child's birth
        time is its parent's split time (0 at the root), and the tree at any
        smaller lifetime ``t`` is this tree pruned to the nodes born at or
        before ``t``.
    n_node_samples : ndarray of int32, shape (n_nodes,)
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
    parent: np.ndarray
    split_time: np.ndarray
    n_node_samples: np.ndarray
    value: np.ndarray
    lifetime: float

    @property
    def n_nodes(self) -> int:
        return int(self.direction.size)

    @property
    def n_leaves(self) -> int:
        return int(np.count_nonzero(self.direction < 0))

    @property
    def right(self) -> np.ndarray:
        """Right child ids (``left + 1``); -1 at a leaf."""
        return np.where(self.left >= 0, self.left + 1, -1).astype(np.int32)

    @property
    def birth_time(self) -> np.ndarray:
        """Time at which each cell appeared: its parent's split time, 0 at the root."""
        births = np.zeros(self.n_nodes)
        births[1:] = self.split_time[self.parent[1:]]
        return births

    @property
    def depth(self) -> np.ndarray:
        """Depth of each node (0 at the root)."""
        return _compiled.node_depths(self.parent)

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
            the hyperplane ``z_{direction[j]} = offset[j]`` restricted to that
            node's cell.
        """
        internal = self.direction >= 0
        return self.direction[internal].copy(), self.offset[internal].copy()

    def memory_bytes(self) -> int:
        """Bytes held by the tree's node arrays."""
        return sum(getattr(self, name).nbytes for name in _NODE_FIELDS)


_NODE_FIELDS = ("direction", "offset", "left", "parent", "split_time", "n_node_samples", "value")


class ForestArrays:
    """The trees of a forest concatenated into flat node arrays.

    ``tree_start[t]`` is the first row of tree ``t``. Routing kernels walk
    the trees one after the other, each over all query points.
    """

    def __init__(self, trees: list[StitTree]):
        sizes = np.array([tree.n_nodes for tree in trees], dtype=np.int64)
        self.tree_start = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
        for name in _NODE_FIELDS:
            setattr(self, name, np.concatenate([getattr(tree, name) for tree in trees]))
        self.lifetimes = np.array([tree.lifetime for tree in trees])

    @property
    def n_trees(self) -> int:
        return int(self.tree_start.size - 1)

    def tree(self, index: int) -> StitTree:
        """Tree ``index`` as a :class:`StitTree` whose arrays are views of the forest's."""
        rows = slice(self.tree_start[index], self.tree_start[index + 1])
        return StitTree(**{name: getattr(self, name)[rows] for name in _NODE_FIELDS},
                        lifetime=float(self.lifetimes[index]))

    def trees(self) -> list[StitTree]:
        return [self.tree(index) for index in range(self.n_trees)]

    def subset(self, first: int, stop: int) -> ForestArrays:
        """Trees ``first:stop`` as a forest of their own (views, no copy of the nodes)."""
        part = object.__new__(ForestArrays)
        rows = slice(self.tree_start[first], self.tree_start[stop])
        part.tree_start = self.tree_start[first : stop + 1] - self.tree_start[first]
        for name in _NODE_FIELDS:
            setattr(part, name, getattr(self, name)[rows])
        part.lifetimes = self.lifetimes[first:stop]
        return part

    def apply(self, rows: np.ndarray) -> np.ndarray:
        """Leaf id (local to its tree) of every point in every tree, shape (n, n_trees)."""
        leaves = np.empty((rows.shape[0], self.n_trees), dtype=np.int32)
        _compiled.apply_forest(rows, self.tree_start, self.direction, self.offset, self.left,
                               leaves)
        return leaves

    def value_sum(self, rows: np.ndarray) -> np.ndarray:
        """Sum over trees of the leaf value of every point, shape (n, n_outputs)."""
        total = np.zeros((rows.shape[0], self.value.shape[1]))
        _compiled.add_leaf_values(rows, self.tree_start, self.direction, self.offset,
                                  self.left, self.value, total)
        return total


def tree_from_growth(direction, offset, left, parent, split_time, counts, sums,
                     lifetime: float) -> StitTree:
    """A :class:`StitTree` from grown node arrays and per-node target sums."""
    return StitTree(
        direction=direction, offset=offset, left=left, parent=parent, split_time=split_time,
        n_node_samples=counts, value=_compiled.node_means(parent, counts, sums),
        lifetime=float(lifetime),
    )


def on_lifted_clock(tree: StitTree, exponent: int) -> StitTree:
    """The tree with its times in the units of the lifted data.

    Trees grow on lifted data divided by ``2**exponent`` (their cut offsets
    are converted back as they are recorded); their times are in that
    rescaled clock until this final, exact conversion.
    """
    return StitTree(
        direction=tree.direction, offset=tree.offset, left=tree.left, parent=tree.parent,
        split_time=np.ldexp(tree.split_time, -exponent), n_node_samples=tree.n_node_samples,
        value=tree.value, lifetime=float(np.ldexp(tree.lifetime, -exponent)),
    )


def prune(tree: StitTree, lifetime: float) -> StitTree:
    """The tree at a smaller lifetime: drop cells born later, turn later cuts into leaves.

    Mondrian trees are nested in the lifetime (Lakshminarayanan, Roy & Teh
    2014), so this has the law of a tree grown to ``lifetime`` directly.
    """
    kept = tree.birth_time <= lifetime
    new_id = (np.cumsum(kept) - 1).astype(np.int32)
    ids = np.flatnonzero(kept)
    internal = (tree.direction[ids] >= 0) & (tree.split_time[ids] <= lifetime)
    parents = tree.parent[ids]
    return StitTree(
        direction=np.where(internal, tree.direction[ids], -1).astype(np.int32),
        offset=np.where(internal, tree.offset[ids], np.nan),
        left=np.where(internal, new_id[np.maximum(tree.left[ids], 0)], -1).astype(np.int32),
        parent=np.where(parents >= 0, new_id[np.maximum(parents, 0)], -1).astype(np.int32),
        split_time=np.where(internal, tree.split_time[ids], np.inf),
        n_node_samples=tree.n_node_samples[ids],
        value=tree.value[ids],
        lifetime=float(lifetime),
    )
