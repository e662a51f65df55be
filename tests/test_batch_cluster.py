"""The Dask backend: a batch run through --cluster gives exactly the tables of
the local backend, with a LocalCluster in the test and with separate
`dask scheduler` / `dask worker` processes, all on loopback (127.0.0.1).

Bounded in time (every wait has a timeout) and the processes are always
stopped, pass or fail.
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
from pathlib import Path

import pandas as pd
from distributed import Client, LocalCluster

import branchline
from branchline.cli import main
from test_batch import FRAGILE, STOCK, comparable

SRC = Path(__file__).resolve().parents[1] / "src"
# Every listening socket of the test clusters (HTTP servers included) stays on loopback.
LOOPBACK_ANY_PORT = "127.0.0.1:0"
# Seconds allowed for a scheduler to come up and a worker to join it.
STARTUP_SECONDS = 90
# A member that fails on purpose rides along: failures must match too.
SCANS = [STOCK, FRAGILE]


def same_tables(got: branchline.BatchResult, expected: branchline.BatchResult) -> None:
    for name in ("members", "events", "margins"):
        pd.testing.assert_frame_equal(
            comparable(getattr(got, name)), comparable(getattr(expected, name)), check_exact=True
        )


def test_local_cluster_gives_the_local_backend_tables(tmp_path):
    local = branchline.run_batch(SCANS, tmp_path / "local", jobs=1)
    assert local.failed >= 1 and len(local.events) > 0
    with LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        host="127.0.0.1",
        dashboard_address=LOOPBACK_ANY_PORT,
        worker_dashboard_address=LOOPBACK_ANY_PORT,
        processes=True,
    ) as cluster:
        remote = branchline.run_batch(SCANS, tmp_path / "dask", cluster=cluster.scheduler_address)
    same_tables(remote, local)
    assert remote.info["backend"].startswith("the Dask cluster")
    # Each worker process compiled each scan's model at most once.
    assert all(count <= len(SCANS) for count in remote.info["model_builds_by_worker"].values())


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def stop(process: subprocess.Popen) -> None:
    if process.poll() is None:
        process.terminate()
        try:
            process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=30)


def test_separate_scheduler_and_worker_processes_through_the_command_line(
    tmp_path, monkeypatch, capsys
):
    from test_batch import toml_text

    scan = tmp_path / "stock.toml"
    scan.write_text(toml_text(STOCK))
    address = f"tcp://127.0.0.1:{free_port()}"
    env = {**os.environ, "PYTHONPATH": str(SRC)}
    dask = [sys.executable, "-m", "dask"]
    log = open(tmp_path / "dask.log", "w")
    processes = []
    try:
        processes.append(
            subprocess.Popen(
                [
                    *dask,
                    "scheduler",
                    "--host",
                    "127.0.0.1",
                    "--port",
                    address.rsplit(":", 1)[1],
                    "--no-dashboard",
                    "--dashboard-address",
                    LOOPBACK_ANY_PORT,
                ],
                env=env,
                stdout=log,
                stderr=subprocess.STDOUT,
            )
        )
        processes.append(
            subprocess.Popen(
                [
                    *dask,
                    "worker",
                    address,
                    "--host",
                    "127.0.0.1",
                    "--nworkers",
                    "1",
                    "--nthreads",
                    "1",
                    "--no-dashboard",
                    "--dashboard-address",
                    LOOPBACK_ANY_PORT,
                    "--local-directory",
                    str(tmp_path),
                ],
                env=env,
                stdout=log,
                stderr=subprocess.STDOUT,
            )
        )
        # Connecting retries until the scheduler listens; then wait for the worker.
        with Client(address, timeout=STARTUP_SECONDS, set_as_default=False) as client:
            client.wait_for_workers(1, timeout=STARTUP_SECONDS)
        monkeypatch.chdir(tmp_path)
        code = main(["batch", "stock.toml", "--cluster", address, "--out", "dask", "--quiet"])
        assert code == 0, capsys.readouterr().err
    finally:
        for process in reversed(processes):
            stop(process)
        log.close()
    local = branchline.run_batch(["stock.toml"], tmp_path / "local", jobs=1)
    same_tables(branchline.read_batch(tmp_path / "dask"), local)
    assert all(process.returncode is not None for process in processes)


def test_an_unreachable_cluster_is_a_clear_error_and_writes_nothing(tmp_path, monkeypatch, capsys):
    from test_batch import toml_text

    monkeypatch.setattr("branchline.batch.backends.CLUSTER_CONNECT_SECONDS", 1)
    (tmp_path / "stock.toml").write_text(toml_text(STOCK))
    address = f"tcp://127.0.0.1:{free_port()}"  # nothing listens there
    out = tmp_path / "none"
    code = main(["batch", str(tmp_path / "stock.toml"), "--cluster", address, "--out", str(out)])
    assert code == 2
    assert f"cannot reach the Dask scheduler at {address}" in capsys.readouterr().err
    assert not out.exists()
