"""The tolerance of a verification: the artifact's certified bound, recomputed from the bundle.

Per output k:

    tolerance_k = certified_k(artifact's declared options) + certified_k(float64 reference)

The first term is :func:`nodecast.compiler.bounds.certify` for the kind, precision, activation
implementation and table size the artifact declares, computed here from the bundle, never read from
the artifact (an artifact whose stated bound or activation error differs is refused). The second is
the same bound for the float64 NumPy reference the artifact is compared with, which rounds too. A
measured error above this tolerance is a soundness failure: the artifact does not compute the model.

Separately, the verdict requires the certified bound to fit the accuracy budget
(:mod:`nodecast.compiler.bounds.budget`): by default 5% of the model's validation RMSE, overridden by
``--abs-tol`` (target units) or ``--rel-tol`` (share of each output's range over the in-domain
probes). Under the "pass" policy, probes outside the domain are judged against the certified bound
over the smallest box that holds them and the domain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError

# a stated bound may differ from the recomputed one by the last digits of its text only
_AGREEMENT = 1e-6


@dataclass(frozen=True)
class Tolerance:
    """Allowed absolute error per output (target units): the certified bound plus the reference's."""

    per_output: tuple[float, ...]
    precision: str
    certified: tuple[float, ...]
    reference_rounding: tuple[float, ...]
    assumption: str

    rule = "the certified bound + the float64 reference's own certified rounding"

    def as_dict(self) -> dict:
        return {"per_output": list(self.per_output), "rule": self.rule, "source": "certified",
                "precision": self.precision, "certified_bound": list(self.certified),
                "reference_rounding": list(self.reference_rounding), "assumes": self.assumption}


def certified_tolerance(net, info: dict, low=None, high=None) -> Tolerance:
    """The tolerance for the artifact described by ``info`` over the box [low, high] (default: the
    declared domain)."""
    from nodecast.compiler.bounds import certify

    options = _declared_options(info)
    certificate = certify(net, info["kind"], info["precision"], low=low, high=high, **options)
    reference = certify(net, "reference", "float64", low=low, high=high)
    values = np.asarray(certificate.per_output) + np.asarray(reference.per_output)
    if not np.all(np.isfinite(values)):
        raise NodecastError(f"this {info['precision']} artifact's error cannot be bounded (the "
                            "model's values overflow that precision); it cannot be verified")
    return Tolerance(tuple(float(v) for v in values), info["precision"], certificate.per_output,
                     reference.per_output, certificate.assumption)


def _declared_options(info: dict) -> dict:
    if info["kind"] != "c":
        return {}
    size = info.get("table_size") or None
    return {"activation_impl": info.get("activation_impl"), "table_size": size}


def check_stated(path, info: dict, tolerance: Tolerance, net) -> None:
    """Refuse an artifact whose stated bound or activation error disagrees with the recomputed one
    (one line naming the field): an artifact's word never widens its own tolerance."""
    stated = info.get("certified_bound")
    if stated is None:
        raise NodecastError(f"{path} states no certified bound (field certified_bound); emit it "
                            "again with this version of nodecast")
    try:
        stated = [float(v) for v in stated]
    except (TypeError, ValueError):
        raise NodecastError(f"{path} states an unreadable certified_bound") from None
    if len(stated) != len(tolerance.certified):
        raise NodecastError(f"{path} states {len(stated)} certified_bound values for "
                            f"{len(tolerance.certified)} outputs")
    for o, (given, derived) in enumerate(zip(stated, tolerance.certified, strict=True)):
        if not _agrees(given, derived):
            raise NodecastError(f"{path} states certified_bound[{o}] = {given!r}, but this bundle "
                                f"and the artifact's declared options give {derived!r}; the "
                                "artifact was edited or emitted from other options")
    if "activation_error" in info:
        from nodecast.compiler.backends.c import stated_activation_error

        derived = stated_activation_error(net, info["precision"], info.get("activation_impl"),
                                          info.get("table_size") or None)
        if not _agrees(float(info["activation_error"]), derived):
            raise NodecastError(f"{path} states activation_error = {info['activation_error']!r}, "
                                f"but its declared implementation has {derived!r}")


def _agrees(given: float, derived: float) -> bool:
    if not (np.isfinite(given) and np.isfinite(derived)):
        return given == derived
    return abs(given - derived) <= _AGREEMENT * max(abs(derived), np.finfo(float).tiny)
