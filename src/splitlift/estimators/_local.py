"""Local-smoothing numerics shared by the gradient-based estimators.

The outer product of gradients and average derivative estimation both work
in standardised coordinates, turn the response into one or more numeric
columns (class labels become indicators) and map estimated gradients back
to input coordinates. The outer product of gradients also needs nearest
neighbours and batched local linear fits; those live here too, so that a
second local method can reuse them.

Memory stays at ``O(n k)``: neighbours are found and local fits are solved
in chunks of anchors, never for all pairs of rows at once.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from sklearn.neighbors import NearestNeighbors

from ..moments import (
    CollinearityWarning,
    _is_discrete,
    _refuse_constant,
    column_location_scale,
    constant_columns,
    slice_response,
)

#: Relative ridge added to the slope block of every local normal equation,
#: as a fraction of that block's mean diagonal. It only matters when a
#: neighbourhood is degenerate (duplicate rows, collinear columns, fewer
#: neighbours than features), where it selects the small-norm gradient.
LOCAL_RIDGE = 1e-9

# Anchors per chunk are chosen so a chunk of neighbour differences holds
# about this many floats (16 MB in float64).
_CHUNK_ELEMENTS = 1 << 21


@dataclass(frozen=True)
class Standardisation:
    """Centre and scale each column, ``z = (x - mean) / scale``.

    Columns with (numerically) zero spread cannot carry a gradient; they are
    left out, with a :class:`~splitlift.moments.CollinearityWarning`, and
    their gradient components are reported as zero.

    Attributes
    ----------
    mean : ndarray of shape (d,)
    scale : ndarray of shape (d,)
        Population standard deviation of each column.
    kept : ndarray of bool, shape (d,)
        Columns that vary.
    """

    mean: np.ndarray
    scale: np.ndarray
    kept: np.ndarray

    @classmethod
    def fit(cls, X: np.ndarray, sample_weight=None) -> Standardisation:
        """Estimate column means and standard deviations of ``X`` (weighted when asked)."""
        mean, scale = column_location_scale(X, sample_weight)
        kept = ~constant_columns(mean, scale)
        if not kept.any():
            raise ValueError(
                "every input column is constant, so there is no direction to estimate; "
                "pass features that vary."
            )
        if not kept.all():
            dropped = np.flatnonzero(~kept).tolist()
            warnings.warn(
                f"input columns {dropped} are constant; they are left out of the gradient "
                "estimate and get zero weight in every direction. Drop them to silence this.",
                CollinearityWarning,
                stacklevel=4,
            )
        return cls(mean, scale, kept)

    @property
    def rank(self) -> int:
        """Number of columns kept."""
        return int(self.kept.sum())

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Standardised kept columns, shape (n, rank)."""
        return (X[:, self.kept] - self.mean[self.kept]) / self.scale[self.kept]

    def directions_to_input(self, vectors: np.ndarray) -> np.ndarray:
        """Map (rank, k) directions of standardised space to unit input directions (d, k).

        The summary ``v^T z`` equals ``(v / scale)^T x`` up to a constant, so
        the input direction is ``v / scale``, normalised to unit length;
        dropped (constant) columns get zero weight.
        """
        directions = self.embed(vectors / self.scale[self.kept, None])
        norms = np.linalg.norm(directions, axis=0)
        return directions / np.where(norms > 0, norms, 1.0)

    def embed(self, vectors: np.ndarray) -> np.ndarray:
        """Place (rank, k) vectors over the kept columns into (d, k), zeros elsewhere."""
        full = np.zeros((self.kept.size, vectors.shape[1]))
        full[self.kept] = vectors
        return full


def response_columns(y: np.ndarray) -> tuple[np.ndarray, bool]:
    """Numeric response columns of ``y`` and whether ``y`` held class labels.

    A numeric response is one column. Class labels (non-numeric or boolean
    values) become one 0/1 indicator column per class, ordered as
    :func:`splitlift.moments.slice_response` orders the classes. A constant
    response is refused.
    """
    if _is_discrete(y):
        slices = slice_response(y, 2, "value")
        return slices.indicator().T.toarray(), True
    y = y.astype(float, copy=False)
    _refuse_constant(2 if y.min() < y.max() else 1)
    return y[:, None], False


