"""The package's own structure rules, read from the source with ``ast``.

Rules (DEVELOPERS.md, "Map of the package"): imports run one way through the
layers below; no import cycles; imports inside functions only for optional
dependencies or start-up time (each one listed in ``LOCAL_IMPORTS_ALLOWED``
with its reason); no module imports another module's private names; no module
over 600 lines without a reason stated in its docstring; the old flat module
paths still import, with a deprecation warning, for one release. The test tree
mirrors the package (DEVELOPERS.md, "Tests"): see ``TOP_LEVEL_TESTS`` below.
Common practice, no source: these are this project's conventions.
"""

from __future__ import annotations

import ast
import importlib
import sys
import warnings
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "orbitmass"
TESTS = Path(__file__).resolve().parent

# rank of each top-level part; a module may import only from parts of lower or equal rank
RANK = {
    "exceptions": 0, "_version": 0, "units": 1, "_atomic": 1, "_compat": 1,
    "core": 2, "model": 3, "results": 4, "io": 5, "outputs": 5, "inference": 6, "fit": 7,
    "compare": 8, "batch": 8, "forecast": 6, "demo": 9, "cli": 10,
}

# module -> imported orbitmass module -> why the import is inside a function (start-up time)
LOCAL_IMPORTS_ALLOWED = {
    "orbitmass.cli.compare": {"orbitmass.compare": "start-up time of every other command"},
    "orbitmass.cli.demo": {"orbitmass.demo.run": "start-up time of every other command"},
    "orbitmass.fit": {"orbitmass.outputs.plots": "start-up time: matplotlib only when a figure is asked for"},
}
OPTIONAL = ("dask", "distributed", "pyarrow", "arviz", "numba", "tqdm", "cloudpickle", "corner")


def _modules():
    for path in sorted(PKG.rglob("*.py")):
        rel = path.relative_to(PKG.parent).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        yield ".".join(parts), path


def _part(modname: str) -> str | None:
    bits = modname.split(".")
    return bits[1] if len(bits) > 1 else None


def _imports(tree: ast.AST, modname: str, is_pkg: bool):
    """(imported module, names, is_local, lineno) for every import in the module."""
    out = []

    def visit(node, local):
        for child in ast.iter_child_nodes(node):
            inner = local or isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef))
            if isinstance(child, ast.Import):
                for alias in child.names:
                    out.append((alias.name, [], inner, child.lineno))
            elif isinstance(child, ast.ImportFrom):
                if child.level:
                    base = modname.split(".") if is_pkg else modname.split(".")[:-1]
                    base = base[: len(base) - (child.level - 1)]
                    mod = ".".join(base + ([child.module] if child.module else []))
                else:
                    mod = child.module or ""
                out.append((mod, [a.name for a in child.names], inner, child.lineno))
            visit(child, inner)

    visit(tree, False)
    return out


def _graph():
    mods = dict(_modules())
    edges = {}
    for name, path in mods.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        edges[name] = (tree, _imports(tree, name, path.name == "__init__.py"))
    return mods, edges


MODS, EDGES = _graph()


def test_imports_run_one_way():
    bad = []
    for name, (_, imports) in EDGES.items():
        src = _part(name)
        if src is None or src in ("__main__",):
            continue
        for mod, _names, local, line in imports:
            if not mod.startswith("orbitmass.") and mod != "orbitmass":
                continue
            dst = _part(mod)
            if dst is None:  # `from orbitmass import __version__`
                continue
            if RANK.get(dst, 99) > RANK.get(src, 99):
                bad.append(f"{name}:{line} imports {mod} (upward: {src} -> {dst})")
    assert not bad, "\n".join(bad)


def test_no_import_cycles_between_modules():
    graph = {}
    for name, (_, imports) in EDGES.items():
        deps = set()
        for mod, names, _local, _line in imports:
            if mod.startswith("orbitmass"):
                for cand in [f"{mod}.{n}" for n in names] + [mod]:
                    if cand in MODS and cand != name:
                        deps.add(cand)
                        break
        graph[name] = deps
    # ignore package __init__ re-exports importing their own children
    for name in graph:
        graph[name] = {d for d in graph[name] if not d.startswith(name + ".")}
    state, stack, cycles = {}, [], []

    def dfs(node):
        state[node] = 1
        stack.append(node)
        for dep in graph.get(node, ()):
            if state.get(dep) == 1:
                cycles.append(" -> ".join(stack[stack.index(dep):] + [dep]))
            elif dep not in state:
                dfs(dep)
        stack.pop()
        state[node] = 2

    for node in graph:
        if node not in state:
            dfs(node)
    assert not cycles, "\n".join(cycles)


def test_function_level_imports_only_where_allowed():
    """Inside a function: optional dependencies, or a heavy library for start-up time, said on the line."""
    bad = []
    for name, (_, imports) in EDGES.items():
        lines = MODS[name].read_text(encoding="utf-8").splitlines()
        for mod, _names, local, line in imports:
            if not local:
                continue
            top = mod.split(".")[0]
            text = lines[line - 1]
            if mod in LOCAL_IMPORTS_ALLOWED.get(name, {}):
                continue
            if top == "orbitmass":
                bad.append(f"{name}:{line} imports {mod} inside a function")
            elif top not in OPTIONAL and "start-up" not in text and "optional" not in text:
                bad.append(f"{name}:{line} imports {mod} inside a function without saying why on the line")
    assert not bad, "\n".join(bad)


