"""Tests of orbitmass.outputs.reports: number formatting, results table, LaTeX/CSV/Markdown/HTML files.

External references used:
- the rounding rule (two significant digits on the smaller error, value to the same decimal
  place) is common practice, no source; every expected string below is worked by hand in
  the comment beside it;
- numpy.quantile for the quantiles the table reports;
- Python's html.parser (standard library) to check the HTML structure;
- pdflatex (TeX Live), when installed, to compile table.tex inside a minimal article;
- headless Chromium, when installed, to render report.html offline.

The posterior used here is not a fit: invented data are simulated with
orbitmass.demo.simulate (true anomaly and explicit rotations), and ~500 samples are drawn as a
small Gaussian cloud around the invented truth, then derived with
orbitmass.results.derive_samples.
"""

from __future__ import annotations

import math
import os
import re
import shutil
import subprocess
import textwrap
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.io.target import read_target
from orbitmass.model.parameters import ParameterSpace
from orbitmass.outputs.reports import (
    Measurement,
    choose_exponent,
    format_value,
    latex_escape,
    markdown_escape,
    measurement,
    results_table,
    write_report,
    write_tables,
)
from orbitmass.results import Results, derive_samples, quantile_block

# --------------------------------------------------------------------------- test posterior

#: invented system: a central mass with two tracked companions (numbers invented)
NUCLEUS = {
    "C1": TrueOrbit(
        mass_msun=2.3e6,
        distance_pc=6400.0,
        period_yr=11.2,
        eccentricity=0.62,
        inclination_deg=58.0,
        arg_periastron_deg=140.0,
        ascending_node_deg=75.0,
        periastron_time=2009.4,
        mass_ratio=0.05,
    ),
    "C2": TrueOrbit(
        mass_msun=2.3e6,
        distance_pc=6400.0,
        period_yr=27.5,
        eccentricity=0.3,
        inclination_deg=110.0,
        arg_periastron_deg=20.0,
        ascending_node_deg=200.0,
        periastron_time=2004.0,
    ),
}
#: invented wide pair (arcsecond orbit) plus a velocity-only companion
WIDE = {
    "B": TrueOrbit(
        mass_msun=2.0,
        distance_pc=1.2,
        period_yr=20.0,
        eccentricity=0.4,
        inclination_deg=35.0,
        arg_periastron_deg=300.0,
        ascending_node_deg=120.0,
        periastron_time=2008.0,
    ),
    "V": TrueOrbit(
        mass_msun=2.0,
        distance_pc=1.2,
        period_yr=3.0,
        eccentricity=0.2,
        inclination_deg=80.0,
        arg_periastron_deg=45.0,
        ascending_node_deg=10.0,
        periastron_time=2011.0,
    ),
}
#: invented companion tracked on an external (absolute) frame; barycentre terms invented
ABSOLUTE = {
    "A1": TrueOrbit(
        mass_msun=5.0e5,
        distance_pc=3000.0,
        period_yr=8.0,
        eccentricity=0.5,
        inclination_deg=40.0,
        arg_periastron_deg=250.0,
        ascending_node_deg=160.0,
        periastron_time=2012.5,
    ),
}
FRAME = {"x0": 3.0, "y0": -2.0, "vx0": 2.0, "vy0": -1.5, "vz0": 20.0}
OFFSET_B_KMS = 12.0
T_REF = 2010.0


