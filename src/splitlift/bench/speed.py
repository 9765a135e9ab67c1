"""Speed suite: splitlift against reference implementations, timed in one run."""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.base import clone

from ..estimators import HessianDirections, SlicedAverageVariance, SlicedInverse
from ._timing import best_time, peak_memory, table, timed


def moment_methods(n_samples: int = 1_000_000, n_features: int = 20, repeats: int = 3) -> dict:
    """SIR, SAVE and pHd against statsmodels' ``regression.dimred`` and one ``X.T @ X``.

    Same data, same slicing (``n_slices = 10``, statsmodels' ``slice_n = n / 10``),
    best of at least 7 runs each (a tenth of a second varies most from run
    to run, and every timing gets the same number of tries). Peak memory is
    the tracemalloc peak during our fit divided by the size of X.
    """
    from statsmodels.regression.dimred import SAVE, PrincipalHessianDirections, SlicedInverseReg

    generator = np.random.default_rng(0)
    X = generator.standard_normal((n_samples, n_features))
    y = X[:, 0] / (0.5 + (X[:, 1] + 1.5) ** 2) + 0.1 * generator.standard_normal(n_samples)
    per_slice = n_samples // 10
    fast_repeats = max(repeats, 7)
    product = best_time(lambda: X.T @ X, fast_repeats)
    cases = [
        ("SIR", SlicedInverse(n_slices=10), lambda: SlicedInverseReg(y, X).fit(slice_n=per_slice)),
        ("SAVE", SlicedAverageVariance(n_slices=10), lambda: SAVE(y, X).fit(slice_n=per_slice)),
        ("pHd", HessianDirections(), lambda: PrincipalHessianDirections(y, X).fit()),
    ]
    rows = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name, estimator, reference in cases:
            ours = best_time(lambda estimator=estimator: estimator.fit(X, y), fast_repeats)
            theirs = best_time(reference, fast_repeats)
            memory = peak_memory(lambda estimator=estimator: estimator.fit(X, y))
            rows.append({
                "method": name, "splitlift_s": ours, "statsmodels_s": theirs, "xtx_s": product,
                "speedup_vs_statsmodels": theirs / ours, "ratio_to_xtx": ours / product,
                "peak_memory_over_X": memory / X.nbytes,
            })
    return {"n_samples": n_samples, "n_features": n_features, "rows": rows}


def gradient_scaling(sizes=(10_000, 30_000, 100_000), n_features: int = 20, dim: int = 3) -> dict:
    """OPG with its defaults as n grows: time, peak memory, largest angle to the truth."""
    from ..estimators import GradientOuterProduct
    from .gradient import _measure, synthetic_index_data

    rows = []
    for n in sizes:
        X, y, basis = synthetic_index_data(n, n_features, dim, 0)
        rows.append(_measure(GradientOuterProduct(dim=dim, random_state=0), X, y, basis))
    return {"rows": rows}


def average_derivative_memory(n_samples: int = 20_000, n_features: int = 20) -> dict:
    """Density-weighted ADE (pairwise U-statistic in chunks): time and peak memory."""
    from ..estimators import AverageDerivative
    from .gradient import _measure, synthetic_index_data

    X, y, basis = synthetic_index_data(n_samples, n_features, 1, 0)
    return _measure(AverageDerivative(dim=1), X, y, basis)


def dimension_and_stability(n_samples: int = 10_000, n_features: int = 20,
                            n_boot: int = 200) -> dict:
    """Time of ``dim="auto"`` (default rule) against one fixed-dimension fit, and of
    ``stability(n_boot)``, for SIR and OPG."""
    from ..estimators import GradientOuterProduct
    from ..stability import stability
    from .gradient import synthetic_index_data

    X, y, _ = synthetic_index_data(n_samples, n_features, 2, 0)
    rows = []
    for name, estimator in (("SIR", SlicedInverse(dim="auto")),
                            ("OPG", GradientOuterProduct(dim="auto", random_state=0))):
        auto, _ = timed(lambda estimator=estimator: estimator.fit(X, y))
        fixed = clone(estimator).set_params(dim=max(estimator.dim_, 1))
        one_fit, _ = timed(lambda fixed=fixed: fixed.fit(X, y))
        boot, _ = timed(lambda estimator=estimator: stability(
            estimator, X, y, n_boot=n_boot, random_state=0, progress=False))
        rows.append({"method": name, "rule": estimator.dim_test_.rule, "dim": estimator.dim_,
                     "fit_seconds": one_fit, "auto_seconds": auto,
                     "auto_over_fit": auto / one_fit, "stability_seconds": boot,
                     "n_boot": n_boot})
    return {"n_samples": n_samples, "n_features": n_features, "rows": rows}


