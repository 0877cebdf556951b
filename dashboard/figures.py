"""Figure functions of the dashboard (pure: DataFrames and arrays in, plotly figures out; no store, no Dash).

Every function takes ``meeting``: the shared-screen look (large type, thick lines, white on black).
Large point clouds are drawn with WebGL traces (Scattergl); waveforms arrive already thinned to a min/max
envelope (see dashboard.drill.waveform_envelope).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from .labels import full, label, plain, short

__all__ = [
    "PALETTE", "apply_look", "empty_figure", "lot_chart_figure", "rig_distribution_figure", "rig_rates_figure",
    "score_time_figure", "score_plane_figure", "slice_stats_figure", "waveform_figure", "spectrogram_figure",
    "band_levels_figure", "contributions_figure",
]

#: Our own colours: desk look (ink on warm paper) and meeting look (bright on black).
PALETTE = {
    False: dict(paper="#fbfaf7", plot="#ffffff", ink="#1f2633", grid="#e4e1d8", muted="#9aa0a8", flag="#c2410c",
                ref="#0f766e", limit="#7c2d12", band="rgba(15,118,110,0.14)",
                series=["#1d4e89", "#c2410c", "#3f7d20", "#6b3fa0", "#a16207", "#0f766e", "#9d174d", "#475569"],
                font=13, line=1.6, marker=7),
    True: dict(paper="#000000", plot="#000000", ink="#ffffff", grid="#3a3a3a", muted="#bdbdbd", flag="#ff5a36",
               ref="#40e0d0", limit="#ffd400", band="rgba(64,224,208,0.22)",
               series=["#5ec8ff", "#ffb000", "#7dff7a", "#ff7ad9", "#ffffff", "#40e0d0", "#ff8c8c", "#c0c0ff"],
               font=22, line=4.0, marker=13),
}


def _c(meeting: bool) -> dict:
    return PALETTE[bool(meeting)]


def apply_look(fig: go.Figure, *, meeting: bool = False, title: str | None = None, height: int | None = None):
    """Colours, type sizes and margins of the desk or the meeting look."""
    c = _c(meeting)
    fig.update_layout(
        paper_bgcolor=c["paper"], plot_bgcolor=c["plot"], font=dict(color=c["ink"], size=c["font"],
                                                                    family="Inter, 'Segoe UI', Roboto, sans-serif"),
        margin=dict(l=70, r=20, t=50 if title else 20, b=50), hoverlabel=dict(font_size=c["font"]),
        legend=dict(bgcolor="rgba(0,0,0,0)", orientation="h", y=-0.18),
        colorway=c["series"],
    )
    if title:
        fig.update_layout(title=dict(text=plain(title), x=0.01, font=dict(size=c["font"] + 3)))
    if height:
        fig.update_layout(height=int(height * (1.35 if meeting else 1.0)))
    fig.update_xaxes(gridcolor=c["grid"], zerolinecolor=c["grid"], linecolor=c["muted"])
    fig.update_yaxes(gridcolor=c["grid"], zerolinecolor=c["grid"], linecolor=c["muted"])
    return fig


def empty_figure(message: str, *, meeting: bool = False) -> go.Figure:
    fig = go.Figure()
    fig.add_annotation(text=plain(message), showarrow=False, x=0.5, y=0.5, xref="paper", yref="paper",
                       font=dict(size=_c(meeting)["font"] + 2))
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return apply_look(fig, meeting=meeting, height=300)


def _level_line(fig, y, x0, x1, label, colour, dash, c, **kw):
    """A horizontal level (limit, centre) as a line trace with its label at the right end: unlike layout
    shapes it sits at the right height on log axes too."""
    fig.add_trace(go.Scatter(x=[x0, x1], y=[y, y], mode="lines+text", text=["", label], textposition="top left",
                             textfont=dict(color=colour, size=c["font"] - 1), line=dict(color=colour, dash=dash,
                                                                                          width=c["line"]),
                             showlegend=False, hoverinfo="skip"), **kw)


def _jitter(ids, width=0.5):
    """A fixed, id-derived horizontal offset in [-width/2, width/2) (golden-ratio sequence: no randomness)."""
    frac = (np.asarray(ids, dtype=float) * 0.6180339887498949) % 1.0
    return (frac - 0.5) * width


def lot_chart_figure(chart, stat, *, cloud: pd.DataFrame | None = None, meeting: bool = False,
                     rule_words: dict | None = None, stored: pd.DataFrame | None = None) -> go.Figure:
    """Lot-by-lot chart: one line per rig of per-lot points, the centre line and limits, signals ringed; behind
    them a sampled cloud of single actuations (flagged ones in the flag colour). A lot point's customdata is
    ["lot", lot, rig]; an actuation's is its id (a number). stored: the store's signals for these points (rows:
    lot, rig — "all rigs" for lot-level ones —, cause, evidence); when given, they are what is ringed, with
    their cause, instead of the chart's own limit and run-rule checks."""
    c = _c(meeting)
    p = chart.points
    if not len(p):
        return empty_figure("No actuations match these filters.", meeting=meeting)
    lot_order = list(dict.fromkeys(p.sort_values("first")["lot"]))
    pos = {lot: i for i, lot in enumerate(lot_order)}
    rigs_ = list(dict.fromkeys(p["rig"]))
    offs = {r: (k - (len(rigs_) - 1) / 2) * (0.5 / max(1, len(rigs_))) for k, r in enumerate(rigs_)}
    fig = go.Figure()
    if cloud is not None and len(cloud):
        cl = cloud[cloud["lot"].isin(pos)]
        x = cl["lot"].map(pos).to_numpy(dtype=float) + _jitter(cl["actuation_id"], 0.7)
        ids = cl["actuation_id"].to_numpy(dtype=float)
        y = cl["value"].to_numpy(dtype=float)
        rig_of = cl["rig"].to_numpy(dtype=object)
        flag_of = cl["flagged"].to_numpy(dtype=bool)
        for flagged, name, colour, size in ((False, "single actuations (sampled)", c["muted"], c["marker"] - 3),
                                            (True, "flagged actuations", c["flag"], c["marker"] - 1)):
            first = True
            # Thousands of points: one trace per rig, so the hover names the rig once per trace instead of a
            # string per point through the validators (which would cost more than every query of the view);
            # the lot is the column the point stands in, and the id is numeric customdata.
            for rig in dict.fromkeys(rig_of[flag_of == flagged]):
                m = (flag_of == flagged) & (rig_of == rig)
                fig.add_trace(go.Scattergl(
                    x=x[m], y=y[m], mode="markers", name=name, legendgroup=name, showlegend=first,
                    marker=dict(color=colour, size=size, opacity=0.9 if flagged else 0.45,
                                symbol="x" if flagged else "circle"),
                    # a plain list: Dash reads clickData customdata by index from the figure, and a numpy
                    # array is sent as a base64 typed-array spec that cannot be indexed there
                    customdata=ids[m].astype(int).tolist(),
                    hovertemplate=f"actuation %{{customdata:d}} · {full(rig)}<br>%{{y:.3g}}<extra></extra>",
                ))
                first = False
    for k, rig in enumerate(rigs_):
        g = p[p["rig"] == rig].sort_values("first")
        g = g[np.isfinite(g["value"].astype(float))]  # a cell whose actuations all failed QC has no value to draw
        x = g["lot"].map(pos).to_numpy(dtype=float) + offs[rig]
        fig.add_trace(go.Scatter(
            x=x, y=g["value"].to_numpy(dtype=float), mode="lines+markers", name=label(rig),
            line=dict(width=c["line"], color=c["series"][k % len(c["series"])]),
            marker=dict(size=c["marker"] + 2, symbol=["diamond" if r else "circle" for r in g["reference"]]),
            customdata=np.column_stack([np.full(len(g), "lot"), g["lot"].astype(str), g["rig"].astype(str)]),
            text=[f"lot {full(lt)} on {full(rig)}: {n} actuations, {nf} flagged{' (reference lot)' if ref else ''}"
                  for lt, n, nf, ref in zip(g["lot"], g["n_all"], g["n_flagged"], g["reference"])],
            hovertemplate="%{text}<br>%{y:.3g}<extra></extra>",
        ))
    if stored is not None:
        marks = p.merge(stored[["lot", "rig", "cause", "evidence"]], on=["lot", "rig"], how="inner")
        if len(marks):
            fig.add_trace(go.Scatter(
                x=marks["lot"].map(pos).to_numpy(dtype=float) + marks["rig"].map(offs).to_numpy(dtype=float),
                y=marks["value"].to_numpy(dtype=float), mode="markers", name="stored signal",
                marker=dict(size=c["marker"] * 2.4, color="rgba(0,0,0,0)",
                            line=dict(color=c["flag"], width=c["line"] + 1)),
                customdata=np.column_stack([np.full(len(marks), "lot"), marks["lot"].astype(str),
                                            marks["rig"].astype(str)]),
                text=[f"suggested cause: {plain(cause)} — {plain(short(str(ev), 400))}"
                      for cause, ev in zip(marks["cause"], marks["evidence"])],
                hovertemplate="%{text}<extra>signal</extra>",
            ))
    sig = p[p["signal"]] if stored is None else p.iloc[0:0]
    if len(sig):
        words = rule_words or {}
        fig.add_trace(go.Scatter(
            x=sig["lot"].map(pos).to_numpy(dtype=float) + sig["rig"].map(offs).to_numpy(dtype=float),
            y=sig["value"].to_numpy(dtype=float), mode="markers", name="signal (limit or run rule)",
            marker=dict(size=c["marker"] * 2.4, color="rgba(0,0,0,0)", line=dict(color=c["flag"], width=c["line"] + 1)),
            customdata=np.column_stack([np.full(len(sig), "lot"), sig["lot"].astype(str), sig["rig"].astype(str)]),
            text=[("beyond the limits; " if b else "") + "; ".join(words.get(r, r) for r in rr.split(",") if r)
                  for b, rr in zip(sig["beyond"], sig["rules"])],
            hovertemplate="%{text}<extra>signal</extra>",
        ))
    for yv, name, dash in ((chart.centre, "centre", "dot"), (chart.ucl, "upper limit", "dash"),
                           (chart.lcl, "lower limit", "dash")):
        if math.isfinite(yv):
            shown = float(chart.to_display(yv))
            _level_line(fig, shown, -0.5, len(lot_order) - 0.5, f"{name} {shown:.3g}",
                        c["ref"] if name == "centre" else c["limit"], dash, c)
    fig.update_xaxes(tickmode="array", tickvals=list(range(len(lot_order))), ticktext=[label(v) for v in lot_order],
                     title="lot (in time order)")
    fig.update_yaxes(title=f"{stat.label}" + (f" [{stat.unit}]" if stat.unit else ""),
                     type="log" if chart.log else "linear")
    fig.update_layout(clickmode="event", hovermode="closest", uirevision="lots")
    return apply_look(fig, meeting=meeting, height=520)


