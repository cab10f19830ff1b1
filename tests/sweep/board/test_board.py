"""Tests for sweep/board.py: the data step against the records written, then the written HTML file.

Expected values are worked out by hand from the records in ``_board_records.py`` (the ranking,
markers, counts, the epochs pruning saved); setting importance is checked against optuna's own
``get_param_importances`` on a study optuna ran itself (the reference library); the HTML is read
back with Python's ``html.parser`` (the HTML standard's tokenizer rules, not ours).
"""

from __future__ import annotations

import math
import re
import time
from html.parser import HTMLParser

import optuna
import pytest
from typer.testing import CliRunner

from board_records import MAX_EPOCHS, SHA, SPEC_TEXT, curve, make_dataset, make_study, write_many, write_record, \
    write_review
from sweep.board import BoardError, build_figures, collect_board, render_board, write_board, write_study_board
from sweep.board import saved_share
from sweep.cli import app
from sweep.record import TrialRecord
from sweep.record import StudyNotFound, Tracker

NOW = "2026-03-01T12:00:00+00:00"


@pytest.fixture
def tracker():
    t = Tracker.memory()
    write_record(t)
    yield t
    t.close()


@pytest.fixture
def data(tracker):
    return collect_board(tracker, "larkspur", command="volsweep board larkspur.sqlite", now=NOW)


class Page(HTMLParser):
    """Every start tag with its attributes, the text of each element id, and the <style> text."""

    def __init__(self, html: str):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text_by_id: dict[str, str] = {}
        self.styles: list[str] = []
        self._open: list[tuple[str, str | None]] = []
        self.feed(html)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        if tag not in ("meta", "link", "input", "br", "wbr", "img"):
            self._open.append((tag, attrs.get("id")))
            if attrs.get("id"):
                self.text_by_id.setdefault(attrs["id"], "")

    def handle_endtag(self, tag):
        while self._open:
            name, _ = self._open.pop()
            if name == tag:
                break

    def handle_data(self, text):
        for name, element_id in self._open:
            if element_id:
                self.text_by_id[element_id] += text
        if self._open and self._open[-1][0] == "style":
            self.styles.append(text)

    def count(self, tag: str, **attrs) -> int:
        return sum(1 for t, a in self.tags if t == tag and all(a.get(k) == v for k, v in attrs.items()))


# ---------------------------------------------------------------------------------------- data step


def test_collect_board_header_matches_the_records(data):
    h = data.header
    assert h["study"] == "larkspur"
    assert h["dataset"]["sha256_short"] == SHA[:12] and h["dataset"]["n_rows"] == 2520
    assert (h["dataset"]["first_date"], h["dataset"]["last_date"]) == ("2014-01-02", "2023-12-29")
    assert h["dataset"]["n_dropped"] == 1
    # target from the spec text kept in the record; scale "log" is the spec default
    assert h["target"] == {"estimator": "parkinson", "horizons": [1, 5], "scale": "log", "task": "regression"}
    assert (h["objective"], h["sampler"], h["pruner"]) == ("qlike", "tpe", "median")
    assert h["counts"] == {"complete": 3, "pruned": 2, "failed": 1, "running": 0}
    # 4 + 3 + 1 + 2.5 + 0.5 + 1.5 seconds, worked by hand
    assert h["compute_seconds"] == pytest.approx(12.5)
    # trial 0 started 10:00:00, trial 5 finished 10:05:30
    assert h["wall_seconds"] == pytest.approx(330.0)
    assert (h["code_version"], h["git_commit"]) == ("0.1.0", "0123456789abcdef")
    assert h["best_trial"] == {"trial": 1, "objective": 0.20}
    assert h["best_baseline"] == {"name": "har", "objective": 0.30}
    assert h["n_beating"] == 2
    assert h["max_epochs"] == MAX_EPOCHS
    # settings the spec leaves out are fixed at their defaults (sweep/space.py SETTINGS)
    assert h["fixed"] == {"layers": 1, "patience": 20, "weight_decay": 0.0, "activation": "tanh"}
    assert h["spec_problem"] is None


def test_collect_board_ranks_trials_and_baselines_by_objective(data):
    # objectives by hand: 1 0.20, 3 0.25, har 0.30, 5 0.31, 0 0.35, ewma 0.40, 2 0.45, 4 none (last);
    # the garch baseline is on the test window and is not ranked
    assert [r["trial"] for r in data.rows] == [1, 3, "har", 5, 0, "ewma", 2, 4]
    assert [r["rank"] for r in data.rows] == list(range(1, 9))
    assert [r["marker"] for r in data.rows] == ["beats", "beats", "baseline", "behind", "behind", "baseline",
                                                "behind", "no objective"]
    assert [r["behind"] for r in data.rows] == [False, False, False, True, True, False, True, True]
    # the searched settings, in the order of sweep/space.py SETTINGS; fixed ones are not columns
    assert data.settings == ["batch_size", "hidden_units", "dropout", "learning_rate"]
    assert data.setting_kinds == dict.fromkeys(data.settings, "num")
    row = data.rows[0]
    assert row["settings"] == [64, 16, 0.30, pytest.approx(2e-3)]
    assert (row["gap"], row["best_epoch"], row["epochs"], row["stop_reason"]) == (0.010, 10, 15, "patience")
    assert data.rows[2]["settings"] == [None] * 4


