"""The layering of the packages (design at the bottom; codegen and plant above it, never
importing each other; harness on top) and no import cycles, read from the source with ast."""

from __future__ import annotations

import ast

from .helpers import ROOT

PACKAGES = ("design", "codegen", "plant", "harness", "c_templates")
# what each package may import of the project (besides itself)
ALLOWED = {
    "design": set(),
    "c_templates": set(),
    "codegen": {"design", "c_templates"},
    "plant": {"design"},
    "harness": {"design", "codegen", "plant", "c_templates"},
}


def _module_name(path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path, module: str) -> set[str]:
    """Project modules imported by the file at ``path`` (absolute and relative, at any depth,
    inside functions too)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    is_pkg = path.name == "__init__.py"
    base = module.split(".") if is_pkg else module.split(".")[:-1]
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                head = base[: len(base) - node.level + 1]
                name = ".".join(head + ([node.module] if node.module else []))
            else:
                name = node.module or ""
            # "from pkg import sub" imports the submodule; "from mod import name" the module
            out |= {f"{name}.{a.name}" for a in node.names}
    return {m for m in out if m.split(".")[0] in PACKAGES}


def _graph() -> dict[str, set[str]]:
    files = [p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py")]
    mods = {_module_name(p): p for p in files}
    graph = {}
    for name, path in mods.items():
        targets = set()
        for imp in _imports(path, name):
            while imp and imp not in mods:  # "a.b.c" may name an attribute of module "a.b"
                imp = imp.rpartition(".")[0]
            if imp and imp != name:
                targets.add(imp)
        graph[name] = targets
    return graph


def test_no_import_climbs():
    bad = []
    for mod, targets in _graph().items():
        pkg = mod.split(".")[0]
        for t in targets:
            other = t.split(".")[0]
            if other != pkg and other not in ALLOWED[pkg]:
                bad.append(f"{mod} imports {t}")
    assert not bad, bad


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(node, stack):
        state[node] = 1
        for t in sorted(graph[node]):
            if state.get(t) == 1:
                cycles.append(stack[stack.index(t) :] + [t])
            elif t not in state:
                visit(t, stack + [t])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert not cycles, cycles


def test_the_graph_is_read():
    """The walk finds the project's own imports (a guard against a test that cannot fail)."""
    g = _graph()
    assert "design.config" in g["design.project"]
    assert "design.contract" in g["plant.layout"]
    assert "codegen.render" in g["codegen.build"]