def rig_distribution_figure(edges, hist: pd.DataFrame, summary: pd.DataFrame, stat, *, reference: dict | None = None,
                            meeting: bool = False) -> go.Figure:
    """One ridge per rig (grouped by site): the share of the rig's actuations in each bin of the statistic,
    its mean as a dot, and the reference lots' mean ± 2 SD as a shaded band."""
    c = _c(meeting)
    if not len(hist) or len(edges) < 2:
        return empty_figure("No values of this statistic in the selection.", meeting=meeting)
    centres = 0.5 * (np.asarray(edges[:-1]) + np.asarray(edges[1:]))
    show = np.exp(centres) if stat.log else centres
    order = summary[["site", "rig"]].drop_duplicates().values.tolist()
    fig = go.Figure()
    if reference:
        lo, hi = reference["mean"] - 2 * reference["sd"], reference["mean"] + 2 * reference["sd"]
        lo, hi = (math.exp(lo), math.exp(hi)) if stat.log else (lo, hi)
        fig.add_vrect(x0=lo, x1=hi, fillcolor=c["band"], line_width=0, layer="below",
                      annotation_text="reference ± 2 SD", annotation_position="top left",
                      annotation_font_color=c["ink"])
    labels = []
    for i, (site, rig) in enumerate(order):
        g = hist[(hist["rig"] == rig) & (hist["site"] == site)]
        counts = np.zeros(len(centres))
        counts[g["bin"].astype(int).clip(0, len(centres) - 1).to_numpy()] += g["count"].to_numpy(dtype=float)
        share = counts / max(1.0, counts.sum())
        top = i + 0.85 * share / max(share.max(), 1e-12)
        colour = c["series"][i % len(c["series"])]
        fig.add_trace(go.Scatter(x=np.r_[show, show[::-1]], y=np.r_[top, np.full(len(show), float(i))],
                                 fill="toself", mode="lines", line=dict(color=colour, width=c["line"]),
                                 name=label(f"{site} / {rig}"), hoverinfo="skip", opacity=0.85))
        row = summary[(summary["rig"] == rig) & (summary["site"] == site)]
        if len(row) and np.isfinite(row["mean"].iloc[0]):
            m = float(row["mean"].iloc[0])
            fig.add_trace(go.Scatter(x=[math.exp(m) if stat.log else m], y=[i + 0.1], mode="markers",
                                     marker=dict(size=c["marker"] + 3, color=c["ink"], symbol="diamond"),
                                     showlegend=False, text=[f"{full(rig)} mean"],
                                     hovertemplate="%{text} %{x:.3g}<extra></extra>"))
        labels.append(label(f"{rig} ({site})"))
    fig.update_yaxes(tickmode="array", tickvals=list(range(len(order))), ticktext=labels, range=[-0.2, len(order)])
    fig.update_xaxes(title=f"{stat.label}" + (f" [{stat.unit}]" if stat.unit else ""),
                     type="log" if stat.log else "linear")
    fig.update_layout(showlegend=False)
    return apply_look(fig, meeting=meeting, height=140 + 90 * len(order))


