"""Write docs/cli-reference.md from the CLI's own --help texts (a test keeps it current).
Usage: python3 docs/make_cli_reference.py"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from nodecast.cli import cli

TARGET = Path(__file__).with_name("cli-reference.md")


def _help(command: click.Command, name: str, parent: click.Context | None = None) -> str:
    # the group's context settings (help option names, width) reach every command, as at run time
    settings = {**cli.context_settings, "terminal_width": 100, "max_content_width": 100}
    context = click.Context(command, info_name=name, parent=parent, **settings)
    return command.get_help(context)


def render() -> str:
    parts = ["# Command reference", "",
             "Generated from `nodecast --help` and each command's `--help` by "
             "`python3 docs/make_cli_reference.py`; do not edit by hand.", "",
             "```text", _help(cli, "nodecast"), "```"]
    for name in sorted(cli.commands):
        parent = click.Context(cli, info_name="nodecast", **cli.context_settings)
        parts += ["", f"## nodecast {name}", "", "```text",
                  _help(cli.commands[name], name, parent), "```"]
    return "\n".join(parts) + "\n"


if __name__ == "__main__":
    TARGET.write_text(render(), encoding="utf-8")
    sys.stdout.write(f"wrote {TARGET}\n")
