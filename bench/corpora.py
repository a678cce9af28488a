"""Public multi-queue corpora for the quality benchmark, built from Debian packages on this machine.

    .venv/bin/python bench/corpora.py [--cache bench/.cache]

Writes one CSV per corpus into the cache folder (never committed: see .gitignore) and prints where:

- `fortunes.csv`: Debian's package `fortunes` (`apt-get install fortunes`), every category file under
  /usr/share/games/fortunes, one cookie a row (cookies are separated by lines holding "%"). Columns: id, text,
  category (the file name, i.e. the queue).
- `debian_packages.csv`: Debian's own package index, as `apt-cache dumpavail` prints it after `apt-get update`
  (the `Packages` files of the configured archive). One binary package a row. Columns: id, name (the package name,
  a short code-like field), summary (the one-line Description), priority, architecture, maintainer_domain (the
  part of the maintainer's address after "@"), multi_arch, installed_kb (a number), section (the queue). The
  `Tag` field is left out on purpose: its debtags name the section outright (e.g. "devel::lang:python").
  Sections with fewer than MIN_PER_QUEUE packages are dropped (a stratified three-way split needs a few items of
  every queue in each part); a component prefix ("contrib/", "non-free/") is dropped from the section name.

Both are read from the files the Debian packages install; nothing here is invented.
"""

from __future__ import annotations

import argparse
import csv
import subprocess
import sys
from collections import Counter
from pathlib import Path

FORTUNES = Path("/usr/share/games/fortunes")
CACHE = Path(__file__).resolve().parent / ".cache"
MIN_PER_QUEUE = 30
DEBIAN_COLUMNS = ("id", "name", "summary", "priority", "architecture", "maintainer_domain", "multi_arch",
                  "installed_kb", "section")


class CorpusMissing(RuntimeError):
    """The Debian package or index a corpus is read from is not on this machine; the message says how to get it."""


def cookies(path: Path) -> list[str]:
    """The cookies of one fortunes file: blocks separated by lines holding only '%'."""
    out, cur = [], []
    for line in path.read_text(encoding="utf-8", errors="replace").splitlines():
        if line.strip() == "%":
            out.append("\n".join(cur).strip())
            cur = []
        else:
            cur.append(line)
    out.append("\n".join(cur).strip())
    return [c for c in out if c]


def fortunes_rows(root: Path = FORTUNES) -> list[dict[str, str]]:
    """Every cookie of every category file (files without an extension: `x.dat` and `x.u8` are indexes)."""
    if not root.is_dir():
        raise CorpusMissing(f"{root} is absent: `apt-get install fortunes`")
    rows = []
    for path in sorted(p for p in root.iterdir() if p.is_file() and "." not in p.name):
        for i, text in enumerate(cookies(path)):
            rows.append({"id": f"{path.name}-{i}", "text": text, "category": path.name})
    return rows


def _stanzas(text: str) -> list[dict[str, str]]:
    """RFC 822-like stanzas of a Packages listing; continuation lines are joined to their field."""
    out: list[dict[str, str]] = []
    cur: dict[str, str] = {}
    key = None
    for line in text.splitlines():
        if not line.strip():
            if cur:
                out.append(cur)
            cur, key = {}, None
        elif line[0] in " \t" and key is not None:
            cur[key] += "\n" + line.strip()
        elif ":" in line:
            key, _, value = line.partition(":")
            cur[key] = value.strip()
    if cur:
        out.append(cur)
    return out


def debian_rows(listing: str | None = None) -> list[dict[str, str]]:
    """One row per binary package of `apt-cache dumpavail`, queues with >= MIN_PER_QUEUE packages only."""
    if listing is None:
        try:
            listing = subprocess.run(["apt-cache", "dumpavail"], check=True, capture_output=True,
                                     text=True).stdout
        except (OSError, subprocess.CalledProcessError) as e:
            raise CorpusMissing(f"`apt-cache dumpavail` failed ({e}); on Debian run `apt-get update` first") from e
    seen: set[str] = set()
    rows = []
    for st in _stanzas(listing):
        name, section = st.get("Package"), st.get("Section")
        if not name or not section or name in seen:
            continue
        seen.add(name)
        maint = st.get("Maintainer", "")
        domain = maint.rsplit("@", 1)[1].rstrip(">").strip().lower() if "@" in maint else ""
        rows.append({"id": name, "name": name, "summary": st.get("Description", "").split("\n")[0],
                     "priority": st.get("Priority", ""), "architecture": st.get("Architecture", ""),
                     "maintainer_domain": domain, "multi_arch": st.get("Multi-Arch", ""),
                     "installed_kb": st.get("Installed-Size", ""), "section": section.rsplit("/", 1)[-1]})
    if len(rows) < 1000:
        raise CorpusMissing(f"`apt-cache dumpavail` listed {len(rows)} packages; run `apt-get update` first")
    sizes = Counter(r["section"] for r in rows)
    return [r for r in rows if sizes[r["section"]] >= MIN_PER_QUEUE]


def write_csv(rows: list[dict[str, str]], path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    tmp.replace(path)
    return path


def build(cache: Path = CACHE) -> dict[str, Path]:
    """Write both CSVs (rebuilt each time: they are cheap) and return their paths by corpus name."""
    return {"fortunes": write_csv(fortunes_rows(), cache / "fortunes.csv"),
            "debian": write_csv(debian_rows(), cache / "debian_packages.csv")}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--cache", type=Path, default=CACHE)
    args = ap.parse_args(argv)
    try:
        paths = build(args.cache)
    except CorpusMissing as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    for name, path in paths.items():
        with path.open(encoding="utf-8") as fh:
            n = sum(1 for _ in csv.reader(fh)) - 1
        print(f"{name}: {path} ({n} rows)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
