"""The small study the CLI tests read: the invented market, run once through `volsweep run`."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from sweep.cli import app
from sweep.study import set_keys
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv


@pytest.fixture(scope="session")
def study(tmp_path_factory):
    """(study file, result of `volsweep run FILE --no-board`): 3 trials on 900 invented days."""
    folder = tmp_path_factory.mktemp("cli")
    (folder / "data").mkdir()
    write_market_csv(folder / "data", seed=5, n_days=900)
    text = set_keys(demo_study_text(), name='"cli-study"', trials="3", workers="1", max_epochs="8",
                    har_window="250", startup_trials="1", warmup_epochs="2")
    path = folder / "cli.toml"
    path.write_text(text)
    result = CliRunner().invoke(app, ["run", str(path), "--no-board"])
    assert result.exit_code == 0, result.output
    return path, result
