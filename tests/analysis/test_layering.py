"""The core imports no UI, no plotting and no store (analysis/README.md)."""

import subprocess
import sys


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
    from pathlib import Path

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
