"""The command line's file workflow, end to end through subprocesses."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import splitlift as sl
from splitlift.datasets import make_kiln_problem


def run(*arguments):
    return subprocess.run([sys.executable, "-m", "splitlift.cli", *arguments],
                          capture_output=True, text=True, timeout=300)


@pytest.fixture
def data_file(tmp_path):
    problem = make_kiln_problem(600, random_state=2)
    table = pd.DataFrame(problem.X, columns=problem.feature_names)
    table["strength"] = problem.y
    path = tmp_path / "kiln.csv"
    table.to_csv(path, index=False, float_format="%.17g")
    return path, table, problem


def test_fit_then_transform_reproduces_direction_lift_exactly(data_file, tmp_path):
    path, table, problem = data_file
    lift_path, out_path, report_path = (tmp_path / "lift.npz", tmp_path / "lifted.csv",
                                        tmp_path / "report.txt")
    fitted = run("fit", str(path), "--target", "strength", "--dim", "2",
                 "--out", str(lift_path), "--report", str(report_path))
    assert fitted.returncode == 0, fitted.stderr
    assert "splitlift lift report" in fitted.stdout and report_path.read_text().strip()
    applied = run("transform", str(lift_path), str(path), "--out", str(out_path))
    assert applied.returncode == 0, applied.stderr
    # the same fit in the library, on the same parsed data, with the command line's default seed
    reread = pd.read_csv(path)
    features = reread[problem.feature_names]
    expected = sl.DirectionLift(sl.SlicedInverse(dim=2), random_state=0).fit(
        features, reread["strength"])
    lifted = pd.read_csv(out_path).to_numpy()
    np.testing.assert_array_equal(lifted, expected.transform(features))


def test_report_command_with_reference(data_file, tmp_path):
    path, _, problem = data_file
    lift_path, reference_path = tmp_path / "lift.npz", tmp_path / "truth.npy"
    np.save(reference_path, problem.true_basis)
    assert run("fit", str(path), "--target", "strength", "--out", str(lift_path)).returncode == 0
    shown = run("report", str(lift_path), "--reference", str(reference_path))
    assert shown.returncode == 0, shown.stderr
    assert "reference subspace" in shown.stdout and "angles to estimate" in shown.stdout


@pytest.mark.parametrize("method", ["save", "phd", "opg", "ade"])
def test_fit_with_each_method(data_file, tmp_path, method):
    path, _, _ = data_file
    dim = "1" if method == "ade" else "2"
    result = run("fit", str(path), "--target", "strength", "--method", method, "--dim", dim,
                 "--out", str(tmp_path / "lift.npz"))
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "lift.npz").exists()


def test_missing_target_column_is_a_data_error_with_no_output(data_file, tmp_path):
    path, _, _ = data_file
    out = tmp_path / "lift.npz"
    result = run("fit", str(path), "--target", "yield", "--out", str(out))
    assert result.returncode == 1
    assert "target column 'yield' is not in the data" in result.stderr
    assert "Traceback" not in result.stderr and not out.exists()


@pytest.mark.parametrize("damage", ["truncate", "garbage"])
def test_corrupt_lift_file_is_refused_with_no_output(data_file, tmp_path, damage):
    path, _, _ = data_file
    lift_path, out = tmp_path / "lift.npz", tmp_path / "lifted.csv"
    assert run("fit", str(path), "--target", "strength", "--out", str(lift_path)).returncode == 0
    content = lift_path.read_bytes()
    lift_path.write_bytes(content[: len(content) // 3] if damage == "truncate" else b"not a lift")
    result = run("transform", str(lift_path), str(path), "--out", str(out))
    assert result.returncode == 1 and "not a readable lift file" in result.stderr
    assert "Traceback" not in result.stderr and not out.exists()


def test_data_with_other_columns_than_the_lift_is_refused(data_file, tmp_path):
    path, table, _ = data_file
    lift_path, out = tmp_path / "lift.npz", tmp_path / "lifted.csv"
    assert run("fit", str(path), "--target", "strength", "--out", str(lift_path)).returncode == 0
    other = tmp_path / "other.csv"
    table.drop(columns=["fan_draft"]).to_csv(other, index=False)
    result = run("transform", str(lift_path), str(other), "--out", str(out))
    assert result.returncode == 1 and "lacks the column(s) ['fan_draft']" in result.stderr
    assert not out.exists()


def test_non_numeric_feature_and_bad_options(data_file, tmp_path):
    path, table, _ = data_file
    labelled = tmp_path / "labelled.csv"
    table.assign(batch="A").to_csv(labelled, index=False)
    out = tmp_path / "lift.npz"
    result = run("fit", str(labelled), "--target", "strength", "--out", str(out))
    assert result.returncode == 1 and "not numeric" in result.stderr and not out.exists()
    result = run("fit", str(path), "--target", "strength", "--dim", "zero", "--out", str(out))
    assert result.returncode == 2 and "Traceback" not in result.stderr
    result = run("fit", str(path), "--target", "strength", "--complement-weight", "1.5",
                 "--out", str(out))
    assert result.returncode == 2 and not out.exists()
    result = run("fit", str(tmp_path / "absent.csv"), "--target", "strength", "--out", str(out))
    assert result.returncode == 1 and "does not exist" in result.stderr


def test_score_command_ranks_candidates_and_flags_bad_ones(data_file, tmp_path):
    path, _, problem = data_file
    d = len(problem.feature_names)
    truth, axis, broken = tmp_path / "truth.npz", tmp_path / "axis.npy", tmp_path / "flat.csv"
    sl.LiftMatrix.from_subspace(problem.true_basis).save(truth)
    np.save(axis, np.eye(d))
    np.savetxt(broken, np.ones((3, d)), delimiter=",")  # rank 1 < d
    reference, table_path, chart = tmp_path / "ref.npy", tmp_path / "rank.csv", tmp_path / "r.png"
    np.save(reference, problem.true_basis)
    result = run("score", str(truth), str(axis), str(broken), "--data", str(path),
                 "--target", "strength", "--reference", str(reference), "--out", str(table_path),
                 "--plot", str(chart))
    assert result.returncode == 0, result.stderr
    ranking = pd.read_csv(table_path)
    assert ranking["name"].iloc[0] == str(truth)  # candidates are named by their paths
    flat = ranking[ranking["name"] == str(broken)].iloc[0]
    assert not flat["valid"] and "rank" in flat["reason"]
    assert chart.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_fit_writes_plots(data_file, tmp_path):
    path, _, _ = data_file
    folder = tmp_path / "plots"
    result = run("fit", str(path), "--target", "strength", "--out", str(tmp_path / "lift.npz"),
                 "--plot", str(folder))
    assert result.returncode == 0, result.stderr
    pictures = sorted(p.name for p in folder.iterdir())
    assert "eigenvalues.png" in pictures and "sufficient_summary.png" in pictures
