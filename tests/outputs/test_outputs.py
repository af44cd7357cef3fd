"""Tests of the quantity table, the display units, the renderer registry and the paper-ready wording.

External references used:
- 1 au = 149 597 870.7 km (IAU 2012 Resolution B2); 1 kpc = 1000 pc; 1 mas = 1000 µas
  (SI prefixes);
- Julian year -> MJD and ISO date: astropy.time.Time (format "jyear") as the reference;
- Schwarzschild radius of 1 M☉, 2GM☉/c² = 2.953 km: computed here from astropy.constants
  (G M☉ = 1.32712440018e20 m³ s⁻², IAU 2015 nominal value, c exact);
- contour levels 1 - exp(-s²/2) for s = 1, 2 (39.3 %, 86.5 %): the mass inside the
  s-sigma ellipse of a 2-D Gaussian (common practice, no source).

The posteriors are the simulated Gaussian clouds of tests/helpers/results.py (no sampling).
"""

from __future__ import annotations

import math
import os
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from orbitmass.model.quantities import QUANTITIES, UNITS, column_doc, display_unit
from orbitmass.outputs import figures, registry
from orbitmass.outputs.formatting import display_measurement, format_number
from orbitmass.outputs.products import write_products
from orbitmass.outputs.tables import display_rows, results_table, table_md, table_tex
from orbitmass.results import COLUMN_DOC

import tests.helpers
from tests.helpers.results import NUCLEUS, make_results

REPO_ROOT = Path(tests.helpers.__file__).resolve().parents[2]  # tests/helpers/__init__.py -> the checkout


@pytest.fixture(scope="module")
def nucleus(tmp_path_factory):
    return make_results(tmp_path_factory.mktemp("outputs_nucleus"))


@pytest.fixture(scope="module")
def wide(tmp_path_factory):
    return make_results(tmp_path_factory.mktemp("outputs_wide"), kind="wide", scatter=0.1)


# ------------------------------------------------------------------------ quantity table


def test_column_doc_is_the_quantity_table():
    assert COLUMN_DOC == column_doc()
    assert COLUMN_DOC["mass_msun"] == ("M", "M_sun", QUANTITIES["mass_msun"].meaning)
    assert COLUMN_DOC["<C>.period_yr"][1] == "yr" and COLUMN_DOC["offset_kms.<I>"][1] == "km/s"
    for q in QUANTITIES.values():
        assert q.unit in UNITS
        for rule in q.display:
            assert rule.unit in UNITS and rule.factor > 0


def test_display_units_by_magnitude():
    # the cases: a 46 kpc distance, a 0.021649 mas parallax (1 kpc = 1000 pc, 1 mas = 1000 µas)
    u, f = display_unit("distance_pc", 46190.0)
    assert (u.text, f) == ("kpc", 1e-3)
    assert display_unit("distance_pc", 8.0)[0].text == "pc"
    assert display_unit("distance_pc", 1.6e7)[0].text == "Mpc"
    u, f = display_unit("parallax_mas", 0.021649)
    assert u.text == "µas" and 0.021649 * f == pytest.approx(21.649)
    assert display_unit("parallax_mas", 3.2)[0].text == "mas"
    assert display_unit("C1.semimajor_axis_mas", 2.0e4, ["C1"])[0].text == "arcsec"
    m, u = display_measurement("distance_pc", 46190.0, 180.0, 190.0)
    assert (m.text(), u.text) == ("46.19 +0.19 -0.18", "kpc")
    # Schwarzschild radius of 1 M☉: 2GM/c² from astropy constants, about 2.95 km, shown in km
    import astropy.constants as const

    rs_au = (2 * const.GM_sun / const.c**2).to("au").value
    u, f = display_unit("schwarzschild_radius_au", rs_au)
    assert u.text == "km" and rs_au * f == pytest.approx((2 * const.GM_sun / const.c**2).to("km").value)
    assert rs_au * f == pytest.approx(2.953, abs=1e-3)
    # a 4e6 M☉ mass: R_S = 0.08 au stays in au
    assert display_unit("schwarzschild_radius_au", 0.08)[0].text == "au"
    assert display_unit("distance_pc", 46190.0, override="pc") == (UNITS["pc"], 1.0)
    with pytest.raises(ValueError, match="cannot be shown"):
        display_unit("distance_pc", 1.0, override="km")


