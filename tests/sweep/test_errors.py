"""The named errors: what the CLI prints for each (the project's own wording; no outside reference applies)."""

from __future__ import annotations

import pytest

from sweep import errors
from sweep.errors import HoldoutAlreadyUsed, InputError, ReviewError, SpecError, StudyNotFound, VolsweepError


def test_every_named_error_is_a_volsweep_error():
    names = [n for n in errors.__all__ if n != "VolsweepError"]
    assert names and all(issubclass(getattr(errors, n), VolsweepError) for n in names)


def test_spec_error_is_one_line_for_one_problem_and_a_list_for_several():
    one = SpecError(["study.seed: must be a whole number >= 0, got -1"], path="s.toml")
    assert str(one) == "study file s.toml: study.seed: must be a whole number >= 0, got -1"
    many = SpecError(["a: x", "b: y"])
    assert str(many) == "study spec has 2 problems:\n  a: x\n  b: y" and many.problems == ("a: x", "b: y")


def test_input_error_is_also_a_value_error():
    # a bad argument to a public function is a ValueError, as Python's own functions raise (common practice)
    with pytest.raises(ValueError, match="unknown sort key"):
        raise InputError("unknown sort key 'x'")


def test_holdout_already_used_keeps_the_earlier_looks_and_is_a_review_error():
    error = HoldoutAlreadyUsed("the test window was already used", ["first look"])
    assert isinstance(error, ReviewError) and error.previous == ["first look"]
    assert issubclass(StudyNotFound, errors.RecordNotFound)
