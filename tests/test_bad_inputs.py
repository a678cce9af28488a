"""A table of bad inputs (files, configs, command lines), each run through the real command on a real workspace.

Every case asserts the message's key words and the exit code, and that every good row (and every item stored
before) is still there afterwards. The rows are the invented Voltwren demo tickets; the expected figures are
the rows each case writes, never model output.
"""

from __future__ import annotations

import csv
import io
import json
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest

from tests.helpers import ROOT, build_demo_workspace
from triage.cli import main
from triage.store import Store, StoreError

BASE_ROWS = 400  # items in the trained workspace every case copies
NEW = slice(BASE_ROWS, BASE_ROWS + 20)  # the good rows each import case writes


def demo_rows() -> list[dict[str, str]]:
    with (ROOT / "demo_corpus" / "voltwren_tickets.csv").open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


ROWS = demo_rows()
COLUMNS = list(ROWS[0])


def csv_text(rows: list[dict[str, str]], columns: list[str] | None = None) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=columns or COLUMNS, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    w.writerows(rows)
    return buf.getvalue()


@pytest.fixture(scope="module")
def base(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("bad") / "ws", rows=BASE_ROWS)


@pytest.fixture()
def ws(base: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "ws"
    shutil.copytree(base, dest)
    return dest


def run(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> tuple[int, str, str]:
    capsys.readouterr()
    rc = main([str(a) for a in argv])
    got = capsys.readouterr()
    return rc, got.out, got.err


def stored(ws: Path) -> dict[str, tuple[str | None, dict]]:
    with Store.open(ws / "triage.db") as st:
        return {r.item_id: (r.label, r.fields) for r in st.get_items_if_any([row["ticket_id"] for row in ROWS])}


def assert_base_kept(ws: Path) -> None:
    """Every item stored before the bad input is still stored, with its label."""
    now = stored(ws)
    for row in ROWS[:BASE_ROWS]:
        assert now[row["ticket_id"]][0] == row["queue"], row["ticket_id"]


# ---------------------------------------------------------------------------------------------- files
@dataclass
class FileCase:
    """A file to import: its text, the exit code, key words of the message, and the rows that must import."""

    id: str
    build: Callable[[], tuple[str, list[dict[str, str]]]]  # -> (file text, good rows that must be stored)
    rc: int
    words: tuple[str, ...]
    suffix: str = ".csv"
    check: Callable[[dict[str, tuple[str | None, dict]]], None] | None = None
    absent: tuple[str, ...] = ()  # ids that must not be stored


def good() -> list[dict[str, str]]:
    return [dict(r) for r in ROWS[NEW]]


def with_bad(bad: dict[str, str], at: int = 5) -> Callable[[], tuple[str, list[dict[str, str]]]]:
    """The good rows with one bad row put in at `at` (a new id)."""
    def build() -> tuple[str, list[dict[str, str]]]:
        rows = good()
        bad_row = {**ROWS[BASE_ROWS + 100], **bad}
        return csv_text(rows[:at] + [bad_row] + rows[at:]), rows
    return build


def raw_line(line_of: Callable[[dict[str, str]], str], at: int = 5) -> Callable[[], tuple[str, list]]:
    """The good rows with one hand-written line put in at `at`."""
    def build() -> tuple[str, list[dict[str, str]]]:
        rows = good()
        lines = csv_text(rows).splitlines(keepends=True)
        lines.insert(at + 1, line_of(ROWS[BASE_ROWS + 100]) + "\n")
        return "".join(lines), rows
    return build


def _plain(row: dict[str, str]) -> list[str]:
    return [row[c].replace(",", ";").replace('"', "") for c in COLUMNS]


def stray_quote() -> tuple[str, list[dict[str, str]]]:
    # a quote opens the subject of one row and is never closed on that line: a lenient parser reads the
    # next rows into that subject; the four rows after it have no quotes, the fifth opens a quoted body
    rows = good()
    lines = [",".join(COLUMNS)]
    for i, r in enumerate(rows):
        cells = _plain(r)
        if i == 5:
            cells[COLUMNS.index("subject")] = '"' + cells[COLUMNS.index("subject")]
        if i == 10:
            cells[COLUMNS.index("body")] = '"' + cells[COLUMNS.index("body")] + '"'
        lines.append(",".join(cells))
    return "\n".join(lines) + "\n", rows[:5] + rows[6:]


def stray_quote_closed_later() -> tuple[str, list[dict[str, str]]]:
    # the stray quote is "closed" by a quote inside a later cell followed by a comma: no parse error at
    # all, one long record that swallowed whole rows (the case that used to import silently)
    rows = good()
    lines = [",".join(COLUMNS)]
    for i, r in enumerate(rows):
        cells = _plain(r)
        if i == 5:
            cells[COLUMNS.index("body")] = '"' + cells[COLUMNS.index("body")]
        if i == 9:
            cells[COLUMNS.index("subject")] = cells[COLUMNS.index("subject")] + ' 5"'
        lines.append(",".join(cells))
    return "\n".join(lines) + "\n", rows[:5] + rows[6:]


def unclosed_quote_at_end() -> tuple[str, list[dict[str, str]]]:
    rows = good()
    lines = [",".join(COLUMNS)] + [",".join(_plain(r)) for r in rows]
    lines[-1] = lines[-1].replace(",", ',"', 1)  # the last row's second cell opens a quote that never closes
    return "\n".join(lines) + "\n", rows[:-1]


def only_bad() -> tuple[str, list[dict[str, str]]]:
    rows = [{**r, "queue": ""} for r in good()]
    return csv_text(rows), []


def duplicate_columns() -> tuple[str, list[dict[str, str]]]:
    text = csv_text(good()).replace("subject", "body", 1)
    return text, []


def look_alike(names: list[str]) -> Callable[[], tuple[str, list[dict[str, str]]]]:
    def build() -> tuple[str, list[dict[str, str]]]:
        rows = good()
        for i, r in enumerate(rows):
            r["queue"] = names[i % len(names)]
        return csv_text(rows), rows
    return build


def jsonl(lines: list[str]) -> Callable[[], tuple[str, list[dict[str, str]]]]:
    def build() -> tuple[str, list[dict[str, str]]]:
        rows = good()
        text = [json.dumps(r) for r in rows]
        return "\n".join(text[:5] + lines + text[5:]) + "\n", rows
    return build


def number_is_missing(value: str) -> FileCase:
    def check(now: dict) -> None:
        assert now[ROWS[BASE_ROWS + 100]["ticket_id"]][1]["tenure_days"] is None
    return FileCase(f"number-missing-{value or 'empty'}", with_bad({"tenure_days": value}), 0, ("new items",),
                    check=check)


BAD_ID = ROWS[BASE_ROWS + 100]["ticket_id"]

FILE_CASES = [
    FileCase("stray-quote", stray_quote, 0, ("line 7", "quoting is broken", "1 rejected")),
    FileCase("stray-quote-swallows-rows", stray_quote_closed_later, 0, ("line 7", "stray quote", "1 rejected")),
    FileCase("unclosed-quote-at-end", unclosed_quote_at_end, 0, ("line 21", "quoting is broken")),
    FileCase("too-many-fields", raw_line(lambda r: ",".join([*_plain(r), "extra"])), 0,
             ("row 6", "expected 11 fields, found 12"), absent=(BAD_ID,)),
    FileCase("too-few-fields", raw_line(lambda r: ",".join(_plain(r)[:5])), 0,
             ("row 6", "expected 11 fields, found 5"), absent=(BAD_ID,)),
    number_is_missing(""),
    number_is_missing("n/a"),
    number_is_missing("NA"),
    number_is_missing("-"),
    number_is_missing("NaN"),
    FileCase("thousands-undeclared", with_bad({"tenure_days": "1,200"}), 0,
             ("'1,200' is not a number", "thousands"), absent=(BAD_ID,)),
    FileCase("number-is-text", with_bad({"tenure_days": "three years"}), 0,
             ("row 6", "tenure_days", "'three years' is not a number"), absent=(BAD_ID,)),
    FileCase("number-infinite", with_bad({"open_orders": "inf"}), 0, ("not a finite number",), absent=(BAD_ID,)),
    FileCase("all-rows-rejected", only_bad, 2, ("nothing imported", "all 20 rows rejected")),
    FileCase("duplicate-columns", duplicate_columns, 2, ("column 'body' appears 2 times", "columns 9, 10")),
    FileCase("label-with-nul", with_bad({"queue": "billing\x00"}), 0, ("control character", "U+0000"),
             absent=(BAD_ID,)),
    FileCase("label-with-tab", with_bad({"queue": "bill\ting"}), 0, ("control character", "U+0009"),
             absent=(BAD_ID,)),
    FileCase("labels-differ-by-case", look_alike(["Network", "NETWORK", "network"]), 0,
             ("differ only by case", "'network'", "'NETWORK'", "[labels]")),
    FileCase("labels-differ-by-number-format", look_alike(["1", "1.0", "billing"]), 0,
             ("number format", "'1'", "'1.0'")),
    FileCase("time-not-a-date", with_bad({"received_at": "yesterday"}), 0,
             ("'yesterday'", "not a date and time", "never scored as the newest")),
    FileCase("duplicate-id", with_bad({"ticket_id": ROWS[BASE_ROWS]["ticket_id"], "queue": "billing"}), 0,
             ("duplicate of row 1",)),
    FileCase("empty-id", with_bad({"ticket_id": ""}), 0, ("the id is empty",)),
    FileCase("empty-label", with_bad({"queue": ""}), 0, ("the label (queue) is empty",), absent=(BAD_ID,)),
    FileCase("jsonl-repeated-key", jsonl(['{"ticket_id": "X1", "queue": "billing", "queue": "safety"}']), 0,
             ("row 6", "'queue' appears twice"), suffix=".jsonl", absent=("X1",)),
    FileCase("jsonl-not-json", jsonl(['{"ticket_id": "X2", ']), 0, ("row 6", "not valid JSON"), suffix=".jsonl",
             absent=("X2",)),
    FileCase("not-utf8", lambda: (csv_text(good()).replace("Hello", "H\udce9llo"), []), 2,
             ("not UTF-8", "byte 0xe9")),
    FileCase("header-only", lambda: (",".join(COLUMNS) + "\n", []), 2, ("header but no rows",)),
    FileCase("empty-file", lambda: ("", []), 2, ("the file is empty",)),
    FileCase("no-label-column", lambda: (csv_text(good(), [c for c in COLUMNS if c != "queue"]), []), 2,
             ("no label column 'queue'",)),
]


@pytest.mark.parametrize("case", FILE_CASES, ids=[c.id for c in FILE_CASES])
def test_bad_file(case: FileCase, ws: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text, must = case.build()
    src = tmp_path / f"in{case.suffix}"
    src.write_bytes(text.encode("utf-8", errors="surrogateescape"))
    rc, out, err = run(capsys, "import", src, "-w", ws)
    said = out + err
    assert rc == case.rc, said
    for w in case.words:
        assert w in said, (w, said)
    assert "Traceback" not in said
    now = stored(ws)
    for row in must:
        assert now[row["ticket_id"]][0] == row["queue"].strip(), row["ticket_id"]
    for item_id in case.absent:
        assert item_id not in now
    assert_base_kept(ws)
    if case.check:
        case.check(now)
    rejects = list(ws.glob("rejects/*.rejects*.csv")) + list(tmp_path.glob("*.rejects*.csv"))
    for p in rejects:
        assert p.stat().st_mode & 0o077 == 0, f"{p} is readable by others"


def test_a_stray_quote_rejects_only_its_own_row_and_keeps_the_swallowed_ones(ws: Path, tmp_path: Path,
                                                                             capsys: pytest.CaptureFixture) -> None:
    text, must = stray_quote_closed_later()
    src = tmp_path / "quote.csv"
    src.write_text(text, encoding="utf-8")
    rc, out, _err = run(capsys, "import", src, "-w", ws, "--json")
    data = json.loads(out)
    assert rc == 0 and data["rejected"] == 1 and data["added"] == len(must) == 19
    with Path(data["rejects_file"]).open(newline="", encoding="utf-8") as fh:
        (rej,) = list(csv.DictReader(fh))
    assert rej["line"] == "7" and json.loads(rej["record"])["line"].startswith(ROWS[NEW][5]["ticket_id"])


def test_thousands_declared_in_the_config_reads_1200(ws: Path, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    cfg = ws / "triage.toml"
    cfg.write_text(cfg.read_text().replace("[fields.tenure_days]\nrole = \"number\"",
                                           "[fields.tenure_days]\nrole = \"number\"\nthousands = \",\""))
    text, _ = with_bad({"tenure_days": "1,200"})()
    src = tmp_path / "k.csv"
    src.write_text(text, encoding="utf-8")
    rc, _out, err = run(capsys, "import", src, "-w", ws)
    assert rc == 0, err
    assert stored(ws)[BAD_ID][1]["tenure_days"] == 1200.0


def test_labels_table_maps_look_alike_names(ws: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cfg = ws / "triage.toml"
    cfg.write_text(cfg.read_text() + '\n[labels]\n"BILLING" = "billing"\n"Billing " = "billing"\n')
    rows = good()
    rows[0]["queue"], rows[1]["queue"] = "BILLING", "Billing "
    src = tmp_path / "m.csv"
    src.write_text(csv_text(rows), encoding="utf-8")
    rc, _out, err = run(capsys, "import", src, "-w", ws)
    assert rc == 0, err
    now = stored(ws)
    assert now[rows[0]["ticket_id"]][0] == "billing" and now[rows[1]["ticket_id"]][0] == "billing"
    assert "differ only" not in err


# ---------------------------------------------------------------------------------------------- configs
CONFIG_CASES = [
    # (id, old text, new text, key words)
    ("never-auto-hyphen", "never_auto = true", "never-auto = true", ("'never-auto'", "did you mean 'never_auto'")),
    ("never-autoo", "never_auto = true", "never_autoo = true", ("'never_autoo'", "did you mean 'never_auto'")),
    ("watch-word", "watch_words = [", "watch_word = [", ("'watch_word'", "did you mean 'watch_words'")),
    ("section-modle", "[model]", "[modle]", ("unknown section [modle]", "did you mean [model]")),
    ("data-lable", 'label = "queue"', 'lable = "queue"', ("[data] unknown key 'lable'", "did you mean 'label'")),
    ("field-wieght", "weight = 2.0", "wieght = 2.0", ("[fields.subject] unknown key 'wieght'", "'weight'")),
    ("routing-typo", "target_precision = 0.95", "target_precison = 0.95", ("'target_precison'", "'target_precision'")),
    ("queue-cutof", "never_auto = true", "never_auto = true\ncutof = 0.5", ("'cutof'", "did you mean 'cutoff'")),
    ("model-typo", "bigrams = false", "bigram = false", ("[model] unknown key 'bigram'", "'bigrams'")),
    ("thousands-on-category", '[fields.channel]\nrole = "category"',
     '[fields.channel]\nrole = "category"\nthousands = ","', ("thousands", "number fields only")),
    ("thousands-unknown", '[fields.tenure_days]\nrole = "number"', '[fields.tenure_days]\nrole = "number"\n'
     'thousands = "#"', ("thousands", "use one of")),
    ("labels-chained", "[routing]", '[labels]\na = "b"\nb = "c"\n\n[routing]', ("'b' is both a target",)),
    ("desk-reviwer", "[routing]\ntarget_precision = 0.95", '[routing]\ntarget_precision = 0.95\n\n[desk]\n'
     'reviwer = "Dana"', ("[desk] unknown key 'reviwer'", "did you mean 'reviewer'")),
    ("desk-empty-reviewer", "[routing]\ntarget_precision = 0.95", '[routing]\ntarget_precision = 0.95\n\n'
     '[desk]\nreviewer = "  "', ("[desk.reviewer] must be a name",)),
]


@pytest.mark.parametrize("case", CONFIG_CASES, ids=[c[0] for c in CONFIG_CASES])
def test_bad_config(case: tuple[str, str, str, tuple[str, ...]], ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _id, old, new, words = case
    cfg = ws / "triage.toml"
    text = cfg.read_text(encoding="utf-8")
    assert old in text
    cfg.write_text(text.replace(old, new, 1), encoding="utf-8")
    line = next(i for i, ln in enumerate(cfg.read_text().splitlines(), start=1)
                if any(part and part in ln for part in new.splitlines()[-1:]))
    with Store.open(ws / "triage.db") as st:
        before = st.active_model().version
    rc, _out, err = run(capsys, "models", "-w", ws)
    assert rc == 2, err
    for w in words:
        assert w in err, (w, err)
    if "unknown" in err:
        assert f"line {line}:" in err, err
    assert "Traceback" not in err
    with Store.open(ws / "triage.db") as st:
        assert st.active_model().version == before
    assert_base_kept(ws)


# ---------------------------------------------------------------------------------------------- command lines
def test_options_before_the_subcommand_are_honoured(ws: Path, tmp_path: Path,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    elsewhere = tmp_path / "elsewhere"
    rc, _out, err = run(capsys, "-w", elsewhere, "cutoff", "billing", "0.9")
    assert rc == 2 and str(elsewhere) in err  # the workspace given before the command, not the current folder
    rc, out, err = run(capsys, "-w", ws, "--json", "models")
    assert rc == 0, err
    assert [v["version"] for v in json.loads(out)] == [1]
    with pytest.raises(Exception, match="no config here"):
        main(["--debug", "-w", str(elsewhere), "train"])  # --debug before the command shows the traceback
    assert_base_kept(ws)


CLI_CASES = [
    (("cutoff", "billing", "1.5"), ("between 0 and 1",)),
    (("cutoff", "billing", "high"), ("give a number between 0 and 1",)),
    (("cutoff", "nosuchqueue", "0.5"), ("unknown queue", "nosuchqueue")),
    (("cutoff", "safety", "0.5"), ("never-auto queue",)),
    (("explain", "NO-SUCH-ID"), ("no item with id 'NO-SUCH-ID'",)),
    (("models", "activate", "999"), ("999",)),
    (("models", "activate"), ("say which version",)),
    (("evaluate", "--split", "kfold", "--folds", "1"), ("at least 2 folds",)),
    (("import", "missing.csv"), ("file not found",)),
    (("import", "notes.txt"), ("unknown file type",)),
    (("correct", ROWS[0]["ticket_id"], "biling"), ("'biling' is not a known queue", "did you mean 'billing'",
                                                   "--new-queue")),
    (("correct", ROWS[0]["ticket_id"], "netwrok"), ("not a known queue", "--new-queue")),
    (("correct", ROWS[0]["ticket_id"], "not a queue!", "--new-queue"), ("use letters, digits",)),
    (("correct", ROWS[0]["ticket_id"], ROWS[0]["queue"]), (f"{ROWS[0]['ticket_id']} is already in "
                                                           f"{ROWS[0]['queue']}", "nothing recorded")),
]


@pytest.mark.parametrize("argv,words", CLI_CASES, ids=["-".join(c[0]) for c in CLI_CASES])
def test_bad_command_line(argv: tuple[str, ...], words: tuple[str, ...], ws: Path,
                          capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(ws)
    with Store.open(ws / "triage.db") as st:
        before = (st.active_model().version, st.count_items())
    rc, _out, err = run(capsys, *argv, "-w", ws)
    assert rc == 2, err
    for w in words:
        assert w in err, (w, err)
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    with Store.open(ws / "triage.db") as st:
        assert (st.active_model().version, st.count_items()) == before
    assert_base_kept(ws)


def _count_cases() -> int:
    return len(FILE_CASES) + len(CONFIG_CASES) + len(CLI_CASES)


def test_the_table_holds_at_least_40_bad_inputs() -> None:
    assert _count_cases() >= 40





# ---------------------------------------------------------------------------------------------- routing
def incoming() -> list[dict[str, str]]:
    rows = [dict(r) for r in ROWS[BASE_ROWS + 200: BASE_ROWS + 210]]
    for r in rows:
        r.pop("queue")
    return rows


def route_lines(out: str) -> tuple[list[dict], list[dict]]:
    lines = [json.loads(x) for x in out.splitlines() if x.strip()]
    return [x for x in lines if "error" not in x], [x for x in lines if "error" in x]


def _dup_in_file() -> tuple[str, int, str]:
    rows = incoming()
    rows[6]["ticket_id"] = rows[2]["ticket_id"]
    return csv_text(rows, [c for c in COLUMNS if c != "queue"]), 7, "duplicate of row 3"


def _ragged_in_file() -> tuple[str, int, str]:
    rows = incoming()
    text = csv_text(rows, [c for c in COLUMNS if c != "queue"]).splitlines()
    text[4] += ",extra"
    return "\n".join(text) + "\n", 4, "expected 10 fields, found 11"


def _number_in_file() -> tuple[str, int, str]:
    rows = incoming()
    rows[0]["open_orders"] = "several"
    return csv_text(rows, [c for c in COLUMNS if c != "queue"]), 1, "'several' is not a number"


def _reopened() -> tuple[str, int, str]:
    # an id already stored (a base item) with other field values: a reopened ticket
    rows = incoming()
    rows[3] = {**{k: v for k, v in ROWS[7].items() if k != "queue"}, "body": "It happened again this week."}
    return csv_text(rows, [c for c in COLUMNS if c != "queue"]), 4, "already stored with other field values"


ROUTE_CASES = [("duplicate-id-in-one-batch", _dup_in_file), ("ragged-row", _ragged_in_file),
               ("number-is-text", _number_in_file), ("reopened-ticket", _reopened)]


@pytest.mark.parametrize("case", ROUTE_CASES, ids=[c[0] for c in ROUTE_CASES])
def test_bad_route_file(case: tuple[str, Callable[[], tuple[str, int, str]]], ws: Path, tmp_path: Path,
                        capsys: pytest.CaptureFixture[str]) -> None:
    text, bad_row, words = case[1]()
    src = tmp_path / "incoming.csv"
    src.write_text(text, encoding="utf-8")
    rc, out, err = run(capsys, "route", src, "-w", ws, "--json")
    assert rc == 1, err  # one row got an error record instead of a decision
    decisions, errors = route_lines(out)
    assert len(decisions) + len(errors) == 10  # every input row has a line
    (e,) = errors
    assert e["row"] == bad_row and words in e["error"]
    assert_base_kept(ws)


def test_route_stdin_gives_a_repeated_id_an_error_record(ws: Path, capsys: pytest.CaptureFixture[str],
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    rows = incoming()[:4]
    lines = [json.dumps(r) for r in rows] + [json.dumps({**rows[1], "subject": "something else"})]
    monkeypatch.setattr("sys.stdin", io.StringIO("\n".join(lines) + "\n"))
    rc, out, err = run(capsys, "route", "-", "-w", ws, "--json")
    assert rc == 1, err
    decisions, errors = route_lines(out)
    assert [d["id"] for d in decisions] == [r["ticket_id"] for r in rows]
    (e,) = errors
    assert (e["row"], e["id"]) == (5, rows[1]["ticket_id"]) and "duplicate of row 2" in e["error"]
    assert_base_kept(ws)


# ---------------------------------------------------------------------------------------------- workspace state
def test_rejects_land_in_the_workspace_created_afresh_with_mode_0600(ws: Path, tmp_path: Path,
                                                                    capsys: pytest.CaptureFixture[str]) -> None:
    text, _ = with_bad({"tenure_days": "lots"})()
    src = tmp_path / "in.csv"
    src.write_text(text, encoding="utf-8")
    paths = []
    for _ in range(2):
        rc, out, _err = run(capsys, "import", src, "-w", ws, "--json")
        assert rc == 0
        paths.append(Path(json.loads(out)["rejects_file"]))
    assert paths == [ws / "rejects" / "in.rejects.csv", ws / "rejects" / "in.rejects-2.csv"]  # never overwritten
    for p in paths:
        assert p.stat().st_mode & 0o777 == 0o600
    assert not (tmp_path / "in.rejects.csv").exists()
    rc, out, _err = run(capsys, "import", src, "-w", ws)
    assert str(ws / "rejects" / "in.rejects-3.csv") in out  # the message says where


def _without_watch_words(ws: Path) -> None:
    cfg = ws / "triage.toml"
    text = cfg.read_text(encoding="utf-8")
    start = text.index("watch_words = [")
    end = text.index("]", start) + 1
    cfg.write_text(text[:start] + text[end:], encoding="utf-8")


def test_a_never_auto_queue_without_watch_words_is_warned_about(ws: Path, tmp_path: Path,
                                                                capsys: pytest.CaptureFixture[str]) -> None:
    _without_watch_words(ws)
    rc, _out, err = run(capsys, "train", "-w", ws)
    assert rc == 0, err
    assert "[queues.safety] is never_auto but has no watch_words" in err
    src = tmp_path / "incoming.csv"
    src.write_text(csv_text(incoming(), [c for c in COLUMNS if c != "queue"]), encoding="utf-8")
    rc, out, err = run(capsys, "route", src, "-w", ws, "--json")
    assert rc == 0 and len(route_lines(out)[0]) == 10
    assert "[queues.safety] is never_auto but has no watch_words" in err
    from triage.app import Workspace

    with Workspace.open(ws) as w:  # the function every front end (the terminal UI too) shows
        assert any("safety" in x for x in w.safety_warnings())
    assert_base_kept(ws)


def test_a_queue_with_one_example_is_said_once_in_our_words(ws: Path, tmp_path: Path,
                                                            capsys: pytest.CaptureFixture[str]) -> None:
    rows = good()[:3]
    rows[0]["queue"] = "warranty"
    rows[0]["received_at"] = "2026-01-01T00:00:00"  # among the older items that cross-validation folds
    src = tmp_path / "one.csv"
    src.write_text(csv_text(rows), encoding="utf-8")
    assert run(capsys, "import", src, "-w", ws)[0] == 0
    rc, _out, err = run(capsys, "train", "-w", ws)
    assert rc == 0, err
    assert err.count("few labelled items in 'warranty' (1 item)") == 1
    assert "UserWarning" not in err and "sklearn" not in err and "least populated" not in err
    rc, _out, err = run(capsys, "evaluate", "-w", ws)
    assert rc == 0 and err.count("'warranty' (1 item)") == 1 and "UserWarning" not in err


def test_unreadable_times_are_never_the_newest(ws: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rows = good()
    for r in rows[:5]:
        r["received_at"] = "yesterday"
    src = tmp_path / "t.csv"
    src.write_text(csv_text(rows), encoding="utf-8")
    rc, _out, err = run(capsys, "import", src, "-w", ws)
    assert rc == 0 and "5 of 20 rows have a time 'received_at' that is not a date and time" in err
    with Store.open(ws / "triage.db") as st:
        order = [r.item_id for r in st.labelled_items()]
    assert set(order[:5]) == {r["ticket_id"] for r in rows[:5]}  # ordered oldest, never in the newest 20%
    rc, out, err = run(capsys, "evaluate", "-w", ws)
    assert rc == 0, err
    assert "None" not in out.split("scored on", 1)[1].split("\n", 1)[0]


def test_without_arrival_times_the_scorecard_uses_a_seeded_stratified_random_split(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from sklearn.model_selection import train_test_split

    from tests.helpers import pinned_voltwren_config

    ws = tmp_path / "notime"
    ws.mkdir()
    (ws / "triage.toml").write_text(pinned_voltwren_config().replace('time = "received_at"\n', ""),
                                    encoding="utf-8")
    rows = ROWS[:300]
    src = tmp_path / "t.csv"
    src.write_text(csv_text(rows), encoding="utf-8")
    assert run(capsys, "import", src, "-w", ws)[0] == 0
    rc, out, err = run(capsys, "train", "-w", ws)
    assert rc == 0 and "randomly chosen (no arrival times)" in out, err
    rc, out, err = run(capsys, "evaluate", "-w", ws, "--json")
    data = json.loads(out)
    assert data["split"]["kind"] == "random" and data["split"]["stratified"] and data["split"]["seed"] == 0
    # Reference: scikit-learn's train_test_split, stratified, seed 0, on the items in the store's order
    with Store.open(ws / "triage.db") as st:
        recs = st.labelled_items()
    _, test = train_test_split(list(range(len(recs))), test_size=60, random_state=0,
                               stratify=[r.label for r in recs])
    assert data["split"]["test_items"] == 60 == data["scorecard"]["n"]
    want = sorted(recs[i].label for i in test)
    got = sorted(q for q, row in zip(data["scorecard"]["queues"], data["scorecard"]["matrix"], strict=True)
                 for _ in range(sum(row)))
    assert got == want
    rc, out, _err = run(capsys, "evaluate", "-w", ws)
    assert "No arrival times: trained on a random 240 items" in out and "None" not in out.split("\n", 1)[0]


def test_read_only_commands_leave_the_workspace_untouched(ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """evaluate, explain, models and overview open the store read-only (mode=ro): nothing in the folder is
    written, created or migrated, so they work on a copy this user may only read."""
    def snapshot() -> dict[str, tuple[int, bytes]]:
        # SQLite's own -wal/-shm side files may appear where the folder allows it; the store and every
        # other file must stay as they were
        return {str(p.relative_to(ws)): (p.stat().st_mtime_ns, p.read_bytes()) for p in sorted(ws.rglob("*"))
                if p.is_file() and not p.name.endswith(("-wal", "-shm"))}

    before = snapshot()
    modes = {p: p.stat().st_mode for p in [ws, *ws.rglob("*")]}
    for p in sorted(modes, key=lambda x: -len(x.parts)):
        p.chmod(0o555 if p.is_dir() else 0o444)
    try:
        for argv in (("evaluate",), ("explain", ROWS[0]["ticket_id"]), ("models",), ("overview",)):
            rc, _out, err = run(capsys, *argv, "-w", ws)
            assert rc == 0, (argv, err)
        after = snapshot()
        if os.geteuid() != 0:  # root may write whatever the modes say
            rc, _out, err = run(capsys, "cutoff", "billing", "0.9", "-w", ws)
            assert rc == 2 and "triage.db" in err  # a write still needs a writable copy, and says so
    finally:
        for p, m in modes.items():
            p.chmod(m)
    assert after == before
    with Store.open(ws / "triage.db", read_only=True) as st:  # and the read-only store refuses any write
        with pytest.raises(StoreError, match="read-only"), st.transaction():
            pass
