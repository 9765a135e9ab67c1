"""Parallel map with a progress bar, shared by the batch entry points."""

from __future__ import annotations

from collections.abc import Callable, Iterable

from sklearn.utils.parallel import Parallel, delayed
from tqdm import tqdm


def parallel_map(function: Callable, items: Iterable, total: int, label: str,
                 n_jobs=None, progress: bool = True) -> list:
    """``[function(item) for item in items]`` in parallel (joblib), in input order.

    scikit-learn's wrappers of joblib carry its configuration (``set_config``)
    into the workers, so forests fitted there behave as in the caller.

    A tqdm progress bar labelled ``label`` advances as results arrive, in any
    order. With ``progress=True`` it is drawn only when stderr is a terminal
    (tqdm's ``disable=None``), so logs and pipes stay clean; ``False`` hides it.
    The results never depend on ``n_jobs``.
    """
    jobs = Parallel(n_jobs=n_jobs, return_as="generator_unordered")(
        delayed(_numbered)(function, index, item) for index, item in enumerate(items))
    results: dict[int, object] = {}
    with tqdm(total=total, desc=label, disable=None if progress else True, leave=False) as bar:
        for index, result in jobs:
            results[index] = result
            bar.update()
    return [results[index] for index in range(len(results))]


def _numbered(function: Callable, index: int, item) -> tuple[int, object]:
    return index, function(item)
