"""The one table formatter: every table splitlift prints goes through pandas here.

Rows come as dicts (or a DataFrame); columns as ``(key, heading, format)``
triples, where ``format`` is a format spec such as ``".3f"``, ``"d"`` or
``"s"``. Missing values print as ``-``. Text for terminals and Markdown for
documents share the same cell formatting, and HTML for notebooks uses
pandas' own ``to_html``.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Sequence

import pandas as pd

Column = tuple[str, str, str]


def _cell(value, spec: str) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if spec == "s" or isinstance(value, str):
        return str(value)
    try:
        return format(value, spec)
    except (TypeError, ValueError):
        return str(value)


def formatted_frame(rows: Iterable[dict] | pd.DataFrame, columns: Sequence[Column]) -> pd.DataFrame:
    """A DataFrame of formatted cells, headed by the columns' headings."""
    frame = rows if isinstance(rows, pd.DataFrame) else pd.DataFrame(list(rows))
    cells = {}
    for key, heading, spec in columns:
        values = frame[key] if key in frame else pd.Series([None] * len(frame), dtype=object)
        cells[heading] = [_cell(value, spec) for value in values.astype(object)]
    return pd.DataFrame(cells, columns=[heading for _, heading, _ in columns])


def text_table(rows, columns: Sequence[Column], indent: str = "  ") -> str:
    """Fixed-width text: text columns left-aligned, numbers right-aligned."""
    frame = formatted_frame(rows, columns)
    if frame.empty:
        return indent + "(no rows)"
    lines = [[] for _ in range(len(frame) + 1)]
    for (_, heading, spec), cells in zip(columns, frame.T.values, strict=True):
        width = max([len(heading)] + [len(cell) for cell in cells])
        align = str.ljust if spec == "s" else str.rjust
        for line, cell in zip(lines, [heading, *cells], strict=True):
            line.append(align(cell, width))
    return "\n".join(indent + "  ".join(line).rstrip() for line in lines)


def markdown_table(rows, columns: Sequence[Column]) -> str:
    """A GitHub-flavoured Markdown table of the same cells."""
    frame = formatted_frame(rows, columns)
    header = "| " + " | ".join(frame.columns) + " |"
    rule = "|" + "|".join(" --- " if spec == "s" else " ---: " for _, _, spec in columns) + "|"
    body = ["| " + " | ".join(row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([header, rule, *body])


def html_table(rows, columns: Sequence[Column], caption: str | None = None) -> str:
    """An HTML table (pandas' ``to_html``, cells escaped) for notebooks and pages."""
    frame = formatted_frame(rows, columns)
    table = frame.to_html(index=False, escape=True, border=0, classes="splitlift-table")
    if caption:
        table = table.replace(">", f"><caption>{html.escape(caption)}</caption>", 1)
    return table


def json_ready(value):
    """``value`` with NaN and infinities replaced by None and numpy scalars by Python ones,
    so that ``json.dumps(value, allow_nan=False)`` succeeds."""
    if isinstance(value, dict):
        return {str(key): json_ready(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(item) for item in value]
    if hasattr(value, "tolist") and not isinstance(value, str):  # numpy arrays and scalars
        return json_ready(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
