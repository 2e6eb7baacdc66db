"""Batch processing: many nights, skip-if-unchanged, failures isolated, index, pools."""

import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner
from conftest import ROOT

from pipeline.batch import NightReport, expand_inputs, process_night, run_batch, write_index
from pipeline.cli import main
from pipeline.errors import ConfigError

SAMPLE = ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz"
CONFIG = ROOT / "configs" / "cell_b3.toml"


@pytest.fixture(scope="module")
def nights(tmp_path_factory) -> Path:
    """Two short nights (the first 40 min of the sample, written twice) and a broken one."""
    import gzip

    d = tmp_path_factory.mktemp("nights")
    with gzip.open(SAMPLE, "rt", encoding="utf-8") as fh:
        lines = fh.readlines()
    head = [ln for ln in lines[:12] if not ln[:1].isdigit()]
    body = [ln for ln in lines[len(head):]][:2400]
    for name in ("night_a.csv", "night_b.csv"):
        (d / name).write_text("".join(head + body), encoding="utf-8")
    (d / "night_bad.csv").write_text("this is not a log\n", encoding="utf-8")
    return d


def test_expand_inputs_files_folders_globs(nights):
    assert len(expand_inputs([nights])) == 3
    assert len(expand_inputs([str(nights / "night_[ab].csv")])) == 2
    with pytest.raises(ConfigError, match="no such file"):
        expand_inputs([nights / "missing.csv"])


def test_failing_night_does_not_stop_the_batch_and_index_is_written(nights, tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(
        main, ["process", str(nights), "--config", str(CONFIG), "--out", str(out), "--no-plots"]
    )
    assert res.exit_code == 3, res.output  # one night had unusable data
    assert (out / "night_a.h5").is_file() and (out / "night_b.h5").is_file()
    assert not (out / "night_bad.h5").exists()
    index = json.loads((out / "dynoqc_index.json").read_text())
    status = {Path(r["run"]).name: r["status"] for r in index}
    assert status == {"night_a.csv": "processed", "night_b.csv": "processed",
                      "night_bad.csv": "failed"}
    assert (out / "dynoqc_index.csv").read_text().count("\n") == 4
    assert "2 processed, 0 skipped, 1 failed" in res.output


def test_unchanged_night_is_skipped_unless_forced(nights, tmp_path):
    out = tmp_path / "out"
    args = (str(nights / "night_a.csv"), str(CONFIG), str(out), False)
    first = process_night(*args)
    assert first.status == "processed", first.message
    mtime = Path(first.result_file).stat().st_mtime_ns
    assert process_night(*args).status == "skipped"
    assert Path(first.result_file).stat().st_mtime_ns == mtime
    assert process_night(*args, force=True).status == "processed"
    # A changed input is redone.
    changed = tmp_path / "night_a.csv"
    changed.write_bytes((nights / "night_a.csv").read_bytes() + b"\n")
    assert process_night(str(changed), str(CONFIG), str(out), False).status == "processed"


def test_same_result_name_is_refused(nights, tmp_path):
    other = tmp_path / "again"
    other.mkdir()
    shutil.copy(nights / "night_a.csv", other / "night_a.csv")
    reports = list(run_batch([nights / "night_a.csv", other / "night_a.csv"], CONFIG,
                             tmp_path / "out", plots=False))
    assert sorted(r.status for r in reports) == ["failed", "processed"]
    assert any("same result name" in r.message for r in reports)


def test_process_pool_and_dask_executor_give_the_same_reports(nights, tmp_path):
    runs = [nights / "night_a.csv", nights / "night_b.csv"]
    pool = sorted(run_batch(runs, CONFIG, tmp_path / "pool", plots=False, jobs=2),
                  key=lambda r: r.run)
    assert [r.status for r in pool] == ["processed", "processed"]
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        dask = sorted(run_batch(runs, CONFIG, tmp_path / "dask", plots=False,
                                executor=client.get_executor(pure=False)),
                      key=lambda r: r.run)
    assert [r.status for r in dask] == ["processed", "processed"]
    assert [r.flags for r in dask] == [r.flags for r in pool]
    assert [r.rows for r in dask] == [r.rows for r in pool]


def test_write_index_is_complete_for_every_status(tmp_path):
    reps = [NightReport(run="a.csv", status="processed", flags={"drift": 1}),
            NightReport(run="b.csv", status="failed", exit_code=3, message="b.csv: empty")]
    csv_path, json_path = write_index(reps, tmp_path)
    assert len(json.loads(json_path.read_text())) == 2
    assert "drift=1" in csv_path.read_text() and "b.csv: empty" in csv_path.read_text()


def test_a_rerun_completes_what_an_interrupted_run_left(tmp_path: Path) -> None:
    # Outputs are complete-or-redone: a missing figure or summary (a run killed during the
    # report) makes the rerun redo the night instead of "skipped: unchanged"; a stale
    # temporary file of the killed run is removed; the index keeps a skipped night's facts.
    run = tmp_path / "night.csv.gz"
    shutil.copyfile(ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz", run)
    cfg = ROOT / "configs" / "cell_b3.toml"
    out = tmp_path / "out"
    first = process_night(str(run), str(cfg), str(out), True, False, False)
    assert first.status == "processed"
    figure = out / "night_lambda.png"
    figure.unlink()
    (out / ".night.h5.abc123.tmp").write_bytes(b"half a file")
    again = process_night(str(run), str(cfg), str(out), True, False, False)
    assert again.status == "processed" and figure.is_file()
    assert not list(out.glob(".night*.tmp"))
    third = process_night(str(run), str(cfg), str(out), True, False, False)
    assert third.status == "skipped"
    assert third.rows == first.rows and third.flags == first.flags
    assert third.verdicts == first.verdicts
    # a result made without figures is not complete for a run that asks for them
    nop = tmp_path / "nop"
    process_night(str(run), str(cfg), str(nop), False, False, False)
    assert process_night(str(run), str(cfg), str(nop), True, False, False).status == "processed"


def test_sigterm_stops_a_batch_and_its_workers(tmp_path: Path) -> None:
    # SIGTERM is handled like Ctrl-C: exit 128 + 15, nothing committed after it, no worker
    # left running (a process pool with --jobs 2).
    import os
    import signal
    import subprocess
    import sys
    import time

    runs = []
    for k in range(6):
        p = tmp_path / f"n{k}.csv.gz"
        shutil.copyfile(ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz", p)
        runs.append(str(p))
    cmd = [sys.executable, "-c", "from pipeline.cli import entry; entry()", "process", *runs,
           "--config", str(ROOT / "configs" / "cell_b3.toml"), "--out", str(tmp_path / "o"),
           "--jobs", "2", "--no-progress"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    deadline = time.monotonic() + 120  # until the batch is under way (a first result)
    while time.monotonic() < deadline and not list((tmp_path / "o").glob("*.h5")):
        time.sleep(0.2)
    os.kill(proc.pid, signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 128 + signal.SIGTERM, err
    assert "Traceback" not in err
    alive = ["?"]
    for _ in range(50):  # the stopped workers are reaped within moments (zombies don't count)
        ps = subprocess.run(["ps", "-o", "stat=", "-s", str(proc.pid)], capture_output=True,
                            text=True)
        alive = [st for st in ps.stdout.split() if not st.startswith("Z")]
        if not alive:
            break
        time.sleep(0.2)
    assert not alive, "processes of the batch still running"
    assert not list((tmp_path / "o").glob(".*.tmp"))
