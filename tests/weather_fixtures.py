"""Helpers for the forcing-stage tests: synthetic weather files written from scratch
(independently of pondsim's own writer) and independent reference formulas."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

PVLIB_DATA = Path(pvlib.__file__).parent / "data"
TMY3_GREENSBORO = PVLIB_DATA / "723170TYA.CSV"
TMY3_SAND_POINT = PVLIB_DATA / "703165TY.csv"
TMY2_MIAMI = PVLIB_DATA / "12839.tm2"

#: Invented monthly normals of a hot-desert test site (not any real place).
DESERT_NORMALS = {
    "temp_max_c": [19, 22, 26, 30, 35, 40, 41, 40, 37, 31, 24, 19],
    "temp_min_c": [4, 6, 9, 13, 17, 22, 27, 26, 22, 15, 8, 4],
    "wind_speed_m_s": [2.5, 2.8, 3.1, 3.4, 3.3, 3.2, 3.4, 3.1, 2.8, 2.5, 2.3, 2.2],
    "relative_humidity_pct": [42, 38, 32, 24, 19, 17, 30, 35, 31, 30, 35, 43],
    "clearness": [0.74, 0.76, 0.78, 0.80, 0.80, 0.79, 0.68, 0.66, 0.75, 0.77, 0.75, 0.73],
}
DESERT_SITE = {"latitude": 32.4, "longitude": -113.9, "elevation_m": 210.0,
               "utc_offset_h": -7.0}


# --------------------------------------------------------------------------- formulas
def fao56_ra_mj_m2_d(latitude_deg, doy):
    """Extraterrestrial daily radiation, FAO-56 eqs. 21, 23, 24, 25 [MJ m-2 d-1].

    Allen, Pereira, Raes & Smith (1998), FAO Irrigation and Drainage Paper 56.
    """
    phi = np.radians(latitude_deg)
    j = np.asarray(doy, dtype=float)
    dr = 1 + 0.033 * np.cos(2 * np.pi * j / 365)                 # eq. 23
    delta = 0.409 * np.sin(2 * np.pi * j / 365 - 1.39)           # eq. 24
    ws = np.arccos(np.clip(-np.tan(phi) * np.tan(delta), -1, 1))  # eq. 25
    gsc = 0.0820                                                  # MJ m-2 min-1
    return 24 * 60 / np.pi * gsc * dr * (ws * np.sin(phi) * np.sin(delta)
                                         + np.cos(phi) * np.cos(delta) * np.sin(ws))


def fao56_pressure_kpa(z_m):
    """FAO-56 eq. 7 [kPa]."""
    return 101.3 * ((293 - 0.0065 * z_m) / 293) ** 5.26


def equation_of_time_min(doy):
    """Spencer (1971) equation of time [min], as quoted by Duffie & Beckman (from memory)."""
    b = 2 * np.pi * (np.asarray(doy, dtype=float) - 1) / 365
    return 229.18 * (0.000075 + 0.001868 * np.cos(b) - 0.032077 * np.sin(b)
                     - 0.014615 * np.cos(2 * b) - 0.04089 * np.sin(2 * b))


def solar_noon_h(doy, longitude, utc_offset_h):
    """Local standard clock time of solar noon [h]."""
    return 12 - (longitude - 15 * utc_offset_h) / 15 - equation_of_time_min(doy) / 60


def cos_zenith_simple(doy, clock_h, latitude, longitude, utc_offset_h):
    """Cosine of the solar zenith from Cooper's declination and the hour angle."""
    decl = np.radians(23.45) * np.sin(2 * np.pi * (284 + np.asarray(doy)) / 365)
    hour_angle = np.radians(15 * (clock_h - solar_noon_h(doy, longitude, utc_offset_h)))
    phi = np.radians(latitude)
    return np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.cos(hour_angle)


def ghi_centroid_offset_min(df, longitude, utc_offset_h):
    """Mean over days of (GHI-weighted mid-hour clock time − solar noon) [min].

    A one-hour error in the hour labels moves this by 60 min."""
    ghi = df["ghi"].to_numpy().reshape(-1, 24)
    mid = (np.asarray(df.index.hour, dtype=float) + 0.5).reshape(-1, 24)
    sunny = ghi.sum(axis=1) > 0
    centroid = (ghi * mid).sum(axis=1)[sunny] / ghi.sum(axis=1)[sunny]
    doy = np.asarray(df.index.day_of_year).reshape(-1, 24)[:, 0][sunny]
    return float(np.mean(centroid - solar_noon_h(doy, longitude, utc_offset_h)) * 60)


