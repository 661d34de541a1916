"""Benchmarks: each of our steps beside the bare library calls that do the same computation.

One command runs everything and writes bench/RESULTS.md::

    python bench/run.py                                  # 10k, 100k and 1M rows, 3 repeats
    python bench/run.py --sizes 10000 --repeats 1        # a quick look
    python bench/run.py --cases pca,kmeans --no-extras   # some cases only

The tables (integer invariants, 20 columns, a planted linear rule and two exact relations;
see bench/data.py) are generated into a temporary folder, never the repository. One case has
a table of its own, run once at its own size whatever --sizes says: the separator on 13,000
rows of 16x16 integer matrices whose flag is a planted rule on their rank (matrix_separate). Every
measurement runs in a fresh process (bench/cases.py), ours and the bare side taking turns,
and the report gives medians over the repeats, the ratio ours / bare, and peak memory.

Extras (skip with --no-extras): whole-process ``inspect`` against a bare pandas read, start-up
imports, UMAP's compile cost (cold cache, warm cache, same process, the warm-up thread), and
the Dask engine beside the in-memory path on the largest table.

Numbers are only comparable within one run: the machine may be shared, so the report also
records the load average before and after.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import platform
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

import cases as _cases  # noqa: E402
import data as _data  # noqa: E402

DEFAULT_SIZES = (10_000, 100_000, 1_000_000)
NOTES_START = "<!-- notes: kept when the file is rewritten -->"
NOTES_END = "<!-- end of notes -->"
# Goals from the issue, as ratios or bounds.
INSPECT_GOAL = 1.5
MEMORY_GOAL = 2.0
GOAL_ROWS = 1_000_000
# The learning curve and splits 2 to 5 reuse split 1's model as their starting point and
# run on every core: together at most this share of a whole separator step.
REFIT_SHARE = 1 / 3
REFIT_PHASES = ("learning curve", "later splits")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Benchmark Invariant Scout's steps against "
                                     "the bare library calls.")
    parser.add_argument("--sizes", default=",".join(map(str, DEFAULT_SIZES)),
                        help="table sizes in rows, comma-separated (default %(default)s)")
    parser.add_argument("--repeats", type=int, default=3,
                        help="runs of each side per case; medians are reported (default 3)")
    parser.add_argument("--cases", default=",".join(_cases.CASES),
                        help="cases to run (default: all): " + ", ".join(_cases.CASES))
    parser.add_argument("--skip", default="", metavar="CASE@ROWS,...",
                        help="leave out some case at some size, e.g. kernel_separate@1000000")
    parser.add_argument("--no-extras", action="store_true",
                        help="skip whole-process inspect, start-up, UMAP compile and Dask")
    parser.add_argument("--workdir", help="folder for the generated tables (default: a new "
                        "temporary folder, removed at the end); tables there are reused")
    parser.add_argument("--out", default=str(HERE / "RESULTS.md"),
                        help="the report to write (default bench/RESULTS.md)")
    parser.add_argument("--no-write", action="store_true", help="print only")
    parser.add_argument("--json", help="also write every measurement as JSON here")
    parser.add_argument("--timeout", type=float, default=3600.0,
                        help="seconds one measurement may take (default %(default)s)")
    args = parser.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s.strip()]
    chosen = [c.strip() for c in args.cases.split(",") if c.strip()]
    unknown = [c for c in chosen if c not in _cases.CASES]
    if unknown:
        parser.error(f"unknown case {unknown[0]!r}; cases are {', '.join(_cases.CASES)}")
    skip = {tuple(item.split("@")) for item in args.skip.split(",") if "@" in item}
    own_folder = args.workdir is None
    folder = Path(args.workdir or tempfile.mkdtemp(prefix="scout-bench-"))
    report = {"started": _now(), "machine": machine(), "load_before": _load(),
              "sizes": sizes, "repeats": args.repeats, "cases": [], "extras": {},
              "skipped": sorted(f"{case}@{rows}" for case, rows in skip)}
    try:
        tables = {}
        sized = [name for name in chosen if _cases.CASES[name].rows is None]
        for rows in sizes if sized or not args.no_extras else ():
            print(f"\n== {rows} rows: writing the tables to {folder}", flush=True)
            tables[rows] = _data.ensure_tables(folder, rows)
            for name in sized:
                if (name, str(rows)) in skip:
                    continue
                entry = run_case(name, rows, tables[rows], args.repeats, args.timeout)
                report["cases"].append(entry)
                print(_case_line(entry), flush=True)
        for name in chosen:
            # cases on a table of their own run once, at their own size
            rows = _cases.CASES[name].rows
            if rows is None or (name, str(rows)) in skip:
                continue
            print(f"\n== {name}: writing its table ({rows} rows) to {folder}", flush=True)
            entry = run_case(name, rows, _data.ensure_matrix_table(folder, rows),
                             args.repeats, args.timeout)
            report["cases"].append(entry)
            print(_case_line(entry), flush=True)
        if not args.no_extras:
            largest = tables[max(sizes)]
            # whole processes of a second or two: more repeats cost little and steady the median
            report["extras"]["inspect"] = [inspect_process(tables[r], max(5, args.repeats),
                                                           args.timeout) for r in sizes]
            report["extras"]["imports"] = import_costs()
            report["extras"]["umap_compile"] = umap_compile(args.timeout)
            report["extras"]["dask"] = dask_engine(largest, args.timeout)
    finally:
        if own_folder:
            shutil.rmtree(folder, ignore_errors=True)
    report["load_after"] = _load()
    report["finished"] = _now()
    report["goals"] = goals(report)
    text = markdown(report, _kept_notes(Path(args.out)))
    print("\n" + text)
    if not args.no_write:
        Path(args.out).write_text(text, encoding="utf-8")
        print(f"wrote {args.out}")
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=1, default=str) + "\n")
    return 0


# ----------------------------------------------------------------------------------------
# Running one measurement in a fresh process


def _env(extra: dict | None = None) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"]
                                     if env.get("PYTHONPATH") else "")
    env.setdefault("PYTHONHASHSEED", "0")
    env.update(extra or {})
    return env


def _worker(case: str, side: str, table: dict, timeout: float) -> dict:
    command = [sys.executable, str(HERE / "cases.py"), case, side,
               "--csv", str(table["csv"]), "--parquet", str(table["parquet"])]
    try:
        done = subprocess.run(command, cwd=ROOT, env=_env(), capture_output=True, text=True,
                              timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"error": f"over the time limit of {timeout:.0f} s"}
    lines = [line for line in done.stdout.splitlines() if line.startswith("{")]
    if done.returncode != 0 or not lines:
        tail = (done.stderr.strip().splitlines() or ["no output"])[-1]
        return {"error": tail[:300]}
    return json.loads(lines[-1])


def run_case(name: str, rows: int, table: dict, repeats: int, timeout: float) -> dict:
    """Run ours and bare ``repeats`` times each, taking turns, and summarize."""
    runs = {"ours": [], "bare": []}
    errors = {}
    for r in range(repeats):
        order = ("ours", "bare") if r % 2 == 0 else ("bare", "ours")
        for side in order:
            if side in errors:
                continue
            outcome = _worker(name, side, table, timeout)
            if "error" in outcome:
                errors[side] = outcome["error"]
                continue
            runs[side].append(outcome)
    entry = {"case": name, "rows": rows, "frame_bytes": table["frame_bytes"],
             "errors": errors}
    for side, outcomes in runs.items():
        if outcomes:
            entry[side] = {
                "seconds": statistics.median(o["seconds"] for o in outcomes),
                "cpu_seconds": statistics.median(o["cpu_seconds"] for o in outcomes),
                "all_seconds": [round(o["seconds"], 3) for o in outcomes],
                "peak_increase_mb": max(o["peak_increase_mb"] for o in outcomes),
                "peak_mb": max(o["peak_mb"] for o in outcomes),
                "check": outcomes[-1]["check"],
            }
    if "ours" in entry and "bare" in entry and entry["bare"]["seconds"] > 0:
        entry["ratio"] = entry["ours"]["seconds"] / entry["bare"]["seconds"]
        if entry["bare"]["cpu_seconds"] > 0:
            entry["cpu_ratio"] = entry["ours"]["cpu_seconds"] / entry["bare"]["cpu_seconds"]
    return entry


def _case_line(entry: dict) -> str:
    ours, bare = entry.get("ours"), entry.get("bare")
    parts = [f"{entry['case']:<16} {entry['rows']:>8}"]
    parts.append(f"ours {ours['seconds']:8.3f} s" if ours else "ours    error")
    parts.append(f"bare {bare['seconds']:8.3f} s" if bare else "bare    error")
    if "ratio" in entry:
        parts.append(f"ratio {entry['ratio']:6.2f} (CPU time {entry.get('cpu_ratio', 0):.2f})")
    if entry["errors"]:
        parts.append("errors: " + "; ".join(f"{k}: {v}" for k, v in entry["errors"].items()))
    return "  ".join(parts)


def _timed_process(command: list[str], env: dict | None = None,
                   timeout: float = 3600.0) -> dict:
    """Wall time and peak resident memory of a whole process."""
    started = time.perf_counter()
    process = subprocess.Popen(command, cwd=ROOT, env=env or _env(), stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    deadline = started + timeout
    while True:
        pid, status, usage = os.wait4(process.pid, os.WNOHANG)
        if pid:
            break
        if time.perf_counter() > deadline:
            process.kill()
            pid, status, usage = os.wait4(process.pid, 0)
            return {"error": f"over the time limit of {timeout:.0f} s"}
        time.sleep(0.005)
    seconds = time.perf_counter() - started
    stdout = process.stdout.read()
    stderr = process.stderr.read()
    process.returncode = os.waitstatus_to_exitcode(status)
    outcome = {"seconds": seconds, "peak_mb": usage.ru_maxrss / 1024,
               "returncode": process.returncode, "stdout": stdout[-4000:]}
    if process.returncode != 0:
        outcome["error"] = (stderr.strip().splitlines() or ["no output"])[-1][:300]
    return outcome


# ----------------------------------------------------------------------------------------
# Extras


def inspect_process(table: dict, repeats: int, timeout: float) -> dict:
    """`python -m analysis inspect T.parquet` against a bare pandas read, whole processes."""
    path = str(table["parquet"])
    ours_cmd = [sys.executable, "-m", "analysis", "inspect", path]
    bare_cmd = [sys.executable, "-c", f"import pandas; pandas.read_parquet({path!r})"]
    runs = {"ours": [], "bare": []}
    errors = {}
    for r in range(repeats):
        for side in (("ours", "bare") if r % 2 == 0 else ("bare", "ours")):
            outcome = _timed_process(ours_cmd if side == "ours" else bare_cmd,
                                     timeout=timeout)
            if "error" in outcome:
                errors[side] = outcome["error"]
            else:
                runs[side].append(outcome)
    entry = {"rows": table["rows"], "frame_bytes": table["frame_bytes"], "errors": errors}
    for side, outcomes in runs.items():
        if outcomes:
            entry[side] = {"seconds": statistics.median(o["seconds"] for o in outcomes),
                           "all_seconds": [round(o["seconds"], 3) for o in outcomes],
                           "peak_mb": max(o["peak_mb"] for o in outcomes)}
    if "ours" in entry and "bare" in entry:
        entry["ratio"] = entry["ours"]["seconds"] / entry["bare"]["seconds"]
    print(f"inspect process {table['rows']:>8}  " + (
        f"ratio {entry['ratio']:.2f}" if "ratio" in entry else f"errors {errors}"), flush=True)
    return entry


_HEAVY = ("sklearn", "scipy", "umap", "numba", "pynndescent", "dask", "distributed", "sympy",
          "plotly", "streamlit", "matplotlib")


def import_costs() -> dict:
    """What `import analysis` costs and pulls in, from `python -X importtime`."""
    done = subprocess.run([sys.executable, "-X", "importtime", "-c",
                           "import json, sys, analysis; print(json.dumps(sorted({m.split('.')[0] "
                           "for m in sys.modules})))"], cwd=ROOT, env=_env(),
                          capture_output=True, text=True, timeout=600)
    total = {}
    for line in done.stderr.splitlines():
        # "import time: self | cumulative | name", the name indented by its nesting depth
        match = re.match(r"import time:\s+(\d+) \|\s+(\d+) \|( +)(\S+)", line)
        if match and len(match.group(3)) == 1:
            total[match.group(4)] = int(match.group(2)) / 1e6
    lines = [line for line in done.stdout.splitlines() if line.startswith("[")]
    loaded = set(json.loads(lines[-1])) if lines else set()
    top = sorted(total.items(), key=lambda kv: -kv[1])[:8]
    entry = {"top_level_seconds": dict(top),
             "heavy_loaded": sorted(loaded & set(_HEAVY)),
             "analysis_seconds": total.get("analysis")}
    timings = []
    for _ in range(3):
        timings.append(_timed_process([sys.executable, "-c", "import analysis"])["seconds"])
    entry["import_analysis_process_seconds"] = statistics.median(timings)
    timings = [_timed_process([sys.executable, "-c", "import pandas"])["seconds"]
               for _ in range(3)]
    entry["import_pandas_process_seconds"] = statistics.median(timings)
    print(f"imports: analysis {entry['import_analysis_process_seconds']:.2f} s, pandas "
          f"{entry['import_pandas_process_seconds']:.2f} s; heavy modules loaded: "
          f"{entry['heavy_loaded'] or 'none'}", flush=True)
    return entry


_UMAP_SCRIPT = r"""
import json, sys, time
started = time.perf_counter()
from analysis.warmup import configure_numba_cache
configure_numba_cache()
from analysis.projection import ProjectionStep
from analysis.table import read_table
import numpy as np
rng = np.random.default_rng(0)
values = rng.integers(0, 40, size=(2000, 20))
text = ",".join(f"c{j:02d}" for j in range(20)) + "\n" + "\n".join(
    ",".join(map(str, row)) for row in values.tolist()) + "\n"
