"""Write docs/cli-reference.md from the CLI's own --help texts and the targets' option specs (a
test keeps it current).
Usage: python3 docs/make_cli_reference.py"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from nodecast.cli import cli
from nodecast.compiler.targets import TARGETS

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
    return "\n".join(parts + target_options()) + "\n"


def target_options() -> list[str]:
    """One table per target from :data:`nodecast.compiler.targets.TARGETS`: what ``emit`` (the
    command and ``nodecast.compiler.emit``) accepts; any other option is refused."""
    lines = ["", "## Options per target", "",
             "What `nodecast emit --to T` and `nodecast.compiler.emit(bundle, T, **options)` accept "
             "(from `compiler/targets.py`); any other option is refused, never dropped. The command "
             "line names them as flags (`out_of_domain` is `--out-of-domain`) and sets three C "
             "options itself: `prefix` defaults to the bundle's file name when that makes a C "
             "identifier, `instruction_count` is on unless `--no-instruction-count`, and "
             "`footprint` (Python API only) is always measured."]
    for name, spec in TARGETS.items():
        lines += ["", f"### {name}", "", "| option | values | default |", "| --- | --- | --- |",
                  f"| precision | {', '.join(spec.precisions)} | {spec.default_precision} |"]
        for option in spec.options:
            default = spec.default_text(option)
            if option.name == "opset":
                default = "the oldest the graph needs"
            lines.append(f"| {option.name} | {spec.values_text(option)} | {default} |")
    return lines


if __name__ == "__main__":
    TARGET.write_text(render(), encoding="utf-8")
    sys.stdout.write(f"wrote {TARGET}\n")
