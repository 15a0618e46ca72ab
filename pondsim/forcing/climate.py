"""Clear-sky site mode: hourly forcing from monthly climate normals, for a site with no
weather file.

Two generators return the same table as :func:`pondsim.forcing.weather.read_weather`:

* :func:`clearsky_weather` — every day of a month alike: Ineichen clear-sky GHI scaled
  to the month's clearness, Parton & Logan (1981) diurnal air temperature through the
  month's mean daily maximum and minimum, constant wind, RH from the normal.
* :func:`pondsim.forcing.synthetic.synthetic_weather` — the same, with day-to-day
  weather (Markov chain of daily clearness classes, cloud-tied persistent temperature
  anomalies, rain on cloudy days); it uses this module's common core.

``python -m pondsim.forcing.climate NORMALS.toml OUT.epw [--seed N]`` writes an EPW file from a
TOML file with a ``[site]`` and a ``[normals]`` table (see ``weather/README.md``).
"""

from __future__ import annotations

import argparse
import calendar
import sys
import tomllib
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing.weather import (
    DERIVED_COLUMNS,
    REQUIRED_COLUMNS,
    clearsky_ghi_midhour,
    decompose_ghi,
    fixed_offset,
    pressure_from_elevation,
    saturation_vapour_pressure,
    solar_position_midhour,
    write_epw,
)

__all__ = [
    "NORMALS",
    "validate_normals",
    "parton_logan_temperature",
    "clearsky_weather",
    "write_epw",
    "main",
]

#: Monthly normals: key -> (description, unit, lower, upper). Exactly one of
#: ``clearness`` and ``ghi_kwh_m2_d`` must be given.
NORMALS = {
    "temp_max_c": ("mean daily maximum air temperature", "degC", -60.0, 60.0),
    "temp_min_c": ("mean daily minimum air temperature", "degC", -60.0, 60.0),
    "wind_speed_m_s": ("mean wind speed", "m s-1", 0.0, 40.0),
    "relative_humidity_pct": ("mean relative humidity", "%", 1.0, 100.0),
    "clearness": ("mean daily GHI / clear-sky daily GHI", "1", 0.2, 1.0),
    "ghi_kwh_m2_d": ("mean daily global horizontal insolation", "kWh m-2 d-1", 0.0, 12.0),
    "precipitation_mm": ("mean monthly precipitation (synthetic weather only)", "mm",
                         0.0, 2000.0),
}
_REQUIRED_NORMALS = ("temp_max_c", "temp_min_c", "wind_speed_m_s", "relative_humidity_pct")

#: Parton & Logan (1981) coefficients for air temperature at 150 cm (their Table, Denver
#: fit): a = lag of the maximum after solar noon [h], b = night decay coefficient [1],
#: c = lag of the minimum after sunrise [h].
PARTON_LOGAN_150CM = {"a": 1.86, "b": 2.20, "c": -0.17}

#: Smallest diurnal range kept after adding anomalies [degC].
MIN_DIURNAL_RANGE_C = 2.0


# --------------------------------------------------------------------------- inputs
def validate_normals(normals: Mapping, *, path=None) -> dict:
    """Check monthly normals and return them as float arrays of 12 values.

    Raises :class:`InputError` with ``field='weather.normals.<key>'`` for an unknown key,
    a sequence that is not 12 finite numbers, a value out of range (see
    :data:`NORMALS`), ``temp_min_c > temp_max_c``, or not exactly one of ``clearness``
    and ``ghi_kwh_m2_d``.
    """
    if not isinstance(normals, Mapping):
        raise InputError("normals must be a table of 12-value arrays", path=path,
                         field="weather.normals")
    out = {}
    for key, seq in normals.items():
        field = f"weather.normals.{key}"
        if key not in NORMALS:
            raise InputError(f"unknown normal '{key}'{did_you_mean(key, NORMALS)}; allowed: "
                             f"{', '.join(NORMALS)}", path=path, field=field)
        try:
            arr = np.asarray(seq, dtype=float)
        except (TypeError, ValueError):
            raise InputError("must be 12 numbers (Jan..Dec)", path=path, field=field) from None
        if arr.shape != (12,):
            n = arr.size if arr.ndim == 1 else arr.shape
            raise InputError(f"must have 12 monthly values (Jan..Dec), got {n}",
                             path=path, field=field)
        _, unit, lo, hi = NORMALS[key]
        bad = ~np.isfinite(arr) | (arr < lo) | (arr > hi)
        if bad.any():
            m = int(np.flatnonzero(bad)[0])
            shown = "" if unit == "1" else f" {unit}"  # a ratio has no unit to print
            raise InputError(f"{calendar.month_abbr[m + 1]} value {arr[m]:g}{shown} is outside "
                             f"the allowed range {lo:g} to {hi:g}{shown}", path=path,
                             field=field)
        out[key] = arr
    for key in _REQUIRED_NORMALS:
        if key not in out:
            raise InputError("missing (12 monthly values)", path=path,
                             field=f"weather.normals.{key}")
    solar = [k for k in ("clearness", "ghi_kwh_m2_d") if k in out]
    if len(solar) != 1:
        raise InputError("give exactly one of 'clearness' and 'ghi_kwh_m2_d'"
                         + (" (got both)" if solar else ""), path=path,
                         field="weather.normals.clearness")
    inverted = out["temp_min_c"] > out["temp_max_c"]
    if inverted.any():
        m = int(np.flatnonzero(inverted)[0])
        raise InputError(f"{calendar.month_abbr[m + 1]}: temp_min_c {out['temp_min_c'][m]:g} "
                         f"is above temp_max_c {out['temp_max_c'][m]:g} degC", path=path,
                         field="weather.normals.temp_min_c")
    return out