table = read_table(text.encode(), "t.csv")
ready = time.perf_counter()
times = []
for _ in range(2):
    t = time.perf_counter()
    ProjectionStep(method="umap", seed=0).run(table)
    times.append(time.perf_counter() - t)
print(json.dumps({"setup": ready - started, "first": times[0], "second": times[1]}))
"""

_WARMUP_SCRIPT = r"""
import json, time
from analysis.warmup import start_umap_warmup, umap_warmup_status, wait_for_umap_warmup
t = time.perf_counter()
start_umap_warmup()
returned = time.perf_counter() - t
ok = wait_for_umap_warmup(3000)
print(json.dumps({"start_returned": returned, "done": time.perf_counter() - t,
                  "status": umap_warmup_status()}))
"""


def umap_compile(timeout: float) -> dict:
    """UMAP's first call: fresh process with a cold cache, with a warm cache, same process."""
    cache = Path(tempfile.mkdtemp(prefix="scout-numba-"))
    try:
        env = _env({"NUMBA_CACHE_DIR": str(cache)})
        entry = {}
        for label in ("cold cache", "warm cache"):
            outcome = _timed_process([sys.executable, "-c", _UMAP_SCRIPT], env=env,
                                     timeout=timeout)
            entry[label] = _json_tail(outcome)
            print(f"UMAP, fresh process, {label}: {entry[label]}", flush=True)
        shutil.rmtree(cache, ignore_errors=True)
        for label in ("warm-up thread, cold cache", "warm-up thread, warm cache"):
            outcome = _timed_process([sys.executable, "-c", _WARMUP_SCRIPT], env=env,
                                     timeout=timeout)
            entry[label] = _json_tail(outcome)
            print(f"UMAP {label}: {entry[label]}", flush=True)
        return entry
    finally:
        shutil.rmtree(cache, ignore_errors=True)


