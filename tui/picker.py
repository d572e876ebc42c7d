"""The problem picker: a list of problem files, a preview, and goal overrides."""

from __future__ import annotations

from pathlib import Path

from rich.console import Group
from rich.markup import escape
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Footer, Header, Input, Label, OptionList, Static
from textual.widgets.option_list import Option

from cubage import DEFAULT_BUDGET
from cubage.problem.problem_file import ProblemError, ProblemSpec, bind_problem, list_problems, load_problem_spec
from cubage.session.prepare import InputError, check_workers

from .confirm import AskModal
from .goal_editor import parse_count, parse_tolerance
from .key_help import KeyHelp
from .problem_facts import ProblemFacts


def parse_overrides(rel: str, abs_: str, workers: str, budget: str = "") -> dict:
    """The picker's inputs as run overrides (blank = the problem's own), checked by the session layer.

    Raises
    ------
    ValueError
        With a one-line message naming the input (:class:`cubage.session.prepare.InputError`).
    """
    out: dict = {}
    for name, key, text in (("rel tol", "rel_tol", rel), ("abs tol", "abs_tol", abs_)):
        v = parse_tolerance(text, name)
        if v is not None:
            out[key] = v
    if workers.strip():
        out["workers"] = check_workers(workers.strip(), "workers")
    b = parse_count(budget, "budget")
    if b is not None:
        out["budget"] = b
    if out.get("rel_tol") == 0 and out.get("abs_tol", 1.0) == 0:
        raise InputError("rel tol and abs tol cannot both be 0")
    return out


def count_text(n: int) -> str:
    """A count short enough for a field: ``2e7`` when it is a digit times a power of ten, else ``12_345_678``."""
    m, e = f"{n:e}".split("e")
    if float(m) == int(float(m)) and int(e) >= 4:
        return f"{int(float(m))}e{int(e)}"
    return f"{n:_}"


def reflow(text: str) -> str:
    """Join the lines of each paragraph (paragraphs are separated by blank lines)."""
    paras = [" ".join(p.split()) for p in text.strip().split("\n\n")]
    return "\n".join(p for p in paras if p)


