"""The generated predictor's command line, run as users run it: ``python3 -I -S predictor.py``.
CSV conventions (SPEC): columns by header name in any order, extra ones ignored, a BOM accepted,
bad rows and rejected rows exit 2 with one line naming the row and column."""

from __future__ import annotations

import csv
import io
import subprocess
import sys

import numpy as np
import pytest

from nodecast.compiler import emit, reference, save
from nodecast.compiler.verify.runners.python import rows_as_csv


@pytest.fixture(scope="module")
def files(friedman_bundle, classifier_bundle, tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    paths = {}
    for name, bundle, policy in (("pass", friedman_bundle, "pass"),
                                 ("reject", friedman_bundle, "reject"),
                                 ("iris", classifier_bundle, "pass")):
        paths[name] = folder / f"{name}.py"
        emit(bundle, "python", paths[name], out_of_domain=policy)
    return paths


def run(path, *arguments, stdin: bytes = b""):
    return subprocess.run([sys.executable, "-I", "-S", str(path), *arguments], input=stdin,
                          capture_output=True)


def rows(net, count=20, seed=0):
    rng = np.random.default_rng(seed)
    return net.domain_low + rng.random((count, net.n_features)) * (net.domain_high - net.domain_low)


def parse(output: bytes):
    records = list(csv.reader(io.StringIO(output.decode("utf-8"), newline="")))
    return records[0], records[1:]


def assert_one_line_error(done, *fragments):
    message = done.stderr.decode("utf-8")
    assert done.returncode == 2 and done.stdout == b""
    assert len(message.strip().splitlines()) == 1 and "Traceback" not in message, message
    for fragment in fragments:
        assert fragment in message, message


def test_output_numbers_round_trip_to_the_api_values(friedman_bundle, files):
    import importlib.util

    spec = importlib.util.spec_from_file_location("cli_pass_predictor", files["pass"])
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    X = rows(friedman_bundle.network, 50, seed=1)
    _, body = parse(run(files["pass"], stdin=rows_as_csv(module.FEATURE_NAMES, X)).stdout)
    # repr writes the shortest text that reads back as the same binary64 (Python docs)
    assert [[float(cell) for cell in record] for record in body] == module.predict_many(X.tolist())


def test_columns_by_name_in_any_order_with_extras_bom_and_crlf(friedman_bundle, files):
    net, X = friedman_bundle.network, rows(friedman_bundle.network)
    plain = run(files["pass"], stdin=rows_as_csv(net.feature_names, X))
    order = [3, 0, 4, 2, 1]
    shuffled = io.StringIO()
    writer = csv.writer(shuffled, lineterminator="\r\n")
    writer.writerow(["note"] + [net.feature_names[i] for i in order] + ["y"])
    writer.writerows([["a, b"] + [repr(row[i]) for i in order] + ["0"] for row in X.tolist()])
    messy = run(files["pass"], stdin=b"\xef\xbb\xbf" + shuffled.getvalue().encode())
    assert plain.returncode == messy.returncode == 0
    assert plain.stdout == messy.stdout
    header, body = parse(plain.stdout)
    assert header == ["y"] and len(body) == len(X)


def test_file_argument_stdin_and_dash_agree(friedman_bundle, files, tmp_path):
    data = rows_as_csv(friedman_bundle.network.feature_names, rows(friedman_bundle.network))
    (tmp_path / "in.csv").write_bytes(data)
    from_file = run(files["pass"], str(tmp_path / "in.csv"))
    assert from_file.returncode == 0
    assert from_file.stdout == run(files["pass"], stdin=data).stdout == run(
        files["pass"], "-", stdin=data).stdout


def test_values_equal_the_reference_and_nodecast_predict(friedman_bundle, files, tmp_path):
    from nodecast.cli import main

    net, X = friedman_bundle.network, rows(friedman_bundle.network, 200, seed=3)
    (tmp_path / "in.csv").write_bytes(rows_as_csv(net.feature_names, X))
    header, body = parse(run(files["pass"], str(tmp_path / "in.csv")).stdout)
    got = np.array([[float(cell) for cell in record] for record in body])
    span = np.ptp(reference.predict(net, rows(net, 2000, seed=4)))
    assert np.max(np.abs(got - reference.predict(net, X))) <= 1e-10 * span  # SPEC "Numerics"
    save(friedman_bundle, tmp_path / "m.ncast")
    main(["predict", str(tmp_path / "m.ncast"), str(tmp_path / "in.csv"), "-o",
          str(tmp_path / "ref.csv")])
    ref_header, ref_body = parse((tmp_path / "ref.csv").read_bytes())
    ref = np.array([[float(cell) for cell in record] for record in ref_body])
    assert ref_header == header and np.max(np.abs(got - ref)) <= 1e-10 * span


def test_missing_columns_are_all_named(friedman_bundle, files):
    done = run(files["pass"], stdin=b"x0,x2,x4\n1,2,3\n")
    assert_one_line_error(done, "missing column(s) 'x1', 'x3'")


@pytest.mark.parametrize(("cell", "shown"), [("abc", "'abc' is not a number"),
                                             ("", "an empty cell"), ("  ", "an empty cell"),
                                             ("1,5", "has 6 fields")])
def test_bad_cells_name_row_and_column(friedman_bundle, files, cell, shown):
    text = "x0,x1,x2,x3,x4\n0.5,0.5,0.5,0.5,0.5\n0.5,\"CELL\",0.5,0.5,0.5\n"
    text = text.replace('"CELL"', cell if cell != "1,5" else "1,5")
    done = run(files["pass"], stdin=text.encode())
    assert_one_line_error(done, "line 3 (data row 2)", shown)
    if cell != "1,5":
        assert "column 'x1'" in done.stderr.decode()


@pytest.mark.parametrize(("data", "shown"), [(b"", "empty input"), (b"\xff\xfe,\n", "not UTF-8"),
                                             (b"x0,x0,x1\n", "duplicated column"),
                                             (b"x0,,x1\n", "header column 2 has no name"),
                                             (b'x0,x1\n"1,2\n', "malformed CSV")])
def test_unusable_input_is_one_line(files, data, shown):
    assert_one_line_error(run(files["pass"], stdin=data), shown)


def test_missing_file_and_bad_option(files, tmp_path):
    assert_one_line_error(run(files["pass"], str(tmp_path / "none.csv")), "cannot read")
    assert_one_line_error(run(files["pass"], "--frobnicate"), "unrecognized arguments")


def test_help_lists_the_features_and_exits_0(files):
    done = run(files["pass"], "--help")
    assert done.returncode == 0
    assert b"x0, x1, x2, x3, x4" in done.stdout and b"--keep-going" in done.stdout


def test_rejected_row_stops_or_becomes_nan(friedman_bundle, files):
    net = friedman_bundle.network
    X = rows(net, 4)
    X[2, 3] = net.domain_high[3] + 1.0
    data = rows_as_csv(net.feature_names, X)
    assert_one_line_error(run(files["reject"], stdin=data), "line 4 (data row 3), column 'x3'",
                          "outside the declared domain")
    done = run(files["reject"], "--keep-going", stdin=data)
    assert done.returncode == 0 and b"1 row(s) outside" in done.stderr
    _, body = parse(done.stdout)
    assert body[2] == ["nan"] and all(record != ["nan"] for i, record in enumerate(body) if i != 2)


def test_nan_cells_pass_through_as_nan(files):
    done = run(files["pass"], stdin=b"x0,x1,x2,x3,x4\nnan,0.5,0.5,0.5,0.5\n")
    assert done.returncode == 0 and parse(done.stdout)[1] == [["nan"]]


def test_classifier_writes_labels_and_scores(classifier_bundle, files):
    net = classifier_bundle.network
    X = rows(net, 150, seed=5)
    data = rows_as_csv(net.feature_names, X)
    header, body = parse(run(files["iris"], stdin=data).stdout)
    assert header == ["label"]
    assert [record[0] for record in body] == list(reference.predict_labels(net, X))
    header, body = parse(run(files["iris"], "--scores", stdin=data).stdout)
    assert header == ["label"] + [f"score:{name}" for name in net.target_names]
    scores = np.array([[float(cell) for cell in record[1:]] for record in body])
    assert np.max(np.abs(scores - reference.predict(net, X))) <= 1e-10  # scores span about 1


@pytest.mark.slow
def test_a_closed_pipe_ends_quietly(friedman_bundle, files):
    data = rows_as_csv(friedman_bundle.network.feature_names, rows(friedman_bundle.network, 20000))
    pipe = subprocess.PIPE
    process = subprocess.Popen([sys.executable, "-I", "-S", str(files["pass"])], stdin=pipe,
                               stdout=pipe, stderr=pipe)
    process.stdin.write(data)
    process.stdin.close()
    assert process.stdout.readline() == b"y\n"
    process.stdout.close()
    assert process.wait(timeout=120) == 1 and b"Traceback" not in process.stderr.read()
    process.stderr.close()


@pytest.mark.parametrize("cell", ["1.5", " -2e-3 ", "+.5", "7.", "nan", "-inf", "Infinity", "1e400",
                                  "1_000", "0x10", "\u0663", "1,5", "--1", "1e", "NaN", "inf5"])
def test_cells_follow_the_same_number_rules_as_nodecast_predict(files, cell):
    from nodecast.compiler import NodecastError
    from nodecast.compiler.csvio import read_table

    text = "x0,x1,x2,x3,x4\n" + ",".join(['"' + cell + '"'] + ["0.5"] * 4) + "\n"
    try:  # the product's own CSV reader, as ``nodecast predict`` calls it
        expected = read_table(None, text).numbers(["x0"], allow_nonfinite=True)[0, 0]
    except NodecastError:
        expected = None
    done = run(files["pass"], stdin=text.encode())
    assert (done.returncode == 0) == (expected is not None), done.stderr
    if expected is not None and np.isnan(expected):
        assert parse(done.stdout)[1] == [["nan"]]
