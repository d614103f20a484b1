"""A real, non-editable wheel installs and runs: a missing package or template fails here."""

from __future__ import annotations

import os
import subprocess
import sys
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("dist")
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                    "-q", "-w", str(out), str(ROOT)], check=True, timeout=600,
                   env={**os.environ, "PIP_DISABLE_PIP_VERSION_CHECK": "1"})
    (path,) = out.glob("nodecast-*.whl")
    return path


@pytest.mark.slow
def test_wheel_holds_namespaced_packages_and_templates_only(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    top = {name.split("/")[0] for name in names if not name.startswith("nodecast-")}
    assert top == {"nodecast"}  # no bare trainer/ or compiler/ in site-packages
    templates = [name for name in names if name.startswith("nodecast/templates/")]
    sources = [str(p.relative_to(ROOT)).replace(os.sep, "/") for p in (ROOT / "templates").rglob("*")
               if p.is_file() and "__pycache__" not in p.parts and p.suffix != ".pyc"]
    assert sorted(f"nodecast/{s}" for s in sources) == sorted(templates)
    packages = {str(p.parent.relative_to(ROOT)) for p in ROOT.glob("*/**/__init__.py")
                if p.parts[len(ROOT.parts)] in ("cli", "trainer", "compiler", "templates")}
    assert "cli" in packages
    for package in packages:
        assert f"nodecast/{package}/__init__.py".replace(os.sep, "/") in names, package


def dependency_folders() -> list[str]:
    """The site-packages folders the running interpreter imports numpy and the rest from: the
    system's, a user's, or (when the suite runs from a virtual environment, as the README suggests
    on a distribution Python) that environment's, which a new environment's
    ``system_site_packages`` would not see (it sees the base interpreter's only)."""
    return [entry for entry in sys.path
            if Path(entry).name in ("site-packages", "dist-packages") and Path(entry).is_dir()]


@pytest.mark.slow
def test_wheel_in_fresh_venv_runs_the_demo(wheel, tmp_path):
    env_dir = tmp_path / "venv"
    venv.EnvBuilder(system_site_packages=True, with_pip=False).create(env_dir)
    python = env_dir / "bin" / "python"
    purelib = subprocess.run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                             capture_output=True, text=True, check=True).stdout.strip()
    # a path entry, not a site folder: the .pth files there (an editable nodecast) are not run,
    # and the environment's own site-packages, holding the wheel, comes first
    (Path(purelib) / "dependencies.pth").write_text("\n".join(dependency_folders()) + "\n")
    subprocess.run([sys.executable, "-m", "pip", "--python", str(python), "install", "--no-deps",
                    "-q", str(wheel)], check=True, timeout=600)
    where = subprocess.run([str(python), "-c", "import nodecast.compiler, nodecast.templates as t;"
                            "print(nodecast.compiler.__file__); print(t.__file__)"],
                           capture_output=True, text=True, check=True, cwd=tmp_path)
    assert all(str(env_dir) in line for line in where.stdout.split()), where.stdout
    result = subprocess.run([str(env_dir / "bin" / "nodecast"), "demo", "-o", str(tmp_path / "out")],
                            capture_output=True, text=True, timeout=600, cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert (tmp_path / "out" / "fan.onnx").is_file()
    assert "demo passed" in result.stdout
