"""Clear-sky site mode and the synthetic weather generator."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from weather_fixtures import (
    DESERT_NORMALS,
    DESERT_SITE,
    fao56_pressure_kpa,
    fao56_ra_mj_m2_d,
)

from pondsim.errors import InputError
from pondsim.forcing import climate, synthetic
from pondsim.forcing.weather import REQUIRED_COLUMNS, read_weather

REPO = Path(__file__).resolve().parents[1]
COLUMNS = list(REQUIRED_COLUMNS) + ["solar_zenith", "ghi_clear"]


@pytest.fixture(scope="module")
def clear():
    return climate.clearsky_weather(**DESERT_SITE, normals=DESERT_NORMALS, name="desert")


def _daily(df):
    return df.groupby(df.index.floor("D"))


def _monthly_clearness(df):
    g = df.groupby(df.index.month)
    return (g["ghi"].sum() / g["ghi_clear"].sum()).to_numpy()


# --------------------------------------------------------------------------- reference
def test_fao56_ra_helper_example_8():
    # FAO-56 (Allen et al. 1998) Example 8: 20 deg S on 3 September (J = 246)
    # -> Ra = 32.2 MJ m-2 d-1
    assert fao56_ra_mj_m2_d(-20.0, 246) == pytest.approx(32.2, abs=0.05)


# --------------------------------------------------------------------------- clear-sky
def test_clearsky_table_shape_and_columns(clear):
    df, meta = clear
    assert list(df.columns) == COLUMNS and len(df) == 8760
    assert df.index[0] == pd.Timestamp("2025-01-01 00:00", tz=df.index.tz)
    assert df.index.tz.utcoffset(None) == pd.Timedelta(hours=-7)
    assert meta["format"] == "clearsky" and meta["year"] == 2025 and meta["n_filled"] == 0
    assert df.notna().all().all()


def test_clearsky_daily_insolation_below_extraterrestrial(clear):
    df, _ = clear
    daily_mj = _daily(df)["ghi"].sum().to_numpy() * 3600 / 1e6
    doy = np.arange(1, 366)
    ra = fao56_ra_mj_m2_d(DESERT_SITE["latitude"], doy)  # FAO-56 eq. 21
    assert (daily_mj < ra).all()
    # the clear-sky envelope itself stays below Ra too (an atmosphere absorbs)
    clear_mj = _daily(df)["ghi_clear"].sum().to_numpy() * 3600 / 1e6
    assert (clear_mj < ra).all() and (clear_mj > 0.5 * ra).all()


def test_clearsky_monthly_ghi_matches_normal():
    ghi_normal = [3.2, 4.1, 5.4, 6.8, 7.6, 7.9, 6.6, 6.1, 5.7, 4.7, 3.6, 3.0]
    normals = {k: v for k, v in DESERT_NORMALS.items() if k != "clearness"}
    normals["ghi_kwh_m2_d"] = ghi_normal
    df, _ = climate.clearsky_weather(**DESERT_SITE, normals=normals)
    daily = _daily(df)["ghi"].sum() / 1000
    monthly = daily.groupby(daily.index.month).mean().to_numpy()
    np.testing.assert_allclose(monthly, ghi_normal, rtol=0.01)


def test_clearsky_monthly_clearness_matches_normal(clear):
    df, _ = clear
    np.testing.assert_allclose(_monthly_clearness(df), DESERT_NORMALS["clearness"], rtol=0.01)


def test_clearsky_daily_temperature_extremes_match_normals(clear):
    df, _ = clear
    d = _daily(df)["temp_air"].agg(["max", "min"])
    m = d.index.month - 1
    np.testing.assert_allclose(d["max"], np.asarray(DESERT_NORMALS["temp_max_c"])[m],
                               atol=1e-9)
    np.testing.assert_allclose(d["min"], np.asarray(DESERT_NORMALS["temp_min_c"])[m],
                               atol=1e-9)


def test_clearsky_temperature_shape(clear):
    df, _ = clear
    t = df["temp_air"]
    # no jumps: hour-to-hour steps stay well below the diurnal range (smallest 15 degC)
    assert t.diff().abs().max() < 5.0
    # warmest hour in the afternoon, coldest around sunrise (Parton & Logan 1981 shape)
    hours = t.groupby(t.index.floor("D")).agg(["idxmax", "idxmin"])
    # (last days of a month excepted: a lower next-month minimum pulls the night down)
    month_end = (hours.index + pd.Timedelta(days=1)).day == 1
    warm = np.array([ts.hour for ts in hours["idxmax"]])[~month_end]
    cold = np.array([ts.hour for ts in hours["idxmin"]])[~month_end]
    assert ((warm >= 13) & (warm <= 15)).all()
    assert ((cold >= 4) & (cold <= 7)).all()


def test_parton_logan_peak_and_minimum_times():
    # Parton & Logan (1981) day curve: minimum at sunrise + c, maximum at solar noon
    # + a + c, with a = 1.86 h, c = -0.17 h for 150 cm air (coefficients as quoted by
    # the TrenchR documentation, a secondary source)
    tod = np.arange(0, 24, 0.01)
    day = np.zeros_like(tod, dtype=int)
    rise, sset = np.array([6.0]), np.array([18.5])
    t = climate.parton_logan_temperature(tod, day, rise, sset, [30.0], [10.0])
    assert tod[np.argmax(t)] == pytest.approx((6.0 + 18.5) / 2 + 1.86 - 0.17, abs=0.02)
    assert t.max() == pytest.approx(30.0, abs=1e-3)
    assert tod[np.argmin(t)] == pytest.approx(6.0 - 0.17, abs=0.02)
    assert t.min() == pytest.approx(10.0, abs=1e-3)
    # continuous through sunset and through the next minimum (wrapping to day 0)
    assert np.abs(np.diff(t)).max() < 0.05


def test_clearsky_humidity_and_pressure(clear):
    df, _ = clear
    # FAO-56 eq. 7 at 210 m (formula recomputed in the fixture)
    np.testing.assert_allclose(df["pressure"], fao56_pressure_kpa(210.0) * 1000, rtol=1e-12)
    rh = _daily(df)["relative_humidity"].mean()
    np.testing.assert_allclose(rh, np.asarray(DESERT_NORMALS["relative_humidity_pct"])
                               [rh.index.month - 1], rtol=1e-9)
    # dew point constant through each day: vapour pressure RH*e°(T) (FAO-56 eq. 11)
    es = 0.6108 * np.exp(17.27 * df["temp_air"] / (df["temp_air"] + 237.3))
    e = (df["relative_humidity"] / 100 * es).to_numpy().reshape(-1, 24)
    assert np.ptp(e, axis=1).max() < 1e-9


def test_fao56_pressure_table_values():
    # FAO-56 eq. 7 printed table: 101.3 / 90.0 / 79.8 kPa at 0 / 1000 / 2000 m
    # (REFERENCES.md, recomputed, half the last digit)
    from pondsim.forcing.weather import pressure_from_elevation
    for z, p in [(0, 101.3), (1000, 90.0), (2000, 79.8)]:
        assert pressure_from_elevation(z) / 1000 == pytest.approx(p, abs=0.05)


def test_clearsky_leap_year_and_dni_split():
    df, meta = climate.clearsky_weather(**DESERT_SITE, normals=DESERT_NORMALS, year=2024)
    assert len(df) == 8784 and meta["year"] == 2024
    up = df["solar_zenith"] < 85
    closure = df["dhi"] + df["dni"] * np.cos(np.radians(df["solar_zenith"]))
    np.testing.assert_allclose(closure[up], df["ghi"][up], atol=1e-6)
    assert (df.loc[~(df["solar_zenith"] < 90), "ghi"] == 0).all()


# --------------------------------------------------------------------------- validation
def _bad(normals, field, *words, **site):
    with pytest.raises(InputError) as err:
        climate.clearsky_weather(**(site or DESERT_SITE), normals=normals,
                                 source="normals.toml")
    msg = str(err.value)
    assert err.value.field == field and field in msg and "normals.toml" in msg, msg
    for w in words:
        assert w in msg, msg


def test_normals_with_11_values():
    n = dict(DESERT_NORMALS, temp_max_c=DESERT_NORMALS["temp_max_c"][:11])
    _bad(n, "weather.normals.temp_max_c", "12 monthly values", "got 11")


def test_normals_tmin_above_tmax():
    tmin = list(DESERT_NORMALS["temp_min_c"])
    tmin[3] = 35.0
    _bad(dict(DESERT_NORMALS, temp_min_c=tmin), "weather.normals.temp_min_c", "Apr")


def test_normals_unknown_key_and_range():
    n = dict(DESERT_NORMALS)
    n["wind_speed_ms"] = n.pop("wind_speed_m_s")
    _bad(n, "weather.normals.wind_speed_ms", "did you mean 'wind_speed_m_s'")
    _bad(dict(DESERT_NORMALS, clearness=[1.2] * 12), "weather.normals.clearness",
         "0.2 to 1")
    both = dict(DESERT_NORMALS, ghi_kwh_m2_d=[5.0] * 12)
    _bad(both, "weather.normals.clearness", "exactly one")


def test_normals_ghi_above_clear_sky():
    n = {k: v for k, v in DESERT_NORMALS.items() if k != "clearness"}
    n["ghi_kwh_m2_d"] = [11.0] * 12
    _bad(n, "weather.normals.ghi_kwh_m2_d", "Jan", "clear-sky")


def test_site_latitude_without_sunrise():
    with pytest.raises(InputError) as err:
        climate.clearsky_weather(latitude=75.0, longitude=0, elevation_m=0,
                                 utc_offset_h=0, normals=DESERT_NORMALS)
    assert err.value.field == "site.latitude"


# --------------------------------------------------------------------------- synthetic
@pytest.fixture(scope="module")
def synth():
    return synthetic.synthetic_weather(**DESERT_SITE, normals=DESERT_NORMALS, seed=11)


def test_synthetic_same_seed_same_table(synth):
    again, _ = synthetic.synthetic_weather(**DESERT_SITE, normals=DESERT_NORMALS, seed=11)
    pd.testing.assert_frame_equal(synth[0], again)
    other, _ = synthetic.synthetic_weather(**DESERT_SITE, normals=DESERT_NORMALS, seed=12)
    assert not np.allclose(other["ghi"], synth[0]["ghi"])
    assert not np.allclose(other["temp_air"], synth[0]["temp_air"])
    assert list(synth[0].columns) == COLUMNS and synth[1]["seed"] == 11


def test_synthetic_year_close_to_normals(synth):
    df, _ = synth
    # one year: the annual clearness within 5 % (about two standard deviations of the
    # year-to-year spread of this generator); monthly means vary more, as real years do
    g = df.groupby(df.index.month)
    annual = df["ghi"].sum() / df["ghi_clear"].sum()
    weights = g["ghi_clear"].sum().to_numpy()
    target = np.sum(np.asarray(DESERT_NORMALS["clearness"]) * weights) / weights.sum()
    assert annual == pytest.approx(target, rel=0.05)
    assert np.all(np.abs(_monthly_clearness(df) / DESERT_NORMALS["clearness"] - 1) < 0.25)
    # the generator really varies from day to day
    daily = _daily(df)["ghi"].sum() / _daily(df)["ghi_clear"].sum()
    assert daily.std() > 0.1
    assert (daily <= 1.0 + 1e-9).all()


def test_markov_chain_expected_monthly_clearness():
    # 400 independent years of the daily chain: each month's mean clearness within
    # 1.5 % of the normal (the chain's stationary mix is built to match it)
    rng = np.random.default_rng(5)
    month = pd.date_range("2025-01-01", "2025-12-31", freq="D").month.to_numpy()
    k, cls = synthetic.daily_clearness_chain(month, DESERT_NORMALS["clearness"], rng, 400)
    monthly = np.array([k[:, month == m].mean() for m in range(1, 13)])
    np.testing.assert_allclose(monthly, DESERT_NORMALS["clearness"], rtol=0.015)
    # class persistence: lag-1 autocorrelation of the class close to CLASS_PERSISTENCE
    c = cls[:, 120:240].astype(float)      # May-Aug
    a, b = c[:, :-1].ravel(), c[:, 1:].ravel()
    assert np.corrcoef(a, b)[0, 1] == pytest.approx(synthetic.CLASS_PERSISTENCE, abs=0.05)


def test_synthetic_match_monthly_exact():
    df, meta = synthetic.synthetic_weather(**DESERT_SITE, normals=DESERT_NORMALS, seed=3,
                                         match_monthly=True)
    np.testing.assert_allclose(_monthly_clearness(df), DESERT_NORMALS["clearness"],
                               rtol=0.005)
    daily = _daily(df)["ghi"].sum() / _daily(df)["ghi_clear"].sum()
    assert (daily <= 1.0 + 1e-6).all()
    assert any("matched exactly" in n for n in meta["notes"])


def test_synthetic_cloudy_days_cooler_max_warmer_min(synth):
    df, _ = synth
    d = _daily(df)
    k = (d["ghi"].sum() / d["ghi_clear"].sum()).to_numpy()
    ext = d["temp_air"].agg(["max", "min"])
    m = ext.index.month - 1
    dmax = ext["max"].to_numpy() - np.asarray(DESERT_NORMALS["temp_max_c"])[m]
    dmin = ext["min"].to_numpy() - np.asarray(DESERT_NORMALS["temp_min_c"])[m]
    kdev = k - np.asarray(DESERT_NORMALS["clearness"])[m]
    assert np.corrcoef(kdev, dmax)[0, 1] > 0.3
    assert np.corrcoef(kdev, dmin)[0, 1] < 0.0
    # the temperature anomalies persist from day to day (AR(1))
    assert np.corrcoef(dmax[:-1], dmax[1:])[0, 1] > 0.2
    # the annual means of daily extremes stay near the normals
    assert abs(dmax.mean()) < 1.0 and abs(dmin.mean()) < 1.0
    assert (ext["max"] - ext["min"] >= climate.MIN_DIURNAL_RANGE_C - 1e-9).all()


# --------------------------------------------------------------------------- CLI and demo
def _write_normals(path, **site_changes):
    site = {"name": "Test Mesa", **DESERT_SITE, **site_changes}
    lines = ["[site]"] + [f"{k} = {v!r}".replace("'", '"') for k, v in site.items()]
    lines += ["[normals]"] + [f"{k} = {list(v)}" for k, v in DESERT_NORMALS.items()]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_cli_writes_readable_epw(tmp_path):
    toml = _write_normals(tmp_path / "n.toml")
    out = tmp_path / "out.epw"
    assert climate.main([str(toml), str(out), "--seed", "4"]) == 0
    df, meta = read_weather(out)
    assert len(df) == 8760 and meta["name"] == "Test Mesa"
    assert meta["latitude"] == DESERT_SITE["latitude"] and meta["utc_offset_h"] == -7.0


def test_cli_bad_normals_exit_2(tmp_path, capsys):
    toml = _write_normals(tmp_path / "n.toml", latitude="north")
    assert climate.main([str(toml), str(tmp_path / "x.epw")]) == 2
    err = capsys.readouterr().err
    assert "n.toml" in err and "site.latitude" in err
    assert not (tmp_path / "x.epw").exists()


def test_demo_site_file_is_reproducible(tmp_path):
    # weather/README.md: python -m pondsim.forcing.climate weather/kestrel_flats_normals.toml
    #   weather/kestrel_flats.epw --seed 2025 --match-monthly
    normals = REPO / "weather" / "kestrel_flats_normals.toml"
    shipped = REPO / "weather" / "kestrel_flats.epw"
    out = tmp_path / "k.epw"
    assert climate.main([str(normals), str(out), "--seed", "2025", "--match-monthly"]) == 0
    # the data rows must be identical (the comment line names the source path)
    strip = [line for i, line in enumerate(shipped.read_text().splitlines()) if i != 6]
    fresh = [line for i, line in enumerate(out.read_text().splitlines()) if i != 6]
    assert strip == fresh
    df, meta = read_weather(shipped)
    doc = tomllib.loads(normals.read_text())
    assert meta["name"] == doc["site"]["name"] == "Kestrel Flats"
    assert len(df) == 8760
    g = df.groupby(df.index.month)
    clearness = (g["ghi"].sum() / g["ghi_clear"].sum()).to_numpy()
    # integer rounding of the EPW irradiance keeps the match within 1 %
    np.testing.assert_allclose(clearness, doc["normals"]["clearness"], rtol=0.01)


# --------------------------------------------------------------------------- demo realism
def _daily_stats(df):
    d = df.groupby(df.index.floor("D"))
    k = (d["ghi"].sum() / d["ghi_clear"].sum())
    ghi_mj = d["ghi"].sum() * 3600 / 1e6
    t = d["temp_air"].mean()
    anomaly = (t - t.rolling(31, center=True, min_periods=10).mean()).to_numpy()
    return k, ghi_mj, anomaly


@pytest.mark.parametrize("seed", [2025, 7, 8])
def test_synthetic_desert_year_day_to_day_like_real_records(seed):
    # demo normals, several seeds (not only the shipped file)
    doc = tomllib.loads((REPO / "weather" / "kestrel_flats_normals.toml").read_text())
    site = {k: doc["site"][k] for k in ("latitude", "longitude", "elevation_m",
                                        "utc_offset_h")}
    df, _ = synthetic.synthetic_weather(**site, normals=doc["normals"], seed=seed,
                                      match_monthly=True)
    k, ghi_mj, anomaly = _daily_stats(df)
    summer = pd.DatetimeIndex(k.index).month.isin([5, 6, 7, 8])
    # pvlib's TMY files (measured for pondsim): May-Aug daily minimum 9.3 MJ m-2 d-1
    # (Greensboro TMY3) and 9.8 (Miami TMY2), 0.34 and 0.41 of clear sky; a hot desert
    # has no darker summer days (8 MJ / 0.3 allows for the draw): no near-dark day at
    # all, let alone a multi-day spell (the old demo had six days at ~0.9 MJ in August)
    assert ghi_mj[summer].min() > 8.0
    assert k[summer].min() > 0.3
    # daily mean air-temperature anomalies (about a 31-day running mean): lag-1
    # autocorrelation 0.61-0.77 and SD 2.1-4.0 K in pvlib's Greensboro, Sand Point and
    # Miami files (measured for pondsim); the band 0.6-0.8
    a = anomaly[np.isfinite(anomaly)]
    assert 0.55 <= np.corrcoef(a[:-1], a[1:])[0, 1] <= 0.85
    assert 1.5 <= a.std() <= 4.0
    # cloudy days cooler: daily clearness and mean-temperature anomalies correlate
    # positively in summer (0.27-0.60 in the same files)
    ka = (k - k.rolling(31, center=True, min_periods=10).mean()).to_numpy()
    ok = summer & np.isfinite(anomaly)
    assert np.corrcoef(ka[ok], anomaly[ok])[0, 1] > 0.15


def test_synthetic_rain_to_monthly_normal_in_expectation():
    normals = dict(DESERT_NORMALS, precipitation_mm=[20.0] * 6 + [40.0] * 6)
    totals = []
    for seed in range(12):
        df, meta = synthetic.synthetic_weather(**DESERT_SITE, normals=normals, seed=seed)
        totals.append(df["precipitation"].groupby(df.index.month).sum().to_numpy())
        # rain falls only on cloudy days, at plausible hourly depths (weather reader range)
        assert df["precipitation"].between(0.0, 200.0).all()
    mean = np.mean(totals, axis=0)
    # twelve draws: the mean of each half-year within 35 % of the normal (exponential
    # amounts, a few wet days a month)
    assert mean[:6].mean() == pytest.approx(20.0, rel=0.35)
    assert mean[6:].mean() == pytest.approx(40.0, rel=0.35)
    assert "rain on cloudy days" in meta["notes"][0]
