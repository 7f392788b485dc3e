"""The window stays made of parts: no module of the Qt layer reaches into another's
private names, no class there inherits from another module's class of the
layer (controllers are composed, never mixed in), and the main window only
builds and wires (it stays short).

These read the source with ``ast``; they import no Qt.
"""

from __future__ import annotations

import ast
from pathlib import Path

import samplewright

QT = Path(samplewright.__file__).parent / "qt"
MAIN_WINDOW_LINES = 250


def own_names(tree: ast.Module) -> set[str]:
    """Every name a module defines: functions, classes, methods, module and class variables,
    and attributes it assigns on any object (``self._x = …``)."""
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.add(node.name)
        elif isinstance(node, ast.Name) and isinstance(node.ctx, ast.Store):
            names.add(node.id)
        elif isinstance(node, ast.Attribute) and isinstance(node.ctx, ast.Store):
            names.add(node.attr)
        elif isinstance(node, ast.AnnAssign) and isinstance(node.target, ast.Name):
            names.add(node.target.id)
    return names


def private_reads(source: str) -> list[str]:
    """``x._name`` reads and ``from .m import _name`` imports of underscore names the module
    does not define itself, as "line: text". ``self._name`` counts too: a private name a class
    uses but does not define comes from a class mixed in from elsewhere."""
    tree = ast.parse(source)
    mine = own_names(tree)
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and _private(node.attr) and node.attr not in mine:
            found.append(f"{node.lineno}: {ast.unparse(node)}")
        elif isinstance(node, ast.ImportFrom) and node.level > 0:
            found += [f"{node.lineno}: import {a.name}" for a in node.names if _private(a.name)]
    return found


def _private(name: str) -> bool:
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def layer_bases(source: str) -> list[str]:
    """Base classes imported from another module of the Qt layer (``from .module import Base``)."""
    tree = ast.parse(source)
    from_layer = {
        alias.asname or alias.name
        for node in ast.walk(tree)
        if isinstance(node, ast.ImportFrom) and node.level == 1
        for alias in node.names
    }
    return [
        f"{node.name}({ast.unparse(base)})"
        for node in ast.walk(tree)
        if isinstance(node, ast.ClassDef)
        for base in node.bases
        if ast.unparse(base).split(".")[0] in from_layer
    ]


def layer_modules() -> list[Path]:
    return sorted(QT.glob("*.py"))


def test_the_checks_can_fail():
    # A module reading another's private member, and one mixing in another module's class.
    assert private_reads("def f(window):\n    return window._edited_record\n") == ["2: window._edited_record"]
    assert private_reads("from .workers import _THREADS\n") == ["1: import _THREADS"]
    assert private_reads("class A:\n    def f(self):\n        self._x = 1\n        return other._x\n") == []
    assert private_reads("class A:\n    def f(self):\n        return self._last_request\n") == ["3: self._last_request"]
    assert layer_bases("from .audition_actions import AuditionActions\nclass W(AuditionActions):\n    pass\n") == [
        "W(AuditionActions)"
    ]


def test_no_module_of_the_qt_layer_reads_another_modules_private_names():
    found = {p.name: private_reads(p.read_text(encoding="utf-8")) for p in layer_modules()}
    assert {name: reads for name, reads in found.items() if reads} == {}


def test_no_class_of_the_qt_layer_inherits_from_another_module_of_the_layer():
    found = {p.name: layer_bases(p.read_text(encoding="utf-8")) for p in layer_modules()}
    assert {name: bases for name, bases in found.items() if bases} == {}


def test_the_main_window_only_builds_and_wires():
    lines = (QT / "main_window.py").read_text(encoding="utf-8").count("\n")
    assert lines < MAIN_WINDOW_LINES