def test_collect_board_maximize_ranks_highest_first():
    t = Tracker.memory()
    write_record(t, direction="maximize")
    data = collect_board(t, "larkspur")
    assert [r["trial"] for r in data.rows] == [2, "ewma", 0, 5, "har", 3, 1, 4]
    # best baseline is ewma (0.40): only trial 2 (0.45) beats it
    assert [r["marker"] for r in data.rows][:3] == ["beats", "baseline", "behind"]
    assert data.header["best_trial"]["trial"] == 0  # best complete trial (trial 2 was pruned)


def test_collect_board_curves_only_for_the_best_complete_trials(tracker, monkeypatch):
    loaded = []
    original = tracker.load_trial
    monkeypatch.setattr(tracker, "load_trial", lambda study, n: loaded.append(n) or original(study, n))
    data = collect_board(tracker, "larkspur", n_curves=2)
    # complete trials by objective: 1 (0.20), 3 (0.25), 0 (0.35); only the first two are loaded
    assert loaded == [1, 3]
    assert [(c["trial"], c["rank"]) for c in data.curves] == [(1, 1), (3, 2)]
    want = curve(15, 0.01)
    assert data.curves[0]["epoch"] == list(range(1, 16))
    assert data.curves[0]["train_loss"] == [e.train_loss for e in want]
    assert data.curves[0]["valid_loss"] == [e.valid_loss for e in want]
    assert data.curves[0]["best_epoch"] == 10


def test_collect_board_progress_keeps_the_best_complete_objective_so_far(data):
    assert [(p["trial"], p["running_best"]) for p in data.progress] == [
        (0, 0.35), (1, 0.20), (2, 0.20), (3, 0.20), (4, 0.20), (5, 0.20)]


def test_collect_board_scatter_holds_gap_and_settings_of_complete_trials(data):
    points = data.scatter["hidden_units"]["points"]
    assert [(p["trial"], p["x"], p["gap"]) for p in points] == [(0, 8, 0.020), (1, 16, 0.010), (3, 32, 0.015)]
    assert [p["x"] for p in data.scatter["dropout"]["points"]] == [0.10, 0.30, 0.45]
    assert data.scatter["dropout"]["reason"] is None


def test_saved_share_worked_number(data):
    # max_epochs 20; pruned trials ran 4 and 6 epochs: saved = 16 + 14 = 30;
    # run = 20 + 15 + 4 + 12 + 0 + 6 = 57; share = 30 / (30 + 57)
    assert (data.epochs["n_saved"], data.epochs["n_run"]) == (30, 57)
    assert data.epochs["saved_share"] == pytest.approx(30 / 87)
    assert saved_share(10, [{"state": "complete", "epochs": 0}]) == (0, 0, None)
    # a pruned trial never "saves" a negative number of epochs
    assert saved_share(5, [{"state": "pruned", "epochs": 7}]) == (0, 7, 0.0)


def test_collect_importance_matches_optuna_on_the_same_trials():
    # Reference: optuna's get_param_importances (PedAnova by default) on a study optuna ran itself
    # with the same distributions as the spec's space.
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    reference = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))

    def objective(trial):
        hidden = trial.suggest_int("hidden_units", 4, 32, log=True)
        dropout = trial.suggest_float("dropout", 0.0, 0.5)
        trial.suggest_categorical("batch_size", [32, 64])
        trial.suggest_float("learning_rate", 1e-4, 1e-2, log=True)
        return (math.log(hidden) - math.log(12)) ** 2 + 0.001 * dropout

    reference.optimize(objective, n_trials=40)
    want = optuna.importance.get_param_importances(reference)
    tracker = Tracker.memory()
    tracker.save_study(make_study(), make_dataset())
    for t in reference.trials:
        tracker.record_trial(TrialRecord(
            study="larkspur", number=t.number, state="complete", objective=t.value, n_epochs=5, best_epoch=5,
            params={**t.params, "layers": 1, "patience": 20, "weight_decay": 0.0, "activation": "tanh"}))
    got = collect_board(tracker, "larkspur").importance
    assert got["reason"] is None and got["n_trials"] == 40
    assert got["values"] == pytest.approx(want, rel=1e-9)
    # the objective depends (almost) only on hidden_units
    assert max(got["values"], key=got["values"].get) == "hidden_units"


