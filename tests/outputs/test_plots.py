"""Tests of orbitmass.outputs.plots and orbitmass.outputs.style: structure of the returned figures and files.

External references used:
- the sky-plane convention (east = increasing right ascension to the left, north up) is
  the usual orientation of sky images and visual-binary orbit plots (common practice, no
  source);
- matplotlib's own objects (axes, lines, labels) are inspected, not images;
- PNG and PDF file signatures: PNG spec (ISO/IEC 15948:2004, sec. 5.2: the 8-byte
  signature 89 50 4E 47 0D 0A 1A 0A and IHDR width/height), PDF 1.7 (ISO 32000-1:2008,
  sec. 7.5.2: files begin with "%PDF-");
- Okabe & Ito (2008), "Color Universal Design", https://jfly.uni-koeln.de/color/, for the
  palette sRGB values.

The posterior is the simulated Gaussian cloud of tests/helpers/results.py (no sampling).
"""

from __future__ import annotations

import struct
import subprocess
import sys

import matplotlib
import numpy as np
import pytest
from matplotlib.figure import Figure

from orbitmass.exceptions import InputError
from orbitmass.outputs import plots
from orbitmass.outputs.figures.orbit import RV_LABEL_OFFSETS
from orbitmass.outputs.reports import format_value
from orbitmass.outputs.style import PALETTE, figure_size, save_figure, style_context, write_atomic
from orbitmass.results import QUANTILES

from tests.helpers.results import make_results

N_DRAWS = 12


@pytest.fixture(scope="module")
def nucleus(tmp_path_factory):
    return make_results(tmp_path_factory.mktemp("plots_nucleus"))


@pytest.fixture(scope="module")
def wide(tmp_path_factory):
    return make_results(tmp_path_factory.mktemp("plots_wide"), kind="wide", scatter=0.1)


def _lines_with_points(ax, min_points: int) -> int:
    return sum(1 for ln in ax.get_lines() if len(ln.get_xdata()) >= min_points)


# --------------------------------------------------------------------------------- style


