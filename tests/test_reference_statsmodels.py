"""Exact agreement with statsmodels' ``regression.dimred`` (same algorithms, same slicing).

statsmodels slices the sorted response with ``np.array_split`` into
``n // slice_n`` pieces and whitens with the divisor-n covariance; with a
response free of ties across slice boundaries our equal-count slicing is the
same partition, so the estimated subspaces must agree to rounding.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.linalg import subspace_angles
from statsmodels.regression.dimred import SAVE, PrincipalHessianDirections, SlicedInverseReg

import splitlift as sl

from .conftest import li_rational_model

TOLERANCE_RAD = 1e-6  # the agreement threshold


def star98():
    """statsmodels' bundled star98 data: 303 school districts, 20 covariates.

    Response: share of students above the national median (NABOVE / total).
    Columns are standardised because the raw covariance has condition number
    about 1e11 (interaction terms), beyond any sensible whitening tolerance.
    """
    data = sm.datasets.star98.load_pandas()
    y = (data.endog["NABOVE"] / data.endog.sum(axis=1)).to_numpy()
    X = data.exog.to_numpy(dtype=float)
    return (X - X.mean(axis=0)) / X.std(axis=0), y


def simulated():
    X, y, _ = li_rational_model(np.random.default_rng(7), 1200, 8)
    return X @ np.random.default_rng(8).standard_normal((8, 8)), y


def assert_no_tie_across_boundaries(y, n_slices):
    """Precondition: ties do not straddle array_split boundaries (else tie order matters)."""
    parts = np.array_split(np.sort(y), n_slices)
    assert all(a[-1] != b[0] for a, b in zip(parts[:-1], parts[1:], strict=True))


@pytest.mark.parametrize("dataset", [star98, simulated], ids=["star98", "simulated"])
@pytest.mark.parametrize("slice_n", [20, 50])
def test_sir_matches_statsmodels(dataset, slice_n):
    X, y = dataset()
    n_slices = X.shape[0] // slice_n
    assert_no_tie_across_boundaries(y, n_slices)
    reference = SlicedInverseReg(y, X).fit(slice_n=slice_n)
    ours = sl.SlicedInverse(n_slices=n_slices, dim=2).fit(X, y)
    assert subspace_angles(reference.params[:, :2], ours.basis_).max() < TOLERANCE_RAD
    # same method matrix, same eigenvalues (both use divisor-n whitening)
    np.testing.assert_allclose(ours.eigenvalues_, reference.eigs, rtol=1e-8, atol=1e-12)


@pytest.mark.parametrize("dataset", [star98, simulated], ids=["star98", "simulated"])
@pytest.mark.parametrize("slice_n", [50, 60])
def test_save_matches_statsmodels(dataset, slice_n):
    X, y = dataset()
    n_slices = X.shape[0] // slice_n
    assert_no_tie_across_boundaries(y, n_slices)
    reference = SAVE(y, X).fit(slice_n=slice_n)
    ours = sl.SlicedAverageVariance(n_slices=n_slices, dim=2).fit(X, y)
    assert subspace_angles(reference.params[:, :2], ours.basis_).max() < TOLERANCE_RAD
    # statsmodels weights slices by n_h / H, we by n_h / n: eigenvalues differ by n / H
    np.testing.assert_allclose(
        ours.eigenvalues_ * X.shape[0] / n_slices, reference.eigs, rtol=1e-8
    )


@pytest.mark.parametrize("dataset", [star98, simulated], ids=["star98", "simulated"])
@pytest.mark.parametrize("residuals", [False, True])
def test_phd_matches_statsmodels(dataset, residuals):
    X, y = dataset()
    reference = PrincipalHessianDirections(y, X).fit(resid=residuals)
    ours = sl.HessianDirections(dim=2, residuals=residuals).fit(X, y)
    assert np.allclose(np.imag(reference.params[:, :2]), 0)
    angles = subspace_angles(np.real(reference.params[:, :2]), ours.basis_)
    assert angles.max() < TOLERANCE_RAD
    # statsmodels divides the covariance by n - 1, the weighted moment by n
    n = X.shape[0]
    np.testing.assert_allclose(
        ours.eigenvalues_[:2] * (n - 1) / n, np.real(reference.eigs[:2]), rtol=1e-8
    )
