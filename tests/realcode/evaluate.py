"""Real-code evaluation: precision and recall per rule and per flow on pinned public
repositories, against labels written by reading the code before the analyzer ran.

Not a collected test: it needs the repositories (a local mirror or the network).

    .venv/bin/python tests/realcode/evaluate.py [--only OWNER__NAME] [--show misses,fps,unlabelled]

Labels live in ``labels/OWNER__NAME.tsv`` (no third-party code, only pins and labels):

    # repo: owner/name
    # commit: <40 hex>
    # framework: torch
    # scope: src/ train.py
    path<TAB>line<TAB>rule<TAB>flow<TAB>note

``rule`` is a rule id or ``none`` (a look-alike that must stay quiet). A row whose note
starts with ``post:`` was added after a run, for a finding the pre-run reading missed
and judged right: it counts for precision, never for recall. A finding on no labelled
line is *unlabelled*: the script lists it, and a run with unlabelled findings is not a
valid measurement until each one has a row.
"""
from __future__ import annotations

import argparse
import csv
import io
import os
import subprocess
import sys
import tarfile
from collections import Counter, defaultdict
from dataclasses import dataclass
from pathlib import Path

HERE = Path(__file__).resolve().parent
LABELS = HERE / "labels"
CACHE = Path(os.environ.get("NANPROOF_REALCODE", Path.home() / ".cache" / "nanproof-realcode"))
MIRRORS = [Path("/work/.mirror"), Path("/tmp/realcode")]
FLOWS = ("expr", "stmts", "helper", "method", "param", "class", "module")
CROSS = ("helper", "method", "param", "class", "module")


@dataclass(frozen=True)
class Row:
    path: str
    line: int
    rule: str
    flow: str
    note: str

    @property
    def expected(self) -> bool:
        return self.rule != "none" and not self.note.startswith("post:")


@dataclass
class Corpus:
    name: str
    repo: str
    commit: str
    framework: str
    scope: list[str]
    rows: list[Row]


def load(path: Path) -> Corpus:
    meta, body = {}, []
    for line in path.read_text(encoding="utf-8").splitlines():
        if line.startswith("#"):
            key, _, value = line[1:].partition(":")
            meta[key.strip()] = value.strip()
        elif line.strip() and not line.startswith("path\t"):
            body.append(line)
    rows = []
    for rec in csv.reader(io.StringIO("\n".join(body)), delimiter="\t", quoting=csv.QUOTE_NONE):
        rec = rec + [""] * (5 - len(rec))
        rows.append(Row(rec[0].strip(), int(rec[1]), rec[2].strip(), rec[3].strip(), rec[4].strip()))
    return Corpus(path.stem, meta["repo"], meta["commit"], meta.get("framework", "?"), meta.get("scope", ".").split(), rows)


def checkout(c: Corpus) -> Path:
    """The repository's files at the pinned commit, extracted once into the cache."""
    dest = CACHE / f"{c.name}@{c.commit[:12]}"
    if (dest / ".complete").exists():
        return dest
    dest.mkdir(parents=True, exist_ok=True)
    gitdir = None
    for m in MIRRORS:
        for cand in (m / c.repo.replace("/", "+"), m / c.name):
            if cand.exists():
                gitdir = next((p for p in [cand, *cand.glob("*.git")] if (p / "HEAD").exists() or (p / ".git").exists()), None)
                if gitdir is not None:
                    break
        if gitdir is not None:
            break
    if gitdir is None:
        clone = CACHE / f"{c.name}.git"
        if not clone.exists():
            subprocess.run(["git", "clone", "--bare", "--filter=blob:none", f"https://github.com/{c.repo}", str(clone)], check=True)
        gitdir = clone
    git = ["git", f"--git-dir={gitdir / '.git' if (gitdir / '.git').exists() else gitdir}"]
    data = subprocess.run([*git, "archive", "--format=tar", c.commit], check=True, capture_output=True).stdout
    with tarfile.open(fileobj=io.BytesIO(data)) as tar:
        tar.extractall(dest, filter="data")
    (dest / ".complete").write_text(c.commit)
    return dest


def run(c: Corpus, root: Path):
    from nanproof.api import scan
    from nanproof.config import Config

    cwd = os.getcwd()
    os.chdir(root)
    try:
        return scan([s.rstrip("/") or "." for s in c.scope], Config(jobs=1))
    finally:
        os.chdir(cwd)


