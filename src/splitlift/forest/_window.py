"""The exact STIT tessellation of a box window, cell by cell.

Each cell is the window cut by the half-spaces of its ancestors' cuts. Its
width along a direction ``a_i`` is ``max a_i·x - min a_i·x`` over the cell
polytope, computed exactly: from the cell's vertices while they are few
(cuts are clipped into the vertex list), otherwise by linear programming
(HiGHS through :func:`scipy.optimize.linprog`). The partition does not look
at the data; training points only fill the cells afterwards.
"""

from __future__ import annotations

import itertools
from collections import deque

import numpy as np
from scipy.optimize import linprog

# Largest vertex list kept per cell; beyond it the cell falls back to LP.
VERTEX_LIMIT = 512


class WindowCell:
    """A convex polytope: the box ``[lower, upper]`` ∩ ``{x : normals @ x <= offsets}``.

    Besides this half-space form the cell may carry its vertices, each with
    the set of constraints it lies on (box facets first: ``2j`` for
    ``x_j = lower_j`` and ``2j + 1`` for ``x_j = upper_j``, then the cuts in
    order). Random cuts are in general position almost surely, so every cell
    is a simple polytope: each vertex lies on exactly ``d`` constraints and
    two vertices span an edge exactly when they share ``d - 1`` of them.
    """

    def __init__(self, lower, upper, normals, offsets, vertices=None, active=None):
        self.lower = lower
        self.upper = upper
        self.normals = normals
        self.offsets = offsets
        self.vertices = vertices
        self.active = active

    @classmethod
    def box(cls, lower: np.ndarray, upper: np.ndarray, vertex_limit: int = VERTEX_LIMIT):
        d = lower.size
        normals, offsets = np.zeros((0, d)), np.zeros(0)
        if 2**d > vertex_limit:
            return cls(lower, upper, normals, offsets)
        corners = np.array(list(itertools.product((False, True), repeat=d)), dtype=bool)
        vertices = np.where(corners, upper, lower)
        active = np.empty((corners.shape[0], 2 * d), dtype=bool)
        active[:, 0::2] = ~corners
        active[:, 1::2] = corners
        return cls(lower, upper, normals, offsets, vertices, active)

    @property
    def n_features(self) -> int:
        return self.lower.size

    def extent(self, directions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Minimum and maximum of ``directions @ x`` over the cell, one pair per row."""
        if self.vertices is not None:
            projections = self.vertices @ directions.T
            return projections.min(axis=0), projections.max(axis=0)
        return self._extent_by_linear_programming(directions)

    def _extent_by_linear_programming(self, directions):
        bounds = list(zip(self.lower, self.upper, strict=True))
        constraints = {}
        if self.offsets.size:
            constraints = {"A_ub": self.normals, "b_ub": self.offsets}
        lowest, highest = np.empty(directions.shape[0]), np.empty(directions.shape[0])
        for index, direction in enumerate(directions):
            for sign, store in ((1.0, lowest), (-1.0, highest)):
                result = linprog(sign * direction, bounds=bounds, method="highs", **constraints)
                if result.status != 0:
                    raise RuntimeError(
                        f"linear program for a cell width failed ({result.message}); "
                        "the cell may be numerically empty. Use a smaller lifetime."
                    )
                store[index] = sign * result.fun
        return lowest, highest

    def split(self, normal: np.ndarray, offset: float, vertex_limit: int = VERTEX_LIMIT):
        """The two cells ``normal · x <= offset`` and ``normal · x >= offset``."""
        left = (np.vstack([self.normals, normal]), np.append(self.offsets, offset))
        right = (np.vstack([self.normals, -normal]), np.append(self.offsets, -offset))
        if self.vertices is None:
            return (
                WindowCell(self.lower, self.upper, *left),
                WindowCell(self.lower, self.upper, *right),
            )
        side = self.vertices @ normal - offset
        below, above = side < 0, side > 0
        on_plane = ~below & ~above
        crossing_vertices, crossing_active = self._edge_crossings(side, below, above)
        cells = []
        for keep, half in ((below | on_plane, left), (above | on_plane, right)):
            vertices = np.vstack([self.vertices[keep], crossing_vertices])
            new_column = np.concatenate([on_plane[keep], np.ones(len(crossing_vertices), bool)])
            active = np.column_stack([np.vstack([self.active[keep], crossing_active]), new_column])
            if vertices.shape[0] > vertex_limit:
                vertices = active = None
            cells.append(WindowCell(self.lower, self.upper, *half, vertices, active))
        return cells[0], cells[1]

    def _edge_crossings(self, side, below, above):
        """Points where the cutting hyperplane meets the edges it separates."""
        shared = self.active[below].astype(np.int32) @ self.active[above].T.astype(np.int32)
        low_index, high_index = np.nonzero(shared == self.n_features - 1)
        start = self.vertices[below][low_index]
        end = self.vertices[above][high_index]
        start_side = side[below][low_index]
        fraction = start_side / (start_side - side[above][high_index])
        points = start + fraction[:, None] * (end - start)
        active = self.active[below][low_index] & self.active[above][high_index]
        return points, active


def window_widths(directions: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """Widths of the box window along each direction: ``Σ_j |a_ij| (upper_j - lower_j)``."""
    return np.abs(directions) @ (upper - lower)


def grow_in_window(
    directions: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    lifetime: float,
    rng: np.random.Generator,
    max_nodes: int = 200_000,
) -> dict[str, np.ndarray]:
    """Grow the STIT tessellation of the window ``[lower, upper]`` up to ``lifetime``.

    Parameters
    ----------
    directions : ndarray of shape (n_directions, n_features)
        Lift rows ``a_i``; cut offsets and widths are measured in ``a_i · x``.
    lower, upper : ndarray of shape (n_features,)
    lifetime : float
        Finite lifetime λ.
    rng : numpy Generator
    max_nodes : int
        Guard against runaway partitions.

    Returns
    -------
    dict
        Node arrays ``direction``, ``offset``, ``left`` (the right child is
        ``left + 1``), ``parent`` and ``split_time``, in the layout of
        :class:`~splitlift.forest.StitTree`.

    Notes
    -----
    The STIT construction (Nagel & Weiss 2005) on a cell ``C`` born at time
    t: wait an exponential time of rate ``Σ_i width_i(C)``; if the cut time
    exceeds λ the cell is final, otherwise cut it along direction i with
    probability ∝ ``width_i(C)`` at an offset uniform over that width, and
    treat both halves the same way. Cells are processed breadth first.

    References
    ----------
    Nagel, W. and Weiss, V. (2005). Crack STIT tessellations: characterization
    of stationary random tessellations stable with respect to iteration.
    Advances in Applied Probability 37, 859-883.
    """
    records: dict[str, list] = {key: [] for key in (
        "direction", "offset", "left", "parent", "split_time"
    )}
    queue = deque([(WindowCell.box(lower, upper), -1, 0.0)])
    next_id = 1
    while queue:
        cell, parent, birth = queue.popleft()
        low, high = cell.extent(directions)
        widths = np.maximum(high - low, 0.0)
        rate = widths.sum()
        split_time = birth + rng.standard_exponential() / rate if rate > 0 else np.inf
        direction, offset, left = -1, np.nan, -1
        if split_time <= lifetime:
            direction = _draw_direction(widths, rate, rng)
            offset = low[direction] + rng.random() * widths[direction]
            offset = offset if offset < high[direction] else low[direction]
            left = next_id
            next_id += 2
            if next_id > max_nodes:
                raise ValueError(
                    f"the window partition grew beyond {max_nodes} cells at lifetime "
                    f"{lifetime:g}; use a smaller lifetime or a smaller window."
                )
            node = len(records["direction"])
            halves = cell.split(directions[direction], offset)
            queue.append((halves[0], node, split_time))
            queue.append((halves[1], node, split_time))
        else:
            split_time = np.inf
        for key, item in (
            ("direction", direction), ("offset", offset), ("left", left), ("parent", parent),
            ("split_time", split_time),
        ):
            records[key].append(item)
    return {
        key: np.asarray(values, dtype=float if key in ("offset", "split_time") else np.int32)
        for key, values in records.items()
    }


def _draw_direction(widths: np.ndarray, rate: float, rng: np.random.Generator) -> int:
    """An index drawn with probability proportional to the widths."""
    chosen = int(np.count_nonzero(np.cumsum(widths) <= rng.random() * rate))
    # rounding can push the target to the total: take the last positive width then
    return min(chosen, int(np.flatnonzero(widths > 0)[-1]))
