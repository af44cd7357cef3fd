"""Wording of tables, reports and the demo's console summary for a paper.

External references used:
- 1 kpc = 1000 pc (SI prefixes), checked with astropy.units;
- the sampled phase λ = M₀ + ω is the mean argument of latitude; the classical mean
  longitude adds the node Ω (common practice, no source).

The posteriors are the simulated Gaussian clouds of tests/helpers/results.py (no sampling).
"""

from __future__ import annotations

import argparse
import re

import astropy.units as u
import numpy as np
import pytest

from orbitmass.outputs.reports import write_report
from orbitmass.outputs.tables import display_rows, priors, table_tex

from tests.helpers.results import NUCLEUS, make_results


@pytest.fixture(scope="module")
def nucleus(tmp_path_factory):
    return make_results(tmp_path_factory.mktemp("wording_nucleus"))


def test_distance_prior_in_the_unit_of_the_result(nucleus):
    # the 6400 +- 250 pc prior of the simulated nucleus is shown in kpc, as the 6.4 kpc result is
    stored = {p["parameter"]: p["prior"] for p in nucleus.summary["priors"]}
    assert stored["distance"] == "normal(mean 6400 pc, sd 250 pc)"  # summary.json keeps pc
    shown = {p["parameter"]: p["prior"] for p in priors(nucleus)}
    mean, sd = (float(x) for x in re.fullmatch(r"normal\(mean (\S+) kpc, sd (\S+) kpc\)",
                                                 shown["distance"]).groups())
    assert (mean * u.kpc).to_value(u.pc) == pytest.approx(6400.0)
    assert (sd * u.kpc).to_value(u.pc) == pytest.approx(250.0)
    rows = {r.parameter: r for r in display_rows(nucleus)}
    assert rows["distance_pc"].unit.text == "kpc"
    # the LaTeX footnote says the same, in ASCII
    tex = table_tex(nucleus)
    foot = tex[tex.index(r"{\footnotesize"):]
    assert "mean 6.4 kpc, sd 0.25 kpc" in foot and tex.isascii()
    # other rows untouched
    assert shown["C1 period"] == "log-uniform on [1 yr, 100 yr] (rest frame)"


def _unescape(cell: str) -> str:
    """A Markdown table cell as plain text (the report escapes _ [ ] | with a backslash)."""
    return re.sub(r"\\(.)", r"\1", cell.strip())


def test_diagnostics_table_names_each_sampled_variable_by_its_symbol(nucleus, tmp_path):
    paths = write_report(nucleus, tmp_path, {})
    md = paths["md"].read_text(encoding="utf-8")
    part = md[md.index("Per sampled variable"):]
    part = part[:part.index("\n## ")] if "\n## " in part else part
    assert "| Variable | Symbol | τ | ESS | R-hat |" in part
    assert "λ, the mean argument of latitude" in part.splitlines()[0]
    rows = [ln.split("|")[1:3] for ln in part.splitlines() if ln.startswith("| ")][1:]
    symbols = {_unescape(k): _unescape(s) for k, s in rows}
    assert symbols["C1.mean_longitude"] == "C1: λ = M₀ + ω [rad]"
    assert symbols["ln_mass"] == "ln(M/M☉)" and symbols["C1.cos_i"] == "C1: cos i"
    assert set(symbols) == set(nucleus.summary["diagnostics"]["per_parameter"])
    assert all(s and "_longitude" not in s for s in symbols.values()), symbols


def test_demo_console_summary_one_unit_spelling_and_display_units(monkeypatch, capsys, nucleus, tmp_path):
    # the demo's console lines: M☉ everywhere (never "Msun"), no Python float spelling ("e+06"),
    # the invented truth in the same display unit as the fitted value (kpc beside kpc)
    from orbitmass.cli import demo as cli_demo
    from orbitmass.demo import run as demo_run

    truth = NUCLEUS["C1"]
    rel = {"factors": {"redshift_factor": {"median": 0.7, "q16": 0.45, "q84": 0.95}},
           "mass_msun": {"keplerian": {"median": 2.37e6, "q16": 2.34e6, "q84": 2.40e6},
                         "shift": 7.15e4, "shift_sigma": 1.9},
           "distance_pc": {"shift": 320.0, "shift_sigma": 1.5}, "figure": [str(tmp_path / "r.png")]}
    fake = [demo_run.DemoResult(name="nucleus", run_dir=tmp_path, truth=truth, summary=nucleus.summary,
                                relativity=rel)]
    monkeypatch.setattr(demo_run, "run_demo", lambda *a, **k: fake)
    args = argparse.Namespace(out=str(tmp_path / "demo"), seed=1, overwrite=False, no_progress=True)
    assert cli_demo.run(args) == 0
    out = capsys.readouterr().out
    assert "Msun" not in out and not re.search(r"\de[+-]\d", out), out
    dist_line = next(ln for ln in out.splitlines() if ln.strip().startswith("distance:"))
    assert dist_line.count("kpc") == 2 and "invented truth 6.4 kpc" in dist_line
    mass_line = next(ln for ln in out.splitlines() if ln.strip().startswith("total mass:"))
    assert "invented truth 2.3 × 10^6 M☉" in mass_line
    kep = next(ln for ln in out.splitlines() if "Keplerian fit" in ln)
    assert "shifted by +71500 M☉ (+1.9 sigma)" in kep and "shifted by +320 pc (+1.5 sigma)" in kep


