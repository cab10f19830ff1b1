"""Tests for sweep/review/compare.py and the comparison part of the record.

Outside references, on the same loss series the comparison uses:
- Diebold and Mariano (1995): DM is the t statistic of the mean loss differential with a long-run
  variance from the first h - 1 autocovariances, equal weights. statsmodels OLS of the differential on a
  constant with HAC errors (uniform kernel, maxlags = h - 1, no small-sample correction) gives it.
- Harvey, Leybourne and Newbold (1997): DM x sqrt((T + 1 - 2h + h(h - 1)/T) / T), Student t with T - 1
  degrees of freedom (scipy.stats.t).
- Patton (2011) QLIKE written out by hand; arch's MCS (Hansen, Lunde and Nason 2011) and SPA (Hansen
  2005) called directly with the same settings.
The record and board tests at the end check where a comparison is kept and shown.
"""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from arch.bootstrap import MCS, SPA
from scipy import stats
from typer.testing import CliRunner

from review_study import STUDY, copy_record
from sweep import review
from sweep.cli import app
from sweep.errors import ReviewError
from sweep.record import ComparisonRecord, RecordError, StudyNotFound, Tracker
from sweep.review import compare
from sweep.search import inputs_from_record

REPS = 200
# the keys `volsweep compare --json` printed before the results were typed (captured from that version)
COMPARE_KEYS = ["study", "window", "objective", "level", "rows", "first_date", "last_date", "horizons",
                "dm_horizon_all", "finalists", "baselines", "dm", "mcs", "spa", "spa_skipped", "n_trials", "networks",
                "sequence", "created"]
DM_KEYS = ["model", "baseline", "horizon", "dm_horizon", "mean_diff", "statistic", "pvalue", "hln_statistic",
           "hln_pvalue", "n", "verdict", "words"]
MCS_KEYS = ["size", "reps", "seed", "method", "included", "excluded", "pvalues", "models", "words"]
SPA_KEYS = ["benchmark", "n_models", "best", "best_mean_loss", "benchmark_mean_loss", "pvalues", "better_models",
            "level", "reps", "seed", "beats_benchmark", "words"]


@pytest.fixture(scope="module")
def valid_result(review_record, tmp_path_factory):
    """One comparison on the validation window, on a private copy of the record."""
    db = copy_record(review_record, tmp_path_factory.mktemp("compare"))
    with Tracker.open(db, create=False) as t:
        result = compare.compare_forecasts(t, top=3, reps=REPS)
        inputs = inputs_from_record(t, t.find_study(STUDY))[1]
        trials = {f"trial {x.number}": x for x in t.load_trials(STUDY, states=["complete"], with_forecasts=True)}
        baselines = {b.name: b for b in t.load_baselines(STUDY, "valid")}
        stored = t.load_comparisons(STUDY)
    return result, inputs, trials, baselines, stored


def _qlike_rows(y, f):
    """Patton (2011) QLIKE per row, averaged over the horizons."""
    ratio = y / f
    return (ratio - np.log(ratio) - 1.0).mean(axis=1)


def _losses(valid_result):
    result, inputs, trials, baselines, _ = valid_result
    y = inputs.truth["valid"]
    losses = {name: _qlike_rows(y, t.valid_forecasts) for name, t in trials.items()}
    losses.update({name: _qlike_rows(y, b.forecasts) for name, b in baselines.items()})
    return losses


def _hac_dm(d, h):
    """DM and HLN from statsmodels: OLS of d on a constant, HAC uniform kernel with h - 1 lags."""
    fit = sm.OLS(d, np.ones_like(d)).fit(cov_type="HAC", cov_kwds={"maxlags": h - 1, "kernel": "uniform",
                                                                   "use_correction": False})
    t_stat = float(fit.tvalues[0])
    n = d.size
    hln = t_stat * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return t_stat, hln, float(2 * stats.t(df=n - 1).sf(abs(hln)))


