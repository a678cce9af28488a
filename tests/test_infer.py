"""Inferring a config from a file: expected roles on an invented ticket file, and a clean TOML round trip."""

from __future__ import annotations

import csv
import json
import random
import tomllib
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from triage.config import config_from_dict, dump_config
from triage.core.schema import FieldRole
from triage.infer import infer_config
from triage.ingest import IngestError, read_items

QUEUES = ["billing", "installation", "hardware_fault", "Safety Hazard"]
SUBJECTS = {
    "billing": ["Charged twice", "Refund for plan", "Invoice wrong", "Direct debit failed"],
    "installation": ["Book installer", "Move my visit", "Installer did not come", "Site survey date"],
    "hardware_fault": ["Inverter beeping", "Battery not charging", "Error code E42", "Panel output low"],
    "Safety Hazard": ["Smell of burning", "Battery swelling", "Smoke from unit", "Sparks near meter"],
}


def ticket_rows(n: int = 120, seed: int = 7) -> list[dict[str, str]]:
    """An invented support file for the imaginary Voltwren Home Energy."""
    rnd = random.Random(seed)
    rows = []
    for i in range(n):
        q = QUEUES[i % len(QUEUES)]
        subject = f"{rnd.choice(SUBJECTS[q])} #{rnd.randint(1, 9999)}"
        body = (
            f"Hello, this is about my Voltwren system at home. {subject.lower()} again since last week, "
            f"please advise what to do next. Ref {rnd.randint(1000, 9999)}."
        )
        rows.append(
            {
                "ticket_id": f"VW-{1000 + i}",
                "received_at": f"2024-{1 + i % 12:02d}-{1 + i % 28:02d}T{i % 24:02d}:15:00",
                "subject": subject,
                "body": body,
                "channel": rnd.choice(["email", "phone", "chat", "web form"]),
                "tenure_days": str(rnd.randint(0, 2000)),
                "order_code": f"OX{rnd.randint(0, 10**9):09d}{i}",
                "notes": "",
                "queue": q,
            }
        )
    return rows


def write_csv(path: Path, rows: list[dict]) -> Path:
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    return path


def roles(cfg) -> dict[str, tuple[str, float]]:
    return {f.name: (f.role.value, f.weight) for f in cfg.schema.fields}


def test_roles_on_an_invented_ticket_file(tmp_path: Path) -> None:
    cfg, why = infer_config(write_csv(tmp_path / "tickets.csv", ticket_rows()))
    s = cfg.schema
    assert (s.id, s.label, s.time) == ("ticket_id", "queue", "received_at")
    assert roles(cfg) == {
        "subject": ("text", 2.0),
        "body": ("text", 1.0),
        "channel": ("category", 1.0),
        "tenure_days": ("number", 1.0),
    }
    assert s.field("tenure_days").role is FieldRole.NUMBER
    for col in [
        "ticket_id",
        "received_at",
        "subject",
        "body",
        "channel",
        "tenure_days",
        "order_code",
        "notes",
        "queue",
    ]:
        assert why[col], col
    assert why["order_code"].startswith("left out: every value is distinct")
    assert why["notes"] == "left out: empty in the sample"
    assert why["queue"].startswith("the label")
    assert why["body"].startswith("long text") and why["subject"].startswith("short text")
    # the safety queue is never auto-routed
    assert set(cfg.queues) == {"Safety Hazard"}
    assert cfg.queues["Safety Hazard"].never_auto and cfg.queues["Safety Hazard"].target_precision == 0.99
    assert "never auto-routed" in why["queues.Safety Hazard"]


def test_config_round_trips_through_toml(tmp_path: Path) -> None:
    cfg, why = infer_config(write_csv(tmp_path / "tickets.csv", ticket_rows()))
    text = dump_config(cfg, why)
    assert f"# {why['body']}" in text
    back = config_from_dict(tomllib.loads(text))
    assert back == cfg
    # and the inferred config reads its own file without rejects
    res = read_items(tmp_path / "tickets.csv", back.schema)
    assert len(res.records) == 120 and res.rejects == []


