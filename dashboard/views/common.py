"""Building blocks shared by the views: filter bars built from the URL, tables with numbers, small parsers."""

from __future__ import annotations

import math
from datetime import date

import pandas as pd
from dash import dcc, html

from analysis.store import STATISTICS, Filters

__all__ = ["split_list", "parse_day", "table", "filter_bar", "filters_from", "stat_options", "fmt", "card",
           "pick", "view_header"]


def split_list(value) -> list[str]:
    """'a,b' or ['a', 'b'] -> ['a', 'b'] (empty items dropped)."""
    if value is None:
        return []
    if isinstance(value, (list, tuple)):
        items = value
    else:
        items = str(value).split(",")
    return [str(v).strip() for v in items if str(v).strip()]


def parse_day(value) -> date | None:
    if not value:
        return None
    try:
        return date.fromisoformat(str(value)[:10])
    except ValueError:
        return None


def pick(value, allowed, default):
    """value if it is one of allowed, else default (a URL may carry anything)."""
    return value if value in allowed else default


def fmt(v, digits: int = 3) -> str:
    if v is None:
        return "—"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int,)) and not isinstance(v, bool):
        return f"{v:,}"
    try:
        x = float(v)
    except (TypeError, ValueError):
        return str(v)
    if math.isnan(x):
        return "—"
    if x.is_integer() and abs(x) < 1e6:
        return f"{int(x):,}"
    return f"{x:.{digits}g}"


def card(*children, class_name: str = "", **kw):
    return html.Section(list(children), className=f"app-card {class_name}".strip(), **kw)


def view_header(title: str, subtitle: str = ""):
    return html.Div(className="view-header",
                    children=[html.H1(title), html.P(subtitle, className="view-subtitle") if subtitle else None])


def table(df: pd.DataFrame, columns, *, id=None, link=None, class_name: str = "app-table", row_class=None):
    """A plain HTML table. columns: [(column, header) or (column, header, formatter)]. link: (column, href
    function) makes that column's cells links. row_class: function of the row giving a CSS class."""
    head = html.Thead(html.Tr([html.Th(c[1]) for c in columns]))
    rows = []
    for r in df.to_dict("records"):
        cells = []
        for c in columns:
            key, f = c[0], (c[2] if len(c) > 2 else fmt)
            text = f(r.get(key))
            if link and key == link[0]:
                cells.append(html.Td(dcc.Link(text, href=link[1](r))))
            else:
                cells.append(html.Td(text))
        rows.append(html.Tr(cells, className=row_class(r) if row_class else None))
    kw = {"id": id} if id else {}
    return html.Table([head, html.Tbody(rows)], className=class_name, **kw)


def stat_options():
    return [{"label": s.label, "value": s.key} for s in STATISTICS.values()]


def filter_bar(view: str, ch: dict, q: dict, *, want=("profile", "event", "stat", "site", "rig", "dates"),
               default_stat: str = "event_spe_ratio"):
    """Filter controls with ids ``{view}-profile``, ``-event``, ``-stat``, ``-site``, ``-rig``, ``-dates``, their
    values taken from the URL query and checked against what the store has (so a Dropdown never holds a value
    missing from its options)."""
    profiles = ch["profiles"]
    profile = pick(q.get("profile"), profiles, profiles[0] if profiles else None)
    events = ch["events"].get(profile, []) if profile else []
    event = pick(q.get("event"), events,
                 "dose_release" if "dose_release" in events else (events[0] if events else None))
    stat = pick(q.get("stat"), list(STATISTICS), default_stat)
    sites_ = [s for s in split_list(q.get("site")) if s in ch["sites"]]
    rig_names = [r for r, _ in ch["rigs"]]
    rigs_ = [r for r in split_list(q.get("rig")) if r in rig_names]
    d_from, d_to = parse_day(q.get("from")), parse_day(q.get("to"))
    parts = []

    def labelled(text, comp):
        return html.Label([html.Span(text, className="filter-label"), comp], className="filter")

    if "profile" in want:
        parts.append(labelled("Device profile", dcc.Dropdown(id=f"{view}-profile", options=profiles, value=profile,
                                                             clearable=False)))
    if "event" in want:
        parts.append(labelled("Event", dcc.Dropdown(id=f"{view}-event", value=event, clearable=False,
                                                    options=[{"label": e.replace("_", " "), "value": e}
                                                             for e in events])))
    if "stat" in want:
        parts.append(labelled("Statistic", dcc.Dropdown(id=f"{view}-stat", options=stat_options(), value=stat,
                                                        clearable=False, className="filter-wide")))
    if "site" in want:
        parts.append(labelled("Sites", dcc.Dropdown(id=f"{view}-site", options=ch["sites"], value=sites_, multi=True,
                                                    placeholder="all sites")))
    if "rig" in want:
        parts.append(labelled("Rigs", dcc.Dropdown(id=f"{view}-rig", multi=True, value=rigs_, placeholder="all rigs",
                                                   options=[{"label": f"{r} ({s})", "value": r}
                                                            for r, s in ch["rigs"]])))
    if "dates" in want:
        parts.append(labelled("Recorded (UTC days)", dcc.DatePickerRange(
            id=f"{view}-dates", start_date=d_from.isoformat() if d_from else None,
            end_date=d_to.isoformat() if d_to else None, min_date_allowed=ch["first_day"],
            max_date_allowed=ch["last_day"], initial_visible_month=ch["last_day"], clearable=True,
            display_format="YYYY-MM-DD")))
    return html.Div(parts, className="filter-bar")


def filters_from(profile, sites_, rigs_, start_date, end_date, lots_=()) -> Filters:
    return Filters(profile=profile or None, sites=tuple(split_list(sites_)), rigs=tuple(split_list(rigs_)),
                           lots=tuple(split_list(lots_)), date_from=parse_day(start_date), date_to=parse_day(end_date))