def test_comparison_page_spells_the_solar_mass_once_and_gives_the_distance_in_kpc(nucleus):
    # comparison.md: M☉ in every header (msun only in JSON keys); the joint distance of the
    # simulated nucleus (6.4 kpc, 1 kpc = 1000 pc) in kpc as in the run's own report
    from orbitmass.compare import MassPosterior, compare
    from orbitmass.compare.report import markdown

    rng = np.random.default_rng(4)
    runs = [MassPosterior.from_samples("north", rng.normal(2.3e6, 0.1e6, 4000)),
            MassPosterior.from_samples("south", rng.normal(2.25e6, 0.15e6, 4000))]
    joint = MassPosterior.from_results(nucleus, "joint refit")
    page = markdown(compare(runs, combined=joint, seed=3))
    assert "M_sun" not in page and "Msun" not in page and "[M☉]" in page
    line = next(ln for ln in page.splitlines() if ln.startswith("Joint distance:"))
    value = float(re.match(r"Joint distance: (\d+(?:\.\d+)?) ", line).group(1))
    assert line.rstrip(".").endswith("kpc")
    median_pc = float(np.median(nucleus.samples["distance_pc"]))
    assert (value * u.kpc).to_value(u.pc) == pytest.approx(median_pc, rel=0.01)


def test_joint_target_message_on_different_distances_is_whole_and_plain(tmp_path):
    # the refusal to merge two runs with different distance priors: a whole sentence that names
    # both priors in words (no Python object spelling) and the way out, in library wording
    from orbitmass.compare import combined_target
    from orbitmass.exceptions import InputError
    from orbitmass.io.target import read_target

    from tests.helpers.comparison import two_datasets

    pa, pb = two_datasets(tmp_path, np.random.default_rng(1),
                           distance_b='prior = { dist = "normal", mean = "9 kpc", sd = "0.5 kpc" }')
    with pytest.raises(InputError) as err:
        combined_target([read_target(pa), read_target(pb)], labels=["A", "B"])
    text = err.value.reason
    for internal in ("Distance(", "Normal(", "Uniform(", "np.float64", "=None"):
        assert internal not in text, text
    assert "normal(mean 9000 pc, sd 500 pc)" in text  # 9 kpc = 9000 pc (SI prefixes)
    assert text.endswith("(one of 'A', 'B')") and "--priors-from" not in text


def test_cli_compare_names_its_own_flag_for_the_priors_choice(monkeypatch, tmp_path):
    # the command line says --priors-from where the library says priors_from (never both)
    import orbitmass.compare as compare_pkg
    from orbitmass.cli import compare as cli_compare
    from orbitmass.exceptions import InputError

    def refuse(*_a, **_k):
        raise InputError("runs 'A' and 'B' have different distance information (x vs y); a joint fit needs "
                         "one: name the run whose distance information to use with priors_from (one of 'A', 'B')",
                         key="distance")

    monkeypatch.setattr(compare_pkg, "compare_folders", refuse)
    args = argparse.Namespace(run_dirs=[str(tmp_path / "a"), str(tmp_path / "b")], label=None, reference=[],
                              refit=True, same_companion="rename", priors_from=None, seed=1, max_steps=10,
                              overwrite=False, no_progress=True, out=str(tmp_path / "c"))
    with pytest.raises(InputError) as err:
        cli_compare.run(args)
    text = str(err.value)
    assert text.startswith("'distance': ") and "with --priors-from LABEL (one of 'A', 'B')" in text
    assert "priors_from" not in text


def test_demo_prints_orbitmass_warnings_as_one_line_without_source_code(monkeypatch, capsys, nucleus, tmp_path):
    # a warning raised during the demo fits reaches the user as "warning: ..." once, not as
    # Python's file:line report followed by the source line of the call
    import warnings

    from orbitmass.cli import demo as cli_demo
    from orbitmass.demo import run as demo_run
    from orbitmass.exceptions import DegeneracyWarning

    def fake_run(*_a, **_k):
        for _ in range(2):
            warnings.warn("B: without velocities (omega, Omega) fit equally", DegeneracyWarning, stacklevel=1)
        return [demo_run.DemoResult(name="nucleus", run_dir=tmp_path, truth=NUCLEUS["C1"], summary=nucleus.summary)]

    monkeypatch.setattr(demo_run, "run_demo", fake_run)
    args = argparse.Namespace(out=str(tmp_path / "demo"), seed=1, overwrite=False, no_progress=True)
    assert cli_demo.run(args) == 0
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert lines == ["warning: B: without velocities (omega, Omega) fit equally"], err
