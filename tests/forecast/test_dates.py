"""Dates shown to people in forecast and plan outputs (``orbitmass.forecast._common.jyear_to_iso``).

Reference: astropy.time (TDB Julian year -> UTC), rounded to the nearest UTC day here.
"""

from __future__ import annotations

import numpy as np
from astropy.time import Time

from orbitmass.forecast._common import jyear_to_iso


def test_dates_are_the_nearest_utc_day():
    t = np.array([2022.0, 2023.75, 2024.6, 2025.5])  # within the leap-second table (no ErfaWarning)
    got = jyear_to_iso(t)
    utc = Time(t, format="jyear", scale="tdb").utc  # astropy is the reference for TDB -> UTC
    for g, u in zip(got, utc):
        day = Time(g, scale="utc")
        assert abs((u - day).to_value("day")) <= 0.5, (g, u.iso)
    assert got[0] == "2022-01-01"  # J2022.0 = 2021-12-31T23:58:51 UTC (astropy), nearest day 2022-01-01
    assert jyear_to_iso([np.nan, 2025.0])[0] == ""  # an unknown epoch gives an empty date
