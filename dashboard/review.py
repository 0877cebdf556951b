"""The review of signals: a technician records what a signal turned out to be (Today, Actuation).

``review_card(prefix, signals)`` lists the signals awaiting review and those reviewed (the latest verdict, by whom,
when, the comment shown as text), with the form for a technician or above; ``register_review(app, ctx, prefix)``
adds the form's callback, a write the server's gate (dashboard.auth) lets through only for a signed-in technician
carrying their own name. A later verdict supersedes an earlier one; both are kept and audited.
"""

from __future__ import annotations

from dash import Input, Output, State, dcc, html

from analysis.store import REVIEW_VERDICTS, StoreError
from analysis.triage import subject_words

from . import auth
from .labels import short
from .safety import guarded
from .views.common import card, table

__all__ = ["review_card", "register_review", "signal_label", "awaiting"]

_LEVEL = {"lot": "Lot", "rig": "Rig", "cell": "Lot on a rig", "unit": "Unit", "actuation": "Actuation"}


def signal_label(r) -> str:
    """One line naming a signal: its level, where, the event and the suggested cause."""
    where = [f"{w} {short(r[k])}" for k, w in (("lot", "lot"), ("rig", "rig"), ("unit", "unit"))
             if isinstance(r.get(k), str) and r.get(k)]
    if r.get("level") == "actuation" and r.get("actuation_id") is not None:
        where.insert(0, f"#{int(r['actuation_id'])}")
    return (f"{_LEVEL.get(r.get('level'), r.get('level'))} {' · '.join(where)} · {short(subject_words(r.get('event')))}"
            f" · suggested cause {r.get('cause')}")


def awaiting(signals) -> int:
    """How many of the signals have no verdict yet."""
    return int((signals["reviews"] == 0).sum()) if len(signals) else 0


def may_review() -> bool:
    return auth.acting("technician") is not None


def review_form(prefix: str, signals) -> html.Div:
    """The verdict form (a technician or above), or why there is none."""
    user = auth.signed_in()
    if not may_review():
        who = f"You are signed in as {user.user_name} ({user.role}): r" if user else "R"
        return html.P(f"{who}ecording a verdict needs the technician's role (sign in).", className="notice",
                      id=f"{prefix}-review-who")
    rows = signals.sort_values("reviews", kind="stable").to_dict("records") if len(signals) else []
    options = [{"label": ("" if r["reviews"] else "awaiting · ") + signal_label(r), "value": int(r["signal_id"])}
               for r in rows]
    return html.Div(className="review-form", children=[
        html.Label([html.Span("Signal", className="filter-label"), dcc.Dropdown(
            id=f"{prefix}-review-target", options=options, value=options[0]["value"] if options else None,
            clearable=False, placeholder="no signal to review")], className="filter filter-wide"),
        html.Label([html.Span("Verdict", className="filter-label"), dcc.RadioItems(
            id=f"{prefix}-review-verdict", options=[{"label": w, "value": k} for k, w in REVIEW_VERDICTS.items()],
            value=None, className="review-verdicts")], className="filter"),
        html.Label([html.Span("Comment (required for no fault found)", className="filter-label"), dcc.Textarea(
            id=f"{prefix}-review-comment", maxLength=2000, className="review-comment")], className="filter"),
        html.Button("Record verdict", id=f"{prefix}-review-submit", className="button-primary"),
        html.Span(f"as {user.user_name}", className="muted"),
        html.Div(id=f"{prefix}-review-status", className="review-status"),
    ])


def reviewed_table(prefix: str, signals) -> html.Div:
    done = signals[signals["reviews"] > 0] if len(signals) else signals
    if not len(done):
        return html.P("Nothing reviewed yet.", className="muted", id=f"{prefix}-reviewed")
    done = done.assign(what=[signal_label(r) for r in done.to_dict("records")])
    return table(done, [("what", "Signal", str), ("verdict_words", "Verdict", str), ("verdict_by", "By", str),
                        ("verdict_at", "When (UTC)", str), ("verdict_comment", "Comment", str),
                        ("reviews", "Verdicts")], id=f"{prefix}-reviewed")


def review_card(prefix: str, signals, *, title: str = "Review") -> html.Div:
    n = awaiting(signals)
    return card(html.H2(f"{title} ({n} awaiting review)", id=f"{prefix}-review-title"),
                html.P("What each signal turned out to be, recorded by a signed-in technician: the latest verdict "
                       "counts, earlier ones are kept.", className="muted"),
                review_form(prefix, signals), html.H3("Reviewed"), reviewed_table(prefix, signals))


def register_review(app, ctx, prefix: str) -> None:
    auth.require(f"{prefix}-review-status", "technician")

    @app.callback(Output(f"{prefix}-review-status", "children"), Input(f"{prefix}-review-submit", "n_clicks"),
                  State(f"{prefix}-review-target", "value"), State(f"{prefix}-review-verdict", "value"),
                  State(f"{prefix}-review-comment", "value"), State("app-user", "data"), prevent_initial_call=True)
    @guarded("text")
    def record(_n, signal_id, verdict, comment, person):
        user = auth.acting("technician", person)  # the gate checked it already; called some other way, again
        if user is None:
            return "Refused: recording a verdict needs a signed-in technician."
        if not isinstance(signal_id, int) or isinstance(signal_id, bool):
            return "Choose the signal you reviewed."
        if verdict not in REVIEW_VERDICTS:
            return "Choose a verdict."
        comment = comment if isinstance(comment, str) else ""
        try:
            ctx.store.add_review(signal_id, person=user.user_name, verdict=verdict, comment=comment)
        except StoreError as exc:
            return f"Not recorded: {exc}"
        return (f"Recorded: {REVIEW_VERDICTS[verdict]}, by {user.user_name}. It shows in the list at the next "
                "refresh.")
