"""A widget's failure must never take a run down: guarded drawing and updating.

Every panel of the run view draws from a snapshot.  A defect in one panel
(an index off by one, a plotting library's hiccup, a surprising snapshot)
would otherwise propagate out of Textual's compositor or a timer and end the
whole application, and with it a run that may have been going for hours.
:func:`guarded` wraps a widget's ``render`` or ``watch_snap``: an exception is
caught, the panel shows a one-line notice instead, and a :class:`PanelFailed`
message bubbles up to the screen, which writes it in the notes (once per
panel and kind of failure).  The run goes on.
"""

from __future__ import annotations

import functools
import traceback

from rich.text import Text
from textual.css.query import NoMatches
from textual.message import Message


class PanelFailed(Message):
    """A panel failed to draw or to take in a snapshot.

    Parameters
    ----------
    panel : str
        The widget's id or class name.
    what : str
        ``"draw"`` or ``"update"``.
    error : str
        ``"ExceptionType: message"``.
    where : str
        The innermost frame (``file:line in function``) of the traceback.
    """

    def __init__(self, panel: str, what: str, error: str, where: str) -> None:
        super().__init__()
        self.panel = panel
        self.what = what
        self.error = error
        self.where = where


def _where(exc: BaseException) -> str:
    tb = traceback.extract_tb(exc.__traceback__)
    if not tb:
        return "?"
    f = tb[-1]
    return f"{f.filename.rsplit('/', 1)[-1]}:{f.lineno} in {f.name}"


def guarded(what: str):
    """Decorate a widget method (``"draw"``: ``render``; ``"update"``: ``watch_snap``).

    On an exception the method returns a dim notice (draw) or None (update),
    and the widget posts :class:`PanelFailed` once per kind of failure.
    """
    def deco(method):
        @functools.wraps(method)
        def wrapper(self, *args, **kwargs):
            try:
                return method(self, *args, **kwargs)
            except NoMatches:   # the screen is being torn down: nothing to show, nothing to report
                return None
            except Exception as exc:  # noqa: BLE001 - a panel's defect must not end the run
                name = self.id or type(self).__name__
                key = (what, type(exc).__name__)
                seen = self.__dict__.setdefault("_guard_seen", set())
                if key not in seen:
                    seen.add(key)
                    try:
                        self.post_message(PanelFailed(name, what, f"{type(exc).__name__}: {exc}", _where(exc)))
                    except Exception:  # noqa: BLE001 - no app to tell (torn down): drop it
                        pass
                if what == "draw":
                    return Text(f"({name} unavailable: {type(exc).__name__}; see Notes)", style="dim")
                return None
        return wrapper
    return deco
