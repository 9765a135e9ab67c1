"""Data larger than memory on the command line: Parquet datasets, schedulers, partitioned output.

``splitlift fit`` and ``splitlift transform`` accept as DATA a folder of
Parquet files or a glob pattern of them (``'data/*.parquet'``); the files are
read lazily with :func:`dask.dataframe.read_parquet` and never loaded whole
(see :mod:`splitlift.dask_support` for how estimators use them).
``transform --out FOLDER`` (a name without a table suffix) writes the lifted
table as partitioned Parquet, one ``part-NNNNN.parquet`` file per partition,
published all at once, with a progress bar. ``--scheduler`` picks where the
work runs: ``threads`` (Dask's default), ``processes``, ``synchronous``, or
the address of a running ``distributed`` scheduler (``tcp://host:8786``).
"""

from __future__ import annotations

import contextlib
import glob
import os
from pathlib import Path

#: How long ``--scheduler ADDRESS`` waits for the cluster to answer.
CONNECT_TIMEOUT = "10s"

#: Local Dask schedulers ``--scheduler`` accepts by name.
LOCAL_SCHEDULERS = ("threads", "processes", "synchronous")

#: Rows a lifted in-memory table is split into per partition when written as a folder.
ROWS_PER_PARTITION = 1_000_000

#: Rows of a dataset loaded for the diagnostic plots of ``fit --plot``.
PLOT_SAMPLE_ROWS = 20_000

PART_PATTERN = "part-*.parquet"


def require_dask(purpose: str):
    """Import dask.dataframe, or explain how to install it."""
    try:
        import dask.dataframe as dd
    except ImportError:
        raise ImportError(
            f"{purpose} needs Dask: pip install 'splitlift[dask]'."
        ) from None
    return dd


def is_dataset(path) -> bool:
    """Whether DATA names a folder of Parquet files or a glob pattern of them."""
    text = str(path)
    return Path(text).is_dir() or any(mark in text for mark in "*?[")


def dataset_files(path) -> list[str]:
    """The Parquet files of a dataset, or an error that names the path."""
    text = str(path)
    if Path(text).is_dir():
        files = sorted(str(p) for p in Path(text).rglob("*") if p.is_file()
                       and p.suffix.lower() in (".parquet", ".pq"))
    else:
        files = sorted(glob.glob(text, recursive=True))
    if not files:
        raise FileNotFoundError(
            f"no Parquet files found at {text}; give a folder holding .parquet files or a glob "
            "pattern such as 'data/*.parquet' (quote it so the shell does not expand it)."
        )
    bad = [name for name in files if Path(name).suffix.lower() not in (".parquet", ".pq")]
    if bad:
        raise ValueError(f"{text} matches files that are not Parquet ({bad[:3]}); narrow the "
                         "pattern to .parquet files.")
    return files


def read_dataset(path):
    """A lazy Dask DataFrame over the Parquet files of a dataset."""
    dd = require_dask(f"reading the Parquet dataset {path}")
    files = dataset_files(path)
    try:
        return dd.read_parquet(files)
    except (OSError, ValueError) as error:
        raise ValueError(f"{path} is not a readable Parquet dataset ({error}).") from None


def lazy_features_and_target(frame, target: str, features: list[str] | None):
    """(X, y, names) of a Dask DataFrame: column checks now, value checks chunk by chunk."""
    columns = [str(c) for c in frame.columns]
    if target not in columns:
        raise ValueError(f"target column {target!r} is not in the data; it has {columns}.")
    names = [c for c in columns if c != target] if features is None else features
    missing = [name for name in names if name not in columns]
    if missing:
        raise ValueError(f"feature column(s) {missing} are not in the data; it has {columns}.")
    if target in names:
        raise ValueError(f"the target column {target!r} is also listed as a feature.")
    if not names:
        raise ValueError("no feature columns left besides the target.")
    kinds = frame.dtypes
    bad = [name for name in names if getattr(kinds[name], "kind", "O") not in "fiu"]
    if bad:
        raise ValueError(f"feature column(s) {bad} are not numeric; encode them or leave them "
                         "out with --features.")
    return frame[names], frame[target], names


@contextlib.contextmanager
def scheduler(spec: str | None):
    """Run the enclosed Dask work on a local scheduler or a running cluster (``None``: default)."""
    if spec is None:
        yield
        return
    import dask

    if spec in LOCAL_SCHEDULERS:
        with dask.config.set(scheduler=spec):
            yield
        return
    try:
        from distributed import Client
    except ImportError:
        raise ImportError(
            f"--scheduler {spec} names a cluster, which needs distributed: "
            "pip install 'splitlift[dask]'."
        ) from None
    try:
        client = Client(spec, timeout=CONNECT_TIMEOUT, set_as_default=True)
    except OSError as error:
        raise OSError(f"cannot reach the Dask scheduler at {spec} ({error}); check the "
                      "address, or use --scheduler threads.") from None
    with client:
        yield