# --------------------------------------------------------------------------- EPW
EPW_HEADER = [
    "DESIGN CONDITIONS,0",
    "TYPICAL/EXTREME PERIODS,0",
    "GROUND TEMPERATURES,0",
    "HOLIDAYS/DAYLIGHT SAVINGS,No,0,0,0",
    "COMMENTS 1,synthetic test file",
    "COMMENTS 2,",
    "DATA PERIODS,1,1,Data,Sunday,1/1,12/31",
]


def synthetic_hours(year=2025, latitude=32.4, longitude=-113.9, utc_offset_h=-7.0,
                    n_days=None):
    """A smooth synthetic year: (components, values) with hour h = h-1..h, hour means.

    GHI = 1000 cos(z)^1.2 at the middle of each hour (cos z from Cooper's declination),
    so its daily peak sits at solar noon by construction.
    """
    days = 366 if (year % 4 == 0 and (year % 100 != 0 or year % 400 == 0)) else 365
    days = n_days or days
    start = pd.Timestamp(f"{year}-01-01")
    t = pd.date_range(start, periods=days * 24, freq="h")  # hour starts
    doy = np.asarray(t.day_of_year)
    cz = cos_zenith_simple(doy, np.asarray(t.hour) + 0.5, latitude, longitude, utc_offset_h)
    ghi = np.round(1000 * np.clip(cz, 0, None) ** 1.2)
    dhi = np.round(np.minimum(ghi, 100 + 0 * ghi) * (ghi > 0))
    with np.errstate(divide="ignore", invalid="ignore"):
        dni = np.round(np.where(cz > 0.05, (ghi - dhi) / cz, 0))
    temp = np.round(20 + 8 * np.sin(2 * np.pi * (np.asarray(t.hour) - 9) / 24), 1)
    vals = pd.DataFrame({
        "temp_air": temp, "relative_humidity": 40.0, "pressure": 99000.0,
        "ghi": ghi, "dni": dni, "dhi": dhi, "wind_speed": 3.0, "precipitation": 0.0,
        "ir_horizontal": 330.0,
    })
    comps = pd.DataFrame({"year": t.year, "month": t.month, "day": t.day,
                          "hour": t.hour + 1})  # EPW hour 1..24
    return comps, vals


def write_synthetic_epw(path, comps, vals, *, latitude=32.4, longitude=-113.9,
                        utc_offset_h=-7.0, elevation_m=210.0, city="Testville"):
    """Write an EPW file directly (35 fields a row), independently of pondsim."""
    lines = [f"LOCATION,{city},-,-,test,000000,{latitude},{longitude},{utc_offset_h},"
             f"{elevation_m}"] + EPW_HEADER
    flags = "?9?9?9?9E0?9?9?9?9?9?9?9?9?9?9?9?9?9?9?9*9*9?9?9?9"
    for c, v in zip(comps.itertuples(index=False), vals.itertuples(index=False),
                    strict=True):
        lines.append(
            f"{c.year},{c.month},{c.day},{c.hour},60,{flags},{v.temp_air},5.0,"
            f"{v.relative_humidity},{v.pressure},0,1367,{v.ir_horizontal},{v.ghi},{v.dni},"
            f"{v.dhi},0,0,0,0,180,{v.wind_speed},5,5,20,77777,9,999999999,10,0.1,0,88,"
            f"0.2,{v.precipitation},1")
    Path(path).write_text("\n".join(lines) + "\n")
    return Path(path)


# --------------------------------------------------------------------------- PVGIS
PVGIS_COLUMNS = ["time(UTC)", "T2m", "RH", "G(h)", "Gb(n)", "Gd(h)", "IR(h)", "WS10m",
                 "WD10m", "SP"]
PVGIS_MONTH_YEARS = [2010, 2012, 2007, 2015, 2009, 2011, 2016, 2008, 2013, 2006, 2014, 2019]


