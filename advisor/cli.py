"""Command line: a thin layer over :func:`advisor.audit` and friends.

Exit codes: 0 success; 2 bad option, config or rules file; 3 unreadable or malformed input;
4 nothing left to audit; 5 reports could not be written; 6 history database unusable;
10, 11, 12 a ``--fail-on`` gate tripped; 130 / 143 interrupted by Ctrl-C (SIGINT) / SIGTERM;
1 any other tool error.

Interrupts: SIGTERM is turned into the same exception as Ctrl-C, so the report writer's
rollback runs for both. While the reports are moved into place and the audit is recorded in
the history, both signals are held and acted on right after, so an interrupt leaves either
the previous reports and history or this run's, never a mix.
"""

from __future__ import annotations

import io
import os
import re
import signal
import sys
import threading
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path

import click
from rich.console import Console
from rich.text import Text

from advisor.config import AuditConfig, load_config, validate_config
from advisor.errors import AdvisorError, ConfigError

EPILOG = """\b
Exit codes: 0 done; 2 bad option, config or rules file; 3 unreadable or malformed input;
4 nothing left to audit; 5 reports could not be written; 6 history database unusable;
10/11/12 a --fail-on gate tripped (no-go / go lost / tier dropped); 130/143 interrupted
(Ctrl-C / SIGTERM); 1 other tool errors.
"""

#: Exit codes of an interrupted run (128 + the signal number, as shells report them).
INTERRUPT_CODES = {signal.SIGINT: 130, signal.SIGTERM: 143}


class _Interrupted(KeyboardInterrupt):
    """An interrupt by signal; ``committed`` when it arrived while the reports and the history
    were being committed, so it was held until they were complete."""

    def __init__(self, signum: int, *, committed: bool = False) -> None:
        super().__init__(signal.Signals(signum).name)
        self.signum = signum
        self.committed = committed


def _in_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


@contextmanager
def _sigterm_interrupts():
    """SIGTERM raises like Ctrl-C for the duration, so ``finally`` blocks and the report
    writer's rollback run (by default SIGTERM ends Python without running them)."""
    if not _in_main_thread():
        yield
        return

    def on_term(signum, _frame):
        raise _Interrupted(signum)

    old = signal.signal(signal.SIGTERM, on_term)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


@contextmanager
def _signals_held():
    """Hold SIGINT and SIGTERM while the reports and the history change together; act on a
    held signal once both are complete. Signals the process ignores stay ignored."""
    if not _in_main_thread():
        yield
        return
    got: list[int] = []

    def hold(signum, _frame):
        got.append(signum)

    old = {}
    for sig in (signal.SIGINT, signal.SIGTERM):
        if signal.getsignal(sig) is not signal.SIG_IGN:
            old[sig] = signal.signal(sig, hold)
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
    if got:
        raise _Interrupted(got[0], committed=True)


def _stop(exc: KeyboardInterrupt, out: Path) -> None:
    """Report an interrupt in one line and exit 130 (Ctrl-C) or 143 (SIGTERM)."""
    signum = getattr(exc, "signum", signal.SIGINT)
    name = "SIGTERM" if signum == signal.SIGTERM else "Ctrl-C (SIGINT)"
    if getattr(exc, "committed", False):
        what = (f"after this audit's reports in {out} and its history entry were written in "
                "full")
    else:
        what = (f"before the audit finished: the previous reports in {out} and the history "
                "were left as they were; run the audit again")
    msg = Text("error: ", style="bold red")
    msg.append(f"interrupted by {name} {what}.")
    _stderr_console().print(msg, highlight=False, soft_wrap=True)
    sys.exit(INTERRUPT_CODES.get(signum, 130))


def _console(*, stderr: bool = False) -> Console:
    """A console that honours NO_COLOR with plain text (no colour, bold or other escapes);
    100 columns when not a terminal (unless COLUMNS says otherwise), like audit.txt, so
    piped reports are not cut at rich's default of 80."""
    plain = bool(os.environ.get("NO_COLOR"))
    console = Console(stderr=stderr, no_color=plain, color_system=None if plain else "auto")
    if not console.is_terminal and not os.environ.get("COLUMNS"):
        console.width = 100
    return console


