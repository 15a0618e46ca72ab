"""Forcing stage: read hourly weather files into pondsim's hourly forcing table.

Every reader ends in the same table (see :data:`pondsim.glossary.FORCING`):

* an hourly, tz-aware :class:`pandas.DatetimeIndex` in local standard time with a fixed
  UTC offset (``datetime.timezone``); each timestamp labels the START of its hour, so a
  day holds the labels 00:00 … 23:00;
* columns ``ghi``, ``dni``, ``dhi`` [W m-2, hour means], ``temp_air`` [degC],
  ``wind_speed`` [m s-1], ``relative_humidity`` [%], ``pressure`` [Pa], optionally
  ``precipitation`` [mm in the hour] and ``ir_horizontal`` [W m-2], and the derived
  ``solar_zenith`` [deg, apparent zenith at the middle of the hour] and ``ghi_clear``
  [W m-2, Ineichen clear-sky GHI at the middle of the hour].

Supported formats (all parsed by :mod:`pvlib.iotools`, then renamed and converted here,
once, at the boundary):

========  ==========================  ====================================================
fmt       pvlib reader                time convention in the file
========  ==========================  ====================================================
epw       ``read_epw``                hour 1–24; hour *h* covers (h−1):00–h:00, LST
tmy3      ``read_tmy3``               HH:MM labels the END of the hour, LST, 24:00 allowed
tmy2      ``read_tmy2``               hour 1–24 ends the hour, LST
pvgis     ``read_pvgis_tmy``          ``time(UTC)`` YYYYMMDD:HHMM, taken as hour start, UTC
csv       ``pandas.read_csv``         a ``time`` column in LST, hour start (or end, option)
========  ==========================  ====================================================

Instantaneous fields (temperature, humidity, wind, pressure) are kept on the row of the
hour whose end they are reported at (EPW, TMY2/3), i.e. up to half an hour late with
respect to the hour mean; that keeps a written-and-read EPW identical to its source.
"""

from __future__ import annotations

import calendar
import datetime as _dt
import json
import os
import tempfile
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing import psychrometry

__all__ = [
    "FORMATS",
    "RANGES",
    "REQUIRED_COLUMNS",
    "OPTIONAL_COLUMNS",
    "read_weather",
    "write_epw",
    "solar_position_midhour",
    "clearsky_ghi_midhour",
    "pressure_from_elevation",
    "saturation_vapour_pressure",
    "dewpoint_from_rh",
    "decompose_ghi",
    "finish_forcing",
    "fixed_offset",
]

#: Formats understood by :func:`read_weather` (``fmt=``).
FORMATS = ("auto", "epw", "tmy3", "tmy2", "pvgis", "csv")

#: Columns every forcing table carries (derived columns added after these).
REQUIRED_COLUMNS = (
    "ghi", "dni", "dhi", "temp_air", "wind_speed", "relative_humidity", "pressure",
)
#: Columns kept where the file has them complete and in range.
OPTIONAL_COLUMNS = ("precipitation", "ir_horizontal")
#: Derived columns, computed for the site.
DERIVED_COLUMNS = ("solar_zenith", "ghi_clear")

#: Allowed physical ranges (lower, upper) in pondsim units.
RANGES = {
    "ghi": (0.0, 1500.0),
    "dni": (0.0, 1500.0),
    "dhi": (0.0, 1500.0),
    "temp_air": (-60.0, 60.0),
    "wind_speed": (0.0, 60.0),
    "relative_humidity": (0.0, 100.0),
    "pressure": (30000.0, 110000.0),
    # optional columns: out of range -> column dropped with a note, not an error
    "precipitation": (0.0, 200.0),
    "ir_horizontal": (40.0, 700.0),
}
_UNITS = {
    "ghi": "W m-2", "dni": "W m-2", "dhi": "W m-2", "temp_air": "degC",
    "wind_speed": "m s-1", "relative_humidity": "%", "pressure": "Pa",
    "precipitation": "mm h-1", "ir_horizontal": "W m-2",
}
#: Irradiance down to this value [W m-2] is sensor night offset and is clipped to 0.
IRRADIANCE_CLIP_W_M2 = -10.0
#: Relative humidity up to this value [%] is sensor overshoot (fog, dew) and is clipped
#: to 100 %; above it the file is rejected.
RH_CLIP_PCT = 105.0

#: Year that typical-year rows are put into when no ``year`` is given (not a leap year).
DEFAULT_TYPICAL_YEAR = 2025

_HOUR = pd.Timedelta(hours=1)
_HALF_HOUR = pd.Timedelta(minutes=30)


# --------------------------------------------------------------------------- helpers
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
    mid = index + _HALF_HOUR
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
    mid = index + _HALF_HOUR
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


# --------------------------------------------------------------------------- readers
class _Raw:
    """What a format reader hands to the common assembly step."""

    def __init__(self, data, comps, site, fmt, typical, notes=None, source_years=None):
        self.data = data            # DataFrame, our names and units, RangeIndex
        self.comps = comps          # dict of int arrays year/month/day/hour (hour start, LST)
        self.site = site            # name, latitude, longitude, elevation_m, utc_offset_h
        self.fmt = fmt
        self.typical = typical
        self.notes = list(notes or [])
        self.source_years = source_years


