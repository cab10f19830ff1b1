"""A study file (TOML) -> a frozen `StudySpec`; every mistake is named with its key and a fix.

`load_spec(path)` reads a file, `parse_spec(text, base_dir=...)` reads text. All problems of a file are
collected and raised together as one `SpecError`, one problem a line, before anything runs. The keys,
their meaning and their defaults are documented in `studies/demo.toml`. The sections' dataclasses are
in `sweep/study/spec.py`, the checks in `sweep/study/checks.py`. `spec_from_text` reads the text a
record keeps: the one place a stored study file is parsed again.
"""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from pathlib import Path

from sweep.errors import SpecError
from sweep.study.checks import (
    CHECKS, Values, check_inputs, check_search, check_split, check_target, check_top_level, decode_problem,
    read_section,
)
from sweep.study.space import format_value, parse_space
from sweep.study.spec import SECTION_TYPES, SECTIONS, DataSection, StudySpec, canonical_json

__all__ = ["diff_specs", "load_spec", "parse_spec", "spec_from_text"]


def parse_spec(text: str, *, base_dir: str | Path, path: str | Path | None = None) -> StudySpec:
    """Read a study from TOML text.

    Args:
        text: the study file's text.
        base_dir: folder that relative `data.file` paths start from (the study file's folder).
        path: the study file, kept in the spec and named in errors.

    Returns:
        The StudySpec, with every default filled in.

    Raises:
        SpecError: listing every problem, one a line.

    Example:
        >>> spec = parse_spec('[study]\\nname = "a"\\n[data]\\nfile = "p.csv"\\n', base_dir=".")
        >>> spec.study.objective, spec.split.embargo
        ('qlike', 22)
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise SpecError([decode_problem(error)], path=path) from None
    problems: list[str] = []
    check_top_level(raw, problems)
    tables = {s: raw[s] if isinstance(raw.get(s), Mapping) else {} for s in SECTIONS}
    values = Values()
    for section in CHECKS:
        read_section(section, tables[section], isinstance(raw.get(section), Mapping), values, problems)
    space = parse_space(tables["space"], problems)
    check_target(values, problems)
    check_split(values, problems)
    check_inputs(values, problems)
    check_search(values, space, problems)
    if problems:
        raise SpecError(problems, path=path)
    given = values.given
    file = given["data"].pop("file")
    data = DataSection(file=(Path(base_dir) / Path(file).expanduser()).resolve(), file_as_written=file,
                       **given["data"])
    sections = {s: cls(**given[s]) for s, cls in SECTION_TYPES.items() if s != "data"}
    return StudySpec(data=data, space=space, path=None if path is None else Path(path).resolve(), text=text,
                     **sections)


def load_spec(path: str | Path) -> StudySpec:
    """Read a study file; relative data paths start at the file's folder.

    Raises:
        SpecError: the file is missing or unreadable, is not TOML, or has mistakes (all listed).
    """
    file = Path(path)
    if not file.is_file():
        what = "is a folder, not a study file" if file.is_dir() else "not found"
        raise SpecError([f"{what} (looked for {file.resolve()}); give the path of a .toml study file"], path=path)
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        raise SpecError([f"cannot be read: {error}; save it as UTF-8 text"], path=path) from None
    return parse_spec(text, base_dir=file.resolve().parent, path=path)


def spec_from_text(text: str, *, name: str | None = None) -> StudySpec:
    """The spec a record keeps (its study file's text), under the recorded `name` when given.

    Relative data paths are not used again (the record holds the rows), so they start at ".".

    Raises:
        SpecError: the text no longer reads as a study file (for example, written by a newer volsweep).
    """
    spec = parse_spec(text, base_dir=Path("."))
    return spec.with_name(name) if name is not None and spec.study.name != name else spec


_ABSENT = object()


def diff_specs(a: Mapping, b: Mapping) -> list[str]:
    """Lines `section.key: old -> new` for every setting that differs between two `to_dict()` forms.

    Values compare by their JSON text, so 0 and 0.0 differ; a key on one side only shows as "(not set)".

    Example:
        >>> diff_specs({"space": {"dropout": {"low": 0.0, "high": 0.3}}},
        ...            {"space": {"dropout": {"low": 0.0, "high": 0.5}}})
        ['space.dropout: {low=0.0, high=0.3} -> {low=0.0, high=0.5}']
    """
    def show(value):
        return "(not set)" if value is _ABSENT else format_value(value)

    def same(x, y):
        return x is not _ABSENT and y is not _ABSENT and canonical_json(x) == canonical_json(y)

    lines = []
    for section in list(a) + [s for s in b if s not in a]:
        sa, sb = a.get(section, _ABSENT), b.get(section, _ABSENT)
        if isinstance(sa, Mapping) or isinstance(sb, Mapping):
            sa = sa if isinstance(sa, Mapping) else {}
            sb = sb if isinstance(sb, Mapping) else {}
            for key in list(sa) + [k for k in sb if k not in sa]:
                va, vb = sa.get(key, _ABSENT), sb.get(key, _ABSENT)
                if not same(va, vb):
                    lines.append(f"{section}.{key}: {show(va)} -> {show(vb)}")
        elif not same(sa, sb):
            lines.append(f"{section}: {show(sa)} -> {show(sb)}")
    return lines
