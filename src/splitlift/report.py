"""Diagnostic report of a fitted lift: readable with ``str``, machine-readable with ``to_dict``."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from . import geometry

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


@dataclass
class LiftReport:
    """Diagnostics of a fitted :class:`~splitlift.DirectionLift`.

    Attributes
    ----------
    estimator : str
        The estimator with its settings.
    n_samples, n_features, dim : int
    coordinates : str
        The coordinates in which the lift acts and angles and leakage are measured.
    eigenvalues : list of float
    n_directions, rank, n_in_subspace : int
    complement_weight : float
    comparisons : list of SubspaceComparison
        The estimated subspace first, then the reference when given.
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
    _dim_test_text: str | None = field(default=None, init=False, repr=False)
    _stability_text: str | None = field(default=None, init=False, repr=False)

    @classmethod
    def from_direction_lift(cls, lift, reference=None, stability=None) -> LiftReport:
        """Collect the diagnostics of a fitted ``DirectionLift``."""
        from sklearn.utils.validation import check_is_fitted

        from .estimators import MomentEstimator

        check_is_fitted(lift, "lift_")
        matrix = lift.lift_
        estimated = lift.subspace_basis_
        comparisons = [_compare("estimated subspace", matrix.matrix, estimated)]
        if reference is not None:
            in_lift = lift.reference_in_lift_coordinates(reference)
            comparison = _compare("reference subspace", matrix.matrix, in_lift)
            comparison.angles_degrees = np.degrees(
                geometry.principal_angles(estimated, in_lift)
            ).tolist()
            comparisons.append(comparison)
        outside = np.linalg.norm(matrix.matrix - (matrix.matrix @ estimated) @ estimated.T, axis=1)
        test = getattr(lift.estimator_, "dim_test_", None)
        notes = []
        if estimated.shape[1] == 0:
            notes.append("no relevant subspace detected (dim 0): the lift spreads its weight "
                         "evenly over all directions")
        check = getattr(lift, "linearity_", None)
        if check is not None and isinstance(lift.estimator_, MomentEstimator) and check.message():
            notes.append(check.message())
        notes.extend(getattr(lift.estimator_, "fit_warnings_", []))
        if stability is not None:
            comparisons[0].bootstrap_leakage = stability.leakage_quantiles()
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
            theory=_theory(lift.n_samples_fit_, lift.n_features_in_, estimated.shape[1],
                           comparisons[0].leakage),
            linearity=None if check is None else check.to_dict(),
            warnings=notes,
        )
        report._dim_test_text = None if test is None else str(test)
        report._stability_text = None if stability is None else str(stability)
        return report

    def to_dict(self) -> dict:
        """Plain, JSON-serialisable dictionary of every field."""
        return {k: v for k, v in asdict(self).items() if not k.startswith("_")}

    def __str__(self) -> str:
        lines = ["splitlift lift report", "=" * 21]
        lines += _pairs(
            [
                ("estimator", self.estimator),
                ("data", f"n = {self.n_samples} rows, d = {self.n_features} features"),
                ("coordinates", self.coordinates),
                ("subspace dim", str(self.dim)),
            ]
        )
        rule = "" if self.dim_test is None else f", chosen by {self.dim_test['rule']}"
        lines += ["", f"eigenvalues (* inside the chosen subspace{rule})",
                  "    k        value    share"]
        total = sum(abs(v) for v in self.eigenvalues) or 1.0
        for k, value in enumerate(self.eigenvalues, start=1):
            mark = " *" if k <= self.dim else ""
            lines.append(f"  {k:3d}  {value:11.5g}  {100 * abs(value) / total:6.1f}%{mark}")
        if self._dim_test_text:
            lines += ["", self._dim_test_text]
        n_complement = self.n_directions - self.n_in_subspace
        lines += [""] + _pairs(
            [
                ("lift", f"{self.n_directions} directions, rank {self.rank} of "
                         f"{self.n_features}"),
                ("", f"{self.n_in_subspace} inside the subspace, weight "
                     f"{1 - self.complement_weight:.4f}"),
                ("", f"{n_complement} on its complement, weight {self.complement_weight:.4f}"),
            ]
        )
        for comparison in self.comparisons:
            lines += [""] + _pairs(
                [
                    (comparison.label, f"dimension {comparison.dim}"),
                    ("  leakage", f"{comparison.leakage:.4f}"),
                    ("  restricted sing. value", f"{comparison.restricted_singular_value:.4f}"),
                ]
            )
            if comparison.angles_degrees is not None:
                angles = ", ".join(f"{a:.2f}" for a in comparison.angles_degrees)
                lines += _pairs([("  angles to estimate", f"{angles} degrees (largest first)")])
            if comparison.bootstrap_leakage is not None:
                q = comparison.bootstrap_leakage
                spread = f"median {q['q50']:.4f}, 90% range {q['q05']:.4f}-{q['q95']:.4f}"
                lines += _pairs([("  leakage to bootstraps", spread)])
        if self._stability_text:
            lines += ["", self._stability_text]
        if self.theory is not None:
            t = self.theory
            lines += ["", "error-rate theory (oblique STIT forest, Lipschitz ridge function)"]
            lines += _pairs([
                ("  lifetime scaling", f"lambda_n = C * {t['lifetime_scaling']:.4g} "
                                       "(n^(1/(d+2)) eps^(-(d-s)/(d+2)))"),
                ("  bound factor", f"{t['bound_factor']:.4g} = eps^(2(d-s)/(d+2)) times the "
                                   f"axis-aligned rate n^(-2/(d+2)) = {t['axis_rate']:.4g}"),
                ("  s-dimensional rate", f"n^(-2/(s+2)) = {t['subspace_rate']:.4g}, reached when "
                                         f"eps <= n^(-1/(s+2)) = {t['leakage_threshold']:.4g}"
                                         f" ({'yes' if t['reaches_subspace_rate'] else 'no'})"),
            ])
        if self.linearity is not None:
            c = self.linearity
            curvature = "n/a" if c["curvature"] is None else f"{c['curvature']:.4f}"
            lines += ["", "linearity condition"] + _pairs([
                ("  inverse-mean curvature", f"{curvature} (flag above 0.05)"),
                ("  Mardia skewness",
                 f"{c['mardia_skewness']:.4g}, p = {c['skewness_p_value']:.3g}"),
                ("  Mardia kurtosis", f"{c['mardia_kurtosis']:.4g}, z = {c['kurtosis_z']:.3g}"),
            ])
        for note in self.warnings:
            lines += ["", f"WARNING: {note}"]
        return "\n".join(lines)


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
