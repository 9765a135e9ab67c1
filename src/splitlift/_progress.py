"""Parallel map with a progress line, shared by the batch entry points."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterable

from joblib import Parallel, delayed


def parallel_map(function: Callable, items: Iterable, total: int, label: str,
                 n_jobs=None, progress: bool = True) -> list:
    """``[function(item) for item in items]`` in parallel (joblib), in input order.

    A ``label k/total`` line is redrawn on stderr as results arrive, only when
    ``progress`` is true and stderr is a terminal (so logs and pipes stay clean).
    """
    show = progress and sys.stderr.isatty()
    results = []
    jobs = Parallel(n_jobs=n_jobs, return_as="generator")(delayed(function)(i) for i in items)
    for count, result in enumerate(jobs, 1):
        results.append(result)
        if show:
            sys.stderr.write(f"\r{label} {count}/{total}")
    if show:
        sys.stderr.write("\n")
    return results