def _ratio(a: int, b: int) -> str:
    return f"{a / b:.2f}" if b else "  - "


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", action="append", default=[])
    ap.add_argument("--show", default="misses,fps,unlabelled")
    args = ap.parse_args()
    show = set(args.show.split(","))
    corpora = [load(p) for p in sorted(LABELS.glob("*.tsv")) if not args.only or p.stem in args.only]
    tp_rule, fp_rule, exp_rule, hit_rule = Counter(), Counter(), Counter(), Counter()
    exp_flow, hit_flow, fp_flow = Counter(), Counter(), Counter()
    unlabelled, misses, fps = [], [], []
    files = 0
    for c in corpora:
        root = checkout(c)
        result = run(c, root)
        files += result.files
        for p in result.problems:
            print(f"{c.name}: problem: {p.path}: {p.message}", file=sys.stderr)
        by_line = defaultdict(list)
        for r in c.rows:
            by_line[(r.path, r.line)].append(r)
        matched: set[Row] = set()
        for f in result.findings:
            path = os.path.normpath(f.path)
            lines = range(f.span.line, max(f.span.end_line, f.span.line) + 1)
            rows = [r for ln in lines for r in by_line.get((path, ln), [])]
            right = [r for r in rows if r.rule == f.rule]
            if right:
                tp_rule[f.rule] += 1
                for r in right:
                    matched.add(r)
            elif rows:
                fp_rule[f.rule] += 1
                fp_flow[rows[0].flow] += 1
                fps.append((c.name, path, f.span.line, f.rule, rows[0].rule, rows[0].note))
            else:
                unlabelled.append((c.name, path, f.span.line, f.rule, f.message[:110]))
        for r in c.rows:
            if r.expected:
                exp_rule[r.rule] += 1
                exp_flow[r.flow] += 1
                if r in matched:
                    hit_rule[r.rule] += 1
                    hit_flow[r.flow] += 1
                else:
                    misses.append((c.name, r.path, r.line, r.rule, r.flow, r.note))
        print(f"{c.name:<55} {c.framework:<14} files {result.files:>4}  findings {len(result.findings):>3}", file=sys.stderr)
    print(f"\n{len(corpora)} repositories, {files} files\n")
    print(f"{'rule':<28}{'expected':>9}{'found':>7}{'recall':>8}{'right':>7}{'wrong':>7}{'precision':>11}")
    for rule in sorted(set(exp_rule) | set(tp_rule) | set(fp_rule)):
        print(f"{rule:<28}{exp_rule[rule]:>9}{hit_rule[rule]:>7}{_ratio(hit_rule[rule], exp_rule[rule]):>8}"
              f"{tp_rule[rule]:>7}{fp_rule[rule]:>7}{_ratio(tp_rule[rule], tp_rule[rule] + fp_rule[rule]):>11}")
    print(f"\n{'flow':<28}{'expected':>9}{'found':>7}{'recall':>8}{'wrong':>7}")
    for flow in FLOWS:
        print(f"{flow:<28}{exp_flow[flow]:>9}{hit_flow[flow]:>7}{_ratio(hit_flow[flow], exp_flow[flow]):>8}{fp_flow[flow]:>7}")
    cross_e, cross_h = sum(exp_flow[f] for f in CROSS), sum(hit_flow[f] for f in CROSS)
    tp, fp = sum(tp_rule.values()), sum(fp_rule.values())
    e, h = sum(exp_rule.values()), sum(hit_rule.values())
    print(f"\noverall: precision {_ratio(tp, tp + fp)} ({tp} right, {fp} wrong), recall {_ratio(h, e)} ({h} of {e}), "
          f"cross-function recall {_ratio(cross_h, cross_e)} ({cross_h} of {cross_e}); unlabelled findings: {len(unlabelled)}")
    if "misses" in show and misses:
        print("\nmisses:")
        for m in misses:
            print("  " + "  ".join(map(str, m)))
    if "fps" in show and fps:
        print("\nwrong findings (finding rule, label rule, note):")
        for m in fps:
            print("  " + "  ".join(map(str, m)))
    if "unlabelled" in show and unlabelled:
        print("\nunlabelled findings (give each a row):")
        for m in unlabelled:
            print("  " + "\t".join(map(str, m)))
    return 0 if not unlabelled else 2


if __name__ == "__main__":
    sys.path.insert(0, str(HERE.parents[1] / "src"))
    raise SystemExit(main())
