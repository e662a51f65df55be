"""Batch throughput and overhead, run by hand:
python3 tests/benchmarks/bench_batch.py [MEMBERS] [--overhead] [--cpu]
(--overhead: part 2 only; --cpu: part 2 in CPU time, the throughput stays wall-clock)

1. Throughput (members per second) of one sampled ensemble of a small model
   (the harvested-stock scan of the tests, MEMBERS members, default 1000) in
   this process (--jobs 1, the baseline), with 2 local worker processes, and
   through a local Dask cluster of 2 single-threaded worker processes; each
   as a ratio to the baseline measured in the same run. Times include
   starting the workers and writing every member folder and the aggregated
   tables and report.
2. The batch machinery's overhead per member: the --jobs 1 batch's seconds
   per member against a bare single run of the same members (run_scan on the
   compiled model without confirmations, as members run, plus write_results
   of its folder, no batch), as a percentage; then the share of it that is the
   one-off aggregation at the end of each batch (tables, report, figures) and
   the overhead without it.

Goals (issue 12): 2 workers >= 1.8x serial; overhead under 10 %. On a
machine shared with other work the parallel figures fall short of what two
idle cores give; the script prints the load average so that a reader can judge.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
import time
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import branchline
from branchline.batch.member import member_scan
from branchline.batch.plan import plan_batch
from branchline.model.build import build_model
from branchline.results.writers import write_results
from branchline.runner import run_scan
from test_batch import STOCK

# Members of the bare-run comparison per round, and rounds (the overhead is per
# member; fewer members suffice).
OVERHEAD_MEMBERS = 100
OVERHEAD_ROUNDS = 4


def ensemble(members: int) -> dict:
    scan = json.loads(json.dumps(STOCK))
    scan["ensemble"] = {
        "samples": members,
        "seed": 1,
        "sampling": "latin_hypercube",
        "draw": {"r": {"uniform": [0.55, 0.75]}, "h": {"uniform": [0.1, 0.14]}},
        "margin_threshold": 0.05,
    }
    return scan


def clock() -> float:
    """Wall-clock time; with --cpu this process's CPU time (for the overhead part,
    which runs in this process: a loaded machine disturbs it far less)."""
    return time.process_time() if "--cpu" in sys.argv else time.perf_counter()


def timed_batch(
    scan: dict, folder: Path, wall: bool = False, **backend
) -> tuple[float, branchline.BatchResult]:
    """Seconds of one batch: wall-clock with ``wall`` (workers in other processes), else clock()."""
    timer = time.perf_counter if wall else clock
    started = timer()
    result = branchline.run_batch([scan], folder, **backend)
    seconds = timer() - started
    print(f"  {backend}: {seconds:.1f} s (load average {os.getloadavg()[0]:.1f})", flush=True)
    return seconds, result


def bare_runs(scan: dict, folder: Path) -> float:
    """Seconds for the members run one by one without the batch (model compiled once)."""
    loaded = branchline.scan_from_dict(scan)
    model = build_model(loaded.model, source=loaded.source)
    started = clock()
    for plan in plan_batch([loaded]):
        own = member_scan(loaded, plan.values)
        # as a member runs: no confirmation by simulation
        result = run_scan(
            own, model=replace(model, defaults=model.parameter_vector(plan.values)), confirm=False
        )
        write_results(result, folder / str(plan.member), figures=False)
    return clock() - started


@contextmanager
def timed_aggregation():
    """Seconds spent aggregating at the end of batches (tables, report), summed in [0]."""
    from branchline.batch import execute

    spent = [0.0]
    original = execute._conclude

    def conclude(*args, **kwargs):
        started = clock()
        try:
            return original(*args, **kwargs)
        finally:
            spent[0] += clock() - started

    execute._conclude = conclude
    try:
        yield spent
    finally:
        execute._conclude = original


def throughput(members: int, root: Path) -> None:
    """Members per second on each backend, as ratios to this process."""
    from distributed import LocalCluster

    scan = ensemble(members)
    serial, result = timed_batch(scan, root / "serial", wall=True, jobs=1)
    assert result.complete
    two, pool = timed_batch(scan, root / "two", wall=True, jobs=2)
    assert pool.complete
    with LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        host="127.0.0.1",
        dashboard_address="127.0.0.1:0",
        worker_dashboard_address="127.0.0.1:0",
    ) as cluster:
        dask, remote = timed_batch(
            scan, root / "dask", wall=True, cluster=cluster.scheduler_address
        )
    assert remote.complete
    print(f"\n{members} members, harvested-stock model, {result.failed} failed members")
    print(f"{'backend':<28} {'seconds':>9} {'members/s':>10} {'vs serial':>10}")
    for name, seconds in (
        ("1 worker (this process)", serial),
        ("2 local processes", two),
        ("Dask LocalCluster, 2 x 1", dask),
    ):
        print(f"{name:<28} {seconds:9.2f} {members / seconds:10.1f} {serial / seconds:9.2f}x")


def main() -> None:
    numbers = [arg for arg in sys.argv[1:] if arg.isdigit()]
    members = int(numbers[0]) if numbers else 1000
    only_overhead = "--overhead" in sys.argv

    print(f"load average before: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    with tempfile.TemporaryDirectory() as scratch:
        root = Path(scratch)
        if not only_overhead:
            throughput(members, root)

        # Warm up both (first imports of the report's and figures' modules),
        # then alternate bare and batch rounds so that a change of machine
        # load during the run hits both alike.
        bare_runs(ensemble(10), root / "warm-bare")
        timed_batch(ensemble(10), root / "warm-batch", jobs=1)
        bare = batch = 0.0
        with timed_aggregation() as aggregation:
            for round_ in range(OVERHEAD_ROUNDS):
                small = ensemble(OVERHEAD_MEMBERS)
                small["ensemble"]["seed"] = 100 + round_
                bare += bare_runs(small, root / f"bare{round_}")
                batch += timed_batch(small, root / f"overhead{round_}", jobs=1)[0]
        count = OVERHEAD_MEMBERS * OVERHEAD_ROUNDS
        per_bare, per_batch = bare / count, batch / count
        once = aggregation[0] / OVERHEAD_ROUNDS
        per_member = (batch - aggregation[0]) / count
        print(f"\noverhead, {count} members in this process, {OVERHEAD_ROUNDS} alternating rounds:")
        print(f"  bare single runs   {per_bare * 1e3:8.2f} ms per member")
        print(f"  batch (--jobs 1)   {per_batch * 1e3:8.2f} ms per member")
        print(f"  overhead           {(per_batch / per_bare - 1) * 100:8.1f} %")
        print(
            f"  of which the aggregation at the end (tables, report, figures): {once:.2f} s "
            f"once per batch, {once / OVERHEAD_MEMBERS * 1e3:.2f} ms per member at "
            f"{OVERHEAD_MEMBERS} members"
        )
        print(f"  per member without it {(per_member / per_bare - 1) * 100:8.1f} %")
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
