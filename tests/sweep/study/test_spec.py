"""Study files -> StudySpec: the demo file parses, and every kind of mistake gets its message."""

from __future__ import annotations

import dataclasses
import json
import re
import tomllib
from pathlib import Path

import pytest

from sweep.errors import VolsweepError
from sweep.study import Choice, Fixed, FloatRange, IntRange
from trainers.baselines import BASELINES
from sweep.study import (
    HAR_MIN_ROWS,
    SpecError,
    StudySpec,
    diff_specs,
    load_spec,
    parse_spec,
)

DEMO = Path(__file__).resolve().parents[3] / "studies" / "demo.toml"
MINIMAL = '[study]\nname = "t"\n[data]\nfile = "prices.csv"\n'


def make(text: str = "") -> str:
    """A study file: `text` ("[section]" headers and keys), with study.name and data.file added if absent."""
    sections: dict[str, list[str]] = {"study": [], "data": []}
    current = None
    for line in text.splitlines():
        found = re.fullmatch(r"\[([a-z_.]+)\]", line.strip())
        if found:
            current = sections.setdefault(found.group(1), [])
        elif line.strip():
            current.append(line)
    if not any(line.startswith("name") for line in sections["study"]):
        sections["study"].insert(0, 'name = "t"')
    if not any(line.startswith("file") for line in sections["data"]):
        sections["data"].insert(0, 'file = "prices.csv"')
    return "".join(f"[{name}]\n" + "".join(f"{line}\n" for line in lines) for name, lines in sections.items())


def parse(text: str = "", base_dir: Path = Path("/base")) -> StudySpec:
    return parse_spec(make(text), base_dir=base_dir)


def problems_of(text: str) -> tuple[str, ...]:
    with pytest.raises(SpecError) as info:
        parse_spec(text, base_dir=Path("/base"))
    return info.value.problems


# ---- the demo study file ------------------------------------------------------------------------


def test_load_spec_demo_file_parses_with_its_values():
    spec = load_spec(DEMO)
    raw = tomllib.loads(DEMO.read_text(encoding="utf-8"))  # the stdlib's own reading of the same file
    # every scalar and list the file sets comes through unchanged (lists become tuples)
    for section in ("study", "target", "features", "search", "training", "baselines"):
        for key, value in raw[section].items():
            got = getattr(getattr(spec, section), key)
            assert (list(got) if isinstance(got, tuple) else got) == value, f"{section}.{key}"
    assert spec.study.trials == 120 and spec.study.workers == 2 and spec.training.max_epochs == 100
    # the data path starts at the study file's folder
    assert spec.data.file == DEMO.parent / "data" / "harbor_index.csv"
    assert spec.data.file_as_written == "data/harbor_index.csv"
    assert spec.path == DEMO
    assert spec.text == DEMO.read_text(encoding="utf-8")
    assert spec.space["batch_size"] == Choice((32, 64, 128))
    assert spec.space["learning_rate"] == FloatRange(1e-4, 1e-2, log=True)
    assert spec.space["layers"] == IntRange(1, 2)
    assert spec.space["activation"] == Fixed("relu")


def test_demo_file_explains_every_key_it_sets():
    # each key is preceded by a comment line or carries one on its own line
    lines = DEMO.read_text(encoding="utf-8").splitlines()
    for i, line in enumerate(lines):
        if "=" in line and not line.lstrip().startswith("#"):
            assert "#" in line or lines[i - 1].lstrip().startswith("#"), line


def test_har_window_floor_matches_the_baselines_default():
    # forecast_baselines refuses har_window below its har_min_rows; the spec checks the same floor first
    import inspect

    from trainers.baselines import forecast_baselines

    assert HAR_MIN_ROWS == inspect.signature(forecast_baselines).parameters["har_min_rows"].default


# ---- defaults -----------------------------------------------------------------------------------


def test_parse_spec_minimal_file_takes_the_defaults():
    spec = parse()
    assert (spec.study.seed, spec.study.trials, spec.study.workers, spec.study.objective) == (0, 20, 1, "qlike")
    assert spec.target.horizons == (1, 5, 22) and spec.target.estimator == "garman_klass"
    # the embargo defaults to the longest horizon
    assert spec.split.embargo == 22 and (spec.split.valid, spec.split.test) == (0.2, 0.2)
    assert not spec.split.by_dates
    assert spec.space["hidden_units"] == Fixed(32) and spec.space["dropout"] == Fixed(0.0)
    assert spec.baselines.include == BASELINES and spec.data.bad_rows == "error"


