"""A catalogue of bad command lines, each answered by a one-line error.

Every case runs ``splitlift`` in a folder of prepared files and checks the
exit code (2 usage, 1 data or file), that stderr is a short message of ours
(no traceback), the words that name the problem, and that no file in the
folder changed or appeared: inputs keep their hash, and no output or
temporary is left behind. Existing outputs from an earlier run are part of
the folder, so a failed run must also leave them as they were.
"""

import hashlib
import json
import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import splitlift as sl
from splitlift import cli

USAGE, DATA = 2, 1


def synthetic_table(n_samples=120, seed=0) -> pd.DataFrame:
    """Invented data (synthetic): five sensor columns and a response y."""
    rng = np.random.default_rng(seed)
    table = pd.DataFrame(rng.standard_normal((n_samples, 5)), columns=list("abcde"))
    table["y"] = table["a"] - table["b"] + 0.1 * rng.standard_normal(n_samples)
    return table


def _tamper(source: Path, target: Path, change) -> None:
    with np.load(source) as archive:
        contents = {name: archive[name] for name in archive.files}
    metadata = json.loads(contents["metadata"].tobytes().decode())
    change(metadata, contents)
    contents["metadata"] = np.frombuffer(json.dumps(metadata).encode(), dtype=np.uint8)
    np.savez(target, **contents)