def rig_fingerprint_figure(cells: pd.DataFrame, *, meeting: bool = False) -> go.Figure:
    """Each rig's background distance from its reference period, lot by lot in time order (one line per rig,
    its limit dashed, departing lots ringed)."""
    c = _c(meeting)
    if cells is None or not len(cells):
        return empty_figure("No backgrounds to compare yet (they need reference lots and recordings analysed "
                            "with this version).", meeting=meeting)
    order = list(dict.fromkeys(cells.sort_values("first")["lot"]))
    pos = {lot: i for i, lot in enumerate(order)}
    fig = go.Figure()
    for k, (rig, g) in enumerate(cells.groupby("rig", sort=True)):
        g = g.sort_values("first")
        colour = c["series"][k % len(c["series"])]
        fig.add_trace(go.Scatter(
            x=g["lot"].map(pos), y=g["median"], mode="lines+markers", name=label(rig),
            line=dict(width=c["line"], color=colour), marker=dict(size=c["marker"] + 2),
            text=[f"{full(rig)}, lot {full(lt)}: median distance {m:.2f} over {n} recordings (limit {lim:.2f})"
                  for lt, m, n, lim in zip(g["lot"], g["median"], g["n"], g["limit"])],
            hovertemplate="%{text}<extra></extra>"))
        fig.add_trace(go.Scatter(x=[-0.3, len(order) - 0.7], y=[g["limit"].iloc[0]] * 2, mode="lines",
                                 line=dict(color=colour, dash="dash", width=1), name=f"{label(rig)} limit",
                                 showlegend=False, hoverinfo="skip"))
        dep = g[g["departs"].astype(bool)]
        if len(dep):
            fig.add_trace(go.Scatter(
                x=dep["lot"].map(pos), y=dep["median"], mode="markers", showlegend=False, hoverinfo="skip",
                marker=dict(size=c["marker"] * 2.4, color="rgba(0,0,0,0)", line=dict(color=c["flag"], width=2))))
    fig.update_xaxes(tickmode="array", tickvals=list(range(len(order))), ticktext=[label(x) for x in order],
                     title_text="lot (time order)")
    fig.update_yaxes(type="log", title_text="background distance from the rig's reference")
    return apply_look(fig, meeting=meeting, height=380)


