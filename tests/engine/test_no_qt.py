"""Qt stays in the GUI package: the engine, control, protocol, link, plant, sim, config and
analysis code must run on a machine without a display or Qt (design: the engine never imports Qt)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

SRC = Path(__file__).resolve().parents[2] / "src" / "rigloop"
QT_MODULES = ("PyQt6", "PyQt5", "PySide6", "PySide2", "pyqtgraph", "qtpy", "sip")


def _imports(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield node.lineno, alias.name
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            yield node.lineno, node.module


def test_no_qt_import_outside_the_gui_package():
    offenders = []
    for path in SRC.rglob("*.py"):
        rel = path.relative_to(SRC)
        if rel.parts[0] == "gui" or rel.as_posix() == "commands/gui.py":
            continue
        for line, name in _imports(path):
            if name.split(".")[0] in QT_MODULES:
                offenders.append(f"{rel}:{line} imports {name}")
    assert not offenders, offenders


def test_the_scan_would_catch_an_offender(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text("def f():\n    from PyQt6 import QtCore\n")
    assert [n for _, n in _imports(bad)] == ["PyQt6"]


def test_core_packages_import_without_loading_qt():
    code = ("import sys\n"
            "import rigloop.engine.loop, rigloop.engine.process, rigloop.control.controller, rigloop.sim.server, "
            "rigloop.link.udp, rigloop.analysis.report, rigloop.config, rigloop.commands.run\n"
            f"bad = [m for m in sys.modules if m.split('.')[0] in {QT_MODULES!r}]\n"
            "assert not bad, bad\n")
    subprocess.run([sys.executable, "-c", code], check=True)
