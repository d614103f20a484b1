"""Flash and cycles of a model shape on a Cortex-M core, for the budgets of ``nodecast select``.

Both depend on the shape (inputs n, nodes M, outputs t), the precision and the core, hardly on the
weights: the arrays' sizes are fixed by the shape, and the only data-dependent branches are the
activation's clamps (the counts of one model vary by about 1% over its probes, 6% with libm). So
each candidate M is measured once on a network of that shape with seeded random weights over the
unit box: flash is the text and data of the model's object built as ``emit`` builds it for the
footprint (helpers from libgcc and libm not included), cycles the median instruction count of
:mod:`nodecast.compiler.instruction_count` times its assumed cycles per instruction.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.instruction_count import (
    ASSUMED_CPI,
    COUNT_CORES,
    count_instructions,
    counting_rows,
)

BUDGET_ROWS = 16


def shape_network(n: int, m: int, t: int, seed: int = 0):
    """A regression network of the given shape with seeded random weights, domain [0, 1]^n."""
    from nodecast.compiler.ir import Network

    rng = np.random.default_rng([seed, n, m, t])
    return Network(hidden_weights=rng.normal(size=(m, n)) * 2.0, hidden_biases=rng.normal(size=m),
                   activation="logistic", output_weights=rng.normal(size=(m, t)) * 0.1,
                   output_bias=np.zeros(t), input_offset=np.zeros(n), input_scale=np.ones(n),
                   output_offset=np.zeros(t), output_scale=np.ones(t), domain_low=np.zeros(n),
                   domain_high=np.ones(n), feature_names=[f"x{i}" for i in range(n)],
                   target_names=[f"y{o}" for o in range(t)])


def shape_cost(n: int, m: int, t: int, precision: str, core: str) -> dict:
    """Flash bytes, median instructions and estimated cycles of one prediction."""
    from nodecast.compiler.backends import render
    from nodecast.compiler.bundle import Bundle
    from nodecast.compiler.toolchain import footprint

    if core not in COUNT_CORES:
        raise NodecastError(f"the target core is one of {', '.join(COUNT_CORES)}, not {core!r}")
    net = shape_network(n, m, t)
    artifact = render(Bundle(net), "c", precision=precision, prefix="model")
    sizes = footprint(artifact.files, "model")[COUNT_CORES[core][0]]
    if "skipped" in sizes:
        raise NodecastError(f"flash and cycle budgets need the Cortex-M toolchain: "
                            f"{sizes['skipped']}")
    info = {"prefix": "model", "precision": precision, "n_inputs": n}
    counts = count_instructions(artifact.files, info, counting_rows(net)[:BUDGET_ROWS], core)
    median = float(np.median(counts))
    return {"nodes": m, "flash": sizes["text"] + sizes["data"], "instructions": median,
            "cycles": round(median * ASSUMED_CPI[core])}


def grid_costs(n: int, t: int, nodes, precision: str, core: str) -> list[dict]:
    """:func:`shape_cost` for every node count of a grid, in increasing order."""
    return [shape_cost(n, m, t, precision, core) for m in sorted(set(nodes))]


def allowed_nodes(costs: list[dict], max_flash: int | None, max_cycles: int | None) -> list[int]:
    """The node counts whose flash and cycles meet the budgets; NodecastError naming the smallest
    achievable figures when none does."""
    fits = [c["nodes"] for c in costs if (max_flash is None or c["flash"] <= max_flash)
            and (max_cycles is None or c["cycles"] <= max_cycles)]
    if not fits:
        small = costs[0]
        raise NodecastError(f"no --nodes value fits the budget: the smallest, {small['nodes']} "
                            f"nodes, needs {small['flash']} B of flash and about {small['cycles']} "
                            "cycles per prediction; raise the budget or try fewer nodes")
    return fits
