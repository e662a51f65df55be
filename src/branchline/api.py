"""One-call convenience for notebooks and scripts."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from branchline.errors import ScanError
from branchline.results.records import RunResult
from branchline.results.writers import write_results
from branchline.runner import run_scan
from branchline.scan.loader import Scan, load_scan, scan_from_dict


def run(
    scan: str | Path | dict[str, Any] | Scan,
    out: str | Path | None = None,
    *,
    confirm: bool = True,
) -> RunResult:
    """Load (if needed), validate and run a scan; optionally write its results folder.

    Parameters
    ----------
    scan : path, dict or Scan
        A scan file, a dict with the scan file's layout, or a loaded Scan.
    out : path, optional
        If given, the results folder to write (as ``branchline run --out``).
    confirm : bool
        Confirm the located events by simulation (``result.confirmations``), as
        ``branchline run`` does unless given ``--no-confirm``.

    Returns
    -------
    RunResult
        Tables via ``.points_frame()`` / ``.events_frame()``, events via
        ``.events``, the diagram via ``.figure()``, the report via ``.report()``.

    Raises
    ------
    branchline.ScanError
        If the scan is invalid (nothing is written then).

    Examples
    --------
    >>> import branchline
    >>> result = branchline.run({
    ...     "model": {"parameters": {"mu": -1.0}, "equations": {"x": "mu*x - x^3"}},
    ...     "trace": [{"vary": "mu", "interval": [-1, 1], "start": {"x": 0.0}}]})
    >>> [(e.kind, e.branching, abs(e.value) < 1e-12) for e in result.events]
    [('branch_point', 'pitchfork', True)]
    >>> sorted(b.name for b in result.branches)
    ['trace1', 'trace1.1', 'trace1.2']
    """
    if isinstance(scan, dict):
        scan = scan_from_dict(scan)
    elif not isinstance(scan, Scan):
        scan = load_scan(scan)
    if scan.ensemble is not None:
        raise ScanError(scan.source, "ensemble", "a scan with an ensemble runs with run_batch")
    result = run_scan(scan, confirm=confirm)
    if out is not None:
        write_results(result, out)
    return result


def phase_portrait(
    scan: str | Path | dict[str, Any] | Scan,
    settings: dict[str, float] | None = None,
    *,
    plane: tuple[str, str] | None = None,
    eigenvector_plane: bool = False,
    at: int | None = None,
    out: str | Path | None = None,
):
    """The phase portrait of a scan's model at given parameter values, as a Figure.

    Parameters are as for ``branchline portrait`` (``at`` numbers equilibria from 1).
    The numbers behind it come from :func:`branchline.portrait.build.compute_portrait`;
    with ``out`` the folder gets portrait.png, portrait.svg and portrait.json.

    Returns
    -------
    matplotlib.figure.Figure
        Two panels: the portrait, and the linearized flow beside the model's.
    """
    from branchline.portrait.build import compute_portrait
    from branchline.present.portrait import portrait_figure, write_portrait

    if isinstance(scan, dict):
        scan = scan_from_dict(scan)
    elif not isinstance(scan, Scan):
        scan = load_scan(scan)
    computed = compute_portrait(
        scan,
        settings,
        plane=plane,
        eigenvector_plane=eigenvector_plane,
        focus=None if at is None else at - 1,
    )
    if out is not None:
        write_portrait(computed, out)
    return portrait_figure(computed)