@pytest.mark.parametrize(
    "extra, embargo, objective",
    [
        ("[target]\nhorizons = [1, 10]\n", 10, "qlike"),
        ('[target]\nhorizons = [5]\ntask = "classification"\n', 5, "deviance"),
    ],
)
def test_parse_spec_defaults_follow_horizons_and_task(extra, embargo, objective):
    spec = parse(extra)
    assert spec.split.embargo == embargo
    assert spec.study.objective == objective


# ---- mistakes -----------------------------------------------------------------------------------


def test_unknown_key_names_the_path_and_the_nearest_key():
    with pytest.raises(SpecError, match=r"unknown key space\.hiden_units; did you mean space\.hidden_units\?"):
        parse("[space]\nhiden_units = 8\n")


def test_unknown_section_suggests_the_nearest_section():
    with pytest.raises(SpecError, match=r"unknown section \[trainig\]; did you mean \[training\]\?"):
        parse("[trainig]\nmax_epochs = 5\n")


def test_key_at_the_top_of_the_file_points_at_its_section():
    with pytest.raises(SpecError, match=r"unknown key dropout at the top of the file; did you mean space\.dropout"):
        parse_spec("dropout = 0.1\n" + MINIMAL, base_dir=Path("."))


@pytest.mark.parametrize(
    "extra, message",
    [
        ('[study]\nseed = "7"\n', r'study\.seed: must be a whole number >= 0, got "7"'),
        ("[study]\ntrials = true\n", r"study\.trials: must be a whole number >= 1, got true"),
        ("[space]\nbatch_size = 32.5\n", r"space\.batch_size: must be a whole number >= 1, got 32\.5"),
        ('[space]\ndropout = "0.1"\n', r'space\.dropout: must be a number >= 0\.0 and < 1\.0, got "0\.1"'),
        ("[features]\nreturns = 1\n", r"features\.returns: must be true or false, got 1"),
        ('[target]\nhorizons = "1, 5"\n', r"target\.horizons: must be a non-empty list of whole numbers"),
        ('[data]\ncolumns = "Day"\n', r"data\.columns: must be a table"),
        ('[target]\nestimator = "garman_klas"\n', r'target\.estimator: .*got "garman_klas"; did you mean "garman_klass"\?'),
        ('[space]\nactivation = "tahn"\n', r'space\.activation: .*got "tahn"; did you mean "tanh"\?'),
        ('[baselines]\ninclude = ["garh"]\n', r'baselines\.include: unknown name "garh"; did you mean "garch"\?'),
    ],
)
def test_wrong_type_or_name_names_key_and_value(extra, message):
    with pytest.raises(SpecError, match=message):
        parse(extra)


@pytest.mark.parametrize(
    "extra, message",
    [
        ("[space]\ndropout = 1.0\n", r"space\.dropout: must be a number >= 0\.0 and < 1\.0, got 1\.0"),
        ("[space]\nlearning_rate = 0.0\n", r"space\.learning_rate: must be a number > 0\.0, got 0\.0"),
        ("[space]\nlayers = -1\n", r"space\.layers: must be a whole number >= 0, got -1"),
        ("[space]\nweight_decay = [0.0, -1e-4]\n", r"space\.weight_decay: must be a number >= 0\.0, got -0\.0001"),
        ("[space]\nhidden_units = { low = 0, high = 8 }\n", r"space\.hidden_units\.low: must be a whole number >= 1, got 0"),
        ("[target]\nclasses = 1\n", r"target\.classes: must be a whole number >= 2, got 1"),
        ("[target]\nhorizons = [5, 1]\n", r"target\.horizons: .*ascending.*got \[5, 1\]"),
        ("[target]\nhorizons = [0, 1]\n", r"target\.horizons: .*>= 1"),
        ("[baselines]\newma_lambda = 1.0\n", r"baselines\.ewma_lambda: must be a number > 0\.0 and < 1\.0"),
        ("[split]\nvalid = 0.6\ntest = 0.4\n", r"split: valid \+ test must leave rows to train on"),
        ("[study]\nworkers = 0\n", r"study\.workers: must be a whole number >= 1, got 0"),
        ("[search]\nmin_epochs = 500\n", r"search\.min_epochs: must be <= training\.max_epochs \(100\), got 500"),
        ("[training]\nmomentum = 1.0\n", r"training\.momentum: must be a number >= 0\.0 and < 1\.0"),
    ],
)
def test_out_of_range_names_key_bound_and_value(extra, message):
    with pytest.raises(SpecError, match=message):
        parse(extra)


