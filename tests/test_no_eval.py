"""No code path evaluates user text: a scan of the package source, plus runtime checks.

The scan reads every module of the package with :mod:`tokenize` (Python's own lexer), so
words inside strings, docstrings and comments are not mistaken for code. Banned:
calls of ``eval``/``exec``/``__import__``/builtin ``compile`` (and ``.eval(``/``.query(``
methods, which evaluate expression strings in pandas), unpickling loaders
(``pickle``/``dill``/``cloudpickle``/``marshal``/``shelve``/``joblib`` ``load*``,
``read_pickle``), the unsafe YAML loaders (``yaml.load``, ``unsafe_load``,
``full_load``) and ``allow_pickle=True``. Which calls run untrusted code is from the
Python library documentation (pickle: "Warning: The pickle module is not secure";
PyYAML: ``yaml.load`` without a safe loader constructs arbitrary objects; NumPy:
``numpy.load`` with ``allow_pickle=True`` may execute code).
"""

from __future__ import annotations

import ast
import io
import tokenize
from pathlib import Path

import pytest

import orbitmass
from orbitmass.exceptions import InputError
from orbitmass.io.tables import velocities_from_bytes
from orbitmass.io.target import read_target

PACKAGE = Path(orbitmass.__file__).parent
SOURCES = sorted(PACKAGE.rglob("*.py"))

CALLS = {"eval", "exec", "__import__", "compile", "query"}
UNPICKLERS = {"pickle", "cPickle", "dill", "cloudpickle", "marshal", "shelve", "joblib"}
UNSAFE_YAML = {"load", "unsafe_load", "full_load", "load_all", "unsafe_load_all", "full_load_all"}

# The one place allowed to unpickle: the batch worker and the child process it starts for a
# per-target time limit exchange the task and its result as pickles over the child's stdin and a
# private temporary file (mkstemp, mode 0600) that both create and remove themselves; no byte of
# it comes from a user's file. Any other unpickling in the package fails the scan.
TRUSTED_PICKLE_FILES = {"batch/task.py": "task and result exchanged with the worker's own child process"}


def code_tokens(text: str) -> list[tokenize.TokenInfo]:
    """Tokens that are code: no comments, strings, or layout."""
    skip = {tokenize.COMMENT, tokenize.STRING, tokenize.NL, tokenize.NEWLINE, tokenize.INDENT,
            tokenize.DEDENT, tokenize.ENCODING, tokenize.ENDMARKER}
    if hasattr(tokenize, "FSTRING_MIDDLE"):  # Python >= 3.12 splits f-strings
        skip |= {tokenize.FSTRING_START, tokenize.FSTRING_MIDDLE, tokenize.FSTRING_END}
    return [t for t in tokenize.generate_tokens(io.StringIO(text).readline) if t.type not in skip]


def violations(text: str) -> list[str]:
    """Banned constructs in Python source ``text``, as 'line: what'."""
    toks = code_tokens(text)
    found = []
    for k, t in enumerate(toks):
        nxt = toks[k + 1].string if k + 1 < len(toks) else ""
        prev = toks[k - 1].string if k else ""
        before = toks[k - 2].string if k >= 2 else ""
        if t.type != tokenize.NAME:
            continue
        if t.string in CALLS and nxt == "(":
            # builtin compile(...) runs code; re.compile(...) does not; .eval/.query of pandas do
            if t.string == "compile" and prev == ".":
                continue
            if t.string == "query" and prev != ".":
                continue
            found.append(f"{t.start[0]}: {t.string}(")
        if prev == "." and before in UNPICKLERS and t.string.startswith(("load", "Unpickler")):
            found.append(f"{t.start[0]}: {before}.{t.string}")
        if t.string == "read_pickle":
            found.append(f"{t.start[0]}: read_pickle")
        if prev == "." and before == "yaml" and t.string in UNSAFE_YAML:
            found.append(f"{t.start[0]}: yaml.{t.string}")
        if t.string == "allow_pickle" and nxt == "=" and k + 2 < len(toks) \
                and toks[k + 2].string == "True":
            found.append(f"{t.start[0]}: allow_pickle=True")
    return found


def test_scanner_finds_each_banned_construct():
    # the scan itself must be able to fail: each line below is one violation
    bad = "\n".join([
        "x = eval(text)", "exec(code)", "m = __import__(name)", "c = compile(src, 'f', 'exec')",
        "df.query(expr)", "df.eval(expr)", "pickle.load(fh)", "pickle.loads(b)", "dill.load(fh)",
        "u = pickle.Unpickler(fh)", "pd.read_pickle(p)", "yaml.load(s)", "yaml.full_load(s)",
        "yaml.unsafe_load(s)", "np.load(p, allow_pickle=True)", "marshal.loads(b)",
        "joblib.load(p)",
    ])
    found = violations(bad)
    assert [int(f.split(":")[0]) for f in found] == list(range(1, 18)), found


def test_scanner_ignores_words_in_strings_comments_and_safe_calls():
    ok = '\n'.join([
        '"""Never call eval(text) or pickle.load(fh)."""', "# exec(code) would be wrong",
        "pattern = re.compile(r'x')", "doc = yaml.safe_load(s)", "a = np.load(p)",
        "b = np.load(p, allow_pickle=False)", "evaluate(x)", "msg = f'eval({x})'",
        "query = 3", "json.loads(s)", "tomllib.loads(s)",
    ])
    assert violations(ok) == []


