"""Every server callback answers with something to show, never a 500 and never a blank view.

``guarded(*kinds)`` wraps a callback: when it raises, the problem is logged with its traceback and each output
gets a message of its kind instead (a figure that says it, a paragraph, a string, empty options, or no change).
A ParameterError or StoreError (a value that is not allowed, a record that is not there) is shown in its own
words; anything else as an internal problem, whose details stay in the server's log. Input checks that views
share are here too (``record_id``).
"""

from __future__ import annotations

import functools
import logging

from dash import html, no_update
from dash.exceptions import PreventUpdate

from analysis.errors import AnalysisError, ParameterError

from .labels import short

__all__ = ["guarded", "problem_words", "record_id", "MAX_ID"]

log = logging.getLogger("harken.dashboard")

#: The largest id a store holds (a signed 64-bit integer): anything larger is no record of ours.
MAX_ID = 2**63 - 1


def record_id(value, what: str = "actuation id") -> int:
    """A store id from a request or a URL: a whole number from 1 to MAX_ID, else ParameterError."""
    text = str(value).strip() if value is not None else ""
    if isinstance(value, bool) or not text.isdigit() or not 1 <= int(text) <= MAX_ID:
        raise ParameterError(f"{what} must be a whole number from 1 to {MAX_ID}; got {short(text, 40)!r}")
    return int(text)


def problem_words(exc: BaseException) -> str:
    """What a person is told when a view cannot be drawn."""
    if isinstance(exc, (ParameterError, AnalysisError)):
        return f"This cannot be shown: {short(str(exc), 300)}"
    return (f"This could not be drawn because of an internal problem ({type(exc).__name__}); the details are in "
            "the server's log.")


def _fallback(kind: str, message: str):
    if kind == "figure":
        from .figures import empty_figure

        return empty_figure(message)
    if kind == "children":
        return html.P(message, className="problem")
    if kind == "text":
        return message
    if kind == "options":
        return []
    return no_update


def guarded(*kinds: str):
    """Decorate a callback whose outputs are of ``kinds`` ("figure", "children", "text", "options", "keep")."""
    def decorate(fn):
        @functools.wraps(fn)
        def wrapper(*args, **kwargs):
            try:
                return fn(*args, **kwargs)
            except PreventUpdate:
                raise
            except Exception as exc:  # noqa: BLE001 - the view says what went wrong instead of going blank
                if not isinstance(exc, (ParameterError, AnalysisError)):
                    log.exception("callback %s failed", fn.__name__)
                message = problem_words(exc)
                out = tuple(_fallback(k, message) for k in kinds)
                return out[0] if len(out) == 1 else out
        return wrapper
    return decorate
