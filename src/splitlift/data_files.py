"""Reading and writing the tables the command line works on (CSV, or Parquet)."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from .persistence import atomic_write


def read_table(path):
    """Read a CSV file, or a Parquet file when pyarrow is installed, into a DataFrame."""
    import pandas as pd

    source = Path(path)
    if not source.is_file():
        raise FileNotFoundError(f"data file {source} does not exist; check the path.")
    if source.suffix.lower() in (".parquet", ".pq"):
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise ValueError(
                f"{source} is a Parquet file, which needs pyarrow: pip install pyarrow, "
                "or convert the data to CSV."
            ) from None
        return pd.read_parquet(source)
    try:
        return pd.read_csv(source)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
        raise ValueError(f"{source} is not a readable CSV file ({error}).") from None


def select_columns(table, columns: list[str], role: str = "feature") -> np.ndarray:
    """Numeric matrix of ``columns`` from ``table``, with errors that name the columns."""
    missing = [name for name in columns if name not in table.columns]
    if missing:
        raise ValueError(
            f"{role} column(s) {missing} are not in the data; it has {list(table.columns)}."
        )
    chosen = table[columns]
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    non_numeric = [name for name in columns
                   if not is_numeric_dtype(chosen[name]) or is_bool_dtype(chosen[name])]
    if non_numeric:
        raise ValueError(
            f"{role} column(s) {non_numeric} are not numeric; encode them or leave them out "
            "with --features."
        )
    values = chosen.to_numpy(dtype=float)
    if not np.all(np.isfinite(values)):
        bad = [name for name in columns if not np.all(np.isfinite(chosen[name].to_numpy(float)))]
        raise ValueError(
            f"{role} column(s) {bad} contain missing or infinite values; "
            "impute or drop those rows first."
        )
    return values


def features_and_target(table, target: str, features: list[str] | None = None):
    """Split a table into (X, y, feature names); default features: every other column."""
    if target not in table.columns:
        raise ValueError(
            f"target column {target!r} is not in the data; it has {list(table.columns)}."
        )
    names = [c for c in table.columns if c != target] if features is None else features
    if target in names:
        raise ValueError(f"the target column {target!r} is also listed as a feature.")
    if not names:
        raise ValueError("no feature columns left besides the target.")
    y = table[target].to_numpy()
    if y.dtype.kind == "O" or y.dtype.kind in "fc":
        if y.dtype.kind in "fc" and not np.all(np.isfinite(y)):
            raise ValueError(f"target column {target!r} has missing or infinite values.")
        if y.dtype.kind == "O" and table[target].isna().any():
            raise ValueError(f"target column {target!r} has missing values.")
    return select_columns(table, list(names)), y, [str(n) for n in names]


def write_table(path, columns: list[str], values: np.ndarray) -> Path:
    """Write a numeric table as CSV with round-trip precision, atomically."""
    import pandas as pd

    buffer = io.StringIO()
    pd.DataFrame(values, columns=columns).to_csv(buffer, index=False, float_format="%.17g")
    data = buffer.getvalue().encode("utf-8")
    return atomic_write(path, lambda handle: handle.write(data))


def read_matrix(path) -> np.ndarray:
    """A numeric matrix from .npy or headerless/headed .csv (used for references)."""
    source = Path(path)
    if not source.is_file():
        raise FileNotFoundError(f"matrix file {source} does not exist; check the path.")
    try:
        if source.suffix.lower() == ".npy":
            return np.load(source, allow_pickle=False)
        import pandas as pd
        from pandas.api.types import is_numeric_dtype

        table = pd.read_csv(source, header=None)
        if not all(is_numeric_dtype(table[c]) for c in table.columns):
            table = pd.read_csv(source)  # first row was a header
        return table.to_numpy(dtype=float)
    except (OSError, ValueError) as error:
        raise ValueError(f"{source} is not a readable matrix file ({error}).") from None
