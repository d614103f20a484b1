"""The C back-end's output as text: options, identifiers, escaping, provenance (no compiler)."""

from __future__ import annotations

import re

import pytest

from nodecast.compiler.backends import render
from nodecast.compiler.backends.c_format import c_comment, c_string, check_prefix
from nodecast.compiler.errors import NodecastError

PRECISIONS = ("float64", "float32", "q31", "q15")


def _c(bundle, **options):
    options.setdefault("out_of_domain", "clamp" if options.get("precision") in ("q15", "q31")
                       else "pass")
    return render(bundle, "c", **options)


@pytest.mark.parametrize("prefix", ["Model", "1model", "my-model", "", "fan.c", "int", "class",
                                    "math", "stdint", "a" * 33, "caf\u00e9", "x y",
                                    # reserved identifiers and clashes with nodecast's own files
                                    "_", "_x", "x_", "a__b", "startup", "harness", "main", "lc"])
def test_bad_prefixes_are_refused(friedman_bundle, prefix):
    with pytest.raises(NodecastError, match="prefix"):
        _c(friedman_bundle, prefix=prefix)


@pytest.mark.parametrize("prefix", ["fan", "x_2", "m2", "heat_sink_01"])
def test_good_prefixes_name_files_and_macros(friedman_bundle, prefix):
    artifact = _c(friedman_bundle, prefix=prefix)
    assert sorted(artifact.files) == [f"{prefix}.c", f"{prefix}.h"]
    header = artifact.files[f"{prefix}.h"].decode("ascii")
    assert f"#define {prefix.upper()}_N_INPUTS 5 " in header
    assert f"#define {prefix.upper()}_N_OUTPUTS 1 " in header
    assert f"{prefix}_status {prefix}_predict(const float *x, float *y);" in header


@pytest.mark.parametrize("options, message", [
    ({"precision": "q7"}, "precision"),
    ({"activation_impl": "cordic"}, "activation-impl"),
    ({"precision": "q15", "activation_impl": "libm", "out_of_domain": "clamp"}, "table"),
    ({"precision": "q31", "out_of_domain": "pass"}, "clamp, reject at q31"),
    ({"activation_impl": "libm", "table_size": 64}, "table-size"),
    ({"activation_impl": "table", "table_size": 8}, "table-size"),
    ({"precision": "q15", "table_size": 10**6, "out_of_domain": "reject"}, "--table-size an integer"),
    ({"out_of_domain": "wrap"}, "out-of-domain"),
])
def test_bad_options_are_one_line_errors(friedman_bundle, options, message):
    with pytest.raises(NodecastError, match=message) as caught:
        render(friedman_bundle, "c", **options)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize("precision", PRECISIONS)
@pytest.mark.slow
def test_same_bundle_and_options_give_the_same_bytes(friedman_bundle, precision):
    first = _c(friedman_bundle, precision=precision)
    assert first.files == _c(friedman_bundle, precision=precision).files


@pytest.mark.parametrize("precision", PRECISIONS)
def test_banner_holds_provenance_safety_and_licence(friedman_bundle, precision):
    artifact = _c(friedman_bundle, precision=precision)
    header = artifact.files["model.h"].decode("ascii")
    source = artifact.files["model.c"].decode("ascii")
    bundle_id = friedman_bundle.bundle_id
    for text in (header, source):
        assert bundle_id in text
        assert "yours to license" in text
    assert f'#define MODEL_BUNDLE_ID "{bundle_id}"' in header
    assert f'#define MODEL_PRECISION "{precision}"' in header
    assert "nodecast 0." in header and '#define MODEL_TOOL_VERSION "' in header
    assert "not a safety function" in header and "functional-safety standards" in header
    assert 'x[0] "x0" ["1"], domain' in header
    estimate = artifact.summary["estimate"]["per_output"][0]
    assert f"{estimate:.3g}" in header
    assert '#ifdef __cplusplus\nextern "C" {\n#endif' in header
    assert header.count("#ifndef NODECAST_MODEL_H") == 1 and header.rstrip().endswith("*/")
    assert "@brief" in header and "@param[in]" in header and "@return" in header


