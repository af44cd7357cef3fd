"""Every reported quantity, once: label, unit, symbols, display format and display units.

:data:`QUANTITIES` is the one table that :mod:`orbitmass.results` (``COLUMN_DOC``),
the tables, the reports and the figures read. A quantity is keyed by its *base*
column, the sample column without the companion prefix (``"C1.period_yr"`` ->
``"period_yr"``) or the instrument suffix (``"offset_kms.spec-b"`` -> ``"offset_kms"``).

Stored and display units
    The key of a column names the unit it is stored in (``mass_msun``,
    ``distance_pc``); ``summary.json`` and the samples always keep those units.
    Tables, reports and figures may *show* a quantity in another unit chosen from
    its magnitude (:func:`display_unit`): a 46 kpc distance as kpc, a 0.02 mas
    parallax as µas, a Schwarzschild radius of a stellar-mass system in km. The
    rules are listed per quantity in :attr:`Quantity.display` (thresholds are our
    choice, common practice, no source).

Unit spellings
    :data:`UNITS` holds each unit in five spellings: the ASCII key written in
    ``COLUMN_DOC`` and ``summary.json`` (``"M_sun"``), plain text for reports and
    consoles (``"M☉"``), LaTeX for tables, matplotlib mathtext for figures and
    HTML for the HTML report.
    The solar-mass unit is spelt M☉ everywhere a reader sees it.

Conversion factors: 1 au = 149 597 870.7 km (IAU 2012 Resolution B2); 1 kpc =
1e3 pc; 1 arcsec = 1e3 mas = 1e6 µas; 1 Julian year = 365.25 d (IAU).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = [
    "Unit",
    "DisplayRule",
    "Quantity",
    "UNITS",
    "QUANTITIES",
    "COLUMN_PATTERNS",
    "quantity",
    "base_of",
    "display_unit",
    "column_doc",
]

#: 1 au in km (IAU 2012 Resolution B2, exact)
AU_KM = 149_597_870.7
#: days per Julian year (IAU)
JULIAN_YEAR_D = 365.25


@dataclass(frozen=True)
class Unit:
    """One unit in every spelling a reader meets.

    Attributes
    ----------
    key : str
        ASCII form written in ``COLUMN_DOC`` and ``summary.json`` (e.g. ``"M_sun"``).
    text : str
        Plain text (Markdown, console, CSV headers of display tables), e.g. ``"M☉"``.
    latex : str
        LaTeX text-mode form (math wrapped in ``$``), e.g. ``r"$M_\\odot$"``.
    math : str
        matplotlib mathtext *inside* ``$...$``, e.g. ``r"M_\\odot"``.
    html : str
        HTML form.
    """

    key: str
    text: str
    latex: str
    math: str
    html: str


def _u(key: str, text: str, latex: str, math_: str, html_: str | None = None) -> Unit:
    return Unit(key, text, latex, math_, text if html_ is None else html_)


#: unit key -> :class:`Unit`
UNITS: dict[str, Unit] = {
    u.key: u
    for u in (
        _u("M_sun", "M☉", r"$M_\odot$", r"M_\odot", "<i>M</i><sub>☉</sub>"),
        _u("pc", "pc", "pc", r"\mathrm{pc}"),
        _u("kpc", "kpc", "kpc", r"\mathrm{kpc}"),
        _u("Mpc", "Mpc", "Mpc", r"\mathrm{Mpc}"),
        _u("uas", "µas", r"$\mu$as", r"\mu\mathrm{as}"),
        _u("mas", "mas", "mas", r"\mathrm{mas}"),
        _u("arcsec", "arcsec", "arcsec", r"\mathrm{arcsec}"),
        _u("km", "km", "km", r"\mathrm{km}"),
        _u("au", "au", "au", r"\mathrm{au}"),
        _u("km/s", "km/s", r"km\,s$^{-1}$", r"\mathrm{km\,s^{-1}}", "km&thinsp;s<sup>−1</sup>"),
        _u("mas/yr", "mas/yr", r"mas\,yr$^{-1}$", r"\mathrm{mas\,yr^{-1}}",
           "mas&thinsp;yr<sup>−1</sup>"),
        _u("uas/yr", "µas/yr", r"$\mu$as\,yr$^{-1}$", r"\mu\mathrm{as\,yr^{-1}}",
           "µas&thinsp;yr<sup>−1</sup>"),
        _u("yr", "yr", "yr", r"\mathrm{yr}"),
        _u("d", "d", "d", r"\mathrm{d}"),
        _u("Julian yr", "Julian yr", "yr (Julian)", r"\mathrm{yr}"),
        _u("MJD", "MJD", "MJD", r"\mathrm{MJD}"),
        _u("deg", "deg", "deg", r"\mathrm{deg}"),
        _u("arcmin", "arcmin", "arcmin", r"\mathrm{arcmin}"),
        _u("rad", "rad", "rad", r"\mathrm{rad}"),
        _u("R_S", "R_S", r"$R_\mathrm{S}$", r"R_\mathrm{S}", "<i>R</i><sub>S</sub>"),
        _u("", "", "", ""),
    )
}


@dataclass(frozen=True)
class DisplayRule:
    """Show a quantity in ``unit`` (``value * factor``) when ``|stored value| >= above``.

    Rules of a quantity are tried from the last to the first; the first whose
    ``above`` the magnitude reaches wins (the first rule should have ``above=0``).
    """

    unit: str
    factor: float
    above: float = 0.0


@dataclass(frozen=True)
class Quantity:
    """A reported quantity.

    Attributes
    ----------
    key : str
        Base column (stored unit in its name), e.g. ``"period_yr"``.
    label : str
        Short ASCII label written in ``COLUMN_DOC`` (``"P"``).
    name : str
        Name in tables and reports (``"Period"``).
    unit : str
        Key of the stored unit in :data:`UNITS`.
    latex : str
        LaTeX math symbol (also valid mathtext), e.g. ``r"T_\\mathrm{p}"``.
    text : str
        Plain-text symbol (``"T_p"``).
    html : str
        HTML symbol.
    meaning : str
        One-line definition (``COLUMN_DOC``).
    fmt : str
        Format of a single number (no errors) in the stored unit.
    display : tuple of DisplayRule
        Display units chosen by magnitude; empty: always the stored unit.
    """

    key: str
    label: str
    name: str
    unit: str
    latex: str
    text: str
    html: str
    meaning: str
    fmt: str = ".4g"
    display: tuple[DisplayRule, ...] = field(default=())


def _q(key, label, name, unit, latex, text, html_, meaning, display=(), fmt=".4g") -> Quantity:
    return Quantity(key, label, name, unit, latex, text, html_, meaning, fmt, tuple(display))


_ANGLE_SMALL = (DisplayRule("uas", 1e3), DisplayRule("mas", 1.0, 1.0),
                DisplayRule("arcsec", 1e-3, 1e4))
_DISTANCE = (DisplayRule("pc", 1.0), DisplayRule("kpc", 1e-3, 1e3), DisplayRule("Mpc", 1e-6, 1e6))
_LENGTH_AU = (DisplayRule("km", AU_KM), DisplayRule("au", 1.0, 1e-2))
_PERIOD = (DisplayRule("d", JULIAN_YEAR_D), DisplayRule("yr", 1.0, 1.0))
_MOTION = (DisplayRule("uas/yr", 1e3), DisplayRule("mas/yr", 1.0, 1.0))

#: base column -> :class:`Quantity`, in report order (system, instruments, companion)
QUANTITIES: dict[str, Quantity] = {
    q.key: q
    for q in (
        _q("mass_msun", "M", "Total mass", "M_sun", "M", "M", "<i>M</i>",
           "total mass of central body + companion (Kepler III)"),
        _q("distance_pc", "D", "Distance", "pc", "D", "D", "<i>D</i>",
           "distance (angular-diameter distance for a redshift)", _DISTANCE),
        _q("parallax_mas", "varpi", "Parallax", "mas", r"\varpi", "ϖ", "ϖ",
           "parallax 1000 / D", _ANGLE_SMALL[:2]),
        _q("schwarzschild_radius_au", "R_S", "Schwarzschild radius", "au", r"R_\mathrm{S}", "R_S",
           "<i>R</i><sub>S</sub>", "Schwarzschild radius 2GM/c^2 of the total mass", _LENGTH_AU),
        _q("systemic_kms", "v_sys", "Systemic velocity", "km/s", r"v_\mathrm{sys}", "v_sys",
           "<i>v</i><sub>sys</sub>", "barycentre line-of-sight velocity (relative frame)"),
        _q("x0_mas", "x0", "Barycentre east offset", "mas", "x_0", "x0", "<i>x</i><sub>0</sub>",
           "barycentre east offset at the reference epoch"),
        _q("y0_mas", "y0", "Barycentre north offset", "mas", "y_0", "y0", "<i>y</i><sub>0</sub>",
           "barycentre north offset at the reference epoch"),
        _q("vx0_mas_per_yr", "vx0", "Barycentre east proper motion", "mas/yr", r"\dot{x}_0", "vx0",
           "<i>ẋ</i><sub>0</sub>", "barycentre east proper motion"),
        _q("vy0_mas_per_yr", "vy0", "Barycentre north proper motion", "mas/yr", r"\dot{y}_0", "vy0",
           "<i>ẏ</i><sub>0</sub>", "barycentre north proper motion"),
        _q("vz0_kms", "vz0", "Barycentre line-of-sight velocity", "km/s", "v_{z,0}", "vz0",
           "<i>v</i><sub>z,0</sub>", "barycentre line-of-sight velocity (absolute frame)"),
        _q("offset_kms", "offset", "Velocity offset", "km/s", r"\Delta v", "Δv", "Δ<i>v</i>",
           "zero-point offset of instrument <I>"),
        _q("jitter_kms", "jitter", "Velocity jitter", "km/s", r"\sigma_\mathrm{jit}", "σ_jit",
           "<i>σ</i><sub>jit</sub>", "extra velocity scatter of instrument <I>"),
        _q("redshift_factor", "f_z", "Redshift factor", "", r"f_\mathrm{z}", "f_z", "<i>f</i><sub>z</sub>",
           "scale of the gravitational redshift + transverse Doppler shift (0 Newton, 1 general relativity)"),
        _q("precession_factor", "f_SP", "Precession factor", "", r"f_\mathrm{SP}", "f_SP",
           "<i>f</i><sub>SP</sub>",
           "scale of the Schwarzschild periastron precession (0 Newton, 1 general relativity)"),
        _q("extended_mass_fraction", "f_ext", "Extended mass fraction", "", r"f_\mathrm{ext}", "f_ext",
           "<i>f</i><sub>ext</sub>", "mass of the Plummer sphere / central mass"),
        _q("period_yr", "P", "Period", "yr", "P", "P", "<i>P</i>", "orbital period (rest frame)",
           _PERIOD),
        _q("period_obs_yr", "P_obs", "Period (observed)", "yr", r"P_\mathrm{obs}", "P_obs",
           "<i>P</i><sub>obs</sub>", "orbital period on the observed timeline (1+z) P", _PERIOD),
        _q("eccentricity", "e", "Eccentricity", "", "e", "e", "<i>e</i>", "eccentricity"),
        _q("inclination_deg", "i", "Inclination", "deg", "i", "i", "<i>i</i>",
           "inclination; < 90 deg: position angle increases"),
        _q("arg_periastron_deg", "omega", "Argument of periastron", "deg", r"\omega", "ω",
           "<i>ω</i>", "argument of periastron of the companion"),
        _q("ascending_node_deg", "Omega", "Ascending node", "deg", r"\Omega", "Ω", "Ω",
           "position angle of the ascending (receding) node"),
        _q("mean_anomaly_deg", "M0", "Mean anomaly at the reference epoch", "deg", "M_0", "M0",
           "<i>M</i><sub>0</sub>", "mean anomaly at the reference epoch"),
        _q("periastron_time_jyr", "T_p", "Time of periastron", "Julian yr", r"T_\mathrm{p}", "T_p",
           "<i>T</i><sub>p</sub>", "epoch of periastron nearest the reference epoch", fmt=".3f"),
        _q("semimajor_axis_mas", "a", "Semimajor axis", "mas", "a", "a", "<i>a</i>",
           "angular semimajor axis of the relative orbit", _ANGLE_SMALL),
        _q("semimajor_axis_au", "a", "Semimajor axis", "au", "a", "a", "<i>a</i>",
           "semimajor axis of the relative orbit", _LENGTH_AU),
        _q("periastron_au", "r_p", "Periastron distance", "au", r"r_\mathrm{p}", "r_p",
           "<i>r</i><sub>p</sub>", "periastron distance a (1 - e)", _LENGTH_AU),
        _q("periastron_rs", "r_p", "Periastron distance", "R_S",
           r"r_\mathrm{p}", "r_p", "<i>r</i><sub>p</sub>",
           "periastron in Schwarzschild radii of the total mass"),
        _q("periastron_speed_kms", "v_p", "Periastron speed", "km/s", r"v_\mathrm{p}", "v_p",
           "<i>v</i><sub>p</sub>", "relative speed at periastron (vis-viva)"),
        _q("precession_arcmin_per_orbit", "dw_GR", "Schwarzschild precession per orbit", "arcmin",
           r"\Delta\omega_\mathrm{GR}", "Δω_GR", "Δ<i>ω</i><sub>GR</sub>",
           "periastron advance per orbit predicted by general relativity, 6 pi GM / (c^2 a (1 - e^2))"),
        _q("redshift_periastron_kms", "dv_GR", "Redshift at periastron", "km/s", r"\Delta v_\mathrm{GR,p}",
           "Δv_GR,p", "Δ<i>v</i><sub>GR,p</sub>",
           "gravitational redshift + transverse Doppler at periastron predicted by general relativity"),
        _q("roemer_delay_range_days", "dt_R", "Roemer delay range", "d", r"\Delta t_\mathrm{R}", "Δt_R",
           "Δ<i>t</i><sub>R</sub>", "full range of the light-travel time across the orbit"),
        _q("semi_amplitude_kms", "K", "Velocity semi-amplitude", "km/s", "K", "K", "<i>K</i>",
           "velocity semi-amplitude of the relative orbit"),
        _q("semi_amplitude_central_kms", "K_c", "Central-body semi-amplitude", "km/s", r"K_\mathrm{c}", "K_c",
           "<i>K</i><sub>c</sub>", "velocity semi-amplitude of the central body (reflex)"),
        _q("a_sin_i_au", "a sin i", "Projected semimajor axis", "au", r"a \sin i", "a sin i",
           "<i>a</i> sin <i>i</i>", "projected semimajor axis of the relative orbit (velocity-only companion)"),
        _q("mass_function_msun", "f(M)", "Mass function", "M_sun", r"f(M)", "f(M)", "<i>f</i>(<i>M</i>)",
           "mass function P K^3 (1-e^2)^(3/2) / (2 pi G) of the companion's velocities (velocity-only companion)"),
        _q("m_sin3i_msun", "M sin^3 i", "Minimum mass", "M_sun", r"M \sin^3 i", "M sin^3 i",
           "<i>M</i> sin<sup>3</sup> <i>i</i>", "total mass times sin^3 i (velocity-only companion)"),
        _q("mass_ratio", "q", "Mass ratio", "", "q", "q", "<i>q</i>", "companion / central body mass"),
        _q("central_mass_msun", "M_c", "Central body mass", "M_sun", r"M_\mathrm{c}", "M_c",
           "<i>M</i><sub>c</sub>", "central body mass M / (1 + q)"),
        _q("companion_mass_msun", "m", "Companion mass", "M_sun", "m", "m", "<i>m</i>",
           "companion mass q M / (1 + q)"),
        *(_q(f"{c}_mas", c, f"Thiele-Innes constant {c}", "mas", c, c, f"<i>{c}</i>",
             f"Thiele-Innes constant {c}") for c in "ABFG"),
        _q("log_posterior", "ln p", "Log posterior", "", r"\ln p", "ln p", "ln <i>p</i>",
           "log posterior density (sampled variables)"),
    )
}

#: base column -> pattern of the sample column (``<C>`` companion, ``<I>`` instrument)
COLUMN_PATTERNS: dict[str, str] = {
    k: (f"{k}.<I>" if k in ("offset_kms", "jitter_kms")
        else k if k in ("mass_msun", "distance_pc", "parallax_mas", "schwarzschild_radius_au",
                        "systemic_kms", "x0_mas", "y0_mas", "vx0_mas_per_yr", "vy0_mas_per_yr",
                        "vz0_kms", "log_posterior", "redshift_factor", "precession_factor",
                        "extended_mass_fraction")
        else f"<C>.{k}")
    for k in QUANTITIES
}

#: the sampled phase variable (``<C>.mean_longitude`` in the parameter space), defined once:
#: lambda = M0 + omega is the mean argument of latitude at the reference epoch (it omits the
#: node, so it is not the classical mean longitude M0 + omega + Omega)
PHASE_NAME = "mean argument of latitude at the reference epoch, λ = M₀ + ω"


def base_of(column: str, companions=()) -> str:
    """Base key of a sample column (companion prefix and instrument suffix removed).

    Without ``companions``, a prefix that is not itself a key of :data:`QUANTITIES`
    is taken for a companion name.

    Examples
    --------
    >>> base_of("C1.period_yr", ["C1"]), base_of("offset_kms.spec-b", ["C1"])
    ('period_yr', 'offset_kms')
    """
    head, _, tail = str(column).partition(".")
    if tail and (head in companions or (not companions and head not in QUANTITIES)):
        return tail
    return head


def quantity(column: str, companions=()) -> Quantity | None:
    """The :class:`Quantity` of a sample column, or None when it is not in the table."""
    return QUANTITIES.get(base_of(column, companions))


def display_unit(column: str, magnitude: float, companions=(), *,
                 override: str | None = None) -> tuple[Unit, float]:
    """Display unit of a quantity for values of about ``magnitude`` (stored units).

    Parameters
    ----------
    column : str
        Sample column or base key.
    magnitude : float
        Typical value in the stored unit (e.g. the posterior median).
    companions : sequence of str
        Companion names (to strip the prefix).
    override : str, optional
        Key of a unit to use instead (must be one of the quantity's display units
        or its stored unit).

    Returns
    -------
    (Unit, float)
        The unit and the factor: displayed value = stored value * factor.

    Raises
    ------
    ValueError
        For an ``override`` the quantity cannot be shown in.

    Examples
    --------
    >>> u, f = display_unit("distance_pc", 46190.0); u.text, f
    ('kpc', 0.001)
    >>> display_unit("parallax_mas", 0.021649)[0].text
    'µas'
    """
    q = quantity(column, companions)
    if q is None:
        return UNITS[""], 1.0
    rules = q.display or (DisplayRule(q.unit, 1.0),)
    if override is not None:
        for r in rules + (DisplayRule(q.unit, 1.0),):
            if r.unit == override:
                return UNITS[r.unit], r.factor
        raise ValueError(f"{q.key} cannot be shown in {override!r}; expected one of "
                         f"{', '.join(sorted({r.unit for r in rules} | {q.unit}))}")
    mag = abs(float(magnitude)) if math.isfinite(float(magnitude)) else 0.0
    chosen = rules[0]
    for r in rules:
        if mag >= r.above:
            chosen = r
    return UNITS[chosen.unit], chosen.factor


def column_doc() -> dict[str, tuple[str, str, str]]:
    """``COLUMN_DOC`` of :mod:`orbitmass.results`: column pattern -> (label, unit key, meaning)."""
    return {COLUMN_PATTERNS[k]: (q.label, q.unit, q.meaning) for k, q in QUANTITIES.items()}