def _json_tail(outcome: dict) -> dict:
    if "error" in outcome:
        return {"error": outcome["error"]}
    lines = [line for line in outcome["stdout"].splitlines() if line.startswith("{")]
    result = json.loads(lines[-1]) if lines else {}
    result["process_seconds"] = outcome["seconds"]
    return result


def dask_engine(table: dict, timeout: float) -> dict:
    """The same commands through the Dask engine and in memory, whole processes."""
    path = str(table["parquet"])
    check = subprocess.run([sys.executable, "-c", "import analysis.distributed"], cwd=ROOT,
                           env=_env(), capture_output=True, text=True, timeout=600)
    if check.returncode != 0:
        return {"error": "analysis.distributed cannot be imported: "
                + (check.stderr.strip().splitlines() or ["?"])[-1]}
    commands = {
        "inspect": ["inspect", path],
        "project (PCA)": ["project", path, "--method", "pca"],
        "separate": ["separate", path, "--target", _data.TARGET],
    }
    entry = {"rows": table["rows"], "commands": {}}
    for label, command in commands.items():
        row = {}
        for engine in ("local", "dask"):
            outcome = _timed_process([sys.executable, "-m", "analysis", *command, "--engine",
                                      engine], timeout=timeout)
            row[engine] = {k: outcome[k] for k in ("seconds", "peak_mb", "error")
                           if k in outcome}
        entry["commands"][label] = row
        print(f"dask vs local, {label}: {row}", flush=True)
    return entry


