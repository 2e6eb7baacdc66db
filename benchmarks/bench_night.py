"""Speed and memory of ``dynoqc process`` on a synthetic 12 h / 10 Hz night.

Run from the repository (the installed ``dynoqc`` command is used)::

    python benchmarks/bench_night.py            # full run, several minutes on 2 cores
    python benchmarks/bench_night.py --quick    # 2 h nights, one repetition, no 10x

What it measures, all in one run and interleaved (each repetition runs the bare read and the
two ``dynoqc`` variants back to back, so machine load affects them alike):

- the bare CSV read: ``pyarrow.csv.read_csv`` of the same file with its comment and units
  rows skipped, (a) in this process after import (best of several reads) and (b) as a fresh
  ``python -c`` subprocess, i.e. with interpreter start-up and ``import pyarrow.csv``;
- ``dynoqc process`` end to end as a fresh subprocess, with figures and with ``--no-plots``,
  as a ratio to (a) and to (b);
- peak memory (maximum resident set size of each ``dynoqc`` subprocess, from ``wait4``), as a
  multiple of the CSV size;
- where the time goes: one in-process run with timers around the stages;
- scaling: 1x, 4x and 10x the rows (12, 48 and 120 h at 10 Hz), time per row;
- ``--jobs 2`` against ``--jobs 1`` on four nights.

Nights are generated with :mod:`pipeline.testing.simulate` (the Cell B3 sample scenario of
``sample_runs/make_sample_runs.py``) into a temporary folder. Speed targets live here and in
the README, never in the tests. The script prints Markdown tables for the README plus a
description of the machine, and can write the raw numbers as JSON (``--json``).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from importlib import metadata
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
CONFIG = REPO / "configs" / "cell_b3.toml"

#: Targets of the speed issue (end to end as a multiple of the bare pyarrow read, etc.).
TARGETS = {
    "figures_x_read": 3.0,
    "no_plots_x_read": 2.0,
    "peak_memory_x_csv": 4.0,
    "jobs2_over_jobs1": 0.6,
}

#: Bare read in a fresh interpreter: import pyarrow.csv and read the file (argv: path, rows
#: of comments before the names row).
READ_SNIPPET = (
    "import sys, pyarrow.csv as c; "
    "c.read_csv(sys.argv[1], read_options=c.ReadOptions(skip_rows=int(sys.argv[2]), "
    "skip_rows_after_names=1))"
)

#: One in-process run with timers around the stages (argv: csv, config, out folder).
STAGES_SNIPPET = r"""
import json, sys, time
t0 = time.perf_counter()
import pipeline.api as api
import pipeline.report as report
import pipeline.report.hdf5 as hdf5
times = {"import pipeline.api": time.perf_counter() - t0}
def timed(mod, name, label):
    fn = getattr(mod, name, None)
    if fn is None:
        return
    def wrapper(*a, **k):
        t = time.perf_counter()
        try:
            return fn(*a, **k)
        finally:
            times[label] = times.get(label, 0.0) + time.perf_counter() - t
    setattr(mod, name, wrapper)
for name, label in [("read_run", "ingest (read_run)"),
                    ("align", "alignment (align)"),
                    ("compute_balance", "balance (compute_balance)"),
                    ("drift_corrected", "drift correction (drift_corrected)"),
                    ("run_checks", "checks (run_checks)"),
                    ("emissions_table", "emissions table"),
                    ("process_run", "process_run total")]:
    timed(api, name, label)
timed(hdf5, "write_result", "HDF5 write (write_result)")
timed(report, "render_report", "report: read back + figures + summary (render_report)")
t = time.perf_counter()
api.process_to_files(sys.argv[1], sys.argv[2], sys.argv[3], plots=sys.argv[4] == "1")
times["process_to_files total"] = time.perf_counter() - t
print(json.dumps(times))
"""


# --------------------------------------------------------------------------------- helpers


def comment_rows(path: Path) -> int:
    """Leading ``#`` lines of a logger CSV (sniffed, like the ingest stage does)."""
    n = 0
    with open(path, encoding="utf-8", errors="replace") as fh:
        for line in fh:
            if not line.startswith("#"):
                break
            n += 1
    return n


