"""Instructions executed per prediction on emulated Cortex-M cores, and a cycle estimate from them.

Method. The artifact is built with the footprint's flags for the core (Cortex-M0: ``-Os``, no FPU;
Cortex-M4F: ``-O2``, FPv4-SP), linked with the bare-metal harness in its timed mode and run once in
``qemu-system-arm -icount shift=7``. Under ``-icount`` QEMU's virtual clock advances by exactly
2^7 ns per executed instruction, and the MPS2 boards clock SysTick from their 25 MHz system clock,
so one instruction is 3.2 SysTick ticks: the harness reads SysTick just before and just after each
``<prefix>_predict`` call, subtracts the ticks of an empty interval, and the count is
``round(ticks / 3.2)``. It includes the call itself (argument set-up, branch, return) and every
helper the function calls (libgcc's soft float, libm). Emulation is deterministic, so the same image
gives the same counts on every run.

Cortex-M0 code runs on ``mps2-an385``, whose CPU is a Cortex-M3 (QEMU has no Cortex-M0 MPS2
board): the image is built for ARMv6-M (``-mcpu=cortex-m0``), a subset of what the M3 executes, so
the executed instruction stream, and its count, is the one a Cortex-M0 executes. Cortex-M4F code
runs on ``mps2-an386``.

Cycles. The M0 and M4 issue at most one instruction per cycle, so the count is a lower bound on
cycles with zero-wait-state memory. The estimate multiplies it by a typical cycles-per-instruction
figure, ``ASSUMED_CPI``, an assumption from the cores' published cycle tables as we remember them
(loads and stores 2 cycles, taken branches 2-3, everything else 1; the M4F's single-precision
add/multiply 1 cycle, divide 14), for compiled loop code with about a quarter loads and stores. Flash
wait states at higher clock rates add to it; measure on the part for a figure to rely on.
"""

from __future__ import annotations

import re
import statistics
import tempfile
from pathlib import Path

import numpy as np

from nodecast.compiler import toolchain
from nodecast.compiler.backends.c_board import board_files
from nodecast.compiler.errors import NodecastError

QEMU = "qemu-system-arm"
ICOUNT_SHIFT = 7
SYSTICK_NS = 40.0  # 25 MHz system clock on QEMU's MPS2 boards
TICKS_PER_INSTRUCTION = 2**ICOUNT_SHIFT / SYSTICK_NS
MAX_ROWS = 128
COUNT_CORES = {  # name: (footprint build whose flags are used, QEMU machine)
    "cortex-m0": ("cortex-m0", "mps2-an385"),
    "cortex-m4f": ("cortex-m4f", "mps2-an386"),
}
ASSUMED_CPI = {"cortex-m0": 1.5, "cortex-m4f": 1.3}
_WRAPPED = 0xFFFFFFFF
TIMEOUT = 600