def _validate_site(latitude, longitude, elevation_m, utc_offset_h, path=None) -> dict:
    site = {}
    limits = {"latitude": (-65.0, 65.0), "longitude": (-180.0, 180.0),
              "elevation_m": (-500.0, 6000.0), "utc_offset_h": (-14.0, 14.0)}
    for key, val in (("latitude", latitude), ("longitude", longitude),
                     ("elevation_m", elevation_m), ("utc_offset_h", utc_offset_h)):
        lo, hi = limits[key]
        try:
            v = float(val)
        except (TypeError, ValueError):
            raise InputError(f"must be a number, got {val!r}", path=path,
                             field=f"site.{key}") from None
        if not (np.isfinite(v) and lo <= v <= hi):
            why = " (the diurnal temperature model needs a sunrise and sunset every day)" \
                if key == "latitude" else ""
            raise InputError(f"{v:g} is outside {lo:g} to {hi:g}{why}", path=path,
                             field=f"site.{key}")
        site[key] = v
    return site


# --------------------------------------------------------------------------- temperature
def parton_logan_temperature(tod_h, day, sunrise_h, sunset_h, temp_max_c, temp_min_c, *,
                             a=PARTON_LOGAN_150CM["a"], b=PARTON_LOGAN_150CM["b"],
                             c=PARTON_LOGAN_150CM["c"]):
    """Diurnal air temperature from daily maximum and minimum, Parton & Logan (1981).

    Parameters
    ----------
    tod_h : array-like [h]
        Local clock time of day of each instant, 0 <= tod < 24.
    day : array-like of int
        Index (0..n_days-1) of the day each instant falls in.
    sunrise_h, sunset_h : array-like [h], length n_days
        Local clock times of sunrise and sunset of each day.
    temp_max_c, temp_min_c : array-like [degC], length n_days
    a, b, c : float
        Lag of the maximum after solar noon [h], night decay coefficient, lag of the
        minimum after sunrise [h]; defaults for 150 cm air temperature.

    Returns
    -------
    ndarray [degC]

    Notes
    -----
    Day (from the minimum at ``sunrise + c`` to sunset), with ``Y`` the day length and
    ``m`` the hours since the minimum::

        T = Tmin + (Tmax - Tmin) sin(pi m / (Y + 2a))

    Night (from sunset to the next day's minimum), with ``Tsn`` the sunset temperature,
    ``n`` the hours since sunset and ``Z`` the hours from sunset to the next minimum::

        T = [Tmin' - Tsn e^-b + (Tsn - Tmin') e^(-b n / Z)] / (1 - e^-b)

    where ``Tmin'`` is the next day's minimum. Parton & Logan's night curve is
    ``Tmin' + (Tsn - Tmin') e^(-b n/Z)``; the normalised form used here is equal at
    sunset and reaches ``Tmin'`` exactly at the next minimum, so the curve is continuous.
    Days wrap around (the day after the last is the first), as for a typical year.

    References
    ----------
    Parton & Logan (1981), A model for diurnal variation in soil and air temperature,
    Agric. Meteorol. 23:205–216, doi:10.1016/0002-1571(81)90105-9.
    """
    tod = np.asarray(tod_h, dtype=float)
    d = np.asarray(day, dtype=int)
    rise = np.asarray(sunrise_h, dtype=float)
    sset = np.asarray(sunset_h, dtype=float)
    tx = np.asarray(temp_max_c, dtype=float)
    tn = np.asarray(temp_min_c, dtype=float)
    n_days = len(rise)
    t_min_time = rise + c
    length = sset - rise

    def day_curve(k, hours_after_min):
        return tn[k] + (tx[k] - tn[k]) * np.sin(np.pi * hours_after_min / (length[k] + 2 * a))

    is_day = (tod >= t_min_time[d]) & (tod <= sset[d])
    before_min = tod < t_min_time[d]
    # the night an instant belongs to starts at the sunset of day `k`
    k = np.where(before_min, (d - 1) % n_days, d)
    nxt = (k + 1) % n_days
    n_h = np.where(before_min, tod + 24.0 - sset[k], tod - sset[k])
    z_h = 24.0 + t_min_time[nxt] - sset[k]
    t_sunset = day_curve(k, sset[k] - t_min_time[k])
    eb = np.exp(-b)
    night = (tn[nxt] - t_sunset * eb + (t_sunset - tn[nxt]) * np.exp(-b * n_h / z_h)) / (1 - eb)
    day_t = day_curve(d, tod - t_min_time[d])
    return np.where(is_day, day_t, night)


