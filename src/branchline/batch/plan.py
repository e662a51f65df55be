"""A batch's members: the parameter sets its scans' ensembles expand into.

A scan without ``[ensemble]`` is one member with no ensemble values. Members
are numbered from 1 across the whole batch, scans in the order given, so a
batch run again with the same scan files has the same members (what
``--resume`` relies on). Samples are drawn by inverse transform of unit points
(plain pseudo-random, Latin hypercube or scrambled Sobol points from
scipy.stats.qmc), so that one seed fixes every member whatever the method.
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import dataclass

import numpy as np

from branchline.scan.ensemble_section import Draw, EnsembleSpec
from branchline.scan.loader import Scan

# Unit points are kept this far inside (0, 1): an exact 0 or 1 (possible in
# principle from every generator) would map to an infinite normal value.
UNIT_MARGIN = 2.0**-54


@dataclass(frozen=True)
class MemberPlan:
    """One member of a batch: which scan, with which ensemble values."""

    member: int  # 1-based over the whole batch
    scan: int  # index of its scan in the batch's list of scans
    values: dict[str, float]


def grid_values(spec: EnsembleSpec) -> list[dict[str, float]]:
    """Every combination of the grid's values, the first parameter varying slowest."""
    names = [name for name, _ in spec.grid]
    axes = [values for _, values in spec.grid]
    return [dict(zip(names, combination)) for combination in itertools.product(*axes)]


def unit_points(count: int, dimension: int, method: str, seed: int) -> np.ndarray:
    """``count`` points in the open unit cube, shape (count, dimension).

    ``method``: "random" (numpy's PCG64 generator), "latin_hypercube"
    (McKay, Beckman and Conover 1979) or "sobol" (scrambled Sobol sequence,
    Owen scrambling), the last two from scipy.stats.qmc.
    """
    rng = np.random.default_rng(seed)
    if method == "random":
        points = rng.random((count, dimension))
    else:
        from scipy.stats import qmc

        engine = (qmc.LatinHypercube if method == "latin_hypercube" else qmc.Sobol)(
            dimension, rng=rng
        )
        with warnings.catch_warnings():
            # Sobol points balance best in powers of two; other counts are still
            # valid low-discrepancy points (the README says so).
            warnings.simplefilter("ignore", UserWarning)
            points = engine.random(count)
    return np.clip(points, UNIT_MARGIN, 1.0 - UNIT_MARGIN)


def transform(draw: Draw, unit: np.ndarray) -> np.ndarray:
    """Values of ``draw``'s law at the unit points ``unit`` (inverse CDF, truncated if asked)."""
    if draw.law == "uniform":
        return draw.a + unit * (draw.b - draw.a)
    from scipy.stats import norm, truncnorm

    low, high = draw.within if draw.within else (-np.inf, np.inf)
    if draw.law == "lognormal":
        low = np.log(low) if low > 0 else -np.inf
        high = np.log(high)
    if draw.within:
        standard = ((low - draw.a) / draw.b, (high - draw.a) / draw.b)
        values = truncnorm.ppf(unit, *standard, loc=draw.a, scale=draw.b)
    else:
        values = norm.ppf(unit, loc=draw.a, scale=draw.b)
    return np.exp(values) if draw.law == "lognormal" else values


def sample_values(spec: EnsembleSpec) -> list[dict[str, float]]:
    """The ensemble's ``samples`` random parameter sets, reproducible from ``seed``."""
    unit = unit_points(spec.samples, len(spec.draws), spec.sampling, spec.seed)
    columns = [transform(draw, unit[:, k]) for k, draw in enumerate(spec.draws)]
    names = [draw.name for draw in spec.draws]
    return [
        {name: float(column[i]) for name, column in zip(names, columns)}
        for i in range(spec.samples)
    ]


def ensemble_values(spec: EnsembleSpec | None) -> list[dict[str, float]]:
    """The parameter sets of one scan's members (one empty set without an ensemble)."""
    if spec is None:
        return [{}]
    return grid_values(spec) if spec.grid else sample_values(spec)


def plan_batch(scans: list[Scan]) -> tuple[MemberPlan, ...]:
    """Every member of a batch of scans, numbered from 1 in scan order."""
    members = []
    for index, scan in enumerate(scans):
        for values in ensemble_values(scan.ensemble):
            members.append(MemberPlan(len(members) + 1, index, values))
    return tuple(members)


def ensemble_parameters(scans: list[Scan]) -> list[str]:
    """The ensemble parameters of all scans, first appearance first."""
    names: list[str] = []
    for scan in scans:
        for name in scan.ensemble.parameters if scan.ensemble else ():
            if name not in names:
                names.append(name)
    return names


__all__ = [
    "MemberPlan",
    "ensemble_parameters",
    "ensemble_values",
    "grid_values",
    "plan_batch",
    "sample_values",
    "transform",
    "unit_points",
]
