"""The shared enumerations keep the contract's strings (interface.md, ``kind`` values)."""

from __future__ import annotations

import io

import pandas as pd

from branchline.vocabulary import EventKind, Status

# The `kind` values fixed by /work/shared/design/interface.md (events.csv).
CONTRACT_KINDS = (
    "fold hopf branch_point cusp bogdanov_takens bautin zero_hopf double_hopf "
    "cycle_fold period_doubling torus"
).split()


def test_event_kinds_are_the_contract_strings():
    assert [kind.value for kind in EventKind] == CONTRACT_KINDS
    for kind in EventKind:
        assert kind == kind.value and str(kind) == kind.value and f"{kind}" == kind.value
        assert EventKind(kind.value) is kind


def test_tables_write_plain_values():
    frame = pd.DataFrame({"kind": [EventKind.FOLD, EventKind.HOPF], "status": [Status.DONE] * 2})
    text = io.StringIO()
    frame.to_csv(text, index=False)
    assert text.getvalue().splitlines() == ["kind,status", "fold,done", "hopf,done"]


def test_statuses_that_need_a_fix_suggest_one():
    for status in Status:
        needs_fix = status not in (Status.DONE, Status.CLOSED, Status.CONVERGED, Status.HOMOCLINIC)
        assert bool(status.hint) == needs_fix, status
