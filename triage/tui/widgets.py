"""Renderings and small screens shared by the views.

Everything drawn here reads without colour too: shares are printed as numbers and as shade characters,
evidence is marked with + and - as well as green and red, and bars are made of block characters.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from rich.table import Table
from rich.text import Text
from textual import events
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label, OptionList, Static
from textual.widgets.option_list import Option

SHADES = " ░▒▓█"
WORD = re.compile(r"\w+", re.UNICODE)


def pct(x: float | None) -> str:
    return "—" if x is None else f"{100 * x:.1f}%"


def num(x: float | None, digits: int = 2) -> str:
    return "—" if x is None else f"{x:.{digits}f}"


def shade(share: float) -> str:
    """A shade character for a share in [0, 1]: blank for none, full block for (nearly) all."""
    if share <= 0:
        return SHADES[0]
    return SHADES[min(len(SHADES) - 1, 1 + int(share * (len(SHADES) - 1) - 1e-9))]


def bar(value: float, top: float, width: int) -> str:
    """A bar of block characters, `width` long at `top`, at least one block for any positive value."""
    if top <= 0 or value <= 0:
        return ""
    n = max(1, round(width * min(value, top) / top))
    return "█" * n


def cell_style(share: float, diagonal: bool) -> str:
    """Background by row share in the 16 basic colours: green family on the diagonal, red family off it."""
    if share <= 0:
        return ""
    if diagonal:
        return "black on green" if share >= 0.5 else "black on bright_green" if share >= 0.2 else "green"
    return "white on red" if share >= 0.2 else "black on yellow" if share >= 0.05 else "yellow"


def short_names(queues: Sequence[str]) -> list[str]:
    """Column keys for a matrix: A, B, C ... (the legend names them)."""
    keys = []
    for i in range(len(queues)):
        k, s = i, ""
        while True:
            s = chr(ord("A") + k % 26) + s
            k = k // 26 - 1
            if k < 0:
                break
        keys.append(s)
    return keys


def matrix_cells(queues: Sequence[str], matrix: Sequence[Sequence[int]], shares: Sequence[Sequence[float]]
                 ) -> tuple[list[str], list[tuple[Text, list[Text]]]]:
    """The confusion matrix for a table without cell padding: column headers (A, B, ... for the suggested
    queues) and per true queue its row label ("A billing") and cells (count, % of the row, shade; "·" for none),
    each with a leading space as the column gap. A row's total is the per-queue table's "true items"."""
    keys = short_names(queues)
    rows: list[tuple[Text, list[Text]]] = []
    for i, q in enumerate(queues):
        cells: list[Text] = []
        for j in range(len(queues)):
            sh, c = shares[i][j], matrix[i][j]
            txt = f" {c:>3} {round(100 * sh):>3}{shade(sh)}" if c else "·"
            cells.append(Text(txt, style=cell_style(sh, i == j), justify="right"))
        rows.append((Text(f"{keys[i]} {q} "), cells))
    return keys, rows


SUPERSCRIPT = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")
HAZARD = "⚠"


def note_mark(n: int) -> str:
    """The superscript number that ties a word in the text to its row in the weight table."""
    return str(n).translate(SUPERSCRIPT)


def evidence_table(terms_for: Sequence[Mapping[str, Any]], terms_against: Sequence[Mapping[str, Any]],
                   width: int = 14, suggested: str = "", runner_up: str = "") -> Table:
    """The weight table: each term numbered (the same number marks it in the text), its weight in log-odds
    towards the suggestion, and a bar that points right (▶, for the suggestion) or left (◀, for the runner-up),
    so direction reads from the shape and the sign, not from colour."""
    top = max([abs(float(t["weight"])) for t in [*terms_for, *terms_against]] or [1.0])
    t = Table(show_header=True, show_edge=False, pad_edge=False, box=None, padding=(0, 1), expand=False,
              header_style="bold")
    t.add_column("#", justify="right", no_wrap=True, style="dim")
    t.add_column(f"◀ {runner_up or 'against'}", justify="right", no_wrap=True)
    t.add_column("weight", justify="right", no_wrap=True)
    t.add_column(f"{suggested or 'for'} ▶", no_wrap=True)
    t.add_column("kind", style="dim", no_wrap=True)
    t.add_column("evidence", no_wrap=True, max_width=28, overflow="ellipsis")
    n = 0
    for terms in (terms_for, terms_against):
        for term in terms:
            n += 1
            w = float(term["weight"])
            b = bar(abs(w), top, width)
            left = Text(b, style="bold") if w < 0 else ""
            right = Text(b, style="bold") if w > 0 else ""
            t.add_row(str(n), left, f"{w:+.2f}", right, str(term["kind"]), str(term["feature"]))
    return t


def marked_text(text: str, notes: Mapping[str, int], hazards: Iterable[str] = ()) -> Text:
    """The text as written, each evidence word followed by its row number in the weight table (superscript),
    and words that start with a watch word marked as a hazard: ⚠word in reverse video (it reads in any
    colour depth, and without colour by the ⚠)."""
    hazards = tuple(h.lower() for h in hazards)
    out = Text()
    pos = 0
    for m in WORD.finditer(text):
        word = m.group(0)
        k = notes.get(word.lower())
        hazard = bool(hazards) and word.lower().startswith(hazards)
        if k is None and not hazard:
            continue
        out.append(text[pos:m.start()])
        if hazard:
            out.append(f"{HAZARD}{word}", style="bold reverse")
        else:
            out.append(word, style="underline")
        if k is not None:
            out.append(note_mark(k), style="bold")
        pos = m.end()
    out.append(text[pos:])
    return out


def plain_value(v: Any) -> str:
    """A field value in plain words: 814.0 reads 814, a missing value reads "—"."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "—"
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def explanation_renderables(ex: Mapping[str, Any], text_fields: Iterable[str],
                            hazards: Iterable[str] = ()) -> list[Any]:
    """Header, the text with numbered evidence words, and the weight table for one explanation."""
    terms = [*ex["for"], *ex["against"]]
    notes: dict[str, int] = {}
    for k, term in enumerate(terms, start=1):
        if term["kind"] == "token":
            notes.setdefault(str(term["feature"]).lower(), k)
    head = Text()
    head.append(f"{ex['id']}  ", style="bold")
    head.append(f"suggested {ex['suggested']} {pct(ex['confidence'])}")
    if ex.get("runner_up"):
        head.append(f"  runner-up {ex['runner_up']} {pct(ex['runner_up_confidence'])}")
        margin = 100 * (float(ex["confidence"]) - float(ex["runner_up_confidence"]))
        head.append(f"  margin {margin:.0f} points")
    head.append("\n")
    head.append("HELD: " if ex["held"] else "routed: ", style="bold reverse" if ex["held"] else "bold")
    head.append(str(ex["reason"]))
    if ex.get("label"):
        head.append(f"   label: {ex['label']}", style="bold")
    if ex.get("stored_note"):
        head.append(f"\n{ex['stored_note']}", style="italic")
    body = Text()
    for name in text_fields:
        value = ex["fields"].get(name)
        if value:
            body.append(f"{name}: ", style="dim")
            body.append_text(marked_text(str(value), notes, hazards))
            body.append("\n")
    others = [f"{k} {plain_value(v)}" for k, v in ex["fields"].items() if k not in set(text_fields)]
    body.append(" · ".join(others), style="dim")
    if ex.get("unseen_words"):
        body.append(f"\nwords the model has not seen: {', '.join(ex['unseen_words'][:12])}", style="dim")
    return [head, body, evidence_table(ex["for"], ex["against"], suggested=str(ex.get("suggested") or ""),
                                       runner_up=str(ex.get("runner_up") or ""))]