def _comps_from_times(times: pd.Series | pd.DatetimeIndex) -> dict:
    t = pd.DatetimeIndex(times)
    return {"year": np.asarray(t.year), "month": np.asarray(t.month),
            "day": np.asarray(t.day), "hour": np.asarray(t.hour)}


def _looks_typical(comps) -> bool:
    """Mixed source years with each calendar hour once, in calendar order."""
    years = comps["year"]
    if len(np.unique(years)) <= 1:
        return False
    key = comps["month"] * 10000 + comps["day"] * 100 + comps["hour"]
    return bool(np.all(np.diff(key) > 0))


def _nan_sentinel(s: pd.Series, *, ge=None, eq=None) -> pd.Series:
    s = pd.to_numeric(s, errors="coerce").astype(float)
    if ge is not None:
        s = s.where(~(s >= ge))
    if eq is not None:
        s = s.where(~np.isclose(s, eq))
    return s


def _read_epw(path: Path) -> _Raw:
    data, meta = pvlib.iotools.read_epw(str(path))
    d = pd.DataFrame({
        "ghi": _nan_sentinel(data["ghi"], ge=9999),
        "dni": _nan_sentinel(data["dni"], ge=9999),
        "dhi": _nan_sentinel(data["dhi"], ge=9999),
        "temp_air": _nan_sentinel(data["temp_air"], ge=99.9),
        "wind_speed": _nan_sentinel(data["wind_speed"], ge=999),
        "relative_humidity": _nan_sentinel(data["relative_humidity"], ge=999),
        "pressure": _nan_sentinel(data["atmospheric_pressure"], ge=999999),
        "precipitation": _nan_sentinel(data["liquid_precipitation_depth"], ge=999),
        "ir_horizontal": _nan_sentinel(data["ghi_infrared"], ge=9999),
    }).reset_index(drop=True)
    # EPW hour h (1..24) covers (h-1):00 to h:00 local standard time
    comps = {
        "year": data["year"].to_numpy(int), "month": data["month"].to_numpy(int),
        "day": data["day"].to_numpy(int), "hour": data["hour"].to_numpy(int) - 1,
    }
    site = {"name": str(meta.get("city", "")).strip(), "latitude": meta["latitude"],
            "longitude": meta["longitude"], "elevation_m": meta["altitude"],
            "utc_offset_h": meta["TZ"]}
    typical = _looks_typical(comps)
    return _Raw(d, comps, site, "epw", typical, source_years=np.unique(comps["year"]))


def _read_tmy3(path: Path) -> _Raw:
    data, meta = pvlib.iotools.read_tmy3(str(path), map_variables=True)
    # Rebuild the clock from the raw columns: HH:MM labels the END of the hour.
    date = pd.to_datetime(data["Date (MM/DD/YYYY)"], format="%m/%d/%Y")
    hh = data["Time (HH:MM)"].str.split(":").str[0].astype(int)
    end = pd.DatetimeIndex(date) + pd.to_timedelta(hh.to_numpy(), unit="h")
    start = end - _HOUR
    precip = _nan_sentinel(data["Lprecip depth (mm)"], eq=-9900)
    d = pd.DataFrame({
        "ghi": _nan_sentinel(data["ghi"], eq=-9900),
        "dni": _nan_sentinel(data["dni"], eq=-9900),
        "dhi": _nan_sentinel(data["dhi"], eq=-9900),
        "temp_air": _nan_sentinel(data["temp_air"], eq=-9900),
        "wind_speed": _nan_sentinel(data["wind_speed"], eq=-9900),
        "relative_humidity": _nan_sentinel(data["relative_humidity"], eq=-9900),
        "pressure": _nan_sentinel(data["pressure"], eq=-9900) * 100.0,  # mbar -> Pa
        "precipitation": precip,
    }).reset_index(drop=True)
    comps = _comps_from_times(start)
    site = {"name": str(meta.get("Name", "")).strip().strip('"'),
            "latitude": meta["latitude"], "longitude": meta["longitude"],
            "elevation_m": meta["altitude"], "utc_offset_h": meta["TZ"]}
    return _Raw(d, comps, site, "tmy3", True, source_years=np.unique(date.dt.year))


def _read_tmy2(path: Path) -> _Raw:
    data, meta = pvlib.iotools.read_tmy2(str(path))
    yr = data["year"].to_numpy(int)
    yr = np.where(yr < 100, 1900 + yr, yr)
    d = pd.DataFrame({
        "ghi": _nan_sentinel(data["GHI"], ge=9999),
        "dni": _nan_sentinel(data["DNI"], ge=9999),
        "dhi": _nan_sentinel(data["DHI"], ge=9999),
        "temp_air": _nan_sentinel(data["DryBulb"], ge=9999) / 10.0,   # tenths of degC
        "wind_speed": _nan_sentinel(data["Wspd"], ge=999) / 10.0,     # tenths of m/s
        "relative_humidity": _nan_sentinel(data["RHum"], ge=999),
        "pressure": _nan_sentinel(data["Pressure"], ge=9999) * 100.0,  # mbar -> Pa
    }).reset_index(drop=True)
    # TMY2 hour h (1..24) ends at h:00 local standard time
    comps = {"year": yr, "month": data["month"].to_numpy(int),
             "day": data["day"].to_numpy(int), "hour": data["hour"].to_numpy(int) - 1}
    site = {"name": str(meta.get("City", "")).strip(), "latitude": meta["latitude"],
            "longitude": meta["longitude"], "elevation_m": meta["altitude"],
            "utc_offset_h": meta["TZ"]}
    return _Raw(d, comps, site, "tmy2", True, source_years=np.unique(yr))