def rig_rates_figure(summary: pd.DataFrame, *, meeting: bool = False) -> go.Figure:
    """Flags and quality-check failures per 1,000 actuations, one pair of bars per rig (numbers on the bars)."""
    c = _c(meeting)
    if not len(summary):
        return empty_figure("No actuations in the selection.", meeting=meeting)
    # Rigs by position, named by tick text: shortened names of two rigs may coincide, positions never do.
    x = list(range(len(summary)))
    names = [f"{r} ({s})" for r, s in zip(summary["rig"], summary["site"])]
    fig = go.Figure()
    fig.add_trace(go.Bar(x=x, y=summary["flags_per_1000"], name="flagged per 1,000", marker_color=c["flag"],
                         text=[f"{v:.0f}" for v in summary["flags_per_1000"]], textposition="outside",
                         hovertext=[full(n) for n in names], hovertemplate="%{hovertext}: %{y:.3g}<extra></extra>"))
    fig.add_trace(go.Bar(x=x, y=summary["qc_failures_per_1000"], name="quality check failed per 1,000",
                         marker_color=c["series"][0], text=[f"{v:.0f}" for v in summary["qc_failures_per_1000"]],
                         textposition="outside", hovertext=[full(n) for n in names],
                         hovertemplate="%{hovertext}: %{y:.3g}<extra></extra>"))
    fig.update_layout(barmode="group")
    fig.update_xaxes(tickmode="array", tickvals=x, ticktext=[label(n) for n in names])
    fig.update_yaxes(title="per 1,000 actuations")
    return apply_look(fig, meeting=meeting, height=380)


