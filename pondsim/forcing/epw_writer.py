"""EPW writer: a forcing table back to an EnergyPlus weather file (used for the demo
weather and for tests that round-trip a file)."""

from __future__ import annotations

import calendar
import datetime as _dt
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from pondsim.forcing.columns import HALF_HOUR
from pondsim.forcing.solar import dewpoint_from_rh, fixed_offset


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
    doy = np.asarray((idx + HALF_HOUR).day_of_year, dtype=float)
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
