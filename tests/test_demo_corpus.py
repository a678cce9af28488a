"""The demo scenarios: seeded, deterministic, shaped as documented, and in step with the committed files."""

from __future__ import annotations

import importlib.util
import sys
import tomllib
from pathlib import Path
from types import ModuleType

import pandas as pd
import pytest

from triage.config import config_from_dict

ROOT = Path(__file__).resolve().parents[1]
CORPUS = ROOT / "demo_corpus"


def _load_generator() -> ModuleType:
    """Load the script by path so the test works whether or not demo_corpus is importable as a package."""
    spec = importlib.util.spec_from_file_location("_demo_corpus_generate", CORPUS / "generate.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


gen = _load_generator()
ID_COL = {"voltwren": "ticket_id", "haulmere": "lead_id"}
QUEUES = {"voltwren": gen.VW_QUEUES, "haulmere": gen.HM_QUEUES}
CONFIGS = {"voltwren": ROOT / "configs" / "voltwren.toml", "haulmere": ROOT / "configs" / "haulmere.toml"}


@pytest.fixture(scope="module", params=gen.SCENARIOS)
def default(request: pytest.FixtureRequest) -> tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    scenario = request.param
    return (scenario, *gen.generate(scenario, gen.DEFAULT_SIZES[scenario][0]))


@pytest.mark.parametrize("scenario", gen.SCENARIOS)
def test_same_seed_gives_identical_frames(scenario: str) -> None:
    a = gen.generate(scenario, 400, seed=11)
    b = gen.generate(scenario, 400, seed=11)
    for x, y in zip(a, b, strict=True):
        pd.testing.assert_frame_equal(x, y)


@pytest.mark.parametrize("scenario", gen.SCENARIOS)
def test_different_seed_gives_different_frames(scenario: str) -> None:
    a, _, _ = gen.generate(scenario, 400, seed=11)
    b, _, _ = gen.generate(scenario, 400, seed=12)
    assert not a.equals(b)
    assert (a["queue"] != b["queue"]).any()


@pytest.mark.parametrize("scenario", gen.SCENARIOS)
def test_sizes(scenario: str) -> None:
    hist, inc, truth = gen.generate(scenario, 1200)
    n_hist, n_in = gen.DEFAULT_SIZES[scenario]
    assert len(hist) == 1200
    assert len(inc) == len(truth) == round(1200 * n_in / n_hist)
    hist, inc, truth = gen.generate(scenario, 300, incoming=17)
    assert (len(hist), len(inc), len(truth)) == (300, 17, 17)


def test_default_sizes(default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]) -> None:
    scenario, hist, inc, _ = default
    assert (len(hist), len(inc)) == gen.DEFAULT_SIZES[scenario]


def test_ids_unique_across_history_and_incoming(
    default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame],
) -> None:
    scenario, hist, inc, _ = default
    ids = pd.concat([hist[ID_COL[scenario]], inc[ID_COL[scenario]]])
    assert ids.is_unique
    assert ids.notna().all()


def test_every_queue_present(default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]) -> None:
    scenario, hist, _, truth = default
    assert set(hist["queue"]) == set(QUEUES[scenario])
    assert set(truth["queue"]) == set(QUEUES[scenario])


def test_queues_are_imbalanced(default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]) -> None:
    _, hist, _, _ = default
    share = hist["queue"].value_counts(normalize=True)
    assert share.max() > 3 * share.min()


def test_safety_share_small_but_present() -> None:
    hist, _, truth = gen.generate("voltwren", 6000)
    for frame in (hist, truth):
        share = (frame["queue"] == "safety").mean()
        assert 0.01 < share < 0.06


def test_some_safety_tickets_hide_the_hazard() -> None:
    """A share of safety tickets have a subject that names no hazard (they read like another queue)."""
    hist, _, _ = gen.generate("voltwren", 6000)
    safety = hist[hist["queue"] == "safety"]
    hazard = r"burn|smok|swell|hot|hiss|scorch|buzz|safe"
    plain_subject = ~safety["subject"].fillna("").str.lower().str.contains(hazard)
    assert 0.2 < plain_subject.mean() < 0.8


def test_incoming_has_no_queue_and_truth_matches(
    default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame],
) -> None:
    scenario, hist, inc, truth = default
    assert "queue" not in inc.columns
    assert list(inc.columns) == [c for c in hist.columns if c != "queue"]
    assert list(truth.columns) == [ID_COL[scenario], "queue"]
    assert truth[ID_COL[scenario]].tolist() == inc[ID_COL[scenario]].tolist()


