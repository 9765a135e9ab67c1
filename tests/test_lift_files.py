"""Saving and loading lifts: round trip, atomic writes, corrupt files."""

import os
import zipfile

import numpy as np
import pytest

import splitlift as sl
from splitlift.persistence import atomic_write


@pytest.fixture
def lift():
    basis = np.linalg.qr(np.random.default_rng(0).standard_normal((5, 2)))[0]
    return sl.LiftMatrix.from_subspace(basis, complement_weight=0.1,
                                       feature_names=list("abcde"), metadata={"note": "x"})


def test_round_trip_keeps_everything(lift, tmp_path):
    path = tmp_path / "lift.npz"
    lift.save(path)
    loaded = sl.LiftMatrix.load(path)
    np.testing.assert_array_equal(loaded.matrix, lift.matrix)
    np.testing.assert_array_equal(loaded.subspace_basis, lift.subspace_basis)
    assert loaded.feature_names == list("abcde")
    assert loaded.metadata["note"] == "x" and loaded.metadata["complement_weight"] == 0.1
    assert [p.name for p in tmp_path.iterdir()] == ["lift.npz"]  # no temporary left over


def test_truncated_file_is_a_clear_error(lift, tmp_path):
    path = tmp_path / "lift.npz"
    lift.save(path)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(sl.LiftFileError, match="not a readable lift file"):
        sl.LiftMatrix.load(path)


def test_foreign_npz_and_missing_file_are_refused(tmp_path):
    foreign = tmp_path / "other.npz"
    np.savez(foreign, matrix=np.eye(2))
    with pytest.raises(sl.LiftFileError, match="no metadata"):
        sl.LiftMatrix.load(foreign)
    with pytest.raises(sl.LiftFileError, match="does not exist"):
        sl.LiftMatrix.load(tmp_path / "absent.npz")


def test_unknown_schema_version_is_refused(lift, tmp_path):
    path = tmp_path / "lift.npz"
    lift.save(path)
    with np.load(path) as archive:
        contents = {name: archive[name] for name in archive.files}
    text = contents["metadata"].tobytes().decode()
    text = text.replace('"schema_version": 1', '"schema_version": 99')
    contents["metadata"] = np.frombuffer(text.encode(), dtype=np.uint8)
    np.savez(path, **contents)
    with pytest.raises(sl.LiftFileError, match="schema version 99"):
        sl.LiftMatrix.load(path)


def test_tampered_matrix_is_refused(lift, tmp_path):
    path = tmp_path / "lift.npz"
    lift.save(path)
    with np.load(path) as archive:
        contents = {name: archive[name] for name in archive.files}
    contents["matrix"] = np.zeros_like(contents["matrix"])
    np.savez(path, **contents)
    with pytest.raises(sl.LiftFileError, match="invalid lift"):
        sl.LiftMatrix.load(path)


def test_failed_write_leaves_no_file(tmp_path):
    target = tmp_path / "out.bin"

    def broken_writer(handle):
        handle.write(b"partial")
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        atomic_write(target, broken_writer)
    assert list(tmp_path.iterdir()) == []


def test_existing_file_survives_a_failed_write(lift, tmp_path):
    path = tmp_path / "lift.npz"
    lift.save(path)
    before = path.read_bytes()
    with pytest.raises(RuntimeError):
        atomic_write(path, lambda handle: (_ for _ in ()).throw(RuntimeError("boom")))
    assert path.read_bytes() == before
    assert zipfile.is_zipfile(path) and len(os.listdir(tmp_path)) == 1


def test_missing_folder_is_a_clear_error(lift, tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        lift.save(tmp_path / "nowhere" / "lift.npz")


# ------------------------------------------------ metadata of the wrong JSON type
def _rewrite_lift_file(path, change):
    """Tamper with a saved lift: ``change(metadata, arrays)`` edits it in place."""
    import json

    with np.load(path) as archive:
        contents = {name: archive[name] for name in archive.files}
    metadata = json.loads(contents["metadata"].tobytes().decode())
    change(metadata, contents)
    contents["metadata"] = np.frombuffer(json.dumps(metadata).encode(), dtype=np.uint8)
    np.savez(path, **contents)


@pytest.mark.parametrize("change, words", [
    (lambda m: m.update(feature_names="abcde"), "'feature_names' should be null or a list"),
    (lambda m: m.update(feature_names={"a": 1}), "'feature_names' should be null or a list"),
    (lambda m: m.update(feature_names=[1, 2, 3, 4, 5]), "'feature_names' should be null"),
    (lambda m: m.update(feature_names=list("abcda")), "should be null or a list of distinct"),
    (lambda m: m.update(info=[1, 2]), "'info' should be an object"),
    (lambda m: m.update(info="note"), "'info' should be an object"),
    (lambda m: m.update(info=None), "'info' should be an object"),
    (lambda m: m["info"].update(report_text=5), "'report_text' should be a string"),
    (lambda m: m["info"].update(complement_weight="0.1"), "'complement_weight' should be a num"),
    (lambda m: m["info"].update(n_columns="7"), "'n_columns' should be null or a positive"),
    (lambda m: m["info"].update(weight_form=["repeat"]), "'weight_form' should be a string"),
    (lambda m: m.update(n_features="5"), "'n_features' should be a positive integer"),
    (lambda m: m.update(n_directions=True), "'n_directions' should be a positive integer"),
    (lambda m: m.pop("n_features"), "'n_features' is missing"),
])
def test_metadata_of_the_wrong_type_is_a_lift_file_error(lift, tmp_path, change, words):
    path = tmp_path / "lift.npz"
    lift.save(path)
    _rewrite_lift_file(path, lambda metadata, arrays: change(metadata))
    with pytest.raises(sl.LiftFileError, match=words):
        sl.LiftMatrix.load(path)


@pytest.mark.parametrize("bad", [np.full((5, 5), "0.1"), np.ones((5, 5)) * (1 + 1j)])
def test_arrays_that_are_not_real_numbers_are_refused(lift, tmp_path, bad):
    path = tmp_path / "lift.npz"
    lift.save(path)
    _rewrite_lift_file(path, lambda metadata, arrays: arrays.update(matrix=bad))
    with pytest.raises(sl.LiftFileError, match="not real numbers"):
        sl.LiftMatrix.load(path)


def test_a_folder_given_as_lift_file_says_so(tmp_path):
    with pytest.raises(sl.LiftFileError, match="is a directory"):
        sl.LiftMatrix.load(tmp_path)
