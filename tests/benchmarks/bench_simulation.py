"""Cost of the confirmations by simulation and of phase portraits, against a plain
demo run measured in the same process.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_simulation.py

For each bundled demo scan it prints the time of a plain run (``run_scan`` without
confirmations, then ``write_results``: tables, report, diagrams) and the time the
confirmations add (``confirm_events`` plus their figure), as a ratio; the target is
under 0.30. Then the time of a phase portrait (``compute_portrait`` plus writing
portrait.png/.svg/.json) for the demo models; the target is under 2 s, also shown
as a ratio to the plain run. Times are wall-clock, best of ``REPEATS`` (the machine
is shared and single runs swing with its load); with ``--cpu`` the process's CPU
time instead, which a loaded machine disturbs far less (the portrait's figures are
drawn in this process, so CPU time covers all of it).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))

import matplotlib

matplotlib.use("Agg")

from branchline.portrait.build import compute_portrait
from branchline.present.confirmations import confirmations_figure, save_confirmations_figure
from branchline.present.portrait import write_portrait
from branchline.results.writers import write_results
from branchline.runner import run_scan
from branchline.scan.loader import load_scan
from branchline.simulation.confirm import confirm_events

REPEATS = 3
SCANS = Path(__file__).resolve().parents[2] / "scans"
PORTRAITS = {
    "cooled_reactor": {"T_c": 295.0},
    "harvested_stock": None,  # one state: no portrait
    "enriched_pond": {"K": 2.5},
    "toggle_switch": {"a": 3.0},
}


def best(function) -> float:
    """Best wall-clock time of REPEATS calls (CPU time with ``--cpu``)."""
    clock = time.process_time if "--cpu" in sys.argv else time.perf_counter
    times = []
    for _ in range(REPEATS):
        started = clock()
        function()
        times.append(clock() - started)
    return min(times)


def main() -> None:
    print(
        f"{'scan':18} {'plain run s':>11} {'confirm s':>10} {'ratio':>6} "
        f"{'portrait s':>11} {'ratio':>6}"
    )
    with tempfile.TemporaryDirectory() as folder:
        for path in sorted(SCANS.glob("*.toml")):
            scan = load_scan(path)

            def plain(scan=scan, path=path):
                write_results(run_scan(scan, confirm=False), Path(folder) / path.stem)

            result = run_scan(scan, confirm=False)

            def confirm(result=result):
                records = confirm_events(result.model, result.branches, result.events)
                figure = confirmations_figure(records)
                if figure is not None:
                    save_confirmations_figure(figure, Path(folder) / "confirmations.png")

            base = best(plain)
            extra = best(confirm)
            settings = PORTRAITS.get(path.stem)
            if settings is None:
                shown = f"{'-':>11} {'-':>6}"
            else:

                def draw(scan=scan, settings=settings, path=path):
                    write_portrait(
                        compute_portrait(scan, settings), Path(folder) / f"{path.stem}-p"
                    )

                seconds = best(draw)
                shown = f"{seconds:11.3f} {seconds / base:6.2f}"
            print(f"{path.stem:18} {base:11.3f} {extra:10.3f} {extra / base:6.2f} {shown}")


if __name__ == "__main__":
    main()