def text_plot(xs: Sequence[float], ys: Sequence[float], mark: tuple[float, float] | None = None,
              width: int = 40, height: int = 8, x_label: str = "coverage", y_label: str = "precision") -> Text:
    """A small scatter of (x, y) in [0, 1] x [y_min, 1] with '•' points and the current setting as '◆'."""
    if not xs:
        return Text("(no test items suggested for this queue)", style="dim")
    y_min = min(min(ys), mark[1] if mark else 1.0)
    y_min = max(0.0, math.floor(y_min * 10) / 10)
    if y_min >= 1.0:
        y_min = 0.9
    grid = [[" "] * width for _ in range(height)]

    def place(x: float, y: float) -> tuple[int, int]:
        c = min(width - 1, max(0, round(x * (width - 1))))
        r = min(height - 1, max(0, round((1.0 - y) / (1.0 - y_min) * (height - 1))))
        return r, c

    for x, y in zip(xs, ys, strict=True):
        r, c = place(x, y)
        grid[r][c] = "•"
    if mark is not None:
        r, c = place(*mark)
        grid[r][c] = "◆"
    out = Text()
    for r, row in enumerate(grid):
        label = "1.00" if r == 0 else f"{y_min:.2f}" if r == height - 1 else "    "
        out.append(f"{label} │")
        for ch in row:
            out.append(ch, style="bold yellow" if ch == "◆" else "cyan" if ch == "•" else "")
        out.append("\n")
    out.append("     └" + "─" * width + "\n")
    out.append(f"      0{' ' * (width - 2)}1 {x_label}\n", style="dim")
    out.append(f"      ↑ {y_label} · • each cutoff · ◆ the current one", style="dim")
    return out