def _stderr_console() -> Console:
    return _console(stderr=True)


def _fail(exc: AdvisorError) -> None:
    # The message is Text, not markup: it quotes config sections ("[columns]") and data.
    msg = Text("error: ", style="bold red")
    msg.append(str(exc))
    _stderr_console().print(msg, highlight=False, soft_wrap=True)
    sys.exit(exc.exit_code)


@click.group(epilog=EPILOG)
@click.version_option(package_name="advisor")
def main() -> None:
    """Weekly readiness audit of a recommendation service's interaction logs.

    \b
    Start with:  advisor audit sample_logs/events --catalog sample_logs/catalog.csv
    """


def _audit_options(f):
    """Options shared by ``audit`` and ``backfill``."""
    opts = [
        click.argument("logs", type=_LogsPath()),
        click.option("--catalog", type=click.Path(exists=True, dir_okay=False, path_type=Path),
                     help="Catalogue file: item id, title, categories, date added, ratings."),
        click.option("--config", "config_file",
                     type=click.Path(dir_okay=False, path_type=Path),
                     help="TOML config: [columns], [catalog], [events], [audit]."),
        click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path),
                     help="TOML rules file that overrides or adds to the shipped rules."),
        click.option("--user-col", help="Log column holding the user id."),
        click.option("--item-col", help="Log column holding the item id."),
        click.option("--time-col", "--ts-col", "time_col",
                     help="Log column holding the timestamp."),
        click.option("--event-col", help="Log column holding the event type."),
        click.option("--value-col", help="Log column holding the value (rating, progress, "
                                         "price)."),
        click.option("--seed", type=int, help="Seed of every random step (default 20261201)."),
        click.option("--backtest/--no-backtest", default=None,
                     help="Run the offline backtest and learning curve (default: on)."),
        click.option("--engine", type=click.Choice(["auto", "duckdb", "pandas", "spark"]),
                     default=None,
                     help="Engine for reading, validation and counting: duckdb (embedded, out "
                          "of core; Parquet and CSV), pandas (in memory, every format) or "
                          "spark (Parquet paths Spark can reach; needs the spark extra and "
                          "Java). Default auto: duckdb, or pandas for input duckdb does not "
                          "read."),
        click.option("--threads", type=click.IntRange(1, 1024), default=None,
                     help="Threads for the duckdb engine, a local Spark and the backtest's "
                          "ranking (default: all cores)."),
        click.option("--spark-master", metavar="URL", default=None,
                     help="Spark master for --engine spark (local[4], spark://host:7077, "
                          "yarn); default: the active session, else local[threads]."),
        click.option("--history", "history_path", type=click.Path(dir_okay=False, path_type=Path),
                     help="History database (default: history.sqlite in --out)."),
        click.option("--no-history", is_flag=True, help="Do not record the audit in the history."),
        click.option("--quiet", is_flag=True,
                     help="Print nothing but errors (files are still written)."),
        click.option("--user-ids", "user_ids", type=click.Choice(["omit", "hashed"]),
                     default="omit", show_default=True,
                     help="User and session ids in the report files (quarantine.csv): left "
                          "out, or replaced by salted hashes (HMAC-SHA256, needs --salt)."),
        click.option("--salt", envvar="ADVISOR_ID_SALT", show_envvar=True, metavar="TEXT",
                     help="Secret key of the --user-ids hashed hashes; never written to a "
                          "report."),
    ]
    for opt in reversed(opts):
        f = opt(f)
    return f


class _LogsPath(click.Path):
    """A local file or folder that must exist, or a URI with a scheme (``s3a://``,
    ``hdfs://``, ``file://``) that only ``--engine spark`` reads and checks itself."""

    def __init__(self):
        super().__init__(exists=True, path_type=Path)

    def convert(self, value, param, ctx):
        if isinstance(value, str) and re.match(r"^[A-Za-z][A-Za-z0-9+.-]*://", value):
            return value
        return super().convert(value, param, ctx)


