"""Figure checks of the paper-readiness issue: the enclosed-mass radius axis and the
barycentre track of the orbit figure in the absolute frame.

External references used:
- Schwarzschild radius 2GM/c^2: computed here from astropy.constants (G, c) and
  astropy.units (M_sun, km, au), not from orbitmass;
- the barycentre of an absolute-frame fit moves on x0 + vx0 (t - t_ref) (uniform proper
  motion; common practice, no source).

The posteriors are invented Gaussian clouds (no sampling).
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from orbitmass.compare import MassPosterior, compare
from orbitmass.outputs import plots

from tests.helpers.results import NUCLEUS, make_results


def _run(rng, label, mass, sd, a_au, e, n=8000):
    """Invented mass posterior with one companion's semimajor axis and periastron (au)."""
    m = rng.normal(mass, sd, n)
    a = rng.normal(a_au, 0.01 * a_au, n)
    return MassPosterior.from_samples(label, m, radii={
        f"{label}-c": {"semimajor_axis_au": a, "periastron_au": a * (1 - e)}})


def _rs_km(mass_msun):
    # 2GM/c^2 from astropy constants (independent of orbitmass.units)
    return float((2 * const.G * mass_msun * u.M_sun / const.c**2).to_value(u.km))


def _top_axis(fig):
    ax = fig.axes[0]
    (top,) = ax.child_axes
    return ax, top


@pytest.mark.parametrize("mass, reference, mass_text, rs_text", [
    # a 1.6 M_sun binary: R_S = 4.73 km (astropy), no power of ten anywhere
    (1.6, None, r"M = 1.6\,M_\odot", r"4.7\,\mathrm{km}"),
    # the case: a stellar-mass run compared with a 4e6 M_sun reference put the
    # mass axis in 10^6 M_sun, and the top label read "1.81e-06 x 10^6"
    (1.81, "4.0e6 +- 0.1e6 solMass", r"M = 1.81\,M_\odot", r"5.3\,\mathrm{km}"),
    # a 4e6 M_sun black hole: R_S = 0.079 au (astropy: 1.18e7 km / 1.496e8 km per au)
    (4.0e6, None, r"M = 4\times10^{6}\,M_\odot", r"0.079\,\mathrm{au}"),
])
def test_enclosed_mass_top_axis_reads_sensibly_for_any_mass(mass, reference, mass_text, rs_text):
    rng = np.random.default_rng(3)
    a_au = 30.0 if mass < 100 else 900.0
    runs = [_run(rng, "one", mass, 0.01 * mass, a_au, 0.4), _run(rng, "two", mass, 0.02 * mass, 1.5 * a_au, 0.2)]
    cmp = compare(runs, references=[reference] if reference else [], seed=2)
    fig = cmp.enclosed_mass_figure()
    FigureCanvasAgg(fig).draw()  # the label is valid mathtext and is laid out
    ax, top = _top_axis(fig)
    label = top.get_xlabel()
    assert mass_text in label and rs_text in label
    assert "e-0" not in label and "e+0" not in label  # no Python float spelling
    if mass < 100:
        assert r"\times10" not in label
    # the R_S value in the label is 2GM/c^2 of the median mass, to two digits
    med = float(np.median(np.concatenate([r.mass_msun for r in runs])))
    rs_km = _rs_km(med)
    shown = float(rs_text.split(r"\,")[0])
    in_km = shown if "km" in rs_text else float((shown * u.au).to_value(u.km))
    assert in_km == pytest.approx(rs_km, rel=0.02)
    # top limits are the bottom limits (au) divided by R_S (au)
    rs_au = float((rs_km * u.km).to_value(u.au))
    assert top.get_xlim() == pytest.approx(tuple(x / rs_au for x in ax.get_xlim()), rel=1e-3)
    # the label stays inside the figure (a single column: nothing cut off)
    renderer = fig.canvas.get_renderer()
    box = top.xaxis.label.get_window_extent(renderer)
    fig_box = fig.bbox
    assert box.x0 >= fig_box.x0 - 1 and box.x1 <= fig_box.x1 + 1 and box.y1 <= fig_box.y1 + 1


