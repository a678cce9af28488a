"""Workspace configuration: the `triage.toml` file, read and written without extra dependencies.

The config says which column is the item id, which is the queue (label), which is the arrival time,
what role every other field plays, how the model is built and how each queue is routed.
"""

from __future__ import annotations

import difflib
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from triage.core.schema import PIECES, FieldRole, FieldSpec, Schema

TEXT_MODELS = ("multinomial", "bernoulli", "complement", "complement-norm")
DEFAULT_TARGET_PRECISION = 0.95


class ConfigError(ValueError):
    """The config file is missing, unreadable or inconsistent; the message names the file and key."""


# The keys each table may hold. A key or table not listed is an error, never skipped: a misspelt
# `never_auto` silently switched off a queue's safety rule. [model] takes the ModelSettings fields, and
# [labels] maps any queue name to another, so neither is listed here.
TOP_TABLES = ("data", "fields", "model", "routing", "queues", "labels", "desk")
DATA_KEYS = ("id", "label", "time", "max_text_chars")
FIELD_KEYS = ("role", "weight", "bins", "thousands", "pieces")
ROUTING_KEYS = ("target_precision", "watch_probability")
QUEUE_KEYS = ("target_precision", "never_auto", "cutoff", "watch_words")
DESK_KEYS = ("reviewer",)  # [desk]: the review desk (the terminal UI, and corrections from the command line)
# thousands separators a number field may declare; with "." the decimal mark is "," (1.200,50)
THOUSANDS = (",", ".", " ", "_", "'")


@dataclass
class ModelSettings:
    """How the model is built. 'auto' lets `train` pick by a quick cross-validation."""

    text_model: str = "auto"
    alpha_text: float | str = "auto"
    alpha_fields: float = 1.0
    prior: str = "fitted"  # fitted | uniform
    # word pairs next to the words: "auto" = `train` measures the best setting with them too and keeps the better
    bigrams: bool | str = "auto"
    min_count: int = 1
    max_vocab: int = 100_000
    max_token_chars: int = 40
    # token-count transforms (Rennie et al. 2003); see ModelSpec for what each keeps exact under corrections
    tf_log: bool = False
    idf: bool = False
    length_norm: bool = False
    # the score layer over the queues' scores (core/stack.py): "auto" = on where the data is large enough
    score_layer: bool | str = "auto"


@dataclass
class QueueSettings:
    """Routing rules for one queue."""

    target_precision: float = DEFAULT_TARGET_PRECISION
    never_auto: bool = False  # every item predicted here is held for a human, whatever the confidence
    cutoff: float | None = None  # a fixed cutoff; None means: solved from out-of-fold precision
    # words (prefixes, e.g. "burn" for burning/burnt) that hold any item mentioning them for a person,
    # whatever the model says: a rule-based safeguard for never-auto queues. An entry of several words
    # ("carbon monoxide", "self-harm") matches an item that has every one of them.
    watch_words: tuple[str, ...] = ()


@dataclass
class Config:
    """Everything `triage.toml` holds."""

    schema: Schema
    model: ModelSettings = field(default_factory=ModelSettings)
    queues: dict[str, QueueSettings] = field(default_factory=dict)
    target_precision: float = DEFAULT_TARGET_PRECISION
    max_text_chars: int = 20_000
    # hold any item that gives a never-auto queue at least this probability, whatever its top queue
    watch_probability: float = 0.10
    # [labels]: queue names in the data mapped to the queue they mean ("NETWORK" -> "network")
    labels: dict[str, str] = field(default_factory=dict)
    # [desk] reviewer: the name corrections are recorded under when none is given (else TRIAGE_REVIEWER)
    reviewer: str | None = None

    def never_auto(self) -> frozenset[str]:
        return frozenset(q for q, p in self.queues.items() if p.never_auto)

    def watch_words(self) -> dict[str, tuple[str, ...]]:
        return {q: p.watch_words for q, p in self.queues.items() if p.watch_words}

    def unwatched_never_auto(self) -> list[str]:
        """Never-auto queues without watch words: only the model guards them, and a hazard buried in an
        item about something else is what a text model misses."""
        return sorted(q for q, p in self.queues.items() if p.never_auto and not p.watch_words)

    def queue_settings(self, queue: str) -> QueueSettings:
        """The queue's routing rules; queues not named in the file get the defaults."""
        if queue in self.queues:
            return self.queues[queue]
        return QueueSettings(target_precision=self.target_precision)