def _make_config(config_file, rules_file, user_col, item_col, time_col, event_col, value_col,
                 seed, backtest, as_of=None, engine=None, threads=None,
                 spark_master=None) -> AuditConfig:
    cfg = load_config(config_file)
    cols = {k: v for k, v in dict(user=user_col, item=item_col, ts=time_col,
                                  event=event_col, value=value_col).items() if v}
    if cols:
        cfg = replace(cfg, columns=replace(cfg.columns, **cols))
    kw = {}
    if as_of:
        kw["as_of"] = as_of
    if rules_file:
        kw["rules_file"] = str(rules_file)
    if seed is not None:
        kw["seed"] = seed
    if backtest is not None:
        kw["backtest"] = backtest
    if engine is not None:
        kw["engine"] = engine
    if threads is not None:
        kw["threads"] = threads
    if spark_master is not None:
        kw["spark_master"] = spark_master
    cfg = replace(cfg, **kw)
    validate_config(cfg)
    return cfg


def _privacy(user_ids: str, salt: str | None):
    from advisor.report.privacy import id_policy

    return id_policy(user_ids, salt)


def _run_and_write(logs, catalog, cfg, out, *, history_path, no_history, quiet, editorial_rows,
                   privacy):
    """One audit: run, write every report, record it; returns (result, written, previous).

    The HTML report shows the trend including this audit, so the history is read first and
    this audit's entry joins it in memory. The history is recorded once every report is in
    place, with interrupts held, and a failure to record it puts the previous reports back:
    reports and history change together or not at all.
    """
    from advisor.history import (default_history_path, entry_from_result, forecast_readiness,
                                 load_history, record_audit)
    from advisor.pipeline import audit as run_audit
    from advisor.report.files import check_output_folder, write_reports
    from advisor.report.html import render_html
    from advisor.report.terminal import render

    check_output_folder(out)  # before the audit: a read-only --out fails in a second
    progress = None
    status = None
    err = _stderr_console()
    if not quiet and err.is_terminal:
        status = err.status("auditing")
        status.start()
        progress = lambda step: status.update(f"auditing: {step}")  # noqa: E731
    try:
        result = run_audit(logs, catalog=catalog, config=cfg, progress=progress)
        if status is not None:
            status.update("auditing: writing reports")
        path = None if no_history else (history_path or default_history_path(out))
        before = load_history(path) if path is not None and Path(path).exists() else ()
        entry = entry_from_result(result)
        entries = sorted([e for e in before if e.as_of != entry.as_of] + [entry],
                         key=lambda e: e.as_of)
        earlier = [e for e in entries if e.as_of < entry.as_of]
        previous = earlier[-1] if earlier else None
        buf = io.StringIO()
        render(result, Console(file=buf, width=100, color_system=None),
               editorial_rows=editorial_rows, privacy_note=privacy.note)
        html = render_html(result, history=entries if len(entries) > 1 else None,
                           forecast=forecast_readiness(entries) if len(entries) > 1 else None)
        with _signals_held():
            written = write_reports(
                result, out, text=buf.getvalue(), html=html, privacy=privacy,
                then=None if path is None else (lambda: record_audit(result, path)))
    finally:
        if status is not None:
            status.stop()
    return result, written, previous


#: Exit codes of the --fail-on gates (documented in the README).
GATE_CODES = {"no-go": 10, "go-lost": 11, "tier-drop": 12}


def _gate(result, previous, fail_on) -> int:
    """The exit code a pipeline gates on: the first gate in --fail-on that trips, else 0."""
    d = result.decision
    order = [t.id for t in result.rules.tiers]

    def rank(tier):
        return -1 if tier is None else order.index(tier)

    for gate in fail_on:
        if gate == "no-go" and not d.personalised_go:
            return GATE_CODES[gate]
        if (gate == "go-lost" and previous is not None and previous.personalised_go
                and not d.personalised_go):
            return GATE_CODES[gate]
        if (gate == "tier-drop" and previous is not None
                and rank(d.headline_tier) < rank(previous.headline_tier)):
            return GATE_CODES[gate]
    return 0


