"""scikit-learn's own estimator checks (sklearn.utils.estimator_checks.parametrize_with_checks, the
reference for the estimator API), run on small networks so that the whole set takes seconds.

No check is marked as an expected failure. Two kinds are skipped by scikit-learn itself when the
environment lacks what they test: the array-API checks (need SCIPY_ARRAY_API=1 and an array
library) and the pandas-input checks (need pandas, not a dependency of nodecast).
"""

from __future__ import annotations

from sklearn.utils.estimator_checks import parametrize_with_checks

from nodecast.trainer import RandomNodeClassifier, RandomNodeRegressor


@parametrize_with_checks(
    [RandomNodeRegressor(n_nodes=20, random_state=0), RandomNodeClassifier(n_nodes=20, random_state=0)])
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)
