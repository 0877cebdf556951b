"""Audit: the store's hash-chained audit trail, filtered by who, what and when (method owners and admins)."""

from __future__ import annotations

import pandas as pd
from dash import Input, Output, State, dcc, html

from analysis.store import queries

from .. import auth
from ..safety import guarded
from .common import card, table, view_header

NAME = "audit"
PATH = "/audit"
TITLE = "Audit"
IN_MENU = True
#: Who may open it (the menu shows it to them only; its data callback is behind the server's gate).
ROLE = "method_owner"
MAX_ROWS = 500


def allowed() -> bool:
    return auth.acting(ROLE) is not None


def audit_rows(store, *, person=None, action=None, since=None, until=None, limit: int = MAX_ROWS) -> pd.DataFrame:
    """The newest ``limit`` rows of the trail matching the filters (person exact, action a prefix such as
    'auth.', since/until dates), filtered and cut in the database."""
    with store.read() as conn:
        log = queries.audit_log(conn, person=person, action_prefix=action, since=since, until=until,
                                newest_first=True, limit=limit)
    if len(log):
        log["when"] = pd.to_datetime(log["at"]).dt.strftime("%Y-%m-%d %H:%M:%S")
        log["hash"] = log["row_sha256"].fillna("").str[:12]
    return log


def layout(ctx, q: dict):
    if not allowed():
        return html.Div([view_header("Audit", "The store's audit trail."),
                         card(html.P("The audit trail is shown to method owners and admins: sign in as one.",
                                     className="notice", id="audit-who"))])
    with ctx.store.read() as conn:
        people, kinds = queries.audit_facets(conn)
    return html.Div([
        view_header("Audit", "Every audited act, newest first. Each row carries the SHA-256 of its content and of the "
                             "row before it; `harken audit verify` checks the chain."),
        card(html.Div(className="filter-bar", children=[
            html.Label([html.Span("Who", className="filter-label"), dcc.Dropdown(
                id="audit-person", options=people, value=None, placeholder="anyone")], className="filter"),
            html.Label([html.Span("What", className="filter-label"), dcc.Dropdown(
                id="audit-action", options=kinds, value=None, placeholder="anything")], className="filter"),
            html.Label([html.Span("When", className="filter-label"), dcc.DatePickerRange(
                id="audit-dates", display_format="YYYY-MM-DD")], className="filter filter-wide"),
        ])),
        card(html.Div(id="audit-table")),
    ])


def register(app, ctx):
    auth.require("audit-table", ROLE)  # reading the trail is gated on the server like a write

    @app.callback(Output("audit-table", "children"), Input("audit-person", "value"), Input("audit-action", "value"),
                  Input("audit-dates", "start_date"), Input("audit-dates", "end_date"), State("app-user", "data"))
    @guarded("children")
    def show(person, action, since, until, _person):
        if not allowed():
            return html.P("The audit trail is shown to method owners and admins.", className="notice")
        rows = audit_rows(ctx.store, person=person if isinstance(person, str) else None,
                          action=action if isinstance(action, str) else None,
                          since=since if isinstance(since, str) else None,
                          until=until if isinstance(until, str) else None, limit=MAX_ROWS + 1)
        if not len(rows):
            return html.P("No audit rows match.", id="audit-rows")
        more = [html.P(f"Showing the newest {MAX_ROWS}; narrow the filters for older rows.", className="muted")] \
            if len(rows) > MAX_ROWS else []
        return html.Div(more + [table(rows.head(MAX_ROWS), [
            ("id", "Row"), ("when", "When (UTC)", str), ("person", "Who", str), ("action", "What", str),
            ("target", "On", str), ("detail", "Detail", str), ("hash", "SHA-256", str)], id="audit-rows")])
