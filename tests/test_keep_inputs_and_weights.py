"""Kept inputs, output names in Python and on the command line, and who sees the weights."""

import numpy as np
import pandas as pd
import pytest
from sklearn.ensemble import (
    ExtraTreesRegressor,
    HistGradientBoostingRegressor,
    RandomForestRegressor,
)

import splitlift as sl
from splitlift.cli import main

from .conftest import li_rational_model


@pytest.fixture
def frame(rng):
    X, y, _ = li_rational_model(rng, 600, 5)
    return pd.DataFrame(X, columns=["kiln_temp", "feed", "speed", "air", "moisture"]), y


def test_kept_inputs_come_first_then_the_lifted_directions(frame):
    X, y = frame
    alone = sl.DirectionLift().fit(X, y)
    kept = sl.DirectionLift(keep_inputs=True).fit(X, y)
    standardised = (X.to_numpy() - X.to_numpy().mean(axis=0)) / X.to_numpy().std(axis=0)
    output = kept.transform(X)
    np.testing.assert_allclose(output[:, :5], standardised, atol=1e-12)
    np.testing.assert_allclose(output[:, 5:], alone.transform(X), atol=1e-12)
    names = list(kept.get_feature_names_out())
    assert names[:5] == list(X.columns)
    assert names[5:] == alone.lift_.output_feature_names()
    assert names[5] == "subspace_0" and names[-1].startswith("complement_")
    assert list(alone.get_feature_names_out()) == names[5:]
    # the lift itself, its leakage and weights, do not change by keeping the inputs
    np.testing.assert_array_equal(kept.lift_.matrix, alone.lift_.matrix)


def test_kept_inputs_with_the_repeated_form(frame):
    X, y = frame
    kept = sl.DirectionLift(weight_form="repeat", n_columns=30, keep_inputs=True).fit(X, y)
    assert kept.transform(X).shape == (600, 35)
    assert list(kept.get_feature_names_out())[4:6] == ["moisture", "subspace_0"]


def test_saved_lift_keeps_its_inputs_in_production(frame, tmp_path):
    X, y = frame
    kept = sl.DirectionLift(keep_inputs=True).fit(X, y)
    kept.save(tmp_path / "lift.npz")
    loaded = sl.LiftMatrix.load(tmp_path / "lift.npz")
    np.testing.assert_allclose(loaded.apply(X.to_numpy()), kept.transform(X), atol=1e-12)
    assert loaded.output_feature_names() == list(kept.get_feature_names_out())


def test_command_line_names_columns_as_python_does(frame, tmp_path, capsys):
    X, y = frame
    data = tmp_path / "kiln.csv"
    X.assign(quality=y).to_csv(data, index=False)
    lift_file, lifted_file = tmp_path / "lift.npz", tmp_path / "lifted.csv"
    assert main(["fit", str(data), "--target", "quality", "--keep-inputs", "--dim", "2",
                 "--out", str(lift_file)]) == 0
    assert main(["transform", str(lift_file), str(data), "--out", str(lifted_file)]) == 0
    written = pd.read_csv(lifted_file)
    # the command line seeds the lift's spread inside the subspace with --seed (default 0)
    python = sl.DirectionLift(sl.SlicedInverse(dim=2), keep_inputs=True, random_state=0)
    python.fit(X, y)
    assert list(written.columns) == list(python.get_feature_names_out())
    np.testing.assert_allclose(written.to_numpy(), python.transform(X), atol=1e-10)


def _predictions(forest, X, y, **lift_settings):
    """Held-out predictions (fully grown trees reproduce their own training rows)."""
    train, test = slice(0, 400), slice(400, None)
    lift = sl.DirectionLift(sl.SlicedInverse(dim=1), **lift_settings).fit(X[train], y[train])
    forest.fit(lift.transform(X[train]), y[train])
    return forest.predict(lift.transform(X[test]))


@pytest.mark.parametrize(
    "forest",
    [RandomForestRegressor(n_estimators=20, random_state=0),
     ExtraTreesRegressor(n_estimators=20, random_state=0),
     HistGradientBoostingRegressor(max_iter=30, random_state=0)],
    ids=["random forest", "extra trees", "histogram boosting"],
)
def test_split_searching_forests_ignore_the_weights(rng, forest):
    # Every column is searched at every split (max_features=1.0, the regression
    # default), so rescaling columns moves thresholds, not partitions.
    X, y, _ = li_rational_model(rng, 500, 5)
    light = _predictions(forest, X, y, complement_weight=0.05)
    heavy = _predictions(forest, X, y, complement_weight=0.3)
    np.testing.assert_allclose(light, heavy, rtol=1e-9, atol=1e-12)


def _share_of_splits_inside(X, y, **lift_settings) -> float:
    """Share of an extra-trees forest's splits along the estimated direction.

    With ``max_features=1`` each split uses one column drawn uniformly at
    random, so the share estimates that direction's share of the columns.
    """
    lift = sl.DirectionLift(sl.SlicedInverse(dim=1), **lift_settings).fit(X, y)
    forest = ExtraTreesRegressor(n_estimators=30, max_features=1, random_state=0)
    forest.fit(lift.transform(X), y)
    rows = lift.output_matrix_ / np.linalg.norm(lift.output_matrix_, axis=1, keepdims=True)
    inside = np.abs(rows @ lift.subspace_basis_[:, 0]) > 1 - 1e-9
    features = np.concatenate([tree.tree_.feature[tree.tree_.feature >= 0]
                               for tree in forest.estimators_])
    return float(np.mean(inside[features]))


def test_random_column_forests_see_the_weights_only_in_repeated_form(rng):
    # Thousands of splits: the shares below are within 0.05 of their expected
    # values (binomial standard error about 0.01; a stated tolerance).
    X, y, _ = li_rational_model(rng, 500, 5)
    for weight in (0.05, 0.3):  # scaled form: one column per direction, 1 of 5
        assert _share_of_splits_inside(X, y, complement_weight=weight) == pytest.approx(
            1 / 5, abs=0.05)
    # repeated form with 20 columns: 16 (weight 0.95) or 12 (weight 0.7) copies
    for weight, copies in ((0.05, 16), (0.3, 12)):
        share = _share_of_splits_inside(X, y, complement_weight=weight, weight_form="repeat",
                                        n_columns=20)
        assert share == pytest.approx(copies / 20, abs=0.05)


def test_the_stit_forest_sees_the_weights_in_scaled_form(rng):
    X, y, _ = li_rational_model(rng, 500, 5)
    forest = sl.StitForestRegressor(n_trees=5, lifetime=5.0, random_state=0)
    light = _predictions(forest, X, y, complement_weight=0.05)
    heavy = _predictions(forest, X, y, complement_weight=0.3)
    assert np.max(np.abs(light - heavy)) > 1e-3