def test_same_roles_from_jsonl_and_parquet(tmp_path: Path) -> None:
    rows = ticket_rows()
    typed = [dict(r, tenure_days=int(r["tenure_days"]), notes=None) for r in rows]
    (tmp_path / "t.jsonl").write_text("".join(json.dumps(r) + "\n" for r in typed), encoding="utf-8")
    pq.write_table(pa.Table.from_pylist(typed), tmp_path / "t.parquet")
    want, _ = infer_config(write_csv(tmp_path / "t.csv", rows))
    for name in ("t.jsonl", "t.parquet"):
        cfg, _ = infer_config(tmp_path / name)
        assert cfg.schema == want.schema, name


def test_given_label_and_missing_label(tmp_path: Path) -> None:
    rows = [{("team_name" if k == "queue" else k): v for k, v in r.items()} for r in ticket_rows()]
    p = write_csv(tmp_path / "t.csv", rows)
    cfg, why = infer_config(p)
    assert cfg.schema.label == "team_name" and "contains 'team'" in why["team_name"]
    renamed = [{("destination" if k == "team_name" else k): v for k, v in r.items()} for r in rows]
    q = write_csv(tmp_path / "u.csv", renamed)
    with pytest.raises(IngestError, match=r"u\.csv: no column looks like the queue.*--label"):
        infer_config(q)
    cfg, why = infer_config(q, label="destination")
    assert cfg.schema.label == "destination" and why["destination"] == "the label (queue), as given"
    with pytest.raises(IngestError, match=r"u\.csv: no column 'nope' for the label"):
        infer_config(q, label="nope")


def test_id_falls_back_to_first_unique_column(tmp_path: Path) -> None:
    rows = [
        {("ref" if k == "ticket_id" else k): v for k, v in r.items() if k != "order_code"}
        for r in ticket_rows()
    ]
    cfg, why = infer_config(write_csv(tmp_path / "t.csv", rows))
    assert cfg.schema.id == "ref"
    assert why["ref"] == "the item id: the first column with a distinct value on every row"


def test_no_unique_column_is_an_error(tmp_path: Path) -> None:
    rows = [{"queue": "a", "subject": "same words here"} for _ in range(5)]
    with pytest.raises(IngestError, match=r"t\.csv: no column has a distinct, non-empty value on every row"):
        infer_config(write_csv(tmp_path / "t.csv", rows))


def test_high_cardinality_short_values_are_left_out(tmp_path: Path) -> None:
    rows = ticket_rows(400)
    rnd = random.Random(3)
    for r in rows:
        r["postcode"] = f"P{rnd.randint(0, 299)} {rnd.choice('ABCDEFGHJKLMNPQRSTUVWXYZ')}"
        r["plan"] = "standard"
    cfg, why = infer_config(write_csv(tmp_path / "t.csv", rows))
    names = {f.name for f in cfg.schema.fields}
    assert "plan" not in names and why["plan"] == "left out: one value only in the sample"
    # > 50% distinct and > 30 distinct: a short text by the rule, not a category
    assert roles(cfg)["postcode"] == ("text", 2.0)


def test_number_with_some_text_notes_the_rejects(tmp_path: Path) -> None:
    rows = ticket_rows(100)
    rows[5]["tenure_days"] = "unknown"
    cfg, why = infer_config(write_csv(tmp_path / "t.csv", rows))
    assert roles(cfg)["tenure_days"] == ("number", 1.0)
    assert "99% of non-empty values are numbers" in why["tenure_days"] and "rejected" in why["tenure_days"]


def test_sample_rows_limits_the_read(tmp_path: Path) -> None:
    rows = ticket_rows(200)
    for r in rows[50:]:
        r["channel"] = "x" * 80 + r["ticket_id"]  # would be long text if the whole file were read
    cfg, _ = infer_config(write_csv(tmp_path / "t.csv", rows), sample_rows=50)
    assert roles(cfg)["channel"] == ("category", 1.0)


