"""``splitlift bench``: speed, accuracy, rate, real-data and scale suites, as tables and JSON.

Benchmarks are kept out of the test suite. Every ratio compares timings
taken in the same process, on the same data, one after the other.
"""

from __future__ import annotations

import io
import json
import sys
import time

from .._progress import progress_bar
from ._timing import machine_description

SUITES = ("speed", "accuracy", "rate", "real", "scale")


class _Tee(io.StringIO):
    """Keeps a copy of everything written to the real stream."""

    def __init__(self, stream):
        super().__init__()
        self._stream = stream

    def write(self, text):
        self._stream.write(text)
        return super().write(text)

    def flush(self):
        self._stream.flush()


def run_bench(suite: str = "speed", quick: bool = False, json_path=None, stream=None,
              markdown_path=None) -> dict:
    """Run one suite (or ``"all"``), print its tables, optionally write JSON and Markdown.

    The Markdown file (for ``docs/benchmarks.md``) holds each suite's printed
    tables verbatim in its own section, under a line naming the command,
    machine and date, so the published figures are the harness's output,
    never typed in. Running one suite replaces its section and keeps the
    others.
    """
    out = _Tee(stream or sys.stdout)
    if suite not in (*SUITES, "all"):
        raise ValueError(f"suite must be one of {SUITES + ('all',)}, got {suite!r}.")
    machine = machine_description()
    results: dict = {"machine": machine, "quick": quick}
    out.write(f"splitlift bench ({'quick' if quick else 'full'}), {machine['date']}, "
              f"{machine['cpu_count']} cores, {machine['platform']}\n")
    chosen = SUITES if suite == "all" else (suite,)
    sections = {}
    with progress_bar(len(chosen), "bench suites") as bar:
        for name in chosen:
            start = len(out.getvalue())
            began = time.perf_counter()
            results[name] = _suite_runner(name)(quick, out)
            out.write(f"\n({name} suite: {time.perf_counter() - began:.0f} s)\n")
            out.flush()
            sections[name] = out.getvalue()[start:]
            bar.update(1)
    from ..persistence import atomic_write

    if json_path is not None:
        text = json.dumps(results, indent=2, default=float).encode("utf-8")
        atomic_write(json_path, lambda handle: handle.write(text))
    if markdown_path is not None:
        document = _markdown(markdown_path, sections, machine, quick, replace_all=suite == "all")
        atomic_write(markdown_path, lambda handle: handle.write(document.encode("utf-8")))
    return results


def _suite_runner(name: str):
    if name == "speed":
        from .speed import run_speed

        return run_speed
    if name == "accuracy":
        from .accuracy import run_accuracy

        return run_accuracy
    if name == "rate":
        from .rate import run_rate

        return run_rate
    if name == "scale":
        from .scale import run_scale

        return run_scale
    from .real import run_real

    return run_real


_BEGIN, _END = "<!-- suite: {} -->", "<!-- end of suite -->"
_LEGACY = "earlier run"


def _markdown(path, sections: dict, machine: dict, quick: bool, replace_all: bool) -> str:
    """The Markdown page: the suites just run, and the sections of other suites kept."""
    kept = {} if replace_all else _read_sections(path)
    for name, text in sections.items():
        command = f"splitlift bench --suite {name}" + (" --quick" if quick else "")
        kept[name] = (
            f"## {name}\n\nProduced by `{command}` on {machine['date']} "
            f"({machine['cpu_count']} cores, {machine['processor']}, {machine['platform']}, "
            f"Python {machine['python']}, numpy {machine['numpy']}, "
            f"BLAS: {'; '.join(machine['blas']) or 'unknown'}).\n\n```text\n"
            + text.lstrip("\n") + "```\n"
        )
    order = [name for name in (_LEGACY, *SUITES) if name in kept]
    body = "\n".join(f"{_BEGIN.format(name)}\n{kept[name]}{_END}\n" for name in order)
    return ("# Benchmarks\n\nWritten by `splitlift bench --suite NAME --markdown "
            "docs/benchmarks.md`: running a suite replaces its section below and keeps the "
            "others. Do not edit by hand.\n\n" + body)


def _read_sections(path) -> dict:
    """Sections of an existing page; a page without markers is kept whole as one section."""
    from pathlib import Path

    source = Path(path)
    if not source.is_file():
        return {}
    text = source.read_text(encoding="utf-8")
    sections, position = {}, 0
    marker = _BEGIN.split("{}")[0]
    while (start := text.find(marker, position)) >= 0:
        name_end = text.index(" -->", start)
        name = text[start + len(marker):name_end]
        end = text.index(_END, name_end)
        sections[name] = text[name_end + len(" -->\n"):end]
        position = end + len(_END)
    if not sections and text.startswith("# Benchmarks"):
        earlier = text[len("# Benchmarks"):].lstrip("\n")
        sections[_LEGACY] = f"## {_LEGACY}\n\n{earlier}"
    return sections