def _read_pvgis(path: Path, utc_offset_h) -> _Raw:
    fmt = "json" if path.suffix.lower() == ".json" else "csv"
    data, meta = pvlib.iotools.read_pvgis_tmy(str(path), pvgis_format=fmt,
                                              map_variables=True)
    inputs = meta.get("inputs", {})
    loc = inputs.get("location", inputs)
    site = {"name": "", "latitude": loc.get("latitude"), "longitude": loc.get("longitude"),
            "elevation_m": loc.get("elevation"), "utc_offset_h": None}
    notes = []
    off = inputs.get("irradiance time offset")
    if off is not None:
        notes.append(f"PVGIS irradiance time offset {off} h noted, not applied")
    if utc_offset_h is None:
        lon = site["longitude"]
        hint = f" (e.g. {round(lon / 15)} from the longitude)" if lon is not None else ""
        raise InputError("PVGIS files are in UTC: give utc_offset_h, the site's standard "
                         "time offset from UTC in hours" + hint,
                         path=path, field="utc_offset_h")
    ir = data["IR(h)"] if "IR(h)" in data else pd.Series(np.nan, index=data.index)
    d = pd.DataFrame({
        "ghi": data["ghi"], "dni": data["dni"], "dhi": data["dhi"],
        "temp_air": data["temp_air"], "wind_speed": data["wind_speed"],
        "relative_humidity": data["relative_humidity"], "pressure": data["pressure"],
        "ir_horizontal": ir,
    }).astype(float).reset_index(drop=True)
    utc = pd.DatetimeIndex(data.index)
    local = utc.tz_convert(fixed_offset(utc_offset_h)).tz_localize(None)
    notes.append("PVGIS time(UTC) taken as the start of each hour and converted to "
                 f"UTC{float(utc_offset_h):+g} h")
    src_years = np.unique(utc.year)
    # a PVGIS TMY is always a typical year, whatever the order of its source months
    return _Raw(d, _comps_from_times(local), site, "pvgis-" + fmt, True, notes,
                source_years=src_years)


#: Units accepted in ``csv_units`` → function converting to pondsim units.
CSV_UNITS = {
    "pressure": {"Pa": lambda x: x, "hPa": lambda x: x * 100.0,
                 "mbar": lambda x: x * 100.0, "kPa": lambda x: x * 1000.0},
    "temp_air": {"degC": lambda x: x, "K": lambda x: x - 273.15,
                 "degF": lambda x: (x - 32.0) * 5.0 / 9.0},
    "temp_dew": {"degC": lambda x: x, "K": lambda x: x - 273.15,
                 "degF": lambda x: (x - 32.0) * 5.0 / 9.0},
    "wind_speed": {"m s-1": lambda x: x, "km h-1": lambda x: x / 3.6,
                   "mph": lambda x: x * 0.44704, "kn": lambda x: x * 0.514444},
    "relative_humidity": {"%": lambda x: x, "1": lambda x: x * 100.0},
    "precipitation": {"mm": lambda x: x, "cm": lambda x: x * 10.0,
                      "in": lambda x: x * 25.4},
}
_IRR_UNITS = {"W m-2": lambda x: x, "Wh m-2": lambda x: x,  # hour sums = hour means
              "kJ m-2": lambda x: x / 3.6, "MJ m-2": lambda x: x / 0.0036}
for _k in ("ghi", "dni", "dhi", "ir_horizontal"):
    CSV_UNITS[_k] = _IRR_UNITS
_UNIT_ALIASES = {"c": "degC", "°c": "degC", "degc": "degC", "celsius": "degC",
                 "f": "degF", "°f": "degF", "kelvin": "K", "m/s": "m s-1",
                 "km/h": "km h-1", "knots": "kn", "w/m2": "W m-2", "w/m^2": "W m-2",
                 "wh/m2": "Wh m-2", "kj/m2": "kJ m-2", "mj/m2": "MJ m-2",
                 "percent": "%", "fraction": "1", "millibar": "mbar"}

#: Names that ``csv_columns`` may map (``time`` plus forcing inputs).
CSV_FIELDS = ("time",) + REQUIRED_COLUMNS + OPTIONAL_COLUMNS + ("temp_dew",)


