"""Sun and sky for the forcing stage: solar position and Ineichen clear-sky GHI at the
middle of each hour, GHI decomposition, pressure from elevation, fixed UTC offsets."""

from __future__ import annotations

import datetime as _dt
import warnings

import numpy as np
import pandas as pd
import pvlib

from pondsim.forcing import psychrometry
from pondsim.forcing.columns import HALF_HOUR


def fixed_offset(utc_offset_h: float) -> _dt.timezone:
    """Fixed-offset zone for local standard time ``utc_offset_h`` hours from UTC."""
    return _dt.timezone(_dt.timedelta(hours=float(utc_offset_h)))


def _pandas4_warning():
    return getattr(pd.errors, "Pandas4Warning", FutureWarning)


def pressure_from_elevation(elevation_m):
    """Mean atmospheric pressure at an elevation [Pa], FAO-56 eq. 7 (see
    :func:`pondsim.forcing.psychrometry.pressure_from_elevation`, which gives kPa)."""
    return 1000.0 * psychrometry.pressure_from_elevation(elevation_m)


saturation_vapour_pressure = psychrometry.saturation_vapour_pressure
dewpoint_from_rh = psychrometry.dewpoint_from_rh


def solar_position_midhour(index, latitude, longitude, elevation_m=0.0, *,
                           pressure_pa=None, temp_air_c=12.0, delta_t=67.0):
    """Solar position at the middle of each hour, NREL SPA through pvlib.

    Parameters
    ----------
    index : pandas.DatetimeIndex
        tz-aware hour-START labels (the position is computed at ``index + 30 min``).
    latitude, longitude : float [deg]
        Site, north and east positive.
    elevation_m : float [m]
    pressure_pa : float or array-like [Pa], optional
        Air pressure for the refraction correction; default: FAO-56 eq. 7 at the site.
    temp_air_c : float or array-like [degC]
        Air temperature for the refraction correction.
    delta_t : float [s]
        TT − UT1; pvlib's default 67 s (the SPA worked example's value).

    Returns
    -------
    pandas.DataFrame
        pvlib's ``spa_python`` columns (``apparent_zenith``, ``zenith``, ``azimuth``, …),
        indexed by the hour-start labels.

    References
    ----------
    Reda & Andreas (2004), Solar position algorithm for solar radiation applications,
    Solar Energy 76:577–589, doi:10.1016/j.solener.2003.12.003.
    """
    if index.tz is None:
        raise ValueError("solar_position_midhour needs a tz-aware index (local standard time)")
    if pressure_pa is None:
        pressure_pa = float(pressure_from_elevation(elevation_m))
    mid = index + HALF_HOUR
    pos = pvlib.solarposition.spa_python(
        mid, latitude, longitude, altitude=elevation_m, pressure=pressure_pa,
        temperature=temp_air_c, delta_t=delta_t,
    )
    pos.index = index
    return pos


def clearsky_ghi_midhour(index, apparent_zenith, latitude, longitude, elevation_m,
                         pressure_pa=None):
    """Ineichen–Perez clear-sky GHI at the middle of each hour [W m-2].

    Linke turbidity from pvlib's monthly climatology (``lookup_linke_turbidity``,
    interpolated by day of year); relative air mass Kasten & Young (1989) from the
    apparent zenith, made absolute with the site pressure; extraterrestrial normal
    irradiance from Spencer (1971).

    References
    ----------
    Ineichen & Perez (2002), Solar Energy 73:151–157, doi:10.1016/S0038-092X(02)00045-2.
    """
    mid = index + HALF_HOUR
    with warnings.catch_warnings():
        # pvlib 0.16 calls DatetimeIndex.dayofyear (deprecated in pandas 3)
        warnings.simplefilter("ignore", _pandas4_warning())
        linke = np.asarray(pvlib.clearsky.lookup_linke_turbidity(mid, latitude, longitude))
    doy = np.asarray(mid.day_of_year, dtype=float)
    dni_extra = np.asarray(pvlib.irradiance.get_extra_radiation(doy))
    if pressure_pa is None:
        pressure_pa = float(pressure_from_elevation(elevation_m))
    zen = np.asarray(apparent_zenith, dtype=float)
    with np.errstate(all="ignore"):  # night: NaN air mass, handled just below
        am_rel = pvlib.atmosphere.get_relative_airmass(zen)
        am_abs = pvlib.atmosphere.get_absolute_airmass(am_rel, np.asarray(pressure_pa))
        cs = pvlib.clearsky.ineichen(zen, am_abs, linke, altitude=elevation_m,
                                     dni_extra=dni_extra)
    ghi = np.nan_to_num(np.asarray(cs["ghi"], dtype=float), nan=0.0)
    return np.where(zen < 90.0, np.clip(ghi, 0.0, None), 0.0)


def decompose_ghi(ghi, solar_zenith, day_of_year):
    """Split GHI into DNI and DHI with the Erbs et al. (1982) correlation (via pvlib).

    Parameters
    ----------
    ghi : array-like [W m-2]
    solar_zenith : array-like [deg]
    day_of_year : array-like [1..366]

    Returns
    -------
    dni, dhi : ndarray [W m-2]
        ``dhi + dni·cos(zenith) = ghi`` wherever the sun is up.

    References
    ----------
    Erbs, Klein & Duffie (1982), Estimation of the diffuse radiation fraction for hourly,
    daily and monthly-average global radiation, Solar Energy 28:293–302,
    doi:10.1016/0038-092X(82)90302-4.
    """
    out = pvlib.irradiance.erbs(np.asarray(ghi, dtype=float), np.asarray(solar_zenith),
                                np.asarray(day_of_year, dtype=float))
    dni = np.nan_to_num(np.asarray(out["dni"], dtype=float))
    dhi = np.nan_to_num(np.asarray(out["dhi"], dtype=float))
    return np.clip(dni, 0.0, None), np.clip(dhi, 0.0, None)


