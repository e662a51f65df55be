"""Clean interrupts: Ctrl-C (SIGINT) and SIGTERM stop a run at once, keep every
point computed, write them marked ``interrupted`` and exit 130 / 143 without a
traceback. The signals are sent by the model itself at a known call, so the
tests need no waiting: after the signal the model must not be called again."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pytest

from branchline import scan_from_dict
from branchline.cli import main
from branchline.runner import run_scan
from branchline.stopping import StopRequest

SRC = str(Path(__file__).resolve().parents[1] / "src")

# A model file whose rhs sends a signal to its own process at call SIGNAL_AT and
# counts the calls it receives after that (written to calls_after.txt).
MODEL = """
import os, signal, threading, time
from pathlib import Path
import numpy as np

SIGNAL_AT = 400
calls = [0]

def rhs(x, p):
    calls[0] += 1
    if calls[0] == SIGNAL_AT:
        {send}
    if calls[0] > SIGNAL_AT:
        Path("calls_after.txt").write_text(str(calls[0] - SIGNAL_AT))
    return np.array([x[0] * (1.0 - x[0]) - p["F"] * x[0], -x[1]])
"""
SEND_NOW = "os.kill(os.getpid(), signal.{name})"
# The signal arrives while the rhs sleeps: the stop must cut the sleep short.
SEND_WHILE_SLEEPING = (
    "threading.Timer(0.3, os.kill, (os.getpid(), signal.{name})).start(); time.sleep(60)"
)

SCAN = """
title = "stock model that signals itself"
[model.parameters]
F = 0.0
[model.python]
rhs = "signalling_model:rhs"
size = 2
[[trace]]
name = "first"
vary = "F"
interval = [0.0, 0.9]
start = { x0 = 0.95, x1 = 0.0 }
[trace.steps]
initial = 0.002
largest = 0.002
max_points = 100000
[[trace]]
name = "second"
vary = "F"
interval = [0.0, 0.9]
start = { x0 = 0.95, x1 = 0.0 }
"""


def _run_signalled(tmp_path: Path, send: str, name: str, out: Path) -> subprocess.CompletedProcess:
    (tmp_path / "signalling_model.py").write_text(MODEL.format(send=send.format(name=name)))
    scan = tmp_path / "signal.toml"
    scan.write_text(SCAN)
    env = {"PYTHONPATH": f"{SRC}:{tmp_path}", "PATH": "/usr/bin:/bin"}
    return subprocess.run(
        [sys.executable, "-m", "branchline", "run", str(scan), "--out", str(out)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=50,
    )


@pytest.mark.parametrize(
    "name, code, send",
    [
        ("SIGINT", 130, SEND_NOW),
        ("SIGTERM", 143, SEND_WHILE_SLEEPING),
    ],
    ids=["ctrl-c", "sigterm-during-slow-rhs"],
)
def test_signal_stops_at_once_keeps_points_and_marks_run(tmp_path, name, code, send):
    out = tmp_path / "out"
    done = _run_signalled(tmp_path, send, name, out)
    assert done.returncode == code, done.stderr
    assert "Traceback" not in done.stderr
    assert f"interrupted ({name})" in done.stderr
    # After the signal the model was never called again: the stop is immediate.
    assert not (tmp_path / "calls_after.txt").exists()
    info = json.loads((out / "run.json").read_text())
    assert info["status"] == "interrupted"
    assert "not started: second" in info["message"]
    points = pd.read_csv(out / "points.csv")
    # Every point accepted before the signal is kept: with difference Jacobians
    # (3 rhs calls each) and two or three Newton steps a point costs about 15
    # of the 400 calls, so about 25 points precede the signal.
    assert len(points) >= 20
    assert set(points["trace"]) == {"first"}
    assert "The run was interrupted" in (out / "report.md").read_text()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_interrupted_run_keeps_earlier_complete_results(tmp_path):
    out = tmp_path / "out"
    small = tmp_path / "small.toml"
    small.write_text(
        'title = "earlier run"\n[model.parameters]\nF = 0.0\n[model.equations]\n'
        'N = "N*(1 - N) - F*N"\n[[trace]]\nvary = "F"\ninterval = [0.0, 0.5]\n'
        "start = { N = 1.0 }\n"
    )
    assert main(["run", str(small), "--out", str(out), "--quiet"]) == 0
    before = (out / "points.csv").read_text()
    done = _run_signalled(tmp_path, SEND_NOW, "SIGINT", out)
    assert done.returncode == 130, done.stderr
    assert (out / "points.csv").read_text() == before
    partial = tmp_path / "out-interrupted"
    assert json.loads((partial / "run.json").read_text())["status"] == "interrupted"
    assert str(partial) in done.stderr


def test_stop_request_in_process_keeps_points_and_skips_the_rest():
    """The runner's side, with an expression model: a stop requested part-way."""
    scan = scan_from_dict(
        {
            "model": {"parameters": {"F": 0.0}, "equations": {"N": "N*(1 - N) - F*N"}},
            "trace": [
                {
                    "name": "long",
                    "vary": "F",
                    "interval": [0.0, 0.9],
                    "start": {"N": 1.0},
                    "steps": {"initial": 0.001, "largest": 0.001, "max_points": 100000},
                },
                {"name": "never", "vary": "F", "interval": [0.0, 0.9], "start": {"N": 1.0}},
            ],
        }
    )
    stop = StopRequest()

    def progress(trace, count):
        if count >= 100:
            stop.request("SIGINT", 2)

    result = run_scan(scan, progress=progress, stop=stop)
    assert result.status == "interrupted"
    (branch,) = result.branches
    assert branch.status == "interrupted"
    # Progress is reported every 50 points: the stop lands at the 100th.
    assert len(branch) == 100
    assert "not started: never" in result.message
    assert "stopped by SIGINT after 100 points" in branch.message


