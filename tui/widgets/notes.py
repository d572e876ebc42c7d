"""The message pane: warnings and events of the run, newest last."""

from __future__ import annotations

import time

from rich.text import Text
from textual.widgets import RichLog

LEVEL_STYLE = {"info": "#8fa3bf", "warn": "bold #f08a5d", "error": "bold #ff5f6d", "ok": "#5fd38a"}


class NotesLog(RichLog):
    """A log of one-line messages with a level and the wall-clock time."""

    def __init__(self, **kw):
        super().__init__(wrap=True, markup=False, highlight=False, max_lines=500, **kw)
        self.lines_text: list[str] = []

    def say(self, text: str, level: str = "info") -> None:
        """Append ``text`` (level: info, warn, error, ok)."""
        self.lines_text.append(f"{level}: {text}")
        line = Text(time.strftime("%H:%M:%S "), style="dim")
        line.append(text, LEVEL_STYLE.get(level, ""))
        self.write(line)