@pytest.mark.parametrize(
    "value, expected",
    [
        ("64", Fixed(64)),
        ("[32, 64]", Choice((32, 64))),
        ("{ low = 8, high = 64 }", IntRange(8, 64)),
        ("{ low = 8, high = 64, log = true }", IntRange(8, 64, log=True)),
        ("{ low = 8, high = 64, step = 8 }", IntRange(8, 64, step=8)),
    ],
)
def test_int_setting_forms(value, expected):
    assert parse(f"[space]\nhidden_units = {value}\n").space["hidden_units"] == expected


@pytest.mark.parametrize(
    "value, expected",
    [
        ("0", Fixed(0.0)),  # a whole number is accepted for a real setting
        ("[0.0, 0.1]", Choice((0.0, 0.1))),
        ("{ low = 0.0, high = 0.3 }", FloatRange(0.0, 0.3)),
        ("{ low = 0.0, high = 0.3, step = 0.1 }", FloatRange(0.0, 0.3, step=0.1)),
    ],
)
def test_float_setting_forms(value, expected):
    setting = parse(f"[space]\ndropout = {value}\n").space["dropout"]
    assert setting == expected
    assert all(isinstance(v, float) for v in getattr(setting, "values", ()))


@pytest.mark.parametrize(
    "value, message",
    [
        ("{ low = 0.0, high = 0.1, log = true }", r"space\.learning_rate: a log range needs low > 0|space\.learning_rate\.low: must be a number > 0"),
        ("{ low = 0.01, high = 0.001 }", r"space\.learning_rate: low must be below high, got low=0\.01, high=0\.001"),
        ("{ low = 0.001 }", r"space\.learning_rate: a range needs both low and high"),
        ("{ low = 0.001, hgih = 0.01 }", r"unknown key space\.learning_rate\.hgih; did you mean space\.learning_rate\.high\?"),
        ("{ low = 0.001, high = 0.01, log = true, step = 0.001 }", r"a log range cannot have a step"),
        # optuna's suggest_float refuses any step with log = true, even 1.0 (checked with optuna 5.0.0)
        ("{ low = 0.5, high = 3.5, log = true, step = 1.0 }", r"a log range cannot have a step, got step=1\.0"),
        ("[]", r"space\.learning_rate: the list is empty"),
        ("[0.01, 0.01]", r"space\.learning_rate: the list repeats a value"),
    ],
)
def test_range_and_list_mistakes(value, message):
    with pytest.raises(SpecError, match=message):
        parse(f"[space]\nlearning_rate = {value}\n")


def test_weight_decay_log_range_from_zero_is_refused():
    with pytest.raises(SpecError, match=r"space\.weight_decay: a log range needs low > 0, got low=0\.0"):
        parse("[space]\nweight_decay = { low = 0.0, high = 0.01, log = true }\n")


def test_int_range_step_must_divide_the_span():
    with pytest.raises(SpecError, match=r"space\.batch_size: high - low must be a multiple of step"):
        parse("[space]\nbatch_size = { low = 16, high = 100, step = 32 }\n")


def test_text_setting_cannot_be_a_range():
    with pytest.raises(SpecError, match=r"space\.activation: a text setting cannot be a range"):
        parse('[space]\nactivation = { low = "relu", high = "tanh" }\n')


def test_grid_sampler_refuses_a_range_and_names_it():
    with pytest.raises(SpecError, match=r'space\.dropout: sampler "grid" needs a list of values, got the range'):
        parse('[search]\nsampler = "grid"\n[space]\ndropout = { low = 0.0, high = 0.3 }\nlayers = [1, 2]\n')
    # lists and fixed values are fine for a grid
    spec = parse('[search]\nsampler = "grid"\n[space]\ndropout = [0.0, 0.3]\nlayers = [1, 2]\n')
    assert spec.search.sampler == "grid"


@pytest.mark.parametrize(
    "extra, message",
    [
        ('[study]\nobjective = "deviance"\n', r'study\.objective: "deviance" does not fit target\.task = "regression"'),
        ('[study]\nobjective = "qlike"\n[target]\ntask = "classification"\n',
         r'study\.objective: "qlike" does not fit target\.task = "classification"; use one of "deviance"'),
    ],
)
def test_objective_must_fit_the_task(extra, message):
    with pytest.raises(SpecError, match=message):
        parse(extra)


def test_embargo_shorter_than_the_longest_horizon_is_refused():
    # An embargo of at least the horizon keeps overlapping targets out of the next window
    # (common practice; "purging and embargo" in Lopez de Prado, Advances in Financial ML, 2018, from memory).
    with pytest.raises(SpecError, match=r"split\.embargo: must be >= the longest horizon \(22\).*got 5"):
        parse("[split]\nembargo = 5\n")
    assert parse("[target]\nhorizons = [1, 5]\n[split]\nembargo = 5\n").split.embargo == 5


