"""Dask input: estimators fitted chunk by chunk, lazy transforms, never X loaded whole.

Moment methods (SIR, SAVE, pHd) need only the mergeable statistics of
:mod:`splitlift.sufficient_statistics`. A Dask fit makes

1. one pass over the response for the slices (sliced methods only):
   distinct values for a response sliced by value; for a numeric response,
   the equal-count slice edges, computed exactly (as an in-memory fit would)
   when the response has at most :data:`EXACT_SLICING_ROWS` rows and else
   from Dask's approximate percentiles (:func:`dask.array.percentile`, which
   merges per-chunk percentiles, asked on a grid of :data:`PERCENTILE_GRID`
   levels; with sample weights, from per-chunk weighted quantile sketches of
   :data:`SKETCH_POINTS` points merged the same way). The edges used are in
   ``slice_edges_``; approximate edges give slices of nearly, not exactly,
   equal counts, and a slice they leave short is dropped with a warning;
2. one pass over ``X`` (two for residual-based pHd) in which every chunk
   gives its statistics, merged pairwise as a tree of Dask tasks.

The result equals the in-memory fit on the same slices (pass the fitted
``slice_edges_`` as ``slice_edges`` to an in-memory fit to compare).
Gradient methods (OPG, ADE) need neighbours or pairs of rows, so they fit on
a uniform random sample of rows loaded into memory (``sample_rows``); the
fitted ``row_sample_`` records it. Transforms of Dask input stay lazy: a Dask
array in gives a Dask array out, a Dask DataFrame in gives a Dask DataFrame
out with the output feature names.

Any scheduler works: the threaded default, processes, or a
``distributed.Client`` that is active when ``fit`` or ``compute`` runs.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass

import numpy as np

from .moments import (
    SliceScheme,
    _refuse_constant,
    array_split_starts,
    equal_count_edges,
    slice_response,
)
from .sufficient_statistics import MomentStatistics, ResponseMoments, block_statistics

#: A numeric response with at most this many rows is loaded to slice it exactly.
EXACT_SLICING_ROWS = 10_000_000

#: Percentile levels asked of Dask when slicing a long response approximately.
PERCENTILE_GRID = 1001

#: Points of each chunk's weighted quantile sketch (approximate weighted slicing).
SKETCH_POINTS = 2048

#: Rows a gradient method fits on by default when X is a Dask collection.
DEFAULT_SAMPLE_ROWS = {"GradientOuterProduct": 100_000, "AverageDerivative": 20_000}

#: Rows of a Dask collection on which the linearity diagnostics are computed.
LINEARITY_SAMPLE_ROWS = 20_000


def is_dask_collection(obj) -> bool:
    """Whether ``obj`` is a Dask collection (False without importing Dask when unused)."""
    if "dask" not in sys.modules:
        return False
    import dask

    return dask.is_dask_collection(obj)


def _is_frame(obj) -> bool:
    """A Dask DataFrame (a Dask Series has partitions too, but one dimension)."""
    return hasattr(obj, "map_partitions") and getattr(obj, "ndim", None) == 2


# ------------------------------------------------------------------ alignment
@dataclass
class _Blocks:
    """Row chunks of X, y and weights as Dask delayed objects, aligned chunk by chunk."""

    X: list
    y: list
    weights: list
    y_collection: object
    weight_collection: object
    n_rows: int | None
    n_features: int


def register_features(estimator, X, reset: bool) -> None:
    """Set or check ``n_features_in_`` and ``feature_names_in_`` from a Dask collection's meta."""
    from sklearn.utils.validation import _check_feature_names, _check_n_features

    template = X._meta if _is_frame(X) else np.empty((0, X.shape[1]))
    _check_feature_names(estimator, template, reset=reset)
    _check_n_features(estimator, template, reset=reset)