# ----------------------------------------------------------------------------------------
# Goals and the report


def _ratio_goal(case, rows: int) -> float | None:
    """The case's goal for ours / bare at this many rows, if it has one."""
    chosen = dict(case.more_goals)
    if case.goal is not None and case.goal_rows is not None:
        chosen[case.goal_rows] = case.goal
    return chosen.get(rows)


def _other_goals(case, entry: dict, entries: list[dict]) -> list[dict]:
    """A bound on seconds, and a ratio against another case's ours side."""
    out = []
    ours = entry.get("ours")
    if case.limit_seconds is not None:
        seconds = None if ours is None else ours["seconds"]
        out.append({"goal": f"{case.title}, {entry['rows']:,} rows: at most "
                            f"{case.limit_seconds:g} s",
                    "value": None if seconds is None else f"{seconds:.1f} s",
                    "met": None if seconds is None else seconds <= case.limit_seconds})
    if case.goal_against is not None and entry["rows"] == case.goal_against[1]:
        other_name, _, limit = case.goal_against
        other = next((e for e in entries if e["case"] == other_name
                      and e["rows"] == entry["rows"] and "ours" in e), None)
        title = _cases.CASES[other_name].title
        ratio = None if other is None or ours is None else \
            ours["seconds"] / other["ours"]["seconds"]
        out.append({"goal": f"{case.title} at {entry['rows']:,} rows: <= {limit:g} x "
                            f"{title} (ours)",
                    "value": "not measured in this run" if ratio is None else f"{ratio:.2f}",
                    "met": None if ratio is None else ratio <= limit})
    return out


