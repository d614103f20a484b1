"""Data files: every oddity real CSV files carry is either accepted as documented or refused with
one line naming the line of the file and the column (docs/reliability.md, "Data files")."""

from __future__ import annotations

import csv
import io
import math
import re
import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nodecast.compiler.csvio import read_table, write_table
from nodecast.compiler.errors import NodecastError
from tests.helpers import run_cli


def table(text: str):
    return read_table(None, text=text)


def refused(text: str, columns=("a", "b"), **options) -> str:
    with pytest.raises(NodecastError) as info:
        table(text).numbers(list(columns), **options)
    message = str(info.value)
    assert "\n" not in message
    return message



# -- accepted, as documented ----------------------------------------------------------------------

def test_bom_and_every_line_ending_give_the_same_table(tmp_path):
    body = ["a,b", "1,2", "3.5,-4e-3"]
    expected = np.array([[1, 2], [3.5, -4e-3]])
    for ending in ("\n", "\r\n", "\r"):
        for bom in (b"", b"\xef\xbb\xbf"):  # the UTF-8 byte order mark (Unicode standard, ch. 23)
            path = tmp_path / "data.csv"
            path.write_bytes(bom + ending.join(body).encode() + ending.encode())
            read = read_table(path)
            assert read.header == ("a", "b")
            assert np.array_equal(read.numbers(["a", "b"]), expected)


def test_rfc4180_quoting_is_understood():
    # RFC 4180 section 2: fields may be quoted; a quote inside a quoted field is doubled
    read = table('"a,1","b ""q""",label\n"1.5", 2 ,"two\nlines, ""quoted"""\n')
    assert read.header == ("a,1", 'b "q"', "label")
    assert read.numbers(["a,1", 'b "q"']).tolist() == [[1.5, 2.0]]
    assert read.texts("label") == ['two\nlines, "quoted"']


def test_blank_lines_and_comma_only_lines_are_skipped_and_lines_still_counted():
    text = "a,b\n\n1,2\n   \n,,\n , \n3,x\n"
    assert "line 7, column 'b': 'x' is not a number" in refused(text)
    assert table("a,b\n\n1,2\n\n").numbers(["a", "b"]).tolist() == [[1.0, 2.0]]


def test_line_numbers_count_physical_lines_of_multi_line_records():
    text = 'a,b,note\n1,2,"first\nsecond\nthird"\n4,,x\n'
    assert "line 5, column 'b': empty cell" in refused(text)


def test_extra_columns_are_ignored_and_columns_are_found_by_name():
    read = table("b,ignored,a\n2,hello,1\n")
    assert read.numbers(["a", "b"]).tolist() == [[1.0, 2.0]]


def test_numbers_at_the_edges_of_float64():
    # IEEE 754 binary64: largest finite 1.7976931348623157e308, smallest subnormal 2^-1074
    read = table("a,b\n1.7976931348623157e308,4.9e-324\n-0.0,1e-400\n")
    values = read.numbers(["a", "b"])
    assert values[0, 0] == np.finfo(np.float64).max
    assert values[0, 1] == 2.0**-1074
    assert math.copysign(1.0, values[1, 0]) == -1.0  # the sign of zero survives
    assert values[1, 1] == 0.0  # underflow rounds to zero (documented, not refused)


def test_nan_and_inf_are_refused_unless_allowed():
    for cell in ("nan", "NaN", "-nan", "inf", "-Infinity", "+inf"):
        assert "is not a finite number" in refused(f"a,b\n1,{cell}\n")
        value = table(f"a,b\n1,{cell}\n").numbers(["a", "b"], allow_nonfinite=True)[0, 1]
        assert math.isnan(value) or math.isinf(value)


# -- refused, with line and column ----------------------------------------------------------------

@pytest.mark.parametrize("cell", ["abc", "1,5", "1_000", "0x10", "\u0661\u0662", "1e", "--1",
                                  "1.2.3", "1e5e5", "T", "12%", "\x00", '2"x"', "\u00bd"])
def test_cells_that_are_not_plain_decimal_numbers_are_refused(cell):
    quoted = '"' + cell.replace('"', '""') + '"'
    message = refused(f"a,b\n1,{quoted}\n")
    assert message.startswith("<stdin>: line 2, column 'b': ") and "is not a number" in message


