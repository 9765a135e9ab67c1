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


def test_demo_runs_and_the_lift_helps(tmp_path):
    result = run("demo", "--samples", "600", "--folds", "3", "--trees", "30",
                 "--out-dir", str(tmp_path / "demo"))
    assert result.returncode == 0, result.stderr
    for needle in ("SYNTHETIC", "SIR", "OPG", "dimension rule", "leading features",
                   "findings and next steps", "raw inputs", "verdict:", "STIT forest",
                   "written:"):
        assert needle in result.stdout
    assert (tmp_path / "demo" / "kiln_lift.npz").exists()
    assert (tmp_path / "demo" / "plots" / "eigenvalues.png").exists()


def test_demo_result_values():
    import io

    summary = run_demo(n_samples=800, n_folds=3, n_trees=40, stream=io.StringIO())
    assert summary["angles"]["SIR"] < 20.0 and summary["dims"]["OPG"] == 2
    # the synthetic response is a ridge function: the guard must choose a lift
    assert "lowers CV" in summary["verdict"]
    assert summary["stit_mse"] < summary["forest_mse"]


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


def test_ctrl_c_during_score_exits_130_with_one_line(tmp_path):
    import signal
    import time

    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(0)  # synthetic table, large enough to keep scoring busy
    table = pd.DataFrame(rng.standard_normal((3000, 6)), columns=list("abcdef"))
    table["y"] = table["a"] * table["b"] + rng.standard_normal(3000)
    table.to_csv(tmp_path / "data.csv", index=False)
    np.save(tmp_path / "axes.npy", np.eye(6))
    # a shell runs background jobs with SIGINT ignored, and a child inherits that: restore
    # Python's own handler, so the test does not depend on how it was started
    starter = ("import signal, sys; signal.signal(signal.SIGINT, signal.default_int_handler); "
               "from splitlift.cli import main; print('ready', flush=True); "
               "sys.exit(main(sys.argv[1:]))")
    child = subprocess.Popen(
        [sys.executable, "-c", starter, "score", *["axes.npy"] * 30, "--data", "data.csv",
         "--target", "y", "--out", "ranking.csv"],
        cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert child.stdout.readline().strip() == "ready"  # imports done, main() starting
    time.sleep(1.0)
    child.send_signal(signal.SIGINT)
    _, stderr = child.communicate(timeout=120)
    assert child.returncode == 130, stderr
    assert stderr == "splitlift score: interrupted: stopped by Ctrl-C; no partial output was left\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["axes.npy", "data.csv"]


def test_exit_codes_separate_usage_from_data_errors(tmp_path):
    """--dim 0 is never valid (usage, 2); --dim 20 fails only for data with fewer columns (1)."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(1)
    table = pd.DataFrame(rng.standard_normal((100, 5)), columns=list("abcde"))
    table.assign(y=table["a"]).to_csv(tmp_path / "data.csv", index=False)
    never = run("fit", "data.csv", "--target", "y", "--dim", "0", "--out", "l.npz", cwd=tmp_path)
    too_many = run("fit", "data.csv", "--target", "y", "--dim", "20", "--out", "l.npz",
                   cwd=tmp_path)
    assert (never.returncode, too_many.returncode) == (2, 1)
    for result in (never, too_many):
        assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr
    assert run("fit", "--help").returncode == 0
