"""SYNTHETIC example: choose the subspace dimension and judge its stability.

Scenario (invented): the imaginary kiln line of the demo, whose tile
strength depends on two blends of twelve sensor channels. We let three rules
choose the dimension, then bootstrap the estimate and print the full report.

Run: python examples/choosing_the_dimension.py [n_samples]
"""

import sys

import splitlift as sl
from splitlift.datasets import make_kiln_problem
from splitlift.dimension import LadleEstimator, PermutationTest

n_samples = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
problem = make_kiln_problem(n_samples, random_state=5)

for rule in ("chi2", PermutationTest(n_permutations=99, random_state=0),
             LadleEstimator(n_boot=30, random_state=0)):
    estimate = sl.SlicedInverse(dim="auto", dim_rule=rule).fit(problem.X, problem.y)
    print(estimate.dim_test_, end="\n\n")

lift = sl.DirectionLift(sl.SlicedInverse(dim="auto")).fit(problem.X, problem.y)
boot = sl.stability(lift, problem.X, problem.y, n_boot=50, random_state=0)
print(lift.report(reference=problem.true_basis, stability=boot))
