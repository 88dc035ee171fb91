"""The layering rule: every package imports only itself and the packages before it.

    errors, units <- physics <- case <- model <- fem <- mesh <- run <- derived <- io <- cli

Every import of every module counts, including imports inside functions (an import
moved into a function to dodge a cycle is still a dependency). The root modules
``mesastrain/__init__``, ``__main__`` and ``api`` (the public facade) sit above every
layer. Optional heavy third-party libraries are outside the rule; so is the standard
library. This test parses the source (nothing is imported), so it also catches
imports in code paths no other test reaches.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[2] / "src" / "mesastrain"

#: The layers in order; a module may import its own layer and any layer before it.
LAYERS = ("errors", "units", "physics", "case", "model", "fem", "mesh", "run", "derived", "io",
          "cli", "<root>")
#: errors and units are one level: units may use errors and neither may use the other layers.
RANK = {name: i for i, name in enumerate(LAYERS)}
RANK["units"] = RANK["errors"] + 0.5


def layer_of(module: str) -> str:
    """Layer of a dotted module name inside mesastrain (``mesastrain.fem.solve`` -> fem)."""
    parts = module.split(".")
    if len(parts) == 1 or parts[1] in ("__init__", "__main__", "api"):
        return "<root>"
    return parts[1]


def module_name(path: Path, src: Path = SRC) -> str:
    rel = path.relative_to(src.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def imported_modules(path: Path, src: Path = SRC) -> list[tuple[int, str]]:
    """(line, absolute module name) of every mesastrain import in a file, at any depth."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    here = module_name(path, src)
    package = here if path.name == "__init__.py" else here.rsplit(".", 1)[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node.lineno, a.name) for a in node.names if a.name.split(".")[0] == "mesastrain"]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "mesastrain":
                continue
            if mod == "mesastrain":   # from mesastrain import x: x is the module imported
                out += [(node.lineno, f"mesastrain.{a.name}") for a in node.names
                        if a.name != "__version__"]
            else:
                out.append((node.lineno, mod))
    return out


def violations(src: Path = SRC) -> list[str]:
    """Every import against the rule, as 'file:line: layer imports layer (module)'."""
    bad = []
    for path in sorted(src.rglob("*.py")):
        own = layer_of(module_name(path, src))
        for line, mod in imported_modules(path, src):
            target = layer_of(mod)
            if target not in RANK:
                bad.append(f"{path.relative_to(src.parent)}:{line}: unknown layer of {mod}")
            elif RANK[target] > RANK[own]:
                bad.append(f"{path.relative_to(src.parent)}:{line}: {own} imports {target} ({mod})")
    return bad


def test_every_package_is_a_known_layer():
    packages = {p.name for p in SRC.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    modules = {p.stem for p in SRC.glob("*.py")} - {"__init__", "__main__", "api"}
    assert packages | modules <= set(LAYERS), sorted((packages | modules) - set(LAYERS))


def test_imports_follow_the_layers():
    bad = violations()
    assert not bad, "imports against the layering rule:\n" + "\n".join(bad)


def test_an_upward_import_is_caught(tmp_path):
    # the rule must be able to fail: plant a copy of the tree with one upward import
    import shutil

    copy = tmp_path / "mesastrain"
    shutil.copytree(SRC, copy, ignore=shutil.ignore_patterns("__pycache__", "data", "schemas"))
    target = copy / "physics" / "crystal.py"
    target.write_text(target.read_text(encoding="utf-8")
                      + "\n\ndef _late():\n    from mesastrain.run.pipeline import run_case\n",
                      encoding="utf-8")
    found = violations(copy)
    assert any("physics/crystal.py" in v and "physics imports run" in v for v in found), found


@pytest.mark.parametrize("module,layer", [("mesastrain.fem.solve", "fem"),
                                          ("mesastrain.errors", "errors"),
                                          ("mesastrain.api", "<root>"),
                                          ("mesastrain", "<root>")])
def test_layer_names(module, layer):
    assert layer_of(module) == layer


def import_cycles(src: Path = SRC) -> list[list[str]]:
    """Groups of modules that import each other, directly or around a loop (any depth)."""
    graph = {}
    for path in sorted(src.rglob("*.py")):
        name = module_name(path, src)
        graph[name] = {m for _, m in imported_modules(path, src)}
    known = set(graph)
    # an import of a package's __init__ counts as an import of that module only
    edges = {a: {b for b in bs if b in known and b != a} for a, bs in graph.items()}
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):   # Tarjan's strongly connected components
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in edges[v]:
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

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles():
    cycles = import_cycles()
    assert not cycles, "modules that import each other: " + "; ".join(" <-> ".join(c)
                                                                       for c in cycles)