def _as_dask(X):
    """A 2-D Dask array or DataFrame with all columns in one chunk, numeric columns checked."""
    import dask.array as da

    if _is_frame(X):
        bad = [str(c) for c, t in X.dtypes.items() if t.kind not in "fiu"]
        if bad:
            raise ValueError(
                f"feature column(s) {bad} are not numeric; encode them or leave them out."
            )
        return X
    if not isinstance(X, da.Array):
        raise ValueError(
            f"X must be a Dask array or DataFrame here, got {type(X).__name__}; pass y and "
            "sample_weight as Dask collections aligned with X, or compute them all."
        )
    if X.ndim != 2:
        raise ValueError(
            f"X must be a 2-D array, got shape {X.shape}; reshape a single column with "
            "X.reshape(-1, 1)."
        )
    if X.dtype.kind not in "fiu":
        raise ValueError(f"X must be numeric, got dtype {X.dtype}; encode it first.")
    return X.rechunk({1: -1}) if len(X.chunks[1]) > 1 else X


def _companion(values, X, name: str):
    """``y`` or weights as a Dask collection chunked like ``X`` (NumPy input is split)."""
    import dask.array as da

    if values is None or is_dask_collection(values):
        return values
    array = np.asarray(values)
    if _is_frame(X) or any(np.isnan(size) for size in X.chunks[0]):
        raise ValueError(
            f"{name} is in memory but X is a Dask collection of unknown chunk sizes; take "
            f"{name} from the same DataFrame as X (a Dask Series), or compute both."
        )
    if array.shape[0] != X.shape[0]:
        raise ValueError(
            f"X has {X.shape[0]} rows but {name} has {array.shape[0]}; pass one {name} "
            "entry per row."
        )
    return da.from_array(array, chunks=(X.chunks[0],))


def _array_parts(X, y, weights):
    """Row chunks of X, y and weights as delayed objects of one jointly optimised graph.

    Optimised together, work that X and y share (y computed from X, or both
    read from one source) keeps one name and is done once per chunk.
    """
    import dask

    present = [part for part in (X, y, weights) if part is not None]
    optimised = iter(dask.optimize(*present))
    parts = [list(np.ravel(next(optimised).to_delayed(optimize_graph=False)))
             if part is not None else None for part in (X, y, weights)]
    return parts[0], *[p if p is not None else [None] * len(parts[0]) for p in parts[1:]]


def _aligned_blocks(X, y, sample_weight) -> _Blocks:
    X = _as_dask(X)
    y = _companion(y, X, "y")
    weights = _companion(sample_weight, X, "sample_weight")
    for name, part in (("y", y), ("sample_weight", weights)):
        if part is None:
            continue
        if getattr(part, "ndim", 1) != 1 or _is_frame(part):
            raise ValueError(
                f"{name} must be 1-D (a Dask array or Series); select a single column."
            )
        if _is_frame(X) != hasattr(part, "map_partitions"):
            raise ValueError(
                f"X is a Dask {'DataFrame' if _is_frame(X) else 'array'} but {name} is not of "
                f"the same kind; take {name} from the same DataFrame (a Series), or pass "
                "arrays chunked alike."
            )
        if not _is_frame(X):
            _check_same_chunks(X, part, name)
    if _is_frame(X):
        x_parts, y_parts, w_parts = _frame_parts(X, y, weights)
    else:
        x_parts, y_parts, w_parts = _array_parts(X, y, weights)
    rows = None if _is_frame(X) or np.isnan(X.shape[0]) else int(X.shape[0])
    n_features = len(X.columns) if _is_frame(X) else int(X.shape[1])
    return _Blocks(x_parts, y_parts, w_parts, y, weights, rows, n_features)


_RESPONSE, _WEIGHT = "__splitlift_response__", "__splitlift_weight__"


def _frame_parts(X, y, weights):
    """Partitions of X, y and weights from one joined DataFrame.

    Dask may regroup the partitions of separately optimised collections
    (reading fewer columns of small files), so the three are joined first
    and each partition is split afterwards: its rows then always agree.
    """
    columns = list(X.columns)
    extra = {name: part for name, part in ((_RESPONSE, y), (_WEIGHT, weights))
             if part is not None}
    joined = X.assign(**extra) if extra else X
    parts = joined.to_delayed()
    x_parts = [part[columns] for part in parts]
    y_parts = [part[_RESPONSE] if y is not None else None for part in parts]
    w_parts = [part[_WEIGHT] if weights is not None else None for part in parts]
    return x_parts, y_parts, w_parts


