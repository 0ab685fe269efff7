"""The package layout keeps its promises: privacy by module, no import cycle, no package holding most of the code.

Every module of ``rulefeat`` is parsed with :mod:`ast` (nothing is imported).  A private name (``_x``) may be used
only inside the module that defines it: ``from m import _x`` and ``m._x`` across modules fail.  Imports inside
functions count for the cycle check too, so a cycle cannot hide behind a deferred import.
"""

from __future__ import annotations

import ast
from pathlib import Path

import rulefeat

ROOT = Path(rulefeat.__file__).resolve().parent


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {module_name(p): p for p in sorted(ROOT.rglob("*.py"))}
TREES = {name: ast.parse(path.read_text(encoding="utf-8")) for name, path in MODULES.items()}


def is_package(name: str) -> bool:
    return MODULES[name].name == "__init__.py"


def absolute(name: str, node: ast.ImportFrom) -> str:
    """The module an ``from ... import`` statement in module ``name`` reads from."""
    if node.level == 0:
        return node.module or ""
    base = name.split(".") if is_package(name) else name.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports(name: str) -> list[tuple[int, str, str | None]]:
    """(line, module, imported name or None) for every import in the module, top-level or not."""
    found = []
    for node in ast.walk(TREES[name]):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name, None) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            source = absolute(name, node)
            for alias in node.names:
                if f"{source}.{alias.name}" in MODULES:  # `from pkg import module`
                    found.append((node.lineno, f"{source}.{alias.name}", None))
                else:
                    found.append((node.lineno, source, alias.name))
    return found


def module_aliases(name: str) -> dict[str, str]:
    """Local names bound to rulefeat modules (``from . import x``, ``import a.b as c``)."""
    aliases = {}
    for node in ast.walk(TREES[name]):
        if isinstance(node, ast.ImportFrom):
            source = absolute(name, node)
            for alias in node.names:
                if f"{source}.{alias.name}" in MODULES:
                    aliases[alias.asname or alias.name] = f"{source}.{alias.name}"
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name in MODULES and alias.asname:
                    aliases[alias.asname] = alias.name
    return aliases


def private(name: str) -> bool:
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def test_no_module_imports_a_private_name_of_another_module():
    offenders = []
    for name in MODULES:
        for line, source, imported in imports(name):
            if imported is not None and source.startswith("rulefeat") and private(imported):
                offenders.append(f"{name}:{line}: from {source} import {imported}")
        aliases = module_aliases(name)
        for node in ast.walk(TREES[name]):
            if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in aliases
                    and private(node.attr)):
                offenders.append(f"{name}:{node.lineno}: {node.value.id}.{node.attr} ({aliases[node.value.id]})")
    assert offenders == []


def test_the_private_name_check_sees_a_violation():
    """The checks above parse real code: a made-up module that breaks the rule is caught."""
    tree = ast.parse("from .units import _helper\n")
    node = tree.body[0]
    assert absolute("rulefeat.mined.counts", node) == "rulefeat.mined.units"
    assert private("_helper") and not private("__version__") and not private("helper")


def edges() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {name: set() for name in MODULES}
    for name in MODULES:
        for _, source, imported in imports(name):
            if not source.startswith("rulefeat"):
                continue
            target = f"{source}.{imported}" if imported and f"{source}.{imported}" in MODULES else source
            if target in MODULES and target != name:
                graph[name].add(target)
    return graph


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import cycle as a list of modules (depth-first search), or None."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt):] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state:
            found = visit(node)
            if found:
                return found
    return None


def test_no_import_cycle_counting_function_level_imports():
    graph = edges()
    # A package's __init__ re-exports its modules; a module reaching back into its own package's __init__
    # would close a cycle, and is reported like any other.
    assert find_cycle(graph) is None, " -> ".join(find_cycle(graph))


def test_the_cycle_finder_finds_a_cycle():
    assert find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert find_cycle({"a": {"b"}, "b": set()}) is None


def lines_of(path: Path) -> int:
    return sum(1 for line in path.read_text(encoding="utf-8").splitlines() if line.strip())


def test_no_package_holds_30_percent_of_the_lines():
    """Each top-level package (with its sub-packages) holds under 30 % of the non-blank lines of rulefeat."""
    total = sum(lines_of(path) for path in MODULES.values())
    per_package: dict[str, int] = {}
    for name, path in MODULES.items():
        parts = name.split(".")
        if len(parts) > 2 or (len(parts) == 2 and is_package(name)):
            per_package[parts[1]] = per_package.get(parts[1], 0) + lines_of(path)
    shares = {package: count / total for package, count in per_package.items()}
    assert max(shares.values()) < 0.30, shares
