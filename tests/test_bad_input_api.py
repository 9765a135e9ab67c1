"""Catalogue of bad input through the Python API of geometry, lifts, scoring and stability.

Every case names the error class and the words that tell the user what is wrong;
none may return a result silently. Candidates in a batch score are the exception
by design: a bad candidate becomes a flagged row (``valid=False`` and a reason),
so those cases check the flag and the reason instead of an exception.
"""

import numpy as np
import pandas as pd
import pytest

import splitlift as sl
from splitlift.persistence import write_lift_file
from splitlift.scoring import score_candidates

EYE2 = np.eye(2)
E1 = np.array([1.0, 0.0])
BASIS3 = np.eye(3)[:, :1]


@pytest.fixture(scope="module")
def data():
    generator = np.random.default_rng(101)
    X = generator.standard_normal((120, 4))
    return X, X[:, 0] + 0.1 * generator.standard_normal(120)


@pytest.fixture(scope="module")
def fitted_lift(data):
    return sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(*data)


@pytest.fixture(scope="module")
def fitted_estimator(data):
    return sl.SlicedInverse(dim=1).fit(*data)


def _object_complex():
    return np.array([[1.0, 0.0], [0.0, 2j]], dtype=object)


# ------------------------------------------------------------------ geometry
GEOMETRY = [
    ("angles-complex-U", lambda: sl.principal_angles(np.array([1.0, 1j]), E1), "complex"),
    ("angles-complex-V", lambda: sl.principal_angles(E1, np.array([[1j], [1.0]])), "complex"),
    ("angles-row-mismatch", lambda: sl.principal_angles(np.ones((3, 1)), np.ones((4, 1))),
     "V has 4 rows but"),
    ("angles-dependent", lambda: sl.principal_angles([[1.0, 2.0], [2.0, 4.0]], E1),
     "linearly dependent"),
    ("angles-nan", lambda: sl.principal_angles([np.nan, 1.0], E1), "NaN"),
    ("angles-all-zero", lambda: sl.principal_angles(np.zeros((3, 1)), np.ones(3)), "all zeros"),
    ("angles-strings", lambda: sl.principal_angles(["a", "b"], E1), "must be numeric"),
    ("angles-too-many-columns", lambda: sl.principal_angles(np.ones((2, 3)), E1),
     "more columns"),
    ("angles-3d", lambda: sl.principal_angles(np.ones((2, 2, 2)), E1), "2-D"),
    ("leakage-complex-matrix", lambda: sl.leakage(EYE2 * 1j, E1), "complex"),
    ("leakage-object-complex", lambda: sl.leakage(_object_complex(), E1), "complex"),
    ("leakage-complex-basis", lambda: sl.leakage(EYE2, np.array([1.0, 1j])), "complex"),
    ("leakage-zero-matrix", lambda: sl.leakage(np.zeros((2, 2)), E1), "all zeros"),
    ("leakage-inf", lambda: sl.leakage([[np.inf, 1.0]], E1), "infinite"),
    ("leakage-basis-rows", lambda: sl.leakage(EYE2, [1.0, 0.0, 0.0]), "features"),
    ("leakage-1d", lambda: sl.leakage(E1, E1), "2-D"),
    ("leakage-empty", lambda: sl.leakage(np.zeros((0, 2)), E1), "empty"),
    ("leakage-ragged", lambda: sl.leakage([[1.0, 0.0], [1.0]], E1), "must be numeric"),
    ("rsv-complex", lambda: sl.restricted_singular_value(EYE2 + 0j, E1), "complex"),
    ("rsv-nan-basis", lambda: sl.restricted_singular_value(EYE2, [np.nan, 1.0]), "NaN"),
    ("complement-complex", lambda: sl.orthonormal_complement(np.array([1j, 0.0])), "complex"),
    ("complement-dependent", lambda: sl.orthonormal_complement(np.ones((3, 2))),
     "linearly dependent"),
]


