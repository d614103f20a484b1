"""A bundle that is damaged, truncated, tampered with, from the future or built to hurt the reader
is refused with one line naming the problem (BundleError; exit 2 through the CLI), no traceback.

The forging helpers at the top build bundles byte by byte from our own reading of the format (the
zip layout of PKWARE's APPNOTE.TXT, the .npy layout of NumPy's format NEP 1), so tests can plant a
precise lie and re-hash it: the hashes detect damage, not forgery, and every field must hold up on
its own. ``test_bundle_fuzz.py`` reuses them.
"""

from __future__ import annotations

import copy
import hashlib
import io
import json
import struct
import zipfile

import numpy as np
import pytest

from nodecast.compiler import bundle as bundle_io
from nodecast.compiler.bundle import Bundle, BundleError
from nodecast.compiler.ir import Network
from tests.helpers import run_cli

ZIP_TIME = (1980, 1, 1, 0, 0, 0)


def tiny_network(n=2, m=3, t=1, seed=0, **changes) -> Network:
    rng = np.random.default_rng(seed)
    values = dict(hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
                  activation="logistic", output_weights=rng.normal(size=(m, t)),
                  output_bias=rng.normal(size=t), input_offset=np.zeros(n), input_scale=np.ones(n),
                  output_offset=np.zeros(t), output_scale=np.ones(t), domain_low=np.zeros(n),
                  domain_high=np.ones(n), feature_names=tuple(f"x{i}" for i in range(n)),
                  target_names=tuple(f"y{i}" for i in range(t)))
    values.update(changes)
    return Network(**values)


def tiny_bundle(**changes) -> Bundle:
    return Bundle(tiny_network(**changes), {"seed": 0, "metrics": {"training": {"rmse": [0.5]}}})


def npy(array, dtype="<f8") -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, np.asarray(array, dtype=dtype), allow_pickle=False)
    return buffer.getvalue()


def npy_with_header(header: str, data: bytes, version=(1, 0)) -> bytes:
    """A .npy file with a header text of our choosing (NEP 1: magic, version, length, dict)."""
    size_format = "<H" if version == (1, 0) else "<I"
    prefix = 10 if version == (1, 0) else 12
    text = header.encode("latin1")
    text += b" " * ((-(prefix + len(text) + 1)) % 64) + b"\n"
    return b"\x93NUMPY" + bytes(version) + struct.pack(size_format, len(text)) + text + data


def parts(bundle: Bundle) -> tuple[dict, dict[str, bytes]]:
    """(manifest, entry payloads) of a genuine bundle, ready to be edited."""
    with zipfile.ZipFile(io.BytesIO(bundle_io.to_bytes(bundle))) as archive:
        manifest = json.loads(archive.read("manifest.json"))
        payloads = {name: archive.read(name) for name in archive.namelist()
                    if name != "manifest.json"}
    return manifest, payloads


def canonical_id(manifest: dict) -> str:
    """The bundle id as the spec defines it: SHA-256 of the manifest without its id, sorted keys,
    compact separators, ASCII (written from the spec, independently of compiler/bundle.py)."""
    body = {key: value for key, value in manifest.items() if key != "bundle_id"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def rehash_arrays(manifest: dict, payloads: dict[str, bytes]) -> None:
    """Make every array's declared size and hash match its payload (in place)."""
    arrays = manifest.get("arrays") if isinstance(manifest, dict) else None
    for meta in arrays.values() if isinstance(arrays, dict) else ():
        if isinstance(meta, dict) and isinstance(meta.get("entry"), str) \
                and meta["entry"] in payloads:
            meta["bytes"] = len(payloads[meta["entry"]])
            meta["sha256"] = hashlib.sha256(payloads[meta["entry"]]).hexdigest()


def assemble(manifest: dict, payloads: dict[str, bytes], rehash: str = "all",
             manifest_text: bytes | None = None, extra: list[tuple[str, bytes]] = (),
             compression=zipfile.ZIP_STORED) -> bytes:
    """A zip holding ``manifest`` and ``payloads``. ``rehash`` "all" makes the array sizes, hashes
    and the bundle id consistent with whatever the payloads and manifest now say; "id" only the
    bundle id; "none" leaves the manifest as given."""
    manifest = copy.deepcopy(manifest)
    if rehash == "all":
        rehash_arrays(manifest, payloads)
    if rehash in ("all", "id") and isinstance(manifest, dict):
        try:
            manifest["bundle_id"] = canonical_id(manifest)
        except (TypeError, ValueError):
            pass
    if manifest_text is None:
        manifest_text = json.dumps(manifest, sort_keys=True, indent=1).encode("ascii") + b"\n"
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=compression) as archive:
        for name, data in [("manifest.json", manifest_text), *sorted(payloads.items()), *extra]:
            archive.writestr(zipfile.ZipInfo(name, date_time=ZIP_TIME), data,
                             compress_type=compression)
    return buffer.getvalue()


