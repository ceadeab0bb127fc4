"""Time and peak memory of the tool at realistic and large sizes, side by side.

Generates forest workbooks of 10k, 100k and 500k tree rows (synthetic values
shaped like an inventory; they are load, not data) and measures, each in a
fresh process so that peak memory is that step's own:

- bare read: the Trees sheet read with python-calamine, the fastest
  general-purpose .xlsx reader available, as the floor to compare against;
- ``verify check`` and ``verify run --no-pdf`` on the same file;
- the PDF alone, rendered from the run's results.json;
- Monte Carlo net removals at 100k and 1M draws (in-process, best of 3);
- ``verify --help``;
- the phases of one ``verify run --no-pdf`` on the largest workbook.

Usage: .venv/bin/python benchmarks/run.py [--sizes 10000 100000 500000] [--repeat 3] [--keep DIR]
Prints a Markdown table; nothing here is a test and nothing asserts a time.
Targets (README, Performance): run within 1.5x of the bare read at 100k and
500k rows; memory linear in rows; 1M draws under 1 s; --help under 0.5 s.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

PYTHON = sys.executable
VERIFY = [PYTHON, "-m", "verify"]
TREES_PER_PLOT = 40
PLOTS_PER_STRATUM_MIN = 2


def _sheet(book: Any, name: str, rows: list[list]) -> None:
    ws = book.create_sheet(name)
    for row in rows:
        ws.append(row)


def write_forest_workbook(path: Path, n_trees: int) -> Path:
    """A valid forest workbook with ``n_trees`` Trees rows over two events (write-only, streamed)."""
    from openpyxl import Workbook  # here, so that the phase table's process has not loaded it

    from verify.schema import all_sheets

    headers = {name: list(spec.headers) for name, spec in all_sheets().items()}
    plots_per_event = max(PLOTS_PER_STRATUM_MIN * 4, n_trees // (2 * TREES_PER_PLOT))
    book = Workbook(write_only=True)
    project = [["field", "value"], ["project_name", f"Benchmark {n_trees}"], ["project_id", "BENCH"],
               ["pathway", "forest"], ["country", "Nowhere"], ["period_start", dt.date(2023, 1, 1)],
               ["period_end", dt.date(2024, 12, 31)]]
    _sheet(book, "Project", project)
    strata = [f"S{i}" for i in range(1, 5)]
    _sheet(book, "Strata", [headers["Strata"]] + [[s, 250.0, ""] for s in strata])
    _sheet(book, "Baseline", [headers["Baseline"]] + [[s, 0.5, 20.0, ""] for s in strata])
    _sheet(book, "Risk", [headers["Risk"], ["fire", 12.0, ""]])
    _sheet(book, "Species", [headers["Species"], ["Alpha", "M1", 0.6, 0.24, 0.47]])
    _sheet(book, "Allometry", [headers["Allometry"],
                               ["M1", "density_height", 0.0673, 0.976, None, 5.0, 212.0, "Chave et al. 2014 Eq. 4"]])
    plots = [headers["Plots"]]
    for event, day in (("start", dt.date(2023, 1, 10)), ("end", dt.date(2024, 12, 10))):
        for p in range(plots_per_event):
            plots.append([f"P{p:06d}", strata[p % 4], event, day, 500.0, None, None])
    _sheet(book, "Plots", plots)
    trees = book.create_sheet("Trees")
    trees.append(headers["Trees"])
    per_event = n_trees // 2
    for event, growth in (("start", 0.0), ("end", 1.5)):
        for i in range(per_event):
            dbh = 8.0 + (i * 7919 % 2500) / 100.0 + growth
            trees.append([f"P{i % plots_per_event:06d}", event, f"T{i:07d}", "Alpha",
                          round(dbh, 1), round(1.3 + 1.4 * dbh ** 0.75, 1), "live"])
    book.save(path)
    return path


def measure(command: list[str]) -> tuple[float, float]:
    """Wall seconds and peak resident memory (MiB) of one child process."""
    started = time.perf_counter()
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(process.pid, 0)
    elapsed = time.perf_counter() - started
    process.returncode = os.waitstatus_to_exitcode(status)
    if process.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(command)} failed: {process.stderr.read().decode()[-2000:]}")
    return elapsed, usage.ru_maxrss / 1024.0  # ru_maxrss is in KiB on Linux


BARE_READ = ("import sys, python_calamine as c;"
             "c.CalamineWorkbook.from_path(sys.argv[1]).get_sheet_by_name('Trees').to_python()")
PDF_ONLY = ("import sys, json, pathlib; from verify.report_pdf import write_summary_pdf;"
            "write_summary_pdf(json.loads(pathlib.Path(sys.argv[1]).read_text()), pathlib.Path(sys.argv[2]))")


def bench_size(n_trees: int, folder: Path, repeat: int) -> dict[str, list[tuple[float, float]]]:
    """Each step ``repeat`` times, the steps interleaved so that a slow spell of the machine
    falls on all of them alike."""
    workbook = folder / f"trees_{n_trees}.xlsx"
    if not workbook.exists():
        write_forest_workbook(workbook, n_trees)
    out = folder / f"out_{n_trees}"
    steps = {
        "bare read (calamine)": [PYTHON, "-c", BARE_READ, str(workbook)],
        "verify check": VERIFY + ["check", str(workbook)],
        "verify run --no-pdf": VERIFY + ["run", str(workbook), "--out", str(out), "--no-pdf"],
        "PDF alone": [PYTHON, "-c", PDF_ONLY, str(out / "results.json"), str(out / "summary.pdf")],
    }
    runs: dict[str, list[tuple[float, float]]] = {step: [] for step in steps}
    for _ in range(repeat):
        for step, command in steps.items():
            runs[step].append(measure(command))
    return runs


def phases(workbook: Path) -> dict[str, float]:
    """Seconds of each phase of ``verify run --no-pdf``, in this process, as the CLI orders them."""
    import shutil

    started = time.perf_counter()
    marks: dict[str, float] = {}

    def mark(name: str) -> None:
        marks[name] = time.perf_counter() - started - sum(marks.values())

    from verify.reader import BackgroundRead, cyclic_gc_paused

    read = BackgroundRead(workbook)
    mark("hash and safety scan; the parse starts, the sheets are listed meanwhile")
    from verify.engine import compute
    from verify.outputs import write_outputs
    from verify.schema import all_sheets
    from verify.workbook import load_workbook
    all_sheets()
    mark("imports and schemas while the worker parses")
    with cyclic_gc_paused():
        read.result()
        mark("waiting for the worker's parse and conversion")
        book = load_workbook(workbook, read)  # the parsed sheets are taken as they are
        mark("validation and consistency checks")
        result = compute(book)
        mark("calculation")
    out = Path(tempfile.mkdtemp(prefix="verify-phases-"))
    try:
        write_outputs(result, out, pdf=False)
    finally:
        shutil.rmtree(out, ignore_errors=True)
    mark("results.json and results.xlsx")
    return marks


def print_phases(workbook: Path) -> None:
    output = subprocess.run([PYTHON, __file__, "--phases-of", str(workbook)], check=True,
                            capture_output=True, text=True).stdout
    for name, seconds in json.loads(output).items():
        print(f"| {name} | {seconds:.2f} |")


def bench_monte_carlo(draws: int) -> float:
    from verify.montecarlo import UncertainInputs, simulate_net_removals

    inputs = UncertainInputs(
        gross_tco2e=24000.0, gross_standard_error_tco2e=1500.0, gross_df=19.0,
        baseline_tco2e=(800.0, 600.0, 200.0), baseline_half_width_tco2e=(200.0, 150.0, 80.0),
        emission_tco2e=(30.0, 12.0, 5.0, 2.0), emission_half_width_tco2e=(3.0, 4.0, 2.5, 0.5),
        leakage_percent=(4.0,), leakage_percent_half_width=(1.0,),
    )
    best = float("inf")
    for _ in range(3):
        started = time.perf_counter()
        simulate_net_removals(inputs, 90.0, draws, 20261201)
        best = min(best, time.perf_counter() - started)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 500_000])
    parser.add_argument("--keep", type=Path, help="keep the generated workbooks and outputs here (and reuse them)")
    parser.add_argument("--repeat", type=int, default=3, help="runs of each step; the best and worst are shown")
    parser.add_argument("--phases-of", type=Path, help=argparse.SUPPRESS)  # the child process of the phase table
    args = parser.parse_args()
    if args.phases_of:
        print(json.dumps(phases(args.phases_of)))
        return
    folder = args.keep or Path(tempfile.mkdtemp(prefix="verify-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    try:
        print(f"| rows | step | best of {args.repeat} s | worst s | peak MiB | x bare read (best) |\n"
              "|---:|---|---:|---:|---:|---:|")
        for n_trees in args.sizes:
            runs = bench_size(n_trees, folder, args.repeat)
            floor = min(seconds for seconds, _ in runs["bare read (calamine)"])
            for step, measured in runs.items():
                best, worst = min(s for s, _ in measured), max(s for s, _ in measured)
                mib = max(m for _, m in measured)
                print(f"| {n_trees:,} | {step} | {best:.2f} | {worst:.2f} | {mib:.0f} | {best / floor:.2f} |",
                      flush=True)
        for draws in (100_000, 1_000_000):
            print(f"| - | Monte Carlo {draws:,} draws (best of 3) | {bench_monte_carlo(draws):.3f} | - | - | - |",
                  flush=True)
        help_runs = [measure(VERIFY + ["--help"]) for _ in range(args.repeat)]
        print(f"| - | verify --help | {min(s for s, _ in help_runs):.2f} | {max(s for s, _ in help_runs):.2f} "
              f"| {max(m for _, m in help_runs):.0f} | - |")
        print("\nWhere `verify run --no-pdf` spends its time on the largest workbook (one run):\n\n"
              "| phase | seconds |\n|---|---:|")
        print_phases(folder / f"trees_{max(args.sizes)}.xlsx")
        print(json.dumps({"python": sys.version.split()[0], "cpus": os.cpu_count()}))
    finally:
        if not args.keep:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
