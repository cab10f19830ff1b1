"""Tests of sweep/study/demo.py: `write_demo` writes the invented market and the documented study file.

The study file must equal studies/demo.toml byte for byte; the prices must be the invented market of
trainers/scenario.py, read back with trainers.data.load_prices.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweep.study import load_spec, load_study_prices
from sweep.study.demo import DEMO_STUDY, demo_study_text, write_demo
from trainers.data import load_prices
from trainers.scenario import INSTRUMENTS, generate_market

STUDIES = Path(__file__).resolve().parents[3] / "studies"


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    return write_demo(tmp_path_factory.mktemp("demo") / "new" / "folder")


def test_demo_study_text_is_the_repository_study_file():
    assert demo_study_text() == (STUDIES / DEMO_STUDY).read_text(encoding="utf-8")


def test_write_demo_writes_a_study_file_identical_to_studies_demo_toml(demo):
    assert demo.name == "demo.toml" and demo.parent.name == "folder"
    assert demo.read_bytes() == (STUDIES / "demo.toml").read_bytes()


def test_write_demo_writes_every_instrument_of_the_invented_market(demo):
    market = generate_market(seed=7)
    assert sorted(p.name for p in (demo.parent / "data").iterdir()) == sorted(f"{n}.csv" for n in INSTRUMENTS)
    for name in INSTRUMENTS:
        # each file reads back to the frame the generator gives for the default seed
        assert load_prices(demo.parent / "data" / f"{name}.csv").frame.equals(market[name])


def test_write_demo_study_reads_its_own_price_file(demo):
    spec = load_spec(demo)
    assert spec.data.file == demo.parent / "data" / "harbor_index.csv"
    # the demo study's checks pass on the written rows
    assert len(load_study_prices(spec).frame) == 3000


def test_write_demo_seed_changes_the_prices_not_the_study(tmp_path, demo):
    other = write_demo(tmp_path, seed=8)
    assert other.read_bytes() == demo.read_bytes()
    assert (tmp_path / "data" / "harbor_index.csv").read_bytes() != \
        (demo.parent / "data" / "harbor_index.csv").read_bytes()
    # writing again into the same folder gives the same files
    again = write_demo(tmp_path, seed=8)
    assert load_prices(tmp_path / "data" / "harbor_index.csv").frame.equals(generate_market(seed=8)["harbor_index"])
    assert again == other