def pvgis_rows(latitude=38.0, longitude=-2.0):
    """8760 PVGIS-TMY-like rows in UTC, each month from its own source year (Feb 29 of a
    leap source year left out, as PVGIS does). GHI peaks at solar noon (UTC)."""
    rows = []
    for month, year in enumerate(PVGIS_MONTH_YEARS, start=1):
        t = pd.date_range(f"{year}-{month:02d}-01", periods=31 * 24, freq="h")
        t = t[(t.month == month) & ~((t.month == 2) & (t.day == 29))]
        doy = np.asarray(t.day_of_year)
        cz = cos_zenith_simple(doy, np.asarray(t.hour) + 0.5, latitude, longitude, 0.0)
        ghi = np.round(900 * np.clip(cz, 0, None) ** 1.2, 2)
        for ti, g in zip(t, ghi, strict=True):
            rows.append({"time(UTC)": ti.strftime("%Y%m%d:%H%M"), "T2m": 15.5, "RH": 60.0,
                         "G(h)": g, "Gb(n)": 0.0 if g == 0 else round(g * 0.8, 2),
                         "Gd(h)": round(g * 0.3, 2), "IR(h)": 310.0, "WS10m": 2.5,
                         "WD10m": 200.0, "SP": 95000.0})
    assert len(rows) == 8760
    return rows


def write_pvgis_csv(path, rows, latitude=38.0, longitude=-2.0, elevation=540.0):
    """PVGIS TMY csv layout (as parsed by pvlib.iotools.read_pvgis_tmy): three location
    lines, the time-offset line, a month/year table, the data table, legend lines."""
    out = [f"Latitude (decimal degrees): {latitude:.3f}",
           f"Longitude (decimal degrees): {longitude:.3f}",
           f"Elevation (m): {elevation:.1f}",
           "Irradiance Time Offset (h): 0.1761",
           "month,year"]
    out += [f"{m},{y}" for m, y in enumerate(PVGIS_MONTH_YEARS, start=1)]
    out.append(",".join(PVGIS_COLUMNS))
    for r in rows:
        out.append(",".join(str(r[c]) for c in PVGIS_COLUMNS))
    out += ["T2m: 2-m air temperature (degree Celsius)", "RH: relative humidity (%)",
            "G(h): Global irradiance on the horizontal plane (W/m2)",
            "SP: Surface (air) pressure (Pa)"]
    Path(path).write_bytes(("\r\n".join(out) + "\r\n").encode())
    return Path(path)


def write_pvgis_json(path, rows, latitude=38.0, longitude=-2.0, elevation=540.0):
    """PVGIS TMY json layout: inputs.location, outputs.months_selected/tmy_hourly, meta."""
    doc = {
        "inputs": {"location": {"latitude": latitude, "longitude": longitude,
                                "elevation": elevation},
                   "meteo_data": {"radiation_db": "PVGIS-SARAH2", "year_min": 2005,
                                  "year_max": 2020}},
        "outputs": {"months_selected": [{"month": m, "year": y} for m, y in
                                        enumerate(PVGIS_MONTH_YEARS, start=1)],
                    "tmy_hourly": rows},
        "meta": {"inputs": {"location": {"description": "Selected location"}},
                 "outputs": {"tmy_hourly": {"type": "time series"}}},
    }
    Path(path).write_text(json.dumps(doc))
    return Path(path)


# --------------------------------------------------------------------------- CSV
def hourly_csv_frame(start="2024-01-01", hours=72, latitude=32.4, longitude=-113.9,
                     utc_offset_h=-7.0):
    """Hour-start labelled real-data style rows in pondsim names and units."""
    t = pd.date_range(start, periods=hours, freq="h")
    doy = np.asarray(t.day_of_year)
    cz = cos_zenith_simple(doy, np.asarray(t.hour) + 0.5, latitude, longitude, utc_offset_h)
    return pd.DataFrame({
        "time": t.strftime("%Y-%m-%d %H:%M"),
        "ghi": np.round(950 * np.clip(cz, 0, None) ** 1.2, 1),
        "temp_air": np.round(20 + 8 * np.sin(2 * np.pi * (t.hour - 9) / 24), 2),
        "relative_humidity": 35.0,
        "wind_speed": 2.0,
        "pressure": 99000.0,
    })


def assert_close(a, b, tol):
    assert math.isclose(a, b, abs_tol=tol), (a, b, tol)
