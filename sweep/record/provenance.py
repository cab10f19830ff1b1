"""Where a study was made: code version, git commit, package versions, Python, platform."""

from __future__ import annotations

import platform
import subprocess
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

__all__ = ["PACKAGES", "code_version", "git_commit", "package_versions", "collect_provenance"]

PACKAGES = ("numpy", "pandas", "scipy", "optuna", "sqlite-utils", "arch", "plotly", "jinja2", "typer")


def code_version() -> str:
    try:
        return metadata.version("volsweep")
    except metadata.PackageNotFoundError:
        return "unknown"


def git_commit() -> str | None:
    """The commit of the checkout volsweep runs from, with `+dirty` when it has changes; None outside git."""
    here = Path(__file__).resolve().parent
    try:
        commit = subprocess.run(
            ["git", "rev-parse", "HEAD"], cwd=here, capture_output=True, text=True, timeout=5
        )
        if commit.returncode != 0:
            return None
        dirty = subprocess.run(
            ["git", "status", "--porcelain", "--untracked-files=no"],
            cwd=here, capture_output=True, text=True, timeout=5,
        )
        return commit.stdout.strip() + ("+dirty" if dirty.stdout.strip() else "")
    except (OSError, subprocess.SubprocessError):
        return None


def package_versions() -> dict[str, str]:
    versions = {}
    for name in PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "missing"
    return versions


def collect_provenance() -> dict:
    """The StudyRecord fields that say where and with what a study was made."""
    return {
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "code_version": code_version(),
        "git_commit": git_commit(),
        "packages": package_versions(),
        "python": platform.python_version(),
        "platform": platform.platform(),
        "machine": platform.machine(),
    }
