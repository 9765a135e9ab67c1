"""Diagnostic plots: rendered headless, valid PNG files, a clear error without matplotlib."""

import sys

import numpy as np
import pytest

import splitlift as sl
from splitlift import plots
from splitlift.datasets import make_kiln_problem
from splitlift.scoring import score_candidates

pytest.importorskip("matplotlib")

# The eight signature bytes that open every PNG file (PNG specification, ISO/IEC 15948, §5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def assert_valid_png(path):
    from matplotlib.image import imread

    assert path.is_file()
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    image = imread(path)  # matplotlib reads PNG natively (via Pillow)
    assert image.ndim == 3 and image.shape[0] > 50 and image.shape[1] > 50
    assert image.std() > 0  # not a blank canvas


@pytest.fixture(scope="module")
def kiln():
    return make_kiln_problem(400, random_state=1)  # synthetic, invented scenario


@pytest.fixture(scope="module")
def fitted_lift(kiln):
    return sl.DirectionLift(sl.SlicedInverse(dim="auto")).fit(kiln.X, kiln.y)


def test_eigenvalue_plot_from_lift_and_estimator(fitted_lift, kiln, tmp_path):
    assert plots.plot_eigenvalues(fitted_lift, tmp_path / "lift.png") == tmp_path / "lift.png"
    assert_valid_png(tmp_path / "lift.png")
    estimator = sl.HessianDirections(dim=2).fit(kiln.X, kiln.y)  # signed eigenvalues
    assert_valid_png(plots.plot_eigenvalues(estimator, tmp_path / "phd.png", title="pHd"))


@pytest.mark.parametrize("dim", [1, 2])
def test_sufficient_summary_plot(kiln, tmp_path, dim):
    estimator = sl.SlicedInverse(dim=dim).fit(kiln.X, kiln.y)
    assert_valid_png(plots.plot_sufficient_summary(estimator, kiln.X, kiln.y,
                                                   tmp_path / "summary.png"))


def test_sufficient_summary_plot_with_class_labels(kiln, tmp_path):
    labels = np.where(kiln.y > np.median(kiln.y), "strong", "weak")
    lift = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(kiln.X, labels)
    assert_valid_png(plots.plot_sufficient_summary(lift, kiln.X, labels,
                                                   tmp_path / "labels.png"))


def test_bootstrap_angle_histogram(fitted_lift, kiln, tmp_path):
    result = sl.stability(fitted_lift, kiln.X, kiln.y, n_boot=10, random_state=0,
                          progress=False)
    assert_valid_png(plots.plot_bootstrap_angles(result, tmp_path / "angles.png"))
    empty = sl.SubspaceStability(np.zeros((4, 0)), np.ones(4), 0)
    with pytest.raises(ValueError, match="dimension 0"):
        plots.plot_bootstrap_angles(empty, tmp_path / "none.png")
    assert not (tmp_path / "none.png").exists()


@pytest.mark.parametrize("with_data", [False, True])
def test_candidate_ranking_chart_marks_invalid_rows(kiln, tmp_path, with_data):
    from splitlift.forest import StitForestRegressor

    candidates = {"around S": sl.LiftMatrix.from_subspace(kiln.true_basis),
                  "axis": np.eye(12), "flat": np.eye(12)[:4]}
    data = {"X": kiln.X[:150], "y": kiln.y[:150], "cv": 2,
            "forest": StitForestRegressor(n_trees=3, lifetime=5.0)} if with_data else {}
    table = score_candidates(candidates, reference=kiln.true_basis, random_state=0,
                             progress=False, **data)
    assert_valid_png(plots.plot_candidate_ranking(table, tmp_path / "ranking.png"))
    with pytest.raises(ValueError, match="score_candidates"):
        plots.plot_candidate_ranking(table.drop(columns="leakage"), tmp_path / "bad.png")


def test_write_all_plots_creates_the_folder(fitted_lift, kiln, tmp_path):
    result = sl.stability(fitted_lift, kiln.X, kiln.y, n_boot=6, random_state=0,
                          progress=False)
    folder = tmp_path / "plots" / "run1"
    paths = plots.write_all_plots(fitted_lift, kiln.X, kiln.y, folder, stability=result)
    assert [p.name for p in paths] == [plots.EIGENVALUES_FILE, plots.SUFFICIENT_SUMMARY_FILE,
                                       plots.BOOTSTRAP_ANGLES_FILE]
    for path in paths:
        assert_valid_png(path)
    assert sorted(p.name for p in folder.iterdir()) == sorted(p.name for p in paths)


def test_plots_leave_the_global_backend_and_pyplot_alone(fitted_lift, tmp_path):
    import matplotlib

    backend = matplotlib.get_backend()
    plots.plot_eigenvalues(fitted_lift, tmp_path / "scree.png")
    assert matplotlib.get_backend() == backend
    if "matplotlib.pyplot" in sys.modules:  # no figure left open in pyplot's registry
        assert sys.modules["matplotlib.pyplot"].get_fignums() == []


def test_wrong_suffix_and_unfitted_input_are_clear_errors(kiln, tmp_path):
    estimator = sl.SlicedInverse(dim=1).fit(kiln.X, kiln.y)
    with pytest.raises(ValueError, match="written as PNG"):
        plots.plot_eigenvalues(estimator, tmp_path / "scree.jpg")
    with pytest.raises(ValueError, match="not fitted"):
        plots.plot_eigenvalues(sl.SlicedInverse(), tmp_path / "scree.png")
    with pytest.raises(ValueError, match="columns"):
        plots.plot_sufficient_summary(estimator, kiln.X[:, :5], kiln.y, tmp_path / "s.png")


def test_missing_matplotlib_is_a_clear_import_error(fitted_lift, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(ImportError, match=r"pip install 'splitlift\[plot\]'"):
        plots.plot_eigenvalues(fitted_lift, tmp_path / "scree.png")
    with pytest.raises(ImportError, match="matplotlib"):
        plots.write_all_plots(fitted_lift, None, None, tmp_path / "never")
    assert not (tmp_path / "never").exists()
