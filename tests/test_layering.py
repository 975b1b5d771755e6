"""Imports flow one way, and every protocol has the same package shape (DEVELOPERS.md, "Architecture").

Every module of the package is read with ``ast`` (not imported), and every import it makes is checked: at module
level and inside functions and methods alike (a function-level import is still a dependency; hiding a cycle in a
function does not remove it), and ``importlib.import_module("...")`` with a literal name.  Checked:

* the layer order: a module imports only parts of the package in a lower layer than its own (or its own part);
  in particular nothing in bounds/, budget, decoy/, numerical/ or protocols/ imports finitekey.optimize,
  finitekey.report or finitekey.cli;
* a protocol package never imports another protocol package, the shared helpers ``protocols/_*.py`` import
  none, and no module of protocols/ imports the package ``finitekey.protocols`` itself (it imports them);
* inside a protocol package: nothing but ``__init__`` imports ``design``, no module imports its own package's
  ``__init__``, and the imports among the other modules (``block``, ``analysis``, ``scenario``, helpers) form
  no cycle (bb84 and decoy-bb84 use ``block`` < ``analysis`` < ``scenario``; tf-sns puts ``scenario`` first);
* every registered protocol is a package with the five modules, whose ``__init__`` defines the registered
  object and imports ``design`` at module level; every complete protocol package registers a protocol.

Common practice, no source: the one-way layering of the contributor guide, checked the way import linters do.
"""

from __future__ import annotations

import ast
import importlib
import pathlib

import pytest

from finitekey import protocols

ROOT = pathlib.Path(__file__).resolve().parents[1]
PKG = ROOT / "finitekey"

#: Layer of each top-level part of the package (a module ``finitekey/X.py`` or a subpackage ``finitekey/X/``).
#: A module may import a part of a lower layer, never of its own layer or a higher one.  The order is the
#: contributor guide's: errors/domains -> bounds -> compile/entropy -> budget -> decoy -> numerical -> protocols
#: -> optimize -> report -> cli, with the helpers placed where their imports put them.  A new part must be
#: added here (the test names it).
LAYERS = {
    "errors": 0, "cautions": 0, "_threads": 0, "searching": 0,   # searching: numpy/scipy only, used by protocols
    "domains": 1, "compile": 1, "outputs": 1,
    "bounds": 2, "entropy": 2, "budget": 2, "channel": 2, "files": 2,
    "reconciliation": 3,
    "decoy": 4,
    "numerical": 5,
    "protocols": 6,
    "optimize": 7,
    "report": 8,
    "cli": 9,
    "__main__": 10,
}

#: The modules of a protocol package besides its ``__init__``.
SHAPE = ("block", "analysis", "scenario", "design")

#: Registered protocols whose ``__init__`` imports ``design`` inside its methods instead of at module level,
#: with the reason; an entry that is no longer needed fails the test, so the list only shrinks.
DEFERRED_DESIGN_IMPORT = {
    "tf-sns": "landed before the layout; its __init__ imports .design inside design/blocksize/reach",
}


def module_name(path: pathlib.Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _is_module(name: str) -> bool:
    rel = pathlib.Path(*name.split("."))
    return (ROOT / rel).with_suffix(".py").is_file() or (ROOT / rel / "__init__.py").is_file()


def imports_of(source: str, name: str, is_package: bool) -> list:
    """``(target module, line, inside a function)`` for every import of a finitekey module in ``source``.

    ``from X import a`` is an import of ``X.a`` when that is a module, else of ``X``.
    """
    tree = ast.parse(source)
    in_function = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda)):
            in_function.update(id(n) for n in ast.walk(node) if n is not node)
    here = name.split(".") if is_package else name.split(".")[:-1]
    out = []
    for node in ast.walk(tree):
        targets = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = ".".join(here[:len(here) - node.level + 1] + ([node.module] if node.module else [])) \
                if node.level else (node.module or "")
            targets = [f"{base}.{a.name}" if _is_module(f"{base}.{a.name}") else base for a in node.names]
        elif (isinstance(node, ast.Call) and node.args and isinstance(node.args[0], ast.Constant)
              and isinstance(node.args[0].value, str)
              and (getattr(node.func, "attr", None) == "import_module" or getattr(node.func, "id", None)
                   in ("import_module", "__import__"))):
            targets = [node.args[0].value]
        for t in targets:
            if t == "finitekey" or t.startswith("finitekey."):
                out.append((t, node.lineno, id(node) in in_function))
    return out


def _all_modules():
    for path in sorted(PKG.rglob("*.py")):
        yield module_name(path), path, path.name == "__init__.py"


def _edges():
    for name, path, is_pkg in _all_modules():
        for target, line, in_function in imports_of(path.read_text(encoding="utf-8"), name, is_pkg):
            yield name, target, f"{path.relative_to(ROOT)}:{line}" + (" (inside a function)" if in_function else "")


