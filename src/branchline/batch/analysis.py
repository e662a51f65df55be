"""What a batch's tables say: where each event lies across the members, how
likely a small operating margin is, and which parameters drive the spread.

Pure functions of the aggregated tables (:mod:`branchline.batch.tables`) and
the scans; the report (:mod:`branchline.batch.report`) writes their records.

An event is followed across members by its *label*: its kind, its number
among the events of that kind on its trace (in trace order) and the trace,
e.g. "fold 2 on fished-stock". Its location is the value of the trace's
varied parameter there.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from branchline.scan.loader import Scan

# Two-sided confidence level of the binomial interval on a probability.
CONFIDENCE = 0.95
# Quantiles of an event's location reported for sampled ensembles.
QUANTILES = (0.05, 0.5, 0.95)
# Rank correlations need a few members to mean anything.
MIN_MEMBERS_FOR_CORRELATION = 5


@dataclass(frozen=True)
class Probability:
    """An estimated probability with its Clopper-Pearson interval."""

    hits: int
    trials: int
    estimate: float
    low: float
    high: float


@dataclass(frozen=True)
class MarginRisk:
    """How often a trace's operating margin is below the threshold across members."""

    trace: str
    vary: str
    threshold: float
    probability: Probability


def clopper_pearson(hits: int, trials: int, confidence: float = CONFIDENCE) -> Probability:
    """Binomial proportion with its exact (Clopper-Pearson) confidence interval.

    Clopper and Pearson, Biometrika 26 (1934) 404-413: the interval's ends are
    the beta quantiles B(alpha/2; x, n - x + 1) and B(1 - alpha/2; x + 1, n - x),
    with 0 and 1 when x = 0 or x = n. Conservative: its coverage is at least
    ``confidence`` for every true probability.
    """
    from scipy.stats import beta

    if trials <= 0:
        return Probability(hits, trials, math.nan, math.nan, math.nan)
    alpha = 1.0 - confidence
    low = 0.0 if hits == 0 else float(beta.ppf(alpha / 2, hits, trials - hits + 1))
    high = 1.0 if hits == trials else float(beta.ppf(1 - alpha / 2, hits + 1, trials - hits))
    return Probability(hits, trials, hits / trials, low, high)


def scan_members(members: pd.DataFrame, numbers: Sequence[int]) -> pd.DataFrame:
    """The finished members among ``numbers`` (one scan's) whose status is done."""
    return members[members["member"].isin(list(numbers)) & (members["status"] == "done")]


def event_locations(events: pd.DataFrame, scan: Scan, members: Sequence[int]) -> pd.DataFrame:
    """One row per event of the given members: ``member``, ``label``, ``parameter``
    (the trace's varied parameter) and ``location`` (its value at the event).

    Labels follow trace order within each member (see the module docstring).
    """
    vary = {spec.name: spec.vary for spec in scan.traces}
    rows = []
    chosen = events[events["member"].isin(list(members))]
    # one pass over the rows in member order (a stable sort keeps each member's
    # trace order): a groupby with a table per member cost milliseconds per member
    chosen = chosen.sort_values("member", kind="stable")
    counts: dict[tuple[Any, str, str], int] = {}
    for row in chosen.to_dict("records"):
        trace, kind, member = row["trace"], row["kind"], row["member"]
        parameter = vary.get(str(trace).split(".")[0])
        if parameter is None or row.get(parameter) is None:
            continue
        number = counts[(member, trace, kind)] = counts.get((member, trace, kind), 0) + 1
        rows.append(
            {
                "member": member,
                "label": f"{kind} {number} on {trace}",
                "parameter": parameter,
                "location": float(row[parameter]),
            }
        )
    return pd.DataFrame(rows, columns=["member", "label", "parameter", "location"])


def location_summary(locations: pd.DataFrame, members: int) -> pd.DataFrame:
    """Per event label: how many members have it, and its location's spread."""
    rows = []
    for label, group in locations.groupby("label", sort=False):
        values = group["location"].to_numpy(dtype=float)
        quantiles = np.quantile(values, QUANTILES)
        rows.append(
            {
                "label": label,
                "parameter": group["parameter"].iloc[0],
                "members": len(values),
                "share": len(values) / members if members else math.nan,
                "min": float(values.min()),
                **{f"q{round(q * 100):02d}": float(v) for q, v in zip(QUANTILES, quantiles)},
                "max": float(values.max()),
                "mean": float(values.mean()),
                "std": float(values.std(ddof=1)) if len(values) > 1 else math.nan,
            }
        )
    return pd.DataFrame(rows)


def margin_risks(
    margins: pd.DataFrame, members: Sequence[int], threshold: float
) -> list[MarginRisk]:
    """Per scanned trace: the probability that its operating margin is below ``threshold``.

    A member with no event on either side of the start value (within the traced
    interval) has a margin larger than the interval allows: not below.
    """
    chosen = margins[margins["member"].isin(list(members))]
    risks = []
    for trace, group in chosen.groupby("trace", sort=False):
        distance = pd.to_numeric(group["margin"], errors="coerce").fillna(math.inf)
        hits = int((distance < threshold).sum())
        risks.append(
            MarginRisk(
                trace=str(trace),
                vary=str(group["vary"].iloc[0]),
                threshold=threshold,
                probability=clopper_pearson(hits, len(group)),
            )
        )
    return risks


def rank_correlations(
    members: pd.DataFrame,
    locations: pd.DataFrame,
    margins: pd.DataFrame,
    parameters: Sequence[str],
) -> pd.DataFrame:
    """Spearman rank correlation of each parameter with each event's location and
    each trace's margin, over the members that have them (NaN with too few)."""
    from scipy.stats import spearmanr

    values = members.set_index("member")[list(parameters)]
    targets = {
        f"location of {label}": group.set_index("member")["location"]
        for label, group in locations.groupby("label", sort=False)
    }
    for trace, group in margins[margins["member"].isin(values.index)].groupby("trace"):
        margin = pd.to_numeric(group.set_index("member")["margin"], errors="coerce").dropna()
        targets[f"margin of {trace}"] = margin
    rows = []
    for target, series in targets.items():
        row = {"quantity": target, "members": len(series)}
        for name in parameters:
            x = values.loc[series.index, name].to_numpy(dtype=float)
            y = series.to_numpy(dtype=float)
            enough = len(y) >= MIN_MEMBERS_FOR_CORRELATION and np.ptp(x) > 0 and np.ptp(y) > 0
            row[name] = float(spearmanr(x, y).statistic) if enough else math.nan
        rows.append(row)
    return pd.DataFrame(rows, columns=["quantity", "members", *parameters])


__all__ = [
    "CONFIDENCE",
    "MarginRisk",
    "Probability",
    "clopper_pearson",
    "event_locations",
    "location_summary",
    "margin_risks",
    "rank_correlations",
    "scan_members",
]