def test_split_dates_parse_from_toml_dates_and_text():
    spec = parse('[split]\nvalid_start = 2021-01-04\ntest_start = "2023-01-02"\n')
    assert spec.split.by_dates and (spec.split.valid_start, spec.split.test_start) == ("2021-01-04", "2023-01-02")
    assert spec.split.valid is None and spec.split.test is None
    assert "valid" not in spec.to_dict()["split"]


@pytest.mark.parametrize(
    "extra, message",
    [
        ("[split]\nvalid = 0.2\ntest_start = 2023-01-02\n",
         r"split: give either fractions \(valid, test\) or dates \(valid_start, test_start\), not both; got valid, test_start"),
        ("[split]\nvalid_start = 2021-01-04\n", r"split\.test_start: missing; dates need both"),
        ("[split]\nvalid_start = 2023-01-04\ntest_start = 2021-01-02\n", r"split: valid_start must come before test_start"),
        ('[split]\nvalid_start = "2021-13-01"\ntest_start = 2023-01-02\n', r"split\.valid_start: must be a date YYYY-MM-DD"),
        ("[split]\nvalid_start = 2021-01-04\ntest_start = 2023-01-02\nfolds = 3\n", r"split\.folds: walk-forward folds need fractions"),
    ],
)
def test_split_mistakes(extra, message):
    with pytest.raises(SpecError, match=message):
        parse(extra)


def test_columns_map_our_names_and_exogenous_names_only():
    spec = parse('[data]\ncolumns = { date = "Day", vix = "VIX Close" }\n[features]\nexogenous = ["vix"]\n')
    assert dict(spec.data.columns) == {"date": "Day", "vix": "VIX Close"}
    with pytest.raises(SpecError, match=r"unknown key data\.columns\.clse; did you mean data\.columns\.close\?"):
        parse('[data]\ncolumns = { clse = "Last" }\n')


def test_har_window_below_the_rolling_fit_floor_is_refused():
    with pytest.raises(SpecError, match=r"baselines\.har_window: the rolling HAR needs at least 250 rows per fit, got 100"):
        parse("[baselines]\nhar_window = 100\n")


def test_inputs_may_leave_out_har_windows_but_not_everything():
    # the HAR baselines keep their own 1, 5, 22-day windows, so the network may do without them
    assert parse("[features]\nhar_windows = []\nreturns = true\n").features.har_windows == ()
    with pytest.raises(SpecError, match=r"features: the network has no inputs"):
        parse("[features]\nhar_windows = []\n")


def test_missing_sections_and_required_keys():
    problems = problems_of("[target]\nscale = \"log\"\n")
    assert any(p.startswith("missing section [study]") for p in problems)
    assert any(p.startswith("missing section [data]") for p in problems)
    with pytest.raises(SpecError, match=r'study\.name: missing; add name = "harbor-demo" under \[study\]'):
        parse_spec('[study]\nseed = 1\n[data]\nfile = "p.csv"\n', base_dir=Path("."))


@pytest.mark.parametrize("name", ["has space", "", "..", "na/me", "x" * 101])
def test_bad_study_names_are_refused(name):
    with pytest.raises(SpecError, match=r"study\.name: must be 1-100 letters, digits"):
        parse_spec(f'[study]\nname = "{name}"\n[data]\nfile = "p.csv"\n', base_dir=Path("."))


def test_every_problem_is_reported_together_one_a_line():
    text = MINIMAL + "[space]\nhiden_units = 8\ndropout = 2.0\n[split]\nembargo = 1\n[trainig]\n"
    with pytest.raises(SpecError) as info:
        parse_spec(text, base_dir=Path("."), path="x.toml")
    error = info.value
    assert len(error.problems) == 4
    lines = str(error).splitlines()
    assert lines[0] == "study file x.toml has 4 problems:"
    assert [line.strip() for line in lines[1:]] == list(error.problems)
    assert isinstance(error, VolsweepError)


def test_malformed_toml_names_file_and_line(tmp_path):
    study = tmp_path / "bad.toml"
    study.write_text('[study]\nname = "t"\nseed = \n', encoding="utf-8")
    # tomllib reports "Invalid value (at line 3, column 8)" for this text
    with pytest.raises(SpecError, match=r"bad\.toml: line 3, column 8: not valid TOML: Invalid value"):
        load_spec(study)


