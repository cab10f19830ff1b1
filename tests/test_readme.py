"""The README's examples and commands stay true."""

from __future__ import annotations

import re
from pathlib import Path

README = (Path(__file__).parents[1] / "README.md").read_text()


def test_readme_training_example_runs():
    (code,) = re.findall(r"```python\n(.*?)```", README, re.S)
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    result = namespace["result"]
    assert result.stop_reason in ("patience", "max_epochs")
    assert 1 <= result.best_epoch <= len(result.history)
    assert result.network.predict(namespace["X"][400:]).shape == (200, 3)


def test_readme_states_the_cautions_and_both_commands():
    assert "volsweep demo" in README
    assert 'pip install -q -e ".[test]" && python -m pytest -q' in README
    assert "not advice" in README and "model-risk review" in README
