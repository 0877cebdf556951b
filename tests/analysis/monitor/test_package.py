import ast
import pathlib
import subprocess
import sys

import analysis.monitor as monitor

PKG = pathlib.Path(monitor.__file__).parent


def test_public_api_is_listed_and_importable():
    for name in monitor.__all__:
        assert hasattr(monitor, name), name


def test_importing_monitor_pulls_in_no_ui_or_store():
    # Layering rule (PRODUCT.md): the pure core imports neither dashboard, plotting nor store.
    code = ("import sys, analysis.monitor; bad = [m for m in sys.modules if m.split('.')[0] in "
            "('dash', 'plotly', 'sqlalchemy', 'dashboard') or m.startswith('analysis.store')]; print(bad)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_no_monitor_module_touches_files():
    # Nothing in monitor/ opens files: model files are analysis/modelfile.py's business.
    for path in PKG.glob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        names = {n.id for n in ast.walk(tree) if isinstance(n, ast.Name)}
        attrs = {n.attr for n in ast.walk(tree) if isinstance(n, ast.Attribute)}
        touches = "open" in names or {"read_text", "write_text", "read_bytes", "write_bytes"} & attrs
        assert not touches, path.name
