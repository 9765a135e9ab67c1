"""Batch scoring of candidate lifts: ranking, validity flags, files, reproducibility."""

import numpy as np
import pandas as pd
import pytest
from scipy.linalg import subspace_angles
from sklearn.ensemble import RandomForestClassifier
from sklearn.model_selection import KFold, StratifiedKFold, cross_val_score

import splitlift as sl
from splitlift.forest import StitForestRegressor
from splitlift.scoring import COLUMNS, score_candidates

N_FEATURES = 5


@pytest.fixture(scope="module")
def oblique_problem():
    """SYNTHETIC oblique multi-index problem: y = sin(2 u1) + u2 + noise, S random in R^5."""
    generator = np.random.default_rng(20261202)
    basis = np.linalg.qr(generator.standard_normal((N_FEATURES, 2)))[0]
    X = generator.standard_normal((300, N_FEATURES))
    summaries = X @ basis
    y = np.sin(2 * summaries[:, 0]) + summaries[:, 1] + 0.1 * generator.standard_normal(300)
    return X, y, basis


def _axis_leakage(basis):
    # Closed form for A = I/d: Σ_i (1/d) ‖P_{S⊥} e_i‖ = mean_i sqrt(1 - ‖Bᵀ e_i‖²)
    # for an orthonormal B (Pythagoras), computed with numpy alone.
    return float(np.mean(np.sqrt(1.0 - np.sum(basis**2, axis=1))))


def test_true_subspace_lift_ranks_above_axis_directions(oblique_problem):
    X, y, basis = oblique_problem
    candidates = {
        "axis": sl.LiftMatrix.axis(N_FEATURES),
        "identity": np.eye(N_FEATURES),
        "true subspace": sl.LiftMatrix.from_subspace(basis, complement_weight=0.05),
    }
    table = score_candidates(candidates, X, y, reference=basis, cv=3, random_state=0,
                             progress=False)
    assert list(table.columns) == list(COLUMNS)
    assert table["name"].iloc[0] == "true subspace"
    best, rest = table.iloc[0], table.iloc[1:]
    # by leakage: the from_subspace construction puts exactly complement_weight outside S
    # (DESIGN: its leakage equals the complement weight); the axis value is the closed form
    assert best["leakage"] == pytest.approx(0.05, abs=1e-12)
    np.testing.assert_allclose(rest["leakage"], _axis_leakage(basis), atol=1e-12)
    assert best["leakage"] < rest["leakage"].min()
    # by cross-validated error of the default STIT forest on X @ A.T: the oblique lift wins
    # by a wide margin (stated tolerance: at least a factor 2 on this synthetic problem)
    assert best["cv_error"] < 0.5 * rest["cv_error"].min()
    # identity and axis are the same lift after normalisation, so every number agrees
    numbers = rest[["leakage", "cv_error", "cv_error_std"]].to_numpy(dtype=float)
    np.testing.assert_allclose(numbers[0], numbers[1])
    assert table.attrs["ranked_by"] == "cv_error" and table.attrs["subspace"] == "reference"


def test_cv_error_matches_scikit_learn_cross_val_score(oblique_problem):
    # Reference: sklearn.model_selection.cross_val_score with the same folds and forest.
    X, y, basis = oblique_problem
    forest = StitForestRegressor(n_trees=8, random_state=3)
    folds = KFold(3, shuffle=True, random_state=1)
    table = score_candidates({"axis": np.eye(N_FEATURES)}, X, y, reference=basis,
                             forest=forest, cv=folds, progress=False)
    lifted = X @ (np.eye(N_FEATURES) / N_FEATURES).T
    scores = -cross_val_score(forest, lifted, y, cv=folds, scoring="neg_mean_squared_error")
    assert table["cv_error"].iloc[0] == pytest.approx(scores.mean(), rel=1e-10)
    assert table["cv_error_std"].iloc[0] == pytest.approx(scores.std(), rel=1e-10)


