"""Immutable posterior container: samples, summaries, diagnostics, provenance.

:class:`Results` holds every retained posterior sample as a pandas
``DataFrame`` whose column names carry the unit (``mass_msun``,
``C1.period_yr``...; see :data:`COLUMN_DOC`), the raw chain for trace plots,
and the ``summary`` dictionary written to ``summary.json``. It can predict
the model for posterior draws (for orbit figures) without any sampler.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from orbitmass.core.orbit import thiele_innes
from orbitmass.core.physics import (
    periastron_au,
    periastron_speed_kms,
    schwarzschild_radius_au,
    semi_amplitude_kms,
    semimajor_axis_au,
)
from orbitmass.core.relativity import (
    precession_arcmin_per_orbit,
    redshift_at_periastron_kms,
    roemer_delay_range_days,
)
from orbitmass.model.data import Target
from orbitmass.model.likelihood import predict_system
from orbitmass.model.parameters import ParameterSpace
from orbitmass.model.quantities import column_doc
from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR

__all__ = ["Results", "QUANTILES", "quantile_block", "derive_samples", "COLUMN_DOC", "mass_function_msun",
           "prior_dominated"]

#: Largest number of (sample, epoch) pairs :meth:`Results.predict` evaluates in one block.
PREDICT_BLOCK_ELEMENTS = 65536

#: summary.json quantile keys -> probability
QUANTILES = {"median": 0.5, "q16": 0.15865525393145707, "q84": 0.8413447460685429,
             "q2.5": 0.025, "q97.5": 0.975}

#: column (with ``<C>.`` for a companion, ``<I>`` an instrument) -> (label, unit, meaning);
#: derived from the one table of quantities, :data:`orbitmass.model.quantities.QUANTITIES`
COLUMN_DOC: dict[str, tuple[str, str, str]] = column_doc()


def quantile_block(x: NDArray[np.float64]) -> dict[str, float]:
    """The five quantiles of the output contract for samples ``x``."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {k: float("nan") for k in QUANTILES}
    q = np.quantile(x, list(QUANTILES.values()))
    return {k: float(v) for k, v in zip(QUANTILES, q)}


def mass_function_msun(period_yr: ArrayLike, k_kms: ArrayLike, e: ArrayLike) -> NDArray[np.float64]:
    """Mass function ``f = P K^3 (1 - e^2)^(3/2) / (2 pi G)`` in solar masses.

    For the velocities of one body about the barycentre with semi-amplitude
    ``K``, ``f = m_other^3 sin^3 i / M^2``; for a test particle (its
    velocities are the relative orbit's) ``f = M sin^3 i``.

    Parameters
    ----------
    period_yr : array_like
        Period, Julian years.
    k_kms : array_like
        Semi-amplitude, km/s.
    e : array_like
        Eccentricity.

    Examples
    --------
    A circular 1-yr orbit of a test particle seen edge-on about 1 M_sun
    (K = 2 pi au/yr): f = M sin^3 i = 1.

    >>> from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR
    >>> k = (2 * math.pi * GM_SUN_AU3_PER_YR2) ** (1 / 3) * KMS_PER_AU_PER_YR
    >>> print(f"{float(mass_function_msun(1.0, k, 0.0)):.12f}")
    1.000000000000
    """
    e = np.asarray(e, dtype=float)
    k_au_per_yr = np.asarray(k_kms, dtype=float) / KMS_PER_AU_PER_YR
    return np.asarray(period_yr, float) * k_au_per_yr**3 * (1.0 - e * e) ** 1.5 / (2.0 * math.pi * GM_SUN_AU3_PER_YR2)


