"""Small edits of study file text that keep its comments: used by the demo, the tests and the benchmarks."""

from __future__ import annotations

import re

__all__ = ["set_keys"]


def set_keys(text: str, **values) -> str:
    """Replace `key = ...` lines of a study file with new values (TOML literals given as text).

    Each key must appear exactly once at the start of a line, so a typo or an ambiguous key fails
    loudly instead of leaving the file unchanged.

    Example:
        >>> set_keys('trials = 24\\nworkers = 2\\n', trials="4")
        'trials = 4\\nworkers = 2\\n'
    """
    for key, value in values.items():
        pattern = re.compile(rf"^{re.escape(key)}\s*=.*$", re.MULTILINE)
        found = pattern.findall(text)
        if len(found) != 1:
            raise KeyError(f"study file text has {len(found)} lines setting {key!r}; expected exactly one")
        text = pattern.sub(f"{key} = {value}", text)
    return text