def test_absolute_frame_barycentre_track_and_its_reference_mark(tmp_path):
    res = make_results(tmp_path, kind="absolute", scatter=0.2)
    fig = plots.orbit_figure(res, n_draws=4, n_grid=200)
    sky = fig.axes[0]
    dashed = [ln for ln in sky.get_lines() if ln.get_linestyle() == "--"]
    assert len(dashed) == 1
    x, y = np.asarray(dashed[0].get_xdata(), float), np.asarray(dashed[0].get_ydata(), float)
    assert len(x) >= 2 and np.hypot(x[-1] - x[0], y[-1] - y[0]) > 1.0  # a track, not a point
    # the track is straight: every point lies on the line through its ends
    d = np.array([x[-1] - x[0], y[-1] - y[0]])
    normal = np.array([-d[1], d[0]]) / np.hypot(*d)
    assert np.max(np.abs((x - x[0]) * normal[0] + (y - y[0]) * normal[1])) < 1e-9 * max(1.0, np.hypot(*d))
    # the "+" marks the barycentre at the reference epoch: on the line x0 + vx0 (t - t_ref)
    plus = [ln for ln in sky.get_lines() if ln.get_marker() == "+"]
    assert len(plus) == 1
    px, py = float(plus[0].get_xdata()[0]), float(plus[0].get_ydata()[0])
    assert abs((px - x[0]) * normal[0] + (py - y[0]) * normal[1]) < 1e-6 * max(1.0, np.hypot(*d))
    s = res.samples
    assert px == pytest.approx(float(np.median(s["x0_mas"])), abs=1e-9)
    assert py == pytest.approx(float(np.median(s["y0_mas"])), abs=1e-9)
    # the legend names what is drawn: the dashed track, and the "+" with its epoch
    labels = [t.get_text() for sub in fig.subfigs for leg in sub.legends for t in leg.get_texts()]
    track = [t for t in labels if "barycentre" in t]
    assert track, labels
    handles = {t.get_text(): h for sub in fig.subfigs for leg in sub.legends
               for t, h in zip(leg.get_texts(), leg.legend_handles, strict=True)}
    styles = {(handles[t].get_linestyle(), handles[t].get_marker()) for t in track}
    assert ("--", "None") in styles or ("--", "") in styles or any(ls == "--" for ls, _ in styles)
    assert any(m == "+" for _, m in styles)
    # the caption says what the dashed line and the "+" are, with the epoch of the "+"
    from orbitmass.outputs.figures.orbit import caption

    text = caption(res)
    assert "barycentre" in text and f"{res.space.t_ref:.2f}" in text and "+" in text


def test_trace_labels_of_model_term_parameters_are_symbols_not_keys():
    # the parameters the model terms sample (redshift, precession, extended mass) are labelled by
    # the symbol of the quantity table, not by their key (a referee would object to "redshift_factor")
    from orbitmass.core import relativity
    from orbitmass.model.quantities import QUANTITIES
    from orbitmass.outputs.figures.trace import trace_label

    names = {p for cls in (relativity.RedshiftTerm, relativity.RoemerTerm, relativity.PrecessionTerm,
                           relativity.ExtendedMassTerm) for p in cls.parameters}
    assert names == {"redshift_factor", "precession_factor", "extended_mass_fraction"}
    for name in sorted(names):
        label = trace_label(name)
        assert "_factor" not in label and "_fraction" not in label, label
        assert label == f"${QUANTITIES[name].latex}$"


def test_relativity_residual_figure_labels_range_and_periastron_mark(tmp_path):
    # the demo's periastron figure as a Figure: units in brackets, the time axis of the other
    # figures, +-2 yr around the periastron, the dotted periastron line named in the legend
    from orbitmass.demo.beyond_kepler import relativity_figure
    from orbitmass.outputs.figures.common import TIME_LABEL

    res = make_results(tmp_path, kind="nucleus", scatter=0.2)
    tp = NUCLEUS["C1"].periastron_time
    fig = relativity_figure(res, res, "C1", periastron_jyr=tp, half_width_yr=2.0)
    FigureCanvasAgg(fig).draw()
    top, bottom = fig.axes[:2]
    assert bottom.get_xlabel() == TIME_LABEL
    assert bottom.get_xlim() == pytest.approx((tp - 2.0, tp + 2.0))
    for ax in (top, bottom):
        assert "[km s$^{-1}$]" in ax.get_ylabel()
        vertical = [ln for ln in ax.get_lines() if ln.get_linestyle() == ":"]
        assert len(vertical) == 1 and np.allclose(vertical[0].get_xdata(), tp)
    legend = [t.get_text() for t in top.get_legend().get_texts()]
    assert legend[0] == "periastron" and "Keplerian orbit" in legend
    # the same model twice: the Keplerian-minus-relativistic curve is zero everywhere
    (diff,) = [ln for ln in bottom.get_lines() if ln.get_label() == "Keplerian − relativistic model"]
    assert np.allclose(diff.get_ydata(), 0.0, atol=1e-9)


