"""``splitlift evaluate`` end to end, and the real-data suite's data sets and harness."""

import io
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from splitlift.bench.real import run_real
from splitlift.bench.real_data import real_datasets
from splitlift.cli import main
from splitlift.datasets import make_kiln_problem


def run(*arguments):
    return subprocess.run([sys.executable, "-m", "splitlift.cli", *arguments],
                          capture_output=True, text=True, timeout=600)


@pytest.fixture
def kiln_file(tmp_path):
    problem = make_kiln_problem(240, random_state=3)  # synthetic demonstration data
    table = pd.DataFrame(problem.X, columns=problem.feature_names).assign(strength=problem.y)
    path = tmp_path / "kiln.csv"
    table.to_csv(path, index=False)
    return path, table


def test_evaluate_prints_the_table_and_verdict_and_writes_csv(kiln_file, tmp_path):
    path, _ = kiln_file
    out = tmp_path / "comparison.csv"
    result = run("evaluate", str(path), "--target", "strength", "--forest", "et", "--cv", "3",
                 "--out", str(out))
    assert result.returncode == 0, result.stderr
    assert "raw inputs" in result.stdout and "ADE dim 1 + inputs" in result.stdout
    assert "(3-fold CV repeated 2 times of ExtraTreesRegressor)" in result.stdout
    table = pd.read_csv(out)
    assert table["candidate"].iloc[0] == "raw inputs" and table["chosen"].sum() == 1
    assert {"cv_error", "cv_error_sd", "change_vs_raw", "change_se", "status"} <= set(
        table.columns)


def test_evaluate_writes_json_and_a_plot(kiln_file, tmp_path, capsys):
    pytest.importorskip("matplotlib")
    path, _ = kiln_file
    out, plot = tmp_path / "comparison.json", tmp_path / "errors.png"
    assert main(["evaluate", str(path), "--target", "strength", "--forest", "et", "--cv", "2",
                 "--out", str(out), "--plot", str(plot)]) == 0
    rows = json.loads(out.read_text())  # one object per candidate, the verdict in each
    assert rows[0]["verdict"] in capsys.readouterr().out
    assert len(rows) == 3  # the defaults: raw inputs, the ADE lift alone and with inputs kept
    assert [row["chosen"] for row in rows].count(True) == 1
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_evaluate_reads_numeric_codes_as_classes_on_request(kiln_file, tmp_path, capsys):
    path, table = kiln_file
    coded = tmp_path / "coded.csv"
    table.assign(grade=(table["strength"] > table["strength"].median()).astype(int)).drop(
        columns="strength").to_csv(coded, index=False)
    assert main(["evaluate", str(coded), "--target", "grade", "--classify", "--forest", "et",
                 "--cv", "2"]) == 0
    printed = capsys.readouterr().out
    assert "misclassification rate" in printed and "ExtraTreesClassifier" in printed


@pytest.mark.parametrize(
    ("arguments", "message", "code"),
    [(["--forest", "boosted"], "invalid choice", 2),
     (["--cv", "1"], "--cv must be at least 2", 2),
     (["--margin", "-1"], "--margin must be a finite number >= 0", 2),
     (["--repeats", "0"], "--repeats must be at least 1", 2),
     (["--out", "table.txt"], "tables are written as", 2),
     (["--cv", "200"], "too few for cv = 200 folds", 1)],
)
def test_evaluate_bad_input_fails_cleanly(kiln_file, tmp_path, capsys, arguments, message,
                                         code):
    path, _ = kiln_file
    assert main(["evaluate", str(path), "--target", "strength", *arguments]) == code
    assert message in capsys.readouterr().err
    assert not (tmp_path / "table.txt").exists()


def test_real_suite_has_named_open_data_sets():
    sets = real_datasets()
    regression = [d for d in sets if not d.classification]
    classification = [d for d in sets if d.classification]
    assert len(regression) >= 6 and len(classification) >= 2
    for data in sets:
        assert data.source.split(",")[0] in ("scikit-learn", "statsmodels")
        assert data.X.shape == (data.y.shape[0], len(data.feature_names))
        assert np.all(np.isfinite(data.X)) and data.X.shape[0] >= 150
        assert data.target not in data.feature_names
    # diabetes as bundled: 442 rows, 10 inputs (Efron et al. 2004, from scikit-learn's docs)
    diabetes = next(d for d in sets if d.name == "diabetes")
    assert diabetes.X.shape == (442, 10)


def test_real_suite_harness_runs_and_reports_every_feature_set():
    stream = io.StringIO()
    results = run_real(True, stream, names=["grunfeld"], forests=("ET",))
    text = stream.getvalue()
    assert "statsmodels, statsmodels.datasets.grunfeld" in text
    for needle in ("PCA", "PLS", "SIR+in", "OPG", "CV choice", "same forest raw",
                   "best raw forest"):
        assert needle in text
    summary = results["summaries"]["ET/grunfeld"]
    assert summary["n_folds"] == 3 and np.isfinite(summary["change"]["CV choice"])


def test_a_loss_on_a_single_fold_is_within_one_standard_error():
    from splitlift.bench.real import CHOICE, _outcome_counts, _summarise

    # one fold of ten differs by d: the mean difference d/10 equals its standard error
    # (sample sd d/sqrt(10), over sqrt(10)) exactly, so it is "within one SE", whatever
    # the rounding of the two computed numbers
    outcomes = []
    # (a strict "mean > SE" counts the first, third and fourth as beyond, by one ulp)
    for loss in (0.0023695332575885417, 0.1, 1.0 / 3.0, 0.25):
        records = [{"errors": {"raw": 1.0 + 0.01 * k, CHOICE: 1.0 + 0.01 * k + (loss if k == 3
                                                                              else 0.0)},
                    "choice": None, "seconds": {"raw": 0.0}} for k in range(10)]
        summary = _summarise(records, ["raw", CHOICE])
        outcomes.append(_outcome_counts(np.array([summary["change"][CHOICE]]),
                                        np.array([summary["change_se"][CHOICE]])))
    assert outcomes == [(0, 1, 0)] * 4
    # a loss on two folds is beyond one SE (mean 2d/10 against SE 0.133 d)
    assert _outcome_counts(np.array([0.2]), np.array([0.133])) == (0, 0, 1)
