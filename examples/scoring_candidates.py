"""SYNTHETIC example: score many candidate direction matrices in one batch.

Scenario (invented): an engineer at the imaginary kiln line has lifts from
several estimators, the plain sensor axes, a random oblique matrix and a
broken hand-made matrix, and wants the best one for production.

Run: python examples/scoring_candidates.py [n_samples]
"""

import sys

import numpy as np

import splitlift as sl
from splitlift.datasets import make_kiln_problem

n_samples = int(sys.argv[1]) if len(sys.argv) > 1 else 1200
problem = make_kiln_problem(n_samples, random_state=8)
d = problem.X.shape[1]
rng = np.random.default_rng(0)

candidates = {"sensor axes": np.eye(d), "random oblique": rng.standard_normal((2 * d, d)),
              "broken (rank 1)": np.ones((3, d))}
for name, estimator in {"SIR": sl.SlicedInverse(dim=2), "SAVE": sl.SlicedAverageVariance(dim=2),
                        "OPG": sl.GradientOuterProduct(dim=2, random_state=0)}.items():
    basis = estimator.fit(problem.X, problem.y).basis_
    candidates[f"{name} lift"] = sl.LiftMatrix.from_subspace(basis)

ranking = sl.score_candidates(candidates, problem.X, problem.y, cv=3, random_state=0)
print(ranking.to_string(index=False))
