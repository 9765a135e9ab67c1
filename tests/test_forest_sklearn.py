"""scikit-learn conventions for the STIT forests (check_estimator, pipelines)."""

import numpy as np
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.estimator_checks import parametrize_with_checks

from splitlift.forest import StitForestClassifier, StitForestRegressor


def _expected_failures(estimator) -> dict:
    # In data mode, growth visits cells in an order that depends on how many rows they
    # hold, so a weight of k and k copies of a row give other random draws of the trees
    # (the class notes say so; tests/test_forest_weights.py checks exact equality in a
    # window, where the partition ignores the rows). scikit-learn's own random forest
    # fails this check too. Fixed-lifetime forests can pass it on the check's small data,
    # where every cell below the root is small enough to be measured exactly, so a
    # pass is not a failure here (the mark is not strict).
    return {"check_sample_weight_equivalence_on_dense_data":
            "in data mode, weights and copies of rows give other draws of the trees"}


# Reference: scikit-learn's own estimator checks (check_estimator) define the conventions.
@parametrize_with_checks(
    [
        StitForestRegressor(n_trees=5),
        StitForestClassifier(n_trees=5),
        StitForestRegressor(n_trees=5, lifetime=np.inf),
        StitForestClassifier(n_trees=5, lifetime=2.0),
    ],
    expected_failed_checks=_expected_failures,
)
def test_scikit_learn_conventions(estimator, check):
    check(estimator)


def test_forest_in_a_pipeline_with_feature_names():
    pandas = __import__("pandas")
    rng = np.random.default_rng(0)
    frame = pandas.DataFrame(rng.normal(size=(80, 3)), columns=["flow", "heat", "load"])
    y = frame["flow"] - frame["heat"] > 0
    pipeline = make_pipeline(StandardScaler(), StitForestClassifier(n_trees=5, random_state=0))
    pipeline.fit(frame, y)
    assert pipeline.score(frame, y) > 0.9
    forest = StitForestClassifier(n_trees=3, lifetime=1.0, random_state=0).fit(frame, y)
    np.testing.assert_array_equal(forest.feature_names_in_, ["flow", "heat", "load"])
