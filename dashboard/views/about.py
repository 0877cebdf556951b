"""About: what Harken is, and the cautions it carries."""

from __future__ import annotations

from dash import dcc, html

from analysis.cautions import CAUTIONS

from .common import card, view_header

NAME = "about"
PATH = "/about"
TITLE = "About"
IN_MENU = True


def layout(ctx, q: dict):
    return html.Div([
        view_header("About Harken", "Lab-wide acoustic trend review for drug-delivery device test rigs."),
        card(html.H2("What it does"), html.P(
            "A microphone beside each rig records every actuation. A background worker turns each recording into "
            "short-time spectra, event timings and multivariate monitoring statistics (Hotelling T², SPE, the "
            "distance of the score trajectory from a reference envelope) against an approved reference model, "
            "and stores them. This dashboard reads that store."),
            html.Ul([
                html.Li([dcc.Link("Today", href="/today"), ": the latest recordings per rig, what flagged and the "
                         "suggested cause."]),
                html.Li([dcc.Link("Lots", href="/lots"), ": lot-by-lot control charts with run rules."]),
                html.Li([dcc.Link("Trajectories", href="/trajectories"), ": score trajectories against the "
                         "reference envelope."]),
                html.Li([dcc.Link("Rigs & sites", href="/rigs"), ": the same statistic side by side per rig, with "
                         "numbers."]),
                html.Li([dcc.Link("References", href="/references"), ": the reference models and building new ones."]),
            ])),
        card(html.H2("Cautions"), html.Ul([html.Li(c) for c in CAUTIONS], id="about-cautions")),
        card(html.H2("Sharing a view"), html.P(
            "Every view keeps its selections in the address bar: copy it into a meeting invite and the link opens "
            "the same view. Meeting mode (the switch at the top, or meeting=1 in the link) makes charts and text "
            "large and high-contrast for a shared screen.")),
    ])


def register(app, ctx):
    return None
