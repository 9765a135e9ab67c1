"""``splitlift bench``: timings against reference implementations, in one run.

Benchmarks are kept out of the test suite; they print a table and can write
JSON. Every ratio compares timings taken in the same process, on the same
data, one after the other, as the best of a few repeats.
"""

from __future__ import annotations

import json
import platform
import sys
import time
import tracemalloc
import warnings
from collections.abc import Callable
from datetime import datetime, timezone

import numpy as np

from .estimators import HessianDirections, SlicedAverageVariance, SlicedInverse


def best_time(function: Callable[[], object], repeats: int = 3) -> float:
    """Best wall-clock time of ``repeats`` calls, in seconds."""
    timings = []
    for _ in range(repeats):
        started = time.perf_counter()
        function()
        timings.append(time.perf_counter() - started)
    return min(timings)


def peak_memory(function: Callable[[], object]) -> int:
    """Peak bytes allocated through Python's allocators while ``function`` runs."""
    tracemalloc.start()
    try:
        function()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def moment_methods(n_samples: int = 1_000_000, n_features: int = 20, repeats: int = 3) -> dict:
    """Time SIR, SAVE and pHd against statsmodels' ``regression.dimred`` and ``X.T @ X``."""
    from statsmodels.regression.dimred import SAVE, PrincipalHessianDirections, SlicedInverseReg

    generator = np.random.default_rng(0)
    X = generator.standard_normal((n_samples, n_features))
    y = X[:, 0] / (0.5 + (X[:, 1] + 1.5) ** 2) + 0.1 * generator.standard_normal(n_samples)
    n_slices = 10
    per_slice = n_samples // n_slices
    product = best_time(lambda: X.T @ X, repeats)
    cases = [
        ("SIR", SlicedInverse(n_slices=n_slices),
         lambda: SlicedInverseReg(y, X).fit(slice_n=per_slice)),
        ("SAVE", SlicedAverageVariance(n_slices=n_slices),
         lambda: SAVE(y, X).fit(slice_n=per_slice)),
        ("pHd", HessianDirections(), lambda: PrincipalHessianDirections(y, X).fit()),
    ]
    rows = []
    for name, estimator, reference in cases:
        ours = best_time(lambda estimator=estimator: estimator.fit(X, y), repeats)
        theirs = best_time(reference, repeats)
        memory = peak_memory(lambda estimator=estimator: estimator.fit(X, y))
        rows.append({
            "method": name,
            "splitlift_s": ours,
            "statsmodels_s": theirs,
            "xtx_s": product,
            "speedup_vs_statsmodels": theirs / ours,
            "ratio_to_xtx": ours / product,
            "peak_memory_over_X": memory / X.nbytes,
        })
    return {"n_samples": n_samples, "n_features": n_features, "rows": rows}


def _print_moment_table(result: dict, out) -> None:
    out.write(f"moment methods, n = {result['n_samples']}, d = {result['n_features']} "
              "(best of repeats, seconds)\n")
    header = f"  {'method':<6}{'splitlift':>11}{'statsmodels':>13}{'X.T@X':>9}" \
             f"{'speed-up':>10}{'x X.T@X':>9}{'peak/X':>8}\n"
    out.write(header)
    for row in result["rows"]:
        out.write(
            f"  {row['method']:<6}{row['splitlift_s']:>11.3f}{row['statsmodels_s']:>13.3f}"
            f"{row['xtx_s']:>9.3f}{row['speedup_vs_statsmodels']:>10.1f}"
            f"{row['ratio_to_xtx']:>9.1f}{row['peak_memory_over_X']:>8.2f}\n"
        )


def machine_description() -> dict:
    """Where and when a benchmark ran."""
    import os

    return {
        "date": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "platform": platform.platform(),
        "cpu_count": os.cpu_count(),
    }


def run_bench(suite: str = "speed", quick: bool = False, json_path=None, stream=None) -> dict:
    """Run a benchmark suite, print its tables, optionally write JSON."""
    out = stream or sys.stdout
    results: dict = {"machine": machine_description(), "quick": quick}
    if suite in ("speed", "all"):
        n_samples = 100_000 if quick else 1_000_000
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            results["moment_methods"] = moment_methods(n_samples, 20, 2 if quick else 3)
        _print_moment_table(results["moment_methods"], out)
    if json_path is not None:
        from .persistence import atomic_write

        text = json.dumps(results, indent=2).encode("utf-8")
        atomic_write(json_path, lambda handle: handle.write(text))
    return results
