"""Jinja2 templates of the generated files (package data), and the one environment that renders
them: strict about undefined names, block tags trimmed, trailing newline kept, no autoescaping.
Templates hold layout only; numbers and user text arrive formatted and escaped by the back-ends."""

from __future__ import annotations

import functools


@functools.cache
def environment(folder: str):
    """The environment for the templates in ``folder`` ("c", "harness", "python")."""
    import jinja2

    return jinja2.Environment(loader=jinja2.PackageLoader("nodecast.templates", folder),
                              undefined=jinja2.StrictUndefined, trim_blocks=True,
                              lstrip_blocks=True, keep_trailing_newline=True, autoescape=False)


def render(folder: str, name: str, **context) -> str:
    return environment(folder).get_template(name).render(**context)
