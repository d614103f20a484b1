"""Every artifact of the demo model computes, bit for bit, what it computed before the lowering was
reorganised into passes (issue: the house redesigned). The digests in tests/data were recorded by
tests/data/record_lowering_outputs.py at commit 8ff5fd1 from the committed demo bundle."""

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
RECORDED = json.loads((DATA / "demo_fan_outputs.json").read_text())


@pytest.mark.parametrize("target,options", record.CONFIGS,
                         ids=[record.config_name(t, o) for t, o in record.CONFIGS])
@pytest.mark.slow
def test_artifact_computes_what_it_computed_before(target, options, tmp_path):
    if target == "c" and shutil.which("cc") is None and shutil.which("gcc") is None:
        pytest.skip("no C compiler")
    from nodecast.compiler import load

    bundle = load(record.BUNDLE)
    got = record.digest(bundle, target, options, tmp_path, record.EXTRA.get(target))
    assert got == RECORDED[record.config_name(target, options)]
