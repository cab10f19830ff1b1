"""What differs between two studies of one record: settings, data, windows, best objective, versions."""

from __future__ import annotations

from sweep.record import Tracker
from sweep.review.context import open_study, ranked_complete
from sweep.study import diff_specs

__all__ = ["diff_studies"]


def _study_side(tracker: Tracker, name: str) -> dict:
    ctx = open_study(tracker, name)
    dataset = tracker.load_dataset(ctx.record.dataset_sha256)
    best = ranked_complete(tracker.load_trials(ctx.name, states=["complete"]))
    windows = {}
    for w in ("train", "valid", "test"):
        dates = ctx.inputs.dates(w)
        windows[w] = {"rows": int(len(dates)), "first": dates[0].date().isoformat(),
                      "last": dates[-1].date().isoformat()}
    return {"name": ctx.name, "created": ctx.record.created, "objective": ctx.record.objective,
            "best_trial": best[0].number if best else None, "best_objective": best[0].objective if best else None,
            "n_complete": len(best), "dataset": {"sha256": dataset.sha256, "source": dataset.source,
                                                 "rows": dataset.n_rows, "first_date": dataset.first_date,
                                                 "last_date": dataset.last_date},
            "windows": windows, "code_version": ctx.record.code_version, "git_commit": ctx.record.git_commit,
            "packages": ctx.record.packages, "spec": ctx.spec.to_dict()}


def diff_studies(tracker: Tracker, study_a: str, study_b: str) -> dict:
    """What differs between two studies of one record: settings, data, windows, best objective, versions.

    Returns:
        ``{"a": side, "b": side, "spec": ["section.key: a -> b", ...], "same_data": bool,
        "windows": [lines], "packages": [lines], "best": line}``.
    """
    a, b = _study_side(tracker, study_a), _study_side(tracker, study_b)
    spec_lines = [line for line in diff_specs(a["spec"], b["spec"]) if not line.startswith("study.name:")]
    window_lines = [f"{w}: {a['windows'][w]['first']}..{a['windows'][w]['last']} ({a['windows'][w]['rows']} rows)"
                    f" -> {b['windows'][w]['first']}..{b['windows'][w]['last']} ({b['windows'][w]['rows']} rows)"
                    for w in ("train", "valid", "test") if a["windows"][w] != b["windows"][w]]
    package_lines = [f"{p}: {a['packages'].get(p)} -> {b['packages'].get(p)}"
                     for p in sorted(set(a["packages"]) | set(b["packages"]))
                     if a["packages"].get(p) != b["packages"].get(p)]
    same_data = a["dataset"]["sha256"] == b["dataset"]["sha256"]

    def best(side):
        if side["best_trial"] is None:
            return f"{side['name']}: no complete trial"
        return f"{side['name']}: trial {side['best_trial']}, {side['objective']} {side['best_objective']:.6g}"

    for side in (a, b):
        side.pop("spec")
    return {"a": a, "b": b, "spec": spec_lines, "same_data": same_data, "windows": window_lines,
            "packages": package_lines, "best": f"{best(a)}; {best(b)}",
            "comparable": a["objective"] == b["objective"] and same_data and not window_lines}
