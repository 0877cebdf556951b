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
