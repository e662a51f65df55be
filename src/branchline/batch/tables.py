"""A batch's aggregated tables, from its member records.

- ``members.csv``: ``member``, ``scan``, each ensemble parameter, ``status``
  (``done``/``failed``), ``seconds``, ``error`` (the contract);
- ``events.csv``: ``member``, each ensemble parameter, then the single-run
  events.csv columns (the contract);
- ``margins.csv``: ``member``, ``trace``, ``vary``, ``start_value``,
  ``stable``, ``below``/``above`` (distance from the start value to the first
  event met with the parameter decreasing/increasing, empty when none),
  ``margin`` (the smaller) and ``nearest`` (that event's kind).

Every table is also written as Parquet when pyarrow is installed.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from branchline.results.writers import FLOAT_FORMAT

MEMBER_COLUMNS = ("member", "scan")
STATUS_COLUMNS = ("status", "seconds", "error")
MARGIN_COLUMNS = (
    "trace",
    "vary",
    "start_value",
    "stable",
    "below",
    "above",
    "margin",
    "nearest",
)


def members_frame(records: Sequence[dict[str, Any]], parameters: Sequence[str]) -> pd.DataFrame:
    """members.csv: one row per finished member, in member order."""
    rows = [
        {
            "member": r["member"],
            "scan": r["scan"],
            **{name: r["values"].get(name) for name in parameters},
            **{key: r[key] for key in STATUS_COLUMNS},
        }
        for r in records
    ]
    return pd.DataFrame(rows, columns=[*MEMBER_COLUMNS, *parameters, *STATUS_COLUMNS])


def _ordered_columns(first: Sequence[str], rows: Sequence[dict[str, Any]]) -> list[str]:
    columns = list(first)
    for row in rows:
        columns.extend(key for key in row if key not in columns)
    return columns


def events_frame(records: Sequence[dict[str, Any]], parameters: Sequence[str]) -> pd.DataFrame:
    """events.csv: every member's events, members in order, each member's in trace order."""
    rows = [
        {"member": r["member"], **{name: r["values"].get(name) for name in parameters}, **event}
        for r in records
        for event in r["events"]
    ]
    columns = _ordered_columns(["member", *parameters, "trace", "kind"], rows)
    return pd.DataFrame(rows, columns=columns)


def margins_frame(records: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """margins.csv: the operating margin of every scanned trace of every member."""
    rows = [{"member": r["member"], **margin} for r in records for margin in r["margins"]]
    return pd.DataFrame(rows, columns=["member", *MARGIN_COLUMNS])


def parquet_available() -> bool:
    """True when pyarrow is installed (tables are then also written as Parquet)."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


def write_table(frame: pd.DataFrame, folder: Path, name: str) -> list[str]:
    """Write ``name``.csv (17 significant digits) and, with pyarrow, ``name``.parquet."""
    written = [f"{name}.csv"]
    text = frame.copy()
    for column in text.columns:
        if text[column].dtype == bool:
            text[column] = text[column].map({True: "true", False: "false"})
    text.to_csv(folder / f"{name}.csv", index=False, float_format=FLOAT_FORMAT)
    if parquet_available():
        # Parquet needs one type per column: cells that mix text and None stay text.
        frame.convert_dtypes().to_parquet(folder / f"{name}.parquet", index=False)
        written.append(f"{name}.parquet")
    return written


__all__ = [
    "events_frame",
    "margins_frame",
    "members_frame",
    "parquet_available",
    "write_table",
]
