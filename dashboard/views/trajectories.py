"""Trajectories: score trajectories of chosen actuations or lots over slice time, over the reference envelope,
in a score-against-score plane, and their per-slice T² and SPE against the limits."""

from __future__ import annotations

import numpy as np
from dash import Input, Output, dcc, html

from analysis.errors import AnalysisError
from analysis.store import StoreError, queries

from .. import figures
from ..safety import MAX_ID, guarded
from ..urlstate import register_url_state
from .common import card, filter_bar, name_options, split_list, view_header

NAME = "trajectories"
PATH = "/trajectories"
TITLE = "Trajectories"
IN_MENU = True

URL_STATE = [("profile", "trajectories-profile", "value"), ("event", "trajectories-event", "value"),
             ("lots", "trajectories-lots", "value"), ("ids", "trajectories-ids", "value"),
             ("x", "trajectories-x", "value"), ("y", "trajectories-y", "value")]


def _component(value, default: int) -> int:
    """A component index from the URL or a dropdown: 0..9, else the default."""
    text = str(value)
    return int(text) if text.isdigit() and int(text) < 10 else default


def parse_ids(text) -> list[int]:
    """'12, 15 20' -> [12, 15, 20]: whole numbers that can be store ids (1 .. 2**63 - 1), at most 200 of them;
    anything else is ignored."""
    out = []
    for part in str(text or "")[:10_000].replace(";", ",").replace(" ", ",").split(","):
        p = part.strip()
        if p.isdigit() and 1 <= int(p) <= MAX_ID and len(out) < 200:
            out.append(int(p))
    return out


def trajectories_data(ctx, profile, event, *, lots_=(), ids=()) -> dict:
    """The active model of the event (envelope, limits, slice times) and the chosen trajectories."""
    try:
        models = ctx.store.active_models(profile) if profile else {}
    except (AnalysisError, StoreError) as exc:
        return {"model": None, "trajs": None, "problem": f"The active reference model cannot be read: {exc}"}
    if event not in models:
        return {"model": None, "trajs": None}
    model_id, model = models[event]
    with ctx.store.read() as conn:
        trajs = queries.trajectories(conn, event, actuation_ids=ids, lots_=lots_, profile=profile)
    return {"model": model, "model_id": model_id, "trajs": trajs}


def layout(ctx, q: dict):
    with ctx.store.read() as conn:
        ch = queries.choices(conn)
    offered = [o["value"] for o in name_options(ch["lots"])]
    lots_ = [lot for lot in split_list(q.get("lots")) if lot in offered]
    if not lots_ and not q.get("ids") and offered:
        lots_ = offered[-1:]
    comps = [{"label": f"component {i + 1}", "value": str(i)} for i in range(10)]
    return html.Div([
        view_header("Trajectories", "Score trajectories over the slices of an event, against the reference envelope "
                                    "(centre ± 3 spreads per slice). Flagged actuations are drawn in the flag colour."),
        card(filter_bar(NAME, ch, q, want=("profile", "event")), html.Div(className="filter-bar", children=[
            html.Label([html.Span("Lots", className="filter-label"), dcc.Dropdown(
                id="trajectories-lots", options=name_options(ch["lots"]), value=lots_, multi=True,
                placeholder="choose lots")],
                className="filter filter-wide"),
            html.Label([html.Span("Actuation ids", className="filter-label"), dcc.Input(
                id="trajectories-ids", value=q.get("ids", ""), debounce=True, placeholder="e.g. 12, 40",
                className="text-input")], className="filter"),
            html.Label([html.Span("Across", className="filter-label"), dcc.Dropdown(
                id="trajectories-x", options=comps,
                value=q.get("x", "0") if q.get("x", "0") in [c["value"] for c in comps] else "0",
                clearable=False)], className="filter"),
            html.Label([html.Span("Up", className="filter-label"), dcc.Dropdown(
                id="trajectories-y", options=comps,
                value=q.get("y", "1") if q.get("y", "1") in [c["value"] for c in comps] else "1",
                clearable=False)], className="filter"),
        ])),
        html.P(id="trajectories-note", className="muted"),
        html.Div(className="grid-2", children=[
            card(dcc.Loading(dcc.Graph(id="trajectories-time", config={"displaylogo": False}), type="dot")),
            card(dcc.Graph(id="trajectories-plane", config={"displaylogo": False})),
        ]),
        card(dcc.Graph(id="trajectories-slices", config={"displaylogo": False})),
        dcc.Store(id="trajectories-url"),
    ])


def trajectory_figures(data: dict, *, x: int = 0, y: int = 1, meeting: bool = False) -> dict:
    model, trajs = data["model"], data["trajs"]
    if model is None:
        e = figures.empty_figure("No readable active reference model for this event.", meeting=meeting)
        return {"time": e, "plane": e, "slices": e, "note": data.get("problem", "")}
    if trajs is None or trajs.empty:
        e = figures.empty_figure("Choose lots or actuation ids to draw.", meeting=meeting)
        return {"time": e, "plane": e, "slices": e, "note": ""}
    a = model.n_components_
    x, y = min(x, a - 1), min(y, a - 1)
    centre = np.asarray(model.envelope_centre_, dtype=float)
    spread = np.asarray(model.envelope_spread_, dtype=float)
    k = float(model.envelope_k)
    times = np.asarray(model.slice_times_s_ if model.slice_times_s_ is not None else np.arange(centre.shape[0]))
    t2 = np.stack(trajs["t2"].to_list())
    spe = np.stack(trajs["spe"].to_list())
    labels = [f"actuation {i} ({r})" for i, r in zip(trajs["actuation_id"], trajs["rig"])]
    note = (f"{len(trajs)} actuations, {int(trajs['flagged'].sum())} flagged; the model has {a} component(s)"
            + ("; the plane needs two, so it shows component 1 against itself." if a < 2 else "."))
    return {
        "time": figures.score_time_figure(times, centre, spread, k, trajs, component=x, meeting=meeting),
        "plane": figures.score_plane_figure(centre, spread, k, trajs, components=(x, y), meeting=meeting),
        "slices": figures.slice_stats_figure(times, t2, spe, t2_limit=model.t2_limit_, spe_limit=model.spe_limit_,
                                             labels=labels, meeting=meeting),
        "note": note,
    }


def register(app, ctx):
    register_url_state(app, NAME, URL_STATE)

    @app.callback(Output("trajectories-time", "figure"), Output("trajectories-plane", "figure"),
                  Output("trajectories-slices", "figure"), Output("trajectories-note", "children"),
                  Input("trajectories-profile", "value"), Input("trajectories-event", "value"),
                  Input("trajectories-lots", "value"), Input("trajectories-ids", "value"),
                  Input("trajectories-x", "value"), Input("trajectories-y", "value"), Input("app-meeting", "data"))
    @guarded("figure", "figure", "figure", "text")
    def update(profile, event, lots_, ids, x, y, meeting):
        data = trajectories_data(ctx, profile, event, lots_=split_list(lots_), ids=parse_ids(ids))
        f = trajectory_figures(data, x=_component(x, 0), y=_component(y, 1), meeting=bool(meeting))
        return f["time"], f["plane"], f["slices"], f["note"]