def part(name: str) -> str | None:
    parts = name.split(".")
    return parts[1] if len(parts) > 1 else None


def protocol_package(name: str) -> str | None:
    """``bb84`` for ``finitekey.protocols.bb84`` and its modules; None for shared helpers and the rest."""
    parts = name.split(".")
    if len(parts) >= 3 and parts[1] == "protocols" and not parts[2].startswith("_"):
        return parts[2]
    return None


def layering_violations(edges) -> list:
    """Every import in ``edges`` (``(module, target, where)``) that breaks a rule of the module docstring."""
    bad = []
    for src, dst, where in edges:
        sp, dp = part(src), part(dst)
        if dp is None:   # the root package itself (loaded with any submodule; it imports nothing at start)
            continue
        for p in (sp, dp):
            if p not in LAYERS:
                bad.append(f"{where}: finitekey.{p} has no layer: add it to LAYERS in tests/test_layering.py")
        if sp in LAYERS and dp in LAYERS and sp != dp and LAYERS[dp] >= LAYERS[sp]:
            bad.append(f"{where}: {src} (layer {LAYERS[sp]}) imports {dst} (layer {LAYERS[dp]})")
        if sp != "protocols" or dp != "protocols":
            continue
        spkg, dpkg = protocol_package(src), protocol_package(dst)
        if src == "finitekey.protocols":   # the registry's package imports every protocol: that registers them
            continue
        if dst == "finitekey.protocols":
            bad.append(f"{where}: {src} imports the package finitekey.protocols, which imports the protocols")
        elif dpkg is not None and spkg != dpkg:
            bad.append(f"{where}: {src} imports the protocol package {dpkg}"
                       + ("" if spkg else " (a shared helper sits below every protocol)"))
        elif spkg is not None and spkg == dpkg and src != dst:
            me, other = src.split(".")[3:4], dst.split(".")[3:4]
            if not other:
                bad.append(f"{where}: {src} imports its own package's __init__ (which imports it)")
            elif me and other[0] == "design" and me[0] != "design":   # the package's __init__ may import it
                bad.append(f"{where}: {src} imports design (only the package's __init__ may)")
    return bad + package_cycles(edges)


def package_cycles(edges) -> list:
    """Import cycles among the modules of one protocol package (its ``__init__`` left out), function-level
    imports included: a cycle hidden in a function is still one."""
    graph: dict = {}
    for src, dst, where in edges:
        spkg = protocol_package(src)
        if spkg is None or spkg != protocol_package(dst) or src == dst:
            continue
        a, b = src.split(".")[3:4], dst.split(".")[3:4]
        if a and b:
            graph.setdefault((spkg, a[0]), {})[(spkg, b[0])] = where
    bad, done = [], set()

    def visit(node, path):
        if node in path:
            cycle = path[path.index(node):] + [node]
            bad.append(f"{graph[cycle[-2]][node]}: import cycle in protocols/{node[0]}/: "
                       + " -> ".join(m for _, m in cycle))
            return
        if node in done:
            return
        for nxt in graph.get(node, {}):
            visit(nxt, path + [node])
        done.add(node)

    for node in sorted(graph):
        visit(node, [])
    return bad


# ---------------------------------------------------------------------------------------------------------------
# the checker itself: it finds imports where they are, and it flags what it should (a test that cannot fail
# would be a defect)
# ---------------------------------------------------------------------------------------------------------------
def test_the_walk_sees_every_module_and_its_imports():
    names = {n for n, _, _ in _all_modules()}
    assert {"finitekey.errors", "finitekey.protocols.bb84.design", "finitekey.report.sweep"} <= names
    edges = {(s, d) for s, d, _ in _edges()}
    assert ("finitekey.protocols.decoy_bb84.design", "finitekey.protocols.decoy_bb84.analysis") in edges
    assert ("finitekey.optimize.dispatch", "finitekey.protocols") in edges


