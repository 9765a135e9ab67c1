"""Scale suite: SIR on a lazily generated Dask array, batches, and lifting into Parquet.

The Dask array is generated chunk by chunk from a seed whenever it is read,
so nothing of size n is ever held; the reference is Dask's own ``X.T @ X``
on the same array, timed in the same process right before. Peak resident
memory is the largest RSS of this process and its children, sampled every
20 ms while each step runs. BLAS runs one thread per Dask worker thread
(threadpoolctl), so the two threads of the threaded scheduler do not fight
over the cores.
"""

from __future__ import annotations

import tempfile
import threading
import time
import warnings
from pathlib import Path

import numpy as np

from ._timing import table


def lazy_problem(n_samples: int, n_features: int, chunk_rows: int, seed: int = 0):
    """Inputs and a ridge-function response as lazily generated Dask arrays.

    Columns are generated in pairs, so the response (a function of the first
    pair, Li 1991's rational model, from memory) can be read without
    generating the other columns; ``X`` is then given whole rows per chunk.
    """
    import dask.array as da

    generator = da.random.default_rng(seed)
    pairs = generator.standard_normal((n_samples, n_features), chunks=(chunk_rows, 2))
    noise = generator.standard_normal(n_samples, chunks=(chunk_rows,))
    y = pairs[:, 0] / (0.5 + (pairs[:, 1] + 1.5) ** 2) + 0.1 * noise
    return pairs.rechunk({1: -1}), y


class PeakMemory:
    """Largest resident set size of this process and its children while the block runs."""

    def __init__(self, interval: float = 0.02):
        import psutil

        self._process = psutil.Process()
        self._interval = interval
        self.peak = 0
        self._stop = threading.Event()

    def _resident(self) -> int:
        total = self._process.memory_info().rss
        for child in self._process.children(recursive=True):
            try:
                total += child.memory_info().rss
            except Exception:  # noqa: BLE001 - a child that just ended
                pass
        return total

    def _watch(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self._resident())
            time.sleep(self._interval)

    def __enter__(self):
        self.peak = self._resident()
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self._resident())
        return False


def measured(function) -> dict:
    """Seconds and peak RSS (MB) of one call."""
    with PeakMemory() as memory:
        started = time.perf_counter()
        function()
        seconds = time.perf_counter() - started
    return {"seconds": seconds, "peak_rss_mb": memory.peak / 2**20}


