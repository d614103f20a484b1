"""Verification: run an artifact in its real runtime on probes of the declared domain and compare it
with the float64 reference, within a stated tolerance.

Report schema (``Report.as_dict``): ``passed`` (bool), ``max_abs_error`` and ``max_rel_error``
(floats; relative to the output range over the in-domain probes), ``tolerance`` (per output, with the
rule that set it), ``probes`` (seed, count per family), ``families`` (per family: count, errors, the
worst input and whether the out-of-domain policy was honoured), ``artifact`` (kind, precision, policy)
and ``bundle_id``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nodecast.compiler import numerics, reference
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.runners import detect_kind, runner
from nodecast.compiler.verify.tolerance import derive


@dataclass(frozen=True)
class Report:
    passed: bool
    document: dict

    def as_dict(self) -> dict:
        return self.document


def _expected(net, X, policy):
    return reference.predict(net, X, "clamp" if policy == "clamp" else "pass")


def _family_result(net, family, got, policy, tol, out_range):
    want = _expected(net, family.X, policy)
    rejected = np.all(np.isnan(got), axis=1)
    outside = reference.outside_domain(net, family.X)
    should_reject = outside if policy == "reject" else np.zeros_like(outside)
    policy_ok = bool(np.array_equal(rejected, should_reject))
    compared = ~should_reject
    err = np.abs(got[compared] - want[compared])
    err = np.where(np.isnan(err), np.inf, err)
    result = {"family": family.name, "count": int(family.X.shape[0]), "policy_honoured": policy_ok,
              "max_abs_error": 0.0, "max_rel_error": 0.0, "worst_input": None}
    if err.size:
        worst_row, worst_col = np.unravel_index(np.argmax(err / tol), err.shape)
        result.update(max_abs_error=float(err.max()),
                      max_rel_error=float(np.max(err / out_range)),
                      worst_input=[float(v) for v in family.X[compared][worst_row]],
                      within=bool(np.all(err <= tol)))
    else:
        result["within"] = True
    result["passed"] = policy_ok and result["within"]
    return result


def verify(bundle, artifact, data: np.ndarray | None = None, count: int = 4096, seed: int = 0,
           abs_tol: float | None = None, rel_tol: float | None = None, **run_options) -> Report:
    """Verify ``artifact`` (a path) against ``bundle``'s reference; see the module doc for the report."""
    net, path = bundle.network, Path(artifact)
    kind = detect_kind(path)
    module = runner(kind)
    info = module.describe(path, **run_options)
    if info["bundle_id"] != bundle.bundle_id:
        raise NodecastError(f"{path} was generated from bundle {info['bundle_id'][:12]}..., "
                            f"not from this bundle {bundle.bundle_id[:12]}...")
    families = probe_families(net, data, count, seed)
    X_all = np.vstack([family.X for family in families])
    got_all = module.run(path, X_all, info)
    inside = reference.predict(net, np.vstack([f.X for f in families if f.inside_domain]))
    out_range = np.maximum(inside.max(axis=0) - inside.min(axis=0), np.finfo(float).tiny)
    est = numerics.estimate(net, info["precision"], activation_error=info.get("activation_error", 0.0))
    ref_est = numerics.estimate(net, "float64")
    tolerance = derive(est.per_output, ref_est.per_output, abs_tol, rel_tol, out_range)
    tol = np.asarray(tolerance.per_output)
    results, start = [], 0
    for family in families:
        got = got_all[start : start + family.X.shape[0]]
        start += family.X.shape[0]
        results.append(_family_result(net, family, got, info["out_of_domain"], tol, out_range))
    passed = all(r["passed"] for r in results)
    document = {
        "passed": passed, "bundle_id": bundle.bundle_id, "artifact": {"path": str(path), **info},
        "max_abs_error": max(r["max_abs_error"] for r in results),
        "max_rel_error": max(r["max_rel_error"] for r in results),
        "tolerance": tolerance.as_dict(), "estimate": est.as_dict(),
        "probes": {"seed": seed, "total": int(X_all.shape[0]),
                   "families": {r["family"]: r["count"] for r in results}},
        "families": results,
    }
    return Report(passed, document)


def format_table(report: Report) -> str:
    doc = report.as_dict()
    lines = [f"{'family':<14} {'count':>6} {'max abs err':>12} {'max rel err':>12}  ok  worst input"]
    for r in doc["families"]:
        worst = "" if r["worst_input"] is None else "[" + ", ".join(f"{v:.6g}" for v in r["worst_input"]) + "]"
        lines.append(f"{r['family']:<14} {r['count']:>6} {r['max_abs_error']:>12.3e} "
                     f"{r['max_rel_error']:>12.3e}  {'yes' if r['passed'] else 'NO ':<3} {worst}")
    tol = ", ".join(f"{v:.3e}" for v in doc["tolerance"]["per_output"])
    lines.append(f"tolerance {tol} ({doc['tolerance']['rule']})")
    lines.append(f"verification {'PASSED' if doc['passed'] else 'FAILED'}: {doc['artifact']['kind']} "
                 f"{doc['artifact']['precision']}, max abs error {doc['max_abs_error']:.3e}, "
                 f"max rel error {doc['max_rel_error']:.3e}")
    return "\n".join(lines)


def check(bundle, artifact, **options) -> dict:
    """For users' test suites: verify and raise AssertionError with the report table on failure."""
    report = verify(bundle, artifact, **options)
    if not report.passed:
        raise AssertionError(format_table(report))
    return report.as_dict()