def _match_daily_extremes(temp, day, temp_max_c, temp_min_c):
    """Affine rescale of each day's hourly values so their max/min equal Tmax/Tmin.

    The continuous curve peaks between the hourly samples (by up to ~10 % of the diurnal
    range near the minimum); this keeps the hourly table's daily extremes equal to the
    daily maximum and minimum that the normals (or generated days) prescribe.
    """
    n_days = len(temp_max_c)
    hourly = temp.reshape(n_days, -1)
    lo = hourly.min(axis=1, keepdims=True)
    hi = hourly.max(axis=1, keepdims=True)
    span = np.where(hi - lo > 1e-9, hi - lo, 1.0)
    tx = np.asarray(temp_max_c)[:, None]
    tn = np.asarray(temp_min_c)[:, None]
    return (tn + (hourly - lo) * (tx - tn) / span).ravel()


# --------------------------------------------------------------------------- common core
def _hours(year, utc_offset_h):
    tz = fixed_offset(utc_offset_h)
    return pd.date_range(f"{year}-01-01", f"{year}-12-31 23:00", freq="h", tz=tz)


def _sun_times(index, latitude, longitude):
    """Sunrise and sunset of each local day as decimal clock hours (NREL SPA via pvlib)."""
    days = index[::24]
    st = pvlib.solarposition.sun_rise_set_transit_spa(days, latitude, longitude)
    rise = st["sunrise"]
    sset = st["sunset"]
    if rise.isna().any() or sset.isna().any():
        raise InputError("no sunrise or sunset on some days at this latitude",
                         field="site.latitude")

    def clock(ts):
        t = pd.DatetimeIndex(ts).tz_convert(index.tz)
        return np.asarray(t.hour + t.minute / 60.0 + t.second / 3600.0, dtype=float)

    return clock(rise), clock(sset)


def _base(latitude, longitude, elevation_m, utc_offset_h, year):
    """Index, constant pressure, sun times, mid-hour zenith and clear-sky GHI."""
    index = _hours(year, utc_offset_h)
    n_days = len(index) // 24
    pressure = np.full(len(index), float(pressure_from_elevation(elevation_m)))
    rise, sset = _sun_times(index, latitude, longitude)
    return index, n_days, pressure, rise, sset


