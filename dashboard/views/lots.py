"""Lots: lot-by-lot control charts of any per-actuation statistic, per rig or pooled, with limits; the signals
ringed are the store's (with their suggested cause) where the store keeps signals for the statistic, else this
chart's own limit and run-rule checks; clicking an actuation opens it, clicking a lot point lists the lot's units
against their limits and its actuations."""

from __future__ import annotations

from urllib.parse import quote

from dash import Input, Output, dcc, html

from analysis.monitor import RULE_SETS, RULES, lot_chart
from analysis.store import Filters, queries, statistic
from analysis.triage import CHART_STATISTICS, actuation_state

from .. import figures
from ..cache import cached_query
from ..labels import short
from ..safety import guarded
from ..urlstate import register_url_state
from .common import card, filter_bar, filters_from, fmt, pick, split_list, table, view_header

NAME = "lots"
PATH = "/lots"
TITLE = "Lots"
IN_MENU = True

URL_STATE = [
    ("profile", "lots-profile", "value"), ("event", "lots-event", "value"), ("stat", "lots-stat", "value"),
    ("site", "lots-site", "value"), ("rig", "lots-rig", "value"), ("from", "lots-dates", "start_date"),
    ("to", "lots-dates", "end_date"), ("group", "lots-group", "value"), ("rules", "lots-rules", "value"),
    ("cloud", "lots-cloud", "value"), ("lot", "lots-selected", "data"),
]


def _chart_queries(conn, stat_key, event, filters, by_rig, cloud, max_points):
    points = queries.lot_points(conn, stat_key, event, filters, by_rig=by_rig)
    n = int(points["n"].sum()) if len(points) else 0
    return (points, queries.reference_lots(conn, filters.profile, event),
            queries.actuation_cloud(conn, stat_key, event, filters, max_points=max_points, n_total=n)
            if cloud else None)


def lots_chart_data(store, stat_key: str, event: str, filters: Filters, *, by_rig: bool = True,
                    rules: str = "we", cloud: bool = True, max_points: int = 4000, cache=None):
    """(LotChart, thinned actuation cloud or None, Statistic): everything the chart draws. The SQL aggregates
    are kept in ``cache`` (a diskcache) until the store changes."""
    stat = statistic(stat_key)
    points, ref, cl = cached_query(store, cache, "lots", _chart_queries, stat_key, event, filters, by_rig, cloud,
                                   max_points)
    chart = lot_chart(points, reference_lots=ref, log=stat.log, rules=rules)
    return chart, cl, stat


def stored_marks(store, stat_key: str, event: str, profile: str | None, *, by_rig: bool, rules: str):
    """The store's active cell signals (per rig) or lot signals (pooled, rig "all rigs") of ``event`` for the
    chart to ring, or None when the store keeps no signals for this statistic and rule set (the chart then
    rings its own checks)."""
    if stat_key not in CHART_STATISTICS or rules != "we":
        return None
    with store.read() as conn:
        sig = queries.signals(conn, profile=profile, levels=("cell",) if by_rig else ("lot",))
    sig = sig[(sig["event"] == event) & (sig["statistic"] == stat_key)].copy()
    if not by_rig:
        sig["rig"] = "all rigs"
    return sig


def chart_summary(chart, stat, stored=None) -> str:
    """One sentence under the chart: the limits, what they came from, and the signals."""
    if chart.points.empty:
        return "No lots in this selection."
    sig = chart.points[chart.points["signal"]] if stored is None else \
        chart.points.merge(stored[["lot", "rig"]], on=["lot", "rig"])
    lim = "no limits" if chart.ucl != chart.ucl else (
        f"centre {fmt(chart.to_display(chart.centre))}, limits {fmt(chart.to_display(chart.lcl))} – "
        f"{fmt(chart.to_display(chart.ucl))}")
    where = ", ".join(f"lot {short(r.lot)} on {short(r.rig)}" for r in sig.itertuples()) or "none"
    scale = " (on a log scale: the lot's geometric mean)" if chart.log else " (the lot's mean)"
    whose = "stored signals" if stored is not None else "Signals of this chart's checks"
    return (f"{stat.label}{scale}: {lim}, fitted to {chart.limits_from}. "
            f"{whose[0].upper() + whose[1:]} ({len(sig)}): {where}.")