@pytest.mark.parametrize("cell", ["1e400", "-1e400", "2e308", "1" * 400])
def test_numbers_beyond_float64_are_refused_not_turned_into_inf(cell):
    assert "beyond the range of float64" in refused(f"a,b\n{cell},1\n")


def test_missing_values_wrong_counts_and_bad_quotes_are_refused():
    assert "line 3, column 'a': empty cell (missing value)" in refused("a,b\n1,2\n ,3\n")
    assert "line 3 has 3 fields, the header has 2" in refused("a,b\n1,2\n1,2,3\n")
    assert "line 2 has 1 fields, the header has 2" in refused("a,b\n1\n")
    assert "line 2: malformed CSV" in refused('a,b\n1,"2"x\n')  # text after a closing quote
    assert "malformed CSV" in refused('a,b\n1,"2\n')  # a quote that never closes


def test_headers_must_be_named_and_distinct():
    assert "duplicated column name 'a' (columns 1, 3)" in refused("a,b,a\n1,2,3\n")
    assert "duplicated column name 'a' (columns 1, 2)" in refused("a, a \n1,2\n")
    assert "header column 3 has no name" in refused("a,b,\n1,2,3\n")
    assert "missing column(s) 'c'" in refused("a,b\n1,2\n", columns=("a", "c"))
    assert "empty file" in refused("\n\n")


def test_text_that_is_not_utf8_and_oversized_cells_are_refused(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("a,b\n1,caf\u00e9\n".encode("latin-1"))
    with pytest.raises(NodecastError, match=r"not UTF-8 text \(invalid continuation byte at byte"):
        read_table(path)
    path.write_bytes("a,b\n1,2\n".encode("utf-16"))
    with pytest.raises(NodecastError, match="not UTF-8 text"):
        read_table(path)
    huge = "a,b\n1," + "9" * 200_000 + "\n"  # over the csv module's default field limit (131072)
    assert "line 2: malformed CSV" in refused(huge)


def test_labels_are_stripped_and_empty_labels_refused():
    read = table("a,label\n1, yes \n2,no\n")
    assert read.texts("label") == ["yes", "no"]
    with pytest.raises(NodecastError, match="line 3, column 'label': empty cell"):
        table("a,label\n1,yes\n2,  \n").texts("label")


# -- writing --------------------------------------------------------------------------------------

@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), min_size=1, max_size=5))
@pytest.mark.slow
def test_written_numbers_read_back_bit_exactly(values):
    # Python's repr is the shortest string that round-trips (common practice since Python 3.1)
    text = write_table(["v"], [[value] for value in values])
    back = table(text).numbers(["v"])[:, 0]
    assert [struct.pack("<d", v) for v in back] == [struct.pack("<d", v) for v in values]


def test_hostile_labels_are_quoted_in_output():
    labels = ['a,b', 'say "hi"', "two\nlines", "=1+2", " padded "]
    text = write_table(["label", "score"], [[label, 0.5] for label in labels])
    rows = list(csv.reader(io.StringIO(text, newline="")))
    assert [row[0] for row in rows[1:]] == labels and rows[0] == ["label", "score"]


# -- through the command line ---------------------------------------------------------------------

def _readings(rows=60, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.random((rows, 2))
    return X, np.sin(3 * X[:, 0]) + X[:, 1]


def _write(path, header, rows, ending="\n", bom=False):
    text = ending.join([",".join(header)] + [",".join(map(str, row)) for row in rows]) + ending
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + text.encode())
    return path


def test_cli_trains_on_bom_crlf_data_and_predicts_nan_rows(tmp_path, capsys):
    X, y = _readings()
    rows = np.column_stack([X, y]).tolist()
    data = _write(tmp_path / "d.csv", ["u", "v", "y"], rows, ending="\r\n", bom=True)
    model = tmp_path / "m.ncast"
    code, _, err = run_cli(capsys, *["train", data, "--target", "y", "--nodes", "10", "-o", model])
    assert code == 0, err
    rows = _write(tmp_path / "p.csv", ["v", "u"], [[0.5, 0.5], ["nan", 0.2], [0.1, "inf"]])
    code, out, err = run_cli(capsys, *["predict", model, rows])
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0] == "y" and len(lines) == 4
    assert lines[2] == "nan" and math.isfinite(float(lines[1]))


