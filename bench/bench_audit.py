"""Time the audit and its peak memory against the raw counting DuckDB does on the same file.

For each size: generate the synthetic log (cached under ``--out``), then run, each in its own
child process so that its peak resident memory can be read when it ends (``os.wait4``):

1. the raw counting in DuckDB with plain SQL on the Parquet file: per-item, per-user and
   weekly counts, and co-occurrence pair counts over each user's ``--history-cap`` most
   recent distinct items (a self-join on the user);
2. the audit as a user runs it, ``advisor audit FILE --no-backtest --quiet``, reports
   written to ``--out/report-SIZE``;
3. with ``--backtest``, the same audit with the backtest on (sampled users, the default).

It prints the machine, the versions and one table: events, users, items, audit seconds,
audit peak RSS, DuckDB raw seconds, the ratio audit / raw (the figure we steer by), and the
backtest run when asked. The audit seconds are the wall clock of the whole command
(interpreter start, imports and report writing included); the raw seconds are the SQL alone.
Results are also written to ``--out/bench-results.json``.

``--profile`` runs the audit once more under cProfile (smallest size) and prints the top
functions by cumulative time.

Example::

    python bench/bench_audit.py --sizes 1M,10M --backtest
"""

from __future__ import annotations

import argparse
import io
import json
import os
import platform
import pstats
import shlex
import signal
import subprocess
import sys
import threading
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import generate  # noqa: E402  (bench/ is not a package; the generator sits beside us)

GIB = 1024**3


# --------------------------------------------------------------------------- child processes


@dataclass(frozen=True, slots=True)
class ChildRun:
    """One child process: how long it ran and its peak memory."""

    seconds: float
    """Wall-clock seconds from start to exit."""
    peak_rss_gib: float
    """Peak resident set size of the child (``ru_maxrss``), GiB."""
    returncode: int
    """Exit code (negative: killed by that signal, -9 after a timeout)."""
    timed_out: bool
    """Whether the child was killed for running past the timeout."""
    stdout: str
    stderr: str


def run_child(cmd: list[str], *, timeout: float | None, env: dict | None = None) -> ChildRun:
    """Run ``cmd``; wall time and this child's own peak RSS via ``os.wait4``.

    ``resource.getrusage(RUSAGE_CHILDREN)`` would give the maximum over every child waited
    for so far (the generator included), so each child is reaped by pid instead.
    """
    out_f, err_f = io.BytesIO(), io.BytesIO()
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env,
                            start_new_session=True)
    # Drain the pipes in threads so a chatty child cannot block on a full pipe.
    readers = [threading.Thread(target=lambda s=s, b=b: b.write(s.read()), daemon=True)
               for s, b in ((proc.stdout, out_f), (proc.stderr, err_f))]
    for r in readers:
        r.start()
    timed_out = False
    while True:
        pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
        if pid:
            break
        if timeout is not None and time.perf_counter() - t0 > timeout:
            os.killpg(proc.pid, signal.SIGKILL)
            timed_out = True
            pid, status, usage = os.wait4(proc.pid, 0)
            break
        time.sleep(0.02)
    seconds = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)  # tell Popen it has been reaped
    for r in readers:
        r.join()
    return ChildRun(seconds, usage.ru_maxrss * 1024 / GIB, proc.returncode, timed_out,
                    out_f.getvalue().decode(errors="replace"),
                    err_f.getvalue().decode(errors="replace"))


# --------------------------------------------------------------------------- raw DuckDB counting


def raw_counting_sql(path: str, cap: int) -> list[tuple[str, str]]:
    """The plain SQL of the raw baseline, one (step, statement) per timed step."""
    quoted = path.replace("'", "''")
    src = f"read_parquet('{quoted}')"
    return [
        ("items", f"CREATE TEMP TABLE item_counts AS SELECT item_id, count(*) AS events, "
                  f"count(DISTINCT user_id) AS users, min(timestamp) AS first_ts "
                  f"FROM {src} GROUP BY item_id"),
        ("users", f"CREATE TEMP TABLE user_counts AS SELECT user_id, count(*) AS events, "
                  f"count(DISTINCT item_id) AS items, min(timestamp) AS first_ts, "
                  f"max(timestamp) AS last_ts FROM {src} GROUP BY user_id"),
        ("weekly", f"CREATE TEMP TABLE weekly_counts AS SELECT date_trunc('week', timestamp) "
                   f"AS week, count(*) AS events, count(DISTINCT user_id) AS active_users "
                   f"FROM {src} GROUP BY week"),
        ("pairs", f"""CREATE TEMP TABLE pair_counts AS
            WITH seen AS (
                SELECT user_id, item_id, max(timestamp) AS last_ts FROM {src}
                GROUP BY user_id, item_id),
            recent AS (
                SELECT user_id, item_id FROM seen
                QUALIFY row_number() OVER (PARTITION BY user_id
                                           ORDER BY last_ts DESC, item_id) <= {cap})
            SELECT a.item_id AS item_a, b.item_id AS item_b, count(*) AS users
            FROM recent a JOIN recent b ON a.user_id = b.user_id AND a.item_id < b.item_id
            GROUP BY a.item_id, b.item_id"""),
    ]