def test_direction_arrow_sits_where_no_data_marker_hides_it(tmp_path):
    # the arrow starts at the point of the drawn track farthest from every measured position
    # (among the inner 80 % of the track), so a data marker never covers it
    res = make_results(tmp_path, kind="nucleus", scatter=0.2)
    fig = plots.orbit_figure(res, n_draws=4, n_grid=400)
    sky = fig.subfigs[0].axes[0]
    (arrow,) = [c for c in sky.texts if getattr(c, "arrow_patch", None) is not None]
    start = np.array(arrow.xyann)
    east, north = res.target.companions[0].astrometry.east_north()
    orbits = [ln for ln in sky.get_lines() if len(ln.get_xdata()) >= 400]
    track = np.concatenate([np.column_stack([ln.get_xdata(), ln.get_ydata()]) for ln in orbits])
    extent = float(np.ptp(track[:, 0]))
    gap = float(np.min(np.hypot(east - start[0], north - start[1])))
    # the start lies on a drawn orbit, and clear of the data by more than 3 % of the orbit's width
    assert np.min(np.hypot(*(track - start).T)) < 1e-9 * extent + 1e-12
    assert gap > 0.03 * extent, (gap, extent)


def test_corner_truth_outside_the_posterior_is_drawn_clear_of_the_frame_and_ticks_stay_apart(tmp_path):
    # a Keplerian fit of relativistic data lands several sigma from the truth: the truth line must
    # not sit on the panel frame, and no tick label may touch its neighbour's (the issue's
    # "0.7125" against "117.7"); ticks keep 12 % of the panel clear at each edge
    from orbitmass.outputs import figures

    res = make_results(tmp_path, kind="nucleus", scatter=0.2)
    cols = ["mass_msun", "distance_pc", "C1.period_yr", "C1.eccentricity", "C1.inclination_deg"]
    s = res.samples
    far = {c: float(np.median(s[c]) + sign * 6 * np.std(s[c]))  # 6 sigma beyond, both sides
           for c, sign in zip(cols, (-1, 1, -1, 1, -1), strict=True)}
    fig = figures.corner_figure(res, params=cols, truths=far)
    FigureCanvasAgg(fig).draw()
    renderer = fig.canvas.get_renderer()
    n = len(cols)
    axes = np.asarray(fig.axes).reshape(n, n)
    for i, c in enumerate(cols):
        lo, hi = axes[-1, i].get_xlim()
        shown = far[c] * (1e-3 if c == "distance_pc" else 1.0)  # 6.4 kpc: shown in kpc (1 kpc = 1000 pc)
        if c == "mass_msun":
            shown = far[c] / 1e6  # the mass axis is in 10^6 M_sun
        assert lo + 0.03 * (hi - lo) < shown < hi - 0.03 * (hi - lo), (c, lo, shown, hi)
        for t in axes[-1, i].get_xticks():
            assert lo + 0.119 * (hi - lo) <= t <= hi - 0.119 * (hi - lo)
        assert len(axes[-1, i].get_xticks()) >= 2
    boxes = [t.get_window_extent(renderer) for ax in axes[-1] for t in ax.get_xticklabels() if t.get_text()]
    boxes += [t.get_window_extent(renderer) for ax in axes[1:, 0] for t in ax.get_yticklabels() if t.get_text()]
    for k, a in enumerate(boxes):
        for b in boxes[k + 1:]:
            assert not a.overlaps(b), "tick labels overlap"


def test_demo_records_the_invented_truth_so_the_corner_draws_it(tmp_path):
    # the demo knows the truth of its invented data: it is put on the run (saved with the
    # posterior) and the corner figure draws it; a = a_au / D_pc x 1000 mas (small-angle, common practice, no source)
    import types

    from orbitmass.demo.run import record_truth
    from orbitmass.outputs import figures


    res = make_results(tmp_path, kind="nucleus", scatter=0.2)
    truth = NUCLEUS["C1"]
    known = record_truth(types.SimpleNamespace(results=res), truth)
    assert res.info["truth"] is known and set(known) <= set(res.samples.columns)
    assert known["mass_msun"] == truth.mass_msun and known["C1.eccentricity"] == truth.eccentricity
    assert known["C1.semimajor_axis_mas"] == pytest.approx(truth.semimajor_axis_au / truth.distance_pc * 1000.0)
    fig = figures.corner_figure(res, params=["mass_msun", "C1.eccentricity"])
    diag = [ln for ln in fig.axes[3].get_lines() if np.allclose(ln.get_xdata(), truth.eccentricity)]
    assert diag, "no truth line at the invented eccentricity"
    assert "Vermillion lines" in figures.corner.caption(res)
