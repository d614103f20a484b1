"""Resource limits: emit refuses an artifact over a stated size (64 MiB by default) unless the user
raises the limit explicitly, and writes nothing when it refuses."""

from __future__ import annotations

import re
import shutil

import numpy as np
import pytest

from nodecast.compiler import emit, files
from nodecast.compiler.bundle import Bundle, save
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from tests.helpers import run_cli


def _bundle(n_nodes=400, n_features=8) -> Bundle:
    rng = np.random.default_rng(0)
    n, m = n_features, n_nodes
    return Bundle(Network(
        hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
        activation="tanh", output_weights=rng.normal(size=(m, 1)), output_bias=[0.0],
        input_offset=np.zeros(n), input_scale=np.ones(n), output_offset=[0.0],
        output_scale=[1.0], domain_low=np.zeros(n), domain_high=np.ones(n),
        feature_names=tuple(f"x{i}" for i in range(n)), target_names=("y",)), {})



KINDS = ["onnx", "python"] + (["c"] if shutil.which("gcc") else [])


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.slow
def test_emit_refuses_an_artifact_over_the_limit_and_writes_nothing(kind, tmp_path):
    bundle = _bundle()
    size = sum(map(len, emit(bundle, kind).files.values()))
    # 4001 parameters take 16 kB even as IEEE 754 binary32, the narrowest default precision
    assert size > 4 * (400 * 8 + 400 + 400 + 1)
    target = tmp_path / ("out" if kind == "c" else f"out.{kind}")
    with pytest.raises(NodecastError) as info:
        emit(bundle, kind, target, max_bytes=size - 1)
    message = str(info.value)
    assert f"would be {size} bytes" in message and "--max-artifact-size" in message
    assert not target.exists()
    emit(bundle, kind, target, max_bytes=size)  # exactly at the limit is allowed
    assert target.exists()


def test_default_limit_applies_without_the_option(tmp_path, monkeypatch, capsys):
    path = tmp_path / "m.ncast"
    save(_bundle(), path)
    monkeypatch.setattr(files, "MAX_ARTIFACT_BYTES", 10_000)
    code, _, err = run_cli(capsys, *["emit", path, "--to", "onnx", "-o", tmp_path / "m.onnx"])
    assert code == 2 and "over the limit 10K" in err and "pass --max-artifact-size" in err
    assert files.MAX_ARTIFACT_BYTES != 64 * 2**20  # patched; the shipped default is 64 MiB:
    monkeypatch.undo()
    assert files.MAX_ARTIFACT_BYTES == 64 * 2**20
    assert not (tmp_path / "m.onnx").exists()
    code, _, err = run_cli(capsys, *["emit", path, "--to", "onnx", "-o", tmp_path / "m.onnx",
                         "--max-artifact-size", "1M"])
    assert code == 0, err


@pytest.mark.parametrize("text, size", [("500", 500), ("200K", 200 * 1024), ("64M", 64 * 2**20),
                                        ("2GiB", 2 * 2**30), ("1 mb", 2**20)])
def test_sizes_are_read_in_binary_units(text, size):
    assert files.parse_size(text) == size


@pytest.mark.parametrize("text", ["", "-1", "1.5M", "64T", "lots", "\u0663K"])
def test_bad_sizes_are_refused_through_the_cli(text, tmp_path, capsys):
    path = tmp_path / "m.ncast"
    save(_bundle(n_nodes=5), path)
    code, _, err = run_cli(capsys, *["emit", path, "--to", "onnx", "-o", tmp_path / "m.onnx",
                         "--max-artifact-size", text])
    assert code == 2 and "--max-artifact-size takes a size" in err


def _limit_address_space():  # a wrong guess must fail fast here, never swap the shared machine
    import resource

    resource.setrlimit(resource.RLIMIT_AS, (4 * 2**30, 4 * 2**30))


@pytest.mark.slow
def test_training_refuses_a_model_that_cannot_fit_in_memory_with_an_estimate(tmp_path):
    import subprocess
    import sys

    rng = np.random.default_rng(0)
    rows = "\n".join(",".join(map(repr, map(float, row))) for row in rng.random((200, 4)))
    (tmp_path / "d.csv").write_text("a,b,c,y\n" + rows + "\n")
    # 100,000 nodes: the M x M factor alone is 100000^2 x 8 bytes = 80 GB (74.5 GiB)
    result = subprocess.run([sys.executable, "-m", "nodecast.cli", "train", "d.csv",
                             "--target", "y", "--nodes", "100000", "--method", "interval",
                             "-o", "m.ncast"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=300,
                            preexec_fn=_limit_address_space)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert re.search(r"\d+(\.\d+)? ?(GB|GiB|TB|TiB)", result.stderr)
    assert len(result.stderr.strip().splitlines()) == 1 and not (tmp_path / "m.ncast").exists()