def dask_moments(n_samples: int, n_features: int = 20, chunk_rows: int = 1_000_000,
                 rounds: int = 2) -> dict:
    """SIR on the lazy array against Dask's ``X.T @ X`` on it: time ratio and peak RSS.

    The steps run in turn ``rounds`` times and each keeps its best time (and
    the largest peak), so load from other work on a shared machine weighs on
    the ratio as little as possible.
    """
    import dask

    from ..estimators import SlicedInverse

    X, y = lazy_problem(n_samples, n_features, chunk_rows)
    fitted = SlicedInverse(n_slices=10, dim=2)
    steps = [
        ("Dask X.T @ X (reference)", lambda: (X.T @ X).compute()),
        ("SIR fit (slice pass + statistics pass)", lambda: fitted.fit(X, y)),
        ("SIR fit, slice edges given (one pass)", lambda: SlicedInverse(
            n_slices=10, dim=2, slice_edges=fitted.slice_edges_).fit(X, y)),
    ]
    best: dict[str, dict] = {}
    with dask.config.set(scheduler="threads"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(rounds):
            for name, step in steps:
                result = measured(step)
                kept = best.setdefault(name, result)
                kept["seconds"] = min(kept["seconds"], result["seconds"])
                kept["peak_rss_mb"] = max(kept["peak_rss_mb"], result["peak_rss_mb"])
    reference = best[steps[0][0]]["seconds"]
    rows = [{"step": name, **best[name], "ratio": best[name]["seconds"] / reference}
            for name, _ in steps]
    return {"n_samples": n_samples, "n_features": n_features, "chunk_rows": chunk_rows,
            "rounds": rounds, "rows": rows, "n_slices_used": int(fitted.n_slices_)}


def batch_throughput(n_samples: int, n_features: int = 20, batch_rows: int = 100_000) -> dict:
    """Rows per second of ``partial_fit`` batches against one in-memory ``fit`` of all rows."""
    from ..estimators import SlicedInverse

    generator = np.random.default_rng(1)
    X = generator.standard_normal((n_samples, n_features))
    y = X[:, 0] / (0.5 + (X[:, 1] + 1.5) ** 2) + 0.1 * generator.standard_normal(n_samples)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        whole = SlicedInverse(n_slices=10, dim=2)
        fit_seconds = measured(lambda: whole.fit(X, y))["seconds"]
        streamed = SlicedInverse(n_slices=10, dim=2, slice_edges=whole.slice_edges_)

        def batches():
            for start in range(0, n_samples, batch_rows):
                streamed.partial_fit(X[start:start + batch_rows], y[start:start + batch_rows])

        batch_seconds = measured(batches)["seconds"]
    return {"n_samples": n_samples, "batch_rows": batch_rows, "rows": [
        {"step": "fit (all rows in memory)", "seconds": fit_seconds,
         "rows_per_second": n_samples / fit_seconds},
        {"step": f"partial_fit ({batch_rows}-row batches)", "seconds": batch_seconds,
         "rows_per_second": n_samples / batch_seconds},
    ]}


def parquet_throughput(n_samples: int, n_features: int = 20, chunk_rows: int = 500_000) -> dict:
    """Rows per second of lifting a lazy table into partitioned Parquet (the CLI's path)."""
    import dask
    import dask.dataframe as dd
    import pandas as pd

    from ..estimators import SlicedInverse
    from ..large_data import lift_lazily, write_partitioned
    from ..transformer import DirectionLift

    X, y = lazy_problem(n_samples, n_features, chunk_rows, seed=2)
    names = [f"x{i}" for i in range(n_features)]
    frame = dd.from_dask_array(X, columns=names)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sample = pd.DataFrame(X[:50_000].compute(), columns=names)
        lift = DirectionLift(SlicedInverse(dim=2)).fit(sample, y[:50_000].compute()).lift_
    with tempfile.TemporaryDirectory() as folder, dask.config.set(scheduler="threads"):
        result = measured(lambda: write_partitioned(lift_lazily(lift, frame), f"{folder}/out",
                                                    label="bench: lifting into Parquet"))
        written = sum(path.stat().st_size for path in Path(folder, "out").glob("*.parquet"))
    return {"n_samples": n_samples, "n_features": n_features,
            "lifted_columns": len(lift.output_feature_names()), **result,
            "rows_per_second": n_samples / result["seconds"], "written_mb": written / 2**20}


def run_scale(quick: bool, out) -> dict:
    from threadpoolctl import threadpool_limits

    n = 2_000_000 if quick else 100_000_000
    chunk = 250_000 if quick else 1_000_000
    results = {}
    with threadpool_limits(1):
        results["dask_moments"] = dask_moments(n, 20, chunk)
        results["batches"] = batch_throughput(200_000 if quick else 2_000_000)
        results["parquet"] = parquet_throughput(200_000 if quick else 10_000_000)
    moments = results["dask_moments"]
    out.write(f"\nSIR on a lazily generated Dask array, n = {n:.0e}, d = 20, chunks of {chunk} "
              f"rows, threaded scheduler, best of {moments['rounds']} alternating rounds "
              "(peak RSS: the largest)\n")
    out.write(table(moments["rows"], [
        ("step", "step", "s"), ("seconds", "seconds", ".1f"), ("ratio", "x Dask X.T@X", ".2f"),
        ("peak_rss_mb", "peak RSS MB", ".0f")]) + "\n")
    batches = results["batches"]
    out.write(f"\nbatches against one fit, n = {batches['n_samples']:.0e}, d = 20 (in memory)\n")
    out.write(table(batches["rows"], [
        ("step", "step", "s"), ("seconds", "seconds", ".2f"),
        ("rows_per_second", "rows/s", ".3g")]) + "\n")
    parquet = results["parquet"]
    out.write(f"\nlifting a lazy table into partitioned Parquet, n = {parquet['n_samples']:.0e}, "
              f"d = 20 -> {parquet['lifted_columns']} columns: {parquet['seconds']:.1f} s, "
              f"{parquet['rows_per_second']:.3g} rows/s, {parquet['written_mb']:.0f} MB "
              f"written, peak RSS {parquet['peak_rss_mb']:.0f} MB\n")
    return results
