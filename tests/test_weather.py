"""Forcing stage: weather readers, time conventions, gap filling, range checks, EPW."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pvlib
import pytest
from weather_fixtures import (
    DESERT_NORMALS,
    DESERT_SITE,
    PVLIB_DATA,
    TMY2_MIAMI,
    TMY3_GREENSBORO,
    TMY3_SAND_POINT,
    ghi_centroid_offset_min,
    hourly_csv_frame,
    pvgis_rows,
    synthetic_hours,
    write_pvgis_csv,
    write_pvgis_json,
    write_synthetic_epw,
)

from pondsim.errors import InputError
from pondsim.forcing.weather import (
    REQUIRED_COLUMNS,
    read_weather,
    solar_position_midhour,
    write_epw,
)

FORCING_COLUMNS = set(REQUIRED_COLUMNS) | {"solar_zenith", "ghi_clear"}


# --------------------------------------------------------------------------- solar position
def test_solar_position_midhour_at_spa_worked_example():
    # Reda & Andreas (2004) Solar Energy 76:577-589, worked example: 2003-10-17 12:30:30
    # LST (UTC-7), lat 39.742476, lon -105.1786, 1830.14 m, 820 mbar, 11 degC,
    # delta T 67 s -> topocentric zenith 50.11162 deg, azimuth 194.34024 deg
    # (values as listed in REFERENCES.md). The helper evaluates at hour start + 30 min.
    tz = dt.timezone(dt.timedelta(hours=-7))
    index = pd.DatetimeIndex([pd.Timestamp("2003-10-17 12:00:30", tz=tz)])
    pos = solar_position_midhour(index, 39.742476, -105.1786, 1830.14, pressure_pa=82000.0,
                                 temp_air_c=11.0, delta_t=67.0)
    assert pos["apparent_zenith"].iloc[0] == pytest.approx(50.11162, abs=1e-3)
    assert pos["azimuth"].iloc[0] == pytest.approx(194.34024, abs=1e-3)
    assert pos.index[0] == index[0]  # labelled by the hour start it stands for


# --------------------------------------------------------------------------- pvlib files
def _raw_tmy3_ghi_sum(path):
    return float(pd.read_csv(path, skiprows=1)["GHI (W/m^2)"].sum())


def _raw_tmy2_ghi_sum(path):
    # TMY2 fixed columns (NREL 1995 user's manual): after a leading blank, year(2)
    # month(2) day(2) hour(2) ETR(4) ETRN(4) GHI(4) -> characters 17..20
    with open(path) as fh:
        lines = fh.readlines()[1:]
    return float(sum(int(line[17:21]) for line in lines))


@pytest.fixture(scope="module")
def pvlib_files():
    return {p.name: read_weather(p) for p in (TMY3_GREENSBORO, TMY3_SAND_POINT, TMY2_MIAMI)}


@pytest.mark.parametrize("name,raw_sum,fmt,offset", [
    (TMY3_GREENSBORO.name, _raw_tmy3_ghi_sum, "tmy3", -5.0),
    (TMY3_SAND_POINT.name, _raw_tmy3_ghi_sum, "tmy3", -9.0),
    (TMY2_MIAMI.name, _raw_tmy2_ghi_sum, "tmy2", -5.0),
])
def test_pvlib_shipped_files(pvlib_files, name, raw_sum, fmt, offset):
    df, meta = pvlib_files[name]
    assert len(df) == 8760
    assert FORCING_COLUMNS <= set(df.columns)
    assert meta["format"] == fmt and meta["utc_offset_h"] == offset
    assert meta["year"] == 2025 and meta["typical_year"]
    assert df.index[0] == pd.Timestamp("2025-01-01 00:00", tz=df.index.tz)
    assert df.index[-1] == pd.Timestamp("2025-12-31 23:00", tz=df.index.tz)
    assert (np.diff(df.index.asi8) == np.diff(df.index.asi8)[0]).all()
    assert df.index.tz.utcoffset(None) == dt.timedelta(hours=offset)
    # the annual GHI is the file's own column sum: nothing lost, nothing duplicated
    assert df["ghi"].sum() == pytest.approx(raw_sum(PVLIB_DATA / name), rel=1e-12)
    assert df.notna().all().all()
    assert df[["ghi", "dni", "dhi"]].ge(0).all().all() and df["ghi"].max() < 1200
    assert df["pressure"].between(90_000, 105_000).all()  # mbar converted to Pa
    assert df["temp_air"].between(-40, 50).all()
    assert df["ghi_clear"].max() < 1200
    assert any("source years" in n for n in meta["notes"])


@pytest.mark.parametrize("name", [TMY3_GREENSBORO.name, TMY3_SAND_POINT.name,
                                  TMY2_MIAMI.name])
def test_pvlib_files_ghi_peaks_at_solar_noon(pvlib_files, name):
    df, meta = pvlib_files[name]
    # GHI-weighted mid-hour time vs solar noon (Spencer 1971 equation of time, from
    # memory); a one-hour label error moves this by 60 min.
    offset = ghi_centroid_offset_min(df, meta["longitude"], meta["utc_offset_h"])
    assert abs(offset) < 15
    # and on clear days the GHI maximum falls in the hour of minimum zenith or next to it
    z = df["solar_zenith"].to_numpy().reshape(-1, 24)
    g = df["ghi"].to_numpy().reshape(-1, 24)
    clear = g.sum(axis=1) > 0.75 * df["ghi_clear"].to_numpy().reshape(-1, 24).sum(axis=1)
    assert clear.sum() > 20
    near = np.abs(np.argmin(z, axis=1) - np.argmax(g, axis=1))[clear] <= 1
    assert near.mean() > 0.9  # clouds (e.g. Miami afternoons) move some peaks


def test_tmy3_values_converted_and_relabelled():
    df, _ = read_weather(TMY3_GREENSBORO)
    raw = pd.read_csv(TMY3_GREENSBORO, skiprows=1)
    # first TMY3 row is 01/01 01:00, the hour ENDING at 01:00 -> our 00:00 label
    assert df["ghi"].iloc[0] == raw["GHI (W/m^2)"].iloc[0]
    assert df["pressure"].iloc[5] == raw["Pressure (mbar)"].iloc[5] * 100
    assert df["temp_air"].iloc[13] == raw["Dry-bulb (C)"].iloc[13]


# --------------------------------------------------------------------------- EPW
def test_epw_typical_year_labels_and_year(tmp_path):
    comps, vals = synthetic_hours(2025)
    # mixed source years month by month, as in a typical-year EPW
    comps["year"] = np.where(comps["month"] % 2 == 0, 1999, 2007)
    path = write_synthetic_epw(tmp_path / "mixed.epw", comps, vals)
    df, meta = read_weather(path)
    assert meta["typical_year"] and meta["year"] == 2025 and len(df) == 8760
    assert meta["name"] == "Testville" and meta["latitude"] == 32.4
    assert df.index[0] == pd.Timestamp("2025-01-01 00:00", tz=df.index.tz)
    # EPW hour 1 (00:00-01:00) -> label 00:00; the fixture's GHI is symmetric about
    # solar noon, so the centroid lands on it only with hour-start labels
    assert abs(ghi_centroid_offset_min(df, -113.9, -7.0)) < 3
    np.testing.assert_array_equal(df["ghi"].to_numpy(), vals["ghi"].to_numpy())
    assert {"precipitation", "ir_horizontal"} <= set(df.columns)
    assert any("1999-2007" in n for n in meta["notes"])


def test_epw_typical_year_into_leap_year(tmp_path):
    comps, vals = synthetic_hours(2025)
    comps["year"] = np.where(comps["month"] < 7, 1999, 2007)
    path = write_synthetic_epw(tmp_path / "mixed.epw", comps, vals)
    df, meta = read_weather(path, year=2024)
    assert len(df) == 8784
    feb28 = df.loc["2024-02-28"].to_numpy()
    feb29 = df.loc["2024-02-29"]
    cols = [c for c in df.columns if c not in ("solar_zenith", "ghi_clear")]
    np.testing.assert_array_equal(feb29[cols].to_numpy(), df.loc["2024-02-28", cols].to_numpy())
    assert feb28.shape == feb29.shape
    assert any("Feb 29 is a copy of Feb 28" in n for n in meta["notes"])


def test_epw_real_leap_year_keeps_dates(tmp_path):
    comps, vals = synthetic_hours(2024)
    path = write_synthetic_epw(tmp_path / "y2024.epw", comps, vals)
    df, meta = read_weather(path)
    assert len(df) == 8784 and not meta["typical_year"] and meta["year"] == 2024
    assert df.index[-1] == pd.Timestamp("2024-12-31 23:00", tz=df.index.tz)


def test_epw_short_gap_filled_and_long_gap_rejected(tmp_path):
    comps, vals = synthetic_hours(2025)
    short = vals.copy()
    short.loc[[4000, 4001], "temp_air"] = 99.9            # EPW missing code
    path = write_synthetic_epw(tmp_path / "gap2.epw", comps, short)
    df, meta = read_weather(path)
    assert meta["n_filled"] == 2
    lo, hi = vals["temp_air"][3999], vals["temp_air"][4002]
    np.testing.assert_allclose(df["temp_air"].iloc[4000:4002],
                               [lo + (hi - lo) / 3, lo + 2 * (hi - lo) / 3])
    assert any("filled 2 hours" in n for n in meta["notes"])

    long = vals.copy()
    long.loc[4000:4004, "ghi"] = 9999
    path = write_synthetic_epw(tmp_path / "gap5.epw", comps, long)
    with pytest.raises(InputError) as err:
        read_weather(path)
    msg = str(err.value)
    assert "gap5.epw" in msg and "'ghi'" in msg and "max_gap_h=3" in msg
    assert df.index[4000].strftime("%Y-%m-%d %H:%M") in msg
    read_weather(path, max_gap_h=5)  # allowed when asked for


def test_typical_year_gap_at_new_year_filled_across_the_wrap(tmp_path):
    comps, vals = synthetic_hours(2025)
    comps["year"] = np.where(comps["month"] < 7, 1999, 2007)
    gap = vals.copy()
    gap.loc[[0, 1], "temp_air"] = 99.9
    df, meta = read_weather(write_synthetic_epw(tmp_path / "wrap.epw", comps, gap))
    # a typical year is cyclic: Dec 31 23:00 and Jan 1 02:00 bracket the gap
    lo, hi = vals["temp_air"].iloc[-1], vals["temp_air"].iloc[2]
    np.testing.assert_allclose(df["temp_air"].iloc[:2],
                               [lo + (hi - lo) / 3, lo + 2 * (hi - lo) / 3])
    assert meta["n_filled"] == 2


def test_epw_optional_column_with_long_gap_dropped(tmp_path):
    comps, vals = synthetic_hours(2025)
    vals.loc[100:200, "ir_horizontal"] = 9999
    df, meta = read_weather(write_synthetic_epw(tmp_path / "ir.epw", comps, vals))
    assert "ir_horizontal" not in df and "precipitation" in df
    assert any("ir_horizontal" in n for n in meta["notes"])


# --------------------------------------------------------------------------- write_epw
@pytest.fixture(scope="module")
def clearsky_table():
    from pondsim.forcing.climate import clearsky_weather
    return clearsky_weather(**DESERT_SITE, normals=DESERT_NORMALS, name="Dry, Basin")


def test_write_epw_round_trip(tmp_path, clearsky_table):
    df, meta = clearsky_table
    path = write_epw(df, meta, tmp_path / "out.epw")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.epw"]  # no temp file left
    raw, raw_meta = pvlib.iotools.read_epw(path)
    assert len(raw) == len(df) and raw_meta["TZ"] == -7.0
    assert raw_meta["latitude"] == 32.4 and raw_meta["altitude"] == 210.0
    assert (raw.index == df.index).all()
    back, bmeta = read_weather(path)
    assert (back.index == df.index).all()
    assert set(back.columns) == set(df.columns)
    # EPW's printed precision: 0.1 degC, 1 %, 1 Pa, 1 W m-2, 0.1 m s-1
    for col, tol in [("temp_air", 0.05), ("relative_humidity", 0.5), ("pressure", 0.5),
                     ("ghi", 0.5), ("dni", 0.5), ("dhi", 0.5), ("wind_speed", 0.05)]:
        np.testing.assert_allclose(back[col], df[col], atol=tol + 1e-9, err_msg=col)
        np.testing.assert_allclose(raw[{"pressure": "atmospheric_pressure"}.get(col, col)],
                                   df[col], atol=tol + 1e-9, err_msg=col)
    np.testing.assert_allclose(back["solar_zenith"], df["solar_zenith"], atol=1e-3)
    np.testing.assert_allclose(back["ghi_clear"], df["ghi_clear"], atol=0.05)
    assert bmeta["name"] == "Dry  Basin" and bmeta["year"] == 2025


def test_write_epw_is_atomic(tmp_path, clearsky_table, monkeypatch):
    df, meta = clearsky_table
    target = tmp_path / "keep.epw"
    target.write_text("old content\n")

    def failing_replace(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr("pondsim.forcing.epw_writer.os.replace", failing_replace)
    with pytest.raises(OSError):
        write_epw(df, meta, target)
    assert target.read_text() == "old content\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep.epw"]


def test_epw_one_whole_year_stands_for_requested_year(tmp_path, clearsky_table):
    df, meta = clearsky_table
    path = write_epw(df, meta, tmp_path / "y.epw")
    leap, lmeta = read_weather(path, year=2024)
    assert len(leap) == 8784 and lmeta["year"] == 2024
    assert any("typical year for 2024" in n for n in lmeta["notes"])


# --------------------------------------------------------------------------- PVGIS
@pytest.mark.parametrize("writer,fmt", [(write_pvgis_csv, "pvgis-csv"),
                                        (write_pvgis_json, "pvgis-json")])
def test_pvgis_tmy(tmp_path, writer, fmt):
    rows = pvgis_rows()
    path = writer(tmp_path / ("tmy." + fmt.split("-")[1]), rows)
    df, meta = read_weather(path, utc_offset_h=1)
    assert meta["format"] == fmt and len(df) == 8760 and meta["typical_year"]
    assert (meta["latitude"], meta["longitude"], meta["elevation_m"]) == (38.0, -2.0, 540.0)
    # time(UTC) 00:00 of Jan 1 (source 2010) -> 01:00 local (UTC+1) in 2025; the last UTC
    # hour of December wraps to local Jan 1 00:00
    first = df.loc[pd.Timestamp("2025-01-01 01:00", tz=df.index.tz)]
    assert first["ghi"] == rows[0]["G(h)"]
    assert df["ghi"].iloc[0] == rows[-1]["G(h)"]
    assert df["pressure"].iloc[0] == 95000.0 and df["ir_horizontal"].iloc[0] == 310.0
    assert df["ghi"].sum() == pytest.approx(sum(r["G(h)"] for r in rows))
    assert abs(ghi_centroid_offset_min(df, -2.0, 1.0)) < 3
    with pytest.raises(InputError) as err:
        read_weather(path)
    assert "utc_offset_h" in str(err.value) and path.name in str(err.value)


# --------------------------------------------------------------------------- CSV
def test_csv_with_mapping_and_units(tmp_path):
    base = hourly_csv_frame(hours=96)
    f = pd.DataFrame({
        "Timestamp": base["time"], "GlobalHoriz": base["ghi"],
        "Tdry_F": base["temp_air"] * 9 / 5 + 32, "RH": base["relative_humidity"],
        "Wind_kmh": base["wind_speed"] * 3.6, "Press_hPa": base["pressure"] / 100,
        "Rain": 0.2,
    })
    path = tmp_path / "station.csv"
    f.to_csv(path, index=False)
    cols = {"time": "Timestamp", "ghi": "GlobalHoriz", "temp_air": "Tdry_F",
            "relative_humidity": "RH", "wind_speed": "Wind_kmh", "pressure": "Press_hPa",
            "precipitation": "Rain"}
    units = {"temp_air": "degF", "wind_speed": "km h-1", "pressure": "hPa"}
    df, meta = read_weather(path, **DESERT_SITE, csv_columns=cols, csv_units=units)
    assert meta["format"] == "csv" and not meta["typical_year"] and len(df) == 96
    assert df.index[0] == pd.Timestamp("2024-01-01 00:00", tz=df.index.tz)
    np.testing.assert_allclose(df["temp_air"], base["temp_air"], atol=1e-9)
    np.testing.assert_allclose(df["wind_speed"], 2.0)
    np.testing.assert_allclose(df["pressure"], 99000.0)
    np.testing.assert_allclose(df["precipitation"], 0.2)
    # dni/dhi split from ghi (Erbs): closure dhi + dni cos z = ghi with the sun up
    up = df["solar_zenith"] < 85
    closure = df["dhi"] + df["dni"] * np.cos(np.radians(df["solar_zenith"]))
    np.testing.assert_allclose(closure[up], df["ghi"][up], atol=1.0)
    assert any("Erbs" in n for n in meta["notes"])

    # the same file with hour-END labels moves every label back by one hour
    df_end, _ = read_weather(path, **DESERT_SITE, csv_columns=cols, csv_units=units,
                             csv_time_label="end")
    assert df_end.index[0] == df.index[0] - pd.Timedelta(hours=1)
    np.testing.assert_array_equal(df_end["ghi"].to_numpy(), df["ghi"].to_numpy())


def test_csv_default_names_and_pressure_from_elevation(tmp_path):
    base = hourly_csv_frame(hours=48).drop(columns="pressure")
    path = tmp_path / "plain.csv"
    base.to_csv(path, index=False)
    df, meta = read_weather(path, **DESERT_SITE)
    # FAO-56 eq. 7 at 210 m: 101.3 ((293 - 0.0065*210)/293)^5.26 kPa (recomputed)
    expected = 101.3 * ((293 - 0.0065 * 210) / 293) ** 5.26 * 1000
    np.testing.assert_allclose(df["pressure"], expected, rtol=1e-9)
    assert set(df.columns) == FORCING_COLUMNS


def test_csv_real_data_year_selection(tmp_path):
    base = hourly_csv_frame(start="2023-12-31", hours=72)
    path = tmp_path / "span.csv"
    base.to_csv(path, index=False)
    df, _ = read_weather(path, **DESERT_SITE)
    assert len(df) == 72 and df.index[0].year == 2023
    sel, meta = read_weather(path, **DESERT_SITE, year=2024)
    assert len(sel) == 48 and (sel.index.year == 2024).all() and meta["year"] == 2024


def test_rh_overshoot_clipped(tmp_path):
    base = hourly_csv_frame(hours=24)
    base.loc[3, "relative_humidity"] = 103.0
    path = tmp_path / "rh.csv"
    base.to_csv(path, index=False)
    df, meta = read_weather(path, **DESERT_SITE)
    assert df["relative_humidity"].max() == 100.0
    assert any("clipped 1 relative_humidity" in n for n in meta["notes"])


# --------------------------------------------------------------------------- bad inputs
def _csv(tmp_path, frame, name="bad.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def _raises(path, field, *words, **kwargs):
    with pytest.raises(InputError) as err:
        read_weather(path, **kwargs)
    msg = str(err.value)
    assert str(path.name) in msg, msg
    if field:
        assert err.value.field == field and f"'{field}'" in msg, msg
    for w in words:
        assert w in msg, msg
    return msg


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.epw"
    with pytest.raises(InputError) as err:
        read_weather(path)
    assert "nowhere.epw" in str(err.value) and "not found" in str(err.value)


def test_duplicated_hour(tmp_path):
    base = hourly_csv_frame(hours=24)
    base.loc[5, "time"] = base.loc[4, "time"]
    _raises(_csv(tmp_path, base), "time", "2024-01-01 04:00", "more than once",
            **DESERT_SITE)


def test_long_gap_in_csv(tmp_path):
    base = hourly_csv_frame(hours=48).drop(index=range(10, 16))
    _raises(_csv(tmp_path, base), "ghi", "6 missing hours", "2024-01-01 10:00",
            "max_gap_h=3", **DESERT_SITE)


def test_nan_counts_as_gap(tmp_path):
    base = hourly_csv_frame(hours=48)
    base.loc[20:23, "wind_speed"] = np.nan
    _raises(_csv(tmp_path, base), "wind_speed", "4 missing hours", **DESERT_SITE)


def test_rh_150_rejected(tmp_path):
    base = hourly_csv_frame(hours=24)
    base.loc[7, "relative_humidity"] = 150.0
    _raises(_csv(tmp_path, base), "relative_humidity", "150", "0 to 100", **DESERT_SITE)


def test_pressure_out_of_range(tmp_path):
    base = hourly_csv_frame(hours=24)
    base["pressure"] = 990.0  # hPa given without csv_units
    _raises(_csv(tmp_path, base), "pressure", "990", "30000 to 110000 Pa", **DESERT_SITE)


def test_unknown_csv_mapping_name(tmp_path):
    path = _csv(tmp_path, hourly_csv_frame(hours=24))
    _raises(path, "csv_columns.temp_ari", "did you mean 'temp_air'", **DESERT_SITE,
            csv_columns={"temp_ari": "temp_air"})


def test_unknown_csv_header(tmp_path):
    path = _csv(tmp_path, hourly_csv_frame(hours=24))
    _raises(path, "csv_columns.ghi", "'gh1'", "did you mean 'ghi'", **DESERT_SITE,
            csv_columns={"ghi": "gh1"})


def test_unknown_unit(tmp_path):
    path = _csv(tmp_path, hourly_csv_frame(hours=24))
    _raises(path, "csv_units.pressure", "psi", "hPa", **DESERT_SITE,
            csv_units={"pressure": "psi"})


def test_unknown_format(tmp_path):
    path = _csv(tmp_path, hourly_csv_frame(hours=24))
    _raises(path, "fmt", "did you mean 'epw'", fmt="epv")


def test_undetectable_format(tmp_path):
    path = tmp_path / "weather.dat"
    path.write_text("something\nelse\n")
    _raises(path, "fmt", "cannot tell")


def test_csv_needs_site_coordinates(tmp_path):
    path = _csv(tmp_path, hourly_csv_frame(hours=24))
    _raises(path, "latitude", "pass latitude=")
    _raises(path, "utc_offset_h", latitude=32.4, longitude=-113.9, elevation_m=210)


def test_arguments_override_file_site(tmp_path):
    comps, vals = synthetic_hours(2025)
    path = write_synthetic_epw(tmp_path / "s.epw", comps, vals)
    df, meta = read_weather(path, latitude=10.0, elevation_m=5.0)
    assert meta["latitude"] == 10.0 and meta["elevation_m"] == 5.0
    assert meta["longitude"] == -113.9


