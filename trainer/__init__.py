"""Training side of nodecast: hidden-node generators, output solvers, estimators, export to the IR."""

from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor
from nodecast.trainer.export import export, to_bundle
from nodecast.trainer.selection import select

__all__ = ["RandomNodeClassifier", "RandomNodeRegressor", "export", "select", "to_bundle"]