def test_format_number_sub_year_and_fixed():
    # one day = 1/365.25 Julian yr (IAU): a one-day prior bound reads "1 d", not 0.00273785 yr
    assert format_number(1 / 365.25, column="period_yr") == "1 d"
    assert format_number(12.5, column="period_yr") == "12.5 yr"
    assert format_number(2.3e6) == "2.3 × 10^6"


# ------------------------------------------------------------------------------ tables


def test_tables_use_one_spelling_of_the_solar_mass(nucleus, tmp_path):
    paths = write_products(nucleus, tmp_path, names=["table.tex", "table.md", "report.md"])
    md = (tmp_path / "table.md").read_text(encoding="utf-8")
    report = paths.read_text(encoding="utf-8")
    tex = (tmp_path / "table.tex").read_text(encoding="utf-8")
    for text in (md, report):
        assert "M☉" in text and "M_sun" not in text and "Msun" not in text
    assert r"$M_\odot$" in tex and "Msun" not in tex
    # keys keep their unit: the machine table and COLUMN_DOC still say M_sun
    assert results_table(nucleus).set_index("parameter").loc["mass_msun", "unit"] == "M_sun"


def test_periastron_time_as_mjd_and_iso_date(nucleus):
    from astropy.time import Time

    rows = {r.parameter: r for r in display_rows(nucleus)}
    table = results_table(nucleus).set_index("parameter")
    tp = table.loc["C1.periastron_time_jyr"]
    ref = Time(tp["median"], format="jyear")
    mjd = rows["C1.periastron_time_jyr:mjd"].value
    assert float(mjd.median) == pytest.approx(ref.mjd, abs=float(mjd.minus))
    # error in days: 365.25 d per Julian year
    assert float(mjd.plus) == pytest.approx(365.25 * tp["plus"], rel=0.05)
    assert rows["C1.periastron_time_jyr:iso"].value == ref.isot[:16]
    assert rows["C1.periastron_time_jyr:mjd"].unit.text == "d"


def test_offsets_name_the_reference_instrument_and_footnote_lists_every_prior(nucleus):
    table = results_table(nucleus).set_index("parameter")
    assert table.loc["offset_kms.spec-b", "label"] == "Velocity offset, spec-b (relative to spec-a)"
    tex = table_tex(nucleus)
    foot = tex[tex.index(r"{\footnotesize") :]
    for p in nucleus.summary["priors"]:
        assert p["parameter"] in foot
    # a sub-year prior bound in days (1 d = 0.00273785 yr), no "0.00273785 yr"
    assert "0.00273785" not in foot and "[1 d, 10000 yr]" in foot
    # standard LaTeX only: the whole float is ASCII (M☉ and powers of ten in math mode)
    assert tex.isascii(), [ch for ch in tex if not ch.isascii()]
    assert r"[1000 $M_\odot$, 1$\times10^{9}$ $M_\odot$]" in foot


def test_table_params_selection(nucleus):
    table = results_table(nucleus, params=["C1.period_yr", "mass_msun", "C1.A_mas"])
    assert list(table["parameter"]) == ["mass_msun", "C1.period_yr", "C1.A_mas"]
    md = table_md(nucleus, table)
    assert md.count("\n| ") == 4  # header + three rows
    from orbitmass.exceptions import InputError

    with pytest.raises(InputError, match="unknown parameter"):
        results_table(nucleus, params=["mass_kg"])