def _check_same_chunks(X, part, name: str) -> None:
    x_blocks, part_blocks = X.numblocks[0], part.numblocks[0]
    known = not any(np.isnan(c) for c in X.chunks[0] + part.chunks[0])
    if x_blocks != part_blocks or (known and X.chunks[0] != part.chunks[0]):
        raise ValueError(
            f"X and {name} are chunked differently ({x_blocks} vs {part_blocks} row chunks"
            + (f": {X.chunks[0][:4]}... vs {part.chunks[0][:4]}..." if known else "")
            + f"); every chunk of X needs its rows of {name}. Rechunk {name} like X "
            f"({name}.rechunk(X.chunks[0])) or take both from one DataFrame."
        )


# --------------------------------------------------------------- block tasks
@dataclass(frozen=True)
class _BlockOptions:
    numeric_response: bool
    scheme: SliceScheme | None = None
    slice_scatter: bool = False
    response: bool = False


def _checked_block(x_block, y_block, w_block, index: int, numeric_response: bool):
    X = x_block.to_numpy(dtype=float) if hasattr(x_block, "to_numpy") else np.asarray(
        x_block, dtype=float)
    if not np.all(np.isfinite(X)):
        raise ValueError(
            f"X contains NaN or infinite values (row chunk {index}, counting from 0); remove "
            "or impute them before fitting."
        )
    y = None
    if y_block is not None:
        y = np.asarray(y_block.to_numpy() if hasattr(y_block, "to_numpy") else y_block)
        if y.shape[0] != X.shape[0]:
            raise ValueError(
                f"row chunk {index} holds {X.shape[0]} rows of X but {y.shape[0]} of y; X and "
                "y must be chunked alike (rechunk y to X.chunks[0], or take both from one "
                "DataFrame)."
            )
        if numeric_response:
            y = y.astype(float)
            if not np.all(np.isfinite(y)):
                raise ValueError("y contains NaN or infinite values; drop or impute those rows.")
    weights = None
    if w_block is not None:
        weights = np.asarray(w_block.to_numpy() if hasattr(w_block, "to_numpy") else w_block,
                             dtype=float)
        if weights.shape[0] != X.shape[0]:
            raise ValueError(
                f"row chunk {index} holds {X.shape[0]} rows of X but {weights.shape[0]} "
                "sample weights; chunk sample_weight like X."
            )
        if not np.all(np.isfinite(weights)) or np.any(weights < 0):
            raise ValueError(
                f"sample_weight has negative, NaN or infinite entries (row chunk {index}, "
                "counting from 0); "
                "weights count rows and must be finite and >= 0."
            )
    return X, y, weights


def _statistics_task(x_block, y_block, w_block, index, options: _BlockOptions):
    X, y, weights = _checked_block(x_block, y_block, w_block, index, options.numeric_response)
    return block_statistics(X, y, weights, scheme=options.scheme,
                            slice_scatter=options.slice_scatter, response=options.response)


def _residual_task(x_block, y_block, w_block, index, slope, centre, response_centre,
                   column_scale):
    X, y, weights = _checked_block(x_block, y_block, w_block, index, True)
    if weights is not None and not np.all(weights > 0):
        kept = weights > 0
        X, y, weights = X[kept], y[kept], weights[kept]
    scaled = X / column_scale
    return ResponseMoments.about(scaled, y - scaled @ slope, weights, centre, response_centre)


def _merge(a, b):
    return a.merge(b)


def _add(a, b):
    return a.added(b)


def _tree(parts: list, combine):
    """Reduce delayed parts pairwise, a balanced tree of tasks (log depth)."""
    from dask import delayed

    while len(parts) > 1:
        parts = [delayed(combine)(parts[i], parts[i + 1]) if i + 1 < len(parts) else parts[i]
                 for i in range(0, len(parts), 2)]
    return parts[0]


def reduce_statistics(blocks: _Blocks, options: _BlockOptions) -> MomentStatistics:
    """Statistics of every chunk, merged as a tree, computed on the active scheduler."""
    from dask import delayed

    task = delayed(_statistics_task, pure=True)
    parts = [task(x, y, w, index, options)
             for index, (x, y, w) in enumerate(zip(blocks.X, blocks.y, blocks.weights,
                                                  strict=True))]
    statistics = _tree(parts, _merge).compute()
    if statistics.weight == 0:
        raise ValueError(
            "every sample weight is zero, so no row would count; give the rows to fit a "
            "positive weight."
        )
    return statistics


