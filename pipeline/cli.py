"""Command line: ``dynoqc process | inspect | fuels``.

Exit codes (DESIGN.md contract): 0 processed (flags or not); 1 unexpected internal fault;
2 bad usage or config; 3 unusable input data. Messages go to stderr; the result paths and
the summary go to stdout. Heavy libraries are imported inside the commands so ``--help`` is
instant.
"""

from __future__ import annotations

import sys
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

from . import __version__
from .atomic import stop_on_interrupt, stop_signal
from .errors import DynoqcError, environment_problem

EXIT_OK, EXIT_INTERNAL, EXIT_CONFIG, EXIT_DATA = 0, 1, 2, 3


def _fail(message: str, code: int) -> None:
    click.echo(f"dynoqc: {message}", err=True)
    sys.exit(code)


def _guarded(debug: bool, fn: Callable[[], Any]) -> Any:
    """Run ``fn``; turn known errors into a message and exit code, no traceback unless debug."""
    try:
        with stop_on_interrupt():
            return fn()
    except DynoqcError as exc:
        if debug:
            traceback.print_exc()
        _fail(str(exc), exc.exit_code)
    except KeyboardInterrupt:
        _fail("interrupted; no partial result was left behind.", 128 + stop_signal())
    except OSError as exc:  # the machine, not dynoqc: permission, disk full, a folder ...
        if debug:
            traceback.print_exc()
        err = environment_problem(exc)
        _fail(str(err), err.exit_code)
    except Exception as exc:  # an unexpected fault: say so plainly
        if debug:
            traceback.print_exc()
        _fail(
            f"internal error ({type(exc).__name__}: {exc}). Run again with --debug for the "
            "traceback and please report it.",
            EXIT_INTERNAL,
        )


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="dynoqc")
def main() -> None:
    """dynoqc: check an overnight engine test-cell log and write HDF5 + PNG results."""


@main.command()
@click.argument("runs", nargs=-1, required=True)
@click.option(
    "--config", "-c", "config_path", required=True, type=click.Path(path_type=Path),
    help="Cell config (TOML) mapping the log's columns to dynoqc quantities.",
)
@click.option(
    "--out", "-o", "out_dir", default=Path("out"), show_default=True,
    type=click.Path(file_okay=False, path_type=Path), help="Folder for results.",
)
@click.option("--no-plots", is_flag=True,
              help="Result file and Markdown/JSON summary only: no PNG figures, no PDF page.")
@click.option("--jobs", "-j", default=1, show_default=True, type=click.IntRange(min=1),
              help="Nights processed in parallel (local process pool).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Send the nights to a Dask distributed cluster (needs the cluster extra).")
@click.option("--force", is_flag=True,
              help="Redo nights whose input, config and tool version are unchanged.")
@click.option("--join", is_flag=True,
              help="RUNS are the rollover files of one night: join them in the order of their "
              "clocks into one result.")
@click.option("--no-progress", is_flag=True, help="No progress bar on stderr.")
@click.option("--quiet", "-q", is_flag=True, help="No per-night lines on stdout (errors only).")
@click.option("--json", "as_json", is_flag=True,
              help="One JSON object per night on stdout instead of the text lines.")
@click.option("--debug", is_flag=True, help="Show tracebacks of errors.")
def process(runs: tuple[str, ...], config_path: Path, out_dir: Path, no_plots: bool, jobs: int,
            scheduler: str | None, force: bool, join: bool, no_progress: bool, quiet: bool,
            as_json: bool, debug: bool) -> None:
    """Process logged night(s) RUNS (files, folders or glob patterns) into OUT/<run>.h5 plus
    figures and a summary; with several nights also OUT/dynoqc_index.csv and .json."""
    from .batch import expand_inputs, run_batch, write_index
    from .config import load_config
    from .runtime import tune_allocator

    tune_allocator()

    paths = _guarded(debug, lambda: expand_inputs(runs))
    _guarded(debug, lambda: load_config(config_path))  # a bad config stops before any night
    show = not no_progress and not quiet and len(paths) > 1 and sys.stderr.isatty()
    reports = []
    worst = EXIT_OK

    def consume(items) -> None:  # noqa: ANN001 - an iterator of NightReport
        nonlocal worst
        for rep in items:
            reports.append(rep)
            if rep.status == "failed":
                click.echo(f"dynoqc: {rep.message}", err=True)
                worst = max(worst, rep.exit_code)
            if as_json:
                import dataclasses
                import json

                night = {k: v for k, v in dataclasses.asdict(rep).items() if k != "lines"}
                click.echo(json.dumps(night, ensure_ascii=False))
            elif not quiet:
                for line in rep.lines:
                    click.echo(line)

    batch = run_batch(paths, config_path, out_dir, plots=not no_plots, force=force,
                      jobs=jobs, scheduler=scheduler, debug=debug)
    def run_all() -> None:
        if join:
            from .batch import process_night

            consume([process_night([str(p) for p in paths], str(config_path), str(out_dir),
                                   not no_plots, force, debug)])
        elif len(paths) == 1 and not no_progress and not quiet and sys.stderr.isatty():
            consume(_single_night_with_progress(paths[0], config_path, out_dir, not no_plots,
                                                force, debug))
        elif show:
            # the nights' lines go to stdout once the bar on stderr has finished, so the two
            # never share a terminal line
            done: list = []
            with click.progressbar(length=len(paths), label="nights", file=sys.stderr) as bar:
                for rep in batch:
                    bar.update(1)
                    done.append(rep)
            consume(done)
        else:
            consume(batch)

    try:
        with stop_on_interrupt():  # also a Ctrl-C that Python lost on its way up
            run_all()
    except KeyboardInterrupt:
        _fail("interrupted; no partial result was left behind.", 128 + stop_signal())
    except DynoqcError as exc:
        _fail(str(exc), exc.exit_code)
    if len(paths) > 1 and not join:
        csv_path, json_path = write_index(reports, out_dir)
        done = sum(r.status == "processed" for r in reports)
        skipped = sum(r.status == "skipped" for r in reports)
        failed = sum(r.status == "failed" for r in reports)
        if not quiet and not as_json:
            click.echo(f"{done} processed, {skipped} skipped, {failed} failed; index: {csv_path}")
    sys.exit(worst)