def test_model_file_is_valid_python():
    compile(textwrap.dedent(MODEL.format(send=SEND_NOW.format(name="SIGINT"))), "m", "exec")


# Runs branchline with its table writer wrapped so that the process signals itself
# right after points.csv is written into the staging folder: mid-write, at a known place.
SIGNAL_WHILE_WRITING = """
import os, signal, sys
import branchline.results.writers as writers

SIGNALS = {"term": ["SIGTERM"], "term-twice": ["SIGTERM", "SIGTERM"], "kill": ["SIGKILL"]}
write_table = writers._csv

def _csv(frame, path):
    write_table(frame, path)
    if path.name == "points.csv":
        for name in SIGNALS[sys.argv[1]]:
            os.kill(os.getpid(), getattr(signal, name))

writers._csv = _csv
from branchline.cli import main
raise SystemExit(main(sys.argv[2:]))
"""

SMALL_SCAN = (
    'title = "{title}"\n[model.parameters]\nF = 0.0\n[model.equations]\n'
    'N = "N*(1 - N) - F*N"\n[[trace]]\nvary = "F"\ninterval = [0.0, {hi}]\n'
    "start = {{ N = 1.0 }}\n"
)


def _hidden(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


@pytest.mark.parametrize("how", ["term", "term-twice", "kill"])
def test_signal_while_writing_never_leaves_a_half_written_folder(tmp_path, how):
    """SIGTERM once while writing: the write finishes (whole new results), exit 143 saying
    so. A second SIGTERM or SIGKILL mid-write: the earlier results stay byte for byte;
    a killed run's marked staging folder and lock are cleared by the next run."""
    out = tmp_path / "out"
    first, second = tmp_path / "first.toml", tmp_path / "second.toml"
    first.write_text(SMALL_SCAN.format(title="first", hi=0.5))
    second.write_text(SMALL_SCAN.format(title="second", hi=0.8))
    assert main(["run", str(first), "--out", str(out), "--quiet"]) == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    (tmp_path / "signal_while_writing.py").write_text(SIGNAL_WHILE_WRITING)
    done = subprocess.run(
        [sys.executable, "signal_while_writing.py", how, "run", str(second), "--out", str(out)],
        cwd=tmp_path,
        env={"PYTHONPATH": SRC, "PATH": "/usr/bin:/bin", "MPLBACKEND": "Agg"},
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert "Traceback" not in done.stderr
    after = {p.name: p.read_bytes() for p in out.iterdir()}
    if how == "term":
        assert done.returncode == 143, done.stderr
        assert "interrupted (SIGTERM) while the results were being written" in done.stderr
        info = json.loads(after["run.json"])
        assert info["title"] == "second" and info["status"] == "done"
        points = pd.read_csv(out / "points.csv")
        assert points["F"].max() == 0.8  # whole: the trace reaches its edge
        assert set(info["files"]) <= set(after)
        assert _hidden(tmp_path) == []
        return
    assert after == before  # the earlier results, untouched
    if how == "term-twice":
        assert done.returncode == 130, done.stderr
        assert "nothing more was written" in done.stderr
        assert _hidden(tmp_path) == []
        return
    assert done.returncode == -9
    assert _hidden(tmp_path) != []  # what SIGKILL leaves: a marked staging folder, the lock
    assert main(["run", str(second), "--out", str(out), "--quiet"]) == 0
    assert json.loads((out / "run.json").read_text())["title"] == "second"
    assert _hidden(tmp_path) == []