@main.command(epilog=EPILOG)
@_audit_options
@click.option("--out", type=click.Path(file_okay=False, path_type=Path),
              default=Path("advisor-report"), show_default=True,
              help="Folder that receives every report file.")
@click.option("--as-of", "as_of", metavar="DATE",
              help="Audit the data as it stood at this date (YYYY-MM-DD or ISO datetime, UTC); "
                   "later events are set aside.")
@click.option("--editorial-rows", type=click.IntRange(0, 1000), default=10, show_default=True,
              help="Rows of the editorial list to print (the CSV has all).")
@click.option("--json", "as_json", is_flag=True, help="Print the JSON report instead of text.")
@click.option("--fail-on", "fail_on", multiple=True,
              type=click.Choice(sorted(GATE_CODES)),
              help="Exit non-zero for a pipeline to gate on: no-go (10), go-lost: go last "
                   "audit, no-go now (11), tier-drop: headline tier fell (12). Repeatable.")
def audit(logs, catalog, config_file, rules_file, user_col, item_col, time_col, event_col,
          value_col, seed, backtest, engine, threads, spark_master, history_path, no_history,
          quiet, user_ids, salt, out, as_of, editorial_rows, as_json, fail_on):
    """Audit LOGS (a file or a folder of weekly drops) and write reports to --out.

    \b
    Examples:
      advisor audit sample_logs/events --catalog sample_logs/catalog.csv
      advisor audit plays.parquet --user-col customer --item-col sku --time-col when
      advisor audit logs/ --as-of 2026-10-31 --out reports/2026-10-31
      advisor audit logs/ --fail-on go-lost      # in a weekly job
    """
    from advisor.report.files import to_json
    from advisor.report.terminal import render

    compared = sorted(set(fail_on) & {"go-lost", "tier-drop"})
    if compared and no_history:
        raise click.UsageError(f"--fail-on {' / '.join(compared)} compares with the previous "
                               "audit in the history; drop --no-history or that gate")
    try:
        with _sigterm_interrupts():
            cfg = _make_config(config_file, rules_file, user_col, item_col, time_col,
                               event_col, value_col, seed, backtest, as_of, engine, threads,
                               spark_master)
            privacy = _privacy(user_ids, salt)
            result, written, previous = _run_and_write(
                logs, catalog, cfg, out, history_path=history_path, no_history=no_history,
                quiet=quiet, editorial_rows=editorial_rows, privacy=privacy)
    except AdvisorError as exc:
        _fail(exc)
        return
    except KeyboardInterrupt as exc:
        _stop(exc, out)
        return
    if not quiet:
        if as_json:
            click.echo(to_json(result, privacy=privacy))
        else:
            render(result, _console(), written=[str(out / w) for w in written],
                   editorial_rows=editorial_rows, privacy_note=privacy.note)
    if compared and previous is None:
        _stderr_console().print(Text(f"note: --fail-on {' / '.join(compared)} cannot trip "
                                     "yet: the history has no earlier audit to compare with"))
    code = _gate(result, previous, fail_on)
    if code:
        _stderr_console().print(Text(f"gate tripped: exit {code} (see --fail-on)"))
        sys.exit(code)


def _week_ends(start: str, end: str) -> list[str]:
    """Sundays (ISO week ends) from ``start`` to ``end`` inclusive, as YYYY-MM-DD."""
    import pandas as pd

    try:
        days = pd.date_range(pd.Timestamp(start), pd.Timestamp(end), freq="W-SUN")
    except (ValueError, TypeError) as exc:
        raise ConfigError(f"--from/--to must be dates such as 2026-10-04 ({exc})") from None
    return [d.strftime("%Y-%m-%d") for d in days]


@main.command(epilog=EPILOG)
@_audit_options
@click.option("--from", "start", required=True, metavar="DATE",
              help="First week to audit (its Sunday is the first as-of date).")
@click.option("--to", "end", required=True, metavar="DATE", help="Last week to audit.")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path),
              default=Path("advisor-report"), show_default=True,
              help="Folder for the history; each week's reports go to OUT/weeks/DATE.")