def _refit_share_goals(entries: list[dict]) -> list[dict]:
    """The learning curve's and the later splits' share of each whole separator step."""
    out = []
    for entry in entries:
        shares = (entry.get("ours") or {}).get("check", {}).get("shares")
        if entry["case"] not in ("separate", "kernel_separate") or not shares:
            continue
        share = sum(shares.get(phase, 0.0) for phase in REFIT_PHASES)
        out.append({"goal": f"{_cases.CASES[entry['case']].title} at {entry['rows']:,} rows: "
                            f"learning curve and later splits <= {REFIT_SHARE:.0%} of the step",
                    "value": f"{share:.0%}", "met": share <= REFIT_SHARE})
    return out


def goals(report: dict) -> list[dict]:
    """Each goal of the issue with the measured figure and whether it is met."""
    out = []
    for entry in report["cases"]:
        case = _cases.CASES[entry["case"]]
        goal = _ratio_goal(case, entry["rows"])
        if goal is not None:
            ratio = entry.get("ratio")
            out.append({"goal": f"{case.title} at {entry['rows']:,} rows: ours / bare <= "
                                f"{goal:g}",
                        "value": None if ratio is None else f"{ratio:.2f}",
                        "met": None if ratio is None else ratio <= goal})
        out += _other_goals(case, entry, report["cases"])
    out += _refit_share_goals(report["cases"])
    for entry in report["extras"].get("inspect", []):
        if entry["rows"] == GOAL_ROWS:
            ratio = entry.get("ratio")
            out.append({"goal": f"inspect, whole process, {GOAL_ROWS:,} x 20 Parquet: "
                                f"<= {INSPECT_GOAL:g} x a bare pandas read",
                        "value": None if ratio is None else f"{ratio:.2f}",
                        "met": None if ratio is None else ratio <= INSPECT_GOAL})
    for entry in report["cases"]:
        if entry["case"] == "load_parquet" and entry["rows"] == GOAL_ROWS and "ours" in entry:
            times = entry["ours"]["peak_increase_mb"] * 2**20 / entry["frame_bytes"]
            out.append({"goal": f"peak memory loading a {GOAL_ROWS:,} x 20 table <= "
                                f"{MEMORY_GOAL:g} x the pandas frame",
                        "value": f"{times:.2f} x ({entry['ours']['peak_increase_mb']:.0f} MB "
                                 f"over the {entry['frame_bytes'] / 2**20:.0f} MB frame)",
                        "met": times <= MEMORY_GOAL})
        if entry["case"] == "separate" and entry["rows"] == GOAL_ROWS and "ours" in entry:
            check = entry["ours"]["check"]
            exact = check.get("violations") == 0 and "equation" in check
            out.append({"goal": f"separator on {GOAL_ROWS:,} rows returns the exact equation "
                                "with 0 violations",
                        "value": f"{check.get('equation')} ({check.get('violations')} "
                                 "violating rows)",
                        "met": exact})
    return out


