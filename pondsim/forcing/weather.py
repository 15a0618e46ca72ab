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
import json
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing.columns import (
    DEFAULT_TYPICAL_YEAR,
    DERIVED_COLUMNS,
    FORMATS,
    HALF_HOUR,
    IRRADIANCE_CLIP_W_M2,
    OPTIONAL_COLUMNS,
    RANGES,
    REQUIRED_COLUMNS,
    RH_CLIP_PCT,
    UNITS,
)
from pondsim.forcing.epw_writer import write_epw
from pondsim.forcing.formats import (
    RawWeather,
    detect_format,
    raw_csv,
    raw_epw,
    raw_pvgis,
    raw_tmy2,
    raw_tmy3,
)
from pondsim.forcing.solar import (
    clearsky_ghi_midhour,
    decompose_ghi,
    dewpoint_from_rh,
    fixed_offset,
    pressure_from_elevation,
    saturation_vapour_pressure,
    solar_position_midhour,
)

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



# --------------------------------------------------------------------------- assembly
def _site(raw: RawWeather, path, **given) -> dict:
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


#: Largest plausible mean rain depth over the wet hours of a record [mm h-1]; above it
#: the precipitation column is taken as not hourly (assumption: climatological mean
#: hourly intensities are a few mm h-1 even in the tropics, from memory).
PRECIP_WET_HOUR_MAX_MM = 10.0


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
    if bad.any() and col == "precipitation":
        # A few impossible hours (e.g. TMY3 flag values) must not cost the whole record:
        # set them to missing and say how many.
        v = np.where(bad, np.nan, v)
        notes.append(f"set {int(bad.sum())} impossible precipitation values (outside "
                     f"{lo:g}-{hi:g} {UNITS[col]}) to missing")
        bad = np.zeros_like(bad)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        where = f" at {df.index[i]:%Y-%m-%d %H:%M}"
        what = f"{col} = {v[i]:g} {UNITS[col]}{where} is outside the allowed range " \
               f"{lo:g} to {hi:g} {UNITS[col]} ({int(bad.sum())} values)"
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


def _assemble(raw: RawWeather, path: Path, site: dict, year, max_gap_h) -> tuple:
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
        if col == "precipitation":
            # Rain is not interpolated: unknown hours stay missing ("no data", never 0)
            # and the rest of the record is kept.
            v = data[col].to_numpy(dtype=float)
            wet = v > 0
            if wet.sum() >= 50 and np.nanmean(v[wet]) > PRECIP_WET_HOUR_MAX_MM:
                # every hour may be possible while the record is not: a mean over the
                # wet hours this high means the values are not hourly depths
                notes.append(f"precipitation dropped (no data): its wet hours "
                             f"average {np.nanmean(v[wet]):.1f} mm h-1 (> "
                             f"{PRECIP_WET_HOUR_MAX_MM:g}), {np.nansum(v):,.0f} mm in all, "
                             "not a plausible hourly record")
                data = data.drop(columns=col)
                continue
            n_nan = int(data[col].isna().sum())
            if 2 * n_nan > len(data):
                # mostly unknown: no rain record at all ("no data"), not a sparse one
                notes.append(f"precipitation dropped (no data): missing in {n_nan} of "
                             f"{len(data)} hours")
                data = data.drop(columns=col)
            elif n_nan:
                notes.append(f"precipitation missing (no data) in {n_nan} hours")
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
        doy = np.asarray((data.index + HALF_HOUR).day_of_year)
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
    Optional columns (``precipitation``, ``ir_horizontal``) are kept where the file has
    them. ``ir_horizontal`` with long gaps or out of range is dropped with a note;
    impossible ``precipitation`` hours (outside 0-200 mm) are set to missing and, like
    the file's own gaps, stay missing (NaN, "no data", not interpolated) with a count
    in the notes; the rest of the record is kept. A precipitation record missing in more
    than half of its hours, or whose wet hours average more than 10 mm h-1 (not hourly
    depths), is dropped with a note (no data). Source time conventions
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
    kind = detect_format(path) if fmt == "auto" else fmt
    try:
        if kind == "epw":
            raw = raw_epw(path)
        elif kind == "tmy3":
            raw = raw_tmy3(path)
        elif kind == "tmy2":
            raw = raw_tmy2(path)
        elif kind == "pvgis" and path.suffix.lower() == ".epw":
            raw = raw_epw(path)  # PVGIS's EPW output is a plain EPW file
        elif kind == "pvgis":
            raw = raw_pvgis(path, utc_offset_h)
        else:
            raw = raw_csv(path, csv_columns, csv_units, csv_time_label)
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
        # the file's own header, for the site check (pondsim.forcing.sitecheck)
        "file_site": {k: raw.site.get(k) for k in ("latitude", "longitude", "utc_offset_h")},
    }
    return out, meta