@pytest.mark.parametrize("source, name, is_package, expected", [
    # a function-level upward import is found (the old decoy-bb84 module imported its design so)
    ("def design(self):\n    from ..optimize import decoy_design\n", "finitekey.protocols.decoy_bb84", False,
     "imports finitekey.optimize"),
    ("import finitekey.report.sweep\n", "finitekey.bounds.hoeffding", False, "imports finitekey.report.sweep"),
    ("from .cli import main\n", "finitekey.budget", False, "imports finitekey.cli"),
    ("def f():\n    importlib.import_module('finitekey.optimize.dispatch')\n", "finitekey.decoy.lp", False,
     "imports finitekey.optimize.dispatch"),
    ("from ..report import sweep\n", "finitekey.numerical", True, "imports finitekey.report.sweep"),
    # a shared helper importing a protocol, a protocol importing another
    ("def f():\n    from .decoy_bb84 import _intervals\n", "finitekey.protocols._phase_error", False,
     "imports the protocol package decoy_bb84"),
    ("from ..bb84.analysis import key_length\n", "finitekey.protocols.decoy_bb84.analysis", False,
     "imports the protocol package bb84"),
    # inside a package
    ("def f():\n    from .design import blocksize\n", "finitekey.protocols.bb84.analysis", False, "imports design"),
    ("from .design import design\n", "finitekey.protocols.bb84.scenario", False, "imports design"),
    ("from . import key_length\n", "finitekey.protocols.bb84.design", False, "its own package's __init__"),
    ("from .. import register\n", "finitekey.protocols.bb84.analysis", False,
     "imports the package finitekey.protocols"),
    ("from ...nosuchpart import x\n", "finitekey.protocols.bb84.analysis", False, "has no layer"),
])
def test_checker_flags_each_kind_of_violation(source, name, is_package, expected):
    edges = [(name, t, "x") for t, _, _ in imports_of(source, name, is_package)]
    bad = layering_violations(edges)
    assert any(expected in b for b in bad), (bad, expected)


def test_checker_flags_a_cycle_inside_a_package_also_through_a_function():
    edges = [("finitekey.protocols.p.block", "finitekey.protocols.p.scenario", "b:1"),
             ("finitekey.protocols.p.scenario", "finitekey.protocols.p.analysis", "s:1"),
             ("finitekey.protocols.p.analysis", "finitekey.protocols.p.block", "a:9 (inside a function)")]
    bad = layering_violations(edges)
    assert len(bad) == 1 and "import cycle in protocols/p/" in bad[0], bad
    assert layering_violations(edges[:2]) == []   # a chain is fine, in any order of the three


def test_checker_allows_the_permitted_imports():
    ok = [("from ...budget import Ledger\nfrom .._result import KEY\nfrom .block import BB84Block\n",
           "finitekey.protocols.bb84.analysis", False),
          ("from . import design\nfrom .scenario import parse_scenario\n", "finitekey.protocols.bb84", True),
          ("from .analysis import key_length\nfrom .scenario import expected_counts\n",
           "finitekey.protocols.bb84.design", False),
          ("from ..protocols import get\n", "finitekey.optimize.dispatch", False)]
    for source, name, is_pkg in ok:
        assert layering_violations([(name, t, "x") for t, _, _ in imports_of(source, name, is_pkg)]) == []


# ---------------------------------------------------------------------------------------------------------------
# the package as it is
# ---------------------------------------------------------------------------------------------------------------
def test_imports_flow_one_way():
    assert layering_violations(_edges()) == []


def _protocol_packages():
    return sorted(p.name for p in (PKG / "protocols").iterdir()
                  if p.is_dir() and not p.name.startswith("_") and (p / "__init__.py").is_file())


@pytest.mark.parametrize("name", protocols.names())
def test_every_registered_protocol_is_a_package_of_five_modules(name):
    proto = protocols.get(name)
    modname = type(proto).__module__
    pkg = protocol_package(modname)
    assert pkg is not None and modname == f"finitekey.protocols.{pkg}", \
        f"{name}: its object is defined in {modname}, not in the __init__ of a package finitekey/protocols/<name>/"
    folder = PKG / "protocols" / pkg
    for m in ("__init__",) + SHAPE:
        assert (folder / f"{m}.py").is_file(), f"{name}: finitekey/protocols/{pkg}/{m}.py missing"
        importlib.import_module(modname if m == "__init__" else f"{modname}.{m}")
    # the __init__ imports its design at module level, not inside the methods that use it
    tree = ast.parse((folder / "__init__.py").read_text(encoding="utf-8"))
    top = [t for node in tree.body for t, _, _ in imports_of(ast.unparse(node), modname, True)
           if isinstance(node, (ast.Import, ast.ImportFrom))]
    if name in DEFERRED_DESIGN_IMPORT:
        assert f"{modname}.design" not in top, f"{name} imports design at module level now: remove it from " \
                                               "DEFERRED_DESIGN_IMPORT"
        return
    assert f"{modname}.design" in top, f"{name}: __init__.py does not import .design at module level"
    assert importlib.import_module(modname).design is importlib.import_module(f"{modname}.design")


def test_every_complete_protocol_package_registers_a_protocol():
    # A package still being built (not all five modules yet) may land before it registers; once complete, a
    # package that is not registered (or not imported in finitekey/protocols/__init__.py) is a forgotten one.
    registered = {type(p).__module__ for p in protocols.all_protocols()}
    packages = _protocol_packages()
    assert {"bb84", "decoy_bb84"} <= set(packages), "the walk does not see the protocol packages"
    for pkg in packages:
        folder = PKG / "protocols" / pkg
        if all((folder / f"{m}.py").is_file() for m in SHAPE):
            assert f"finitekey.protocols.{pkg}" in registered, f"finitekey/protocols/{pkg}/ registers no protocol"