def entry_spans(data: bytes) -> dict[str, tuple[int, int]]:
    """Byte range of each entry's data in the archive (local header: 30 bytes, name, extra)."""
    spans = {}
    with zipfile.ZipFile(io.BytesIO(data)) as archive:
        for info in archive.infolist():
            name_len, extra_len = struct.unpack("<HH", data[info.header_offset + 26:
                                                             info.header_offset + 30])
            start = info.header_offset + 30 + name_len + extra_len
            spans[info.filename] = (start, start + info.compress_size)
    return spans


def patch_central_sizes(data: bytes, entry: str, compressed: int, uncompressed: int) -> bytes:
    """Rewrite an entry's sizes in the central directory (APPNOTE 4.3.12: offsets 20 and 24)."""
    data = bytearray(data)
    position = data.find(b"PK\x01\x02")
    while position >= 0:
        name_len = struct.unpack("<H", data[position + 28:position + 30])[0]
        if data[position + 46:position + 46 + name_len] == entry.encode():
            data[position + 20:position + 28] = struct.pack("<II", compressed, uncompressed)
            return bytes(data)
        position = data.find(b"PK\x01\x02", position + 4)
    raise AssertionError(f"no central record for {entry}")


def refused(data: bytes) -> str:
    with pytest.raises(BundleError) as info:
        bundle_io.from_bytes(data, "bad.ncast")
    message = str(info.value)
    assert "\n" not in message and message.startswith("bad.ncast")
    return message


def same_content(a: Bundle, b: Bundle) -> bool:
    return (a.bundle_id == b.bundle_id and a.metadata == b.metadata and all(
        a.network.arrays()[k].tobytes() == b.network.arrays()[k].tobytes()
        for k in a.network.arrays()))


# -- the forge itself agrees with the product -----------------------------------------------------

def test_forge_rebuilds_the_genuine_bytes_and_the_spec_id():
    bundle = tiny_bundle()
    manifest, payloads = parts(bundle)
    assert canonical_id(manifest) == manifest["bundle_id"] == bundle.bundle_id
    rebuilt = assemble(manifest, payloads)
    assert same_content(bundle_io.from_bytes(rebuilt), bundle)


# -- damage ---------------------------------------------------------------------------------------

@pytest.mark.slow
def test_every_changed_byte_inside_an_entry_is_refused():
    data = bundle_io.to_bytes(tiny_bundle(n=1, m=1))
    spans = entry_spans(data)
    tried = 0
    for name, (start, end) in spans.items():
        for offset in range(start, end):
            damaged = bytearray(data)
            damaged[offset] ^= 0xFF
            message = refused(bytes(damaged))
            assert name in message or "manifest" in message, (name, offset, message)
            tried += 1
    assert tried == sum(end - start for start, end in spans.values()) > 2000


@pytest.mark.slow
def test_a_changed_byte_in_the_zip_structure_is_refused_or_harmless():
    original = tiny_bundle(n=1, m=1)
    data = bundle_io.to_bytes(original)
    inside = {i for start, end in entry_spans(data).values() for i in range(start, end)}
    outcomes = {"refused": 0, "identical": 0}
    for offset in sorted(set(range(len(data))) - inside):
        damaged = bytearray(data)
        damaged[offset] ^= 0xFF
        try:
            loaded = bundle_io.from_bytes(bytes(damaged))
        except BundleError:
            outcomes["refused"] += 1
        else:  # e.g. a timestamp or "made by" field: the model itself must be untouched
            assert same_content(loaded, original), offset
            outcomes["identical"] += 1
    assert outcomes["refused"] > outcomes["identical"] > 0


