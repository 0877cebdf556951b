"""PostgreSQL and parquet support are extras (pyproject.toml): without their package the command names what is
missing in one line and exits 1. Each case runs `harken` in a fresh interpreter where importing the package fails,
as it does when it is not installed (a None entry in sys.modules makes `import` raise ModuleNotFoundError)."""

from __future__ import annotations

import subprocess
import sys

from tests.conftest import write_recording


def _harken_without(package: str, *argv: str, cwd) -> subprocess.CompletedProcess:
    code = (f"import sys; sys.modules[{package!r}] = None; from analysis.cli import main; "
            f"sys.exit(main({list(argv)!r}))")
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=cwd, timeout=120)


def test_a_postgresql_store_without_psycopg_says_which_driver_is_missing(tmp_path):
    r = _harken_without("psycopg", "reference", "list", "--store", "postgresql+psycopg://lab@127.0.0.1:1/harken",
                        cwd=tmp_path)
    assert r.returncode == 1, r.stderr
    assert r.stderr.strip().startswith("harken: postgresql+psycopg://lab@127.0.0.1:1/harken: database driver not "
                                       "installed (psycopg)")
    assert "harken[postgresql]" in r.stderr and "Traceback" not in r.stderr


def test_a_parquet_export_without_pyarrow_names_the_file_and_the_package(tmp_path):
    from analysis.worker import ingest_paths

    url = f"sqlite:///{tmp_path / 'harken.db'}"
    ingest_paths([write_recording(tmp_path / "in", "a")], url, jobs=1, files_dir=tmp_path)
    out = tmp_path / "actuations.parquet"
    r = _harken_without("pyarrow", "export", "actuations", "--store", url, "--format", "parquet", "--out", str(out),
                        cwd=tmp_path)
    assert r.returncode == 1, r.stderr
    assert r.stderr.startswith(f"harken: {out}: parquet export needs pyarrow (pip install 'harken[parquet]')")
    assert "Traceback" not in r.stderr and not out.exists()
    ok = _harken_without("nothing_blocked", "export", "actuations", "--store", url, "--format", "csv",
                         "--out", str(tmp_path / "a.csv"), cwd=tmp_path)
    assert ok.returncode == 0 and (tmp_path / "a.csv").read_text().count("\n") == 2  # header + one actuation
