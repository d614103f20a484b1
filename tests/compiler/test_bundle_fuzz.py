"""Fuzzing the bundle loader: whatever the bytes, the only exception that may escape is BundleError,
and whatever loads is the genuine model (or a model whose every field passed the checks).

Each hypothesis example tries a small batch of cases (hypothesis' own overhead per example is a few
milliseconds, a tiny bundle loads in about one), about 5,000 loads in all. ``derandomize`` keeps CI
runs repeatable; set ``FUZZ_SEED=random`` to explore new cases locally.
"""

from __future__ import annotations

import copy
import os

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from nodecast.compiler import bundle as bundle_io
from nodecast.compiler import reference
from nodecast.compiler.bundle import BundleError
from nodecast.compiler.inspection import describe_bundle, format_description
from tests.compiler.test_bundle_integrity import (
    HEADER,
    assemble,
    npy,
    npy_with_header,
    parts,
    same_content,
    tiny_bundle,
)

ORIGINAL = tiny_bundle(n=1, m=2)
DATA = bundle_io.to_bytes(ORIGINAL)
MANIFEST, PAYLOADS = parts(ORIGINAL)


BATCH = 4


def fuzz_settings(examples: int):
    return settings(max_examples=examples, deadline=None, database=None,
                    derandomize=os.environ.get("FUZZ_SEED") != "random",
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


def batches(strategy):
    return st.lists(strategy, min_size=BATCH, max_size=BATCH)


def load_or_refuse(data: bytes):
    """The loaded bundle, or None when refused; any other exception fails the test."""
    try:
        return bundle_io.from_bytes(data, "fuzzed.ncast")
    except BundleError as exc:
        assert "\n" not in str(exc)
        return None


def _paths(document, prefix=()):
    """Every key path inside a JSON document (records and lists)."""
    yield prefix
    if isinstance(document, dict):
        for key, value in document.items():
            yield from _paths(value, prefix + (key,))
    elif isinstance(document, list):
        for index, value in enumerate(document):
            yield from _paths(value, prefix + (index,))


MANIFEST_PATHS = [path for path in _paths(MANIFEST) if path and path != ("bundle_id",)]
json_values = st.recursive(
    st.none() | st.booleans() | st.integers(min_value=-(2**70), max_value=2**70)
    | st.floats(allow_nan=False, allow_infinity=False) | st.text(max_size=20),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                  max_size=4),
    max_leaves=12)


damage = st.tuples(
    st.lists(st.tuples(st.integers(0, len(DATA) - 1), st.integers(0, 255)), min_size=1, max_size=6),
    st.one_of(st.none(), st.integers(0, len(DATA))), st.binary(max_size=8))


@fuzz_settings(400)
@given(batches(damage))
@pytest.mark.slow
def test_random_byte_damage_is_refused_or_harmless(cases):
    for changes, cut, inserted in cases:
        data = bytearray(DATA)
        for position, value in changes:
            data[position] = value
        if cut is not None:
            data[cut:cut] = inserted
        loaded = load_or_refuse(bytes(data))
        if loaded is not None:
            assert same_content(loaded, ORIGINAL)


@fuzz_settings(300)
@given(batches(st.tuples(st.sampled_from(MANIFEST_PATHS), json_values, st.booleans())))
@pytest.mark.slow
def test_any_manifest_value_anywhere_is_refused_or_sound(cases):
    for path, value, rehash_arrays in cases:
        manifest = copy.deepcopy(MANIFEST)
        target = manifest
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value
        data = assemble(manifest, PAYLOADS, rehash="all" if rehash_arrays else "id")
        loaded = load_or_refuse(data)
        if loaded is not None:  # a change the checks let through must leave a usable bundle
            format_description(describe_bundle(loaded))
            assert reference.predict(loaded.network, [[0.5]]).shape == (1, 1)


descriptors = st.sampled_from(["<f8", ">f8", "<f4", "|O", "<i8", "<c16", "V8", "<f8x", "", "O"])
shapes = st.lists(st.integers(-3, 2**62), max_size=3).map(tuple) | st.sampled_from([(2, 1), (2,)])


