"""The package's imports: no cycle among module-level imports, and no private name imported
from another module (issue 13's house rules; a fact of this code base, checked with ast)."""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "bigpanel"


def _module(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path, top_level_only: bool) -> list[tuple[str, list[str]]]:
    """(module imported from, names) for each relative import of ``path``."""
    tree = ast.parse(path.read_text())
    nodes = tree.body if top_level_only else list(ast.walk(tree))
    here = _module(path).split(".")
    package = here if path.name == "__init__.py" else here[:-1]
    found = []
    for node in nodes:
        if isinstance(node, ast.ImportFrom) and node.level:
            base = package[: len(package) - node.level + 1]
            target = ".".join(base + ([node.module] if node.module else []))
            found.append((target, [a.name for a in node.names]))
    return found


def _files() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def test_no_private_name_is_imported_from_another_module():
    offenders = [f"{_module(p)} imports {name} from {target}" for p in _files()
                 for target, names in _imports(p, top_level_only=False) for name in names
                 if name.startswith("_") and not name.endswith("__") and target != _module(p)]
    assert offenders == []


def test_module_level_imports_have_no_cycle():
    graph = {_module(p): {t for t, _ in _imports(p, top_level_only=True)} for p in _files()}
    graph = {m: {t for t in targets if t in graph and t != m} for m, targets in graph.items()}
    state: dict[str, int] = {}
    cycles = []

    def visit(m: str, stack: list[str]) -> None:
        state[m] = 1
        for t in sorted(graph[m]):
            if state.get(t) == 1:
                cycles.append(" -> ".join(stack[stack.index(t):] + [t]) if t in stack else t)
            elif t not in state:
                visit(t, stack + [t])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert cycles == []
