"""Write docs/api.md from the docstrings of splitlift's public names.

Run: python docs/build_api_reference.py   (a test checks the file is current)
"""

from __future__ import annotations

import inspect
import sys
from pathlib import Path

import splitlift

MODULES = ["splitlift.dimension", "splitlift.forest", "splitlift.plots", "splitlift.scoring",
           "splitlift.selection"]


def _entry(name: str, obj) -> list[str]:
    try:
        signature = str(inspect.signature(obj))
    except (TypeError, ValueError):
        signature = ""
    kind = "class" if inspect.isclass(obj) else "function"
    doc = inspect.getdoc(obj) or "(no docstring)"
    lines = [f"### `{name}{signature}`", "", f"*{kind}*", "", "```text", doc, "```", ""]
    if inspect.isclass(obj):
        for method_name, method in inspect.getmembers(obj, inspect.isfunction):
            if method_name.startswith("_") or method.__qualname__.split(".")[0] != obj.__name__:
                continue
            summary = (inspect.getdoc(method) or "").split("\n")[0]
            lines.append(f"- `{method_name}{inspect.signature(method)}`: {summary}")
        lines.append("")
    return lines


def build() -> str:
    lines = ["# API reference", "",
             "Generated from the docstrings by `docs/build_api_reference.py`; do not edit.", ""]
    lines += ["## `splitlift`", ""]
    for name in sorted(splitlift.__all__):
        lines += _entry(f"splitlift.{name}", getattr(splitlift, name))
    for module_name in MODULES:
        module = __import__(module_name, fromlist=["__all__"])
        names = getattr(module, "__all__", None)
        if names is None:
            names = [n for n, o in vars(module).items()
                     if not n.startswith("_") and getattr(o, "__module__", "") == module_name
                     and (inspect.isclass(o) or inspect.isfunction(o))]
        new = [n for n in sorted(names) if n not in splitlift.__all__]
        if new:
            lines += [f"## `{module_name}`", ""]
            for name in new:
                lines += _entry(f"{module_name}.{name}", getattr(module, name))
    return "\n".join(lines).rstrip() + "\n"


if __name__ == "__main__":
    target = Path(__file__).with_name("api.md")
    target.write_text(build(), encoding="utf-8")
    sys.stdout.write(f"wrote {target}\n")
