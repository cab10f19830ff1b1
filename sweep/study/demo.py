"""The demo study: an invented market and the documented study file that sweeps it."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from sweep.errors import InputError
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

    Raises:
        InputError: the folder cannot be created (a file is in the way, or no permission).
    """
    directory = Path(directory)
    try:
        (directory / "data").mkdir(parents=True, exist_ok=True)
    except OSError as exc:  # a file in the way, no permission, a read-only disk
        raise InputError(f"cannot write the demo into {directory}: {exc.strerror or exc} ({exc.filename}); "
                         "give --dir a folder you can write to (it is created if missing)") from exc
    write_market_csv(directory / "data", seed=seed)
    study_file = directory / DEMO_STUDY
    study_file.write_text(demo_study_text(), encoding="utf-8")
    return study_file
