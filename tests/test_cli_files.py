"""The command line's file workflow, end to end through subprocesses."""

import json
import subprocess
import sys
from pathlib import Path

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
    assert "reference subspace" in shown.stdout and "angles to the estimate" in shown.stdout


@pytest.mark.parametrize("estimator", ["SlicedAverageVariance", "HessianDirections",
                                       "gradientouterproduct", "AverageDerivative"])
def test_fit_with_each_estimator(data_file, tmp_path, estimator):
    path, _, _ = data_file
    dim = "1" if estimator == "AverageDerivative" else "2"
    result = run("fit", str(path), "--target", "strength", "--estimator", estimator,
                 "--dim", dim, "--out", str(tmp_path / "lift.npz"))
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "lift.npz").exists()


def test_old_method_option_still_works_with_a_deprecation_warning(data_file, tmp_path):
    path, _, _ = data_file
    result = run("fit", str(path), "--target", "strength", "--method", "opg", "--dim", "2",
                 "--out", str(tmp_path / "lift.npz"))
    assert result.returncode == 0, result.stderr
    assert "--method is deprecated" in result.stderr
    assert "--estimator GradientOuterProduct" in result.stderr


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


# ------------------------------------------------ in-process runs of the command line
def run_here(*arguments):
    """``splitlift ...`` in this process: (exit code, stdout, stderr)."""
    import contextlib
    import io

    from splitlift.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(argument) for argument in arguments])
    return code, out.getvalue(), err.getvalue()


def leftovers(folder):
    return [p for p in folder.rglob("*") if p.name.startswith(".splitlift-tmp-")]


@pytest.fixture
def small_data(tmp_path):
    """Synthetic sensor table (invented): five inputs, response y."""
    rng = np.random.default_rng(4)
    table = pd.DataFrame(rng.standard_normal((300, 5)), columns=list("abcde"))
    table["y"] = np.tanh(table["a"] + table["b"]) + 0.1 * rng.standard_normal(300)
    path = tmp_path / "data.csv"
    table.to_csv(path, index=False, float_format="%.17g")
    return path, table


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".json", ".parquet"])
def test_transform_writes_the_format_its_suffix_names(small_data, tmp_path, suffix):
    path, table = small_data
    lift = tmp_path / "lift.npz"
    assert run_here("fit", path, "--target", "y", "--dim", "2", "--out", lift)[0] == 0
    out = tmp_path / f"lifted{suffix}"
    code, _, err = run_here("transform", lift, path, "--out", out)
    assert code == 0, err
    reader = {".csv": pd.read_csv, ".tsv": lambda p: pd.read_csv(p, sep="\t"),
              ".json": lambda p: pd.read_json(p, precise_float=True),
              ".parquet": pd.read_parquet}[suffix]
    expected = sl.LiftMatrix.load(lift).apply(table[list("abcde")].to_numpy())
    written = reader(out)
    # the names DirectionLift gives in Python: subspace directions, then complement ones
    assert list(written.columns) == sl.LiftMatrix.load(lift).output_feature_names()
    assert written.columns[0] == "subspace_0" and written.columns[-1].startswith("complement_")
    np.testing.assert_array_equal(written.to_numpy(), expected)  # full precision every format
    if suffix == ".json":
        assert json.loads(out.read_text())[0].keys() == set(written.columns)
    if suffix == ".parquet":
        assert out.read_bytes()[:4] == b"PAR1"  # Parquet magic number (Parquet format spec)


@pytest.mark.parametrize("suffix", [".json", ".parquet"])
def test_score_table_in_json_and_parquet(small_data, tmp_path, suffix):
    path, _ = small_data
    np.save(tmp_path / "axes.npy", np.eye(5))
    out = tmp_path / f"ranking{suffix}"
    code, _, err = run_here("score", tmp_path / "axes.npy", "--data", path, "--target", "y",
                            "--out", out)
    assert code == 0, err
    table = pd.read_json(out) if suffix == ".json" else pd.read_parquet(out)
    assert table["name"].tolist() == [str(tmp_path / "axes.npy")] and bool(table["valid"][0])


def test_report_as_json_and_text(small_data, tmp_path):
    path, _ = small_data
    for suffix in (".json", ".md"):
        report = tmp_path / f"report{suffix}"
        code, stdout, _ = run_here("fit", path, "--target", "y", "--dim", "2", "--out",
                                   tmp_path / "lift.npz", "--report", report)
        assert code == 0
        if suffix == ".json":
            content = json.loads(report.read_text())
            assert content["dim"] == 2 and content["n_features"] == 5
        else:
            assert report.read_text().strip() in stdout


