"""No raw Python warnings reach the user: what a damaged table or odd expression
text brings is handled where it arises and said in branchline's own words.

Run as subprocesses, so that stderr is exactly what a user sees (pytest would
otherwise collect the warnings itself).
"""

from __future__ import annotations

import subprocess
import sys
import warnings
from pathlib import Path

import matplotlib
import numpy as np
import pytest

from branchline.errors import ExpressionError
from branchline.scan.expressions import parse_expression

matplotlib.use("Agg")

SRC = Path(__file__).resolve().parents[1] / "src"

SCAN = """
title = "logistic stock"
[model.parameters]
h = 0.0
[model.equations]
N = "{rhs}"
[[trace]]
name = "stock"
vary = "h"
interval = [0.0, 0.2]
start = {{ N = 1.0 }}
"""


def _branchline(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = {"PYTHONPATH": str(SRC), "PATH": "/usr/bin:/bin", "MPLBACKEND": "Agg"}
    return subprocess.run(
        [sys.executable, "-m", "branchline", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_plot_of_a_table_cut_mid_row_says_what_it_skipped(tmp_path):
    scan = tmp_path / "stock.toml"
    scan.write_text(SCAN.format(rhs="N*(1 - N) - h"))
    out = tmp_path / "out"
    done = _branchline("run", str(scan), "--out", str(out), "--quiet", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    table = out / "points.csv"
    rows = table.read_text().count("\n") - 1  # complete rows under the header
    data = table.read_bytes()
    cut = data.rindex(b"\n", 0, len(data) // 2) + 8  # a few bytes into a row
    table.write_bytes(data[:cut])
    plotted = _branchline("plot", str(out), cwd=tmp_path)
    assert plotted.returncode == 0, plotted.stderr
    assert "Warning" not in plotted.stderr and "Traceback" not in plotted.stderr
    assert "points.csv ends mid-row" in plotted.stderr
    kept = data[:cut].count(b"\n") - 1
    assert 0 < kept < rows
    assert f"{kept} complete rows were used" in plotted.stderr
    assert (out / "diagram.png").is_file()


def test_odd_number_text_is_refused_without_a_python_warning(tmp_path):
    scan = tmp_path / "stock.toml"
    scan.write_text(SCAN.format(rhs="N*(1 - N) - 2if*N"))
    done = _branchline("run", str(scan), "--out", str(tmp_path / "out"), cwd=tmp_path)
    assert done.returncode == 2
    assert "Warning" not in done.stderr and "Traceback" not in done.stderr
    assert "model.equations.N" in done.stderr
    assert "invalid decimal literal" in done.stderr


@pytest.mark.parametrize("text", ["2if*N", "0x1for", "2or N", "1else"])
def test_parser_turns_tokenizer_warnings_into_its_refusal(text):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(ExpressionError, match="not a valid expression"):
            parse_expression(text, "model.equations.N")
    assert caught == []


def test_label_room_ignores_gaps_in_lines():
    """Empty cells are gaps in a drawn line; looking for label room there is silent."""
    import matplotlib.pyplot as plt

    from branchline.present.labels import _line_vertices

    figure, axes = plt.subplots()
    (line,) = axes.plot([0.0, 1.0, np.nan, 3.0, 4.0], [0.0, 1.0, 2.0, np.nan, 5.0])
    figure.canvas.draw()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        vertices = _line_vertices([line])
    plt.close(figure)
    assert len(vertices) > 2 and np.isfinite(vertices).all()
