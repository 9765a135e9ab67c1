"""Choosing the dimension of the estimated subspace (``dim="auto"``).

Each rule is a small scikit-learn-style object (parameters in ``__init__``,
nested parameters reachable by ``GridSearchCV`` as ``dim_rule__alpha``) with
one method, ``select(estimator, X, y)``, returning the chosen dimension and a
:class:`DimensionTest` table. ``dim = 0`` is a valid answer: no detectable
structure. The cross-validation rule (``dim_rule="cv"``) fits forests, so it
lives in the model-selection layer, :mod:`splitlift.selection`.
"""

from __future__ import annotations

import importlib
from dataclasses import asdict, dataclass, field
from numbers import Integral, Real

import numpy as np
from scipy import stats
from sklearn.base import BaseEstimator, clone
from sklearn.utils import check_random_state

from . import geometry
from ._progress import progress_bar
from ._tables import html_table, json_ready, text_table
from .moments import Whitening


@dataclass
class DimensionTest:
    """The table a dimension rule leaves behind.

    Attributes
    ----------
    rule : str
    chosen : int
    rows : list of dict
        One row per candidate dimension k, with keys ``k``, ``statistic``,
        ``df`` (or ``null_draws``), ``p_value`` (tests) or ``criterion``
        (ladle, cross-validation); missing entries are None.
    """

    rule: str
    chosen: int
    rows: list[dict] = field(default_factory=list)

    def to_dict(self) -> dict:
        """Plain dictionary; strict JSON (NaN and infinities become None)."""
        return json_ready(asdict(self))

    def table_rows(self) -> list[dict]:
        """One row per candidate dimension, with the question asked and the decision."""
        tested = any(row.get("p_value") is not None for row in self.rows)
        out = []
        for row in self.rows:
            k = row["k"]
            if tested:
                question = ("y depends on no direction of X" if k == 0 else
                            f"y depends on at most {k} direction{'s' if k > 1 else ''}")
                decision = (f"kept: dimension {k}" if k == self.chosen
                            else "rejected" if k < self.chosen else "")
            else:
                question = f"{k} direction{'s' if k != 1 else ''}"
                decision = f"lowest: dimension {k}" if k == self.chosen else ""
            out.append({**row, "question": question, "decision": decision,
                        "evidence": row.get("df", row.get("null_draws"))})
        return out

    def _columns(self) -> list[tuple[str, str, str]]:
        tested = any(row.get("p_value") is not None for row in self.rows)
        if tested:
            draws = "null_draws" in (self.rows[0] if self.rows else {})
            return [("question", "hypothesis", "s"), ("statistic", "statistic", ".4g"),
                    ("evidence", "null draws" if draws else "df", "d"),
                    ("p_value", "p-value", ".3g"), ("decision", "decision", "s")]
        columns = [("question", "candidate", "s"), ("criterion", "criterion", ".4g")]
        if any(row.get("std") is not None for row in self.rows):
            columns.append(("std", "spread", ".3g"))
        return columns + [("decision", "decision", "s")]

    def __str__(self) -> str:
        heading = f"dimension {self.chosen}, chosen by {self.rule}"
        return heading + "\n" + text_table(self.table_rows(), self._columns())

    def __repr__(self) -> str:
        return f"<DimensionTest: {self.rule}; dimension {self.chosen}, {len(self.rows)} rows>"

    def _repr_html_(self) -> str:
        return html_table(self.table_rows(), self._columns(),
                          caption=f"dimension {self.chosen}, chosen by {self.rule}")


def _check_alpha(alpha) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, Real) or not 0 < alpha < 1:
        raise ValueError(f"alpha must be strictly between 0 and 1, got {alpha!r}.")
    return float(alpha)


def _check_draws(value, name: str, minimum: int = 2) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral) or value < minimum:
        raise ValueError(f"{name} must be an integer >= {minimum}, got {value!r}.")
    return int(value)


def default_max_dim(n_features: int) -> int:
    """Largest dimension a rule considers: d - 1 for d <= 10, else floor(d / log d).

    The second branch is the ladle's default (Luo & Li 2016) and keeps
    resampling rules affordable for wide data.
    """
    if n_features <= 10:
        return max(n_features - 1, 1)
    return int(n_features / np.log(n_features))


def _largest_candidate(estimator, n_features: int, requested=None) -> int:
    """Largest dimension a rule tries: requested or default, within what the method gives."""
    top = default_max_dim(n_features) if requested is None else int(requested)
    if not 1 <= top <= n_features:
        raise ValueError(f"max_dim must be between 1 and n_features = {n_features}, got {top}.")
    return max(1, min(top, getattr(estimator, "_n_usable", n_features)))


