"""Back-ends: each turns a bundle into the files of one kind of artifact.

A back-end module exposes ``render(bundle, **options) -> Artifact``; it reads only the IR and the
bundle's metadata, never the trainer. Modules load on first use, so the CLI starts fast.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field

from nodecast.compiler.errors import NodecastError

BACKENDS = {
    "onnx": "nodecast.compiler.backends.onnx",
    "c": "nodecast.compiler.backends.c",
    "python": "nodecast.compiler.backends.python",
}


@dataclass(frozen=True)
class Artifact:
    """Generated files by name. A single-file artifact is written to the output path itself; a
    multi-file one into the output folder. ``summary`` holds figures for the user (estimate, sizes)."""

    kind: str
    files: dict[str, bytes]
    single_file: bool
    summary: dict = field(default_factory=dict)


FLOAT32_LIMIT = 1e38  # below float32's largest value (3.4e38), with room for a sum of a few terms
FLOAT32_SMALLEST_SCALE = 2.0**-100  # scaled values keep float32's precision above its normal range


def check_fits_float32(net) -> None:
    """Refuse a model that float32 arithmetic cannot hold (a weight, a bound, a pre-activation or
    an output beyond float32's range, or a scale so small that values fall below its normal
    range), before rendering: the artifact would compute infinities or zeros, not the model."""
    import numpy as np

    with np.errstate(all="ignore"):
        reach = np.maximum(np.abs(net.domain_low - net.input_offset),
                           np.abs(net.domain_high - net.input_offset)) / net.input_scale
        values = {**net.arrays(), "the weights in input units": net.hidden_weights / net.input_scale,
                  "the output weights in target units": net.output_weights * net.output_scale,
                  "the pre-activations": np.abs(net.hidden_weights) @ reach + np.abs(net.hidden_biases),
                  "the outputs": np.abs(net.output_offset) + net.output_scale
                  * (np.sum(np.abs(net.output_weights), axis=0) + np.abs(net.output_bias))}
    for what, array in values.items():
        largest = float(np.max(np.abs(array))) if array.size else 0.0
        if not largest <= FLOAT32_LIMIT:
            raise NodecastError(f"{what} reach {largest:.3g}, beyond what float32 holds (about "
                                "3.4e38); emit --precision float64")
    for name in ("input_scale", "output_scale"):
        smallest = float(np.min(getattr(net, name)))
        if smallest < FLOAT32_SMALLEST_SCALE:
            raise NodecastError(f"{name} {smallest:.3g} is too small for float32 (the model's "
                                "values would fall below its normal range); emit --precision "
                                "float64")


def render(bundle, to: str, **options) -> Artifact:
    """The artifact of ``bundle`` for target ``to``, its options checked and completed by the
    target's spec (:mod:`nodecast.compiler.targets`)."""
    from nodecast.compiler.targets import target_spec

    options = target_spec(to).resolve(options)
    if options["precision"] == "float32":
        check_fits_float32(bundle.network)
    try:
        module = importlib.import_module(BACKENDS[to])
    except ModuleNotFoundError as exc:
        if exc.name == BACKENDS[to]:
            raise NodecastError(f"target {to!r} is not available in this version") from None
        raise
    try:
        return module.render(bundle, **options)
    except OverflowError as exc:  # a value beyond what the target's number formats can hold
        raise NodecastError(f"cannot emit {to}: a value of the model does not fit the target's "
                            f"number format ({exc})") from None
