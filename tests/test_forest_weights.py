"""Sample weights in the STIT forests: frequency weights on leaf values and lifetime scoring."""

import numpy as np
import pytest
import sklearn
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from splitlift.forest import StitForestClassifier, StitForestRegressor

RNG = np.random.default_rng(20261202)
X = RNG.normal(size=(400, 3))
Y = X[:, 0] - 0.5 * X[:, 1] ** 2 + 0.1 * RNG.normal(size=400)
LABELS = np.where(X[:, 0] + X[:, 2] > 0, "high", "low")
COUNTS = RNG.integers(0, 4, size=400).astype(float)  # integer weights, some zero


@pytest.mark.parametrize("lifetime", ["auto", 2.0])
def test_unit_weights_give_exactly_the_unweighted_forest(lifetime):
    plain = StitForestRegressor(n_trees=8, lifetime=lifetime, random_state=0).fit(X, Y)
    unit = StitForestRegressor(n_trees=8, lifetime=lifetime, random_state=0).fit(
        X, Y, sample_weight=np.ones(len(Y)))
    np.testing.assert_array_equal(unit.predict(X), plain.predict(X))
    assert unit.lifetime_ == plain.lifetime_
    labels = StitForestClassifier(n_trees=8, lifetime=lifetime, random_state=0)
    np.testing.assert_array_equal(
        labels.fit(X, LABELS, sample_weight=np.ones(len(Y))).predict_proba(X),
        StitForestClassifier(n_trees=8, lifetime=lifetime, random_state=0).fit(
            X, LABELS).predict_proba(X))


def test_zero_weight_rows_are_dropped_entirely():
    # not even the data's extent sees them: the forest equals the fit without those rows
    kept = COUNTS > 0
    weighted = StitForestRegressor(n_trees=8, random_state=1).fit(X, Y, sample_weight=COUNTS)
    subset = StitForestRegressor(n_trees=8, random_state=1).fit(X[kept], Y[kept],
                                                               sample_weight=COUNTS[kept])
    np.testing.assert_array_equal(weighted.predict(X), subset.predict(X))
    np.testing.assert_array_equal(weighted.lifetime_path_, subset.lifetime_path_)


def test_integer_weights_equal_copies_of_rows_in_a_window():
    # A window partition depends on the window and the seed only, never on the rows, so
    # a row of weight k and k copies of it fill the same cells with the same sums.
    window = [[-4.0] * 3, [4.0] * 3]
    copies = np.repeat(np.arange(len(Y)), COUNTS.astype(int))
    settings = dict(n_trees=4, lifetime=1.5, extent="window", window=window, random_state=2)
    weighted = StitForestRegressor(**settings).fit(X, Y, sample_weight=COUNTS)
    repeated = StitForestRegressor(**settings).fit(X[copies], Y[copies])
    np.testing.assert_allclose(weighted.predict(X), repeated.predict(X), rtol=1e-12,
                               atol=1e-12)
    weighted_labels = StitForestClassifier(**settings).fit(X, LABELS, sample_weight=COUNTS)
    repeated_labels = StitForestClassifier(**settings).fit(X[copies], LABELS[copies])
    np.testing.assert_allclose(weighted_labels.predict_proba(X),
                               repeated_labels.predict_proba(X), rtol=1e-12, atol=1e-12)


def test_one_cell_predicts_the_weighted_mean_and_weighted_frequencies():
    # lifetime so short that no cut happens: every tree is one cell, whose value is the
    # weighted mean (numpy.average is the reference) or the weighted class frequencies
    short = dict(n_trees=3, lifetime=1e-9, random_state=0)
    forest = StitForestRegressor(**short).fit(X, Y, sample_weight=COUNTS)
    assert list(forest.n_leaves_) == [1, 1, 1]
    np.testing.assert_allclose(forest.predict(X[:5]), np.average(Y, weights=COUNTS),
                               rtol=1e-12)
    labels = StitForestClassifier(**short).fit(X, LABELS, sample_weight=COUNTS)
    high = COUNTS[LABELS == "high"].sum() / COUNTS.sum()
    np.testing.assert_allclose(labels.predict_proba(X[:2]), [[high, 1 - high]] * 2,
                               rtol=1e-12)


def test_scaling_every_weight_changes_nothing_but_rounding():
    once = StitForestRegressor(n_trees=8, random_state=3).fit(X, Y, sample_weight=COUNTS)
    scaled = StitForestRegressor(n_trees=8, random_state=3).fit(X, Y,
                                                               sample_weight=7.5 * COUNTS)
    assert scaled.lifetime_ == once.lifetime_
    np.testing.assert_allclose(scaled.lifetime_path_, once.lifetime_path_, rtol=1e-12)
    np.testing.assert_allclose(scaled.predict(X), once.predict(X), rtol=1e-12, atol=1e-12)


def test_weights_reach_the_forest_by_metadata_routing():
    weights = COUNTS + 0.5
    with sklearn.config_context(enable_metadata_routing=True):
        forest = StitForestRegressor(n_trees=6, random_state=4).set_fit_request(
            sample_weight=True)
        routed = make_pipeline(StandardScaler().set_fit_request(sample_weight=False),
                               forest).fit(X, Y, sample_weight=weights)
    direct = StitForestRegressor(n_trees=6, random_state=4).fit(
        StandardScaler().fit_transform(X), Y, sample_weight=weights)
    np.testing.assert_array_equal(routed.predict(X), direct.predict(
        StandardScaler().fit(X).transform(X)))


@pytest.mark.parametrize(("weights", "message"), [
    (-np.ones(400), "sample_weight has negative entries"),
    (np.zeros(400), "every sample weight is zero"),
    (np.ones(399), "sample_weight has shape"),
    (np.full(400, np.nan), "NaN or infinite"),
])
def test_bad_weights_get_a_clear_error(weights, message):
    with pytest.raises(ValueError, match=message):
        StitForestRegressor(n_trees=2).fit(X, Y, sample_weight=weights)
