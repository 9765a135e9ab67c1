"""Synthetic demonstration data (invented scenarios, no real measurements)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.utils import check_random_state

KILN_CHANNELS = (
    "zone1_temp", "zone2_temp", "zone3_temp", "zone4_temp",
    "belt_speed", "fan_draft", "burner_gas", "inlet_humidity",
    "clay_moisture", "glaze_density", "press_force", "ambient_temp",
)


@dataclass
class SyntheticProblem:
    """A simulated regression problem with a known relevant subspace.

    Attributes
    ----------
    X : ndarray of shape (n, d)
    y : ndarray of shape (n,)
    true_basis : ndarray of shape (d, s)
        Orthonormal basis of the subspace the response depends on.
    feature_names : list of str
    description : str
    """

    X: np.ndarray
    y: np.ndarray
    true_basis: np.ndarray
    feature_names: list[str]
    description: str


def make_kiln_problem(n_samples: int = 1500, noise: float = 0.2, random_state=0):
    """SYNTHETIC data: tile strength from twelve sensor channels of an imaginary kiln.

    The scenario is invented for demonstration. Twelve correlated Gaussian
    channels (the linearity condition of the moment methods holds); the
    strength depends on two blends only: a heat-soak index ``u1`` (zone
    temperatures against belt speed) and a draft-moisture contrast ``u2``,
    through the rational model of Li (1991, Example 6.3, from memory)
    ``y = u1 / (0.5 + (u2 + 1.5)^2) + noise``.

    Parameters
    ----------
    n_samples : int, default 1500
    noise : float, default 0.2
        Standard deviation of the Gaussian noise.
    random_state : int, RandomState or None, default 0

    Returns
    -------
    SyntheticProblem

    Examples
    --------
    >>> problem = make_kiln_problem(200)
    >>> problem.X.shape, problem.true_basis.shape
    ((200, 12), (12, 2))
    """
    generator = check_random_state(random_state)
    d = len(KILN_CHANNELS)
    mixing = np.eye(d) + 0.35 * generator.standard_normal((d, d)) / np.sqrt(d)
    X = generator.standard_normal((n_samples, d)) @ mixing.T
    heat_soak = np.zeros(d)
    heat_soak[[0, 1, 2, 3, 4]] = [0.5, 0.5, 0.5, 0.5, -1.0]
    draft_moisture = np.zeros(d)
    draft_moisture[[5, 7, 8]] = [1.0, -1.0, -1.0]
    blends = np.column_stack([heat_soak, draft_moisture])
    summaries = X @ blends
    summaries /= summaries.std(axis=0)
    y = summaries[:, 0] / (0.5 + (summaries[:, 1] + 1.5) ** 2)
    y = y + noise * generator.standard_normal(n_samples)
    basis = np.linalg.qr(blends)[0]
    return SyntheticProblem(
        X=X,
        y=y,
        true_basis=basis,
        feature_names=list(KILN_CHANNELS),
        description=(
            "SYNTHETIC kiln line (invented): tile strength driven by a heat-soak index and a "
            "draft-moisture contrast of 12 sensor channels"
        ),
    )
