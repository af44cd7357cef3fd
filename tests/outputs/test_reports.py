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

import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

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
from orbitmass.results import Results

from tests.helpers.results import NUCLEUS, make_results


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
