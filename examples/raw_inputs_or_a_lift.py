"""SYNTHETIC example: let cross-validation decide between the raw inputs and a lift.

Scenario (invented): the same imaginary kiln line twice. On the first target
tile strength depends on blends of the sensor channels (a lift should win);
on the second, an invented pass/fail flag is set by two channels crossing
their own thresholds (axis cuts are ideal, so the raw inputs should be kept).
DirectionLiftCV cross-validates the downstream forest on every candidate and
says what it chose.

Run: python examples/raw_inputs_or_a_lift.py [n_samples]
"""

import sys

import numpy as np
from sklearn.ensemble import ExtraTreesClassifier, ExtraTreesRegressor

import splitlift as sl
from splitlift.datasets import make_kiln_problem

n_samples = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
problem = make_kiln_problem(n_samples, random_state=4)

blended = sl.DirectionLiftCV(forest=ExtraTreesRegressor(random_state=0), random_state=0)
blended.fit(problem.X, problem.y)
print("strength:", blended.verdict_)
print(blended.summary().to_string(index=False), "\n")

flag = np.where((problem.X[:, 0] > 0) & (problem.X[:, 3] < 0.5), "fail", "pass")
axis = sl.DirectionLiftCV(forest=ExtraTreesClassifier(random_state=0), random_state=0)
axis.fit(problem.X, flag)
print("pass/fail flag:", axis.verdict_)
