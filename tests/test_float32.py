"""float32 input stays float32 through transform; the moments accumulate in float64."""

import numpy as np
import pytest
from scipy.linalg import subspace_angles

import splitlift as sl

RNG = np.random.default_rng(20261206)
X64 = RNG.standard_normal((3000, 5))
X32 = X64.astype(np.float32)
Y = X64[:, 0] - X64[:, 2] ** 2 + 0.1 * RNG.standard_normal(3000)


@pytest.mark.parametrize("make", [lambda: sl.SlicedInverse(dim=2),
                                  lambda: sl.HessianDirections(dim=2),
                                  lambda: sl.DirectionLift(sl.SlicedAverageVariance(dim=2)),
                                  lambda: sl.DirectionLift(keep_inputs=True)],
                         ids=["SIR", "pHd", "DirectionLift", "DirectionLift-keep-inputs"])
def test_float32_in_float32_out(make):
    fitted = make().fit(X32, Y)
    out = fitted.transform(X32)
    assert out.dtype == np.float32
    reference = make().fit(X32.astype(np.float64), Y).transform(X32.astype(np.float64))
    assert reference.dtype == np.float64
    np.testing.assert_allclose(out, reference, rtol=1e-5, atol=1e-5)


def test_apply_lift_keeps_float32():
    lift = sl.ApplyLift(sl.LiftMatrix.axis(5)).fit(X32)
    assert lift.transform(X32).dtype == np.float32
    assert lift.transform(X64).dtype == np.float64


def test_moments_of_float32_data_are_exact_float64_sums():
    # the float32 values, widened exactly, give the same fit to rounding of float64
    single = sl.SlicedInverse(dim=2).fit(X32, Y)
    widened = sl.SlicedInverse(dim=2).fit(X32.astype(np.float64), Y)
    assert single.statistics_.covariance.dtype == np.float64
    assert subspace_angles(single.basis_, widened.basis_).max() < 1e-12
