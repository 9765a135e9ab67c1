"""DirectionLiftCV: the choice between raw inputs and lifts, as a scikit-learn user meets it."""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator
from sklearn.ensemble import (
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.model_selection import GridSearchCV, KFold
from sklearn.pipeline import Pipeline
from sklearn.utils.estimator_checks import parametrize_with_checks

import splitlift as sl


def small_search(**settings):
    """A search cheap enough for tests: few trees, SIR and OPG at dimension 1."""
    options = {"forest": ExtraTreesRegressor(n_estimators=20, random_state=0), "cv": 3,
               "estimators": [sl.SlicedInverse(), sl.GradientOuterProduct()], "dims": (1,),
               "random_state": 0, "progress": False}
    options.update(settings)
    return sl.DirectionLiftCV(**options)


def ridge_problem(generator, n=400, d=8):
    X = generator.standard_normal((n, d))
    direction = np.ones(d) / np.sqrt(d)
    y = np.sin(2 * X @ direction) + X @ direction + 0.1 * generator.standard_normal(n)
    return X, y


def squared_error_gap(model_a, model_b, X_test, y_test):
    """Mean paired difference of squared errors (a minus b) and its standard error."""
    gap = (model_a.predict(X_test) - y_test) ** 2 - (model_b.predict(X_test) - y_test) ** 2
    return gap.mean(), gap.std(ddof=1) / np.sqrt(gap.size)


def test_a_lift_is_chosen_for_a_ridge_function(rng):
    X, y = ridge_problem(rng)
    search = small_search().fit(X, y)
    assert search.best_params_["estimator"] in ("SIR", "OPG")
    assert search.verdict_.startswith(f"the {search.best_params_['estimator']} lift (dim 1")
    assert "lowers CV mean squared error by" in search.verdict_
    table = pd.DataFrame(search.cv_results_)
    chosen = table.iloc[search.best_index_]
    assert chosen["change_vs_raw"] < -0.3  # a large gain on this oblique function
    assert chosen["mean_test_error"] < table.loc[0, "mean_test_error"]


def test_an_additive_axis_aligned_function_keeps_the_raw_inputs(rng):
    # y is a sum of steps along the axes: axis cuts are ideal, oblique cuts waste splits.
    n, d = 1200, 6
    X = rng.uniform(-1, 1, size=(n, d))
    y = ((X[:, 0] > 0) + (X[:, 1] > 0.5) + 0.5 * (X[:, 2] > -0.5)
         + 0.2 * rng.standard_normal(n))
    train, test = slice(0, 600), slice(600, None)
    forest = ExtraTreesRegressor(n_estimators=30, random_state=0)
    search = small_search(forest=forest).fit(X[train], y[train])
    assert search.best_params_["estimator"] is None or search.best_params_["keep_inputs"]
    chosen = Pipeline([("select", search), ("forest", forest)]).fit(X[train], y[train])
    raw = ExtraTreesRegressor(n_estimators=30, random_state=0).fit(X[train], y[train])
    gap, standard_error = squared_error_gap(chosen, raw, X[test], y[test])
    assert gap <= 2 * standard_error  # no loss beyond noise (two paired standard errors)


def test_raw_inputs_pass_through_and_say_so(rng):
    X = rng.uniform(-1, 1, size=(300, 4))
    y = (X[:, 0] > 0).astype(float) + 0.05 * rng.standard_normal(300)
    search = small_search().fit(X, y)
    assert search.best_params_ == {"estimator": None, "dim": None, "keep_inputs": None}
    assert "the inputs pass through unchanged" in search.verdict_
    np.testing.assert_array_equal(search.transform(X), X)
    assert list(search.get_feature_names_out()) == ["x0", "x1", "x2", "x3"]


def test_cv_results_read_as_a_data_frame_with_raw_inputs_first(rng):
    X, y = ridge_problem(rng, n=240, d=5)
    search = small_search(dims=(1, 2)).fit(X, y)
    table = pd.DataFrame(search.cv_results_)
    assert len(table) == 1 + 2 * 2 * 2 and table.loc[0, "candidate"] == "raw inputs"
    for column in ("split0_test_score", "split2_test_score", "mean_test_score",
                   "rank_test_score", "mean_test_error", "change_vs_raw", "status",
                   "n_output_features", "within_one_se"):
        assert column in table.columns
    # the default regression score is scikit-learn's negated mean squared error
    np.testing.assert_allclose(table["mean_test_error"], -table["mean_test_score"])
    assert (table["status"] == "ok").all()
    assert table.loc[0, "n_output_features"] == 5
    kept = table[table["param_keep_inputs"] == True]  # noqa: E712 - object column
    alone = table[table["param_keep_inputs"] == False]  # noqa: E712
    np.testing.assert_array_equal(kept["n_output_features"].to_numpy(),
                                  alone["n_output_features"].to_numpy() + 5)
    assert search.best_score_ == table.loc[search.best_index_, "mean_test_score"]


def test_one_standard_error_rule_prefers_the_simpler_of_near_equal_candidates():
    from splitlift.selection import _Candidate, _one_standard_error_choice

    candidates = [_Candidate("raw inputs", None, None, None, -1),
                  _Candidate("SIR dim 1", "SIR", 1, False, 0),
                  _Candidate("SIR dim 2", "SIR", 2, False, 1)]
    # dim 2 is best, dim 1 is within one paired standard error of it, raw is far behind
    errors = np.array([[1.0, 1.1, 0.9, 1.0],
                       [0.60, 0.60, 0.48, 0.58],
                       [0.58, 0.55, 0.52, 0.57]])
    for margin in (0.0, 1.0, 2.0):  # dim 1 beats raw by about 20 paired standard errors
        chosen, within = _one_standard_error_choice(candidates, errors, margin)
        assert chosen == 1 and within.tolist() == [False, True, True]
    # raw inputs within one standard error of the best lift: raw wins
    errors[0] = [0.57, 0.60, 0.50, 0.57]
    assert _one_standard_error_choice(candidates, errors, 1.0)[0] == 0


def test_a_lift_must_beat_the_raw_inputs_by_the_margin():
    from splitlift.selection import _Candidate, _one_standard_error_choice

    candidates = [_Candidate("raw inputs", None, None, None, -1),
                  _Candidate("SIR dim 1", "SIR", 1, False, 0)]
    # fold differences lift - raw = (-0.1, 0.05, -0.25, -0.1): mean -0.1, sample sd
    # sqrt(0.015) = 0.1225, standard error 0.0612, so the lift is 1.63 SE lower
    errors = np.array([[1.0, 1.0, 1.0, 1.0], [0.9, 1.05, 0.75, 0.9]])
    assert _one_standard_error_choice(candidates, errors, 0.0)[0] == 1
    assert _one_standard_error_choice(candidates, errors, 1.0)[0] == 1
    assert _one_standard_error_choice(candidates, errors, 1.6)[0] == 1
    # at 1.7 the lift no longer qualifies; raw, not within one SE of it, is the fallback
    chosen, within = _one_standard_error_choice(candidates, errors, 1.7)
    assert chosen == 0 and within.tolist() == [False, False]


def test_corrected_standard_error_follows_nadeau_bengio():
    from splitlift.selection import _Candidate, _one_standard_error_choice, _standard_error

    # the same differences as above: sample sd sqrt(0.015) over J = 4 splits; with
    # n_test/n_train = 1/4 the corrected standard error is sd sqrt(1/4 + 1/4)
    # (Nadeau & Bengio 2003), 0.0866 instead of 0.0612: the lift is 1.155 SE lower
    differences = np.array([[-0.1, 0.05, -0.25, -0.1]])
    assert _standard_error(differences, 0.25)[0] == pytest.approx(np.sqrt(0.015 * 0.5))
    assert _standard_error(differences, 0.0)[0] == pytest.approx(np.sqrt(0.015 / 4))
    candidates = [_Candidate("raw inputs", None, None, None, -1),
                  _Candidate("SIR dim 1", "SIR", 1, False, 0)]
    errors = np.array([[1.0, 1.0, 1.0, 1.0], [0.9, 1.05, 0.75, 0.9]])
    assert _one_standard_error_choice(candidates, errors, 1.1, 0.25)[0] == 1
    assert _one_standard_error_choice(candidates, errors, 1.2, 0.25)[0] == 0


def test_integer_cv_is_repeated_and_a_splitter_is_not(rng):
    from sklearn.model_selection import KFold

    X, y = ridge_problem(rng, n=120, d=4)
    search = small_search().set_params(n_repeats=2).fit(X, y)
    assert search.n_splits_ == 6 and "split5_test_score" in search.cv_results_
    assert "3-fold CV repeated 2 times" in search.verdict_
    # the first repeat is the unrepeated split (the same shuffle of the same seed)
    once = small_search().set_params(n_repeats=1).fit(X, y)
    for fold in range(3):
        np.testing.assert_array_equal(once.cv_results_[f"split{fold}_test_score"],
                                      search.cv_results_[f"split{fold}_test_score"])
    splitter = small_search().set_params(cv=KFold(3)).fit(X, y)
    assert splitter.n_splits_ == 3 and "CV over 3 train/test splits" in splitter.verdict_
    with pytest.raises(ValueError, match="n_repeats=2 repeats an integer cv"):
        small_search().set_params(cv=KFold(3), n_repeats=2).fit(X, y)
    # Nadeau & Bengio (2003): sd (ddof 1) over the 6 splits times sqrt(1/6 + 40/80)
    errors = -np.array([search.cv_results_[f"split{k}_test_score"] for k in range(6)]).T
    np.testing.assert_allclose(search.cv_results_["sem_test_error"],
                               np.std(errors, axis=1, ddof=1) * np.sqrt(1 / 6 + 40 / 80),
                               rtol=1e-12)


def test_one_random_state_reproduces_the_search_for_any_n_jobs(rng):
    X, y = ridge_problem(rng, n=240, d=5)
    serial = small_search(n_jobs=1).fit(X, y)
    again = small_search(n_jobs=1).fit(X, y)
    parallel = small_search(n_jobs=2).fit(X, y)
    for other in (again, parallel):
        for fold in range(3):
            key = f"split{fold}_test_score"
            np.testing.assert_array_equal(serial.cv_results_[key], other.cv_results_[key])
        assert other.verdict_ == serial.verdict_
        np.testing.assert_array_equal(other.transform(X), serial.transform(X))
    different = small_search(random_state=1).fit(X, y)
    assert not np.array_equal(different.cv_results_["split0_test_score"],
                              serial.cv_results_["split0_test_score"])


@pytest.mark.parametrize(
    "labels",
    [np.array(["low", "high"], dtype=object), np.array(["low", "high"]),
     np.array([True, False]), np.array([3, 7]), np.array([0.0, 1.0])],
    ids=["object", "str", "bool", "int", "float"],
)
def test_class_labels_of_any_dtype(rng, labels):
    X = rng.standard_normal((150, 4))
    y = labels[(X[:, 0] + X[:, 1] > 0).astype(int)]
    forest = ExtraTreesClassifier(n_estimators=10, random_state=0)
    search = small_search(forest=forest, estimators=[sl.SlicedInverse()]).fit(X, y)
    assert "misclassification rate" in search.verdict_
    table = pd.DataFrame(search.cv_results_)
    assert (table["status"] == "ok").all()
    np.testing.assert_allclose(table["mean_test_error"], 1 - table["mean_test_score"])
    model = Pipeline([("select", search), ("forest", forest)]).fit(X, y)
    assert set(np.unique(model.predict(X))) <= set(labels.tolist())


def test_string_labels_choose_a_classifier_by_default(rng):
    X = rng.standard_normal((150, 4))
    y = np.where(X[:, 0] - X[:, 2] > 0, "yes", "no")
    search = sl.DirectionLiftCV(forest="extra_trees", estimators=[sl.SlicedInverse()],
                                dims=(1,), cv=3, random_state=0, progress=False).fit(X, y)
    assert isinstance(search.forest_, ExtraTreesClassifier)
    assert search.forest_.random_state is not None  # seeded: common random numbers


def test_too_few_rows_for_the_folds_is_a_clear_error(rng):
    X, y = ridge_problem(rng, n=7, d=3)
    with pytest.raises(ValueError, match="n_samples = 7, too few for cv = 5 folds"):
        small_search(cv=5).fit(X, y)


def test_an_unknown_forest_is_a_clear_error(rng):
    X, y = ridge_problem(rng, n=60, d=3)
    with pytest.raises(ValueError, match="'forest' parameter.*random_forest"):
        sl.DirectionLiftCV(forest="boosted_stumps").fit(X, y)
    with pytest.raises(ValueError, match="not a subspace estimator"):
        small_search(estimators=[RandomForestRegressor()]).fit(X, y)


class Failing(BaseEstimator):
    """A subspace estimator that fails when ``fails(X)`` says so (for the tests)."""

    def __init__(self, dim=1, threshold=None):
        self.dim = dim
        self.threshold = threshold

    def fit(self, X, y, sample_weight=None):
        if self.threshold is None or X[:, 0].max() < self.threshold:
            raise RuntimeError("no directions today")
        self.basis_ = np.eye(X.shape[1])[:, : self.dim]
        self.eigenvalues_ = np.ones(X.shape[1])
        return self


def test_an_estimator_failing_on_every_fold_is_a_clear_error(rng):
    X, y = ridge_problem(rng, n=90, d=3)
    with pytest.raises(ValueError, match="estimator Failing failed on every fold .*no "
                                         "directions today"):
        small_search(estimators=[sl.SlicedInverse(), Failing()]).fit(X, y)


def test_a_candidate_failing_on_some_folds_is_reported_not_raised(rng):
    X, y = ridge_problem(rng, n=90, d=3)
    X[0, 0] = 1000.0  # the estimator works only when this row is in the training fold
    flaky = sl.DirectionLift(Failing(threshold=100.0), standardize=False)
    search = small_search(estimators={"flaky": flaky, "SIR": sl.SlicedInverse()}).fit(X, y)
    table = pd.DataFrame(search.cv_results_)
    failed = table[table["param_estimator"] == "flaky"]
    # held out once in each of the two repeats of the three folds
    assert failed["status"].str.startswith("failed on 2 of 6 folds: RuntimeError").all()
    assert failed["mean_test_score"].isna().all()
    assert search.best_params_["estimator"] != "flaky"
    assert "2 candidates failed" in search.verdict_


def test_works_inside_pipeline_and_grid_search(rng):
    X, y = ridge_problem(rng, n=240, d=5)
    forest = ExtraTreesRegressor(n_estimators=10, random_state=0)
    pipeline = Pipeline([("select", small_search(forest=forest, cv=2)), ("forest", forest)])
    grid = GridSearchCV(pipeline, {"select__keep_inputs": [False, True]},
                        cv=KFold(2, shuffle=True, random_state=0)).fit(X, y)
    assert len(grid.cv_results_["params"]) == 2
    assert grid.predict(X[:3]).shape == (3,)
    names = grid.best_estimator_[:-1].get_feature_names_out()
    assert len(names) == grid.best_estimator_["select"].transform(X[:1]).shape[1]


def test_pandas_names_and_kept_inputs_carry_through(rng):
    X, y = ridge_problem(rng, n=300, d=4)
    frame = pd.DataFrame(X, columns=["temp", "flow", "speed", "load"])
    search = small_search(keep_inputs=True).fit(frame, y)
    assert search.best_params_["keep_inputs"] is True
    names = list(search.get_feature_names_out())
    assert names[:4] == ["temp", "flow", "speed", "load"] and names[4] == "subspace_0"
    assert search.best_lift_.lift_.feature_names == ["temp", "flow", "speed", "load"]
    assert search.transform(frame).shape == (300, len(names))


# the checks fit on about ten rows: two slices keep SIR defined on every training fold
@parametrize_with_checks([small_search(forest=ExtraTreesRegressor(n_estimators=5),
                                       estimators=[sl.SlicedInverse(n_slices=2)])])
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


def test_default_forest_is_a_random_forest_for_the_target_type(rng):
    X = rng.standard_normal((60, 3))
    numeric = sl.DirectionLiftCV(estimators=[sl.SlicedInverse()], dims=(1,), cv=2,
                                 progress=False, random_state=0)
    assert isinstance(numeric.fit(X, X[:, 0]).forest_, RandomForestRegressor)
    labels = np.where(X[:, 0] > 0, "a", "b")
    assert isinstance(numeric.fit(X, labels).forest_, RandomForestClassifier)


def test_default_candidates_follow_the_target_type(rng):
    # ADE for a numeric response; ADE and SIR (slices = classes) for class labels
    X = rng.standard_normal((80, 3))
    search = sl.DirectionLiftCV(forest=ExtraTreesRegressor(n_estimators=5), cv=2,
                                n_repeats=1, progress=False, random_state=0)
    numeric = search.fit(X, X[:, 0]).cv_results_["candidate"]
    assert list(numeric) == ["raw inputs", "ADE dim 1", "ADE dim 1 + inputs"]
    search.set_params(forest=ExtraTreesClassifier(n_estimators=5))
    labels = search.fit(X, np.where(X[:, 0] > 0, "a", "b")).cv_results_["candidate"]
    assert list(labels) == ["raw inputs", "ADE dim 1", "ADE dim 1 + inputs", "SIR dim 1",
                            "SIR dim 1 + inputs"]


def test_layers_only_look_down():
    # The import circle estimators -> dimension -> transformer -> estimators is
    # gone: the estimators and the dimension rules import nothing that fits a
    # forest on lifted data, not even inside functions.
    import ast
    from pathlib import Path

    package = Path(sl.__file__).parent
    upper = ("transformer", "selection", "scoring", "forest", "report", "stability")
    for path in [package / "dimension.py", *sorted((package / "estimators").glob("*.py"))]:
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module:
                module = node.module.split(".")[-1]
                assert module not in upper, f"{path.name} imports {node.module}"


def test_cross_validation_dimension_rule_is_reachable_by_name(rng):
    X, y = ridge_problem(rng, n=200, d=4)
    estimate = sl.SlicedInverse(dim="auto", dim_rule="cv").fit(X, y)
    assert estimate.dim_test_.rule.startswith("cross-validation")