# ------------------------------------------------------------------------------------- watch words, times
def test_init_proposes_watch_words_typical_of_the_safety_queue(tmp_path: Path) -> None:
    from triage.infer import propose_watch_words

    rows = ticket_rows(240)
    cfg, why = infer_config(write_csv(tmp_path / "tickets.csv", rows))
    note = why["queues.Safety Hazard.watch_words"]
    assert note.startswith("suggested watch_words = [")
    texts = [f"{r['subject']} {r['body']}" for r in rows]
    labels = [r["queue"] for r in rows]
    got = propose_watch_words(texts, labels, "Safety Hazard")
    words = [w for w, _a, _b in got]
    # the invented safety subjects are "Smell of burning", "Battery swelling", "Smoke from unit", "Sparks ..."
    assert {"smel", "burn", "smok", "spar"} <= set(words)
    assert "batt" not in words  # "Battery not charging" is a hardware fault too: not typical of safety
    # Reference: statsmodels' 2x2 table gives the same log odds ratio and standard error (0.5 added to each
    # cell), and the list is ordered by that ratio
    from statsmodels.stats.contingency_tables import Table2x2

    n_in = labels.count("Safety Hazard")
    lors = []
    for _w, a, b in got:
        t = Table2x2(np.array([[a, n_in - a], [b, len(rows) - n_in - b]], dtype=float) + 0.5)
        assert t.log_oddsratio / t.log_oddsratio_se >= 3.0
        lors.append(t.log_oddsratio)
    assert lors == sorted(lors, reverse=True)
    # written as a commented-out suggestion: not active until a person uncomments it
    text = dump_config(cfg, why)
    assert "# watch_words = [" in text and cfg.queues["Safety Hazard"].watch_words == ()
    assert config_from_dict(tomllib.loads(text)).queues["Safety Hazard"].watch_words == ()


def test_init_says_plainly_when_no_watch_word_stands_out(tmp_path: Path) -> None:
    rows = ticket_rows(120)
    for r in rows:  # every queue's items now read alike
        r["subject"] = "Question about my account"
        r["body"] = "Hello, please call me back about my account. Thanks."
    cfg, why = infer_config(write_csv(tmp_path / "tickets.csv", rows))
    assert why["queues.Safety Hazard.watch_words"].startswith("no watch words proposed")
    assert "only the model guards this queue" in why["queues.Safety Hazard.watch_words"]


def test_a_mostly_parseable_time_column_stays_the_time_column(tmp_path: Path) -> None:
    rows = ticket_rows(200)
    for i, r in enumerate(rows):
        r["when"] = r.pop("received_at")
        if i % 10 == 3:
            r["when"] = "yesterday"  # 10% not dates
    cfg, why = infer_config(write_csv(tmp_path / "tickets.csv", rows))
    assert cfg.schema.time == "when"
    assert "20 of 200 sampled values do not parse" in why["when"]
    res = read_items(tmp_path / "tickets.csv", cfg.schema)
    assert len(res.records) == 200 and len(res.bad_times) == 20
    assert sum(r.arrived_at is None for r in res.records) == 20


def test_short_code_like_names_are_counted_as_character_grams(tmp_path: Path) -> None:
    """Package-like names (all distinct, no spaces, mostly letters) become a grams text field, with the reason."""
    rows = ticket_rows(200)
    stems = ["python3", "libghc", "golang-github", "node", "fonts", "r-cran"]
    for i, r in enumerate(rows):
        r["package"] = f"{stems[i % len(stems)]}-{''.join(chr(97 + (i * 7 + k) % 26) for k in range(5))}{i}"
    cfg, why = infer_config(write_csv(tmp_path / "t.csv", rows))
    f = cfg.schema.field("package")
    assert (f.role, f.pieces) == (FieldRole.TEXT, "grams")
    assert "character 3-5-grams" in why["package"]
    assert cfg.schema.field("subject").pieces == "words"
    assert "order_code" not in {x.name for x in cfg.schema.fields}  # a numeric code stays left out