def test_display_units_in_tables_match_figures(nucleus):
    rows = {r.parameter: r for r in display_rows(nucleus)}
    # 6400 pc -> kpc in the table; the corner axis says kpc too
    assert rows["distance_pc"].unit.text == "kpc"
    fig = figures.corner_figure(nucleus, params=["mass_msun", "distance_pc"])
    assert fig.axes[3].get_xlabel() == "$D$ [kpc]"
    x = nucleus.samples["distance_pc"].to_numpy() / 1e3
    lo, hi = fig.axes[3].get_xlim()
    assert lo < np.median(x) < hi and hi < 100  # plotted in kpc, not pc
    over = {r.parameter: r for r in display_rows(nucleus, units={"distance_pc": "pc"})}
    assert over["distance_pc"].unit.text == "pc"


# ------------------------------------------------------------------------------ figures


def test_trace_says_how_many_walkers_of_how_many(nucleus):
    fig = figures.trace_figure(nucleus, max_params=3, max_walkers=8)
    title = fig._suptitle.get_text()
    assert f"8 of {nucleus.chain.shape[1]} walkers" in title
    full = figures.trace_figure(nucleus, max_params=2, max_walkers=100)
    assert f"all {nucleus.chain.shape[1]} walkers" in full._suptitle.get_text()
    # lambda = M0 + omega named, not called a mean longitude
    lam = figures.trace_figure(nucleus, names=["C1.mean_longitude"], show_log_prob=False)
    assert lam.axes[0].get_ylabel() == r"C1: $\lambda = M_0+\omega$ [rad]"


def _extents(fig, labels):
    return [t.get_window_extent() for t in labels if t.get_text() and t.get_visible()]


def test_corner_ticks_do_not_overlap_levels_stated_truths_drawn(nucleus):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    cols = ["mass_msun", "distance_pc", "C1.period_yr", "C1.eccentricity"]
    truths = {"mass_msun": NUCLEUS["C1"].mass_msun, "C1.period_yr": NUCLEUS["C1"].period_yr}
    fig = figures.corner_figure(nucleus, params=cols, truths=truths)
    FigureCanvasAgg(fig).draw()
    renderer = fig.canvas.get_renderer()
    n = len(cols)
    axes = np.asarray(fig.axes).reshape(n, n)
    boxes = [t.get_window_extent(renderer) for ax in axes[-1] for t in ax.get_xticklabels()
             if t.get_text()]
    boxes += [t.get_window_extent(renderer) for ax in axes[1:, 0] for t in ax.get_yticklabels()
              if t.get_text()]
    assert len(boxes) >= 2 * n
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            assert not a.overlaps(b), "tick labels overlap"
    # the note is wrapped into the empty upper-right panel (no-break space before "%")
    texts = " ".join(t.get_text() for t in fig.texts).replace("\n", " ").replace("\u00a0", " ")
    assert "39.3 %" in texts and "86.5 %" in texts and "true values" in texts
    note_box = fig.texts[0].get_window_extent(renderer)
    for i in range(n):  # the note runs into no title of a diagonal panel
        assert not note_box.overlaps(axes[i, i].title.get_window_extent(renderer))
    # truth lines: corner draws a vertical line at the truth on each diagonal panel that has one
    mass_lines = [ln for ln in axes[0, 0].get_lines() if np.allclose(ln.get_xdata(), 2.3)]
    assert mass_lines, "no truth line at 2.3 (10^6 M☉) in the mass panel"
    ecc_lines = [ln for ln in axes[3, 3].get_lines() if len(set(np.ravel(ln.get_xdata()))) == 1]
    assert len(ecc_lines) == 3  # the three quantile lines only: no truth given for e
    assert 1 - math.exp(-0.5) == pytest.approx(0.3935, abs=1e-4)


def test_truth_from_results(nucleus):
    import dataclasses

    with_truth = dataclasses.replace(nucleus, info={"truth": {"mass_msun": 2.3e6}})
    fig = figures.corner_figure(with_truth, params=["mass_msun", "distance_pc"])
    assert any("true values" in t.get_text().replace("\n", " ") for t in fig.texts)
    assert "Vermillion lines" in figures.corner.caption(with_truth)
    assert "Vermillion" not in figures.corner.caption(nucleus)


