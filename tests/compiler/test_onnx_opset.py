"""ONNX hand-off (issue 19): the default opset is the oldest the graph needs that onnx's checker and
onnxruntime accept; the graph's and the input's doc strings give the input order."""

from __future__ import annotations

import numpy as np
import onnx
import onnxruntime as ort
import pytest
from onnx import helper

from nodecast.cli import main
from nodecast.compiler import reference
from nodecast.compiler.backends import onnx as onnx_backend

VARIANTS = [("regression", "float32", "pass", False), ("regression", "float64", "clamp", False),
            ("regression", "float32", "clamp", True), ("classification", "float32", "pass", False),
            ("classification", "float64", "pass", True)]


def _bundle(kind, friedman_bundle, classifier_bundle):
    return friedman_bundle if kind == "regression" else classifier_bundle


def _accepted(model) -> bool:
    """onnx's full check and an onnxruntime session that runs."""
    try:
        onnx.checker.check_model(model, full_check=True)
        session = ort.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])
        n = model.graph.input[0].type.tensor_type.shape.dim[1].dim_value
        elem = model.graph.input[0].type.tensor_type.elem_type
        session.run(None, {"features": np.zeros((2, n), helper.tensor_dtype_to_np_dtype(elem))})
    except Exception:  # any refusal counts: the checker's or the runtime's
        return False
    return True


@pytest.mark.parametrize("kind, precision, policy, flag", VARIANTS)
def test_default_opset_is_the_oldest_the_checker_and_onnxruntime_accept(
        friedman_bundle, classifier_bundle, monkeypatch, kind, precision, policy, flag):
    bundle = _bundle(kind, friedman_bundle, classifier_bundle)
    artifact = onnx_backend.render(bundle, precision, out_of_domain=policy, flag_out_of_domain=flag)
    model = onnx.load_from_string(artifact.files["model.onnx"])
    default = model.opset_import[0].version
    assert default == (18 if flag else 9)
    # the IR version is the one the ONNX versioning table pairs with that opset
    assert model.ir_version == {row[2]: row[1] for row in helper.VERSION_TABLE}[default]
    assert _accepted(model)
    # one opset older (with its own IR version from the table) is refused by the checker or the
    # runtime: the default is the oldest that works
    older = default - 1
    monkeypatch.setitem(onnx_backend.IR_VERSION_FOR_OPSET, older,
                        max(row[1] for row in helper.VERSION_TABLE if row[2] == older))
    older_model, _ = _unchecked(bundle, precision, older, policy, flag, monkeypatch)
    assert not _accepted(older_model)


def _unchecked(bundle, precision, opset, policy, flag, monkeypatch):
    """build_model without its own check_model call, so the refusal is observed by _accepted."""
    monkeypatch.setattr(onnx.checker, "check_model", lambda *a, **k: None)
    model = onnx_backend.build_model(bundle, precision, opset, policy, flag)
    monkeypatch.undo()
    return model


def test_default_opset_model_computes_the_reference(friedman_bundle):
    artifact = onnx_backend.render(friedman_bundle, "float64")
    session = ort.InferenceSession(artifact.files["model.onnx"], providers=["CPUExecutionProvider"])
    X = np.random.default_rng(0).random((50, 5))
    (got,) = session.run(["outputs"], {"features": X})
    assert np.max(np.abs(got - reference.predict(friedman_bundle.network, X))) < 1e-9


def test_graph_and_input_doc_strings_give_the_input_order(capsys, friedman_bundle, tmp_path):
    from nodecast.compiler import save

    save(friedman_bundle, tmp_path / "m.ncast")
    try:
        main(["emit", str(tmp_path / "m.ncast"), "--to", "onnx", "-o", str(tmp_path / "m.onnx")])
    except SystemExit as exc:
        assert exc.code in (0, None)
    model = onnx.load(tmp_path / "m.onnx")
    assert model.opset_import[0].version == 9
    for doc in (model.graph.doc_string, model.graph.input[0].doc_string):
        positions = [doc.index(f'{i}: "x{i}"') for i in range(5)]
        assert positions == sorted(positions) and "columns in this order" in doc
