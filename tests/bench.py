"""Benchmark of nanproof on a corpus of real code (run by hand; pytest does not collect it).

    python tests/bench.py                  # stdlib + scipy + scikit-learn sources (~1.3M lines)
    python tests/bench.py --quick          # standard library only, a fast check
    python tests/bench.py --skip-libcst --cache /tmp/corpus

The corpus is code nobody on the project wrote: the running interpreter's standard library
(test/tests folders and site-packages left out) and the .py files of the scipy and
scikit-learn wheels, fetched from PyPI with `pip download` and unpacked under the cache
(default ~/.cache/nanproof-bench).  Without network the run goes on with the standard
library alone and says so.

One run prints: the corpus size; the time of `ast.parse` over every file (the baseline,
sources read into memory first); `libcst.parse_module` over the same files, in a worker
subprocess with a wall-clock limit per file (files that raise or run out of time are counted
and skipped); `nanproof scan --jobs 1` and `--jobs 2` over the corpus folders as
subprocesses; the start-up latency of scanning one small file against `python -c pass`;
and the findings and problems the scan reported.  Timings drift ~15% between runs: compare
ratios measured within one run.
"""
from __future__ import annotations

import argparse
import ast
import collections
import io
import json
import os
import queue
import shutil
import statistics
import subprocess
import sys
import sysconfig
import tempfile
import threading
import tokenize
import warnings
import zipfile
from pathlib import Path
from time import perf_counter

SKIP_DIRS = {"test", "tests", "idle_test", "site-packages", "__pycache__"}
DONE_MARK = ".complete"
LIBCST_START_LIMIT = 120.0  # seconds for the worker to import libcst and read the files
SCAN_LIMIT = 3600.0  # seconds for one whole-corpus scan: far above any sane run


def package_pins() -> dict[str, str]:
    """Versions that have wheels for the running Python.

    scipy 1.17.1 and scikit-learn 1.9.1 are the newest on PyPI (`pip index versions`) and
    need Python >= 3.11; for 3.10 the last releases supporting it are, from memory,
    scipy 1.15.3 and scikit-learn 1.7.2.
    """
    if sys.version_info >= (3, 11):
        return {"scipy": "1.17.1", "scikit-learn": "1.9.1"}
    return {"scipy": "1.15.3", "scikit-learn": "1.7.2"}


# ---------------------------------------------------------------- corpus
def fill_dir(dest: Path, populate) -> Path:
    """Build dest once: populate a scratch folder, then rename it (a killed run leaves no half corpus)."""
    if (dest / DONE_MARK).exists():
        return dest
    scratch = dest.with_name(dest.name + ".partial")
    shutil.rmtree(scratch, ignore_errors=True)
    scratch.mkdir(parents=True)
    populate(scratch)
    (scratch / DONE_MARK).write_text("")
    shutil.rmtree(dest, ignore_errors=True)
    scratch.rename(dest)
    return dest


def copy_stdlib(dest: Path) -> None:
    root = Path(sysconfig.get_paths()["stdlib"])
    for folder, subdirs, files in os.walk(root):
        subdirs[:] = sorted(d for d in subdirs if d not in SKIP_DIRS)
        for name in files:
            if name.endswith(".py"):
                source = Path(folder, name)
                target = dest / source.relative_to(root)
                target.parent.mkdir(parents=True, exist_ok=True)
                shutil.copyfile(source, target)


def unpack_py(wheel: Path, dest: Path) -> None:
    with zipfile.ZipFile(wheel) as archive:
        for name in archive.namelist():
            parts = Path(name).parts
            if name.endswith(".py") and ".." not in parts and not Path(name).is_absolute():
                target = dest.joinpath(*parts)
                target.parent.mkdir(parents=True, exist_ok=True)
                target.write_bytes(archive.read(name))


