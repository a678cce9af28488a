"""The `triage` command end to end, on real workspace folders built from the invented demo corpus."""

from __future__ import annotations

import argparse
import csv
import itertools
import json
import math
import queue
import re
import shutil
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from triage.app import Workspace
from triage.cli import build_parser, main
from triage.config import load_config
from triage.core.schema import FieldRole
from triage.store import Store

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_corpus"
N_ROWS = 1500
TIMEOUT = 120


# ----------------------------------------------------------------------------------------------- helpers
def demo_rows(n: int, name: str = "voltwren_tickets.csv") -> list[dict[str, str]]:
    with (DEMO / name).open(newline="", encoding="utf-8") as fh:
        return list(itertools.islice(csv.DictReader(fh), n))


def write_csv(path: Path, rows: list[dict[str, str]], columns: list[str] | None = None) -> Path:
    columns = columns or list(rows[0])
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=columns, extrasaction="ignore")
        w.writeheader()
        w.writerows(rows)
    return path


def pinned_config(target: float = 0.85, extra: str = "") -> str:
    """The demo config with the text model and smoothing pinned (no selection) and a reachable target."""
    text = (REPO / "configs" / "voltwren.toml").read_text(encoding="utf-8")
    text, n1 = re.subn(r'(?m)^text_model = "auto"', 'text_model = "multinomial"', text)
    text, n2 = re.subn(r'(?m)^alpha_text = "auto"', "alpha_text = 1.0", text)
    text, n3 = re.subn(r"(?m)^(\[routing\]\ntarget_precision = )[0-9.]+", rf"\g<1>{target}", text)
    assert (n1, n2, n3) == (1, 1, 1), "the demo config changed shape; update pinned_config"
    return text + extra