ACC_MARK = "█"
CONF_MARK = "│"


def reliability_chart(bins: Sequence[Mapping[str, Any]], width: int = 20) -> Text:
    """One line per confidence bin: accuracy as a bar of █, the bin's mean confidence as │ on the same scale.

    A calibrated bin has its │ right at the end of its bar (the diagonal); a │ beyond the bar means the
    confidences there promise more than they deliver, one inside the bar that they promise less. The
    numbers are printed too, so nothing depends on colour.
    """
    if not bins:
        return Text("(no items in any confidence bin)", style="dim")
    out = Text()
    out.append(f"{'bin':<8}{'n':>5}  {'0':<{width}}1  acc.  conf.   gap\n", style="bold")
    for b in bins:
        acc, conf = float(b["accuracy"]), float(b["mean_confidence"])
        cells = [ACC_MARK if i < round(acc * width) else " " for i in range(width + 1)]
        c = min(width, round(conf * width))
        cells[c] = CONF_MARK
        out.append(f"{b['lo']:.1f}–{b['hi']:.1f} {int(b['n']):>5}  ")
        for ch in cells:
            out.append(ch, style="bold yellow" if ch == CONF_MARK else "cyan" if ch == ACC_MARK else "")
        gap = acc - conf
        out.append(f" {acc:5.2f}  {conf:5.2f}  ")
        out.append(f"{gap:+.2f}", style="red" if abs(gap) >= 0.1 else "")
        out.append("\n")
    out.append(f"{ACC_MARK} accuracy · {CONF_MARK} mean confidence (at the bar's end: calibrated)", style="dim")
    return out


