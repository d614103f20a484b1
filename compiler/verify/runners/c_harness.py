"""The C harness: a ``main`` that feeds rows to a generated artifact and prints its outputs exactly,
built for the host (:mod:`.c`), for QEMU (:mod:`.qemu`) and for instruction counts."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.version import __version__

IO_TYPES = {"float32": "float", "float64": "double", "q15": "int16_t", "q31": "int32_t"}


def harness_source(info: dict, rows: np.ndarray | None = None, timed: bool = False) -> bytes:
    """The harness main for ``info``'s artifact: rows from stdin, or compiled in (semihosted);
    ``timed`` (semihosted only) prints SysTick ticks per call instead of the outputs."""
    from nodecast.compiler.backends.c_format import array_body
    from nodecast.templates import render

    bits = [] if rows is None else np.ascontiguousarray(rows, dtype="<f8").view("<u8").ravel()
    context = {"version": __version__, "prefix": info["prefix"], "PREFIX": info["prefix"].upper(),
               "precision": info["precision"], "io_type": IO_TYPES[info["precision"]],
               "n_inputs": info["n_inputs"], "semihosted": rows is not None,
               "n_categorical": info.get("n_categorical", 0),
               "timed": timed and rows is not None,
               "row_count": 0 if rows is None else int(rows.shape[0]),
               "rows": array_body([f"UINT64_C(0x{int(b):016x})" for b in bits]) or "    0,"}
    return render("harness", "main.c.j2", **context).encode("ascii")
