"""The Dask backend: a batch run through --cluster gives exactly the tables of
the local backend, with a LocalCluster in the test and with separate
`dask scheduler` / `dask worker` processes, all on loopback (127.0.0.1).

Bounded in time (every wait has a timeout) and the processes are always
stopped, pass or fail.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
from pathlib import Path

import pandas as pd
from distributed import Client, LocalCluster

import branchline
from branchline.batch.plan import plan_batch
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


def _python_scan(rhs: str, flag_parameter: str, token: int) -> dict:
    """Four members of x' = a - x^2 + mu x (two with the fault switch set to ``token``)."""
    return {
        "model": {
            "parameters": {"a": 1.0, "mu": 0.0, flag_parameter: 0.0},
            "python": {"rhs": f"batch_models:{rhs}", "size": 1},
        },
        "trace": [{"vary": "mu", "interval": [-1.0, 1.0], "start": {"x0": 1.0}}],
        "ensemble": {"grid": {"a": [1.0, 4.0], flag_parameter: [0.0, float(token)]}},
    }


def _cluster(**options) -> LocalCluster:
    return LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        host="127.0.0.1",
        dashboard_address=LOOPBACK_ANY_PORT,
        worker_dashboard_address=LOOPBACK_ANY_PORT,
        processes=True,
        **options,
    )


def test_a_worker_killed_mid_member_loses_and_corrupts_nothing(tmp_path):
    # A member waits in its rhs while the stall flag exists; the test kills that
    # member's worker process (SIGKILL: no clean-up), then lets members run on.
    # Dask runs the member again on a live worker; the batch must come out whole,
    # with exactly the tables of an undisturbed run in this process.
    import threading

    from batch_models import running_marker, stall_flag

    token = os.getpid()
    scan = _python_scan("stalling_rhs", "stall", token)
    whole = branchline.run_batch([scan], tmp_path / "whole", jobs=1)
    assert whole.complete and whole.failed == 0
    stall_flag(token).touch()
    outcome: dict = {}
    try:
        with _cluster() as cluster:
            run = threading.Thread(
                target=lambda: outcome.update(
                    result=branchline.run_batch(
                        [scan], tmp_path / "dask", cluster=cluster.scheduler_address
                    )
                ),
                daemon=True,
            )
            run.start()
            pattern = f"branchline-test-running-{token}-*"
            markers = []
            for _ in range(STARTUP_SECONDS * 10):
                markers = sorted(running_marker(token, 0).parent.glob(pattern))
                if markers or not run.is_alive():
                    break
                threading.Event().wait(0.1)
            assert markers, "no member reached its rhs"
            os.kill(int(markers[0].name.rsplit("-", 1)[1]), signal.SIGKILL)
            stall_flag(token).unlink()
            run.join(timeout=STARTUP_SECONDS)
            assert not run.is_alive()
    finally:
        stall_flag(token).unlink(missing_ok=True)
        for marker in running_marker(token, 0).parent.glob(f"branchline-test-running-{token}-*"):
            marker.unlink(missing_ok=True)
    result = outcome["result"]
    assert result.complete, result.message
    same_tables(result, whole)
    # nothing half-written is left among the member folders
    assert not [p for p in (tmp_path / "dask" / "members").iterdir() if p.name.startswith(".")]


def test_a_member_that_keeps_killing_workers_is_left_for_resume(tmp_path):
    # With no retries allowed, the member whose worker dies is lost on the backend:
    # it is not saved (not recorded as a result), the batch says so, and --resume,
    # once the fault is gone, completes the batch with the undisturbed tables.
    import dask

    from batch_models import doom_flag

    token = os.getpid()
    scan = _python_scan("rhs", "doom", token)
    whole = branchline.run_batch([scan], tmp_path / "whole", jobs=1)
    doom_flag(token).touch()
    try:
        with dask.config.set({"distributed.scheduler.allowed-failures": 0}), _cluster() as cluster:
            broken = branchline.run_batch(
                [scan], tmp_path / "dask", cluster=cluster.scheduler_address
            )
    finally:
        doom_flag(token).unlink(missing_ok=True)
    assert not broken.complete
    assert "lost on the backend" in broken.message and "--resume" in broken.message
    doomed = {
        m.member for m in plan_batch([branchline.scan_from_dict(scan)]) if m.values["doom"] > 0
    }
    assert doomed and not doomed & set(broken.members["member"])
    resumed = branchline.run_batch([scan], tmp_path / "dask", jobs=1, resume=True)
    assert resumed.complete
    same_tables(resumed, whole)