def chunk_size(n_neighbors: int, n_columns: int) -> int:
    """Anchors per chunk so that a chunk of neighbour differences stays bounded."""
    return max(1, _CHUNK_ELEMENTS // max(n_neighbors * (n_columns + 1), 1))


def neighbourhoods(
    points: np.ndarray, anchors: np.ndarray, n_neighbors: int, chunk: int
) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Nearest neighbours of anchor rows, chunk by chunk.

    Parameters
    ----------
    points : ndarray of shape (n, p)
        Coordinates in which distances are measured.
    anchors : ndarray of int, shape (m,)
        Rows whose neighbourhoods are wanted.
    n_neighbors : int
        Neighbours per anchor, the anchor itself included.
    chunk : int
        Anchors per chunk.

    Yields
    ------
    anchor_rows : ndarray of shape (c,)
    distances : ndarray of shape (c, n_neighbors)
        Ascending, so the last column is the distance to the farthest neighbour.
    indices : ndarray of shape (c, n_neighbors)
    """
    search = NearestNeighbors(n_neighbors=n_neighbors).fit(points)
    for start in range(0, anchors.size, chunk):
        rows = anchors[start : start + chunk]
        distances, indices = search.kneighbors(points[rows])
        yield rows, distances, indices


def gaussian_weights(distances: np.ndarray, bandwidth: float | None,
                     shares: np.ndarray | None = None) -> np.ndarray:
    """Gaussian kernel weights ``exp(-r^2 / (2 h^2))`` of neighbour distances.

    With ``bandwidth=None`` each anchor uses its own nearest-neighbour
    bandwidth, the distance to its farthest neighbour (so weights lie in
    ``[exp(-1/2), 1]``); a degenerate neighbourhood of duplicates gets equal
    weights. With ``shares`` (see :func:`neighbour_shares`) the farthest
    neighbour is the farthest with a positive share.
    """
    if bandwidth is None:
        if shares is None:
            h = distances[:, -1:]
        else:
            farthest = distances.shape[1] - 1 - np.argmax(shares[:, ::-1] > 0, axis=1)
            h = distances[np.arange(distances.shape[0]), farthest][:, None]
        h = np.where(h > 0, h, 1.0)
    else:
        h = bandwidth
    return np.exp(-0.5 * (distances / h) ** 2)


def neighbour_shares(weights: np.ndarray, n_neighbors: int) -> np.ndarray:
    """Weight of each neighbour (nearest first) within ``n_neighbors`` units of weight.

    Rows count their frequency weight, so ``n_neighbors`` nearest units are
    the ``n_neighbors`` nearest rows of the repeated sample: the row that
    crosses the total is counted in part, rows beyond it not at all. When
    the rows given hold fewer units, all of them count fully.
    """
    before = np.cumsum(weights, axis=1) - weights
    return np.clip(n_neighbors - before, 0.0, weights)


def local_linear_gradients(
    points: np.ndarray,
    responses: np.ndarray,
    anchor_rows: np.ndarray,
    indices: np.ndarray,
    weights: np.ndarray,
) -> np.ndarray:
    """Slopes of kernel-weighted local linear fits at many anchors at once.

    For anchor ``i`` with neighbours ``j`` and weights ``w_ij`` this solves
    ``min_{a, b} Σ_j w_ij (y_j - a - b^T (x_j - x_i))^2`` for every response
    column, all anchors in one batched solve of the ``(p + 1) x (p + 1)``
    normal equations. A ridge of :data:`LOCAL_RIDGE` times the mean
    diagonal of the slope block keeps degenerate neighbourhoods solvable.

    Parameters
    ----------
    points : ndarray of shape (n, p)
    responses : ndarray of shape (n, q)
    anchor_rows : ndarray of shape (c,)
    indices : ndarray of shape (c, k)
        Neighbours of each anchor.
    weights : ndarray of shape (c, k)

    Returns
    -------
    ndarray of shape (c, q, p)
        The gradient ``b`` of each anchor and response column.
    """
    n_anchors, n_neighbors = indices.shape
    p = points.shape[1]
    root = np.sqrt(weights)[..., None]
    design = np.empty((n_anchors, n_neighbors, p + 1))
    design[..., 0] = 1.0
    design[..., 1:] = points[indices] - points[anchor_rows][:, None, :]
    design *= root
    gram = np.matmul(design.transpose(0, 2, 1), design)
    slope_block = gram[:, 1:, 1:]
    ridge = LOCAL_RIDGE * np.trace(slope_block, axis1=1, axis2=2) / p
    # a floor tied to the total weight keeps all-duplicate neighbourhoods solvable
    ridge += LOCAL_RIDGE * gram[:, 0, 0]
    slope_block += ridge[:, None, None] * np.eye(p)
    rhs = np.matmul(design.transpose(0, 2, 1), root * responses[indices])
    coefficients = np.linalg.solve(gram, rhs)
    return coefficients[:, 1:, :].transpose(0, 2, 1)