def fetch_packages(cache: Path) -> tuple[list[Path], str]:
    """Unpacked package folders, and a note saying what went wrong (empty when nothing did)."""
    pins = package_pins()
    dirs = {name: cache / f"{name}-{version}" for name, version in pins.items()}
    missing = [name for name, folder in dirs.items() if not (folder / DONE_MARK).exists()]
    if missing:
        wheels = cache / "wheels"
        command = [sys.executable, "-m", "pip", "download", "--no-deps", "--only-binary=:all:",
                   "--disable-pip-version-check", "-q", "-d", str(wheels)]
        command += [f"{name}=={pins[name]}" for name in missing]
        print(f"downloading {', '.join(f'{n}=={pins[n]}' for n in missing)} ...", flush=True)
        try:
            done = subprocess.run(command, capture_output=True, text=True, timeout=1200)
        except subprocess.TimeoutExpired:
            return [], "pip download timed out"
        if done.returncode != 0:
            last = (done.stderr.strip().splitlines() or ["no message"])[-1]
            return [], f"pip download failed ({last})"
        for name in missing:
            stem = f"{name.replace('-', '_')}-{pins[name]}-"
            wheel = next(p for p in sorted(wheels.glob("*.whl")) if p.name.startswith(stem))
            fill_dir(dirs[name], lambda scratch, w=wheel: unpack_py(w, scratch))
    return list(dirs.values()), ""


def build_corpus(cache: Path, quick: bool) -> list[Path]:
    version = ".".join(map(str, sys.version_info[:3]))
    dirs = [fill_dir(cache / f"stdlib-{version}", copy_stdlib)]
    if quick:
        print("--quick: standard library only")
        return dirs
    packages, note = fetch_packages(cache)
    if note:
        print(f"NOTE: {note}; going on with the standard library alone")
    return dirs + packages


def read_source(path: Path) -> str:
    """Decode as tokenize.open does: BOM or coding cookie, universal newlines."""
    data = path.read_bytes()
    encoding, _ = tokenize.detect_encoding(io.BytesIO(data).readline)
    return io.TextIOWrapper(io.BytesIO(data), encoding, line_buffering=True).read()


def load(dirs: list[Path]) -> tuple[dict[Path, str], list[str]]:
    sources, unreadable = {}, []
    for folder in dirs:
        for path in sorted(folder.rglob("*.py")):
            try:
                sources[path] = read_source(path)
            except (OSError, SyntaxError, UnicodeDecodeError, LookupError) as exc:
                unreadable.append(f"{path}: {type(exc).__name__}")
    return sources, unreadable


def count_lines(text: str) -> int:
    return text.count("\n") + (1 if text and not text.endswith("\n") else 0)


# ---------------------------------------------------------------- parsers
def time_ast(sources: dict[Path, str]) -> tuple[dict[Path, float], list[str]]:
    """Seconds per file for ast.parse; the files it rejects are left out and listed."""
    seconds, rejected = {}, []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # SyntaxWarning on old escapes is not our concern
        for path, text in sources.items():
            start = perf_counter()
            try:
                ast.parse(text, filename=str(path))
            except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
                rejected.append(f"{path}: {type(exc).__name__}")
                continue
            seconds[path] = perf_counter() - start
    return seconds, rejected


def libcst_worker(list_file: str, first: int) -> int:
    """Child side: parse each listed file from index `first`, one result line per file."""
    import libcst

    paths = Path(list_file).read_text().splitlines()[first:]
    texts = [read_source(Path(p)) for p in paths]
    print("ready", flush=True)
    for text in texts:
        start = perf_counter()
        try:
            libcst.parse_module(text)
        except Exception as exc:  # any failure of the parser is a result to count
            reason = (str(exc).strip().splitlines() or [""])[0][:100]
            print(f"err\t{type(exc).__name__}: {reason}".replace("\n", " "), flush=True)
            continue
        print(f"ok\t{perf_counter() - start!r}", flush=True)
    return 0


def pump(stream, lines: queue.Queue) -> None:
    for line in stream:
        lines.put(line.rstrip("\n"))
    lines.put(None)


