"""Board support for running generated C bare metal on QEMU's MPS2 boards (Cortex-M3
``mps2-an385``, Cortex-M4F ``mps2-an386``): start-up code (vector table, FPU enable, .bss clearing,
semihosting output and exit) and a linker script. ``verify --emulate`` links them with its harness;
``emit --to c --bare-metal`` writes them beside the model for a firmware engineer's own main.c."""

from __future__ import annotations

from importlib import resources

from nodecast.compiler.version import __version__

STARTUP_FILE = "startup.c"
LINKER_SCRIPT = "mps2.ld"


def startup_source() -> bytes:
    from nodecast.templates import render

    return render("harness", "startup.c.j2", version=__version__).encode("ascii")


def linker_script() -> bytes:
    return resources.files("nodecast.templates").joinpath("harness", LINKER_SCRIPT).read_bytes()


def board_files() -> dict[str, bytes]:
    return {STARTUP_FILE: startup_source(), LINKER_SCRIPT: linker_script()}