@pytest.mark.parametrize("cell, expected", [
    ("nan", "line 4, column 'u': 'nan' is not a finite number"),
    ("1e400", "line 4, column 'u': '1e400' is beyond the range of float64"),
    ("", "line 4, column 'u': empty cell (missing value)"),
    ("n/a", "line 4, column 'u': 'n/a' is not a number"),
])
def test_cli_train_refuses_bad_cells_with_line_and_column(cell, expected, tmp_path, capsys):
    X, y = _readings()
    rows = np.column_stack([X, y]).tolist()
    rows[2][0] = cell  # data row 3 is line 4 of the file
    data = _write(tmp_path / "d.csv", ["u", "v", "y"], rows)
    code, _, err = run_cli(capsys, *["train", data, "--target", "y", "--nodes", "10", "-o",
                            tmp_path / "m.ncast"])
    assert code == 2 and expected in err and "Traceback" not in err
    assert not (tmp_path / "m.ncast").exists()


def test_cli_refuses_duplicate_feature_names_and_duplicated_headers(tmp_path, capsys):
    X, y = _readings()
    data = _write(tmp_path / "d.csv", ["u", "v", "y"], np.column_stack([X, y]).tolist())
    code, _, err = run_cli(capsys, *["train", data, "--target", "y", "--features", "u,u", "--nodes", "5",
                            "-o", tmp_path / "m.ncast"])
    assert code == 2 and "feature_names repeats 'u'" in err
    dup = _write(tmp_path / "dup.csv", ["u", "u", "y"], np.column_stack([X, y]).tolist())
    code, _, err = run_cli(capsys, *["train", dup, "--target", "y", "-o", tmp_path / "m.ncast"])
    assert code == 2 and "duplicated column name 'u' (columns 1, 2)" in err


def test_cli_classifier_round_trips_hostile_label_text(tmp_path, capsys):
    X, _ = _readings(rows=90)
    names = np.array(['"quoted"', "comma,inside", "line\nbreak"], dtype=object)
    labels = names[(X[:, 0] * 3).astype(int).clip(0, 2)]
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows([["u", "v", "kind"]] + [
        [repr(float(a)), repr(float(b)), label] for (a, b), label in zip(X, labels, strict=True)])
    data = tmp_path / "d.csv"
    data.write_text(buffer.getvalue(), encoding="utf-8")
    model = tmp_path / "m.ncast"
    code, _, err = run_cli(capsys, *["train", data, "--target", "kind", "--task", "classification",
                            "--nodes", "30", "-o", model])
    assert code == 0, err
    code, out, err = run_cli(capsys, *["predict", model, data, "--scores"])
    assert code == 0, err
    rows = list(csv.reader(io.StringIO(out, newline="")))
    assert rows[0][0] == "label" and {row[0] for row in rows[1:]} <= set(names)
    assert np.mean([row[0] == label for row, label in zip(rows[1:], labels, strict=True)]) > 0.8


# -- yes/no cells ---------------------------------------------------------------------------------

def test_yes_no_and_true_false_cells_read_as_one_and_zero():
    read = table("a,b\nyes,TRUE\nNo,false\n Yes , False \n").numbers(["a", "b"])
    assert read.tolist() == [[1.0, 1.0], [0.0, 0.0], [1.0, 0.0]]


@pytest.mark.parametrize("cell", ["y", "on", "nope", "truth", "ＹＥＳ", "yes!"])
def test_other_text_is_still_refused(cell):
    with pytest.raises(NodecastError, match=f"line 2, column 'a': {re.escape(repr(cell))} is not a number"):
        table(f"a\n{cell}\n").numbers(["a"])


def test_cli_trains_on_a_yes_no_feature(tmp_path, capsys):
    X, y = _readings()
    rows = [[u, "yes" if v > 0.5 else "no", t] for (u, v), t in zip(X, y, strict=True)]
    data = _write(tmp_path / "d.csv", ["u", "fan_on", "y"], rows)
    code, _, err = run_cli(capsys, *["train", data, "--target", "y", "--nodes", "10", "-o",
                            tmp_path / "m.ncast"])
    assert code == 0, err
