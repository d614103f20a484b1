"""Crafted bundles: correct hashes and bundle id, hostile content (huge or non-finite values, a
domain of +-1.7e308, one class, lone surrogates, terminal escape sequences in names). Every command
that reads a bundle runs on each; the only outcomes accepted are exit 0 or exit 2 with exactly one
line on stderr, and an artifact that emit wrote must then pass verify (docs/reliability.md,
"Bundles")."""

from __future__ import annotations

import contextlib
import io
import shutil
import subprocess
import sys
import traceback

import numpy as np
import pytest

from nodecast.cli import main
from nodecast.compiler.bundle import Bundle, to_bytes
from nodecast.compiler.ir import Network

HAS_GCC = shutil.which("gcc") is not None


def network(t=1, task="regression", labels=()) -> Network:
    rng = np.random.default_rng(0)
    n, m = 2, 4
    return Network(hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
                   activation="logistic", output_weights=rng.normal(size=(m, t)),
                   output_bias=np.zeros(t), input_offset=np.zeros(n), input_scale=np.ones(n),
                   output_offset=np.zeros(t), output_scale=np.ones(t), domain_low=np.zeros(n),
                   domain_high=np.ones(n), feature_names=("x0", "x1"),
                   target_names=tuple(f"y{i}" for i in range(t)), task=task, class_labels=labels)


def forged(net: Network, **arrays) -> Network:
    """``net`` with arrays replaced behind the IR's back, as a forger writing the file would."""
    for name, value in arrays.items():
        array = np.array(value, dtype=np.float64)
        array.setflags(write=False)
        object.__setattr__(net, name, array)
    return net


def forged_text(net: Network, **texts) -> Network:
    for name, value in texts.items():
        object.__setattr__(net, name, value if isinstance(value, str) else tuple(value))
    return net


FOUR = (4, 2)
CASES = {
    # far beyond any model: refused by the loader
    "weights 1e300": lambda: forged(network(), hidden_weights=np.full(FOUR, 1e300)),
    "output weights +-1e300": lambda: forged(network(), output_weights=[[1e300], [-1e300], [1e300],
                                                                         [1.0]]),
    "domain +-1.7e308": lambda: forged(network(), domain_low=[-1.7e308] * 2,
                                       domain_high=[1.7e308] * 2),
    "subnormal input scale": lambda: forged(network(), input_scale=[5e-324] * 2),
    "input scale 1e308": lambda: forged(network(), input_scale=[1e308] * 2),
    "output scale and offset 1e308": lambda: forged(network(), output_scale=[1e308],
                                                    output_offset=[1e308]),
    "biases 1e308": lambda: forged(network(), hidden_biases=[1e308] * 4, output_bias=[1e308]),
    "input offsets +-1e308": lambda: forged(network(), input_offset=[1e308, -1e308]),
    "infinite weights": lambda: forged(network(), hidden_weights=np.full(FOUR, np.inf)),
    "NaN bias": lambda: forged(network(), output_bias=[np.nan]),
    "one class": lambda: forged_text(network(), class_labels=("only",), task="classification"),
    # just inside the loader's limits: float32 targets must refuse what float32 cannot hold
    "weights 4e99": lambda: forged(network(), hidden_weights=[[4e99, -4e99], [1, 2], [-3e99, 1],
                                                              [0.5, 0.5]]),
    "output weights 2e99": lambda: forged(network(), output_weights=[[2e99], [-2e99], [2e99],
                                                                      [-2e99]]),
    "input scale 1e-100": lambda: forged(network(), input_scale=[1e-100] * 2,
                                         domain_high=[1e-100] * 2),
    "output scale 1e98": lambda: forged(network(), output_scale=[1e98]),
    "output scale 1e-100": lambda: forged(network(), output_scale=[1e-100]),
    "domain near 1e100": lambda: forged(network(), input_offset=[1e100] * 2,
                                        domain_low=[9.9e99] * 2, domain_high=[1e100] * 2,
                                        input_scale=[5e97] * 2),
    "domain +-1e99": lambda: forged(network(), domain_low=[-1e99] * 2, domain_high=[1e99] * 2,
                                    input_scale=[1e90] * 2),
    "flat domain": lambda: forged(network(), domain_low=[0.5] * 2, domain_high=[0.5] * 2),
    # text
    "escape sequences in names": lambda: forged_text(
        network(), target_names=("\x1b[2Jy",), feature_units=("\x1b]0;pwned\x07", "%s%n"),
        target_units=("\u202e",)),
    "5000-byte class label": lambda: network(t=2, task="classification",
                                             labels=("\x1b[2J", "L" * 5000)),
}
METADATA = {
    "lone surrogate in a metrics key": {"metrics": {"\ud800": {"rmse": [1.0]}}},
    "lone surrogate in a value": {"note": "\udfff"},
}