def test_same_table_read_the_same_way_in_every_format(small_data, tmp_path):
    """CSV, TSV, ';' with --sep, JSON and Parquet copies of one table give one lift."""
    path, table = small_data
    copies = {"data.tsv": lambda p: table.to_csv(p, sep="\t", index=False, float_format="%.17g"),
              "semi.csv": lambda p: table.to_csv(p, sep=";", index=False, float_format="%.17g"),
              "data.json": lambda p: table.to_json(p, orient="records", double_precision=15),
              "data.parquet": lambda p: table.to_parquet(p)}
    lifts = {}
    for name, write in [("data.csv", None), *copies.items()]:
        source = path if write is None else tmp_path / name
        if write is not None:
            write(source)
        extra = ["--sep", ";"] if name == "semi.csv" else []
        code, _, err = run_here("fit", source, "--target", "y", "--dim", "2", *extra,
                                "--out", tmp_path / f"{name}.npz")
        assert code == 0, (name, err)
        lifts[name] = sl.LiftMatrix.load(tmp_path / f"{name}.npz").matrix
    for name in ("data.tsv", "semi.csv", "data.parquet"):
        np.testing.assert_array_equal(lifts[name], lifts["data.csv"])
    # JSON text holds 15 significant digits here, so agreement is to rounding
    np.testing.assert_allclose(lifts["data.json"], lifts["data.csv"], atol=1e-9)


def test_saved_row_index_is_dropped_with_a_note(small_data, tmp_path):
    path, table = small_data
    indexed = tmp_path / "indexed.csv"
    table.to_csv(indexed, float_format="%.17g")  # pandas' default: the index is written too
    code, _, err = run_here("fit", indexed, "--target", "y", "--dim", "2",
                            "--out", tmp_path / "a.npz")
    assert code == 0 and "note: column 'Unnamed: 0' looks like a saved row index" in err
    plain = run_here("fit", path, "--target", "y", "--dim", "2", "--out", tmp_path / "b.npz")
    assert plain[0] == 0
    first, second = (sl.LiftMatrix.load(tmp_path / name) for name in ("a.npz", "b.npz"))
    assert first.feature_names == list("abcde")
    np.testing.assert_array_equal(first.matrix, second.matrix)
    code, _, err = run_here("fit", indexed, "--target", "y", "--dim", "2",
                            "--keep-index-columns", "--out", tmp_path / "c.npz")
    assert code == 0 and "note" not in err
    assert sl.LiftMatrix.load(tmp_path / "c.npz").feature_names[0] == "Unnamed: 0"
    # a column named 'index' counting 0..n-1 is a saved index too; other whole numbers are data
    table.reset_index().assign(count=np.arange(300) % 7).to_csv(tmp_path / "r.csv", index=False)
    code, _, err = run_here("fit", tmp_path / "r.csv", "--target", "y", "--out",
                            tmp_path / "d.npz")
    assert code == 0 and "'index'" in err and "'count'" not in err
    assert "count" in sl.LiftMatrix.load(tmp_path / "d.npz").feature_names


def fit_twice_with_seed(path, folder):
    for run in ("one", "two"):
        code, _, err = run_here("fit", path, "--target", "y", "--estimator",
                                "GradientOuterProduct", "--dim", "auto",
                                "--seed", "7", "--out", folder / f"{run}.npz")
        assert code == 0, err
    return [sl.LiftMatrix.load(folder / f"{run}.npz") for run in ("one", "two")]


def test_seed_reaches_the_lift_and_the_estimator(small_data, tmp_path):
    one, two = fit_twice_with_seed(small_data[0], tmp_path)
    assert one.metadata["lift_params"]["random_state"] == 7
    assert one.metadata["estimator_params"]["random_state"] == 7
    np.testing.assert_array_equal(one.matrix, two.matrix)


def test_same_seed_same_report(small_data, tmp_path):
    one, two = fit_twice_with_seed(small_data[0], tmp_path)
    assert one.metadata["report_text"] == two.metadata["report_text"]


def test_slices_option_sets_the_estimators_slices(small_data, tmp_path):
    path, _ = small_data
    code, _, err = run_here("fit", path, "--target", "y",
                            "--estimator", "SlicedAverageVariance", "--slices", "3",
                            "--dim", "1", "--out", tmp_path / "lift.npz")
    assert code == 0, err
    assert sl.LiftMatrix.load(tmp_path / "lift.npz").metadata["estimator_params"][
        "n_slices"] == 3


