"""Storage of STIT trees: one tree, and a whole forest as flat arrays.

A tree lives in arrays indexed by node id. Node 0 is the root, a node's two
children are consecutive (``right = left + 1``) and every child has a larger
id than its parent. Per node that is 32 bytes plus the value (8 bytes per
output): a 16-byte routing record (cut offset, left child, cut direction),
the split time (float64), the parent and the training count (int32).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._progress import threaded_map
from . import _compiled
from ._lifting import times_power_of_two


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
    left, right : ndarray of int32, shape (n_nodes,)
        Child ids (``right = left + 1``); -1 at a leaf.
    parent : ndarray of int32, shape (n_nodes,)
        Parent id; -1 at the root.
    split_time : ndarray of float, shape (n_nodes,)
        Time at which the cell was cut; ``inf`` at a leaf.
    birth_time : ndarray of float, shape (n_nodes,)
        Time at which the cell appeared: its parent's split time, 0 at the
        root. The tree at any smaller lifetime ``t`` is this tree pruned to
        the nodes born at or before ``t``.
    depth : ndarray of int32, shape (n_nodes,)
    n_node_samples : ndarray of int32, shape (n_nodes,)
        Training points in each cell.
    value : ndarray of float, shape (n_nodes, n_outputs)
        Mean training target of each cell (class frequencies for a
        classifier); an empty cell holds the value of its nearest non-empty
        ancestor.
    lifetime : float
        Lifetime the tree was grown to.
    routing : ndarray of records, shape (n_nodes,)
        What routing reads, 16 bytes per node: ``offset``, ``left`` and
        ``direction``, a leaf pointing to itself with offset ``inf``.
    """

    routing: np.ndarray
    parent: np.ndarray
    split_time: np.ndarray
    n_node_samples: np.ndarray
    value: np.ndarray
    lifetime: float

    @property
    def n_nodes(self) -> int:
        return int(self.parent.size)

    @property
    def nbytes(self) -> int:
        """Bytes held by the node arrays."""
        return int(sum(getattr(self, name).nbytes for name in _FIELDS))

    @property
    def is_leaf(self) -> np.ndarray:
        return self.routing["left"] == np.arange(self.n_nodes)

    @property
    def n_leaves(self) -> int:
        return (self.n_nodes + 1) // 2  # every cut makes two children

    @property
    def direction(self) -> np.ndarray:
        return np.where(self.is_leaf, -1, self.routing["direction"]).astype(np.int32)

    @property
    def offset(self) -> np.ndarray:
        return np.where(self.is_leaf, np.nan, self.routing["offset"])

    @property
    def left(self) -> np.ndarray:
        return np.where(self.is_leaf, -1, self.routing["left"]).astype(np.int32)

    @property
    def right(self) -> np.ndarray:
        return np.where(self.is_leaf, -1, self.routing["left"] + 1).astype(np.int32)

    @property
    def birth_time(self) -> np.ndarray:
        births = np.zeros(self.n_nodes)
        births[1:] = self.split_time[self.parent[1:]]
        return births

    @property
    def depth(self) -> np.ndarray:
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
        internal = ~self.is_leaf
        return (self.routing["direction"][internal].astype(np.int32),
                self.routing["offset"][internal].copy())


_FIELDS = ("routing", "parent", "split_time", "n_node_samples", "value")


class Forest:
    """The trees of a fitted forest, and routing through them one tree at a time."""

    def __init__(self, trees: list[StitTree]):
        self.trees = trees

    @property
    def n_trees(self) -> int:
        return len(self.trees)

    def n_leaves(self) -> np.ndarray:
        return np.array([tree.n_leaves for tree in self.trees])

    def memory_bytes(self) -> int:
        """Bytes held by the node arrays of all trees."""
        return sum(tree.nbytes for tree in self.trees)

    def apply(self, rows: np.ndarray) -> np.ndarray:
        """Leaf id of every point in every tree, shape (n, n_trees)."""
        leaves = np.empty((self.n_trees, rows.shape[0]), dtype=np.int32)
        for tree, column in zip(self.trees, leaves, strict=True):
            _compiled.apply_tree(rows, tree.routing, column)
        return leaves.T

    def value_sum(self, rows: np.ndarray) -> np.ndarray:
        """Sum over trees, in order, of the leaf value of every point, shape (n, n_outputs)."""
        total = np.zeros((rows.shape[0], self.trees[0].value.shape[1]))
        for tree in self.trees:
            _compiled.add_tree_values(rows, tree.routing, tree.value, total)
        return total


