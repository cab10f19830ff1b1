"""Holdout: score one trial and every baseline on the test window, once, and record that it was done.

A second look is refused unless asked for (``again``), and then recorded beside the first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweep.errors import HoldoutAlreadyUsed, ReviewError
from sweep.record import HoldoutRecord, Tracker, utc_now
from sweep.review.context import network_for, open_study, trial_key, window_forecasts
from sweep.study import WindowSpan, StudyInputs, window_losses
from trainers import metrics

__all__ = ["HoldoutLook", "HoldoutReport", "holdout_trial"]


@dataclass(frozen=True)
class HoldoutLook:
    """One recorded use of the test window: when, for which trial, by which command, and its losses.

    ``results`` maps each model ("trial 17", then the baselines) to its losses by metric name.
    """

    sequence: int
    trial: int
    created: str
    again: bool
    command: str
    results: dict[str, dict[str, float | None]]

    @classmethod
    def from_record(cls, h: HoldoutRecord) -> HoldoutLook:
        return cls(sequence=h.sequence, trial=h.trial, created=h.created, again=h.again, command=h.command,
                   results=h.results)

    def to_dict(self) -> dict:
        return {"sequence": self.sequence, "trial": self.trial, "created": self.created, "again": self.again,
                "command": self.command, "results": self.results}


@dataclass(frozen=True)
class HoldoutReport:
    """A trial and the baselines scored on the test window, and recorded (see ``holdout_trial``).

    ``results`` maps each model to its losses by metric name (the trial first, then the baselines);
    ``order`` ranks the models by the study's objective; ``previous`` lists the earlier looks.
    """

    study: str
    trial: int
    sequence: int
    created: str
    again: bool
    network: str
    objective: str
    results: dict[str, dict[str, float | None]]
    order: tuple[str, ...]
    window: WindowSpan
    previous: tuple[HoldoutLook, ...]

    def to_dict(self) -> dict:
        """The report as JSON-able values, keys in print order."""
        return {"study": self.study, "trial": self.trial, "sequence": self.sequence, "created": self.created,
                "again": self.again, "network": self.network, "objective": self.objective,
                "results": self.results, "order": list(self.order), "window": self.window.to_dict(),
                "previous": [h.to_dict() for h in self.previous]}


def _model_losses(inputs: StudyInputs, truth_window: str, forecasts: np.ndarray) -> dict:
    if inputs.task == "classification":
        labels = inputs.labels[truth_window]
        return {"deviance": float(metrics.deviance(labels, forecasts)),
                "accuracy": float(metrics.accuracy(labels, forecasts))}
    return window_losses(inputs.truth[truth_window], forecasts)


def holdout_trial(tracker: Tracker, number: int, *, study: str | None = None, again: bool = False,
                  command: str = "volsweep holdout") -> HoldoutReport:
    """Score one trial and every baseline on the test window, once, and record that it was done.

    The network is the trial's stored weights, or retrained from the record where they are missing
    (``network`` in the result says which). Regression results carry qlike, mse_log, mse, mae and
    mz_r2 (``sweep.study.window_losses``); classification deviance and accuracy.

    Returns:
        A ``HoldoutReport``; ``to_dict()`` gives the JSON the CLI prints.

    Raises:
        HoldoutAlreadyUsed: the study's test window was used before and ``again`` is False; the error's
            ``previous`` lists the earlier results (``HoldoutLook`` rows).
        ReviewError: the trial is not complete.
    """
    ctx = open_study(tracker, study)
    previous = tracker.load_holdouts(ctx.name)
    if previous and not again:
        first = previous[0]
        raise HoldoutAlreadyUsed(
            f"the test window of study {ctx.name!r} was already used on {first.created[:10]} for trial "
            f"{first.trial}; --again records a repeat, kept beside the first",
            [HoldoutLook.from_record(h) for h in previous])
    trial = tracker.load_trial(ctx.name, number)
    if trial.state != "complete":
        raise ReviewError(f"trial {number} of study {ctx.name!r} is {trial.state}; the holdout scores a complete "
                          "trial: pick one from `volsweep top`")
    network, source = network_for(ctx, trial)
    results = {trial_key(number): _model_losses(ctx.inputs, "test", window_forecasts(ctx.inputs, network, "test"))}
    for b in tracker.load_baselines(ctx.name, "test"):
        results[b.name] = _model_losses(ctx.inputs, "test", b.forecasts)
    stored = tracker.record_holdout(HoldoutRecord(study=ctx.name, trial=number, created=utc_now(),
                                                  command=command, again=bool(previous), results=results))
    objective = ctx.record.objective
    order = sorted(results, key=lambda k: (results[k].get(objective) is None, results[k].get(objective)))
    return HoldoutReport(study=ctx.name, trial=number, sequence=stored.sequence, created=stored.created,
                         again=stored.again, network=source, objective=objective, results=results,
                         order=tuple(order), window=WindowSpan.from_dates(ctx.inputs.dates("test")),
                         previous=tuple(HoldoutLook.from_record(h) for h in previous))