def counting_rows(net, seed: int = 0) -> np.ndarray:
    """The in-domain verify probes (Sobol points, corners, near-bound rows), at most ``MAX_ROWS``
    of them (a seeded subsample, in their order)."""
    from nodecast.compiler.verify.probes import probe_families

    families = probe_families(net, count=MAX_ROWS // 2, seed=seed)
    rows = np.vstack([f.X for f in families if f.inside_domain])
    if rows.shape[0] > MAX_ROWS:
        keep = np.sort(np.random.default_rng([seed, 99]).choice(rows.shape[0], MAX_ROWS,
                                                                replace=False))
        rows = rows[keep]
    return rows


def parse_counts(text: str, n_rows: int) -> np.ndarray:
    """Instructions per row from the timed harness's lines (see ``templates/harness/main.c.j2``)."""
    lines = text.splitlines()
    match = re.fullmatch(r"calibrate (\d+)", lines[0]) if lines else None
    if match is None or len(lines) != n_rows + 2 or lines[-1] != "end":
        raise NodecastError(f"the timed harness printed {len(lines)} lines for {n_rows} rows; "
                            "the build or the emulated run broke off")
    empty = int(match.group(1))
    ticks = np.array([int(line.split()[1]) for line in lines[1:-1]], dtype=np.int64)
    if np.any(ticks == _WRAPPED) or empty == _WRAPPED:
        raise NodecastError("a prediction took more than 2^24 SysTick ticks (about 5 million "
                            "instructions); too long to count with this method")
    return np.rint((ticks - empty) / TICKS_PER_INSTRUCTION).astype(np.int64)


def count_instructions(files: dict[str, bytes], info: dict, X: np.ndarray, core: str) -> np.ndarray:
    """Instructions executed by each ``<prefix>_predict`` call on rows ``X`` on emulated ``core``.

    ``info`` holds ``prefix``, ``precision`` and ``n_inputs`` (as the C runner's ``describe``).
    """
    from nodecast.compiler.verify.runners.c_harness import harness_source

    build, machine = COUNT_CORES[core]
    compiler, qemu = toolchain.find(toolchain.ARM_CC), toolchain.find(QEMU)
    if compiler is None or qemu is None:
        raise NodecastError(f"counting instructions needs {toolchain.ARM_CC} and {QEMU}")
    flags = toolchain.FOOTPRINT_BUILDS[build][1]
    with tempfile.TemporaryDirectory(prefix="nodecast-count-") as tmp:
        folder = Path(tmp)
        for name, data in {**files, **board_files()}.items():
            (folder / name).write_bytes(data)
        (folder / "harness.c").write_bytes(harness_source(info, X, timed=True))
        toolchain.run([compiler, *flags, "-std=c99", *toolchain.REPRODUCIBLE, "-ffunction-sections",
                       "-fdata-sections", "-nostartfiles", "-T", "mps2.ld", "-Wl,--gc-sections",
                       "--specs=nosys.specs", "startup.c", f"{info['prefix']}.c", "harness.c",
                       "-o", "image.elf", "-lm", "-lc", "-lgcc"], cwd=folder)
        results = folder / "results.txt"
        toolchain.run([qemu, "-M", machine, "-icount", f"shift={ICOUNT_SHIFT}", "-nographic",
                       "-monitor", "none", "-serial", "none", "-chardev",
                       f"file,id=results,path={results}", "-semihosting-config",
                       "enable=on,target=native,chardev=results", "-kernel", "image.elf"],
                      cwd=folder, timeout=TIMEOUT)
        text = results.read_text(encoding="ascii", errors="replace") if results.exists() else ""
    return parse_counts(text, X.shape[0])


def summarise(counts: np.ndarray, core: str) -> dict:
    """Min/median/max instructions and the cycle estimate with its assumption."""
    median = float(statistics.median(counts.tolist()))
    return {"rows": int(counts.size), "min": int(counts.min()), "median": median,
            "max": int(counts.max()), "cycles_at_least": int(counts.min()),
            "cycles_estimate": round(median * ASSUMED_CPI[core]),
            "assumed_cpi": ASSUMED_CPI[core], "machine": COUNT_CORES[core][1],
            "flags": " ".join(toolchain.FOOTPRINT_BUILDS[COUNT_CORES[core][0]][1])}


def instruction_counts(files: dict[str, bytes], net, prefix: str, precision: str) -> dict:
    """Per core, the summary of :func:`summarise` over :func:`counting_rows`, or ``skipped``."""
    missing = [tool for tool in (toolchain.ARM_CC, QEMU) if toolchain.find(tool) is None]
    if missing:
        return {core: {"skipped": f"{' and '.join(missing)} not found"} for core in COUNT_CORES}
    X = counting_rows(net)
    info = {"prefix": prefix, "precision": precision, "n_inputs": net.n_features}
    figures = {}
    for core in COUNT_CORES:
        try:
            figures[core] = summarise(count_instructions(files, info, X, core), core)
        except NodecastError as exc:  # too long to count, or the build failed: emit goes on
            figures[core] = {"skipped": str(exc)}
    return figures


def format_counts(figures: dict) -> str:
    """Lines for ``nodecast emit`` and ``inspect``."""
    lines = ["instructions per prediction (emulated, QEMU -icount; min / median / max):"]
    for core, entry in figures.items():
        if "skipped" in entry:
            lines.append(f"  {core}: skipped ({entry['skipped']})")
            continue
        lines.append(f"  {core} ({entry['flags']}): {entry['min']} / {entry['median']:g} / "
                     f"{entry['max']} over {entry['rows']} probes; about "
                     f"{entry['cycles_estimate']} cycles (assumed {entry['assumed_cpi']} cycles "
                     f"per instruction, zero-wait-state memory; at least {entry['cycles_at_least']})")
    return "\n".join(lines)
