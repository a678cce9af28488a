"""Who a change is recorded under: `[desk] reviewer` in triage.toml, else TRIAGE_REVIEWER, else the command line's
"operator" (the terminal UI asks instead: tests/tui/test_desk.py). The expected names are the ones each test
writes into the config or the environment; the journal read back from the store is the check."""

from __future__ import annotations

import shutil
import tomllib
from pathlib import Path

import pytest

from tests.helpers import build_demo_workspace, pinned_voltwren_config
from triage.app import Workspace
from triage.app.corrections import REVIEWER_ENV, reviewer
from triage.cli import main
from triage.config import ConfigError, config_from_dict, dump_config
from triage.store import Store


def with_desk(text: str, body: str) -> str:
    return text + f"\n[desk]\n{body}\n"


@pytest.fixture(scope="module")
def base(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("reviewer") / "ws", rows=300)


@pytest.fixture
def ws(base: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.delenv(REVIEWER_ENV, raising=False)
    dest = tmp_path / "ws"
    shutil.copytree(base, dest)
    return dest


def set_reviewer(ws: Path, name: str) -> None:
    cfg = ws / "triage.toml"
    cfg.write_text(with_desk(cfg.read_text(encoding="utf-8"), f"reviewer = {name!r}".replace("'", '"')),
                   encoding="utf-8")


def test_the_desk_table_is_read_checked_and_written_back() -> None:
    text = with_desk(pinned_voltwren_config(), 'reviewer = "  Dana   Ortiz "')
    cfg = config_from_dict(tomllib.loads(text), "t.toml", text)
    assert cfg.reviewer == "Dana Ortiz"
    again = dump_config(cfg)
    assert config_from_dict(tomllib.loads(again), "t.toml", again).reviewer == "Dana Ortiz"
    plain = config_from_dict(tomllib.loads(pinned_voltwren_config()))
    assert plain.reviewer is None and "[desk]" not in dump_config(plain)
    for body, words in (('reviwer = "Dana"', "did you mean 'reviewer'"), ("reviewer = 3", "must be a name"),
                        ('reviewer = ""', "must be a name")):
        bad = with_desk(pinned_voltwren_config(), body)
        with pytest.raises(ConfigError, match=words):
            config_from_dict(tomllib.loads(bad), "t.toml", bad)
    typo = pinned_voltwren_config() + '\n[dsek]\nreviewer = "Dana"\n'
    with pytest.raises(ConfigError, match=r"unknown section \[dsek\]; did you mean \[desk\]"):
        config_from_dict(tomllib.loads(typo), "t.toml", typo)


def test_the_config_comes_before_the_environment(ws: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    with Workspace.open(ws) as w:
        assert reviewer(w) is None
        monkeypatch.setenv(REVIEWER_ENV, " Lee  Park ")
        assert reviewer(w) == "Lee Park"
    set_reviewer(ws, "Dana Ortiz")
    with Workspace.open(ws) as w:
        assert reviewer(w) == "Dana Ortiz"


def run(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> str:
    capsys.readouterr()
    rc = main([str(a) for a in argv])
    got = capsys.readouterr()
    assert rc == 0, got.err
    return got.out


def journal(ws: Path) -> list[str]:
    with Store.open(ws / "triage.db") as st:
        return [c.by for c in st.corrections()]


def test_the_command_line_records_the_configured_name(ws: Path, capsys: pytest.CaptureFixture[str],
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    with Store.open(ws / "triage.db") as st:
        rec = st.labelled_items()[0]
    other = "billing" if rec.label != "billing" else "installation"
    run(capsys, "correct", rec.item_id, other, "-w", ws)
    assert journal(ws) == ["operator"]  # nobody named anywhere: the command line's own name
    monkeypatch.setenv(REVIEWER_ENV, "Lee Park")
    run(capsys, "undo", "-w", ws)
    assert journal(ws) == ["operator", "Lee Park"]
    set_reviewer(ws, "Dana Ortiz")
    run(capsys, "correct", rec.item_id, other, "-w", ws)
    run(capsys, "undo", "--by", "Sam", "-w", ws)  # --by says it outright
    assert journal(ws) == ["operator", "Lee Park", "Dana Ortiz", "Sam"]
    run(capsys, "cutoff", "billing", "0.9", "-w", ws)
    with Store.open(ws / "triage.db") as st:
        assert st.active_model().note.startswith("cutoffs set by Dana Ortiz:")