def crafted(name: str) -> bytes:
    """The bundle's bytes, with hashes and id computed over the hostile content."""
    if name in METADATA:
        from nodecast.compiler import bundle as bundle_io

        real = bundle_io.json_problem
        bundle_io.json_problem = lambda *a: None  # the writer's own check would refuse it
        try:
            return to_bytes(Bundle(network(), METADATA[name]))
        finally:
            bundle_io.json_problem = real
    return to_bytes(Bundle(CASES[name](), {"seed": 0}))


def run(args) -> tuple[object, str]:
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        try:
            main([str(a) for a in args])
            code = 0
        except SystemExit as exc:
            code = exc.code
        except BaseException:  # noqa: B036 - anything escaping main is the failure we look for
            code = "traceback"
            err.write(traceback.format_exc())
    return code, err.getvalue()


def acceptable(code, err: str) -> bool:
    return code == 0 or (code == 2 and err.count("\n") == 1 and err.startswith("nodecast: error: ")
                         and "Traceback" not in err)


EMITS = [("onnx", "float32"), ("onnx", "float64"), ("python", "float64")]
if HAS_GCC:
    EMITS += [("c", "float32"), ("c", "float64"), ("c", "q15"), ("c", "q31")]


def _commands(path, tmp):
    commands = [["inspect", path], ["inspect", path, "--json"]]
    commands += [["inspect", path, "--precision", p] for p in ("float64", "float32", "q31", "q15")]
    commands += [["predict", path, tmp / "rows.csv"], ["score", path, tmp / "rows.csv"],
                 ["score", path, tmp / "rows.csv", "--baseline", path]]
    return commands


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(CASES) + sorted(METADATA))
def test_every_command_on_a_crafted_bundle_is_exit_0_or_one_line(name, tmp_path):
    path = tmp_path / "crafted.ncast"
    path.write_bytes(crafted(name))
    (tmp_path / "rows.csv").write_text("x0,x1,y0\n0.1,0.2,0.3\n0.5,0.5,0.5\n0.9,0.1,0.7\n")
    problems = []
    for args in _commands(path, tmp_path):
        code, err = run(args)
        if not acceptable(code, err):
            problems.append((args[0], args[2:], code, err[-400:]))
    for kind, precision in EMITS:
        suffix = {"onnx": ".onnx", "python": ".py"}.get(kind, "")
        out = tmp_path / f"{kind}-{precision}{suffix}"
        policy = ["--out-of-domain", "clamp"] if precision.startswith("q") else []
        code, err = run(["emit", path, "--to", kind, "--precision", precision, "-o", out, *policy])
        if not acceptable(code, err):
            problems.append(("emit", kind, precision, code, err[-400:]))
        if code == 0:  # what emit accepts, it must have compiled faithfully
            code, err = run(["verify", path, out, "--probes", "32"])
            if code != 0:
                problems.append(("verify", kind, precision, code, err[-400:]))
    assert problems == []


def test_the_loader_refuses_absurd_values_with_one_line(tmp_path):
    """Fast subset: one command per kind of hostile value."""
    for name in ("weights 1e300", "domain +-1.7e308", "subnormal input scale", "one class",
                 "lone surrogate in a metrics key", "NaN bias"):
        path = tmp_path / "crafted.ncast"
        path.write_bytes(crafted(name))
        for args in (["inspect", path, "--precision", "q15"], ["emit", path, "--to", "c",
                     "--precision", "float64", "-o", tmp_path / "c"]):
            code, err = run(args)
            assert code == 2 and acceptable(code, err), (name, args, err)
            assert "crafted.ncast" in err and not (tmp_path / "c").exists()