def test_collect_importance_says_why_it_is_absent():
    one = Tracker.memory()
    write_record(one, trials=[(0, "complete", 0.3, 5, 5, 8, 0.1, 0.01, 1.0)])
    assert "at least 2 complete trials" in collect_board(one, "larkspur").importance["reason"]
    same = Tracker.memory()
    write_record(same, trials=[(0, "complete", 0.3, 5, 5, 8, 0.1, 0.01, 1.0), (1, "complete", 0.4, 5, 5, 8, 0.1, 0.01, 1.0)])
    # learning_rate differs per trial in the fixture: 1e-3 * (1 + number)
    assert collect_board(same, "larkspur").importance["values"].keys() == {"learning_rate"}


def test_collect_board_without_a_readable_spec_infers_from_the_trials():
    t = Tracker.memory()
    write_record(t, spec_text="this is [not toml")
    data = collect_board(t, "larkspur")
    assert "could not be read" in data.header["spec_problem"]
    # columns are the params that vary across trials; max_epochs falls back to the longest trial
    # (batch_size is 64 in every trial of the fixture, so it is not a column here)
    assert data.settings == ["hidden_units", "dropout", "learning_rate"]
    assert data.epochs["max_epochs"] == 20
    assert data.importance["reason"] is None and set(data.importance["values"]) <= set(data.settings)


def test_collect_board_review_holds_notes_confirmations_and_every_holdout(tracker):
    write_review(tracker)
    data = collect_board(tracker, "larkspur")
    review = data.review
    assert data.has_review
    assert [n["created"] for n in review["notes"]] == ["2026-02-01T09:00:00+00:00"]
    assert review["confirmations"][0]["objectives"] == [0.21, 0.22]
    assert [(h["sequence"], h["repeat"], h["n_uses"]) for h in review["holdouts"]] == [(1, False, 2), (2, True, 2)]
    # the study's objective (qlike) first, then the other metrics by name
    assert review["holdouts"][0]["metrics"] == ["qlike", "mse_log"]


def test_collect_board_unknown_study_names_the_studies(tracker):
    with pytest.raises(StudyNotFound, match="larkspur"):
        collect_board(tracker, "nope")


# ---------------------------------------------------------------------------------------- figures and HTML


def test_build_figures_one_per_picture_with_captions(data):
    figures = build_figures(data)
    assert [f[0] for f in figures] == ["fig-progress", "fig-curves", "fig-gap-hidden-units", "fig-gap-dropout",
                                       "fig-importance", "fig-epochs"]
    assert all(fig is not None and caption for _, caption, fig in figures)
    progress = figures[0][2]
    # the best baseline is drawn as a horizontal line at its objective
    assert [s["y0"] for s in progress.layout.shapes] == [0.30]
    # 30 / 87 = 34% (test_saved_share_worked_number)
    assert "pruning saved 34% of epochs = the 30 epochs the 2 pruned trials" in figures[5][1]
    assert "57 epochs actually run" in figures[5][1]


def test_build_figures_absent_pictures_keep_a_caption_saying_why():
    t = Tracker.memory()
    write_record(t, trials=[])
    figures = build_figures(collect_board(t, "larkspur"))
    assert all(fig is None for _, _, fig in figures)
    captions = dict((i, c) for i, c, _ in figures)
    assert "no trial has an objective" in captions["fig-progress"]
    assert "at least 2 complete trials" in captions["fig-importance"]


def test_write_board_is_one_offline_file(data, tmp_path):
    path = write_board(data, build_figures(data), tmp_path / "board.html")
    html = path.read_text(encoding="utf-8")
    page = Page(html)
    # nothing to load: no src/href to the network (plotly's bundle holds URL strings in its code,
    # so the check reads attributes and CSS, not the whole text)
    for tag, attrs in page.tags:
        for key in ("src", "href"):
            value = (attrs.get(key) or "").strip().lower()
            assert not value.startswith(("http://", "https://", "//")), (tag, attrs)
    assert not any(attrs.get("src") for tag, attrs in page.tags if tag == "script")
    css = "".join(page.styles)
    assert css and "@import" not in css and "url(" not in css
    assert html.count("plotly.js v") == 1  # the bundle's banner: plotly.js inlined once
    for fig_id in ("fig-progress", "fig-curves", "fig-gap-hidden-units", "fig-gap-dropout", "fig-importance",
                   "fig-epochs"):
        assert page.count("div", id=fig_id) == 1
    assert page.count("tr", **{"data-state": "baseline"}) == 2
    assert sum(1 for t, a in page.tags if t == "tr" and "data-state" in a) == 8
    assert sum(1 for t, a in page.tags if t == "tr" and "behind" in (a.get("class") or "")) == 4
    assert "SR 11-7, 2011" in page.text_by_id["caution"] and "not advice" in page.text_by_id["caution"]
    assert "volsweep board larkspur.sqlite" in html and "2026-03-01 12:00:00 UTC" in html  # NOW, shown in UTC
    assert page.count("section", id="chosen") == 0  # no review records: no chosen-trial section