def test_classification_error_is_one_minus_accuracy(oblique_problem):
    # Reference: cross_val_score's default classifier score is accuracy (scikit-learn docs).
    X, _, basis = oblique_problem
    labels = np.where(X @ basis[:, 0] > 0, "high", "low")
    forest = RandomForestClassifier(n_estimators=10, random_state=0)
    folds = StratifiedKFold(3, shuffle=True, random_state=0)
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=0.1)
    table = score_candidates([lift], X, labels, reference=basis, forest=forest, cv=folds,
                             progress=False)
    accuracy = cross_val_score(forest, X @ lift.matrix.T, labels, cv=folds)
    assert table["cv_error"].iloc[0] == pytest.approx(1 - accuracy.mean(), rel=1e-10)
    assert table.attrs["metric"].startswith("misclassification")


def test_invalid_candidates_are_flagged_and_rank_last(oblique_problem):
    X, y, basis = oblique_problem
    nan_matrix = np.eye(N_FEATURES)
    nan_matrix[0, 0] = np.nan
    zero_row = np.vstack([np.eye(N_FEATURES), np.zeros(N_FEATURES)])
    candidates = {
        "rank deficient": np.eye(N_FEATURES)[:3],
        "wrong shape": np.ones((4, 3)),
        "not finite": nan_matrix,
        "zero row": zero_row,
        "vector": np.ones(N_FEATURES),
        "good": np.eye(N_FEATURES),
    }
    table = score_candidates(candidates, X, y, reference=basis, cv=2,
                             forest=StitForestRegressor(n_trees=4), random_state=0,
                             progress=False)
    reasons = dict(zip(table["name"], table["reason"], strict=True))
    assert reasons["rank deficient"] == "rank 3 < 5"
    assert reasons["wrong shape"] == "shape (4, 3) does not match 5 features"
    assert "NaN" in reasons["not finite"]
    assert reasons["zero row"] == "row 5 is zero"
    assert "2-D" in reasons["vector"]
    assert table["name"].iloc[0] == "good" and table["valid"].iloc[0]
    assert not table["valid"].iloc[1:].any()
    assert table["cv_error"].iloc[1:].isna().all() and np.isfinite(table["cv_error"].iloc[0])
    # the rank is computed as numpy.linalg.matrix_rank would for this well-separated case
    assert table.loc[table["name"] == "rank deficient", "rank"].item() == np.linalg.matrix_rank(
        np.eye(N_FEATURES)[:3])


def test_csv_npy_and_npz_candidates_agree(tmp_path):
    basis = np.linalg.qr(np.random.default_rng(1).standard_normal((N_FEATURES, 2)))[0]
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=0.1)
    lift.save(tmp_path / "lift.npz")
    np.save(tmp_path / "lift.npy", lift.matrix)
    np.savetxt(tmp_path / "plain.csv", lift.matrix * 7.0, delimiter=",", fmt="%.17g")
    header = ",".join(f"x{j}" for j in range(N_FEATURES))
    np.savetxt(tmp_path / "header.csv", lift.matrix, delimiter=",", fmt="%.17g",
               header=header, comments="")
    paths = [tmp_path / name for name in ("lift.npz", "lift.npy", "plain.csv", "header.csv")]
    table = score_candidates(paths, reference=basis, progress=False)
    assert table["valid"].all(), table["reason"].tolist()
    assert set(table["name"]) == {str(p) for p in paths}
    np.testing.assert_allclose(table["leakage"], 0.1, atol=1e-12)
    # Reference: scipy.linalg.subspace_angles gives each row's angle θ_i to S, and the
    # leakage is Σ_i ‖a_i‖ sin θ_i (the norm of the orthogonal part of a_i)
    by_scipy = sum(np.linalg.norm(row) * np.sin(subspace_angles(row[:, None], basis)[0])
                   for row in lift.matrix)
    assert table["leakage"].iloc[0] == pytest.approx(by_scipy, abs=1e-10)
    # σ_min(A U_S) straight from numpy's SVD (the definition), scale-free after normalising
    sigma = np.linalg.svd(lift.matrix @ basis, compute_uv=False)[-1]
    np.testing.assert_allclose(table["restricted_singular_value"], sigma, rtol=1e-10)
    # bound factor ε^{2(d-s)/(d+2)} of the published risk bound, here 0.1^(6/7)
    np.testing.assert_allclose(table["bound_factor"], 0.1 ** (6 / 7), rtol=1e-10)


