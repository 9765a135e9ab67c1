"""The documentation stays true: API page current, README example runs."""

import importlib.util
import re
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def test_api_reference_is_generated_from_current_docstrings():
    spec = importlib.util.spec_from_file_location("build", ROOT / "docs" / "build_api_reference.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert (ROOT / "docs" / "api.md").read_text(encoding="utf-8") == module.build(), (
        "docs/api.md is stale: run python docs/build_api_reference.py"
    )


def test_readme_example_runs(tmp_path, monkeypatch):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    code = re.findall(r"```python\n(.*?)```", text, re.S)[0]
    monkeypatch.chdir(tmp_path)  # the example saves lift.npz
    namespace = {}
    exec(compile(code, "README.md", "exec"), namespace)
    assert (tmp_path / "lift.npz").exists()
    assert namespace["lift"].leakage(namespace["est"].basis_) == np.float64(0.05) or abs(
        namespace["lift"].leakage(namespace["est"].basis_) - 0.05) < 1e-12


def test_readme_has_the_required_parts():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "splitlift demo" in text and "python3 -m pytest" in text
    assert "## Cautions" in text
    for caution in ("held-out", "linearity condition", "high-stakes"):
        assert caution in text