# ---------------------------------------------------------------- LiftMatrix
def _save_with(tmp_path, **metadata):
    path = tmp_path / "lift.npz"
    header = {"n_features": 2, "n_directions": 2, "feature_names": None, "info": {}}
    write_lift_file(path, {"matrix": EYE2 / 2}, {**header, **metadata})
    return path


LIFT = [
    ("lift-complex", lambda: sl.LiftMatrix(EYE2 * (1 + 1j)), "complex"),
    ("lift-object-complex", lambda: sl.LiftMatrix(_object_complex()), "complex"),
    ("lift-rank", lambda: sl.LiftMatrix([[1.0, 0.0], [2.0, 0.0]]), "rank 1 < 2"),
    ("lift-zero-row", lambda: sl.LiftMatrix([[1.0, 0.0], [0.0, 0.0]]), "row 1 is zero"),
    ("lift-zero-rows", lambda: sl.LiftMatrix(np.vstack([EYE2, np.zeros((2, 2))])),
     "rows 2, 3 are zero"),
    ("lift-negligible-row", lambda: sl.LiftMatrix([[1e300, 0.0], [0.0, 1e-300]]),
     "row 1 is negligible"),
    ("lift-nan", lambda: sl.LiftMatrix([[np.nan, 0.0], [0.0, 1.0]]), "NaN"),
    ("lift-names-bare-string", lambda: sl.LiftMatrix(EYE2, feature_names="ab"),
     "single string"),
    ("lift-names-duplicate", lambda: sl.LiftMatrix(EYE2, feature_names=["a", "a"]),
     "unique; repeated: 'a'"),
    ("lift-names-count", lambda: sl.LiftMatrix(EYE2, feature_names=["a", "b", "c"]),
     "3 feature names given for 2 columns"),
    ("lift-names-not-a-list", lambda: sl.LiftMatrix(EYE2, feature_names=7),
     "must be a list of 2 column names"),
    ("lift-names-none-entry", lambda: sl.LiftMatrix(EYE2, feature_names=["a", None]),
     "must hold strings"),
    ("lift-metadata-list", lambda: sl.LiftMatrix(EYE2, metadata=["a"]),
     "metadata must be a dict"),
    ("lift-weight-form", lambda: sl.LiftMatrix(EYE2, metadata={"weight_form": "square"}),
     "weight_form must be 'scale' or 'repeat'"),
    ("lift-scale-zero", lambda: sl.LiftMatrix(EYE2, input_scale=[1.0, 0.0]),
     "input_scale must be positive"),
    ("lift-mean-length", lambda: sl.LiftMatrix(EYE2, input_mean=[0.0, 0.0, 0.0]),
     "input_mean has 3 entries for 2 features"),
    ("lift-mean-complex", lambda: sl.LiftMatrix(EYE2, input_mean=[0.0, 1j]), "complex"),
    ("lift-subspace-rows", lambda: sl.LiftMatrix(EYE2, subspace_basis=np.ones((3, 1))),
     "subspace_basis has 3 rows"),
    ("apply-columns", lambda: sl.LiftMatrix(EYE2).apply(np.ones((4, 3))),
     "X has 3 columns but the lift was built for 2 features"),
    ("apply-complex", lambda: sl.LiftMatrix(EYE2).apply(np.ones((2, 2)) * 1j), "complex"),
    ("apply-nan", lambda: sl.LiftMatrix(EYE2).apply([[np.nan, 1.0]]), "NaN"),
    ("apply-1d", lambda: sl.LiftMatrix(EYE2).apply(E1), "2-D"),
    # the first lifted value is (1e300 / 1e-10) * 2 / (2 sqrt 2) = 7e309: truly beyond range
    ("apply-beyond-range", lambda: sl.LiftMatrix(
        [[1.0, 1.0], [1.0, -1.0]], input_scale=[1e-10, 1e-10]).apply([[1e300, 1e300]]),
     "exceed the float range"),
    ("repeated-too-few", lambda: sl.LiftMatrix(EYE2).repeated(1), "n_columns"),
    ("repeated-string", lambda: sl.LiftMatrix(EYE2).repeated("4"), "n_columns"),
    ("repeated-metadata-n-columns",
     lambda: sl.LiftMatrix(EYE2, metadata={"weight_form": "repeat", "n_columns": 1}),
     "n_columns"),
    ("subspace-weight-zero", lambda: sl.LiftMatrix.from_subspace(BASIS3, complement_weight=0.0),
     "strictly between 0 and 1"),
    ("subspace-weight-one", lambda: sl.LiftMatrix.from_subspace(BASIS3, complement_weight=1.0),
     "strictly between 0 and 1"),
    ("subspace-weight-bool",
     lambda: sl.LiftMatrix.from_subspace(BASIS3, complement_weight=True),
     "strictly between 0 and 1"),
    ("subspace-weight-nan",
     lambda: sl.LiftMatrix.from_subspace(BASIS3, complement_weight=float("nan")),
     "strictly between 0 and 1"),
    # a subnormal weight cannot be shared by two complement directions as normal floats
    ("subspace-weight-subnormal",
     lambda: sl.LiftMatrix.from_subspace(BASIS3, complement_weight=1e-320),
     "too small to store.*complement_weight >= 4.45e-308"),
    ("power-inf", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[2.0, 1.0], weight_power=float("inf")),
     "weight_power must be a finite real number"),
    ("power-nan", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[2.0, 1.0], weight_power=float("nan")),
     "weight_power must be a finite real number"),
    ("power-string", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[2.0, 1.0], weight_power="2"),
     "weight_power must be a finite real number"),
    # (0.1 / 10) ** 1e5 underflows; the message gives the usable bound
    # log(tiny / eps) / log(0.01) = log(2.2e-308 / 2.2e-16) / log(0.01) = 145.99, rounded down
    ("power-underflow", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[10.0, 0.1], weight_power=-1e5),
     r"too extreme.*\|weight_power\| <= 145\.9\."),
    ("power-zero-eigenvalue", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[1.0, 0.0], weight_power=1.0), "zero eigenvalue"),
    ("eigenvalues-too-few", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[1.0], weight_power=1.0), "at least 2 finite values"),
    ("eigenvalues-complex", lambda: sl.LiftMatrix.from_subspace(
        np.eye(3)[:, :2], eigenvalues=[1.0, 1j], weight_power=1.0), "complex"),
    ("subspace-basis-complex", lambda: sl.LiftMatrix.from_subspace(BASIS3 * 1j), "complex"),
    ("subspace-basis-dependent", lambda: sl.LiftMatrix.from_subspace(np.ones((3, 2))),
     "linearly dependent"),
    ("subspace-names-bare-string",
     lambda: sl.LiftMatrix.from_subspace(BASIS3, feature_names="abc"), "single string"),
    ("subspace-count", lambda: sl.LiftMatrix.from_subspace(np.eye(3)[:, :2], n_in_subspace=1),
     "n_in_subspace"),
    ("even-spread-zero", lambda: sl.LiftMatrix.even_spread(0), "n_features"),
    ("reference-rows", lambda: sl.LiftMatrix(EYE2).reference_in_lift_coordinates(np.ones(3)),
     "reference has 3 rows"),
]


