"""Work too large for this machine is refused before anything large is allocated, with the estimate.

The estimates count the largest arrays each step holds at once (float64, 8 bytes a value); they
are meant to be within a factor of about two, which is enough to tell "fits" from "would exhaust
the memory after minutes". The artifact sizes per parameter are those measured for
docs/reliability.md ("Resource limits"), taken 10% low so that a refusal is never wrong.
"""

from __future__ import annotations

import os

from nodecast.compiler.errors import NodecastError

_FLOAT = 8
_ESTIMATE_ROWS = 2048 + 1024  # the typical estimate's domain probes and corners, evaluated at once
_ESTIMATE_BLOCK = 512 * 10  # a block of 512 rows and about ten temporaries of its size
BYTES_PER_PARAMETER = {("onnx", "float32"): 3.8, ("onnx", "float64"): 7.4, ("c", "q15"): 9.3,
                       ("c", "q31"): 9.3, ("c", "float32"): 14.3, ("c", "float64"): 21.2,
                       ("python", "float64"): 22.5}


def available_memory_bytes() -> int | None:
    """Memory the system can give without swapping (Linux MemAvailable, else free pages), or
    None where the system does not say."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        pages, size = os.sysconf("SC_AVPHYS_PAGES"), os.sysconf("SC_PAGE_SIZE")
    except (AttributeError, ValueError, OSError):
        return None
    return pages * size if pages > 0 and size > 0 else None


def estimate_bytes(net) -> int:
    """Peak memory of the export-error estimate (emit, inspect --precision, verify)."""
    m, n = net.n_nodes, net.n_features
    return _FLOAT * (_ESTIMATE_ROWS * (2 * m + 2 * n) + _ESTIMATE_BLOCK * m)


def verify_bytes(net, rows: int) -> int:
    """Peak memory of verifying on ``rows`` probe rows: the rows, their CSV text for a predictor
    (about 25 bytes a number), the reference's hidden layer and the outputs."""
    m, n, t = net.n_nodes, net.n_features, net.n_outputs
    return max(estimate_bytes(net), rows * (41 * n + 16 * m + 32 * t))


def check_memory(need: int, what: str, advice: str) -> None:
    have = available_memory_bytes()
    if have is not None and need > have:
        raise NodecastError(f"{what} needs about {need / 2**30:.3g} GiB of memory, more than the "
                            f"{have / 2**30:.3g} GiB available; {advice}")


def parameters(net) -> int:
    return int(net.hidden_weights.size + net.hidden_biases.size + net.output_weights.size
               + net.output_bias.size)


def check_artifact_estimate(net, to: str, precision: str, limit: int) -> None:
    """Refuse before rendering an artifact that would surely exceed ``limit`` bytes."""
    from nodecast.compiler.files import SIZE_OPTION, format_size

    per = BYTES_PER_PARAMETER.get((to, precision))
    if per is None:
        return
    size = int(per * parameters(net))
    if size > limit:
        raise NodecastError(f"the {to} {precision} artifact would be at least {format_size(size)} "
                            f"({parameters(net)} parameters), over the limit {format_size(limit)}; "
                            f"pass {SIZE_OPTION} {format_size(2 * size)} (API: max_bytes=) if you "
                            "mean it")
