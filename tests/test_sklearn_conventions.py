"""scikit-learn's own estimator checks on every public estimator of this layer."""

from sklearn.utils.estimator_checks import parametrize_with_checks

import splitlift as sl


def expected_failures(estimator) -> dict:
    """Checks that cannot hold for a method, with the reason (scikit-learn's mechanism).

    Both concern data the checks build by hand on which pHd has, by its
    mathematics, nothing to estimate; splitlift refuses such fits with a
    clear error instead of returning rounding noise as directions (see
    tests/test_estimator_robustness.py and tests/test_sample_weights.py for
    the refusals and for the weight checks on data where pHd is defined).
    """
    if not isinstance(estimator, sl.HessianDirections):
        return {}
    linear = ("four distinct points with a response linear in them: the pHd matrix is "
              "exactly zero, and no residual is left for residual-based pHd (refused)")
    if not estimator.residuals:
        return {"check_sample_weights_shape": linear}
    return {"check_sample_weights_shape": linear, "check_sample_weights_not_overwritten": linear,
            "check_sample_weight_equivalence_on_dense_data":
            "15 rows of 30 columns: y is fitted exactly, no residual is left for "
            "residual-based pHd (refused)"}


@parametrize_with_checks(
    [
        sl.SlicedInverse(),
        sl.SlicedAverageVariance(),
        sl.HessianDirections(),
        sl.HessianDirections(residuals=True),
        sl.DirectionLift(),
        sl.DirectionLift(sl.HessianDirections(dim=1), weight_form="repeat"),
    ],
    expected_failed_checks=expected_failures,
)
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)
