"""Run an ONNX artifact in two independent engines: onnxruntime (the runtime users deploy, one
thread so results do not depend on the machine's cores) and ``onnx.reference.ReferenceEvaluator``
(the ONNX project's reference implementation of its operator specification), a second opinion that
shares no kernels with onnxruntime. Verify checks each engine against the float64 model, and a
classifier's ``label`` output (:func:`run_labels`) against the engine's own scores."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError, one_line

ENGINES = ("onnxruntime", "onnx.reference")
PRECISIONS = ("float32", "float64")
INPUT_NAME, OUTPUT_NAME, LABEL_NAME = "features", "outputs", "label"
LEVELS_NAME = "levels"


def _load(path: Path):
    import onnx

    try:
        return onnx.load(str(path))
    except Exception as exc:  # onnx raises DecodeError, OSError and others for unreadable files
        raise NodecastError(f"{path} is not a readable ONNX model: {one_line(exc)}") from None


def describe(path: Path, **_options) -> dict:
    """Provenance from the model's metadata_props (see the ONNX back-end)."""
    props = {p.key: p.value for p in _load(path).metadata_props}
    if "nodecast.bundle_id" not in props:
        raise NodecastError(f"{path} was not made by nodecast (no nodecast.bundle_id metadata)")
    precision = props.get("nodecast.precision", "float32")
    if precision not in PRECISIONS:
        raise NodecastError(f"{path} declares precision {precision!r}; ONNX artifacts are "
                            f"{' or '.join(PRECISIONS)}")
    try:
        stated = json.loads(props.get("nodecast.error_estimate", "null"))
    except ValueError:
        raise NodecastError(f"{path} holds an unreadable nodecast.error_estimate") from None
    try:
        bound = json.loads(props.get("nodecast.certified_bound", "null"))
    except ValueError:
        raise NodecastError(f"{path} holds an unreadable nodecast.certified_bound") from None
    try:
        n_categorical = len(json.loads(props.get("nodecast.categorical_names", "[]")))
    except (ValueError, TypeError):
        raise NodecastError(f"{path} holds unreadable nodecast.categorical_names") from None
    return {"kind": "onnx", "bundle_id": props["nodecast.bundle_id"], "precision": precision,
            "certified_bound": bound,
            "out_of_domain": props.get("nodecast.out_of_domain", "pass"),
            "n_categorical": n_categorical,
            "error_estimate": stated, "engines": list(ENGINES)}


def _onnxruntime(path: Path, X: np.ndarray, output: str) -> np.ndarray:
    import onnxruntime as ort

    options = ort.SessionOptions()
    options.intra_op_num_threads = 1
    options.inter_op_num_threads = 1
    session = ort.InferenceSession(str(path), options, providers=["CPUExecutionProvider"])
    (outputs,) = session.run([output], X)
    return outputs


def _reference_evaluator(path: Path, X: np.ndarray, output: str) -> np.ndarray:
    from onnx.reference import ReferenceEvaluator

    evaluator = ReferenceEvaluator(_load(path))
    # its Sigmoid evaluates both branches of a stable formula and keeps the finite one: the other
    # may overflow (inf / inf), which is harmless there; any NaN that reached the outputs is caught
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        (outputs,) = evaluator.run([output], X)
    return outputs


def _evaluate(path: Path, X: np.ndarray, info: dict, output: str) -> np.ndarray:
    """The graph output named ``output`` for rows X, from ``info["engine"]`` (default onnxruntime)."""
    engine = info.get("engine", ENGINES[0])
    if engine not in ENGINES:
        raise NodecastError(f"unknown ONNX engine {engine!r}; choose one of {', '.join(ENGINES)}")
    dtype = np.float32 if info["precision"] == "float32" else np.float64
    evaluate = _onnxruntime if engine == "onnxruntime" else _reference_evaluator
    try:
        return evaluate(path, _feeds(X, dtype, info.get("n_categorical", 0)), output)
    except NodecastError:
        raise
    except Exception as exc:  # a model that loads but cannot run: bad input, not a crash
        raise NodecastError(f"{engine} cannot run {path}: {one_line(exc)}") from None


def _feeds(X: np.ndarray, dtype, n_categorical: int) -> dict:
    """The graph inputs: the features, and the level codes (anything that is not a whole number
    becomes -1, which names no level) when the model has categorical inputs."""
    X = np.asarray(X, dtype=np.float64)
    if not n_categorical:
        return {INPUT_NAME: np.ascontiguousarray(X, dtype=dtype)}
    numbers, codes = X[:, :-n_categorical], X[:, -n_categorical:]
    with np.errstate(invalid="ignore"):
        whole = np.isfinite(codes) & (codes == np.floor(codes)) & (np.abs(codes) < 2**62)
    return {INPUT_NAME: np.ascontiguousarray(numbers, dtype=dtype),
            LEVELS_NAME: np.where(whole, np.nan_to_num(codes), -1).astype(np.int64)}


def run(path: Path, X: np.ndarray, info: dict) -> np.ndarray:
    """Outputs of shape (n_rows, n_outputs) from ``info["engine"]`` (default onnxruntime)."""
    return np.asarray(_evaluate(path, X, info, OUTPUT_NAME), dtype=np.float64)


def run_labels(path: Path, X: np.ndarray, info: dict) -> np.ndarray | None:
    """The ``label`` output, an array of n_rows str, from ``info["engine"]``; None when the graph
    has no such output (regression models)."""
    if LABEL_NAME not in (o.name for o in _load(path).graph.output):
        return None
    labels = _evaluate(path, X, info, LABEL_NAME)
    return np.array([v.decode("utf-8") if isinstance(v, bytes) else str(v)
                     for v in np.asarray(labels, dtype=object).ravel()], dtype=object)


