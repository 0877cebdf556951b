"""Names from the store as they may be drawn.

Plotly renders a subset of HTML in trace names, axis labels, hover text and annotations (links, bold, line breaks),
so a rig called ``<a href=...>R9</a>`` would be a live link. Every name from the store goes through ``label``
(shortened, for legends and axes) or ``full`` (whole, for hover text) on its way to a figure: both escape the
characters HTML gives meaning to, which Plotly then shows as themselves. Dash components (tables, paragraphs) set
text, not HTML, and need only the shortening (``short``) against very long names.
"""

from __future__ import annotations

import html

__all__ = ["plain", "short", "label", "full", "LABEL_CHARS", "HOVER_CHARS"]

#: Characters of a name shown in a legend, on an axis or in a table cell.
LABEL_CHARS = 32
#: Characters of a name shown in hover text (names are at most 200 characters since sidecars are checked).
HOVER_CHARS = 200


def plain(text) -> str:
    """Text that Plotly shows as it is: &, < and > escaped (Plotly turns &amp; &lt; &gt; back into the characters;
    with no tag left, quotes mean nothing)."""
    return html.escape(str(text), quote=False)


def short(text, limit: int = LABEL_CHARS) -> str:
    """The text, cut to ``limit`` characters with an ellipsis when longer (no escaping: for Dash components)."""
    text = str(text)
    return text if len(text) <= limit else text[: max(1, limit - 1)] + "…"


def label(text, limit: int = LABEL_CHARS) -> str:
    """A name for a legend, an axis or a trace: shortened, then escaped."""
    return plain(short(text, limit))


def full(text) -> str:
    """A name for hover text: whole up to HOVER_CHARS (then cut, saying how long it was), escaped."""
    text = str(text)
    if len(text) > HOVER_CHARS:
        text = f"{text[:HOVER_CHARS]}… ({len(text):,} characters)"
    return plain(text)