def test_missing_file_names_the_path(tmp_path):
    with pytest.raises(SpecError, match=r"nowhere\.toml: not found \(looked for .*nowhere\.toml\)"):
        load_spec(tmp_path / "nowhere.toml")
    with pytest.raises(SpecError, match="is a folder"):
        load_spec(tmp_path)


def test_relative_data_path_starts_at_the_study_folder(tmp_path, monkeypatch):
    folder = tmp_path / "studies"
    folder.mkdir()
    (folder / "s.toml").write_text('[study]\nname = "s"\n[data]\nfile = "../data/p.csv"\n', encoding="utf-8")
    monkeypatch.chdir(tmp_path.parent)  # the current folder plays no part
    spec = load_spec(Path(tmp_path.name) / "studies" / "s.toml")
    assert spec.data.file == (tmp_path / "data" / "p.csv").resolve()
    assert spec.path == (folder / "s.toml").resolve()
    # an absolute path stays as it is
    absolute = parse_spec(f'[study]\nname = "s"\n[data]\nfile = "{tmp_path / "x.csv"}"\n', base_dir=folder)
    assert absolute.data.file == (tmp_path / "x.csv").resolve()
    # parse_spec resolves against base_dir
    assert parse(base_dir=Path("/srv/studies")).data.file == Path("/srv/studies/prices.csv")


# ---- the spec as a value ------------------------------------------------------------------------


def test_spec_is_frozen_and_hashable():
    spec = load_spec(DEMO)
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.study.name = "other"
    assert hash(spec) == hash(load_spec(DEMO))
    assert spec == load_spec(DEMO)


def test_to_dict_is_json_and_keeps_the_file_forms():
    d = load_spec(DEMO).to_dict()
    assert json.loads(json.dumps(d)) == d
    assert d["data"]["file"] == "data/harbor_index.csv"
    assert d["space"]["dropout"] == {"low": 0.0, "high": 0.3}
    assert d["space"]["learning_rate"] == {"low": 1e-4, "high": 1e-2, "log": True}
    assert d["space"]["batch_size"] == [32, 64, 128]
    assert list(d) == ["study", "data", "target", "features", "split", "search", "space", "training", "baselines"]


def test_hashes_ignore_layout_and_follow_meaning():
    base = parse("[space]\ndropout = { low = 0.0, high = 0.3 }\nlayers = 1\n")
    # the same settings with comments, another key order and an inline table written out
    same = parse("[space]\n# a comment\nlayers = 1  # one layer\n[space.dropout]\nhigh = 0.3\nlow = 0.0\n")
    assert same.spec_hash() == base.spec_hash() and same.search_hash() == base.search_hash()
    assert len(base.spec_hash()) == 64 and int(base.spec_hash(), 16) >= 0
    # run settings change the spec hash but not the search hash
    more = parse("[study]\ntrials = 99\nworkers = 2\n[space]\ndropout = { low = 0.0, high = 0.3 }\nlayers = 1\n")
    assert more.search_hash() == base.search_hash() and more.spec_hash() != base.spec_hash()
    assert base.with_name("u").search_hash() == base.search_hash()
    # a search setting changes both
    wider = parse("[space]\ndropout = { low = 0.0, high = 0.5 }\nlayers = 1\n")
    assert wider.search_hash() != base.search_hash() and wider.spec_hash() != base.spec_hash()


def test_with_name_renames_and_checks_the_name():
    spec = parse()
    renamed = spec.with_name("t-2")
    assert renamed.study.name == "t-2" and renamed.study.seed == spec.study.seed and spec.study.name == "t"
    with pytest.raises(SpecError, match=r'study\.name: .*got "bad name"'):
        spec.with_name("bad name")


def test_diff_specs_lists_changed_settings():
    a = parse("[space]\ndropout = { low = 0.0, high = 0.3 }\n").to_dict()
    b = parse("[space]\ndropout = { low = 0.0, high = 0.5 }\n[training]\nmax_epochs = 50\n").to_dict()
    assert diff_specs(a, b) == [
        "space.dropout: {low=0.0, high=0.3} -> {low=0.0, high=0.5}",
        "training.max_epochs: 100 -> 50",
    ]
    assert diff_specs(a, a) == []
    # keys present on one side only, and a whole number that became a real one
    assert diff_specs({"split": {"valid": 0.2}}, {"split": {"valid_start": "2021-01-04"}}) == [
        "split.valid: 0.2 -> (not set)",
        'split.valid_start: (not set) -> "2021-01-04"',
    ]
    assert diff_specs({"space": {"dropout": 0}}, {"space": {"dropout": 0.0}}) == ["space.dropout: 0 -> 0.0"]
