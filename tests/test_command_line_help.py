"""The command line as documentation: help, version, module entry, JSON, HTML, kept columns."""

import json
import subprocess
import sys
from importlib.metadata import version

import numpy as np
import pandas as pd
import pytest

import splitlift as sl
from splitlift.cli import _build_parser

COMMANDS = ["demo", "fit", "transform", "score", "report", "evaluate", "bench"]


def run(*arguments, module="splitlift"):
    return subprocess.run([sys.executable, "-m", module, *arguments], capture_output=True,
                          text=True, timeout=300)


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_a_description_an_example_and_help_for_every_argument(command):
    parser = _build_parser()
    sub = parser._subparsers._group_actions[0].choices[command]
    text = sub.format_help()
    assert "example:\n  splitlift " + command in text
    assert sub.description and len(sub.description) > 40
    for action in sub._actions:
        if action.dest not in ("help", "estimator") or action.option_strings:
            assert action.help, f"{command} {action.dest} has no help"


def test_defaults_are_shown():
    text = _build_parser()._subparsers._group_actions[0].choices["fit"].format_help()
    text = " ".join(text.split())  # help is wrapped to the terminal's width
    assert "(default: 0.05)" in text and "(default: SlicedInverse)" in text


def test_version_matches_the_installed_package_and_module_entry_works():
    result = run("--version")
    assert result.returncode == 0
    assert result.stdout.strip() == f"splitlift {sl.__version__}"
    assert sl.__version__ == version("splitlift")
    assert run("--help").returncode == 0


@pytest.fixture
def table(tmp_path):
    rng = np.random.default_rng(0)
    X = rng.standard_normal((300, 4))
    frame = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    frame["batch_id"] = np.arange(300) + 5000
    frame["y"] = X[:, 0] - X[:, 1] + 0.1 * rng.standard_normal(300)
    path = tmp_path / "plant.csv"
    frame.to_csv(path, index=False)
    return path


def test_fit_json_report_json_html_and_transform_keep(table, tmp_path):
    lift = tmp_path / "lift.npz"
    fitted = run("fit", str(table), "--target", "y", "--features", "a,b,c,d", "--dim", "1",
                 "--out", str(lift), "--html", str(tmp_path / "page.html"), "--json", "--quiet")
    assert fitted.returncode == 0, fitted.stderr
    record = json.loads(fitted.stdout)  # strict JSON only on stdout
    assert record["dim"] == 1 and record["feature_names"] == ["a", "b", "c", "d"]
    page = (tmp_path / "page.html").read_text()
    assert page.startswith("<!DOCTYPE html>") and "data:image/png;base64," in page
    shown = run("report", str(lift), "--json")
    assert shown.returncode == 0, shown.stderr
    assert json.loads(shown.stdout)["lift"]["rank"] == 4
    out = tmp_path / "lifted.csv"
    moved = run("transform", str(lift), str(table), "--keep", "batch_id,y", "--out", str(out))
    assert moved.returncode == 0, moved.stderr
    written = pd.read_csv(out)
    assert list(written.columns[:2]) == ["batch_id", "y"]
    assert written.columns[2] == "subspace_0"
    np.testing.assert_array_equal(written["batch_id"], np.arange(300) + 5000)


def test_transform_keep_names_a_missing_column(table, tmp_path):
    lift = tmp_path / "lift.npz"
    assert run("fit", str(table), "--target", "y", "--features", "a,b,c,d", "--dim", "1",
               "--out", str(lift)).returncode == 0
    moved = run("transform", str(lift), str(table), "--keep", "serial", "--out",
                str(tmp_path / "t.csv"))
    assert moved.returncode == 1 and "--keep names column(s) ['serial']" in moved.stderr
    assert not (tmp_path / "t.csv").exists()