def test_render_board_shows_the_chosen_trial_section_with_repeat_flags(tracker):
    write_review(tracker)
    data = collect_board(tracker, "larkspur")
    html = render_board(data, build_figures(data))
    page = Page(html)
    assert page.count("section", id="chosen") == 1
    chosen = page.text_by_id["chosen"]
    assert "Test window used 2 times" in chosen and "repeat: test window used 2 times" in chosen
    # each record's date, shown in UTC (the machine-readable ISO text sits in <time datetime=...>)
    for date in ("2026-02-01 09:00:00 UTC", "2026-02-01 10:00:00 UTC", "2026-02-02 10:00:00 UTC",
                 "2026-02-03 10:00:00 UTC"):
        assert date in chosen
    assert page.count("time", datetime="2026-02-03T10:00:00+00:00") == 1
    assert "Trial 1 chosen: beats HAR." in chosen
    assert "[3, 101], [3, 102]" in chosen  # seeds of the confirmation, one [study seed, n] pair each


def test_render_board_escapes_every_user_string():
    hostile = "<script>alert(1)</script>"
    t = Tracker.memory()
    write_record(t, hostile, activation="<img src=x onerror=alert(2)>",
                 baselines=[("<b>har</b>", "valid", 0.30)])
    write_review(t, hostile, note_text="</textarea><script>alert(3)</script>")
    data = collect_board(t, hostile)
    html = render_board(data, build_figures(data))
    page = Page(html)
    assert page.text_by_id["study-name"] == hostile  # shown as text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<script>alert" not in html and "<img src=x" not in html and "<b>har</b>" not in html
    # the same page with harmless names has exactly as many elements of each kind
    plain = Tracker.memory()
    write_record(plain, "larkspur", activation="tanh", baselines=[("har", "valid", 0.30)])
    write_review(plain, "larkspur")
    plain_data = collect_board(plain, "larkspur")
    plain_page = Page(render_board(plain_data, build_figures(plain_data)))
    for tag in ("script", "img", "b", "style", "tr", "td"):
        assert page.count(tag) == plain_page.count(tag), tag
    assert not any(k.startswith("on") for _, attrs in page.tags for k in attrs)


def test_write_board_refuses_a_missing_folder(data, tmp_path):
    with pytest.raises(BoardError, match="does not exist; create it first"):
        write_board(data, [], tmp_path / "nowhere" / "board.html")
    with pytest.raises(BoardError, match="is a folder"):
        write_board(data, [], tmp_path)


def test_write_study_board_and_the_cli_command(tmp_path):
    record = tmp_path / "larkspur.sqlite"
    with Tracker.open(record) as t:
        write_record(t)
    path = write_study_board(record)
    assert path == tmp_path / "larkspur-board.html" and path.stat().st_size > 1_000_000
    assert f"volsweep board {record} --study larkspur -o {path}" in path.read_text(encoding="utf-8")
    out = tmp_path / "b.html"
    result = CliRunner().invoke(app, ["board", str(record), "--study", "larkspur", "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert str(out) in result.stdout and out.is_file()
    missing = CliRunner().invoke(app, ["board", str(record), "--study", "nope"])
    assert missing.exit_code == 1 and "error:" in missing.output and "larkspur" in missing.output


@pytest.mark.slow
def test_board_of_2000_trials_is_small_and_quick(tmp_path):
    record = tmp_path / "big.sqlite"
    with Tracker.open(record) as t:
        write_many(t, "larkspur", 2000, 50)
    start = time.perf_counter()
    path = write_study_board(record, out=tmp_path / "big.html")
    seconds = time.perf_counter() - start
    size = path.stat().st_size
    print(f"\nboard of 2000 trials (50 epochs each, pruned ones 5-49): {seconds:.2f} s, {size / 1e6:.2f} MB")
    assert size < 10_000_000
    assert seconds < 60  # a guard against a hang, not a speed target
    html = path.read_text(encoding="utf-8")
    assert len(re.findall(r'<tr data-state="(?:complete|pruned|failed)"', html)) == 2000
    with Tracker.open(record, create=False) as t:
        data = collect_board(t)
    # curves of the 8 best complete trials only
    assert len(data.curves) == 8
    # max_epochs 50 from the spec; every pruned trial stopped before it
    assert data.epochs["max_epochs"] == 50 and data.epochs["n_saved"] > 0
    epochs_figure = dict((i, f) for i, _, f in build_figures(data))["fig-epochs"]
    assert {trace.type for trace in epochs_figure.data} == {"scatter"}  # points, not 2000 bars
