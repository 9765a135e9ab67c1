"""Choosing the lifetime: the cross-validation grid and the theory's scaling.

The lifetime λ is the only complexity parameter of a STIT (Mondrian) forest.
It carries the units of the lifted coordinates, so the grid is laid out in
the dimensionless time ``τ = λ R``, with ``R`` the clock rate of the whole
domain: the sum over directions of the training data's extent (data mode) or
of the window's width (window mode). ``1 / R`` is the expected time of the
first cut.
"""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np

from .._validation import check_dim

#: Number of finite lifetimes in the cross-validation grid.
GRID_SIZE = 30
#: Smallest dimensionless time ``τ = λ R`` on the grid (mostly a single cell).
GRID_START = 0.25
#: Folds of the cross-validation behind ``lifetime="auto"``.
N_FOLDS = 5


def lifetime_grid(root_rate: float, n_samples: int, n_features: int, extent: str) -> np.ndarray:
    """Ascending lifetimes tried by ``lifetime="auto"``.

    Parameters
    ----------
    root_rate : float
        Clock rate ``R`` of the whole domain (positive).
    n_samples, n_features : int
        Size of the training data.
    extent : {"data", "window"}

    Returns
    -------
    ndarray
        ``GRID_SIZE`` values log-spaced in ``τ = λ R`` from ``GRID_START``
        up to ``n_samples`` in data mode, followed by ``inf`` (full growth);
        in window mode up to ``d (n^{1/d} - 1)``, where a window with equal
        widths has about ``n`` cells (Mourtada, Gaïffas & Scornet 2020:
        ``E[#cells] = Π_j (1 + λ L_j)``), and no ``inf``.
    """
    if extent == "data":
        top = max(float(n_samples), 4 * GRID_START)
    else:
        top = max(n_features * (n_samples ** (1.0 / n_features) - 1.0), 4 * GRID_START)
    grid = np.geomspace(GRID_START, top, GRID_SIZE) / root_rate
    return np.append(grid, np.inf) if extent == "data" else grid


def _check_theory_arguments(n_samples, n_features, subspace_dim, leakage):
    for name, value in (("n_samples", n_samples), ("n_features", n_features)):
        if isinstance(value, bool) or not isinstance(value, Integral) or value < 1:
            raise ValueError(f"{name} must be a positive integer, got {value!r}.")
    subspace_dim = check_dim(subspace_dim, n_features, "subspace_dim")
    if isinstance(leakage, bool) or not isinstance(leakage, Real) or not 0 <= leakage <= 1:
        raise ValueError(
            f"leakage must be a number in [0, 1] (a lift's ε(A, S)), got {leakage!r}."
        )
    if leakage == 0 and subspace_dim < n_features:
        raise ValueError(
            "leakage 0 with subspace_dim < n_features describes a rank-deficient lift, "
            "for which the theory gives no finite lifetime; pass the leakage of a full-rank "
            "lift (complement_weight > 0)."
        )
    return int(n_samples), int(n_features), subspace_dim, float(leakage)


def theory_lifetime(
    n_samples: int, n_features: int, subspace_dim: int, leakage: float, constant: float = 1.0
) -> float:
    """Lifetime scaling of the error-rate theory for oblique STIT forests.

    ``λ_n = constant · n^{1/(d+2)} · ε^{-(d-s)/(d+2)}``.

    Parameters
    ----------
    n_samples : int
        n.
    n_features : int
        Input dimension d.
    subspace_dim : int
        Dimension s of the relevant subspace, ``1 <= s <= d``.
    leakage : float in [0, 1]
        The lift's leakage ε with respect to the subspace (positive if s < d).
    constant : float, default 1
        The unknown constant of the rate, which absorbs the scale of the
        domain and of the regression function.

    Returns
    -------
    float

    See Also
    --------
    theory_risk_rate : the risk bound this lifetime attains.
    leakage_threshold : the leakage below which that bound is the s-dimensional rate.

    Notes
    -----
    For a ridge function ``f(x) = g(Bᵀx)`` with Lipschitz g, a forest whose
    lift has leakage ε tuned this way has risk of order
    ``n^{-2/(d+2)} ε^{2(d-s)/(d+2)}``, provided ``σ_min(A U_S)`` stays
    bounded below. The lifetime is in the units of a lift normalised to
    ``Σ_i ‖a_i‖ = 1`` on a unit-size domain.

    References
    ----------
    O'Reilly, E. (2024). Statistical advantages of oblique randomized decision
    trees and forests. arXiv:2407.02458.

    Examples
    --------
    >>> round(theory_lifetime(10_000, 8, 2, 0.01), 3)
    39.811
    """
    n, d, s, eps = _check_theory_arguments(n_samples, n_features, subspace_dim, leakage)
    if isinstance(constant, bool) or not isinstance(constant, Real) or not constant > 0:
        raise ValueError(f"constant must be a positive number, got {constant!r}.")
    leakage_factor = 1.0 if s == d else eps ** (-(d - s) / (d + 2))
    return float(constant) * n ** (1.0 / (d + 2)) * leakage_factor


def theory_risk_rate(n_samples: int, n_features: int, subspace_dim: int, leakage: float) -> float:
    """Order of the risk bound at the theory's lifetime: ``n^{-2/(d+2)} ε^{2(d-s)/(d+2)}``.

    Parameters are those of :func:`theory_lifetime`; the result is up to a
    constant factor.

    Examples
    --------
    >>> round(theory_risk_rate(10_000, 8, 2, 10_000 ** (-1 / 4)), 6) == round(10_000 ** -0.5, 6)
    True
    """
    n, d, s, eps = _check_theory_arguments(n_samples, n_features, subspace_dim, leakage)
    leakage_factor = 1.0 if s == d else eps ** (2 * (d - s) / (d + 2))
    return n ** (-2.0 / (d + 2)) * leakage_factor


def leakage_threshold(n_samples: int, subspace_dim: int) -> float:
    """Leakage ``n^{-1/(s+2)}`` below which the bound is the s-dimensional minimax rate.

    With ``ε ≲ n^{-1/(s+2)}`` the risk order of :func:`theory_risk_rate`
    becomes ``n^{-2/(s+2)}``, the minimax rate of an s-dimensional Lipschitz
    regression problem.

    Examples
    --------
    >>> leakage_threshold(10_000, 2)
    0.1
    """
    n, _, s, _ = _check_theory_arguments(n_samples, subspace_dim, subspace_dim, 1.0)
    return float(n ** (-1.0 / (s + 2)))