#: Runs a command and reports its wall time and peak memory (argv: the command). A small
#: process of its own starts the measured one: the peak resident set of a child includes
#: what it shared with its parent at fork time, so starting it from this (large) benchmark
#: process would count the benchmark's own memory.
LAUNCHER = r"""
import json, os, subprocess, sys, time
t = time.perf_counter()
proc = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL)
_, status, usage = os.wait4(proc.pid, 0)
wall = time.perf_counter() - t
print(json.dumps({"wall": wall, "maxrss_kb": usage.ru_maxrss,
                  "rc": os.waitstatus_to_exitcode(status)}))
"""


def run_child(cmd: Sequence[str]) -> tuple[float, float]:
    """Run ``cmd``; return (wall seconds, peak RSS in MB of it and its children).

    Timed and measured by :data:`LAUNCHER` in a small process of its own; ``os.wait4`` gives
    the resource use of the one child (``ru_maxrss`` is the largest of it and the children
    it waited for, e.g. the ``--jobs`` workers or the process drawing half of the figures).
    """
    proc = subprocess.run([sys.executable, "-c", LAUNCHER, *map(str, cmd)],
                          capture_output=True, text=True, check=False)
    try:
        out = json.loads(proc.stdout.strip().splitlines()[-1])
    except (IndexError, json.JSONDecodeError):
        out = {"rc": proc.returncode}
    if out.get("rc") != 0 or proc.returncode != 0:
        sys.stderr.write(proc.stderr)
        raise SystemExit(f"failed ({out.get('rc')}): {' '.join(map(str, cmd))}")
    return out["wall"], out["maxrss_kb"] / 1024.0  # Linux: KiB


def dynoqc_cmd(runs: Sequence[Path], out: Path, *, plots: bool, jobs: int = 1) -> list[str]:
    exe = shutil.which("dynoqc") or str(Path(sys.executable).with_name("dynoqc"))
    cmd = [exe, "process", *map(str, runs), "-c", str(CONFIG), "-o", str(out), "--force",
           "--no-progress", "--jobs", str(jobs)]
    return cmd + ([] if plots else ["--no-plots"])


def read_in_process(path: Path, skip: int, repeat: int = 3) -> float:
    """Best wall time of ``pyarrow.csv.read_csv`` in this process (pyarrow imported)."""
    import pyarrow.csv as pacsv

    opts = pacsv.ReadOptions(skip_rows=skip, skip_rows_after_names=1)
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        pacsv.read_csv(path, read_options=opts)
        best = min(best, time.perf_counter() - t)
    return best


def read_subprocess(path: Path, skip: int) -> float:
    wall, _ = run_child([sys.executable, "-c", READ_SNIPPET, str(path), str(skip)])
    return wall


def make_csv(path: Path, hours: float, rate_hz: float, seed_offset: int = 0) -> dict[str, Any]:
    """A synthetic night (Cell B3 scenario) of ``hours`` at ``rate_hz`` written to ``path``."""
    from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
    from pipeline.testing.simulate import make_night, write_csv

    base = cell_b3_scenario()
    sc = dataclasses.replace(
        base, duration_h=hours, rate_hz=rate_hz, seed=base.seed + seed_offset
    )
    log, _ = make_night(sc)
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    info = {"rows": len(log), "columns": log.shape[1], "mb": path.stat().st_size / 1e6}
    del log
    return info


