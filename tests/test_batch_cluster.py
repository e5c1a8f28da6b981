"""Batches on Dask: a local cluster of worker processes, a separate scheduler, lost workers.

The reference for every run here is the same manifest run in this process,
one case after another: masks must come out bit for bit the same.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from batch_cases import GOOD_ROWS, mask_hashes, read_summary, write_manifest
from engine.batch import RunOptions, batch_client, read_manifest, run_case, run_cases
from engine.batch.cluster import LOST_TWICE
from engine.cli import main

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def manifest(tmp_path_factory) -> Path:
    return write_manifest(tmp_path_factory.mktemp("manifest") / "cases.csv", GOOD_ROWS)


@pytest.fixture(scope="module")
def single_process(manifest, tmp_path_factory) -> dict[str, str]:
    """Mask hashes of the manifest run in this process."""
    out = tmp_path_factory.mktemp("single")
    results = run_cases(read_manifest(manifest), RunOptions(str(out)))
    assert [r.status for r in results] == ["done"] * len(GOOD_ROWS), [r.error for r in results]
    hashes = mask_hashes(out)
    assert len(hashes) == len(GOOD_ROWS)
    return hashes


@pytest.fixture(scope="module")
def client():
    """A LocalCluster of two worker processes (processes=True), one thread each."""
    with batch_client(workers=2) as c:
        assert c.cluster.processes and len(c.scheduler_info()["workers"]) == 2
        yield c


def test_two_worker_processes_give_the_single_process_masks(manifest, single_process, client, tmp_path):
    results = run_cases(read_manifest(manifest), RunOptions(str(tmp_path)), client=client)
    assert [r.status for r in results] == ["done"] * len(GOOD_ROWS)
    assert mask_hashes(tmp_path) == single_process
    # the cases really ran in the workers, not here
    pids = set(client.run(os.getpid).values())
    assert os.getpid() not in pids and len(pids) == 2


def test_bad_cases_on_workers_are_reported_and_never_stop_the_others(client, tmp_path):
    rows = [GOOD_ROWS[2],
            dict(GOOD_ROWS[2], path=str(tmp_path / "missing"), label="missing"),
            dict(GOOD_ROWS[2], label="outside", seeds="50,400,4"),
            dict(GOOD_ROWS[2], label="bad seeds", seeds="50,102")]
    cases = read_manifest(write_manifest(tmp_path / "m.csv", rows))
    results = run_cases(cases, RunOptions(str(tmp_path / "out")), client=client)
    assert [r.status for r in results] == ["done", "failed", "failed", "failed"]
    assert "no such file" in results[1].error and "outside" in results[2].error and "seeds" in results[3].error


def _kill_a_worker_mid_case(client, stop: threading.Event) -> int:
    """SIGKILL the first worker found running a case (from inside it, so the case is surely mid-run)."""

    def kill_if_running(dask_worker):
        if dask_worker.state.executing:
            os.kill(os.getpid(), signal.SIGKILL)
        return False

    deadline = time.monotonic() + 120
    while not stop.is_set() and time.monotonic() < deadline:
        for addr, keys in client.processing().items():
            if keys:
                try:
                    client.run(kill_if_running, workers=[addr])
                except Exception:  # noqa: BLE001 - the connection dies with the worker: it was killed
                    return 1
        time.sleep(0.02)
    return 0


def test_a_worker_killed_mid_run_is_retried_and_the_batch_completes(manifest, single_process, client, tmp_path):
    results: list = []
    stop = threading.Event()

    def batch():
        results.extend(run_cases(read_manifest(manifest), RunOptions(str(tmp_path)), client=client))
        stop.set()

    thread = threading.Thread(target=batch)
    thread.start()
    killed = _kill_a_worker_mid_case(client, stop)
    thread.join(timeout=300)
    assert killed == 1 and not thread.is_alive()
    assert [r.status for r in results] == ["done"] * len(GOOD_ROWS), [r.error for r in results]
    assert max(r.attempts for r in results) == 2  # a case ran again after its worker was lost
    assert mask_hashes(tmp_path) == single_process
    client.wait_for_workers(2, timeout=120)  # the nanny restarted the killed worker


def _worker_killer(spec, options):
    """Runs a case, except that the case named 'poison' kills the worker process running it."""
    if spec.name == "poison":
        os.kill(os.getpid(), signal.SIGKILL)
    return run_case(spec, options)


def test_a_case_that_loses_its_worker_twice_is_reported_failed(client, tmp_path):
    import cloudpickle

    cloudpickle.register_pickle_by_value(sys.modules[__name__])  # the workers cannot import this test module
    try:
        rows = [GOOD_ROWS[2], dict(GOOD_ROWS[3], case="poison")]
        cases = read_manifest(write_manifest(tmp_path / "m.csv", rows))
        results = run_cases(cases, RunOptions(str(tmp_path / "out")), client=client, runner=_worker_killer)
    finally:
        cloudpickle.unregister_pickle_by_value(sys.modules[__name__])
    # the good case's result may be lost with the killed worker before it is fetched: it is then
    # run again and found up to date
    assert results[0].status in ("done", "up to date")
    assert results[1].status == "failed" and results[1].error == LOST_TWICE and results[1].attempts == 2
    client.wait_for_workers(2, timeout=120)


def test_a_separate_scheduler_and_worker_give_the_same_masks(manifest, single_process, tmp_path):
    # a real `dask scheduler` and `dask worker` on loopback, as an administrator would start them
    info = tmp_path / "scheduler.json"
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    scheduler = subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0",
                                  "--no-dashboard", "--scheduler-file", str(info)],
                                 stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    worker = None
    try:
        deadline = time.monotonic() + 60
        while not info.exists() and time.monotonic() < deadline:
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        worker = subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--nworkers", "1",
                                   "--nthreads", "1", "--no-dashboard", "--host", "127.0.0.1"],
                                  stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
        from distributed import Client

        with Client(address, timeout=60, set_as_default=False) as probe:
            probe.wait_for_workers(1, timeout=120)
        out = tmp_path / "out"
        code = main(["batch", str(manifest), "--out", str(out), "--scheduler", address])
        assert code == 0
        assert mask_hashes(out) == single_process
        summary = read_summary(out / "summary.csv")
        assert all(row["status"] == "done" for row in summary.values())
    finally:
        for proc in (worker, scheduler):
            if proc is not None:
                proc.terminate()
        for proc in (worker, scheduler):
            if proc is not None:
                try:
                    proc.wait(timeout=30)
                except subprocess.TimeoutExpired:
                    proc.kill()
                    proc.wait(timeout=10)
    assert scheduler.returncode is not None and worker.returncode is not None


def test_the_command_line_reports_a_local_cluster_run(manifest, single_process, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["batch", str(manifest), "--out", str(out), "--workers", "2"]) == 0
    text = capsys.readouterr().out
    assert "on a local cluster of 2 worker processes" in text and f"{len(GOOD_ROWS)} done" in text
    assert mask_hashes(out) == single_process