def _fixed_dim(estimator, dim: int):
    """An unfitted copy of ``estimator`` that estimates exactly ``dim`` directions."""
    return clone(estimator).set_params(dim=dim)


def _tail_statistic(eigenvalues: np.ndarray, k: int) -> float:
    return float(np.sum(np.abs(eigenvalues[k:])))


class SequentialChiSquare(BaseEstimator):
    """Sequential asymptotic chi-square tests of ``dim = k`` against ``dim > k``.

    Tests k = 0, 1, ... in turn and returns the first k not rejected at
    level ``alpha``. Available for SIR and pHd.

    Parameters
    ----------
    alpha : float in (0, 1), default 0.05
    weighted : bool, default False
        SIR only. False: ``n Σ_{j>k} λ_j ~ χ²((p-k)(H-k-1))``, valid for
        normal X (Li 1991). True: the weighted chi-square limit of Bura &
        Cook (2001), valid without normality; its p-value uses the
        Satterthwaite (1946) two-moment approximation.

    References
    ----------
    Li, K.-C. (1991). Sliced inverse regression for dimension reduction. JASA 86.
    Li, K.-C. (1992). On principal Hessian directions. JASA 87, Theorem 4.1.
    Bura, E. and Cook, R. D. (2001). Extending sliced inverse regression: the
    weighted chi-squared test. JASA 96, 996-1003.
    Satterthwaite, F. E. (1946). An approximate distribution of estimates of
    variance components. Biometrics Bulletin 2, 110-114.
    """

    def __init__(self, alpha=0.05, weighted=False):
        self.alpha = alpha
        self.weighted = weighted

    def select(self, estimator, X, y, sample_weight=None) -> tuple[int, DimensionTest]:
        alpha = _check_alpha(self.alpha)
        tests = getattr(estimator, "_chi_square_tests", None)
        if tests is None:
            raise ValueError(
                f"dim_rule='chi2' is not available for {type(estimator).__name__}; "
                "use 'permutation', 'ladle' or 'cv'."
            )
        rows, chosen = [], None
        for k, (statistic, df, p_value) in enumerate(tests(X, y, self.weighted, sample_weight)):
            rows.append({"k": k, "statistic": statistic, "df": df, "p_value": p_value})
            if p_value > alpha:
                chosen = k
                break
        if chosen is None:  # every test rejected: the largest dimension the test allows
            chosen = len(rows)
        name = "weighted chi-square (Bura & Cook 2001)" if self.weighted else "chi-square"
        return chosen, DimensionTest(f"sequential {name}, alpha = {alpha:g}", chosen, rows)


def satterthwaite_p_value(statistic: float, weights: np.ndarray) -> float:
    """P(Σ w_j χ²_1 > statistic) by matching a scaled chi-square's two moments."""
    weights = weights[weights > 1e-12 * max(weights.max(), 1e-300)]
    if weights.size == 0:
        return 1.0
    scale = np.sum(weights**2) / np.sum(weights)
    df = np.sum(weights) ** 2 / np.sum(weights**2)
    return float(stats.chi2.sf(statistic / scale, df))


