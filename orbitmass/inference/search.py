"""Global orbit search: candidate (period, eccentricity, phase) triples without a guess.

For one companion the model of every row is linear in the Thiele-Innes
constants (A, B, F, G for positions, C, H for velocities), the velocity zero
points and, in the absolute frame, the barycentre position and motion. Only
the observed period ``P``, the eccentricity ``e`` and the mean anomaly at the
reference epoch ``M0`` enter non-linearly. The search profiles the linear
coefficients out by weighted least squares and looks for low chi-square in
``(1/P, e, M0)``.

Method
------
1. **Phase-folded grid, every M0 at once.** For a trial frequency ``f`` the
   rows are folded to phase ``phi_k = 2 pi f (t_k - t_ref)`` and shared
   between the two nearest of ``N_b = 2048`` phase bins (cloud-in-cell, i.e.
   linear interpolation of the basis at the exact phase). Every entry of the
   normal equations is a sum over rows of a row weight times a function of
   ``M0 + phi_k`` (``X``, ``Y``, ``dX/dM``, ``dY/dM`` from
   :func:`orbitmass.core.orbit.kepler_basis`, tabulated once per
   eccentricity, or a product of two of them), i.e. a circular
   cross-correlation of a per-bin histogram with a tabulated kernel: one FFT
   per histogram and one inverse FFT per entry give it at all ``N_b`` values
   of ``M0``. The small systems are solved at an M0 stride of half the width
   of a periastron passage, ``w(e) = (1 - e)^{3/2}`` (one M0 for circular
   orbits, where a change of M0 is absorbed by the constants), and at most a
   quarter of the phase the data span (arcs).
2. **Frequencies.** Uniform in ``f`` above ``f_arc = 1 / (3 T)`` (``T`` the
   baseline) with spacing ``df(e) = w(e) / (4 pi T)``, so the phase drift over
   the baseline, ``2 pi T df``, is half a periastron width at every grid
   eccentricity; each eccentricity slice covers at most
   ``max_per_slice`` frequencies from the long-period end (so with very many
   cycles over the baseline only the lower eccentricities reach the shortest
   periods, and the local refinement takes them further). Below ``f_arc``
   (arcs shorter than a third of a period, up to the prior's upper bound)
   the grid is uniform in ln f with step 0.02. The shortest period tried is
   the larger of the prior's lower bound and twice the median epoch spacing.
3. **Eccentricities** 0, 0.25, 0.45, 0.6, 0.7, 0.78, 0.84, 0.88, 0.91, 0.935
   within the prior support (or the fixed value); the refinement reaches
   0.995 (or the prior's upper bound), the continuation that finds e = 0.97
   from the 0.935 slice.
4. **Refinement.** The best grid point of each local minimum of the
   chi-square profile over frequency (up to ``n_refine`` distinct periods)
   is polished by L-BFGS-B on ``(ln P, e, M0)`` with the linear constants
   profiled out exactly (the orbit from :func:`kepler_basis`, normal
   equations accumulated over chunks of rows), first on the grid rows, then
   the best few again on all rows.
5. **Partial arcs.** When the prior allows periods beyond three baselines,
   periods from 3 baselines to the prior's upper bound (every 0.1 in ln P,
   at most ``ARC_POINTS``) are each polished in (e, M0) at that fixed period
   from the best nearby grid point (on an arc chi-square is a narrow valley
   in (e, M0) that no affordable grid resolves). Their weights
   ``exp(-chi^2 / 2)`` times the prior mass of the cell (log-uniform in P
   unless ``period_log_pdf`` is given) are a deterministic importance
   sampling of the prior by the profile likelihood; when they spread the
   period over more than 0.2 in ln P (5 %-95 %) and are not all worse than
   the best refined candidate by 25 in chi-square, candidates at their 5, 25,
   50, 75 and 95 % points are appended (flagged ``arc``), so the candidate
   set spans the periods the arc allows. The weights ignore the volume of
   the linear constants and the mass and distance priors.

Data used
---------
Every row: positions (polar rows converted to east/north with isotropic
weights), companion velocities (columns C, H scaled by ``2 pi (1+z) / P``)
and central-body velocities. The central body moves as ``-q/(1+q)`` times the
relative orbit and the companion as ``1/(1+q)``; both get their own free (C,
H) columns, which keeps the problem linear (one redundant coefficient), and
the relative constants are their difference, the mass ratio their ratio.
Velocity levels: the level of instrument ``i`` is ``base + offset_i``
(``base`` = systemic or vz0); what is fixed is subtracted from the data and
only free quantities get a column (a free base gets one column shared by all
instruments, a free offset one column per instrument), so a fixed zero point
never absorbs a level. :func:`split_levels` turns the reported levels into
base and offsets consistently with what is fixed.

Cost and memory
---------------
The grid costs ``O(n_grid_rows)`` per frequency for the histograms plus
``O(N_b log N_b)`` per (frequency, eccentricity) slice, independent of the
number of M0 values; at most ``n_eccentricities x max_per_slice`` slices.
When a companion has more than ``max_grid_rows`` rows the grid uses a
stratified subset in time (every k-th row; every row is used in the
refinement), so the grid's cost does not grow with the number of rows and
the whole search is linear in the number of rows. Arrays are per
frequency (a few MB) or chunks of ``chunk_rows`` rows, so memory is bounded
(see ``benchmarks/bench_search.py`` for measured time and peak memory at
1e4 and 1e5 rows).

``stop_flag`` (a callable returning True when the user interrupted) is
checked between frequencies and between refinements; the search then
returns the candidates it has.

Longer than 600 lines because the folded-phase grid, the frequency plan, the refinement
and the arc stage share the profiled least-squares machinery.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from orbitmass.core.orbit import kepler_basis
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = ["SearchData", "search_orbit", "search_data_from_posterior", "split_levels", "SearchSettings"]

log = logging.getLogger(__name__)
TWO_PI = 2.0 * math.pi
Array = NDArray[np.float64]

#: Most periods polished on a partial arc.
ARC_POINTS = 60

GRID_ECCENTRICITIES = (0.0, 0.25, 0.45, 0.6, 0.7, 0.78, 0.84, 0.88, 0.91, 0.935)


@dataclass(frozen=True)
class SearchData:
    """Everything the search needs about one companion, as plain arrays (internal units).

    Attributes
    ----------
    name : str
        Companion name (for messages).
    t_ref_yr : float
        Reference epoch (Julian year) of ``M0``.
    one_plus_z : float
        1 + redshift (observed period = rest period x ``one_plus_z``).
    period_bounds_yr : (float, float)
        Support of the rest-frame period prior (yr).
    period_fixed_yr : float or None
        Fixed rest-frame period, if the period is not sampled.
    ecc_bounds : (float, float)
        Support of the eccentricity prior.
    ecc_fixed : float or None
        Fixed eccentricity, if not sampled.
    astro_t_yr, east_mas, north_mas, w_east, w_north : arrays or None
        Position epochs, east/north offsets (polar rows converted) and their
        weights (1 / sigma^2, mas^-2).
    rv_t_yr, rv_kms, rv_var, rv_inst, rv_central : arrays or None
        Velocity epochs, values (km/s), variances (km^2/s^2), instrument
        index into ``instrument_names`` and central-body flags.
    instrument_names : tuple of str
    offset_fixed : tuple of (float or None)
        Fixed zero-point offset per instrument (None = sampled).
    base_fixed : float or None
        Fixed systemic velocity (relative frame) or vz0 (absolute), km/s.
    frame : str
        ``"relative"`` or ``"absolute"``.
    frame_fixed : mapping
        Absolute frame: fixed values of ``x0``, ``y0`` (mas), ``vx0``, ``vy0``
        (mas/yr), None where sampled.
    mass_ratio_guess : float or None
        Typical mass ratio (used only when there are central-body velocities
        but no companion velocities, to scale the relative constants).
    period_log_pdf : callable or None
        Log prior density of the rest-frame period (yr); None = log-uniform.
    """

    name: str
    t_ref_yr: float
    one_plus_z: float = 1.0
    period_bounds_yr: tuple[float, float] = (1e-2, 1e4)
    period_fixed_yr: float | None = None
    ecc_bounds: tuple[float, float] = (0.0, 1.0)
    ecc_fixed: float | None = None
    astro_t_yr: Array | None = None
    east_mas: Array | None = None
    north_mas: Array | None = None
    w_east: Array | None = None
    w_north: Array | None = None
    rv_t_yr: Array | None = None
    rv_kms: Array | None = None
    rv_var: Array | None = None
    rv_inst: NDArray[np.int64] | None = None
    rv_central: NDArray[np.bool_] | None = None
    instrument_names: tuple[str, ...] = ()
    offset_fixed: tuple[float | None, ...] = ()
    base_fixed: float | None = None
    frame: str = "relative"
    frame_fixed: Mapping[str, float | None] = field(default_factory=dict)
    mass_ratio_guess: float | None = None
    period_log_pdf: Callable[[Array], Array] | None = None

    @property
    def n_rows(self) -> int:
        """Number of position plus velocity rows."""
        na = 0 if self.astro_t_yr is None else len(self.astro_t_yr)
        nv = 0 if self.rv_t_yr is None else len(self.rv_t_yr)
        return na + nv


@dataclass(frozen=True)
class SearchSettings:
    """Tuning of :func:`search_orbit` (defaults are what the fit uses)."""

    n_bins: int = 2048
    max_per_slice: int = 2000
    max_grid_rows: int = 4000
    n_refine: int = 16
    n_refine_full: int = 4
    max_candidates: int = 6
    chunk_rows: int = 100_000
    ecc_max_refine: float = 0.995


# ----------------------------------------------------------------- linear blocks
@dataclass
class _Block:
    """One independent linear problem: rows, weights, data, kernel and row-only columns."""

    t: Array
    w: Array
    y: Array
    kernels: list[tuple[str, Array]]  # (basis name, row mask/factor)
    rows: list[Array]                 # row-only columns
    velocity: bool                     # kernel columns scaled by 2 pi (1+z) K f


def _blocks(data: SearchData, select: Mapping[str, NDArray[np.int64]] | None = None):
    """The linear blocks (east, north, velocities) and the names of their columns."""
    out: list[tuple[str, _Block, list[str]]] = []
    absolute = data.frame == "absolute"
    if data.astro_t_yr is not None and len(data.astro_t_yr):
        idx = slice(None) if select is None else select["astro"]
        t = np.asarray(data.astro_t_yr, float)[idx]
        dt = t - data.t_ref_yr
        ones = np.ones_like(t)
        for coord, y, w, pos, mot in (("east", data.east_mas, data.w_east, "x0", "vx0"),
                                      ("north", data.north_mas, data.w_north, "y0", "vy0")):
            y = np.asarray(y, float)[idx].copy()
            rows, names = [], []
            if absolute:
                for key, col in ((pos, ones), (mot, dt)):
                    fixed = data.frame_fixed.get(key)
                    if fixed is None:
                        rows.append(col)
                        names.append(key)
                    else:
                        y -= float(fixed) * col
            out.append((coord, _Block(t, np.asarray(w, float)[idx], y, [("X", ones), ("Y", ones)], rows, False),
                        ["X", "Y"] + names))
    if data.rv_t_yr is not None and len(data.rv_t_yr):
        idx = slice(None) if select is None else select["rv"]
        t = np.asarray(data.rv_t_yr, float)[idx]
        y = np.asarray(data.rv_kms, float)[idx].copy()
        w = 1.0 / np.asarray(data.rv_var, float)[idx]
        inst = np.asarray(data.rv_inst, int)[idx]
        central = np.zeros(t.size, bool) if data.rv_central is None else np.asarray(data.rv_central, bool)[idx]
        kernels, names = [], []
        comp = (~central).astype(float)
        cen = central.astype(float)
        if comp.any():
            kernels += [("dX", comp), ("dY", comp)]
            names += ["C", "H"]
        if cen.any():
            kernels += [("dX", cen), ("dY", cen)]
            names += ["Cc", "Hc"]
        if data.base_fixed is not None:
            y -= float(data.base_fixed)
        rows = []
        present = sorted(set(inst.tolist()))
        free_offsets = [i for i in present if data.offset_fixed[i] is None]
        for i in present:
            if data.offset_fixed[i] is not None:
                y -= float(data.offset_fixed[i]) * (inst == i)
        if data.base_fixed is None and len(free_offsets) < len(present):
            rows.append(np.ones_like(t))
            names.append("base")
        for i in free_offsets:
            rows.append((inst == i).astype(float))
            names.append(f"offset:{i}")
        out.append(("rv", _Block(t, w, y, kernels, rows, True), names))
    return out


def _solve(normal: Array, rhs: Array, ywy: float) -> tuple[Array, Array]:
    """Batched weighted least squares from normal equations: coefficients and chi^2."""
    diag = np.einsum("...ii->...i", normal)  # a view: the ridge is added in place
    diag += (1e-12 * diag.sum(axis=-1, keepdims=True) + 1e-300)
    coef = np.linalg.solve(normal, rhs[..., None])[..., 0]
    chi2 = ywy - np.einsum("...k,...k->...", coef, rhs)
    return coef, np.maximum(chi2, 0.0)


# --------------------------------------------------------------- exact profile
def _profile(data: SearchData, blocks, period_obs: float, ecc: float, m0: float, chunk_rows: int):
    """Exact profiled chi^2 at one (P_obs, e, M0) and the coefficients of every block."""
    rate = TWO_PI * KMS_PER_AU_PER_YR * data.one_plus_z / period_obs
    total = 0.0
    coefs = {}
    for name, blk, _ in blocks:
        k = len(blk.kernels) + len(blk.rows)
        normal = np.zeros((k, k))
        rhs = np.zeros(k)
        for s in range(0, blk.t.size, chunk_rows):
            sl = slice(s, s + chunk_rows)
            basis = kepler_basis(blk.t[sl], t_ref_yr=data.t_ref_yr, period_obs_yr=period_obs, ecc=ecc,
                                 mean_anomaly_ref=m0, velocities=blk.velocity)
            cols = [getattr(basis, kname) * g[sl] * (rate if blk.velocity else 1.0) for kname, g in blk.kernels]
            cols += [r[sl] for r in blk.rows]
            design = np.stack(cols, axis=1)
            dw = design * blk.w[sl, None]
            normal += dw.T @ design
            rhs += dw.T @ blk.y[sl]
        ywy = float(np.sum(blk.w * blk.y * blk.y))
        coef, chi2 = _solve(normal, rhs, ywy)
        total += float(chi2)
        coefs[name] = coef
    return total, coefs


# ------------------------------------------------------------------ phase grid
class _Tables:
    """Spectra of the tabulated basis (and products of two basis functions), per eccentricity."""

    def __init__(self, eccs: Array, n_bins: int, keys: list[str]):
        phase = np.arange(n_bins) / n_bins  # mean anomaly / (2 pi) of each bin
        self.index = {key: i for i, key in enumerate(keys)}
        self.spec = np.empty((eccs.size, len(keys), n_bins // 2 + 1), complex)
        for ei, e in enumerate(eccs):
            b = kepler_basis(phase, t_ref_yr=0.0, period_obs_yr=1.0, ecc=float(e), mean_anomaly_ref=0.0,
                             velocities=True)
            base = {"X": b.X, "Y": b.Y, "dX": b.dX, "dY": b.dY}
            for key, i in self.index.items():
                parts = key.split("*")
                arr = base[parts[0]] if len(parts) == 1 else base[parts[0]] * base[parts[1]]
                self.spec[ei, i] = np.fft.rfft(arr)


def _block_plan(blk: _Block):
    """Histograms and correlations that give one block's normal equations.

    Returns the list of per-row histogram weights, the list of entries
    ``(i, j, hist index, kernel key or None)`` of the normal matrix, the
    right-hand side entries ``(i, hist index, kernel key or None)`` and the
    constant row-only entries.
    """
    hists: list[Array] = []

    def hist(arr):
        hists.append(arr)
        return len(hists) - 1

    nk = len(blk.kernels)
    entries, rhs = [], []
    for a, (ka, ga) in enumerate(blk.kernels):
        for b in range(a, nk):
            kb, gb = blk.kernels[b]
            g = blk.w * ga * gb
            if not g.any():
                continue
            key = "*".join(sorted((ka, kb)))
            entries.append((a, b, hist(g), key))
        for r, u in enumerate(blk.rows):
            entries.append((a, nk + r, hist(blk.w * ga * u), ka))
        rhs.append((a, hist(blk.w * ga * blk.y), ka))
    k = nk + len(blk.rows)
    const = np.zeros((k, k))
    const_rhs = np.zeros(k)
    for r, u in enumerate(blk.rows):
        for s, v in enumerate(blk.rows):
            const[nk + r, nk + s] = np.sum(blk.w * u * v)
        const_rhs[nk + r] = np.sum(blk.w * u * blk.y)
    ywy = float(np.sum(blk.w * blk.y * blk.y))
    return np.stack(hists), entries, rhs, const, const_rhs, ywy


def _width(e: float) -> float:
    return min(1.0, (1.0 - e) ** 1.5)


def _frequency_plan(t_all: Array, data: SearchData, eccs: Array, settings: SearchSettings):
    """Frequencies (observed, 1/yr) and, per frequency, which eccentricity slices to evaluate."""
    opz = data.one_plus_z
    if data.period_fixed_yr is not None:
        return np.array([1.0 / (data.period_fixed_yr * opz)]), np.ones((1, eccs.size), bool)
    baseline = max(float(np.ptp(t_all)) if t_all.size > 1 else 1.0, 1e-3)
    lo, hi = data.period_bounds_yr
    spacing = np.diff(np.unique(t_all))
    typical = float(np.median(spacing)) if spacing.size else baseline
    p_min = max(lo * opz, 2.0 * typical, 1e-6)
    p_max = min(hi * opz, 1e4 * baseline)  # an unbounded prior (log-normal) is searched to 1e4 baselines
    if p_max <= p_min:
        p_min, p_max = lo * opz, hi * opz
    f_lo, f_hi = 1.0 / p_max, 1.0 / p_min
    f_arc = min(max(1.0 / (3.0 * baseline), f_lo), f_hi)
    freqs, masks = [], []
    if f_arc > f_lo:
        n_log = max(2, int(math.ceil(math.log(f_arc / f_lo) / 0.02)))
        fl = np.exp(np.linspace(math.log(f_lo), math.log(f_arc), n_log, endpoint=False))
        freqs.append(fl)
        masks.append(np.ones((fl.size, eccs.size), bool))
    if f_hi > f_arc:
        widths = np.array([_width(float(e)) for e in eccs])
        df0 = float(np.min(widths)) / (2.0 * TWO_PI * baseline)
        steps = np.maximum(1, np.floor(widths / np.min(widths)).astype(int))
        n_need = int(math.ceil((f_hi - f_arc) / df0)) + 1
        n_base = min(n_need, int(np.max(steps * settings.max_per_slice)))
        idx = np.arange(n_base)
        fu = f_arc + df0 * idx
        mask = (idx[:, None] % steps[None, :] == 0) & (idx[:, None] // steps[None, :] < settings.max_per_slice)
        keep = mask.any(axis=1)
        freqs.append(fu[keep])
        masks.append(mask[keep])
        if n_need > n_base:
            log.info("%s: shortest period searched on the finest grid %.4g yr (of %.4g)", data.name,
                     1.0 / fu[-1], p_min)
    return np.concatenate(freqs), np.concatenate(masks)


def _grid(data: SearchData, blocks, eccs: Array, settings: SearchSettings, stop_flag):
    """Best chi^2 over (e, M0) at every grid frequency: arrays over frequency (chi2, e index, M0)."""
    t_all = np.concatenate([blk.t for _, blk, _ in blocks])
    freqs, active = _frequency_plan(t_all, data, eccs, settings)
    span = max(float(np.ptp(t_all)), 1e-9)
    nb = settings.n_bins
    plans = [_block_plan(blk) for _, blk, _ in blocks]
    keys = sorted({k for plan in plans for k in [e[3] for e in plan[1]] + [r[2] for r in plan[2]]})
    tables = _Tables(eccs, nb, keys)
    strides = np.array([max(1, min(nb, int(nb * _width(float(e)) / (2.0 * TWO_PI)))) if e > 0 else nb
                        for e in eccs])
    items = []
    for hists, entries, rhs, *_ in plans:
        pairs = [(hi, tables.index[key]) for (_, _, hi, key) in entries] + \
                [(hi, tables.index[key]) for (_, hi, key) in rhs]
        items.append((np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs]),
                      np.array([e[0] for e in entries], int), np.array([e[1] for e in entries], int),
                      np.array([r[0] for r in rhs], int)))
    best_chi2 = np.full(freqs.size, np.inf)
    best_e = np.zeros(freqs.size, int)
    best_m0 = np.zeros(freqs.size)
    n_points = 0
    for fi, f in enumerate(freqs):
        if stop_flag is not None and fi % 32 == 0 and stop_flag():
            log.info("%s: search interrupted after %d of %d frequencies", data.name, fi, freqs.size)
            break
        rate = TWO_PI * KMS_PER_AU_PER_YR * data.one_plus_z * f
        act = np.flatnonzero(active[fi])
        # on arcs the M0 step is also at most a quarter of the phase the data span
        arc_stride = max(1, int(0.25 * nb * f * span))
        sel = [np.arange(0, nb, min(strides[ei], arc_stride)) for ei in act]
        sizes = [s.size for s in sel]
        total = None
        for (_, blk, _), (hists, entries, rhs, const, const_rhs, ywy), (hi, ki, ii, jj, ri) in zip(
                blocks, plans, items):
            # cloud-in-cell: each row shared between its two neighbouring bins (linear interpolation
            # of the kernels at the exact phase, error O(bin^2))
            pos = np.mod(f * (blk.t - data.t_ref_yr), 1.0) * nb
            lo = np.floor(pos)
            frac = pos - lo
            lo = lo.astype(np.int64) % nb
            n_h = hists.shape[0]
            offs = (np.arange(n_h) * nb)[:, None]
            h = (np.bincount((offs + lo).ravel(), weights=(hists * (1.0 - frac)).ravel(), minlength=n_h * nb)
                 + np.bincount((offs + (lo + 1) % nb).ravel(), weights=(hists * frac).ravel(),
                               minlength=n_h * nb)).reshape(n_h, nb)
            hs = np.conj(np.fft.rfft(h, axis=1))
            corr = np.fft.irfft(hs[hi][None, :, :] * tables.spec[act][:, ki, :], n=nb, axis=-1)
            corr = np.concatenate([corr[a][:, s] for a, s in enumerate(sel)], axis=1)
            nm = corr.shape[1]
            k = const.shape[0]
            normal = np.empty((nm, k, k))
            normal[:] = const
            ne = ii.size
            normal[:, ii, jj] = corr[:ne].T
            normal[:, jj, ii] = corr[:ne].T
            vec = np.empty((nm, k))
            vec[:] = const_rhs
            vec[:, ri] = corr[ne:].T
            if blk.velocity:
                sc = np.ones(k)
                sc[: len(blk.kernels)] = rate
                normal *= sc[:, None] * sc[None, :]
                vec *= sc
            c2 = _solve(normal, vec, ywy)[1]
            total = c2 if total is None else total + c2
        n_points += total.size
        j = int(np.argmin(total))
        a = int(np.searchsorted(np.cumsum(sizes), j, side="right"))
        best_chi2[fi] = total[j]
        best_e[fi] = act[a]
        best_m0[fi] = TWO_PI * sel[a][j - (int(np.sum(sizes[:a])))] / nb
    return freqs, best_chi2, best_e, best_m0, n_points


# ------------------------------------------------------------------ refinement
def _refine(data, blocks, p_obs, e, m0, ecc_fixed, e_bounds, p_bounds, chunk_rows, baseline):
    """L-BFGS-B on (ln P, e, M0) with the constants profiled out; returns (chi2, P, e, M0)."""
    w = _width(e)
    s_m = max(0.3 * w, 1e-4)
    s_lnp = max(s_m * p_obs / (TWO_PI * baseline), 1e-7)
    s_e = 0.02 if ecc_fixed is None else 1.0
    x0 = np.array([math.log(p_obs) / s_lnp, e / s_e, m0 / s_m])
    lnp_lo, lnp_hi = (math.log(p_bounds[0]), math.log(p_bounds[1]))
    fix_p = p_bounds[0] == p_bounds[1]

    def unpack(x):
        lnp = lnp_lo if fix_p else x[0] * s_lnp
        ee = ecc_fixed if ecc_fixed is not None else x[1] * s_e
        return math.exp(lnp), ee, x[2] * s_m

    def fun(x):
        p, ee, mm = unpack(x)
        return _profile(data, blocks, p, ee, mm, chunk_rows)[0]

    bounds = [(lnp_lo / s_lnp, lnp_hi / s_lnp) if not fix_p else (None, None),
              (e_bounds[0] / s_e, e_bounds[1] / s_e) if ecc_fixed is None else (None, None),
              (None, None)]
    if not fix_p:
        x0[0] = min(max(x0[0], bounds[0][0]), bounds[0][1])
    if ecc_fixed is None:
        x0[1] = min(max(x0[1], bounds[1][0]), bounds[1][1])
    start = fun(x0)
    try:
        res = optimize.minimize(fun, x0, method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 200, "eps": 1e-3})
        x, val = (res.x, float(res.fun)) if np.isfinite(res.fun) and res.fun <= start else (x0, start)
    except (ValueError, np.linalg.LinAlgError):
        x, val = x0, start
    p, ee, mm = unpack(x)
    return val, p, ee, float(np.mod(mm, TWO_PI))


# ------------------------------------------------------------------ candidates
def _candidate(data: SearchData, blocks, p_obs, e, m0, chunk_rows) -> dict:
    chi2, coefs = _profile(data, blocks, p_obs, e, m0, chunk_rows)
    cand: dict = {"period_obs": float(p_obs), "ecc": float(e), "m0": float(np.mod(m0, TWO_PI)), "chi2": float(chi2)}
    names = {n: cols for n, _, cols in blocks}
    if "east" in coefs:
        ce = dict(zip(names["east"], coefs["east"]))
        cn = dict(zip(names["north"], coefs["north"]))
        cand["ti"] = (float(cn["X"]), float(ce["X"]), float(cn["Y"]), float(ce["Y"]))
        if data.frame == "absolute":
            for key, src, coef in (("x0", "x0", ce), ("vx0", "vx0", ce), ("y0", "y0", cn), ("vy0", "vy0", cn)):
                cand[key] = float(coef[src]) if src in coef else float(data.frame_fixed.get(key) or 0.0)
    if "rv" in coefs:
        cr = dict(zip(names["rv"], coefs["rv"]))
        if "C" in cr and "Cc" in cr:
            c1, h1, c2, h2 = cr["C"], cr["H"], cr["Cc"], cr["Hc"]
            cand["ch"] = (float(c1 - c2), float(h1 - h2))
            norm = c1 * c1 + h1 * h1
            if norm > 0:
                cand["q"] = float(max(-(c1 * c2 + h1 * h2) / norm, 0.0))
        elif "C" in cr:
            cand["ch"] = (float(cr["C"]), float(cr["H"]))
        else:
            q = data.mass_ratio_guess if data.mass_ratio_guess else 1.0
            scale = -(1.0 + q) / q
            cand["ch"] = (float(scale * cr["Cc"]), float(scale * cr["Hc"]))
        base = float(data.base_fixed) if data.base_fixed is not None else float(cr.get("base", 0.0))
        levels = {}
        for i in sorted(set(np.asarray(data.rv_inst, int).tolist())):
            off = data.offset_fixed[i]
            off = float(off) if off is not None else float(cr.get(f"offset:{i}", 0.0))
            levels[data.instrument_names[i]] = base + off
        cand["levels"] = levels
    return cand


def split_levels(levels: Mapping[str, float], data: SearchData) -> dict:
    """Split the levels of a candidate into ``base`` (systemic or vz0) and per-instrument offsets.

    What is fixed keeps its value; a free base is taken from the instruments
    whose offsets are fixed (their mean ``level - offset``), else from the first
    instrument with its offset at 0; free offsets are ``level - base``.

    Returns
    -------
    dict
        ``{"base": float, "offsets": {instrument: float}}``.
    """
    names = list(data.instrument_names)
    if data.base_fixed is not None:
        base = float(data.base_fixed)
    else:
        fixed = [levels[n] - float(data.offset_fixed[names.index(n)]) for n in levels
                 if data.offset_fixed[names.index(n)] is not None]
        base = float(np.mean(fixed)) if fixed else float(next(iter(levels.values()), 0.0))
    offsets = {}
    for n, lev in levels.items():
        off = data.offset_fixed[names.index(n)]
        offsets[n] = float(off) if off is not None else float(lev - base)
    return {"base": base, "offsets": offsets}


def _thin(data: SearchData, max_rows: int):
    """Row indices of a stratified (every k-th in time) subset of at most ``max_rows`` rows per kind."""
    out = {}
    for key, t in (("astro", data.astro_t_yr), ("rv", data.rv_t_yr)):
        if t is None:
            continue
        n = len(t)
        step = max(1, int(math.ceil(n / max_rows)))
        out[key] = np.argsort(t, kind="stable")[::step]
    return out


def _distinct_minima(freqs: Array, chi2: Array, n: int, sep: float = 0.004) -> list[int]:
    """Indices of the ``n`` lowest chi^2 frequencies at least ``sep`` apart in ln f."""
    order = np.argsort(chi2)
    order = order[np.isfinite(chi2[order])]
    lnf = np.log(freqs)
    taken: list[int] = []
    for i in order:
        if all(abs(lnf[i] - lnf[j]) > sep for j in taken):
            taken.append(int(i))
            if len(taken) >= n:
                break
    return taken


def search_orbit(data: SearchData, *, settings: SearchSettings | None = None,
                 stop_flag: Callable[[], bool] | None = None) -> tuple[list[dict], int]:
    """Global orbit search for one companion.

    Parameters
    ----------
    data : SearchData
    settings : SearchSettings, optional
    stop_flag : callable, optional
        Returns True when the user interrupted; checked between frequencies
        and refinements (the candidates found so far are returned).

    Returns
    -------
    candidates : list of dict
        Sorted best first, each with ``period_obs`` (yr), ``ecc``, ``m0``
        (rad), ``chi2`` (profiled over the linear constants) and, where the
        data allow, ``ti`` (A, B, F, G in mas), ``x0``, ``vx0``, ``y0``,
        ``vy0`` (absolute frame), ``ch`` (C, H in au, relative orbit),
        ``levels`` ({instrument: km/s}, each the total level
        ``base + offset``) and ``q`` (mass ratio, with both companion and
        central-body velocities). Arc candidates (see the module docstring)
        follow the refined ones.
    n_grid : int
        Number of grid points evaluated.
    """
    settings = settings or SearchSettings()
    if data.n_rows == 0:
        return [], 0
    opz = data.one_plus_z
    if data.ecc_fixed is not None:
        eccs = np.array([float(data.ecc_fixed)])
        e_bounds = (float(data.ecc_fixed), float(data.ecc_fixed))
    else:
        lo, hi = data.ecc_bounds
        eccs = np.array([e for e in GRID_ECCENTRICITIES if lo <= e <= hi])
        if eccs.size == 0:
            eccs = np.array([0.5 * (lo + min(hi, 0.99))])
        e_bounds = (max(lo, 0.0), min(hi, settings.ecc_max_refine))
    if data.period_fixed_yr is not None:
        p_bounds = (data.period_fixed_yr * opz, data.period_fixed_yr * opz)
    else:
        p_bounds = (data.period_bounds_yr[0] * opz, data.period_bounds_yr[1] * opz)
    thin = data.n_rows > settings.max_grid_rows
    select = _thin(data, settings.max_grid_rows // 2 if thin else 10**12) if thin else None
    grid_blocks = _blocks(data, select)
    full_blocks = _blocks(data) if thin else grid_blocks
    t_all = np.concatenate([blk.t for _, blk, _ in full_blocks])
    baseline = max(float(np.ptp(t_all)), 1e-3)
    freqs, chi2_f, e_f, m0_f, n_points = _grid(data, grid_blocks, eccs, settings, stop_flag)
    if not np.isfinite(chi2_f).any():
        return [], n_points
    # refinement from the best local minima of the profile over frequency
    refined = []
    for fi in _distinct_minima(freqs, chi2_f, settings.n_refine):
        if stop_flag is not None and stop_flag():
            break
        refined.append(_refine(data, grid_blocks, 1.0 / freqs[fi], float(eccs[e_f[fi]]), float(m0_f[fi]),
                               data.ecc_fixed, e_bounds, p_bounds, settings.chunk_rows, baseline))
    refined.sort(key=lambda r: r[0])
    if thin:
        again = []
        for r in refined[: settings.n_refine_full]:
            if stop_flag is not None and stop_flag():
                again.append(r)
                continue
            again.append(_refine(data, full_blocks, r[1], r[2], r[3], data.ecc_fixed, e_bounds, p_bounds,
                                 settings.chunk_rows, baseline))
        refined = sorted(again, key=lambda r: r[0])
    cands: list[dict] = []
    for _, p, e, m0 in refined:
        if any(abs(math.log(p / c["period_obs"])) < 0.01 and abs(e - c["ecc"]) < 0.02 for c in cands):
            continue
        cands.append(_candidate(data, full_blocks, p, e, m0, settings.chunk_rows))
    cands.sort(key=lambda c: c["chi2"])
    cands = cands[: settings.max_candidates]
    # partial arcs: spread candidates over the periods the data allow
    arc = []
    if data.period_fixed_yr is None and 3.0 * baseline < p_bounds[1]:
        arc = _arc_candidates(data, grid_blocks, freqs, chi2_f, e_f, m0_f, eccs, baseline, e_bounds, p_bounds,
                              settings, stop_flag, cands[0]["chi2"] if cands else np.inf)
    n_arc = 0
    for p, e, m0 in arc:
        if any(abs(math.log(p / c["period_obs"])) < 0.05 for c in cands):
            continue
        cand = _candidate(data, full_blocks, p, e, m0, settings.chunk_rows)
        cand["arc"] = True
        cands.append(cand)
        n_arc += 1
    log.info("%s: %d grid points, %d frequencies, %d refined candidates, %d arc candidates, best P_obs %.5g yr "
             "e %.3f chi2 %.4g", data.name, n_points, freqs.size, len(cands) - n_arc, n_arc,
             cands[0]["period_obs"], cands[0]["ecc"], cands[0]["chi2"])
    return cands, n_points


def _arc_candidates(data, blocks, freqs, chi2_f, e_f, m0_f, eccs, baseline, e_bounds, p_bounds, settings,
                    stop_flag, best_chi2):
    """(P_obs, e, M0) at the 5, 25, 50, 75, 95 % points of the period distribution an arc allows.

    Periods from 3 baselines to the prior's upper bound, every 0.1 in ln P (at most
    ``ARC_POINTS``): at each, (e, M0) start from the best grid point within 0.05 in
    ln P and are polished at that fixed period (on an arc chi^2 is a narrow valley in
    (e, M0) that no grid resolves). Weights: exp(-chi^2 / 2) x the prior mass of the
    cell. Nothing is returned when the arc periods are all far worse (by 25 in chi^2)
    than the best refined candidate, or when they span less than 0.2 in ln P.
    """
    ln_lo = math.log(max(3.0 * baseline, p_bounds[0]))
    ln_hi = math.log(p_bounds[1])
    n = int(min(ARC_POINTS, max(2, math.ceil((ln_hi - ln_lo) / 0.1) + 1)))
    ln_ps = np.linspace(ln_lo, ln_hi, n)
    lnp_grid = -np.log(freqs)
    ok = np.isfinite(chi2_f)
    pts = []
    for lnp in ln_ps:
        if stop_flag is not None and stop_flag():
            break
        near = np.flatnonzero(ok & (np.abs(lnp_grid - lnp) < 0.05))
        if near.size == 0:
            near = np.flatnonzero(ok)
            near = near[[int(np.argmin(np.abs(lnp_grid[near] - lnp)))]]
        i = near[int(np.argmin(chi2_f[near]))]
        p = math.exp(lnp)
        val, _, e, m0 = _refine(data, blocks, p, float(eccs[e_f[i]]), float(m0_f[i]), data.ecc_fixed, e_bounds,
                                (p, p), settings.chunk_rows, baseline)
        pts.append((lnp, val, e, m0))
    if len(pts) < 3:
        return []
    ln_p = np.array([q[0] for q in pts])
    c2 = np.array([q[1] for q in pts])
    if c2.min() > best_chi2 + 25.0:
        return []
    step = ln_p[1] - ln_p[0]
    log_w = -0.5 * (c2 - c2.min()) + math.log(step)
    if data.period_log_pdf is not None:
        log_w = log_w + np.asarray(data.period_log_pdf(np.exp(ln_p) / data.one_plus_z), float) + ln_p
    log_w -= np.max(log_w)
    w = np.exp(log_w)
    if not np.isfinite(w).all() or w.sum() <= 0:
        return []
    cdf = np.cumsum(w) / w.sum()
    picks = [int(min(np.searchsorted(cdf, q), cdf.size - 1)) for q in (0.05, 0.25, 0.5, 0.75, 0.95)]
    if ln_p[picks[-1]] - ln_p[picks[0]] < 0.2:
        return []
    return [(float(math.exp(ln_p[i])), pts[i][2], pts[i][3]) for i in dict.fromkeys(picks)]


# ------------------------------------------------------------------- adapter
def search_data_from_posterior(post, comp) -> SearchData:
    """Build :class:`SearchData` for companion ``comp`` from a ``LogPosterior``.

    Reads ``post.space`` (reference epoch, 1 + z, instrument names, frame and
    priors through ``space.target``), ``post.astro[name]`` (``t``, ``polar``,
    ``v1``, ``v2``, ``w11``, ``w22``) and ``post.vel[name]`` (``t``, ``rv``,
    ``var``, ``inst``, ``central``), as they are named at the time of writing.
    """
    space = post.space
    target = space.target
    pr = comp.priors
    ab = post.astro.get(comp.name)
    vb = post.vel.get(comp.name)
    kw: dict = {}
    if ab is not None:
        theta = np.deg2rad(ab.v2)
        east = np.where(ab.polar, ab.v1 * np.sin(theta), ab.v1)
        north = np.where(ab.polar, ab.v1 * np.cos(theta), ab.v2)
        s1 = 1.0 / np.sqrt(ab.w11)
        s2 = 1.0 / np.sqrt(ab.w22)
        sig_pol = np.sqrt(s1 * s1 + (np.deg2rad(s2) * ab.v1) ** 2)
        se = np.where(ab.polar, sig_pol, s1)
        sn = np.where(ab.polar, sig_pol, s2)
        kw.update(astro_t_yr=np.asarray(ab.t, float), east_mas=east, north_mas=north,
                  w_east=1.0 / se**2, w_north=1.0 / sn**2)
    if vb is not None:
        kw.update(rv_t_yr=np.asarray(vb.t, float), rv_kms=np.asarray(vb.rv, float),
                  rv_var=np.asarray(vb.var, float), rv_inst=np.asarray(vb.inst, int),
                  rv_central=np.asarray(vb.central, bool))
    names = tuple(space.instrument_names)
    offsets = tuple(float(target.instruments[n].offset.value) if target.instruments[n].offset.fixed else None
                    for n in names)
    cp = target.central_priors
    absolute = target.frame == "absolute"
    base_key = "vz0" if absolute else "systemic"
    base_fixed = float(cp[base_key].value) if base_key in cp and cp[base_key].fixed else None
    frame_fixed = {}
    if absolute:
        for key in ("x0", "y0", "vx0", "vy0"):
            frame_fixed[key] = float(cp[key].value) if cp[key].fixed else None
    period = pr["period"]
    ecc = pr["eccentricity"]
    q_guess = None
    if "mass_ratio" in pr:
        qp = pr["mass_ratio"]
        if qp.fixed:
            q_guess = float(qp.value)
        else:
            lo, hi = qp.support
            q_guess = float(min(max(0.5, lo), hi if math.isfinite(hi) else 0.5))
    return SearchData(
        name=comp.name, t_ref_yr=float(space.t_ref), one_plus_z=float(space.one_plus_z),
        period_bounds_yr=tuple(float(x) for x in period.support),
        period_fixed_yr=float(period.value) if period.fixed else None,
        ecc_bounds=tuple(float(x) for x in ecc.support),
        ecc_fixed=float(ecc.value) if ecc.fixed else None,
        instrument_names=names, offset_fixed=offsets, base_fixed=base_fixed,
        frame="absolute" if absolute else "relative", frame_fixed=frame_fixed,
        mass_ratio_guess=q_guess,
        period_log_pdf=None if period.fixed else (lambda p, _pr=period: _pr.log_pdf(p)),
        **kw)