@pytest.mark.parametrize("call, words", [case[1:] for case in GEOMETRY + LIFT],
                         ids=[case[0] for case in GEOMETRY + LIFT])
def test_bad_geometry_and_lift_input_is_refused(call, words):
    with pytest.raises(ValueError, match=words):
        call()


@pytest.mark.parametrize("metadata, words", [
    ({"feature_names": 5}, "'feature_names' should be .*list of distinct strings, not a number"),
    ({"feature_names": "ab"}, "'feature_names' should be .*, not a string"),
    ({"feature_names": ["a", "a"]}, "'feature_names' should be .*distinct strings"),
    ({"feature_names": [["a"], ["b"]]}, "'feature_names' should be .*list of distinct strings"),
    ({"info": [1, 2]}, "'info' should be an object, not an array"),
    ({"info": "notes"}, "'info' should be an object, not a string"),
    ({"info": {"weight_form": 3}}, "'weight_form' should be a string"),
], ids=["names-int", "names-string", "names-duplicate", "names-nested", "info-list",
        "info-string", "info-weight-form"])
def test_lift_file_with_wrong_metadata_types_is_a_lift_file_error(tmp_path, metadata, words):
    # the file layer (persistence.read_lift_file) checks every metadata entry's type
    path = _save_with(tmp_path, **metadata)
    with pytest.raises(sl.LiftFileError, match=f"{words}.*corrupt or was edited. Save the lift"):
        sl.LiftMatrix.load(path)


