"""The layers of the house (issue: the house redesigned): the command line (``nodecast.cli``) sits on
the library; the library (``nodecast.compiler``, ``nodecast.trainer``) never imports it; the compiler
never imports the trainer (it reads only the network description); and no module imports, directly or
through others, a module that imports it back. Imports are read from the source (``ast``), including
those made inside functions, so a lazy import cannot hide a cycle."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).parent.parent
PACKAGES = {"cli": "nodecast.cli", "compiler": "nodecast.compiler", "trainer": "nodecast.trainer",
            "templates": "nodecast.templates"}


def module_files() -> dict[str, Path]:
    modules = {}
    for folder, package in PACKAGES.items():
        for path in sorted((ROOT / folder).rglob("*.py")):
            parts = path.relative_to(ROOT / folder).with_suffix("").parts
            name = ".".join((package, *parts)).removesuffix(".__init__")
            modules[name] = path
    return modules


MODULES = module_files()


def imports_of(path: Path) -> set[str]:
    """The project modules ``path`` imports: ``from a.b import c`` is a.b.c when c is a module, else
    a.b (a submodule's own parent package is initialised by Python, not chosen: not counted)."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("nodecast"):
            for alias in node.names:
                full = f"{node.module}.{alias.name}"
                found.add(full if full in MODULES else node.module)
        elif isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names if alias.name.startswith("nodecast"))
    return {name for name in found if name in MODULES}


GRAPH = {name: imports_of(path) - {name} for name, path in MODULES.items()}


def test_every_package_folder_is_read():
    assert {name.split(".")[1] for name in GRAPH} == set(PACKAGES)
    assert len(GRAPH) > 80


@pytest.mark.parametrize("layer", ["nodecast.compiler", "nodecast.trainer"])
def test_the_library_never_imports_the_command_line(layer):
    offending = {name: sorted(d for d in deps if d.startswith("nodecast.cli"))
                 for name, deps in GRAPH.items() if name.startswith(layer)}
    assert {name: deps for name, deps in offending.items() if deps} == {}


def test_the_compiler_never_imports_the_trainer():
    offending = {name: sorted(d for d in deps if d.startswith("nodecast.trainer"))
                 for name, deps in GRAPH.items() if name.startswith("nodecast.compiler")}
    assert {name: deps for name, deps in offending.items() if deps} == {}


def strongly_connected(graph: dict[str, set[str]]) -> list[list[str]]:
    """Tarjan's algorithm (iterative): the groups of modules that reach each other."""
    index, low, stack, on_stack, groups, counter = {}, {}, [], set(), [], [0]
    for root in sorted(graph):
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = counter[0]
        counter[0] += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is None:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[node])
                if low[node] == index[node]:
                    group = []
                    while True:
                        member = stack.pop()
                        on_stack.discard(member)
                        group.append(member)
                        if member == node:
                            break
                    if len(group) > 1:
                        groups.append(sorted(group))
            elif child not in index:
                index[child] = low[child] = counter[0]
                counter[0] += 1
                stack.append(child)
                on_stack.add(child)
                work.append((child, iter(sorted(graph[child]))))
            elif child in on_stack:
                low[node] = min(low[node], index[child])
    return groups


def test_the_cycle_finder_finds_a_cycle():
    assert strongly_connected({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]


def test_no_import_cycles():
    assert strongly_connected(GRAPH) == []
