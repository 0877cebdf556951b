"""References: the stored reference models (lots used, parameters, limits, who made it and when, active or
not), and building a new version from chosen lots as a background job with a progress bar."""

from __future__ import annotations

import uuid

import pandas as pd
from dash import Input, Output, State, dcc, html

from analysis.profiles import is_profile_name
from analysis.store import APPROVAL_MEANINGS as MEANINGS
from analysis.store import StoreError, queries

from .. import auth
from ..safety import guarded
from .common import card, name_options, table, view_header

NAME = "references"
PATH = "/references"
TITLE = "References"
IN_MENU = True


def models_view(store) -> html.Div:
    with store.read() as conn:
        df = queries.models(conn, counts=True)
        signed = queries.approvals(conn)
    if df.empty:
        return html.P("No reference model yet: build one below from lots of known-good devices.", id="references-table")
    df = df.sort_values(["profile", "event", "version"], ascending=[True, True, False])  # newest version first
    df["lots"] = df["reference_lots"].map(", ".join)
    df["params"] = df["parameters"].map(lambda p: ", ".join(f"{k}={v}" for k, v in p.items() if v is not None))
    df["made"] = [f"{who}, {str(at)[:16]} UTC" for who, at in zip(df["created_by"], df["created_at"])]
    last = signed.drop_duplicates("model_id", keep="last").set_index("model_id") if len(signed) else signed
    df["approved"] = [f"{last.at[i, 'person']}, {str(last.at[i, 'at'])[:16]} UTC: {last.at[i, 'meaning']} "
                      f"({last.at[i, 'reason']})" if len(last) and i in last.index else
                      ("awaiting approval" if s == "pending" else "") for i, s in zip(df["id"], df["status"])]
    df["profile_file"] = [f"version {int(v)}, SHA-256 {h[:12]}…" if pd.notna(v) and isinstance(h, str) else
                          "not recorded" for v, h in zip(df["profile_version"], df["profile_sha256"])]
    return table(df, [("profile", "Profile", str), ("event", "Event", str), ("version", "Version"),
                      ("status", "Status", str), ("lots", "Reference lots", str), ("n_recordings", "Actuations"),
                      ("n_components", "Components"), ("t2_limit", "T² limit"), ("spe_limit", "SPE limit"),
                      ("scored", "Scored"), ("flagged", "Flagged"), ("made", "Made by, when", str),
                      ("approved", "Signed approval", str),
                      ("profile_file", "Profile file", str), ("params", "Parameters", str)], id="references-table",
                 row_class=lambda r: {"active": "row-active", "pending": "row-pending"}.get(r["status"], "row-retired"))


def build_models(store_url, files_dir, profile: str, lots_, events_, person: str, progress=lambda i, n, msg: None):
    """Fit and store one new active version per event from ``lots_`` (analysis.store.build_reference), calling
    progress(done, total, message) after each event. Opens its own store connection (it runs in a job process)."""
    from analysis.references import build_reference
    from analysis.store import Store

    names = list(events_)
    done = []
    with Store.open(store_url, files_dir=files_dir, create=False) as store:
        for i, event in enumerate(names):
            progress(i, len(names), f"fitting {event.replace('_', ' ')} ({i + 1} of {len(names)}) ...")
            # a build from the dashboard waits for a signed approval before it is active
            made = build_reference(store, profile, [event], lots_, created_by=person, activate=False)
            done += made
        progress(len(names), len(names), "done")
    return done