def _read_csv(path: Path, csv_columns, csv_units, time_label) -> _Raw:
    try:
        header = list(pd.read_csv(path, nrows=0).columns)
    except Exception as exc:  # noqa: BLE001 - any parse failure is a user file problem
        raise InputError(f"cannot read as CSV: {exc}", path=path) from None
    mapping = {k: k for k in CSV_FIELDS if k in header}
    for key, col in dict(csv_columns or {}).items():
        if key not in CSV_FIELDS:
            raise InputError(f"unknown name '{key}'{did_you_mean(key, CSV_FIELDS)}; "
                             f"allowed: {', '.join(CSV_FIELDS)}",
                             path=path, field=f"csv_columns.{key}")
        if col not in header:
            raise InputError(f"column '{col}' not in the file{did_you_mean(col, header)}; "
                             f"the file has: {', '.join(map(str, header))}",
                             path=path, field=f"csv_columns.{key}")
        mapping[key] = col
    if "time" not in mapping:
        raise InputError("no time column: name it 'time' or map it with "
                         "csv_columns={'time': '<header>'}", path=path, field="time")
    units = {}
    for key, unit in dict(csv_units or {}).items():
        if key not in CSV_UNITS:
            raise InputError(f"no unit conversion for '{key}'{did_you_mean(key, CSV_UNITS)};"
                             f" convertible: {', '.join(CSV_UNITS)}",
                             path=path, field=f"csv_units.{key}")
        u = _UNIT_ALIASES.get(str(unit).strip().lower(), str(unit).strip())
        if u not in CSV_UNITS[key]:
            raise InputError(f"unknown unit '{unit}'; allowed: {', '.join(CSV_UNITS[key])}",
                             path=path, field=f"csv_units.{key}")
        units[key] = u
    raw = pd.read_csv(path, usecols=sorted(set(mapping.values())))
    try:
        t = pd.to_datetime(raw[mapping["time"]])
    except (ValueError, TypeError) as exc:
        raise InputError(f"cannot parse times in column '{mapping['time']}': {exc}",
                         path=path, field="time") from None
    if t.isna().any():
        i = int(np.flatnonzero(t.isna().to_numpy())[0])
        raise InputError(f"unparsable time on data row {i + 1}", path=path, field="time")
    t = pd.DatetimeIndex(t)
    if t.tz is not None:
        raise InputError("times carry a UTC offset; give local standard times without an "
                         "offset and the offset as utc_offset_h", path=path, field="time")
    if np.any((t.minute != 0) | (t.second != 0)):
        raise InputError("times must be on the full hour (hourly data; resample "
                         "sub-hourly data to hour means first)", path=path, field="time")
    if time_label == "end":
        t = t - _HOUR
    elif time_label != "start":
        raise InputError(f"csv_time_label must be 'start' or 'end', not '{time_label}'",
                         path=path, field="csv_time_label")
    d = pd.DataFrame(index=range(len(raw)))
    for key, col in mapping.items():
        if key == "time":
            continue
        vals = pd.to_numeric(raw[col], errors="coerce").astype(float).to_numpy()
        d[key] = CSV_UNITS.get(key, {}).get(units.get(key, ""), lambda x: x)(vals)
    notes = []
    if "ghi" not in d or "temp_air" not in d:
        missing = [k for k in ("ghi", "temp_air") if k not in d]
        raise InputError(f"required column(s) {missing} not found; map them with "
                         "csv_columns", path=path, field=missing[0])
    if "relative_humidity" not in d:
        if "temp_dew" not in d:
            raise InputError("need relative_humidity (or temp_dew) column",
                             path=path, field="relative_humidity")
        rh = 100 * saturation_vapour_pressure(d["temp_dew"]) / saturation_vapour_pressure(
            d["temp_air"])
        d["relative_humidity"] = np.minimum(rh, 100.0)
        notes.append("relative_humidity computed from temp_dew (FAO-56 eq. 11)")
    if "wind_speed" not in d:
        raise InputError("need a wind_speed column", path=path, field="wind_speed")
    if "pressure" not in d:
        d["pressure"] = np.nan  # filled from elevation in the assembly step
        notes.append("pressure from elevation (FAO-56 eq. 7)")
    d = d.drop(columns=["temp_dew"], errors="ignore")
    site = {"name": path.stem, "latitude": None, "longitude": None,
            "elevation_m": None, "utc_offset_h": None}
    comps = _comps_from_times(t)
    typical = _looks_typical(comps)
    return _Raw(d, comps, site, "csv", typical, notes, source_years=np.unique(comps["year"]))


def _detect_format(path: Path) -> str:
    ext = path.suffix.lower()
    if ext == ".epw":
        return "epw"
    if ext == ".tm2":
        return "tmy2"
    if ext == ".json":
        return "pvgis"
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            first = fh.readline()
            second = fh.readline()
    except OSError as exc:
        raise InputError(f"cannot open: {exc}", path=path) from None
    if first.startswith("LOCATION,"):
        return "epw"
    if first.startswith("Latitude (decimal degrees)"):
        return "pvgis"
    if second.startswith("Date (MM/DD/YYYY)"):
        return "tmy3"
    if ext in (".csv", ".txt"):
        return "csv"
    raise InputError(f"cannot tell the weather format from the name or content; give fmt= "
                     f"one of {', '.join(FORMATS[1:])}", path=path, field="fmt")


# --------------------------------------------------------------------------- assembly
def _site(raw: _Raw, path, **given) -> dict:
    site = dict(raw.site)
    for key, val in given.items():
        if val is not None:
            site[key] = float(val)
    for key in ("latitude", "longitude", "elevation_m", "utc_offset_h"):
        if site.get(key) is None or not np.isfinite(float(site[key])):
            raise InputError(f"the file does not give the site's {key}; pass {key}=",
                             path=path, field=key)
        site[key] = float(site[key])
    if not -90 <= site["latitude"] <= 90:
        raise InputError(f"latitude {site['latitude']} outside -90..90 deg",
                         path=path, field="latitude")
    if not -180 <= site["longitude"] <= 180:
        raise InputError(f"longitude {site['longitude']} outside -180..180 deg",
                         path=path, field="longitude")
    if not -14 <= site["utc_offset_h"] <= 14:
        raise InputError(f"utc_offset_h {site['utc_offset_h']} outside -14..14 h",
                         path=path, field="utc_offset_h")
    if not -500 <= site["elevation_m"] <= 6000:
        raise InputError(f"elevation_m {site['elevation_m']} outside -500..6000 m",
                         path=path, field="elevation_m")
    return site


