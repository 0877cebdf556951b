"""Today: the active signals of units, cells, lots and rigs with their causes and next steps (also when no
single actuation flagged); the latest recordings of every rig with their state, refreshing by itself; each flag
in plain words with its suggested cause (recording / rig / lot / unit, from the stored signals), and the
recordings that could not be analysed.

Refreshing by itself: every ``refresh_s`` the page asks the store what changed (queries.today_changes, a few
index lookups) and re-renders only when that answer did, so a new result shows within seconds without the
whole view being queried on every tick."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime

from dash import Input, Output, State, dcc, html
from dash.exceptions import PreventUpdate

from analysis.store import queries
from analysis.triage import NEXT_STEP, actuation_state, subject_words, suggest_cause

from ..labels import short
from ..review import register_review, review_card
from ..safety import guarded
from ..urlstate import register_url_state
from ..words import describe_flag
from .common import card, pick, table, view_header

NAME = "today"
PATH = "/today"
TITLE = "Today"
IN_MENU = True

URL_STATE = [("per_rig", "today-per-rig", "value")]
PER_RIG_CHOICES = (5, 10, 20, 50)
#: Flag lines shown per actuation (the rest are on its own page).
MAX_LINES = 3
#: Signals above the actuation level listed (the widest level first).
MAX_SIGNALS = 30


def changes_key(store) -> str:
    """A short text that changes whenever what Today shows may have (queries.today_changes)."""
    with store.read() as conn:
        stamp = queries.today_changes(conn)
    return hashlib.sha256(repr(stamp).encode()).hexdigest()[:16]


def today_data(store, *, per_rig: int = 10) -> dict:
    """rows: the latest actuations per rig with a state; flags: their flags with words, suggested cause and why;
    quarantine: the latest quarantined recordings; counts: per state."""
    with store.read() as conn:
        rows = queries.latest_per_rig(conn, per_rig=per_rig)
        fl = queries.flags(conn, actuation_ids=rows["actuation_id"])
        quar = queries.recent_quarantine(conn)
        flagged = rows[rows["actuation_id"].isin(set(fl["actuation_id"]))]
        evidence = queries.triage_evidence(conn, sorted(set(flagged["lot"])), sorted(set(flagged["rig"])))
        wide = queries.signals(conn, levels=("lot", "rig", "cell", "unit"))
        waiting = queries.awaiting_review(conn)  # a count, not the signals: Today refreshes by itself
        stored = queries.signals(conn, levels=("actuation",))
        stored = stored[stored["actuation_id"].isin(set(flagged["actuation_id"]))]
    rows = rows.copy()
    rows["state"] = [actuation_state(passed_qc=bool(p), n_model_flags=int(m), n_qc_flags=int(q))
                     for p, m, q in zip(rows["passed_qc"], rows["n_model_flags"], rows["n_qc_flags"])]
    causes = {}
    for aid, g in stored.groupby("actuation_id"):  # the stored decision, when the store has one
        causes[aid] = (g["cause"].iloc[0], "; ".join(dict.fromkeys(g["evidence"])))
    for aid, g in fl.groupby("actuation_id"):
        if aid in causes:
            continue
        r = rows[rows["actuation_id"] == aid].iloc[0]
        causes[aid] = suggest_cause(g["statistic"].tolist(), lot=r["lot"], rig=r["rig"], evidence=evidence)
    rows["cause"] = rows["actuation_id"].map(lambda a: causes.get(a, ("", ""))[0])
    fl = fl.merge(rows[["actuation_id", "site", "rig", "lot", "unit", "recorded_at"]], on="actuation_id", how="left")
    fl["words"] = [describe_flag(s, e, r, v, lim) for s, e, r, v, lim in
                   zip(fl["statistic"], fl["event"], fl["reason"], fl["value"], fl["limit"])]
    fl["cause"] = fl["actuation_id"].map(lambda a: causes[a][0])
    fl["because"] = fl["actuation_id"].map(lambda a: causes[a][1])
    counts = rows["state"].value_counts().to_dict()
    counts["quarantined"] = len(quar)
    counts["signals"] = len(wide)
    counts["awaiting review"] = waiting
    return {"rows": rows, "flags": fl, "quarantine": quar, "counts": counts, "signals": wide}


_LEVEL_WORDS = {"lot": "Lot", "rig": "Rig", "cell": "Lot on a rig", "unit": "Unit"}


def _where(r) -> str:
    parts = []
    for key, word in (("lot", "lot"), ("rig", "rig"), ("unit", "unit"), ("site", "site")):
        v = r.get(key)
        if isinstance(v, str) and v:
            parts.append(f"{word} {short(v)}")
    return " · ".join(parts)


def render_signals(sig) -> html.Div:
    """The active signals above the actuation level: level, where, event, cause, evidence and next step."""
    if not len(sig):
        return html.P("No unit, lot or rig signals.", id="today-signals")
    items = []
    for _, r in sig.head(MAX_SIGNALS).iterrows():
        cause = r["cause"] if r["cause"] in NEXT_STEP else "unit"
        items.append(html.Li(className=f"flag-item signal-item cause-{cause}", children=[
            html.Div([html.Strong(f"{_LEVEL_WORDS.get(r['level'], r['level'])}: "), html.Span(_where(r)),
                      html.Span(f" · {short(subject_words(r['event']))} · since {r['first']}", className="muted")]),
            html.Div(short(r["evidence"], 400)),
            html.Div([html.Strong(f"Suggested cause: {cause}"),
                      html.Span(f". Next: {NEXT_STEP[cause]}.", className="muted")]),
        ]))
    more = [html.P(f"... and {len(sig) - MAX_SIGNALS} more (harken export signals)", className="muted")] \
        if len(sig) > MAX_SIGNALS else []
    return html.Div([html.Ul(items, id="today-signals", className="flag-list")] + more)



def render_today(data: dict, *, refresh_s: float | None = None) -> html.Div:
    rows, fl, quar, counts = data["rows"], data["flags"], data["quarantine"], data["counts"]
    badges = html.Div(className="state-badges", children=[
        html.Span(f"{counts.get(s, 0)} {s}", className=f"state state-{s.replace(' ', '-')}")
        for s in ("analysed", "flagged", "quality check failed", "quarantined", "awaiting review")])
    items = []
    latest_first = fl.sort_values("recorded_at", ascending=False, kind="stable")
    for aid, g in latest_first.groupby("actuation_id", sort=False):
        r = g.iloc[0]
        items.append(html.Li(className=f"flag-item cause-{r['cause']}", children=[
            html.Div([dcc.Link(f"Actuation {aid}", href=f"/actuation/{aid}"),
                      html.Span(f" · {short(r['rig'])} ({short(r['site'])}) · lot {short(r['lot'])} · unit "
                                f"{short(r['unit'])} · {r['recorded_at']}",
                                className="muted")]),
            html.Ul([html.Li(short(w, 400)) for w in g["words"].head(MAX_LINES)] + (
                [html.Li(f"... and {len(g) - MAX_LINES} more on the actuation's page", className="muted")]
                if len(g) > MAX_LINES else [])),
            html.Div([html.Strong(f"Suggested cause: {r['cause']}"), html.Span(f" — {short(r['because'], 400)}. "),
                      html.Span(f"Next: {NEXT_STEP[r['cause']]}.", className="muted")]),
        ]))
    flags_block = html.Ul(items, id="today-flags", className="flag-list") if items else \
        html.P("Nothing flagged among the latest recordings.", id="today-flags")
    per_rig = []
    for (site, rig), g in rows.groupby(["site", "rig"], sort=True):
        per_rig.append(html.Div(className="rig-block", children=[
            html.H3(f"{short(rig)} · {short(site)}"),
            table(g, [("actuation_id", "Actuation"), ("recorded_at", "Recorded", str), ("lot", "Lot", str),
                      ("unit", "Unit", str), ("state", "State", str), ("cause", "Suggested cause", str)],
                  link=("actuation_id", lambda r: f"/actuation/{r['actuation_id']}"),
                  row_class=lambda r: f"row-{r['state'].replace(' ', '-')}"),
        ]))
    quar_block = table(quar, [("file", "File", str), ("reason", "Reason", str), ("rig", "Rig", str),
                              ("received_at", "Received (UTC)", str)], id="today-quarantine") if len(quar) else \
        html.P("No recording was quarantined.", id="today-quarantine")
    return html.Div([
        card(badges, html.P(f"Updated {datetime.now(UTC).strftime('%H:%M:%S')} UTC"
                            + (f"; looks for new results every {refresh_s:g} s." if refresh_s else "."),
                            className="muted", id="today-updated")),
        card(html.H2(f"Signals ({counts.get('signals', 0)})"),
             html.P("Units, lots on a rig, lots and rigs that depart from the reference as a whole, even when no "
                    "single actuation flagged.", className="muted"), render_signals(data.get("signals", []))),
        card(html.H2("Flags"), flags_block),
        card(html.H2("Quarantined recordings"), html.P("These could not be analysed; the reason says why.",
                                                        className="muted"), quar_block),
        card(html.H2("Latest recordings per rig"), html.Div(per_rig, className="rig-grid")),
    ])


def layout(ctx, q: dict):
    per_rig = pick(q.get("per_rig"), [str(v) for v in PER_RIG_CHOICES], "10")
    with ctx.store.read() as conn:
        reviewable = queries.signals(conn, reviews=True)
    return html.Div([
        view_header("Today", "The latest recordings of every rig. This page refreshes by itself."),
        card(html.Label([html.Span("Recordings per rig", className="filter-label"), dcc.Dropdown(
            id="today-per-rig", value=per_rig, clearable=False,
            options=[{"label": str(v), "value": str(v)} for v in PER_RIG_CHOICES])], className="filter")),
        dcc.Interval(id="today-interval", interval=int(ctx.refresh_s * 1000)),
        dcc.Store(id="today-changes"),
        html.Div(id="today-body"),
        review_card("today", reviewable),
        dcc.Store(id="today-url"),
    ])


def register(app, ctx):
    register_url_state(app, NAME, URL_STATE)
    register_review(app, ctx, "today")

    @app.callback(Output("today-changes", "data"), Input("today-interval", "n_intervals"),
                  State("today-changes", "data"))
    @guarded("keep")
    def look(_n, seen):
        """Every tick: the cheap question; the answer moves on (and Today re-renders) only when it changed."""
        key = changes_key(ctx.store)
        if key == seen:
            raise PreventUpdate  # nothing sent, nothing re-rendered
        return key

    @app.callback(Output("today-body", "children"), Input("today-changes", "data"),
                  Input("today-per-rig", "value"))
    @guarded("children")
    def refresh(_changes, per_rig):
        n = int(pick(str(per_rig), [str(v) for v in PER_RIG_CHOICES], "10"))
        return render_today(today_data(ctx.store, per_rig=n), refresh_s=ctx.refresh_s)
