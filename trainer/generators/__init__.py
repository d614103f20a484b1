"""Hidden-node generators: each draws hidden weights and biases for normalised inputs in [0, 1]^n.

Every generator is a function ``generate(U, T, n_nodes, rng, activation, **settings)`` returning a
:class:`HiddenLayer`; ``GENERATORS`` maps the method names used by the CLI and the estimators.
"""

from __future__ import annotations

from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.generators.data_driven import generate as data_driven
from nodecast.trainer.generators.domain_anchored import generate as domain_anchored
from nodecast.trainer.generators.interval import generate as interval
from nodecast.trainer.generators.slope_angle import generate as slope_angle
from nodecast.trainer.generators.weight_sum import generate as weight_sum

GENERATORS = {
    "data-driven": data_driven,
    "interval": interval,
    "domain-anchored": domain_anchored,
    "slope-angle": slope_angle,
    "weight-sum": weight_sum,
}

__all__ = ["GENERATORS", "HiddenLayer"]
