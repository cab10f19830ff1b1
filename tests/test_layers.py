"""The shape of the code, read from its imports with `ast` (no module is imported or run).

Rules (DEVELOPERS.md, "Import rules"):

- `trainers/` imports neither `sweep`, optuna, sqlite3 nor sqlite_utils: it is numerics on arrays.
- optuna is imported only in `sweep/search/`; sqlite3 and sqlite_utils, and SQL text, only in `sweep/record/`.
- `sweep`'s packages import only the layers below them (`LAYERS`), never a layer above or beside.
- No module takes a private name (`_x`) from another module, or a private module.
- No import cycle between modules, counting imports inside functions (a late import must not hide one).
- Every package's `__init__.py` lists its public names in `__all__`, and every name there exists.

Each rule is a function on a tree of sources, so the tests at the bottom plant a violation of each in
a small tree and check that it is reported.
"""

from __future__ import annotations

import ast
import re
from dataclasses import dataclass, field
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("trainers", "sweep")

# Layer of each top-level part of `sweep` (lower may be imported by higher, never the reverse;
# parts of one layer do not import each other).
LAYERS = {
    "sweep.errors": 0,
    "sweep.study": 1,
    "sweep.record": 1,
    "sweep.search": 2,
    "sweep.review": 3,
    "sweep.board": 4,
    "sweep.cli": 5,
}
ONLY_IN = {"optuna": "sweep.search", "sqlite3": "sweep.record", "sqlite_utils": "sweep.record"}
NUMERIC_ONLY = ("sweep", "optuna", "sqlite3", "sqlite_utils")
SQL = re.compile(r"\b(SELECT\s.+\sFROM|INSERT\s+(OR\s+\w+\s+)?INTO|CREATE\s+(TABLE|INDEX)|DELETE\s+FROM|"
                 r"UPDATE\s+\w+\s+SET|ALTER\s+TABLE|DROP\s+TABLE|PRAGMA\s+\w+)")


@dataclass
class Module:
    name: str
    path: Path
    tree: ast.Module
    is_package: bool
    imports: list[tuple[str, int]] = field(default_factory=list)   # (module imported, line)
    private: list[tuple[str, int]] = field(default_factory=list)   # private names taken from others


def read_tree(root: Path, packages=PACKAGES) -> dict[str, Module]:
    """Every module under `root/<package>/` by dotted name."""
    modules = {}
    for package in packages:
        for path in sorted((root / package).rglob("*.py")):
            parts = list(path.relative_to(root).with_suffix("").parts)
            is_package = parts[-1] == "__init__"
            if is_package:
                parts = parts[:-1]
            name = ".".join(parts)
            modules[name] = Module(name, path, ast.parse(path.read_text(encoding="utf-8")), is_package)
    for module in modules.values():
        _collect_imports(module, modules)
    return modules