def _index_from(comps, year=None, tz=None) -> pd.DatetimeIndex:
    frame = pd.DataFrame({"year": comps["year"] if year is None else year,
                          "month": comps["month"], "day": comps["day"],
                          "hour": comps["hour"]})
    return pd.DatetimeIndex(pd.to_datetime(frame)).tz_localize(tz)


def _year_hours(year, tz, *, skip_feb29=False) -> pd.DatetimeIndex:
    idx = pd.date_range(f"{year}-01-01", f"{year}-12-31 23:00", freq="h", tz=tz)
    if skip_feb29:
        idx = idx[~((idx.month == 2) & (idx.day == 29))]
    return idx


def _check_duplicates(index, path):
    dup = index.duplicated()
    if dup.any():
        first = index[dup][0]
        raise InputError(f"hour {first:%Y-%m-%d %H:%M} appears more than once "
                         f"({int(dup.sum())} duplicated hours); times must be unique local "
                         "standard time (no daylight saving)", path=path, field="time")


def _runs(mask: np.ndarray):
    """(start, length) of runs of True in a 1-D bool array."""
    m = np.concatenate([[False], mask, [False]]).astype(np.int8)
    d = np.diff(m)
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1)
    return starts, ends - starts


def _fill_column(values: np.ndarray, max_gap_h: int, cyclic: bool):
    """Fill NaN runs up to ``max_gap_h`` linearly; returns (filled, mask, longest run start).

    The third item is the start index of the first run longer than ``max_gap_h`` (or
    None). Cyclic series (typical years) wrap December into January; edge runs of
    non-cyclic series take the nearest value.
    """
    v = values.astype(float).copy()
    nan = np.isnan(v)
    if not nan.any():
        return v, nan, None
    if nan.all():
        return v, nan, 0
    n = len(v)
    shift = 0
    if cyclic:
        shift = int(np.flatnonzero(~nan)[0])  # roll so the series starts with a value
        v = np.roll(v, -shift)
        nan = np.roll(nan, -shift)
    starts, lengths = _runs(nan)
    too_long = None
    for s, ln in zip(starts, lengths, strict=True):
        if ln > max_gap_h:
            pos = (s + shift) % n
            too_long = pos if too_long is None else min(too_long, pos)
            continue
        left = s - 1
        right = s + ln
        if cyclic and right >= n:
            lo, hi = v[left], v[0]
        elif left < 0:
            lo = hi = v[right]
        elif right >= n:
            lo = hi = v[left]
        else:
            lo, hi = v[left], v[right]
        w = np.arange(1, ln + 1) / (ln + 1)
        v[s:s + ln] = lo + (hi - lo) * w
    if cyclic:
        v = np.roll(v, shift)
        nan = np.roll(nan, shift)
    filled = nan & ~np.isnan(v)
    return v, filled, too_long


def _check_range(df, col, path, notes, *, source_label=None) -> bool:
    """Clip tolerated excursions and check the range; False means 'drop' (optional)."""
    lo, hi = RANGES[col]
    v = df[col].to_numpy(dtype=float)
    if col in ("ghi", "dni", "dhi", "ir_horizontal"):
        tiny = (v < 0) & (v >= IRRADIANCE_CLIP_W_M2)
        if tiny.any():
            v = np.where(tiny, 0.0, v)
            notes.append(f"clipped {int(tiny.sum())} small negative {col} values to 0")
    if col == "relative_humidity":
        over = (v > 100.0) & (v <= RH_CLIP_PCT)
        if over.any():
            v = np.where(over, 100.0, v)
            notes.append(f"clipped {int(over.sum())} relative_humidity values in "
                         f"100-{RH_CLIP_PCT:g} % to 100 %")
    bad = (v < lo) | (v > hi)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        where = f" at {df.index[i]:%Y-%m-%d %H:%M}"
        what = f"{col} = {v[i]:g} {_UNITS[col]}{where} is outside the allowed range " \
               f"{lo:g} to {hi:g} {_UNITS[col]} ({int(bad.sum())} values)"
        if col in OPTIONAL_COLUMNS:
            notes.append(f"dropped optional column {col}: {what}")
            return False
        extra = ""
        if col == "relative_humidity":
            extra = f"; values up to {RH_CLIP_PCT:g} % are clipped to 100 %"
        if source_label:
            extra += f"; file column '{source_label}'"
        raise InputError(what + extra, path=path, field=col)
    df[col] = v
    return True


