"""``splitlift bench``: speed, accuracy and rate suites, printed as tables and saved as JSON.

Benchmarks are kept out of the test suite. Every ratio compares timings
taken in the same process, on the same data, one after the other.
"""

from __future__ import annotations

import io
import json
import sys

from ._timing import machine_description

SUITES = ("speed", "accuracy", "rate")


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

    The Markdown file (for ``docs/benchmarks.md``) holds the printed tables
    verbatim under a header naming the command, machine and date, so the
    published figures are the harness's output, never typed in.
    """
    out = _Tee(stream or sys.stdout)
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
    from ..persistence import atomic_write

    if json_path is not None:
        text = json.dumps(results, indent=2, default=float).encode("utf-8")
        atomic_write(json_path, lambda handle: handle.write(text))
    if markdown_path is not None:
        command = f"splitlift bench --suite {suite}" + (" --quick" if quick else "")
        document = (
            "# Benchmarks\n\n"
            f"Produced by `{command}` on {machine['date']} "
            f"({machine['cpu_count']} cores, {machine['processor']}, {machine['platform']}, "
            f"Python {machine['python']}, numpy {machine['numpy']}, "
            f"BLAS: {'; '.join(machine['blas']) or 'unknown'}). "
            "Regenerate with the same command and `--markdown docs/benchmarks.md`; "
            "do not edit by hand.\n\n```text\n" + out.getvalue() + "```\n"
        )
        atomic_write(markdown_path, lambda handle: handle.write(document.encode("utf-8")))
    return results
