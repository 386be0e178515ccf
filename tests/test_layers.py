"""The package's layers: imports point one way, down, with no circles (lazy imports included).

Reads every module's import statements with :mod:`ast` (nothing is imported or run). Imports
under ``if TYPE_CHECKING:`` are annotations only and do not count.
"""

from __future__ import annotations

import ast
from pathlib import Path

import loopcraft

ROOT = Path(loopcraft.__file__).parent

# Lower rank = lower layer. A module may import its own layer or lower ones only.
RANK = {
    "errors": 0, "_scalars": 0, "_version": 0, "_text": 0, "_files": 0,
    "model": 1, "_numbers": 1,
    "symbolic": 2,
    "numeric": 3,
    "analysis": 4,
    "parts": 5, "checks": 5, "report": 5,
    "design": 6, "synthesis": 7, "topologies": 7, "cli": 8, "widgets": 8, "__init__": 9,
}
# Known edges across layers, each with its reason. Moving them is the next step of the layering;
# the list may only shrink.
CROSS_LAYER_OK = {
    ("model.network", "symbolic.symbols"),  # a network's Z(s) is built on the shared component symbols
    ("model.stage", "symbolic.circuit"),    # a circuit stage checks its netlist by nodal analysis on load
    ("model.opamp", "numeric.factors"),     # models hand out their transfer function in factored form
    ("model.plant", "numeric.factors"),
}
# The facade may call the tools above it lazily (inside its methods); they must not import it back.
FACADE_LAZY_OK = {("design", "report"), ("design", "parts"), ("design", "checks"), ("design", "synthesis")}


def _modules() -> dict[str, Path]:
    out = {}
    for f in ROOT.rglob("*.py"):
        parts = f.relative_to(ROOT).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = f
    return out


def _layer(name: str) -> str:
    return name.split(".")[0] if name else "__init__"


def _type_checking_nodes(tree: ast.AST) -> set[int]:
    skip: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.dump(node.test):
            for sub in node.body:
                for n in ast.walk(sub):
                    skip.add(id(n))
    return skip


def _edges() -> dict[str, set[tuple[str, bool]]]:
    mods = _modules()
    edges: dict[str, set[tuple[str, bool]]] = {m: set() for m in mods}
    for m, f in mods.items():
        tree = ast.parse(f.read_text(encoding="utf-8"))
        skip = _type_checking_nodes(tree)
        top = {id(n) for n in tree.body}
        pkg = m.split(".") if f.name == "__init__.py" else m.split(".")[:-1]
        pkg = [p for p in pkg if p]
        for node in ast.walk(tree):
            if id(node) in skip or not isinstance(node, ast.ImportFrom):
                continue
            if node.level:
                base = pkg[: len(pkg) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            elif node.module and node.module.startswith("loopcraft"):
                target = node.module[len("loopcraft."):] if node.module != "loopcraft" else ""
            else:
                continue
            for cand in [target] + [f"{target}.{a.name}".lstrip(".") for a in node.names]:
                if cand in mods and cand != m:
                    edges[m].add((cand, id(node) not in top))
    return edges


def test_no_import_circles():
    edges = _edges()
    graph = {m: {t for t, _lazy in ts} for m, ts in edges.items()}
    seen: dict[str, int] = {}
    stack: list[str] = []

    def visit(v: str) -> None:
        seen[v] = 1
        stack.append(v)
        for w in graph[v]:
            if seen.get(w) == 1:
                raise AssertionError("import circle: " + " → ".join(stack[stack.index(w):] + [w]))
            if w not in seen:
                visit(w)
        stack.pop()
        seen[v] = 2

    for v in sorted(graph):
        if v not in seen:
            visit(v)


def test_imports_point_down():
    bad = []
    for m, targets in _edges().items():
        lm = _layer(m)
        for t, lazy in targets:
            lt = _layer(t)
            if lm == lt or (lazy and (lm, lt) in FACADE_LAZY_OK) or (m, t) in CROSS_LAYER_OK:
                continue
            if RANK[lt] > RANK[lm]:
                bad.append(f"{m} ({lm}) imports {t} ({lt})")
    assert not bad, "imports pointing up:\n" + "\n".join(sorted(bad))


def test_only_widgets_import_the_widget_stack_and_only_report_imports_matplotlib():
    for name, f in _modules().items():
        text = f.read_text(encoding="utf-8")
        if not name.startswith("widgets"):
            assert "import ipywidgets" not in text and "import bqplot" not in text, name
        if not name.startswith("report"):
            assert "import matplotlib" not in text and "from matplotlib" not in text, name


def test_layers_are_visible_from_the_top_folder():
    top = {p.name for p in ROOT.iterdir() if not p.name.startswith((".", "__pycache__"))}
    for layer in ("model", "symbolic", "numeric", "analysis", "synthesis", "parts", "checks", "report", "cli",
                  "widgets"):
        assert (ROOT / layer / "__init__.py").is_file(), layer
    public_modules = {p for p in top if p.endswith(".py") and not p.startswith("_")}
    assert public_modules == {"design.py", "errors.py", "topologies.py"}, public_modules