def prior_dominated(space: ParameterSpace) -> dict[str, dict]:
    """Quantities of velocity-only companions that the data cannot measure.

    Velocities alone give K, a sin i, the mass function and M sin^3 i; the
    node never enters them and the inclination only through sin i. So for a
    companion without astrometry: its plane's inclination and node (unless a
    companion with positions shares the plane), and, when no companion has
    positions and the inclination is sampled, the total mass and what scales
    with it, follow the priors.

    Returns
    -------
    dict
        Companion name -> ``{"prior_dominated": [summary keys], "prior_dominated_note": sentence}``,
        for velocity-only companions with such quantities.
    """
    astro = {c.name for c in space.target.companions if c.astrometry is not None and len(c.astrometry)}
    out: dict[str, dict] = {}
    for lay in space.companions:
        comp = space.companion(lay.name)
        if lay.name in astro or not comp.has_velocities:
            continue
        plane = space.planes[lay.plane]
        plane_seen = any(m in astro for m in plane["members"])
        keys = []
        if not astro and plane["i_var"] is not None and "ln_mass" in space.index:
            keys.append("mass_msun")
        if not plane_seen and plane["i_var"] is not None:
            keys.append("inclination_deg")
        if not plane_seen and plane["node_var"] is not None:
            keys.append("ascending_node_deg")
        if "mass_msun" in keys:
            keys += ["semimajor_axis_au", "semimajor_axis_mas", "periastron_au"]
        if keys:
            out[lay.name] = {
                "prior_dominated": keys,
                "prior_dominated_note": (
                    f"{lay.name} has velocities only: they measure the semi-amplitude K, a sin i, the mass "
                    f"function and M sin^3 i; {', '.join(keys)} follow the priors and are not measurements."),
            }
    return out


def _circular_centre_deg(x_deg: NDArray[np.float64], period: float = 360.0) -> float:
    ang = np.asarray(x_deg) * (2 * math.pi / period)
    c = math.degrees(math.atan2(np.mean(np.sin(ang)), np.mean(np.cos(ang)))) * period / 360.0
    return c % period


def _wrap_around(x_deg, centre, period=360.0):
    return (np.asarray(x_deg) - centre + period / 2) % period - period / 2 + centre


