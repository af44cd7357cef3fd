"""Campbell elements <-> Thiele-Innes constants; the orientation conventions in one place.

Conventions (fixed by the project, see also ``docs/input-format.md``)
---------------------------------------------------------------------
Sky frame
    ``x`` = north offset (``Delta delta``), ``y`` = east offset
    (``Delta alpha cos delta``), ``z`` = along the line of sight, positive
    **away** from the observer (a positive radial velocity means receding).
    The position angle ``PA = atan2(y, x)`` counts from north through east.
    Note that (north, east, away) is a left-handed triple as seen on the sky;
    the formulas below are the rotation ``Rz(Omega) Rx(i) Rz(omega)`` applied to
    the orbital-plane vector and read in this axis order.
Elements
    ``a`` semi-major axis (any unit; the Thiele-Innes constants carry the same
    unit), ``i`` inclination in ``[0, pi]``, ``omega`` argument of periastron
    of the companion in its orbit relative to the central body, ``Omega``
    position angle of the ascending node, the node where the companion
    recedes (``z`` goes from negative to positive). For ``i < pi/2`` the
    position angle increases with time. All angles are radians.
Thiele-Innes constants (classical definitions)::

    A = a ( cos w cos W - sin w sin W cos i)
    B = a ( cos w sin W + sin w cos W cos i)
    F = a (-sin w cos W - cos w sin W cos i)
    G = a (-sin w sin W + cos w cos W cos i)
    C = a sin w sin i
    H = a cos w sin i

with ``w = omega`` and ``W = Omega``. With ``X = cos E - e`` and
``Y = sqrt(1 - e^2) sin E`` (``E`` the eccentric anomaly) the relative
position is ``north = A X + F Y``, ``east = B X + G Y``, ``z = C X + H Y``.

Inversion
---------
The classical inversion rests on the half sums and differences::

    (A + G) / 2 = a cos^2(i/2) cos(omega + Omega)    (B - F) / 2 = a cos^2(i/2) sin(omega + Omega)
    (A - G) / 2 = a sin^2(i/2) cos(omega - Omega)   -(B + F) / 2 = a sin^2(i/2) sin(omega - Omega)

so ``a = P + Q`` and ``i = 2 atan2(sqrt(Q), sqrt(P))`` with ``P = a cos^2(i/2)``,
``Q = a sin^2(i/2)`` the two moduli, and ``omega +/- Omega`` from ``atan2``.
Halving the two angles leaves ``(omega, Omega)`` and ``(omega + pi, Omega + pi)``
indistinguishable: positions alone do not tell which node is ascending.
Without line-of-sight information :func:`thiele_innes_to_campbell` returns
``Omega`` in ``[0, pi)``; with ``C`` and ``H`` it picks the solution whose
``z`` has the sign of ``C X + H Y`` and returns ``omega`` and ``Omega`` in
``[0, 2 pi)``.

Degeneracies
------------
* ``i = 0`` (face-on, moving counter-clockwise on the sky): only
  ``omega + Omega`` is defined. When ``Q`` is at the rounding level of the
  constants (``Q <= 4 eps (P + Q)``, i.e. ``i`` below about 6e-8 rad) the
  inversion returns ``i = 0``, ``Omega = 0`` and ``omega = omega + Omega``.
* ``i = pi`` (face-on, clockwise): only ``omega - Omega`` is defined; likewise
  ``i = pi``, ``Omega = 0``, ``omega = omega - Omega``.
* Near these limits the constants depend on ``i`` only quadratically
  (``Q = a sin^2(i/2)``), so recovering ``i`` from rounded constants loses
  precision: the error is about ``4 eps / sin i`` rad, and ``omega - Omega``
  (resp. ``omega + Omega``) is lost at about ``eps / sin^2(i/2)`` rad. The
  forward map and the round trip constants -> elements -> constants are exact
  to rounding everywhere.
* ``e = 0`` plays no role here (``omega`` is then the phase origin, set by the
  caller).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "campbell_to_thiele_innes",
    "thiele_innes_to_campbell",
    "thiele_innes_jacobian_log",
]

_TWO_PI = 2.0 * math.pi
#: Relative size below which a modulus P or Q is rounding noise (face-on orbit).
_DEGENERATE = 4.0 * np.finfo(np.float64).eps

FloatArray = NDArray[np.float64]


def campbell_to_thiele_innes(
    a: ArrayLike, i: ArrayLike, omega: ArrayLike, Omega: ArrayLike
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray, FloatArray, FloatArray]:
    """Thiele-Innes constants from the Campbell orientation elements.

    Parameters
    ----------
    a : array_like
        Semi-major axis, any unit (mas for sky fits, au for physical orbits).
    i : array_like
        Inclination, radians, in ``[0, pi]``.
    omega : array_like
        Argument of periastron of the companion, radians.
    Omega : array_like
        Position angle of the ascending node (the receding node), radians.

    Returns
    -------
    A, B, F, G, C, H : ndarray
        The Thiele-Innes constants (module docstring), in the unit of ``a``,
        each of the broadcast shape of the inputs.

    Examples
    --------
    Face-on orbit with periastron due north: ``X`` runs north, ``Y`` east,
    nothing along the line of sight.

    >>> A, B, F, G, C, H = campbell_to_thiele_innes(1.0, 0.0, 0.0, 0.0)
    >>> [float(v) for v in (A, B, F, G, C, H)]
    [1.0, 0.0, -0.0, 1.0, 0.0, 0.0]
    """
    a = np.asarray(a, dtype=np.float64)
    cos_i, sin_i = np.cos(i), np.sin(i)
    cos_w, sin_w = np.cos(omega), np.sin(omega)
    cos_n, sin_n = np.cos(Omega), np.sin(Omega)
    a_cos_i = a * cos_i
    A = a * cos_w * cos_n - a_cos_i * sin_w * sin_n
    B = a * cos_w * sin_n + a_cos_i * sin_w * cos_n
    F = -a * sin_w * cos_n - a_cos_i * cos_w * sin_n
    G = -a * sin_w * sin_n + a_cos_i * cos_w * cos_n
    a_sin_i = a * sin_i
    C = a_sin_i * sin_w
    H = a_sin_i * cos_w
    A, B, F, G, C, H = np.broadcast_arrays(A, B, F, G, C, H)
    return A, B, F, G, C, H


def _wrap(angle: FloatArray, period: float) -> FloatArray:
    """``angle`` modulo ``period`` in ``[0, period)`` (np.mod can return ``period``)."""
    wrapped = np.mod(angle, period)
    return np.where(wrapped >= period, wrapped - period, wrapped)


def thiele_innes_to_campbell(
    A: ArrayLike,
    B: ArrayLike,
    F: ArrayLike,
    G: ArrayLike,
    C: ArrayLike | None = None,
    H: ArrayLike | None = None,
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Campbell elements from the Thiele-Innes constants.

    Parameters
    ----------
    A, B, F, G : array_like
        Sky-plane Thiele-Innes constants, any unit (the unit of ``a``).
    C, H : array_like, optional
        Line-of-sight constants. Only the sign of ``C sin omega + H cos omega``
        (``a sin i`` for the right node) is used, to decide which node is
        ascending; ``a`` and ``i`` come from ``A, B, F, G`` alone, so ``C, H``
        fitted separately (e.g. from radial velocities) need not match them
        exactly. Give both or neither.

    Returns
    -------
    a : ndarray
        Semi-major axis, in the unit of the constants.
    i : ndarray
        Inclination, radians, in ``[0, pi]``.
    omega, Omega : ndarray
        Argument of periastron and position angle of the ascending node,
        radians. Without ``C, H``: ``Omega`` in ``[0, pi)`` and ``omega`` in
        ``[0, 2 pi)``, one of the two solutions ``(omega, Omega)``,
        ``(omega + pi, Omega + pi)``. With ``C, H``: the solution whose
        line-of-sight motion matches, both in ``[0, 2 pi)``. For a face-on
        orbit (``i = 0`` or ``pi`` to rounding) ``Omega = 0``; see the module
        docstring.

    Raises
    ------
    ValueError
        If only one of ``C`` and ``H`` is given.

    Examples
    --------
    >>> import numpy as np
    >>> consts = campbell_to_thiele_innes(2.0, np.radians(60.0), np.radians(250.0),
    ...                                   np.radians(200.0))
    >>> a, i, w, W = thiele_innes_to_campbell(*consts)  # with C and H
    >>> print(f"{float(a):.6f} {np.degrees(i):.6f} {np.degrees(w):.6f} {np.degrees(W):.6f}")
    2.000000 60.000000 250.000000 200.000000
    >>> a, i, w, W = thiele_innes_to_campbell(*consts[:4])  # node ambiguous
    >>> print(f"{np.degrees(w):.6f} {np.degrees(W):.6f}")
    70.000000 20.000000
    """
    if (C is None) != (H is None):
        raise ValueError("give both line-of-sight constants C and H, or neither")
    A, B, F, G = (np.asarray(x, dtype=np.float64) for x in (A, B, F, G))
    sum_c, sum_s = A + G, B - F  # 2 P (cos, sin)(omega + Omega)
    dif_c, dif_s = A - G, -(B + F)  # 2 Q (cos, sin)(omega - Omega)
    big_p = 0.5 * np.hypot(sum_c, sum_s)
    big_q = 0.5 * np.hypot(dif_c, dif_s)
    a = big_p + big_q
    inc = 2.0 * np.arctan2(np.sqrt(big_q), np.sqrt(big_p))
    w_plus_n = np.arctan2(sum_s, sum_c)
    w_minus_n = np.arctan2(dif_s, dif_c)
    omega = 0.5 * (w_plus_n + w_minus_n)
    node = 0.5 * (w_plus_n - w_minus_n)
    # Face-on limits: one of the two angle combinations is undefined; Omega = 0.
    face_on = big_q <= _DEGENERATE * a
    face_off = ~face_on & (big_p <= _DEGENERATE * a)
    inc = np.where(face_on, 0.0, np.where(face_off, math.pi, inc))
    omega = np.where(face_on, w_plus_n, np.where(face_off, w_minus_n, omega))
    node = np.where(face_on | face_off, 0.0, node)
    if C is None:
        wrapped = _wrap(node, math.pi)
        omega = omega + (wrapped - node)  # the same multiple of pi on both angles
        return a, inc, _wrap(omega, _TWO_PI), wrapped
    # z = a sin i (sin omega X + cos omega Y) = C X + H Y: for the right omega,
    # C sin omega + H cos omega = a sin i >= 0.
    C, H = np.asarray(C, dtype=np.float64), np.asarray(H, dtype=np.float64)
    # Face-on orbits have no line-of-sight motion to go by (at i = pi, sin i rounds
    # to 1.2e-16, not 0): keep Omega = 0 there.
    flip = ((C * np.sin(omega) + H * np.cos(omega)) < 0.0) & ~(face_on | face_off)
    omega = np.where(flip, omega + math.pi, omega)
    node = np.where(flip, node + math.pi, node)
    return a, inc, _wrap(omega, _TWO_PI), _wrap(node, _TWO_PI)