def _envelope_band(fig, t, centre, spread, k, c, row=None, col=None, name="reference envelope"):
    kw = {} if row is None else dict(row=row, col=col)
    fig.add_trace(go.Scatter(x=np.r_[t, t[::-1]], y=np.r_[centre + k * spread, (centre - k * spread)[::-1]],
                             fill="toself", fillcolor=c["band"], line=dict(width=0), name=name, hoverinfo="skip"), **kw)
    fig.add_trace(go.Scatter(x=t, y=centre, mode="lines", line=dict(color=c["ref"], width=c["line"], dash="dot"),
                             name="envelope centre", hoverinfo="skip"), **kw)


def score_time_figure(times, envelope_centre, envelope_spread, k, trajs: pd.DataFrame, *, component: int = 0,
                      meeting: bool = False) -> go.Figure:
    """Score of one component over slice time for each chosen actuation, over the reference envelope
    (centre ± k·spread)."""
    c = _c(meeting)
    t = np.asarray(times, dtype=float)
    fig = go.Figure()
    _envelope_band(fig, t, envelope_centre[:, component], envelope_spread[:, component], k, c)
    _trajectory_traces(fig, trajs, lambda s: (t, s[:, component]), c)
    fig.update_xaxes(title="slice time from the event onset [s]")
    fig.update_yaxes(title=f"score of component {component + 1}")
    return apply_look(fig, meeting=meeting, height=420)


def _trajectory_traces(fig, trajs, xy, c, **kw):
    colours, seen = {}, set()
    for r in trajs.itertuples(index=False):
        key = str(r.lot)
        if key not in colours:
            colours[key] = c["series"][len(colours) % len(c["series"])]
        x, y = xy(np.asarray(r.scores, dtype=float))
        fig.add_trace(go.Scatter(
            x=x, y=y, mode="lines", name=label(f"lot {r.lot}"), legendgroup=key, showlegend=key not in seen,
            line=dict(color=c["flag"] if r.flagged else colours[key], width=c["line"] * (1.3 if r.flagged else 0.8)),
            opacity=0.95 if r.flagged else 0.6,
            text=[f"actuation {r.actuation_id} · {full(r.rig)} · lot {full(r.lot)}"
                  f"{' · flagged' if r.flagged else ''}"] * len(x),
            hovertemplate="%{text}<extra></extra>"), **kw)
        seen.add(key)


