"""The import graph of the project's packages, read from the source (every import statement, also those inside
functions), and the checks the layering test applies to it."""

from __future__ import annotations

import ast
import sys
from dataclasses import dataclass
from pathlib import Path

__all__ = ["Import", "read_graph", "cycles", "wrong_way"]


@dataclass(frozen=True)
class Import:
    """One import: the importing module, the module (internal, dotted) or top-level package (external) imported,
    whether it is internal, and where (file:line)."""

    source: str
    target: str
    internal: bool
    where: str


def _modules(root: Path, packages) -> dict[str, Path]:
    out = {}
    for pkg in packages:
        for path in sorted((root / pkg).rglob("*.py")):
            rel = path.relative_to(root).with_suffix("")
            parts = list(rel.parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(parts)] = path
    return out


def _resolve(name: str, modules) -> str | None:
    """The longest dotted prefix of ``name`` that is one of ``modules``."""
    parts = name.split(".")
    for k in range(len(parts), 0, -1):
        cand = ".".join(parts[:k])
        if cand in modules:
            return cand
    return None


def read_graph(root: Path, packages=("analysis", "dashboard")) -> list[Import]:
    """Every import of every module under ``root/<package>`` (relative imports resolved)."""
    modules = _modules(root, packages)
    out = []
    for name, path in modules.items():
        is_pkg = path.name == "__init__.py"
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base_parts = name.split(".") if is_pkg else name.split(".")[:-1]
                    base_parts = base_parts[: len(base_parts) - (node.level - 1)]
                    base = ".".join(base_parts + ([node.module] if node.module else []))
                else:
                    base = node.module or ""
                # ``from pkg import sub`` imports the module pkg.sub when there is one, else names of pkg
                targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in modules else base for a in node.names]
            for t in targets:
                hit = _resolve(t, modules)
                where = f"{path.relative_to(root)}:{node.lineno}"
                if hit is not None:
                    if hit != name:
                        out.append(Import(name, hit, True, where))
                else:
                    out.append(Import(name, t.split(".")[0], False, where))
    return out


def cycles(imports: list[Import]) -> list[list[str]]:
    """The circles of internal imports: each strongly connected component of more than one module (Tarjan)."""
    graph: dict[str, set[str]] = {}
    for i in imports:
        if i.internal:
            graph.setdefault(i.source, set()).add(i.target)
            graph.setdefault(i.target, set())
    index, low, on, stack, out = {}, {}, set(), [], []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(max(limit, 10 * len(graph) + 100))
    try:
        for v in sorted(graph):
            if v not in index:
                visit(v)
    finally:
        sys.setrecursionlimit(limit)
    return sorted(out)


def _in(name: str, prefixes) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def wrong_way(imports: list[Import], rules) -> list[str]:
    """Imports that break a rule. rules: [(what, from prefixes, forbidden internal prefixes, allowed internal
    prefixes or None, allowed external packages or None)]; an import breaks a rule when its source is under one
    of the from-prefixes and its target is forbidden, or not allowed when an allowed list is given."""
    out = []
    for what, sources, forbidden, allowed, externals in rules:
        for i in imports:
            if not _in(i.source, sources):
                continue
            if i.internal:
                bad = _in(i.target, forbidden) or (allowed is not None and not _in(i.target, allowed))
            else:
                bad = _in(i.target, forbidden) or (externals is not None and i.target not in externals
                                                   and i.target not in sys.stdlib_module_names)
            if bad:
                out.append(f"{what}: {i.where} {i.source} imports {i.target}")
    return sorted(set(out))