def test_row_losses_average_to_the_recorded_objective(valid_result):
    result, inputs, trials, _, _ = valid_result
    losses = _losses(valid_result)
    for f in result.finalists:
        # the per-row loss is the objective's: its mean is the objective recorded during the sweep
        assert f.mean_loss == pytest.approx(trials[f.model].objective, rel=1e-12)
        assert f.mean_loss == pytest.approx(losses[f.model].mean(), rel=1e-12)


def test_dm_agrees_with_statsmodels_hac_regression(valid_result):
    result, inputs, trials, baselines, _ = valid_result
    losses = _losses(valid_result)
    rows = [r for r in result.dm if r.horizon == "all"]
    assert len(rows) == 3 * len(baselines)
    checked = 0
    for r in rows:
        d = losses[r.model] - losses[r.baseline]
        assert r.dm_horizon == max(inputs.horizons) == 5
        if r.statistic is None:  # long-run variance <= 0 with equal weights: nothing to compare
            continue
        t_stat, hln, p = _hac_dm(d, r.dm_horizon)
        assert r.statistic == pytest.approx(t_stat, rel=1e-9)
        assert r.hln_statistic == pytest.approx(hln, rel=1e-9)
        assert r.hln_pvalue == pytest.approx(p, rel=1e-9, abs=1e-15)
        assert r.mean_diff == pytest.approx(d.mean(), rel=1e-12)
        checked += 1
    assert checked == len(rows)  # every pair of this study has a positive long-run variance


def test_dm_per_horizon_uses_that_horizon(valid_result):
    result, inputs, trials, baselines, _ = valid_result
    y = inputs.truth["valid"]
    for r in [r for r in result.dm if r.horizon != "all"][:8]:
        j = inputs.horizons.index(r.horizon)
        model_f = trials[r.model].valid_forecasts[:, j]
        base_f = baselines[r.baseline].forecasts[:, j]
        d = (y[:, j] / model_f - np.log(y[:, j] / model_f)) - (y[:, j] / base_f - np.log(y[:, j] / base_f))
        assert r.dm_horizon == r.horizon
        t_stat, _, p = _hac_dm(d, r.horizon)
        assert r.statistic == pytest.approx(t_stat, rel=1e-9)
        assert r.hln_pvalue == pytest.approx(p, rel=1e-9, abs=1e-15)


def test_mcs_agrees_with_arch_called_directly(valid_result):
    result, inputs, trials, baselines, _ = valid_result
    losses = _losses(valid_result)
    models = [f.model for f in result.finalists] + list(baselines)
    mcs = MCS(pd.DataFrame({m: losses[m] for m in models}), size=0.10, reps=REPS, seed=11)
    mcs.compute()
    assert list(result.mcs.models) == models
    assert sorted(result.mcs.included) == sorted(mcs.included)
    assert sorted(result.mcs.excluded) == sorted(mcs.excluded)
    expected = mcs.pvalues.iloc[:, 0]
    for name, p in result.mcs.pvalues.items():
        assert p == pytest.approx(float(expected[name]), abs=1e-12)


def test_spa_agrees_with_arch_over_every_complete_trial(valid_result):
    result, inputs, trials, _, _ = valid_result
    losses = _losses(valid_result)
    names = [f"trial {t.number}" for t in sorted(trials.values(), key=lambda t: (t.objective, t.number))]
    spa = SPA(losses["har"], pd.DataFrame({n: losses[n] for n in names}).to_numpy(), reps=REPS, seed=11)
    spa.compute()
    # every complete trial is a model, HAR the benchmark
    assert result.spa.n_models == len(trials) == result.n_trials
    for key in ("lower", "consistent", "upper"):
        assert result.spa.pvalues[key] == pytest.approx(float(spa.pvalues[key]), abs=1e-12)
    consistent = float(spa.pvalues["consistent"])
    expected = "beats har once" if consistent < 0.05 else "cannot say at the 5 % level"
    assert expected in result.spa.words
    assert f"the {len(trials)} configurations tried are accounted for" in result.spa.words


