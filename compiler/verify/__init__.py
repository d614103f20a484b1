"""Verification: run an artifact in its real runtime on probes of the declared domain and compare it
with the float64 reference, within a stated tolerance.

Report schema (``Report.as_dict()``; also what ``verify --report`` writes):

``passed`` (bool)
    Every family of every runtime engine passed.
``bundle_id`` (str), ``task`` ("regression" or "classification")
``artifact`` (object)
    ``path``, ``kind``, ``precision``, ``out_of_domain`` (policy), ``engines`` (the runtimes it ran
    in, e.g. onnxruntime and the ONNX reference evaluator), and what the runner's ``describe`` said.
``outputs`` (object)
    ``names`` and ``units`` of the outputs (classifiers: one score per class).
``max_abs_error`` (number, target units), ``max_rel_error`` (number)
    Largest over all families and engines; relative to each output's range over the in-domain
    probes. An infinite error is written "inf".
``tolerance`` (object)
    ``per_output``, ``rule``, ``source`` ("derived", "abs-tol", "rel-tol"), ``given`` (the
    override's value or null), ``precision``,
    ``safety_factor``, ``estimate`` and ``reference_rounding`` (per output): the in-domain
    tolerance.
``estimate`` (object)
    The export-error estimate for the artifact's precision (:mod:`nodecast.compiler.typical_error`).
``probes`` (object)
    ``seed``, ``sobol`` (the quasi-random count asked for), ``total``, ``families`` (count by name).
``families`` (list)
    One record per engine and family: ``engine``, ``family``, ``count``, ``compared``, ``rejected``,
    ``policy``, ``policy_honoured``, ``policy_violation``, ``tolerance`` (per output, as applied to
    this family), ``max_abs_error``, ``max_rel_error``, ``worst_input``, ``worst_output``,
    ``within_tolerance``, ``passed``; classifiers also ``labels`` (``disagreements``,
    ``near_tie_flips``, ``near_ties``, and ``label_outputs_wrong`` when the artifact outputs labels).
``notes`` (list of str)
    Plain-language reasons: why a tolerance was too tight, what a failure suggests.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nodecast.compiler import typical_error
from nodecast.compiler.bounds.budget import accuracy_budget
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify.compare import compare_family, expected_outputs
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.report import format_table
from nodecast.compiler.verify.runners import detect_kind, runner
from nodecast.compiler.verify.tolerance import certified_tolerance, check_stated

__all__ = ["Report", "check", "format_table", "verify"]


@dataclass(frozen=True)
class Report:
    """The outcome of one verification: ``passed`` and the report document (schema above)."""

    passed: bool
    document: dict

    def as_dict(self) -> dict:
        return self.document


def _describe(module, path: Path, bundle, run_options: dict) -> dict:
    info = dict(module.describe(path, **run_options))
    if info.get("bundle_id") != bundle.bundle_id:
        raise NodecastError(f"{path} was generated from bundle {str(info.get('bundle_id'))[:12]}"
                            f"..., not from this bundle {bundle.bundle_id[:12]}...; verify it "
                            "against the bundle it was emitted from")
    net = bundle.network
    declared = {"n_inputs": net.n_features, "n_outputs": net.n_outputs,
                "feature_names": list(net.feature_names)}
    for key, want in declared.items():
        if key in info and info[key] != want:
            raise NodecastError(f"{path} declares {key.replace('_', ' ')} {str(info[key])[:80]}, "
                                f"the bundle has {str(want)[:80]}: the artifact was edited or is "
                                "not this model's")
    policy = info.get("out_of_domain")
    if policy not in ("clamp", "pass", "reject"):
        raise NodecastError(f"{path} declares an unknown out-of-domain policy {policy!r}")
    return info


def _run(module, path: Path, X: np.ndarray, info: dict, n_outputs: int) -> np.ndarray:
    got = np.asarray(module.run(path, X, info), dtype=np.float64)
    if got.shape != (X.shape[0], n_outputs):
        raise NodecastError(f"{path} returned outputs of shape {got.shape} for {X.shape[0]} rows; "
                            f"expected ({X.shape[0]}, {n_outputs})")
    return got


def _run_labels(module, path: Path, X: np.ndarray, info: dict, net) -> np.ndarray | None:
    """A classifier artifact's own label outputs (n_rows,), when its runner can fetch them."""
    fetch = getattr(module, "run_labels", None)
    if net.task != "classification" or fetch is None:
        return None
    labels = fetch(path, X, info)
    if labels is not None and np.shape(labels) != (X.shape[0],):
        raise NodecastError(f"{path} returned labels of shape {np.shape(labels)} for "
                            f"{X.shape[0]} rows")
    return labels


