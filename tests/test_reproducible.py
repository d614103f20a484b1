"""Same data, options and seed give byte-identical bundles and artifacts, from separate processes
with different hash seeds and different output paths (no timestamps, paths or set order inside)."""

from __future__ import annotations

import io
import json
import os
import re
import shutil
import subprocess
import sys
import zipfile

import numpy as np
import pytest

pytestmark = pytest.mark.slow  # separate processes train and emit every target

# Every command runs in each of two fresh interpreters; {out} is that run's own absolute folder.
COMMANDS = [
    ["train", "{data}", "--target", "y", "--features", "a,b,c", "--nodes", "40", "--seed", "5",
     "-o", "{out}/reg.ncast"],
    ["train", "{data}", "--target", "kind", "--features", "a,b,c", "--task", "classification",
     "--nodes", "30", "--seed", "2", "-o", "{out}/cls.ncast"],
    ["select", "{data}", "--target", "y", "--features", "a,b,c", "--nodes", "10,20",
     "--ridge", "0,1e-6", "--folds", "3", "-o", "{out}/sel.ncast"],
    ["emit", "{out}/reg.ncast", "--to", "onnx", "--precision", "float32", "-o", "{out}/reg32.onnx"],
    ["emit", "{out}/cls.ncast", "--to", "onnx", "--precision", "float64", "-o", "{out}/cls64.onnx"],
    ["emit", "{out}/reg.ncast", "--to", "python", "-o", "{out}/reg.py"],
    ["emit", "{out}/cls.ncast", "--to", "python", "--out-of-domain", "reject", "-o", "{out}/cls.py"],
]
C_COMMANDS = [
    ["emit", "{out}/reg.ncast", "--to", "c", "--precision", "float32", "-o", "{out}/c32"],
    ["emit", "{out}/cls.ncast", "--to", "c", "--precision", "q15", "--out-of-domain", "clamp",
     "--prefix", "fan", "-o", "{out}/cq15"],
]
CHILD = """
import json, sys
from nodecast.cli import main
for args in json.loads(sys.argv[1]):
    try:
        main(args)
    except SystemExit as exc:
        if exc.code:
            raise
"""


def _write_data(path):
    rng = np.random.default_rng(11)
    X = rng.random((160, 3))
    y = np.sin(4 * X[:, 0]) + X[:, 1] * X[:, 2]
    kinds = np.array(["cool", "warm", "hot \u00e9"], dtype=object)[(X[:, 0] * 2.999).astype(int)]
    lines = ["a,b,c,y,kind"] + [f"{a!r},{b!r},{c!r},{t!r},{k}" for (a, b, c), t, k in
                                zip(X.tolist(), y.tolist(), kinds, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    base = tmp_path_factory.mktemp("repro")
    data = base / "data.csv"
    _write_data(data)
    commands = COMMANDS + (C_COMMANDS if shutil.which("gcc") else [])
    runs = []
    for name, hash_seed in (("first", "1"), ("second run, other path", "4242")):
        out = base / name
        out.mkdir()
        filled = [[arg.format(data=data, out=out) for arg in command] for command in commands]
        env = dict(os.environ, PYTHONHASHSEED=hash_seed)
        result = subprocess.run([sys.executable, "-c", CHILD, json.dumps(filled)], env=env,
                                cwd=out, capture_output=True, text=True, timeout=900)
        assert result.returncode == 0, result.stderr
        runs.append(out)
    return runs


def _outputs(folder):
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())


@pytest.mark.slow
def test_every_output_is_byte_identical_across_processes(two_runs):
    first, second = two_runs
    names = _outputs(first)
    assert names == _outputs(second)
    assert {"reg.ncast", "cls.ncast", "sel.ncast", "reg32.onnx", "cls64.onnx", "reg.py",
            "cls.py"} <= set(names)
    for name in names:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name


def test_outputs_hold_no_paths_or_timestamps(two_runs):
    first, _ = two_runs
    # an ISO 8601 date or time of day, as a build stamp would write it (common practice)
    stamp = re.compile(rb"\b(19|20)\d\d-\d\d-\d\d\b|\b\d\d:\d\d:\d\d\b")
    for name in _outputs(first):
        data = (first / name).read_bytes()
        assert str(first).encode() not in data and b"data.csv" not in data, name
        assert not stamp.search(data), name
    for bundle in ("reg.ncast", "cls.ncast", "sel.ncast"):
        with zipfile.ZipFile(first / bundle) as archive:
            assert {info.date_time for info in archive.infolist()} == {(1980, 1, 1, 0, 0, 0)}


def test_bundle_id_is_what_the_artifacts_quote(two_runs):
    import onnx

    from nodecast.compiler.bundle import load

    first, _ = two_runs
    bundle_id = load(first / "reg.ncast").bundle_id
    model = onnx.load(str(first / "reg32.onnx"))
    assert {p.key: p.value for p in model.metadata_props}["nodecast.bundle_id"] == bundle_id
    assert bundle_id.encode() in (first / "reg.py").read_bytes()
    manifest = json.loads(zipfile.ZipFile(io.BytesIO((first / "reg.ncast").read_bytes()))
                          .read("manifest.json"))
    assert manifest["bundle_id"] == bundle_id