def score_plane_figure(envelope_centre, envelope_spread, k, trajs: pd.DataFrame, *, components=(0, 1),
                       meeting: bool = False) -> go.Figure:
    """Score against score: each actuation's path through the slices, the envelope centre path, and at every
    slice the envelope box (centre ± k·spread on both components)."""
    c = _c(meeting)
    a, b = components
    fig = go.Figure()
    ca, cb = envelope_centre[:, a], envelope_centre[:, b]
    sa, sb = envelope_spread[:, a], envelope_spread[:, b]
    xs, ys = [], []
    for i in range(len(ca)):
        xs += [ca[i] - k * sa[i], ca[i] + k * sa[i], ca[i] + k * sa[i], ca[i] - k * sa[i], ca[i] - k * sa[i], None]
        ys += [cb[i] - k * sb[i], cb[i] - k * sb[i], cb[i] + k * sb[i], cb[i] + k * sb[i], cb[i] - k * sb[i], None]
    fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=c["ref"], width=1), opacity=0.35,
                             name="envelope per slice", hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=ca, y=cb, mode="lines+markers", line=dict(color=c["ref"], width=c["line"], dash="dot"),
                             marker=dict(size=c["marker"] - 2), name="envelope centre", hoverinfo="skip"))
    _trajectory_traces(fig, trajs, lambda s: (s[:, a], s[:, b]), c)
    fig.update_xaxes(title=f"score of component {a + 1}")
    fig.update_yaxes(title=f"score of component {b + 1}")
    return apply_look(fig, meeting=meeting, height=460)


def slice_stats_figure(times, t2, spe, *, t2_limit, spe_limit, labels=None, meeting: bool = False) -> go.Figure:
    """Per-slice Hotelling T² and SPE (one line per actuation) against their per-slice limits.
    t2, spe: (n_actuations, n_slices) or (n_slices,)."""
    c = _c(meeting)
    t = np.asarray(times, dtype=float)
    t2 = np.atleast_2d(np.asarray(t2, dtype=float))
    spe = np.atleast_2d(np.asarray(spe, dtype=float))
    labels = labels or [f"actuation {i + 1}" for i in range(t2.shape[0])]
    fig = make_subplots(rows=1, cols=2, subplot_titles=("Hotelling T² per slice", "SPE per slice"))
    for j, (vals, lim) in enumerate(((t2, t2_limit), (spe, spe_limit)), start=1):
        for i in range(vals.shape[0]):
            over = lim is not None and np.nanmax(vals[i]) > lim
            fig.add_trace(go.Scatter(x=t, y=vals[i], mode="lines+markers", name=label(labels[i]), showlegend=False,
                                     line=dict(width=c["line"], color=c["flag"] if over else c["series"][i % 8]),
                                     marker=dict(size=c["marker"] - 3), text=[full(labels[i])] * len(t),
                                     hovertemplate="%{text}<br>%{x:.3f} s: %{y:.3g}<extra></extra>"),
                          row=1, col=j)
        if lim is not None and math.isfinite(lim) and len(t):
            _level_line(fig, float(lim), float(t.min()), float(t.max()), f"limit {lim:.3g}", c["limit"], "dash", c,
                        row=1, col=j)
        fig.update_xaxes(title="slice time [s]", row=1, col=j)
        fig.update_yaxes(type="log", row=1, col=j)
    fig.update_annotations(font_size=c["font"])
    return apply_look(fig, meeting=meeting, height=380)