# ----- small screens ----------------------------------------------------------------------------------------
class ConfirmScreen(ModalScreen[bool]):
    """Ask a yes/no question; dismisses with True for yes."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes", id="confirm.yes", tooltip="Go ahead"),
        Binding("n,escape", "answer(False)", "No", id="confirm.no", tooltip="Leave things as they are"),
    ]

    def __init__(self, question: str) -> None:
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            yield Label(self.question, id="question")
            yield Button("Yes (y)", id="yes", variant="primary")
            yield Button("No (n)", id="no")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "yes")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


class QueuePicker(ModalScreen[str | None]):
    """Choose the queue to send an item to; dismisses with the queue, or None when left with escape.

    Typing filters as you go: the list keeps only the queues with the letters typed so far (those that start
    with them first, then those that contain them), and the first is highlighted; backspace takes one back.
    """

    BINDINGS = [Binding("escape", "leave", "Back", id="picker.back", tooltip="Send nowhere")]

    def __init__(self, item_id: str, queues: Sequence[str], suggested: str | None, never_auto: Iterable[str]) -> None:
        super().__init__()
        self.item_id = item_id
        self.queues = list(queues)
        self.suggested = suggested
        self.never = set(never_auto)
        self.typed = ""
        self.shown = list(self.queues)  # the queues on the list now (all, or those the typed letters match)

    def option(self, q: str) -> Option:
        note = "  ← suggested" if q == self.suggested else ""
        note += "  (never auto-routed)" if q in self.never else ""
        return Option(f"{q}{note}", id=q)

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog") as box:
            box.border_title = f"send {self.item_id} to"
            yield Label("type to find a queue · enter picks · escape leaves", id="picker-typed")
            yield OptionList(*(self.option(q) for q in self.queues), id="queue-options")

    def on_mount(self) -> None:
        ol = self.query_one(OptionList)
        ol.focus()
        if self.suggested in self.queues:
            ol.highlighted = self.queues.index(self.suggested)

    def matches(self, typed: str) -> list[str]:
        """The queues the typed letters match: those starting with them first, then those containing them."""
        t = typed.casefold()
        first = [q for q in self.queues if q.casefold().startswith(t)]
        return first + [q for q in self.queues if t in q.casefold() and q not in first]

    def on_key(self, event: events.Key) -> None:
        if event.key == "backspace":
            self.typed = self.typed[:-1]
        elif event.character and len(event.character) == 1 and (event.character.isalnum() or event.character in "_-"):
            self.typed += event.character
        else:
            return
        event.stop()
        event.prevent_default()
        found = self.matches(self.typed)
        label = self.query_one("#picker-typed", Label)
        if not found:  # the list stays as it was, so enter still picks something shown
            label.update(f"typed: {self.typed}  (no queue has it; backspace)")
            return
        label.update(f"typed: {self.typed} · {len(found)} of {len(self.queues)} queues" if self.typed
                     else "type to find a queue · enter picks · escape leaves")
        self.shown = found
        ol = self.query_one(OptionList)
        ol.clear_options()
        ol.add_options([self.option(q) for q in found])
        ol.highlighted = found.index(self.suggested) if not self.typed and self.suggested in found else 0

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        self.dismiss(event.option.id)

    def action_leave(self) -> None:
        self.dismiss(None)


class NameScreen(ModalScreen[str | None]):
    """Ask once who is deciding (their name goes into the corrections journal)."""

    BINDINGS = [Binding("escape", "leave", "Back", id="name.back", tooltip="Decide nothing")]

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog") as box:
            box.border_title = "who is deciding?"
            yield Label("Your name goes into the corrections journal with each decision (reviewer = \"...\" "
                        "under [desk] in triage.toml, or TRIAGE_REVIEWER, skips this question).", id="name-why",
                        markup=False)
            yield Input(placeholder="your name, then enter", id="name-input")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        name = event.value.strip()
        if name:
            self.dismiss(name)

    def action_leave(self) -> None:
        self.dismiss(None)


class HelpScreen(ModalScreen[None]):
    """Every key of the app and of each view, in a scrolling panel (the list is longer than a small terminal).

    The table gets a width from the panel (not from measuring itself): a rich Table inside auto-sized
    containers measures as 0x0 in Textual and nothing is drawn.
    """

    BINDINGS = [Binding("escape,q,question_mark,f1", "leave", "Close", id="help.close", tooltip="Close the key list")]

    def __init__(self, sections: Sequence[tuple[str, Sequence[tuple[str, str]]]]) -> None:
        super().__init__()
        self.sections = sections

    def compose(self) -> ComposeResult:
        t = Table(show_edge=False, box=None, padding=(0, 1), expand=True)
        t.add_column("where", style="bold", no_wrap=True)
        t.add_column("key", style="bold", no_wrap=True)
        t.add_column("does", ratio=1)
        for where, keys in self.sections:
            first = True
            for key, what in keys:
                t.add_row(where if first else "", key, what)
                first = False
        with Vertical(id="help-dialog") as box:
            box.border_title = "keys"
            box.border_subtitle = "escape closes · arrows scroll"
            with VerticalScroll(id="help-scroll"):
                yield Static(t, id="help-keys")

    def on_mount(self) -> None:
        self.query_one("#help-scroll").focus()

    def action_leave(self) -> None:
        self.dismiss(None)