def layout(ctx, q: dict):
    with ctx.store.read() as conn:
        ch = queries.choices(conn)
        ref_now = {}
        for p, evs in ch["events"].items():
            for e in evs:
                ref_now[(p, e)] = queries.reference_lots(conn, p, e)
    profile = ch["profiles"][0] if ch["profiles"] else None
    events = ch["events"].get(profile, []) if profile else []
    current = sorted({lot for v in ref_now.values() for lot in v})
    lot_options = name_options(ch["lots"])
    return html.Div([
        view_header("References", "Reference models fitted from lots of known-good devices. Every actuation is "
                                  "scored against the active version of its event."),
        card(html.H2("Stored models"), html.Div(models_view(ctx.store), id="references-models")),
        card(html.H2("Build a new version"),
             html.P("Choose the lots that make the reference set. Building fits one model per chosen event and scores "
                    "every stored actuation with it; the new version becomes active only when a method owner signs "
                    "its approval below (the old one is then kept, retired). Both are recorded in the store's audit "
                    "trail under the signed-in person.", className="muted"),
             _who_builds(),
             html.Div(className="filter-bar", children=[
                 html.Label([html.Span("Device profile", className="filter-label"), dcc.Dropdown(
                     id="references-profile", options=name_options(ch["profiles"]), value=profile,
                     clearable=False)],
                     className="filter"),
                 html.Label([html.Span("Events", className="filter-label"), dcc.Checklist(
                     id="references-events", options=events, value=events, inline=True)], className="filter"),
             ]),
             html.Label([html.Span("Reference lots", className="filter-label"), dcc.Checklist(
                 id="references-lots", options=lot_options,
                 value=[lot for lot in current if lot in {o["value"] for o in lot_options}], inline=True,
                 className="lot-checklist")]),
             # the controls only for a method owner; the server's gate refuses the callback to anyone else anyway
             html.Div(className="build-row", children=[
                 html.Button("Build reference", id="references-build", className="button-primary"),
                 html.Button("Cancel", id="references-cancel", className="button"),
                 html.Progress(id="references-progress", value="0", max="1", className="progress"),
                 html.Span(id="references-status", className="muted"),
             ]) if can_build() else html.Span(id="references-status")),
        approval_card(ctx.store),
        dcc.Store(id="references-load-id", data=uuid.uuid4().hex),
    ])


def approval_card(store):
    """The signed approval of a pending version: the method owner re-enters the password, gives the
    signature's meaning and a reason."""
    with store.read() as conn:
        df = queries.models(conn)
    pending = df[df["status"] == "pending"] if len(df) else df
    if not can_build():
        return card(html.H2("Approve a version"), html.P(
            f"{len(pending)} version(s) await a signed approval by a method owner.", className="muted",
            id="references-approve-who"))
    options = [{"label": f"{r.profile}/{r.event} version {r.version} (model {r.id}), built by {r.created_by}",
                "value": int(r.id)} for r in pending.itertuples()]
    return card(html.H2("Approve a version"),
                html.P("Signing makes the version active for monitoring. Re-enter your password: the store records "
                       "your name, the time (UTC), the meaning of the signature and your reason with the version.",
                       className="muted"),
                html.Div(className="filter-bar", children=[
                    html.Label([html.Span("Version", className="filter-label"), dcc.Dropdown(
                        id="references-approve-model", options=options,
                        value=options[0]["value"] if options else None, placeholder="no version awaits approval")],
                        className="filter filter-wide"),
                    html.Label([html.Span("Meaning", className="filter-label"), dcc.Dropdown(
                        id="references-approve-meaning", options=list(MEANINGS), value=MEANINGS[0],
                        clearable=False)], className="filter filter-wide"),
                ]),
                html.Label([html.Span("Reason", className="filter-label"), dcc.Textarea(
                    id="references-approve-reason", maxLength=2000, className="review-comment")], className="filter"),
                html.Label([html.Span("Your password, again", className="filter-label"), dcc.Input(
                    id="references-approve-password", type="password", value="", className="text-input",
                    autoComplete="current-password")], className="filter"),
                html.Button("Sign and activate", id="references-approve-submit", className="button-primary"),
                html.Div(id="references-approve-status", className="review-status"))


def can_build() -> bool:
    """Whether the signed-in person may build a reference (the method owner's role)."""
    return auth.acting("method_owner") is not None


def _who_builds():
    """Who a build will be recorded under: the signed-in person, who needs the method owner's role."""
    user = auth.signed_in()
    if user is None:
        return html.P("Sign in as a method owner to build a reference: a build is recorded under the signed-in "
                      "person.", className="notice", id="references-who")
    if not can_build():
        return html.P(f"You are signed in as {user.user_name} ({user.role}): building a reference needs the "
                      "method owner's role.", className="notice", id="references-who")
    return html.P(f"Builds are recorded under {user.user_name} ({user.full_name}).", className="muted",
                  id="references-who")


def _f(info, name):
    """A field of the store's ModelInfo (a dataclass; earlier a dict)."""
    return info[name] if isinstance(info, dict) else getattr(info, name)


