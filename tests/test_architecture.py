"""The package's shape: every import goes to the same or a lower layer, no module imports
itself round a circle, no private name is used outside its module, and no module imports
refine's own code inside a function. The layers, lowest first, are listed in DEVELOPERS.md."""

from __future__ import annotations

import ast
from pathlib import Path

from conftest import ROOT

PACKAGE = ROOT / "refine"

LAYERS = [
    (
        "refine._validate",
        "refine._typing",
        "refine._roots",
        "refine.allocator",
        "refine.validity",
        "refine.version",
    ),
    ("refine.physics",),
    ("refine.spec",),
    ("refine.circuit",),
    ("refine.synthesis",),
    ("refine.optimise",),
    ("refine.tolerance",),
    ("refine.outputs",),
    ("refine.study",),
    ("refine.fullwave",),
    ("refine.commands",),
    ("refine.cli", "refine"),
]


def _module(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _layer(module: str) -> int:
    best, best_len = -1, -1
    for k, names in enumerate(LAYERS):
        for name in names:
            if (module == name or module.startswith(name + ".")) and len(name) > best_len:
                best, best_len = k, len(name)
    assert best >= 0, f"{module} is in no layer"
    return best


def _imports(path: Path) -> list[tuple[str, list[str], bool]]:
    """(module imported, names imported, whether the import is inside a function)."""
    tree = ast.parse(path.read_text())
    inside: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            for sub in ast.walk(node):
                inside.add(id(sub))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module == "refine" or node.module.startswith("refine."):
                names = [a.name for a in node.names]
                out.append((node.module, names, id(node) in inside))
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("refine"):
                    out.append((a.name, [], id(node) in inside))
    return out


FILES = sorted(p for p in PACKAGE.rglob("*.py") if p.name != "_solver_script.py")
MODULES = {_module(p) for p in FILES}


def _target(module: str, name: str) -> str:
    sub = f"{module}.{name}"
    return sub if sub in MODULES else module


def test_every_import_goes_to_the_same_or_a_lower_layer():
    bad = []
    for path in FILES:
        me = _module(path)
        for module, names, _ in _imports(path):
            for target in {_target(module, n) for n in names} or {module}:
                if _layer(target) > _layer(me):
                    bad.append(f"{me} imports {target}")
    assert not bad, bad


def test_no_import_circle():
    graph = {
        _module(p): {_target(m, n) for m, ns, _ in _imports(p) for n in ns or [""]} & MODULES
        for p in FILES
    }
    state: dict[str, int] = {}

    def visit(m: str, stack: list[str]) -> None:
        state[m] = 1
        for n in sorted(graph.get(m, ())):
            if n == m or n == "refine":
                continue
            assert state.get(n) != 1, " -> ".join([*stack, m, n])
            if n not in state:
                visit(n, [*stack, m])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [])


# the one exception: the command line loads a verb's modules when the verb runs (start-up time)
LAZY = {("refine.cli", "refine")}


def test_no_function_local_import_of_refine():
    local = [
        f"{_module(p)}: {m}"
        for p in FILES
        for m, _, inside in _imports(p)
        if inside and (_module(p), m) not in LAZY
    ]
    assert not local, local


def _private_attributes(path: Path) -> list[str]:
    """``alias._name`` where ``alias`` is one of refine's modules imported into ``path``."""
    tree = ast.parse(path.read_text())
    aliases = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            for a in node.names:
                if f"{node.module}.{a.name}" in MODULES:
                    aliases[a.asname or a.name] = f"{node.module}.{a.name}"
    return [
        f"{aliases[node.value.id]}.{node.attr}"
        for node in ast.walk(tree)
        if isinstance(node, ast.Attribute)
        and isinstance(node.value, ast.Name)
        and node.value.id in aliases
        and node.attr.startswith("_")
        and not node.attr.startswith("__")
    ]


def test_no_private_name_is_used_outside_its_module():
    used = []
    for path in [*FILES, *sorted((ROOT / "tests").rglob("*.py"))]:
        for module, names, _ in _imports(path):
            used += [f"{_module(path)}: {module}.{n}" for n in names if n.startswith("_")]
        used += [f"{_module(path)}: {name}" for name in _private_attributes(path)]
    used = [u for u in used if not u.endswith("._validate")]  # the shared checks, by design
    assert not used, used
