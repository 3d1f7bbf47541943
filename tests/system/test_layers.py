"""The package's import rule (DEVELOPERS.md, "Architecture"): folders in data-flow order, each
importing only earlier ones; no own-package imports inside functions; one caution text.

Checked by parsing every module with the standard library's ast (no import is executed).
"""

from __future__ import annotations

import ast
import pathlib

import pytest

import tsunamifocus

PKG = pathlib.Path(tsunamifocus.__file__).resolve().parent
#: Top-level modules every layer may use, then the layers in data-flow order.
TOP = {"errors", "constants", "grid", "cautions"}
ORDER = ["io", "ocean", "source", "propagation", "coast", "focusing", "studies", "products", "cli"]
MODULES = sorted(p for p in PKG.rglob("*.py") if p.name != "__init__.py" or p.parent != PKG)


def _rank(parts: list[str]) -> int:
    """-1 for the top-level modules, else the position of the layer in ORDER."""
    if not parts or parts[0] in TOP:
        return -1
    if parts[0] not in ORDER:
        raise AssertionError(f"module {'.'.join(parts)} is in no layer of {ORDER}")
    return ORDER.index(parts[0])


def _own_imports(path: pathlib.Path):
    """(node, target parts) of every import of the package's own modules in ``path``."""
    rel = path.relative_to(PKG).with_suffix("").parts
    pkg = list(rel[:-1])
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.level:
            base = pkg[: len(pkg) - (node.level - 1)]
            if node.module:
                yield node, base + node.module.split(".")
            else:
                for a in node.names:
                    yield node, base + [a.name]
        elif isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] == "tsunamifocus":
            yield node, node.module.split(".")[1:]
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "tsunamifocus":
                    yield node, a.name.split(".")[1:]


def test_every_module_is_in_a_layer():
    assert MODULES, "no modules found"
    for p in MODULES:
        _rank(list(p.relative_to(PKG).with_suffix("").parts))


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PKG)))
def test_imports_point_only_to_earlier_layers(path):
    me = list(path.relative_to(PKG).with_suffix("").parts)
    mine = _rank(me)
    bad = []
    for node, target in _own_imports(path):
        theirs = _rank(target)
        if theirs > mine or (mine == -1 and target and target[0] not in TOP):
            bad.append(f"line {node.lineno}: imports {'.'.join(target)}")
        if mine == -1 and me[0] in TOP and target and target[0] == "grid" and me[0] in ("errors", "constants"):
            bad.append(f"line {node.lineno}: {me[0]} must not import grid")
    assert not bad, f"{'.'.join(me)} breaks the import direction: {bad}"


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PKG)))
def test_no_own_package_imports_inside_functions(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    inner = set()
    for fn in ast.walk(tree):
        if isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)):
            inner.update(id(n) for n in ast.walk(fn) if n is not fn)
    late = [f"line {node.lineno}" for node, _ in _own_imports(path) if id(node) in inner]
    assert not late, f"{path.relative_to(PKG)}: own-package imports inside functions at {late}"


def test_the_caution_text_lives_only_in_the_cautions_module():
    """The caution's opening words appear in no other module (they are read from data/CAUTIONS.md)."""
    opening = (PKG / "data" / "CAUTIONS.md").read_text(encoding="utf-8").splitlines()[2][:40]
    assert opening.strip(), "unexpected CAUTIONS.md layout"
    copies = [str(p.relative_to(PKG)) for p in MODULES if opening in p.read_text(encoding="utf-8")]
    assert copies == [], f"caution text copied into {copies}"
