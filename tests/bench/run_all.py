"""Run every benchmark script in tests/bench, then print one summary table with date and machine.

Run: python tests/bench/run_all.py [--quick] [--only NAME ...] [--list]

`--quick` is a smoke run: each script runs with the smaller sizes in `QUICK` (set on its
module before `main()` is called, or passed as its arguments), so the whole set finishes in
minutes and shows that every script still runs end to end. Its figures are not the ones to
hold against the targets; the full run's are.

Convention (see tests/bench/README.md): a benchmark is a file named `bench_*.py` with a
`main()` that prints its own tables. `main()` may return summary rows, a list of dicts with
the keys `measure`, `value` and (optionally) `target`, all text; they go into the summary
table. Each script runs once, in its own Python process (so one script's memory peaks and
compiled code never colour another's), and its output is passed through as it is printed.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
#: The line a script's driver prints last, followed by its summary rows as JSON.
MARKER = "@@bench-summary@@ "

#: Smaller sizes for `--quick`, by script: module constants to set, or arguments for main().
QUICK: dict[str, dict[str, Any]] = {
    "bench_cutoff": {"INSTANCES": ("burma14", "ulysses16"), "CUTOFFS": range(4)},
    "bench_jsonl": {"NODES": 100_000, "REPEATS": 1},
    "bench_oracle": {"NODES": 1_000_000, "REPEATS": 1},
    "bench_penalties": {"argv": ["ulysses22", "bays29", "--no-both"]},
    "bench_reader": {"NODES": 1_000_000},
    "bench_recheck": {"REPEATS": 1},
    "bench_search": {"REPEATS": 1},
    "bench_start_tours": {"CITIES": 200, "REPEATS": 1},
    "bench_sweep": {"CUTOFFS": range(3), "REPEAT": 1, "PASSES": 1},
    "bench_viewer": {"argv": ["--nodes", "1000000", "--repeats", "3"]},
    "bench_viewer_large": {
        "argv": ["--instance", "burma14", "--cutoff", "4", "--memory-mb", "1", "--repeats", "2"]
    },
}

#: Runs one script's main() (not its __main__ block) and prints the rows it returned. Its
#: arguments: the script, then a JSON map of `QUICK` settings (empty for a full run).
_DRIVER = f"""
import json, runpy, sys
script, quick = sys.argv[1], json.loads(sys.argv[2])
sys.argv = [script]  # the script sees no arguments of its own
module = runpy.run_path(script, run_name="bench")
main = module["main"]
argv = quick.pop("argv", None)
for name, value in quick.items():  # main() reads its module's constants when it runs
    assert name in main.__globals__, f"{{script}} has no constant {{name}}"
    old = main.__globals__[name]
    main.__globals__[name] = type(old)(value) if isinstance(old, tuple) else value
rows = main() if argv is None else main(argv)
sys.stdout.flush()
print({MARKER!r} + json.dumps(rows if isinstance(rows, list) else []), flush=True)
"""


def discover() -> list[Path]:
    """Every benchmark script, by name."""
    return sorted(HERE.glob("bench_*.py"))


def machine() -> str:
    """One line naming the machine and the versions measured on."""
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import numpy

    return (
        f"{cpu}, {os.cpu_count()} cores, {platform.system()} {platform.release()}; "
        f"Python {platform.python_version()}, numpy {numpy.__version__}"
    )


def load_average() -> str:
    """The machine's load averages, as /proc/loadavg gives them (others share the cores)."""
    try:
        return " ".join(Path("/proc/loadavg").read_text().split()[:3])
    except OSError:
        return "unknown"


def run_script(script: Path, quick: bool = False) -> tuple[int, float, list[dict[str, Any]]]:
    """Run one script in its own process (with `QUICK` sizes if `quick`), passing its
    output through.

    Returns:
        (exit status, seconds taken, the summary rows it returned).
    """
    began = time.perf_counter()
    settings = QUICK.get(script.stem, {}) if quick else {}
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]),
    }
    proc = subprocess.Popen(
        [sys.executable, "-c", _DRIVER, str(script), json.dumps(settings, default=list)],
        stdout=subprocess.PIPE,
        text=True,
        cwd=ROOT,
        env=env,
    )
    rows: list[dict[str, Any]] = []
    assert proc.stdout is not None
    for line in proc.stdout:
        if line.startswith(MARKER):
            rows = [r for r in json.loads(line[len(MARKER) :]) if isinstance(r, dict)]
        else:
            sys.stdout.write(line)
            sys.stdout.flush()
    status = proc.wait()
    return status, time.perf_counter() - began, rows


def summary_table(results: list[tuple[str, int, float, list[dict[str, Any]]]]) -> list[str]:
    """The summary as Markdown lines: one row per measure, and one per script without any."""
    lines = ["| benchmark | measure | value | target |", "|---|---|---:|---|"]
    for name, status, seconds, rows in results:
        if status != 0:
            lines.append(f"| {name} | failed (exit {status}) after {seconds:.0f} s | — | |")
            continue
        if not rows:
            lines.append(f"| {name} | (tables above; ran {seconds:.0f} s) | — | |")
        for row in rows:
            lines.append(
                f"| {name} | {row.get('measure', '')} | {row.get('value', '')} "
                f"| {row.get('target', '')} |"
            )
    return lines


def main() -> int:
    """Run the chosen benchmarks and print the summary; exit 1 if any script failed."""
    parser = argparse.ArgumentParser(description="Run every tests/bench/bench_*.py once.")
    parser.add_argument("--only", nargs="+", metavar="NAME", help="run only these (bench_x or x)")
    parser.add_argument("--list", action="store_true", help="list the scripts and stop")
    parser.add_argument("--quick", action="store_true", help="smaller sizes: a smoke run")
    args = parser.parse_args()
    scripts = discover()
    if args.only:
        wanted = {n.removesuffix(".py").removeprefix("bench_") for n in args.only}
        scripts = [s for s in scripts if s.stem.removeprefix("bench_") in wanted]
    if args.list:
        print("\n".join(s.name for s in scripts))
        return 0
    started = datetime.datetime.now().astimezone()
    load_before = load_average()
    results = []
    for script in scripts:
        print(f"\n## {script.name}\n", flush=True)
        status, seconds, rows = run_script(script, args.quick)
        results.append((script.stem, status, seconds, rows))
    mode = "quick (smaller sizes: not for the targets)" if args.quick else "full"
    print(f"\n## summary: {started:%Y-%m-%d %H:%M %Z}, {mode} run\n")
    print(f"machine: {machine()}")
    print(f"load average (1, 5, 15 min): {load_before} before, {load_average()} after\n")
    print("\n".join(summary_table(results)))
    return 0 if all(status == 0 for _, status, _, _ in results) else 1


if __name__ == "__main__":
    sys.exit(main())
