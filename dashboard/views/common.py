"""Building blocks shared by the views: filter bars built from the URL, tables with numbers, small parsers."""

from __future__ import annotations

import math
from datetime import date

import pandas as pd
from dash import dcc, html

from analysis.store import STATISTICS, Filters

from ..labels import HOVER_CHARS, LABEL_CHARS, short

__all__ = ["split_list", "parse_day", "table", "cell", "name_option", "name_options", "filter_bar", "filters_from",
           "stat_options", "fmt", "card", "pick", "view_header", "OPTION_VALUE_CHARS"]


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
    return html.Div(className="view-header", children=[
        html.H1(short(title, 120)), html.P(short(subtitle, 400), className="view-subtitle") if subtitle else None])


#: Characters of a table cell shown in full (a longer one is cut, its whole text on hover up to HOVER_CHARS).
CELL_CHARS = 300


def cell(text, limit: int = CELL_CHARS):
    """A table cell's text: whole when short, else cut with the whole (up to HOVER_CHARS) as its title."""
    text = str(text)
    if len(text) <= limit:
        return html.Td(text)
    return html.Td(short(text, limit), title=short(text, HOVER_CHARS))


#: Longest value a dropdown option may carry: the browser's dropdown stalls for minutes on a value of 100,000
#: characters (measured with Chromium; 5,000 is still quick). Sidecar names are at most 200 characters today, so
#: only rows an older version or a hand left in the database are this long.
OPTION_VALUE_CHARS = 1_000


def name_option(text, value=None) -> dict | None:
    """A dropdown option for a name from the store: a shortened label, the whole name (or ``value``) as value;
    None when the value is too long to offer (leave it out: the views show it unfiltered)."""
    value = text if value is None else value
    if len(str(value)) > OPTION_VALUE_CHARS:
        return None
    return {"label": short(text, LABEL_CHARS * 2), "value": value}


def name_options(pairs) -> list[dict]:
    """Options from (label, value) pairs or names, without those too long to offer."""
    out = (name_option(*p) if isinstance(p, tuple) else name_option(p) for p in pairs)
    return [o for o in out if o is not None]


def table(df: pd.DataFrame, columns, *, id=None, link=None, class_name: str = "app-table", row_class=None):
    """A plain HTML table. columns: [(column, header) or (column, header, formatter)]. link: (column, href
    function) makes that column's cells links. row_class: function of the row giving a CSS class. Long texts
    are cut (``cell``)."""
    head = html.Thead(html.Tr([html.Th(c[1]) for c in columns]))
    rows = []
    for r in df.to_dict("records"):
        cells = []
        for c in columns:
            key, f = c[0], (c[2] if len(c) > 2 else fmt)
            text = f(r.get(key))
            if link and key == link[0]:
                cells.append(html.Td(dcc.Link(short(text, CELL_CHARS), href=link[1](r))))
            else:
                cells.append(cell(text))
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
    sites_ = [s for s in split_list(q.get("site")) if s in ch["sites"] and len(s) <= OPTION_VALUE_CHARS]
    rig_names = [r for r, _ in ch["rigs"]]
    rigs_ = [r for r in split_list(q.get("rig")) if r in rig_names and len(r) <= OPTION_VALUE_CHARS]
    d_from, d_to = parse_day(q.get("from")), parse_day(q.get("to"))
    parts = []

    def labelled(text, comp):
        return html.Label([html.Span(text, className="filter-label"), comp], className="filter")

    if "profile" in want:
        parts.append(labelled("Device profile", dcc.Dropdown(id=f"{view}-profile", value=profile, clearable=False,
                                                             options=name_options(profiles))))
    if "event" in want:
        parts.append(labelled("Event", dcc.Dropdown(id=f"{view}-event", value=event, clearable=False,
                                                    options=name_options((e.replace("_", " "), e) for e in events))))
    if "stat" in want:
        parts.append(labelled("Statistic", dcc.Dropdown(id=f"{view}-stat", options=stat_options(), value=stat,
                                                        clearable=False, className="filter-wide")))
    if "site" in want:
        parts.append(labelled("Sites", dcc.Dropdown(id=f"{view}-site", value=sites_, multi=True,
                                                    options=name_options(ch["sites"]),
                                                    placeholder="all sites")))
    if "rig" in want:
        parts.append(labelled("Rigs", dcc.Dropdown(id=f"{view}-rig", multi=True, value=rigs_, placeholder="all rigs",
                                                   options=name_options((f"{r} ({s})", r) for r, s in ch["rigs"]))))
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