def derive_samples(space: ParameterSpace, theta: NDArray[np.float64],
                   log_post: NDArray[np.float64] | None = None) -> pd.DataFrame:
    """Every sampled and derived quantity for posterior samples ``theta`` (n, n_dim).

    Angles are wrapped around their circular mean (so intervals do not
    straddle the 0/360 deg cut); with the (omega, Omega) ambiguity Omega is
    reported on a half turn. Columns are listed in :data:`COLUMN_DOC`.
    """
    phys = space.unpack(theta)
    cols: dict[str, NDArray[np.float64]] = {}
    mass = phys["mass_msun"]
    dist = phys["distance_pc"]
    cols["mass_msun"] = mass
    cols["distance_pc"] = dist
    cols["parallax_mas"] = 1000.0 / dist
    cols["schwarzschild_radius_au"] = schwarzschild_radius_au(mass)
    for key, col in (("systemic", "systemic_kms"), ("x0", "x0_mas"), ("y0", "y0_mas"),
                     ("vx0", "vx0_mas_per_yr"), ("vy0", "vy0_mas_per_yr"), ("vz0", "vz0_kms")):
        if key in phys:
            cols[col] = phys[key]
    for name in space.instrument_names:
        cols[f"offset_kms.{name}"] = phys[f"offset.{name}"]
        cols[f"jitter_kms.{name}"] = phys[f"jitter.{name}"]
    # the sampled factors of the model terms (a fixed one is a setting, not a posterior)
    for pname, prior in space.term_parameters.items():
        if not prior.fixed:
            cols[pname] = phys[pname]
    beyond_kepler = space.target.relativity is not None or space.target.extended_mass is not None
    for lay in space.companions:
        c = lay.name
        plane_info = space.planes[lay.plane]
        p = phys[f"{c}.period_yr"]
        e = phys[f"{c}.ecc"]
        a_au = semimajor_axis_au(mass, p)
        a_mas = a_au / dist * 1000.0
        cos_i = np.clip(phys[f"{c}.cos_i"], -1, 1)
        inc = np.degrees(np.arccos(cos_i))
        omega = np.degrees(phys[f"{c}.omega"]) % 360.0
        node = np.degrees(phys[f"{c}.node"]) % 360.0
        m0 = np.degrees(phys[f"{c}.m0"]) % 360.0
        node_period = 360.0 if plane_info["los"] else 180.0
        if node_period == 180.0:
            flip = node >= 180.0
            node = np.where(flip, node - 180.0, node)
            omega = np.where(flip, (omega + 180.0) % 360.0, omega)
        cols[f"{c}.period_yr"] = p
        if space.one_plus_z != 1.0:
            cols[f"{c}.period_obs_yr"] = phys[f"{c}.period_obs_yr"]
        cols[f"{c}.eccentricity"] = e
        cols[f"{c}.inclination_deg"] = inc
        cols[f"{c}.arg_periastron_deg"] = _wrap_around(omega, _circular_centre_deg(omega))
        cols[f"{c}.ascending_node_deg"] = _wrap_around(node, _circular_centre_deg(node, node_period), node_period)
        m0_centre = _circular_centre_deg(m0)
        cols[f"{c}.mean_anomaly_deg"] = _wrap_around(m0, m0_centre)
        # periastron nearest the reference epoch: M0 on (-180, 180] around its circular mean
        m0_near = _wrap_around(m0, (m0_centre + 180.0) % 360.0 - 180.0)
        p_obs = phys[f"{c}.period_obs_yr"]
        cols[f"{c}.periastron_time_jyr"] = space.t_ref - np.radians(m0_near) / (2 * math.pi) * p_obs
        cols[f"{c}.semimajor_axis_mas"] = a_mas
        cols[f"{c}.semimajor_axis_au"] = a_au
        rp = periastron_au(a_au, e)
        cols[f"{c}.periastron_au"] = rp
        cols[f"{c}.periastron_rs"] = rp / schwarzschild_radius_au(mass)
        cols[f"{c}.periastron_speed_kms"] = periastron_speed_kms(mass, a_au, e)
        sin_i = np.sqrt(1 - cos_i**2)
        if beyond_kepler:
            # what general relativity predicts for this orbit (factor 1); the fitted model applies
            # precession_factor / redshift_factor times these
            cols[f"{c}.precession_arcmin_per_orbit"] = precession_arcmin_per_orbit(mass, a_au, e)
            cols[f"{c}.redshift_periastron_kms"] = redshift_at_periastron_kms(mass, a_au, e)
            sin_w, cos_w = np.sin(phys[f"{c}.omega"]), np.cos(phys[f"{c}.omega"])
            cols[f"{c}.roemer_delay_range_days"] = roemer_delay_range_days(a_au * sin_w * sin_i,
                                                                           a_au * cos_w * sin_i, e)
        cols[f"{c}.semi_amplitude_kms"] = semi_amplitude_kms(a_au, p, np.arccos(cos_i), e)
        comp = space.companion(c)
        if comp.has_velocities and (comp.astrometry is None or len(comp.astrometry) == 0):
            # velocities only: what they measure (the companion's velocities about the barycentre)
            k_rel = cols[f"{c}.semi_amplitude_kms"]
            cols[f"{c}.a_sin_i_au"] = a_au * sin_i
            cols[f"{c}.m_sin3i_msun"] = mass * sin_i**3
            cols[f"{c}.mass_function_msun"] = mass_function_msun(p, k_rel / (1.0 + phys[f"{c}.q"]), e)
        if lay.has_q:
            q = phys[f"{c}.q"]
            cols[f"{c}.semi_amplitude_central_kms"] = cols[f"{c}.semi_amplitude_kms"] * q / (1.0 + q)
            cols[f"{c}.mass_ratio"] = q
            cols[f"{c}.central_mass_msun"] = mass / (1 + q)
            cols[f"{c}.companion_mass_msun"] = mass * q / (1 + q)
        w, W = phys[f"{c}.omega"], phys[f"{c}.node"]
        A, B, F, G, _, _ = thiele_innes(a_mas, cos_i, sin_i, np.cos(w), np.sin(w), np.cos(W), np.sin(W))
        cols[f"{c}.A_mas"], cols[f"{c}.B_mas"], cols[f"{c}.F_mas"], cols[f"{c}.G_mas"] = A, B, F, G
    if log_post is not None:
        cols["log_posterior"] = np.asarray(log_post, dtype=float)
    return pd.DataFrame(cols)


