"""Shared pieces of the forecast workflows: epochs, model evaluation, orbit events, output folders.

Everything model-related goes through :meth:`orbitmass.results.Results.predict`
(the package's orbit evaluator); nothing here writes an orbit formula.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import math
import os
import warnings
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from orbitmass._version import __version__
from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.outputs.style import write_atomic
from orbitmass.results import QUANTILES, Results
from orbitmass.units import parse_quantity

__all__ = [
    "parse_epoch",
    "epoch_grid",
    "jyear_to_iso",
    "model_at",
    "has_line_of_sight",
    "orbit_events",
    "prepare_out_dir",
    "write_manifest",
    "MANIFEST_NAME",
]

log = logging.getLogger(__name__)

#: epochs accepted as Julian years (the same plausibility window as the tables)
EPOCH_RANGE_JYEAR = (-5000.0, 10000.0)
#: at most this many epochs in one grid (a guard against a step given in the wrong unit)
MAX_EPOCHS = 200_000
#: file that marks a folder written by ``orbitmass predict`` or ``orbitmass plan``
MANIFEST_NAME = "forecast-manifest.json"
_COMMAND = {"predictions": "predict", "plan": "plan"}
_PROBS = np.array(list(QUANTILES.values()))


def parse_epoch(text: str | float, *, key: str = "epoch") -> float:
    """An epoch as a Julian year (TDB): a number, or an ISO 8601 UTC date.

    Parameters
    ----------
    text : str or float
        ``"2031.5"`` (Julian year), or ``"2031-07-02"`` / ``"2031-07-02T12:00:00"``
        (UTC, converted with ``astropy.time.Time(..., scale="utc").tdb.jyear``).
    key : str
        Name of the option, for the error message.

    Raises
    ------
    InputError
        When the text is neither, or the year is implausible (an MJD or JD given
        where a Julian year was expected).

    Examples
    --------
    >>> parse_epoch("2030.25")
    2030.25
    >>> round(parse_epoch("2000-01-01T12:00:00"), 6)  # J2000.0 (UTC noon, 64 s from TDB)
    2000.000002
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip()
        try:
            value = float(s)
        except ValueError:
            value = _iso_to_jyear(s, key)
    if not math.isfinite(value) or not EPOCH_RANGE_JYEAR[0] <= value <= EPOCH_RANGE_JYEAR[1]:
        raise InputError(f"{text!r} is not a plausible Julian year (expected e.g. 2031.5 or an ISO date "
                         "like 2031-07-02; an MJD or JD is not accepted here)", key=key)
    return value


