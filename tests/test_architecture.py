"""The package layout: one folder per pipeline stage, imports pointing one way.

Every ``import`` and ``from ... import`` inside ``seqmine/`` (function-local ones too) is
read with :mod:`ast`; a stage may import only from its own folder or from lower layers,
and no chain of module-level imports may come back to where it started.
"""

import ast
from pathlib import Path

import networkx as nx
import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "seqmine"

#: Layers from the bottom; a module may import from its own layer's folders (when the
#: pair is listed in ALLOWED_SIDEWAYS) or from any lower layer.
LAYERS = [
    {"errors", "_version"},
    {"_util", "config"},
    {"inputs"},
    {"encoding"},
    {"mining"},
    {"scoring"},
    {"phases"},
    {"validation"},
    {"detection"},
    {"reporting", "demo_data"},
    {"pipeline"},
    {"cli"},
    {"__main__"},
]
RANK = {name: i for i, names in enumerate(LAYERS) for name in names}


def _module_name(path):
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports():
    """(importing module, imported module, module level?) for every seqmine import."""
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    edges = []
    for name, path in modules.items():
        is_package = path.name == "__init__.py"
        tree = ast.parse(path.read_text(encoding="utf-8"))
        top_level = {id(n) for n in tree.body}
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = name.split(".") if is_package else name.split(".")[:-1]
                    base = base[:len(base) - (node.level - 1)]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                # "from . import _hmm" imports the submodule, not the package's names
                subs = [f"{target}.{a.name}" for a in node.names if f"{target}.{a.name}" in modules]
                candidates = subs or [target]
            elif isinstance(node, ast.Import):
                candidates = [a.name for a in node.names]
            else:
                continue
            for c in candidates:
                if c in modules and c != name:
                    edges.append((name, c, id(node) in top_level))
    return modules, edges


def _stage(module):
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "seqmine"


def test_every_stage_folder_has_a_layer():
    modules, _ = _imports()
    stages = {_stage(m) for m in modules} - {"seqmine"}
    assert stages <= set(RANK), f"give these a layer in LAYERS: {sorted(stages - set(RANK))}"


def _upward(edges):
    return sorted({(a, b) for a, b, _ in edges
                   if "seqmine" not in (_stage(a), _stage(b))
                   and RANK[_stage(b)] > RANK[_stage(a)]})


def test_imports_point_down_the_layers():
    _, edges = _imports()
    upward = _upward(edges)
    assert not upward, f"imports from a lower layer to a higher one: {upward}"


def test_no_import_cycle_between_modules():
    _, edges = _imports()
    graph = nx.DiGraph([(a, b) for a, b, top in edges if top])
    cycles = list(nx.simple_cycles(graph))
    assert not cycles, f"module-level import cycles: {cycles[:3]}"


def test_no_import_cycle_between_stage_folders():
    _, edges = _imports()
    graph = nx.DiGraph([(_stage(a), _stage(b)) for a, b, _ in edges
                        if _stage(a) != _stage(b) and "seqmine" not in (_stage(a), _stage(b))])
    assert not list(nx.simple_cycles(graph))


@pytest.mark.parametrize("edge", [("seqmine.mining.miner", "seqmine.scoring.contrast", False),
                                  ("seqmine.encoding.encoder", "seqmine.cli.main", True),
                                  ("seqmine.errors", "seqmine._util.checks", True)])
def test_the_layer_check_catches_an_upward_import(edge):
    # positive control: a made-up upward import is reported
    assert _upward([edge]) == [edge[:2]]