def cli(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> tuple[int, str, str]:
    """Run the command in-process; returns (exit code, stdout, stderr)."""
    capsys.readouterr()
    rc = main([str(a) for a in argv])
    got = capsys.readouterr()
    return rc, got.out, got.err


def cli_json(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> object:
    rc, out, err = cli(capsys, *argv, "--json")
    assert rc == 0, err
    return json.loads(out)


def run(*argv: str | Path, stdin: str | None = None, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """Run the real command in a subprocess."""
    return subprocess.run([sys.executable, "-m", "triage", *map(str, argv)], input=stdin, capture_output=True,
                          text=True, timeout=TIMEOUT, cwd=cwd)


def assert_user_error(rc: int, err: str, *needles: str) -> None:
    """Exit code 2, exactly one line on stderr, no traceback, and the line names what is wrong."""
    lines = err.strip("\n").splitlines()
    assert rc == 2, err
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for n in needles:
        assert n in lines[0], (n, lines[0])


def jsonl(text: str) -> list[dict]:
    return [json.loads(line) for line in text.splitlines() if line.strip()]


# ----------------------------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def corpus(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("corpus")
    write_csv(d / "tickets.csv", demo_rows(N_ROWS))
    (d / "triage.toml").write_text(pinned_config(), encoding="utf-8")
    return d


@pytest.fixture(scope="module")
def trained(corpus: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One imported and trained workspace for the module; tests that change it work on a copy."""
    ws = tmp_path_factory.mktemp("trained") / "ws"
    ws.mkdir()
    shutil.copyfile(corpus / "triage.toml", ws / "triage.toml")
    assert main(["import", str(corpus / "tickets.csv"), "-w", str(ws), "--json"]) == 0
    assert main(["train", "-w", str(ws), "--json"]) == 0
    return ws


@pytest.fixture
def ws(trained: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "ws"
    shutil.copytree(trained, dest)
    return dest


@pytest.fixture(scope="module")
def incoming() -> list[dict[str, str]]:
    return demo_rows(60, "voltwren_incoming.csv")


# ----------------------------------------------------------------------------------------------- init
def test_init_from_infers_roles_writes_config_and_says_why(tmp_path: Path,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    src = write_csv(tmp_path / "export.csv", demo_rows(400))
    desk = tmp_path / "desk"
    rc, out, err = cli(capsys, "init", "--from", src, "-w", desk)
    assert rc == 0, err
    cfg = load_config(desk / "triage.toml")
    s = cfg.schema
    assert (s.id, s.label, s.time) == ("ticket_id", "queue", "received_at")
    roles = {f.name: f.role for f in s.fields}
    assert roles["body"] is FieldRole.TEXT
    assert roles["channel"] is FieldRole.CATEGORY
    assert roles["tenure_days"] is FieldRole.NUMBER
    assert "safety" in cfg.never_auto()
    # the reasons are printed and written beside the fields
    assert "ticket_id" in out and "body" in out
    assert "long text" in (desk / "triage.toml").read_text(encoding="utf-8")
    # a second init does not overwrite the reviewed file
    rc, _, err = cli(capsys, "init", "--from", src, "-w", desk)
    assert_user_error(rc, err, "triage.toml", "--force")
    data = cli_json(capsys, "init", "--from", src, "-w", desk, "--force")
    assert Path(data["config"]).name == "triage.toml" and data["reasons"]["queue"].startswith("the label")


def test_init_import_train_route_in_subprocess(tmp_path: Path) -> None:
    """The user's first session, command by command, through the installed entry point."""
    src = write_csv(tmp_path / "tickets.csv", demo_rows(400))
    desk = tmp_path / "desk"
    assert run("init", "--from", src, "-w", desk).returncode == 0
    p = run("import", src, "-w", desk, "--json")
    assert p.returncode == 0, p.stderr
    assert json.loads(p.stdout)["added"] == 400
    p = run("train", "-w", desk, "--json")
    assert p.returncode == 0, p.stderr
    assert json.loads(p.stdout)["version"] == 1
    new = write_csv(tmp_path / "new.csv", demo_rows(5, "voltwren_incoming.csv"))
    p = run("route", new, "-w", desk)
    assert p.returncode == 0, p.stderr
    assert [d["id"] for d in jsonl(p.stdout)] == [r["ticket_id"] for r in demo_rows(5, "voltwren_incoming.csv")]


# ----------------------------------------------------------------------------------------------- import, train, evaluate
def test_import_reports_counts_and_train_activates_version_one(trained: Path) -> None:
    with Store.open(trained / "triage.db") as st:
        assert st.count_items() == N_ROWS
        assert st.count_items(labelled=True) == N_ROWS
        assert [v.version for v in st.model_versions()] == [1]
        assert st.active_model().version == 1


def test_evaluate_json_has_scorecard_with_matrix_and_per_queue(ws: Path,
                                                               capsys: pytest.CaptureFixture[str]) -> None:
    data = cli_json(capsys, "evaluate", "-w", ws)
    card = data["scorecard"]
    queues = card["queues"]
    assert queues == sorted({r["queue"] for r in demo_rows(N_ROWS)})
    assert len(card["matrix"]) == len(queues) and all(len(row) == len(queues) for row in card["matrix"])
    assert sum(map(sum, card["matrix"])) == card["n"] == data["split"]["test_items"] == round(N_ROWS * 0.2)
    assert [q["queue"] for q in card["per_queue"]] == queues
    for q, row in zip(card["per_queue"], card["matrix"], strict=True):
        assert q["support"] == sum(row)
        assert 0.0 <= q["precision"] <= 1.0 and 0.0 <= q["recall"] <= 1.0
    safety = next(q for q in card["per_queue"] if q["queue"] == "safety")
    assert safety["never_auto"] and safety["routed"] == 0
    # the table form prints the same matrix
    rc, out, err = cli(capsys, "evaluate", "-w", ws)
    assert rc == 0, err
    assert "Confusion matrix" in out and "Per queue" in out


# ----------------------------------------------------------------------------------------------- route
def check_decision(d: dict, queues: set[str]) -> None:
    assert set(d) >= {"id", "queue", "suggested", "confidence", "held", "runner_up", "evidence", "flag"}
    assert d["suggested"] in queues
    assert d["runner_up"] in queues and d["runner_up"] != d["suggested"]
    assert 0.0 <= d["confidence"] <= 1.0 and math.isfinite(d["confidence"])
    if d["held"]:
        assert d["queue"] is None
    else:
        assert d["queue"] == d["suggested"]
    assert d["evidence"], d
    for e in d["evidence"]:
        assert isinstance(e["feature"], str) and e["feature"]
        assert isinstance(e["weight"], float | int)


def test_route_file_gives_one_json_line_per_item(ws: Path, tmp_path: Path, incoming: list[dict[str, str]],
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    src = write_csv(tmp_path / "incoming.csv", incoming)
    rc, out, err = cli(capsys, "route", src, "-w", ws, "--json")
    assert rc == 0, err
    decisions = jsonl(out)
    assert [d["id"] for d in decisions] == [r["ticket_id"] for r in incoming]
    queues = set(Workspace.open(ws).model.queues)
    for d in decisions:
        check_decision(d, queues)
    assert any(d["held"] for d in decisions) and any(not d["held"] for d in decisions)
    # routed items are stored, so they can be explained and corrected later
    with Store.open(ws / "triage.db") as st:
        assert st.count_items() == N_ROWS + len(incoming)
        assert st.latest_batch().summary["n"] == len(incoming)


def test_route_stdin_and_a_bad_line_does_not_stop_the_rest(ws: Path, incoming: list[dict[str, str]]) -> None:
    good = [json.dumps(r) for r in incoming[:3]]
    bad_number = json.dumps({**incoming[3], "tenure_days": "a while"})
    lines = [good[0], "{not json", good[1], bad_number, good[2]]
    p = run("route", "-", "-w", ws, stdin="\n".join(lines) + "\n")
    assert p.returncode == 1, p.stderr  # some rows got no decision
    out = jsonl(p.stdout)
    assert [d["id"] for d in out if "error" not in d] == [r["ticket_id"] for r in incoming[:3]]
    errors = [d for d in out if "error" in d]
    assert [(e["row"], e["field"]) for e in errors] == [(2, None), (4, "tenure_days")]
    assert "row 4, field 'tenure_days'" in errors[1]["error"] and errors[1]["id"] == incoming[3]["ticket_id"]


class Lines:
    """Lines of a pipe collected by a thread, so a read can time out instead of hanging the test."""

    def __init__(self, stream) -> None:
        self.q: queue.Queue[str] = queue.Queue()
        threading.Thread(target=self._pump, args=(stream,), daemon=True).start()

    def _pump(self, stream) -> None:
        for line in stream:
            self.q.put(line)

    def next(self) -> str:
        return self.q.get(timeout=60)


def test_route_follow_answers_each_line_as_it_arrives(ws: Path, incoming: list[dict[str, str]]) -> None:
    p = subprocess.Popen([sys.executable, "-m", "triage", "route", "--follow", "-", "-w", str(ws)],
                         stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                         bufsize=1)
    try:
        out, err = Lines(p.stdout), Lines(p.stderr)

        def send(line: str) -> None:
            p.stdin.write(line + "\n")
            p.stdin.flush()

        send(json.dumps(incoming[0]))
        assert json.loads(out.next())["id"] == incoming[0]["ticket_id"]  # answered before the next line is sent
        send("[1, 2, 3]")
        problem = json.loads(err.next())
        assert problem["line"] == 2 and problem["error"]
        send(json.dumps({**incoming[1], "open_orders": "several"}))
        problem = json.loads(err.next())
        assert problem["line"] == 3 and problem["field"] == "open_orders"
        send(json.dumps(incoming[2]))
        d = json.loads(out.next())
        assert d["id"] == incoming[2]["ticket_id"] and "suggested" in d
        p.stdin.close()
        assert p.wait(timeout=60) == 0
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()


def test_route_decides_unseen_values_empty_text_and_missing_fields(ws: Path, tmp_path: Path,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    rows = [
        {"ticket_id": "N-1", "channel": "carrier pigeon", "product_line": "Zephyrcell 99", "plan": "platinum",
         "region": "Atlantis", "tenure_days": 3, "open_orders": 1, "subject": "Invoice charged twice",
         "body": "My invoice shows a double charge."},
        {"ticket_id": "N-2", "channel": "email", "subject": "", "body": "", "tenure_days": None},
        {"ticket_id": "N-3"},
        {"ticket_id": "N-4", "subject": "xqzzv plorb", "body": "wibblefrotz qqq"},
    ]
    src = tmp_path / "odd.jsonl"
    src.write_text("".join(json.dumps(r) + "\n" for r in rows), encoding="utf-8")
    rc, out, err = cli(capsys, "route", src, "-w", ws, "--json")
    assert rc == 0, err
    decisions = jsonl(out)
    assert [d["id"] for d in decisions] == ["N-1", "N-2", "N-3", "N-4"]
    queues = set(Workspace.open(ws).model.queues)
    for d in decisions:
        assert d["suggested"] in queues and math.isfinite(d["confidence"])
    assert set(decisions[3]["unseen_words"]) >= {"xqzzv", "plorb", "wibblefrotz"}
    assert not (tmp_path / "odd.rejects.csv").exists() and not (ws / "rejects" / "odd.rejects.csv").exists()


# ----------------------------------------------------------------------------------------------- safety
SAFETY_TICKET = {"ticket_id": "S-1", "channel": "phone", "product_line": "Hearthcell 10", "plan": "plus",
                 "region": "Eastmoor", "tenure_days": "400", "open_orders": "0",
                 "subject": "Battery smells of burning",
                 "body": "The battery smells of burning and is swelling, the casing is bulging and hot. "
                         "Also my last invoice was wrong."}


def test_safety_items_are_held_for_a_person(ws: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rows = demo_rows(500, "voltwren_incoming.csv") + [SAFETY_TICKET]
    src = write_csv(tmp_path / "incoming.csv", rows, columns=list(SAFETY_TICKET))
    rc, out, err = cli(capsys, "route", src, "-w", ws, "--json")
    assert rc == 0, err
    decisions = jsonl(out)
    top_safety = [d for d in decisions if d["suggested"] == "safety"]
    assert len(top_safety) >= 3
    for d in top_safety:
        assert d["held"] and d["queue"] is None and d["flag"] == "never_auto", d
    assert max(d["confidence"] for d in top_safety) > 0.9  # held however sure the model is
    burning = decisions[-1]
    assert burning["id"] == "S-1"
    assert burning["queue"] is None and burning["held"]
    assert burning["flag"] in ("never_auto", "watch")


def test_safety_is_held_even_with_a_pinned_zero_cutoff(corpus: Path, tmp_path: Path,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    desk = tmp_path / "desk"
    desk.mkdir()
    text = pinned_config().replace("[queues.safety]\n", "[queues.safety]\ncutoff = 0.0\n")
    (desk / "triage.toml").write_text(text, encoding="utf-8")
    assert cli(capsys, "import", corpus / "tickets.csv", "-w", desk)[0] == 0
    assert cli(capsys, "train", "-w", desk)[0] == 0
    src = write_csv(tmp_path / "s.csv", [SAFETY_TICKET])
    rc, out, err = cli(capsys, "route", src, "-w", desk, "--json")
    assert rc == 0, err
    (d,) = jsonl(out)
    assert d["suggested"] == "safety" and d["queue"] is None and d["flag"] == "never_auto"


# ----------------------------------------------------------------------------------------------- explain
def test_explain_lists_evidence_for_and_against(ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    item = demo_rows(1)[0]["ticket_id"]
    x = cli_json(capsys, "explain", item, "-w", ws)
    assert x["id"] == item and x["label"] == demo_rows(1)[0]["queue"]
    assert x["for"] and x["against"]
    assert all(t["weight"] > 0 for t in x["for"]) and all(t["weight"] < 0 for t in x["against"])
    assert abs(x["terms_total"] - x["log_odds_gap"]) < 1e-6
    assert x["log_odds_gap"] >= 0
    rc, out, err = cli(capsys, "explain", item, "-w", ws, "--top", "3")
    assert rc == 0, err
    assert f"For {x['suggested']}" in out and f"For {x['runner_up']}" in out
    assert x["for"][0]["feature"] in out


# ----------------------------------------------------------------------------------------------- corrections
def active_jll(ws_dir: Path, ids: list[str]) -> dict[str, list[float]]:
    """Each queue's joint log-likelihood of the stored items, by queue name, under the active model."""
    with Workspace.open(ws_dir) as w:
        recs = w.store.get_items(ids)
        batch = w.model.encoder.transform([r.fields for r in recs], allow_missing=True)
        jll = w.model.joint_log_likelihood(batch)
        return {q: jll[:, i].tolist() for i, q in enumerate(w.model.queues)}


def assert_same_jll(a: dict[str, list[float]], b: dict[str, list[float]]) -> None:
    assert set(a) == set(b)
    for q in a:
        assert a[q] == pytest.approx(b[q], abs=1e-9, rel=0), q


def test_correct_undo_models_activate(ws: Path, trained: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rows = demo_rows(40)
    item = next(r for r in rows if r["queue"] == "installation")["ticket_id"]
    probe = [r["ticket_id"] for r in rows]
    before = active_jll(trained, probe)

    data = cli_json(capsys, "correct", item, "billing", "--by", "dana", "-w", ws)
    assert data["model_version"] == 2
    assert (data["before"], data["after"]) == ("installation", "billing")
    c = data["correction"]
    assert c["status"] == "applied" and c["by"] == "dana" and c["applied_version"] == 2
    d = data["decision"]
    assert d["id"] == item and d["model_version"] == 2
    with Store.open(ws / "triage.db") as st:
        assert st.get_item(item).label == "billing"
        hist = st.label_history(item)
        assert [h["queue"] for h in hist] == ["installation", "billing"]
        assert hist[-1]["by"] == "dana" and hist[-1]["source"] == "corrected"
        assert [x.id for x in st.corrections()] == [c["id"]]
        assert st.active_model().version == 2
    # the model learned it: billing gained on this item relative to installation
    after = active_jll(ws, [item])
    gain = lambda j: j["billing"][0] - j["installation"][0]  # noqa: E731
    assert gain(after) > gain({q: [v[probe.index(item)]] for q, v in before.items()})
    x = cli_json(capsys, "explain", item, "-w", ws)
    assert (x["suggested"], x["model_version"]) == (d["suggested"], 2)
    assert x["confidence"] == pytest.approx(d["confidence"], abs=1e-6)

    data = cli_json(capsys, "undo", "--by", "dana", "-w", ws)
    assert data["model_version"] == 3 and data["correction"]["undo_of"] == c["id"]
    with Store.open(ws / "triage.db") as st:
        assert st.get_item(item).label == "installation"
        assert st.get_correction(c["id"]).status == "undone"
    assert_same_jll(active_jll(ws, probe), before)  # learn then forget: exactly the trained model again
    rc, _, err = cli(capsys, "undo", "-w", ws)
    assert_user_error(rc, err, "no correction to undo")

    cli_json(capsys, "correct", item, "billing", "-w", ws)
    versions = cli_json(capsys, "models", "-w", ws)
    assert [v["version"] for v in versions] == [1, 2, 3, 4]
    assert [v["kind"] for v in versions] == ["train", "correction", "correction", "correction"]
    assert [v["active"] for v in versions] == [False, False, False, True]
    rc, out, err = cli(capsys, "models", "-w", ws)
    assert rc == 0 and "Model versions" in out

    assert cli_json(capsys, "models", "activate", "1", "-w", ws) == {"active": 1}
    assert_same_jll(active_jll(ws, probe), before)
    assert cli_json(capsys, "overview", "-w", ws)["active_version"] == 1
    assert cli_json(capsys, "models", "activate", "4", "-w", ws) == {"active": 4}
    assert active_jll(ws, [item])["billing"] == pytest.approx(after["billing"], abs=1e-9)
    rc, _, err = cli(capsys, "models", "activate", "99", "-w", ws)
    assert_user_error(rc, err, "99")


def test_correct_unknown_item_and_explain_unknown_item(ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = cli(capsys, "explain", "NO-SUCH", "-w", ws)
    assert_user_error(rc, err, "NO-SUCH")
    rc, _, err = cli(capsys, "correct", "NO-SUCH", "billing", "-w", ws)
    assert_user_error(rc, err, "NO-SUCH")
    with Store.open(ws / "triage.db") as st:
        assert st.corrections() == [] and len(st.model_versions()) == 1


def test_overview(ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    data = cli_json(capsys, "overview", "-w", ws)
    counts: dict[str, int] = {}
    for r in demo_rows(N_ROWS):
        counts[r["queue"]] = counts.get(r["queue"], 0) + 1
    assert data["items"] == data["labelled"] == N_ROWS
    assert data["queues"] == counts
    assert data["active_version"] == 1 and data["text_model"] == "multinomial"
    assert data["never_auto"] == ["safety"]
    assert data["scorecard"]["n"] == round(N_ROWS * 0.2)
    assert data["latest_batch"] is None


# ----------------------------------------------------------------------------------------------- demo
def test_demo_builds_a_workspace(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = run("demo", tmp_path / "demo", "--no-ui", "--json")
    assert p.returncode == 0, p.stderr
    data = json.loads(p.stdout)
    assert data["scenario"] == "voltwren" and data["imported"] == 6000 and data["version"] == 1
    assert data["batch"]["n"] == len(data["decisions"]) == 500
    assert (tmp_path / "demo" / "triage.toml").exists() and (tmp_path / "demo" / "triage.db").exists()
    assert main(["overview", "-w", str(tmp_path / "demo"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["items"] == 6500
    rc, _, err = cli(capsys, "demo", tmp_path / "demo", "--no-ui")
    assert_user_error(rc, err, "--force")


# ----------------------------------------------------------------------------------------------- help
def subcommands() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    (action,) = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    return dict(action.choices)


def test_every_command_has_help_text_and_description(capsys: pytest.CaptureFixture[str]) -> None:
    parser = build_parser()
    (action,) = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    helps = {a.dest: a.help for a in action._choices_actions}
    cmds = subcommands()
    assert {"init", "import", "train", "evaluate", "route", "explain", "correct", "undo", "models", "overview",
            "demo", "ui", "serve"} <= set(cmds)
    for name, sp in cmds.items():
        assert helps.get(name), f"{name} has no help text"
        assert sp.description, f"{name} has no description"
        for a in sp._actions:
            assert a.help, f"{name}: option {a.option_strings or a.dest} has no help"
        with pytest.raises(SystemExit) as exc:
            main([name, "--help"])
        assert exc.value.code == 0
        out = capsys.readouterr().out
        assert out.startswith(f"usage: triage {name}") and sp.description.split()[0] in out


def test_help_in_subprocess() -> None:
    p = run("--help")
    assert p.returncode == 0
    for name in subcommands():
        assert name in p.stdout


# ----------------------------------------------------------------------------------------------- bad input
def test_bad_rows_are_rejected_with_row_numbers_and_good_rows_kept(corpus: Path, tmp_path: Path,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    desk = tmp_path / "desk"
    desk.mkdir()
    shutil.copyfile(corpus / "triage.toml", desk / "triage.toml")
    rows = demo_rows(12)
    rows[2] = {**rows[2], "ticket_id": rows[0]["ticket_id"]}           # row 3: duplicate id of row 1
    rows[4] = {**rows[4], "tenure_days": "[/three years]"}             # row 5: number field holding text
    rows[6] = {**rows[6], "queue": ""}                                 # row 7: empty label
    rows[8] = {**rows[8], "ticket_id": ""}                             # row 9: empty id
    rows[10] = {**rows[10], "body": "battery " * 3000}                 # row 11: over-long text (24000 chars)
    src = write_csv(tmp_path / "messy.csv", rows)
    data = cli_json(capsys, "import", src, "-w", desk)
    assert data["rows_read"] == 12 and data["added"] == 8 and data["rejected"] == 4
    rejects_file = Path(data["rejects_file"])
    assert rejects_file == desk / "rejects" / "messy.rejects.csv"  # in the workspace, beside the rest of the data
    with rejects_file.open(newline="", encoding="utf-8") as fh:
        got = {int(r["row"]): (r["field"], r["reason"]) for r in csv.DictReader(fh)}
    assert set(got) == {3, 5, 7, 9}
    assert got[3] == ("ticket_id", "duplicate of row 1")
    assert got[5][0] == "tenure_days" and "[/three years]" in got[5][1]
    assert got[7][0] == "queue" and got[9][0] == "ticket_id"
    assert any("row 11" in w and "body" in w and "cut" in w for w in data["warnings"])
    with Store.open(desk / "triage.db") as st:
        assert st.count_items() == 8
        assert len(st.get_item(rows[10]["ticket_id"]).fields["body"]) == 20000
        assert st.get_item(rows[0]["ticket_id"]).label == demo_rows(1)[0]["queue"]
    # the table form prints each problem verbatim on its own line (the value looks like markup)
    rc, out, err = cli(capsys, "import", src, "-w", desk)
    assert rc == 0, err
    assert "warning: messy.csv: row 5, field 'tenure_days': '[/three years]' is not a number" in err.splitlines()
    with Store.open(desk / "triage.db") as st:
        assert st.count_items() == 8


@pytest.mark.parametrize("case", ["no_label_column", "no_id_column", "empty_file", "not_utf8"])
def test_file_level_problems_are_one_clear_line_and_import_nothing(case: str, corpus: Path, tmp_path: Path,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    desk = tmp_path / "desk"
    desk.mkdir()
    shutil.copyfile(corpus / "triage.toml", desk / "triage.toml")
    rows = demo_rows(10)
    src = tmp_path / f"{case}.csv"
    if case == "no_label_column":
        write_csv(src, rows, [c for c in rows[0] if c != "queue"])
        needles = ("no label column", "'queue'")
    elif case == "no_id_column":
        write_csv(src, rows, [c for c in rows[0] if c != "ticket_id"])
        needles = ("no id column", "'ticket_id'")
    elif case == "empty_file":
        src.write_bytes(b"")
        needles = ("empty",)
    else:
        write_csv(src, rows)
        data = src.read_bytes()
        src.write_bytes(data.replace(b"Order", "Ördér".encode("latin-1"), 1))
        needles = ("not UTF-8", "line 2", "byte 0xd6")
    rc, _, err = cli(capsys, "import", src, "-w", desk)
    assert_user_error(rc, err, src.name, *needles)
    with Store.open(desk / "triage.db") as st:
        assert st.count_items() == 0


def test_import_twice_changes_nothing_and_a_new_label_is_a_conflict(ws: Path, corpus: Path, tmp_path: Path,
                                                                    capsys: pytest.CaptureFixture[str]) -> None:
    def snapshot() -> tuple:
        with Store.open(ws / "triage.db") as st:
            return st.count_items(), st.queue_counts(), len(st.model_versions())

    first = snapshot()
    data = cli_json(capsys, "import", corpus / "tickets.csv", "-w", ws)
    assert (data["added"], data["unchanged"], data["conflicts"]) == (0, N_ROWS, [])
    assert snapshot() == first
    rows = demo_rows(20)
    victim = rows[5]
    new_label = "billing" if victim["queue"] != "billing" else "installation"
    rows[5] = {**victim, "queue": new_label}
    data = cli_json(capsys, "import", write_csv(tmp_path / "again.csv", rows), "-w", ws)
    assert data["added"] == 0 and data["unchanged"] == 19
    (conflict,) = data["conflicts"]
    assert conflict["item_id"] == victim["ticket_id"] and conflict["kind"] == "label"
    assert (conflict["stored"], conflict["incoming"]) == (victim["queue"], new_label)
    with Store.open(ws / "triage.db") as st:
        assert st.get_item(victim["ticket_id"]).label == victim["queue"]
    assert snapshot() == first
    rc, _, err = cli(capsys, "import", tmp_path / "again.csv", "-w", ws)
    assert rc == 0 and f"conflict: item {victim['ticket_id']}" in err


# ----------------------------------------------------------------------------------------------- user errors
def test_train_with_no_items(corpus: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    shutil.copyfile(corpus / "triage.toml", tmp_path / "triage.toml")
    rc, _, err = cli(capsys, "train", "-w", tmp_path)
    assert_user_error(rc, err, "0 labelled items", "triage import")
    rc, _, err = cli(capsys, "route", corpus / "tickets.csv", "-w", tmp_path)
    assert_user_error(rc, err, "triage train")


def test_no_config_and_corrupted_config(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = cli(capsys, "overview", "-w", tmp_path)
    assert_user_error(rc, err, "triage.toml", "triage init")
    assert not (tmp_path / "triage.db").exists()
    (tmp_path / "triage.toml").write_text("[data\nid = \n", encoding="utf-8")
    rc, _, err = cli(capsys, "train", "-w", tmp_path)
    assert_user_error(rc, err, "triage.toml", "TOML")
    (tmp_path / "triage.toml").write_text('[data]\nid = "ticket_id"\n', encoding="utf-8")
    rc, _, err = cli(capsys, "train", "-w", tmp_path)
    assert_user_error(rc, err, "triage.toml")


def test_user_errors_in_subprocess_and_debug_shows_traceback(ws: Path, tmp_path: Path) -> None:
    p = run("explain", "NO-SUCH", "-w", ws)
    assert_user_error(p.returncode, p.stderr, "NO-SUCH")
    assert p.stdout == ""
    p = run("train", "-w", tmp_path, "--debug")
    assert p.returncode != 0 and "Traceback" in p.stderr


def test_route_output_into_a_closed_pipe_is_not_a_traceback(ws: Path) -> None:
    """`triage route FILE | head -3`: the reader goes away early; no traceback, as with any Unix tool."""
    src = DEMO / "voltwren_incoming.csv"
    p = subprocess.Popen([sys.executable, "-m", "triage", "route", str(src), "-w", str(ws)],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    first = p.stdout.readline()
    p.stdout.close()
    err = p.stderr.read().decode()
    p.wait(timeout=TIMEOUT)
    assert json.loads(first)["id"]
    assert "Traceback" not in err and "BrokenPipe" not in err