def test_package_source_has_no_code_evaluation():
    assert len(SOURCES) > 10  # the package really was found
    problems = {str(p.relative_to(PACKAGE)): v for p in SOURCES
                if (v := violations(p.read_text(encoding="utf-8")))}
    for name in TRUSTED_PICKLE_FILES:  # only pickle.loads may appear there, nothing else
        problems[name] = [v for v in problems.get(name, []) if not v.endswith("pickle.loads")]
    assert {k: v for k, v in problems.items() if v} == {}


def test_no_third_party_toml_or_yaml_parser_imported():
    # TOML comes from the standard library's tomllib (Python >= 3.11), which only parses data
    banned = {"toml", "tomli", "tomlkit", "yaml", "ruamel", "pickle", "dill", "cloudpickle",
              "marshal", "shelve"}
    imported = {}
    for path in SOURCES:
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name.split(".")[0] for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                names = [node.module.split(".")[0]]
            for name in names:
                if name in banned and not (str(path.relative_to(PACKAGE)) in TRUSTED_PICKLE_FILES
                                           and name in ("pickle", "cloudpickle")):
                    imported.setdefault(str(path.relative_to(PACKAGE)), []).append(name)
    assert imported == {}


def test_target_reader_parses_with_tomllib_loads():
    tree = ast.parse((PACKAGE / "io" / "target.py").read_text(encoding="utf-8"))
    imports = {a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names}
    calls = {f"{n.func.value.id}.{n.func.attr}" for n in ast.walk(tree)
             if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute)
             and isinstance(n.func.value, ast.Name)}
    assert "tomllib" in imports
    assert "tomllib.loads" in calls


def test_read_target_really_goes_through_tomllib(tmp_path, monkeypatch):
    import tomllib

    seen = []
    real = tomllib.loads

    def spy(text, **kw):
        seen.append(text)
        return real(text, **kw)

    monkeypatch.setattr(tomllib, "loads", spy)
    (tmp_path / "rv.csv").write_text("jyear,rv_kms,rv_err_kms\n2020,1,1\n", encoding="utf-8")
    toml = ('[distance]\nprior = { dist = "normal", mean = "8 kpc", sd = "1 kpc" }\n'
            '[[companion]]\nname = "C1"\nvelocities = "rv.csv"\n')
    (tmp_path / "t.toml").write_text(toml, encoding="utf-8")
    read_target(tmp_path / "t.toml")
    assert seen == [toml]


INJECTIONS = [
    "__import__('pathlib').Path('{marker}').touch()",
    "exec(\"open('{marker}', 'w').close()\")",
    "{{ __import__('os').system('touch {marker}') }}",
]


@pytest.mark.parametrize("payload", INJECTIONS)
def test_code_in_target_strings_is_only_text(tmp_path, payload):
    marker = tmp_path / "pwned"
    code = payload.format(marker=marker).replace("\\", "\\\\").replace('"', '\\"')
    (tmp_path / "rv.csv").write_text("jyear,rv_kms,rv_err_kms\n2020,1,1\n", encoding="utf-8")
    toml = (f'[target]\nname = "{code}"\n'
            '[distance]\nprior = { dist = "normal", mean = "8 kpc", sd = "1 kpc" }\n'
            '[[companion]]\nname = "C1"\nvelocities = "rv.csv"\n')
    (tmp_path / "t.toml").write_text(toml, encoding="utf-8")
    t = read_target(tmp_path / "t.toml")
    assert t.name == payload.format(marker=marker)  # kept verbatim as the (free-text) title
    # as a companion name it is refused by the name character set, never evaluated
    (tmp_path / "t.toml").write_text(toml.replace('"C1"', f'"{code}"'), encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_target(tmp_path / "t.toml")
    assert info.value.key == "companion[0].name"
    # the same text where a quantity is expected is an input error, never evaluated
    bad = toml.replace('"8 kpc"', f'"{code}"')
    (tmp_path / "t.toml").write_text(bad, encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_target(tmp_path / "t.toml")
    assert info.value.key == "distance.prior.mean"
    assert not marker.exists()


@pytest.mark.parametrize("payload", INJECTIONS)
def test_code_in_table_cells_is_only_text(tmp_path, payload):
    marker = tmp_path / "pwned"
    cell = '"' + payload.format(marker=marker).replace('"', '""') + '"'  # CSV quoting
    with pytest.raises(InputError) as info:
        velocities_from_bytes(f"jyear,rv_kms,rv_err_kms\n2020,{cell},1\n".encode(), "x.csv")
    assert info.value.key == "rv_kms" and info.value.line == 2
    with pytest.raises(InputError) as info:  # not a valid instrument name: refused as text
        velocities_from_bytes(f"jyear,rv_kms,rv_err_kms,instrument\n2020,1,1,{cell}\n".encode(),
                              "y.csv")
    assert info.value.key == "instrument" and info.value.line == 2
    assert not marker.exists()
