"""Rough edges a new user meets: each fixed, each checked here.

The expected values are the exact equilibria of tiny models solved by hand
(x0 = 1 - F for the harvested stock N' = N (1 - N) - F N) and plain facts of
the command line; no reference value comes from branchline's own output.
"""

from __future__ import annotations

import json
from pathlib import Path

import matplotlib
import pandas as pd
import pytest

from branchline import __version__, scan_from_dict
from branchline.cli import main
from branchline.present.inspection import _matrix_text
from branchline.present.plotting import bifurcation_figure
from branchline.runner import run_scan

ROOT = Path(__file__).resolve().parents[1]

STOCK = """
title = "harvested stock"
[model.parameters]
F = 0.2
[model.equations]
N = "N*(1 - N) - F*N"
P = "-P"
[[trace]]
name = "first"
vary = "F"
interval = [0.0, 0.5]
start = { N = 0.8, P = 0.0 }
[[trace]]
name = "second"
vary = "F"
interval = [0.0, 0.9]
start = { N = 0.0, P = 0.0 }
set = { F = 0.7 }
"""


@pytest.fixture()
def stock(tmp_path):
    path = tmp_path / "stock.toml"
    path.write_text(STOCK)
    return path


def test_version(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.strip() == f"branchline {__version__}"


def test_summary_counts_are_in_words(tmp_path, capsys):
    scan = tmp_path / "one.toml"
    scan.write_text(STOCK.split('[[trace]]\nname = "second"')[0])
    assert main(["run", str(scan), "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "1 trace," in out and "1 traces" not in out


def test_inspect_chooses_trace_and_start(stock, capsys):
    # The second trace starts at F = 0.7 where N = 0 is the only non-negative
    # equilibrium (1 - F < 0.3 would need N = 0.3; the guess N = 0 finds N = 0).
    assert main(["inspect", str(stock), "--trace", "second"]) == 0
    out = capsys.readouterr().out
    assert "F = 0.7" in out and "N = 0\n" in out
    # With a start guess near N = 1 - F the other equilibrium is found.
    assert main(["inspect", str(stock), "--trace", "second", "--start", "N=0.4"]) == 0
    assert "N = 0.3" in capsys.readouterr().out
    assert main(["inspect", str(stock), "--trace", "third"]) == 2
    err = capsys.readouterr().err
    assert "--trace third" in err and "first, second" in err
    assert main(["inspect", str(stock), "--start", "Q=1"]) == 2
    assert "--start Q=1" in capsys.readouterr().err


def test_inspect_newton_count_in_words(stock, capsys):
    assert main(["inspect", str(stock), "--start", "N=0.8"]) == 0
    out = capsys.readouterr().out
    assert "iterations" in out or "1 iteration," in out
    assert "1 iterations" not in out


@pytest.mark.parametrize("value", ["٣١٠", "3١0", "0x10", "1_000", "inf", "nan", ""])
def test_set_takes_ascii_numbers_only(stock, capsys, value):
    assert main(["inspect", str(stock), "--set", f"F={value}"]) == 2
    assert "not a finite number" in capsys.readouterr().err


def test_rounding_noise_in_the_jacobian_prints_as_zero():
    text = _matrix_text(__import__("numpy").array([[-1.0, 5.55e-17], [0.25, -2.0]]), ("a", "b"))
    assert "5.55e-17" not in text
    assert text.split("\n")[1].split()[-1] == "0"


def test_events_table_has_period_and_fold_coefficient():
    # N' = N (1 - N) - h: fold at h = 1/4, N = 1/2 (solved by hand: f = f_N = 0).
    scan = scan_from_dict(
        {
            "model": {"parameters": {"h": 0.1}, "equations": {"N": "N*(1 - N) - h"}},
            "trace": [{"vary": "h", "interval": [0.0, 0.4], "start": {"N": 0.9}}],
        }
    )
    frame = run_scan(scan).events_frame()
    assert {"period", "fold_coefficient"} <= set(frame.columns)
    row = frame.iloc[0]
    assert row["kind"] == "fold" and row["h"] == pytest.approx(0.25, rel=1e-12)
    assert pd.notna(row["fold_coefficient"]) and pd.isna(row["period"])


def test_limits_accept_infinity(tmp_path):
    scan = tmp_path / "inf.toml"
    scan.write_text(
        STOCK.replace('name = "first"', 'name = "first"\nlimits = { N = [0.6, inf] }').replace(
            "start = { N = 0.0, P = 0.0 }",
            "start = { N = 0.0, P = 0.0 }\nlimits = { N = [-inf, inf] }",
        )
    )
    out = tmp_path / "out"
    assert main(["run", str(scan), "--out", str(out), "--quiet"]) == 0
    info = json.loads((out / "run.json").read_text())
    first = next(t for t in info["traces"] if t["name"] == "first")
    assert first["limits"] == {"N": [0.6, None]}
    assert "reached the limit N = 0.6" in first["message"]
    points = pd.read_csv(out / "points.csv")
    assert points[points["trace"] == "first"]["N"].min() == pytest.approx(0.6, abs=1e-12)


@pytest.mark.parametrize("bad", ["[inf, 1.0]", "[0.0, -inf]", "[nan, 1.0]"])
def test_limits_refuse_wrong_infinities(tmp_path, capsys, bad):
    scan = tmp_path / "bad.toml"
    scan.write_text(STOCK.replace('name = "first"', f'name = "first"\nlimits = {{ N = {bad} }}'))
    assert main(["run", str(scan), "--out", str(tmp_path / "out")]) == 2
    assert "trace[1].limits.N" in capsys.readouterr().err


@pytest.mark.parametrize("title", ["Cost $5 per unit", r"\frac{a}{b} $x_{1", "^_^ $$ \\"])
def test_user_titles_are_drawn_literally(title):
    scan = scan_from_dict(
        {
            "title": title,
            "model": {"parameters": {"F": 0.2}, "equations": {"N": "N*(1 - N) - F*N"}},
            "trace": [{"vary": "F", "interval": [0.0, 0.5], "start": {"N": 0.8}}],
        }
    )
    result = run_scan(scan)
    figure = bifurcation_figure(result.points_frame(), result.event_records(), result.info())
    figure.canvas.draw()  # mathtext would raise on these titles
    texts = [t.get_text() for t in figure.texts]
    assert title in texts
    assert matplotlib.rcParams["text.parse_math"]  # the global setting is left alone


def test_pond_interval_from_zero_stops_gracefully(tmp_path, capsys):
    # The grazer-free branch reaches K = 0, where the model divides by zero.
    scan = tmp_path / "pond.toml"
    text = (ROOT / "scans" / "enriched_pond.toml").read_text()
    scan.write_text(text.replace("interval = [0.3, 4.0]", "interval = [0.0, 4.0]"))
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert code in (0, 1)
    info = json.loads((out / "run.json").read_text())
    assert len(pd.read_csv(out / "points.csv")) > 10
    if code == 1:
        assert info["status"] == "failed" and "edge 0" in info["message"]


def test_progress_names_switched_branches_and_counts_on():
    scan = scan_from_dict(
        {
            "model": {"parameters": {"mu": -1.0}, "equations": {"x": "mu*x - x^3"}},
            "trace": [{"name": "p", "vary": "mu", "interval": [-1, 1], "start": {"x": 0.0}}],
        }
    )
    seen = []
    run_scan(scan, progress=lambda name, count: seen.append((name, count)))
    labels = {name for name, _ in seen}
    assert "p" in labels and any("switched at p" in name for name in labels)
    counts = [count for _, count in seen]
    assert counts == sorted(counts)  # the count runs on, never restarts


def test_report_wording_is_consistent():
    import re

    import branchline

    result = branchline.run(str(ROOT / "scans" / "cooled_reactor.toml"))
    report = result.report()
    assert "At that value" not in report
    # One margin, one number: the brief and the margins list print it alike.
    brief = re.search(r"In brief.*?([\d.]+) % of the start value", report, re.S).group(1)
    rest = report.split("## Operating margin", 1)[1]
    assert f"({brief} % of the start value)" in rest
    # A stability interval that turns at a fold covers the fold value itself.
    folds = [e.value for e in result.events if e.kind == "fold"]
    for line in report.splitlines():
        if "turns at" in line:
            covers = re.search(r"\[([\d.]+), ([\d.]+)\]", line).groups()
            turned = float(line.split("turns at")[1].split("=")[1].split()[0].strip(" |"))
            assert any(abs(turned - fold) < 1e-6 for fold in folds)
            assert min(map(float, covers)) <= turned + 1e-6 <= max(map(float, covers)) + 2e-6


LONG = "a" * 100_000


@pytest.mark.parametrize(
    "change, key",
    [
        (lambda d: d.update(title=LONG), "title"),
        (lambda d: d.update(title="line one\nline two"), "title"),
        (lambda d: d["trace"][0].update(name=LONG), "trace[1].name"),
        (lambda d: d["trace"][0].update(name="bell\x07\x1b[31mred"), "trace[1].name"),
        (lambda d: d["trace"][0].update(name="abc\u202edcba"), "trace[1].name"),
        (lambda d: d["model"]["parameters"].update({LONG: 1.0}), "model.parameters"),
        (lambda d: d["trace"][0].update({LONG: 1.0}), "trace[1]"),
        (lambda d: d["model"]["equations"].update(N=f"N - {LONG}"), "model.equations.N"),
    ],
    ids=[
        "long-title",
        "newline-title",
        "long-name",
        "escape-name",
        "bidi-name",
        "long-parameter",
        "long-key",
        "long-unknown-name",
    ],
)
def test_names_and_titles_are_bounded_and_plain(change, key):
    from branchline.errors import ScanError

    data = {
        "model": {"parameters": {"F": 0.2}, "equations": {"N": "N*(1 - N) - F*N"}},
        "trace": [{"vary": "F", "interval": [0.0, 0.5], "start": {"N": 0.8}}],
    }
    change(data)
    with pytest.raises(ScanError) as refused:
        scan_from_dict(data)
    assert refused.value.key.startswith(key)
    assert len(str(refused.value)) < 1000
    assert "\x1b" not in str(refused.value) and "\u202e" not in str(refused.value)


def _figure_texts(scan_dict, **axes):
    result = run_scan(scan_from_dict(scan_dict))
    figure = bifurcation_figure(
        result.points_frame(), result.event_records(), result.info(), **axes
    )
    figure.canvas.draw()
    return figure, [t.get_text() for ax in figure.axes for t in ax.texts]


VAN_DER_POL = {
    "model": {"parameters": {"mu": -0.5}, "equations": {"x": "y", "y": "mu*(1 - x^2)*y - x"}},
    "trace": [{"vary": "mu", "interval": [-0.5, 0.5], "start": {"x": 0.0, "y": 0.0}}],
}


def test_event_label_near_zero_prints_zero_and_names_the_parameter():
    # The van der Pol Hopf point is at mu = 0 exactly (located as about 1e-32).
    _, texts = _figure_texts(VAN_DER_POL)
    assert any(t.endswith("mu = 0") for t in texts), texts
    # With a state on the x axis the label still gives the varied parameter.
    _, texts = _figure_texts(VAN_DER_POL, x="y", y="x")
    assert any("mu = 0" in t for t in texts), texts


def test_many_traces_get_distinct_colours():
    from branchline.present.plotting import TRACE_COLOURS, trace_colour

    count = len(TRACE_COLOURS) + 5
    colours = {tuple(matplotlib.colors.to_rgba(trace_colour(k, count))) for k in range(count)}
    assert len(colours) == count


def test_diagram_with_a_hopf_point_says_cycles_were_not_computed():
    from branchline.present.plotting import HOPF_CYCLES_NOTE

    figure, _ = _figure_texts(VAN_DER_POL)
    assert HOPF_CYCLES_NOTE in [t.get_text() for t in figure.legends[0].get_texts()]


def test_report_and_plot_of_a_run_with_no_points(tmp_path, capsys):
    # x^2 + 1 + F = 0 has no real solution: the trace fails at its start.
    scan = tmp_path / "none.toml"
    scan.write_text(
        'title = "none"\n[model.parameters]\nF = 0.5\n[model.equations]\nx = "x^2 + 1 + F"\n'
        '[[trace]]\nvary = "F"\ninterval = [0.0, 1.0]\nstart = { x = 1.0 }\n'
    )
    out = tmp_path / "out"
    assert main(["run", str(scan), "--out", str(out), "--quiet"]) == 1
    assert main(["report", str(out)]) == 0
    assert main(["plot", str(out)]) == 0
    assert "no equilibrium found at the start" in capsys.readouterr().out
