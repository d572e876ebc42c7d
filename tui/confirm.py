"""A yes/no question as a modal screen."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static


class AskModal(ModalScreen[bool]):
    """Asks ``question``; dismisses with True for y, False for n or escape."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n", "answer(False)", "No"),
        Binding("escape", "answer(False)", "No", show=False),
    ]

    def __init__(self, question: str, title: str = "Please confirm"):
        super().__init__()
        self.question = question
        self.ask_title = title

    def compose(self) -> ComposeResult:
        with Vertical(id="ask-box") as box:
            box.border_title = self.ask_title
            yield Static(self.question, id="ask-question")
            yield Static("[b]y[/b] yes    [b]n[/b] / [b]esc[/b] no", id="ask-keys")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(bool(yes))
