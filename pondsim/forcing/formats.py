"""One reader per weather-file format (EPW, TMY3, TMY2, PVGIS, mapped CSV).

Each returns the file's raw columns renamed to pondsim's names and converted to its
units, with the time components as the file states them; :mod:`pondsim.forcing.weather`
dispatches to them and assembles the hourly forcing table."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing.columns import FORMATS, HOUR, OPTIONAL_COLUMNS, REQUIRED_COLUMNS
from pondsim.forcing.solar import fixed_offset, saturation_vapour_pressure
from pondsim.forcing.timestamps import parse_times


class RawWeather:
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


def raw_epw(path: Path) -> RawWeather:
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
    return RawWeather(d, comps, site, "epw", typical, source_years=np.unique(comps["year"]))


def raw_tmy3(path: Path) -> RawWeather:
    data, meta = pvlib.iotools.read_tmy3(str(path), map_variables=True)
    # Rebuild the clock from the raw columns: HH:MM labels the END of the hour.
    date = pd.to_datetime(data["Date (MM/DD/YYYY)"], format="%m/%d/%Y")
    hh = data["Time (HH:MM)"].str.split(":").str[0].astype(int)
    end = pd.DatetimeIndex(date) + pd.to_timedelta(hh.to_numpy(), unit="h")
    start = end - HOUR
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
    return RawWeather(d, comps, site, "tmy3", True, source_years=np.unique(date.dt.year))


def raw_tmy2(path: Path) -> RawWeather:
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
    return RawWeather(d, comps, site, "tmy2", True, source_years=np.unique(yr))


def raw_pvgis(path: Path, utc_offset_h) -> RawWeather:
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
    return RawWeather(d, _comps_from_times(local), site, "pvgis-" + fmt, True, notes,
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


def raw_csv(path: Path, csv_columns, csv_units, time_label) -> RawWeather:
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
    t = pd.Series(parse_times(raw[mapping["time"]], path=path, field="time"))
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
        t = t - HOUR
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
    return RawWeather(d, comps, site, "csv", typical, notes, source_years=np.unique(comps["year"]))


def detect_format(path: Path) -> str:
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