class PermutationTest(BaseEstimator):
    """Sequential permutation tests of ``dim = k`` (Cook & Yin 2001), for any estimator.

    In whitened coordinates, split ``Z = Z_1 Γ_1^T + Z_2 Γ_2^T`` along the
    first k estimated directions ``Γ_1`` and the rest ``Γ_2``. Under
    ``dim = k`` the part ``Z_2`` is independent of ``(y, Z_1)`` (given the
    linearity condition), so permuting its rows leaves the distribution of
    the tail statistic ``Σ_{j>k} |λ_j|`` unchanged. The p-value is
    ``(1 + #{null >= observed}) / (1 + n_permutations)``.

    Parameters
    ----------
    alpha : float in (0, 1), default 0.05
    n_permutations : int >= 2, default 200
    random_state : int, RandomState or None, default None

    References
    ----------
    Cook, R. D. and Yin, X. (2001). Dimension reduction and visualization in
    discriminant analysis. Australian & New Zealand Journal of Statistics
    43, 147-199.
    """

    def __init__(self, alpha=0.05, n_permutations=200, random_state=None):
        self.alpha = alpha
        self.n_permutations = n_permutations
        self.random_state = random_state

    def select(self, estimator, X, y, sample_weight=None) -> tuple[int, DimensionTest]:
        alpha = _check_alpha(self.alpha)
        n_permutations = _check_draws(self.n_permutations, "n_permutations")
        generator = check_random_state(self.random_state)
        Z = Whitening.fit(X, sample_weight=sample_weight).transform(X)
        d = Z.shape[1]
        top = min(_largest_candidate(estimator, d), d - 1)
        full = _fixed_dim(estimator, max(top, 1)).fit(Z, y, sample_weight=sample_weight)
        rows, chosen = [], top + 1 if top < d else d
        bar = progress_bar((top + 1) * n_permutations, "permutation tests")
        for k in range(top + 1):
            observed = _tail_statistic(full.eigenvalues_, k)
            inside = full.directions_[:, :k]
            inside = np.linalg.qr(inside)[0] if k else np.zeros((d, 0))
            outside = geometry.orthonormal_complement(inside) if k else np.eye(d)
            fixed, moving = Z @ inside @ inside.T, Z @ outside
            null = np.empty(n_permutations)
            for draw in range(n_permutations):
                # weights stay with their rows of (fixed part, y); the rest is permuted
                permuted = fixed + moving[generator.permutation(Z.shape[0])] @ outside.T
                refit = _fixed_dim(estimator, max(top, 1)).fit(permuted, y,
                                                                sample_weight=sample_weight)
                null[draw] = _tail_statistic(refit.eigenvalues_, k)
                bar.update(1)
            p_value = float((1 + np.sum(null >= observed)) / (1 + n_permutations))
            rows.append({"k": k, "statistic": observed, "null_draws": n_permutations,
                         "p_value": p_value})
            if p_value > alpha:
                chosen = k
                break
        bar.close()
        chosen = min(chosen, d)
        return chosen, DimensionTest(f"permutation test, alpha = {alpha:g}", chosen, rows)


class LadleEstimator(BaseEstimator):
    """The ladle estimator of the dimension (Luo & Li 2016).

    Minimises ``g(k) = f(k) + φ(k)`` over ``k = 0 .. k_max``, where
    ``φ(k) = |λ_{k+1}| / (1 + Σ_{i=0}^{k_max} |λ_{i+1}|)`` falls with the
    eigenvalues and ``f(k) = f0(k) / (1 + Σ_i f0(i))`` with
    ``f0(k) = mean over bootstrap fits of 1 - |det(B_k^T B*_k)|`` (and
    ``f0(0) = 0``) rises once the k-th eigenvector becomes unstable.
    ``|det(B_k^T B*_k)|`` is the product of the cosines of the principal
    angles between the full-data and bootstrap subspaces.

    Parameters
    ----------
    n_boot : int >= 2, default 50
    max_dim : int, optional
        ``k_max``; default :func:`default_max_dim`.
    normalize : bool or "auto", default "auto"
        Divide the eigenvalues by their sum before forming ``φ``. The
        published criterion uses them as they are, which suits SIR and SAVE
        (scale-free eigenvalues; SIR's are squared correlations, at most 1)
        and lets it choose 0 when nothing is there. For pHd, OPG and ADE the
        eigenvalues carry the units of y or of the gradients, so the raw
        criterion would depend on them. ``"auto"``: raw for SIR and SAVE,
        normalised otherwise.
    resample : {"auto", "refit", "local"}, default "auto"
        ``"refit"``: the published bootstrap, one full fit per replicate.
        ``"local"``: for estimators built from one term per anchor or row
        (OPG, ADE), redraw those terms from the fitted estimator instead of
        refitting, so the rule costs about one fit in all. It reflects the
        variation of the average over anchors or rows but not that of each
        local fit, so it is an approximation; in the benchmark it chose the
        same dimension as the published ladle on the test functions of
        ``splitlift bench``. ``"auto"``: local above
        :data:`LOCAL_RESAMPLING_MIN_ROWS` rows where the estimator offers it,
        the published refit otherwise.
    random_state : int, RandomState or None, default None

    References
    ----------
    Luo, W. and Li, B. (2016). Combining eigenvalues and variation of
    eigenvectors for order determination. Biometrika 103, 875-887.
    """

    def __init__(self, n_boot=50, max_dim=None, normalize="auto", resample="auto",
                 random_state=None):
        self.n_boot = n_boot
        self.max_dim = max_dim
        self.normalize = normalize
        self.resample = resample
        self.random_state = random_state

    def select(self, estimator, X, y, sample_weight=None) -> tuple[int, DimensionTest]:
        n_boot = _check_draws(self.n_boot, "n_boot")
        n, d = X.shape
        top = _largest_candidate(estimator, d, self.max_dim)
        generator = check_random_state(self.random_state)
        if uses_local_resampling(self.resample, estimator, n):
            # the fitted estimator redraws its own (weighted) local terms: no refit at all
            full, label = estimator, f"ladle ({n_boot} local resamples)"
            replicates = (estimator._resampled_directions(generator) for _ in range(n_boot))
        else:
            full = _fixed_dim(estimator, top).fit(X, y, sample_weight=sample_weight)
            label = f"ladle ({n_boot} bootstrap fits)"
            # weighted data: each drawn row keeps its weight
            replicates = (_fixed_dim(estimator, top).fit(
                X[rows], y[rows],
                sample_weight=None if sample_weight is None else sample_weight[rows]).directions_
                for rows in (generator.randint(0, n, n) for _ in range(n_boot)))
        full_bases = [np.linalg.qr(full.directions_[:, :k])[0] for k in range(1, top + 1)]
        variation = np.zeros(top + 1)
        with progress_bar(n_boot, "ladle resamples") as bar:
            for directions in replicates:
                for k in range(1, top + 1):
                    boot_basis = np.linalg.qr(directions[:, :k])[0]
                    cosines = np.cos(geometry.principal_angles(full_bases[k - 1], boot_basis))
                    variation[k] += (1.0 - np.prod(cosines)) / n_boot
                bar.update(1)
        eigen = np.abs(full.eigenvalues_)
        normalize = self.normalize
        if normalize == "auto":
            normalize = not getattr(estimator, "_scale_free_eigenvalues", False)
        if normalize and eigen.sum() > 0:
            eigen = eigen / eigen.sum()
        padded = np.append(eigen, 0.0)[: top + 1]
        phi = padded / (1.0 + padded.sum())
        f = variation / (1.0 + variation.sum())
        criterion = phi + f
        chosen = int(np.argmin(criterion))
        rows_out = [{"k": k, "criterion": float(criterion[k])} for k in range(top + 1)]
        return chosen, DimensionTest(label, chosen, rows_out)


