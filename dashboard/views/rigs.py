"""Rigs & sites: the same statistic side by side per rig and site — distributions, offsets from the reference,
flag and quality-check failure rates per 1,000 actuations, and repeatability / reproducibility across rigs."""

from __future__ import annotations

import math

import pandas as pd
from dash import Input, Output, dcc, html

from analysis.monitor import precision_from_groups
from analysis.store import Filters, queries, statistic

from .. import figures
from ..cache import cached_query
from ..safety import guarded
from ..urlstate import register_url_state
from .common import card, filter_bar, filters_from, fmt, table, view_header

NAME = "rigs"
PATH = "/rigs"
TITLE = "Rigs & sites"
IN_MENU = True

URL_STATE = [
    ("profile", "rigs-profile", "value"), ("event", "rigs-event", "value"), ("stat", "rigs-stat", "value"),
    ("site", "rigs-site", "value"), ("from", "rigs-dates", "start_date"), ("to", "rigs-dates", "end_date"),
]


def _rig_queries(conn, stat_key, event, filters):
    summary = queries.rig_summary(conn, stat_key, event, filters)
    lo, hi = (summary["lo"].min(), summary["hi"].max()) if summary["n"].sum() else (None, None)
    lo, hi = (None, None) if lo is None or pd.isna(lo) else (float(lo), float(hi))
    return (summary, queries.rig_histogram(conn, stat_key, event, filters, lo=lo, hi=hi),
            queries.reference_summary(conn, stat_key, event, filters))


def rigs_data(store, stat_key: str, event: str, filters: Filters, *, cache=None) -> dict:
    """summary (per rig, with offset from the reference in reference SDs), histogram, reference, precision.
    The SQL aggregates are kept in ``cache`` (a diskcache) until the store changes."""
    summary, (edges, hist), ref = cached_query(store, cache, "rigs", _rig_queries, stat_key, event, filters)
    summary = summary.copy()
    if ref and ref["sd"] and ref["sd"] > 0:
        summary["offset_sd"] = (summary["mean"] - ref["mean"]) / ref["sd"]
    else:
        summary["offset_sd"] = math.nan
    return {"summary": summary, "edges": edges, "hist": hist, "reference": ref,
            "precision": precision_from_groups(summary["n"], summary["mean"], summary["sd"])}


def _shown(stat, v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "—"
    return fmt(math.exp(v)) if stat.log else fmt(v)


def numbers_table(data: dict, stat) -> html.Div:
    s = data["summary"].copy()
    unit = "on the log scale" if stat.log else (stat.unit or "")
    cols = [("site", "Site", str), ("rig", "Rig", str), ("actuations", "Actuations"),
            ("mean", "Geometric mean" if stat.log else "Mean", lambda v: _shown(stat, v)),
            ("sd", f"SD ({unit})" if unit else "SD"), ("offset_sd", "Offset from reference [ref. SD]"),
            ("flags_per_1000", "Flagged per 1,000"), ("qc_failures_per_1000", "QC failed per 1,000")]
    pr, ref = data["precision"], data["reference"]
    words = (f"Across {pr.p} rigs: repeatability SD s_r = {fmt(pr.s_r)}, between-rig SD s_L = {fmt(pr.s_L)}, "
             f"reproducibility SD s_R = {fmt(pr.s_R)} (ISO 5725-2, {unit or 'statistic units'}).")
    refw = (f"Reference: {ref['n']} actuations of lots {', '.join(ref['lots'])}, mean {_shown(stat, ref['mean'])}, "
            f"SD {fmt(ref['sd'])}." if ref else "No active reference model for this event: no offsets.")
    return html.Div([table(s, cols, id="rigs-table"), html.P(words, id="rigs-precision"),
                     html.P(refw, className="muted")])


def layout(ctx, q: dict):
    with ctx.store.read() as conn:
        ch = queries.choices(conn)
    return html.Div([
        view_header("Rigs & sites", "One statistic side by side on every rig: its spread, its offset from the "
                                    "reference, and how often each rig flags."),
        card(filter_bar(NAME, ch, q, want=("profile", "event", "stat", "site", "dates"))),
        card(html.H2("Numbers"), dcc.Loading(html.Div(id="rigs-numbers"), type="dot")),
        html.Div(className="grid-2", children=[
            card(html.H2("Distribution per rig"), dcc.Graph(id="rigs-distribution", config={"displaylogo": False})),
            card(html.H2("Flag and quality-check failure rates"),
                 dcc.Graph(id="rigs-rates", config={"displaylogo": False})),
        ]),
        card(html.H2("Rig background over time"),
             html.P("What each rig sounds like before the first event of a recording (hum, drive noise, whines), "
                    "compared with the rig's own reference lots: a rig whose background departs in two lots is a "
                    "rig signal.", className="muted"),
             dcc.Graph(id="rigs-fingerprint", config={"displaylogo": False})),
        dcc.Store(id="rigs-url"),
    ])


def register(app, ctx):
    register_url_state(app, NAME, URL_STATE)

    @app.callback(Output("rigs-numbers", "children"), Output("rigs-distribution", "figure"),
                  Output("rigs-rates", "figure"), Output("rigs-fingerprint", "figure"),
                  Input("rigs-profile", "value"), Input("rigs-event", "value"), Input("rigs-stat", "value"),
                  Input("rigs-site", "value"), Input("rigs-dates", "start_date"), Input("rigs-dates", "end_date"),
                  Input("app-meeting", "data"))
    @guarded("children", "figure", "figure", "figure")
    def update(profile, event, stat_key, sites_, start, end, meeting):
        meeting = bool(meeting)
        if not event:
            e = figures.empty_figure("No events with results yet.", meeting=meeting)
            return html.P("No results yet."), e, e, e
        stat = statistic(stat_key)
        data = rigs_data(ctx.store, stat_key, event, filters_from(profile, sites_, None, start, end),
                         cache=ctx.drill_cache)
        return (numbers_table(data, stat),
                figures.rig_distribution_figure(data["edges"], data["hist"], data["summary"], stat,
                                                reference=data["reference"], meeting=meeting),
                figures.rig_rates_figure(data["summary"], meeting=meeting),
                figures.rig_fingerprint_figure(fingerprint_data(ctx.store, profile, sites_), meeting=meeting))


def fingerprint_data(store, profile, sites_=None):
    """The rig fingerprint cells of ``profile`` (analysis.store.queries.rig_fingerprint), for the chosen sites."""
    if not profile:
        return None
    with store.read() as conn:
        cells = queries.rig_fingerprint(conn, profile)
    sites_ = [s for s in (sites_ or []) if s]
    return cells[cells["site"].isin(sites_)] if sites_ else cells