def test_every_truncation_is_refused():
    data = bundle_io.to_bytes(tiny_bundle(n=1, m=1))
    for length in range(len(data)):
        refused(data[:length])


def test_appended_or_prepended_bytes_do_not_change_the_model():
    # zip readers locate the directory from the end (APPNOTE 4.3.16), so a prefix is tolerated;
    # either way nothing but the genuine model can come out
    original = tiny_bundle()
    data = bundle_io.to_bytes(original)
    for variant in (b"junk" + data, data + b"\x00" * 10):
        try:
            loaded = bundle_io.from_bytes(variant)
        except BundleError:
            continue
        assert same_content(loaded, original)


# -- versions and manifest ------------------------------------------------------------------------

@pytest.mark.parametrize("version", [3, 0, -1, 10**30, "1", 1.0, True, None, [1]])
def test_unknown_format_version_is_refused(version):
    manifest, payloads = parts(tiny_bundle())
    manifest["format_version"] = version
    message = refused(assemble(manifest, payloads))
    assert "format version" in message and "upgrade nodecast" in message


def test_changed_manifest_without_new_id_is_refused():
    manifest, payloads = parts(tiny_bundle())
    manifest["network"]["feature_names"] = ["x0", "renamed"]
    message = refused(assemble(manifest, payloads, rehash="none"))
    assert "bundle id" in message


def _set(document, path, value):
    target = document
    for key in path[:-1]:
        target = target[key]
    if value is DELETE:
        del target[path[-1]]
    else:
        target[path[-1]] = value


DELETE = object()
HW = ("arrays", "hidden_weights")
MANIFEST_LIES = [
    (("arrays",), "hidden_weights", "'arrays' is not a record"),
    (("arrays",), list(bundle_io.ARRAY_FIELDS), "'arrays' is not a record"),
    (("arrays", "hidden_weights"), DELETE, "manifest lists arrays"),
    (("arrays", "surplus"), {"entry": "arrays/surplus.npy"}, "manifest lists arrays"),
    (HW, "arrays/hidden_weights.npy", "is not described by"),
    (HW + ("entry",), "../hidden_weights.npy", "unexpected entry"),
    (HW + ("bytes",), "136", "unusable size"),
    (HW + ("bytes",), True, "unusable size"),
    (HW + ("bytes",), 10**12, "unusable size"),
    (HW + ("shape",), "3,2", "unusable shape"),
    (HW + ("shape",), [3.0, 2.0], "unusable shape"),
    (HW + ("shape",), [3, 2, 1], "unusable shape"),
    (HW + ("shape",), [True, 2], "unusable shape"),
    (HW + ("shape",), [0, 2], "at least one feature"),
    (HW + ("sha256",), 12345, "valid SHA-256"),
    (("network",), ["x0", "x1"], "'network' is not a record"),
    (("network", "feature_names"), "x0x1", "not a list of text"),
    (("network", "feature_names"), ["x0", 1], "not a list of text"),
    (("network", "feature_names"), ["x0", None], "not a list of text"),
    (("network", "feature_names"), ["x0", "x0"], "repeats 'x0'"),
    (("network", "feature_names"), ["x0"], "feature_names has 1 entries"),
    (("network", "activation"), 3, "'activation' is int, not text"),
    (("network", "activation"), "relu", "unknown activation"),
    (("network", "task"), "forecasting", "task must be"),
    (("network", "class_labels"), ["a"], "regression network has no class labels"),
    (("network", "surplus"), "x", "'network' has keys"),
    (("network",), DELETE, "'network' is not a record"),
    (("metadata",), [], "'metadata' is missing or not a record"),
    (("metadata", "metrics"), [1, 2], "'metrics' is not a record"),
    (("metadata", "metrics", "training"), 0.5, "are not a record"),
    (("tool_version",), 1, "'tool_version'"),
    (("format",), "another-format", "does not describe a nodecast-bundle"),
]


@pytest.mark.parametrize("path, value, expected", MANIFEST_LIES,
                         ids=[".".join(p) + f"={v!r}"[:30] for p, v, _ in MANIFEST_LIES])