def _texts(value) -> list[str] | None:
    """A list of short texts from a request (a checklist's value), or None when it is anything else."""
    if not isinstance(value, list) or len(value) > 1000:
        return None
    if not all(isinstance(v, str) and 0 < len(v) <= 200 and v.isprintable() for v in value):
        return None
    return value


def check_build(profile, lots_, events_, person) -> str | None:
    """What is missing or not allowed before a build can start (None when nothing). The profile is a name, never
    a path (analysis.profiles.find_profile looks it up in the profile folders)."""
    if not isinstance(person, str) or not person.strip():
        return "Sign in as a method owner first: a reference build is recorded under the signed-in person."
    if len(person) > 200 or not person.isprintable():
        return "The signed-in name is not a user name."
    if not profile:
        return "Choose a device profile."
    if not is_profile_name(profile):
        return "Choose a device profile from the list (a profile is chosen by its name)."
    if not lots_:
        return "Choose at least one reference lot."
    if _texts(lots_) is None:
        return "Choose the reference lots from the list."
    if not events_:
        return "Choose at least one event."
    if _texts(events_) is None:
        return "Choose the events from the list."
    return None


def register(app, ctx):
    store_url = ctx.extra.get("store_url")
    files_dir = ctx.store.files_dir
    # The server's gate (dashboard.auth) lets this callback's requests through only for a signed-in method owner
    # whose own name is the app-user value it carries; the job then records the build under that name.
    auth.require("references-models", "method_owner")
    auth.require("references-approve-status", "method_owner")

    @app.callback(Output("references-approve-status", "children"),
                  Output("references-models", "children", allow_duplicate=True),
                  Output("references-approve-password", "value"),
                  Input("references-approve-submit", "n_clicks"), State("references-approve-model", "value"),
                  State("references-approve-meaning", "value"), State("references-approve-reason", "value"),
                  State("references-approve-password", "value"), State("app-user", "data"),
                  prevent_initial_call=True)
    @guarded("text", "children", "keep")
    def approve(_n, model_id, meaning, reason, password, person):
        user = auth.acting("method_owner", person)
        if user is None:
            return "Refused: approving needs a signed-in method owner.", models_view(ctx.store), ""
        if not isinstance(model_id, int) or isinstance(model_id, bool):
            return "Choose the version to approve.", models_view(ctx.store), ""
        if meaning not in MEANINGS:
            return "Choose the meaning of your signature.", models_view(ctx.store), ""
        if not isinstance(reason, str) or not reason.strip():
            return "Give a reason for the approval.", models_view(ctx.store), ""
        try:
            ctx.store.approve_model(model_id, person=user.user_name, password=str(password or ""), meaning=meaning,
                                    reason=reason)
        except StoreError as exc:
            return f"Not approved: {exc.reason if hasattr(exc, 'reason') else exc}", models_view(ctx.store), ""
        return (f"Model {model_id} approved by {user.user_name} ({meaning}) and now active.",
                models_view(ctx.store), "")

    @app.callback(
        Output("references-models", "children"), Output("references-status", "children"),
        Input("references-build", "n_clicks"),
        State("references-profile", "value"), State("references-lots", "value"), State("references-events", "value"),
        State("app-user", "data"), State("references-load-id", "data"),
        background=True, prevent_initial_call=True,
        running=[(Output("references-build", "disabled"), True, False),
                 (Output("references-cancel", "disabled"), False, True)],
        cancel=[Input("references-cancel", "n_clicks")],
        progress=[Output("references-progress", "value"), Output("references-progress", "max"),
                  Output("references-status", "children", allow_duplicate=True)],
    )
    @guarded("children", "text")
    def build(set_progress, _n, profile, lots_, events_, person, _load_id):
        problem = check_build(profile, lots_, events_, person)
        if problem:
            return models_view(ctx.store), problem
        try:
            made = build_models(store_url, files_dir, profile, lots_, events_, person.strip(),
                                progress=lambda i, n, msg: set_progress((str(i), str(n), msg)))
        except Exception as exc:  # noqa: BLE001 - shown to the person who started the build
            return models_view(ctx.store), f"Build failed: {exc}"
        words = "; ".join(f"{_f(m, 'event')} version {_f(m, 'version')} ({_f(m, 'n_components')} components, "
                          f"{_f(m, 'n_recordings')} actuations, {_f(m, 'scored')} scored)" for m in made)
        return models_view(ctx.store), f"Built: {words}."