def layout(ctx, q: dict):
    with ctx.store.read() as conn:
        ch = queries.choices(conn)
    group = pick(q.get("group"), ("rig", "pooled"), "rig")
    rules = pick(q.get("rules"), tuple(RULE_SETS), "we")
    cloud = [v for v in split_list(q.get("cloud", "on")) if v == "on"]
    return html.Div([
        view_header("Lots", "Lot-by-lot control chart of a per-actuation statistic. Click a single actuation to "
                            "open it; click a lot point to list that lot's actuations."),
        card(filter_bar(NAME, ch, q), html.Div(className="filter-bar", children=[
            html.Label([html.Span("Points", className="filter-label"), dcc.RadioItems(
                id="lots-group", value=group, inline=True,
                options=[{"label": " one line per rig", "value": "rig"},
                         {"label": " all rigs pooled", "value": "pooled"}])],
                className="filter"),
            html.Label([html.Span("Run rules", className="filter-label"), dcc.RadioItems(
                id="lots-rules", value=rules, inline=True,
                options=[{"label": " Western Electric", "value": "we"}, {"label": " Nelson", "value": "nelson"},
                         {"label": " none", "value": "none"}])], className="filter"),
            dcc.Checklist(id="lots-cloud", value=cloud, options=[{"label": " show single actuations", "value": "on"}],
                          className="filter"),
        ])),
        card(dcc.Loading(dcc.Graph(id="lots-chart", config={"displaylogo": False}), type="dot"),
             html.P(id="lots-summary", className="chart-summary")),
        dcc.Store(id="lots-selected", data=q.get("lot")),
        card(html.Div(id="lots-detail"), class_name="lots-detail-card"),
        dcc.Store(id="lots-url"),
    ])


def register(app, ctx):
    register_url_state(app, NAME, URL_STATE)

    @app.callback(Output("lots-chart", "figure"), Output("lots-summary", "children"),
                  Input("lots-profile", "value"), Input("lots-event", "value"), Input("lots-stat", "value"),
                  Input("lots-site", "value"), Input("lots-rig", "value"), Input("lots-dates", "start_date"),
                  Input("lots-dates", "end_date"), Input("lots-group", "value"), Input("lots-rules", "value"),
                  Input("lots-cloud", "value"), Input("app-meeting", "data"))
    @guarded("figure", "text")
    def update_chart(profile, event, stat, sites_, rigs_, start, end, group, rules, cloud, meeting):
        if not event:
            return figures.empty_figure("No events with results in this store yet.", meeting=bool(meeting)), ""
        f = filters_from(profile, sites_, rigs_, start, end)
        chart, cl, st = lots_chart_data(ctx.store, stat, event, f, by_rig=group != "pooled", rules=rules or "we",
                                        cloud="on" in (cloud or []), cache=ctx.drill_cache)
        stored = stored_marks(ctx.store, stat, event, f.profile, by_rig=group != "pooled", rules=rules or "we")
        fig = figures.lot_chart_figure(chart, st, cloud=cl, meeting=bool(meeting), rule_words=dict(RULES),
                                       stored=stored)
        return fig, chart_summary(chart, st, stored)

    # A click on a single actuation navigates the way a dcc.Link does (push the address, tell dcc.Location);
    # a click on a lot point lists the lot below the chart.
    app.clientside_callback(
        """
        function(click) {
            const nu = window.dash_clientside.no_update;
            if (!click || !click.points || !click.points.length || click.points[0].customdata == null) { return nu; }
            const cd = click.points[0].customdata;  // an actuation's id, or ['lot', lot, rig]
            if (typeof cd === 'number') {
                const meeting = document.body.classList.contains('meeting');
                window.history.pushState({}, '', '/actuation/' + Math.round(cd) + (meeting ? '?meeting=1' : ''));
                window.dispatchEvent(new CustomEvent('_dashprivate_pushstate'));
                window.scrollTo(0, 0);
                return nu;
            }
            if (cd[0] === 'lot') { return cd[1] + '|' + cd[2]; }
            return nu;
        }
        """,
        Output("lots-selected", "data"), Input("lots-chart", "clickData"), prevent_initial_call=True,
    )

    @app.callback(Output("lots-detail", "children"), Input("lots-selected", "data"), Input("lots-group", "value"),
                  Input("lots-profile", "value"), Input("lots-event", "value"))
    @guarded("children")
    def show_lot(selected, group, profile, event):
        return lot_detail(ctx.store, selected, profile=profile, event=event)


