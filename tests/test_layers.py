"""core/ stays headless: every core module imports with Qt and app/ blocked (STYLE.md rule 1)."""

import subprocess
import sys
from pathlib import Path

CORE = Path(__file__).resolve().parents[1] / "core"


def test_core_imports_without_qt():
    modules = sorted(f"core.{p.stem}" for p in CORE.glob("*.py") if p.stem != "__init__")
    code = (
        "import sys\n"
        "class Block:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        "        if name.split('.')[0] in ('PySide6', 'pyqtgraph', 'app', 'shiboken6'):\n"
        "            raise ImportError('blocked in core: ' + name)\n"
        "sys.meta_path.insert(0, Block())\n"
        f"import importlib\nfor m in {modules!r}:\n    importlib.import_module(m)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], check=False, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
