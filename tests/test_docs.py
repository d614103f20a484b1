"""The docs that are generated stay in step with the code."""

from __future__ import annotations

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_cli_reference_matches_the_help_texts():
    spec = importlib.util.spec_from_file_location("make_cli_reference",
                                                  ROOT / "docs" / "make_cli_reference.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    committed = (ROOT / "docs" / "cli-reference.md").read_text(encoding="utf-8")
    assert committed == module.render(), "run: python3 docs/make_cli_reference.py"


def test_readme_opens_with_the_job_and_quick_start_has_two_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    first_paragraph = text.split("\n\n")[1]
    assert "trains" in first_paragraph and "proves" in first_paragraph
    quick = text.split("## Quick start", 1)[1].split("```sh", 1)[1].split("```", 1)[0]
    commands = [line for line in quick.strip().splitlines() if line.strip()]
    assert len(commands) == 2
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert commands[1].strip() in ci  # CI runs exactly the README's test command


def test_readme_apt_line_installs_what_ci_installs():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    line = next(text for text in readme.split("`") if "apt-get install" in text)
    ci = " ".join((ROOT / ".ci" / "run").read_text(encoding="utf-8").replace("\\\n", " ").split())
    ci_packages = ci.split("--no-install-recommends", 1)[1].split(">")[0].split()
    readme_packages = line.split("--no-install-recommends", 1)[1].split()
    assert set(ci_packages) <= set(readme_packages)
    assert set(readme_packages) - set(ci_packages) == {"python3-venv", "python3-pip"}