def test_compare_is_recorded(valid_result):
    result, _, _, _, stored = valid_result
    assert [(c.sequence, c.window) for c in stored] == [(1, "valid")]
    assert result.sequence == 1
    # what was returned is what was stored (JSON round trip)
    assert stored[0].results["dm"] == json.loads(json.dumps([r.to_dict() for r in result.dm]))
    # the whole stored summary: the report without its sequence and creation time, as before the types
    assert stored[0].results == json.loads(json.dumps(result.results_dict()))
    assert list(stored[0].results) == COMPARE_KEYS[:-2]


def test_comparison_report_to_dict_keeps_the_printed_json_shape(valid_result):
    result = valid_result[0]
    data = result.to_dict()
    assert list(data) == COMPARE_KEYS
    assert all(list(r) == DM_KEYS for r in data["dm"])  # every pair here has a DM statistic: no "problem" key
    assert list(data["mcs"]) == MCS_KEYS and list(data["spa"]) == SPA_KEYS
    assert list(data["finalists"][0]) == ["model", "trial", "objective_recorded", "mean_loss"]
    assert list(data["baselines"][0]) == ["model", "mean_loss"]
    assert (data["sequence"], data["created"]) == (1, valid_result[4][0].created)
    assert json.loads(json.dumps(data)) == data


def test_dm_row_without_a_variance_says_why():
    # identical losses: the differential is zero, with no positive long-run variance to test with
    loss = np.linspace(0.1, 1.0, 50)
    row = compare._dm_row("trial 3", "har", loss, loss.copy(), "all", 5, 0.05)
    assert (row.statistic, row.hln_pvalue, row.verdict) == (None, None, "untested")
    assert row.problem and row.n == 50
    # the reason sits before the verdict in the JSON, as it did before the types
    assert list(row.to_dict()) == DM_KEYS[:10] + ["problem", "verdict", "words"]


@pytest.mark.parametrize("mean_diff, p, verdict, words", [
    (-0.1, 0.01, "better", "at the 5 % level, trial 3 beats har"),
    (0.1, 0.01, "worse", "at the 5 % level, har beats trial 3"),
    (-0.1, 0.2, "same", "cannot tell trial 3 from har at the 5 % level"),
    (-0.1, None, "untested", "no test of trial 3 against har"),
])
def test_dm_words(mean_diff, p, verdict, words):
    got = compare.dm_words("trial 3", "har", mean_diff, p, 0.05)
    assert got[0] == verdict and got[1].startswith(words)


def test_compare_test_window_needs_a_holdout_first(writable_record):
    with Tracker.open(writable_record, create=False) as t:
        with pytest.raises(ReviewError, match="has not been used yet; run `volsweep holdout"):
            compare.compare_forecasts(t, window="test", reps=REPS)
        assert t.load_comparisons(STUDY) == []
        review.holdout_trial(t, 1)
        result = compare.compare_forecasts(t, window="test", top=2, reps=REPS)
        # test-window forecasts come from the stored weights of every complete trial
        assert set(result.networks.values()) == {"stored weights"}
        assert result.rows == len(inputs_from_record(t, t.find_study(STUDY))[1].dates("test"))
        assert [c.window for c in t.load_comparisons(STUDY, "test")] == ["test"]


def test_compare_rejects_a_bad_window(tracker):
    with pytest.raises(ReviewError, match="window must be one of valid, test"):
        compare.compare_forecasts(tracker, window="train")


def test_compare_without_har_skips_spa(writable):
    writable.db.execute("DELETE FROM vs_baselines WHERE name = 'har'")
    result = compare.compare_forecasts(writable, top=1, reps=50)
    # SPA's benchmark is HAR: without it the test is skipped and says why
    assert result.spa is None
    assert result.spa_skipped == "no 'har' baseline on the valid window (baselines: ewma, garch, random_walk)"
    assert writable.load_comparisons(STUDY)[0].results["spa"] is None