# -------------------------------------------------------------------- slicing
def _response_collection(y):
    return y.to_dask_array() if hasattr(y, "to_dask_array") else y


def _distinct_values(y) -> np.ndarray:
    import dask.array as da

    values = y.unique() if hasattr(y, "unique") and not isinstance(y, da.Array) else da.unique(y)
    return np.unique(np.asarray(values.compute()))


def _discrete_dtype(dtype) -> bool:
    kind = getattr(dtype, "kind", "O")
    return kind not in "fiuc" or kind == "b"


def _slice_scheme(estimator, blocks: _Blocks) -> tuple[SliceScheme, bool]:
    """The slices of a Dask response, and whether they are exact (see the module notes)."""
    y = blocks.y_collection
    discrete = _discrete_dtype(y.dtype)
    if estimator.slice_edges is not None:
        if discrete:
            estimator._numeric_for_edges(np.array(["label"]))  # raises the usual message
        return SliceScheme("count", edges=estimator._edges()), True
    slicing, n_slices = estimator.slicing, estimator.n_slices
    if slicing == "count" and discrete:
        raise ValueError(
            "slicing='count' needs a numeric response; class labels are sliced by value "
            "(use slicing='value' or 'auto')."
        )
    if slicing == "value" or discrete or (slicing == "auto" and y.dtype.kind in "iu"):
        values = _distinct_values(y)
        _refuse_constant(values.size)
        if slicing == "value" or discrete or values.size <= n_slices:
            return SliceScheme("value", values=values), True
    return _count_scheme(y, blocks.weight_collection, n_slices)


def _count_scheme(y, weights, n_slices: int) -> tuple[SliceScheme, bool]:
    import dask
    import dask.array as da

    values = _response_collection(y).astype(float)
    n_rows = int(values.shape[0]) if not np.isnan(values.shape[0]) else int(
        da.count_nonzero(da.ones_like(values)).compute())
    if n_rows <= EXACT_SLICING_ROWS:  # small enough to slice exactly, as in memory
        loaded, loaded_weights = dask.compute(values, None if weights is None else
                                              _response_collection(weights))
        if loaded_weights is not None:
            loaded, loaded_weights = loaded[loaded_weights > 0], loaded_weights[loaded_weights > 0]
        return slice_response(loaded, n_slices, "count", loaded_weights).scheme, True
    if weights is None:
        # Dask merges per-chunk percentiles; asking for a fine grid and reading
        # the needed levels off it is ten times more accurate than asking for
        # those levels alone
        grid = np.linspace(0.0, 100.0, PERCENTILE_GRID)
        levels, lowest = dask.compute(da.percentile(values, grid), values.min())
        positions = array_split_starts(n_rows, n_slices) / (n_rows - 1) * 100.0
        edges = np.unique(np.interp(positions, grid, levels))
        return SliceScheme("count", edges=edges[edges > lowest]), False
    sketch = da.map_blocks(_weighted_sketch, values, _response_collection(weights).astype(float),
                           chunks=((2 * SKETCH_POINTS,) * values.numblocks[0],), dtype=float)
    points = sketch.compute().reshape(-1, 2)
    points = points[points[:, 1] > 0]
    return SliceScheme("count", edges=equal_count_edges(points[:, 0], n_slices,
                                                        points[:, 1])), False


