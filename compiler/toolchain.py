"""C toolchains: finding the compilers, running them, and measuring what the generated C costs.

The host compiler is ``gcc`` (or ``$CC``); Cortex-M builds use ``arm-none-eabi-gcc`` with newlib.
Nothing here is needed to generate C: without a compiler, :func:`footprint` says what was skipped.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from nodecast.compiler.errors import NodecastError

ARM_CC = "arm-none-eabi-gcc"
REPRODUCIBLE = ("-ffp-contract=off",)  # no fused multiply-add: the same bits on every target
ARM_CPU_FLAGS = {
    "cortex-m0": ("-mcpu=cortex-m0", "-mthumb", "-mfloat-abi=soft"),
    "cortex-m3": ("-mcpu=cortex-m3", "-mthumb", "-mfloat-abi=soft"),
    "cortex-m4": ("-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=hard", "-mfpu=fpv4-sp-d16"),
}
FOOTPRINT_BUILDS = {  # name: (compiler, flags)
    "host": (None, ("-O2",)),
    "cortex-m0": (ARM_CC, ARM_CPU_FLAGS["cortex-m0"] + ("-Os",)),
    "cortex-m4f": (ARM_CC, ARM_CPU_FLAGS["cortex-m4"] + ("-O2",)),
}
TIMEOUT = 300


def host_compiler() -> str:
    """The host C compiler's name: ``$CC`` if set, else ``gcc``."""
    return os.environ.get("CC") or "gcc"


def find(name: str | None) -> str | None:
    """Full path of tool ``name`` (None: the host compiler), or None when it is not installed."""
    return shutil.which(name or host_compiler())


def binutil(compiler: str, tool: str) -> str:
    """The binutils program ``tool`` ("size", "nm") that goes with ``compiler``."""
    name = Path(compiler).name
    prefix = name[: -len("gcc")] if name.endswith("gcc") else ""
    return shutil.which(prefix + tool) or tool


def artifact_environment() -> dict[str, str]:
    """The environment generated code runs in during verify: no variables of the user's (tokens,
    credentials, library paths), only a plain PATH and the C locale."""
    env = {"PATH": os.defpath, "LC_ALL": "C"}
    if os.name == "nt":  # Windows programs need these to start
        env.update({k: os.environ[k] for k in ("SYSTEMROOT", "WINDIR") if k in os.environ})
    return env


def run(command: list[str], cwd: Path | None = None, stdin: bytes | None = None,
        timeout: float = TIMEOUT, env: dict[str, str] | None = None) -> bytes:
    """Run ``command`` and return its stdout; raise NodecastError with its first error lines.
    ``env``: the child's whole environment (None: this process's)."""
    try:
        done = subprocess.run(command, cwd=cwd, input=stdin, capture_output=True, timeout=timeout,
                              check=False, env=env)
    except FileNotFoundError:
        raise NodecastError(f"{command[0]} is not installed") from None
    except subprocess.TimeoutExpired:
        raise NodecastError(f"{Path(command[0]).name} did not finish within {timeout:g} s") \
            from None
    if done.returncode != 0:
        detail = " | ".join(done.stderr.decode("utf-8", "replace").strip().splitlines()[:6])
        raise NodecastError(f"{Path(command[0]).name} failed (exit {done.returncode}): {detail}")
    return done.stdout


def compile_object(compiler: str, source: Path, flags, cwd: Path) -> Path:
    """Compile one C file into an object file beside it."""
    obj = source.with_suffix(".o")
    run([compiler, *flags, "-c", source.name, "-o", obj.name], cwd=cwd)
    return obj


def section_sizes(compiler: str, obj: Path) -> dict[str, int]:
    """Bytes of code, constants, data and bss in an object (from ``size -A``)."""
    out = run([binutil(compiler, "size"), "-A", str(obj)]).decode()
    sizes = {"code": 0, "const": 0, "data": 0, "bss": 0}
    for name, size in re.findall(r"^(\.\S+)\s+(\d+)", out, flags=re.M):
        kind = next((k for k, start in (("code", ".text"), ("const", ".rodata"), ("data", ".data"),
                                        ("bss", ".bss")) if name.startswith(start)), None)
        if kind:
            sizes[kind] += int(size)
    return sizes


def undefined_symbols(compiler: str, obj: Path) -> list[str]:
    """Functions the object needs from elsewhere (libgcc helpers, libm)."""
    out = run([binutil(compiler, "nm"), "-u", str(obj)]).decode()
    return sorted(line.split()[-1] for line in out.splitlines() if line.strip())


def stack_bytes(su_file: Path, entry: str) -> int:
    """Stack of ``entry`` plus the deepest other function in the file (an upper bound for a file
    whose functions call one another at most one level deep, as the generated ones do)."""
    frames = {}
    for line in su_file.read_text().splitlines():
        location, size, _kind = line.rsplit("\t", 2)
        frames[location.rsplit(":", 1)[-1]] = int(size)
    own = frames.pop(entry, 0)
    return own + max(frames.values(), default=0)


def footprint(files: dict[str, bytes], prefix: str, uses_libm: bool = False) -> dict:
    """Sizes and stack of ``<prefix>.c`` built for the host and for Cortex-M0 and Cortex-M4F.

    Each build gives code, const (weights and tables), data and bss bytes, text (= code + const),
    the stack of ``<prefix>_predict`` and the outside functions it calls; a build whose compiler
    is missing is reported as skipped.
    """
    result = {}
    with tempfile.TemporaryDirectory(prefix="nodecast-size-") as tmp:
        folder = Path(tmp)
        for name, data in files.items():
            (folder / name).write_bytes(data)
        for build, (tool, flags) in FOOTPRINT_BUILDS.items():
            compiler = find(tool)
            if compiler is None:
                result[build] = {"skipped": f"{tool or host_compiler()} not found"}
                continue
            obj = compile_object(compiler, folder / f"{prefix}.c",
                                 ("-std=c99", *flags, *REPRODUCIBLE, "-fstack-usage"), folder)
            sizes = section_sizes(compiler, obj)
            sizes["text"] = sizes["code"] + sizes["const"]
            sizes["stack"] = stack_bytes(obj.with_suffix(".su"), f"{prefix}_predict")
            sizes["calls"] = undefined_symbols(compiler, obj)
            sizes["flags"] = " ".join(flags)
            result[build] = sizes
    if uses_libm:
        result["note"] = "stack excludes the C library's tanh"
    return result


def format_footprint(figures: dict, weight_bytes: int) -> str:
    """One line per build for ``nodecast emit``."""
    lines = [f"footprint: weights and tables {weight_bytes} B"]
    for build in FOOTPRINT_BUILDS:
        entry = figures.get(build, {})
        if "skipped" in entry:
            lines.append(f"  {build}: skipped ({entry['skipped']})")
        elif entry:
            calls = ", ".join(entry["calls"]) or "none"
            lines.append(f"  {build} ({entry['flags']}): text {entry['text']} B (code "
                         f"{entry['code']} B), data {entry['data']} B, bss {entry['bss']} B, "
                         f"stack {entry['stack']} B; external calls: {calls}")
    if "note" in figures:
        lines.append(f"  ({figures['note']})")
    return "\n".join(lines)