@dataclass(frozen=True)
class Results:
    """Posterior of one fit.

    Attributes
    ----------
    target : Target
        Data and priors that were fitted.
    space : ParameterSpace
        Layout of the sampled vector (needed to predict from samples); its
        angle windows are final (a space without final windows is replaced by
        an equal one whose windows are).
    samples : DataFrame
        Retained samples, one row each; columns as :data:`COLUMN_DOC`.
    theta : ndarray, shape (n_samples, n_dim)
        The same samples in the sampled variables.
    chain : ndarray, shape (n_steps, n_walkers, n_dim)
        The whole chain (burn-in included) for trace plots.
    log_prob : ndarray, shape (n_steps, n_walkers)
    burn, thin : int
        Steps discarded and thinning of the retained samples.
    summary : dict
        The content of ``summary.json``.
    info : dict
        Further run facts (initialisation, priors used, per-parameter diagnostics).
    """

    target: Target
    space: ParameterSpace
    samples: pd.DataFrame
    theta: NDArray[np.float64]
    chain: NDArray[np.float64]
    log_prob: NDArray[np.float64]
    burn: int
    thin: int
    summary: dict
    info: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        # the angle windows of the space a Results holds are final (immutable)
        if not self.space.windows_final:
            object.__setattr__(self, "space", self.space.with_windows(self.space.windows))

    @property
    def companion_names(self) -> list[str]:
        """Names of the companions, in target order."""
        return [c.name for c in self.target.companions]

    def draws(self, n: int, rng: np.random.Generator) -> NDArray[np.int64]:
        """Indices of ``n`` random retained samples (without replacement when possible)."""
        size = len(self.samples)
        return rng.choice(size, size=min(n, size), replace=False)

    def predict(self, companion: str, *, t_astro: NDArray | None = None, t_vel: NDArray | None = None,
                central: bool = False, rows: NDArray[np.int64] | None = None) -> dict[str, NDArray[np.float64]]:
        """Model curves for posterior samples.

        Parameters
        ----------
        companion : str
            Companion name.
        t_astro, t_vel : ndarray, optional
            Julian-year epochs for positions and velocities: shape
            (n_epochs,) for the same epochs for every sample, or
            (n_rows, n_epochs) for epochs of each sample's own.
        central : bool
            Velocities of the central body instead of the companion.
        rows : ndarray of int, optional
            Which retained samples (default: all).

        Returns
        -------
        dict
            ``east_mas``, ``north_mas`` (frame of the data) and ``rv_kms``
            (barycentric, systemic included, no instrument offset), each of
            shape (n_rows, n_epochs). One vectorised evaluation of
            :func:`orbitmass.core.orbit.evaluate` for all rows (no posterior
            object is built).
        """
        theta = self.theta if rows is None else self.theta[np.asarray(rows)]
        n_rows = theta.shape[0]
        ta = None if t_astro is None else np.asarray(t_astro, float)
        tv = None if t_vel is None else np.asarray(t_vel, float)
        if tv is not None and ta is not None and tv.shape == ta.shape and np.array_equal(ta, tv):
            tv = ta  # one Kepler solve serves both (see predict_system)
        central_rows = None if tv is None else np.full(tv.shape[-1], bool(central))
        n_epochs = (0 if ta is None else ta.shape[-1]) + (0 if tv is None or tv is ta else tv.shape[-1])
        phys = self.space.unpack(theta)  # once; each block takes its rows
        # rows in blocks that keep the work arrays near the CPU caches: faster than one huge block
        step = max(1, PREDICT_BLOCK_ELEMENTS // max(n_epochs, 1))
        if step >= n_rows:
            return predict_system(self.space, phys, companion, t_astro=ta, t_vel=tv, central_rows=central_rows)
        out: dict[str, NDArray[np.float64]] = {}
        for k in range(0, n_rows, step):
            sl = slice(k, k + step)
            part = predict_system(
                self.space, {key: val[sl] if np.ndim(val) == 1 and len(val) == n_rows else val
                             for key, val in phys.items()}, companion,
                t_astro=None if ta is None else (ta[sl] if ta.ndim == 2 else ta),
                t_vel=None if tv is None else (tv[sl] if tv.ndim == 2 else tv), central_rows=central_rows)
            for key, val in part.items():
                if key not in out:
                    out[key] = np.empty((n_rows, val.shape[1]))
                out[key][sl] = val
        return out

    def velocity_offsets(self) -> dict[str, float]:
        """Posterior-median zero-point offset (km/s) of every instrument."""
        return {n: float(np.median(self.samples[f"offset_kms.{n}"])) for n in self.space.instrument_names}
