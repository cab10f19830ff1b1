"""What differs between two studies of one record: settings, data, windows, best objective, versions."""

from __future__ import annotations

from dataclasses import dataclass

from sweep.record import DatasetSummary, Tracker
from sweep.review.context import open_study, ranked_complete
from sweep.study import WINDOW_NAMES, WindowSpan, diff_specs

__all__ = ["StudyDiff", "StudySide", "diff_studies"]



@dataclass(frozen=True)
class StudySide:
    """One study of a diff: its objective, best complete trial, data, windows (train, valid, test) and versions."""

    name: str
    created: str
    objective: str
    best_trial: int | None
    best_objective: float | None
    n_complete: int
    dataset: DatasetSummary
    windows: dict[str, WindowSpan]
    code_version: str
    git_commit: str | None
    packages: dict[str, str]

    def best_line(self) -> str:
        """``"name: trial 3, qlike 0.1593"``, or that the study has no complete trial."""
        if self.best_trial is None:
            return f"{self.name}: no complete trial"
        return f"{self.name}: trial {self.best_trial}, {self.objective} {self.best_objective:.6g}"

    def to_dict(self) -> dict:
        return {"name": self.name, "created": self.created, "objective": self.objective,
                "best_trial": self.best_trial, "best_objective": self.best_objective, "n_complete": self.n_complete,
                "dataset": self.dataset.to_dict(), "windows": {w: s.to_dict() for w, s in self.windows.items()},
                "code_version": self.code_version, "git_commit": self.git_commit, "packages": self.packages}


@dataclass(frozen=True)
class StudyDiff:
    """What differs between studies ``a`` and ``b``, one line per difference (see ``diff_studies``)."""

    a: StudySide
    b: StudySide
    spec: tuple[str, ...]
    same_data: bool
    windows: tuple[str, ...]
    packages: tuple[str, ...]
    best: str
    comparable: bool

    def to_dict(self) -> dict:
        """The diff as JSON-able values, keys in print order."""
        return {"a": self.a.to_dict(), "b": self.b.to_dict(), "spec": list(self.spec), "same_data": self.same_data,
                "windows": list(self.windows), "packages": list(self.packages), "best": self.best,
                "comparable": self.comparable}


def _study_side(tracker: Tracker, name: str) -> tuple[StudySide, dict]:
    """The study's side of the diff and its spec as a dict."""
    ctx = open_study(tracker, name)
    dataset = tracker.load_dataset(ctx.record.dataset_sha256)
    best = ranked_complete(tracker.load_trials(ctx.name, states=["complete"]))
    side = StudySide(
        name=ctx.name, created=ctx.record.created, objective=ctx.record.objective,
        best_trial=best[0].number if best else None, best_objective=best[0].objective if best else None,
        n_complete=len(best),
        dataset=DatasetSummary(sha256=dataset.sha256, source=dataset.source, rows=dataset.n_rows,
                               first_date=dataset.first_date, last_date=dataset.last_date),
        windows={w: WindowSpan.from_dates(ctx.inputs.dates(w)) for w in WINDOW_NAMES},
        code_version=ctx.record.code_version, git_commit=ctx.record.git_commit, packages=ctx.record.packages)
    return side, ctx.spec.to_dict()


def diff_studies(tracker: Tracker, study_a: str, study_b: str) -> StudyDiff:
    """What differs between two studies of one record: settings, data, windows, best objective, versions.

    Returns:
        A ``StudyDiff``: the two ``StudySide``s, ``spec`` (``"section.key: a -> b"`` lines), ``same_data``,
        ``windows`` and ``packages`` (lines), ``best`` (one line) and ``comparable`` (same objective, data
        and windows). ``to_dict()`` gives the JSON the CLI prints.
    """
    (a, spec_a), (b, spec_b) = _study_side(tracker, study_a), _study_side(tracker, study_b)
    spec_lines = [line for line in diff_specs(spec_a, spec_b) if not line.startswith("study.name:")]
    window_lines = [f"{w}: {a.windows[w].first}..{a.windows[w].last} ({a.windows[w].rows} rows)"
                    f" -> {b.windows[w].first}..{b.windows[w].last} ({b.windows[w].rows} rows)"
                    for w in WINDOW_NAMES if a.windows[w] != b.windows[w]]
    package_lines = [f"{p}: {a.packages.get(p)} -> {b.packages.get(p)}"
                     for p in sorted(set(a.packages) | set(b.packages)) if a.packages.get(p) != b.packages.get(p)]
    same_data = a.dataset.sha256 == b.dataset.sha256
    return StudyDiff(a=a, b=b, spec=tuple(spec_lines), same_data=same_data, windows=tuple(window_lines),
                     packages=tuple(package_lines), best=f"{a.best_line()}; {b.best_line()}",
                     comparable=a.objective == b.objective and same_data and not window_lines)
