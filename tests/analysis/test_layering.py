"""The layering rule (analysis/README.md, DEVELOPERS.md): dependencies point one way, and there are no circles.

    dashboard  ->  analysis.store  ->  the pure core (analysis.signal, analysis.monitor)
    analysis.cli (the application layer) may import anything; nothing imports it.

Read from the source: every import statement of every module, those inside functions too (tests/import_graph.py).
"""

import subprocess
import sys
from pathlib import Path

import pytest

from tests.import_graph import cycles, read_graph, wrong_way

ROOT = Path(__file__).resolve().parents[2]

CORE = ("analysis.signal", "analysis.monitor")
SERVICES = ("analysis.worker", "analysis.references")
#: What core code does: arithmetic. No file, process or network modules of the standard library.
IO_STDLIB = ("os", "shutil", "pathlib", "sqlite3", "subprocess", "tempfile", "glob", "socket", "multiprocessing",
             "concurrent")
# What the store keeps private from its callers: the tables, the SQL helpers, the writes.
STORE_INSIDE = ("analysis.store.schema", "analysis.store.writes", "analysis.store.queries._base", "sqlalchemy")

RULES = [
    ("the core imports only the core (and analysis.errors), numpy, scipy, pandas and the standard library",
     CORE, IO_STDLIB, CORE + ("analysis.errors",), ("numpy", "scipy", "pandas")),
    ("the store never imports the services above it, the command line or the dashboard",
     ("analysis.store",), SERVICES + ("analysis.cli", "dashboard"), None, None),
    ("the library never imports the command line or the dashboard",
     ("analysis",), ("analysis.cli", "dashboard"), None, None),
    ("the dashboard reads the store only through its read API: no tables, no SQL, no worker, no command line",
     ("dashboard",), STORE_INSIDE + ("analysis.worker", "analysis.cli"), None, None),
]


@pytest.fixture(scope="module")
def imports():
    return read_graph(ROOT)


def test_no_module_imports_against_the_layers(imports):
    # The command line is the application layer: the rules are about what lies under it.
    library = [i for i in imports if not (i.source == "analysis.cli" or i.source.startswith("analysis.cli."))]
    assert wrong_way(library, RULES) == []


def test_there_is_no_circle_of_imports(imports):
    assert cycles(imports) == []


def test_the_checks_find_a_circle_and_a_wrong_way_import(tmp_path):
    # A made-up tree with one circle through a package's __init__ (analysis -> analysis.signal.x ->
    # analysis.store.core -> analysis), closed by a core module that imports the store lazily, inside a function,
    # and a dashboard that imports a table: all must be found, or the two tests above prove nothing.
    pkg = tmp_path / "analysis"
    for folder in (pkg, pkg / "signal", pkg / "store"):
        folder.mkdir(parents=True, exist_ok=True)
    (pkg / "__init__.py").write_text("from .signal import x\n")
    (pkg / "signal" / "__init__.py").write_text("")
    (pkg / "signal" / "x.py").write_text("import numpy\n\ndef f():\n    from analysis.store import core\n")
    (pkg / "store" / "__init__.py").write_text("")
    (pkg / "store" / "core.py").write_text("import analysis\n")
    (pkg / "store" / "schema.py").write_text("tables = {}\n")
    (tmp_path / "dashboard").mkdir()
    (tmp_path / "dashboard" / "__init__.py").write_text("from analysis.store.schema import tables\n")
    got = read_graph(tmp_path)
    assert cycles(got) == [["analysis", "analysis.signal.x", "analysis.store.core"]]
    problems = wrong_way(got, RULES)
    assert any("signal/x.py:4 analysis.signal.x imports analysis.store.core" in p for p in problems), problems
    assert any("dashboard/__init__.py:1 dashboard imports analysis.store.schema" in p for p in problems), problems


def test_importing_analysis_pulls_in_no_dash_plotly_or_store():
    code = (
        "import sys, analysis, analysis.pipeline, analysis.signal, analysis.monitor;"
        "bad = [m for m in ('dash', 'plotly', 'sqlalchemy', 'flask') if m in sys.modules];"
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()
    assert out == ""


def test_the_pure_core_does_no_file_io():
    # analysis/README.md: signal/ and monitor/ take arrays and return results; files are read and written at the edges.
    import re

    import analysis

    root = Path(analysis.__file__).parent
    pattern = re.compile(r"\bopen\(|read_text|write_text|read_bytes|write_bytes|import soundfile|sqlalchemy|np\.save\(")
    offenders = [
        f"{path.relative_to(root)}:{n}"
        for folder in ("signal", "monitor")
        for path in sorted((root / folder).glob("*.py"))
        for n, line in enumerate(path.read_text().splitlines(), 1)
        if pattern.search(line) and not line.lstrip().startswith("#")
    ]
    assert offenders == []