def _tolerances(net, path, families, info):
    """(in-domain tolerance, per-family tolerance list): the certified bound recomputed from the
    bundle for the artifact's declared options, over the domain, and under the "pass" policy over
    the box that also holds each outside family."""
    tolerance = certified_tolerance(net, info)
    check_stated(path, info, tolerance, net)
    per_family = []
    for family in families:
        if family.inside_domain or info["out_of_domain"] != "pass":
            per_family.append(tolerance)
            continue
        X = family.X[:, : net.n_features]
        low = np.minimum(net.domain_low, np.nanmin(np.where(np.isfinite(X), X, np.nan),
                                                   axis=0, initial=np.inf))
        high = np.maximum(net.domain_high, np.nanmax(np.where(np.isfinite(X), X, np.nan),
                                                     axis=0, initial=-np.inf))
        per_family.append(certified_tolerance(net, info, low, high))
    return tolerance, per_family


def _notes(tolerance, budget, results, names) -> list[str]:
    notes = []
    unsound = [r for r in results if not r["within_tolerance"]]
    if unsound:
        r = unsound[0]
        notes.append(f"soundness failure: {r['engine']} {r['family']} measured "
                     f"{r['max_abs_error']:.3e} at input {list(r['worst_input'] or [])}, above the "
                     f"certified bound {r['tolerance'][r['worst_output']]:.3e}: the artifact does "
                     "not compute this model (changed weights or code, another policy, a faulty "
                     "runtime, or a runtime activation outside what the bound assumes); do not ship it")
    for o in budget.exceeded_by(tolerance.certified):
        notes.append(f"accuracy: the certified bound {tolerance.certified[o]:.3e} of output "
                     f"{names[o]!r} "
                     f"exceeds the budget {budget.per_output[o]:.3e} ({budget.rule}): the artifact "
                     "is not proven as good as the model; use a wider precision, another "
                     "activation implementation or a better-conditioned model (larger ridge)")
    return notes


def _measured(results, n_outputs: int) -> list[float]:
    """Largest measured error per output over every family and engine."""
    worst = [0.0] * n_outputs
    for r in results:
        for o, value in enumerate(r.get("max_abs_error_per_output") or []):
            worst[o] = max(worst[o], float(value))
    return worst


def verify(bundle, artifact, data=None, count: int = 4096, seed: int = 0,
           abs_tol: float | None = None, rel_tol: float | None = None, *, on_engine=None,
           **run_options) -> Report:
    """Verify ``artifact`` (a path) against ``bundle``'s float64 reference.

    Parameters
    ----------
    bundle : Bundle, the model the artifact was emitted from.
    artifact : str or path, a .onnx or .py file, a folder of generated C, or the header
        ``<prefix>.h`` of one model in a folder that holds several.
    data : ndarray of shape (n_rows, n_features) or None, extra probes (the user's rows).
    count, seed : the number of quasi-random probes and the seed of every probe family.
    abs_tol, rel_tol : tolerance overrides (see :mod:`nodecast.compiler.verify.tolerance`).
    on_engine : None or callable(engine, index, total, rows), told before each runtime engine runs.
    run_options : passed to the runner's ``describe`` (e.g. ``emulate="cortex-m4"`` for C).
    """
    net, path = bundle.network, Path(artifact)
    if path.suffix == ".h" and path.is_file():  # one model of a folder that holds several
        run_options, path = {**run_options, "header": path.name}, path.parent
    kind = detect_kind(path)
    if run_options.get("emulate") and kind != "c":
        raise NodecastError(f"--emulate runs C artifacts on an emulated CPU; {path} is a {kind} "
                            "artifact, which runs on the host only")
    module = runner(kind)
    info = _describe(module, path, bundle, run_options)
    _check_verify_memory(net, data, count)
    families = probe_families(net, data, count, seed)
    wanted = [expected_outputs(net, f.X, info["out_of_domain"]) for f in families]
    tolerance, per_family = _tolerances(net, path, families, info)
    inside = np.vstack([w for f, w in zip(families, wanted, strict=True) if f.inside_domain])
    out_range = np.maximum(inside.max(axis=0) - inside.min(axis=0), np.finfo(float).tiny)
    budget = accuracy_budget(bundle, abs_tol, rel_tol, out_range)
    est = typical_error.estimate(net, info["precision"], activation_error=info.get("activation_error", 0.0))
    X_all = np.vstack([family.X for family in families])
    engines = list(info.get("engines") or [kind])
    results = []
    for index, engine in enumerate(engines):
        if on_engine is not None:
            on_engine(engine, index, len(engines), X_all.shape[0])
        got_all = _run(module, path, X_all, {**info, "engine": engine}, net.n_outputs)
        labels_all = _run_labels(module, path, X_all, {**info, "engine": engine}, net)
        start = 0
        for family, want, tol in zip(families, wanted, per_family, strict=True):
            rows = slice(start, start + family.X.shape[0])
            start += family.X.shape[0]
            record = compare_family(net, family, got_all[rows], want, info["out_of_domain"],
                                    info["precision"], np.asarray(tol.per_output), out_range,
                                    info.get("input_frac_bits"),
                                    None if labels_all is None else labels_all[rows])
            results.append({"engine": engine, **record})
    within_budget = not budget.exceeded_by(tolerance.certified)
    passed = all(r["passed"] for r in results) and within_budget
    files = _generated_files(kind, path, info)
    document = {
        "passed": passed, "bundle_id": bundle.bundle_id, "task": net.task,
        "artifact": {**_plain(info), "path": str(path), "kind": kind, "engines": engines,
                     "files": files},
        "outputs": {"names": list(net.target_names), "units": list(net.target_units)},
        "max_abs_error": max(r["max_abs_error"] for r in results),
        "max_rel_error": max(r["max_rel_error"] for r in results),
        "tolerance": tolerance.as_dict(), "certified_bound": list(tolerance.certified),
        "accuracy_budget": budget.as_dict(), "within_budget": within_budget,
        "sound": all(r["within_tolerance"] for r in results),
        "measured_max_abs_error": _measured(results, net.n_outputs),
        "typical_estimate": est.as_dict(),
        "probes": {"seed": seed, "sobol": count, "total": int(X_all.shape[0]),
                   "families": {f.name: int(f.X.shape[0]) for f in families}},
        "families": results,
        "notes": _file_notes(files) + _notes(tolerance, budget, results, net.target_names),
    }
    return Report(passed, document)


