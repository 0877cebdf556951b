"""Actuation: the drill-down of one actuation (stable link /actuation/<id>): waveform with events and markers,
spectrogram, band levels against the reference envelope, per-slice T² and SPE, band contributions at the worst
slice, QC results, metadata, and two players to listen A/B against a typical reference actuation."""

from __future__ import annotations

import numpy as np
from dash import Input, Output, State, dcc, html

from analysis.errors import AnalysisError
from analysis.store import StoreError, queries
from analysis.triage import actuation_state

from .. import drill, figures
from ..audio import audio_url
from ..labels import short
from ..review import register_review, review_card
from ..safety import guarded, record_id
from ..urlstate import register_url_state
from ..words import describe_flag
from .common import card, cell, fmt, pick, table, view_header

NAME = "actuation"
PATH = "/actuation"
TITLE = "Actuation"
IN_MENU = False

URL_STATE = [("event", "actuation-event", "value"), ("slice", "actuation-slice", "value")]


def _model(ctx, model_id: int):
    cache = ctx.extra.setdefault("models", {})
    if model_id not in cache:
        cache[model_id] = ctx.store.load_model(model_id)
    return cache[model_id]


def profile_words(name, version, sha256) -> str:
    """A device profile as the store recorded it: name, version and the start of its file's SHA-256."""
    if version is None or version != version:  # None, or NaN from a column with gaps
        return f"{name} (version not recorded: analysed before Harken kept it)"
    return f"{name}, version {int(version)}" + (f", file SHA-256 {sha256[:12]}…" if isinstance(sha256, str) else "")


def default_event(detail: dict, flags_df) -> str | None:
    """The event of the first model flag, else the first analysed event."""
    ev = detail["events"]
    found = [n for n, f in zip(ev["name"], ev["found"]) if f]
    for e in flags_df.get("event", []):
        if isinstance(e, str) and e in found:
            return e
    return found[0] if found else (list(ev["name"])[0] if len(ev) else None)


def actuation_figures(ctx, actuation_id: int, event: str | None, slice_choice="worst", *,
                      meeting: bool = False) -> dict:
    """The drill-down's figures and the chosen slice: keys waveform, spectrogram, bands, slices, contributions,
    slice_options, slice_value, note."""
    with ctx.store.read() as conn:
        d = queries.actuation_detail(conn, actuation_id)
        levels = queries.event_levels(conn, actuation_id, event) if event else None
    out = {"note": ""}
    a = drill.load_actuation(d["archive_path"], sidecar=d["sidecar"], cache=ctx.drill_cache, key=d["content_hash"])
    out["waveform"] = figures.waveform_figure(a.wave_t, a.wave_lo, a.wave_hi, d["events"], a.markers_s,
                                              meeting=meeting)
    out["spectrogram"] = figures.spectrogram_figure(a.spec_t, a.spec_f, a.spec_db, meeting=meeting)
    empty = figures.empty_figure
    try:
        tr = ctx.store.trajectory(actuation_id, event) if event else None
    except StoreError:
        tr = None
    if tr is None or tr.t2 is None or levels is None:
        why = "This event has no scores under an active reference model." if event else "No event chosen."
        for k in ("bands", "slices", "contributions"):
            out[k] = empty(why, meeting=meeting)
        out.update(slice_options=[{"label": "worst slice", "value": "worst"}], slice_value="worst", note=why)
        return out
    try:
        model = _model(ctx, tr.model_id)
    except (AnalysisError, StoreError) as exc:
        why = f"The reference model (id {tr.model_id}) cannot be read: {exc}"
        for k in ("bands", "slices", "contributions"):
            out[k] = empty("Reference model unreadable (see the note above).", meeting=meeting)
        out.update(slice_options=[{"label": "worst slice", "value": "worst"}], slice_value="worst", note=why)
        return out
    x, times, centres = levels
    worst = int(np.argmax(np.maximum(tr.t2 / tr.t2_limit, tr.spe / tr.spe_limit)))
    options = [{"label": f"worst slice ({worst}, {times[worst]:.3f} s)", "value": "worst"}] + [
        {"label": f"slice {i} ({t:.3f} s)", "value": str(i)} for i, t in enumerate(times)]
    s = (worst if slice_choice in (None, "worst") or not str(slice_choice).isdigit()
         else min(int(slice_choice), len(times) - 1))
    mean, spread = model.band_envelope()
    unit = str(d["events"].set_index("name").get("level_reference", {}).get(event, "dB") or "dB")
    label = f"{event.replace('_', ' ')} — slice {s} at {times[s]:.3f} s from the onset"
    out["bands"] = figures.band_levels_figure(centres, x[s], mean[s],
                                              spread[s] if spread is not None else np.zeros_like(mean[s]),
                                              k=3.0, slice_label=f"Band levels, {label}", unit=unit, meeting=meeting)
    out["slices"] = figures.slice_stats_figure(times, tr.t2, tr.spe, t2_limit=tr.t2_limit, spe_limit=tr.spe_limit,
                                               labels=[f"actuation {actuation_id}"], meeting=meeting)
    con = model.contributions(np.asarray(x[s], dtype=float), slice_index=s)
    out["contributions"] = figures.contributions_figure(centres, con.t2, con.spe,
                                                        slice_label=f"Band contributions, {label}", meeting=meeting)
    out.update(slice_options=options, slice_value="worst" if s == worst and slice_choice in (None, "worst") else str(s),
               note=f"Model version {tr.model_version}; T² limit {fmt(tr.t2_limit)}, "
                    f"SPE limit {fmt(tr.spe_limit)} per slice.")
    return out