def test_missing_lift_file_is_a_lift_file_error(tmp_path):
    with pytest.raises(sl.LiftFileError, match="does not exist"):
        sl.LiftMatrix.load(tmp_path / "absent.npz")


# ------------------------------------------------------------------- scoring
SCORING = [
    ("empty", lambda d: score_candidates([], reference=E1), "candidates is empty"),
    ("single-array", lambda d: score_candidates(EYE2, reference=E1), "single array"),
    ("not-a-collection", lambda d: score_candidates(5, reference=E1), "candidates must be"),
    ("X-without-y", lambda d: score_candidates([np.eye(4)], X=d[0]), "X was given without y"),
    ("no-subspace", lambda d: score_candidates([EYE2]), "needs a subspace"),
    ("reference-and-estimator",
     lambda d: score_candidates([EYE2], reference=E1, estimator=sl.SlicedInverse()),
     "either reference"),
    ("reference-complex", lambda d: score_candidates([EYE2], reference=[1.0, 1j]), "complex"),
    ("reference-rows", lambda d: score_candidates([np.eye(4)], *d, reference=np.ones(3)),
     "reference has 3 rows"),
    ("X-complex", lambda d: score_candidates([np.eye(4)], d[0] * 1j, d[1], reference=np.ones(4)),
     "X is complex"),
    ("y-complex", lambda d: score_candidates([np.eye(4)], d[0], d[1] * 1j, reference=np.ones(4)),
     "y is complex"),
    ("y-length", lambda d: score_candidates([np.eye(4)], d[0], d[1][:-1], reference=np.ones(4)),
     "one entry per row of X"),
    ("y-nan", lambda d: score_candidates([np.eye(4)], d[0], np.full(120, np.nan),
                                         reference=np.ones(4)), "y contains NaN"),
    ("cv-one", lambda d: score_candidates([np.eye(4)], *d, reference=np.ones(4), cv=1),
     "cv must be at least 2"),
    ("cv-string", lambda d: score_candidates([np.eye(4)], *d, reference=np.ones(4), cv="five"),
     "cv must be an integer"),
]


@pytest.mark.parametrize("call, words", [case[1:] for case in SCORING],
                         ids=[case[0] for case in SCORING])
def test_bad_scoring_input_is_refused(data, call, words):
    with pytest.raises(ValueError, match=words):
        call(data)


FLAGGED = [
    ("rank-deficient", np.array([[1.0, 0.0], [3.0, 0.0]]), "rank 1 < 2"),
    ("complex", EYE2 * 1j, "candidate is complex"),
    ("object-complex", _object_complex(), "candidate is complex"),
    ("zero-row", np.array([[1.0, 0.0], [0.0, 0.0]]), "row 1 is zero"),
    ("negligible-row", np.array([[1e300, 0.0], [0.0, 1e-300]]), "row 1 is negligible"),
    ("nan", np.array([[np.nan, 0.0], [0.0, 1.0]]), "NaN"),
    ("wrong-shape", np.ones((3, 3)), "does not match 2 features"),
    ("vector", np.ones(2), "2-D"),
    ("strings", [["a", "b"], ["c", "d"]], "must be numeric"),
    ("unknown-file", "candidate.txt", "unknown suffix"),
    ("missing-file", "absent.npy", "unreadable"),
]