def dimension_choice(n_samples: int = 4_000, n_features: int = 20, seeds=(0, 1, 2),
                     modes=("local", "refit")) -> dict:
    """How often OPG's ladle picks the true dimension, redrawing local terms or refitting.

    The test functions are those of :func:`~splitlift.bench.gradient.synthetic_index_data`
    with 1, 2 and 3 hidden directions.
    """
    from ..dimension import LadleEstimator
    from ..estimators import GradientOuterProduct
    from .gradient import synthetic_index_data

    rows = []
    for mode in modes:
        right, seconds = 0, 0.0
        for true_dim in (1, 2, 3):
            for seed in seeds:
                X, y, _ = synthetic_index_data(n_samples, n_features, true_dim, seed)
                estimator = GradientOuterProduct(dim="auto", random_state=seed, dim_rule=(
                    LadleEstimator(resample=mode, random_state=seed)))
                elapsed, _ = timed(lambda estimator=estimator, X=X, y=y: estimator.fit(X, y))
                right += estimator.dim_ == true_dim
                seconds += elapsed
        rows.append({"resample": mode, "right": right, "cases": 3 * len(seeds),
                     "seconds": seconds})
    return {"n_samples": n_samples, "n_features": n_features, "rows": rows}


def command_line_startup(repeats: int = 3) -> dict:
    """Best wall time of ``python -m splitlift --help`` in a fresh process (lazy imports)."""
    import subprocess
    import sys
    import time

    seconds = []
    for _ in range(repeats):
        began = time.perf_counter()
        subprocess.run([sys.executable, "-m", "splitlift", "--help"], check=True,
                       capture_output=True)
        seconds.append(time.perf_counter() - began)
    return {"help_seconds": min(seconds), "repeats": repeats}


def run_speed(quick: bool, out) -> dict:
    results = {}
    startup = command_line_startup()
    results["command_line_startup"] = startup
    out.write(f"\ncommand-line start-up: splitlift --help in {startup['help_seconds']:.3f} s "
              f"(best of {startup['repeats']} fresh processes)\n")
    n = 100_000 if quick else 1_000_000
    results["moment_methods"] = moment_methods(n, 20, 2 if quick else 3)
    out.write(f"\nmoment methods, n = {n}, d = 20 (best of repeats, seconds)\n")
    out.write(table(results["moment_methods"]["rows"], [
        ("method", "method", "s"), ("splitlift_s", "splitlift", ".3f"),
        ("statsmodels_s", "statsmodels", ".3f"), ("xtx_s", "X.T@X", ".3f"),
        ("speedup_vs_statsmodels", "speed-up", ".1f"), ("ratio_to_xtx", "x X.T@X", ".1f"),
        ("peak_memory_over_X", "peak/X", ".2f")]) + "\n")
    sizes = (5_000, 20_000) if quick else (10_000, 30_000, 100_000)
    results["gradient_scaling"] = gradient_scaling(sizes)
    out.write("\nouter product of gradients with its defaults, d = 20, dim 3\n")
    out.write(table(results["gradient_scaling"]["rows"], [
        ("n_samples", "n", "d"), ("seconds", "seconds", ".2f"),
        ("largest_angle_degrees", "angle (deg)", ".2f"),
        ("peak_memory_mb", "peak MB", ".1f"), ("data_memory_mb", "X MB", ".1f")]) + "\n")
    ade = average_derivative_memory(5_000 if quick else 20_000)
    results["average_derivative"] = ade
    out.write(f"\ndensity-weighted average derivative, n = {ade['n_samples']}, d = 20: "
              f"{ade['seconds']:.2f} s, peak {ade['peak_memory_mb']:.1f} MB "
              f"(X {ade['data_memory_mb']:.1f} MB), angle {ade['largest_angle_degrees']:.2f} deg\n")
    for key, n_auto in (("dimension_and_stability", 5_000 if quick else 10_000),
                        ("dimension_large_n", 20_000 if quick else 100_000)):
        auto = dimension_and_stability(n_auto, 20, 50 if quick else 200)
        results[key] = auto
        out.write(f"\ndim='auto' and stability, n = {auto['n_samples']}, d = 20\n")
        out.write(table(auto["rows"], [
            ("method", "method", "s"), ("rule", "default rule", "s"), ("dim", "dim", "d"),
            ("fit_seconds", "one fit (s)", ".2f"), ("auto_seconds", "auto (s)", ".2f"),
            ("auto_over_fit", "auto/fit", ".2f"), ("n_boot", "n_boot", "d"),
            ("stability_seconds", "stability (s)", ".2f")]) + "\n")
    choice = (dimension_choice(3_000, 20, (0,), ("local",)) if quick  # refits take minutes
              else dimension_choice(4_000, 20, (0, 1, 2)))
    results["dimension_choice"] = choice
    out.write(f"\nOPG ladle: true dimension chosen, n = {choice['n_samples']}, d = 20\n")
    out.write(table(choice["rows"], [
        ("resample", "resample", "s"), ("right", "right", "d"), ("cases", "of", "d"),
        ("seconds", "seconds", ".1f")]) + "\n")
    from .forest import run_forest_speed

    results["forest"] = run_forest_speed(quick, out)
    return results
