"""Reading and writing the tables the command line works on (CSV, Parquet, JSON).

One reader for every table a user hands us (:func:`read_table`) and one
writer for every table we produce (:func:`write_table`); the file's suffix
decides the format. Rows in messages are data rows counted from 1, header
not counted.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import numpy as np

from .persistence import atomic_write

#: Suffixes :func:`read_table` reads, with their format and default separator.
DATA_SUFFIXES = {".csv": ("csv", ","), ".txt": ("csv", ","), ".tsv": ("csv", "\t"),
                 "": ("csv", ","), ".parquet": ("parquet", None), ".pq": ("parquet", None),
                 ".json": ("json", None)}
#: Suffixes :func:`write_table` writes.
TABLE_OUTPUT_SUFFIXES = (".csv", ".tsv", ".parquet", ".json")
_COMPRESSION_SUFFIXES = (".gz", ".bz2", ".xz", ".zip", ".zst")
_DELIMITER_NAMES = {";": "';'", "\t": "a tab ('\\t')", "|": "'|'"}
#: pandas' name for a column whose header cell is empty (the default index of to_csv).
_UNNAMED_COLUMN = re.compile(r"^Unnamed: \d+$")


def data_format(path) -> tuple[str, str | None]:
    """``(format, default separator)`` of a data file, from its suffix.

    Raises ``ValueError`` naming the accepted suffixes for any other suffix.
    """
    name = Path(path).name.lower()
    compressed = next((c for c in _COMPRESSION_SUFFIXES if name.endswith(c)), "")
    suffix = Path(name[: len(name) - len(compressed)]).suffix
    kind = DATA_SUFFIXES.get(suffix, ("unknown", None))[0]
    if kind == "unknown" or (compressed and kind == "parquet"):
        accepted = ", ".join(s for s in DATA_SUFFIXES if s)
        raise ValueError(
            f"{path}: unknown data file type {suffix + compressed or '(no suffix)'!r}; splitlift "
            f"reads {accepted} or no suffix (CSV); CSV and JSON may be compressed "
            f"({', '.join(_COMPRESSION_SUFFIXES)})."
        )
    return DATA_SUFFIXES[suffix]


def output_table_format(path) -> str:
    """The format a table written to ``path`` gets; ``ValueError`` for an unknown suffix."""
    suffix = Path(path).suffix.lower()
    if suffix not in TABLE_OUTPUT_SUFFIXES:
        raise ValueError(
            f"{path}: tables are written as {', '.join(TABLE_OUTPUT_SUFFIXES)}, chosen by the "
            f"suffix; {suffix or 'no suffix'!r} is none of them. Rename the output."
        )
    return suffix[1:]


def parquet_available() -> bool:
    """Whether pandas can read and write Parquet here (needs pyarrow)."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


def read_table(path, sep: str | None = None):
    """Read a data file into a DataFrame: CSV (also .tsv, .txt), Parquet or JSON.

    Parameters
    ----------
    path : str or Path
    sep : str, optional
        Column separator of a CSV file (default: ``,``; a tab for ``.tsv``).

    Raises
    ------
    FileNotFoundError, IsADirectoryError
        No such file, or a folder.
    ValueError
        Unknown suffix, unreadable or empty file, a header without data rows,
        or a CSV file that looks separated by another character than ``sep``.
    """
    import pandas as pd

    source = Path(path)
    if source.is_dir():
        raise IsADirectoryError(
            f"{source} is a directory, not a data file; give the path of the data file inside it."
        )
    if not source.is_file():
        raise FileNotFoundError(f"data file {source} does not exist; check the path.")
    kind, default_separator = data_format(source)
    if sep is not None and kind != "csv":
        raise ValueError(f"{source} is a {kind} file; a column separator applies to CSV only.")
    if kind == "parquet":
        if not parquet_available():
            raise ValueError(f"{source} is a Parquet file, which needs pyarrow: pip install "
                             "pyarrow, or convert the data to CSV.")
        table = _read_or_explain(pd.read_parquet, source, "Parquet")
    elif kind == "json":
        table = _read_or_explain(pd.read_json, source, "JSON", precise_float=True,
                                 convert_dates=False, keep_default_dates=False)
    else:
        separator = sep if sep is not None else default_separator
        try:
            table = pd.read_csv(source, sep=separator)
        except pd.errors.EmptyDataError:
            raise ValueError(f"{source} is empty: it has no header and no rows.") from None
        except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as error:
            hint = "" if sep is not None else _separator_hint(_first_line(source), separator)
            raise ValueError(
                f"{source} is not a readable CSV file ({_one_line(error)}){hint}"
            ) from None
        if sep is None and table.shape[1] == 1:
            hint = _separator_hint(str(table.columns[0]), separator)
            if hint:
                raise ValueError(f"{source} reads as a single column{hint}")
        _refuse_repeated_names(source, separator)
    if len(table) == 0:
        raise ValueError(f"{source} has a header but no data rows; add rows or check the file.")
    return table


