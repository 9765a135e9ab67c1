"""Bad input to the STIT forests fails with a ValueError that names the problem."""

import numpy as np
import pytest

from splitlift import LiftMatrix
from splitlift.forest import StitForestClassifier, StitForestRegressor

RNG = np.random.default_rng(0)
X = RNG.uniform(0, 1, size=(30, 3))
Y = RNG.normal(size=30)


@pytest.mark.parametrize("forest_class", [StitForestRegressor, StitForestClassifier])
@pytest.mark.parametrize(
    "parameters, message",
    [
        ({"lifetime": 0.0}, "lifetime"),
        ({"lifetime": -1.0}, "lifetime"),
        ({"lifetime": "long"}, "lifetime"),
        ({"n_trees": 0}, "n_trees"),
        ({"lift": np.ones((4, 2))}, "columns"),
        ({"lift": LiftMatrix(np.eye(2))}, "columns"),
        ({"lift": np.array([[1.0, 0, 0], [0, 1.0, 0], [1.0, 1.0, 0]])}, "rank 2 < 3"),
        ({"lift": np.array([[1.0, 0, 0], [0, 0, 0], [0, 1.0, 1.0], [0, 0, 1.0]])}, "row 1"),
        ({"lift": np.array([[np.nan, 0, 0], [0, 1.0, 0], [0, 0, 1.0]])}, "NaN"),
        ({"extent": "window", "window": [[0, 0, 0], [0.5, 1, 1]]}, "does not contain"),
        ({"extent": "window", "window": [[0, 0], [1, 1]]}, r"shape \(2, 3\)"),
        ({"extent": "window", "window": [[0, 1, 0], [1, 1, 1]]}, "side 1 is empty"),
        ({"extent": "window", "lifetime": np.inf}, "never stops"),
        ({"window": [[0, 0, 0], [1, 1, 1]]}, "only used with extent='window'"),
        ({"extent": "cube"}, "extent"),
    ],
)
def test_bad_input_raises_value_error(forest_class, parameters, message):
    labels = Y if forest_class is StitForestRegressor else Y > 0
    with pytest.raises(ValueError, match=message):
        forest_class(**{"n_trees": 2, **parameters}).fit(X, labels)


def test_bad_data_raises_value_error():
    with pytest.raises(ValueError, match="NaN"):
        StitForestRegressor(n_trees=2).fit(np.where(X > 0.9, np.nan, X), Y)
    forest = StitForestRegressor(n_trees=2, lifetime=1.0).fit(X, Y)
    with pytest.raises(ValueError, match="3 features"):
        forest.predict(X[:, :2])


def test_a_full_rank_array_lift_is_used_as_given():
    # rows are not rescaled: doubling the lift halves the time to the same partition
    lift = np.array([[1.0, 0, 0], [0, 2.0, 0], [0, 0, 1.0], [1.0, 1.0, 1.0]])
    forest = StitForestRegressor(n_trees=2, lifetime=1.0, lift=lift, random_state=0).fit(X, Y)
    np.testing.assert_array_equal(forest.lift_matrix_, lift)
    doubled = StitForestRegressor(n_trees=2, lifetime=0.5, lift=2 * lift, random_state=0)
    np.testing.assert_array_equal(doubled.fit(X, Y).apply(X), forest.apply(X))


def test_lifted_values_beyond_the_double_range_are_refused():
    # Finite inputs whose lifted coordinates overflow (|z| > 1.8e308) get a plain message.
    X_huge = np.array([[1e308, 1e308], [-1e308, 5e307], [0.0, 1.0]])
    lift = np.array([[1.0, 1.0], [1.0, -1.0]])
    with pytest.raises(ValueError, match="overflow the double range"):
        StitForestRegressor(n_trees=2, lift=lift).fit(X_huge, [1.0, 2.0, 3.0])
    forest = StitForestRegressor(n_trees=2, lift=lift, lifetime=1.0).fit(X[:, :2], Y)
    with pytest.raises(ValueError, match="overflow the double range"):
        forest.predict(X_huge)


def test_a_lifetime_outside_the_normal_range_is_reported():
    # Data near the top of the double range: the forest still works on a rescaled clock,
    # identical to the unit-scale forest, and says that lifetime_ is only approximate.
    rng = np.random.default_rng(1)
    X_unit = rng.uniform(1.0, 1.9, size=(60, 3))
    y = rng.normal(size=60)  # pure noise: the chosen lifetime is short
    unit = StitForestRegressor(n_trees=5, random_state=0).fit(X_unit, y)
    with pytest.warns(UserWarning, match="outside the normal range"):
        huge = StitForestRegressor(n_trees=5, random_state=0).fit(np.ldexp(X_unit, 1023), y)
    np.testing.assert_array_equal(huge.predict(np.ldexp(X_unit, 1023)), unit.predict(X_unit))