def units_block(units, lot: str, rig: str | None, resonance=None):
    """Each unit of the lot (on the rig) against its limits: the mean event residual over its actuations and, for
    an event whose model has a resonance block, the T² of its mean resonance features."""
    if units is None or not len(units):
        return html.P("No unit limits for this event (build a reference model to get them).", className="muted",
                      id="lots-units")
    cols = [("unit", "Unit"), ("rig", "Rig"), ("n", "Actuations"), ("value", "Mean", fmt), ("limit", "Limit", fmt)]
    if resonance is not None and len(resonance):
        res = resonance[["unit", "value", "limit", "signal"]].rename(
            columns={"value": "res_value", "limit": "res_limit", "signal": "res_signal"})
        units = units.merge(res, on="unit", how="left")
        units["signal"] = units["signal"].astype(bool) | units["res_signal"].fillna(False).astype(bool)
        cols += [("res_value", "Resonance T²", fmt), ("res_limit", "Its limit", fmt)]
    units = units.assign(state=["beyond its limit" if s else "within" for s in units["signal"]])
    return html.Div([
        html.H4(f"Units of lot {short(lot)}" + (f" on {short(rig)}" if rig else "")
                + ": mean event residual (× reference median)"
                + (" and resonance T²" if len(cols) > 5 else "") + " against each unit's limit"),
        table(units, cols + [("state", "State")], id="lots-units",
              row_class=lambda r: "row-flagged" if r["signal"] else None),
    ])


def lot_detail(store, selected, *, profile=None, event=None):
    if not selected:
        return html.P("Click a lot point to list its units and actuations here.", className="muted")
    lot, _, rig = str(selected).partition("|")
    rig_filter = None if rig in ("", "all rigs") else rig
    with store.read() as conn:
        df = queries.lot_actuations(conn, lot, rig=rig_filter)
        units = queries.units_table(conn, profile, event, lot=lot, rig=rig_filter) if profile and event else None
        resonance = (queries.units_table(conn, profile, event, lot=lot, rig=rig_filter, statistic="resonance_t2")
                     if profile and event else None)
    if df.empty:
        return html.P(f"No actuations of lot {short(lot)}.")
    df["state"] = [actuation_state(passed_qc=bool(p), n_model_flags=int(n), n_qc_flags=0)
                   for p, n in zip(df["passed_qc"], df["n_flags"])]
    return html.Div([
        html.H3(f"Lot {short(lot)}" + (f" on {short(rig_filter)}" if rig_filter else " (all rigs)")
                + f": {len(df)} actuations"),
        html.P(dcc.Link("Show this lot's score trajectories", href=f"/trajectories?lots={quote(lot)}",
                        id="lots-detail-trajectories")),
        units_block(units, lot, rig_filter, resonance),
        table(df, [("actuation_id", "Actuation"), ("unit", "Unit"), ("actuation", "No."), ("rig", "Rig"),
                   ("recorded_at", "Recorded"), ("state", "State"), ("n_flags", "Flags")],
              id="lots-detail-table", link=("actuation_id", lambda r: f"/actuation/{r['actuation_id']}"),
              row_class=lambda r: "row-flagged" if r["state"] != "analysed" else None),
    ])
