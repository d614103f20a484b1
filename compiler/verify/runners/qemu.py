"""Run a generated C artifact on an emulated Cortex-M: link it with the bare-metal harness of
``templates/harness`` (start-up code, linker script for QEMU's MPS2 boards, semihosting output)
into one image holding every input row, and run that image once in ``qemu-system-arm``.

Cortex-M3 runs on ``mps2-an385`` with soft float; Cortex-M4 on ``mps2-an386`` with its FPU (single
precision in hardware, double in software), enabled by the start-up code.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

from nodecast.compiler import toolchain
from nodecast.compiler.backends.c_board import board_files
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify.runners.c_harness import harness_source

QEMU = "qemu-system-arm"
MACHINES = {"cortex-m3": "mps2-an385", "cortex-m4": "mps2-an386"}
QEMU_TIMEOUT = 900


def build_image(path: Path, X: np.ndarray, info: dict, folder: Path) -> Path:
    """Link the artifact, the harness with rows ``X`` and the start-up code into an ELF image."""
    compiler = toolchain.find(toolchain.ARM_CC)
    if compiler is None:
        raise NodecastError(f"--emulate needs {toolchain.ARM_CC} (and newlib); it was not found")
    prefix = info["prefix"]
    for name in (f"{prefix}.h", f"{prefix}.c"):
        (folder / name).write_bytes((path / name).read_bytes())
    (folder / "harness.c").write_bytes(harness_source(info, X))
    for name, data in board_files().items():
        (folder / name).write_bytes(data)
    flags = toolchain.ARM_CPU_FLAGS[info["emulate"]]
    toolchain.run([compiler, *flags, "-std=c99", "-O2", *toolchain.REPRODUCIBLE,
                   "-ffunction-sections", "-fdata-sections", "-nostartfiles", "-T", "mps2.ld",
                   "-Wl,--gc-sections", "--specs=nosys.specs", "startup.c", f"{prefix}.c",
                   "harness.c", "-o", "image.elf", "-lm", "-lc", "-lgcc"], cwd=folder)
    return folder / "image.elf"


def run_emulated(path: Path, X: np.ndarray, info: dict) -> str:
    """The harness's output for rows ``X`` on the emulated CPU ``info["emulate"]``."""
    qemu = toolchain.find(QEMU)
    if qemu is None:
        raise NodecastError(f"--emulate needs {QEMU}; it was not found")
    with tempfile.TemporaryDirectory(prefix="nodecast-qemu-") as tmp:
        image = build_image(path, X, info, Path(tmp))
        results = Path(tmp) / "results.txt"
        command = [qemu, "-M", MACHINES[info["emulate"]], "-nographic", "-monitor", "none",
                   "-serial", "none", "-chardev", f"file,id=results,path={results}",
                   "-semihosting-config", "enable=on,target=native,chardev=results",
                   "-kernel", str(image)]
        toolchain.run(command, cwd=Path(tmp), timeout=QEMU_TIMEOUT)
        return results.read_text(encoding="ascii", errors="replace") if results.exists() else ""