def test_corrupt_and_missing_files_are_flagged(tmp_path):
    lift = sl.LiftMatrix.axis(N_FEATURES)
    corrupt = tmp_path / "corrupt.npz"
    lift.save(corrupt)
    corrupt.write_bytes(corrupt.read_bytes()[:100])
    ragged = tmp_path / "ragged.csv"
    ragged.write_text("1,0,0,0,0\n0,1,0\n")
    words = tmp_path / "words.csv"
    words.write_text("a,b,c,d,e\n1,0,0,0,zero\n")
    unknown = tmp_path / "lift.txt"
    unknown.write_text("1 0\n")
    candidates = [corrupt, tmp_path / "missing.npy", ragged, words, unknown, np.eye(N_FEATURES)]
    table = score_candidates(candidates, reference=np.eye(N_FEATURES)[:, :2], progress=False)
    reasons = dict(zip(table["name"], table["reason"], strict=True))
    for path in candidates[:5]:
        assert reasons[str(path)].startswith(f"file {path} unreadable:")
    assert "different numbers of entries" in reasons[str(ragged)]
    assert "'zero'" in reasons[str(words)]
    assert table["valid"].tolist() == [True] + [False] * 5
    assert table["name"].iloc[0] == "candidate_5"
    assert table["n_directions"].iloc[1:].isna().all()


def test_standardised_lift_is_folded_into_input_coordinates():
    # A (x - m)/s = (A / s) x - const: rows [1, 0]/1 and [0, 1]/2 normalise to weights
    # 2/3 and 1/3, so the leakage with respect to e1 is 1/3 (hand computation).
    lift = sl.LiftMatrix(np.eye(2), input_mean=[5.0, -1.0], input_scale=[1.0, 2.0])
    table = score_candidates([lift], reference=np.array([1.0, 0.0]), progress=False)
    assert table["leakage"].iloc[0] == pytest.approx(1 / 3, abs=1e-12)
    # inverse Simpson index 1 / ((2/3)² + (1/3)²) = 9/5
    assert table["effective_directions"].iloc[0] == pytest.approx(9 / 5, abs=1e-12)


def test_ranking_without_data_uses_leakage_then_conditioning():
    reference = np.eye(3)[:, :1]
    lifts = {
        "axis": np.eye(3),
        "tilted": np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 1.0], [0.0, 1.0, -1.0]]),
        "around S": sl.LiftMatrix.from_subspace(reference, complement_weight=0.2),
        "around S, scaled": 3 * sl.LiftMatrix.from_subspace(reference, 0.2).matrix,
    }
    table = score_candidates(lifts, reference=reference, progress=False)
    # by hand: leakage 0.2, 0.2, 2√2/(1+2√2) = 0.739, 2/3
    assert table["name"].tolist() == ["around S", "around S, scaled", "axis", "tilted"]
    assert table["cv_error"].isna().all() and table.attrs["ranked_by"] == "leakage"
    # the axis lift I/3 has effective number of directions 3 and bound factor (2/3)^(4/5)
    axis = table.set_index("name").loc["axis"]
    assert axis["effective_directions"] == pytest.approx(3.0)
    assert axis["bound_factor"] == pytest.approx((2 / 3) ** (4 / 5))


def test_estimated_subspace_is_used_without_reference(oblique_problem):
    X, _, basis = oblique_problem
    y = X @ basis[:, 0] + 0.05 * np.random.default_rng(0).standard_normal(X.shape[0])
    candidates = {"axis": np.eye(N_FEATURES),
                  "true": sl.LiftMatrix.from_subspace(basis[:, :1], complement_weight=0.05)}
    table = score_candidates(candidates, X, y, estimator=sl.SlicedInverse(dim=1),
                             forest=StitForestRegressor(n_trees=4), cv=2, random_state=0,
                             progress=False)
    assert table.attrs["subspace"] == "estimated by SlicedInverse"
    assert table.attrs["subspace_dim"] == 1
    true = table.set_index("name").loc["true"]
    # SIR recovers a linear index closely at n = 300 (Li 1991); 0.05 plus a small angle
    assert 0.05 <= true["leakage"] < 0.1