def finish_forcing(df: pd.DataFrame, site: Mapping, *, delta_t=67.0) -> pd.DataFrame:
    """Add ``solar_zenith`` and ``ghi_clear`` for the site and order the columns.

    ``df`` must already hold the required columns on an hour-start, tz-aware index.
    """
    pos = solar_position_midhour(df.index, site["latitude"], site["longitude"],
                                 site["elevation_m"], pressure_pa=df["pressure"].to_numpy(),
                                 temp_air_c=df["temp_air"].to_numpy(), delta_t=delta_t)
    out = df.copy()
    out["solar_zenith"] = pos["apparent_zenith"].to_numpy()
    out["ghi_clear"] = clearsky_ghi_midhour(df.index, out["solar_zenith"].to_numpy(),
                                            site["latitude"], site["longitude"],
                                            site["elevation_m"], df["pressure"].to_numpy())
    cols = [c for c in REQUIRED_COLUMNS + OPTIONAL_COLUMNS + DERIVED_COLUMNS if c in out]
    out = out[cols].astype(float)
    out.index.name = "time"
    return out


def _assemble(raw: _Raw, path: Path, site: dict, year, max_gap_h) -> tuple:
    tz = fixed_offset(site["utc_offset_h"])
    notes = list(raw.notes)
    data = raw.data
    comps = raw.comps
    insert_feb29 = False
    typical = raw.typical
    if not typical and year is not None and _whole_single_year(comps) not in (None, int(year)):
        # one whole calendar year can stand for any requested year (e.g. an EPW written
        # from a typical or synthetic year)
        notes.append(f"the file's one whole year {_whole_single_year(comps)} used as a "
                     f"typical year for {int(year)}")
        typical = True
    if typical:
        target = DEFAULT_TYPICAL_YEAR if year is None else int(year)
        leap = calendar.isleap(target)
        feb29 = (comps["month"] == 2) & (comps["day"] == 29)
        if feb29.any() and not leap:
            data = data.loc[~feb29].reset_index(drop=True)
            comps = {k: v[~feb29] for k, v in comps.items()}
            notes.append(f"dropped {int(feb29.sum())} Feb 29 rows: {target} is not a leap year")
        insert_feb29 = leap and not feb29.any()
        yrs = raw.source_years
        if yrs is not None and len(yrs):
            notes.append(f"typical-year rows from source years {int(min(yrs))}-"
                         f"{int(max(yrs))} put into {target}")
        index = _index_from(comps, year=target, tz=tz)
        full = _year_hours(target, tz, skip_feb29=insert_feb29)
    else:
        index = _index_from(comps, tz=tz)
        if year is not None:
            keep = np.asarray(index.year == int(year))
            if not keep.any():
                raise InputError(f"the file holds years {index.year.min()}-{index.year.max()}"
                                 f", not {year}", path=path, field="year")
            index = index[keep]
            data = data.loc[keep].reset_index(drop=True)
        target = int(index.year[0]) if year is None else int(year)
        full = None
    _check_duplicates(index, path)
    data = data.set_index(index).sort_index()
    if full is None:
        full = pd.date_range(data.index[0], data.index[-1], freq="h")
    outside = ~data.index.isin(full)
    if outside.any():
        raise InputError(f"time {data.index[outside][0]} is not on the hourly grid",
                         path=path, field="time")
    n_missing = len(full) - len(data)
    data = data.reindex(full)
    if n_missing:
        notes.append(f"{n_missing} missing hours in the file")
    if data["pressure"].isna().all():
        data["pressure"] = float(pressure_from_elevation(site["elevation_m"]))
    # range checks on the values the file gives
    for col in list(data.columns):
        if col in RANGES and data[col].notna().any():
            if not _check_range(data, col, path, notes):
                data = data.drop(columns=col)
    # dni/dhi absent (CSV): decompose after gap filling
    need_split = ("dni" not in data) and ("dhi" not in data)
    required = [c for c in REQUIRED_COLUMNS if c in data]
    missing = [c for c in REQUIRED_COLUMNS if c not in data and not
               (need_split and c in ("dni", "dhi"))]
    if missing:
        raise InputError(f"required column {missing[0]} missing", path=path, field=missing[0])
    filled_any = np.zeros(len(data), bool)
    first_bad = None
    for col in required:
        v, filled, too_long = _fill_column(data[col].to_numpy(), int(max_gap_h), typical)
        if too_long is not None and (first_bad is None or too_long < first_bad[0]):
            first_bad = (too_long, col)
        data[col] = v
        filled_any |= filled
    if first_bad is not None:
        pos, col = first_bad
        vals = data[col].to_numpy()
        run = int(np.argmax(~np.isnan(np.roll(vals, -pos)))) or len(vals)
        raise InputError(f"{run} missing hours from {data.index[pos]:%Y-%m-%d %H:%M}; at "
                         f"most max_gap_h={int(max_gap_h)} consecutive missing hours are "
                         "filled", path=path, field=col)
    for col in OPTIONAL_COLUMNS:
        if col not in data:
            continue
        if data[col].isna().all():
            data = data.drop(columns=col)
            continue
        v, filled, too_long = _fill_column(data[col].to_numpy(), int(max_gap_h), typical)
        if too_long is not None:
            data = data.drop(columns=col)
            notes.append(f"dropped optional column {col}: gaps longer than {max_gap_h} h")
        else:
            data[col] = v
    n_filled = int(filled_any.sum())
    if n_filled:
        notes.append(f"filled {n_filled} hours by linear interpolation "
                     f"(gaps of at most {int(max_gap_h)} h)")
    if need_split:
        pos = solar_position_midhour(data.index, site["latitude"], site["longitude"],
                                     site["elevation_m"])
        doy = np.asarray((data.index + _HALF_HOUR).day_of_year)
        data["dni"], data["dhi"] = decompose_ghi(data["ghi"].to_numpy(),
                                                 pos["apparent_zenith"].to_numpy(), doy)
        notes.append("dni and dhi split from ghi with Erbs et al. (1982)")
    if insert_feb29:
        feb28 = data[(data.index.month == 2) & (data.index.day == 28)]
        copy = feb28.copy()
        copy.index = feb28.index + pd.Timedelta(days=1)
        data = pd.concat([data, copy]).sort_index()
        notes.append(f"{target} is a leap year: Feb 29 is a copy of Feb 28")
    return data, notes, n_filled, target, typical


