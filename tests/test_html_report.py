"""The shareable HTML report renders in a real headless browser, plots visible.

Chromium comes from the system's packages (``.ci/run`` installs it). Outside
CI the test skips with the reason when no browser is installed; in CI
(``CI`` set) a missing browser is a failure, never a silent skip.
"""

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

import splitlift as sl
from splitlift.datasets import make_kiln_problem
from splitlift.plots import write_all_plots

BROWSERS = ("chromium", "chromium-browser", "google-chrome")


def browser() -> str:
    for name in BROWSERS:
        found = shutil.which(name)
        if found:
            return found
    if os.environ.get("CI"):
        pytest.fail("no headless browser in CI: .ci/run must install Debian's chromium")
    pytest.skip("no headless browser installed (apt-get install chromium) to render the page")


def screenshot(page: Path, out: Path) -> np.ndarray:
    """Render ``page`` headless and return the screenshot's RGB pixels (0..1)."""
    from matplotlib.image import imread

    profile = out.parent / f"profile-{out.stem}"
    command = [browser(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
               "--no-first-run", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
               "--hide-scrollbars", "--window-size=1100,4200", f"--screenshot={out}",
               page.as_uri()]
    subprocess.run(command, check=True, capture_output=True, timeout=120)
    return imread(out)[..., :3]


def coloured_pixels(pixels: np.ndarray) -> int:
    """Clearly coloured (not grey) pixels: the page's text and tables are grey, plots are not."""
    return int(np.sum(pixels.max(axis=-1) - pixels.min(axis=-1) > 0.25))


def test_html_report_renders_in_chromium_with_its_plots(tmp_path):
    browser()  # skip or fail early, before any work
    problem = make_kiln_problem(800, random_state=2)
    lift = sl.DirectionLift(sl.SlicedInverse(dim="auto")).fit(problem.X, problem.y)
    report = lift.report(reference=problem.true_basis)
    plots = {path.stem.replace("_", " "): path.read_bytes()
             for path in write_all_plots(lift, problem.X, problem.y, tmp_path / "plots")}
    with_plots, without = tmp_path / "report.html", tmp_path / "bare.html"
    report.to_html(with_plots, plots=plots)
    report.to_html(without)
    text = with_plots.read_text()
    assert text.startswith("<!DOCTYPE html>") and "data:image/png;base64," in text
    assert "http" not in text.replace("https://", "")  # nothing to fetch: readable offline
    shown, bare = screenshot(with_plots, tmp_path / "shown.png"), screenshot(
        without, tmp_path / "bare.png")
    # the page drew its text, and coloured marks appear only where plots are embedded
    assert shown.shape[0] > 1000 and np.mean(shown < 0.5) > 0.001
    assert np.mean(bare < 0.5) > 0.001
    assert coloured_pixels(shown) > 5000
    assert coloured_pixels(bare) < 50