def _refuse_repeated_names(source: Path, separator: str) -> None:
    """pandas renames a repeated header name ('a' -> 'a.1'); say so instead."""
    import pandas as pd

    header = [str(name) for name in pd.read_csv(source, sep=separator, header=None, nrows=1,
                                                dtype=str).iloc[0]]
    repeated = sorted({name for name in header if header.count(name) > 1})
    if repeated:
        raise ValueError(f"{source} names the column(s) {repeated} more than once in its header; "
                         "give every column its own name.")


def _read_or_explain(reader, source: Path, kind: str, **options):
    try:
        return reader(source, **options)
    except (OSError, ValueError, UnicodeDecodeError) as error:  # pyarrow's are among these
        raise ValueError(f"{source} is not a readable {kind} file ({_one_line(error)}).") from None


def _one_line(error: BaseException, limit: int = 160) -> str:
    text = " ".join(str(error).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _first_line(source: Path) -> str:
    try:
        with open(source, encoding="utf-8", errors="replace") as handle:
            return handle.readline()
    except OSError:
        return ""


def _separator_hint(header: str, separator: str) -> str:
    """A '; it looks separated by ...' hint when the header holds another separator."""
    if separator in header:
        return ""
    for candidate, name in _DELIMITER_NAMES.items():
        if candidate in header:
            shown = "'\\t'" if candidate == "\t" else repr(candidate)
            return (f"; its header looks separated by {name}, not {separator!r}: pass "
                    f"--sep {shown}.")
    return ""


def index_like_columns(table) -> list[str]:
    """Columns that look like a saved row index, not data.

    An unnamed column (pandas calls it ``Unnamed: k``: its header cell is
    empty, as ``DataFrame.to_csv`` writes the index by default) of distinct
    whole numbers, or a column named ``index`` holding exactly 0..n-1 or 1..n.
    """
    from pandas.api.types import is_integer_dtype

    found = []
    for name in table.columns:
        column = table[name]
        if not is_integer_dtype(column) or not column.is_unique:
            continue
        ordered = np.sort(column.to_numpy())
        counting = (ordered.size > 0 and ordered[0] in (0, 1)
                    and np.array_equal(ordered - ordered[0], np.arange(ordered.size)))
        if _UNNAMED_COLUMN.match(str(name)) or (str(name).lower() == "index" and counting):
            found.append(str(name))
    return found


def _first_bad_cell(column) -> tuple[int, object] | None:
    """(data row from 1, value) of the first cell that is not a finite number, or None."""
    import pandas as pd

    numbers = pd.to_numeric(column, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    bad = np.flatnonzero(~np.isfinite(numbers))
    if bad.size == 0:
        return None
    return int(bad[0]) + 1, column.iloc[int(bad[0])]


def _all_text(column) -> bool:
    """Whether no cell of ``column`` reads as a number (a categorical column)."""
    import pandas as pd

    return bool(pd.to_numeric(column, errors="coerce").isna().all())


def _describe_cell(value) -> str:
    import pandas as pd

    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return "a missing value"
    if isinstance(value, int | float | np.number) and not isinstance(value, bool):
        return f"the value {value!r}"
    return f"the non-numeric value {str(value)!r}"


def select_columns(table, columns: list[str], role: str = "feature") -> np.ndarray:
    """Numeric matrix of ``columns`` from ``table``, with errors that name column, row and value."""
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    missing = [name for name in columns if name not in table.columns]
    if missing:
        raise ValueError(
            f"{role} column(s) {missing} are not in the data; it has {list(table.columns)}."
        )
    for name in columns:
        column = table[name]
        if is_bool_dtype(column):
            raise ValueError(f"{role} column {name!r} holds true/false values; encode it as 0/1 "
                             "or leave it out with --features.")
        cell = _first_bad_cell(column)
        if cell is None and is_numeric_dtype(column):
            continue
        if cell is None:  # numbers stored as text, e.g. in a JSON file
            raise ValueError(f"{role} column {name!r} holds numbers as text; store them as "
                             "numbers or leave the column out with --features.")
        row, value = cell
        description = _describe_cell(value)
        if "non-numeric" in description and _all_text(column):
            raise ValueError(f"{role} column {name!r} is not numeric (e.g. {str(value)!r} in data "
                             f"row {row}); encode it as numbers or leave it out with --features.")
        fix = ("correct that cell, or leave the column out with --features"
               if "non-numeric" in description else "impute or drop that row first")
        raise ValueError(f"{role} column {name!r} has {description} in data row {row}; {fix}.")
    return table[columns].to_numpy(dtype=float)


def target_values(table, target: str) -> np.ndarray:
    """The response column: numbers as floats, or class labels when no cell is a number.

    A column mixing numbers and text is refused with the first offending
    row, never read as class labels.
    """
    import pandas as pd
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    if target not in table.columns:
        raise ValueError(
            f"target column {target!r} is not in the data; it has {list(table.columns)}."
        )
    column = table[target]
    if column.isna().any():
        row = int(np.flatnonzero(column.isna().to_numpy())[0]) + 1
        raise ValueError(f"target column {target!r} has a missing value in data row {row}; "
                         "drop or fill that row first.")
    if is_bool_dtype(column):
        return column.to_numpy()
    if is_numeric_dtype(column):
        values = column.to_numpy(dtype=float)
        if not np.all(np.isfinite(values)):
            row = int(np.flatnonzero(~np.isfinite(values))[0]) + 1
            raise ValueError(f"target column {target!r} has the value {values[row - 1]} in data "
                             f"row {row}; drop or fix that row first.")
        return column.to_numpy()
    text = column.astype(str).str.strip()
    numeric = pd.to_numeric(text, errors="coerce").notna().to_numpy()
    if numeric.any() and not numeric.all():
        row = int(np.flatnonzero(~numeric)[0]) + 1
        raise ValueError(
            f"target column {target!r} has the non-numeric value {text.iloc[row - 1]!r} in data "
            f"row {row} among numbers; correct or drop that row (class labels must all be text)."
        )
    if numeric.all():
        return pd.to_numeric(text).to_numpy(dtype=float)
    if pd.to_numeric(text.str.replace(",", ".", regex=False), errors="coerce").notna().all():
        raise ValueError(
            f"target column {target!r} holds numbers written with a decimal comma (e.g. "
            f"{text.iloc[0]!r}); write them with a decimal point."
        )
    return column.to_numpy(dtype=object)


def features_and_target(table, target: str, features: list[str] | None = None,
                        exclude: tuple[str, ...] = ()):
    """Split a table into (X, y, feature names).

    Default features: every column but the target and ``exclude`` (for
    example the columns :func:`index_like_columns` found).
    """
    y = target_values(table, target)
    if features is None:
        names = [c for c in table.columns if c != target and str(c) not in exclude]
    else:
        names = list(features)
    if target in names:
        raise ValueError(f"the target column {target!r} is also listed as a feature.")
    if not names:
        raise ValueError(f"no feature columns left besides the target {target!r}; the data has "
                         f"only {list(table.columns)}.")
    return select_columns(table, names), y, [str(n) for n in names]


def table_bytes(path, frame) -> bytes:
    """``frame`` encoded in the format of ``path``'s suffix (see :func:`output_table_format`).

    CSV keeps full float precision; JSON is a list of row objects (NaN as
    null); Parquet needs pyarrow.
    """
    kind = output_table_format(path)
    if kind in ("csv", "tsv"):
        buffer = io.StringIO()
        frame.to_csv(buffer, index=False, float_format="%.17g",
                     sep="\t" if kind == "tsv" else ",")
        return buffer.getvalue().encode("utf-8")
    if kind == "json":
        rows = frame.astype(object).where(frame.notna(), None).to_dict(orient="records")
        return json.dumps(rows, default=_json_scalar, allow_nan=False).encode("utf-8")
    if not parquet_available():
        raise ValueError(f"{path}: writing Parquet needs pyarrow: pip install pyarrow, or name "
                         "the output .csv.")
    buffer = io.BytesIO()
    frame.to_parquet(buffer, index=False)
    return buffer.getvalue()


def _json_scalar(value):
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"cannot write {type(value).__name__} to JSON")


def write_table(path, frame) -> Path:
    """Write a DataFrame in the format of ``path``'s suffix, atomically."""
    data = table_bytes(path, frame)
    return atomic_write(path, lambda handle: handle.write(data))


def read_matrix(path) -> np.ndarray:
    """A numeric matrix from .npy or headerless/headed .csv (used for references)."""
    source = Path(path)
    if source.is_dir():
        raise IsADirectoryError(f"{source} is a directory, not a matrix file; give a .npy or .csv "
                                "file.")
    if not source.is_file():
        raise FileNotFoundError(f"matrix file {source} does not exist; check the path.")
    try:
        if source.suffix.lower() == ".npy":
            matrix = np.load(source, allow_pickle=False)
        else:
            import pandas as pd
            from pandas.api.types import is_numeric_dtype

            table = pd.read_csv(source, header=None)
            if not all(is_numeric_dtype(table[c]) for c in table.columns):
                table = pd.read_csv(source)  # first row was a header
            matrix = table.to_numpy(dtype=float)
    except (OSError, ValueError, EOFError, UnicodeDecodeError) as error:
        raise ValueError(f"{source} is not a readable matrix file ({_one_line(error)}).") from None
    if not isinstance(matrix, np.ndarray) or matrix.dtype.kind not in "fiu":
        raise ValueError(f"{source} does not hold a matrix of real numbers; give a .npy array "
                         "or a .csv table of numbers.")
    return matrix
