"""Tables for people: the scorecard, decisions, one item's evidence, model versions, calibration."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from triage.cli.output import AVG_F1, LOG_ODDS, MACRO_F1, count, out, pct


def render_scorecard(card: dict[str, Any], console: Console = out) -> None:
    """The confusion matrix and the per-queue table at the cutoffs."""
    queues = card["queues"]
    m = Table(title="Confusion matrix (rows: true queue, columns: suggested queue)", title_justify="left",
              box=box.SIMPLE_HEAD, pad_edge=False)
    m.add_column("true \\ suggested")
    for q in queues:
        m.add_column(q[:12], justify="right")
    for q, row in zip(queues, card["matrix"], strict=True):
        total = sum(row) or 1
        m.add_row(q, *[f"[bold]{v}[/]" if i == queues.index(q) else (f"{v}" if v / total < 0.05 else f"[yellow]{v}[/]")
                       for i, v in enumerate(row)])
    console.print(m)
    # one space between columns (the box's divider, no padding): the table fits 80 columns with every word whole
    t = Table(title="Per queue, at the cutoffs", title_justify="left", box=box.SIMPLE_HEAD, show_edge=False,
              padding=(0, 0))
    width = max((len(q["queue"]) for q in card["per_queue"]), default=5)
    t.add_column("queue", no_wrap=True, min_width=min(width, 20))
    for col in ("target", "cutoff", "precision", "recall", "F1", "true\nitems", "auto-\nrouted", "held"):
        t.add_column(col, justify="right", no_wrap=True, min_width={"F1": 5, "true\nitems": 5}.get(col, 6))
    for q in card["per_queue"]:
        t.add_row(q["queue"], pct(q["target"]), cutoff_word(q), precision_cell(q),
                  pct(q["recall"]) if q["support"] else "-", f"{q['f1']:.3f}" if q["support"] else "-",
                  count(q["support"]), pct(q["coverage"]) if q["routed"] + q["held"] else "-",
                  pct(q["held_share"]) if q["routed"] + q["held"] else "-")
    console.print(t)
    console.print("true items: test items truly of the queue. auto-routed, held: shares of the items suggested for "
                  "the queue. precision: of the items auto-routed there, the share truly of it (- when nothing "
                  "was auto-routed).", markup=False)
    console.print("cutoff: person = never auto-routed, a person sees every item; none = no cutoff meets the target "
                  "yet, so nothing is auto-routed there", markup=False)
    untested = card.get("untested") or []
    if untested:
        console.print(f"No test items for {', '.join(untested)}: left out of the {AVG_F1} (its F1 cannot be "
                      "measured on these items).", markup=False)
    console.print(
        f"{count(card['n'])} test items: top queue right for {pct(card['accuracy'])}; {MACRO_F1} "
        f"{card['macro_f1']:.3f}; auto-routed {pct(card['coverage'])} at precision {pct(card['auto_precision'])}; "
        f"held for review {pct(card['held_share'])}.", markup=False
    )


def cutoff_word(q: dict[str, Any]) -> str:
    """A queue's cutoff cell: person (never auto-routed), none (nothing meets the target) or the number."""
    return "person" if q["never_auto"] else ("none" if q["cutoff"] is None else f"{q['cutoff']:.3f}")


def precision_cell(q: dict[str, Any]) -> str:
    """Precision at the cutoffs, or "-" when nothing was auto-routed there (0.0% would claim every one was wrong)."""
    return pct(q["precision"]) if q["routed"] else "-"