#: Rows above which ``resample="auto"`` redraws local terms instead of refitting.
LOCAL_RESAMPLING_MIN_ROWS = 2000


def uses_local_resampling(resample: str, estimator, n_samples: int) -> bool:
    """Whether a resampling rule should redraw the estimator's local terms (see the ladle)."""
    if resample not in ("auto", "refit", "local"):
        raise ValueError(f"resample must be 'auto', 'refit' or 'local', got {resample!r}.")
    offered = hasattr(estimator, "_resampled_directions")
    if resample == "local" and not offered:
        raise ValueError(
            f"resample='local' needs an estimator built from local terms "
            f"(GradientOuterProduct, AverageDerivative), not {type(estimator).__name__}; "
            "use resample='refit'."
        )
    return offered and (resample == "local" or
                        (resample == "auto" and n_samples > LOCAL_RESAMPLING_MIN_ROWS))


#: Rule names and their factories. ``"cv"`` fits forests on lifted data, so it
#: lives in the model-selection layer above the estimators and the transformer
#: (:class:`splitlift.selection.CrossValidatedDimension`), which registers it
#: here when it loads; this module never imports it at module level, and loads
#: it by name only when a fit asks for ``"cv"`` before anything else did.
RULES = {
    "chi2": SequentialChiSquare,
    "weighted_chi2": lambda: SequentialChiSquare(weighted=True),
    "permutation": PermutationTest,
    "ladle": LadleEstimator,
    "cv": None,
}


def register_rule(name: str, factory) -> None:
    """Provide the factory of a named rule defined in a layer above this one."""
    if name not in RULES:
        raise ValueError(f"unknown dimension rule {name!r}; known names: {sorted(RULES)}.")
    RULES[name] = factory


def resolve_rule(rule, estimator):
    """Turn ``dim_rule`` (None, a name or a rule object) into a rule object."""
    if rule is None:
        rule = estimator._default_dim_rule
    if isinstance(rule, str):
        available = estimator._dim_rules
        if rule not in available:
            raise ValueError(
                f"dim_rule={rule!r} is not available for {type(estimator).__name__}; "
                f"choose one of {sorted(available)}."
            )
        factory = RULES[rule]
        if factory is None:  # registered by the model-selection layer when it loads
            importlib.import_module("splitlift.selection")
            factory = RULES[rule]
        rule = factory()
    elif not hasattr(rule, "select"):
        raise ValueError(f"dim_rule must be a rule name or an object with select(), got {rule!r}.")
    return _seeded(rule, getattr(estimator, "random_state", None))


def _seeded(rule, random_state):
    """A copy of ``rule`` seeded by the estimator when the rule has no seed of its own."""
    if random_state is None or not hasattr(rule, "get_params"):
        return rule
    if "random_state" not in rule.get_params(deep=False) or rule.random_state is not None:
        return rule
    return clone(rule).set_params(random_state=random_state)
