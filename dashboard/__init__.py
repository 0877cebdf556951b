"""Harken's browser dashboard (Dash): ``create_app(store_url, *, cache_dir=None, ...)``. Nothing is built at import."""

from .app import create_app

__all__ = ["create_app"]
