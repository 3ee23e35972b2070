"""The command line: parse options, build a Config, call the API, print a report."""
from __future__ import annotations

import os
import sys

import click

from . import __version__
from .config import ConfigError

FORMATS = ("text", "json", "sarif", "html")


def _common(f):
    opts = [
        click.argument("paths", nargs=-1, type=click.Path()),
        click.option("--format", "fmt", type=click.Choice(FORMATS), default="text", show_default=True, help="Report format."),
        click.option("--output", type=click.Path(dir_okay=False, writable=True), help="Write the report to this file."),
        click.option("--rule", "rules", multiple=True, metavar="ID", help="Run only this rule (repeatable)."),
        click.option("--skip", "skip", multiple=True, metavar="ID", help="Do not run this rule (repeatable)."),
        click.option("--changed-since", metavar="REF", help="Only findings on lines changed since the git revision REF."),
        click.option("--jobs", type=click.IntRange(min=1), help="Worker processes (default: one per CPU)."),
        click.option("--config", "config_file", type=click.Path(exists=True, dir_okay=False), help="Configuration file (default: nearest pyproject.toml with [tool.nanproof])."),
    ]
    for o in reversed(opts):
        f = o(f)
    return f


def _config(paths, config_file, **cli):
    from .config import build

    try:
        return build(list(paths), config_file, **cli)
    except ConfigError as e:
        raise click.UsageError(str(e)) from None


def _color(output: str | None, stream=None) -> bool:
    stream = stream or sys.stdout
    return output is None and stream.isatty() and "NO_COLOR" not in os.environ


def _render(result, fmt: str, output: str | None, to_stderr: bool = False, prefix: str = "", **kw) -> None:
    from importlib import import_module

    report = import_module(f"nanproof.report.{fmt}")
    text = prefix + report.render(result, color=_color(output, sys.stderr if to_stderr else None), **kw)
    if output:
        with open(output, "w", encoding="utf-8") as fh:
            fh.write(text)
    else:
        click.echo(text, nl=False, err=to_stderr)


def _progress():
    """A progress bar on standard error for long runs on a terminal, else nothing."""
    if not sys.stderr.isatty():
        return None, None
    from .report.progress import Bar

    bar = Bar()
    return bar.update, bar.close


def _missing_paths(paths) -> None:
    missing = [p for p in paths if p != "-" and not os.path.exists(p)]
    if missing:
        raise click.UsageError(f"no such file or folder: {', '.join(missing)}")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="nanproof")
def cli() -> None:
    """Find numerically unstable softmax, log-sum-exp, cross-entropy and sigmoid code."""


def _analysed(paths, changed_since, run):
    """``run(progress)`` with a progress bar on a terminal; a REF that git does not know
    fails (in ``api.scan``) before any analysis, even where nothing would be found."""
    update, close = _progress()
    try:
        return run(update)
    except ConfigError as e:  # gitdiff.GitError: not a git repository, unknown REF
        raise click.UsageError(str(e)) from None
    finally:
        if close:
            close()


@cli.command()
@_common
def scan(paths, fmt, output, rules, skip, changed_since, jobs, config_file):
    """Analyse files and folders (default: the current folder) and report findings."""
    from .api import scan as run_scan

    paths = paths or (".",)
    _missing_paths(paths)
    config = _config(paths, config_file, rules=rules, skip=skip, changed_since=changed_since, jobs=jobs)
    result = _analysed(paths, changed_since, lambda update: run_scan(list(paths), config, progress=update))
    _render(result, fmt, output)
    sys.exit(result.exit_code)


@cli.command()
@_common
@click.option("--include-review", is_flag=True, help="Also apply the `review` rewrites (imports, another API, an inferred axis).")
@click.option("--diff", "diff_only", is_flag=True, help="Print the rewrites as a unified diff on standard output and write nothing.")
def fix(paths, fmt, output, rules, skip, changed_since, jobs, config_file, include_review, diff_only):
    """Apply the automatic rewrites in place (or print them as a diff), then report what
    is left. `-` fixes standard input and prints the fixed source."""
    from .fix import fix_bytes, fix_paths

    paths = paths or (".",)
    _missing_paths(paths)
    if "-" in paths and (len(paths) > 1 or changed_since):
        raise click.UsageError("fix reads standard input (`-`) alone, without other paths or --changed-since")
    config = _config(paths, config_file, rules=rules, skip=skip, changed_since=changed_since, jobs=jobs, include_review=include_review)
    data = sys.stdin.buffer.read() if paths == ("-",) else None
    if data is not None:
        result = fix_bytes(data, config, include_review, diff_only)
    else:
        result = _analysed(paths, changed_since, lambda update: fix_paths(list(paths), config, include_review, diff_only, update))
    _show_fix(result, fmt, output, diff_only, data)
    sys.exit(result.exit_code)


def _show_fix(result, fmt: str, output: str | None, diff_only: bool, stdin: bytes | None) -> None:
    """Standard output gets the patch (``--diff``), the fixed source (``-``) or the
    report; whatever else there is goes to standard error, so ``fix --diff > x.patch``
    and ``fix - < a.py > b.py`` hold nothing but the patch or the source."""
    from .report.diff import summary, unified

    out = sys.stdout.buffer
    notes = summary(result)
    if diff_only:
        out.write(unified(result))
    elif stdin is not None:
        out.write(result.changes[0].after if result.changes else stdin)
    out.flush()
    if diff_only or stdin is not None or fmt != "text" or output:
        click.echo(notes, nl=False, err=True)
        _render(result.left, fmt, output, to_stderr=diff_only or stdin is not None, sources={c.path: list(c.lines) for c in result.changes})
    else:
        _render(result.left, fmt, output, prefix=notes + "\n" if notes else "")


@cli.command()
@click.argument("rule_id", metavar="RULE")
def explain(rule_id):
    """Show a rule's page: why it fails, a failing input, the rewrite, the fix kind."""
    from .registry import get, known_ids

    if rule_id not in known_ids():
        raise click.UsageError(f"unknown rule id {rule_id!r}; `nanproof rules` lists them")
    rule = get(rule_id)
    head = f"{rule.id}  ({rule.family}, {rule.severity}, fix: {rule.fix or 'suggestion only'})\n\n"
    text = rule.page()
    if sys.stdout.isatty() and "NO_COLOR" not in os.environ:
        from rich.console import Console
        from rich.markdown import Markdown

        Console().print(head)
        Console().print(Markdown(text))
    else:
        click.echo(head + text)


@cli.command("rules")
def rules_cmd():
    """List every rule: id, family, severity and fix kind."""
    from .registry import all_rules

    rows = [(r.id, r.family, r.severity, r.fix or "-", r.summary) for r in all_rules()]
    widths = [max(len(row[i]) for row in rows + [("id", "family", "severity", "fix", "")]) for i in range(4)]
    click.echo("  ".join(h.ljust(w) for h, w in zip(("id", "family", "severity", "fix"), widths)) + "  summary")
    for row in rows:
        click.echo("  ".join(c.ljust(w) for c, w in zip(row, widths)) + "  " + row[4])


def main() -> None:
    try:
        cli.main(standalone_mode=False)
    except click.exceptions.Exit as e:
        sys.exit(e.exit_code)
    except click.UsageError as e:
        e.show()
        sys.exit(2)
    except click.Abort:
        click.echo("Aborted.", err=True)
        sys.exit(2)
    except click.ClickException as e:
        e.show()
        sys.exit(2)
