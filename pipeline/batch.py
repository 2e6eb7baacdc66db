"""Many nights: input expansion, skip-if-unchanged, a process pool or a Dask cluster, and
the batch index.

Workers get paths and return a small :class:`NightReport`; each worker writes its own result
file and figures, so no data frames are pickled. The local pool and a Dask cluster share one
code path: both are :class:`concurrent.futures.Executor` objects (Dask's
``Client.get_executor``).
"""

from __future__ import annotations

import csv
import glob
import hashlib
import json
import multiprocessing
import multiprocessing.context
import os
import signal
import sys
import time
import traceback
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Executor, Future, ProcessPoolExecutor, as_completed
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from .atomic import atomic_path
from .errors import ConfigError, DynoqcError, InputDataError, environment_problem

#: File name patterns taken from a folder given as input.
RUN_PATTERNS = ("*.csv", "*.csv.gz", "*.tsv", "*.tsv.gz", "*.txt", "*.txt.gz", "*.parquet",
                "*.mf4", "*.MF4")
INDEX_NAME = "dynoqc_index"


@dataclass
class NightReport:
    """What one night's processing reports back (small and picklable).

    status: ``processed``, ``skipped`` (result up to date) or ``failed``; exit_code: the
    documented code of this night (0, 1 internal, 2 config, 3 data).
    """

    run: str
    status: str
    exit_code: int = 0
    result_file: str = ""
    message: str = ""
    rows: int = 0
    hours: float = 0.0
    flags: dict[str, int] = field(default_factory=dict)
    verdicts: dict[str, str] = field(default_factory=dict)
    lines: list[str] = field(default_factory=list)
    outputs: list[str] = field(default_factory=list)
    seconds: float = 0.0


def expand_inputs(items: Sequence[str | Path]) -> list[Path]:
    """Files as given; folders by :data:`RUN_PATTERNS` (not recursive); glob patterns
    expanded. Order kept, duplicates removed. A name that matches nothing is an error."""
    out: list[Path] = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            found = sorted({f for pat in RUN_PATTERNS for f in p.glob(pat) if f.is_file()})
            if not found:
                raise ConfigError(f"{p}: folder holds no run files ({', '.join(RUN_PATTERNS)}).")
            out.extend(found)
        elif p.exists():
            out.append(p)
        elif glob.has_magic(str(item)):
            found = sorted(Path(f) for f in glob.glob(str(item)) if Path(f).is_file())
            if not found:
                raise ConfigError(f"{item}: pattern matches no file.")
            out.extend(found)
        else:
            raise ConfigError(f"{item}: no such file or folder.")
    return list(dict.fromkeys(p.resolve() for p in out))