def test_no_private_names_across_modules():
    bad = []
    for name, (_, imports) in EDGES.items():
        for mod, names, _local, line in imports:
            if not mod.startswith("orbitmass") or mod == name:
                continue
            for n in names:
                if n.startswith("_") and not n.startswith("__"):
                    bad.append(f"{name}:{line} imports private {mod}.{n}")
    assert not bad, "\n".join(bad)


def test_modules_stay_readable_in_length():
    long = []
    for name, path in MODS.items():
        n_lines = len(path.read_text(encoding="utf-8").splitlines())
        if n_lines <= 600:
            continue
        doc = ast.get_docstring(EDGES[name][0]) or ""
        if "600 lines" not in doc.lower() and "600-line" not in doc.lower():
            long.append(f"{name}: {n_lines} lines and no reason in its docstring")
    assert not long, "\n".join(long)


@pytest.mark.parametrize("old", sorted(importlib.import_module("orbitmass._compat").MOVED_MODULES))
def test_old_module_paths_import_with_a_deprecation_warning(old):
    from orbitmass import OrbitmassDeprecationWarning
    from orbitmass._compat import MOVED_MODULES

    saved = sys.modules.pop(old, None)
    try:
        with pytest.warns(OrbitmassDeprecationWarning, match="has moved to"):
            module = importlib.import_module(old)
        assert module is importlib.import_module(MOVED_MODULES[old])
    finally:
        sys.modules.pop(old, None)
        if saved is not None:
            sys.modules[old] = saved


def test_old_model_names_warn_and_resolve():
    from orbitmass import OrbitmassDeprecationWarning
    from orbitmass.core import orbit

    with pytest.warns(OrbitmassDeprecationWarning):
        from orbitmass.model import thiele_innes  # noqa: F401
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import orbitmass.model as m
        assert m.thiele_innes is orbit.thiele_innes


# ----------------------------------------------------------------------------- the test tree
# A test of orbitmass/<sub>/... lives in tests/<sub>/ (deeper folders only where the package has
# the same subpackage), so a reader finds the tests of a module beside its siblings' tests.
# At tests/ top level: tests of a top-level module, named test_<module>[_...].py (results, fit,
# units, _atomic as test_atomic, ...), and the tests that belong to no single subpackage:
TOP_LEVEL_TESTS = {
    "test_package_structure.py": "rules over the whole package and the test tree",
    "test_no_eval.py": "a scan of every module of the package",
    "test_bench_predict.py": "benchmarks/ (outside the package)",
    "test_benchmarks_smoke.py": "benchmarks/ (outside the package)",
}
# folders of tests/ that mirror no subpackage, and hold no tests
NON_MIRROR_FOLDERS = {"helpers": "builders shared by test modules of several folders"}


def _test_files():
    return sorted(p for p in TESTS.rglob("test_*.py") if "__pycache__" not in p.parts)


def test_test_files_live_in_the_mirrored_tree():
    top_modules = {p.stem.lstrip("_") for p in PKG.glob("*.py") if p.stem != "__init__"}
    files = _test_files()
    assert len(files) > 20  # the rule is checked over the real tree, not an empty glob
    bad = []
    for path in files:
        rel = path.relative_to(TESTS)
        if len(rel.parts) == 1:
            subject = rel.stem[len("test_"):]
            if rel.name in TOP_LEVEL_TESTS or any(subject == m or subject.startswith(m + "_")
                                                  for m in top_modules):
                continue
            bad.append(f"tests/{rel}: a flat test file; move it to tests/<subpackage>/ (or, for a "
                       "test of no single subpackage, list it in TOP_LEVEL_TESTS with the reason)")
        elif rel.parts[0] in NON_MIRROR_FOLDERS:
            bad.append(f"tests/{rel}: tests/{rel.parts[0]} holds shared builders, not tests")
        elif not (PKG.joinpath(*rel.parts[:-1]) / "__init__.py").is_file():
            bad.append(f"tests/{rel}: orbitmass/{'/'.join(rel.parts[:-1])} is not a subpackage")
    assert not bad, "\n".join(bad)


def test_every_test_folder_is_a_package():
    # with __init__.py in every folder, pytest's default (prepend) import mode imports
    # tests/core/test_x.py as tests.core.test_x, so two folders may hold the same basename
    missing = sorted(str(d.relative_to(TESTS.parent)) for d in [TESTS, *TESTS.rglob("*")]
                     if d.is_dir() and d.name != "__pycache__" and any(d.glob("*.py"))
                     and not (d / "__init__.py").is_file())
    assert not missing, f"test folders without __init__.py: {missing}"


def test_tests_import_no_other_test_module():
    # shared builders live in tests/helpers: importing a test module or conftest from another
    # ties the two files' locations together and breaks when either moves
    bad = []
    for path in [*_test_files(), TESTS / "conftest.py"]:
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                names = [node.module or ""] + [f"{node.module or ''}.{a.name}" for a in node.names]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            else:
                continue
            for name in names:
                last = name.split(".")[-1]
                if last.startswith("test_") or last == "conftest":
                    bad.append(f"tests/{path.relative_to(TESTS)}:{node.lineno} imports {name}")
    assert not bad, "\n".join(bad)
