"""Shared fixtures: simulated designs used across the test modules."""

import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)


def li_rational_model(generator, n_samples, n_features=10, noise=0.1):
    """Li (1991), Example 6.3 style (from memory): y = x1 / (0.5 + (x2 + 1.5)^2) + noise."""
    X = generator.standard_normal((n_samples, n_features))
    y = X[:, 0] / (0.5 + (X[:, 1] + 1.5) ** 2) + noise * generator.standard_normal(n_samples)
    return X, y, np.eye(n_features)[:, :2]