def _finish(index, latitude, longitude, elevation_m, pressure, temp, rh, wind, k_hourly,
            name, notes, fmt, year, utc_offset_h, source):
    pos = solar_position_midhour(index, latitude, longitude, elevation_m,
                                 pressure_pa=pressure, temp_air_c=temp)
    zen = pos["apparent_zenith"].to_numpy()
    ghi_clear = clearsky_ghi_midhour(index, zen, latitude, longitude, elevation_m, pressure)
    ghi = ghi_clear * k_hourly
    doy = np.asarray((index + pd.Timedelta(minutes=30)).day_of_year)
    dni, dhi = decompose_ghi(ghi, zen, doy)
    df = pd.DataFrame({
        "ghi": ghi, "dni": dni, "dhi": dhi, "temp_air": temp, "wind_speed": wind,
        "relative_humidity": rh, "pressure": pressure, "solar_zenith": zen,
        "ghi_clear": ghi_clear,
    }, index=index)
    df.index.name = "time"
    df = df[list(REQUIRED_COLUMNS + DERIVED_COLUMNS)].astype(float)
    meta = {"name": name, "latitude": latitude, "longitude": longitude,
            "elevation_m": elevation_m, "utc_offset_h": utc_offset_h,
            "source": source, "format": fmt, "year": int(year), "typical_year": True,
            "n_filled": 0, "notes": notes}
    return df, meta


def _clearsky_daily(index, latitude, longitude, elevation_m, pressure):
    """Daily clear-sky insolation [Wh m-2 d-1] (refraction at 12 degC, pressure given)."""
    pos = solar_position_midhour(index, latitude, longitude, elevation_m,
                                 pressure_pa=pressure)
    cs = clearsky_ghi_midhour(index, pos["apparent_zenith"].to_numpy(), latitude, longitude,
                              elevation_m, pressure)
    return cs.reshape(-1, 24).sum(axis=1)


def _monthly_clearness(nrm, h0_daily, months_of_day, path=None):
    """Target monthly clearness: given, or mean daily GHI / mean clear-sky daily GHI."""
    if "clearness" in nrm:
        return nrm["clearness"], "clearness"
    h0_month = np.array([h0_daily[months_of_day == m].mean() for m in range(1, 13)])
    k = nrm["ghi_kwh_m2_d"] * 1000.0 / h0_month
    lo, hi = NORMALS["clearness"][2:]
    bad = (k < lo) | (k > hi)
    if bad.any():
        m = int(np.flatnonzero(bad)[0])
        raise InputError(f"{calendar.month_abbr[m + 1]}: {nrm['ghi_kwh_m2_d'][m]:g} kWh m-2 "
                         f"d-1 is {k[m]:.2f} of the clear-sky {h0_month[m] / 1000:.2f} kWh m-2 "
                         f"d-1; allowed clearness {lo:g} to {hi:g}", path=path,
                         field="weather.normals.ghi_kwh_m2_d")
    return k, "ghi_kwh_m2_d"


def _humidity(temp, n_days, rh_daily_mean):
    """Hourly RH with each day's vapour pressure constant, daily mean RH as given.

    Actual vapour pressure ``e`` is held constant through the day (dew point constant),
    chosen so that the mean of ``100 e / e°(T_h)`` over the day's hours equals the
    normal; RH is capped at 100 %.
    """
    inv_es = 1.0 / saturation_vapour_pressure(temp).reshape(n_days, 24)
    e = (np.asarray(rh_daily_mean)[:, None] / 100.0) / inv_es.mean(axis=1, keepdims=True)
    return np.minimum(100.0 * e * inv_es, 100.0).ravel()


