"""A sample test in a team's own suite: the shipped ONNX file must compute what the model computes.

Paths come from the environment (set by model_gate.sh): NODECAST_MODEL, NODECAST_ONNX.
"""

import os

import pytest

from nodecast.compiler import load
from nodecast.compiler.verify import check


@pytest.mark.skipif("NODECAST_MODEL" not in os.environ, reason="run by model_gate.sh")
def test_shipped_onnx_matches_the_model():
    report = check(load(os.environ["NODECAST_MODEL"]), os.environ["NODECAST_ONNX"], count=2048)
    assert report["passed"] and report["max_abs_error"] <= max(report["tolerance"]["per_output"])
