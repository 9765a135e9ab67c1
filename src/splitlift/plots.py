"""Diagnostic plots written as PNG files (needs the optional matplotlib extra).

Figures are drawn on :class:`matplotlib.figure.Figure` with the Agg canvas,
never through ``pyplot``, so the user's global backend and open figures are
left alone and everything works headless. Each file is rendered to memory
first and written atomically: an interrupted run leaves no half image.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
from sklearn.utils.validation import check_is_fitted

from ._validation import check_finite_matrix
from .loadings import leading_features
from .persistence import atomic_write

#: File names used by :func:`write_all_plots`.
EIGENVALUES_FILE = "eigenvalues.png"
SUFFICIENT_SUMMARY_FILE = "sufficient_summary.png"
BOOTSTRAP_ANGLES_FILE = "bootstrap_angles.png"
#: Every file :func:`write_all_plots` may write (a result's plot folder holds some of these).
PLOT_FILES = (EIGENVALUES_FILE, SUFFICIENT_SUMMARY_FILE, BOOTSTRAP_ANGLES_FILE)
_DPI = 100
_CHOSEN_COLOUR = "#1f6f8b"
_OTHER_COLOUR = "#b8c4cc"
_INVALID_COLOUR = "#c0392b"


def plot_eigenvalues(fitted, path, title: str | None = None) -> Path:
    """Scree plot of the estimator's eigenvalues with the chosen dimension marked.

    Parameters
    ----------
    fitted : fitted subspace estimator or DirectionLift
        Reads ``eigenvalues_``, ``dim_`` and, when present, the rule name of
        ``dim_test_`` (a DirectionLift is read through its ``estimator_``).
    path : str or Path
        PNG file to write; its folder must exist.
    title : str, optional

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import numpy as np, tempfile, pathlib
    >>> from splitlift import SlicedInverse
    >>> from splitlift.plots import plot_eigenvalues
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((200, 4))
    >>> est = SlicedInverse(dim=1).fit(X, X[:, 0] + 0.1 * rng.standard_normal(200))
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     plot_eigenvalues(est, pathlib.Path(folder) / "scree.png").stat().st_size > 0
    True
    """
    Figure = _figure_class()
    estimator = _subspace_estimator(fitted)
    values = np.asarray(estimator.eigenvalues_, dtype=float)
    dim = int(estimator.dim_)
    test = getattr(estimator, "dim_test_", None)
    how = f"chosen by {test.rule}" if test is not None else "fixed"
    positions = np.arange(1, values.size + 1)

    figure = Figure(figsize=(6.4, 4.0))
    axes = figure.add_subplot()
    colours = [_CHOSEN_COLOUR if k <= dim else _OTHER_COLOUR for k in positions]
    axes.bar(positions, values, color=colours, edgecolor="black", linewidth=0.5)
    axes.plot(positions, values, color="black", marker="o", markersize=3, linewidth=0.8)
    axes.axhline(0.0, color="black", linewidth=0.5)
    axes.axvline(dim + 0.5, color=_INVALID_COLOUR, linestyle="--", linewidth=1.2,
                 label=f"dimension {dim} ({how})")
    axes.set_xticks(positions)
    axes.set_xlabel("eigenvalue index")
    axes.set_ylabel("eigenvalue")
    axes.set_title(title or f"{type(estimator).__name__}: eigenvalues")
    axes.legend(loc="upper right", fontsize="small")
    return _save(figure, path)


def plot_sufficient_summary(fitted, X, y, path, title: str | None = None) -> Path:
    """Response against the leading estimated directions (a sufficient summary plot).

    One direction: ``y`` against ``u_1``. Two or more: ``y`` against ``u_1``
    and against ``u_2``, and ``u_2`` against ``u_1`` coloured by ``y``. With
    dimension 0 the method's first direction is shown, labelled as not
    selected.

    Parameters
    ----------
    fitted : fitted subspace estimator or DirectionLift
        A DirectionLift projects the standardised inputs on
        ``subspace_basis_``; an estimator projects ``X`` on ``basis_``.
    X : array-like of shape (n_samples, n_features)
    y : array-like of shape (n_samples,)
        Numeric response or class labels (drawn as codes, one row per class);
        a named pandas Series names the response axis.
    path : str or Path
    title : str, optional

    Returns
    -------
    Path
        Axes are labelled with each direction's leading standardised loadings.

    References
    ----------
    Cook, R. D. (1998). Regression Graphics: Ideas for Studying Regressions
    through Graphics. Wiley.
    """
    Figure = _figure_class()
    scores, labels = _leading_scores(fitted, X)
    response, classes = _plottable_response(y, scores.shape[0])
    target = str(getattr(y, "name", None) or "response")
    panels = 1 if scores.shape[1] == 1 else 3
    figure = Figure(figsize=(4.2 * panels, 4.0))
    share = {"s": 8, "alpha": 0.6, "edgecolors": "none"}
    for index in range(min(scores.shape[1], 2)):
        axes = figure.add_subplot(1, panels, index + 1)
        axes.scatter(scores[:, index], response, color=_CHOSEN_COLOUR, **share)
        axes.set_xlabel(labels[index], fontsize=8)
        axes.set_ylabel(target if classes is None else f"{target} (class)")
        if classes is not None:
            axes.set_yticks(np.arange(classes.size), [str(c) for c in classes])
    if panels == 3:
        axes = figure.add_subplot(1, 3, 3)
        colour_map = "viridis" if classes is None else "tab10"
        points = axes.scatter(scores[:, 0], scores[:, 1], c=response, cmap=colour_map, **share)
        axes.set_xlabel(labels[0], fontsize=8)
        axes.set_ylabel(labels[1], fontsize=8)
        bar = figure.colorbar(points, ax=axes)
        bar.set_label(target if classes is None else f"{target} (class code)")
    figure.suptitle(title or f"sufficient summary plot ({_subspace_name(fitted)})")
    figure.tight_layout()
    return _save(figure, path)


def plot_bootstrap_angles(stability, path, title: str | None = None) -> Path:
    """Histogram of the largest principal angle (degrees) over bootstrap refits.

    Parameters
    ----------
    stability : SubspaceStability
        Result of :func:`splitlift.stability`.
    path : str or Path
    title : str, optional

    Returns
    -------
    Path

    Raises
    ------
    ValueError
        When the subspace has dimension 0 (there are no angles).
    """
    Figure = _figure_class()
    if stability.dim == 0 or stability.angles.shape[1] == 0:
        raise ValueError(
            "the stability result has dimension 0, so there are no principal angles to plot; "
            "fit the estimator with dim >= 1."
        )
    largest = np.degrees(stability.angles[:, 0])
    quantiles = stability.largest_angle_quantiles()
    figure = Figure(figsize=(6.4, 4.0))
    axes = figure.add_subplot()
    axes.hist(largest, bins=min(30, max(5, largest.size // 5)), color=_CHOSEN_COLOUR,
              edgecolor="white")
    for key, style in (("q50", "-"), ("q95", "--")):
        axes.axvline(quantiles[key], color=_INVALID_COLOUR, linestyle=style, linewidth=1.2,
                     label=f"{'median' if key == 'q50' else '95th percentile'} "
                           f"{quantiles[key]:.2f}°")
    axes.set_xlabel("largest principal angle to the full-data subspace (degrees)")
    axes.set_ylabel("bootstrap resamples")
    axes.set_title(title or f"bootstrap stability: {stability.n_boot} resamples, "
                            f"dimension {stability.dim}")
    axes.legend(fontsize="small")
    return _save(figure, path)


def plot_candidate_ranking(table, path, title: str | None = None) -> Path:
    """Horizontal bars of the candidates' scores, best at the top, invalid ones marked.

    Parameters
    ----------
    table : pandas.DataFrame
        The result of :func:`splitlift.scoring.score_candidates`. Bars show
        ``cv_error`` (with its fold standard deviation) when present, else
        ``leakage``; an invalid candidate gets no bar but its reason.
    path : str or Path
    title : str, optional

    Returns
    -------
    Path
    """
    Figure = _figure_class()
    missing = {"name", "valid", "reason", "leakage", "cv_error"} - set(table.columns)
    if missing:
        raise ValueError(
            f"table lacks the columns {sorted(missing)}; pass the DataFrame returned by "
            "score_candidates."
        )
    if len(table) == 0:
        raise ValueError("table has no rows; score at least one candidate first.")
    use_cv = bool(table["cv_error"].notna().any())
    column = "cv_error" if use_cv else "leakage"
    values = table[column].to_numpy(dtype=float)
    valid = table["valid"].to_numpy(dtype=bool)
    spread = (table["cv_error_std"].to_numpy(dtype=float)
              if use_cv and "cv_error_std" in table.columns else None)
    positions = np.arange(len(table))[::-1]  # first row at the top

    figure = Figure(figsize=(7.0, 1.2 + 0.4 * len(table)))
    axes = figure.add_subplot()
    shown = np.where(valid, values, 0.0)
    axes.barh(positions, shown, color=[_CHOSEN_COLOUR if ok else _INVALID_COLOUR
                                       for ok in valid],
              xerr=None if spread is None else np.where(valid, spread, 0.0),
              edgecolor="black", linewidth=0.5)
    for position, ok, reason in zip(positions, valid, table["reason"], strict=True):
        if not ok:
            axes.text(0.0, position, f"  invalid: {reason}", va="center", fontsize="small",
                      color=_INVALID_COLOUR)
    axes.set_yticks(positions, [str(name) for name in table["name"]])
    metric = table.attrs.get("metric") if use_cv else None
    axes.set_xlabel(f"cross-validated error ({metric})" if metric else
                    "cross-validated error" if use_cv else "leakage ε(A, S)")
    axes.set_title(title or "candidate lifts, best first")
    figure.tight_layout()
    return _save(figure, path)


def write_all_plots(lift_or_estimator, X, y, folder, stability=None) -> list[Path]:
    """Write every diagnostic plot of a fitted lift or estimator to ``folder``.

    Parameters
    ----------
    lift_or_estimator : fitted DirectionLift or subspace estimator
    X : array-like of shape (n_samples, n_features)
        The data it was fitted on (for the sufficient summary plot).
    y : array-like of shape (n_samples,)
    folder : str or Path
        Created if missing.
    stability : SubspaceStability, optional
        Adds the bootstrap angle histogram (skipped for dimension 0).

    Returns
    -------
    list of Path
        ``eigenvalues.png``, ``sufficient_summary.png`` and, with
        ``stability``, ``bootstrap_angles.png``.
    """
    _figure_class()  # fail before creating the folder when matplotlib is missing
    target = Path(folder)
    target.mkdir(parents=True, exist_ok=True)
    paths = [
        plot_eigenvalues(lift_or_estimator, target / EIGENVALUES_FILE),
        plot_sufficient_summary(lift_or_estimator, X, y, target / SUFFICIENT_SUMMARY_FILE),
    ]
    if stability is not None and stability.dim > 0:
        paths.append(plot_bootstrap_angles(stability, target / BOOTSTRAP_ANGLES_FILE))
    return paths


def require_matplotlib() -> None:
    """Raise an ImportError that says how to install matplotlib when it is missing.

    Callers check this before any long computation whose result they plot.
    """
    _figure_class()


# ------------------------------------------------------------------ helpers
def _figure_class():
    """matplotlib's Figure, or an ImportError that says how to install it."""
    try:
        import matplotlib  # noqa: F401
        from matplotlib.figure import Figure
    except ImportError as error:
        raise ImportError(
            "splitlift plots need matplotlib, which is not installed; install it with "
            "pip install 'splitlift[plot]'."
        ) from error
    return Figure


