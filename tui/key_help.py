"""The key-help screen (``?``): every key of the screen below it, with what it does.

The rows come from the screen's own bindings, so the help, the footer and
the keys can never disagree; each screen adds a longer sentence per action
in its ``KEY_HELP`` dictionary.
"""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Static

#: Key names shown the way a user types them.
_KEY_NAMES = {"space": "space", "enter": "Enter", "escape": "Esc", "tab": "Tab", "question_mark": "?",
              "ctrl+q": "Ctrl-q", "ctrl+r": "Ctrl-r", "ctrl+o": "Ctrl-o", "f1": "F1"}


def key_label(key: str) -> str:
    """How to show ``key`` ("ctrl+o" -> "Ctrl-o", "question_mark" -> "?")."""
    return ", ".join(_KEY_NAMES.get(k.strip(), k.strip()) for k in key.split(","))


def key_rows(screen: Screen) -> list[tuple[str, str]]:
    """(keys, what they do) per action of ``screen``'s bindings, in the order the screen declares them.

    Keys bound to the same action share a row (``?, F1``).  An action the screen turns off in its present mode
    (``check_action`` returns False, as the footer hides it: going on or editing the goal while following
    another process's run, going back when there is nothing to go back to) is left out, so every key listed
    works; one that is only greyed for the moment (None) stays.
    """
    helps = getattr(screen, "KEY_HELP", {})

    def offered(action: str) -> bool:
        check = getattr(screen, "check_action", None)
        try:
            return check is None or check(action, ()) is not False
        except Exception:  # noqa: BLE001 - a screen tearing down: list the key rather than fail the help
            return True

    order: list[str] = []
    keys: dict[str, list[str]] = {}
    text: dict[str, str] = {}
    for b in getattr(screen, "BINDINGS", []):
        if not isinstance(b, Binding):
            continue
        action = b.action.split("(")[0].removeprefix("app.").removeprefix("screen.")
        if not offered(action):
            continue
        if action not in keys:
            order.append(action)
            keys[action] = []
            text[action] = helps.get(action) or b.description or action
        label = key_label(b.key)
        if label not in keys[action]:
            keys[action].append(label)
    return [(", ".join(keys[a]), text[a]) for a in order]


class KeyHelp(ModalScreen[None]):
    """Lists the keys of ``screen``; any of Esc, q, ? or F1 closes it.

    Parameters
    ----------
    screen : Screen
        The screen whose keys are listed.
    title : str
        Heading of the box.
    extra : str
        A paragraph below the keys.
    """

    BINDINGS = [
        Binding("escape", "close", "Close"),
        Binding("q", "close", "Close", show=False),
        Binding("question_mark", "close", "Close", show=False),
        Binding("f1", "close", "Close", show=False),
    ]

    def __init__(self, screen: Screen, title: str = "Keys", extra: str = ""):
        super().__init__()
        self.rows = key_rows(screen)
        self.help_title = title
        self.extra = extra

    def compose(self) -> ComposeResult:
        t = Table.grid(padding=(0, 2))
        t.add_column(style="bold #e8c547", no_wrap=True)
        t.add_column(overflow="fold")
        for k, text in self.rows:
            t.add_row(Text(k), Text(text))
        with Vertical(id="help-box") as box:
            box.border_title = self.help_title
            with VerticalScroll(id="help-scroll"):
                yield Static(t, id="help-keys")
                if self.extra:
                    yield Static(Text(self.extra, style="dim"), id="help-extra")
            yield Static(Text.from_markup("[b]esc[/b] / [b]?[/b] close"), id="help-close")

    def action_close(self) -> None:
        self.dismiss(None)