def _resolve(module: Module, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = module.name.split(".") if module.is_package else module.name.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _collect_imports(module: Module, modules: dict[str, Module]) -> None:
    bound: dict[str, str] = {}   # local name -> project module it stands for
    for node in ast.walk(module.tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                module.imports.append((alias.name, node.lineno))
                if alias.name in modules:
                    bound[alias.asname or alias.name.split(".")[0]] = alias.name
                if any(p.startswith("_") and not p.startswith("__") for p in alias.name.split(".")):
                    module.private.append((alias.name, node.lineno))
        elif isinstance(node, ast.ImportFrom):
            source = _resolve(module, node)
            for alias in node.names:
                target = f"{source}.{alias.name}"
                if target in modules:  # `from package import submodule`
                    module.imports.append((target, node.lineno))
                    bound[alias.asname or alias.name] = target
                else:
                    module.imports.append((source, node.lineno))
                project = source.split(".")[0] in PACKAGES
                if project and alias.name.startswith("_") and not alias.name.startswith("__"):
                    module.private.append((f"{source}.{alias.name}", node.lineno))
            if any(p.startswith("_") and not p.startswith("__") for p in source.split(".")):
                module.private.append((source, node.lineno))
    for node in ast.walk(module.tree):  # `module._name` on an imported project module
        if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in bound
                and node.attr.startswith("_") and not node.attr.startswith("__")):
            module.private.append((f"{bound[node.value.id]}.{node.attr}", node.lineno))


def _part(name: str) -> str:
    """The top-level part of `sweep` a module belongs to (`sweep.study.spec` -> `sweep.study`)."""
    return ".".join(name.split(".")[:2])


def _where(module: Module, line: int) -> str:
    return f"{module.path.parent.name}/{module.path.name}:{line}"


def numeric_core_problems(modules: dict[str, Module]) -> list[str]:
    return [f"{_where(m, line)}: trainers imports {target}" for m in modules.values()
            if m.name.split(".")[0] == "trainers" for target, line in m.imports
            if target.split(".")[0] in NUMERIC_ONLY]


def confined_import_problems(modules: dict[str, Module]) -> list[str]:
    problems = []
    for m in modules.values():
        for target, line in m.imports:
            home = ONLY_IN.get(target.split(".")[0])
            if home and not (m.name == home or m.name.startswith(home + ".")):
                problems.append(f"{_where(m, line)}: {m.name} imports {target}, which belongs in {home} only")
    return problems


def sql_text_problems(modules: dict[str, Module]) -> list[str]:
    problems = []
    for m in modules.values():
        if m.name == "sweep.record" or m.name.startswith("sweep.record."):
            continue
        for node in ast.walk(m.tree):
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and SQL.search(node.value):
                problems.append(f"{_where(m, node.lineno)}: SQL text outside sweep.record: {node.value[:60]!r}")
    return problems


def layer_problems(modules: dict[str, Module]) -> list[str]:
    problems = []
    for m in modules.values():
        if m.name.split(".")[0] != "sweep" or m.name == "sweep":
            continue
        own = LAYERS.get(_part(m.name))
        if own is None:
            problems.append(f"{_where(m, 1)}: {m.name} is in no layer; add its package to LAYERS or move it")
            continue
        for target, line in m.imports:
            if target.split(".")[0] != "sweep" or _part(target) == _part(m.name):
                continue
            theirs = LAYERS.get(_part(target))
            if theirs is None or theirs >= own:
                problems.append(f"{_where(m, line)}: {m.name} (layer {own}) imports {target} "
                                f"(layer {theirs}); imports go to lower layers only")
    return problems


def private_name_problems(modules: dict[str, Module]) -> list[str]:
    return [f"{_where(m, line)}: {m.name} takes the private name {name}"
            for m in modules.values() for name, line in m.private]


def cycles(modules: dict[str, Module]) -> list[list[str]]:
    """Every import cycle among the project's modules (strongly connected components of 2 or more, or self)."""
    graph = {n: sorted({t for t, _ in m.imports if t in modules}) for n, m in modules.items()}
    for name in graph:  # a submodule import also runs its package's __init__
        graph[name] = sorted(set(graph[name]) | {".".join(t.split(".")[:i]) for t in graph[name]
                                                 for i in range(1, t.count(".") + 1)
                                                 if ".".join(t.split(".")[:i]) in modules
                                                 and not name.startswith(".".join(t.split(".")[:i]) + ".")
                                                 and name != ".".join(t.split(".")[:i])})
    index, low, stack, on_stack, found, counter = {}, {}, [], set(), [], [0]

    def visit(v):  # Tarjan's strongly connected components
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1 or v in graph[v]:
                found.append(sorted(component))

    for v in graph:
        if v not in index:
            visit(v)
    return found


def all_problems(modules: dict[str, Module]) -> list[str]:
    problems = []
    for m in modules.values():
        if not m.is_package:
            continue
        names = None
        for node in m.tree.body:
            targets = node.targets if isinstance(node, ast.Assign) else [node.target] if isinstance(node, ast.AnnAssign) else []
            if any(isinstance(t, ast.Name) and t.id == "__all__" for t in targets):
                names = ast.literal_eval(node.value)
        if names is None:
            problems.append(f"{_where(m, 1)}: package {m.name} has no __all__")
            continue
        defined = set()
        for node in ast.walk(m.tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                defined |= {(a.asname or a.name).split(".")[0] for a in node.names}
            elif isinstance(node, (ast.FunctionDef, ast.ClassDef)):
                defined.add(node.name)
            elif isinstance(node, ast.Assign):
                defined |= {t.id for t in node.targets if isinstance(t, ast.Name)}
        missing = [n for n in names if n not in defined]
        if missing:
            problems.append(f"{_where(m, 1)}: {m.name}.__all__ names {missing}, which it does not define or import")
    return problems


@pytest.fixture(scope="module")
def project():
    return read_tree(ROOT)


def test_trainers_import_no_sweep_optuna_or_sqlite(project):
    assert numeric_core_problems(project) == []


def test_optuna_and_sqlite_stay_in_their_packages(project):
    assert confined_import_problems(project) == []
    assert sql_text_problems(project) == []


def test_packages_import_only_lower_layers(project):
    assert layer_problems(project) == []


def test_no_module_takes_a_private_name_of_another(project):
    assert private_name_problems(project) == []


def test_no_import_cycles(project):
    assert cycles(project) == []


def test_every_package_lists_its_public_names(project):
    assert all_problems(project) == []


def test_the_tree_is_read(project):
    # the checks above mean something only if the tree was found and its imports read
    assert {"sweep.study.spec", "sweep.record.tracker", "sweep.search.engine", "trainers.mlp"} <= set(project)
    assert any(t == "optuna" for t, _ in project["sweep.search.pruning"].imports)


# ---------------------------------------------------------------------------------- planted violations


def _plant(tmp_path, files: dict[str, str]) -> dict[str, Module]:
    for name, text in files.items():
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    for package in PACKAGES:
        (tmp_path / package).mkdir(exist_ok=True)
    return read_tree(tmp_path)


BASE = {
    "sweep/__init__.py": "__all__ = []\n",
    "sweep/errors.py": "class VolsweepError(Exception): ...\n",
    "sweep/study/__init__.py": "from sweep.study.spec import StudySpec\n__all__ = ['StudySpec']\n",
    "sweep/study/spec.py": "from sweep.errors import VolsweepError\nclass StudySpec: ...\ndef _helper(): ...\n",
    "sweep/search/__init__.py": "__all__ = []\n",
    "sweep/search/engine.py": "import optuna\nfrom sweep.study import StudySpec\n",
    "sweep/record/__init__.py": "__all__ = []\n",
    "sweep/record/tracker.py": "import sqlite3\nQ = 'SELECT name FROM vs_studies'\n",
    "trainers/__init__.py": "__all__: list[str] = []\n",
    "trainers/mlp.py": "import numpy as np\n",
}


def test_planted_tree_without_violations_passes(tmp_path):
    tree = _plant(tmp_path, BASE)
    assert (numeric_core_problems(tree), confined_import_problems(tree), sql_text_problems(tree),
            layer_problems(tree), private_name_problems(tree), cycles(tree), all_problems(tree)) == \
        ([], [], [], [], [], [], [])


@pytest.mark.parametrize("file, text, check, expected", [
    ("trainers/fit.py", "from sweep.study import StudySpec\n", numeric_core_problems, "trainers imports sweep.study"),
    ("trainers/fit.py", "def f():\n    import optuna\n", numeric_core_problems, "trainers imports optuna"),
    ("sweep/board/data.py", "import optuna\n", confined_import_problems, "belongs in sweep.search only"),
    ("sweep/study/reader.py", "import sqlite_utils\n", confined_import_problems, "belongs in sweep.record only"),
    ("sweep/review/notes.py", "SQL = 'INSERT INTO vs_notes VALUES (1)'\n", sql_text_problems, "SQL text outside"),
    ("sweep/study/inputs.py", "from sweep.search.engine import run\n", layer_problems, "imports go to lower layers"),
    ("sweep/study/inputs.py", "from sweep.study.spec import _helper\n", private_name_problems, "_helper"),
    ("sweep/study/inputs.py", "from sweep.study import spec\nspec._helper()\n", private_name_problems, "_helper"),
    ("sweep/study/inputs.py", "import sweep.study._model\n", private_name_problems, "sweep.study._model"),
    ("sweep/study/__init__.py", "X = 1\n", all_problems, "has no __all__"),
    ("sweep/study/__init__.py", "__all__ = ['Nowhere']\n", all_problems, "does not define"),
])
def test_each_rule_reports_a_planted_violation(tmp_path, file, text, check, expected):
    tree = _plant(tmp_path, {**BASE, file: text})
    problems = check(tree)
    assert any(expected in p for p in problems), problems


def test_a_cycle_hidden_in_a_function_is_found(tmp_path):
    # spec imports reader at module level, reader imports spec inside a function: still a cycle
    tree = _plant(tmp_path, {**BASE, "sweep/study/spec.py": "from sweep.study import reader\n",
                             "sweep/study/reader.py": "def f():\n    from sweep.study.spec import StudySpec\n"})
    assert ["sweep.study.reader", "sweep.study.spec"] in cycles(tree)