def render_decisions(decisions: Sequence[dict[str, Any]], console: Console = out, limit: int = 40) -> None:
    t = Table(title=f"Decisions ({len(decisions)} items; first {min(limit, len(decisions))} shown)",
              title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
    for col, width in (("id", 9), ("decision", 14), ("conf.", 5), ("runner-up", 10)):
        t.add_column(col, overflow="ellipsis", no_wrap=True, min_width=width)
    t.add_column("strongest evidence", ratio=1)
    for d in decisions[:limit]:
        decision = f"held ({d['suggested']}?)" if d["held"] else d["queue"]
        if d.get("flag") == "never_auto":
            decision = f"[b red]person: {d['suggested']}[/]"
        elif d.get("flag") == "watch":
            decision = f"[b red]held: check {escape(', '.join(d['watch']))}[/]"
        top = ", ".join(f"{e['feature']} {e['weight']:+.1f}" for e in d["evidence"][:2])
        t.add_row(d["id"], decision, f"{d['confidence']:.2f}", d["runner_up"] or "-", top)
    console.print(t)


def render_explanation(x: dict[str, Any], console: Console = out) -> None:
    state = "held for review" if x["held"] else f"routed to {x['queue']}"
    reason = str(x["reason"] or "")
    console.print(f"[b]{x['id']}[/]: {state}. Top queue [b]{x['suggested']}[/] ({pct(x['confidence'])}), "
                  f"runner-up [b]{x['runner_up']}[/] ({pct(x['runner_up_confidence'])}). "
                  f"{escape(reason[:1].upper() + reason[1:])}.")
    if x.get("label"):
        console.print(f"Its current label: {x['label']}.")
    if x.get("stored_note"):
        console.print(f"Note: {x['stored_note']}.", markup=False)
    console.print(f"Each weight is in log-odds ({LOG_ODDS}). All {x['n_terms']} terms add up to "
                  f"{x['terms_total']:.3f}: the log-odds margin of {x['suggested']} over {x['runner_up']} is "
                  f"{x['log_odds_gap']:.3f}. Confidences are calibrated with temperature {x['temperature']:.2f}.",
                  markup=False)
    for title, key in ((f"For {x['suggested']}", "for"), (f"For {x['runner_up']}", "against")):
        t = Table(title=title, title_justify="left")
        t.add_column("evidence")
        t.add_column("weight", justify="right")
        t.add_column("")
        for e in x[key]:
            bar = "█" * min(30, int(round(abs(e["weight"]) * 4)))
            name = e["feature"] + (f" ×{e['count']:.3g}" if e["kind"] == "token" and e["count"] != 1 else "")
            t.add_row(name, f"{e['weight']:+.3f}", f"[{'green' if e['weight'] > 0 else 'red'}]{bar}[/]")
        console.print(t)
    if x["unseen_words"]:
        console.print("Words the model has never seen (no evidence either way): " + ", ".join(x["unseen_words"][:20]))


def render_models(versions: Sequence[Any], console: Console = out) -> None:
    t = Table(title="Model versions (* active)", title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("", "ver.", "kind", "created", "text model", "accuracy", "auto-\nrouted"):
        t.add_column(col, no_wrap=True)
    t.add_column("note", ratio=1, min_width=18, overflow="fold")
    for v in versions:
        card = v.scorecard or {}
        spec = v.config.get("spec", {})
        model = f"{spec.get('text_model', '?')} {spec.get('alpha_text', '?'):g}" if isinstance(
            spec.get("alpha_text"), int | float) else str(spec.get("text_model", "?"))
        t.add_row("*" if v.active else "", str(v.version), v.kind, v.created_at[5:16].replace("T", " "), model, pct(card.get("accuracy")),
                  pct(card.get("coverage")), v.note)
    console.print(t)


def split_line(sp: dict[str, Any]) -> str:
    """How the scorecard's items were chosen, in words; never "None to None" when times are missing."""
    kind = sp.get("kind")
    if kind == "random":
        return (f"No arrival times: trained on a random {count(sp['train_items'])} items, scored on the "
                f"other {count(sp['test_items'])} (stratified by queue, seed {sp.get('seed', 0)}).")
    base = f"Trained on the {count(sp['train_items'])} oldest items, scored on the {count(sp['test_items'])} newest"
    if sp.get("test_from") and sp.get("test_to"):
        return f"{base} ({_when(sp['test_from'])} to {_when(sp['test_to'])})."
    return f"{base} (by id order: these items have no arrival times)."


def _when(stamp: object) -> str:
    """A stored time as people write it: 2026-07-29 09:56, not 2026-07-29T09:56:23."""
    return str(stamp).replace("T", " ")[:16]


def render_calibration(c: dict[str, Any], console: Console = out) -> None:
    """The reliability table of the routing confidences and the calibration error at each step."""
    iso = c.get("isotonic") or {}
    where = c.get("measured_on", "out-of-fold scores of the training items, which calibration was fitted on")
    t = Table(title="Reliability of the routing confidence", caption=f"on {where}", title_justify="left")
    for col in ("confidence", "items", "mean confidence", "accuracy"):
        t.add_column(col, justify="right")
    for b in c.get("reliability", []):
        t.add_row(f"{b['lo']:.1f}-{b['hi']:.1f}", str(b["n"]), f"{b['mean_confidence']:.3f}", f"{b['accuracy']:.3f}")
    console.print(t)
    steps = f"raw {c['ece_before']:.3f}, after temperature {c['ece_temperature']:.3f}"
    steps += f", after isotonic {c['ece_after']:.3f}" if iso.get("used") else ""
    console.print(f"Calibration: temperature {c['temperature']:.2f}; expected calibration error {steps}.")
    if not iso.get("used"):
        console.print(f"Isotonic calibration not used: {iso.get('why', 'not fitted')}.", markup=False)
    hold = c.get("holdout")
    if hold:
        steps = f"raw {hold['ece_before']:.3f}, after temperature {hold['ece_temperature']:.3f}"
        steps += f", after isotonic {hold['ece_after']:.3f}" if iso.get("used") else ""
        console.print(f"On the scored items (not used for calibration): {steps}.")


def render_overview(data: dict[str, Any], console: Console = out) -> None:
    """The workspace at a glance, in sentences and one small table (the JSON form has every field)."""
    def say(text: str) -> None:
        console.print(text, markup=False)

    say(f"Workspace {data['workspace']}: {count(data['items'])} items, {count(data['labelled'])} of them labelled.")
    version = data.get("active_version")
    if version is None:
        say("No model is active yet: run `triage train`.")
    else:
        since = data.get("corrections_since_training") or 0
        say(f"Active model version {version} ({data.get('text_model') or 'unknown'} text model); "
            f"{count(since)} correction{'' if since == 1 else 's'} learned since it was trained.")
    if data.get("model_problem"):
        say(f"Problem: {data['model_problem']}")
    if data.get("lost_versions"):
        say("Versions whose model files are gone (they cannot be activated): "
            + ", ".join(str(v) for v in data["lost_versions"]) + ".")
    card = data.get("scorecard")
    if card:
        say(f"On its {count(card.get('n'))} test items: top queue right for {pct(card.get('accuracy'))}; "
            f"{MACRO_F1} {_num(card.get('macro_f1'))}; auto-routed {pct(card.get('coverage'))} at precision "
            f"{pct(card.get('auto_precision'))}; held for review {pct(card.get('held_share'))}.")
    run = data.get("latest_batch") or {}
    per_run = run.get("per_queue") or {}
    t = Table(title="Queues", title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
    t.add_column("queue", no_wrap=True)
    t.add_column("labelled items", justify="right")
    t.add_column("in the latest run", justify="right")
    t.add_column("")
    never = set(data.get("never_auto") or [])
    for q in sorted(set(data.get("queues") or {}) | set(per_run)):
        t.add_row(q, count((data.get("queues") or {}).get(q, 0)), count(per_run[q]) if q in per_run else "-",
                  "never auto-routed" if q in never else "")
    console.print(t)
    if run:
        say(f"Latest routing run {run['id']} ({run.get('source')}): {count(run.get('routed'))} of "
            f"{count(run.get('n'))} auto-routed, {count(run.get('held'))} held for review; unseen-word share "
            f"{pct(run.get('unseen_word_share'))}, queue-mix PSI {_num(run.get('queue_mix_psi'))}"
            f"{' (drift flagged)' if run.get('drift_flag') else ''}.")
    else:
        say("No routing run yet: `triage route FILE` decides a file of new items.")


def _num(x: float | None) -> str:
    return "-" if x is None else f"{x:.3f}"
