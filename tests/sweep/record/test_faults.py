"""A damaged record and a full disk give one line naming the file and what to do, never a traceback, and
lose no recorded work (the record's own promise; the faults are real: bytes overwritten in a real file, a
real small tmpfs filled up).

Each test works on a copy of the release-0.1 fixture (6 trials of the invented market).
"""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from sweep.cli import app
from sweep.record import Tracker

RELEASE = Path(__file__).resolve().parents[2] / "fixtures" / "records" / "release-0.1.0"
STUDY = "release-fixture"


def invoke(*args: str):
    return CliRunner().invoke(app, [str(a) for a in args])


def assert_clean_exit(result) -> None:
    """Exit 0, or exit 1 through the CLI's handler: never an uncaught exception."""
    assert result.exception is None or isinstance(result.exception, SystemExit), result.output
    assert "Traceback" not in result.output


def _damaged_copy(folder: Path, fraction: float) -> Path:
    shutil.copytree(RELEASE, folder)
    record = folder / "study.sqlite"
    size = record.stat().st_size
    with open(record, "r+b") as f:  # 8 KB of noise over two pages, page-aligned
        f.seek(int(size * fraction) // 4096 * 4096)
        f.write(np.random.default_rng(0).bytes(8192))
    return record


@pytest.mark.parametrize("fraction", [0.3, 0.5, 0.9])
def test_a_damaged_record_gives_one_line_from_every_command(tmp_path, fraction):
    record = _damaged_copy(tmp_path / "damaged", fraction)
    results = [invoke("top", record), invoke("show", record, 1), invoke("list", record),
               invoke("board", record, "-o", tmp_path / "board.html"), invoke("notes", record),
               invoke("run", record.with_suffix(".toml"), "--trials", 8, "--no-board")]
    for result in results:
        assert_clean_exit(result)
    failed = [r for r in results if r.exit_code == 1]
    # the noise was found by some command, and every refusal names the file and the way out
    assert failed
    for result in failed:
        assert "error:" in result.stderr and str(record) in result.stderr
        assert "damaged" in result.stderr or "not a volsweep record" in result.stderr


@contextlib.contextmanager
def _tmpfs(folder: Path, size_kb: int) -> Iterator[Path]:
    """A small real tmpfs at ``folder`` for the block; after it, no file there may still be open."""
    folder.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size_kb}k", "tmpfs", str(folder)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here ({done.stderr.strip()}); the test needs root")
    try:
        yield folder
    finally:
        # a file still open in the tmpfs (a connection left behind) makes the plain unmount fail
        unmounted = subprocess.run(["umount", str(folder)], capture_output=True).returncode == 0
        if not unmounted:
            subprocess.run(["umount", "-l", str(folder)], capture_output=True)
    assert unmounted, f"a file in {folder} was still open after the commands returned"


def test_a_full_disk_during_a_run_leaves_the_record_as_it_was_and_the_next_run_resumes(tmp_path):
    disk = tmp_path / "disk"
    with _tmpfs(disk, 1024):
        project = disk / "release"
        shutil.copytree(RELEASE, project)
        record = project / "study.sqlite"
        with Tracker.open(record, create=False) as tracker:  # brings the record to this version first
            before = {t.number: t for t in tracker.load_trials(STUDY)}
        # fill the disk, leaving a few kilobytes: the first trials' curves and weights do not fit
        filler = disk / "filler"
        with open(filler, "wb", buffering=0) as f:
            try:
                while True:
                    f.write(b"\0" * 4096)
            except OSError:
                pass
        os.truncate(filler, max(0, filler.stat().st_size - 16 * 1024))
        full = invoke("run", project / "study.toml", "--trials", 30, "--no-board")
        assert_clean_exit(full)
        assert full.exit_code == 1 and "error:" in full.stderr and str(record) in full.stderr
        assert "free some space" in full.stderr
        # space again: every recorded trial is as it was, and the same command resumes
        filler.unlink()
        with Tracker.open(record, create=False) as tracker:
            kept = {t.number: t for t in tracker.load_trials(STUDY)}
        assert all(kept[n] == trial for n, trial in before.items())
        again = invoke("run", project / "study.toml", "--trials", 8, "--no-board")
        assert again.exit_code == 0, again.output
        with Tracker.open(record, create=False) as tracker:
            after = {t.number: t for t in tracker.load_trials(STUDY)}
        assert all(after[n] == trial for n, trial in before.items())
        assert sum(t.state in ("complete", "pruned") for t in after.values()) >= 8


def test_a_record_on_a_read_only_disk_opens_for_every_reading_command(tmp_path):
    disk = tmp_path / "archive"
    with _tmpfs(disk, 2048):
        shutil.copytree(RELEASE, disk / "release")  # a schema-2 record, read as it is
        record = disk / "release" / "study.sqlite"
        remount = subprocess.run(["mount", "-o", "remount,ro", str(disk)], capture_output=True, text=True)
        assert remount.returncode == 0, remount.stderr
        for args in (("top", record), ("list", record), ("show", record, 1), ("notes", record),
                     ("board", record, "-o", tmp_path / "board.html")):
            result = invoke(*args)
            assert result.exit_code == 0, (args, result.output)
        assert "trial" in invoke("top", record).stdout and (tmp_path / "board.html").stat().st_size > 0
        # a command that writes is refused by name, and the file is as it was
        note = invoke("note", record, 1, "chosen")
        run = invoke("run", record.with_suffix(".toml"), "--trials", 8, "--no-board")
        for result in (note, run):
            assert_clean_exit(result)
            assert result.exit_code == 1 and "read-only" in result.stderr and str(record) in result.stderr
        with Tracker.open(record, create=False) as tracker:
            assert tracker.read_only and len(tracker.load_trials(STUDY)) == 6