@pytest.fixture(scope="module")
def workspace(tmp_path_factory) -> Path:
    """A folder of good and bad inputs, and outputs of an earlier run."""
    folder = tmp_path_factory.mktemp("catalogue")
    good = synthetic_table()
    good.to_csv(folder / "good.csv", index=False)
    good.to_csv(folder / "notes.txt", index=False)  # CSV data with a .txt suffix
    good.to_parquet(folder / "good.parquet")
    good.head(6).to_csv(folder / "six.csv", index=False)
    good.head(0).to_csv(folder / "header_only.csv", index=False)
    (folder / "empty.csv").write_bytes(b"")
    good.to_csv(folder / "semicolon.csv", sep=";", index=False)
    good.to_csv(folder / "tabbed.csv", sep="\t", index=False)
    good.assign(y=good["y"].astype(object).where(good.index != 17, "abc")).to_csv(
        folder / "bad_target.csv", index=False)
    good.assign(y=good["y"].where(good.index != 4)).to_csv(folder / "missing_target.csv",
                                                           index=False)
    comma = good.copy()
    comma["y"] = [f"{v:.3f}".replace(".", ",") for v in good["y"]]
    comma.to_csv(folder / "decimal_comma.csv", sep=";", index=False)
    good.assign(b=good["b"].astype(object).where(good.index != 6, "high")).to_csv(
        folder / "text_cell.csv", index=False)
    good.assign(batch="A").to_csv(folder / "categorical.csv", index=False)
    good.assign(c=good["c"].where(good.index != 9)).to_csv(folder / "nan_feature.csv",
                                                           index=False)
    good.assign(d=good["d"].where(good.index != 11, np.inf)).to_csv(folder / "inf_feature.csv",
                                                                    index=False)
    good.assign(flag=good["a"] > 0).to_csv(folder / "bool_feature.csv", index=False)
    good.assign(y=1.0).to_csv(folder / "constant_target.csv", index=False)
    good.drop(columns="e").to_csv(folder / "fewer_columns.csv", index=False)
    (folder / "repeated_header.csv").write_text("a,b,a,y\n" + "1,2,3,4\n" * 30)
    (folder / "broken.json").write_text("[{\"a\": 1,")
    (folder / "broken.parquet").write_bytes(b"PAR1 not really")
    (folder / "sheet.xlsx").write_bytes(b"PK\x03\x04 spreadsheet")
    (folder / "adir").mkdir()
    (folder / "folder.npz").mkdir()
    (folder / "folder.npy").mkdir()
    (folder / "rep.txt").mkdir()  # a folder with a report's name
    (folder / "plotfile").write_text("a file where a plot folder is asked for")
    os.symlink(folder / "good.csv", folder / "link.csv")
    os.symlink(folder / "notes.txt", folder / "link.txt")
    (folder / "sub").mkdir()

    lift = sl.DirectionLift(sl.SlicedInverse(dim=2), random_state=0)
    lift.fit(good[list("abcde")], good["y"])
    lift.save(folder / "lift.npz")
    lift.save(folder / "old_lift.npz")  # an earlier run's output
    (folder / "old_report.txt").write_text(str(lift.report()))
    source = folder / "lift.npz"
    content = source.read_bytes()
    (folder / "truncated.npz").write_bytes(content[: len(content) // 2])
    (folder / "garbage.npz").write_bytes(b"not a lift at all")
    np.savez(folder / "foreign.npz", matrix=np.eye(5))
    tampering = {
        "names_string.npz": lambda m, c: m.update(feature_names="abcde"),
        "names_numbers.npz": lambda m, c: m.update(feature_names=[1, 2, 3, 4, 5]),
        "info_list.npz": lambda m, c: m.update(info=[1, 2]),
        "info_string.npz": lambda m, c: m.update(info="none"),
        "report_number.npz": lambda m, c: m["info"].update(report_text=3.5),
        "schema99.npz": lambda m, c: m.update(schema_version=99),
        "strings.npz": lambda m, c: c.update(matrix=c["matrix"].astype(str)),
        "wrong_shape.npz": lambda m, c: m.update(n_features=7),
    }
    for name, change in tampering.items():
        _tamper(source, folder / name, change)
    np.save(folder / "axes.npy", np.eye(5))
    np.savetxt(folder / "axes.csv", np.eye(5), delimiter=",")
    np.savetxt(folder / "axes.txt", np.eye(5))
    np.save(folder / "truth.npy", np.eye(5)[:, :2])
    (folder / "broken.npy").write_bytes(b"\x93NUMPY garbage")
    return folder


def snapshot(folder: Path) -> dict[str, str]:
    """Hash of every file under ``folder`` (links by their target path)."""
    state = {}
    for path in sorted(folder.rglob("*")):
        key = str(path.relative_to(folder))
        if path.is_symlink():
            state[key] = "link to " + os.readlink(path)
        elif path.is_file():
            state[key] = hashlib.sha256(path.read_bytes()).hexdigest()
        else:
            state[key] = "folder"
    return state


FIT = ["fit", "good.csv", "--target", "y"]
OUT = ["--out", "new_lift.npz"]
TRANSFORM = ["transform", "lift.npz", "good.csv"]
SCORE = ["score", "axes.npy", "--data", "good.csv", "--target", "y"]

# (id, arguments, exit code, words that must appear in the message)
CASES = [
    # ---------------------------------------------------------------- usage (exit 2)
    ("no-command", [], USAGE, ["required", "command"]),
    ("unknown-command", ["fly"], USAGE, ["invalid choice", "fly"]),
    ("unknown-option", FIT + OUT + ["--colour", "red"], USAGE, ["unrecognized", "--colour"]),
    ("fit-no-target", ["fit", "good.csv"] + OUT, USAGE, ["required", "--target"]),
    ("fit-no-out", FIT, USAGE, ["required", "--out"]),
    ("dim-zero", FIT + OUT + ["--dim", "0"], USAGE, ["--dim", "at least 1"]),
    ("dim-negative", FIT + OUT + ["--dim", "-3"], USAGE, ["--dim"]),
    ("dim-word", FIT + OUT + ["--dim", "two"], USAGE, ["--dim", "positive integer or 'auto'"]),
    ("dim-float", FIT + OUT + ["--dim", "1.5"], USAGE, ["--dim", "'1.5'"]),
    ("unknown-estimator", FIT + OUT + ["--estimator", "pca"], USAGE,
     ["--estimator", "unknown estimator 'pca'", "GradientOuterProduct"]),
    ("unknown-old-method", FIT + OUT + ["--method", "pca"], USAGE,
     ["--method", "use --estimator"]),
    ("weight-above-one", FIT + OUT + ["--complement-weight", "1.5"], USAGE,
     ["--complement-weight", "between 0 and 1"]),
    ("weight-zero", FIT + OUT + ["--complement-weight", "0"], USAGE, ["between 0 and 1"]),
    ("weight-nan", FIT + OUT + ["--complement-weight", "nan"], USAGE, ["between 0 and 1"]),
    ("weight-word", FIT + OUT + ["--complement-weight", "small"], USAGE,
     ["--complement-weight", "invalid float"]),
    ("slices-one", FIT + OUT + ["--slices", "1"], USAGE, ["--slices", "at least 2"]),
    ("slices-with-phd", FIT + OUT + ["--estimator", "HessianDirections", "--slices", "4"], USAGE,
     ["--slices applies", "HessianDirections"]),
    ("seed-word", FIT + OUT + ["--seed", "lucky"], USAGE, ["--seed", "invalid int"]),
    ("sep-two-chars", FIT + OUT + ["--sep", ";;"], USAGE, ["--sep", "one character"]),
    ("sep-with-parquet", ["fit", "good.parquet", "--target", "y", "--sep", ";"] + OUT, USAGE,
     ["--sep applies to CSV", "parquet"]),
    ("data-spreadsheet", ["fit", "sheet.xlsx", "--target", "y"] + OUT, USAGE,
     ["unknown data file type", ".xlsx", ".csv"]),
    ("features-repeated", FIT + OUT + ["--features", "a,b,a"], USAGE, ["--features", "'a'",
                                                                        "more than once"]),
    ("features-empty", FIT + OUT + ["--features", ","], USAGE, ["--features names no column"]),
    ("lift-out-txt", FIT + ["--out", "lift.txt"], USAGE, ["--out", ".npz", "'.txt'"]),
    ("lift-out-no-suffix", FIT + ["--out", "lift"], USAGE, ["--out", ".npz", "no suffix"]),
    ("lift-out-csv", FIT + ["--out", "good.csv"], USAGE, ["--out", ".npz"]),
    ("report-csv", FIT + OUT + ["--report", "report.csv"], USAGE,
     ["--report", ".txt or .md or .json"]),
    ("report-is-data", ["fit", "notes.txt", "--target", "y"] + OUT + ["--report", "notes.txt"],
     USAGE, ["--report", "is the input DATA", "destroy"]),
    ("report-is-data-dotted", ["fit", "notes.txt", "--target", "y"] + OUT
     + ["--report", "sub/../notes.txt"], USAGE, ["is the input DATA"]),
    ("report-is-data-by-link", ["fit", "notes.txt", "--target", "y"] + OUT
     + ["--report", "link.txt"], USAGE, ["--report link.txt", "is the input DATA"]),
    ("plot-is-out", FIT + ["--out", "x.npz", "--plot", "x.npz"], USAGE,
     ["--plot x.npz", "--out x.npz", "same file"]),
    ("plot-looks-like-png", FIT + OUT + ["--plot", "chart.png"], USAGE,
     ["--plot chart.png", "folder"]),
    ("transform-swapped", ["transform", "good.csv", "lift.npz", "--out", "t.csv"], USAGE,
     ["LIFT good.csv", ".npz", "LIFT comes before DATA"]),
    ("transform-out-is-data", TRANSFORM + ["--out", "good.csv"], USAGE,
     ["--out good.csv", "is the input DATA"]),
    ("transform-out-is-data-by-link", TRANSFORM + ["--out", "link.csv"], USAGE,
     ["--out link.csv", "is the input DATA"]),
    ("transform-out-is-lift", TRANSFORM + ["--out", "lift.npz"], USAGE,
     ["--out lift.npz", ".csv, .tsv, .parquet, .json"]),
    ("transform-out-xlsx", TRANSFORM + ["--out", "t.xlsx"], USAGE,
     ["tables are written as", "'.xlsx'"]),
    # (an --out without suffix is a folder for partitioned Parquet: tests/test_cli_large_data.py)
    ("transform-out-unknown-suffix", TRANSFORM + ["--out", "lifted.xlsx"], USAGE,
     ["tables are written as", ".xlsx"]),
    ("transform-no-out", TRANSFORM, USAGE, ["required", "--out"]),
    ("score-out-is-data", SCORE + ["--out", "good.csv"], USAGE, ["--out good.csv", "is the input"]),
    ("score-out-is-candidate", ["score", "axes.csv", "--data", "good.csv", "--target", "y",
                                "--out", "axes.csv"], USAGE, ["is the input CANDIDATE"]),
    ("score-out-txt", SCORE + ["--out", "ranking.txt"], USAGE, ["tables are written as"]),
    ("score-plot-jpg", SCORE + ["--out", "r.csv", "--plot", "chart.jpg"], USAGE,
     ["--plot chart.jpg", ".png"]),
    ("score-candidate-txt", ["score", "axes.txt", "--data", "good.csv", "--target", "y",
                             "--out", "r.csv"], USAGE,
     ["CANDIDATE axes.txt", ".npz or .npy or .csv"]),
    ("score-reference-txt", SCORE + ["--reference", "axes.txt", "--out", "r.csv"], USAGE,
     ["--reference axes.txt", ".npy or .csv"]),
    ("report-lift-csv", ["report", "good.csv"], USAGE, ["LIFT good.csv", ".npz"]),
    ("demo-one-sample", ["demo", "--samples", "1"], USAGE, ["--samples", "at least 2"]),
    ("bench-json-txt", ["bench", "--json", "out.txt"], USAGE, ["--json out.txt", ".json"]),
    # ---------------------------------------------------------------- data and files (exit 1)
    ("data-missing", ["fit", "absent.csv", "--target", "y"] + OUT, DATA,
     ["absent.csv", "does not exist"]),
    # a folder is read as a Parquet dataset (tests/test_cli_large_data.py); this one holds none
    ("data-is-folder", ["fit", "adir", "--target", "y"] + OUT, DATA,
     ["adir", "no Parquet files found"]),
    ("data-empty", ["fit", "empty.csv", "--target", "y"] + OUT, DATA, ["empty"]),
    ("data-header-only", ["fit", "header_only.csv", "--target", "y"] + OUT, DATA,
     ["has a header but no data rows"]),
    ("data-semicolon", ["fit", "semicolon.csv", "--target", "y"] + OUT, DATA,
     ["single column", "';'", "--sep ';'"]),
    ("data-tab-in-csv", ["fit", "tabbed.csv", "--target", "y"] + OUT, DATA,
     ["single column", "tab", "--sep '\\t'"]),
    ("data-repeated-header", ["fit", "repeated_header.csv", "--target", "y"] + OUT, DATA,
     ["['a'] more than once", "own name"]),
    ("ade-dim-two-in-option-terms", FIT + OUT + ["--estimator", "AverageDerivative", "--dim",
                                                 "2"], DATA,
     ["--dim 2", "--slices"]),
    ("data-broken-json", ["fit", "broken.json", "--target", "y"] + OUT, DATA,
     ["broken.json", "not a readable JSON file"]),
    ("data-broken-parquet", ["fit", "broken.parquet", "--target", "y"] + OUT, DATA,
     ["broken.parquet", "not a readable Parquet file"]),
    ("target-text-cell", ["fit", "bad_target.csv", "--target", "y"] + OUT, DATA,
     ["target column 'y'", "'abc'", "data row 18"]),
    ("target-missing-cell", ["fit", "missing_target.csv", "--target", "y"] + OUT, DATA,
     ["target column 'y'", "missing value", "data row 5"]),
    ("target-decimal-comma", ["fit", "decimal_comma.csv", "--target", "y", "--sep", ";"] + OUT,
     DATA, ["target column 'y'", "decimal comma"]),
    ("target-constant", ["fit", "constant_target.csv", "--target", "y"] + OUT, DATA,
     ["constant"]),
    ("target-absent", ["fit", "good.csv", "--target", "strength"] + OUT, DATA,
     ["target column 'strength' is not in the data"]),
    ("feature-text-cell", ["fit", "text_cell.csv", "--target", "y"] + OUT, DATA,
     ["feature column 'b'", "'high'", "data row 7"]),
    ("feature-categorical", ["fit", "categorical.csv", "--target", "y"] + OUT, DATA,
     ["feature column 'batch'", "not numeric", "--features"]),
    ("feature-nan", ["fit", "nan_feature.csv", "--target", "y"] + OUT, DATA,
     ["feature column 'c'", "missing value", "data row 10"]),
    ("feature-inf", ["fit", "inf_feature.csv", "--target", "y"] + OUT, DATA,
     ["feature column 'd'", "inf", "data row 12"]),
    ("feature-bool", ["fit", "bool_feature.csv", "--target", "y"] + OUT, DATA,
     ["feature column 'flag'", "true/false"]),
    ("features-absent", FIT + OUT + ["--features", "a,zz"], DATA, ["['zz']", "not in the data"]),
    ("features-include-target", FIT + OUT + ["--features", "a,y"], DATA,
     ["'y'", "also listed as a feature"]),
    ("dim-above-features", FIT + OUT + ["--dim", "20"], DATA,
     ["--dim 20", "5 feature columns", "--dim 5 or less"]),
    ("rows-fewer-than-slices", ["fit", "six.csv", "--target", "y"] + OUT, DATA,
     ["6 rows", "10 slices", "--slices 3"]),
    ("rows-fewer-than-save-slices", ["fit", "six.csv", "--target", "y", "--estimator",
                                     "SlicedAverageVariance", "--slices", "4"] + OUT, DATA,
     ["6 rows", "4 slices"]),
    ("out-folder-missing", FIT + ["--out", "nowhere/lift.npz"], DATA,
     ["folder of --out nowhere/lift.npz does not exist", "create it"]),
    ("out-is-folder", FIT + ["--out", "adir"], USAGE, ["--out adir", ".npz"]),
    ("report-is-folder", FIT + OUT + ["--report", "rep.txt"], DATA,
     ["--report rep.txt is a directory"]),
    ("plot-is-file", FIT + OUT + ["--plot", "plotfile"], DATA, ["--plot plotfile is a file"]),
    ("plot-parent-missing", FIT + OUT + ["--plot", "no/such/plots"], DATA,
     ["--plot no/such/plots", "does not exist"]),
    ("fit-failing-over-old-result", ["fit", "six.csv", "--target", "y", "--out",
                                     "old_lift.npz", "--report", "old_report.txt"], DATA,
     ["6 rows"]),
    ("lift-missing", ["transform", "absent.npz", "good.csv", "--out", "t.csv"], DATA,
     ["absent.npz", "does not exist"]),
    ("lift-truncated", ["transform", "truncated.npz", "good.csv", "--out", "t.csv"], DATA,
     ["not a readable lift file", "save the lift again"]),
    ("lift-garbage", ["transform", "garbage.npz", "good.csv", "--out", "t.csv"], DATA,
     ["not a readable lift file"]),
    ("lift-foreign", ["transform", "foreign.npz", "good.csv", "--out", "t.csv"], DATA,
     ["no metadata"]),
    ("lift-names-string", ["transform", "names_string.npz", "good.csv", "--out", "t.csv"], DATA,
     ["'feature_names' should be null or a list of distinct strings"]),
    ("lift-names-numbers", ["transform", "names_numbers.npz", "good.csv", "--out", "t.csv"],
     DATA, ["'feature_names'"]),
    ("lift-info-list", ["transform", "info_list.npz", "good.csv", "--out", "t.csv"], DATA,
     ["'info' should be an object", "an array"]),
    ("lift-info-string", ["report", "info_string.npz"], DATA, ["'info' should be an object"]),
    ("lift-report-number", ["report", "report_number.npz"], DATA,
     ["'report_text' should be a string"]),
    ("lift-schema-99", ["report", "schema99.npz"], DATA, ["schema version 99"]),
    ("lift-strings", ["transform", "strings.npz", "good.csv", "--out", "t.csv"], DATA,
     ["not real numbers"]),
    ("lift-wrong-shape", ["transform", "wrong_shape.npz", "good.csv", "--out", "t.csv"], DATA,
     ["disagrees with the metadata"]),
    ("lift-is-folder", ["report", "folder.npz"], DATA, ["folder.npz is a directory"]),
    ("transform-data-missing-column", ["transform", "lift.npz", "fewer_columns.csv", "--out",
                                       "t.csv"], DATA, ["lacks the column(s) ['e']"]),
    ("transform-data-text-cell", ["transform", "lift.npz", "text_cell.csv", "--out", "t.csv"],
     DATA, ["feature column 'b'", "'high'", "data row 7"]),
    ("transform-data-header-only", ["transform", "lift.npz", "header_only.csv", "--out",
                                    "t.csv"], DATA, ["no data rows"]),
    ("transform-data-folder", ["transform", "lift.npz", "adir", "--out", "t.csv"], DATA,
     ["no Parquet files found at adir"]),
    ("report-reference-missing", ["report", "lift.npz", "--reference", "absent.npy"], DATA,
     ["absent.npy", "does not exist"]),
    ("report-reference-broken", ["report", "lift.npz", "--reference", "broken.npy"], DATA,
     ["broken.npy", "not a readable matrix file"]),
    ("score-candidate-missing", ["score", "absent.npy", "--data", "good.csv", "--target", "y",
                                 "--out", "r.csv"], DATA, ["CANDIDATE absent.npy",
                                                           "does not exist"]),
    ("score-data-header-only", ["score", "axes.npy", "--data", "header_only.csv", "--target",
                                "y", "--out", "r.csv"], DATA, ["no data rows"]),
    ("score-target-text-cell", ["score", "axes.npy", "--data", "bad_target.csv", "--target",
                                "y", "--out", "r.csv"], DATA, ["'abc'", "data row 18"]),
    ("score-reference-folder", SCORE + ["--reference", "folder.npy", "--out", "r.csv"], DATA,
     ["--reference folder.npy is a directory"]),
    ("report-reference-folder", ["report", "lift.npz", "--reference", "folder.npy"], DATA,
     ["folder.npy is a directory"]),
]


@pytest.mark.parametrize("arguments, code, words", [case[1:] for case in CASES],
                         ids=[case[0] for case in CASES])
def test_bad_command_line(workspace, monkeypatch, capsys, arguments, code, words):
    monkeypatch.chdir(workspace)
    before = snapshot(workspace)
    assert cli.main(list(arguments)) == code
    captured = capsys.readouterr()
    message = captured.err
    assert "Traceback" not in message
    lines = message.strip().splitlines()
    assert 1 <= len(lines) <= 2 and all(line.startswith("splitlift") for line in lines), message
    assert len(message) < 600 and "error:" in lines[-1]
    for word in words:
        assert word.lower() in message.lower(), (word, message)
    assert snapshot(workspace) == before  # inputs unchanged, no output, no temporary


def test_the_catalogue_is_large_and_names_are_unique():
    names = [case[0] for case in CASES]
    assert len(names) == len(set(names)) and len(names) >= 60


# ------------------------------------------------ faults a catalogue of arguments cannot reach
def test_missing_matplotlib_is_refused_before_any_work(workspace, monkeypatch, capsys):
    monkeypatch.chdir(workspace)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    monkeypatch.setattr("splitlift.transformer.DirectionLift.fit",
                        lambda *a, **k: pytest.fail("work started before the check"))
    before = snapshot(workspace)
    assert cli.main(FIT + OUT + ["--plot", "plots"]) == DATA
    assert "pip install 'splitlift[plot]'" in capsys.readouterr().err
    monkeypatch.setattr("splitlift.scoring.score_candidates",
                        lambda *a, **k: pytest.fail("work started before the check"))
    assert cli.main(SCORE + ["--out", "r.csv", "--plot", "r.png"]) == DATA
    assert "matplotlib" in capsys.readouterr().err
    assert snapshot(workspace) == before


def test_parquet_output_without_pyarrow_is_refused_up_front(workspace, monkeypatch, capsys):
    monkeypatch.chdir(workspace)
    monkeypatch.setattr("splitlift.data_files.parquet_available", lambda: False)
    before = snapshot(workspace)
    assert cli.main(TRANSFORM + ["--out", "t.parquet"]) == DATA
    assert "needs pyarrow" in capsys.readouterr().err
    assert snapshot(workspace) == before


def test_internal_errors_are_one_line_with_exit_3(workspace, monkeypatch, capsys):
    monkeypatch.chdir(workspace)
    monkeypatch.delenv("SPLITLIFT_TRACEBACK", raising=False)

    def broken(*arguments, **options):
        raise TypeError("unexpected thing")

    monkeypatch.setattr("splitlift.transformer.DirectionLift.fit", broken)
    assert cli.main(FIT + OUT) == cli.EXIT_INTERNAL
    message = capsys.readouterr().err
    assert message.count("\n") == 1 and "internal error: TypeError: unexpected thing" in message
    assert "SPLITLIFT_TRACEBACK=1" in message
    monkeypatch.setenv("SPLITLIFT_TRACEBACK", "1")
    with pytest.raises(TypeError):
        cli.main(FIT + OUT)
