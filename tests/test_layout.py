"""The package's layout holds: imports point down the pipeline, no cycles, no import tucked
inside a function without its reason written beside it, no thousand-line rooms, and every
Python path the README names exists.

The stages, lowest first, are those of DEVELOPERS.md's architecture map.
"""

from __future__ import annotations

import ast
import importlib
import re
from pathlib import Path

import pytest

import rxlog
from rxlog import api

ROOT = Path(rxlog.__file__).parent
STAGES = ["core", "sky", "receive", "archive", "sim", "store", "detect", "review", "exchange", "season",
          "station", "demo", "cli"]
SUBPACKAGES = {"sky", "receive", "archive", "sim", "detect", "review", "exchange", "season", "station", "cli"}
TOP_LEVEL = {"store": "store", "store_schema": "store", "demo": "demo", "api": "cli", "__main__": "cli"}
MAX_LINES = 600


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(ROOT.rglob("*.py")):
        parts = path.relative_to(ROOT.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    return out


MODULES = _modules()


def stage(module: str) -> str:
    parts = module.split(".")
    if len(parts) == 1:
        return "core"
    if parts[1] in SUBPACKAGES:
        return parts[1]
    return TOP_LEVEL.get(parts[1], "core")


def _imports(path: Path):
    """(node, target modules inside rxlog, at module level?) for every import in a file."""
    tree = ast.parse(path.read_text())
    parents = {}
    for node in ast.walk(tree):
        for child in ast.iter_child_nodes(node):
            parents[child] = node
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            targets = [f"{node.module}.{a.name}" if f"{node.module}.{a.name}" in MODULES else node.module
                       for a in node.names]
        else:
            continue
        chain, up = [], parents.get(node)
        while up is not None:
            chain.append(up)
            up = parents.get(up)
        yield node, [t for t in targets if t in MODULES], chain


def _type_checking_only(chain) -> bool:
    return any(isinstance(n, ast.If) and "TYPE_CHECKING" in ast.unparse(n.test) for n in chain)


def test_every_module_sits_in_a_known_stage():
    assert all(stage(m) in STAGES for m in MODULES)
    assert "rxlog.detect.online" in MODULES and stage("rxlog.detect.online") == "detect"


def test_imports_point_down_the_pipeline():
    upward = []
    for name, path in MODULES.items():
        for node, targets, _ in _imports(path):
            for t in targets:
                if STAGES.index(stage(t)) > STAGES.index(stage(name)):
                    upward.append(f"{path.relative_to(ROOT.parent)}:{node.lineno} imports {t}")
    assert upward == []


def test_receive_never_chooses_the_simulator():
    for name, path in MODULES.items():
        if stage(name) == "receive":
            for _, targets, _ in _imports(path):
                assert not any(stage(t) == "sim" for t in targets), name


def test_no_import_cycles():
    edges = {name: {t for node, targets, chain in _imports(path) if not chain[1:] or
                    isinstance(chain[0], ast.Module) for t in targets if t != name}
             for name, path in MODULES.items()}
    # Depth-first search for a back edge.
    state: dict[str, int] = {}
    cycle: list[str] = []

    def visit(v, stack):
        state[v] = 1
        for w in sorted(edges.get(v, ())):
            if state.get(w) == 1:
                cycle.extend(stack[stack.index(w):] + [v, w] if w in stack else [v, w])
                return True
            if w not in state and visit(w, stack + [v]):
                return True
        state[v] = 2
        return False

    for v in sorted(edges):
        if v not in state and visit(v, []):
            break
    assert cycle == []


def _has_reason(lines: list[str], node, chain) -> bool:
    if _type_checking_only(chain):
        return True
    lo = node.lineno - 1
    while lo > 0 and re.match(r"\s*(from \S+ import|import |\w+\.use\(|\))", lines[lo - 1]):
        lo -= 1                                   # the top of this block of imports
    if any("#" in lines[i] for i in range(max(lo - 2, 0), node.end_lineno)):
        return True
    func = next((n for n in chain if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))), None)
    doc = ast.get_docstring(func) if func else None
    return bool(doc and "import" in doc.lower())


def test_imports_inside_functions_say_why():
    silent = []
    for name, path in MODULES.items():
        lines = path.read_text().splitlines()
        for node, _, chain in _imports(path):
            if isinstance(chain[0], ast.Module):
                continue
            if not _has_reason(lines, node, chain):
                silent.append(f"{path.relative_to(ROOT.parent)}:{node.lineno}")
    assert silent == []


def test_no_module_is_a_thousand_line_room():
    big = {m: n for m, p in MODULES.items() if (n := len(p.read_text().splitlines())) > MAX_LINES}
    assert big == {}


def _resolve(dotted: str):
    parts = dotted.split(".")
    for k in range(len(parts), 0, -1):
        mod = ".".join(parts[:k])
        if mod in MODULES:
            obj = importlib.import_module(mod)
            for attr in parts[k:]:
                obj = getattr(obj, attr)
            return obj
    raise LookupError(dotted)


def test_every_python_path_in_the_readme_exists():
    readme = (ROOT.parent / "README.md").read_text()
    paths = set(re.findall(r"`(rxlog(?:\.[A-Za-z_]\w*)+)", readme))
    paths = {p for p in paths if p != "rxlog.service"}     # the systemd unit's name
    assert len(paths) > 20
    missing = []
    for p in sorted(paths):
        try:
            _resolve(p)
        except (LookupError, AttributeError, ImportError):
            missing.append(p)
    assert missing == []


def test_the_public_entry_names_the_objects_of_their_home_modules():
    source = Path(api.__file__).read_text()
    homes = dict(re.findall(r"^from (rxlog[\w.]+) import (.+)$", source, flags=re.M))
    for home, names in homes.items():
        for n in (x.strip() for x in names.split(",")):
            assert getattr(api, n) is getattr(importlib.import_module(home), n)
    assert sorted(api.__all__) == sorted(n.strip() for v in homes.values() for n in v.split(","))


@pytest.mark.parametrize("package", sorted(p for p in SUBPACKAGES if (ROOT / p).is_dir()))
def test_each_stage_package_names_its_modules(package):
    doc = importlib.import_module(f"rxlog.{package}").__doc__ or ""
    names = [p.stem for p in (ROOT / package).glob("*.py") if p.stem != "__init__"]
    unnamed = [n for n in names if not re.search(rf"\b{n}\b", doc)]
    assert unnamed == []
