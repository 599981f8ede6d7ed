"""The package layout is the map of the data flow: imports run one way, with no circle.

Layers, bottom to top: units and errors; chemistry; inputs; review; well; fit; decide; report;
the public API and the command line. A module may import its own layer and the layers below
it, and the package root for ``CAUTIONS`` and ``__version__`` (which imports nothing eagerly).
"""

from __future__ import annotations

import ast
from pathlib import Path

import blendq

PACKAGE = Path(blendq.__file__).parent
LAYERS = [
    {"blendq.units", "blendq.errors", "blendq.csvtext"},
    {"blendq.chemistry"},
    {"blendq.inputs"},
    {"blendq.review"},
    {"blendq.well"},
    {"blendq.fit"},
    {"blendq.decide"},
    {"blendq.report"},
    {"blendq.api", "blendq.cli", "blendq.__main__"},
]


def _modules() -> dict[str, Path]:
    mods = {}
    for f in PACKAGE.rglob("*.py"):
        parts = ["blendq", *f.relative_to(PACKAGE).with_suffix("").parts]
        if parts[-1] == "__init__":
            parts = parts[:-1]
        mods[".".join(parts)] = f
    return mods


def _imports(name: str, path: Path, mods: dict[str, Path]) -> set[str]:
    """Package modules that ``name`` imports (anywhere in the file, lazily or not)."""
    out = set()
    package = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        targets = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = (".".join(package[: len(package) - node.level + 1] + [node.module or ""])
                    .rstrip(".") if node.level else node.module or "")
            targets = [base] + [f"{base}.{a.name}" for a in node.names]
        for t in targets:
            while t and t not in mods:
                t = t.rpartition(".")[0]
            if t and t != name and t != "blendq":
                out.add(t)
    return out


def _layer(name: str) -> int:
    for k, layer in enumerate(LAYERS):
        if any(name == top or name.startswith(top + ".") for top in layer):
            return k
    raise AssertionError(f"module {name} belongs to no layer: add it to LAYERS")


def test_every_module_belongs_to_a_layer():
    for name in _modules():
        if name != "blendq":
            _layer(name)


def test_imports_run_down_the_layers():
    mods = _modules()
    upward = []
    for name, path in mods.items():
        if name == "blendq":
            continue
        for target in _imports(name, path, mods):
            if _layer(target) > _layer(name):
                upward.append(f"{name} -> {target}")
    assert not upward, "imports that run up the pipeline: " + "; ".join(sorted(upward))


def test_no_import_circle():
    mods = _modules()
    graph = {m: _imports(m, p, mods) for m, p in mods.items()}
    circles = []
    for start in graph:  # depth-first search for a path back to the start
        stack, seen = [(start, [start])], set()
        while stack:
            node, path = stack.pop()
            for nxt in graph.get(node, ()):
                if nxt == start:
                    circles.append(" -> ".join([*path, start]))
                elif nxt not in seen:
                    seen.add(nxt)
                    stack.append((nxt, [*path, nxt]))
    assert not circles, "import circles: " + "; ".join(sorted(set(circles))[:5])


def test_the_root_package_imports_nothing_heavy():
    root = (PACKAGE / "__init__.py").read_text(encoding="utf-8")
    tree = ast.parse(root)
    eager = [n for n in tree.body if isinstance(n, ast.Import | ast.ImportFrom)
             and not (isinstance(n, ast.ImportFrom) and n.module == "__future__")]
    assert not eager, "blendq/__init__.py imports eagerly; keep `import blendq` light"


def test_each_package_says_what_it_may_import():
    for init in PACKAGE.rglob("__init__.py"):
        if init.parent == PACKAGE:
            continue
        doc = ast.get_docstring(ast.parse(init.read_text(encoding="utf-8"))) or ""
        assert "May import" in doc, f"{init.relative_to(PACKAGE)} lacks its two-line docstring"
