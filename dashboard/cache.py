"""Aggregates kept between requests: a query's result is cached under its name, its arguments and the store's
fingerprint (largest ids and active models, read through primary-key indexes in microseconds). Anything added
to the store, or a change of active model, changes the fingerprint, so a cached result is never stale; the
cache is a diskcache folder shared by every server process."""

from __future__ import annotations

import hashlib
import pickle

from analysis.store import queries

__all__ = ["cached_query"]

#: Cached aggregates expire after a day even if nobody asks for them again (the cache also has a size limit).
EXPIRE_S = 24 * 3600


def cached_query(store, cache, name: str, fn, *args, **kwargs):
    """fn(conn, *args, **kwargs) in one read transaction, or its cached result for the same store state."""
    with store.read() as conn:
        fp = queries.fingerprint(conn)
        key = "q:" + hashlib.sha256(pickle.dumps((store.url, name, args, sorted(kwargs.items()), fp))).hexdigest()
        if cache is not None:
            hit = cache.get(key, default=None)
            if hit is not None:
                return hit
        out = fn(conn, *args, **kwargs)
    if cache is not None:
        cache.set(key, out, expire=EXPIRE_S)
    return out