# --------------------------------------------------------------------------- generators
def clearsky_weather(*, latitude, longitude, elevation_m, utc_offset_h, normals, year=2025,
                     name="site", source=None):
    """Hourly forcing for a site from monthly normals, every day of a month alike.

    Parameters
    ----------
    latitude, longitude : float [deg]
        North/east positive; ``|latitude| <= 65`` (sunrise and sunset every day).
    elevation_m : float [m]
    utc_offset_h : float [h]
        Local standard time offset from UTC.
    normals : mapping of 12-value sequences
        See :data:`NORMALS`: ``temp_max_c``, ``temp_min_c``, ``wind_speed_m_s``,
        ``relative_humidity_pct`` and one of ``clearness`` or ``ghi_kwh_m2_d``.
    year : int
        Calendar year of the table (leap years give 8784 hours).
    name : str
    source : str or Path, optional
        Where the normals came from (used in error messages and meta).

    Returns
    -------
    data, meta
        Same columns and conventions as :func:`pondsim.forcing.weather.read_weather`, with no
        ``precipitation`` or ``ir_horizontal``.

    Notes
    -----
    * GHI: the Ineichen–Perez clear-sky GHI (pvlib, Linke turbidity climatology) times
      the month's clearness, so the monthly mean daily GHI equals the normal exactly.
      DNI/DHI from Erbs et al. (1982).
    * Air temperature: :func:`parton_logan_temperature` with the month's mean daily
      maximum and minimum, sunrise/sunset from NREL SPA, rescaled per day so the hourly
      maximum and minimum equal the normals.
    * RH: vapour pressure constant through the day, daily mean RH = the normal
      (:func:`_humidity`). Wind: the monthly mean, constant. Pressure: FAO-56 eq. 7.
    """
    nrm = validate_normals(normals, path=source)
    site = _validate_site(latitude, longitude, elevation_m, utc_offset_h, path=source)
    lat, lon, elev, off = (site[k] for k in ("latitude", "longitude", "elevation_m",
                                             "utc_offset_h"))
    index, n_days, pressure, rise, sset = _base(lat, lon, elev, off, year)
    month_of_day = np.asarray(index.month[::24])
    h0 = _clearsky_daily(index, lat, lon, elev, pressure)
    kmon, kind = _monthly_clearness(nrm, h0, month_of_day, source)
    m = month_of_day - 1
    tx, tn = nrm["temp_max_c"][m], nrm["temp_min_c"][m]
    temp = _daily_temperature(index, n_days, rise, sset, tx, tn)
    rh = _humidity(temp, n_days, nrm["relative_humidity_pct"][m])
    wind = np.repeat(nrm["wind_speed_m_s"][m], 24)
    k_hourly = np.repeat(kmon[m], 24)
    notes = [f"clear-sky site mode from monthly normals ({kind}); every day of a month alike"]
    return _finish(index, lat, lon, elev, pressure, temp, rh, wind, k_hourly, name, notes,
                   "clearsky", year, off, str(source) if source else "normals")


def _daily_temperature(index, n_days, rise, sset, tx, tn):
    tod = np.asarray(index.hour, dtype=float) + 0.5
    day = np.repeat(np.arange(n_days), 24)
    temp = parton_logan_temperature(tod, day, rise, sset, tx, tn)
    return _match_daily_extremes(temp, day, tx, tn)


# --------------------------------------------------------------------------- command line
def _load_normals_toml(path: Path):
    if not path.is_file():
        raise InputError("normals file not found", path=path)
    try:
        with open(path, "rb") as fh:
            doc = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", path=path) from None
    for table in ("site", "normals"):
        if not isinstance(doc.get(table), Mapping):
            raise InputError(f"missing [{table}] table", path=path, field=table)
    site = dict(doc["site"])
    allowed = ("name", "latitude", "longitude", "elevation_m", "utc_offset_h")
    for key in site:
        if key not in allowed:
            raise InputError(f"unknown key{did_you_mean(key, allowed)}; allowed: "
                             f"{', '.join(allowed)}", path=path, field=f"site.{key}")
    for key in allowed[1:]:
        if key not in site:
            raise InputError("missing", path=path, field=f"site.{key}")
    return site, doc["normals"]


def main(argv=None) -> int:
    """``python -m pondsim.forcing.climate NORMALS.toml OUT.epw [--seed N] [--year Y]``."""
    parser = argparse.ArgumentParser(
        prog="python -m pondsim.forcing.climate",
        description="Write an hourly EPW weather file from monthly climate normals: "
                    "clear-sky mode, or synthetic day-to-day weather with --seed.")
    parser.add_argument("normals", type=Path, help="TOML file with [site] and [normals]")
    parser.add_argument("out", type=Path, help="EPW file to write")
    parser.add_argument("--seed", type=int, default=None,
                        help="generate synthetic day-to-day weather with this seed")
    parser.add_argument("--year", type=int, default=2025, help="calendar year (default 2025)")
    parser.add_argument("--match-monthly", action="store_true",
                        help="with --seed: make each month's mean clearness exact")
    args = parser.parse_args(argv)
    try:
        site, normals = _load_normals_toml(args.normals)
        common = {"latitude": site["latitude"], "longitude": site["longitude"],
                  "elevation_m": site["elevation_m"], "utc_offset_h": site["utc_offset_h"],
                  "normals": normals, "year": args.year, "name": site.get("name", "site"),
                  "source": args.normals}
        if args.seed is None:
            df, meta = clearsky_weather(**common)
        else:
            from pondsim.forcing.synthetic import synthetic_weather

            df, meta = synthetic_weather(seed=args.seed, match_monthly=args.match_monthly,
                                         **common)
        write_epw(df, meta, args.out)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {args.out} ({len(df)} hours, {meta['format']})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
