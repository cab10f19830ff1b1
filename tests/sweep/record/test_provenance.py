"""Tests of sweep/record/provenance.py: where and with what a study was made.

Outside references: importlib.metadata for the installed versions, pyproject.toml (read with tomllib) for
the project's version, the `git` command itself for the commit of this checkout, and Python's platform
module. git_commit reads the checkout volsweep runs from, so a temporary repository cannot stand in for
it: the tests check this checkout's commit against git, and a real subprocess with PATH emptied (no git).
"""

import dataclasses
import os
import platform
import re
import shutil
import subprocess
import sys
import tomllib
from datetime import datetime, timedelta, timezone
from importlib import metadata
from pathlib import Path

import pytest

import sweep.record.provenance as provenance
from sweep.record import PACKAGES, StudyRecord, code_version, collect_provenance, git_commit, package_versions

ROOT = Path(__file__).resolve().parents[3]


def test_package_versions_lists_each_package_with_its_installed_version():
    versions = package_versions()
    assert list(versions) == list(PACKAGES)
    for name, version in versions.items():
        # importlib.metadata reads the installed distribution's own metadata
        assert version == metadata.version(name)
    assert {"numpy", "optuna", "sqlite-utils"} <= set(versions)


def test_code_version_is_the_installed_project_version():
    pyproject = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert code_version() == metadata.version("volsweep") == pyproject["project"]["version"]


@pytest.mark.skipif(shutil.which("git") is None, reason="needs the git command")
def test_git_commit_is_this_checkouts_head_with_a_dirty_mark_when_changed():
    here = Path(provenance.__file__).resolve().parent
    inside = subprocess.run(["git", "rev-parse", "--is-inside-work-tree"], cwd=here, capture_output=True, text=True)
    if inside.returncode != 0:
        pytest.skip("volsweep is not installed from a git checkout here")
    commit = git_commit()
    # 40 hex digits, then "+dirty" when tracked files have changes
    assert re.fullmatch(r"[0-9a-f]{40}(\+dirty)?", commit), commit
    head = subprocess.run(["git", "rev-parse", "HEAD"], cwd=here, capture_output=True, text=True, check=True)
    assert commit[:40] == head.stdout.strip()
    changes = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], cwd=here,
                             capture_output=True, text=True, check=True)
    assert commit.endswith("+dirty") == bool(changes.stdout.strip())


def test_git_commit_is_none_when_git_is_not_on_the_path():
    # a real Python process whose PATH holds no git: git_commit gives None instead of failing
    code = "from sweep.record import git_commit; print(repr(git_commit()))"

    def run(path: str) -> str:
        result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                                env={**os.environ, "PATH": path}, cwd=ROOT)
        assert result.returncode == 0, result.stderr
        return result.stdout.strip()

    assert run("") == "None"
    # the same process with the usual PATH finds the commit, so git's absence is what made the difference
    if shutil.which("git") is not None and git_commit() is not None:
        assert run(os.environ["PATH"]) == repr(git_commit())


def test_collect_provenance_fills_the_study_record_fields():
    before = datetime.now(timezone.utc).replace(microsecond=0)
    prov = collect_provenance()
    after = datetime.now(timezone.utc)
    study_fields = {f.name for f in dataclasses.fields(StudyRecord)}
    assert set(prov) <= study_fields
    assert set(prov) == {"created", "code_version", "git_commit", "packages", "python", "platform", "machine"}
    # an ISO 8601 time in UTC, to the second
    created = datetime.fromisoformat(prov["created"])
    assert created.utcoffset() == timedelta(0) and before <= created <= after
    assert (prov["python"], prov["platform"], prov["machine"]) == (platform.python_version(), platform.platform(),
                                                                   platform.machine())
    assert prov["packages"] == package_versions()
    # a StudyRecord accepts them as they are
    record = StudyRecord(name="s", spec_text="", spec_hash="h", search_hash="h", dataset_sha256="d",
                         objective="qlike", **prov)
    assert record.packages == prov["packages"]
