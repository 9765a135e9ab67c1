"""Synthetic benchmark problems with a known relevant subspace (all simulated)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..geometry import random_rotation


@dataclass
class BenchmarkProblem:
    """A simulated train/test problem and its true subspace (input coordinates)."""

    name: str
    X_train: np.ndarray
    y_train: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray
    true_basis: np.ndarray
    classification: bool = False
    noise_variance: float = 0.0


def friedman1_rotated(n_train, n_test, n_features, seed=0) -> BenchmarkProblem:
    """Friedman #1 (Friedman 1991) on U[0,1]^d, observed through a random rotation.

    ``y = 10 sin(π u1 u2) + 20 (u3 - 0.5)^2 + 10 u4 + 5 u5 + N(0, 1)`` with
    ``u = Q x``; the relevant subspace is spanned by the first five rows of Q.
    """
    generator = np.random.default_rng(seed)
    rotation = random_rotation(n_features, generator)
    n = n_train + n_test
    u = generator.uniform(size=(n, n_features))
    y = (10 * np.sin(np.pi * u[:, 0] * u[:, 1]) + 20 * (u[:, 2] - 0.5) ** 2 + 10 * u[:, 3]
         + 5 * u[:, 4] + generator.standard_normal(n))
    X = u @ rotation  # rows x_i = u_i Q, so u_ij = x_i . Q[j]: the rows of Q are the directions
    basis = rotation[:5].T
    return BenchmarkProblem(f"friedman1 rotated d={n_features}", X[:n_train], y[:n_train],
                            X[n_train:], y[n_train:], basis, noise_variance=1.0)


def ridge(n_train, n_test, n_features, dim, design="gaussian", kind="mixed", seed=0,
          noise=0.2) -> BenchmarkProblem:
    """A ridge function of ``dim`` random orthonormal directions.

    ``kind="mixed"``: ``Σ_j g_j(t_j)`` cycling through exp(t/2), 2 sin(t),
    t^2/2 ... for dim 1 only the monotone ``exp(t/2)``; ``kind="symmetric"``:
    ``t_1^2`` (SIR's blind spot). ``design``: "gaussian" or "uniform" (on
    ``[-√3, √3]^d``, unit variance, not elliptical).
    """
    generator = np.random.default_rng(seed)
    basis = np.linalg.qr(generator.standard_normal((n_features, dim)))[0]
    n = n_train + n_test
    if design == "gaussian":
        X = generator.standard_normal((n, n_features))
    else:
        X = generator.uniform(-np.sqrt(3), np.sqrt(3), size=(n, n_features))
    t = X @ basis
    if kind == "symmetric":
        signal = t[:, 0] ** 2
    else:
        parts = (lambda v: np.exp(v / 2), lambda v: 2 * np.sin(v), lambda v: v**2 / 2)
        signal = sum(parts[j % 3](t[:, j]) for j in range(dim))
    y = signal + noise * generator.standard_normal(n)
    label = f"ridge s={dim} {design}" + (" symmetric" if kind == "symmetric" else "")
    return BenchmarkProblem(f"{label} d={n_features}", X[:n_train], y[:n_train], X[n_train:],
                            y[n_train:], basis, noise_variance=noise**2)


def oblique_classes(n_train, n_test, n_features, seed=0) -> BenchmarkProblem:
    """Two classes split by ``sin(2 t1) + t2 > 0`` along two oblique directions."""
    generator = np.random.default_rng(seed)
    basis = np.linalg.qr(generator.standard_normal((n_features, 2)))[0]
    n = n_train + n_test
    X = generator.standard_normal((n, n_features))
    t = X @ basis
    score = np.sin(2 * t[:, 0]) + t[:, 1] + 0.2 * generator.standard_normal(n)
    y = np.where(score > 0, "high", "low")
    return BenchmarkProblem(f"classification s=2 d={n_features}", X[:n_train], y[:n_train],
                            X[n_train:], y[n_train:], basis, classification=True)


def accuracy_problems(quick: bool) -> list[BenchmarkProblem]:
    n_train, n_test = (800, 1000) if quick else (3000, 3000)
    problems = [
        friedman1_rotated(n_train, n_test, 10, seed=1),
        friedman1_rotated(n_train, n_test, 20, seed=2),
        ridge(n_train, n_test, 10, 1, "gaussian", seed=3),
        ridge(n_train, n_test, 10, 2, "gaussian", seed=4),
        ridge(n_train, n_test, 10, 2, "uniform", seed=5),
        ridge(n_train, n_test, 20, 3, "gaussian", seed=6),
        ridge(n_train, n_test, 10, 1, "gaussian", kind="symmetric", seed=7),
        oblique_classes(n_train, n_test, 10, seed=8),
    ]
    return [problems[i] for i in (0, 3, 4, 6, 7)] if quick else problems