def backfill(logs, catalog, config_file, rules_file, user_col, item_col, time_col, event_col,
             value_col, seed, backtest, engine, threads, spark_master, history_path,
             no_history, quiet, user_ids, salt, start, end, out):
    """Audit every past week from --from to --to (as of each Sunday) and fill the history.

    \b
    Example:
      advisor backfill sample_logs/events --catalog sample_logs/catalog.csv \\
          --from 2026-09-14 --to 2026-11-29
    """
    from advisor.history import default_history_path

    week_out = out
    try:
        with _sigterm_interrupts():
            weeks = _week_ends(start, end)
            if not weeks:
                raise ConfigError(f"no Sunday between --from {start} and --to {end}; widen "
                                  "the range")
            privacy = _privacy(user_ids, salt)
            path = history_path or default_history_path(out)
            base = _make_config(config_file, rules_file, user_col, item_col, time_col,
                                event_col, value_col, seed, backtest, None, engine, threads,
                                spark_master)
            for day in weeks:
                week_out = out / "weeks" / day
                cfg = replace(base, as_of=day)
                result, _, _ = _run_and_write(logs, catalog, cfg, week_out,
                                              history_path=path, no_history=no_history,
                                              quiet=quiet, editorial_rows=10, privacy=privacy)
                if not quiet:
                    d = result.decision
                    click.echo(f"{day}: {d.headline_tier or 'no tier'}; personalised rows "
                               f"{'GO' if d.personalised_go else 'NO-GO'}")
    except AdvisorError as exc:
        _fail(exc)
        return
    except KeyboardInterrupt as exc:
        _stop(exc, week_out)
        return
    if not quiet and not no_history:
        click.echo(f"history: {path} (see `advisor history --history {path}`)")


@main.command(epilog=EPILOG)
@click.option("--history", "history_path", type=click.Path(dir_okay=False, path_type=Path),
              help="History database (default: advisor-report/history.sqlite).")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of text.")
@click.option("--confidence", type=click.FloatRange(0.5, 0.999), default=0.95, show_default=True,
              help="Confidence of the forecast intervals.")
def history(history_path, as_json, confidence):
    """Show the audit history: trend per audit and a readiness forecast with intervals."""
    import json

    from advisor.history import default_history_path, load_history
    from advisor.report.history_view import history_to_dict, render_history

    try:
        entries = load_history(history_path or default_history_path(Path("advisor-report")))
    except AdvisorError as exc:
        _fail(exc)
        return
    if as_json:
        click.echo(json.dumps(history_to_dict(entries, confidence=confidence), indent=2))
    else:
        render_history(entries, _console(), confidence=confidence)


@main.command()
@click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path),
              help="Show the shipped rules with this file applied on top.")
@click.option("--metrics", "show_metrics", is_flag=True,
              help="List the metric names rules can read.")
def rules(rules_file, show_metrics):
    """Show the effective rules: tier, metric, threshold, rationale and source."""
    from advisor.report.rules_view import render_metrics, render_rules
    from advisor.rules.loader import load_rules

    console = _console()
    try:
        rs = load_rules(rules_file)
    except AdvisorError as exc:
        _fail(exc)
        return
    if show_metrics:
        render_metrics(console)
    else:
        render_rules(rs, console)


@main.command()
@click.option("--out", type=click.Path(file_okay=False, path_type=Path),
              default=Path("sample_logs"), show_default=True,
              help="Folder to write the scenario into.")
@click.option("--seed", type=int, default=None, help="Seed (default: the shipped scenario's).")
def sample(out, seed):
    """Regenerate the invented sample scenario (a cooking-class service)."""
    from advisor.scenario import generate_scenario

    kw = {} if seed is None else {"seed": seed}
    try:
        s = generate_scenario(out, **kw)
    except AdvisorError as exc:
        _fail(exc)
        return
    click.echo(f"wrote the sample scenario to {out}: {s.items} classes, {s.users} users, "
               f"{s.events} events over {len(s.event_paths)} weekly files (seed {s.seed})")


if __name__ == "__main__":  # pragma: no cover
    main()
