"""SYNTHETIC example: a lift in front of a scikit-learn forest.

Scenario (invented): twelve sensor channels of an imaginary kiln line predict
tile strength, which depends on two blends of the channels only. We compare
the cross-validated error of a random forest on the raw channels and on the
lifted features, with the lift refitted inside every fold.

Run: python examples/pipeline_ahead_of_forest.py [n_samples]
"""

import sys

from sklearn.ensemble import RandomForestRegressor
from sklearn.model_selection import cross_val_score
from sklearn.pipeline import make_pipeline

import splitlift as sl
from splitlift.datasets import make_kiln_problem

n_samples = int(sys.argv[1]) if len(sys.argv) > 1 else 1500
problem = make_kiln_problem(n_samples, random_state=1)
forest = RandomForestRegressor(n_estimators=100, n_jobs=-1, random_state=0)
models = {
    "raw channels": forest,
    "lifted (SIR)": make_pipeline(sl.DirectionLift(sl.SlicedInverse(dim=2)), forest),
}
for name, model in models.items():
    mse = -cross_val_score(model, problem.X, problem.y, cv=5,
                           scoring="neg_mean_squared_error").mean()
    print(f"{name:<14} 5-fold MSE {mse:.4f}")

lift = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(problem.X, problem.y)
print(lift.report(reference=problem.true_basis))