def on_lifted_clock(tree: StitTree, exponent: int) -> StitTree:
    """The tree with its times divided by ``2**exponent`` (exactly), in place.

    Trees grow on lifted data divided by ``2**exponent``; their offsets are
    converted back as they are recorded, their times here, at the end.
    """
    times_power_of_two(tree.split_time, -exponent, out=tree.split_time)
    tree.lifetime = float(times_power_of_two(np.float64(tree.lifetime), -exponent))
    return tree


class NodeStore:
    """Room for the nodes of several trees in one block of memory, handed out in order.

    Growth writes each tree's nodes straight into this room, with no
    full-size scratch arrays and copies per tree. Fresh memory costs one
    fault per page at its first write, and that had taken about a third of
    the time to grow 100 trees at n = 1e5 (243 000 faults; 18 000 with the
    store). The node arrays are views of one allocation, which numpy asks
    to back with huge pages when it is 4 MB or more (where the system
    allows): five arrays of their own were each below that at n = 2e4, and
    faulted 124-146 times per tree against 23. Trees take views; entries
    never handed out are never written, so they stay unmapped.
    """

    def __init__(self, n_nodes: int, n_outputs: int):
        self.n_outputs = n_outputs
        self.memory = np.empty(_layout(n_nodes, n_outputs)[-1], np.uint8)
        self._view(n_nodes)
        self.sizes: list[int] = []  # nodes of each tree taken, in order

    def _view(self, n_nodes: int) -> None:
        """The node arrays, for room of ``n_nodes``, as views of the block."""
        offsets = _layout(n_nodes, self.n_outputs)
        for (name, dtype, per_output), start in zip(_STORE_FIELDS, offsets[:-1], strict=True):
            shape = (n_nodes, self.n_outputs) if per_output else (n_nodes,)
            nbytes = _bytes_per_node(dtype, per_output, self.n_outputs) * n_nodes
            setattr(self, name, self.memory[start : start + nbytes].view(dtype).reshape(shape))

    def __getstate__(self) -> dict:
        # the block alone: its views would come back as copies of their own (a store
        # travels when trees are grown in other processes, as under Dask)
        return {"memory": self.memory, "n_outputs": self.n_outputs,
                "n_nodes": self.parent.size, "sizes": self.sizes}

    def __setstate__(self, state: dict) -> None:
        self.memory, self.n_outputs = state["memory"], state["n_outputs"]
        self.sizes = state["sizes"]
        self._view(state["n_nodes"])

    @staticmethod
    def node_bytes(n_outputs: int) -> int:
        """Bytes one node takes in a store (and in the tree that views it): routing
        record, parent (int32), split time (float64), count (int32) and value."""
        return sum(_bytes_per_node(dtype, per_output, n_outputs)
                   for _, dtype, per_output in _STORE_FIELDS)

    @property
    def used(self) -> int:
        """Entries taken."""
        return sum(self.sizes)

    @property
    def free(self) -> int:
        """Entries not yet taken."""
        return self.parent.size - self.used

    def room(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The routing, parent and split-time entries not yet taken."""
        return (self.routing[self.used :], self.parent[self.used :],
                self.split_time[self.used :])

    def take(self, n_nodes: int) -> tuple[np.ndarray, ...]:
        """The next ``n_nodes`` entries of every array, as views."""
        taken = slice(self.used, self.used + n_nodes)
        self.sizes.append(n_nodes)
        return tuple(getattr(self, name)[taken] for name, _, _ in _STORE_FIELDS)

    def pruned_trees(self, lifetime: float) -> list[StitTree]:
        """Every tree taken, pruned to ``lifetime`` in place; the store shrinks to them.

        Pruning writes only memory the grown trees had already touched
        (arrays of their own for the pruned trees took up to twice the time in
        a process's first fits, in first writes to fresh pages). Each array's
        pruned part then moves down to where a store of that size keeps it,
        and the block shrinks in place (a shrinking ``realloc`` moves no data
        and frees the tail) once the trees taken before are gone; while a view
        of it is still alive numpy refuses, and the pruned part is copied instead.
        """
        sizes = _compiled.prune_packed(self.routing, self.parent, self.split_time,
                                       self.counts, self.value,
                                       np.array(self.sizes, np.int64), lifetime)
        total = int(sizes.sum())
        grown, packed = _layout(self.parent.size, self.n_outputs), _layout(total, self.n_outputs)
        for field, (_, dtype, per_output) in enumerate(_STORE_FIELDS):
            if packed[field] < grown[field]:  # (in 8-byte words: offsets are 64-byte aligned)
                nbytes = _bytes_per_node(dtype, per_output, self.n_outputs) * total
                _compiled.move_down(self.memory.view(np.uint64), grown[field] // 8,
                                    packed[field] // 8, -(-nbytes // 8))
        for name, _, _ in _STORE_FIELDS:  # the block cannot shrink under views of it
            delattr(self, name)
        try:
            self.memory.resize(packed[-1])  # (no local name: numpy counts references)
        except ValueError:  # a view is still alive somewhere (a debugger, a profiler)
            self.memory = self.memory[: packed[-1]].copy()
        self._view(total)
        self.sizes = []
        return [tree_from_growth(*self.take(int(size)), lifetime) for size in sizes]


#: The node arrays of a store, in the order they lie in its block: name, dtype and
#: whether the array has a column per output.
_STORE_FIELDS = (("routing", _compiled.ROUTING_RECORD, False), ("parent", np.int32, False),
                 ("split_time", np.float64, False), ("counts", np.int32, False),
                 ("value", np.float64, True))


def _layout(n_nodes: int, n_outputs: int) -> list[int]:
    """Byte offsets of the node arrays of a store of ``n_nodes`` in its block, then its
    size; each array starts on a 64-byte boundary."""
    offsets = [0]
    for _, dtype, per_output in _STORE_FIELDS:
        nbytes = _bytes_per_node(dtype, per_output, n_outputs) * n_nodes
        offsets.append(offsets[-1] + -(-nbytes // 64) * 64)
    return offsets


def _bytes_per_node(dtype, per_output: bool, n_outputs: int) -> int:
    """Bytes one node takes in a store field of ``dtype`` (a column per output or one)."""
    return np.dtype(dtype).itemsize * (n_outputs if per_output else 1)


def tree_from_growth(routing, parent, split_time, counts, value, lifetime: float) -> StitTree:
    """A :class:`StitTree` from grown node arrays and the nodes' counts and values."""
    return StitTree(routing=routing, parent=parent, split_time=split_time,
                    n_node_samples=counts, value=value, lifetime=float(lifetime))


def prune(tree: StitTree, lifetime: float) -> StitTree:
    """The tree at a smaller lifetime: drop cells born later, turn later cuts into leaves.

    Mondrian trees are nested in the lifetime (Lakshminarayanan, Roy & Teh
    2014), so this has the law of a tree grown to ``lifetime`` directly.
    """
    return prune_all([tree], lifetime)[0]


def prune_all(trees: list[StitTree], lifetime: float, n_threads: int = 1) -> list[StitTree]:
    """:func:`prune` for every tree, on threads.

    Each pruned tree gets arrays of its own size (one shared store measured
    a few per cent slower here: its fresh, huge pages cost more to map than
    small allocations that reuse memory the process has freed).
    """
    lifetime = float(lifetime)

    def pruned(tree: StitTree) -> StitTree:
        kept = _compiled.pruned_size(tree.parent, tree.split_time, lifetime)
        routing, parent, split_time, counts, value = NodeStore(
            kept, tree.value.shape[1]).take(kept)
        _compiled.prune_tree(tree.routing, tree.parent, tree.split_time, tree.n_node_samples,
                             tree.value, lifetime, routing, parent, split_time, counts, value)
        return StitTree(routing=routing, parent=parent, split_time=split_time,
                        n_node_samples=counts, value=value, lifetime=lifetime)

    return threaded_map(pruned, trees, n_threads)
