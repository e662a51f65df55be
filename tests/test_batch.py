"""Batches: ensembles expanded into members, run on the local backends, saved,
resumed and aggregated; failing members recorded; the batch command line.

The Dask backend is tested in test_batch_cluster.py, the published
aggregation check (spruce budworm) in test_batch_budworm.py.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import branchline
from branchline.batch import execute
from branchline.batch.analysis import clopper_pearson
from branchline.batch.member import run_members
from branchline.batch.plan import plan_batch, unit_points

# Invented model (plumbing only): a harvested stock with a saturating take; its
# folds move with r and h. The references are single runs of the same scans.
STOCK = {
    "title": "stock grid",
    "model": {
        "parameters": {"r": 0.6, "K": 1.0, "m": 0.11, "h": 0.12, "F": 0.08},
        "equations": {"B": "r*B*(1 - B/K) - m*B^2/(h^2 + B^2) - F*B"},
    },
    "trace": [{"name": "stock", "vary": "F", "interval": [0.0, 0.3], "start": {"B": 0.8}}],
    "steps": {"largest": 0.02},
    "ensemble": {"grid": {"r": [0.5, 0.7], "h": {"from": 0.1, "to": 0.14, "count": 3}}},
}

# x' = mu + b - x^2 has a fold at mu = -b, x = 0 (the saddle-node normal form), and
# no equilibrium at all at its start mu = 0 when b < 0: the member with b = -1 fails
# at its start guess while the others locate their fold.
FRAGILE = {
    "model": {"parameters": {"b": 1.0, "mu": 0.0}, "equations": {"x": "mu + b - x^2"}},
    "trace": [{"name": "root", "vary": "mu", "interval": [-3.0, 3.0], "start": {"x": 1.0}}],
    "ensemble": {"grid": {"b": [1.0, -1.0, 2.0]}},
}


def single_scan(values: dict[str, float], base: dict = STOCK) -> dict:
    """The scan of one member written out by hand: the values as defaults, no ensemble."""
    scan = json.loads(json.dumps(base))
    scan.pop("ensemble")
    scan["model"]["parameters"].update(values)
    return scan


def comparable(frame: pd.DataFrame) -> pd.DataFrame:
    """A batch table without its wall-clock column, for comparing two runs."""
    return frame.drop(columns=["seconds"], errors="ignore").reset_index(drop=True)


# --------------------------------------------------------------------------- members


def test_grid_expands_every_combination_first_parameter_slowest():
    scan = branchline.scan_from_dict(STOCK)
    plan = plan_batch([scan])
    assert [m.member for m in plan] == [1, 2, 3, 4, 5, 6]
    assert [m.values["r"] for m in plan] == [0.5, 0.5, 0.5, 0.7, 0.7, 0.7]
    hs = [m.values["h"] for m in plan[:3]]
    assert hs[0] == 0.1 and hs[2] == 0.14 and math.isclose(hs[1], 0.12, rel_tol=1e-15)


def test_grid_batch_events_agree_exactly_with_single_runs(tmp_path):
    result = branchline.run_batch([STOCK], tmp_path / "grid", jobs=1)
    assert result.complete and result.failed == 0
    assert list(result.members.columns) == [
        "member",
        "scan",
        "r",
        "h",
        "status",
        "seconds",
        "error",
    ]
    assert list(result.events.columns[:5]) == ["member", "r", "h", "trace", "kind"]
    members_with_folds = 0
    for row in result.members.itertuples():
        single = branchline.run(single_scan({"r": row.r, "h": row.h}))
        expected = single.events_frame()
        got = result.events[result.events["member"] == row.member]
        got = got.drop(columns=["member", "r", "h"]).reset_index(drop=True)
        # Exact agreement: the member ran the same numerics as the single run.
        pd.testing.assert_frame_equal(
            got, expected, check_exact=True, check_dtype=False, check_column_type=False
        )
        members_with_folds += len(expected) > 0
        folder = tmp_path / "grid" / "members" / f"{row.member:04d}"
        saved = branchline.read_results(folder)
        pd.testing.assert_frame_equal(saved.points, single.points_frame(), check_dtype=False)
    assert members_with_folds >= 4  # the comparison is not vacuous
    read = branchline.read_batch(tmp_path / "grid")
    pd.testing.assert_frame_equal(read.events, result.events)
    csv = pd.read_csv(tmp_path / "grid" / "events.csv")
    np.testing.assert_array_equal(csv["F"].to_numpy(), result.events["F"].to_numpy(dtype=float))


def test_failing_member_is_recorded_and_the_others_complete(tmp_path):
    result = branchline.run_batch([FRAGILE], tmp_path / "fragile", jobs=1)
    status = dict(zip(result.members["b"], result.members["status"]))
    assert status == {1.0: "done", -1.0: "failed", 2.0: "done"}
    error = result.members.loc[result.members["b"] == -1.0, "error"].item()
    assert "no equilibrium found at the start" in error
    folds = result.events.set_index("member")
    assert list(folds.index) == [1, 3] and list(folds["kind"]) == ["fold", "fold"]
    np.testing.assert_allclose(folds["mu"], [-1.0, -2.0], rtol=1e-12)
    np.testing.assert_allclose(folds["x"], [0.0, 0.0], atol=1e-8)
    report = (tmp_path / "fragile" / "report.md").read_text()
    assert "## Failed members" in report and "no equilibrium found" in report
    assert "Results describe the model" in report


def test_resume_after_interruption_gives_the_same_tables(tmp_path):
    whole = branchline.run_batch([STOCK], tmp_path / "whole", jobs=1)
    first = branchline.run_batch([STOCK], tmp_path / "parts", jobs=1, limit=2)
    assert not first.complete and "--resume" in first.message
    assert list(first.members["member"]) == [1, 2]

    class Interrupt:
        """Ctrl-C, deterministically: after the second member of this run."""

        def __call__(self, finished, to_run, failed, elapsed):
            if finished == 2:
                raise KeyboardInterrupt

    second = branchline.run_batch(
        [STOCK], tmp_path / "parts", jobs=1, resume=True, progress=Interrupt()
    )
    assert not second.complete and second.message.startswith("interrupted")
    assert list(second.members["member"]) == [1, 2, 3, 4]
    last = branchline.run_batch([STOCK], tmp_path / "parts", jobs=1, resume=True)
    assert last.complete
    for name in ("members", "events", "margins"):
        got, expected = getattr(last, name), getattr(whole, name)
        pd.testing.assert_frame_equal(comparable(got), comparable(expected), check_exact=True)


def test_resume_refuses_another_batch_and_a_new_run_refuses_an_old_folder(tmp_path):
    branchline.run_batch([FRAGILE], tmp_path / "b", jobs=1, limit=1)
    with pytest.raises(branchline.batch.folder.BatchFolderError, match="--resume"):
        branchline.run_batch([FRAGILE], tmp_path / "b", jobs=1)
    with pytest.raises(branchline.batch.folder.BatchFolderError, match="another batch"):
        branchline.run_batch([STOCK], tmp_path / "b", jobs=1, resume=True)


def test_a_failing_member_inside_a_chunk_is_recorded_and_the_chunk_goes_on():
    # One task runs a chunk of members; the failing one (b = -1, no equilibrium at
    # its start, see FRAGILE) is an outcome with its error, not a lost chunk.
    scan = branchline.scan_from_dict(FRAGILE)
    outcomes = run_members(scan, plan_batch([scan]))
    assert [o.member for o in outcomes] == [1, 2, 3]
    assert [o.status for o in outcomes] == ["done", "failed", "done"]
    assert "no equilibrium found at the start" in outcomes[1].error
    assert outcomes[2].files and not outcomes[1].events  # the member after it ran whole
    assert [row["kind"] for row in outcomes[2].events] == ["fold"]


def test_chunks_shrink_toward_the_end_and_hold_members_of_one_scan():
    assert execute.chunk_size(1000, 2, inline=False) == execute.MAX_CHUNK
    assert execute.chunk_size(5, 2, inline=False) == 1  # the last tasks are single members
    assert execute.chunk_size(1000, 2, inline=True) == 1  # this process: per member
    plans = plan_batch([branchline.scan_from_dict(STOCK), branchline.scan_from_dict(FRAGILE)])
    queue = list(reversed(plans))
    chunks = [execute._next_chunk(queue, 4) for _ in range(3)]
    assert [[m.member for m in chunk] for chunk in chunks] == [[1, 2, 3, 4], [5, 6], [7, 8, 9]]
    assert not queue and all(len({m.scan for m in chunk}) == 1 for chunk in chunks)


def test_workers_write_in_place_only_where_they_see_the_batch_disk_mark(tmp_path):
    scan = branchline.scan_from_dict(FRAGILE)
    first = plan_batch([scan])[:1]
    (tmp_path / ".disk-mark").mkdir()
    here = run_members(scan, first, str(tmp_path), ".disk-mark")[0]
    assert here.staged and not here.files and Path(here.staged).parent == tmp_path
    elsewhere = run_members(scan, first, str(tmp_path), ".another-disk")[0]
    assert not elsewhere.staged and "points.csv" in elsewhere.files


def test_local_processes_match_this_process_and_compile_once_per_worker(tmp_path):
    inline = branchline.run_batch([STOCK, FRAGILE], tmp_path / "one", jobs=1)
    pool = branchline.run_batch([STOCK, FRAGILE], tmp_path / "two", jobs=2)
    for name in ("members", "events", "margins"):
        pd.testing.assert_frame_equal(
            comparable(getattr(pool, name)), comparable(getattr(inline, name)), check_exact=True
        )
    builds = pool.info["model_builds_by_worker"]
    # Two scans, so each worker compiles at most two models, whatever it runs.
    assert 1 <= len(builds) <= 2 and all(count <= 2 for count in builds.values())
    assert sum(builds.values()) < len(pool.members)
    assert sum(inline.info["model_builds_by_worker"].values()) <= 2  # 0 if compiled earlier here


def test_a_killed_worker_stops_the_batch_and_resume_finishes_it(tmp_path):
    from batch_models import doom_flag

    token = os.getpid()
    scan = {
        "model": {
            "parameters": {"a": 1.0, "mu": 0.0, "doom": 0.0},
            "python": {"rhs": "batch_models:rhs", "size": 1},
        },
        "trace": [{"vary": "mu", "interval": [-1.0, 1.0], "start": {"x0": 1.0}}],
        "ensemble": {"grid": {"a": [1.0, 4.0], "doom": [0.0, float(token)]}},
    }
    whole = branchline.run_batch([scan], tmp_path / "whole", jobs=1)
    assert whole.complete and whole.failed == 0
    doom_flag(token).touch()
    try:
        broken = branchline.run_batch([scan], tmp_path / "parts", jobs=2)
    finally:
        doom_flag(token).unlink()
    assert not broken.complete and broken.message.startswith("a worker process died")
    assert 2 not in set(broken.members["member"])  # the member that killed its worker
    resumed = branchline.run_batch([scan], tmp_path / "parts", jobs=2, resume=True)
    assert resumed.complete
    for name in ("members", "events", "margins"):
        got, expected = getattr(resumed, name), getattr(whole, name)
        pd.testing.assert_frame_equal(comparable(got), comparable(expected), check_exact=True)


def test_tables_are_also_parquet_exactly_when_pyarrow_is_installed(tmp_path):
    from branchline.batch.tables import parquet_available

    result = branchline.run_batch([FRAGILE], tmp_path / "p", jobs=1)
    written = sorted(path.name for path in (tmp_path / "p").glob("*.parquet"))
    if parquet_available():
        assert written == ["events.parquet", "margins.parquet", "members.parquet"]
        back = pd.read_parquet(tmp_path / "p" / "events.parquet")
        np.testing.assert_array_equal(back["mu"].to_numpy(), result.events["mu"].to_numpy())
    else:
        assert written == []


def test_progress_line_counts_members_and_estimates_time_left(capsys, monkeypatch):
    from branchline.batch import command

    clock = iter([100.0, 101.0, 102.0])
    monkeypatch.setattr(command.time, "monotonic", lambda: next(clock))
    line = command.BatchProgressLine(enabled=True)
    line(1, 4, 0, 3.0)  # 3 s for the first member: about 9 s for the other three
    line(2, 4, 1, 4.0)
    line.close()
    err = capsys.readouterr().err
    assert "members 1/4, 0 failed, about 0:09 left" in err
    assert "members 2/4, 1 failed, about 0:04 left" in err
    silent = command.BatchProgressLine(enabled=False)
    silent(1, 4, 0, 3.0)
    silent.close()
    assert capsys.readouterr().err == ""


# --------------------------------------------------------------------------- sampling


def sampled(method: str, seed: int = 11, samples: int = 64) -> dict:
    scan = json.loads(json.dumps(STOCK))
    scan["ensemble"] = {
        "samples": samples,
        "seed": seed,
        "sampling": method,
        "draw": {
            "r": {"normal": [0.6, 0.2], "within": [0.45, 0.8]},
            "h": {"lognormal": [math.log(0.12), 0.1]},
            "m": {"uniform": [0.1, 0.12]},
        },
        "margin_threshold": 0.05,
    }
    return scan


@pytest.mark.parametrize("method", ["random", "latin_hypercube", "sobol"])
def test_samples_are_seeded_and_respect_their_laws(method):
    plan = plan_batch([branchline.scan_from_dict(sampled(method))])
    again = plan_batch([branchline.scan_from_dict(sampled(method))])
    other = plan_batch([branchline.scan_from_dict(sampled(method, seed=12))])
    assert plan == again and plan != other
    unseeded = sampled(method, seed=0)
    del unseeded["ensemble"]["seed"]  # the default seed: resume needs the same members
    assert plan_batch([branchline.scan_from_dict(unseeded)]) == plan_batch(
        [branchline.scan_from_dict(sampled(method, seed=0))]
    )
    r = np.array([m.values["r"] for m in plan])
    m = np.array([m.values["m"] for m in plan])
    h = np.array([m.values["h"] for m in plan])
    assert r.min() >= 0.45 and r.max() <= 0.8  # truncated
    assert m.min() >= 0.1 and m.max() <= 0.12 and h.min() > 0


def test_latin_hypercube_puts_one_point_in_each_stratum():
    # The defining property of Latin hypercube sampling (McKay, Beckman and
    # Conover, Technometrics 21 (1979) 239-245): each of the n equal strata of
    # every coordinate holds exactly one of the n points.
    points = unit_points(50, 3, "latin_hypercube", seed=5)
    for column in points.T:
        assert sorted(np.floor(column * 50).astype(int)) == list(range(50))


def test_truncated_normal_matches_its_distribution():
    # Inverse-transform sampling of a truncated normal against scipy.stats.truncnorm's
    # own CDF (Kolmogorov-Smirnov, level 0.01).
    from scipy.stats import kstest, truncnorm

    plan = plan_batch([branchline.scan_from_dict(sampled("random", samples=2000))])
    r = [m.values["r"] for m in plan]
    law = truncnorm((0.45 - 0.6) / 0.2, (0.8 - 0.6) / 0.2, loc=0.6, scale=0.2)
    assert kstest(r, law.cdf).pvalue > 0.01


def test_sampled_batch_reports_margin_probability_and_rank_correlations(tmp_path):
    result = branchline.run_batch([sampled("latin_hypercube", samples=16)], tmp_path / "s", jobs=1)
    assert result.complete and len(result.members) == 16
    report = (tmp_path / "s" / "report.md").read_text()
    assert "Clopper-Pearson" in report and "Spearman" in report
    assert (tmp_path / "s" / "locations-scan.png").is_file()
    done = result.members.loc[result.members["status"] == "done", "member"]
    margins = result.margins[result.margins["member"].isin(done)]
    below = int((pd.to_numeric(margins["margin"]).fillna(np.inf) < 0.05).sum())
    assert 0 < below < len(done)  # the probability is neither trivially 0 nor 1
    assert f"| stock | F | {len(done)} | {below} |" in report


@pytest.mark.parametrize(("hits", "trials"), [(0, 20), (20, 20), (3, 40), (17, 30)])
def test_clopper_pearson_interval(hits, trials):
    # Clopper and Pearson, Biometrika 26 (1934): the lower end p_L solves
    # P(X >= x; p_L) = alpha/2 and the upper end p_U solves P(X <= x; p_U) = alpha/2,
    # X binomial(n, p); for x = 0 the upper end is 1 - (alpha/2)^(1/n) in closed form.
    from scipy.stats import binom

    p = clopper_pearson(hits, trials, 0.95)
    if hits == 0:
        assert p.low == 0.0
        assert math.isclose(p.high, 1 - 0.025 ** (1 / trials), rel_tol=1e-10)
    elif hits == trials:
        assert p.high == 1.0
        assert math.isclose(p.low, 0.025 ** (1 / trials), rel_tol=1e-10)
    else:
        assert math.isclose(binom.sf(hits - 1, trials, p.low), 0.025, rel_tol=1e-8)
        assert math.isclose(binom.cdf(hits, trials, p.high), 0.025, rel_tol=1e-8)
    assert p.estimate == hits / trials


# --------------------------------------------------------------------------- validation


@pytest.mark.parametrize(
    ("ensemble", "key", "words"),
    [
        ({"grid": {"F": [0.1, 0.2]}}, "ensemble.grid.F", "trace[1].vary"),
        ({"grid": {"q": [0.1]}}, "ensemble.grid.q", "not a parameter"),
        ({"grid": {"r": []}}, "ensemble.grid.r", "empty"),
        ({"grid": {"r": {"from": 1, "to": 2}}}, "ensemble.grid.r.count", "missing"),
        ({"samples": 5}, "ensemble.draw", "missing"),
        ({"samples": 5, "draw": {"r": {"gauss": [1, 2]}}}, "ensemble.draw.r.gauss", "normal"),
        ({"samples": 5, "draw": {"r": {"normal": [1, -2]}}}, "ensemble.draw.r.normal", "positive"),
        (
            {"samples": 5, "draw": {"r": {"normal": [0, 1], "within": [40, 50]}}},
            "ensemble.draw.r.within",
            "almost none",
        ),
        ({"samples": 5, "sampling": "halton", "draw": {}}, "ensemble.sampling", "sobol"),
        ({"grid": {"r": [1.0]}, "samples": 3}, "ensemble", "either"),
        ({"grid": {"r": [1.0]}, "margin_threshold": -1}, "ensemble.margin_threshold", "positive"),
    ],
)
def test_invalid_ensembles_are_refused_naming_the_key(ensemble, key, words):
    scan = json.loads(json.dumps(STOCK))
    scan["ensemble"] = ensemble
    with pytest.raises(branchline.ScanError) as err:
        branchline.scan_from_dict(scan, "grid.toml")
    assert err.value.key == key and words in err.value.problem


def test_run_on_an_ensemble_says_to_use_batch(tmp_path):
    with pytest.raises(branchline.ScanError, match="run_batch"):
        branchline.run(STOCK)


# --------------------------------------------------------------------------- command line


def toml_text(scan: dict) -> str:
    """The scan dict as TOML (the small subset these scans use)."""

    def value(v):
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {value(x)}" for k, x in v.items()) + " }"
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return json.dumps(v)

    lines = [f"title = {json.dumps(scan.get('title', 'scan'))}"]
    for section in ("model.parameters", "model.equations", "model.python", "steps", "ensemble"):
        table = scan
        for part in section.split("."):
            table = table.get(part, {})
        if table:
            lines.append(f"[{section}]")
            lines += [f"{k} = {value(v)}" for k, v in table.items()]
    for trace in scan["trace"]:
        lines.append("[[trace]]")
        lines += [f"{k} = {value(v)}" for k, v in trace.items()]
    return "\n".join(lines) + "\n"


def cli(capsys, *args: str) -> tuple[int, str, str]:
    """Run the command line in this process (exit code, stdout, stderr)."""
    from branchline.cli import main

    code = main(list(args))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_batch_command_runs_fails_clearly_and_resumes(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "fragile.toml").write_text(toml_text(FRAGILE))
    code, out, err = cli(capsys, "run", "fragile.toml")
    assert code == 2 and "branchline batch fragile.toml" in err
    code, out, err = cli(capsys, "batch", "fragile.toml", "--jobs", "1")
    assert code == 1, err
    assert "3 of 3 members finished (1 failed)" in out and "1 members failed" in err
    assert "Results describe the model" in out
    assert (tmp_path / "runs" / "fragile-batch" / "members.csv").is_file()
    code, out, err = cli(capsys, "batch", "fragile.toml", "--jobs", "1", "--quiet")
    assert code == 2 and "--resume" in err
    code, out, err = cli(capsys, "batch", "fragile.toml", "--resume", "--quiet")
    assert code == 1 and out == ""
    (tmp_path / "bad.toml").write_text(toml_text(FRAGILE).replace("b = [", "c = ["))
    code, out, err = cli(capsys, "batch", "bad.toml")
    assert code == 2 and "ensemble.grid.c" in err
    assert not (tmp_path / "runs" / "bad-batch").exists()
    code, out, err = cli(capsys, "batch", "fragile.toml", "--jobs", "0", "--out", "zero")
    assert code == 2 and "--jobs must be at least 1" in err


def test_batch_command_says_a_python_model_runs_its_module(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    scan = {
        "model": {
            "parameters": {"a": 1.0, "mu": 0.0, "doom": 0.0},
            "python": {"rhs": "batch_models:rhs", "size": 1},
        },
        "trace": [{"vary": "mu", "interval": [-1.0, 1.0], "start": {"x0": 1.0}}],
        "ensemble": {"grid": {"a": [1.0, 4.0]}},
    }
    (tmp_path / "python.toml").write_text(toml_text(scan))
    code, _out, err = cli(capsys, "batch", "python.toml", "--jobs", "1")
    assert code == 0, err
    assert "imports batch_models" in err and "only run scan files you trust" in err
