"""Parallel maps: with a progress bar (tqdm) for the batch entry points, and a plain
thread map and an ordered thread sum for short compiled kernels."""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import nullcontext

from sklearn.utils.parallel import Parallel, delayed

#: Set by the command line's ``--quiet``: no bar anywhere in this process.
QUIET = False


def progress_bar(total: int, label: str, enabled: bool = True):
    """A tqdm bar with elapsed time and ETA, in terminals and notebooks.

    ``enabled=False`` (or :data:`QUIET`) hides it; otherwise tqdm shows it
    only where it can be drawn (a terminal or a notebook), so logs and pipes
    stay clean.
    """
    from tqdm.auto import tqdm

    shown = enabled and not QUIET
    return tqdm(total=total, desc=label, disable=None if shown else True, leave=False,
                dynamic_ncols=True)


def parallel_map(function: Callable, items: Iterable, total: int, label: str,
                 n_jobs=None, progress: bool = True) -> list:
    """``[function(item) for item in items]`` in parallel (joblib), in input order.

    The bar advances as results arrive, in any order; the results never
    depend on ``n_jobs``. scikit-learn's wrappers of joblib carry its
    configuration (``set_config``) into the workers, so forests fitted there
    behave as in the caller.
    """
    jobs = Parallel(n_jobs=n_jobs, return_as="generator_unordered")(
        delayed(_numbered)(function, index, item) for index, item in enumerate(items))
    results: dict[int, object] = {}
    with progress_bar(total, label, progress) as bar:
        for index, result in jobs:
            results[index] = result
            bar.update(1)
    return [results[index] for index in range(len(results))]


def _numbered(function: Callable, index: int, item) -> tuple[int, object]:
    return index, function(item)


def threaded_map(function: Callable, items: Sequence, n_threads: int) -> list:
    """``[function(item) for item in items]`` on up to ``n_threads`` threads, in order.

    For kernels that release the GIL and take milliseconds: a plain thread
    pool, because joblib's result loop polls in 10 ms sleeps, which doubled
    the time of such work.
    """
    n_threads = min(n_threads, len(items))
    if n_threads <= 1:
        return [function(item) for item in items]
    with ThreadPoolExecutor(n_threads) as pool:
        return list(pool.map(function, items))


def threaded_sum(function: Callable, items: Iterable, n_threads: int):
    """``function(items[0]) + function(items[1]) + ...``, added in this order, on up to
    ``n_threads`` threads; ``function(item, into)`` returns a numpy array.

    ``into`` is None or an array returned by an earlier call whose part of the
    sum is taken, for the call to reuse (fresh arrays cost page faults).
    The caller's thread adds the results in order as they finish, without
    joblib's polling result loop; at most ``2 n_threads`` are alive at once
    (one with a single thread).
    """
    items = iter(items)
    spare: list = []  # arrays already added to the total; only this thread touches it
    running: deque[Future] = deque()
    pool = ThreadPoolExecutor(n_threads) if n_threads > 1 else None

    def start_next() -> None:
        item = next(items, _DONE)
        if item is _DONE:
            return
        into = spare.pop() if spare else None
        if pool is None:
            future: Future = Future()
            future.set_result(function(item, into))
        else:
            future = pool.submit(function, item, into)
        running.append(future)

    total = None
    with pool or nullcontext():
        for _ in range(1 if pool is None else 2 * n_threads):
            start_next()
        while running:
            result = running.popleft().result()
            if total is None:
                total = result
            else:
                total += result
                spare.append(result)
            start_next()
    return total


_DONE = object()