def test_manifest_fields_of_the_wrong_type_or_value_are_refused(path, value, expected):
    manifest, payloads = parts(tiny_bundle())
    _set(manifest, path, value)
    assert expected in refused(assemble(manifest, payloads, rehash="id"))


@pytest.mark.parametrize("text, expected", [
    (b'{"format": NaN}', "NaN"),
    (b'{"format": Infinity}', "Infinity"),
    (b'{"format": "nodecast-bundle", "format": "nodecast-bundle"}', "repeats a key"),
    (b"[" * 100_000 + b"]" * 100_000, "nested too deeply"),
    (b'{"format": "nodecast-bundle\xc3\xa9"}', "not a readable bundle"),
    (b"not json", "not a readable bundle"),
    (b'["nodecast-bundle"]', "does not describe"),
])
def test_manifest_that_is_not_strict_json_is_refused(text, expected):
    manifest, payloads = parts(tiny_bundle())
    assert expected in refused(assemble(manifest, payloads, manifest_text=text))


# -- array payloads -------------------------------------------------------------------------------

def _with_payload(entry: str, payload: bytes, **manifest_changes) -> bytes:
    manifest, payloads = parts(tiny_bundle())
    payloads[entry] = payload
    for path, value in manifest_changes.items():
        _set(manifest, tuple(path.split(".")), value)
    return assemble(manifest, payloads)


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_non_finite_weights_are_refused(value):
    weights = tiny_network().hidden_weights.copy()
    weights[1, 0] = value
    message = refused(_with_payload("arrays/hidden_weights.npy", npy(weights)))
    assert "hidden_weights holds non-finite values" in message


HEADER = "{'descr': '%s', 'fortran_order': %s, 'shape': %s, }"
NPY_LIES = [
    (npy(np.zeros((3, 2)), "<f4"), "dtype float32"),
    (npy(np.zeros((3, 2)), ">f8"), "dtype >f8"),
    (npy(np.zeros((3, 2)), "<i8"), "dtype int64"),
    (npy_with_header(HEADER % ("|O", False, (3, 2)), b"\x80\x04N."), "dtype object"),
    (npy(np.zeros((2, 3))), "shape (2, 3)"),
    (npy(np.zeros(6)), "shape (6,)"),
    (npy(np.asfortranarray(np.arange(6.0).reshape(3, 2))), "Fortran order"),
    (npy(np.zeros((3, 2))) + b"\x00" * 8, "holds 56 data bytes, its shape needs 48"),
    (npy(np.zeros((3, 2)))[:-8], "holds 40 data bytes"),
    (npy_with_header(HEADER % ("<f8", False, (3, 2)), b"\x00" * 48, (2, 0)), None),
    (npy_with_header(HEADER % ("<f8", False, (3, 2)), b"\x00" * 48, (3, 0)), "unsupported .npy"),
    (b"\x93NUMPZ\x01\x00" + npy(np.zeros((3, 2)))[8:], "not a readable bundle"),
    (npy_with_header("{'descr': '<f8', 'fortran_order': False, 'shape': (3, 2), "
                     "'x': __import__('os')}", b"\x00" * 48), "not a readable bundle"),
    (npy_with_header("{" + " " * 5000 + "}", b""), "not a readable bundle"),
]


@pytest.mark.parametrize("payload, expected", NPY_LIES, ids=[e or "v2-ok" for _, e in NPY_LIES])
def test_npy_header_that_lies_is_refused(payload, expected):
    data = _with_payload("arrays/hidden_weights.npy", payload)
    if expected is None:  # a well-formed version 2.0 header is honest and accepted
        assert bundle_io.from_bytes(data).network.hidden_weights.shape == (3, 2)
    else:
        assert expected in refused(data)


def test_header_claiming_a_huge_array_is_refused_without_allocating_it():
    # manifest and .npy header agree on 10^12 x 2 floats (16 TB); the 48 data bytes give it away
    huge = [10**12, 2]
    payload = npy_with_header(HEADER % ("<f8", False, tuple(huge)), b"\x00" * 48)
    message = refused(_with_payload("arrays/hidden_weights.npy", payload,
                                    **{"arrays.hidden_weights.shape": huge}))
    assert "its shape needs 16000000000000" in message


