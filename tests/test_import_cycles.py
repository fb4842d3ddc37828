"""No import cycles between confpop's modules, lazy (function-level) imports included.

Every ``import`` statement of every module is read with :mod:`ast`; a cycle is a strongly
connected group of modules. None is allowed: the last one (ensemble -> io -> ensemble, through
the ``to_sdf``/``to_csv``/``to_json`` forwards) went when the writers moved to writing.py.
"""

import ast
from pathlib import Path

import confpop

ROOT = Path(confpop.__file__).parent
KNOWN = set()


def _modules():
    out = {}
    for path in ROOT.rglob("*.py"):
        parts = ("confpop",) + path.relative_to(ROOT).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    return out


def _is_type_checking_block(node) -> bool:
    return (isinstance(node, ast.If) and isinstance(node.test, ast.Name)
            and node.test.id == "TYPE_CHECKING")


def _edges(mods):
    edges = {m: set() for m in mods}
    for name, path in mods.items():
        package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
        tree = ast.parse(path.read_text())
        typing_only = {id(n) for block in ast.walk(tree) if _is_type_checking_block(block)
                       for n in ast.walk(block)}
        for node in ast.walk(tree):
            if id(node) in typing_only:  # `if TYPE_CHECKING:` imports never run
                continue
            targets = []
            if isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    up = package.split(".")[:len(package.split(".")) - (node.level - 1)]
                    base = ".".join(up + ([node.module] if node.module else []))
                targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in mods else base
                           for a in node.names]
            elif isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            for target in targets:
                while target not in mods and "." in target:
                    target = target.rsplit(".", 1)[0]
                # the package itself resolves names lazily by registry, not by import
                if target in mods and target not in (name, "confpop"):
                    edges[name].add(target)
    return edges


def _cycles(edges):
    index, low, stack, on_stack, found = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in edges[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            group = set()
            while True:
                w = stack.pop()
                on_stack.discard(w)
                group.add(w)
                if w == v:
                    break
            if len(group) > 1:
                found.append(frozenset(group))

    for v in edges:
        if v not in index:
            visit(v)
    return found


def test_no_import_cycles_besides_the_known_one():
    cycles = _cycles(_edges(_modules()))
    assert set(cycles) <= KNOWN, [sorted(c) for c in cycles if c not in KNOWN]


def test_the_cycle_finder_finds_a_planted_cycle():
    edges = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycles(edges) == [frozenset({"a", "b", "c"})]


def test_numbers_modules_import_no_chemistry():
    # thermo, kinetics, units, geometry, settings, checks and records serve numbers anywhere
    for name in ("thermo", "kinetics", "units", "geometry", "settings", "checks", "records"):
        text = (ROOT / f"{name}.py").read_text()
        assert "rdkit" not in text.replace("RDKit", ""), name
