"""The reading commands through typer's test runner: data, baselines, features, top, list, show.

Their JSON is the reports' ``to_dict()``; their tables are checked cell by cell against that JSON,
with the number formats the CLI promises (4 significant digits; 3 for gaps and annualised volatility).
The study they read is the invented market's, run once (``conftest.py``).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweep.cli import app
from trainers.scenario import write_market_csv

FIXTURES = Path(__file__).parents[2] / "fixtures" / "prices"
BAD_FILES = sorted(p for p in FIXTURES.glob("*.csv") if p.name != "good_small.csv")
ESTIMATOR_KEYS = {"close_to_close", "parkinson", "garman_klass", "rogers_satchell", "yang_zhang"}
TABLE_EDGES = ("┏", "┃", "┡", "│", "└")

runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def table_rows(text: str) -> list[list[str]]:
    """The body rows of the first table printed, cell by cell; a cell wrapped over lines is joined with a space."""
    rows: list[list[str]] = []
    for line in text.splitlines():
        if not line.startswith("│"):
            if rows and line.startswith("└"):
                break
            continue
        cells = [cell.strip() for cell in line.strip().strip("│").split("│")]
        if rows and not cells[0]:   # the continuation of a wrapped row
            rows[-1] = [f"{a} {b}".strip() for a, b in zip(rows[-1], cells)]
        else:
            rows.append(cells)
    return rows


def sig(value, digits=4) -> str:
    return "-" if value is None else f"{value:.{digits}g}"


# ---------------------------------------------------------------- data

def test_data_reports_estimators_of_a_good_file():
    result = invoke("data", FIXTURES / "good_small.csv", "--json", "--min-rows", "0")
    assert result.exit_code == 0, result.output
    report = json.loads(result.stdout)
    assert report["problems"] == []
    assert set(report["estimators"]) == ESTIMATOR_KEYS
    assert report["rows"] > 0 and report["first_date"] < report["last_date"]
    for stats in report["estimators"].values():
        assert set(stats) >= {"mean", "median"}


def test_data_on_demo_market_annualised_vol_is_sqrt_252_times_daily(tmp_path):
    paths = write_market_csv(tmp_path, seed=1, n_days=400)
    report = json.loads(invoke("data", paths["harbor_index"], "--json").stdout)
    gk = report["estimators"]["garman_klass"]
    # annualised volatility = sqrt(252 x mean daily variance) (common practice)
    assert gk["annualised_vol"] == pytest.approx((252 * gk["mean"]) ** 0.5)


@pytest.mark.parametrize("path", BAD_FILES, ids=lambda p: p.stem)
def test_data_names_each_problem_of_a_malformed_file(path):
    result = invoke("data", path)
    # a non-zero exit and a problem line with a fix, never a traceback
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    problems = [line for line in result.stdout.splitlines() if line.strip().startswith("problem:")]
    assert problems, result.output
    assert all("fix:" in line for line in problems)


def test_data_table_shows_each_estimator_as_in_the_json(tmp_path):
    path = write_market_csv(tmp_path, seed=1, n_days=400)["harbor_index"]
    report = json.loads(invoke("data", path, "--json").stdout)
    result = invoke("data", path)
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines()[0] == f"{path}: 400 rows, {report['first_date']} to {report['last_date']}"
    rows = table_rows(result.stdout)
    assert [r[0] for r in rows] == list(report["estimators"])
    for r, s in zip(rows, report["estimators"].values()):
        assert r[1:] == [sig(s["mean"]), sig(s["median"]), sig(s["annualised_vol"], 3), str(s["zero_days"])]


# ---------------------------------------------------------------- baselines and features

def test_baselines_json_lists_every_baseline_on_both_windows(study):
    path, _ = study
    result = invoke("baselines", path, "--json")
    assert result.exit_code == 0, result.output
    report = json.loads(result.stdout)
    pairs = {(b["name"], b["window"]) for b in report["baselines"]}
    names = {"random_walk", "ewma", "har", "har_rolling", "garch"}
    assert pairs == {(n, w) for n in names for w in ("valid", "test")}
    har = next(b for b in report["baselines"] if b["name"] == "har")
    assert har["params"]


def test_baselines_table_and_parameter_lines_match_the_json(study):
    path, _ = study
    report = json.loads(invoke("baselines", path, "--json").stdout)
    result = invoke("baselines", path)
    assert result.exit_code == 0, result.output
    assert "objective (qlike)" in result.stdout
    rows = table_rows(result.stdout)
    assert [r[:2] for r in rows] == [[b["name"], b["window"]] for b in report["baselines"]]
    for r, b in zip(rows, report["baselines"]):
        assert r[2:] == [sig(b["objective"])] + [sig(b["losses"].get(k)) for k in ("qlike", "mse_log", "mz_r2")]
    # below the table, one line of fitted parameters per validation-window baseline that has any
    lines = [line for line in result.stdout.splitlines() if line and not line.startswith(TABLE_EDGES)]
    assert lines == [f"{b['name']}: {json.dumps(b['params'])}" for b in report["baselines"]
                     if b["window"] == "valid" and b["params"]]


def test_features_writes_the_design_matrix_with_windows(study, tmp_path):
    import pandas as pd

    path, _ = study
    out = tmp_path / "features.csv"
    result = invoke("features", path, "--out", out)
    assert result.exit_code == 0, result.output
    frame = pd.read_csv(out, index_col="date", parse_dates=True)
    assert {"train", "valid", "test", "embargo"} == set(frame["window"])
    assert {"har_1", "har_5", "har_22", "target_h1", "target_h22"} <= set(frame.columns)
    assert frame.index.is_monotonic_increasing


# ---------------------------------------------------------------- top

def test_tables_printed_to_a_pipe_keep_their_values_whole(study):
    # CliRunner's output is not a terminal, like a log file or CI: rich would cut the table to 80 columns
    path, _ = study
    result = invoke("top", path.with_suffix(".sqlite"))
    assert result.exit_code == 0, result.output
    assert "best/epochs" in result.stdout and "complete" in result.stdout
    assert "\u2026" not in result.stdout  # no value ends in an ellipsis


def test_top_json_has_the_promised_fields(study):
    path, _ = study
    result = invoke("top", path.with_suffix(".sqlite"), "--json")
    assert result.exit_code == 0, result.output
    rows = json.loads(result.stdout)
    keys = {"trial", "state", "objective", "train_loss", "gap", "gap_ratio", "best_epoch", "epochs",
            "stop_reason", "params"}
    assert all(keys <= set(r) for r in rows)
    # baselines are included and marked
    assert {r["kind"] for r in rows} == {"trial", "baseline"}
    objectives = [r["objective"] for r in rows if r["objective"] is not None]
    assert objectives == sorted(objectives)


def test_top_filters_by_state_and_sorts_by_gap(study):
    path, _ = study
    rows = json.loads(invoke("top", path.with_suffix(".sqlite"), "--json", "--state", "complete",
                             "--sort", "gap").stdout)
    trials = [r for r in rows if r["kind"] == "trial"]
    assert trials and all(r["state"] == "complete" for r in trials)
    gaps = [r["gap"] for r in trials]
    assert gaps == sorted(gaps)


def test_top_table_shows_the_ranking_as_in_the_json(study):
    path, _ = study
    db = path.with_suffix(".sqlite")
    rows = json.loads(invoke("top", db, "--json").stdout)
    printed = table_rows(invoke("top", db).stdout)
    assert [r[:4] for r in printed] == [[str(r["rank"]), str(r["trial"]), r["state"], sig(r["objective"])]
                                        for r in rows]
    # a baseline has no epochs: "-"; a trial shows best epoch / epochs
    assert [r[7] for r in printed] == ["-" if r["epochs"] is None else f"{r['best_epoch']}/{r['epochs']}"
                                       for r in rows]


# ---------------------------------------------------------------- list and show

def test_list_and_show(study):
    path, _ = study
    db = path.with_suffix(".sqlite")
    studies = json.loads(invoke("list", db, "--json").stdout)
    assert [s["name"] for s in studies] == ["cli-study"]
    shown = json.loads(invoke("show", db, "0", "--json").stdout)
    assert shown["trial"]["trial"] == 0
    assert shown["dataset"]["rows"] == 900
    assert shown["study"]["packages"]["numpy"]
    assert len(shown["trial"]["curve"]) == shown["trial"]["epochs"]


def test_list_table_shows_each_study_as_in_the_json(study):
    path, _ = study
    db = path.with_suffix(".sqlite")
    (summary,) = json.loads(invoke("list", db, "--json").stdout)
    result = invoke("list", db)
    assert result.exit_code == 0, result.output
    (row,) = table_rows(result.stdout)
    assert row == [summary["name"], summary["created"], json.dumps(summary["trials"]),
                   sig(summary["best_objective"]), summary["dataset"][:40]]


def test_show_text_names_the_trial_its_data_and_provenance(study):
    path, _ = study
    db = path.with_suffix(".sqlite")
    shown = json.loads(invoke("show", db, "0", "--json").stdout)
    t, s, d = shown["trial"], shown["study"], shown["dataset"]
    result = invoke("show", db, "0")
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines() == [
        f"trial 0 of study cli-study: {t['state']}, stop reason {t['stop_reason']}",
        f"objective (qlike) {sig(t['objective'])}; train loss {sig(t['train_loss'])}, valid loss "
        f"{sig(t['valid_loss'])}, gap {sig(t['gap'], 3)} (ratio {sig(t['gap_ratio'], 3)})",
        f"best epoch {t['best_epoch']} of {t['epochs']}; seed {t['seed']}; {sig(t['seconds'], 3)} s",
        f"settings: {json.dumps(t['params'])}",
        f"data: {d['source']} ({d['rows']} rows, {d['first_date']} to {d['last_date']}, sha256 {d['sha256'][:12]})",
        f"made with volsweep {s['code_version']} ({s['git_commit'] or 'no git commit'}), "
        f"Python {s['python']} on {s['platform']}",
    ]


def test_show_unknown_trial_and_missing_record_are_one_line_errors(study, tmp_path):
    path, _ = study
    result = invoke("show", path.with_suffix(".sqlite"), "99")
    assert result.exit_code == 1 and result.stderr.startswith("error:")
    result = invoke("top", tmp_path / "nothing.sqlite")
    assert result.exit_code == 1 and "Traceback" not in result.output