def layout(ctx, q: dict, actuation_id: int):
    with ctx.store.read() as conn:
        d = queries.actuation_detail(conn, actuation_id)
        if d is None:
            return card(html.H2(f"No actuation {actuation_id}"),
                        html.P("It is not in this store (a link from another store?)."),
                        dcc.Link("Back to Today", href="/"))
        fl = queries.flags(conn, actuation_ids=[actuation_id])
        reviewable = queries.signals(conn, actuation_id=actuation_id, reviews=True)
        ref_id = None
    ev = d["events"]
    names = list(ev["name"])
    event = pick(q.get("event"), names, default_event(d, fl))
    with ctx.store.read() as conn:
        ref_id = queries.typical_reference_actuation(conn, d["profile"], event) if event else None
    flag_items = [html.Li(short(describe_flag(r.statistic, r.event, r.reason, r.value, r.limit), 400),
                          className="flag-line") for r in fl.itertuples()]
    state = actuation_state(passed_qc=bool(d["passed_qc"]), n_model_flags=int(fl["statistic"].map(
        lambda s: not str(s).startswith("qc:")).sum()) if len(fl) else 0,
        n_qc_flags=int(fl["statistic"].str.startswith("qc:").sum()) if len(fl) else 0)
    meta = [("Site", d["site"]), ("Rig", d["rig"]), ("Lot", d["lot"]), ("Unit", d["unit"]),
            ("Actuation no.", d["actuation"]), ("Recorded", d["recorded_at_text"]),
            ("Device profile", profile_words(d["profile"], d.get("profile_version"), d.get("profile_sha256"))),
            ("File", d["original_name"]), ("Sample rate", f"{d['sample_rate_hz']} Hz"),
            ("Channels", d["channels"]), ("Duration", f"{fmt(d['duration_s'])} s"),
            ("Markers from", d["marker_source"]), ("Notes", d["sidecar"].get("notes", ""))]
    players = [html.Div(className="player", children=[
        html.Div("This actuation", className="player-title"),
        html.Audio(id="actuation-audio-this", src=audio_url(actuation_id), controls=True, preload="metadata"),
        html.Div([html.Span("Event only: "), html.Audio(id="actuation-audio-event",
                                                          src=audio_url(actuation_id, event) if event else "",
                                                          controls=True, preload="none")]),
    ])]
    if ref_id is not None:
        players.append(html.Div(className="player", children=[
            html.Div(["Typical reference actuation ", dcc.Link(f"#{ref_id}", href=f"/actuation/{ref_id}")],
                     className="player-title"),
            html.Audio(id="actuation-audio-ref", src=audio_url(ref_id), controls=True, preload="metadata"),
            html.Div([html.Span("Event only: "), html.Audio(id="actuation-audio-ref-event",
                                                              src=audio_url(ref_id, event), controls=True,
                                                              preload="none")]),
        ]))
    else:
        players.append(html.P("No active reference model for this event: "
                              "no typical reference actuation to compare.",
                              className="muted"))
    return html.Div([
        view_header(f"Actuation {actuation_id}",
                    f"{short(d['rig'])} at {short(d['site'])} · lot {short(d['lot'])} · unit {short(d['unit'])} · "
                    f"{d['recorded_at_text']}"),
        dcc.Store(id="actuation-id", data=int(actuation_id)),
        html.Div(className="grid-2", children=[
            card(html.H3(["State: ", html.Span(state, className=f"state state-{state.replace(' ', '-')}")]),
                 html.Ul(flag_items, id="actuation-flags") if flag_items else html.P("No flags.", id="actuation-flags"),
                 html.Div(className="deep-link", children=[
                     html.Span("Link to this view: "), html.Code(id="actuation-link"),
                     dcc.Clipboard(target_id="actuation-link", title="copy the link", className="copy-button")])),
            card(html.H3("Listen"), html.P("Playback starts at a low volume; impacts can be loud.", className="muted"),
                 html.Div(players, className="players")),
        ]),
        card(html.Div(className="filter-bar", children=[
            html.Label([html.Span("Event", className="filter-label"), dcc.Dropdown(
                id="actuation-event", value=event, clearable=False,
                options=[{"label": n.replace("_", " "), "value": n} for n in names])], className="filter"),
            html.Label([html.Span("Slice", className="filter-label"), dcc.Dropdown(
                id="actuation-slice",
                value=q.get("slice", "worst") if str(q.get("slice", "worst")).isdigit() else "worst",
                clearable=False, options=[{"label": "worst slice", "value": "worst"}] + (
                    [{"label": f"slice {q['slice']}", "value": q["slice"]}]
                    if str(q.get("slice", "")).isdigit() else []))],
                className="filter filter-wide"),
            html.P(id="actuation-note", className="muted")])),
        review_card("actuation", reviewable, title="Review of this actuation's flags"),
        card(dcc.Graph(id="actuation-waveform", config={"displaylogo": False}),
             dcc.Graph(id="actuation-spectrogram", config={"displaylogo": False})),
        html.Div(className="grid-2", children=[
            card(dcc.Graph(id="actuation-bands", config={"displaylogo": False})),
            card(dcc.Graph(id="actuation-contributions", config={"displaylogo": False})),
        ]),
        card(dcc.Graph(id="actuation-slices", config={"displaylogo": False})),
        html.Div(className="grid-2", children=[
            card(html.H3("Quality checks"), table(d["qc"], [
                ("check_name", "Check"), ("passed", "Passed"), ("value", "Value"), ("limit_value", "Limit"),
                ("detail", "Detail", str)], id="actuation-qc",
                row_class=lambda r: None if r["passed"] else "row-flagged")),
            card(html.H3("Metadata"),
                 html.Table(html.Tbody([html.Tr([html.Th(k), cell(fmt(v) if not isinstance(v, str) else v)])
                                        for k, v in meta]), className="app-table", id="actuation-meta"),
                 html.H3("Events"), table(ev, [("name", "Event", str), ("found", "Found"), ("onset_s", "Onset [s]"),
                                               ("duration_s", "Duration [s]"), ("peak_dbfs", "Peak [dBFS]"),
                                               ("latency_s", "Latency [s]"), ("method", "Found by", str),
                                               ("reason", "Why missing", lambda v: v or "")])),
        ]),
        dcc.Store(id="actuation-url"),
    ])