def _write_nucleus(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    c1, c2 = NUCLEUS["C1"], NUCLEUS["C2"]
    t_pos = np.linspace(2001.0, 2019.0, 14)
    sim = simulate(c1, t_pos)
    write_positions_csv(
        folder / "c1_pos.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, 0.5, 14),
        sim["north_mas"] + rng.normal(0, 0.5, 14),
        0.5,
    )
    t_a = np.linspace(2002.0, 2018.0, 8)
    t_b = np.linspace(2003.5, 2017.5, 6)
    t_c = np.linspace(2004.0, 2016.0, 5)
    t_rv = np.concatenate([t_a, t_b, t_c])
    order = np.argsort(t_rv)
    sa, sb, sc = simulate(c1, t_a), simulate(c1, t_b), simulate(c1, t_c)
    rv = np.concatenate(
        [sa["rv_companion_kms"], sb["rv_companion_kms"] + OFFSET_B_KMS, sc["rv_central_kms"]]
    ) + rng.normal(0, 5.0, t_rv.size)
    inst = np.array(["spec-a"] * 8 + ["spec-b"] * 6 + ["spec-a"] * 5)
    body = np.array(["companion"] * 14 + ["central"] * 5)
    write_velocities_csv(
        folder / "c1_rv.csv", t_rv[order], rv[order], 5.0, inst[order], body[order]
    )
    t2 = np.linspace(2000.0, 2020.0, 10)
    s2 = simulate(c2, t2)
    write_positions_csv(
        folder / "c2_pos.csv",
        t2,
        s2["east_mas"] + rng.normal(0, 0.5, 10),
        s2["north_mas"] + rng.normal(0, 0.5, 10),
        0.5,
    )
    toml_name = name.replace("\\", "\\\\").replace('"', '\\"')
    text = (
        f"""
    [target]
    name = "{toml_name}"
    reference_epoch = {T_REF}

    [central]
    mass = {{ dist = "log-uniform", low = "1e3 solMass", high = "1e9 solMass" }}

    [distance]
    prior = {{ dist = "normal", mean = "6.4 kpc", sd = "0.25 kpc" }}

    [instruments.spec-a]

    [instruments.spec-b]
    offset = {{ dist = "uniform", low = "-100 km / s", high = "100 km / s" }}
    jitter = {{ dist = "log-uniform", low = "0.01 km / s", high = "20 km / s" }}

    [[companion]]
    name = "C1"
    astrometry = "c1_pos.csv"
    velocities = "c1_rv.csv"
    period = {{ dist = "log-uniform", low = "1 yr", high = "100 yr" }}

    [[companion]]
    name = "C2"
    astrometry = "c2_pos.csv"
    """
        + c2_extra
        + "\n"
    )
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def _write_wide(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    b, v = WIDE["B"], WIDE["V"]
    t_pos = np.linspace(1995.0, 2020.0, 12)
    sim = simulate(b, t_pos)
    write_positions_csv(
        folder / "b_pos.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, 5.0, 12),
        sim["north_mas"] + rng.normal(0, 5.0, 12),
        5.0,
    )
    t_rv = np.linspace(2008.0, 2014.0, 15)
    sv = simulate(v, t_rv)
    write_velocities_csv(
        folder / "v_rv.csv", t_rv, sv["rv_companion_kms"] + rng.normal(0, 0.2, 15), 0.2
    )
    text = f"""
    [target]
    name = "{name}"
    reference_epoch = {T_REF}

    [distance]
    prior = {{ dist = "fixed", value = "1.2 pc" }}

    [[companion]]
    name = "B"
    astrometry = "b_pos.csv"

    [[companion]]
    name = "V"
    velocities = "v_rv.csv"
    """
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def _write_absolute(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    a1 = ABSOLUTE["A1"]
    t_pos = np.linspace(2002.0, 2018.0, 12)
    sim = simulate(a1, t_pos)
    dt = t_pos - T_REF
    east = FRAME["x0"] + FRAME["vx0"] * dt + sim["east_mas"] + rng.normal(0, 0.3, 12)
    north = FRAME["y0"] + FRAME["vy0"] * dt + sim["north_mas"] + rng.normal(0, 0.3, 12)
    write_positions_csv(folder / "a1_pos.csv", t_pos, east, north, 0.3)
    t_rv = np.linspace(2004.0, 2016.0, 9)
    rv = FRAME["vz0"] + simulate(a1, t_rv)["rv_companion_kms"] + rng.normal(0, 3.0, 9)
    write_velocities_csv(folder / "a1_rv.csv", t_rv, rv, 3.0)
    text = f"""
    [target]
    name = "{name}"
    reference_epoch = {T_REF}

    [central]
    frame = "absolute"
    x0 = {{ dist = "normal", mean = "0 mas", sd = "10 mas" }}
    y0 = {{ dist = "normal", mean = "0 mas", sd = "10 mas" }}
    vx0 = {{ dist = "normal", mean = "0 mas / yr", sd = "5 mas / yr" }}
    vy0 = {{ dist = "normal", mean = "0 mas / yr", sd = "5 mas / yr" }}
    vz0 = {{ dist = "normal", mean = "0 km / s", sd = "50 km / s" }}

    [distance]
    prior = {{ dist = "normal", mean = "3 kpc", sd = "0.2 kpc" }}

    [[companion]]
    name = "A1"
    astrometry = "a1_pos.csv"
    velocities = "a1_rv.csv"
    """
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def _truth_values(system: dict[str, TrueOrbit]) -> dict[str, float]:
    first = next(iter(system.values()))
    values = {
        "mass_msun": first.mass_msun,
        "distance_pc": first.distance_pc,
        "offset.spec-b": OFFSET_B_KMS,
        "jitter.spec-b": 1.0,
        **FRAME,
    }
    for name, orb in system.items():
        values[f"{name}.period_yr"] = orb.period_yr
        values[f"{name}.ecc"] = orb.eccentricity
        values[f"{name}.omega"] = math.radians(orb.arg_periastron_deg)
        values[f"{name}.node"] = math.radians(orb.ascending_node_deg)
        values[f"{name}.cos_i"] = math.cos(math.radians(orb.inclination_deg))
        values[f"{name}.m0"] = 2 * math.pi * (T_REF - orb.periastron_time) / orb.period_yr
        values[f"{name}.q"] = orb.mass_ratio
    return values


def make_results(
    folder: Path,
    *,
    kind: str = "nucleus",
    name: str = "Test nucleus",
    converged: bool = True,
    summary: str = "full",
    n_steps: int = 25,
    n_walkers: int = 20,
    seed: int = 11,
    c2_extra: str = "",
    scatter: float = 1.0,
) -> Results:
    """A Results built without sampling (see the module docstring)."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    writer = {"nucleus": _write_nucleus, "wide": _write_wide, "absolute": _write_absolute}[kind]
    target = read_target(writer(folder, name, rng, c2_extra))
    space = ParameterSpace(target)
    system = {"nucleus": NUCLEUS, "wide": WIDE, "absolute": ABSOLUTE}[kind]
    theta0 = space.pack(_truth_values(system))
    space.set_centres(theta0)
    sd = np.array([0.3 if n.startswith("offset.") else 0.002 * scatter for n in space.names])
    n = n_steps * n_walkers
    theta = space.wrap_angles(theta0 + rng.normal(size=(n, space.ndim)) * sd)
    log_prob = -0.5 * np.sum(((theta - theta0) / sd) ** 2, axis=1)
    samples = derive_samples(space, theta, log_prob)
    summ: dict = {}
    if summary == "full":
        from orbitmass.model.parameters import priors_used

        summ = {
            "orbitmass_version": "0.1.0",
            "target": target.name,
            "derived": {
                c: quantile_block(samples[c].to_numpy())
                for c in samples.columns
                if "." not in c and c != "log_posterior"
            },
            "companions": {
                comp.name: {
                    c.split(".", 1)[1]: quantile_block(samples[c].to_numpy())
                    for c in samples.columns
                    if c.startswith(comp.name + ".")
                }
                for comp in target.companions
            },
            "instruments": {
                i: {
                    "offset_kms": quantile_block(samples[f"offset_kms.{i}"].to_numpy()),
                    "jitter_kms": quantile_block(samples[f"jitter_kms.{i}"].to_numpy()),
                }
                for i in space.instrument_names
            },
            "diagnostics": {
                "converged": converged,
                "n_samples": n,
                "ess_min": 812.0,
                "ess_mass": 1530.0,
                "tau_max": 31.5,
                "rhat_max": 1.0042,
                "acceptance_fraction": 0.287,
                "wall_seconds": 12.3,
                "n_steps": n_steps,
                "n_walkers": n_walkers,
                "burn": 5,
                "thin": 1,
                "multimodal": not converged,
                "period_modes": {"C1": 1 if converged else 2, "C2": 1},
                "other_modes": [{"delta_log_posterior": 3.25, "period_yr": {"C1": 5.6, "C2": 27.4}}]
                if not converged
                else [],
                "per_parameter": {
                    v: {"tau": 20.0 + i, "ess": 900.0 - i, "rhat": 1.001}
                    for i, v in enumerate(space.names)
                },
            },
            "priors": priors_used(space),
            "provenance": {
                "seed": seed,
                "data_sha256": target.data_sha256,
                "versions": {"numpy": np.__version__, "pandas": pd.__version__},
                "target_file": str(target.source),
            },
        }
    return Results(
        target=target,
        space=space,
        samples=samples,
        theta=theta,
        chain=theta.reshape(n_steps, n_walkers, space.ndim),
        log_prob=log_prob.reshape(n_steps, n_walkers),
        burn=5,
        thin=1,
        summary=summ,
        info={},
    )


@pytest.fixture(scope="module")
def nucleus(tmp_path_factory) -> Results:
    return make_results(tmp_path_factory.mktemp("nucleus"))


# ------------------------------------------------------------------------- number formatting


def test_format_value_worked_examples():
    # common practice, no source; each worked by hand:
    # smaller error 0.0987 -> two significant digits 0.099 (3rd decimal); 16.0432 -> 16.043;
    # 0.1234 -> 0.123
    assert format_value(16.0432, 0.0987, 0.1234) == ("16.043", "0.099", "0.123")
    # smaller error 0.0996 -> 0.10 (rounding reaches the next power of ten, so 2nd decimal);
    # 1.23456 -> 1.23; 0.2 -> 0.20
    assert format_value(1.23456, 0.0996, 0.2) == ("1.23", "0.10", "0.20")
    # errors 150 and 152 -> two significant digits at the tens: 150, 150; 8050 -> 8050
    assert format_value(8050.0, 150.0, 152.0) == ("8050", "150", "150")
    # half-up on the decimal digits a reader sees: 2.6745 with error 0.0123 -> 2.675
    # (binary floating point alone would give 2.674)
    assert format_value(2.6745, 0.0123, 0.0123) == ("2.675", "0.012", "0.012")
    # negative value: smaller error 0.0234 -> 0.023; -12.3456 -> -12.346; 0.0456 -> 0.046
    assert format_value(-12.3456, 0.0456, 0.0234) == ("-12.346", "0.046", "0.023")
    # large errors: 1234 +5678 -567: smaller 567 -> 570 (tens); 123456 -> 123460; 5678 -> 5680
    assert format_value(123456.0, 567.0, 5678.0) == ("123460", "570", "5680")


def test_format_value_powers_of_ten():
    # 4.1234e6 +5.2e4 -4.0e4 = (4.1234 +0.052 -0.040) x 10^6: smaller error 0.040 -> 3 decimals
    assert choose_exponent(4.1234e6, 4.0e4, 5.2e4) == 6
    assert format_value(4.1234e6, 4.0e4, 5.2e4, exponent=6) == ("4.123", "0.040", "0.052")
    m = measurement(4.1234e6, 4.0e4, 5.2e4)
    assert m == Measurement("4.123", "0.040", "0.052", 6, False)
    assert m.latex() == r"$(4.123^{+0.052}_{-0.040})\times10^{6}$"
    assert m.text() == "(4.123 +0.052 -0.040) × 10^6"
    # small numbers: 2.51e-5 +-0.13e-5 -> (2.51 +- 0.13) x 10^-5
    assert choose_exponent(2.51e-5) == -5
    assert measurement(2.51e-5, 0.13e-5, 0.13e-5).text() == "(2.51 ± 0.13) × 10^-5"
    # ordinary sizes keep no power of ten (threshold 1e-3 <= |x| < 1e5, our choice)
    assert choose_exponent(8050.0) == 0
    assert choose_exponent(99999.0) == 0
    assert choose_exponent(100000.0) == 5
    assert choose_exponent(0.001) == 0
    assert choose_exponent(0.0, 2e-6, 3e-6) == -6


def test_format_value_degenerate_inputs():
    # no error (a fixed quantity): six significant digits, errors "0"
    assert format_value(0.0, 0.0, 0.0) == ("0", "0", "0")
    assert format_value(1.0 / 3.0, 0.0, 0.0) == ("0.333333", "0", "0")
    assert format_value(float("nan"), 0.1, 0.1)[0] == "nan"
    # no "-0.00" after rounding a tiny negative value: -0.0004 with error 0.012 -> 0.000
    assert format_value(-0.0004, 0.012, 0.015) == ("0.000", "0.012", "0.015")
    assert measurement(5.0, 0.0, 0.0, fixed=True).latex() == "$5$ (fixed)"


def test_escaping():
    # LaTeX special characters (The LaTeX Companion, 2nd ed., sec. 7.1: # $ % & ~ _ ^ \ { })
    assert latex_escape("a_b & 50% {x} $") == r"a\_b \& 50\% \{x\} \$"
    assert markdown_escape("<script>*x*</script>") == r"\<script\>\*x\*\</script\>"


# ----------------------------------------------------------------------------- results table


def test_results_table_rows_and_quantiles(nucleus):
    table = results_table(nucleus)
    for col in (
        "parameter",
        "symbol",
        "unit",
        "median",
        "minus",
        "plus",
        "q2.5",
        "q16",
        "q84",
        "q97.5",
    ):
        assert col in table.columns
    params = list(table["parameter"])
    assert params[0] == "mass_msun" and "distance_pc" in params and "parallax_mas" in params
    # the first instrument is the zero point (fixed 0): a convention, not a result
    assert "offset_kms.spec-a" not in params
    assert "offset_kms.spec-b" in params and "jitter_kms.spec-b" in params
    for comp in ("C1", "C2"):
        for base in (
            "period_yr",
            "eccentricity",
            "inclination_deg",
            "arg_periastron_deg",
            "ascending_node_deg",
            "periastron_time_jyr",
            "semimajor_axis_mas",
            "semimajor_axis_au",
            "periastron_au",
            "periastron_rs",
        ):
            assert f"{comp}.{base}" in params
    assert "C1.mass_ratio" in params and "C2.mass_ratio" not in params
    mass = table.set_index("parameter").loc["mass_msun"]
    assert mass["unit"] == "M_sun"
    # quantiles against numpy.quantile of the samples (the 15.87 % and 84.13 % points)
    x = nucleus.samples["mass_msun"].to_numpy()
    q16, q50, q84 = np.quantile(x, [0.15865525393145707, 0.5, 0.8413447460685429])
    assert mass["median"] == pytest.approx(q50, rel=1e-12)
    assert mass["minus"] == pytest.approx(q50 - q16, rel=1e-9)
    assert mass["plus"] == pytest.approx(q84 - q50, rel=1e-9)
    assert mass["q97.5"] == pytest.approx(np.quantile(x, 0.975), rel=1e-12)
    # the invented truth lies inside the posterior cloud it was drawn around
    assert mass["q2.5"] < NUCLEUS["C1"].mass_msun < mass["q97.5"]


def test_results_table_without_summary_blocks(tmp_path):
    res = make_results(tmp_path, summary="none")
    table = results_table(res).set_index("parameter")
    x = res.samples["C1.period_yr"].to_numpy()
    assert table.loc["C1.period_yr", "median"] == pytest.approx(np.median(x), rel=1e-12)


def test_circular_orbit_shows_fixed_elements(tmp_path, nucleus):
    res = make_results(tmp_path, c2_extra='eccentricity = { dist = "fixed", value = 0 }')
    table = results_table(res).set_index("parameter")
    # e fixed at 0 fixes omega at 0 (input-format.md): both shown as fixed, errors zero
    for col in ("C2.eccentricity", "C2.arg_periastron_deg"):
        row = table.loc[col]
        assert bool(row["fixed"]) and row["median"] == 0.0 and row["minus"] == row["plus"] == 0.0
    assert not table.loc["C2.period_yr", "fixed"]
    out = write_tables(res, tmp_path / "out")
    assert "$0$ (fixed)" in out["tex"].read_text(encoding="utf-8")
    assert "0 (fixed)" in out["md"].read_text(encoding="utf-8")
    assert not results_table(nucleus)["fixed"].any()


# --------------------------------------------------------------------------------- the files


def _brace_balance_ok(tex: str) -> bool:
    depth = 0
    for token in re.findall(r"\\.|[{}]", tex):
        if token == "{":
            depth += 1
        elif token == "}":
            depth -= 1
            if depth < 0:
                return False
    return depth == 0


def test_write_tables(tmp_path, nucleus):
    out = tmp_path / "out"
    paths = write_tables(nucleus, out)
    assert sorted(p.name for p in out.iterdir()) == ["table.csv", "table.ecsv", "table.md", "table.tex"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # nothing outside out_dir
    tex = paths["tex"].read_text(encoding="utf-8")
    assert _brace_balance_ok(tex)
    assert tex.count(r"\begin{table}") == tex.count(r"\end{table}") == 1
    assert (
        tex.index(r"\begin{table}")
        < tex.index(r"\begin{tabular}{llll}")
        < tex.index(r"\end{tabular}")
        < tex.index(r"\end{table}")
    )
    assert r"\caption{" in tex and "Test nucleus" in tex
    assert "usepackage" not in tex and "siunitx" not in tex and "toprule" not in tex
    table = results_table(nucleus)
    body = tex[tex.index(r"\begin{tabular}") : tex.index(r"\end{tabular}")]
    data_rows = [ln for ln in body.splitlines() if ln.endswith(r"\\") and "multicolumn" not in ln]
    # + header, + the periastron time of each companion also as MJD and ISO date
    n_tp = int(table["parameter"].str.endswith(".periastron_time_jyr").sum())
    assert n_tp == 2 and len(data_rows) == len(table) + 1 + 2 * n_tp
    for ln in data_rows:  # four columns: three unescaped ampersands
        assert len(re.findall(r"(?<!\\)&", ln)) == 3
    mass = table.iloc[0]
    m = measurement(mass["median"], mass["minus"], mass["plus"])
    assert m.exponent == 6 and m.latex() in tex
    # omega/Omega note for C2, which has no velocities
    assert r"\Omega" in tex and "C2" in tex
    csv = pd.read_csv(paths["csv"])
    assert list(csv["parameter"]) == list(table["parameter"])
    np.testing.assert_allclose(csv["median"], table["median"], rtol=1e-9)
    md = paths["md"].read_text(encoding="utf-8")
    assert md.count("\n| ") == len(table) + 1 + 2 * n_tp
    assert m.text().replace("*", r"\*") in md


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex not installed")
def test_table_tex_compiles(tmp_path, nucleus):
    write_tables(nucleus, tmp_path)
    (tmp_path / "doc.tex").write_text(
        "\\documentclass{article}\n\\begin{document}\n\\input{table}\n\\end{document}\n",
        encoding="utf-8",
    )
    run = subprocess.run(
        ["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 0, run.stdout[-2000:]
    assert (tmp_path / "doc.pdf").stat().st_size > 1000
    # the table fits the text width of the standard article class
    assert "Overfull \\hbox" not in (tmp_path / "doc.log").read_text(errors="replace")


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.open: list[str] = []
        self.errors: list[str] = []
        self.srcs: list[str] = []
        self.hrefs: list[str] = []
        self.starts: list[str] = []
        self.text: list[str] = []

    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def handle_starttag(self, tag, attrs):
        self.starts.append(tag)
        a = dict(attrs)
        if "src" in a:
            self.srcs.append(a["src"])
        if "href" in a:
            self.hrefs.append(a["href"])
        if tag not in self.VOID:
            self.open.append(tag)

    def handle_endtag(self, tag):
        if not self.open or self.open[-1] != tag:
            self.errors.append(f"unexpected </{tag}> with {self.open[-3:]}")
        else:
            self.open.pop()

    def handle_data(self, data):
        self.text.append(data)


def _figure(tmp_path: Path) -> Path:
    from matplotlib.figure import Figure

    from orbitmass.outputs.style import save_figure

    fig = Figure(figsize=(2, 1.5))
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1])
    ax.set_xlabel("x [mas]")
    ax.set_ylabel("y [mas]")
    save_figure(fig, tmp_path / "corner")
    return tmp_path / "corner.png"


def test_write_report_markdown_and_html(tmp_path, nucleus):
    png = _figure(tmp_path)
    paths = write_report(nucleus, tmp_path, {"corner": "corner.png", "orbit": "orbit.png"})
    md = paths["md"].read_text(encoding="utf-8")
    page = paths["html"].read_text(encoding="utf-8")
    mass = results_table(nucleus).iloc[0]
    m = measurement(mass["median"], mass["minus"], mass["plus"])
    for text in (
        "Test nucleus",
        "## Data",
        "## Priors",
        "## Results",
        "## Diagnostics",
        "## Figures",
        "## Provenance",
        "![corner](<corner.png>)",
        "[corner (PDF)](<corner.pdf>)",
        "(file missing)",
        "812",
        "1530",
        "31.5",
        "1.0042",
        "0.287",
        "12.3",
        nucleus.target.data_sha256,
        "spec-a (13)",
        "log-uniform",
    ):
        assert text in md, text
    assert "NOT CONVERGED" not in md
    assert "Note (C2)" in md and "Note (C1)" not in md  # only C2 lacks velocities
    assert m.median in md and m.median in page
    # the HTML page: well nested, no external resource, the figure embedded
    tags = _Tags()
    tags.feed(page)
    tags.close()
    assert not tags.errors and not tags.open
    assert "script" not in tags.starts
    assert tags.srcs and all(s.startswith("data:image/png;base64,") for s in tags.srcs)
    assert not tags.hrefs
    assert "http" not in page.lower()
    import base64

    embedded = base64.b64decode(tags.srcs[0].split(",", 1)[1])
    assert embedded == png.read_bytes()
    # same content as the Markdown: the diagnostics and data rows
    text = "".join(tags.text)
    for word in ("spec-a (13)", "spec-b (6)", "central body: 5 rows", "812", "1.0042"):
        assert word in text and word in md


def test_report_not_converged_and_multimodal(tmp_path):
    res = make_results(tmp_path, converged=False)
    paths = write_report(res, tmp_path / "out", {})
    md = paths["md"].read_text(encoding="utf-8")
    page = paths["html"].read_text(encoding="utf-8")
    assert "> **WARNING:** NOT CONVERGED" in md
    assert "MULTIMODAL" in md and "separate walker groups in period: C1 = 2, C2 = 1" in md
    assert "Δ ln p below the best = 3.25, period \\[yr\\]: C1 = 5.6, C2 = 27.4" in md
    assert page.count('class="warn"') >= 3
    assert "No figures were made." in md


def test_report_with_missing_summary_keys(tmp_path):
    res = make_results(tmp_path, summary="none")
    paths = write_report(res, tmp_path / "out", {})
    md = paths["md"].read_text(encoding="utf-8")
    assert "not recorded" in md
    assert "| converged | n/a |" in md
    write_tables(res, tmp_path / "out")


def test_user_text_is_escaped(tmp_path):
    name = "<script>alert('x')</script> & $M_1$ 50%"
    res = make_results(tmp_path, name=name)
    out = tmp_path / "out"
    paths = write_report(res, out, {})
    tpaths = write_tables(res, out)
    page = paths["html"].read_text(encoding="utf-8")
    assert "<script>" not in page and "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page
    md = paths["md"].read_text(encoding="utf-8")
    assert "<script>" not in md and r"\<script\>" in md
    tex = tpaths["tex"].read_text(encoding="utf-8")
    assert r"\textless{}script\textgreater{}" in tex and r"\& \$M\_1\$ 50\%" in tex
    assert _brace_balance_ok(tex)


def _chromium() -> str | None:
    for cand in ("/usr/bin/chromium", "chromium", "chromium-browser", "google-chrome"):
        path = (
            shutil.which(cand)
            if not os.path.isabs(cand)
            else (cand if os.path.exists(cand) else None)
        )
        if path:
            return path
    return None


@pytest.mark.browser
@pytest.mark.skipif(_chromium() is None, reason="headless Chromium not installed")
def test_report_html_renders_in_headless_chromium(tmp_path, nucleus):
    _figure(tmp_path)
    paths = write_report(nucleus, tmp_path, {"corner": "corner.png"})
    profile = tmp_path / "profile"
    cmd = [
        _chromium(),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={profile}",
        "--dump-dom",
        paths["html"].as_uri(),
    ]
    run = subprocess.run(cmd, capture_output=True, text=True, timeout=90)
    assert run.returncode == 0, run.stderr[-2000:]
    dom = run.stdout
    mass = results_table(nucleus).iloc[0]
    m = measurement(mass["median"], mass["minus"], mass["plus"])
    assert "<h1>orbitmass report: Test nucleus</h1>" in dom
    assert m.median in dom and "data:image/png;base64," in dom