def raw_child(path: str, cap: int, spill: str) -> None:
    """Child mode: run the raw counting and print its timings and row counts as JSON."""
    import duckdb

    con = duckdb.connect(":memory:")
    con.execute("SET TimeZone = 'UTC'")
    con.execute("SET temp_directory = '" + spill.replace("'", "''") + "'")
    steps = {}
    for name, sql in raw_counting_sql(path, cap):
        t0 = time.perf_counter()
        con.execute(sql)
        steps[name] = time.perf_counter() - t0
    rows = {t: con.execute(f"SELECT count(*) FROM {t}").fetchone()[0]
            for t in ("item_counts", "user_counts", "weekly_counts", "pair_counts")}
    threads = con.execute("SELECT current_setting('threads')").fetchone()[0]
    print(json.dumps({"steps": steps, "seconds": sum(steps.values()), "rows": rows,
                      "threads": threads}))


def _vm(field_name: str) -> float:
    """A ``/proc/self/status`` memory field (VmRSS, VmHWM) in GiB; 0 where there is none."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith(field_name + ":"):
                return int(line.split()[1]) * 1024 / GIB
    except OSError:
        pass
    return 0.0


def stage_child(path: str, backtest: bool) -> None:
    """Child mode: run the audit in-process and print one JSON line as each step ends.

    The steps are the pipeline's progress messages, so the split costs nothing extra; each
    line carries the step's seconds, the resident memory after it and the peak so far.
    """
    t0 = time.perf_counter()
    from dataclasses import replace

    from advisor.config import AuditConfig
    from advisor.pipeline import audit

    last = {"step": "imports", "t": t0}

    def say(step: str) -> None:
        now = time.perf_counter()
        print(json.dumps({"step": last["step"], "seconds": round(now - last["t"], 2),
                          "rss_gib": round(_vm("VmRSS"), 2),
                          "peak_gib": round(_vm("VmHWM"), 2)}), flush=True)
        last.update(step=step, t=now)

    # The engine and thread options of --audit-args apply here too (other options do not).
    kw = {}
    for flag, key, conv in (("--engine", "engine", str), ("--threads", "threads", int)):
        if flag in AUDIT_ARGS:
            kw[key] = conv(AUDIT_ARGS[AUDIT_ARGS.index(flag) + 1])
    audit(path, config=replace(AuditConfig(), backtest=backtest, **kw), progress=say)
    say("done")


def stage_split(path: Path, args, *, backtest: bool) -> str:
    """Seconds and memory per pipeline step for one audit (reports not written)."""
    run = run_child([sys.executable, str(Path(__file__).resolve()), "--stage-child",
                     str(path), "--audit-args=" + shlex.join(AUDIT_ARGS)]
                    + (["--backtest"] if backtest else []), timeout=args.timeout)
    lines = [f"  steps of the audit{' with backtest' if backtest else ''} "
             f"({run.seconds:.1f} s, peak {run.peak_rss_gib:.2f} GiB):"]
    for raw in run.stdout.splitlines():
        try:
            s = json.loads(raw)
        except ValueError:
            continue
        lines.append(f"    {s['step']:<34} {s['seconds']:8.1f} s   RSS after "
                     f"{s['rss_gib']:5.2f} GiB   peak so far {s['peak_gib']:5.2f} GiB")
    if run.returncode != 0:
        why = "timed out" if run.timed_out else f"exit code {run.returncode}"
        lines.append(f"    (stopped: {why}; the last step listed finished, the next did not)")
    return "\n".join(lines)


# --------------------------------------------------------------------------- one size


@dataclass(slots=True)
class SizeResult:
    """Everything measured for one size (mutable while the run fills it in)."""

    size: str
    events: int = 0
    users: int = 0
    items: int = 0
    generate_seconds: float | None = None
    generate_peak_gib: float | None = None
    raw_seconds: float | None = None
    raw_steps: dict = field(default_factory=dict)
    raw_peak_gib: float | None = None
    raw_rows: dict = field(default_factory=dict)
    audit_seconds: float | None = None
    audit_library_seconds: float | None = None
    audit_peak_gib: float | None = None
    backtest_seconds: float | None = None
    backtest_peak_gib: float | None = None
    stages: list = field(default_factory=list)
    failures: list = field(default_factory=list)

    @property
    def ratio(self) -> float | None:
        if self.audit_seconds is None or not self.raw_seconds:
            return None
        return self.audit_seconds / self.raw_seconds


def _failed(res: SizeResult, what: str, run: ChildRun) -> None:
    why = "timed out" if run.timed_out else f"exit code {run.returncode}"
    tail = "\n".join(run.stderr.strip().splitlines()[-5:])
    res.failures.append(f"{what}: {why} after {run.seconds:.0f} s, peak "
                        f"{run.peak_rss_gib:.2f} GiB\n{tail}")


def ensure_log(size: str, out: Path, seed: int, timeout: float | None,
               res: SizeResult) -> Path:
    """The cached Parquet file of ``size``, generated (in a child) when missing or stale."""
    events = generate.parse_count(size)
    spec = generate.spec_for(events)
    path = out / f"{generate.size_name(events)}-seed{seed}.parquet"
    want = generate.file_metadata(spec, seed, 1_000_000)
    if path.exists() and generate.read_file_metadata(path) == want:
        return path
    run = run_child([sys.executable, str(HERE / "generate.py"), "--events", str(events),
                     "--out", str(path), "--seed", str(seed)], timeout=timeout)
    if run.returncode != 0:
        _failed(res, "generate", run)
        raise RuntimeError(res.failures[-1])
    res.generate_seconds, res.generate_peak_gib = run.seconds, run.peak_rss_gib
    return path


#: Extra options for every audit command (set from ``--audit-args``).
AUDIT_ARGS: list[str] = []


def audit_cmd(path: Path, report_dir: Path, *, backtest: bool) -> list[str]:
    return [sys.executable, "-m", "advisor.cli", "audit", str(path), "--quiet",
            "--out", str(report_dir), "--backtest" if backtest else "--no-backtest",
            *AUDIT_ARGS]


def bench_size(size: str, args) -> SizeResult:
    res = SizeResult(size=size)
    path = ensure_log(size, args.out, args.seed, args.timeout, res)
    meta = generate.read_file_metadata(path)
    res.events = meta["spec"]["events"]

    spill = args.out / "duckdb-spill"
    spill.mkdir(parents=True, exist_ok=True)
    raw = run_child([sys.executable, str(Path(__file__).resolve()), "--raw-child", str(path),
                     "--history-cap", str(args.history_cap), "--out", str(spill)],
                    timeout=args.timeout)
    if raw.returncode == 0:
        got = json.loads(raw.stdout.strip().splitlines()[-1])
        res.raw_seconds, res.raw_steps, res.raw_rows = got["seconds"], got["steps"], got["rows"]
        res.users, res.items = got["rows"]["user_counts"], got["rows"]["item_counts"]
        res.raw_peak_gib = raw.peak_rss_gib
    else:
        _failed(res, "duckdb raw", raw)

    report = args.out / f"report-{size}"
    run = run_child(audit_cmd(path, report, backtest=False), timeout=args.timeout)
    if run.returncode == 0:
        res.audit_seconds, res.audit_peak_gib = run.seconds, run.peak_rss_gib
        try:
            res.audit_library_seconds = json.loads(
                (report / "audit.json").read_text(encoding="utf-8"))["run"]["seconds"]
        except (OSError, KeyError, ValueError):
            pass
    else:
        _failed(res, "audit", run)

    if args.backtest:
        run = run_child(audit_cmd(path, args.out / f"report-{size}-backtest", backtest=True),
                        timeout=args.timeout)
        if run.returncode == 0:
            res.backtest_seconds, res.backtest_peak_gib = run.seconds, run.peak_rss_gib
        else:
            _failed(res, "audit with backtest", run)
    if args.stages:
        for backtest in (False, True) if args.backtest else (False,):
            res.stages.append(stage_split(path, args, backtest=backtest))
    return res


def profile_audit(size: str, args, *, backtest: bool, top: int = 15) -> str:
    """Run the audit of ``size`` under cProfile in a child; its hot spots as text.

    Two listings: the package's own functions by cumulative time (where the stages spend
    it; module bodies, that is import time, left out) and every function by its own time
    (the numpy, pandas, pyarrow or scipy calls that burn it).
    """
    events = generate.parse_count(size)
    path = args.out / f"{generate.size_name(events)}-seed{args.seed}.parquet"
    tag = "-backtest" if backtest else ""
    prof = args.out / f"profile-{size}{tag}.prof"
    cmd = audit_cmd(path, args.out / f"report-{size}-profile{tag}", backtest=backtest)
    run = run_child([sys.executable, "-m", "cProfile", "-o", str(prof)] + cmd[1:],
                    timeout=args.timeout)
    if run.returncode != 0:
        return f"profile failed (exit code {run.returncode}):\n{run.stderr[-2000:]}"
    stats = pstats.Stats(str(prof)).stats  # (file, line, function) -> (cc, nc, tt, ct, ...)
    package = str(Path(generate.__file__).resolve().parents[1] / "advisor")

    def where(key) -> str:
        file, line, func = key
        if file.startswith(package):
            file = "advisor" + file[len(package):]
        elif "site-packages/" in file:
            file = file.split("site-packages/", 1)[1]
        return f"{file}:{line}({func})" if line else func

    def listing(keys, title) -> list[str]:
        out = [title, f"{'cumul s':>8} {'own s':>7} {'calls':>7}  function"]
        out += [f"{stats[k][3]:8.2f} {stats[k][2]:7.2f} {stats[k][1]:7d}  {where(k)}"
                for k in keys[:top]]
        return out

    own = [k for k in stats if k[0].startswith(package) and k[2] != "<module>"]
    by_cum = sorted(own, key=lambda k: -stats[k][3])
    by_own = sorted(stats, key=lambda k: -stats[k][2])
    total = max(v[3] for v in stats.values())
    lines = [f"profile of `advisor audit {'--backtest' if backtest else '--no-backtest'}` at "
             f"{size}: {total:.1f} s under cProfile (saved to {prof})"]
    lines += listing(by_cum, f"top {top} package functions by cumulative time:")
    lines += listing(by_own, f"top {top} functions by own time:")
    return "\n".join(lines)


# --------------------------------------------------------------------------- printing


def machine() -> dict:
    """Cores, memory, CPU model and the versions that matter for the figures."""
    info = {"python": platform.python_version(), "platform": platform.platform(),
            "cores": os.cpu_count(), "usable_cores": len(os.sched_getaffinity(0))}
    try:
        mem = Path("/proc/meminfo").read_text().split("\n")
        kib = next(int(x.split()[1]) for x in mem if x.startswith("MemTotal:"))
        info["ram_gib"] = round(kib * 1024 / GIB, 1)
        cpu = Path("/proc/cpuinfo").read_text().split("\n")
        info["cpu"] = next((x.split(":", 1)[1].strip() for x in cpu
                            if x.startswith("model name")), "unknown")
    except (OSError, StopIteration):
        pass
    for mod in ("advisor", "numpy", "pandas", "scipy", "pyarrow", "duckdb"):
        try:
            info[mod] = __import__(mod).__version__
        except ImportError:
            info[mod] = "not installed"
    return info


def _load() -> str:
    try:
        return " ".join(f"{x:.1f}" for x in os.getloadavg())
    except OSError:
        return "unknown"


def _f(v, fmt: str) -> str:
    return "-" if v is None else format(v, fmt)


def table(results: list[SizeResult], backtest: bool) -> str:
    head = ["events", "users", "items", "audit s", "audit peak GiB", "DuckDB raw s",
            "audit/raw"]
    if backtest:
        head += ["audit+backtest s", "backtest peak GiB"]
    rows = []
    for r in results:
        row = [f"{r.events:,}", f"{r.users:,}", f"{r.items:,}", _f(r.audit_seconds, ".1f"),
               _f(r.audit_peak_gib, ".2f"), _f(r.raw_seconds, ".1f"), _f(r.ratio, ".2f")]
        if backtest:
            row += [_f(r.backtest_seconds, ".1f"), _f(r.backtest_peak_gib, ".2f")]
        rows.append(row)
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    line = lambda cells: "| " + " | ".join(c.rjust(w) for c, w in zip(cells, widths)) + " |"  # noqa
    return "\n".join([line(head), "|" + "|".join("-" * (w + 2) for w in widths) + "|"]
                     + [line(r) for r in rows])


def details(r: SizeResult) -> str:
    steps = ", ".join(f"{k} {v:.1f} s" for k, v in r.raw_steps.items())
    out = [f"{r.size}:"]
    if r.generate_seconds is not None:
        out.append(f"  generated in {r.generate_seconds:.1f} s, peak "
                   f"{r.generate_peak_gib:.2f} GiB")
    if r.raw_seconds is not None:
        out.append(f"  DuckDB raw: {steps}; peak {r.raw_peak_gib:.2f} GiB; "
                   f"{r.raw_rows.get('pair_counts', 0):,} item pairs")
    if r.audit_library_seconds is not None:
        out.append(f"  audit inside the library (audit.json run.seconds): "
                   f"{r.audit_library_seconds:.1f} s")
    out += r.stages
    out += [f"  FAILED {f}" for f in r.failures]
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sizes", default="1M,10M",
                   help="comma-separated event counts (1M, 10M, 100M or any count; default "
                        "1M,10M)")
    p.add_argument("--backtest", action="store_true",
                   help="also time the audit with the backtest on")
    p.add_argument("--out", type=Path, default=HERE / "out",
                   help="folder for logs, reports and results (default bench/out)")
    p.add_argument("--seed", type=int, default=1, help="generator seed (default 1)")
    p.add_argument("--history-cap", type=int, default=200,
                   help="most recent distinct items per user in the raw pair counts (the "
                        "audit's default history_cap)")
    p.add_argument("--timeout", type=float, default=3600.0,
                   help="seconds before a child is killed (default 3600)")
    p.add_argument("--profile", action="store_true",
                   help="profile the audit of the smallest size with cProfile")
    p.add_argument("--audit-args", default="",
                   help="extra options for every audit command, e.g. \"--engine duckdb\"")
    p.add_argument("--stages", action="store_true",
                   help="run each audit once more in-process and print seconds and memory "
                        "per pipeline step")
    p.add_argument("--raw-child", help=argparse.SUPPRESS)
    p.add_argument("--stage-child", help=argparse.SUPPRESS)
    args = p.parse_args(argv)

    if args.raw_child:
        raw_child(args.raw_child, args.history_cap, str(args.out))
        return 0
    AUDIT_ARGS[:] = shlex.split(args.audit_args)
    if args.stage_child:
        stage_child(args.stage_child, args.backtest)
        return 0
    try:
        sizes = [s.strip() for s in args.sizes.split(",") if s.strip()]
        for s in sizes:
            generate.parse_count(s)
    except ValueError as exc:
        p.error(str(exc))
    args.out.mkdir(parents=True, exist_ok=True)
    info = machine()
    print(f"machine: {info.get('cores')} cores ({info.get('usable_cores')} usable), "
          f"{info.get('ram_gib', '?')} GiB RAM, {info.get('cpu', 'unknown CPU')}; "
          f"{info['platform']}")
    print("versions: " + ", ".join(f"{k} {info[k]}" for k in
                                   ("python", "advisor", "numpy", "pandas", "scipy", "pyarrow",
                                    "duckdb")))
    print(f"audit command: advisor audit LOG --quiet {' '.join(AUDIT_ARGS)}".rstrip())
    print(f"seed {args.seed}, history cap {args.history_cap}; load average at start "
          f"{_load()} (other work on the machine inflates the times)", flush=True)
    results = []
    for size in sizes:
        print(f"... {size}", file=sys.stderr, flush=True)
        try:
            results.append(bench_size(size, args))
        except RuntimeError as exc:
            print(f"{size}: {exc}", file=sys.stderr)
    print()
    print(f"load average at end {_load()}")
    print(table(results, args.backtest))
    print()
    for r in results:
        print(details(r))
    (args.out / "bench-results.json").write_text(json.dumps(
        {"machine": info, "seed": args.seed, "history_cap": args.history_cap,
         "results": [asdict(r) | {"ratio": r.ratio} for r in results]}, indent=2))
    if args.profile and results:
        for backtest in (False, True) if args.backtest else (False,):
            print()
            print(profile_audit(sizes[0], args, backtest=backtest), flush=True)
    return 0 if all(not r.failures for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