def markdown(report: dict, notes: str) -> str:
    m = report["machine"]
    lines = ["# Benchmark results", "",
             "Written by `python bench/run.py` (see the script's docstring); the figures are "
             "replaced on every run, the notes section is kept.", "",
             f"- date: {report['started']} to {report['finished']}",
             f"- machine: {m['cpu']}, {m['cores']} cores ({m['usable_cores']} usable), "
             f"{m['memory_gb']:.1f} GB memory, {m['system']}",
             f"- load average before / after: {report['load_before']} / {report['load_after']}"
             " (the machine is shared: compare ratios, not absolute times)",
             f"- Python {m['python']}; " + ", ".join(f"{k} {v}" for k, v in
                                                     m["libraries"].items()),
             f"- commit {m['commit']}",
             f"- sizes {', '.join(f'{s:,}' for s in report['sizes'])} rows x 20 columns; "
             f"{report['repeats']} repeats, medians; each measurement in a fresh process",
             *([f"- left out of this run (--skip): {', '.join(report['skipped'])}"]
               if report.get("skipped") else []),
             "", "## Goals", "", "| goal | measured | met |", "|---|---|---|"]
    for g in report["goals"]:
        met = "n/a" if g["met"] is None else ("yes" if g["met"] else "**no**")
        lines.append(f"| {g['goal']} | {g['value']} | {met} |")
    lines += ["", "## Steps against bare library calls", "",
              "Time is the median over repeats of the measured call alone (reading the table "
              "and imports are outside the clock, except for the loading cases): wall time, "
              "which the goals are about, and beside it the ratio of CPU times (all threads of "
              "the process), which other work on a shared machine disturbs less. Peak is the "
              "largest rise in resident memory during the call, over all repeats.", "",
              "| case | rows | ours (s) | bare (s) | ours / bare | goal | ours / bare, CPU time "
              "| ours peak (MB) | bare peak (MB) | what ours computed |",
              "|---|---:|---:|---:|---:|---:|---:|---:|---:|---|"]
    for entry in report["cases"]:
        case = _cases.CASES[entry["case"]]
        ours, bare = entry.get("ours"), entry.get("bare")
        ratio_goal = _ratio_goal(case, entry["rows"])
        goal = "" if ratio_goal is None else f"<= {ratio_goal:g}"
        ratio = f"{entry['ratio']:.2f}" if "ratio" in entry else "-"
        cpu_ratio = f"{entry['cpu_ratio']:.2f}" if "cpu_ratio" in entry else "-"
        check = json.dumps(ours["check"]) if ours else "error: " + entry["errors"].get(
            "ours", "?")
        if entry["errors"].get("bare"):
            check += f" (bare side failed: {entry['errors']['bare']})"
        lines.append(
            f"| {case.title} | {entry['rows']:,} | {_num(ours, 'seconds')} | "
            f"{_num(bare, 'seconds')} | {ratio} | {goal} | {cpu_ratio} | "
            f"{_num(ours, 'peak_increase_mb', 0)}"
            f" | {_num(bare, 'peak_increase_mb', 0)} | {_cell(check)} |")
    lines += ["", "What each case runs:", ""]
    for name in dict.fromkeys(e["case"] for e in report["cases"]):
        case = _cases.CASES[name]
        lines.append(f"- **{case.title}**: ours = {case.ours}; bare = {case.bare}."
                     + (f" {case.note}" if case.note else ""))
    extras = report["extras"]
    if extras.get("inspect"):
        lines += ["", "## Inspecting a Parquet table, whole process", "",
                  "`python -m analysis inspect T.parquet` against "
                  "`python -c \"import pandas; pandas.read_parquet(T)\"`, each in its own "
                  "process (wall time including start-up; peak resident memory of the "
                  "process).", "",
                  "| rows | ours (s) | bare (s) | ours / bare | ours peak (MB) | bare peak (MB) "
                  "| pandas frame (MB) |", "|---:|---:|---:|---:|---:|---:|---:|"]
        for e in extras["inspect"]:
            ratio = f"{e['ratio']:.2f}" if "ratio" in e else "-"
            lines.append(f"| {e['rows']:,} | {_num(e.get('ours'), 'seconds')} | "
                         f"{_num(e.get('bare'), 'seconds')} | {ratio} | "
                         f"{_num(e.get('ours'), 'peak_mb', 0)} | "
                         f"{_num(e.get('bare'), 'peak_mb', 0)} | "
                         f"{e['frame_bytes'] / 2**20:.0f} |")
    if extras.get("imports"):
        i = extras["imports"]
        lines += ["", "## Start-up imports", "",
                  f"- `python -c \"import analysis\"`: {i['import_analysis_process_seconds']:.2f}"
                  f" s as a whole process; `python -c \"import pandas\"`: "
                  f"{i['import_pandas_process_seconds']:.2f} s.",
                  "- heavy libraries loaded by `import analysis`: "
                  + (", ".join(i["heavy_loaded"]) or "none"),
                  "- largest top-level imports (`-X importtime`, cumulative): "
                  + ", ".join(f"{k} {v:.2f} s" for k, v in i["top_level_seconds"].items())]
    if extras.get("umap_compile"):
        u = extras["umap_compile"]
        lines += ["", "## UMAP's compile cost", "",
                  "A UMAP projection of a 2000 x 20 table through the projection step, in a "
                  "fresh process with an empty numba cache folder, then in another fresh "
                  "process with the folder the first one filled; the second call in each "
                  "process is the same-process figure. The warm-up rows time "
                  "`start_umap_warmup()` until it reports done.", "",
                  "| run | first call (s) | second call, same process (s) | whole process (s) |",
                  "|---|---:|---:|---:|"]
        for label in ("cold cache", "warm cache"):
            r = u.get(label, {})
            lines.append(f"| fresh process, {label} | {_num(r, 'first')} | "
                         f"{_num(r, 'second')} | {_num(r, 'process_seconds')} |"
                         + (f" {r['error']}" if "error" in r else ""))
        for label in ("warm-up thread, cold cache", "warm-up thread, warm cache"):
            r = u.get(label, {})
            lines.append(f"| {label} (start returned in {_num(r, 'start_returned', 4)} s; "
                         f"{r.get('status', r.get('error', '?'))}) | {_num(r, 'done')} | | "
                         f"{_num(r, 'process_seconds')} |")
    if extras.get("dask"):
        d = extras["dask"]
        lines += ["", "## Dask engine beside the in-memory path", ""]
        if "error" in d:
            lines.append(f"Not run: {d['error']}")
        else:
            lines += [f"Whole processes on the {d['rows']:,}-row Parquet table "
                      "(`python -m analysis CMD T.parquet --engine local|dask`; the Dask "
                      "engine starts a local cluster on 127.0.0.1).", "",
                      "| command | in memory (s) | Dask (s) | in-memory peak (MB) | "
                      "Dask peak (MB) |", "|---|---:|---:|---:|---:|"]
            for label, row in d["commands"].items():
                local, dask = row.get("local", {}), row.get("dask", {})
                lines.append(f"| {label} | {_num(local, 'seconds')} | {_num(dask, 'seconds')}"
                             f" | {_num(local, 'peak_mb', 0)} | {_num(dask, 'peak_mb', 0)} |"
                             + "".join(f" {side}: {r['error']}" for side, r in
                                       (("local", local), ("dask", dask)) if "error" in r))
    lines += ["", "## Notes", "", NOTES_START, notes.strip() or "(none yet)", NOTES_END, ""]
    return "\n".join(lines)