def _iso_to_jyear(s: str, key: str) -> float:
    from astropy.time import Time  # start-up time: loaded only when needed

    for fmt in ("isot", "iso"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # ERFA "dubious year" far from the leap-second table
            try:
                return float(Time(s, format=fmt, scale="utc").tdb.jyear)
            except Exception:  # noqa: BLE001 - astropy/erfa raise assorted errors on bad dates
                continue
    raise InputError(f"cannot read {s!r} as an epoch: expected a Julian year such as 2031.5 or an ISO "
                     "8601 UTC date such as 2031-07-02 or 2031-07-02T05:06:07", key=key)


def parse_step_yr(text: str | float, *, key: str = "--step") -> float:
    """A positive time step: a bare number of Julian years, or a quantity such as ``"30 d"``."""

    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip()
        try:
            value = float(s)
        except ValueError:
            value = parse_quantity(s, "time", key=key)
    if not math.isfinite(value) or value <= 0:
        raise InputError(f"expected a positive step (Julian years, or e.g. '30 d'), got {text!r}", key=key)
    return value


def epoch_grid(start: float, stop: float, step_yr: float, *, key: str = "--from/--to/--step") -> NDArray[np.float64]:
    """Epochs ``start, start + step, ...`` up to and including ``stop`` (Julian years)."""
    if not stop >= start:
        raise InputError(f"the end {stop} is before the start {start}", key=key)
    n = int(math.floor((stop - start) / step_yr + 1e-9)) + 1
    if n > MAX_EPOCHS:
        raise InputError(f"{n} epochs from {start} to {stop} in steps of {step_yr} yr; at most {MAX_EPOCHS} "
                         "(is the step in years?)", key=key)
    return start + step_yr * np.arange(n)


def jyear_to_iso(t_jyear: ArrayLike) -> list[str]:
    """ISO UTC dates (``YYYY-MM-DD``) of Julian-year epochs, for tables meant for people.

    The date is the UTC day nearest the epoch (rounded, not truncated: J2022.0
    is 2021-12-31T23:58:51 UTC, shown as 2022-01-01).
    """
    from astropy.time import Time  # start-up time: loaded only when needed

    t = np.atleast_1d(np.asarray(t_jyear, dtype=float))
    out = [""] * t.size
    ok = np.flatnonzero(np.isfinite(t))
    if ok.size:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            utc = Time(t[ok], format="jyear", scale="tdb").utc
            days = Time(np.floor(utc.mjd + 0.5), format="mjd", scale="utc").iso
        for k, text in zip(ok, np.atleast_1d(days)):
            out[k] = str(text)[:10]
    return out


def quantiles(draws: NDArray[np.float64], axis: int = 0) -> NDArray[np.float64]:
    """The five contract quantiles (median, q16, q84, q2.5, q97.5) along ``axis`` (NaN draws ignored)."""
    return np.nanquantile(draws, _PROBS, axis=axis)


def circular_wrap_deg(draws_deg: NDArray[np.float64], axis: int = 0) -> NDArray[np.float64]:
    """Angles (deg) wrapped into [c - 180, c + 180) around their circular mean ``c`` along ``axis``.

    The circular mean is brought into [0, 360) first, so quantiles of the wrapped
    draws are ordered and the median lies in [0, 360) unless the draws
    straddle the cut (bands may then reach below 0 or above 360 deg).
    """
    rad = np.radians(draws_deg)
    centre = np.degrees(np.arctan2(np.nanmean(np.sin(rad), axis=axis, keepdims=True),
                                   np.nanmean(np.cos(rad), axis=axis, keepdims=True))) % 360.0
    return (draws_deg - centre + 180.0) % 360.0 - 180.0 + centre


def model_at(results: Results, theta: NDArray[np.float64] | None, companion: str, *,
             t_astro: NDArray | None = None, t_vel: NDArray | None = None,
             rows: NDArray[np.int64] | None = None) -> dict[str, NDArray[np.float64]]:
    """The model of ``results`` at epochs, for retained draws ``rows`` or arbitrary vectors ``theta``.

    One call of :meth:`Results.predict` per block (vectorised over draws):
    arbitrary sampled vectors (finite-difference steps of the planner) are
    evaluated by handing :meth:`Results.predict` a copy of the results whose
    ``theta`` is the block. Returns ``east_mas``, ``north_mas`` (frame of
    the data) and ``rv_kms`` (companion, systemic included, no instrument
    offset), each ``(n_sets, n_epochs)``.
    """
    res = results if theta is None else dataclasses.replace(results, theta=np.asarray(theta, dtype=float))
    return res.predict(companion, t_astro=t_astro, t_vel=t_vel, central=False, rows=rows)


def has_line_of_sight(results: Results, companion: str) -> bool:
    """True when the companion's orbital plane is oriented along the line of sight by velocities.

    Without any velocity on a plane, (omega, Omega) and (omega + 180 deg,
    Omega + 180 deg) predict the same positions, so the sign of the
    line-of-sight velocity is not known.
    """
    for lay in results.space.companions:
        if lay.name == companion:
            return bool(results.space.planes[lay.plane]["los"])
    raise InputError(f"no companion {companion!r} in this run (companions: {', '.join(results.companion_names)})",
                     key="companion")


def has_velocities(results: Results) -> bool:
    """True when the run has any line-of-sight velocity."""
    return any(c.has_velocities for c in results.target.companions)


def period_obs_column(results: Results, companion: str) -> str:
    """Samples column of the period on the observed timeline."""
    col = f"{companion}.period_obs_yr"
    return col if col in results.samples.columns else f"{companion}.period_yr"


def reference_row(results: Results) -> int:
    """Index of the retained sample with the highest log posterior (the reference orbit for events)."""
    if "log_posterior" in results.samples.columns:
        lp = results.samples["log_posterior"].to_numpy()
        if np.isfinite(lp).any():
            return int(np.nanargmax(lp))
    return 0


def _block(values: NDArray[np.float64]) -> dict[str, float | None]:
    v = values[np.isfinite(values)]
    if v.size == 0:
        return {k: None for k in QUANTILES}
    q = np.quantile(v, _PROBS)
    return {k: float(x) for k, x in zip(QUANTILES, q)}


def _local_extrema(t: NDArray, v: NDArray, sign: float) -> tuple[NDArray, NDArray]:
    """Mask of interior local maxima of ``sign * v`` (n_sets, n_grid) and parabolic vertex offsets."""
    s = sign * v
    mid = s[:, 1:-1]
    mask = (mid > s[:, :-2]) & (mid >= s[:, 2:])
    y0, y1, y2 = s[:, :-2], mid, s[:, 2:]
    denom = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(denom < 0, 0.5 * (y0 - y2) / denom, 0.0)
    return mask, np.clip(frac, -0.5, 0.5)


def _nearest_extremum(results, rows, companion, grid, t_star, sign, chunk=200):
    """Per draw: time (yr) and value (km/s) of the local extremum of rv nearest each ``t_star``."""
    n_ev = len(t_star)
    t_out = np.full((len(rows), n_ev), np.nan)
    v_out = np.full((len(rows), n_ev), np.nan)
    dt = grid[1] - grid[0]
    for lo in range(0, len(rows), chunk):
        r = rows[lo:lo + chunk]
        rv = model_at(results, None, companion, t_vel=grid, rows=r)["rv_kms"]
        mask, frac = _local_extrema(grid, rv, sign)
        tt = grid[1:-1][None, :] + frac * dt
        y1 = rv[:, 1:-1]
        y0, y2 = rv[:, :-2], rv[:, 2:]
        vv = y1 + 0.25 * (y2 - y0) * frac  # parabola through the three points at the vertex
        for k, ts in enumerate(t_star):
            dist = np.where(mask, np.abs(tt - ts), np.inf)
            j = np.argmin(dist, axis=1)
            ok = np.isfinite(dist[np.arange(len(r)), j])
            t_out[lo:lo + len(r), k] = np.where(ok, tt[np.arange(len(r)), j], np.nan)
            v_out[lo:lo + len(r), k] = np.where(ok, vv[np.arange(len(r)), j], np.nan)
    return t_out, v_out


def orbit_events(results: Results, start: float, end: float, *, companions: Sequence[str] | None = None,
                 n_draws: int = 500, seed: int = 0, velocities: bool = True) -> list[dict[str, Any]]:
    """Periastron passages and velocity extrema of each companion between ``start`` and ``end``.

    Method: the retained sample of highest log posterior defines the
    reference events (its periastron passages, and the local maxima and
    minima of its modelled companion velocity) in the span widened by one
    period on each side; for every posterior draw the same event is its own
    passage / local extremum nearest the reference time. Each event gets the
    five contract quantiles of its date (Julian year) and, for velocity
    extrema, of the velocity (km/s, systemic included, instrument offsets not
    added). Only events whose median date lies in [start, end] are returned,
    in date order. Velocity extrema are located on a grid (at least 1000
    points per period) with parabolic refinement, through
    :meth:`Results.predict`; they are given only for companions whose plane
    has line-of-sight information (see :func:`has_line_of_sight`).

    Returns
    -------
    list of dict
        ``companion``, ``event`` (``"periastron"``, ``"velocity_max"``,
        ``"velocity_min"``), ``epoch_jyear`` (quantile block), ``date_utc``
        (ISO date of the median), ``p_before_start`` (fraction of draws in
        which the event falls before ``start``) and, for extrema, ``rv_kms``.
    """
    rng = np.random.default_rng(seed)
    names = list(companions) if companions is not None else results.companion_names
    rows = results.draws(n_draws, rng)
    ref = reference_row(results)
    events: list[dict[str, Any]] = []
    for c in names:
        pcol = period_obs_column(results, c)
        period = results.samples[pcol].to_numpy()
        ecc = results.samples[f"{c}.eccentricity"].to_numpy()
        tp = results.samples[f"{c}.periastron_time_jyr"].to_numpy()
        p_ref, tp_ref = float(period[ref]), float(tp[ref])
        k0 = math.floor((start - p_ref - tp_ref) / p_ref)
        k1 = math.ceil((end + p_ref - tp_ref) / p_ref)
        if k1 - k0 > 400:
            log.warning("%s: more than 400 periods in the span; events not listed", c)
            continue
        if float(np.nanmax(ecc)) > 0.0:  # a fixed circular orbit has no periastron
            for k in range(k0, k1 + 1):
                t_star = tp_ref + k * p_ref
                kk = np.round((t_star - tp[rows]) / period[rows])
                t_ev = tp[rows] + kk * period[rows]
                events.append(_event(c, "periastron", t_ev, start))
        if velocities and has_line_of_sight(results, c):
            p_med = float(np.nanmedian(period))
            p_hi = float(np.nanquantile(period, 0.975))
            lo_t, hi_t = start - 1.2 * p_hi, end + 1.2 * p_hi
            n_grid = int(min(max(1000 * (hi_t - lo_t) / p_med, 2000), 40000))
            ref_grid = np.linspace(lo_t, hi_t, n_grid)
            rv_ref = model_at(results, None, c, t_vel=ref_grid, rows=np.array([ref]))["rv_kms"]
            for sign, name in ((1.0, "velocity_max"), (-1.0, "velocity_min")):
                mask, frac = _local_extrema(ref_grid, rv_ref, sign)
                t_stars = (ref_grid[1:-1] + frac * (ref_grid[1] - ref_grid[0]))[0][mask[0]]
                t_stars = t_stars[(t_stars >= start - p_ref) & (t_stars <= end + p_ref)]
                if t_stars.size == 0:
                    continue
                t_ev, v_ev = _nearest_extremum(results, rows, c, ref_grid, t_stars, sign)
                for k in range(t_stars.size):
                    ev = _event(c, name, t_ev[:, k], start)
                    ev["rv_kms"] = _block(v_ev[:, k])
                    events.append(ev)
    keep = [e for e in events if e["epoch_jyear"]["median"] is not None
            and start <= e["epoch_jyear"]["median"] <= end]
    keep.sort(key=lambda e: e["epoch_jyear"]["median"])
    return keep


def _event(companion: str, kind: str, t_ev: NDArray, start: float) -> dict[str, Any]:
    block = _block(t_ev)
    fin = t_ev[np.isfinite(t_ev)]
    return {"companion": companion, "event": kind, "epoch_jyear": block,
            "date_utc": jyear_to_iso(block["median"])[0] if block["median"] is not None else "",
            "p_before_start": float(np.mean(fin < start)) if fin.size else None}


# ---------------------------------------------------------------------- folders
def prepare_out_dir(out_dir: str | os.PathLike, *, kind: str, overwrite: bool, check_only: bool = False) -> Path:
    """Make ``out_dir`` ready for writing; never touch files orbitmass did not write there.

    A missing or empty folder is fine. A non-empty folder is accepted only
    with ``overwrite`` and only when it holds a :data:`MANIFEST_NAME` of an
    earlier ``kind`` folder (``"predictions"`` or ``"plan"``) and nothing
    but the files that manifest lists; those files are then removed
    (unless ``check_only``, which only checks and changes nothing).

    Raises
    ------
    RunFolderError
        Otherwise, naming the folder and why.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise RunFolderError(f"{out}: exists and is not a folder; choose another --out")
    if out.is_dir() and any(out.iterdir()):
        manifest = out / MANIFEST_NAME
        if not manifest.is_file():
            raise RunFolderError(f"{out}: folder exists, is not empty and was not written by "
                                 f"'orbitmass {_COMMAND[kind]}'; choose another --out")
        try:
            info = json.loads(manifest.read_text(encoding="utf-8"))
            listed = set(info["files"]) | {MANIFEST_NAME}
            old_kind = info["kind"]
        except (OSError, ValueError, KeyError, TypeError):
            raise RunFolderError(f"{manifest}: unreadable manifest; choose another --out") from None
        if old_kind != kind:
            raise RunFolderError(f"{out}: holds an earlier 'orbitmass {_COMMAND.get(old_kind, old_kind)}' output, "
                                 f"not '{_COMMAND[kind]}'; choose another --out")
        if not overwrite:
            raise RunFolderError(f"{out}: holds an earlier 'orbitmass {_COMMAND[kind]}' output; pass --overwrite "
                                 "to replace it or choose another --out")
        foreign = sorted(p.name for p in out.iterdir() if p.name not in listed)
        if foreign:
            raise RunFolderError(f"{out}: also holds files orbitmass did not write ({', '.join(foreign[:5])}); "
                                 "nothing replaced; choose another --out")
        for name in [] if check_only else listed:
            p = out / name
            if p.is_file():
                p.unlink()
    if not check_only:
        out.mkdir(parents=True, exist_ok=True)
    return out


def write_manifest(out: Path, *, kind: str, files: Sequence[str], run_dir: str, extra: dict | None = None) -> Path:
    """Write the :data:`MANIFEST_NAME` listing ``files`` (names inside ``out``)."""

    info = {"kind": kind, "orbitmass_version": __version__, "run_dir": str(run_dir),
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "files": sorted(set(files)), **(extra or {})}
    return write_atomic(out / MANIFEST_NAME, json.dumps(_finite(info), indent=2) + "\n")


def _finite(obj):
    """JSON-safe copy: non-finite floats -> None, numpy scalars -> Python."""
    if isinstance(obj, dict):
        return {str(k): _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def strict_json(obj) -> str:
    """Strict JSON text (no NaN/Infinity) of ``obj``."""
    return json.dumps(_finite(obj), indent=2, allow_nan=False) + "\n"