def _single_night_with_progress(run: Path, config_path: Path, out_dir: Path, plots: bool,
                                force: bool, debug: bool):  # noqa: ANN202 - a generator
    """One long night in this process, with a stage progress bar on stderr."""
    from .api import STAGES
    from .batch import process_night

    with click.progressbar(length=len(STAGES), label=f"{run.name}: starting",
                           file=sys.stderr) as bar:
        def step(stage: str) -> None:
            bar.label = f"{run.name}: {stage}"
            bar.update(1)

        rep = process_night(str(run), str(config_path), str(out_dir), plots, force, debug,
                            progress=step)
    yield rep  # after the bar has finished its line


@main.command()
@click.option("--json", "as_json", is_flag=True, help="Machine-readable output (JSON).")
def fuels(as_json: bool) -> None:
    """List the fuel presets and their derived properties."""
    from .fuels import load_presets

    if as_json:
        import json

        click.echo(json.dumps({name: f.properties() for name, f in load_presets().items()},
                              indent=2, default=str))
        return
    click.echo(f"{'preset':<12} {'formula':<16} {'w_C':>7} {'AFR_st':>7}  description")
    for name, f in load_presets().items():
        formula = (f"CH{f.h_c:.3g}" + (f"O{f.o_c:.3g}" if f.o_c else "")) if f.has_carbon \
            else f"H{f.h_c:.3g}" + (f"N{f.n_c:.3g}" if f.n_c else "")
        click.echo(f"{name:<12} {formula:<16} {f.w_c:7.4f} {f.afr_stoich:7.3f}  {f.description}")
    click.echo("AFR_st: kg dry air per kg fuel, computed from the composition (CFR dry air).")


@main.command()
@click.argument("run", type=click.Path(path_type=Path))
@click.option("--config", "-c", "config_path", type=click.Path(path_type=Path), default=None,
              help="Cell config to show the mapping of.")
@click.option("--json", "as_json", is_flag=True, help="Machine-readable output (JSON).")
@click.option("--write", "write_path", type=click.Path(path_type=Path), default=None,
              help="Without --config: write the proposed [channels] config to this file.")
@click.option("--debug", is_flag=True, help="Show tracebacks of errors.")
def inspect(run: Path, config_path: Path | None, as_json: bool, write_path: Path | None,
            debug: bool) -> None:
    """Show the columns, units and value ranges of RUN and how a config maps them."""
    from .inspection import inspect_run

    for line in _guarded(debug, lambda: inspect_run(run, config_path, as_json, write_path)):
        click.echo(line)


@main.command()
@click.argument("result", type=click.Path(path_type=Path))
@click.option("--out", "-o", "out_dir", default=None,
              type=click.Path(file_okay=False, path_type=Path),
              help="Folder for the figures and summary (default: beside the result file).")
@click.option("--no-plots", is_flag=True,
              help="Markdown/JSON summary only: no PNG figures, no PDF page.")
@click.option("--debug", is_flag=True, help="Show tracebacks of errors.")
def report(result: Path, out_dir: Path | None, no_plots: bool, debug: bool) -> None:
    """Re-render the figures and summary of an existing RESULT file (.h5)."""
    from .report import render_report
    from .runtime import tune_allocator

    tune_allocator()
    target = out_dir if out_dir is not None else result.parent
    for path in _guarded(debug, lambda: render_report(result, target, plots=not no_plots)):
        click.echo(str(path))


def entry() -> None:
    """The ``dynoqc`` command: :func:`main`, with a reader that closes the pipe early
    (``dynoqc fuels | head -1``) ending it quietly with exit code 2 (an environment
    condition, no traceback)."""
    try:
        main()
    except BrokenPipeError:
        import os

        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())  # Python flushes stdout once more at exit
        sys.exit(2)
    except SystemExit as exc:
        # click ends a closed pipe (EPIPE) with exit 1, after wrapping stdout so that the
        # last flush stays quiet; that is the reader's doing, not an internal error
        if exc.code == 1 and type(sys.stdout).__name__.endswith("PacifyFlushWrapper"):
            sys.exit(2)
        raise


if __name__ == "__main__":  # pragma: no cover
    entry()