def short_path(path: Path) -> str:
    """``path`` relative to the current folder when it lies inside it."""
    try:
        return str(Path(path).resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


#: The problem highlighted first when it is among the files.
DEFAULT_PROBLEM = "gaussian-overlap"


class PickerScreen(Screen):
    """Choose a problem file, check its preview, override the goal, open it.

    Parameters
    ----------
    files : list of Path
        Problem files to offer.
    allow_python : bool
        Import Python integrands without asking.
    """

    BINDINGS = [
        Binding("enter", "open", "Open & run", priority=True),
        Binding("tab", "app.focus_next", "Next field"),
        Binding("ctrl+o", "open_path", "Open path"),
        Binding("ctrl+r", "reload", "Reload"),
        Binding("question_mark", "keys", "Keys"),
        Binding("f1", "keys", "Keys", show=False),
        Binding("escape", "focus_list", "List", show=False),
        Binding("ctrl+q", "app.quit", "Quit"),
    ]

    #: What each key does, for the key-help screen.
    KEY_HELP = {
        "open": "open the highlighted problem in a run view (with the goal fields below applied)",
        "focus_next": "next field: the list, rel tol, abs tol, workers, budget (blank = the problem's own)",
        "open_path": "open a problem file (or a folder of them) that is not in the list, by its path",
        "reload": "read the highlighted file again (after editing it)",
        "keys": "this help",
        "focus_list": "back to the list from a field",
        "quit": "quit cubage",
    }

    def __init__(self, files: list[Path], allow_python: bool = False):
        super().__init__()
        self.files = [Path(f) for f in files]
        self.allow_python = allow_python
        #: path -> ((mtime_ns, size), spec or None, error or None)
        self._cache: dict[Path, tuple] = {}
        #: Files read so far (each file once per modification).
        self.reads = 0

    def compose(self) -> ComposeResult:
        yield Header()
        with Horizontal(id="picker-body"):
            ol = OptionList(*[Option(self._label(f), id=str(i)) for i, f in enumerate(self.files)],
                            id="problem-list", classes="panel")
            ol.border_title = f"Problems ({len(self.files)})"
            yield ol
            with VerticalScroll(id="preview-scroll", classes="panel") as vs:
                vs.border_title = "Preview"
                vs.can_focus = False
                yield Static("", id="preview")
        with Horizontal(id="overrides"):
            yield Label("rel tol")
            yield Input(id="in-rel", placeholder="problem's")
            yield Label("abs tol")
            yield Input(id="in-abs", placeholder="problem's")
            yield Label("workers")
            yield Input(id="in-workers", placeholder="problem's")
            yield Label("budget")
            yield Input(id="in-budget", placeholder="problem's")
        yield Footer(compact=True)

    def _label(self, f: Path) -> Text:
        t = Text(f.stem)
        return t

    def on_mount(self) -> None:
        self.app.sub_title = "choose a problem"
        ol = self.query_one("#problem-list", OptionList)
        if self.files:
            stems = [f.stem for f in self.files]
            first = stems.index(DEFAULT_PROBLEM) if DEFAULT_PROBLEM in stems else 0
            ol.highlighted = first
            self._preview(first)
        else:
            self.query_one("#preview", Static).update(Text("No problem files (*.toml) found in the given folders.",
                                                           style="bold #f08a5d"))
        ol.focus()

    # -- preview --------------------------------------------------------------------
    def _load(self, path: Path) -> tuple[ProblemSpec | None, str | None]:
        """The file read once as data (no user code imported), cached per path, modification time and size.

        An edited file is read again the next time it is highlighted; an
        unchanged one never is (issue 11: the UI parsed a file up to five times).
        """
        try:
            st = path.stat()
            stamp = (st.st_mtime_ns, st.st_size)
        except OSError:
            stamp = None
        hit = self._cache.get(path)
        if hit is not None and hit[0] == stamp:
            return hit[1], hit[2]
        try:
            spec, err = load_problem_spec(path), None
        except ProblemError as exc:
            spec, err = None, str(exc)
        except (RecursionError, ArithmeticError, MemoryError) as exc:   # bad input, whatever the parser
            spec, err = None, f"{path}: cannot be read ({type(exc).__name__})"
        self._cache[path] = (stamp, spec, err)
        self.reads += 1
        return spec, err

    @property
    def current(self) -> Path | None:
        idx = self.query_one("#problem-list", OptionList).highlighted
        if idx is None or not (0 <= idx < len(self.files)):
            return None
        return self.files[idx]

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        self._preview(event.option_index)

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        self.action_open()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.action_open()

    def _preview(self, idx: int) -> None:
        """Show the preview of file ``idx``; a file that breaks the preview is shown as such, never fatal."""
        try:
            self._preview_file(idx)
        except Exception as exc:  # noqa: BLE001 - one bad file must not end the picker (issue 10 item 11)
            path = self.files[idx]
            msg = f"{path}: cannot be read ({type(exc).__name__}: {exc})"[:500]
            self._cache[path] = (None, None, msg)
            self.query_one("#preview", Static).update(Group(
                Text(path.stem, style="bold #e6e6e6"), Text("invalid", style="bold #ff5f6d"),
                Text(msg, style="#ff5f6d")))

    def _preview_file(self, idx: int) -> None:
        path = self.files[idx]
        spec, err = self._load(path)
        out = Table.grid(padding=(0, 1))
        out.add_column(style="#8fa3bf", no_wrap=True)
        out.add_column(overflow="fold")
        out.add_row("file", Text(short_path(path)))
        if spec is not None:
            head = Text(spec.title or path.stem, style="bold #e6e6e6")
            if spec.notes:
                out.add_row("notes", Text(reflow(spec.notes)))
            for label, text in spec.describe():
                out.add_row(label, Text(text))
            if spec.needs_python:
                out.add_row("", Text("This problem imports and runs your own Python code. Opening it asks "
                                     "first" + (" (trusted for this session)." if self.allow_python else "."),
                                     style="italic #e8c547"))
            g = spec.goal
            self._placeholders(f"{g.rel_tol:g}", f"{g.abs_tol:g}", str(spec.method.workers),
                               count_text(g.budget or DEFAULT_BUDGET))
        else:
            head = Text(path.stem, style="bold #e6e6e6")
            out.add_row(Text("invalid", style="bold #ff5f6d"), "")
            out.add_row("", Text(err or "", style="#ff5f6d"))
            self._placeholders("problem's", "problem's", "problem's", "problem's")
        self.query_one("#preview", Static).update(Group(head, out))

    def _placeholders(self, rel: str, abs_: str, workers: str, budget: str) -> None:
        self.query_one("#in-rel", Input).placeholder = rel
        self.query_one("#in-abs", Input).placeholder = abs_
        self.query_one("#in-workers", Input).placeholder = workers
        self.query_one("#in-budget", Input).placeholder = budget

    def _say(self, text: str) -> None:
        self.query_one("#preview", Static).update(Text(text, style="bold #ff5f6d"))

    # -- actions --------------------------------------------------------------------------
    def action_focus_list(self) -> None:
        self.query_one("#problem-list", OptionList).focus()

    def action_keys(self) -> None:
        self.app.push_screen(KeyHelp(self, "Keys: choosing a problem",
                                     extra="Problems come from the paths given to cubage tui (default: ./problems "
                                           "when present, else the bundled examples). Error estimates are "
                                           "heuristic, not guaranteed bounds."))

    def action_open_path(self) -> None:
        def chosen(text: str | None) -> None:
            if text:
                self.add_path(text)
        self.app.push_screen(PathPrompt(), chosen)

    def add_path(self, text: str) -> bool:
        """Add the problem file (or the problems of a folder) at ``text`` to the list and highlight it."""
        q = Path(text.strip()).expanduser()
        if q.is_dir():
            new = list_problems([q])
            if not new:
                self.notify(f"{q}: no problem files (*.toml) in this folder", title="Open path",
                            severity="error", markup=False)
                return False
        elif q.is_file():
            new = [q]
        else:
            self.notify(f"{q}: no such file or folder", title="Open path", severity="error", markup=False)
            return False
        ol = self.query_one("#problem-list", OptionList)
        known = {f.resolve(): i for i, f in enumerate(self.files)}
        first = None
        for f in new:
            i = known.get(f.resolve())
            if i is None:
                i = len(self.files)
                self.files.append(f)
                known[f.resolve()] = i
                ol.add_option(Option(self._label(f), id=str(i)))
            first = i if first is None else first
        ol.border_title = f"Problems ({len(self.files)})"
        ol.highlighted = first
        ol.focus()
        self._preview(first)
        return True

    def action_reload(self) -> None:
        self._cache.clear()
        idx = self.query_one("#problem-list", OptionList).highlighted
        if idx is not None:
            self._preview(idx)

    def action_open(self) -> None:
        path = self.current
        if path is None:
            return
        try:
            overrides = parse_overrides(self.query_one("#in-rel", Input).value,
                                        self.query_one("#in-abs", Input).value,
                                        self.query_one("#in-workers", Input).value,
                                        self.query_one("#in-budget", Input).value)
        except ValueError as exc:
            self.notify(str(exc), title="Cannot open", severity="error", markup=False)
            return
        spec, err = self._load(path)
        if spec is None:
            self.notify((err or "invalid problem file").splitlines()[0], title="Cannot open", severity="error",
                        markup=False)
            return
        if spec.needs_python and not self.allow_python:
            def answer(yes: bool | None) -> None:
                if yes:
                    self._open(spec, overrides, trust=True)
            self.app.push_screen(AskModal(f"{escape(path.name)} runs your own Python code "
                                          f"([b]{escape(spec.python)}[/b]).\nImport and run it?",
                                          title="Python integrand"), answer)
            return
        # trusted like the command line's --allow-python: the UI started with it (or the question answered yes)
        # trusts the whole file, its [method] cluster included (one rule for runs and scans, session.prepare)
        self._open(spec, overrides, trust=self.allow_python)

    def _open(self, spec: ProblemSpec, overrides: dict, trust: bool) -> None:
        """Bind the spec read for the preview (the file is not read again) and open its run view."""
        from .run_view import RunView
        try:
            prob = bind_problem(spec, allow_python=trust)
        except (ProblemError, RecursionError, ArithmeticError, MemoryError) as exc:
            self.notify(exc.headline if hasattr(exc, "headline") else str(exc), title="Cannot open",
                        severity="error", markup=False)
            return
        if prob.scan is not None:
            from .scan_view import open_scan
            open_scan(self.app, prob, overrides)
            return
        self.app.push_screen(RunView(ProblemFacts.from_spec(spec), problem=prob, overrides=overrides,
                                     can_go_back=True))

    def on_screen_resume(self) -> None:
        self.app.sub_title = "choose a problem"


class PathPrompt(ModalScreen[str | None]):
    """Asks for the path of a problem file or folder; dismisses with the text (None on Esc)."""

    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def compose(self) -> ComposeResult:
        with Vertical(id="path-box") as box:
            box.border_title = "Open a problem file or folder"
            yield Input(placeholder="path, e.g. ~/integrals/form-factor.toml", id="path-input")
            yield Static(Text.from_markup("[b]enter[/b] open    [b]esc[/b] cancel"), id="path-keys")

    def on_mount(self) -> None:
        self.query_one("#path-input", Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.dismiss(event.value.strip() or None)

    def action_cancel(self) -> None:
        self.dismiss(None)
