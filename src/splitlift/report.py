"""Diagnostic report of a fitted lift: readable with ``str``, machine-readable with ``to_dict``."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from . import geometry
from ._tables import html_table, json_ready, text_table
from .loadings import leading_features

_STANDARDISED = "standardised inputs (each column centred, divided by its standard deviation)"
_RAW = "input coordinates as given"


@dataclass
class SubspaceComparison:
    """How a lift relates to one subspace."""

    label: str
    dim: int
    leakage: float
    restricted_singular_value: float
    angles_degrees: list[float] | None = None
    bootstrap_leakage: dict | None = None


#: Label and definition of ε(A, S), so that it cannot be read as data leakage.
OFF_SUBSPACE_LABEL = "off-subspace weight"
OFF_SUBSPACE_DEFINITION = (
    "off-subspace weight eps = sum_i |P_perp a_i|: the share of the lift's direction weight "
    "that points outside the subspace (0 = every split direction inside it, 1 = none). "
    "The oblique-forest theory calls it leakage; it has nothing to do with data leakage "
    "between training and test rows."
)
#: Median largest bootstrap angle above which a subspace counts as unstable
#: (common practice for this report, not a published limit).
UNSTABLE_ANGLE_DEGREES = 20.0
#: Restricted singular value, relative to what the lift achieves on its own
#: subspace, below which a subspace is poorly covered by the split directions.
WEAK_COVERAGE_RATIO = 0.5
#: Largest angle to a reference subspace above which the estimate is called off.
FAR_ANGLE_DEGREES = 30.0


@dataclass
class LiftReport:
    """Diagnostics of a fitted :class:`~splitlift.DirectionLift`.

    ``str(report)`` reads as a page of tables ending in findings and next
    steps; ``to_dict()`` is strict JSON; in a notebook the report shows as
    HTML, and :meth:`to_html` writes a self-contained page.

    Attributes
    ----------
    estimator : str
        The estimator with its settings.
    n_samples, n_features, dim : int
    coordinates : str
        The coordinates in which the lift acts and angles and weights are measured.
    eigenvalues : list of float
    n_directions, rank, n_in_subspace : int
    complement_weight : float
    comparisons : list of SubspaceComparison
        The estimated subspace first, then the reference when given.
    feature_names : list of str
    loadings : list of dict
        One entry per estimated direction: its standardised loadings by
        feature and a one-line summary of the leading ones.
    findings : list of dict
        Plain-language findings, each with ``finding``, ``threshold`` and
        ``action``.
    lifetime_suggestion : dict
        ``lifetime`` (a number, or None) and ``reason``.
    """

    estimator: str
    n_samples: int
    n_features: int
    dim: int
    coordinates: str
    eigenvalues: list[float]
    n_directions: int
    rank: int
    n_in_subspace: int
    complement_weight: float
    comparisons: list[SubspaceComparison] = field(default_factory=list)
    dim_test: dict | None = None
    stability: dict | None = None
    theory: dict | None = None
    linearity: dict | None = None
    warnings: list[str] = field(default_factory=list)
    feature_names: list[str] = field(default_factory=list)
    loadings: list[dict] = field(default_factory=list)
    findings: list[dict] = field(default_factory=list)
    lifetime_suggestion: dict | None = None
    reference_dim: int | None = None
    _dim_test: object = field(default=None, init=False, repr=False)
    _stability: object = field(default=None, init=False, repr=False)

    @classmethod
    def from_direction_lift(cls, lift, reference=None, stability=None) -> LiftReport:
        """Collect the diagnostics of a fitted ``DirectionLift``."""
        from sklearn.utils.validation import check_is_fitted

        from .estimators import MomentEstimator

        check_is_fitted(lift, "lift_")
        matrix = lift.lift_
        estimated = lift.subspace_basis_
        comparisons = [_compare("estimated subspace", matrix.matrix, estimated)]
        reference_dim = None
        if reference is not None:
            in_lift = lift.reference_in_lift_coordinates(reference)
            reference_dim = int(in_lift.shape[1])
            comparison = _compare("reference subspace", matrix.matrix, in_lift)
            comparison.angles_degrees = np.degrees(
                geometry.principal_angles(estimated, in_lift)
            ).tolist()
            comparisons.append(comparison)
        outside = np.linalg.norm(matrix.matrix - (matrix.matrix @ estimated) @ estimated.T, axis=1)
        test = getattr(lift.estimator_, "dim_test_", None)
        notes = list(getattr(lift.estimator_, "fit_warnings_", []))
        check = getattr(lift, "linearity_", None)
        moment = isinstance(lift.estimator_, MomentEstimator)
        if check is not None and moment and check.message():
            notes.append(check.message())
        if stability is not None:
            comparisons[0].bootstrap_leakage = stability.leakage_quantiles()
        standardised = lift.standardised_loadings_
        loadings = [{"direction": name, "summary": leading_features(row),
                     "loadings": {str(k): float(v) for k, v in row.items()}}
                    for name, row in standardised.iterrows()]
        theory = _theory(lift.n_samples_fit_, lift.n_features_in_, estimated.shape[1],
                         comparisons[0].leakage)
        report = cls(
            estimator=repr(lift.estimator_),
            n_samples=int(lift.n_samples_fit_),
            n_features=int(lift.n_features_in_),
            dim=int(estimated.shape[1]),
            coordinates=_STANDARDISED if lift.standardize else _RAW,
            eigenvalues=[float(v) for v in lift.estimator_.eigenvalues_],
            n_directions=matrix.n_directions,
            rank=matrix.rank(),
            n_in_subspace=int(np.sum(outside < 1e-12)),
            complement_weight=float(matrix.metadata.get("complement_weight", 0.0)),
            comparisons=comparisons,
            dim_test=None if test is None else test.to_dict(),
            stability=None if stability is None else stability.to_dict(),
            theory=theory,
            linearity=None if check is None else check.to_dict(),
            warnings=notes,
            feature_names=list(standardised.columns),
            loadings=loadings,
            lifetime_suggestion=_lifetime_suggestion(lift, theory),
            reference_dim=reference_dim,
        )
        report.findings = _findings(report, lift, moment and check is not None)
        report._dim_test, report._stability = test, stability
        return report

    def to_dict(self) -> dict:
        """Plain dictionary of every field; strict JSON (NaN and infinities become None)."""
        return json_ready({k: v for k, v in asdict(self).items() if not k.startswith("_")})

    def __repr__(self) -> str:
        return (f"<LiftReport: {self.estimator}, dim {self.dim} of {self.n_features}, "
                f"{len(self.findings)} finding(s)>")

    def __str__(self) -> str:
        return "\n".join(line for block in self._blocks("text") for line in block)

    def _repr_html_(self) -> str:
        return _html_page(self, plots={}, standalone=False)

    def to_html(self, path=None, plots: dict | None = None) -> str:
        """One self-contained HTML page: tables, findings and (optionally) plots embedded.

        Parameters
        ----------
        path : str or Path, optional
            Where to write the page (atomically); it is returned either way.
        plots : dict of str to bytes, optional
            PNG images by title, embedded as data URIs so the page reads
            offline and without Python.

        Returns
        -------
        str
        """
        page = _html_page(self, plots=plots or {}, standalone=True)
        if path is not None:
            from .persistence import atomic_write

            atomic_write(path, lambda handle: handle.write(page.encode("utf-8")))
        return page

    # --- the page, block by block (text for terminals; HTML reuses the tables) ---
    def _blocks(self, style: str):
        yield ["splitlift lift report", "=" * 21] + _pairs([
            ("estimator", self.estimator),
            ("data", f"n = {self.n_samples} rows, d = {self.n_features} features"),
            ("features used", ", ".join(self.feature_names)),
            ("coordinates", self.coordinates),
            ("subspace dim", str(self.dim) + ("" if self.dim_test is None else
                                              f" (chosen by {self.dim_test['rule']})")),
        ])
        yield ["", "eigenvalues"] + [text_table(*self._eigen_table())]
        if self._dim_test is not None:
            yield ["", str(self._dim_test)]
        if self.loadings:
            yield ["", "directions: leading features by standardised loading (per standard "
                       "deviation of each feature)"] + [text_table(*self._loadings_table())]
        n_complement = self.n_directions - self.n_in_subspace
        yield [""] + _pairs([
            ("lift", f"{self.n_directions} split directions, rank {self.rank} of "
                     f"{self.n_features}"),
            ("", f"{self.n_in_subspace} inside the subspace, total weight "
                 f"{1 - self.complement_weight:.4f}"),
            ("", f"{n_complement} on its complement, total weight {self.complement_weight:.4f}"),
        ])
        yield ["", OFF_SUBSPACE_DEFINITION] + [text_table(*self._comparison_table())]
        if self._stability is not None:
            yield ["", str(self._stability)]
        if self.lifetime_suggestion is not None:
            yield ["", "forest tuning (oblique STIT forest, Lipschitz ridge function)"] + \
                _pairs(self._theory_pairs())
        if self.linearity is not None:
            yield ["", "linearity condition of the moment methods"] + \
                _pairs(self._linearity_pairs())
        yield ["", "findings and next steps"] + (
            [f"  {i}. {f['finding']}\n     threshold: {f['threshold']}\n     next: {f['action']}"
             for i, f in enumerate(self.findings, start=1)] or
            ["  none: no check fired (still validate on held-out data)"])

    def _eigen_table(self):
        total = sum(abs(v) for v in self.eigenvalues) or 1.0
        rows = [{"k": k, "value": value, "share": 100 * abs(value) / total,
                 "inside": "yes" if k <= self.dim else ""}
                for k, value in enumerate(self.eigenvalues, start=1)]
        return rows, [("k", "k", "d"), ("value", "eigenvalue", ".5g"),
                      ("share", "share %", ".1f"), ("inside", "in subspace", "s")]

    def _loadings_table(self):
        rows = [{"direction": entry["direction"], "summary": entry["summary"]}
                for entry in self.loadings]
        return rows, [("direction", "direction", "s"), ("summary", "leading features", "s")]

    def _comparison_table(self):
        own = self.comparisons[0].restricted_singular_value
        rows = []
        for c in self.comparisons:
            rows.append({
                "label": c.label, "dim": c.dim, "weight": c.leakage,
                "sigma": c.restricted_singular_value,
                "relative": c.restricted_singular_value / own if own > 0 else None,
                "angle": None if c.angles_degrees is None or not c.angles_degrees
                else c.angles_degrees[0],
                "boot": None if c.bootstrap_leakage is None else c.bootstrap_leakage["q50"],
            })
        columns = [("label", "subspace", "s"), ("dim", "dim", "d"),
                   ("weight", OFF_SUBSPACE_LABEL, ".4f"),
                   ("sigma", "coverage sigma_min", ".4f"),
                   ("relative", "vs own subspace", ".2f")]
        if any(row["angle"] is not None for row in rows):
            columns.append(("angle", "largest angle (deg)", ".2f"))
        if any(row["boot"] is not None for row in rows):
            columns.append(("boot", "weight off bootstraps (median)", ".4f"))
        return rows, columns

    def _theory_pairs(self):
        suggestion = self.lifetime_suggestion
        pairs = []
        if self.theory is not None:
            t = self.theory
            pairs += [
                ("  rate with this lift", f"n^(-2/(d+2)) eps^(2(d-s)/(d+2)) = "
                                          f"{t['bound_factor'] * t['axis_rate']:.4g}"),
                ("  s-dimensional rate", f"n^(-2/(s+2)) = {t['subspace_rate']:.4g}, reached "
                                         f"when eps <= n^(-1/(s+2)) = "
                                         f"{t['leakage_threshold']:.4g}: "
                                         f"{'yes' if t['reaches_subspace_rate'] else 'no'}"),
            ]
        if suggestion["lifetime"] is not None:
            pairs.append(("  suggested setting",
                          f"StitForestRegressor(lift=..., lifetime={suggestion['lifetime']:.4g})"))
        pairs.append(("  how", suggestion["reason"]))
        return pairs

    def _linearity_pairs(self):
        c = self.linearity
        curvature = "n/a" if c["curvature"] is None else f"{c['curvature']:.4f}"
        expected = c.get("kurtosis_expected")
        kurtosis = f"{c['mardia_kurtosis']:.4g}" + (
            "" if expected is None else f" (normal inputs: d(d+2) = {expected:.4g})") + \
            f", z = {c['kurtosis_z']:.3g}"
        return [
            ("  inverse-mean curvature", f"{curvature} (doubtful above 0.05)"),
            ("  Mardia skewness", f"{c['mardia_skewness']:.4g}, p = "
                                  f"{c['skewness_p_value']:.3g} (doubtful below 0.001)"),
            ("  Mardia kurtosis", kurtosis),
        ]


def _lifetime_suggestion(lift, theory) -> dict:
    """The theory's lifetime with its constant set by the training data's lifted extent."""
    extent = getattr(lift, "lifted_extent_", None)
    if theory is None:
        reason = ("no subspace was estimated (dim 0), so the theory gives no scaling; use "
                  "lifetime='auto'." if lift.subspace_basis_.shape[1] == 0 else
                  "the lift has no weight off the subspace, for which the theory gives no "
                  "finite lifetime; use complement_weight > 0 or lifetime='auto'.")
        return {"lifetime": None, "reason": reason}
    if not extent or not np.isfinite(extent):
        return {"lifetime": None, "reason": "the training data have no extent along the lift; "
                                            "use lifetime='auto'."}
    value = theory["lifetime_scaling"] / extent
    return {
        "lifetime": float(value),
        "reason": (
            f"n^(1/(d+2)) eps^(-(d-s)/(d+2)) = {theory['lifetime_scaling']:.4g} divided by "
            f"the lifted training data's total extent {extent:.4g} (so its first cut comes at "
            "time 1/extent). The theory fixes the rate, not the constant: take this as the "
            "centre of a search, and compare with lifetime='auto' on held-out data."
        ),
    }


def _findings(report: LiftReport, lift, moment_method: bool) -> list[dict]:
    """Plain-language findings, each with the threshold that fired and what to do."""
    found = []

    def add(finding, threshold, action):
        found.append({"finding": finding, "threshold": threshold, "action": action})

    estimate = report.comparisons[0]
    if report.dim == 0:
        add("No relevant direction was detected (dimension 0): the lift spreads its weight "
            "evenly, so it offers the forest nothing the raw inputs lack.",
            "estimated dimension 0",
            "Use the raw inputs (DirectionLiftCV keeps them when no lift helps), or try a "
            "gradient method (GradientOuterProduct), which sees more kinds of dependence.")
    for warning in getattr(lift.estimator_, "fit_warnings_", []):
        add(f"The fit itself is doubtful: {warning.split(';')[0].split('. ')[0]}.",
            "a fit warning", warning)
    sample = getattr(lift.estimator_, "row_sample_", None)
    if sample is not None and sample["rows_used"] < sample["rows_total"]:
        add(f"The subspace was estimated on a random sample of {sample['rows_used']} of the "
            f"{sample['rows_total']} rows (Dask input: the gradient methods need their rows "
            "in memory).", "rows_used < rows_total",
            "Raise the estimator's sample_rows if memory allows, check the estimate's "
            "stability on the sample, or use a moment method, which reads every row.")
    if report.reference_dim is not None and report.dim < report.reference_dim:
        add(f"A whole direction is missed: the estimate has dimension {report.dim} but the "
            f"reference has {report.reference_dim}; small angles to the estimate do not "
            "show this.",
            "estimated dimension < reference dimension",
            "Fix dim to the reference's, or use another estimator: SIR cannot see symmetric "
            "dependence such as y = (b'x)^2; SAVE, pHd and OPG can.")
    if len(report.comparisons) > 1:
        angles = report.comparisons[1].angles_degrees or []
        if angles and angles[0] > FAR_ANGLE_DEGREES:
            add(f"The estimate is far from the reference: largest angle {angles[0]:.1f} "
                "degrees.", f"largest angle > {FAR_ANGLE_DEGREES:g} degrees",
                "Compare estimators, collect more data, or check the reference.")
        own = estimate.restricted_singular_value
        ratio = report.comparisons[1].restricted_singular_value / own if own > 0 else 0.0
        if ratio < WEAK_COVERAGE_RATIO:
            add(f"The split directions cover the reference subspace poorly: its restricted "
                f"singular value is {ratio:.2f} times the lift's on its own subspace.",
                f"ratio < {WEAK_COVERAGE_RATIO:g}",
                "Cuts along some relevant direction are rare: raise complement_weight or "
                "n_in_subspace, or improve the estimate.")
    if report.stability is not None and report.dim:
        median = report.stability["largest_angle_degrees"]["q50"]
        if median > UNSTABLE_ANGLE_DEGREES:
            add(f"The estimate is unstable: the median largest bootstrap angle is "
                f"{median:.1f} degrees.", f"median > {UNSTABLE_ANGLE_DEGREES:g} degrees "
                "(common practice)",
                "Lower dim, collect more data, use fewer features, or use the lift with "
                "inputs kept (DirectionLift(keep_inputs=True)).")
    if report.theory is not None and not report.theory["reaches_subspace_rate"]:
        t = report.theory
        add(f"The {OFF_SUBSPACE_LABEL} eps = {estimate.leakage:.3g} exceeds n^(-1/(s+2)) = "
            f"{t['leakage_threshold']:.3g}, so the theory does not promise the faster "
            "s-dimensional rate for a STIT forest on this lift.",
            "eps > n^(-1/(s+2))",
            "For the STIT forest, a smaller complement_weight sharpens the theory's rate, "
            "but only if the subspace is right; choose it by cross-validation "
            "(DirectionLiftCV), not by the bound alone.")
    if moment_method and lift.linearity_.doubtful:
        add("The linearity condition of SIR, SAVE and pHd looks doubtful for these inputs "
            "(skewed, clustered or curved), so the moment methods can miss or invent "
            "directions.", "curvature > 0.05 or Mardia skewness p < 0.001",
            "Compare with GradientOuterProduct, which needs no such condition.")
    return found


def _theory(n_samples: int, n_features: int, dim: int, leakage: float) -> dict | None:
    """The theory's lifetime scaling and bound factors at the lift's leakage."""
    from .forest import leakage_threshold, theory_lifetime, theory_risk_rate

    if dim == 0 or (leakage == 0 and dim < n_features):
        return None
    axis_rate = n_samples ** (-2.0 / (n_features + 2))
    threshold = leakage_threshold(n_samples, dim)
    return {
        "lifetime_scaling": theory_lifetime(n_samples, n_features, dim, leakage),
        "bound_factor": theory_risk_rate(n_samples, n_features, dim, leakage) / axis_rate,
        "axis_rate": axis_rate,
        "subspace_rate": n_samples ** (-2.0 / (dim + 2)),
        "leakage_threshold": threshold,
        "reaches_subspace_rate": bool(leakage <= threshold),
    }


def _compare(label: str, matrix: np.ndarray, basis: np.ndarray) -> SubspaceComparison:
    return SubspaceComparison(
        label=label,
        dim=int(basis.shape[1]),
        leakage=geometry.leakage(matrix, basis),
        restricted_singular_value=geometry.restricted_singular_value(matrix, basis),
    )


def _pairs(rows: list[tuple[str, str]]) -> list[str]:
    return [f"{key:<26}{value}" for key, value in rows]


_PAGE_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 60em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.15em; margin-top: 1.6em; }
table.splitlift-table { border-collapse: collapse; margin: 0.5em 0; }
table.splitlift-table td, table.splitlift-table th { padding: 0.2em 0.8em;
  border-bottom: 1px solid #ddd; text-align: right; }
table.splitlift-table caption { text-align: left; font-style: italic; }
.finding { margin: 0.6em 0; } .muted { color: #555; }
img.plot { max-width: 100%; border: 1px solid #ddd; margin: 0.5em 0; }
"""