# ------------------------------------------------------------------------------ report


def test_report_states_method_and_captions_every_figure(nucleus, tmp_path):
    import dataclasses

    written = registry.render_all(nucleus, tmp_path, names=["corner", "trace", "report.md"])
    md = (tmp_path / "report.md").read_text(encoding="utf-8")
    assert "## Method" in md and "Full sampling" in md and "emcee" in md
    assert md.count("![") == 2 and "contours enclose 39.3 % and 86.5 %" in md
    assert "Walker traces of the sampled variables" in md
    assert "mean argument of latitude" in md and written["report.md"][0].name == "report.md"
    # fast path with importance sampling: its diagnostic (Kish ESS, Pareto k) is stated
    summ = dict(nucleus.summary)
    summ["diagnostics"] = dict(summ["diagnostics"], linear_path={
        "sampler_3d": "importance (Student t about the mode)", "kish_ess": 3200.0,
        "n_weighted": 8000, "khat_3d": 0.21})
    fast = dataclasses.replace(nucleus, summary=summ)
    from orbitmass.outputs.reports import method_text

    text = method_text(fast)
    assert "fast path" in text and "importance sampling" in text and "3200 of 8000" in text
    assert "k = 0.21" in text
    summ["diagnostics"]["linear_path"] = {"n_steps_3d": 1200, "sampler_3d": "emcee"}
    assert "ensemble chain of 1200 steps" in method_text(dataclasses.replace(nucleus, summary=summ))


# ---------------------------------------------------------------------- renderer contract


@pytest.mark.parametrize("name", list(registry.RENDERERS))
def test_renderer_contract(name, wide, tmp_path):
    """Every registered renderer writes exactly its declared files, and nothing global changes."""
    import matplotlib

    r = registry.RENDERERS[name]
    before = {k: str(v) for k, v in matplotlib.rcParams.items()}
    backend = matplotlib.get_backend()
    paths = registry.render(name, wide, tmp_path, figures={}, unknown_option=1)
    assert sorted(p.name for p in paths) == sorted(r.files)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(r.files)
    for p in paths:
        assert p.stat().st_size > 0
        head = p.read_bytes()[:8]
        if p.suffix == ".png":
            assert head == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948:2004, 5.2)
        elif p.suffix == ".pdf":
            assert head.startswith(b"%PDF-")  # ISO 32000-1:2008, 7.5.2
        else:
            p.read_text(encoding="utf-8")
    after = {k: str(v) for k, v in matplotlib.rcParams.items()}
    assert before == after and matplotlib.get_backend() == backend
    with pytest.raises(ValueError, match="already registered"):
        registry.register(name, r.func, kind=r.kind, files=r.files)


def test_write_products_uses_no_pyplot(tmp_path):
    # in a fresh interpreter: writing every product selects no backend and leaves no pyplot
    # figure (the corner package imports pyplot itself; we never call it)
    code = textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(REPO_ROOT)!r})
        from pathlib import Path
        from tests.helpers.results import make_results
        from orbitmass.io.rundir import write_products
        res = make_results(Path({str(tmp_path / 'in')!r}), kind="wide", scatter=0.1)
        write_products(res, Path({str(tmp_path / 'out')!r}))
        import matplotlib
        plt = sys.modules.get("matplotlib.pyplot")
        print("pyplot-figures", plt.get_fignums() if plt else [])
        print("backend-set", matplotlib.rcParams._get_backend_or_none())
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         env={k: v for k, v in os.environ.items() if k != "MPLBACKEND"})
    assert "pyplot-figures []" in out.stdout and "backend-set None" in out.stdout
    names = sorted(p.name for p in (tmp_path / "out").iterdir())
    expected = sorted(f for r in registry.RENDERERS.values() for f in r.files)
    assert names == expected
    assert re.search(r"table\.ecsv", " ".join(names))


