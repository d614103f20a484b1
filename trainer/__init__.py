"""Training side of nodecast: hidden-node generators, output solvers, estimators, export to the IR."""

from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor
from nodecast.trainer.export import to_bundle

__all__ = ["RandomNodeClassifier", "RandomNodeRegressor", "to_bundle"]