def test_cli_compare(writable_record):
    db = str(writable_record)
    runner = CliRunner()
    res = runner.invoke(app, ["compare", db, "--window", "test"])
    assert res.exit_code == 1 and "volsweep holdout" in res.stderr
    res = runner.invoke(app, ["compare", db, "--top", "2", "--reps", "100"])
    assert res.exit_code == 0, res.output
    assert "model confidence set" in res.output and "configurations tried" in res.output
    res = runner.invoke(app, ["compare", db, "--top", "1", "--reps", "100", "--json"])
    data = json.loads(res.stdout)
    assert data["sequence"] == 2 and len(data["finalists"]) == 1


# ----------------------------------------------------------------------------------------- the record


@pytest.fixture
def memory(review_record):
    """An in-memory record holding the shared study's study and dataset rows, nothing else."""
    with Tracker.open(review_record, create=False) as source:
        study = source.find_study(STUDY)
        dataset = source.load_dataset(study.dataset_sha256)
    t = Tracker.memory()
    t.save_study(study, dataset)
    return t


def test_record_comparison_numbers_and_never_overwrites(memory):
    t = memory
    first = t.record_comparison(ComparisonRecord(study=STUDY, created="2026-01-05T10:00:00+00:00",
                                                 window="valid", command="c1", results={"dm": [{"p": 0.5}]}))
    second = t.record_comparison(ComparisonRecord(study=STUDY, created="2026-01-06T10:00:00+00:00",
                                                  window="test", command="c2", results={"dm": []}))
    assert (first.sequence, second.sequence) == (1, 2)
    assert t.load_comparisons(STUDY) == [first, second]
    assert t.load_comparisons(STUDY, "test") == [second]
    with pytest.raises(RecordError, match=f"comparison #1 of study '{STUDY}' is already recorded"):
        t.record_comparison(ComparisonRecord(study=STUDY, created="x", window="valid", command="c3",
                                             results={}, sequence=1))
    with pytest.raises(StudyNotFound):
        t.record_comparison(ComparisonRecord(study="nope", created="x", window="valid", command="c", results={}))


def test_load_comparisons_reads_a_file_without_the_table_as_empty(memory):
    t = memory
    # files written before the table existed have no vs_comparisons; it is made on first write
    assert "vs_comparisons" not in t.db.table_names()
    assert t.load_comparisons(STUDY) == []
    with pytest.raises(ValueError, match="window must be one of valid, test"):
        t.load_comparisons(STUDY, "train")


def test_comparison_record_checks_its_window():
    with pytest.raises(ValueError, match="ComparisonRecord.window must be one of 'valid', 'test'"):
        ComparisonRecord(study="s", created="x", window="train", command="c", results={})


# ----------------------------------------------------------------------------------------- the board


@pytest.mark.slow
def test_board_shows_the_latest_comparison_per_window(writable_record, tmp_path):
    import html

    from sweep.board import collect_board, write_study_board

    db = writable_record
    with Tracker.open(db, create=False) as t:
        compare.compare_forecasts(t, top=1, reps=50)
        latest = compare.compare_forecasts(t, top=2, reps=50)
        review.holdout_trial(t, 1)
        on_test = compare.compare_forecasts(t, window="test", top=1, reps=50)
        shown = collect_board(t, STUDY).review
    # one entry per window, the newest of each; every comparison counted
    assert [(c.window, c.sequence) for c in shown.comparisons] == [("valid", 2), ("test", 3)]
    assert shown.n_comparisons == 3
    assert list(shown.comparisons[0].dm) == [d.to_dict() for d in latest.dm if d.horizon == "all"]
    page = html.unescape(write_study_board(db, study=STUDY, out=tmp_path / "board.html").read_text(encoding="utf-8"))
    assert "Forecast comparisons" in page
    assert latest.mcs.words in page and on_test.spa.words in page
    assert latest.dm[0].words in page
