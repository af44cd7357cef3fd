"""In-memory datasets: a target, its companions, tables and priors, validated.

These containers are what :mod:`orbitmass.io.target` builds from a target file
and what the model and likelihood consume. Every array is a plain float array
in internal units (:mod:`orbitmass.units`); angles of priors are in radians.
Instances are frozen. :class:`Astrometry` and :class:`Velocities` make their data
arrays read-only on construction, in place (the arrays passed in become read-only
too); their ``lines`` arrays are left as given. No container checks shapes or
values: the readers of :mod:`orbitmass.io` validate before they build them.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from orbitmass.model.priors import Fixed, Prior

__all__ = ["Astrometry", "Velocities", "Instrument", "Companion", "Distance", "Relativity",
           "ExtendedMass", "FitOptions", "Target", "name_problem", "NAME_PUNCTUATION",
           "NAME_MAX_LENGTH"]

#: Characters besides letters, digits and combining marks (any script) allowed in the
#: names of companions, instruments and planes.
NAME_PUNCTUATION = " -_+#"
#: Longest name of a companion, instrument or plane, in characters.
NAME_MAX_LENGTH = 64


def _char(ch: str) -> str:
    if ch.isprintable() and not ch.isspace():
        return f"'{ch}'"
    return f"U+{ord(ch):04X} ({unicodedata.name(ch, 'a control character').lower()})"


def name_problem(name: str) -> str | None:
    """What is wrong with a companion, instrument or plane name, or None when it is valid.

    A name has 1 to :data:`NAME_MAX_LENGTH` characters: letters, digits and
    combining marks of any script, spaces (not at either end) and the
    characters of :data:`NAME_PUNCTUATION` (``- _ + #``), with at least
    one letter or digit. Dots, slashes, quotes, ``$`` and control
    characters are refused: names become parts of parameter names
    (``NAME.period``) and of output tables.

    Examples
    --------
    >>> name_problem("S2-a"), name_problem("Ωμέγα 1")
    (None, None)
    >>> name_problem("S2.a")
    "contains '.'; names may use letters, digits, spaces and - _ + # only"
    """
    if not name:
        return "is empty"
    if len(name) > NAME_MAX_LENGTH:
        return f"has {len(name)} characters; names have at most {NAME_MAX_LENGTH}"
    if name != name.strip():
        return "starts or ends with a blank"
    for ch in name:
        if unicodedata.category(ch)[0] not in "LMN" and ch not in NAME_PUNCTUATION:
            return f"contains {_char(ch)}; names may use letters, digits, spaces and - _ + # only"
    if not any(unicodedata.category(ch)[0] in "LN" for ch in name):
        return "has no letter or digit"
    return None

COMPANION_PRIOR_KEYS = (
    "period",
    "eccentricity",
    "inclination",
    "arg_periastron",
    "ascending_node",
    "mean_anomaly",
    "periastron_time",
    "mass_ratio",
)
CENTRAL_PRIOR_KEYS = ("mass", "x0", "y0", "vx0", "vy0", "vz0", "systemic")


def _freeze(*arrays: NDArray) -> None:
    for a in arrays:
        if isinstance(a, np.ndarray):
            a.flags.writeable = False


@dataclass(frozen=True)
class Astrometry:
    """Relative (or absolute-frame) positions of one companion.

    Each row is either Cartesian (``polar[k] == False``: ``value1`` = east
    offset, ``value2`` = north offset, both mas) or polar (``polar[k] ==
    True``: ``value1`` = separation rho in mas, ``value2`` = position angle
    theta in degrees, north through east). ``err1``, ``err2`` are the
    matching 1-sigma errors (mas, or mas and deg) and ``corr`` their
    correlation (0 when not given). ``t_yr`` are Julian-year epochs (TDB).
    ``lines`` are the 1-based line numbers in ``source`` (for messages).
    All arrays have shape ``(n,)`` and are sorted by epoch.
    """

    t_yr: NDArray[np.float64]
    polar: NDArray[np.bool_]
    value1: NDArray[np.float64]
    value2: NDArray[np.float64]
    err1: NDArray[np.float64]
    err2: NDArray[np.float64]
    corr: NDArray[np.float64]
    source: str = ""
    lines: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    def __post_init__(self) -> None:
        _freeze(self.t_yr, self.polar, self.value1, self.value2, self.err1, self.err2, self.corr)

    def __len__(self) -> int:
        return int(self.t_yr.size)

    def east_north(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """East and north offsets (mas) of every row, polar rows converted."""
        theta = np.deg2rad(self.value2)
        east = np.where(self.polar, self.value1 * np.sin(theta), self.value1)
        north = np.where(self.polar, self.value1 * np.cos(theta), self.value2)
        return east, north

    def east_north_errors(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Approximate 1-sigma east and north errors (mas), for plotting only."""
        theta = np.deg2rad(self.value2)
        sig_t = np.deg2rad(self.err2) * self.value1
        s, c = np.sin(theta), np.cos(theta)
        e_pol = np.sqrt((s * self.err1) ** 2 + (c * sig_t) ** 2)
        n_pol = np.sqrt((c * self.err1) ** 2 + (s * sig_t) ** 2)
        return np.where(self.polar, e_pol, self.err1), np.where(self.polar, n_pol, self.err2)


@dataclass(frozen=True)
class Velocities:
    """Line-of-sight velocities (km/s, positive = receding) of one companion's system.

    ``instrument`` holds the instrument name of every row; ``central`` is True
    where the row measures the central body rather than the companion.
    Arrays have shape ``(n,)`` and are sorted by epoch.
    """

    t_yr: NDArray[np.float64]
    rv_kms: NDArray[np.float64]
    rv_err_kms: NDArray[np.float64]
    instrument: NDArray[np.str_]
    central: NDArray[np.bool_]
    source: str = ""
    lines: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    def __post_init__(self) -> None:
        _freeze(self.t_yr, self.rv_kms, self.rv_err_kms, self.instrument, self.central)

    def __len__(self) -> int:
        return int(self.t_yr.size)


@dataclass(frozen=True)
class Instrument:
    """An RV instrument: zero-point ``offset`` and ``jitter`` priors (km/s)."""

    name: str
    offset: Prior
    jitter: Prior


@dataclass(frozen=True)
class Companion:
    """One tracked companion: its data and element priors.

    ``priors`` maps each key of ``COMPANION_PRIOR_KEYS`` that applies to a
    :class:`~orbitmass.model.priors.Prior` (defaults filled in by the reader).
    Units: period in rest-frame Julian years, angles in radians,
    ``periastron_time`` in Julian years (observed timeline), eccentricity and
    mass ratio bare. Exactly one of ``mean_anomaly`` / ``periastron_time`` is
    present. ``mass_ratio`` is present only when central-body velocities exist.
    """

    name: str
    astrometry: Astrometry | None
    velocities: Velocities | None
    priors: dict[str, Prior]
    plane: str | None = None

    @property
    def has_central_velocities(self) -> bool:
        """True when some velocity rows measure the central body."""
        return self.velocities is not None and bool(np.any(self.velocities.central))

    @property
    def has_velocities(self) -> bool:
        """True when any velocity row exists for this companion's system."""
        return self.velocities is not None and len(self.velocities) > 0


@dataclass(frozen=True)
class Distance:
    """Distance information: at most one of ``prior`` (pc) and ``parallax`` (mas),
    and/or a ``redshift`` with its ``cosmology``: an astropy realisation name or a
    ``"flat-lcdm:H0=..,Om0=..,Tcmb0=.."`` specification (see
    :func:`orbitmass.core.cosmology.cosmology_from_spec`)."""

    prior: Prior | None = None
    parallax: Prior | None = None
    redshift: float | None = None
    cosmology: str = "Planck18"

    def describe(self) -> str:
        """The distance information in words, for messages and reports.

        Examples
        --------
        >>> Distance(parallax=Fixed(2.0)).describe()
        'parallax fixed at 2 mas'
        """
        parts = []
        if self.prior is not None:
            parts.append(f"distance {self.prior.describe('pc')}")
        if self.parallax is not None:
            parts.append(f"parallax {self.parallax.describe('mas')}")
        if self.redshift is not None:
            parts.append(f"redshift {self.redshift:g} ({self.cosmology})")
        return ", ".join(parts) or "no distance information"


@dataclass(frozen=True)
class Relativity:
    """The ``[relativity]`` table: first post-Newtonian terms, scaled by factors.

    ``redshift_factor`` (gravitational redshift and transverse Doppler in the
    velocities) and ``precession_factor`` (Schwarzschild precession of the
    periastron) are priors on bare numbers, 0 Newtonian and 1 general
    relativity, shared by every companion; a factor the table does not give
    is ``Fixed(0.0)``. ``roemer_delay``: light-travel time across the orbit.
    """

    redshift_factor: Prior = Fixed(0.0)
    precession_factor: Prior = Fixed(0.0)
    roemer_delay: bool = False


@dataclass(frozen=True)
class ExtendedMass:
    """The ``[extended_mass]`` table: a Plummer sphere of mass around the central body.

    ``fraction``: prior on its total mass over the central mass (bare
    numbers). The scale radius is given either as an angle
    (``scale_radius_mas``) or as a length (``scale_radius_au``); exactly one
    of the two is set, the other is None.
    """

    fraction: Prior
    scale_radius_mas: float | None = None
    scale_radius_au: float | None = None


@dataclass(frozen=True)
class FitOptions:
    """Run options of the ``[fit]`` table; None where the table does not set them.

    Options given on the command line or to :class:`orbitmass.fit.Fit`
    take precedence over these.

    Examples
    --------
    >>> FitOptions(walkers=64, seed=3).as_fit_kwargs()
    {'n_walkers': 64, 'seed': 3}
    """

    walkers: int | None = None
    seed: int | None = None
    max_steps: int | None = None

    def as_fit_kwargs(self) -> dict[str, int]:
        """The options that are set, under the keyword names of :class:`orbitmass.fit.Fit`."""
        names = {"walkers": "n_walkers", "seed": "seed", "max_steps": "max_steps"}
        return {names[k]: v for k, v in (("walkers", self.walkers), ("seed", self.seed),
                                          ("max_steps", self.max_steps)) if v is not None}


@dataclass(frozen=True)
class Target:
    """Everything a fit needs: data, priors and conventions of one target file.

    ``central_priors`` maps keys of ``CENTRAL_PRIOR_KEYS`` to priors: always
    ``mass`` (Msun, total mass); ``x0``, ``y0`` (mas), ``vx0``, ``vy0``
    (mas/yr), ``vz0`` (km/s) when ``frame == "absolute"``; ``systemic``
    (km/s) in the relative frame. ``instruments`` keeps declaration order
    (the first is the zero point). ``reference_epoch`` is a Julian year,
    already resolved to the mean data epoch when the file gave none.
    ``relativity`` and ``extended_mass`` are None when the target file has no
    such table; ``fit_options`` holds its ``[fit]`` table (all None without one).
    """

    name: str
    reference_epoch: float
    frame: str
    central_priors: dict[str, Prior]
    distance: Distance
    instruments: dict[str, Instrument]
    companions: tuple[Companion, ...]
    source: str = ""
    data_sha256: str = ""
    relativity: Relativity | None = None
    extended_mass: ExtendedMass | None = None
    fit_options: FitOptions = FitOptions()
