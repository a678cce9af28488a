"""The terminal UI's app: six views in tabs over one Workspace, keys 1-6 to switch, a command palette, help.

`make_app(path)` is the one factory (the command line and the tests both use it); `run_app(path)` runs it.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial
from pathlib import Path

from rich.text import Text
from textual import events, work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.command import DiscoveryHit, Hit, Hits, Provider
from textual.css.query import NoMatches
from textual.widgets import Footer, Static, TabbedContent, TabPane

from triage.app import Workspace
from triage.tui.messages import LabelsChanged, ModelChanged, ReviewCount
from triage.tui.outside import POLL_SECONDS, outside_stamp
from triage.tui.theme import LEDGER
from triage.tui.views import (
    FieldsView,
    IncomingView,
    ModelsView,
    OverviewView,
    ReviewView,
    ScorecardView,
    View,
)
from triage.tui.widgets import HelpScreen

WIDE = 140
NARROW = 80  # below this, Overview's two panels stack instead of sharing a row

VIEWS: list[tuple[str, str, type[View], str]] = [
    ("overview", "1 Overview", OverviewView, "items, queues, the active model, drift"),
    ("models", "2 Models", ModelsView, "model versions; train, cancel, activate; the settings grid"),
    ("scorecard", "3 Scorecard", ScorecardView, "confusion matrix, per-queue figures, what-if cutoffs"),
    ("incoming", "4 Incoming", IncomingView, "the latest run's decisions and their evidence"),
    ("review", "5 Review", ReviewView, "held items, safety first; labels the model disagrees with (d); send to a queue, undo"),
    ("fields", "6 Fields", FieldsView, "value-by-queue counts and smoothed probabilities"),
]


class TriageCommands(Provider):
    """Command palette entries: every view, and the main actions."""

    def commands(self) -> list[tuple[str, Callable[[], object], str]]:
        app = self.app
        assert isinstance(app, TriageApp)
        out: list[tuple[str, Callable[[], object], str]] = [
            (f"Show {title[2:].lower()}", partial(app.action_show, key), help_) for key, title, _, help_ in VIEWS
        ]
        out += [
            ("Train a new model version", app.action_train, "runs in the background; x on Models cancels"),
            ("Cancel the training run", app.action_cancel_training, "the active model stays as it is"),
            ("Run the settings grid", app.action_grid, "cross-validates every setting; x on Models cancels"),
            ("Save the what-if cutoffs", app.action_save_cutoffs, "as a new model version, after a confirmation"),
            ("Undo the newest correction", app.action_undo, "journaled and learned like any correction"),
            ("Re-score the test items", app.action_rescore, "scorecard with the current labels"),
            ("Key list", app.action_help, "every key of every view"),
        ]
        return out

    async def discover(self) -> Hits:
        for name, run, help_ in self.commands():
            yield DiscoveryHit(name, run, help=help_)

    async def search(self, query: str) -> Hits:
        matcher = self.matcher(query)
        for name, run, help_ in self.commands():
            score = matcher.match(name)
            if score > 0:
                yield Hit(score, matcher.highlight(name), run, help=help_)


class TriageApp(App[None]):
    """triage's terminal UI over one workspace."""

    CSS_PATH = "app.tcss"
    TITLE = "triage"
    COMMANDS = App.COMMANDS | {TriageCommands}
    BINDINGS = [
        *[Binding(str(i), f"show('{key}')", title[2:], show=False, id=f"show.{key}", tooltip=f"Show {help_}")
          for i, (key, title, _, help_) in enumerate(VIEWS, start=1)],
        Binding("question_mark,f1", "help", "Keys", id="app.help", tooltip="Every key of every view", key_display="?"),
        Binding("ctrl+r", "reload", "Reload", show=False, id="app.reload", tooltip="Read the workspace again"),
        Binding("q", "quit", "Quit", id="app.quit", tooltip="Leave triage"),
    ]

    def __init__(self, workspace: Workspace, poll_seconds: float = POLL_SECONDS) -> None:
        super().__init__()
        self.ws = workspace
        self.poll_seconds = poll_seconds
        self.outside: tuple[int, int | None] | None = None  # the store's and the config's change stamps
        self.reviewer_name: str | None = None  # who decides: TRIAGE_REVIEWER, or asked at the first decision
        self.review_count: tuple[int, int] | None = None
        self.sub_title = str(workspace.root.name)

    def compose(self) -> ComposeResult:
        yield Static(id="topbar")
        with TabbedContent(initial="overview", id="views"):
            for key, title, cls, _ in VIEWS:
                with TabPane(title, id=key):
                    yield cls(self.ws, id=f"{key}-view")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.register_theme(LEDGER)
        self.theme = LEDGER.name
        self.show_topbar()
        self.call_after_refresh(self._focus_active)
        self._fit(self.size.width)
        self.outside = outside_stamp(self.ws)
        self.set_interval(self.poll_seconds, self.look_outside)
        for w in self.ws.safety_warnings():  # a never-auto queue without watch words: said as the UI opens
            self.notify(w, title="safety", severity="warning", timeout=30)

    def on_resize(self, event: events.Resize) -> None:
        self._fit(event.size.width)
        self.label_review_tab()

    def _fit(self, width: int) -> None:
        """Wide terminals put panels side by side (the stylesheet keys on the `wide` class)."""
        self.set_class(width >= WIDE, "wide")
        self.set_class(width < NARROW, "narrow")

    # ----- views and the focus -----
    def view(self, key: str) -> View:
        return self.query_one(f"#{key}-view", View)

    @property
    def active_key(self) -> str:
        """The key of the view on screen."""
        return self.query_one(TabbedContent).active

    def action_show(self, key: str) -> None:
        """Switch the tab only; the focus follows in `_focus_active`, the one place that moves it between views."""
        self.query_one(TabbedContent).active = key

    def on_tabbed_content_tab_activated(self, event: TabbedContent.TabActivated) -> None:
        self.call_after_refresh(self._focus_active)

    def _focus_active(self) -> None:
        """Give the view on screen its main widget's focus.

        It reads the active tab when it runs, not the tab of the message that asked for it: with keys pressed
        faster than the screen refreshes, an older request focusing an older view would switch the tabs back
        (a focused widget selects its pane), which asks again, and two views would take turns for ever.
        """
        try:
            view = self.view(self.active_key)
        except NoMatches:  # the app is closing: the views are gone
            return
        view.focus_main()

    def action_reload(self) -> None:
        self.outside = outside_stamp(self.ws)
        self.ws.refresh_if_changed()
        self.reload_all()
        self.notify("read the workspace again")

    def reload_all(self) -> None:
        self.show_topbar()
        for key, *_ in VIEWS:
            self.view(key).reload()

    # ----- another process (the command line, the service, a second UI) changed the workspace -----
    @work(thread=True, exclusive=True, exit_on_error=False, group="outside")
    def look_outside(self) -> None:
        """Read the change stamps in a thread (the store's lock may be held by a running transaction)."""
        stamp = outside_stamp(self.ws)
        if stamp != self.outside:
            changed = self.ws.refresh_if_changed()
            self.call_from_thread(self._changed_outside, stamp, changed)

    def _changed_outside(self, stamp: tuple[int, int | None], new_version: bool) -> None:
        self.outside = stamp
        self.reload_all()
        what = (f"model version {self.ws.active_version.version} is active now" if new_version and
                self.ws.active_version else "items, decisions or settings changed")
        self.notify(f"another process changed the workspace: {what}; every view was read again",
                    title="changed elsewhere", timeout=6)

    # ----- actions the palette reaches -----
    def models_view(self) -> ModelsView:
        return self.query_one(ModelsView)

    def action_train(self) -> None:
        self.action_show("models")
        self.models_view().action_train()

    def action_cancel_training(self) -> None:
        self.models_view().action_cancel_training()

    def action_grid(self) -> None:
        self.action_show("models")
        self.models_view().action_grid()

    def action_save_cutoffs(self) -> None:
        self.action_show("scorecard")
        self.query_one(ScorecardView).action_save_cutoffs()

    def action_undo(self) -> None:
        self.query_one(ReviewView).action_undo()

    def action_rescore(self) -> None:
        self.query_one(ScorecardView).action_remeasure()

    def action_help(self) -> None:
        if isinstance(self.screen, HelpScreen):
            return
        sections: list[tuple[str, list[tuple[str, str]]]] = [
            ("anywhere", [("1 … 6", "switch view (or click a tab)"), ("ctrl+p", "command palette"),
                          ("? / f1", "this key list"), ("ctrl+r", "read the workspace again"), ("q", "quit"),
                          ("tab", "next panel")]),
        ]
        for _key, title, cls, _ in VIEWS:
            keys = [(b.key_display or b.key.split(",")[0], b.tooltip or b.description) for b in cls.BINDINGS
                    if isinstance(b, Binding)]
            if keys:
                sections.append((title[2:], keys))
        sections.append(("Scorecard", [("enter", "on a queue's row or a matrix cell (m): the test items behind "
                                                 "it, with evidence; s there corrects one")]))
        sections.append(("Incoming", [("↑ ↓", "choose an item: its evidence shows below")]))
        sections.append(("Fields", [("↑ ↓", "choose a field")]))
        self.push_screen(HelpScreen(sections))

    # ----- messages up: refresh what depends on the change -----
    def on_model_changed(self, message: ModelChanged) -> None:
        self.show_topbar()
        for key, *_ in VIEWS:
            self.view(key).reload()

    def show_topbar(self) -> None:
        """One line of our own: the workspace, the active version and what waits for a person."""
        mv = self.ws.active_version
        line = Text()
        line.append(" triage ", style="bold reverse")
        line.append(f"  {self.ws.root.name}", style="bold")
        line.append(f"  ·  model version {mv.version}" if mv else "  ·  no model yet")
        if self.review_count is not None:
            n, safety = self.review_count
            line.append(f"  ·  to review {n}")
            if safety:
                line.append(f" (safety {safety})", style="bold")
        line.append("  ·  ? keys", style="dim")
        self.query_one("#topbar", Static).update(line)

    def label_review_tab(self) -> None:
        """"5 Review (N, safety N)"; below 100 columns "5 Review (N)" so that every tab fits (the top line
        and Overview still give the safety count)."""
        if self.review_count is None:
            return
        n, safety = self.review_count
        wide = self.size.width >= 100
        label = f"5 Review ({n}" + (f", safety {safety})" if safety and wide else ")")
        self.query_one(TabbedContent).get_tab("review").label = label

    def on_review_count(self, message: ReviewCount) -> None:
        """The count goes on the Review tab, on Overview and in the top line."""
        self.review_count = (message.to_review, message.safety)
        self.show_topbar()
        self.label_review_tab()
        self.query_one(OverviewView).show_review_count(message.to_review, message.safety)

    def on_labels_changed(self, message: LabelsChanged) -> None:
        for key in ("overview", "models", "scorecard", "fields"):
            self.view(key).reload()
        review = self.query_one(ReviewView)
        if message.undo or message.item_id not in review.decided:  # undone, or decided in another view
            review.rebuild()
        self.query_one(IncomingView).mark_decided(message.item_id, message.queue, message.undo)


def make_app(workspace: Path | str) -> TriageApp:
    """The app over the workspace folder (opened here; raises WorkspaceError/ConfigError if it cannot be)."""
    return TriageApp(Workspace.open(workspace))


def run_app(workspace: Path | str) -> None:
    """Open the workspace and run the terminal UI until the user quits."""
    app = make_app(workspace)
    try:
        app.run()
    finally:
        app.ws.close()