def test_float32_targets_refuse_what_float32_cannot_hold(tmp_path):
    path = tmp_path / "crafted.ncast"
    path.write_bytes(crafted("output weights 2e99"))
    for kind in ("onnx", "c"):
        code, err = run(["emit", path, "--to", kind, "-o", tmp_path / f"out-{kind}"])
        assert acceptable(code, err) and code == 2 and "emit --precision float64" in err
        assert "np.float" not in err and "Warning" not in err
    code, err = run(["emit", path, "--to", "onnx", "--precision", "float64", "-o",
                     tmp_path / "ok.onnx"])
    assert code == 0


@pytest.mark.skipif(not HAS_GCC, reason="needs gcc")
def test_long_class_label_is_refused_for_c_only(tmp_path):
    path = tmp_path / "crafted.ncast"
    path.write_bytes(crafted("5000-byte class label"))
    code, err = run(["emit", path, "--to", "c", "-o", tmp_path / "c"])
    assert acceptable(code, err) and code == 2 and "at most 4095" in err
    assert run(["emit", path, "--to", "python", "-o", tmp_path / "p.py"])[0] == 0


def test_printed_text_never_carries_terminal_controls(tmp_path):
    """Through a real pipe (not a terminal): an OSC sequence in a unit retitled the terminal."""
    path = tmp_path / "crafted.ncast"
    path.write_bytes(crafted("escape sequences in names"))
    done = subprocess.run([sys.executable, "-m", "nodecast.cli", "inspect", str(path)],
                          capture_output=True, timeout=120, check=True)
    assert b"\x1b" not in done.stdout and b"\x07" not in done.stdout
    # shown, escaped (by the terminal filter or by inspect's own quoting), never raw
    assert b"]0;pwned" in done.stdout and "\u202e".encode() not in done.stdout
    emitted = tmp_path / "p.py"
    assert run(["emit", path, "--to", "python", "-o", emitted])[0] == 0
    net = network()
    forged_text(net, feature_names=("\x1b]0;t\x07", "load%"))
    (tmp_path / "n.ncast").write_bytes(to_bytes(Bundle(net, {})))
    assert run(["emit", tmp_path / "n.ncast", "--to", "python", "-o", tmp_path / "n.py"])[0] == 0
    helped = subprocess.run([sys.executable, str(tmp_path / "n.py"), "--help"],
                            capture_output=True, timeout=60, check=True).stdout
    assert b"\x1b" not in helped and b"\x07" not in helped
    assert b"load%." in helped and b"load%%" not in helped


def test_ctrl_c_exits_130(monkeypatch, tmp_path, capsys):
    from nodecast.compiler import inspection

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(inspection, "describe_bundle", interrupted)
    (tmp_path / "m.ncast").write_bytes(to_bytes(Bundle(network(), {})))
    with pytest.raises(SystemExit) as info:
        main(["inspect", str(tmp_path / "m.ncast")])
    assert info.value.code == 130
    assert capsys.readouterr().err.strip() == "nodecast: interrupted"


def test_error_messages_show_numbers_not_numpy_reprs(monkeypatch, tmp_path, capsys):
    from nodecast.compiler import inspection
    from nodecast.compiler.errors import NodecastError

    def refuse(*args, **kwargs):
        raise NodecastError(f"value {np.float64(0.0099)!r} and {np.int64(3)!r} out of range")

    monkeypatch.setattr(inspection, "describe_bundle", refuse)
    (tmp_path / "m.ncast").write_bytes(to_bytes(Bundle(network(), {})))
    with pytest.raises(SystemExit) as info:
        main(["inspect", str(tmp_path / "m.ncast")])
    assert info.value.code == 2
    assert capsys.readouterr().err == "nodecast: error: value 0.0099 and 3 out of range\n"
