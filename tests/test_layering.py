"""The package's shape: layers that only import downward, no cycle among module-level imports,
no private name imported from another module, no function over 100 lines (the house rules of
DEVELOPERS.md, checked with ast)."""

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


# The layers, lowest first: a module may import from its own layer and the ones below it,
# never from one above (every import counts, those inside functions too). DEVELOPERS.md's
# architecture table lists the same folders in the same order.
LAYERS = [
    {"bigpanel.errors", "bigpanel.options", "bigpanel.version"},
    {"bigpanel.sql"},
    {"bigpanel.engines"},
    {"bigpanel.model"},
    {"bigpanel.passes"},
    {"bigpanel.numerics"},
    {"bigpanel.results"},
    {"bigpanel.estimators"},
    {"bigpanel.output"},
    {"bigpanel.api", "bigpanel.cli", "bigpanel.command", "bigpanel.progress", "bigpanel.describe",
     "bigpanel.bench", "bigpanel.demo", "bigpanel.shapes", "bigpanel.rerun", "bigpanel", "bigpanel.__main__"},
]
LONGEST_FUNCTION = 100


def _layer(module: str) -> int:
    for depth, members in enumerate(LAYERS):
        if module in members or any(module.startswith(m + ".") for m in members if m != "bigpanel"):
            return depth
    raise AssertionError(f"{module} belongs to no layer: add it to LAYERS and to DEVELOPERS.md")


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


def test_every_module_imports_only_its_own_layer_or_below():
    upward = [f"{_module(p)} (layer {_layer(_module(p))}) imports {target} (layer {_layer(target)})"
              for p in _files() for target, _ in _imports(p, top_level_only=False)
              if target.startswith("bigpanel") and _layer(target) > _layer(_module(p))]
    assert upward == []


def test_no_function_is_longer_than_a_screenful():
    long = [f"{_module(p)}.{node.name}: {node.end_lineno - node.lineno + 1} lines" for p in _files()
            for node in ast.walk(ast.parse(p.read_text()))
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef))
            and node.end_lineno - node.lineno + 1 > LONGEST_FUNCTION]
    assert long == []


def test_the_command_line_lists_every_estimator():
    # options.ESTIMATORS feeds --help without importing the estimators; it must name each class
    from bigpanel.api import ESTIMATOR_CLASSES
    from bigpanel.options import ESTIMATORS

    assert tuple(ESTIMATOR_CLASSES) == ESTIMATORS