def _whole_single_year(comps):
    """The year if the rows are exactly the hours of one calendar year, else None."""
    years = np.unique(comps["year"])
    if len(years) != 1:
        return None
    y = int(years[0])
    n = 8784 if calendar.isleap(y) else 8760
    key = comps["month"] * 10000 + comps["day"] * 100 + comps["hour"]
    if len(key) != n or len(np.unique(key)) != n:
        return None
    return y


def read_weather(path, *, fmt="auto", latitude=None, longitude=None, elevation_m=None,
                 utc_offset_h=None, year=None, max_gap_h=3, csv_columns=None,
                 csv_units=None, csv_time_label="start"):
    """Read an hourly weather file into pondsim's forcing table.

    Parameters
    ----------
    path : str or Path
        Weather file.
    fmt : {'auto', 'epw', 'tmy3', 'tmy2', 'pvgis', 'csv'}
        File format; ``'auto'`` uses the extension (``.epw``, ``.tm2``, ``.json``) and,
        for ``.csv``, the first lines (TMY3 header, PVGIS header, else plain CSV).
    latitude, longitude : float [deg], optional
        Override the file's site (north/east positive). Required for plain CSV.
    elevation_m : float [m], optional
        Override/supply the site elevation. Required for plain CSV.
    utc_offset_h : float [h], optional
        Local standard time offset from UTC. Required for plain CSV and PVGIS (UTC).
    year : int, optional
        Typical-year files (TMY2/3, PVGIS, EPW with mixed source years): the calendar year
        every row is put into (default 2025, not a leap year). A leap year makes Feb 29 a
        copy of Feb 28 when the file has no Feb 29. Real (single- or multi-year) data keep
        their dates; there ``year`` selects that calendar year.
    max_gap_h : int [h]
        Longest run of missing hours filled by linear interpolation; longer → InputError.
    csv_columns : mapping, optional
        Plain CSV: pondsim name → file header, for ``time`` and any of
        :data:`CSV_FIELDS` (names equal to pondsim's are found without mapping).
        Without ``dni``/``dhi``, they are split from GHI with Erbs et al. (1982); without
        ``pressure``, FAO-56 eq. 7 at the site elevation; RH may come from ``temp_dew``.
    csv_units : mapping, optional
        Plain CSV: pondsim name → unit of the file's column, see :data:`CSV_UNITS`
        (e.g. ``{"pressure": "hPa", "temp_air": "K"}``).
    csv_time_label : {'start', 'end'}
        Plain CSV: whether each time labels the start (default) or the end of its hour.

    Returns
    -------
    data : pandas.DataFrame
        Hourly forcing table (module docstring): hour-start labels, local standard time.
    meta : dict
        ``name``, ``latitude``, ``longitude``, ``elevation_m``, ``utc_offset_h``,
        ``source`` (path), ``format``, ``year``, ``n_filled`` (hours filled), ``notes``.

    Raises
    ------
    InputError
        Missing file, unknown format, missing site field, duplicated hours, gaps longer
        than ``max_gap_h``, values outside :data:`RANGES` (irradiance down to −10 W m-2 is
        clipped to 0; RH up to 105 % is clipped to 100 %).

    Notes
    -----
    Optional columns (``precipitation``, ``ir_horizontal``) are kept only where the file
    has them without long gaps and within range; otherwise they are dropped with a note
    (e.g. the precipitation of some TMY3 files is unusable). Source time conventions
    are normalised at the boundary; see the module docstring.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("weather file not found", path=path)
    if fmt not in FORMATS:
        raise InputError(f"unknown weather format '{fmt}'{did_you_mean(str(fmt), FORMATS)}; "
                         f"allowed: {', '.join(FORMATS)}", path=path, field="fmt")
    if int(max_gap_h) < 0:
        raise InputError("max_gap_h must be >= 0", path=path, field="max_gap_h")
    kind = _detect_format(path) if fmt == "auto" else fmt
    try:
        if kind == "epw":
            raw = _read_epw(path)
        elif kind == "tmy3":
            raw = _read_tmy3(path)
        elif kind == "tmy2":
            raw = _read_tmy2(path)
        elif kind == "pvgis" and path.suffix.lower() == ".epw":
            raw = _read_epw(path)  # PVGIS's EPW output is a plain EPW file
        elif kind == "pvgis":
            raw = _read_pvgis(path, utc_offset_h)
        else:
            raw = _read_csv(path, csv_columns, csv_units, csv_time_label)
    except InputError:
        raise
    except (ValueError, KeyError, IndexError, TypeError, json.JSONDecodeError,
            UnicodeDecodeError) as exc:
        raise InputError(f"cannot read as {kind}: {type(exc).__name__}: {exc}",
                         path=path, field="fmt") from None
    site = _site(raw, path, latitude=latitude, longitude=longitude,
                 elevation_m=elevation_m, utc_offset_h=utc_offset_h)
    data, notes, n_filled, target, typical = _assemble(raw, path, site, year, max_gap_h)
    out = finish_forcing(data, site)
    meta = {
        "name": site.get("name") or path.stem,
        "latitude": site["latitude"], "longitude": site["longitude"],
        "elevation_m": site["elevation_m"], "utc_offset_h": site["utc_offset_h"],
        "source": str(path), "format": raw.fmt, "year": target,
        "typical_year": bool(typical), "n_filled": n_filled, "notes": notes,
    }
    return out, meta


# --------------------------------------------------------------------------- EPW writer
def _epw_weekday(year: int) -> str:
    return calendar.day_name[_dt.date(year, 1, 1).weekday()]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_epw(df: pd.DataFrame, meta: Mapping, path) -> Path:
    """Write a forcing table as an EnergyPlus weather (EPW) file, atomically.

    Values are printed at EPW's usual precision: temperatures 0.1 degC, RH 1 %,
    pressure 1 Pa, irradiance 1 Wh m-2, wind 0.1 m s-1, precipitation 0.1 mm.
    Missing optional columns are written as EPW's missing codes (IR 9999,
    precipitation 999), which :func:`read_weather` reads back as absent.

    Parameters
    ----------
    df : pandas.DataFrame
        Forcing table from :func:`read_weather` or :mod:`pondsim.forcing.climate` (hour-start
        labels, local standard time).
    meta : mapping
        ``name``, ``latitude``, ``longitude``, ``elevation_m``, ``utc_offset_h``, and
        optionally ``notes`` (written as comment lines).
    path : str or Path
        Output file; written to a temporary file in the same folder, then renamed.

    Returns
    -------
    Path
    """
    path = Path(path)
    tz = fixed_offset(meta["utc_offset_h"])
    idx = df.index.tz_convert(tz) if df.index.tz is not None else df.index.tz_localize(tz)
    n = len(df)
    name = str(meta.get("name", "site")).replace(",", " ")
    years = idx.year
    lines = [
        f"LOCATION,{name},-,-,pondsim,999999,{meta['latitude']:.4f},"
        f"{meta['longitude']:.4f},{meta['utc_offset_h']:.1f},{meta['elevation_m']:.1f}",
        "DESIGN CONDITIONS,0",
        "TYPICAL/EXTREME PERIODS,0",
        "GROUND TEMPERATURES,0",
        "HOLIDAYS/DAYLIGHT SAVINGS,No,0,0,0",
        "COMMENTS 1," + "; ".join(str(s).replace(",", ";")
                                  for s in meta.get("notes", []))[:2000],
        f"COMMENTS 2,written by pondsim from {str(meta.get('source', '')).replace(',', ';')}",
        f"DATA PERIODS,1,1,Data,{_epw_weekday(int(years[0]))},"
        f"{idx[0].month}/{idx[0].day},{idx[-1].month}/{idx[-1].day}",
    ]
    temp = df["temp_air"].to_numpy(float)
    rh = df["relative_humidity"].to_numpy(float)
    dew = dewpoint_from_rh(temp, rh)
    doy = np.asarray((idx + _HALF_HOUR).day_of_year, dtype=float)
    etrn = np.asarray(pvlib.irradiance.get_extra_radiation(doy))
    if "solar_zenith" in df:
        cosz = np.cos(np.radians(df["solar_zenith"].to_numpy(float)))
        etr = np.clip(etrn * cosz, 0.0, None)
    else:
        etr = np.zeros(n)
    ir = df["ir_horizontal"].to_numpy(float) if "ir_horizontal" in df else np.full(n, 9999.0)
    pr = df["precipitation"].to_numpy(float) if "precipitation" in df else np.full(n, 999.0)
    cols = {
        "ghi": df["ghi"].to_numpy(float), "dni": df["dni"].to_numpy(float),
        "dhi": df["dhi"].to_numpy(float), "wind": df["wind_speed"].to_numpy(float),
        "p": df["pressure"].to_numpy(float),
    }
    flags = "?9?9?9?9E0?9?9?9?9?9?9?9?9?9?9?9?9?9?9?9*9*9?9?9?9"
    mo, dy, hr = idx.month, idx.day, idx.hour
    rows = []
    for i in range(n):
        rows.append(
            f"{years[i]},{mo[i]},{dy[i]},{hr[i] + 1},0,{flags},"
            f"{temp[i]:.1f},{dew[i]:.1f},{rh[i]:.0f},{cols['p'][i]:.0f},"
            f"{etr[i]:.0f},{etrn[i]:.0f},{ir[i]:.0f},{cols['ghi'][i]:.0f},"
            f"{cols['dni'][i]:.0f},{cols['dhi'][i]:.0f},999999,999999,999999,9999,"
            f"999,{cols['wind'][i]:.1f},99,99,9999,99999,9,999999999,999,0.999,999,99,"
            f"999,{pr[i]:.1f},{1 if pr[i] < 999 else 99}"
        )
    text = "\n".join(lines + rows) + "\n"
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=path.name + ".", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path