def old_result(folder, path):
    """An earlier complete result in ``folder``: lift, report, plots (and an older plot)."""
    code, _, err = run_here("fit", path, "--target", "y", "--dim", "1", "--out",
                            folder / "lift.npz", "--report", folder / "report.txt",
                            "--plot", folder / "plots")
    assert code == 0, err
    (folder / "plots" / "bootstrap_angles.png").write_bytes(b"older plot of ours")
    (folder / "plots" / "mine.txt").write_text("a user's file")
    return {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_full_disk_while_drawing_plots_leaves_the_old_result(small_data, tmp_path, monkeypatch):
    import errno

    from splitlift import plots

    path, _ = small_data
    folder = tmp_path / "result"
    folder.mkdir()
    before = old_result(folder, path)
    written = []

    def full_disk(target, write):
        if written:
            raise OSError(errno.ENOSPC, "No space left on device")
        written.append(target)
        return real_atomic_write(target, write)

    real_atomic_write = plots.atomic_write
    monkeypatch.setattr(plots, "atomic_write", full_disk)
    code, stdout, err = run_here("fit", path, "--target", "y", "--dim", "2", "--out",
                                 folder / "lift.npz", "--report", folder / "report.txt",
                                 "--plot", folder / "plots")
    assert code == 1 and "No space left on device" in err and stdout == ""
    after = {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}
    assert after == before and leftovers(tmp_path) == []
    # on a fresh folder the same fault leaves nothing at all
    written.clear()
    fresh = tmp_path / "fresh"
    fresh.mkdir()
    code, _, _ = run_here("fit", path, "--target", "y", "--out", fresh / "lift.npz",
                          "--report", fresh / "report.txt", "--plot", fresh / "plots")
    assert code == 1 and list(fresh.iterdir()) == []


def test_new_result_replaces_the_old_one_whole(small_data, tmp_path):
    path, _ = small_data
    before = old_result(tmp_path, path)
    code, _, err = run_here("fit", path, "--target", "y", "--dim", "2", "--out",
                            tmp_path / "lift.npz", "--report", tmp_path / "report.txt",
                            "--plot", tmp_path / "plots")
    assert code == 0, err
    names = sorted(p.name for p in (tmp_path / "plots").iterdir())
    assert names == ["eigenvalues.png", "mine.txt", "sufficient_summary.png"]  # older plot gone
    for name in ("lift.npz", "report.txt", "plots/eigenvalues.png"):
        assert (tmp_path / name).read_bytes() != before[Path(name)]
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("command", ["fit", "score", "transform"])
def test_interrupt_or_termination_mid_run_exits_cleanly(small_data, tmp_path, monkeypatch,
                                                        command):
    import os
    import signal

    path, _ = small_data
    lift = tmp_path / "lift.npz"
    assert run_here("fit", path, "--target", "y", "--out", lift)[0] == 0
    np.save(tmp_path / "axes.npy", np.eye(5))
    arguments = {
        "fit": ["fit", path, "--target", "y", "--out", tmp_path / "new.npz", "--report",
                tmp_path / "r.txt", "--plot", tmp_path / "plots"],
        "score": ["score", tmp_path / "axes.npy", "--data", path, "--target", "y", "--out",
                  tmp_path / "s.csv", "--plot", tmp_path / "s.png"],
        "transform": ["transform", lift, path, "--out", tmp_path / "t.csv"],
    }[command]
    before = sorted(p.name for p in tmp_path.iterdir())
    target = {"fit": "splitlift.plots.plot_sufficient_summary",
              "score": "splitlift.plots.plot_candidate_ranking",
              "transform": "splitlift.lift.LiftMatrix.apply"}[command]
    for how, code, words in ((KeyboardInterrupt, 130, "interrupted: stopped by Ctrl-C"),
                             ("SIGTERM", 143, "terminated: stopped by SIGTERM")):
        def stop(*arguments, how=how, **options):
            if how == "SIGTERM":
                os.kill(os.getpid(), signal.SIGTERM)  # the handler raises at once
            raise how

        monkeypatch.setattr(target, stop)
        exit_code, _, err = run_here(*arguments)
        assert exit_code == code and err.count("\n") == 1 and words in err
        assert sorted(p.name for p in tmp_path.iterdir()) == before
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL  # restored after the run