def _weighted_sketch(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """A chunk's weighted quantiles at SKETCH_POINTS evenly spaced weight levels.

    Each point carries an equal share of the chunk's weight, so merged
    sketches give approximate weighted quantiles of the whole response.
    """
    out = np.zeros((SKETCH_POINTS, 2))
    kept = weights > 0
    if not kept.any():
        return out.ravel()
    order = np.argsort(values[kept], kind="stable")
    ordered, cumulative = values[kept][order], np.cumsum(weights[kept][order])
    levels = (np.arange(SKETCH_POINTS) + 0.5) / SKETCH_POINTS * cumulative[-1]
    out[:, 0] = ordered[np.minimum(np.searchsorted(cumulative, levels), ordered.size - 1)]
    out[:, 1] = cumulative[-1] / SKETCH_POINTS
    return out.ravel()


# ---------------------------------------------------------------------- fits
def fit_on_dask(estimator, X, y, sample_weight=None):
    """Fit a splitlift estimator on Dask collections (see the module notes)."""
    if not is_dask_collection(X):
        raise ValueError(
            "y or sample_weight is a Dask collection but X is not; pass X as a Dask array "
            "or DataFrame too, or compute them all."
        )
    blocks = _aligned_blocks(X, y, sample_weight)
    if blocks.y_collection is None:
        raise ValueError("y is required: pass the response aligned with X.")
    register_features(estimator, _as_dask(X), reset=True)
    if hasattr(estimator, "_fit_statistics"):  # a moment method: statistics suffice
        _fit_moments(estimator, blocks)
    else:
        _fit_on_sample(estimator, X, blocks)
    return estimator


def _fit_moments(estimator, blocks: _Blocks) -> None:
    estimator._check_statistics_only_fit(blocks.n_features)
    scheme, exact = None, True
    if hasattr(estimator, "slice_edges"):  # a sliced method
        scheme, exact = _slice_scheme(estimator, blocks)
    options = _BlockOptions(not estimator._accepts_labels or scheme is None
                            or scheme.kind == "count", scheme, estimator._slice_scatter,
                            estimator._response_moments)
    statistics = reduce_statistics(blocks, options)
    if getattr(estimator, "residuals", False):
        statistics = _with_residuals(estimator, blocks, statistics)
    estimator._fit_statistics(statistics, strict=exact)
    estimator.row_sample_ = None


def _with_residuals(estimator, blocks: _Blocks, statistics: MomentStatistics):
    """Residual-based pHd: a second pass for the co-moments of the OLS residuals."""
    from dask import delayed

    slope, response_centre = estimator.residual_slope(statistics)
    task = delayed(_residual_task, pure=True)
    parts = [task(x, y, w, index, slope, statistics.mean, response_centre,
                  statistics.column_scale)
             for index, (x, y, w) in enumerate(zip(blocks.X, blocks.y, blocks.weights,
                                                  strict=True))]
    return statistics.with_residuals(_tree(parts, _add).compute())


def _fit_on_sample(estimator, X, blocks: _Blocks) -> None:
    """Gradient methods: fit on a uniform random sample of rows, loaded into memory."""
    limit = getattr(estimator, "sample_rows", None) or DEFAULT_SAMPLE_ROWS.get(
        type(estimator).__name__, 100_000)
    X_sample, y_sample, w_sample, total = sample_rows(X, blocks, limit, estimator.random_state)
    estimator.fit(X_sample, y_sample, sample_weight=w_sample)
    estimator.row_sample_ = {"rows_total": total, "rows_used": int(X_sample.shape[0]),
                             "random_state": estimator.random_state}


def sample_rows(X, blocks: _Blocks, limit: int, random_state):
    """A uniform random sample of at most ``limit`` rows (all rows when fewer), in memory.

    Row counts per chunk are read first (from the chunk sizes of an array, or
    one pass over a DataFrame's partitions); the chosen rows are then taken
    chunk by chunk, so at most the sample is ever held in memory. Returns
    ``(X, y, weights, rows_total)``; ``X`` is a pandas DataFrame when the
    input was a Dask DataFrame.
    """
    import dask
    from sklearn.utils import check_random_state

    sizes = _chunk_rows(X)
    total = int(sum(sizes))
    generator = check_random_state(random_state)
    chosen = np.arange(total) if total <= limit else np.sort(
        generator.choice(total, size=limit, replace=False))
    offsets = np.concatenate([[0], np.cumsum(sizes)])
    taken = []
    for index, (x, y, w) in enumerate(zip(blocks.X, blocks.y, blocks.weights, strict=True)):
        local = chosen[(chosen >= offsets[index]) & (chosen < offsets[index + 1])] - offsets[index]
        if local.size:
            taken.append(dask.delayed(_take_rows)(x, y, w, local))
    pieces = dask.compute(*taken)
    X_sample = _concatenate([p[0] for p in pieces])
    y_sample = None if blocks.y[0] is None else np.concatenate([p[1] for p in pieces])
    w_sample = None if blocks.weights[0] is None else np.concatenate([p[2] for p in pieces])
    return X_sample, y_sample, w_sample, total


def _chunk_rows(X) -> list[int]:
    if not _is_frame(X) and not any(np.isnan(c) for c in X.chunks[0]):
        return [int(c) for c in X.chunks[0]]
    return [int(c) for c in X.map_partitions(len).compute()]


def _take_rows(x_block, y_block, w_block, rows):
    take = (lambda part: part.iloc[rows]) if hasattr(x_block, "iloc") else (
        lambda part: np.asarray(part)[rows])
    y_part = None if y_block is None else (
        y_block.to_numpy()[rows] if hasattr(y_block, "to_numpy") else np.asarray(y_block)[rows])
    w_part = None if w_block is None else (
        w_block.to_numpy()[rows] if hasattr(w_block, "to_numpy") else np.asarray(w_block)[rows])
    return take(x_block), y_part, w_part


def _concatenate(parts):
    if hasattr(parts[0], "iloc"):
        import pandas as pd

        return pd.concat(parts).reset_index(drop=True)
    return np.concatenate(parts)


def sample_of(X, limit: int, random_state=0, y=None):
    """At most ``limit`` uniformly drawn rows of a Dask collection, in memory.

    Returns the rows of ``X`` (a pandas DataFrame for a Dask DataFrame), or
    ``(X_rows, y_rows)`` when ``y`` is given. For diagnostics and plots.
    """
    blocks = _aligned_blocks(X, y, None)
    X_rows, y_rows, _, _ = sample_rows(_as_dask(X), blocks, limit, random_state)
    return X_rows if y is None else (X_rows, y_rows)


def location_scale(X, sample_weight=None) -> tuple[np.ndarray, np.ndarray, int]:
    """Column means, population standard deviations and row count of a Dask collection.

    One pass, chunk statistics merged as a tree (weighted when asked).
    """
    blocks = _aligned_blocks(X, None, sample_weight)
    statistics = reduce_statistics(blocks, _BlockOptions(numeric_response=True))
    scale = statistics.column_scale
    spread = np.sqrt(np.clip(np.diag(statistics.covariance), 0.0, None))
    return statistics.mean * scale, spread * scale, statistics.n_rows


def lifted_extent(X, matrix: np.ndarray) -> float:
    """``Σ_i (max - min)`` of the lifted columns ``X @ matrix.T`` over all rows (one pass)."""
    import dask

    values = (X.to_dask_array() if _is_frame(X) else X) @ matrix.T
    largest, smallest = dask.compute(values.max(axis=0), values.min(axis=0))
    return float(np.sum(largest - smallest))


# ----------------------------------------------------------------- transforms
def transform_lazily(estimator, X, function):
    """An estimator's transform of a Dask collection, lazily (columns and names checked first).

    ``function`` maps a NumPy block (float64, or float32 when X is float32)
    to its output rows; the output is named by ``get_feature_names_out()``.
    """
    X = _as_dask(X)
    register_features(estimator, X, reset=False)
    return apply_lazily(X, function, [str(name) for name in estimator.get_feature_names_out()])


def apply_lazily(X, function, names: list[str]):
    """``function`` applied chunk by chunk to a Dask collection, lazily.

    A Dask DataFrame gives a Dask DataFrame with columns ``names`` and the
    input's index; a Dask array gives a Dask array. float32 input stays
    float32 (all columns float32 for a DataFrame).
    """
    X = _as_dask(X)
    if _is_frame(X):
        import pandas as pd

        dtype = np.float32 if all(t == np.float32 for t in X.dtypes) else np.float64
        meta = pd.DataFrame(np.empty((0, len(names)), dtype=dtype), columns=names)
        return X.map_partitions(_frame_block, function, names, dtype, meta=meta)
    dtype = np.float32 if X.dtype == np.float32 else np.float64
    return X.map_blocks(_array_block, function, dtype, dtype=dtype,
                        chunks=(X.chunks[0], (len(names),)))


def _array_block(block, function, dtype):
    return np.asarray(function(np.asarray(block, dtype=dtype)), dtype=dtype)


def _frame_block(part, function, names, dtype):
    import pandas as pd

    values = _array_block(part.to_numpy(dtype=dtype), function, dtype)
    return pd.DataFrame(values, columns=names, index=part.index)