def waveform_figure(t, lo, hi, events_df: pd.DataFrame | None = None, markers_s=(), *, meeting: bool = False,
                    title: str | None = None) -> go.Figure:
    """Waveform as its min/max envelope per time bucket (t, lo, hi in s and full-scale units), with the events'
    spans shaded and named and the markers as vertical lines."""
    c = _c(meeting)
    t = np.asarray(t, dtype=float)
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=np.r_[t, t[::-1]], y=np.r_[hi, lo[::-1]], fill="toself", mode="lines",
                             line=dict(color=c["series"][0], width=0.6), fillcolor=c["series"][0], name="microphone",
                             hoverinfo="skip"))
    if events_df is not None:
        for k, r in enumerate(events_df.itertuples(index=False)):
            if not r.found or r.onset_s is None or not np.isfinite(r.onset_s):
                continue
            fig.add_vrect(x0=r.onset_s, x1=r.end_s if np.isfinite(r.end_s or np.nan) else r.onset_s + 0.01,
                          fillcolor=c["series"][(k + 1) % 8], opacity=0.18, line_width=0,
                          annotation_text=label(str(r.name).replace("_", " ")), annotation_position="top left",
                          annotation_font_color=c["ink"])
    for m in markers_s:
        fig.add_vline(x=float(m), line=dict(color=c["limit"], dash="dot", width=c["line"]))
    fig.update_xaxes(title="time from the recording start [s]")
    fig.update_yaxes(title="amplitude [full scale]")
    fig.update_layout(showlegend=False)
    return apply_look(fig, meeting=meeting, height=300, title=title)


def spectrogram_figure(times, freqs, level_db, *, meeting: bool = False) -> go.Figure:
    """Short-time spectrum levels (dB re full scale) over time (s) and frequency (Hz, log axis)."""
    f = np.asarray(freqs, dtype=float)
    keep = f > 0
    fig = go.Figure(go.Heatmap(x=np.asarray(times), y=f[keep], z=np.asarray(level_db)[:, keep].T,
                               colorscale="Cividis" if not meeting else "Inferno",
                               colorbar=dict(title="dB"),
                               hovertemplate="%{x:.3f} s · %{y:.0f} Hz: %{z:.1f} dB<extra></extra>"))
    fig.update_yaxes(type="log", title="frequency [Hz]")
    fig.update_xaxes(title="time [s]")
    return apply_look(fig, meeting=meeting, height=320)


def band_levels_figure(centres_hz, levels, ref_mean, ref_spread, *, k: float = 3.0, slice_label: str = "",
                       unit: str = "dB", meeting: bool = False) -> go.Figure:
    """Band levels of one slice (or the event mean) against the reference envelope (mean ± k·spread per band)."""
    c = _c(meeting)
    f = np.asarray(centres_hz, dtype=float)
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=np.r_[f, f[::-1]], y=np.r_[ref_mean + k * ref_spread, (ref_mean - k * ref_spread)[::-1]],
                             fill="toself", fillcolor=c["band"], line=dict(width=0), name=f"reference ± {k:g} spread",
                             hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=f, y=ref_mean, mode="lines", line=dict(color=c["ref"], dash="dot", width=c["line"]),
                             name="reference mean"))
    outside = np.abs(np.asarray(levels) - ref_mean) > k * ref_spread
    fig.add_trace(go.Scatter(x=f, y=levels, mode="lines+markers", name="this actuation",
                             line=dict(color=c["series"][0], width=c["line"]),
                             marker=dict(size=c["marker"], color=np.where(outside, c["flag"], c["series"][0]))))
    fig.update_xaxes(type="log", title="band centre [Hz]")
    fig.update_yaxes(title=f"band level [{unit}]")
    return apply_look(fig, meeting=meeting, height=360, title=slice_label or None)


def contributions_figure(centres_hz, t2_contrib, spe_contrib, *, slice_label: str = "",
                         meeting: bool = False) -> go.Figure:
    """Band contributions to T² and SPE at one slice (they sum to the slice's T² and SPE)."""
    c = _c(meeting)
    labels = [f"{x:.0f}" if x < 1000 else f"{x / 1000:.1f}k" for x in np.asarray(centres_hz, dtype=float)]
    fig = make_subplots(rows=1, cols=2, subplot_titles=("contribution to T²", "contribution to SPE"))
    fig.add_trace(go.Bar(x=labels, y=t2_contrib, marker_color=c["series"][0], name="T²"), row=1, col=1)
    fig.add_trace(go.Bar(x=labels, y=spe_contrib, marker_color=c["flag"], name="SPE"), row=1, col=2)
    fig.update_xaxes(title="band centre [Hz]")
    fig.update_layout(showlegend=False)
    fig.update_annotations(font_size=c["font"])
    return apply_look(fig, meeting=meeting, height=340, title=slice_label or None)