def _save(figure, path) -> Path:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    target = Path(path)
    if target.suffix and target.suffix.lower() != ".png":
        raise ValueError(f"plots are written as PNG; name the file {target.stem}.png, "
                         f"not {target.name}.")
    FigureCanvasAgg(figure)  # attach the Agg canvas; no global backend is touched
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=_DPI)
    return atomic_write(target, lambda handle: handle.write(buffer.getvalue()))


def _subspace_estimator(fitted):
    """The fitted subspace estimator inside a DirectionLift, or the estimator itself."""
    inner = getattr(fitted, "estimator_", None)
    if inner is not None and hasattr(fitted, "lift_"):
        return inner
    check_is_fitted(fitted, ["eigenvalues_", "dim_"])
    return fitted


def _subspace_name(fitted) -> str:
    return type(_subspace_estimator(fitted)).__name__


def _leading_scores(fitted, X) -> tuple[np.ndarray, list[str]]:
    """Projections of X on (at most two) leading directions, with axis labels."""
    estimator = _subspace_estimator(fitted)
    data = check_finite_matrix(X, "X")
    basis = np.asarray(getattr(fitted, "subspace_basis_", estimator.basis_), dtype=float)
    if data.shape[1] != basis.shape[0]:
        raise ValueError(
            f"X has {data.shape[1]} columns but the fit used {basis.shape[0]} features; "
            "pass the data the lift or estimator was fitted on."
        )
    if hasattr(fitted, "lift_"):  # DirectionLift: its subspace lives in standardised inputs
        data = (data - fitted.mean_) / fitted.scale_
    loadings = getattr(fitted, "standardised_loadings_", None)
    if loadings is None:
        loadings = estimator.standardised_loadings_
    labels = [f"direction {k + 1}: {leading_features(loadings.iloc[k], top=2)}"
              for k in range(min(2, len(loadings)))]
    if basis.shape[1] == 0:
        directions = np.asarray(getattr(estimator, "directions_", np.zeros((basis.shape[0], 0))))
        usable = np.flatnonzero(np.linalg.norm(directions, axis=0) > 0)
        if usable.size == 0:
            raise ValueError("the fit has no directions at all to plot against.")
        basis = directions[:, usable[:1]] / np.linalg.norm(directions[:, usable[:1]])
        labels = ["leading direction (not selected: dimension 0)"]
    return data @ basis[:, :2], labels


