"""The Python API: scans from files and dicts, tables, records, figures, and
the runnable examples in the public docstrings."""

from __future__ import annotations

import doctest
import math
from pathlib import Path

import matplotlib.figure
import numpy as np
import pandas as pd
import pytest

import branchline
import branchline.api
import branchline.runner

SCANS = Path(__file__).resolve().parents[1] / "scans"


@pytest.mark.parametrize("module", [branchline.api, branchline.runner])
def test_docstring_examples_run(module):
    failures, tried = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert tried > 0
    assert failures == 0


def test_run_from_file_gives_tables_records_and_figure(tmp_path):
    result = branchline.run(SCANS / "harvested_stock.toml", out=tmp_path / "stock")
    points = result.points_frame()
    assert isinstance(points, pd.DataFrame)
    assert {"trace", "step", "arclength", "F", "B", "catch", "stable"} <= set(points.columns)
    assert all(isinstance(e, branchline.Event) for e in result.events)
    assert isinstance(result.figure(), matplotlib.figure.Figure)
    saved = branchline.read_results(tmp_path / "stock")
    pd.testing.assert_frame_equal(saved.points, points, check_dtype=False)
    assert [e["kind"] for e in saved.events] == [e.kind for e in result.events]


def test_run_from_dict_logistic_harvest_fold():
    # N' = N (1 - N) - h has a fold at h = 1/4, N = 1/2 (elementary calculus:
    # the maximum of N (1 - N); e.g. Strogatz, Nonlinear Dynamics and Chaos, the
    # fishery-harvesting exercise of section 3.7, from memory).
    result = branchline.run(
        {
            "model": {"parameters": {"h": 0.1}, "equations": {"N": "N*(1 - N) - h"}},
            "trace": [{"vary": "h", "interval": [0.0, 0.4], "start": {"N": 0.9}}],
        }
    )
    (fold,) = result.events
    assert fold.kind == "fold"
    assert math.isclose(fold.value, 0.25, rel_tol=1e-12)
    assert math.isclose(fold.state[0], 0.5, rel_tol=1e-7)
    assert result.scan.source == "<dict>"


def test_invalid_dict_raises_scan_error():
    with pytest.raises(branchline.ScanError, match="trace"):
        branchline.run({"model": {"parameters": {"h": 0.1}, "equations": {"N": "N - h"}}})


def test_models_with_many_states_put_norm_in_tables_and_states_in_npz(tmp_path):
    # A chain of 30 first-order lags, x0' = p - x0, xi' = x(i-1) - xi: every
    # equilibrium state equals p (elementary algebra), so |x| = sqrt(30) |p|.
    n = 30
    equations = {"x0": "p - x0"} | {f"x{i}": f"x{i - 1} - x{i}" for i in range(1, n)}
    result = branchline.run(
        {
            "model": {
                "parameters": {"p": 1.0},
                "equations": equations,
                "observables": {"last": f"x{n - 1}"},
            },
            "trace": [{"vary": "p", "interval": [0.5, 2.0], "start": {s: 1.0 for s in equations}}],
        },
        out=tmp_path / "chain",
    )
    points = pd.read_csv(tmp_path / "chain" / "points.csv")
    assert "norm" in points.columns and "x0" not in points.columns
    assert abs(points["norm"] - math.sqrt(n) * points["p"]).max() < 1e-10
    assert abs(points["last"] - points["p"]).max() < 1e-10
    saved = np.load(tmp_path / "chain" / "states.npz")
    assert saved["trace1"].shape == (len(points), n)
    assert list(saved["state_names"]) == list(equations)
    assert result.status == "done"
