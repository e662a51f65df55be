"""Families of periodic orbits -> cycles.csv rows and the orbit profiles of cycles.npz."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from branchline.numerics import collocation
from branchline.results.records import CycleFamily, RunResult

# Samples per orbit in cycles.npz (uniform in normalized time t / T).
PROFILE_SAMPLES = 200


def cycles_frame(result: RunResult, varying: list[str]) -> pd.DataFrame:
    """cycles.csv: one row per computed orbit, families in run order.

    Columns: ``cycles``, ``step``, each parameter in ``varying``, ``period``,
    ``<state>_min``, ``<state>_max`` for every state, ``stable``, ``multiplier``
    (largest modulus among the nontrivial Floquet multipliers).
    """
    states = result.model.states
    columns = ["cycles", "step", *varying, "period"]
    for state in states:
        columns += [f"{state}_min", f"{state}_max"]
    columns += ["stable", "multiplier"]
    rows: list[dict[str, Any]] = []
    for family in result.cycles:
        fixed = np.array(family.parameters, dtype=float)
        vary = result.model.parameter_index(family.vary)
        for step, orbit in enumerate(family.orbits):
            row: dict[str, Any] = {"cycles": family.name, "step": step}
            for name in varying:
                index = result.model.parameter_index(name)
                row[name] = orbit.parameter if index == vary else float(fixed[index])
            row["period"] = orbit.period
            for i, state in enumerate(states):
                row[f"{state}_min"] = float(orbit.minima[i])
                row[f"{state}_max"] = float(orbit.maxima[i])
            row["stable"] = bool(orbit.stable)
            row["multiplier"] = orbit.largest_multiplier
            rows.append(row)
    return pd.DataFrame(rows, columns=columns)


def profile_arrays(result: RunResult) -> dict[str, np.ndarray]:
    """cycles.npz content: per family ``<name>:parameter`` (k,), ``<name>:period`` (k,),
    ``<name>:profiles`` (k, PROFILE_SAMPLES, n); ``states`` the state names and ``time``
    the normalized sample times."""
    times = np.arange(PROFILE_SAMPLES) / PROFILE_SAMPLES
    arrays: dict[str, np.ndarray] = {
        "states": np.array(result.model.states),
        "time": times,
    }
    for family in result.cycles:
        arrays[f"{family.name}:parameter"] = np.array([o.parameter for o in family.orbits])
        arrays[f"{family.name}:period"] = np.array([o.period for o in family.orbits])
        arrays[f"{family.name}:profiles"] = _profiles(family, times, result.model.size)
    return arrays


def _profiles(family: CycleFamily, times: np.ndarray, size: int) -> np.ndarray:
    if not family.orbits:
        return np.empty((0, times.size, size))
    return np.array(
        [
            collocation.evaluate_periodic(o.mesh, family.degree, o.values, times)
            for o in family.orbits
        ]
    )


def cycle_entries(result: RunResult) -> list[dict[str, Any]]:
    """run.json's ``cycles`` entries: how each family was run and how it ended."""
    entries = []
    for family in result.cycles:
        entries.append(
            {
                "name": family.name,
                "vary": family.vary,
                "interval": list(family.interval),
                "origin": family.origin,
                "parent": family.parent,
                "status": family.status,
                "message": family.message,
                "orbits": len(family),
                "points_per_interval": family.degree,
                "intervals": int(family.orbits[0].mesh.size - 1) if family.orbits else None,
                "counts": dict(family.counts),
            }
        )
    return entries


__all__ = ["PROFILE_SAMPLES", "cycle_entries", "cycles_frame", "profile_arrays"]
