"""The README's contract (its commands, caution, feature table) and the package structure."""

import ast
from pathlib import Path

from features import schema

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
TEST_COMMAND = ('python3 -m venv .venv && . .venv/bin/activate && pip install -e ".[test]" '
                '&& python -m pytest -q')
DEMO_COMMAND = 'python3 -m venv .venv && . .venv/bin/activate && pip install -e . && pulsesort demo'


def test_ci_runs_exactly_the_readme_test_command():
    """`.ci/run` ends with the README's test command, verbatim."""
    assert TEST_COMMAND in README
    ci_lines = [ln for ln in (ROOT / ".ci/run").read_text().splitlines()
                if ln.strip() and not ln.lstrip().startswith("#")]
    assert ci_lines[-1].strip() == TEST_COMMAND


def test_readme_demo_command_makes_its_environment():
    """The README's first command makes a venv, installs and runs the demo."""
    assert DEMO_COMMAND in README


def test_readme_states_the_caution():
    """The README says pulsesort is not a warning or safety system."""
    assert "not a\nlightning warning or safety system" in README.replace("**", "")


def test_readme_feature_table_is_the_schema():
    """The README's feature table is the one `pulsesort features --list --markdown` prints."""
    assert schema.format_table(markdown=True) in README


def test_top_level_layout():
    """The fixed top-level layout is present."""
    for name in ("README.md", "DEVELOPERS.md", "pyproject.toml", "LICENSE", "classify",
                 "features", "tests", "models", "data_cards"):
        assert (ROOT / name).exists(), name


def _modules() -> dict[str, Path]:
    """Every module of the two packages, by dotted name."""
    out = {}
    for pkg in ("features", "classify"):
        for path in (ROOT / pkg).rglob("*.py"):
            parts = list(path.relative_to(ROOT).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(parts)] = path
    return out


def import_graph(mods: dict[str, Path]) -> dict[str, set[str]]:
    """module -> the modules of the two packages it imports (parsed with ``ast``).

    Every import counts, at module level, in a function or under TYPE_CHECKING:
    each is a dependency of the design. ``from pkg import name`` depends on
    ``pkg.name`` when that is a module, else on ``pkg`` (its ``__init__``);
    importing a submodule does not count as importing its parents (Python has
    them initialised already).
    """
    graph = {m: set() for m in mods}
    for mod, path in mods.items():
        package = mod if path.name == "__init__.py" else mod.rpartition(".")[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = package
                for _ in range(node.level - 1):
                    base = base.rpartition(".")[0]
                name = node.module or ""
                full = (f"{base}.{name}" if name else base) if node.level else name
                targets = [f"{full}.{a.name}" if f"{full}.{a.name}" in mods else full
                           for a in node.names]
            else:
                continue
            for target in targets:
                while target and target not in mods:
                    target = target.rpartition(".")[0]
                if target and target != mod:
                    graph[mod].add(target)
    return graph


def import_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan 1972, iterative)."""
    index, low, on_stack, stack, cycles = {}, {}, set(), [], []
    for root in sorted(graph):
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = len(index)
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = len(index)
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph[child]))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                comp = []
                while True:
                    top = stack.pop()
                    on_stack.discard(top)
                    comp.append(top)
                    if top == node:
                        break
                if len(comp) > 1:
                    cycles.append(sorted(comp))
    return cycles


def test_no_import_cycles_and_features_never_imports_classify():
    """The modules of features and classify import each other without cycles, and
    features imports nothing of classify (dependencies run one way)."""
    graph = import_graph(_modules())
    assert len(graph) > 40                       # the packages were found
    assert import_cycles(graph) == []
    upward = sorted((m, t) for m, ts in graph.items() for t in ts
                    if m.split(".")[0] == "features" and t.split(".")[0] == "classify")
    assert upward == []


def test_cycle_finder_finds_a_cycle():
    """The finder itself: a three-module cycle and a self-contained pair are reported."""
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}, "e": {"f"}, "f": {"e"}, "g": set()}
    assert sorted(import_cycles(graph)) == [["a", "b", "c"], ["e", "f"]]


def test_import_graph_sees_type_checking_and_relative_imports(tmp_path):
    """An import under TYPE_CHECKING, relative to the package, is an edge."""
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "one.py").write_text("from typing import TYPE_CHECKING\n"
                                "if TYPE_CHECKING:\n    from .two import Thing\n")
    (pkg / "two.py").write_text("from . import one\n")
    mods = {"pkg": pkg / "__init__.py", "pkg.one": pkg / "one.py", "pkg.two": pkg / "two.py"}
    graph = import_graph(mods)
    assert graph["pkg.one"] == {"pkg.two"} and graph["pkg.two"] == {"pkg.one"}
    assert import_cycles(graph) == [["pkg.one", "pkg.two"]]
