"""The command line on data larger than memory: Parquet folders and globs, schedulers,
partitioned Parquet output. Runs ``splitlift`` in this process (``cli.main``), and once
in a subprocess against the real LocalCluster of the ``dask_client`` fixture."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy.linalg import subspace_angles

import splitlift as sl
from splitlift import cli, large_data

NAMES = ["temperature", "pressure", "flow", "humidity"]


def run(capsys, *arguments):
    """``splitlift ARGUMENTS`` in this process: (exit code, stdout, stderr)."""
    code = cli.main(list(arguments))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    """Three Parquet files of one synthetic plant log (invented data)."""
    folder = tmp_path_factory.mktemp("plant") / "log"
    folder.mkdir()
    rng = np.random.default_rng(20261208)
    parts = []
    for index in range(3):
        X = rng.standard_normal((2000, 4))
        part = pd.DataFrame(X, columns=NAMES)
        part["yield_"] = X[:, 0] - X[:, 1] + 0.3 * X[:, 2] ** 2 + 0.1 * rng.standard_normal(2000)
        part.to_parquet(folder / f"day-{index}.parquet", index=False)
        parts.append(part)
    return folder, pd.concat(parts, ignore_index=True)


def test_fit_on_a_folder_equals_the_in_memory_fit(dataset, tmp_path, capsys):
    folder, table = dataset
    code, _, errors = run(capsys, "fit", str(folder), "--target", "yield_", "--dim", "2",
                          "--out", str(tmp_path / "lift.npz"), "--scheduler", "threads")
    assert code == 0, errors
    saved = sl.LiftMatrix.load(tmp_path / "lift.npz")
    assert saved.feature_names == NAMES
    memory = sl.DirectionLift(sl.SlicedInverse(dim=2), random_state=0).fit(
        table[NAMES], table["yield_"])
    assert subspace_angles(saved.subspace_basis, memory.subspace_basis_).max() < 1e-10


def test_fit_on_a_glob_runs_on_a_cluster_address(dataset, tmp_path, dask_client):
    folder, _ = dataset
    result = subprocess.run(
        [sys.executable, "-m", "splitlift.cli", "fit", str(folder / "day-*.parquet"), "--target",
         "yield_", "--estimator", "SlicedAverageVariance", "--dim", "2", "--out",
         str(tmp_path / "lift.npz"),
         "--scheduler", dask_client.scheduler.address],
        capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stderr
    assert "lift written to" in result.stdout


def test_transform_writes_partitioned_parquet(dataset, tmp_path, capsys):
    folder, table = dataset
    assert run(capsys, "fit", str(folder), "--target", "yield_", "--dim", "2",
               "--out", str(tmp_path / "lift.npz"))[0] == 0
    code, out, errors = run(capsys, "transform", str(tmp_path / "lift.npz"),
                            str(folder / "*.parquet"), "--out", str(tmp_path / "lifted"),
                            "--scheduler", "processes")
    assert code == 0, errors
    assert "6000 rows" in out
    written = sorted(path.name for path in (tmp_path / "lifted").iterdir())
    assert written == ["part-00000.parquet", "part-00001.parquet", "part-00002.parquet"]
    lifted = pd.read_parquet(tmp_path / "lifted")
    lift = sl.LiftMatrix.load(tmp_path / "lift.npz")
    assert list(lifted.columns) == lift.output_feature_names()
    np.testing.assert_allclose(lifted.to_numpy(), lift.apply(table[NAMES].to_numpy()),
                               atol=1e-12)
    # a second run replaces the parts of the first, all at once
    code, _, errors = run(capsys, "transform", str(tmp_path / "lift.npz"),
                          str(folder / "day-0.parquet"), "--out", str(tmp_path / "lifted"))
    assert code == 0, errors
    assert [p.name for p in (tmp_path / "lifted").iterdir()] == ["part-00000.parquet"]


@pytest.mark.parametrize("case", [
    ("glob matching nothing", lambda d, t: ["fit", str(t / "none-*.parquet"), "--target",
                                            "yield_", "--out", str(t / "lift.npz")],
     "no Parquet files found"),
    ("unknown target", lambda d, t: ["fit", str(d), "--target", "output", "--out",
                                     str(t / "lift.npz")], "target column 'output' is not"),
    ("unreachable cluster", lambda d, t: ["fit", str(d), "--target", "yield_", "--out",
                                          str(t / "lift.npz"), "--scheduler",
                                          "tcp://127.0.0.1:9"], "cannot reach the Dask"),
    ("output folder is the input", lambda d, t: ["transform", str(t / "lift.npz"),
                                                 str(d / "*.parquet"), "--out", str(d)],
     "would destroy the input"),
], ids=lambda case: case[0] if isinstance(case, tuple) else None)
def test_bad_large_data_runs_fail_with_the_fix(dataset, tmp_path, case, capsys, monkeypatch):
    monkeypatch.setattr(large_data, "CONNECT_TIMEOUT", "1s")
    folder, table = dataset
    sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(table[NAMES], table["yield_"]).save(
        tmp_path / "lift.npz")
    _, arguments, words = case
    code, out, errors = run(capsys, *arguments(folder, tmp_path))
    assert code == 1, out
    assert words in errors