def test_scores_are_reproducible_and_independent_of_n_jobs(oblique_problem):
    X, y, basis = oblique_problem
    candidates = [np.eye(N_FEATURES), sl.LiftMatrix.from_subspace(basis)]
    forest = StitForestRegressor(n_trees=4)  # random_state None: seeded by score_candidates
    first = score_candidates(candidates, X, y, reference=basis, forest=forest, cv=2,
                             random_state=7, progress=False)
    second = score_candidates(candidates, X, y, reference=basis, forest=forest, cv=2,
                              random_state=7, n_jobs=2, progress=False)
    pd.testing.assert_frame_equal(first, second)
    other = score_candidates(candidates, X, y, reference=basis, forest=forest, cv=2,
                             random_state=8, progress=False)
    assert not np.allclose(first["cv_error"], other["cv_error"])


def test_no_progress_line_when_stderr_is_not_a_terminal(capsys):
    score_candidates([np.eye(2)], reference=np.eye(2)[:, :1], progress=True)
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize(
    ("arguments", "message"),
    [
        ({"candidates": []}, "candidates is empty"),
        ({"candidates": {}}, "candidates is empty"),
        ({"candidates": np.eye(5)}, "wrap one matrix"),
        ({"candidates": [np.eye(5)], "X": np.ones((10, 5))}, "X was given without y"),
        ({"candidates": [np.eye(5)], "y": np.ones(10)}, "y was given without X"),
        ({"candidates": [np.eye(5)]}, "pass reference"),
        ({"candidates": [np.eye(5)], "X": np.zeros((10, 5)), "y": np.arange(10.0),
          "reference": np.eye(4)[:, :1]}, "reference has 4 rows"),
        ({"candidates": [np.eye(5)], "reference": np.eye(5)[:, :1],
          "estimator": sl.SlicedInverse()}, "not both"),
        ({"candidates": [np.eye(5)], "X": np.zeros((10, 5)), "y": np.arange(10.0),
          "reference": np.eye(5)[:, :1], "cv": 1}, "cv must be at least 2"),
        ({"candidates": [np.eye(5)], "X": np.zeros((10, 5)), "y": np.arange(9.0),
          "reference": np.eye(5)[:, :1]}, "one entry per row"),
        ({"candidates": 3}, "candidates must be"),
    ],
)
def test_bad_top_level_input_is_a_clear_value_error(arguments, message):
    with pytest.raises(ValueError, match=message):
        score_candidates(**arguments, progress=False)


def test_missing_pandas_is_a_clear_import_error(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "pandas", None)
    with pytest.raises(ImportError, match="pip install pandas"):
        score_candidates([np.eye(2)], reference=np.eye(2)[:, :1])


def test_candidates_at_extreme_magnitudes_score_like_the_plain_matrix():
    # normalisation to Σ‖a_i‖ = 1 (DESIGN) makes every positive multiple the same lift;
    # against span(e1) the leakage of diag(3, 1) is 1/4 (closed form: weights 3/4, 1/4)
    A = np.diag([3.0, 1.0])
    table = score_candidates({"plain": A, "huge": A * 1e300, "tiny": A * 1e-300},
                             reference=[1.0, 0.0], progress=False)
    assert table["valid"].all() and (table["rank"] == 2).all()
    np.testing.assert_allclose(table["leakage"], 0.25, rtol=1e-15)
    np.testing.assert_allclose(table["restricted_singular_value"], 0.75, rtol=1e-15)


def test_standardisation_at_extreme_scales_is_folded_without_overflow():
    # A diag(1/s) with s = (1e-300, 1): rows (1e300, 0) and (0, 1), weights ∝ 1e300 : 1,
    # so against span(e1) the leakage is 1e-300 / (1 + 1e-300) = 1e-300 (closed form)
    lift = sl.LiftMatrix(np.eye(2), input_scale=[1e-300, 1.0])
    table = score_candidates([lift], reference=[1.0, 0.0], progress=False)
    assert bool(table["valid"].iloc[0]) and table["rank"].iloc[0] == 2
    assert table["leakage"].iloc[0] == pytest.approx(1e-300, rel=1e-12)