def _html_page(report: LiftReport, plots: dict, standalone: bool) -> str:
    """The report as HTML: the same tables as the text, findings as a list, plots inline."""
    import base64
    import html

    esc = html.escape
    parts = ["<h1>splitlift lift report</h1>", "<table class='splitlift-table'>"]
    for key, value in [("estimator", report.estimator),
                       ("data", f"n = {report.n_samples} rows, d = {report.n_features} features"),
                       ("features used", ", ".join(report.feature_names)),
                       ("coordinates", report.coordinates),
                       ("subspace dim", str(report.dim))]:
        parts.append(f"<tr><th>{esc(key)}</th><td style='text-align:left'>{esc(value)}</td></tr>")
    parts.append("</table>")
    parts += ["<h2>Findings and next steps</h2><ol>"]
    parts += [f"<li class='finding'><b>{esc(f['finding'])}</b><br><span class='muted'>"
              f"threshold: {esc(f['threshold'])}</span><br>next: {esc(f['action'])}</li>"
              for f in report.findings] or ["<li>none: no check fired (still validate on "
                                            "held-out data)</li>"]
    parts.append("</ol>")
    parts += ["<h2>Eigenvalues</h2>", html_table(*report._eigen_table())]
    if report._dim_test is not None:
        parts += ["<h2>Dimension</h2>", report._dim_test._repr_html_()]
    if report.loadings:
        parts += ["<h2>Directions</h2>", html_table(*report._loadings_table(),
                                                   caption="leading standardised loadings")]
    parts += ["<h2>Lift</h2>", f"<p>{esc(OFF_SUBSPACE_DEFINITION)}</p>",
              html_table(*report._comparison_table())]
    if report._stability is not None and hasattr(report._stability, "_repr_html_"):
        parts += ["<h2>Stability</h2>", report._stability._repr_html_()]
    if report.lifetime_suggestion is not None:
        parts += ["<h2>Forest tuning</h2><ul>"] + [
            f"<li>{esc(key.strip())}: {esc(value)}</li>" for key, value in
            report._theory_pairs()] + ["</ul>"]
    if report.linearity is not None:
        parts += ["<h2>Linearity condition</h2><ul>"] + [
            f"<li>{esc(key.strip())}: {esc(value)}</li>" for key, value in
            report._linearity_pairs()] + ["</ul>"]
    for title, png in plots.items():
        data = base64.b64encode(png).decode("ascii")
        parts += [f"<h2>{esc(title)}</h2>",
                  f"<img class='plot' alt='{esc(title)}' src='data:image/png;base64,{data}'>"]
    body = "\n".join(parts)
    if not standalone:
        return f"<div class='splitlift-report'>{body}</div>"
    return ("<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
            f"<title>splitlift lift report</title><style>{_PAGE_STYLE}</style></head>"
            f"<body>{body}</body></html>\n")