def test_incoming_arrives_after_history(default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]) -> None:
    _, hist, inc, _ = default
    h, i = pd.to_datetime(hist["received_at"]), pd.to_datetime(inc["received_at"])
    assert h.min() >= pd.Timestamp("2026-03-01") and h.max() < pd.Timestamp("2026-09-01")
    assert i.min() >= pd.Timestamp("2026-09-01") and i.max() < pd.Timestamp("2026-10-01")
    assert h.is_monotonic_increasing and i.is_monotonic_increasing


def test_gaps_in_text_and_fields(default: tuple[str, pd.DataFrame, pd.DataFrame, pd.DataFrame]) -> None:
    scenario, hist, _, _ = default
    text = "body" if scenario == "voltwren" else "message"
    number = "tenure_days" if scenario == "voltwren" else "employee_count"
    empty = hist[text].fillna("").eq("").mean()
    assert 0.005 < empty < 0.05
    assert 0.01 < hist[number].isna().mean() < 0.2


def test_queue_mix_and_vocabulary_drift() -> None:
    """The firmware 4.1 release grows through the summer and the incoming batch leans to app tickets."""
    hist, inc, truth = gen.generate("voltwren", 6000)
    month = hist["received_at"].str[:7]
    mentions = hist["body"].fillna("").str.contains("4.1", regex=False)
    assert mentions[month <= "2026-05"].mean() == 0
    assert mentions[month == "2026-08"].mean() > 0.05
    assert inc["body"].fillna("").str.contains("4.1", regex=False).mean() > mentions[month == "2026-08"].mean()
    assert (hist.loc[month < "2026-06", "product_line"] == gen.VW_NEW_PRODUCT).sum() == 0
    assert (hist.loc[month == "2026-08", "product_line"] == gen.VW_NEW_PRODUCT).sum() > 0
    app_hist = (hist["queue"] == "app_connectivity").mean()
    assert (truth["queue"] == "app_connectivity").mean() > app_hist


@pytest.mark.parametrize("scenario", gen.SCENARIOS)
def test_committed_files_equal_a_fresh_generation(scenario: str, tmp_path: Path) -> None:
    fresh = gen.write_scenario(scenario, tmp_path)
    for key, path in fresh.items():
        committed = CORPUS / path.name
        assert committed.exists(), f"{committed.name} is missing; run demo_corpus/generate.py"
        assert committed.read_bytes() == path.read_bytes(), (
            f"{committed.name} ({key}) differs from the generator; run demo_corpus/generate.py"
        )


@pytest.mark.parametrize("scenario", gen.SCENARIOS)
def test_config_loads_and_names_existing_columns(scenario: str) -> None:
    path = CONFIGS[scenario]
    cfg = config_from_dict(tomllib.loads(path.read_text(encoding="utf-8")), path)
    hist, inc, _ = gen.generate(scenario, 200)
    schema = cfg.schema
    assert schema.id in hist.columns and schema.label in hist.columns and schema.time in hist.columns
    for spec in schema.fields:
        assert spec.name in hist.columns and spec.name in inc.columns, spec.name
    assert {f.name for f in schema.fields} | {schema.id, schema.label, schema.time} == set(hist.columns)


def test_safety_queue_is_never_auto_routed() -> None:
    path = CONFIGS["voltwren"]
    cfg = config_from_dict(tomllib.loads(path.read_text(encoding="utf-8")), path)
    assert cfg.queue_settings("safety").never_auto
    assert cfg.queue_settings("safety").target_precision == 0.99
    assert cfg.target_precision == 0.95
    assert cfg.schema.field("subject").weight == 2.0


def test_unknown_scenario_is_refused() -> None:
    with pytest.raises(ValueError, match="unknown scenario"):
        gen.generate("nowhere", 10)


def test_cli_writes_files(tmp_path: Path) -> None:
    assert gen.main(["--scenario", "haulmere", "--n", "120", "--seed", "3", "--out", str(tmp_path)]) == 0
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == sorted(gen.FILE_NAMES["haulmere"])
    lines = (tmp_path / "haulmere_leads.jsonl").read_text(encoding="utf-8").splitlines()
    assert len(lines) == 120
