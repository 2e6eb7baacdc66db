"""The Dask path from the command line, on a real scheduler and workers on the loopback.

Started here with the ``dask scheduler`` / ``dask worker`` commands of Dask distributed
(bounded in time, stopped at the end), as a cell would run them; ``dynoqc process
--scheduler`` then sends the nights there. Relative paths are given on purpose: they must be
made absolute before they are sent.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import ROOT, SAMPLE_CONFIG

pytest.importorskip("distributed")
DASK = shutil.which("dask") or str(Path(sys.executable).parent / "dask")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start(args: list[str], cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([DASK, *args], cwd=cwd, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)


def _stop(procs: list[subprocess.Popen]) -> None:
    for p in procs:
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGTERM)
    for p in procs:
        try:
            p.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(p.pid, signal.SIGKILL)
            p.wait(timeout=10)


@pytest.fixture
def cluster(tmp_path: Path):
    """A scheduler and two single-threaded workers on 127.0.0.1; its address."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    work = tmp_path / "cluster"
    work.mkdir()
    procs = [_start(["scheduler", "--host", "127.0.0.1", "--port", str(port),
                     "--no-dashboard"], work)]
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                break
        time.sleep(0.2)
    else:
        _stop(procs)
        pytest.fail("dask scheduler did not start within 60 s")
    for _ in range(2):
        procs.append(_start(["worker", address, "--nthreads", "1", "--nworkers", "1",
                             "--no-dashboard", "--local-directory", str(work)], work))
    from distributed import Client

    with Client(address, timeout=60) as client:
        client.wait_for_workers(2, timeout=120)
    try:
        yield address, procs
    finally:
        _stop(procs)


def _nights(folder: Path, n: int) -> list[str]:
    folder.mkdir(parents=True, exist_ok=True)
    names = []
    for k in range(n):
        target = folder / f"night_{k}.csv.gz"
        shutil.copyfile(ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz", target)
        names.append(str(target.relative_to(folder.parent)))
    return names


def _dynoqc(args: list[str], cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", "from pipeline.cli import entry; entry()",
                           *args], cwd=cwd, capture_output=True, text=True, timeout=timeout)


def test_process_sends_nights_to_a_real_cluster(cluster, tmp_path: Path) -> None:
    address, _ = cluster
    runs = _nights(tmp_path / "in", 3)
    config = tmp_path / "cell.toml"
    shutil.copyfile(SAMPLE_CONFIG, config)
    r = _dynoqc(["process", *runs, "--config", "cell.toml", "--out", "out", "--no-plots",
                 "--scheduler", address], tmp_path)
    assert r.returncode == 0, r.stderr
    assert "Traceback" not in r.stderr
    index = json.loads((tmp_path / "out" / "dynoqc_index.json").read_text())
    rows = index["nights"] if isinstance(index, dict) else index
    assert len(rows) == 3 and all(n["status"] == "processed" for n in rows)
    for k in range(3):
        assert (tmp_path / "out" / f"night_{k}.h5").stat().st_size > 0


def test_a_worker_killed_mid_batch_is_survived(cluster, tmp_path: Path) -> None:
    address, procs = cluster
    runs = _nights(tmp_path / "in", 4)
    config = tmp_path / "cell.toml"
    shutil.copyfile(SAMPLE_CONFIG, config)
    batch = subprocess.Popen(
        [sys.executable, "-c", "from pipeline.cli import entry; entry()", "process", *runs,
         "--config", "cell.toml", "--out", "out", "--no-plots", "--scheduler", address],
        cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    time.sleep(4.0)  # the workers have their first nights by now
    os.killpg(procs[1].pid, signal.SIGKILL)
    out, err = batch.communicate(timeout=600)
    assert batch.returncode in (0, 1, 2, 3), err
    assert "Traceback" not in err
    index = json.loads((tmp_path / "out" / "dynoqc_index.json").read_text())
    rows = index["nights"] if isinstance(index, dict) else index
    assert len(rows) == 4  # every night is accounted for, processed or failed with a reason
    for row in rows:
        assert row["status"] in ("processed", "failed")
        if row["status"] == "failed":
            assert row["message"]
