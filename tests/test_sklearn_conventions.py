"""scikit-learn's own estimator checks on every public estimator of this layer."""

from sklearn.utils.estimator_checks import parametrize_with_checks

import splitlift as sl


@parametrize_with_checks(
    [
        sl.SlicedInverse(),
        sl.SlicedAverageVariance(),
        sl.HessianDirections(),
        sl.HessianDirections(residuals=True),
        sl.DirectionLift(),
        sl.DirectionLift(sl.HessianDirections(dim=1), weight_form="repeat"),
    ]
)
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)