def _fail(path: Path | str, key: str, why: str) -> ConfigError:
    return ConfigError(f"{path}: [{key}] {why}")


def _number(path: Path | str, key: str, value: Any, *, lo: float, hi: float, lo_open: bool = False) -> float:
    """A number in [lo, hi] (or (lo, hi]), else an error naming the file and key."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _fail(path, key, f"must be a number, not {value!r}")
    x = float(value)
    if not (lo < x <= hi if lo_open else lo <= x <= hi):
        raise _fail(path, key, f"must be in {'(' if lo_open else '['}{lo:g}, {hi:g}], not {value!r}")
    return x


def _flag(path: Path | str, key: str, value: Any) -> bool:
    if not isinstance(value, bool):
        raise _fail(path, key, f"must be true or false, not {value!r}")
    return value


def _key_line(text: str | None, table: Sequence[str], key: str | None) -> int | None:
    """The 1-based line of `key` inside `[table]` (or of the table's header when `key` is None), so an error
    can point at it; None when the text is not known or the key is written in a way this scan does not follow
    (inline tables, dotted keys). tomllib parses but keeps no positions, hence this small scan."""
    if text is None:
        return None
    current: list[str] = []
    for n, line in enumerate(text.splitlines(), start=1):
        parts = _header_parts(line)
        if parts is not None:
            current = parts
            if key is None and parts[: len(table)] == list(table):
                return n
            continue
        if key is None or current != list(table):
            continue
        stripped = line.strip()
        if stripped.startswith("#") or "=" not in stripped:
            continue
        name = stripped.split("=", 1)[0].strip()
        if name.strip('"').strip("'") == key:
            return n
    return None


def _check_keys(path: Path | str, text: str | None, table: Sequence[str], got: dict[str, Any],
                known: Sequence[str]) -> None:
    """Refuse a key the table does not know, naming its line and the closest known key."""
    for key in got:
        if key in known:
            continue
        hint = difflib.get_close_matches(key.replace("-", "_").lower(), known, n=1, cutoff=0.6)
        line = _key_line(text, table, key)
        where = f"line {line}: " if line else ""
        name = ".".join(table)
        suggestion = f"did you mean {hint[0]!r}? " if hint else ""
        what = f"unknown section [{key}]" if not table else f"[{name}] unknown key {key!r}"
        raise ConfigError(f"{path}: {where}{what}; {suggestion}known: {', '.join(known)}")


def _check_top(path: Path | str, text: str | None, data: dict[str, Any]) -> None:
    for key in data:
        if key in TOP_TABLES:
            continue
        hint = difflib.get_close_matches(key.lower(), TOP_TABLES, n=1, cutoff=0.6)
        line = _key_line(text, [key], None)
        where = f"line {line}: " if line else ""
        suggestion = f"did you mean [{hint[0]}]? " if hint else ""
        raise ConfigError(f"{path}: {where}unknown section [{key}]; {suggestion}known sections: "
                          f"{', '.join(TOP_TABLES)}")


def _labels_map(path: Path | str, raw: Any) -> dict[str, str]:
    """[labels]: "name in the data" = "queue it means"; a target must not itself be mapped (no chains)."""
    if not isinstance(raw, dict):
        raise _fail(path, "labels", "must be a table of \"name in the data\" = \"queue\"")
    out: dict[str, str] = {}
    for k, v in raw.items():
        if not isinstance(v, str) or not v.strip():
            raise _fail(path, f"labels.{k}", f"must name a queue, not {v!r}")
        out[k.strip()] = v.strip()
    chained = sorted(v for v in out.values() if v in out and out[v] != v)
    if chained:
        raise _fail(path, "labels", f"{chained[0]!r} is both a target and mapped again; map straight to the queue")
    return out


def config_from_dict(data: dict[str, Any], path: Path | str = "triage.toml", text: str | None = None) -> Config:
    """Build a Config from parsed TOML, with errors that name the file and the key (and its line when the
    TOML `text` is given). Unknown keys and sections are errors, with the closest known name."""
    _check_top(path, text, data)
    dat = data.get("data")
    if not isinstance(dat, dict):
        raise _fail(path, "data", "section is missing; it must name the id and label columns")
    _check_keys(path, text, ["data"], dat, DATA_KEYS)
    for key in ("id", "label"):
        if not isinstance(dat.get(key), str) or not dat[key]:
            raise _fail(path, f"data.{key}", "must name a column")
    fields_raw = data.get("fields", {})
    if not isinstance(fields_raw, dict) or not fields_raw:
        raise _fail(path, "fields", "section is missing; name at least one text, category or number field")
    specs: list[FieldSpec] = []
    for name, spec in fields_raw.items():
        if not isinstance(spec, dict):
            raise _fail(path, f"fields.{name}", "must be a table with a role")
        _check_keys(path, text, ["fields", name], spec, FIELD_KEYS)
        role_name = spec.get("role")
        try:
            role = FieldRole(role_name)
        except ValueError:
            allowed = ", ".join(r.value for r in FieldRole if r not in (FieldRole.ID, FieldRole.LABEL))
            raise _fail(path, f"fields.{name}.role", f"is {role_name!r}; use one of {allowed}") from None
        if role in (FieldRole.ID, FieldRole.LABEL):
            raise _fail(path, f"fields.{name}.role", "id and label are named in [data], not as fields")
        try:
            weight = float(spec.get("weight", 1.0))
            bins = int(spec.get("bins", 5))
        except (TypeError, ValueError):
            raise _fail(path, f"fields.{name}", "weight must be a number and bins an integer") from None
        if weight <= 0 or bins < 1:
            raise _fail(path, f"fields.{name}", "weight must be > 0 and bins >= 1")
        thousands = spec.get("thousands")
        if thousands is not None:
            if role is not FieldRole.NUMBER:
                raise _fail(path, f"fields.{name}.thousands", "is for number fields only")
            if thousands not in THOUSANDS:
                raise _fail(path, f"fields.{name}.thousands",
                            f"is {thousands!r}; use one of {', '.join(repr(t) for t in THOUSANDS)}")
        pieces = spec.get("pieces", "words")
        if pieces not in PIECES:
            raise _fail(path, f"fields.{name}.pieces", f"is {pieces!r}; use one of {', '.join(PIECES)}")
        specs.append(FieldSpec(name=name, role=role, weight=weight, bins=bins, thousands=thousands, pieces=pieces))
    schema = Schema(fields=tuple(specs), id=dat["id"], label=dat["label"], time=dat.get("time"))

    m = data.get("model", {})
    if not isinstance(m, dict):
        raise _fail(path, "model", "must be a table")
    _check_keys(path, text, ["model"], m, tuple(ModelSettings.__dataclass_fields__))
    model = ModelSettings(**m)
    if model.text_model not in (*TEXT_MODELS, "auto"):
        raise _fail(path, "model.text_model", f"is {model.text_model!r}; use auto or one of {', '.join(TEXT_MODELS)}")
    # routing needs every queue's score finite, so smoothing must be > 0 here (the model core itself allows 0)
    if model.alpha_text != "auto" and (isinstance(model.alpha_text, bool)
                                       or not isinstance(model.alpha_text, int | float) or model.alpha_text <= 0):
        raise _fail(path, "model.alpha_text", f"must be 'auto' or a number > 0, not {model.alpha_text!r}")
    _number(path, "model.alpha_fields", model.alpha_fields, lo=0, hi=1e6, lo_open=True)
    if model.bigrams != "auto":
        _flag(path, "model.bigrams", model.bigrams)
    for key in ("min_count", "max_vocab", "max_token_chars"):
        v = getattr(model, key)
        if isinstance(v, bool) or not isinstance(v, int) or v < 1:
            raise _fail(path, f"model.{key}", f"must be a whole number >= 1, not {v!r}")
    if model.prior not in ("fitted", "uniform"):
        raise _fail(path, "model.prior", "must be 'fitted' or 'uniform'")
    for key in ("tf_log", "idf", "length_norm"):
        if not isinstance(getattr(model, key), bool):
            raise _fail(path, f"model.{key}", "must be true or false")
    if model.score_layer != "auto" and not isinstance(model.score_layer, bool):
        raise _fail(path, "model.score_layer", f"must be 'auto', true or false, not {model.score_layer!r}")

    routing = data.get("routing", {})
    if not isinstance(routing, dict):
        raise _fail(path, "routing", "must be a table")
    _check_keys(path, text, ["routing"], routing, ROUTING_KEYS)
    target = _number(path, "routing.target_precision", routing.get("target_precision", DEFAULT_TARGET_PRECISION),
                     lo=0, hi=1, lo_open=True)
    watch = _number(path, "routing.watch_probability", routing.get("watch_probability", 0.10), lo=0, hi=1,
                    lo_open=True)
    queues: dict[str, QueueSettings] = {}
    queues_raw = data.get("queues", {})
    if not isinstance(queues_raw, dict):
        raise _fail(path, "queues", "must hold one table per queue, [queues.NAME]")
    for qname, q in queues_raw.items():
        if not qname.strip():
            raise _fail(path, "queues", "a queue name is empty")
        if not isinstance(q, dict):
            raise _fail(path, f"queues.{qname}", "must be a table")
        _check_keys(path, text, ["queues", qname], q, QUEUE_KEYS)
        key = f"queues.{qname}"
        cutoff = q.get("cutoff")
        words = q.get("watch_words", [])
        if not isinstance(words, list) or not all(isinstance(w, str) and w.strip() for w in words):
            raise _fail(path, f"{key}.watch_words", "must be a list of non-empty words")
        queues[qname] = QueueSettings(
            target_precision=_number(path, f"{key}.target_precision", q.get("target_precision", target),
                                     lo=0, hi=1, lo_open=True),
            never_auto=_flag(path, f"{key}.never_auto", q.get("never_auto", False)),
            cutoff=None if cutoff is None else _number(path, f"{key}.cutoff", cutoff, lo=0, hi=1),
            watch_words=tuple(" ".join(w.split()).casefold() for w in words),
        )
    desk = data.get("desk", {})
    if not isinstance(desk, dict):
        raise _fail(path, "desk", "must be a table")
    _check_keys(path, text, ["desk"], desk, DESK_KEYS)
    reviewer = desk.get("reviewer")
    if reviewer is not None and (not isinstance(reviewer, str) or not reviewer.strip()):
        raise _fail(path, "desk.reviewer", f"must be a name in quotes, not {reviewer!r}")
    max_text = dat.get("max_text_chars", 20_000)
    if isinstance(max_text, bool) or not isinstance(max_text, int) or max_text < 1:
        raise _fail(path, "data.max_text_chars", f"must be a whole number >= 1, not {max_text!r}")
    return Config(
        schema=schema,
        model=model,
        queues=queues,
        target_precision=target,
        max_text_chars=max_text,
        watch_probability=watch,
        labels=_labels_map(path, data.get("labels", {})),
        reviewer=" ".join(reviewer.split()) if reviewer is not None else None,
    )


def load_config(path: Path) -> Config:
    """Read `triage.toml`."""
    if not path.exists():
        raise ConfigError(f"{path}: no config here; run `triage init --from FILE` or `triage demo` first")
    try:
        text = path.read_text(encoding="utf-8")
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return config_from_dict(data, path, text)


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    s = str(v).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{s}"'


def _toml_key(k: str) -> str:
    return k if k.replace("_", "").replace("-", "").isalnum() else _toml_value(k)


def dump_config(cfg: Config, comments: dict[str, str] | None = None) -> str:
    """Render a Config as TOML; `comments` maps a field name to a note written above it (why it was inferred)."""
    comments = comments or {}
    s = cfg.schema
    out = ["# triage workspace config: review the field roles, then run `triage import` and `triage train`.", ""]
    out += ["[data]", f"id = {_toml_value(s.id)}", f"label = {_toml_value(s.label)}"]
    if s.time:
        out.append(f"time = {_toml_value(s.time)}")
    out += [f"max_text_chars = {cfg.max_text_chars}", ""]
    for f in s.fields:
        if f.name in comments:
            out.append(f"# {comments[f.name]}")
        out.append(f"[fields.{_toml_key(f.name)}]")
        out.append(f"role = {_toml_value(f.role.value)}")
        if f.role is FieldRole.TEXT:
            out.append(f"weight = {f.weight!r}")
            out.append(f"pieces = {_toml_value(f.pieces)}")
        if f.role is FieldRole.NUMBER:
            out.append(f"bins = {f.bins}")
            if f.thousands:
                out.append(f"thousands = {_toml_value(f.thousands)}")
        out.append("")
    out.append("[model]")
    for k in ModelSettings.__dataclass_fields__:
        out.append(f"{k} = {_toml_value(getattr(cfg.model, k))}")
    out += ["", "[routing]", f"target_precision = {cfg.target_precision!r}",
            "# items giving a never-auto queue at least this probability are held for a person",
            f"watch_probability = {cfg.watch_probability!r}", ""]
    for qname, q in cfg.queues.items():
        if f"queues.{qname}" in comments:
            out.append(f"# {comments[f'queues.{qname}']}")
        out.append(f"[queues.{_toml_key(qname)}]")
        out.append(f"target_precision = {q.target_precision!r}")
        out.append(f"never_auto = {_toml_value(q.never_auto)}")
        note = comments.get(f"queues.{qname}.watch_words")
        if note and not q.watch_words:
            # proposals stay commented out: a person reviews them before they hold items
            out.append(f"# {note}")
            proposal = note.split("] ", 1)[0].removeprefix("suggested ") + "]" if note.startswith(
                "suggested watch_words = [") else None
            if proposal:
                out.append(f"# {proposal}")
        if q.cutoff is not None:
            out.append(f"cutoff = {q.cutoff!r}")
        if q.watch_words:
            out.append("watch_words = [" + ", ".join(_toml_value(w) for w in q.watch_words) + "]")
        out.append("")
    if cfg.labels:
        out.append("[labels]")
        out += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in cfg.labels.items()]
        out.append("")
    if cfg.reviewer is not None:
        out += ["[desk]", f"reviewer = {_toml_value(cfg.reviewer)}", ""]
    return "\n".join(out)


def _header_parts(line: str) -> list[str] | None:
    """The dotted parts of a `[table]` header line (quotes and a trailing comment allowed), else None."""
    stripped = line.strip()
    if not stripped.startswith("[") or stripped.startswith("[["):
        return None
    try:
        parsed = tomllib.loads(stripped + "\n")
    except tomllib.TOMLDecodeError:
        return None
    parts: list[str] = []
    while isinstance(parsed, dict) and len(parsed) == 1:
        (k, parsed), = parsed.items()
        parts.append(k)
    return parts


def update_config_text(text: str, updates: dict[tuple[str, str], Any]) -> str:
    """Set `key = value` in a table of a TOML text, keeping every comment and every other line as it is.

    A table is named by its dotted path ("model", "fields.Job Title"); headers are matched by meaning, so quoted
    names and trailing comments are found. A key not yet in its table is added under the header; a table not
    yet in the text is added at the end. Written by hand because the standard library reads TOML but cannot
    write it, and a rewrite from the parsed config would drop the comments a person put there."""
    lines = text.splitlines()
    for (table, key), value in updates.items():
        rendered = f"{_toml_key(key)} = {_toml_value(value)}"
        path = table.split(".", 1) if table.startswith("fields.") or table.startswith("queues.") else [table]
        start = next((i for i, ln in enumerate(lines) if _header_parts(ln) == path), None)
        if start is None:
            lines += ["", "[" + ".".join(_toml_key(p) for p in path) + "]", rendered]
            continue
        end = next((i for i in range(start + 1, len(lines)) if _header_parts(lines[i]) is not None), len(lines))
        for i in range(start + 1, end):
            stripped = lines[i].lstrip()
            if not stripped.startswith("#") and "=" in stripped and \
                    stripped.split("=", 1)[0].strip().strip('"') == key:
                lines[i] = rendered
                break
        else:
            lines.insert(start + 1, rendered)
    return "\n".join(lines) + "\n"


def write_config_atomically(path: Path, text: str) -> None:
    """Replace the config file in one step (temporary file, fsync, rename): never half a config."""
    import os
    import tempfile

    config_from_dict(tomllib.loads(text), path, text)  # refuse to write what would not load
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        if path.exists():
            os.chmod(tmp, path.stat().st_mode & 0o7777)  # keep the file's permissions, not mkstemp's 0600
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