def _check_verify_memory(net, data, count: int) -> None:
    """Refuse, with the estimate, a verification that would exhaust the memory."""
    from nodecast.compiler.domain_points import ALL_CORNERS_UP_TO, MAX_CORNERS
    from nodecast.compiler.limits import check_memory, verify_bytes

    n = net.n_features
    corners = 2**n if n <= ALL_CORNERS_UP_TO else MAX_CORNERS
    rows = count + corners + 8 * n + 2 + (0 if data is None else len(data))
    check_memory(verify_bytes(net, rows), f"verifying {net.n_nodes} nodes and {n} features on "
                 f"{rows} probe rows", "lower --probes or verify on a machine with more memory")


def _generated_files(kind: str, path: Path, info: dict) -> dict[str, str]:
    """Each generated file's state against the SHA-256 emit recorded in it (compiler/integrity)."""
    from nodecast.compiler.integrity import check_files

    if kind == "c":
        return check_files([path / f"{info['prefix']}.h", path / f"{info['prefix']}.c"])
    return check_files([path])


def _file_notes(files: dict[str, str]) -> list[str]:
    changed = [name for name, state in files.items() if state != "unchanged"]
    if not changed:
        return []
    return [f"{', '.join(changed)}: changed since emit or not recorded by it (the SHA-256 emit "
            "wrote into each generated file does not match); these results are for the code as "
            "it is now, which nodecast did not write"]


def _plain(value):
    """JSON-safe copy of a runner's description (numbers, text, lists, records)."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items() if k != "engine"}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def check(bundle, artifact, data=None, **options) -> dict:
    """For users' own test suites: verify ``artifact`` and raise AssertionError carrying the report
    table when it fails; return the report document when it passes.

    ``bundle`` is a Bundle or the path of a .ncast; ``data`` an array of rows in feature order or the
    path of a CSV (features found by header name); other options as for :func:`verify`.
    """
    if isinstance(bundle, (str, os.PathLike)):
        from nodecast.compiler.bundle import load

        bundle = load(bundle)
    if isinstance(data, (str, os.PathLike)):
        from nodecast.compiler.csvio import read_table
        from nodecast.compiler.levels import table_rows

        data = table_rows(read_table(data), bundle.network)
    report = verify(bundle, artifact, data, **options)
    if not report.passed:
        raise AssertionError(f"{artifact} does not compute bundle {bundle.bundle_id[:12]}:\n"
                             + format_table(report))
    return report.as_dict()
