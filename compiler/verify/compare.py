"""Judging one probe family: an artifact's outputs against the float64 reference, under the
artifact's out-of-domain policy, within a tolerance.

* What is expected: "clamp" the reference on the clamped input, "pass" and "reject" the reference on
  the input itself; "reject" must also return a rejected (all-NaN) row for every input outside the
  domain, and must not reject inputs inside it. A row that lies outside the domain in float64 but
  inside it once rounded to the artifact's input precision (or the reverse) sits on the boundary:
  either behaviour is accepted there, and a row the artifact evaluated is compared as usual. For
  q15/q31 the rounding is the artifact's own conversion into its integer input format.
* Errors are absolute, in target units, per output; a NaN or infinite output where the reference is
  finite counts as an infinite error. The relative error divides by the output's range over the
  in-domain probes. The worst input is the row with the largest error-to-tolerance ratio.
* Classifiers: the scores are checked like any output, and the labels (highest score) are compared.
  A probe whose reference top-two score gap is within the sum of those two scores' tolerances is a
  near-tie: rounding may legitimately swap its label, so a swapped label there is counted
  (``near_tie_flips``) but does not fail. A swapped label anywhere else fails. An artifact that
  also outputs labels must output, on every evaluated row, the class of its own highest score
  (``label_outputs_wrong`` counts the rows where it does not; any fails).
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler import reference

INPUT_DTYPES = {"float32": np.float32}
WORD_BITS = {"q15": 16, "q31": 32}


def expected_outputs(net, X: np.ndarray, policy: str) -> np.ndarray:
    """The reference outputs (n_rows, n_outputs) that an artifact with ``policy`` must give."""
    return reference.predict(net, X, "clamp" if policy == "clamp" else "pass")


def _q_from_real(X: np.ndarray, frac_bits, word_bits: int) -> np.ndarray:
    """The C header's ``_Q_FROM_REAL`` on float64 values, as integers held in float64 (exact):
    x 2^f rounded half away from zero by adding +-0.5 in double and truncating, saturated to
    +-word_max; NaN becomes -word_max - 1. X (n_rows, n_inputs), frac_bits (n_inputs,)."""
    word_max = 2.0 ** (word_bits - 1) - 1
    scaled = np.ldexp(X, np.asarray(frac_bits))
    with np.errstate(invalid="ignore"):
        q = np.trunc(scaled + np.where(X >= 0.0, 0.5, -0.5))
        q = np.where(scaled >= word_max, word_max, np.where(scaled <= -word_max, -word_max, q))
    return np.where(np.isnan(X), -word_max - 1, q)


def _outside_fixed(net, X: np.ndarray, frac_bits, word_bits: int) -> np.ndarray:
    """Rows outside the domain as a q15/q31 artifact sees them: its integer input against its
    integer bounds (round(bound 2^f), as :mod:`nodecast.compiler.fixedpoint` tabulates them)."""
    low = np.rint(np.ldexp(net.domain_low, np.asarray(frac_bits)))
    high = np.rint(np.ldexp(net.domain_high, np.asarray(frac_bits)))
    Xq = _q_from_real(np.asarray(X, dtype=np.float64), frac_bits, word_bits)
    return ~np.all((Xq >= low) & (Xq <= high), axis=1)


def _outside_in_precision(net, X: np.ndarray, precision: str,
                          input_frac_bits=None) -> np.ndarray:
    if precision in WORD_BITS and input_frac_bits is not None:
        return _outside_fixed(net, X, input_frac_bits, WORD_BITS[precision])
    dtype = INPUT_DTYPES.get(precision)
    if dtype is None:
        return reference.outside_domain(net, X)
    low, high = net.domain_low.astype(dtype), net.domain_high.astype(dtype)
    Xp = X[:, : net.n_features].astype(dtype)
    inside = np.all((Xp >= low) & (Xp <= high), axis=1)
    if net.n_categorical:  # level codes are integers: no rounding moves them
        inside &= np.all(reference.level_codes(net, X) >= 0, axis=1)
    return ~inside


def _policy(net, X, rejected, policy, precision,
            input_frac_bits=None) -> tuple[np.ndarray, str | None]:
    """(rows to compare with the reference, a description of any policy violation or None)."""
    if policy != "reject":
        bad = int(rejected.sum())
        message = f"{bad} row(s) rejected although the policy is {policy!r}" if bad else None
        return ~rejected, message
    out64 = reference.outside_domain(net, X)
    out_p = _outside_in_precision(net, X, precision, input_frac_bits)
    must, may = out64 & out_p, out64 | out_p
    problems = []
    if np.any(must & ~rejected):
        problems.append(f"{int(np.sum(must & ~rejected))} row(s) outside the domain not rejected")
    if np.any(rejected & ~may):
        problems.append(f"{int(np.sum(rejected & ~may))} row(s) inside the domain rejected")
    return ~rejected & ~must, "; ".join(problems) or None


def _label_counts(got: np.ndarray, want: np.ndarray, tol: np.ndarray) -> dict:
    """Label disagreements on finite rows, split into near-tie flips and real failures."""
    finite = np.all(np.isfinite(got), axis=1)
    got, want = got[finite], want[finite]
    order = np.argsort(-want, axis=1, kind="stable")
    top, second = order[:, 0], order[:, 1]
    rows = np.arange(want.shape[0])
    gap = want[rows, top] - want[rows, second]
    near_tie = gap <= tol[top] + tol[second]
    flipped = np.argmax(got, axis=1) != top
    return {"near_ties": int(near_tie.sum()), "near_tie_flips": int(np.sum(flipped & near_tie)),
            "disagreements": int(np.sum(flipped & ~near_tie))}


def _wrong_label_outputs(net, got: np.ndarray, labels: np.ndarray) -> int:
    """Rows with finite scores whose label output is not the class of the highest score there."""
    finite = np.all(np.isfinite(got), axis=1)
    own = np.asarray(net.class_labels, dtype=object)[np.argmax(got[finite], axis=1)]
    return int(np.sum(np.asarray(labels, dtype=object)[finite] != own))


def _errors(got: np.ndarray, want: np.ndarray) -> np.ndarray:
    err = np.abs(got - want)
    return np.where(np.isfinite(err), err, np.inf)


def compare_family(net, family, got, want, policy, precision, tol, out_range,
                   input_frac_bits=None, labels=None) -> dict:
    """The result record of one family (see the report schema in :mod:`nodecast.compiler.verify`).

    Parameters
    ----------
    got, want : ndarray of shape (n_rows, n_outputs), the artifact's and the expected outputs.
    tol : ndarray of shape (n_outputs,), the tolerance in target units.
    out_range : ndarray of shape (n_outputs,), the output range over the in-domain probes.
    input_frac_bits : sequence of n_features ints or None, a q15/q31 artifact's input formats
        (Q(f): x arrives as round(x 2^f)); the domain test then uses the quantised inputs.
    labels : ndarray of n_rows str or None, a classifier artifact's own label outputs.
    """
    rejected = np.all(np.isnan(got), axis=1)
    compared, violation = _policy(net, family.X, rejected, policy, precision, input_frac_bits)
    err = _errors(got[compared], want[compared])
    result = {"family": family.name, "count": int(family.X.shape[0]),
              "compared": int(compared.sum()), "rejected": int(rejected.sum()),
              "policy": policy, "policy_honoured": violation is None, "policy_violation": violation,
              "tolerance": [float(v) for v in tol], "max_abs_error": 0.0, "max_rel_error": 0.0,
              "worst_input": None, "worst_output": None, "within_tolerance": True,
              "max_abs_error_per_output": [0.0] * np.shape(want)[1]}
    if err.size:
        ratio = err / np.maximum(tol, np.finfo(float).tiny)
        row, col = np.unravel_index(np.argmax(ratio), ratio.shape)
        result.update(max_abs_error=float(err.max()), max_rel_error=float(np.max(err / out_range)),
                      worst_input=[float(v) for v in family.X[compared][row]],
                      worst_output=int(col), within_tolerance=bool(np.all(err <= tol)),
                      max_abs_error_per_output=[float(v) for v in err.max(axis=0)])
    failed_labels = 0
    if net.task == "classification" and err.size:
        result["labels"] = _label_counts(got[compared], want[compared], tol)
        failed_labels = result["labels"]["disagreements"]
        if labels is not None:
            wrong = _wrong_label_outputs(net, got[compared], np.asarray(labels)[compared])
            result["labels"]["label_outputs_wrong"] = wrong
            failed_labels += wrong
    result["passed"] = bool(violation is None and result["within_tolerance"] and not failed_labels)
    return result
