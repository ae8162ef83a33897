"""The package layout keeps the properties DEVELOPERS.md promises: no import cycles between
modules, no private name imported across modules, no module much over 600 lines."""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "gridpop"
MAX_LINES = 660  # "about 600"


def _name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {_name(p): p for p in PACKAGE.rglob("*.py")}


def _imports(name: str, path: Path):
    """(module imported, names taken) of every import in the module, lazy ones included."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            for alias in node.names:
                sub = f"{mod}.{alias.name}"
                yield (sub, None) if sub in MODULES else (mod, alias.name)
        elif isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, None


def _graph() -> dict[str, set[str]]:
    return {name: {m for m, _ in _imports(name, path) if m in MODULES and m != name}
            for name, path in MODULES.items()}


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}

    def visit(node, trail):
        state[node] = 1
        for nxt in sorted(graph[node]):
            if nxt == "gridpop" or nxt.count(".") == 1 and MODULES[nxt].name == "__init__.py" \
                    and node.startswith(nxt + "."):
                continue  # a package's own __init__ is loaded first anyway
            if state.get(nxt) == 1:
                pytest.fail(f"import cycle: {' -> '.join(trail + [node, nxt])}")
            if nxt not in state:
                visit(nxt, trail + [node])
        state[node] = 2

    for name in sorted(graph):
        if name not in state:
            visit(name, [])


def test_no_private_name_imported_across_modules():
    taken = [(name, mod, n) for name, path in MODULES.items() for mod, n in _imports(name, path)
             if mod.startswith("gridpop") and n is not None and n.startswith("_")
             and n != "__version__"]
    assert taken == []


@pytest.mark.parametrize("name", sorted(MODULES))
def test_module_size(name):
    assert len(MODULES[name].read_text().splitlines()) <= MAX_LINES
