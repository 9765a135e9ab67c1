"""Timing helpers shared by the benchmark suites."""

from __future__ import annotations

import os
import platform
import sys
import time
import tracemalloc
from collections.abc import Callable
from datetime import datetime, timezone

import numpy as np

from .._tables import text_table


def best_time(function: Callable[[], object], repeats: int = 3) -> float:
    """Best wall-clock time of ``repeats`` calls, in seconds."""
    return best_timed(function, repeats)[0]


def best_timed(function: Callable[[], object], repeats: int = 3) -> tuple[float, object]:
    """Best wall-clock seconds of ``repeats`` calls, and the last call's result."""
    best, result = np.inf, None
    for _ in range(repeats):
        seconds, result = timed(function)
        best = min(best, seconds)
    return best, result


def timed(function: Callable[[], object]) -> tuple[float, object]:
    """Wall-clock seconds of one call, and its result."""
    started = time.perf_counter()
    result = function()
    return time.perf_counter() - started, result


def peak_memory(function: Callable[[], object]) -> int:
    """Peak bytes allocated through Python's allocators (numpy included) while it runs."""
    return timed_with_memory(function)[1]


def timed_with_memory(function: Callable[[], object]) -> tuple[float, int]:
    """Seconds and tracemalloc peak bytes of one call (the timing includes tracing)."""
    tracemalloc.start()
    try:
        seconds, _ = timed(function)
        return seconds, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def machine_description() -> dict:
    """Where and when a benchmark ran."""
    try:
        from threadpoolctl import threadpool_info

        blas = [f"{p.get('internal_api')} {p.get('version')} ({p.get('num_threads')} threads)"
                for p in threadpool_info() if p.get("user_api") == "blas"]
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        blas = []
    return {
        "date": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "platform": platform.platform(),
        "processor": platform.processor() or platform.machine(),
        "cpu_count": os.cpu_count(),
        "blas": blas,
    }


def table(rows: list[dict], columns: list[tuple[str, str, str]]) -> str:
    """A plain-text table: columns are (key, header, format spec); see :mod:`splitlift._tables`."""
    return text_table(rows, columns)