def file_sha256(path: Path) -> str:
    """SHA-256 of a file's bytes (streamed)."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def outputs_complete(result: Path, plots: bool) -> bool:
    """Whether every output of the night's last run exists: its JSON summary (written last)
    lists them all, and it was made with figures when figures are asked for now."""
    summary = result.with_name(f"{result.stem}_summary.json")
    try:
        data = json.loads(summary.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    names = data.get("outputs") if isinstance(data, dict) else None
    if not isinstance(names, list) or (plots and not data.get("plots")):
        return False
    return all((result.parent / str(n)).is_file() for n in names)


def remove_stale_temporaries(out_dir: Path, stem: str) -> int:
    """Remove the temporary files a killed run of this night left in ``out_dir``
    (``.<stem>*.tmp``, :func:`pipeline.atomic.atomic_path`); how many were removed."""
    removed = 0
    for tmp in Path(out_dir).glob(f".{glob.escape(stem)}*.tmp"):
        try:
            tmp.unlink()
            removed += 1
        except OSError:
            pass
    return removed


def _facts(rep: NightReport, result: Path) -> None:
    """Rows, hours, flags counted and verdicts of an existing result, for the batch index of
    a night that is skipped (only attributes and small tables are read)."""
    import h5py

    try:
        with h5py.File(result, "r") as f:
            t = f["timeseries/time"]
            rep.rows = int(t.shape[0])
            if rep.rows > 1:
                rep.hours = float((t[-1] - t[0]) / 3600.0)
            if "flags/check" in f:
                checks = f["flags/check"].asstr()[()]
                rep.flags = {str(c): int((checks == c).sum()) for c in sorted(set(checks))}
            verdicts = f.attrs.get("instrument_verdicts")
            if verdicts is not None:
                rep.verdicts = dict(json.loads(verdicts))
    except (OSError, KeyError, ValueError):
        pass


def up_to_date(result: Path, source_sha256: str, config_sha256: str, version: str) -> bool:
    """Whether ``result`` was made from the same input bytes, resolved config and tool
    version (then the night is skipped unless ``--force``)."""
    if not result.is_file():
        return False
    try:
        import h5py

        with h5py.File(result, "r") as f:
            a = f.attrs
            return (
                str(a.get("source_sha256", "")) == source_sha256
                and str(a.get("config_sha256", "")) == config_sha256
                and str(a.get("tool_version", "")) == version
            )
    except OSError:
        return False


def process_night(
    run: str | Sequence[str],
    config_path: str,
    out_dir: str,
    plots: bool = True,
    force: bool = False,
    debug: bool = False,
    progress: Callable[[str], None] | None = None,
    write_threads: int | None = None,
) -> NightReport:
    """Process one night into ``out_dir``; never raises (the report carries the failure).

    A top-level function so that process pools (fork, spawn or forkserver) and Dask workers
    can run it. ``progress`` (in-process use only) receives the stage names;
    ``write_threads``: threads that compress the result file's chunks (None: one per CPU,
    at most 4; pool workers get their share of the CPUs).
    """
    from . import __version__
    from .api import process_to_files, run_stem
    from .config import load_config
    from .console import night_summary

    t0 = time.perf_counter()
    joined = [Path(r) for r in run] if not isinstance(run, str) else None
    path = joined[0] if joined else Path(run)
    rep = NightReport(
        run=" + ".join(str(p.resolve()) for p in joined) if joined else str(path.resolve()),
        status="failed",
    )
    try:
        cfg = load_config(config_path)
        result = Path(out_dir) / f"{run_stem(path)}.h5"
        for p in joined or [path]:
            if not p.exists():
                raise ConfigError(f"{p}: no such file.")
            if not p.is_file():
                raise InputDataError(f"{p}: not a regular file (a folder, pipe or device); "
                                     "give the log file itself.")
        remove_stale_temporaries(Path(out_dir), run_stem(path))
        if joined:
            pass  # rollover files are always processed (their joined digest needs the read)
        elif (not force and up_to_date(result, file_sha256(path), cfg.sha256(), __version__)
              and outputs_complete(result, plots)):
            _facts(rep, result)
            rep.status, rep.result_file = "skipped", str(result.resolve())
            rep.message = "unchanged input, config and tool version; result kept (--force to redo)"
            rep.lines = [f"{path.name} -> {result}  (skipped: {rep.message})"]
            return rep
        outcome = process_to_files(
            joined or path, cfg, out_dir, plots=plots, write_threads=write_threads,
            **({"progress": progress} if progress else {}),
        )
        res = outcome.result
        rep.status, rep.result_file = "processed", str(Path(outcome.result_file).resolve())
        rep.outputs = [str(p) for p in outcome.figures]
        rep.lines = night_summary(outcome)
        if res is not None:
            t = res.series["time"].to_numpy()
            rep.rows = len(t)
            rep.hours = float((t[-1] - t[0]) / 3600.0) if len(t) > 1 else 0.0
            rep.flags = {str(k): int(v) for k, v in res.flags["check"].value_counts().items()}
            rep.verdicts = dict(res.attrs.get("instrument_verdicts", {}))
    except DynoqcError as exc:
        rep.exit_code, rep.message = exc.exit_code, str(exc)
        if debug:
            rep.message += "\n" + traceback.format_exc()
    except KeyboardInterrupt:
        raise
    except OSError as exc:  # permission, disk full, a folder where a file is expected ...
        err = environment_problem(exc, out_dir)
        rep.exit_code, rep.message = err.exit_code, str(err)
        if debug:
            rep.message += "\n" + traceback.format_exc()
    except Exception as exc:  # an unexpected fault in one night must not stop the batch
        rep.exit_code = 1
        rep.message = (
            f"{path}: internal error ({type(exc).__name__}: {exc}). Run again with --debug "
            "for the traceback and please report it."
        )
        if debug:
            rep.message += "\n" + traceback.format_exc()
    finally:
        rep.seconds = time.perf_counter() - t0
    return rep


def make_executor(jobs: int, scheduler: str | None) -> Executor:
    """A local process pool of ``jobs`` workers, or the executor of a Dask distributed
    cluster at ``scheduler`` (needs the ``cluster`` extra)."""
    if scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise ConfigError(
                "--scheduler needs Dask distributed: pip install 'dynoqc[cluster]'."
            ) from None
        try:
            client = Client(scheduler)
        except OSError as exc:
            raise ConfigError(f"--scheduler {scheduler}: cannot connect ({exc}).") from None
        return client.get_executor(pure=False)
    threads = max(1, _cpu_count() // jobs)
    return ProcessPoolExecutor(
        max_workers=jobs, mp_context=_worker_context(), max_tasks_per_child=20,
        initializer=_limit_threads, initargs=(threads,),
    )


def _cpu_count() -> int:
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1


def _limit_threads(threads: int) -> None:
    """Worker set-up: share the CPUs between the workers instead of each one starting a
    thread per CPU (pyarrow's reader, the HDF5 chunk encoder), which oversubscribes them."""
    import pyarrow

    from .runtime import tune_allocator

    tune_allocator()
    pyarrow.set_cpu_count(threads)
    signal.signal(signal.SIGTERM, _stop_here)
    default_hook = sys.unraisablehook

    def quiet_interrupts(info: Any) -> None:  # a stop raised inside a weakref callback
        if not isinstance(info.exc_value, KeyboardInterrupt):
            default_hook(info)

    sys.unraisablehook = quiet_interrupts


def _stop_here(signum: int, frame: object) -> None:
    """A pool worker asked to stop (SIGTERM from the batch after an interrupt): unwind like
    Ctrl-C, so the result being written removes its temporary file."""
    raise KeyboardInterrupt

#: Modules the worker processes start with already imported (forkserver preload), so a
#: worker does not pay pandas/matplotlib/h5py imports again (about 1 s): the processing
#: path, every figure module, the summary and its PDF backend.
WORKER_PRELOAD = [
    "pipeline.api",
    "pyarrow.csv",
    "pipeline.report.render",
    "pipeline.report.plots",
    *(f"pipeline.report.{m}" for m in (
        "overview", "consistency", "residuals", "steady_table", "water", "fuel", "emissions",
        "summary",
    )),
    "matplotlib.backends.backend_pdf",
]


def _worker_context() -> multiprocessing.context.BaseContext:
    """Start workers from a fork server that has imported the pipeline once (POSIX); spawn
    elsewhere. Not plain fork: forking a process with threads is unsafe, and Python 3.14
    moves away from it as the default too."""
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(WORKER_PRELOAD)
        return ctx
    return multiprocessing.get_context("spawn")


def run_batch(
    runs: Sequence[Path],
    config_path: Path,
    out_dir: Path,
    *,
    plots: bool = True,
    force: bool = False,
    jobs: int = 1,
    scheduler: str | None = None,
    executor: Executor | None = None,
    debug: bool = False,
) -> Iterator[NightReport]:
    """Process ``runs``, yielding each night's report as it completes.

    One night at a time in this process when ``jobs`` is 1 and no scheduler or executor is
    given; otherwise through the executor. Two runs that would write the same result name
    are refused (the second fails) rather than overwrite each other.
    """
    from .api import run_stem

    seen: dict[str, Path] = {}
    todo: list[Path] = []
    for run in runs:
        stem = run_stem(run)
        if stem in seen:
            yield NightReport(
                run=str(run), status="failed", exit_code=2,
                message=f"{run}: gives the same result name '{stem}.h5' as {seen[stem]}; "
                "process it into another --out folder.",
            )
            continue
        seen[stem] = run
        todo.append(run)
    if executor is None and jobs <= 1 and not scheduler:
        for r in todo:
            yield process_night(str(r), str(config_path), str(out_dir), plots, force, debug)
        return
    # Absolute paths: a worker (a Dask worker above all) runs in a directory of its own; the
    # files must be visible to every worker under these paths.
    args = [
        (str(Path(r).resolve()), str(Path(config_path).resolve()),
         str(Path(out_dir).resolve()), plots, force, debug)
        for r in todo
    ]
    own = executor is None
    ex = executor if executor is not None else make_executor(jobs, scheduler)
    threads = None if scheduler else max(1, _cpu_count() // max(1, jobs))
    try:
        futures: dict[Future[NightReport], str] = {
            ex.submit(process_night, *a, write_threads=threads): a[0] for a in args
        }
        for fut in as_completed(futures):
            try:
                yield fut.result()
            except Exception as exc:  # a worker died (e.g. killed): report, go on
                yield NightReport(run=futures[fut], status="failed", exit_code=1,
                                  message=f"{futures[fut]}: worker failed ({exc}).")
    except BaseException:  # interrupted (Ctrl-C, SIGTERM, SIGHUP): stop the workers now
        if own:
            _shutdown(ex, terminate=True)
        raise
    if own:
        _shutdown(ex)


def _shutdown(ex: Executor, *, terminate: bool = False) -> None:
    """Stop an executor this module made: a process pool with its pending work cancelled
    (with ``terminate``, after an interrupt, its workers are stopped at once: nothing they
    would commit afterwards is wanted); a Dask executor (whose ``shutdown`` takes no
    ``cancel_futures``) and then its client."""
    client = getattr(ex, "_client", None)
    if isinstance(ex, ProcessPoolExecutor):
        if terminate:
            workers = list((getattr(ex, "_processes", None) or {}).values())
            for w in workers:
                w.terminate()
            ex.shutdown(wait=False, cancel_futures=True)
            for w in workers:
                w.join(timeout=10)
            return
        ex.shutdown(wait=True, cancel_futures=True)
        return
    ex.shutdown(wait=True)
    if client is not None:
        client.close()


def write_index(reports: Sequence[NightReport], out_dir: Path) -> tuple[Path, Path]:
    """The batch index, ``dynoqc_index.csv`` and ``.json`` in ``out_dir``: one row per night
    with its status, result file, duration, flags counted per check and instrument
    verdicts. Written atomically (temporary name, then rename)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    rows = [asdict(r) for r in sorted(reports, key=lambda r: r.run)]
    json_path = out_dir / f"{INDEX_NAME}.json"
    csv_path = out_dir / f"{INDEX_NAME}.csv"
    with atomic_path(json_path) as tmp, open(tmp, "w", encoding="utf-8") as fh:
        json.dump(rows, fh, indent=2)

    with atomic_path(csv_path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["run", "status", "exit_code", "result_file", "rows", "hours", "flags",
                    "verdicts", "message", "seconds"])
        for r in rows:
            w.writerow([
                r["run"], r["status"], r["exit_code"], r["result_file"], r["rows"],
                f"{r['hours']:.3f}",
                "; ".join(f"{k}={v}" for k, v in sorted(r["flags"].items())),
                "; ".join(f"{k}: {v}" for k, v in r["verdicts"].items()),
                r["message"].splitlines()[0] if r["message"] else "",
                f"{r['seconds']:.2f}",
            ])
    return csv_path, json_path