def thiele_innes_jacobian_log(a: ArrayLike, i: ArrayLike) -> FloatArray:
    """Log of the Jacobian determinant ``|d(A, B, F, G) / d(a, i, omega, Omega)|``.

    From the module docstring's half sums and differences, ``(A, B, F, G)``
    is a linear map with determinant magnitude 4 of two pairs of polar
    coordinates ``(P, omega + Omega)`` and ``(Q, omega - Omega)``, so
    ``|J| = 4 P Q |d(P, Q)/d(a, i)| |d(omega + Omega, omega - Omega)/d(omega, Omega)|
    = 4 P Q (a sin i / 2) 2 = a^3 sin^3 i``.

    A flat prior on ``(A, B, F, G)`` is therefore a prior proportional to
    ``a^3 sin^3 i`` on the Campbell elements; to reweight samples drawn
    with the former to a prior ``pi(a, i, omega, Omega)`` use weights
    ``pi / exp(thiele_innes_jacobian_log(a, i))``.

    Parameters
    ----------
    a : array_like
        Semi-major axis (> 0), in the unit of the constants.
    i : array_like
        Inclination, radians, in ``[0, pi]``.

    Returns
    -------
    ndarray
        ``3 log a + 3 log sin i``: ``-inf`` at ``i = 0`` (at ``i = pi`` about
        -330, as ``sin(pi)`` rounds to 1.2e-16).

    Examples
    --------
    >>> import numpy as np
    >>> print(f"{float(thiele_innes_jacobian_log(2.0, np.pi / 2)):.12f}")
    2.079441541680
    """
    a = np.asarray(a, dtype=np.float64)
    sin_i = np.abs(np.sin(np.asarray(i, dtype=np.float64)))
    with np.errstate(divide="ignore"):
        return 3.0 * (np.log(a) + np.log(sin_i))
