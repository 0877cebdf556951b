"""A view's selections in the address bar: read from the query string on layout, written back (with
``history.replaceState``, no re-render) by a clientside callback, so a copied link opens the same view."""

from __future__ import annotations

import json
from urllib.parse import parse_qs

from dash import Dash, Input, Output

__all__ = ["parse_query", "url_sync_script", "register_url_state"]


def parse_query(search: str | None) -> dict:
    """A URL query string as {key: value} (the last value of a repeated key; comma lists stay text)."""
    q = parse_qs((search or "").lstrip("?"), keep_blank_values=False)
    return {k: v[-1] for k, v in q.items()}


def url_sync_script(names) -> str:
    """The clientside function that writes a view's selections into the address bar (no re-render)."""
    return """
    function() {
        const names = %s;
        const p = new URLSearchParams();
        for (let i = 0; i < names.length; i++) {
            let v = arguments[i];
            if (v === null || v === undefined || v === '' || (Array.isArray(v) && v.length === 0)) { continue; }
            if (Array.isArray(v)) { v = v.join(','); }
            p.set(names[i], String(v));
        }
        if (document.body.classList.contains('meeting')) { p.set('meeting', '1'); }
        const q = p.toString();
        const url = window.location.pathname + (q ? '?' + q : '');
        if (url !== window.location.pathname + window.location.search) {
            window.history.replaceState(window.history.state, '', url);
        }
        return q;
    }
    """.replace("%s", json.dumps(list(names)))


def register_url_state(app: Dash, view_name: str, state) -> None:
    """Keep a view's selections in the URL: state is [(query key, component id, prop), ...]; the view's layout
    must hold a ``dcc.Store(id=f"{view_name}-url")``."""
    app.clientside_callback(url_sync_script([k for k, _, _ in state]), Output(f"{view_name}-url", "data"),
                            *[Input(cid, prop) for _, cid, prop in state])