def test_arrays_that_disagree_in_shape_are_refused():
    payload = npy(np.zeros(4))
    message = refused(_with_payload("arrays/hidden_biases.npy", payload,
                                    **{"arrays.hidden_biases.shape": [4]}))
    assert "network is inconsistent: hidden_biases has shape (4,), expected (3,)" in message


# -- the archive: names, sizes, compression, bombs ------------------------------------------------

@pytest.mark.parametrize("name", ["../evil.npy", "/etc/evil", "arrays/../../evil", "\\evil",
                                  "arrays\\..\\..\\evil", "C:/evil"])
def test_unsafe_entry_names_are_refused(name):
    manifest, payloads = parts(tiny_bundle())
    message = refused(assemble(manifest, payloads, extra=[(name, b"x")]))
    assert "unsafe entry name" in message


def test_unexpected_duplicate_and_missing_entries_are_refused():
    manifest, payloads = parts(tiny_bundle())
    assert "unexpected entries ['notes.txt']" in refused(
        assemble(manifest, payloads, extra=[("notes.txt", b"hi")]))
    with pytest.warns(UserWarning, match="Duplicate name"):
        duplicate = assemble(manifest, payloads, extra=[("arrays/output_bias.npy", b"x")])
    assert "duplicate entry 'arrays/output_bias.npy'" in refused(duplicate)
    del payloads["arrays/output_bias.npy"]
    assert "missing entries ['arrays/output_bias.npy']" in refused(assemble(manifest, payloads))
    assert "no manifest.json" in refused(_zip_of([("arrays/output_bias.npy", b"x")]))


def _zip_of(entries, compression=zipfile.ZIP_STORED) -> bytes:
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=compression) as archive:
        for name, data in entries:
            archive.writestr(zipfile.ZipInfo(name, date_time=ZIP_TIME), data,
                             compress_type=compression)
    return buffer.getvalue()


def test_compressed_entries_and_deflate_bombs_are_refused_before_inflating():
    manifest, payloads = parts(tiny_bundle())
    assert "compressed" in refused(assemble(manifest, payloads, compression=zipfile.ZIP_DEFLATED))
    # 64 MiB of zeros deflate to about 64 KB (ratio ~1000:1, common practice for zip bombs), and the
    # directory then claims the entry holds 100 bytes: refused on the method, before inflating
    bomb = io.BytesIO()
    with zipfile.ZipFile(bomb, "w") as archive:
        info = zipfile.ZipInfo("manifest.json", date_time=ZIP_TIME)
        info.compress_type = zipfile.ZIP_DEFLATED
        with archive.open(info, "w") as handle:
            for _ in range(64):
                handle.write(bytes(2**20))
        for name, data in payloads.items():
            archive.writestr(zipfile.ZipInfo(name, date_time=ZIP_TIME), data)
    deflated = bomb.getvalue()
    assert len(deflated) < 2**20
    compressed = zipfile.ZipFile(io.BytesIO(deflated)).getinfo("manifest.json").compress_size
    understated = patch_central_sizes(deflated, "manifest.json", compressed, 100)
    assert "is compressed" in refused(understated)


def test_stored_entry_claiming_a_huge_size_is_refused():
    data = bundle_io.to_bytes(tiny_bundle())
    claim = 3 * 2**30  # 3 GiB, over the 2 GiB limit of one array
    message = refused(patch_central_sizes(data, "arrays/hidden_weights.npy", claim, claim))
    assert "arrays/hidden_weights.npy" in message and "more than the" in message
    manifest_claim = 4 * 2**30 - 1
    message = refused(patch_central_sizes(data, "manifest.json", manifest_claim, manifest_claim))
    assert "manifest.json" in message


def test_entry_larger_than_its_central_record_or_the_archive_is_refused():
    data = bundle_io.to_bytes(tiny_bundle())
    spans = entry_spans(data)
    start, end = spans["arrays/output_bias.npy"]
    small = (end - start) // 2  # the directory understates the entry: read stops, CRC fails
    assert "damaged" in refused(patch_central_sizes(data, "arrays/output_bias.npy", small, small))
    # a size the archive cannot hold, though under every limit (the manifest may take 16 MiB)
    message = refused(patch_central_sizes(data, "manifest.json", 10**6, 10**6))
    assert "'manifest.json' declares 1000000 bytes, which the archive" in message
    # stored entries must have equal compressed and real sizes
    message = refused(patch_central_sizes(data, "arrays/output_bias.npy", end - start, 10**6))
    assert "arrays/output_bias.npy" in message


