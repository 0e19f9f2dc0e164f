"""Command line: a thin layer over :func:`advisor.audit` and friends.

Exit codes: 0 success; 2 bad option, config or rules file; 3 unreadable or malformed input;
4 nothing left to audit; 5 reports could not be written; 1 any other tool error.
"""

from __future__ import annotations

import io
import os
import sys
from dataclasses import replace
from pathlib import Path

import click
from rich.console import Console

from advisor.config import AuditConfig, load_config, validate_config
from advisor.errors import AdvisorError, ConfigError

EPILOG = """\b
Exit codes: 0 done; 2 bad option, config or rules file; 3 unreadable or malformed input;
4 nothing left to audit; 5 reports could not be written; 1 other tool errors.
"""


def _stderr_console() -> Console:
    return Console(stderr=True, no_color=bool(os.environ.get("NO_COLOR")))


def _fail(exc: AdvisorError) -> None:
    _stderr_console().print(f"[bold red]error:[/] {exc}", highlight=False, markup=True,
                            soft_wrap=True)
    sys.exit(exc.exit_code)


@click.group(epilog=EPILOG)
@click.version_option(package_name="advisor")
def main() -> None:
    """Weekly readiness audit of a recommendation service's interaction logs.

    \b
    Start with:  advisor audit sample_logs/events --catalog sample_logs/catalog.csv
    """


@main.command(epilog=EPILOG)
@click.argument("logs", type=click.Path(exists=True, path_type=Path))
@click.option("--catalog", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Catalogue file: item id, title, categories, date added, ratings.")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path),
              default=Path("advisor-report"), show_default=True,
              help="Folder that receives every report file.")
@click.option("--as-of", "as_of", metavar="DATE",
              help="Audit the data as it stood at this date (YYYY-MM-DD or ISO datetime, UTC); "
                   "later events are set aside.")
@click.option("--config", "config_file", type=click.Path(dir_okay=False, path_type=Path),
              help="TOML config: [columns], [catalog], [events], [audit].")
@click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path),
              help="TOML rules file that overrides or adds to the shipped rules.")
@click.option("--user-col", help="Log column holding the user id.")
@click.option("--item-col", help="Log column holding the item id.")
@click.option("--time-col", help="Log column holding the timestamp.")
@click.option("--event-col", help="Log column holding the event type.")
@click.option("--value-col", help="Log column holding the value (rating, progress, price).")
@click.option("--seed", type=int, help="Seed of every random step (default 20261201).")
@click.option("--backtest/--no-backtest", default=None,
              help="Run the offline backtest and learning curve (default: on).")
@click.option("--editorial-rows", type=click.IntRange(0, 1000), default=10, show_default=True,
              help="Rows of the editorial list to print (the CSV has all).")
@click.option("--json", "as_json", is_flag=True, help="Print the JSON report instead of text.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors (files are still written).")
def audit(logs, catalog, out, as_of, config_file, rules_file, user_col, item_col, time_col,
          event_col, value_col, seed, backtest, editorial_rows, as_json, quiet):
    """Audit LOGS (a file or a folder of weekly drops) and write reports to --out.

    \b
    Examples:
      advisor audit sample_logs/events --catalog sample_logs/catalog.csv
      advisor audit plays.parquet --user-col customer --item-col sku --time-col when
      advisor audit logs/ --as-of 2026-10-31 --out reports/2026-10-31
    """
    from advisor.pipeline import audit as run_audit
    from advisor.report.files import to_json, write_reports
    from advisor.report.terminal import render

    try:
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
        cfg = replace(cfg, **kw)
        validate_config(cfg)
        progress = None
        status = None
        err = _stderr_console()
        if not quiet and err.is_terminal:
            status = err.status("auditing")
            status.start()
            progress = lambda step: status.update(f"auditing: {step}")  # noqa: E731
        try:
            result = run_audit(logs, catalog=catalog, config=cfg, progress=progress)
        finally:
            if status is not None:
                status.stop()
        buf = io.StringIO()
        render(result, Console(file=buf, width=100, color_system=None),
               editorial_rows=editorial_rows)
        written = write_reports(result, out, text=buf.getvalue())
    except AdvisorError as exc:
        _fail(exc)
        return
    if quiet:
        return
    if as_json:
        click.echo(to_json(result))
        return
    console = Console(no_color=bool(os.environ.get("NO_COLOR")))
    render(result, console, written=[str(out / w) for w in written],
           editorial_rows=editorial_rows)


@main.command()
@click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path),
              help="Show the shipped rules with this file applied on top.")
@click.option("--metrics", "show_metrics", is_flag=True,
              help="List the metric names rules can read.")
def rules(rules_file, show_metrics):
    """Show the effective rules: tier, metric, threshold, rationale and source."""
    from advisor.report.rules_view import render_metrics, render_rules
    from advisor.rules.loader import load_rules

    console = Console(no_color=bool(os.environ.get("NO_COLOR")))
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