def test_orbit_marks_direction_node_periastron_and_one_time_range(nucleus):
    fig = figures.orbit_figure(nucleus, n_draws=6, n_grid=400)
    labels = [t.get_text() for sub in fig.subfigs for leg in sub.legends for t in leg.get_texts()]
    for want in ("direction of motion", "periastron", "line of nodes, ascending node"):
        assert want in labels
    assert [sub.axes[0].get_title(loc="left") for sub in fig.subfigs] == ["Companion C1", "Companion C2"]
    sky = fig.subfigs[0].axes[0]
    orbits = [ln for ln in sky.get_lines() if len(ln.get_xdata()) >= 400]
    track = np.concatenate([np.column_stack([ln.get_xdata(), ln.get_ydata()]) for ln in orbits])
    scale = np.ptp(track[:, 0])
    for marker in ("^", "D"):  # the node and the periastron lie on the drawn orbits
        (mark,) = [ln for ln in sky.get_lines() if ln.get_marker() == marker]
        xy = np.array([mark.get_xdata()[0], mark.get_ydata()[0]])
        assert np.min(np.hypot(*(track - xy).T)) < 0.02 * scale
    # the line of nodes passes through the central body and reaches past the node
    (line,) = [ln for ln in sky.get_lines() if ln.get_linestyle() == ":"]
    (node,) = [ln for ln in sky.get_lines() if ln.get_marker() == "^"]
    xs, ys = np.asarray(line.get_xdata()), np.asarray(line.get_ydata())
    assert xs[0] == pytest.approx(-xs[1]) and ys[0] == pytest.approx(-ys[1])
    nx, ny = node.get_xdata()[0], node.get_ydata()[0]
    assert abs(xs[1] * ny - ys[1] * nx) < 1e-6 * (xs[1] ** 2 + ys[1] ** 2)  # collinear
    assert np.hypot(xs[1], ys[1]) > np.hypot(nx, ny)
    # the arrow is a short step along the drawn track
    (arrow,) = [c for c in sky.texts if getattr(c, "arrow_patch", None) is not None]
    start, end = np.array(arrow.xyann), np.array(arrow.xy)
    assert 0 < np.hypot(*(end - start)) < 0.2 * scale
    # velocities have the instrument offsets removed, and the axis says so
    rv_ax = fig.subfigs[0].axes[1]
    assert r"\Delta v_\mathrm{inst}" in rv_ax.get_ylabel()
    # position and velocity residuals of C1 span one time range
    from orbitmass.outputs.figures.common import TIME_LABEL

    ranges = {ax.get_xlim() for ax in fig.subfigs[0].axes if ax.get_xlabel() == TIME_LABEL}
    assert len(ranges) == 1


def test_console_summary_text():
    from orbitmass.outputs.formatting import summary_text

    # two significant digits on the smaller error, display unit by magnitude (common practice)
    block = {"median": 4.1234e6, "q16": 4.0834e6, "q84": 4.1754e6}
    assert summary_text("mass_msun", block) == "(4.123 +0.052 -0.040) × 10^6 M☉"
    # a fixed quantity: no "(+0 / -0)"
    fixed = {"median": 8.0e3, "q16": 8.0e3, "q84": 8.0e3}
    assert summary_text("distance_pc", fixed) == "8 kpc (fixed)"


def test_stellar_mass_lengths_in_sensible_units(wide):
    # a 2 M☉ pair: R_S = 2 x 2.953 km (astropy constants, see module docstring), shown in km
    rows = {r.parameter: r for r in display_rows(wide)}
    rs = rows["schwarzschild_radius_au"]
    assert rs.unit.text == "km"
    assert float(rs.value.median) == pytest.approx(5.906, abs=0.01)
    rp = rows["B.periastron_rs"] if "B.periastron_rs" in rows else next(
        r for k, r in rows.items() if k.endswith(".periastron_rs"))
    assert rp.value.exponent >= 5 and rp.unit.text == "R_S"  # a power of ten, not 1.9e8 digits