def test_manifest_declaring_fewer_bytes_than_the_entry_is_refused():
    manifest, payloads = parts(tiny_bundle())
    data = assemble(manifest, payloads)
    manifest["arrays"]["output_bias"]["bytes"] = 100  # the .npy entry holds 136
    message = refused(assemble(manifest, payloads, rehash="id"))
    assert "136 bytes, more than the 100 declared" in message
    assert bundle_io.from_bytes(data)  # the consistent original loads


def test_archive_directory_with_thousands_of_entries_is_refused_up_front():
    entries = [(f"arrays/e{i}.npy", b"") for i in range(5000)]
    message = refused(_zip_of(entries))
    assert "declares 5000 entries" in message


def test_encrypted_flag_is_refused():
    data = bytearray(bundle_io.to_bytes(tiny_bundle()))
    position = data.find(b"PK\x01\x02")  # first central record: manifest.json
    data[position + 8] |= 0x01  # general purpose flag bit 0: encrypted (APPNOTE 4.4.4)
    assert "encrypted" in refused(bytes(data))


# -- files on disk and the CLI --------------------------------------------------------------------

def test_load_refuses_missing_files_folders_and_oversized_files(tmp_path, monkeypatch):
    with pytest.raises(BundleError, match="cannot read bundle"):
        bundle_io.load(tmp_path / "absent.ncast")
    with pytest.raises(BundleError, match="is not a regular file"):
        bundle_io.load(tmp_path)
    path = tmp_path / "big.ncast"
    path.write_bytes(bundle_io.to_bytes(tiny_bundle()))
    monkeypatch.setattr(bundle_io, "MAX_BUNDLE_BYTES", 1000)
    with pytest.raises(BundleError, match="over the bundle size limit 1000"):
        bundle_io.load(path)


@pytest.mark.parametrize("metadata, where", [
    ({"metrics": {"training": {"rmse": [float("inf")]}}}, "metadata.metrics.training.rmse[0]"),
    ({"score": float("nan")}, "metadata.score"),
    ({"seed": np.int64(3)}, "metadata.seed is a int64"),
    ({1: "one"}, "key 1"),
])
def test_save_refuses_metadata_that_json_cannot_hold(metadata, where, tmp_path):
    with pytest.raises(BundleError, match="cannot store the bundle") as info:
        bundle_io.save(Bundle(tiny_network(), metadata), tmp_path / "m.ncast")
    assert where in str(info.value)
    assert not (tmp_path / "m.ncast").exists()



def _cli_cases():
    data = bundle_io.to_bytes(tiny_bundle())
    manifest, payloads = parts(tiny_bundle())
    future = copy.deepcopy(manifest)
    future["format_version"] = 3
    wrong_type = copy.deepcopy(manifest)
    wrong_type["network"]["feature_names"] = "x0x1"
    flipped = bytearray(data)
    start, _ = entry_spans(data)["arrays/output_weights.npy"]
    flipped[start + 130] ^= 0x01
    return {
        "changed array byte": (bytes(flipped), "output_weights.npy"),
        "truncated": (data[: len(data) // 2], "not a readable bundle"),
        "future version": (assemble(future, payloads), "format version 3"),
        "dot-dot entry": (assemble(manifest, payloads, extra=[("../x", b"")]), "unsafe entry"),
        "string for list": (assemble(wrong_type, payloads), "not a list of text"),
        "huge stored entry": (patch_central_sizes(data, "arrays/hidden_weights.npy", 2**32 - 1,
                                                  2**32 - 1), "more than the"),
        "empty file": (b"", "not a readable bundle"),
    }


@pytest.mark.parametrize("case", sorted(_cli_cases()))
def test_cli_inspect_refuses_bad_bundles_with_exit_2_and_one_line(case, tmp_path, capsys):
    data, expected = _cli_cases()[case]
    path = tmp_path / "bad.ncast"
    path.write_bytes(data)
    code, _, err = run_cli(capsys, *["inspect", str(path)])
    assert code == 2
    assert err.startswith("nodecast: error: ") and expected in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