@pytest.mark.parametrize("precision", PRECISIONS)
def test_source_has_no_allocation_and_no_mutable_globals(friedman_bundle, precision):
    source = _c(friedman_bundle, precision=precision).files["model.c"].decode("ascii")
    assert not re.search(r"\b(malloc|calloc|realloc|free|alloca)\s*\(", source)
    file_scope = [line for line in source.splitlines()
                  if re.match(r"(static |const |extern |int |float |double |int\d+_t )", line)
                  and "(" not in line.split("=")[0]]
    assert file_scope, "expected file-scope tables"
    assert all(" const " in f" {line} " for line in file_scope), file_scope


@pytest.mark.parametrize("scales", ["node", "layer"])
def test_fixed_point_header_documents_formats_and_conversions(friedman_bundle, scales):
    artifact = _c(friedman_bundle, precision="q15", out_of_domain="reject", scales=scales)
    header = artifact.files["model.h"].decode("ascii")
    assert "model_status model_predict(const int16_t *x, int16_t *y);" in header
    for macro in ("MODEL_Q_FROM_REAL", "MODEL_INPUT_FROM_REAL", "MODEL_OUTPUT_TO_REAL",
                  "MODEL_INPUT_SCALE_4", "MODEL_OUTPUT_FRAC_BITS_0"):
        assert f"#define {macro}" in header
    assert "int64 accumulator" in header and "saturated" in header
    if scales == "layer":
        assert re.search(r"Hidden layer: weights in Q\d+ times inputs in Q14", header)
    else:
        assert re.search(r"Hidden layer: node j's weights in Q\(\d+ \+ hidden_shift\[j\]\) "
                         r"\(Q\d+ \.\. Q\d+\) times", header)
        assert "Output layer: node j's output weights (row j) in Q(" in header
    assert f'#define MODEL_SCALES "{scales}"' in header
    assert "MODEL_ERROR_OUT_OF_DOMAIN (then y is untouched)" in header


def test_libm_free_implementations_do_not_include_math(friedman_bundle):
    for impl in ("rational", "table"):
        source = _c(friedman_bundle, activation_impl=impl).files["model.c"].decode("ascii")
        # math.h for isnan only (a macro, no libm call; -ffast-math would fold it: documented)
        assert "tanh" + "f(" not in source and "isnan(x[i])" in source and "x[i] != x[i]" not in source
    source = _c(friedman_bundle, activation_impl="libm").files["model.c"].decode("ascii")
    assert "#include <math.h>" in source and "tanhf(" in source


def test_summary_holds_precision_estimate_and_sizes(friedman_bundle):
    summary = _c(friedman_bundle, precision="q15", out_of_domain="clamp").summary
    assert summary["precision"] == "q15"
    assert summary["estimate"]["precision"] == "q15" and summary["estimate"]["max_abs_error"] > 0
    assert summary["activation_impl"] == "table" and 0 < summary["activation_error"] < 1e-3
    net = friedman_bundle.network
    assert summary["weight_bytes"] > 2 * net.n_nodes * (net.n_features + 1)
    artifact = _c(friedman_bundle, precision="q15", out_of_domain="clamp")
    groups = int(artifact.files["model.h"].decode().split("#define MODEL_N_GROUPS ")[1].split()[0])
    padded = -(-2 * net.n_features // 8) * 8  # int16 inputs before int64 accumulators
    assert summary["scratch_bytes"] == padded + 8 * net.n_outputs * groups
    layer = _c(friedman_bundle, precision="q15", out_of_domain="clamp", scales="layer").summary
    assert layer["scratch_bytes"] == padded + 8 * net.n_outputs
    assert "footprint" not in summary


HOSTILE = 'a"b\\c */ int injected = 1; /* // \n ??= ??/ \u00e9\u2103 \U0001f600 \t?'


def test_string_literals_escape_everything_but_plain_ascii():
    literal = c_string(HOSTILE)
    body = literal[1:-1]
    assert literal.startswith('"') and literal.endswith('"')
    assert re.fullmatch(r'([ -~]|\\.)*', body)  # printable ASCII only
    assert not re.search(r'(?<!\\)"', body)  # no quote that would end the literal
    assert "??" not in body  # no trigraph (ISO C99 5.2.1.1)
    assert "\\303\\251" in body  # U+00E9 as its UTF-8 bytes, octal escapes


def test_comment_text_can_neither_close_nor_open_a_comment():
    text = c_comment(HOSTILE)
    assert "*/" not in text and "/*" not in text and "\n" not in text and "??" not in text
    assert text.isascii()


def test_check_prefix_returns_a_valid_prefix():
    assert check_prefix("fan_2") == "fan_2"
