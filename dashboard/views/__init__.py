"""One module per view; each has NAME, PATH, TITLE, IN_MENU, ``layout(ctx, query, **path_args)`` and
``register(app, ctx)``. Component ids start with the view's name."""

from __future__ import annotations

import re

from . import about, actuation, audit, lots, references, rigs, today, trajectories

VIEWS = {m.NAME: m for m in (today, lots, trajectories, rigs, actuation, references, audit, about)}

_ACTUATION = re.compile(r"^/actuation/(?P<actuation_id>\d+)/?$")


def view_for_path(pathname: str):
    """(view module, path arguments) for a path, or (None, {})."""
    p = pathname.rstrip("/") or "/"
    if p in ("/", "/today"):
        return today, {}
    m = _ACTUATION.match(p)
    if m:
        n = int(m.group("actuation_id"))
        return (actuation, {"actuation_id": n}) if 1 <= n <= 2**63 - 1 else (None, {})
    for v in VIEWS.values():
        if v.PATH == p and v is not actuation:
            return v, {}
    return None, {}
