"""The results store: what the worker fills and the dashboard reads (SQLAlchemy Core; SQLite or PostgreSQL).

Public API:

- ``Store.open(url=None, *, files_dir=None, create=True) -> Store``: ``harken.db`` in the working folder by
  default; ``postgresql+psycopg://USER@HOST/DB`` for a lab-wide server; a bare path means a SQLite file.
  Reads (DataFrames or dataclasses): ``recordings``, ``actuations``, ``quarantine``, ``export_actuations``,
  ``flag_summary``, ``flags``, ``models``, ``load_model``, ``active_models``, ``band_levels``, ``trajectory``,
  ``audit_log``, ``check_integrity``, ``schema_version``; ``read()`` / ``write()`` give a connection inside one
  transaction for queries of your own. Writes: ``claim``, ``claim_many``, ``commit_analyses``,
  ``commit_quarantine``, ``reopen_quarantined``, ``release_claim``, ``add_verdict``,
  ``activate_model``, ``audit``. ``archive_dir`` / ``quarantine_dir``: where originals are kept.
- ``build_reference(store, profile, events, lots, *, created_by=None, profile_dirs=(), n_components=None,
  scaling="unit", alpha=0.01, log=...) -> list[ModelInfo]``: fit, store as the new active version, score history.
- ``rescore(store, profile, *, events=None, model_id=None) -> int``.
- ``flag_summary(store, by=("rig", "lot")) -> DataFrame``.
- ``Claim``, ``Analysed``, ``Trajectory``, ``ModelInfo``, ``StoreError``, ``SCHEMA_VERSION``,
  ``default_store_url``, ``safe_url``, ``VERDICTS``.
"""

from .core import DEFAULT_STORE_FILE, Claim, Store, default_store_url, safe_url
from .errors import StoreError
from .queries import Trajectory
from .reference import ModelInfo, build_reference, rescore
from .schema import SCHEMA_VERSION
from .writes import VERDICTS, Analysed

__all__ = [
    "Store", "Claim", "Analysed", "StoreError", "Trajectory", "ModelInfo", "SCHEMA_VERSION", "DEFAULT_STORE_FILE", "VERDICTS",
    "default_store_url", "safe_url", "build_reference", "rescore", "flag_summary",
]


def flag_summary(store: Store, by=("rig", "lot")):
    """Actuations, flagged actuations and flagged fraction per rig and lot (or other groups): a DataFrame."""
    return store.flag_summary(by=tuple(by))