headers = st.tuples(descriptors, st.sampled_from(["False", "True", "0", "None"]), shapes,
                    st.integers(0, 40), st.sampled_from([(1, 0), (2, 0), (3, 0), (9, 9)]))


@fuzz_settings(200)
@given(batches(headers))
@pytest.mark.slow
def test_random_npy_headers_are_refused_or_honest(cases):
    for descr, fortran, shape, n_values, version in cases:
        payload = npy_with_header(HEADER % (descr, fortran, shape), bytes(8 * n_values), version)
        payloads = dict(PAYLOADS, **{"arrays/hidden_weights.npy": payload})
        manifest = copy.deepcopy(MANIFEST)
        manifest["arrays"]["hidden_weights"]["shape"] = list(shape)
        loaded = load_or_refuse(assemble(manifest, payloads))
        if loaded is not None:
            assert (descr, fortran, version[0] in (1, 2)) == ("<f8", "False", True)
            assert loaded.network.hidden_weights.shape == shape == (2, 1) and n_values == 2


finite_or_not = st.floats(allow_nan=True, allow_infinity=True, allow_subnormal=True, width=64)


@fuzz_settings(150)
@given(batches(st.tuples(st.lists(finite_or_not, min_size=2, max_size=2), st.sampled_from(
    ["hidden_weights", "hidden_biases", "input_scale", "domain_low"]))))
@pytest.mark.slow
def test_any_float_values_are_refused_unless_finite_and_valid(cases):
    for values, field in cases:
        _check_float_case(values, field)


def _check_float_case(values, field):
    shape = PAYLOADS_SHAPES[field]
    array = np.resize(np.array(values), shape)
    payloads = dict(PAYLOADS, **{f"arrays/{field}.npy": npy(array)})
    manifest = copy.deepcopy(MANIFEST)
    manifest["arrays"][field]["shape"] = list(shape)
    loaded = load_or_refuse(assemble(manifest, payloads))
    valid = bool(np.all(np.isfinite(array)))
    if field == "input_scale":
        valid &= bool(np.all(array > 0))
    if field == "domain_low":
        valid &= bool(np.all(array <= ORIGINAL.network.domain_high))
    valid = valid and _within_content_limits(field, array)
    assert (loaded is not None) == valid
    if loaded is not None:
        assert getattr(loaded.network, field).tobytes() == array.tobytes()


def _within_content_limits(field, array) -> bool:
    """docs/reliability.md: values within 1e100, scales at least 1e-100, and the normalised
    domain, the pre-activations and the outputs over the domain within 1e100."""
    arrays = dict(ORIGINAL.network.arrays(), **{field: array})
    if any(np.max(np.abs(v)) > 1e100 for v in arrays.values()) or np.min(
            arrays["input_scale"]) < 1e-100:
        return False
    with np.errstate(all="ignore"):
        reach = np.maximum(abs(arrays["domain_low"] - arrays["input_offset"]),
                           abs(arrays["domain_high"] - arrays["input_offset"])) / arrays["input_scale"]
        z = np.abs(arrays["hidden_weights"]) @ reach + np.abs(arrays["hidden_biases"])
    return bool(np.max(reach) <= 1e100 and np.max(z) <= 1e100)


PAYLOADS_SHAPES = {name: getattr(ORIGINAL.network, name).shape
                   for name in ("hidden_weights", "hidden_biases", "input_scale", "domain_low")}


@fuzz_settings(100)
@given(batches(st.text(min_size=1, max_size=30)))
@pytest.mark.slow
def test_any_extra_entry_name_is_refused(names):
    for name in names:
        if name.split("\x00")[0] in bundle_io.EXPECTED_ENTRIES | {""}:
            continue  # a duplicate of a genuine entry (the zip writer warns); covered elsewhere
        try:
            data = assemble(MANIFEST, PAYLOADS, extra=[(name, b"payload")])
        except (UnicodeEncodeError, ValueError):
            continue  # not representable in a zip at all
        assert load_or_refuse(data) is None
