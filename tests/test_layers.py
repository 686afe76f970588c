"""The layer contract: Qt widgets -> review model -> core, and a store without the PIV stack.

Layers, highest first (a module imports its own layer or lower ones only):

    app.cli     the `wakeline` command (may open the window, write the sheet)
    app.qt      the window's widgets; reach the session store through the review model only
    app.sheet   the shot sheet PDF (Qt's painter, no widgets)
    app.review  the review model and the text and numbers the window and the sheet show: no Qt
                but QtCore's signals in ``app.review.model``
    core        the measurement and the session store: no Qt, no app

and ``core.store`` keeps records without importing the PIV stack (correlation, ball, fields,
separation, scipy, scikit-image). The static check reads every import statement (inside
functions too); the run-time checks import the modules with the forbidden ones blocked.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
LAYERS = ("app.cli", "app.qt", "app.sheet", "app.review", "core")
QT = ("PySide6", "pyqtgraph", "shiboken6")
PIV_STACK = ("core.piv", "core.ball", "core.fields", "core.separation", "core.synth",
             "core.synth_shot", "core.synth_physical", "core.conditioning", "core.batch",
             "scipy", "skimage")
#: (modules, imports they must not make)
FORBIDDEN = (
    ("core", (*QT, "app")),
    ("core.store", PIV_STACK),
    ("app.review", ("PySide6.QtGui", "PySide6.QtWidgets", "pyqtgraph")),
    ("app.review.text", QT),
    ("app.review.overview", QT),
    ("app.review.marks", QT),
    ("app.review.colours", QT),
    ("app.sheet.content", QT),
    ("app.qt", ("core.store", "core.batch")),
)


def _modules() -> dict[str, Path]:
    """Dotted name -> file of every module of core/ and app/."""
    out = {}
    for package in ("core", "app"):
        for path in (ROOT / package).rglob("*.py"):
            parts = path.relative_to(ROOT).with_suffix("").parts
            name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
            out[name] = path
    return out


def _imports(path: Path) -> set[str]:
    """Every module an import statement of the file names (``from a import b``: a and a.b)."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and not node.level:
            names.add(node.module)
            names.update(f"{node.module}.{alias.name}" for alias in node.names)
    return names


def _within(name: str, package: str) -> bool:
    return name == package or name.startswith(package + ".")


def _layer(name: str) -> int | None:
    return next((i for i, layer in enumerate(LAYERS) if _within(name, layer)), None)


def test_each_layer_imports_only_itself_and_the_layers_below():
    wrong = []
    for name, path in _modules().items():
        own = _layer(name)
        for imported in _imports(path):
            other = _layer(imported)
            if own is not None and other is not None and other < own:
                wrong.append(f"{name} imports {imported}")
    assert not wrong, "imports against the layers:\n" + "\n".join(sorted(wrong))


def test_forbidden_imports():
    wrong = []
    for name, path in _modules().items():
        for package, banned in FORBIDDEN:
            if not _within(name, package):
                continue
            for imported in _imports(path):
                if any(_within(imported, b) for b in banned):
                    wrong.append(f"{name} imports {imported}")
    assert not wrong, "forbidden imports:\n" + "\n".join(sorted(wrong))


def _run_blocked(blocked: tuple[str, ...], body: str) -> subprocess.CompletedProcess:
    """Run ``body`` in a fresh interpreter where importing any of ``blocked`` fails."""
    code = (
        "import sys\n"
        "class Block:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        f"        if any(name == b or name.startswith(b + '.') for b in {blocked!r}):\n"
        "            raise ImportError('blocked: ' + name)\n"
        "sys.meta_path.insert(0, Block())\n" + body
    )
    return subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=False,
                          capture_output=True, text=True, timeout=120)


def _import_all(modules: list[str]) -> str:
    return f"import importlib\nfor m in {modules!r}:\n    importlib.import_module(m)\n"


def test_core_imports_without_qt():
    modules = sorted(n for n in _modules() if _within(n, "core"))
    done = _run_blocked((*QT, "app"), _import_all(modules))
    assert done.returncode == 0, done.stderr


def test_the_store_reads_a_session_and_its_results_without_the_piv_stack():
    modules = sorted(n for n in _modules() if _within(n, "core.store"))
    v1 = ROOT / "tests" / "data" / "session_v1.h5"
    body = (
        _import_all(modules) + "from core.store import Session\n"
        f"with Session.open({str(v1)!r}, writable=False) as s:\n"
        "    assert s.load_result('R1').field.dx_px.ndim == 2\n"
        "    assert s['R1'].summary.proposed_deg('upper') is not None\n"
        "    s.load_frames('R2')\n"
    )
    done = _run_blocked(PIV_STACK, body)
    assert done.returncode == 0, done.stderr


def test_the_formatter_needs_no_qt():
    done = _run_blocked(QT, "import app.review.text, app.review.overview, app.review.marks\n")
    assert done.returncode == 0, done.stderr
