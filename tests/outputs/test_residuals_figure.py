"""The residuals figure: (O - C)/sigma per measured value against epoch, one panel per dataset.

Checked on the returned Figure (labels, panels, bands, every value drawn once) for fits of
data from the independent simulator of orbitmass.demo.simulate (builders of test_quality.py).
The plotted values must equal (observed - model)/sigma of the residual table (definition of a
normalised residual; common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pytest

from orbitmass.outputs.figures.residuals import SYMLOG_ABOVE, caption, residuals_figure

from tests.helpers.targets import quiet_fit, write_target


@pytest.fixture(scope="module")
def fits(tmp_path_factory):
    rng = np.random.default_rng(20261201)
    base = tmp_path_factory.mktemp("residuals")
    good, _ = write_target(base / "good", rng)
    bad, _ = write_target(base / "bad", rng, err_scale=1e-3)  # errors 1000x too small (issue 11)
    return {"good": quiet_fit(good)[0].results, "bad": quiet_fit(bad)[0].results}


def _points(ax):
    return np.concatenate([ln.get_ydata() for ln in ax.get_lines() if ln.get_linestyle() == "None"])


@pytest.mark.parametrize("which", ["good", "bad"])
def test_one_panel_per_dataset_every_value_once(fits, which):
    res = fits[which]
    table = res.info["residuals"]
    fq = res.summary["fit_quality"]
    fig = residuals_figure(res)
    axes = fig.axes
    assert [ax.get_title(loc="left") for ax in axes] == [d["label"] for d in fq["datasets"].values()]
    for ax, key in zip(axes, fq["datasets"], strict=True):
        rows = [i for i, d in enumerate(table["dataset"]) if d == key]
        expected = (np.array(table["observed"])[rows] - np.array(table["model"])[rows]) / np.array(table["sigma"])[rows]
        assert sorted(_points(ax)) == pytest.approx(sorted(expected), rel=1e-9, abs=1e-9)
        assert ax.get_ylabel() == r"$(O-C)/\sigma$"
        dashed = sorted(ln.get_ydata()[0] for ln in ax.get_lines() if ln.get_linestyle() == "--")
        assert dashed == [-5.0, 5.0]
        spans = sorted(round(p.get_height(), 6) for p in ax.patches)  # the shaded +-1 and +-3 (and +-5) bands
        assert {2.0, 6.0} <= set(spans)
        big = np.nanmax(np.abs(expected)) > SYMLOG_ABOVE
        assert ax.get_yscale() == ("symlog" if big else "linear")
        lo, hi = ax.get_ylim()
        assert lo <= np.min(expected) and hi >= np.max(expected)  # nothing clipped
    assert axes[-1].get_xlabel() == "Epoch [Julian yr]"
    assert "±5 σ" in caption(res)
