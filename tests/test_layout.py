"""The package reads top-down: no import cycle between modules or between folders,
and no module too long to read in one sitting."""
from __future__ import annotations

import ast
from pathlib import Path

from conftest import REPO

PACKAGE = REPO / "wsad"
MAX_LINES = 300


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(REPO).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports() -> dict[str, set[str]]:
    """Module -> the wsad modules it imports (at any depth of the file: lazy imports count)."""
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    for name, path in modules.items():
        pkg = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
        found = set()
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    anchor = pkg.split(".")[:len(pkg.split(".")) - node.level + 1]
                    base = ".".join(anchor + ([base] if base else []))
                targets = [f"{base}.{a.name}" for a in node.names] + [base]
            elif isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            else:
                continue
            found |= {t for t in targets if t in modules and t != name}
        graph[name] = found
    return graph


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        stack.append(n)
        for m in sorted(graph.get(n, ())):
            if state.get(m) == 1:
                return stack[stack.index(m):] + [m]
            if m not in state and (c := visit(m)):
                return c
        stack.pop()
        state[n] = 2
        return None

    for n in sorted(graph):
        if n not in state and (c := visit(n)):
            return c
    return None


def _folder(module: str) -> str:
    return ".".join(module.split(".")[:2])


def test_no_import_cycle_between_modules():
    # a package's __init__ re-exports its modules, so it is left out of the module graph
    graph = {n: {m for m in deps if not (PACKAGE / Path(*m.split(".")[1:]) / "__init__.py").is_file()}
             for n, deps in _imports().items()}
    assert _cycle(graph) is None, _cycle(graph)


def test_no_import_cycle_between_folders():
    # e.g. wsad.data must not import wsad.bags while wsad.bags imports wsad.data
    folders: dict[str, set[str]] = {}
    for n, deps in _imports().items():
        if n == "wsad":
            continue
        folders.setdefault(_folder(n), set()).update(_folder(m) for m in deps if _folder(m) not in (_folder(n), "wsad"))
    assert _cycle(folders) is None, _cycle(folders)


def test_modules_stay_short():
    long = {str(p.relative_to(REPO)): n for p in PACKAGE.rglob("*.py")
            if (n := len(p.read_text().splitlines())) > MAX_LINES}
    assert not long, long


def test_cycle_finder_finds_a_cycle():
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None