def _plottable_response(y, n_samples: int) -> tuple[np.ndarray, np.ndarray | None]:
    """A numeric response as floats, or class labels as codes with their classes."""
    response = np.asarray(y)
    if response.ndim != 1 or response.shape[0] != n_samples:
        raise ValueError(
            f"y must be a 1-D array with one entry per row of X ({n_samples}), got shape "
            f"{response.shape}."
        )
    if response.dtype.kind in "fiu":
        return response.astype(float), None
    classes, codes = np.unique(response, return_inverse=True)
    return codes.astype(float), classes


def plot_selection(search, path, title: str | None = None) -> Path:
    """Cross-validated error of every candidate of a fitted ``DirectionLiftCV``, with error bars.

    Bars show ``mean_test_error`` with ± one standard error
    (``sem_test_error``, corrected for shared training rows); the chosen candidate is
    highlighted, the raw inputs' error is a dashed line, and a failed
    candidate gets no bar but its status.

    Parameters
    ----------
    search : fitted splitlift.DirectionLiftCV
    path : str or Path
    title : str, optional

    Returns
    -------
    Path
    """
    Figure = _figure_class()
    check_is_fitted(search, "cv_results_")
    results = search.cv_results_
    errors = np.asarray(results["mean_test_error"], dtype=float)
    spread = np.asarray(results["sem_test_error"], dtype=float)
    ok = np.array([status == "ok" for status in results["status"]])
    positions = np.arange(len(errors))[::-1]  # raw inputs at the top
    colours = [_CHOSEN_COLOUR if index == search.best_index_ else
               _OTHER_COLOUR if ok[index] else _INVALID_COLOUR for index in range(len(errors))]

    figure = Figure(figsize=(7.0, 1.4 + 0.4 * len(errors)))
    axes = figure.add_subplot()
    axes.barh(positions, np.where(ok, errors, 0.0), xerr=np.where(ok, spread, 0.0),
              color=colours, edgecolor="black", linewidth=0.5, capsize=3)
    axes.axvline(errors[0], color="black", linestyle="--", linewidth=0.8,
                 label="raw inputs")
    for position, good, status in zip(positions, ok, results["status"], strict=True):
        if not good:
            axes.text(0.0, position, f"  {status}"[:80], va="center", fontsize="small",
                      color=_INVALID_COLOUR)
    axes.set_yticks(positions, [str(name) for name in results["candidate"]])
    axes.set_xlabel(f"cross-validated error, ± 1 standard error ({search.n_splits_} splits)")
    axes.set_title(title or "candidates; the chosen one highlighted")
    axes.legend(loc="lower right", fontsize="small")
    figure.tight_layout()
    return _save(figure, path)
