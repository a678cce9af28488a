"""View 1, Overview: items, queues, the active model, the latest routing run and its drift figures."""

from __future__ import annotations

from pathlib import Path

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, VerticalScroll
from textual.widgets import Static

from triage.tui.views.base import View
from triage.tui.widgets import (
    bar,
    pct,
)


class OverviewView(View):
    """Items, queues, the active model and its scorecard summary, corrections since training, drift."""

    main_id = "overview-scroll"

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="overview-scroll"):
            yield Static(id="overview-warning")
            yield Static(Text("to review: counting…", style="dim"), id="overview-review")
            with Horizontal(id="overview-top"):
                yield Static(id="overview-model")
                yield Static(id="overview-batch")
            yield Static(id="overview-queues")

    def on_mount(self) -> None:
        self.reload()

    def show_review_count(self, n: int, safety: int) -> None:
        line = Text()
        line.append(f"to review: {n}", style="bold")
        line.append(f" (safety {safety})", style="bold red" if safety else "")
        line.append(" · 5 opens the work order, safety first", style="dim")
        self.query_one("#overview-review", Static).update(line)

    def reload(self) -> None:
        o = self.ws.overview()
        never = ", ".join(o["never_auto"]) or "none"
        self.query_one("#overview-warning", Static).update(Text(
            f"! Items predicted for a never-auto queue ({never}), or mentioning one of its watch words, are "
            "never auto-routed or closed: they always reach a person, whatever the confidence.", style="bold yellow"))
        m = Table.grid(padding=(0, 2))
        m.add_column(style="dim")
        m.add_column(style="bold")
        m.add_row("items", f"{o['items']}, {o['labelled']} labelled")
        m.add_row("active model", f"version {o['active_version']}" if o["active_version"] else "none: press 2, t")
        m.add_row("text model", str(o["text_model"] or "—"))
        card = o["scorecard"] or {}
        m.add_row("accuracy", pct(card.get("accuracy")))
        m.add_row("auto-routed", pct(card.get("coverage")))
        m.add_row("their precision", pct(card.get("auto_precision")))
        m.add_row("scored on", f"{card.get('n', '—')} newest, not trained on")
        m.add_row("corrections", f"{o['corrections_since_training']} learned since training")
        self.query_one("#overview-model", Static).update(Group(Text("model", style="bold underline"), m))
        b = Table.grid(padding=(0, 2))
        b.add_column(style="dim")
        b.add_column(style="bold")
        batch = o["latest_batch"]
        if batch:
            b.add_row("run", f"#{batch['id']} {Path(batch['source']).name}")
            b.add_row("routed / held", f"{batch['routed']} / {batch['held']}  ({pct(batch['coverage'])} auto-routed)")
            unseen = batch["unseen_word_share"]
            b.add_row("unseen words", Text(f"{pct(unseen)}" + ("  ! many new words" if unseen > 0.1 else "  ok"),
                                           style="yellow" if unseen > 0.1 else ""))
            psi = batch["queue_mix_psi"]
            flag = batch.get("drift_flag")
            b.add_row("queue-mix PSI", Text(f"{psi:.3f}" + ("  ! the queue mix moved" if flag else "  ok"),
                                            style="bold red" if flag else ""))
        else:
            b.add_row("run", "nothing routed yet (triage route FILE)")
        self.query_one("#overview-batch", Static).update(Group(Text("latest run", style="bold underline"), b))
        q = Table(title="queues (labelled items)", title_justify="left", show_edge=False, box=None,
                  padding=(0, 1))
        q.add_column("queue", no_wrap=True)
        q.add_column("items", justify="right")
        q.add_column("share", justify="right")
        q.add_column("", no_wrap=True)
        q.add_column("latest run", justify="right")
        total = sum(o["queues"].values()) or 1
        top = max(o["queues"].values(), default=1)
        per_batch = batch["per_queue"] if batch else {}
        for name, n in o["queues"].items():
            mark = "  (never auto)" if name in o["never_auto"] else ""
            q.add_row(name + mark, str(n), pct(n / total), Text(bar(n, top, 24), style="cyan"),
                      str(per_batch.get(name, 0)) if batch else "—")
        self.query_one("#overview-queues", Static).update(q)