def _with_polar_rows(res, companion: str, every: int = 2):
    """The same Results with every ``every``-th position row given as separation and angle."""
    import dataclasses

    comps = []
    for comp in res.target.companions:
        ast = comp.astrometry
        if comp.name == companion:
            east, north = ast.east_north()
            polar = np.zeros(len(ast), bool)
            polar[::every] = True
            rho = np.hypot(east, north)
            theta = np.degrees(np.arctan2(east, north)) % 360.0
            err_rho = np.where(polar, 0.5, ast.err1)
            err_theta = np.where(polar, np.degrees(0.5 / rho), ast.err2)
            ast = dataclasses.replace(ast, polar=polar, value1=np.where(polar, rho, ast.value1),
                                      value2=np.where(polar, theta, ast.value2), err1=err_rho,
                                      err2=err_theta)
            comp = dataclasses.replace(comp, astrometry=ast)
        comps.append(comp)
    return dataclasses.replace(res, target=dataclasses.replace(res.target, companions=tuple(comps)))


def test_polar_rows_marked_and_residuals_in_measured_form(nucleus):
    res = _with_polar_rows(nucleus, "C2")
    fig = figures.orbit_figure(res, n_draws=4, n_grid=200)
    labels = [t.get_text() for sub in fig.subfigs for leg in sub.legends for t in leg.get_texts()]
    assert "positions (ρ, θ; open)" in labels
    assert r"O − C in $\rho$ (open)" in labels and r"O − C in $\rho\,\Delta\theta$ (open)" in labels
    c2 = fig.subfigs[1]
    res_ax = [ax for ax in c2.axes if ax.get_ylabel() == "O − C [mas]"][0]
    # the converted rows reproduce the same positions, so rho residuals equal the radial
    # projection of the east/north residuals: |O - C| stays at the noise level (0.5 mas)
    values = np.concatenate([np.ravel(ln.get_ydata()) for ln in res_ax.get_lines()
                             if len(ln.get_ydata()) > 1 and ln.get_marker() in ("o", "s")])
    assert np.nanmax(np.abs(values)) < 3.0


def test_residuals_keep_mas_when_the_sky_panel_is_in_arcsec(wide):
    fig = figures.orbit_figure(wide, n_draws=3, n_grid=100)
    ylabels = [ax.get_ylabel() for ax in fig.axes]
    assert r"$\Delta\delta$ [arcsec]" in ylabels and "O − C [mas]" in ylabels


def test_html_report_captions_every_figure(nucleus, tmp_path):
    from html.parser import HTMLParser

    registry.render_all(nucleus, tmp_path, names=["corner", "orbit", "trace", "report.html"])

    class Captions(HTMLParser):
        def __init__(self):
            super().__init__()
            self.inside, self.captions = False, []

        def handle_starttag(self, tag, attrs):
            if tag == "figcaption":
                self.inside = True
                self.captions.append("")

        def handle_endtag(self, tag):
            if tag == "figcaption":
                self.inside = False

        def handle_data(self, data):
            if self.inside:
                self.captions[-1] += data

    p = Captions()
    p.feed((tmp_path / "report.html").read_text(encoding="utf-8"))
    assert len(p.captions) == 3
    assert "contours enclose 39.3 %" in p.captions[0]
    assert "instrument offsets removed" in p.captions[1]
    assert "walkers drawn" in p.captions[2]


def test_registry_refuses_bad_registrations():
    with pytest.raises(ValueError, match="kind"):
        registry.register("table.fits-test", lambda r, p: [], kind="sheet", files=("x",))
    with pytest.raises(ValueError, match="declares no file"):
        registry.register("table.fits-test", lambda r, p: [], kind="table", files=())
    with pytest.raises(KeyError, match="no renderer"):
        registry.render("no-such-format", None, ".")
    assert "table.fits-test" not in registry.RENDERERS
