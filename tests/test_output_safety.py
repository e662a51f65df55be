"""Output safety: branchline never removes what it did not write.

Each test tries one way a results folder could destroy or corrupt data (an
--out naming someone else's folder, the current folder, a file, a folder that
another run holds, a crash while moving results into place) and checks that
nothing but branchline's own earlier results is ever replaced.
"""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path

import pytest

from branchline.cli import main
from branchline.results import output_folder
from branchline.results.output_folder import (
    STAGING_MARKER,
    OutputFolderError,
    check_output_folder,
    reserve_output,
)
from test_cli import GOOD


@pytest.fixture()
def scan(tmp_path: Path) -> Path:
    path = tmp_path / "stock.toml"
    path.write_text(GOOD)
    return path


def _run(scan: Path, out: Path | str) -> int:
    return main(["run", str(scan), "--out", str(out), "--quiet"])


def test_foreign_folder_is_refused_and_kept(scan, tmp_path, capsys):
    mine = tmp_path / "mydata"
    mine.mkdir()
    (mine / "thesis.txt").write_text("three years of work")
    assert _run(scan, mine) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "thesis.txt" in err and "did not write" in err
    assert (mine / "thesis.txt").read_text() == "three years of work"
    assert sorted(p.name for p in mine.iterdir()) == ["thesis.txt"]


@pytest.mark.parametrize("target", [".", "..", "sub/.."])
def test_current_folder_and_parents_are_refused(scan, tmp_path, monkeypatch, capsys, target):
    work = tmp_path / "work"
    (work / "sub").mkdir(parents=True)
    (work / "notes.md").write_text("keep me")
    monkeypatch.chdir(work)
    assert _run(scan, target) == 2
    assert "current folder or one of its parents" in capsys.readouterr().err
    assert (work / "notes.md").read_text() == "keep me"
    assert scan.is_file()


def test_file_as_out_is_refused_before_computing(scan, tmp_path, capsys):
    target = tmp_path / "results.txt"
    target.write_text("not a folder")
    assert _run(scan, target) == 2
    assert "is not a folder" in capsys.readouterr().err
    assert target.read_text() == "not a folder"


def test_read_only_parent_is_refused_up_front(scan, tmp_path, monkeypatch, capsys):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(stat.S_IRUSR | stat.S_IXUSR)
    real_access = os.access
    # Root ignores folder modes, so the permission answer is also given directly.
    monkeypatch.setattr(
        output_folder.os,
        "access",
        lambda path, mode: False if Path(path) == locked else real_access(path, mode),
    )
    try:
        assert _run(scan, locked / "out") == 2
        assert "permission denied" in capsys.readouterr().err
        assert list(locked.iterdir()) == []
    finally:
        locked.chmod(stat.S_IRWXU)


def test_own_results_are_replaced_and_marked(scan, tmp_path):
    out = tmp_path / "out"
    assert _run(scan, out) == 0
    info = json.loads((out / "run.json").read_text())
    assert info["written_by"] == "branchline"
    assert set(info["files"]) == {p.name for p in out.iterdir()}
    assert main(["plot", str(out), "--format", "pdf"]) == 0  # a later diagram is ours too
    (out / "points.csv").write_text("stale")
    assert _run(scan, out) == 0
    assert (out / "points.csv").read_text().startswith("trace,")
    assert not (out / "diagram.pdf").exists()
    # Nothing hidden is left beside the folder.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "stock.toml"]


def test_results_folder_with_a_user_file_added_is_not_replaced(scan, tmp_path, capsys):
    out = tmp_path / "out"
    assert _run(scan, out) == 0
    (out / "my-notes.txt").write_text("observations")
    assert _run(scan, out) == 2
    assert "my-notes.txt" in capsys.readouterr().err
    assert (out / "my-notes.txt").read_text() == "observations"


def test_results_folder_gets_usual_permissions(scan, tmp_path):
    out = tmp_path / "out"
    assert _run(scan, out) == 0
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(out.stat().st_mode) == 0o777 & ~umask


def test_stale_staging_folders_are_removed_only_when_marked(scan, tmp_path):
    out = tmp_path / "out"
    stale = tmp_path / ".out.branchline-new-abc123"
    stale.mkdir()
    (stale / STAGING_MARKER).touch()
    (stale / "points.csv").write_text("half")
    lookalike = tmp_path / ".out.branchline-new-user"
    lookalike.mkdir()
    (lookalike / "data.txt").write_text("not ours")
    assert _run(scan, out) == 0
    assert not stale.exists()
    assert (lookalike / "data.txt").read_text() == "not ours"


def test_second_run_into_a_held_folder_is_refused(scan, tmp_path, capsys):
    out = tmp_path / "out"
    with reserve_output(out):
        assert _run(scan, out) == 2
        assert "another branchline run" in capsys.readouterr().err
    assert _run(scan, out) == 0
    assert not (tmp_path / ".out.branchline-lock").exists()


def test_failed_move_keeps_the_old_results(scan, tmp_path, monkeypatch):
    out = tmp_path / "out"
    assert _run(scan, out) == 0
    before = (out / "points.csv").read_text()
    real_rename = Path.rename

    def rename(self, target):
        if self.name.startswith(".out.branchline-new-"):
            raise OSError(28, "No space left on device")
        return real_rename(self, target)

    monkeypatch.setattr(Path, "rename", rename)
    assert _run(scan, out) == 1
    monkeypatch.undo()
    assert (out / "points.csv").read_text() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "stock.toml"]


def test_nothing_created_when_refused(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with reserve_output(Path("runs") / "a"), pytest.raises(OutputFolderError):
        with reserve_output(Path("runs") / "a"):
            pass
    assert not (tmp_path / "runs").exists()


def test_symbolic_link_is_refused(tmp_path):
    real = tmp_path / "real"
    real.mkdir()
    (tmp_path / "link").symlink_to(real)
    with pytest.raises(OutputFolderError, match="symbolic link"):
        check_output_folder(tmp_path / "link")


def test_marker_needs_a_dict_run_json(tmp_path):
    for text in ("null", "[1, 2]", '{"written_by": "someone"}', "{" * 5000):
        (tmp_path / "run.json").write_text(text)
        assert output_folder.read_marker(tmp_path) is None
        assert output_folder.foreign_entries(tmp_path) == ["run.json"]


def test_a_folder_held_by_another_process_is_refused_until_released(scan, tmp_path):
    # Two real processes, as two users' runs would be: the lock is an flock, which
    # only means anything across processes.
    import subprocess
    import sys

    out = tmp_path / "out"
    holder_code = (
        "import sys\n"
        "from pathlib import Path\n"
        "from branchline.results.output_folder import reserve_output\n"
        f"with reserve_output(Path({str(out)!r})):\n"
        "    print('held', flush=True)\n"
        "    sys.stdin.read()\n"
    )
    holder = subprocess.Popen(
        [sys.executable, "-c", holder_code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        command = [sys.executable, "-m", "branchline", "run", str(scan), "--out", str(out), "--quiet"]
        refused = subprocess.run(command, capture_output=True, text=True, timeout=120)
        assert refused.returncode == 2
        assert "another branchline run" in refused.stderr
        assert not (out / "points.csv").exists()
    finally:
        holder.communicate("", timeout=60)
    assert holder.returncode == 0
    done = subprocess.run(command, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert (out / "points.csv").exists() and (out / "run.json").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "stock.toml"]