def machine() -> dict[str, Any]:
    """CPU, cores, RAM, load and library versions."""
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    ram_gb = float("nan")
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                ram_gb = int(line.split()[1]) / 1024**2
    except OSError:
        pass
    versions = {}
    for pkg in ("numpy", "pandas", "pyarrow", "scipy", "h5py", "matplotlib", "isal"):
        try:
            versions[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            versions[pkg] = "not installed"
    try:
        import h5py

        versions["HDF5"] = h5py.version.hdf5_version
    except ImportError:
        pass
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return {
        "cpu": cpu,
        "cores": cores,
        "ram_gb": round(ram_gb, 1),
        "os": platform.platform(),
        "python": platform.python_version(),
        "versions": versions,
        "loadavg_start": os.getloadavg() if hasattr(os, "getloadavg") else None,
    }


def med(xs: Sequence[float]) -> float:
    return statistics.median(xs)


def fmt_s(x: float) -> str:
    return f"{x:.2f} s" if x >= 0.1 else f"{1000 * x:.0f} ms"


def verdict(value: float, target: float) -> str:
    return "yes" if value <= target else "no"


# ----------------------------------------------------------------------------------- parts


def bench_one_night(csv: Path, work: Path, reps: int) -> dict[str, Any]:
    skip = comment_rows(csv)
    rows: list[dict[str, float]] = []
    for rep in range(reps):
        r: dict[str, float] = {}
        # interleaved, order rotated so no variant always runs first
        order = ["read_sub", "figures", "no_plots"]
        order = order[rep % 3 :] + order[: rep % 3]
        for what in order:
            if what == "read_sub":
                r["read_sub"] = read_subprocess(csv, skip)
            else:
                plots = what == "figures"
                r[what], r[f"{what}_mb"] = run_child(
                    dynoqc_cmd([csv], work / f"out_{what}", plots=plots)
                )
        r["read_in"] = read_in_process(csv, skip)
        rows.append(r)
        print(f"  rep {rep + 1}/{reps}: " + ", ".join(f"{k} {v:.2f}" for k, v in r.items()),
              file=sys.stderr)
    out: dict[str, Any] = {"reps": rows}
    for key in ("read_in", "read_sub", "figures", "no_plots", "figures_mb", "no_plots_mb"):
        out[key] = med([r[key] for r in rows])
    for what in ("figures", "no_plots"):
        out[f"{what}_x_read_in"] = med([r[what] / r["read_in"] for r in rows])
        out[f"{what}_x_read_sub"] = med([r[what] / r["read_sub"] for r in rows])
    return out


def bench_stages(csv: Path, work: Path, plots: bool) -> dict[str, float]:
    proc = subprocess.run(
        [sys.executable, "-c", STAGES_SNIPPET, str(csv), str(CONFIG), str(work / "out_stages"),
         "1" if plots else "0"],
        capture_output=True, text=True, check=False,
    )
    if proc.returncode != 0:
        sys.stderr.write(proc.stderr)
        return {}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def bench_scaling(
    work: Path, hours: float, rate: float, scales: Sequence[int]
) -> list[dict[str, Any]]:
    out = []
    for k in scales:
        csv = work / f"scale_{k}x.csv"
        print(f"generating {k}x ({hours * k:g} h) ...", file=sys.stderr)
        try:
            info = make_csv(csv, hours * k, rate)
            skip = comment_rows(csv)
            read_sub = read_subprocess(csv, skip)
            no_plots, no_plots_mb = run_child(dynoqc_cmd([csv], work / "out_scale", plots=False))
            figures, figures_mb = run_child(dynoqc_cmd([csv], work / "out_scale", plots=True))
            read_in = read_in_process(csv, skip, repeat=1)
        except (Exception, SystemExit) as exc:  # noqa: BLE001 - keep the smaller scales
            print(f"  {k}x failed: {exc}", file=sys.stderr)
            break
        out.append({"scale": k, **info, "read_in": read_in, "read_sub": read_sub,
                    "no_plots": no_plots, "no_plots_mb": no_plots_mb,
                    "figures": figures, "figures_mb": figures_mb})
        csv.unlink()
        shutil.rmtree(work / "out_scale", ignore_errors=True)
        print(f"  {k}x: {out[-1]}", file=sys.stderr)
    return out



def bench_jobs(work: Path, hours: float, rate: float, reps: int) -> dict[str, Any]:
    nights = []
    for i in range(4):
        p = work / f"night_{i + 1}.csv"
        make_csv(p, hours, rate, seed_offset=i + 1)
        nights.append(p)
    res: dict[str, list[float]] = {"jobs1": [], "jobs2": []}
    for rep in range(reps):
        for jobs in ((1, 2) if rep % 2 == 0 else (2, 1)):
            wall, _ = run_child(dynoqc_cmd(nights, work / f"out_jobs{jobs}", plots=True,
                                           jobs=jobs))
            res[f"jobs{jobs}"].append(wall)
        print(f"  jobs rep {rep + 1}/{reps}: 1 -> {res['jobs1'][-1]:.1f} s, "
              f"2 -> {res['jobs2'][-1]:.1f} s", file=sys.stderr)
    return {
        "jobs1": med(res["jobs1"]),
        "jobs2": med(res["jobs2"]),
        "ratio": med([b / a for a, b in zip(res["jobs1"], res["jobs2"], strict=True)]),
        "raw": res,
    }


# ---------------------------------------------------------------------------------- report


def report(results: dict[str, Any]) -> str:
    m = results["machine"]
    one = results["night"]
    info = results["night_info"]
    csv_mb = info["mb"]
    lines = [
        f"Night: {info['rows']:,} rows x {info['columns']} columns, {csv_mb:.1f} MB of CSV "
        f"({results['hours']:g} h at {results['rate_hz']:g} Hz); median of "
        f"{len(one['reps'])} interleaved repetitions.",
        "",
        "| measure | result | target | met |",
        "|---|---|---|---|",
        f"| bare read: `pyarrow.csv.read_csv`, in process (pyarrow imported) | "
        f"{fmt_s(one['read_in'])} | | |",
        f"| bare read: fresh `python -c` (start-up + import + read) | "
        f"{fmt_s(one['read_sub'])} | | |",
    ]
    for what, label, key in (
        ("figures", "`dynoqc process` with figures", "figures_x_read"),
        ("no_plots", "`dynoqc process --no-plots`", "no_plots_x_read"),
    ):
        target = TARGETS[key]
        lines.append(
            f"| {label} | {fmt_s(one[what])} = {one[f'{what}_x_read_sub']:.1f}x the fresh-process "
            f"read, {one[f'{what}_x_read_in']:.0f}x the in-process read | <= {target:g}x | "
            f"{verdict(one[f'{what}_x_read_sub'], target)} |"
        )
    for what, label in (("figures", "with figures"), ("no_plots", "--no-plots")):
        ratio = one[f"{what}_mb"] / csv_mb
        lines.append(
            f"| peak memory ({label}) | {one[f'{what}_mb']:.0f} MB = {ratio:.1f}x the CSV | "
            f"<= {TARGETS['peak_memory_x_csv']:g}x | "
            f"{verdict(ratio, TARGETS['peak_memory_x_csv'])} |"
        )
    jobs = results.get("jobs")
    if jobs:
        lines.append(
            f"| four nights, `--jobs 2` vs `--jobs 1` (with figures) | {jobs['jobs2']:.1f} s vs "
            f"{jobs['jobs1']:.1f} s = {jobs['ratio']:.2f} | <= {TARGETS['jobs2_over_jobs1']:g} | "
            f"{verdict(jobs['ratio'], TARGETS['jobs2_over_jobs1'])} |"
        )
    scaling = results.get("scaling") or []
    if scaling:
        base = scaling[0]
        lines += [
            "",
            "Scaling (one run each; time per million rows should stay flat):",
            "",
            "| rows | CSV | bare read (fresh process) | `--no-plots` | per M rows | "
            "with figures | per M rows | peak memory (figures) |",
            "|---|---|---|---|---|---|---|---|",
        ]
        for s in scaling:
            mrows = s["rows"] / 1e6
            lines.append(
                f"| {s['rows']:,} ({s['scale']}x) | {s['mb']:.0f} MB | {fmt_s(s['read_sub'])} | "
                f"{fmt_s(s['no_plots'])} | {s['no_plots'] / mrows:.2f} s "
                f"({s['no_plots'] / mrows / (base['no_plots'] / (base['rows'] / 1e6)):.2f}x) | "
                f"{fmt_s(s['figures'])} | {s['figures'] / mrows:.2f} s "
                f"({s['figures'] / mrows / (base['figures'] / (base['rows'] / 1e6)):.2f}x) | "
                f"{s['figures_mb']:.0f} MB |"
            )
    for key, title in (("stages_no_plots", "--no-plots"), ("stages_figures", "with figures")):
        stages = results.get(key)
        if stages:
            lines += ["", f"Where the time goes (one in-process run, {title}):", "",
                      "| stage | time |", "|---|---|"]
            lines += [f"| {k} | {fmt_s(v)} |" for k, v in stages.items()]
    v = m["versions"]
    lines += [
        "",
        f"Machine: {m['cpu']}, {m['cores']} cores available, {m['ram_gb']:g} GB RAM, "
        f"{m['os']}; Python {m['python']}; "
        + ", ".join(f"{k} {val}" for k, val in v.items())
        + f". Load average at start {tuple(round(x, 2) for x in m['loadavg_start'] or ())}, "
        f"at end {tuple(round(x, 2) for x in results.get('loadavg_end') or ())}.",
    ]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true",
                    help="2 h nights, one repetition, scaling 1x/4x only")
    ap.add_argument("--hours", type=float, help="length of the base night [h] (default 12)")
    ap.add_argument("--rate", type=float, default=10.0, help="sample rate [Hz] (default 10)")
    ap.add_argument("--reps", type=int, help="interleaved repetitions (default 3)")
    ap.add_argument("--scales", default=None,
                    help="row multiples for the scaling table, e.g. 1,4,10 ('' to skip)")
    ap.add_argument("--no-jobs", action="store_true", help="skip --jobs 2 vs --jobs 1")
    ap.add_argument("--json", type=Path, help="also write the raw numbers to this file")
    ap.add_argument("--keep", type=Path, help="work in this folder and keep it")
    args = ap.parse_args(argv)
    hours = args.hours or (2.0 if args.quick else 12.0)
    reps = args.reps or (1 if args.quick else 3)
    scales_text = args.scales if args.scales is not None else ("1,4" if args.quick else "1,4,10")
    scales = [int(s) for s in scales_text.split(",") if s.strip()]

    results: dict[str, Any] = {"machine": machine(), "hours": hours, "rate_hz": args.rate}
    tmp = None
    if args.keep:
        work = args.keep
        work.mkdir(parents=True, exist_ok=True)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="dynoqc_bench_")
        work = Path(tmp.name)
    failed: list[str] = []

    def part(label: str, fn: Any) -> Any:
        """Run one part; a failure is reported and the other parts go on."""
        try:
            return fn()
        except (Exception, SystemExit) as exc:  # noqa: BLE001 - report, keep the rest
            failed.append(f"{label}: {exc}")
            print(f"{label} failed: {exc}", file=sys.stderr)
            return None

    try:
        csv = work / "night.csv"
        print(f"generating the {hours:g} h night ...", file=sys.stderr)
        results["night_info"] = make_csv(csv, hours, args.rate)
        # one untimed run: file-system caches and the font cache as in everyday use
        run_child(dynoqc_cmd([csv], work / "warmup", plots=True))
        print("one night, interleaved ...", file=sys.stderr)
        results["night"] = bench_one_night(csv, work, reps)
        results["stages_no_plots"] = part("stages", lambda: bench_stages(csv, work, False))
        results["stages_figures"] = part("stages", lambda: bench_stages(csv, work, True))
        if not args.no_jobs:
            print("four nights, --jobs 1 vs --jobs 2 ...", file=sys.stderr)
            results["jobs"] = part(
                "jobs", lambda: bench_jobs(work, hours, args.rate, max(1, min(reps, 2)))
            )
        if scales:
            results["scaling"] = part(
                "scaling", lambda: bench_scaling(work, hours, args.rate, scales)
            )
    finally:
        if tmp is not None:
            tmp.cleanup()
    results["loadavg_end"] = os.getloadavg() if hasattr(os, "getloadavg") else None
    results["failed"] = failed
    if args.json:
        args.json.write_text(json.dumps(results, indent=2, default=str))
    print(report(results))
    for note in failed:
        print(f"\nFAILED: {note}")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
