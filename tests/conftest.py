"""Shared fixtures: simulated designs used across the test modules, a local Dask cluster."""

import os

import numpy as np
import pytest
from hypothesis import settings

# Property tests explore new random examples on every local run; in CI (the CI
# variable is set) they replay a fixed derivation so a run is reproducible.
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)


def li_rational_model(generator, n_samples, n_features=10, noise=0.1):
    """Li (1991), Example 6.3 style (from memory): y = x1 / (0.5 + (x2 + 1.5)^2) + noise."""
    X = generator.standard_normal((n_samples, n_features))
    y = X[:, 0] / (0.5 + (X[:, 1] + 1.5) ** 2) + noise * generator.standard_normal(n_samples)
    return X, y, np.eye(n_features)[:, :2]


@pytest.fixture(scope="session")
def dask_client():
    """A real ``distributed.LocalCluster``: two worker processes, 1 GiB each, shut down after."""
    import distributed  # the [dask] extra is part of the test extra: never skipped

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       memory_limit="1GiB", dashboard_address=None)
    with distributed.Client(cluster) as client:
        yield client
    cluster.close()
