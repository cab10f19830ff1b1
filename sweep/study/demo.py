"""The demo study: an invented market and the documented study file that sweeps it."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from trainers.scenario import write_market_csv

__all__ = ["DEMO_STUDY", "demo_study_text", "write_demo"]

DEMO_STUDY = "demo.toml"


def demo_study_text() -> str:
    """The demo study file shipped with the package (identical to `studies/demo.toml`)."""
    return resources.files("sweep.study").joinpath(DEMO_STUDY).read_text(encoding="utf-8")


def write_demo(directory: Path, *, seed: int = 7) -> Path:
    """Write the invented market's price files under `directory/data/` and the study file beside them.

    Returns:
        The path of the study file.
    """
    directory = Path(directory)
    (directory / "data").mkdir(parents=True, exist_ok=True)
    write_market_csv(directory / "data", seed=seed)
    study_file = directory / DEMO_STUDY
    study_file.write_text(demo_study_text(), encoding="utf-8")
    return study_file
