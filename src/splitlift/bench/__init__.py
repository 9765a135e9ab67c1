"""``splitlift bench``: speed, accuracy and rate suites, printed as tables and saved as JSON.

Benchmarks are kept out of the test suite. Every ratio compares timings
taken in the same process, on the same data, one after the other.
"""

from __future__ import annotations

import json
import sys

from ._timing import machine_description

SUITES = ("speed", "accuracy", "rate")


def run_bench(suite: str = "speed", quick: bool = False, json_path=None, stream=None) -> dict:
    """Run one suite (or ``"all"``), print its tables, optionally write JSON atomically."""
    out = stream or sys.stdout
    if suite not in (*SUITES, "all"):
        raise ValueError(f"suite must be one of {SUITES + ('all',)}, got {suite!r}.")
    machine = machine_description()
    results: dict = {"machine": machine, "quick": quick}
    out.write(f"splitlift bench ({'quick' if quick else 'full'}), {machine['date']}, "
              f"{machine['cpu_count']} cores, {machine['platform']}\n")
    chosen = SUITES if suite == "all" else (suite,)
    for name in chosen:
        if name == "speed":
            from .speed import run_speed

            results["speed"] = run_speed(quick, out)
        elif name == "accuracy":
            from .accuracy import run_accuracy

            results["accuracy"] = run_accuracy(quick, out)
        else:
            from .rate import run_rate

            results["rate"] = run_rate(quick, out)
        out.flush()
    if json_path is not None:
        from ..persistence import atomic_write

        text = json.dumps(results, indent=2, default=float).encode("utf-8")
        atomic_write(json_path, lambda handle: handle.write(text))
    return results
