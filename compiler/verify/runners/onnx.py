"""Run an ONNX artifact in onnxruntime (one thread, so results do not depend on the machine's cores)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError


def describe(path: Path, **_options) -> dict:
    import onnx

    try:
        model = onnx.load(str(path))
    except Exception as exc:  # onnx raises DecodeError, OSError and others for unreadable files
        raise NodecastError(f"{path} is not a readable ONNX model: {exc}") from None
    props = {p.key: p.value for p in model.metadata_props}
    if "nodecast.bundle_id" not in props:
        raise NodecastError(f"{path} was not made by nodecast (no nodecast.bundle_id metadata)")
    return {"kind": "onnx", "bundle_id": props["nodecast.bundle_id"],
            "precision": props.get("nodecast.precision", "float32"),
            "out_of_domain": props.get("nodecast.out_of_domain", "pass"),
            "error_estimate": json.loads(props.get("nodecast.error_estimate", "null"))}


def run(path: Path, X: np.ndarray, info: dict) -> np.ndarray:
    import onnxruntime as ort

    options = ort.SessionOptions()
    options.intra_op_num_threads = 1
    options.inter_op_num_threads = 1
    session = ort.InferenceSession(str(path), options, providers=["CPUExecutionProvider"])
    dtype = np.float32 if info["precision"] == "float32" else np.float64
    (outputs,) = session.run(["outputs"], {"features": X.astype(dtype)})
    return outputs.astype(np.float64)
