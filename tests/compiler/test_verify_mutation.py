"""Mutation tests: verify must catch an artifact that claims a model but computes another.

For every artifact kind whose back-end exists in this tree, and every precision the back-end takes,
we change the most influential output weight (the largest |beta_j| times the range of h_j over the
declared domain) by one unit in the last place (IEEE 754 ``nextafter``) and by 1%. The ulp change is
far below any certified tolerance, so verify must pass it; the 1% change moves the output by far
more than the tolerance, so verify must refuse it (its stated bound is not the bundle's) or fail it
as unsound, for every model seed.

How the mutated artifact is made (and why it is honest): the back-end emits the mutated network, so
the changed weight is written exactly as the back-end writes any weight; then the artifact's
provenance is rewritten to claim the original bundle. Provenance is the 64-hex-digit bundle id
(SHA-256), so replacing the mutated bundle's id by the original's keeps every file the same length
and well-formed (the protobuf of an ONNX file, a C or Python source). verify's bundle-id check still
does its job (it is what lets the artifact be judged against the original at all), and the artifact
is what verify exists to catch: one that says it is model A but computes something else. No test
hook inside the product is needed.
"""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import emit
from nodecast.compiler.activations import get_activation
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.reference import hidden_layer
from nodecast.compiler.verify import verify
from nodecast.compiler.verify.runners import RUNNERS, available_kinds

PRECISIONS = {"onnx": ("float32", "float64"), "python": ("float64", "float32"),
              "c": ("float64", "float32", "q31", "q15")}
SUFFIX = {"onnx": "model.onnx", "python": "predictor.py", "c": "model_c"}
CASES = [(kind, precision) for kind in RUNNERS for precision in PRECISIONS[kind]]
POLICY = {"q31": "clamp", "q15": "clamp"}  # fixed point holds the domain only: no 'pass'
SEEDS = (0, 1, 2)


def most_influential_weight(net):
    """(node j, output o) maximising |beta_jo| * (max h_j - min h_j) over the domain's probes."""
    H = get_activation(net.activation).function(hidden_layer(net, domain_probes(net)))
    influence = np.abs(net.output_weights) * (H.max(axis=0) - H.min(axis=0))[:, None]
    j, o = np.unravel_index(np.argmax(influence), influence.shape)
    return int(j), int(o), float(np.max(np.abs(H[:, j])))


def mutated(bundle, change):
    """A bundle whose most influential weight is ``change(beta)``, and the output shift it causes
    at most over the domain probes (target units)."""
    net = bundle.network
    j, o, h_max = most_influential_weight(net)
    weights = np.array(net.output_weights)
    weights[j, o] = change(weights[j, o])
    shift = abs(weights[j, o] - net.output_weights[j, o]) * h_max * net.output_scale[o]
    return Bundle(net.replace(output_weights=weights), bundle.metadata), float(shift)


def claim_provenance(path, fake_id: str, real_id: str) -> None:
    """Rewrite every file of the artifact so it quotes ``real_id`` instead of ``fake_id``."""
    files = [path] if path.is_file() else sorted(p for p in path.rglob("*") if p.is_file())
    for file in files:
        data = file.read_bytes()
        for fake, real in ((fake_id, real_id), (fake_id[:12], real_id[:12])):
            data = data.replace(fake.encode("ascii"), real.encode("ascii"))
        file.write_bytes(data)


def emit_or_skip(bundle, kind, precision, path):
    if kind not in available_kinds():
        pytest.skip(f"the {kind} back-end or runner is not in this tree yet")
    try:
        emit(bundle, kind, path, overwrite=True, precision=precision,
             out_of_domain=POLICY.get(precision, "pass"))
    except NodecastError as exc:
        if "precision" in str(exc):
            pytest.skip(f"{kind} does not take {precision}: {exc}")
        raise


def mutant_report(bundle, kind, precision, folder, change, name):
    """(report, shift), or (None, shift) when verify refuses the mutant outright because the
    certified bound it states (computed by emit from the mutated weights) is not the bundle's:
    a forger who rewrites the provenance but not the bound is caught before any probe runs."""
    fake, shift = mutated(bundle, change)
    path = folder / f"{name}-{SUFFIX[kind]}"
    emit_or_skip(fake, kind, precision, path)
    claim_provenance(path, fake.bundle_id, bundle.bundle_id)
    try:
        return verify(bundle, path, count=1024), shift
    except NodecastError as exc:
        assert "certified_bound" in str(exc)
        return None, shift


@pytest.fixture(scope="module")
def models(friedman_bundle_factory):
    return {seed: friedman_bundle_factory(n_nodes=60, rows=400, seed=seed) for seed in SEEDS}


@pytest.mark.parametrize("kind, precision", CASES)
@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.slow
def test_one_ulp_passes_and_one_percent_fails(models, tmp_path, kind, precision, seed):
    bundle = models[seed]
    path = tmp_path / SUFFIX[kind]
    emit_or_skip(bundle, kind, precision, path)
    honest = verify(bundle, path, count=1024)
    assert honest.passed, honest.document["notes"]
    tolerance = min(honest.document["tolerance"]["per_output"])
    next_up = lambda b: np.nextafter(b, np.inf)  # noqa: E731  (IEEE 754 nextUp)
    ulp, ulp_shift = mutant_report(bundle, kind, precision, tmp_path, next_up, "ulp")
    assert ulp_shift < 0.1 * tolerance  # the tolerance allows it: an ulp is far below it
    assert ulp is not None and ulp.passed
    percent, shift = mutant_report(bundle, kind, precision, tmp_path, lambda b: 1.01 * b, "pct")
    assert shift > 10 * tolerance  # a 1% change is far above the tolerance ...
    if percent is None:  # ... refused for its stated bound, or measured and failed as unsound
        return
    assert not percent.passed and not percent.document["sound"]
    assert percent.document["max_abs_error"] >= 0.5 * shift
    in_domain = [r for r in percent.document["families"] if r["family"] == "sobol"]
    assert in_domain and not any(r["within_tolerance"] for r in in_domain)


def test_a_classifier_score_weight_change_is_caught(classifier_bundle, tmp_path):
    """Classifiers fail on their scores too, even where no label flips."""
    bundle = classifier_bundle
    path = tmp_path / "iris.onnx"
    emit(bundle, "onnx", path, precision="float32")
    assert verify(bundle, path, count=512).passed
    report, shift = mutant_report(bundle, "onnx", "float32", tmp_path, lambda b: 1.01 * b, "pct")
    assert report is None or not report.passed


def test_provenance_rewrite_is_what_lets_the_mutant_be_judged(friedman_bundle, tmp_path):
    """Without the rewrite the mutant is refused as another bundle's artifact (CLI: exit 2)."""
    fake, _ = mutated(friedman_bundle, lambda b: 1.01 * b)
    path = tmp_path / "mutant.onnx"
    emit(fake, "onnx", path)
    with pytest.raises(NodecastError, match="not from this bundle"):
        verify(friedman_bundle, path)