def run_libcst_worker(list_file: Path, paths: list[Path], first: int, limit: float,
                      seconds: dict, skipped: list) -> int:
    """Run one worker from `first`; return where the next worker must start."""
    command = [sys.executable, __file__, "--libcst-worker", str(list_file), str(first)]
    child = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    lines: queue.Queue = queue.Queue()
    threading.Thread(target=pump, args=(child.stdout, lines), daemon=True).start()
    index = first
    try:
        if lines.get(timeout=LIBCST_START_LIMIT) != "ready":
            child.kill()
            raise RuntimeError(f"libcst worker did not start: {child.stderr.read().strip()[-300:]}")
        while index < len(paths):
            line = lines.get(timeout=limit)
            if line is None:  # a native crash ends the worker: count the file, go on
                skipped.append(f"{paths[index]}: worker died (exit {child.wait()})")
                return index + 1
            kind, value = line.split("\t", 1)
            if kind == "ok":
                seconds[paths[index]] = float(value)
            else:
                skipped.append(f"{paths[index]}: {value}")
            index += 1
    except queue.Empty:
        skipped.append(f"{paths[index]}: over the {limit:g} s limit")
        return index + 1
    finally:
        child.kill()
        child.wait()
    return index


def time_libcst(paths: list[Path], limit: float) -> tuple[dict[Path, float], list[str]]:
    seconds: dict[Path, float] = {}
    skipped: list[str] = []
    with tempfile.TemporaryDirectory() as tmp:
        list_file = Path(tmp, "files.txt")
        list_file.write_text("".join(f"{p}\n" for p in paths))
        first = 0
        while first < len(paths):
            first = run_libcst_worker(list_file, paths, first, limit, seconds, skipped)
    return seconds, skipped


# ---------------------------------------------------------------- nanproof
def nanproof_command() -> list[str]:
    """The console script beside the interpreter (what a hook runs), else `python -m nanproof`."""
    script = Path(sys.executable).with_name("nanproof")
    return [str(script)] if script.exists() else [sys.executable, "-m", "nanproof"]


def run_scan(dirs: list[Path], jobs: int, output: Path) -> tuple[float, dict]:
    command = nanproof_command() + ["scan", "--jobs", str(jobs), "--format", "json",
                                    "--output", str(output), *map(str, dirs)]
    start = perf_counter()
    done = subprocess.run(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                          text=True, timeout=SCAN_LIMIT)
    elapsed = perf_counter() - start
    # 1 (findings) and 3 (problems) are normal on a corpus; a crash also exits 1, unwritten report
    if done.returncode not in (0, 1, 3) or not output.exists():
        tail = " | ".join(done.stderr.strip().splitlines()[-3:])
        raise RuntimeError(f"nanproof scan exited {done.returncode}: {tail}")
    return elapsed, json.loads(output.read_text(encoding="utf-8"))


