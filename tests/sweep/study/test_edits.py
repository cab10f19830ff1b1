"""Tests of sweep/study/edits.py: `set_keys` edits study file text and keeps everything else.

Outside reference: Python's tomllib reads the edited text (TOML 1.0).
"""

from __future__ import annotations

import tomllib

import pytest

from sweep.study import set_keys
from sweep.study.demo import demo_study_text

TEXT = """# a study file
[study]
name = "harbor"   # the name
trials = 24
workers = 2

[training]
max_epochs = 100
"""


def test_set_keys_replaces_each_line_and_keeps_the_rest():
    edited = set_keys(TEXT, trials="4", max_epochs="7")
    # only the two lines change; comments, blank lines and other keys stay byte for byte
    before, after = TEXT.splitlines(), edited.splitlines()
    assert [i for i, (a, b) in enumerate(zip(before, after)) if a != b] == [3, 7]
    assert after[3] == "trials = 4" and after[7] == "max_epochs = 7"
    # tomllib reads the new values
    assert tomllib.loads(edited) == {"study": {"name": "harbor", "trials": 4, "workers": 2},
                                     "training": {"max_epochs": 7}}


def test_set_keys_values_are_toml_literals():
    edited = set_keys(TEXT, name='"coast-2"', trials="[1, 2]")
    # the value is written as given: a quoted string stays a TOML string, a list a TOML list
    assert tomllib.loads(edited)["study"] == {"name": "coast-2", "trials": [1, 2], "workers": 2}


def test_set_keys_docstring_example():
    assert set_keys("trials = 24\nworkers = 2\n", trials="4") == "trials = 4\nworkers = 2\n"


def test_set_keys_on_the_demo_file_changes_only_the_keys_named():
    text = demo_study_text()
    edited = set_keys(text, trials="4", workers="1", startup_trials="2")
    old, new = tomllib.loads(text), tomllib.loads(edited)
    assert (new["study"]["trials"], new["study"]["workers"], new["search"]["startup_trials"]) == (4, 1, 2)
    new["study"].update(trials=old["study"]["trials"], workers=old["study"]["workers"])
    new["search"]["startup_trials"] = old["search"]["startup_trials"]
    assert new == old
    # every comment line of the documented file is still there
    assert [line for line in text.splitlines() if line.startswith("#")] == \
           [line for line in edited.splitlines() if line.startswith("#")]


@pytest.mark.parametrize("key, count", [("trails", 0), ("name", 2)])
def test_set_keys_refuses_a_missing_or_repeated_key(key, count):
    text = TEXT + '[other]\nname = "x"\n'
    # a typo or an ambiguous key fails loudly instead of leaving the text unchanged
    with pytest.raises(KeyError, match=f"study file text has {count} lines setting '{key}'; expected exactly one"):
        set_keys(text, **{key: "1"})


def test_set_keys_matches_whole_keys_at_the_start_of_a_line_only():
    text = "trials = 1\nmax_trials = 2\n# trials = 3\n"
    # `max_trials` and the commented line do not count as `trials`
    assert set_keys(text, trials="9") == "trials = 9\nmax_trials = 2\n# trials = 3\n"