@pytest.mark.parametrize("candidate, words", [case[1:] for case in FLAGGED],
                         ids=[case[0] for case in FLAGGED])
def test_bad_candidates_are_flagged_in_the_table(candidate, words):
    table = score_candidates({"bad": candidate, "good": EYE2}, reference=E1, progress=False)
    bad = table.set_index("name").loc["bad"]
    assert not bad["valid"]
    assert pd.Series([bad["reason"]]).str.contains(words).all(), bad["reason"]
    assert np.isnan(bad["leakage"]) and np.isnan(bad["restricted_singular_value"])
    assert table["name"].iloc[0] == "good" and bool(table["valid"].iloc[0])


# ----------------------------------------------------------------- stability
STABILITY = [
    ("lift-fewer-columns", lambda d, lift, est: sl.stability(lift, d[0][:, :3], d[1], n_boot=2),
     "X has 3 columns but the DirectionLift was fitted on 4 features"),
    ("estimator-fewer-columns",
     lambda d, lift, est: sl.stability(est, d[0][:, :3], d[1], n_boot=2),
     "X has 3 columns but the SlicedInverse was fitted on 4 features"),
    ("estimator-more-columns",
     lambda d, lift, est: sl.stability(est, np.hstack([d[0], d[0][:, :1]]), d[1], n_boot=2),
     "X has 5 columns but the SlicedInverse was fitted on 4 features"),
    ("renamed-columns", lambda d, lift, est: sl.stability(
        sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(
            pd.DataFrame(d[0], columns=list("abcd")), d[1]),
        pd.DataFrame(d[0], columns=list("abdc")), d[1], n_boot=2),
     "differ from those the DirectionLift was fitted on"),
    ("y-length", lambda d, lift, est: sl.stability(est, d[0], d[1][:50], n_boot=2),
     "one entry per row of X"),
    ("y-complex", lambda d, lift, est: sl.stability(est, d[0], d[1] + 0j, n_boot=2),
     "y is complex"),
    ("y-nan", lambda d, lift, est: sl.stability(est, d[0], np.full(120, np.nan), n_boot=2),
     "y contains NaN"),
    ("X-complex", lambda d, lift, est: sl.stability(est, d[0] * 1j, d[1], n_boot=2),
     "X is complex"),
    ("X-nan", lambda d, lift, est: sl.stability(est, np.full((120, 4), np.nan), d[1], n_boot=2),
     "NaN"),
    ("n-boot", lambda d, lift, est: sl.stability(est, *d, n_boot=1), "n_boot"),
    ("not-an-estimator", lambda d, lift, est: sl.stability(np.eye(4), *d, n_boot=2),
     "estimator must be"),
]


@pytest.mark.parametrize("call, words", [case[1:] for case in STABILITY],
                         ids=[case[0] for case in STABILITY])
def test_bad_stability_input_is_refused(data, fitted_lift, fitted_estimator, call, words):
    with pytest.raises(ValueError, match=words):
        call(data, fitted_lift, fitted_estimator)


# ------------------------------------------------- through the transformer
@pytest.mark.parametrize("settings, words", [
    ({"weight_power": -1e5}, r"too extreme.*\|weight_power\| <="),
    ({"complement_weight": 1e-320}, "too small to store"),
], ids=["weight-power-underflow", "complement-weight-subnormal"])
def test_direction_lift_settings_beyond_float_range_are_refused(data, settings, words):
    with pytest.raises(ValueError, match=words):
        sl.DirectionLift(sl.SlicedInverse(dim=2), **settings).fit(*data)

