"""The command line, run as a user would: through a subprocess."""

import json
import subprocess
import sys

from splitlift.demo import run_demo


def run(*arguments, cwd=None):
    return subprocess.run(
        [sys.executable, "-m", "splitlift.cli", *arguments],
        capture_output=True, text=True, cwd=cwd, timeout=300,
    )


def test_demo_runs_and_the_lift_helps():
    result = run("demo", "--samples", "600", "--folds", "3", "--trees", "30")
    assert result.returncode == 0, result.stderr
    for needle in ("SYNTHETIC", "SIR", "SAVE", "pHd", "angles to estimate", "raw features"):
        assert needle in result.stdout


def test_demo_result_values():
    import io

    summary = run_demo(n_samples=800, n_folds=3, n_trees=40, stream=io.StringIO())
    assert summary["angles"]["SIR"] < 20.0
    assert summary["cv_mse"]["lifted by SIR"] < summary["cv_mse"]["raw features"]


def test_usage_errors_exit_2_without_traceback():
    result = run("demo", "--samples", "1")
    assert result.returncode == 2 and "Traceback" not in result.stderr
    result = run("no-such-command")
    assert result.returncode == 2 and "Traceback" not in result.stderr


def test_bench_quick_writes_json_and_markdown(tmp_path):
    out, page = tmp_path / "bench.json", tmp_path / "bench.md"
    result = run("bench", "--quick", "--json", str(out), "--markdown", str(page))
    assert result.returncode == 0, result.stderr
    data = json.loads(out.read_text())
    rows = data["speed"]["moment_methods"]["rows"]
    assert {row["method"] for row in rows} == {"SIR", "SAVE", "pHd"}
    assert all(row["statsmodels_s"] > 0 and row["splitlift_s"] > 0 for row in rows)
    text = page.read_text()
    assert text.startswith("# Benchmarks") and "splitlift bench --suite speed --quick" in text
    assert "moment methods" in text and "STIT forest" in text