def lift_lazily(lift, frame):
    """The lifted columns of a Dask DataFrame, lazily, named as DirectionLift names them."""
    from .dask_support import apply_lazily

    if lift.feature_names is None:
        raise ValueError("the lift records no feature names, so the data's columns cannot be "
                         "matched; save the lift from a DataFrame or with splitlift fit.")
    missing = [name for name in lift.feature_names if name not in frame.columns]
    if missing:
        raise ValueError(f"the data lacks the column(s) {missing} the lift was fitted on "
                         f"(it expects {lift.feature_names}).")
    return apply_lazily(frame[list(lift.feature_names)], lift.apply, lift.output_feature_names())


def transform_to(lift, source, out, partitioned: bool) -> tuple[int, int]:
    """Lift a table (Dask or pandas) into ``out``: a Parquet folder, or one table file.

    Returns the numbers of rows and lifted columns written.
    """
    dd = require_dask("lifting a Parquet dataset")
    if not hasattr(source, "npartitions"):
        source = dd.from_pandas(source, npartitions=max(1, -(-len(source) // ROWS_PER_PARTITION)))
    lifted = lift_lazily(lift, source)
    if partitioned:
        rows = write_partitioned(lifted, out, label=f"lifting into {out}")
    else:  # one file: the lifted table must fit in memory
        from .data_files import write_table

        table = lifted.compute()
        write_table(out, table)
        rows = len(table)
    return rows, len(lifted.columns)


def check_output_folder(path, data) -> None:
    """``--out FOLDER`` can be written: a folder or a new name in an existing writable folder."""
    target = Path(path)
    if target.exists() and not target.is_dir():
        raise FileExistsError(f"--out {path} is a file; give a folder (no suffix) for "
                              "partitioned Parquet, or a .parquet/.csv file name")
    parent = target.absolute().parent
    if not parent.is_dir():
        raise FileNotFoundError(f"the folder that would hold --out {path} does not exist; "
                                "create it first")
    if not os.access(target if target.is_dir() else parent, os.W_OK | os.X_OK):
        raise PermissionError(f"--out {path} is not writable; choose another folder")
    if is_dataset(data) and target.is_dir():
        inside = [f for f in dataset_files(data) if Path(f).absolute().parent == target.absolute()]
        if inside:
            raise ValueError(f"--out {path} holds the input files ({inside[0]}, ...); writing "
                             "there would destroy the input. Give --out another folder")


def is_partitioned_output(path) -> bool:
    """``--out`` names a folder for partitioned Parquet (no table suffix, or an existing folder)."""
    return Path(path).is_dir() or Path(path).suffix == ""


def write_partitioned(frame, folder, label: str = "writing partitions") -> int:
    """Write a (Dask or pandas) DataFrame as one Parquet file per partition, all or nothing.

    The files are written into a staging folder beside ``folder`` and
    published together (:class:`splitlift.persistence.AtomicResult`); part
    files of an older result in ``folder`` are replaced. A progress bar
    counts the partitions written. Returns the number of rows written.
    """
    dd = require_dask("writing partitioned Parquet")
    from dask import delayed

    from .persistence import AtomicResult

    if not hasattr(frame, "npartitions"):
        frame = dd.from_pandas(frame, npartitions=max(1, -(-len(frame) // ROWS_PER_PARTITION)))
    target = Path(folder)
    owned = [p.name for p in target.glob(PART_PATTERN)] if target.is_dir() else []
    with AtomicResult() as result:
        staged = result.folder(target, owned_names=owned)
        parts = frame.to_delayed()
        tasks = [delayed(_write_part)(part, str(staged / f"part-{index:05d}.parquet"))
                 for index, part in enumerate(parts)]
        rows = sum(compute_with_progress(tasks, label))
    return int(rows)


def _write_part(part, path: str) -> int:
    part.to_parquet(path, index=False)
    return len(part)


def compute_with_progress(tasks: list, label: str) -> list:
    """Compute delayed tasks on the active scheduler, a bar advancing as each one finishes."""
    import dask

    from ._progress import progress_bar

    client = _active_client()
    with progress_bar(len(tasks), label) as bar:
        if client is not None:
            from distributed import as_completed

            futures = client.compute(tasks)
            index = {future.key: position for position, future in enumerate(futures)}
            results = [None] * len(futures)
            for future in as_completed(futures):
                results[index[future.key]] = future.result()
                bar.update(1)
            return results
        from dask.callbacks import Callback

        keys = {task.key for task in tasks}

        class Finished(Callback):
            def _posttask(self, key, result, dsk, state, worker_id):
                if key in keys:
                    bar.update(1)

        with Finished():
            return list(dask.compute(*tasks))


def _active_client():
    try:
        from distributed import default_client
    except ImportError:
        return None
    try:
        return default_client()
    except ValueError:
        return None


def sample_for_plots(X, y, limit: int = PLOT_SAMPLE_ROWS, random_state=0):
    """In-memory rows of lazy (X, y) for the diagnostic plots: a uniform sample."""
    from .dask_support import sample_of

    X_sample, y_sample = sample_of(X, limit, random_state, y=y)
    return X_sample.to_numpy(dtype=float), y_sample
