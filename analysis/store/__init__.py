"""The results store: what the worker fills and the dashboard reads (SQLAlchemy Core; SQLite or PostgreSQL).

Public API:

- ``Store.open(url=None, *, files_dir=None, create=True) -> Store``: ``harken.db`` in the working folder by
  default; ``postgresql+psycopg://USER@HOST/DB`` for a lab-wide server; a bare path means a SQLite file. An older
  store is upgraded on opening (Alembic revisions in ``migrations/``); a newer one is refused.
  ``read()`` / ``write()`` give a connection inside one transaction. Writes: ``claim``, ``claim_many``,
  ``commit_analyses``, ``commit_quarantine``, ``reopen_quarantined``, ``release_claim``, ``insert_model``,
  ``insert_scores``, ``add_verdict``, ``activate_model``, ``audit``. Common reads as methods: ``recordings``,
  ``quarantine``, ``actuations``, ``export_actuations``, ``flag_summary``, ``flags``, ``models``, ``load_model``,
  ``active_models``, ``band_levels``, ``lot_names``, ``unscored``, ``trajectory``, ``audit_log``,
  ``check_integrity``, ``schema_version``. ``archive_dir`` / ``quarantine_dir``: where originals are kept.
- ``analysis.store.queries``: the one read API, named functions of a read connection (the dashboard's views,
  the command line and the demo use only these).
- ``analysis.store.codec``: how arrays, numbers, models and scores are stored.
- Types: ``Claim``, ``Analysed``, ``ScoredEvent``, ``Trajectory``, ``Statistic``, ``STATISTICS``, ``statistic``,
  ``Filters``, ``VERDICTS``; ``StoreError``, ``SCHEMA_VERSION``, ``default_store_url``, ``safe_url``.

Building reference models and re-scoring history is ``analysis.references`` (a service that uses the store).
"""

from . import queries
from .core import DEFAULT_STORE_FILE, Store, default_store_url, safe_url
from .errors import StoreError
from .migrate import SCHEMA_VERSION
from .types import (
    APPROVAL_MEANINGS,
    REVIEW_VERDICTS,
    STATISTICS,
    VERDICTS,
    Analysed,
    Claim,
    Filters,
    ScoredEvent,
    Statistic,
    Trajectory,
    statistic,
)

__all__ = [
    "Store", "StoreError", "queries", "Claim", "Analysed", "ScoredEvent", "Trajectory", "Statistic", "STATISTICS",
    "statistic", "Filters", "VERDICTS", "REVIEW_VERDICTS", "APPROVAL_MEANINGS", "SCHEMA_VERSION", "DEFAULT_STORE_FILE",
    "default_store_url", "safe_url",
]