def _num(entry, key: str, digits: int = 3) -> str:
    if not entry or entry.get(key) is None:
        return "-"
    return f"{entry[key]:.{digits}f}"


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def _kept_notes(path: Path) -> str:
    if not path.exists():
        return ""
    text = path.read_text(encoding="utf-8")
    if NOTES_START in text and NOTES_END in text:
        return text.split(NOTES_START, 1)[1].split(NOTES_END, 1)[0]
    return ""


# ----------------------------------------------------------------------------------------
# The machine


def machine() -> dict:
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    memory = 0.0
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                memory = int(line.split()[1]) / 2**20
    except OSError:
        pass
    libraries = {}
    for name in ("numpy", "pandas", "pyarrow", "scikit-learn", "scipy", "umap-learn", "numba",
                 "pynndescent", "dask", "distributed"):
        libraries[name] = _version(name)
    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT,
                                capture_output=True, text=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "analysis"], cwd=ROOT,
                               capture_output=True, text=True).stdout.strip()
        commit += " (with uncommitted changes in analysis/)" if dirty else ""
    except OSError:
        commit = "?"
    return {"cpu": cpu, "cores": os.cpu_count(),
            "usable_cores": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
            else os.cpu_count(),
            "memory_gb": memory, "system": f"{platform.system()} {platform.release()}",
            "python": platform.python_version(), "libraries": libraries, "commit": commit}


def _version(distribution: str) -> str:
    from importlib import metadata

    try:
        return metadata.version(distribution)
    except metadata.PackageNotFoundError:
        return "not installed"


def _load() -> str:
    try:
        return ", ".join(f"{v:.1f}" for v in os.getloadavg())
    except OSError:
        return "?"


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")


if __name__ == "__main__":
    sys.exit(main())