def median_wall(command: list[str], runs: int = 5) -> float:
    subprocess.run(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)  # warm caches
    samples = []
    for _ in range(runs):
        start = perf_counter()
        subprocess.run(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        samples.append(perf_counter() - start)
    return statistics.median(samples)


# Two standard-library files present in every CPython 3: a short one with no exp/log call
# (the usual staged file, which the prefilter drops) and one that calls exp and log, so the
# rules run on it.
LATENCY_FILES = ("colorsys.py", "random.py")


# ---------------------------------------------------------------- report
def row(label: str, seconds: float, base: float, lines: int) -> None:
    ratio = f"{seconds / base:8.2f}x" if base else "        -"
    print(f"{label:<34}{seconds:9.2f} s {ratio} {lines / seconds / 1000:9.1f}k lines/s", flush=True)


def show_list(title: str, items: list[str], most: int = 8) -> None:
    if items:
        print(f"    {title}: {len(items)}")
        for item in items[:most]:
            print(f"      {item}")
        if len(items) > most:
            print(f"      ... and {len(items) - most} more")


def report_corpus(dirs, sources, unreadable) -> None:
    print("\ncorpus:")
    for folder in dirs:
        texts = [t for p, t in sources.items() if p.is_relative_to(folder)]
        print(f"  {str(folder):<56}{len(texts):7,} files {sum(map(count_lines, texts)):11,} lines")
    total = sum(map(count_lines, sources.values()))
    print(f"  {'total':<56}{len(sources):7,} files {total:11,} lines")
    show_list("not decodable, left out", unreadable)


def report_libcst(sources, ast_seconds, limit) -> None:
    paths = list(ast_seconds)
    seconds, skipped = time_libcst(paths, limit)
    lines = sum(count_lines(sources[p]) for p in seconds)
    base = sum(ast_seconds[p] for p in seconds)  # ast on the same files libcst parsed
    row("(b) libcst.parse_module", sum(seconds.values()), base, lines)
    print(f"    ratio and lines/s over the {len(seconds):,} files libcst parsed ({lines:,} lines)")
    show_list(f"skipped (raised, crashed or over {limit:g} s)", skipped)


def report_findings(result: dict, other: dict, corpus_files: int) -> None:
    findings, problems = result.get("findings", []), result.get("problems", [])
    scanned = result.get("summary", {}).get("files", "?")
    print(f"\n(f) scan report (--jobs 2): {scanned} files, "
          f"{len(findings):,} findings, {len(problems):,} problems")
    if scanned != corpus_files:
        print(f"    the corpus holds {corpus_files} files: folder discovery left the others out")
    if (len(other.get("findings", [])), len(other.get("problems", []))) != (len(findings), len(problems)):
        print("    WARNING: --jobs 1 and --jobs 2 reported different counts")
    for rule, count in collections.Counter(f["rule"] for f in findings).most_common(10):
        print(f"    {count:7,}  {rule}")
    show_list("problems", [f"{p['path']}: {p['message']}" for p in problems], most=5)


def report_latency(sources, stdlib: Path) -> None:
    bare = median_wall([sys.executable, "-c", "pass"])
    print("\n(e) one-file latency, median of 5 (after one warm-up run each):")
    print(f"    {'python -c pass':<36}{bare * 1000:7.0f} ms")
    for name in LATENCY_FILES:
        target = stdlib / name
        scan = median_wall(nanproof_command() + ["scan", str(target)])
        label = f"nanproof scan {name} ({count_lines(sources[target])} lines)"
        print(f"    {label:<36}{scan * 1000:7.0f} ms = {(scan - bare) * 1000:4.0f} ms above python -c pass")


def parse_args(argv: list[str]) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cache", type=Path, default=Path.home() / ".cache" / "nanproof-bench",
                        help="corpus folder (default: ~/.cache/nanproof-bench)")
    parser.add_argument("--quick", action="store_true", help="standard library only")
    parser.add_argument("--skip-libcst", action="store_true", help="do not time libcst")
    parser.add_argument("--libcst-limit", type=float, default=10.0, metavar="SECONDS",
                        help="wall-clock limit for libcst on one file (default 10)")
    parser.add_argument("--libcst-worker", nargs=2, help=argparse.SUPPRESS)
    return parser.parse_args(argv)


def main(argv: list[str]) -> int:
    args = parse_args(argv)
    if args.libcst_worker:
        return libcst_worker(args.libcst_worker[0], int(args.libcst_worker[1]))
    print(f"nanproof benchmark: Python {sys.version.split()[0]}, {os.cpu_count()} CPUs")
    print("Timings drift ~15% between runs; ratios are meaningful only within one run.")
    dirs = build_corpus(args.cache.expanduser().resolve(), args.quick)
    sources, unreadable = load(dirs)
    report_corpus(dirs, sources, unreadable)
    ast_seconds, rejected = time_ast(sources)
    base = sum(ast_seconds.values())
    print(f"\n{'stage (single process unless --jobs)':<34}{'time':>11} {'vs ast':>9}")
    row("(a) ast.parse (baseline)", base, base, sum(count_lines(sources[p]) for p in ast_seconds))
    show_list("rejected by ast.parse, left out of (a) and (b)", rejected)
    if not args.skip_libcst:
        report_libcst(sources, ast_seconds, args.libcst_limit)
    all_lines = sum(map(count_lines, sources.values()))
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for jobs in (1, 2):
            try:
                elapsed, results[jobs] = run_scan(dirs, jobs, Path(tmp, f"scan{jobs}.json"))
            except (RuntimeError, subprocess.TimeoutExpired, ValueError) as exc:
                print(f"ERROR: {exc}")
                return 1
            row(f"({'c' if jobs == 1 else 'd'}) nanproof scan --jobs {jobs}", elapsed, base, all_lines)
    report_latency(sources, dirs[0])
    report_findings(results[2], results[1], len(sources) + len(unreadable))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
