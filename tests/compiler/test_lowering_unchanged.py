"""Every artifact of the committed test bundles computes, bit for bit, what it computed before the
lowering was reorganised into passes (issue: the house redesigned). The digests in tests/data were
recorded by tests/data/record_lowering_outputs.py with the code of commit 8ff5fd1."""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import pytest

DATA = Path(__file__).parent.parent / "data"
spec = importlib.util.spec_from_file_location("record_lowering_outputs",
                                              DATA / "record_lowering_outputs.py")
record = importlib.util.module_from_spec(spec)
spec.loader.exec_module(record)
RECORDED = json.loads(record.DIGESTS.read_text())


@pytest.mark.slow
@pytest.mark.parametrize("bundle_name,target,options", record.CONFIGS,
                         ids=[record.config_name(*config) for config in record.CONFIGS])
def test_artifact_computes_what_it_computed_before(bundle_name, target, options, tmp_path):
    if target == "c" and shutil.which("gcc") is None:
        pytest.skip("no C compiler")
    if record.depends_on_environment(target, options) \
            and record.environment() != RECORDED["environment"]:
        pytest.skip(f"recorded with {RECORDED['environment']}; this machine has "
                    f"{record.environment()}")
    from nodecast.compiler import load

    bundle = load(DATA / f"{bundle_name}.ncast")
    got = record.digest(bundle, target, options, tmp_path, record.EXTRA.get(options["precision"]))
    assert got == RECORDED["digests"][record.config_name(bundle_name, target, options)]


def test_every_configuration_has_a_recorded_digest():
    names = {record.config_name(*config) for config in record.CONFIGS}
    assert names == set(RECORDED["digests"])
    assert {"onnxruntime", "libc"} <= set(RECORDED["environment"])