def test_import_changes_no_global_setting():
    code = (
        "import matplotlib; before = dict(matplotlib.rcParams); "
        "import orbitmass.outputs.style, orbitmass.outputs.plots; "
        "after = dict(matplotlib.rcParams); "
        "print(sorted(k for k in before if str(before[k]) != str(after[k])))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_style_context_is_local_and_journal_sized():
    before = matplotlib.rcParams["font.size"]
    with style_context():
        assert 8.0 <= matplotlib.rcParams["font.size"] <= 9.0
        assert 8.0 <= matplotlib.rcParams["axes.labelsize"] <= 9.0
        assert matplotlib.rcParams["pdf.fonttype"] == 42
        colours = [c["color"].upper() for c in matplotlib.rcParams["axes.prop_cycle"]]
    assert matplotlib.rcParams["font.size"] == before
    # Okabe & Ito (2008) sRGB values: blue (0, 114, 178), vermillion (213, 94, 0)
    assert PALETTE["blue"] == "#0072B2" and PALETTE["vermillion"] == "#D55E00"
    assert colours[:2] == ["#0072B2", "#D55E00"]
    assert figure_size(1) == (3.5, 2.625) and figure_size(2, 1.0) == (7.2, 7.2)
    with pytest.raises(ValueError, match="columns"):
        figure_size(3)


def test_save_figure_writes_png_and_pdf_atomically(tmp_path):
    fig = Figure(figsize=(3.5, 2.5))
    ax = fig.add_subplot()
    ax.plot([0, 1], [1, 0])
    ax.set_xlabel("x [mas]")
    paths = save_figure(fig, tmp_path / "demo", dpi=100)
    assert [p.name for p in paths] == ["demo.png", "demo.pdf"]
    png = paths[0].read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature
    width, height = struct.unpack(">II", png[16:24])  # IHDR
    assert 200 < width <= 360 and 150 < height <= 260  # tight bbox at 100 dpi within 3.5 x 2.5 in
    assert paths[1].read_bytes()[:5] == b"%PDF-"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo.pdf", "demo.png"]  # no temp left
    write_atomic(tmp_path / "note.txt", "é")
    assert (tmp_path / "note.txt").read_bytes() == "é".encode()
    # same permissions as a file made by a plain open() (0666 less the umask), not 0600
    (tmp_path / "plain.txt").write_text("x")
    mode = (tmp_path / "plain.txt").stat().st_mode & 0o777
    assert all(p.stat().st_mode & 0o777 == mode for p in [*paths, tmp_path / "note.txt"])
    # the PDF carries no creation date: saving the same figure again gives the same bytes
    again = save_figure(fig, tmp_path / "again", formats=("pdf",))[0]
    assert again.read_bytes() == paths[1].read_bytes()


# -------------------------------------------------------------------------------- corner


def test_corner_figure_structure(nucleus):
    fig = plots.corner_figure(nucleus)
    cols = plots.default_corner_columns(nucleus)
    # two companions: mass, distance and each companion's period and eccentricity
    assert cols == [
        "mass_msun",
        "distance_pc",
        "C1.period_yr",
        "C1.eccentricity",
        "C2.period_yr",
        "C2.eccentricity",
    ]
    k = len(cols)
    assert len(fig.axes) == k * k
    axes = np.asarray(fig.axes).reshape(k, k)
    xlabels = [ax.get_xlabel() for ax in axes[-1]]
    assert xlabels[0] == r"$M$ [$10^{6}\,M_\odot$]"
    # an 8 kpc distance is shown in kpc (display unit by magnitude), the samples stay in pc
    assert xlabels[1] == "$D$ [kpc]" and xlabels[2] == "C1: $P$ [yr]" and xlabels[3] == "C1: $e$"
    # titles: median and asymmetric errors of the plotted (scaled) values
    x = nucleus.samples["mass_msun"].to_numpy() / 1e6
    q = np.quantile(x, [QUANTILES["q16"], 0.5, QUANTILES["q84"]])
    med, lo, hi = format_value(q[1], q[1] - q[0], q[2] - q[1])
    assert axes[0, 0].get_title() == f"${med}^{{+{hi}}}_{{-{lo}}}$"
    assert fig.get_size_inches()[0] == pytest.approx(7.2)


def test_corner_figure_options_and_errors(nucleus):
    target_fig = Figure(figsize=(3.5, 3.5))
    fig = plots.corner_figure(
        nucleus,
        columns=["mass_msun", "C1.semimajor_axis_au"],
        labels=["mass", "a"],
        fig=target_fig,
        bins=15,
    )
    assert fig is target_fig and len(fig.axes) == 4
    assert fig.axes[2].get_xlabel() == "mass"
    with pytest.raises(InputError, match="unknown sample column"):
        plots.corner_figure(nucleus, columns=["mass_kg"])
    with pytest.raises(InputError, match="constant"):
        plots.corner_figure(nucleus, columns=["mass_msun", "offset_kms.spec-a"])
    with pytest.raises(InputError, match="labels"):
        plots.corner_figure(nucleus, columns=["mass_msun", "distance_pc"], labels=["M"])


def test_axis_label_units():
    assert plots.axis_label("C1.periastron_rs", ["C1"]) == r"C1: $r_\mathrm{p}$ [$R_\mathrm{S}$]"
    assert plots.axis_label("offset_kms.spec-b", []) == r"$\Delta v$ spec-b [km s$^{-1}$]"
    assert (
        plots.axis_label("C1.period_yr", ["C1"], exponent=3, show_companion=False)
        == r"$P$ [$10^{3}\,\mathrm{yr}$]"
    )


# --------------------------------------------------------------------------------- orbits


def test_orbit_figure_structure(nucleus):
    fig = plots.orbit_figure(nucleus, n_draws=N_DRAWS, seed=1)
    # C1 (positions + velocities): sky, position O-C, RV, RV O-C;
    # C2 (positions only): sky, east(t), north(t), O-C
    assert len(fig.axes) == 8
    sky = [
        ax
        for ax in fig.axes
        if ax.get_ylabel().startswith(r"$\Delta\delta$")
        and ax.get_xlabel().startswith(r"$\Delta\alpha")
    ]
    assert len(sky) == 2
    for ax in sky:
        assert ax.xaxis_inverted() and not ax.yaxis_inverted()  # east to the left
        left, right = ax.get_xlim()
        assert left > right
        assert ax.get_xlabel() == r"$\Delta\alpha\,\cos\delta$ [mas]"
        assert ax.get_aspect() == 1.0
        assert _lines_with_points(ax, 100) >= N_DRAWS  # one full orbit per draw
    # spec-b has a sampled offset: the axis says the offsets were removed
    rv = [ax for ax in fig.axes if ax.get_ylabel() == RV_LABEL_OFFSETS]
    assert len(rv) == 1
    # companion and central-body draws
    assert _lines_with_points(rv[0], 100) >= 2 * N_DRAWS
    for ax in fig.axes:  # units on every axis that has a label
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label:
                assert "[" in label or "σ" in label, label
    assert "[Julian yr]" in rv[0].get_shared_x_axes().get_siblings(rv[0])[-1].get_xlabel() or any(
        ax.get_xlabel() == plots.TIME_LABEL for ax in fig.axes
    )
    labels = [t.get_text() for sub in fig.subfigs for leg in sub.legends for t in leg.get_texts()]
    for word in (
        "positions",
        "central body",
        "posterior draws",
        "spec-a",
        "spec-b",
        "central body (open)",
        "posterior draws, central body",
    ):
        assert word in labels


def test_orbit_figure_draws_pass_through_the_data(nucleus):
    # the posterior cloud is centred on the invented truth the data were simulated from, so
    # every position lies within a few sigma of the drawn orbits, and the residual panels
    # scatter like the noise (0.5 mas positions, 5 km/s velocities)
    fig = plots.orbit_figure(nucleus, n_draws=N_DRAWS, companion="C1")
    sky = fig.axes[0]
    east, north = nucleus.target.companions[0].astrometry.east_north()
    orbits = [ln for ln in sky.get_lines() if len(ln.get_xdata()) >= 100]
    track = np.concatenate([np.column_stack([ln.get_xdata(), ln.get_ydata()]) for ln in orbits])
    dist = np.min(np.hypot(track[:, :1].T - east[:, None], track[:, 1:].T - north[:, None]), axis=1)
    assert np.all(dist < 5 * 0.5)
    res = [ax for ax in fig.axes if ax.get_ylabel() == "O − C [mas]"][0]
    points = np.concatenate([np.asarray(c.get_children()[0].get_ydata()) for c in res.containers])
    assert points.size == 2 * east.size
    assert np.sqrt(np.mean(points**2)) < 3 * 0.5
    rv_res = [ax for ax in fig.axes if ax.get_ylabel() == r"O − C [km s$^{-1}$]"][0]
    rv_points = np.concatenate(
        [np.asarray(c.get_children()[0].get_ydata()) for c in rv_res.containers]
    )
    assert rv_points.size == len(nucleus.target.companions[0].velocities)
    assert np.sqrt(np.mean(rv_points**2)) < 3 * 5.0


def test_orbit_figure_arcsec_and_missing_panels(wide):
    fig = plots.orbit_figure(wide, n_draws=N_DRAWS)
    assert fig.get_size_inches()[0] == pytest.approx(3.5)  # no companion has both kinds
    # B: positions only (sky, O-C); V: velocities only (RV, O-C)
    assert len(fig.axes) == 4
    sky = fig.axes[0]
    assert sky.get_xlabel() == r"$\Delta\alpha\,\cos\delta$ [arcsec]"
    assert sky.get_ylabel() == r"$\Delta\delta$ [arcsec]"
    assert sky.xaxis_inverted()
    extent = max(abs(v) for v in sky.get_ylim())
    assert 2.0 < extent < 20.0  # ~7.7 arcsec orbit, in arcsec
    assert fig.axes[2].get_ylabel() == plots.RV_LABEL
    norm = plots.orbit_figure(wide, n_draws=3, companion="V", normalised=True, residuals=True)
    assert norm.axes[1].get_ylabel() == "(O − C) / σ"
    bare = plots.orbit_figure(wide, n_draws=3, companion="B", residuals=False)
    assert len(bare.axes) == 1


def test_orbit_figure_into_given_figure_and_errors(nucleus):
    given = Figure(figsize=(7.2, 4.0), layout="constrained")
    out = plots.orbit_figure(
        nucleus, n_draws=3, companion="C1", fig=given, draw_kwargs={"color": PALETTE["orange"]}
    )
    assert out is given
    sky_lines = [ln for ln in out.axes[0].get_lines() if len(ln.get_xdata()) >= 100]
    assert sky_lines and all(ln.get_color() == PALETTE["orange"] for ln in sky_lines)
    with pytest.raises(InputError, match="unknown companion"):
        plots.orbit_figure(nucleus, companion="C9")
    with pytest.raises(InputError, match="n_draws"):
        plots.orbit_figure(nucleus, n_draws=0)


# --------------------------------------------------------------------------------- traces


def test_trace_figure(nucleus):
    fig = plots.trace_figure(nucleus, max_params=5)
    assert len(fig.axes) == 6  # five variables + log posterior
    n_walkers = nucleus.chain.shape[1]
    shown = min(n_walkers, 16)  # trace_figure's default max_walkers
    for ax, name in zip(fig.axes[:5], nucleus.space.names[:5], strict=True):
        (lines,) = ax.collections
        segments = lines.get_segments()
        assert len(segments) == shown
        # the first walker's trace, strided to at most 600 points (the default max_points)
        stride = max(1, -(-nucleus.chain.shape[0] // 600))
        np.testing.assert_array_equal(
            segments[0][:, 1], nucleus.chain[::stride, 0, nucleus.space.names.index(name)]
        )
        assert lines.get_rasterized()
        assert len(ax.patches) == 1  # burn-in shaded
        x0, x1 = ax.patches[0].get_x(), ax.patches[0].get_x() + ax.patches[0].get_width()
        assert (x0, x1) == (0, nucleus.burn)
    assert fig.axes[0].get_ylabel() == r"$\ln(M/M_\odot)$"
    assert fig.axes[1].get_ylabel() == r"$\ln(D/\mathrm{pc})$"
    assert fig.axes[3].get_ylabel() == r"C1: $\Omega$ [rad]"
    assert fig.axes[-1].get_xlabel() == "Step"
    chosen = plots.trace_figure(nucleus, names=["offset.spec-b"], show_log_prob=False)
    assert chosen.axes[0].get_ylabel() == r"spec-b: $\Delta v$ [km s$^{-1}$]"
    with pytest.raises(InputError, match="unknown sampled variable"):
        plots.trace_figure(nucleus, names=["ln_mass_kg"])


def test_products_saved_for_a_paper(tmp_path, wide):
    written = []
    figures = {
        "corner": plots.corner_figure(wide, columns=["mass_msun", "B.period_yr"]),
        "orbit": plots.orbit_figure(wide, n_draws=3, n_grid=100),
        "trace": plots.trace_figure(wide, max_params=3),
    }
    for name, fig in figures.items():
        written += save_figure(fig, tmp_path / name, dpi=72)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in written)
    for p in written:
        head = p.read_bytes()[:8]
        assert head == b"\x89PNG\r\n\x1a\n" or head.startswith(b"%PDF-")


def test_orbit_figure_absolute_frame(tmp_path):
    # positions on an external frame: the orbit rides on the barycentre's proper motion
    res = make_results(tmp_path, kind="absolute", scatter=0.2)
    fig = plots.orbit_figure(res, n_draws=N_DRAWS)
    sky = fig.axes[0]
    assert sky.xaxis_inverted()
    labels = [t.get_text() for sub in fig.subfigs for leg in sub.legends for t in leg.get_texts()]
    assert "barycentre (median track)" in labels and "central body" not in labels
    dashed = [ln for ln in sky.get_lines() if ln.get_linestyle() == "--"]
    assert len(dashed) == 1
    # the track is x0 + vx0 (t - t_ref): its ends move by vx0 x (data span) = 2 mas/yr x 16 yr
    x, y = dashed[0].get_xdata(), dashed[0].get_ydata()
    assert x[-1] - x[0] == pytest.approx(2.0 * 16.0, rel=0.02)
    assert y[-1] - y[0] == pytest.approx(-1.5 * 16.0, rel=0.02)
    east, north = res.target.companions[0].astrometry.east_north()
    orbits = [ln for ln in sky.get_lines() if len(ln.get_xdata()) >= 100]
    assert len(orbits) >= N_DRAWS
    track = np.concatenate([np.column_stack([ln.get_xdata(), ln.get_ydata()]) for ln in orbits])
    dist = np.min(np.hypot(track[:, :1].T - east[:, None], track[:, 1:].T - north[:, None]), axis=1)
    assert np.all(dist < 5 * 0.3)


@pytest.mark.slow
def test_figures_and_reports_of_a_real_fit(tmp_path):
    from orbitmass import Fit
    from orbitmass.outputs.reports import write_report, write_tables

    from tests.helpers.results import write_wide

    path = write_wide(tmp_path, "Fitted pair", np.random.default_rng(5))
    fit = Fit(seed=2, max_steps=400, min_steps=200, progress=False, max_periods=300).fit(path)
    res = fit.results_
    out = tmp_path / "out"
    out.mkdir()
    figures = {}
    for name, func in (
        ("corner", plots.corner_figure),
        ("orbit", plots.orbit_figure),
        ("trace", plots.trace_figure),
    ):
        save_figure(func(res), out / name, dpi=72)
        figures[name] = f"{name}.png"
    write_tables(res, out)
    paths = write_report(res, out, figures)
    mass = res.summary["derived"]["mass_msun"]
    med, _, _ = format_value(
        mass["median"], mass["median"] - mass["q16"], mass["q84"] - mass["median"]
    )
    page = paths["html"].read_text(encoding="utf-8")
    assert med in page and med in paths["md"].read_text(encoding="utf-8")
    assert page.count("data:image/png;base64,") == 3
    # the invented total mass (2 Msun) lies inside the reported 95 % interval
    assert mass["q2.5"] < 2.0 < mass["q97.5"]