def register(app, ctx):
    register_url_state(app, NAME, URL_STATE)
    register_review(app, ctx, "actuation")

    @app.callback(Output("actuation-waveform", "figure"), Output("actuation-spectrogram", "figure"),
                  Output("actuation-bands", "figure"), Output("actuation-slices", "figure"),
                  Output("actuation-contributions", "figure"), Output("actuation-slice", "options"),
                  Output("actuation-note", "children"),
                  Input("actuation-event", "value"), Input("actuation-slice", "value"), Input("app-meeting", "data"),
                  State("actuation-id", "data"))
    @guarded("figure", "figure", "figure", "figure", "figure", "options", "text")
    def update(event, slice_choice, meeting, actuation_id):
        f = actuation_figures(ctx, record_id(actuation_id), event, slice_choice, meeting=bool(meeting))
        return (f["waveform"], f["spectrogram"], f["bands"], f["slices"], f["contributions"], f["slice_options"],
                f["note"])

    @app.callback(Output("actuation-audio-event", "src"), Input("actuation-event", "value"),
                  State("actuation-id", "data"), prevent_initial_call=True)
    @guarded("keep")
    def event_audio(event, actuation_id):
        return audio_url(record_id(actuation_id), str(event)) if event else ""

    app.clientside_callback(
        "function(q, id) { return window.location.href; }",
        Output("actuation-link", "children"), Input("actuation-url", "data"), Input("actuation-id", "data"),
    )
