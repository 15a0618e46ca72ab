"""Rain: kept where the weather file knows it, "no data" (never 0) where it does not, and
subtracted from the makeup water."""

import os
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pvlib
import pytest
from weather_fixtures import synthetic_hours, write_synthetic_epw

from pondsim.forcing.weather import read_weather
from pondsim.pond import thermal
from pondsim.results.tables import monthly_forcing_table
from pondsim.studies.inputs_bill import makeup_water

PVLIB_DATA = os.path.join(os.path.dirname(pvlib.__file__), "data")


def _pond(**kw):
    base = dict(depth_m=0.25, area_m2=1000.0, count=4, ground_temperature_c=None,
                ground_conductance_w_m2_k=1.5, makeup_temperature_c=None,
                heat_input_w_m2=0.0, water_emissivity=0.97, refractive_index=1.333,
                farm_area_m2=4000.0)
    base.update(kw)
    return SimpleNamespace(**base)


@pytest.fixture(scope="module")
def rainy(tmp_path_factory):
    comps, vals = synthetic_hours(2025)
    rain = np.zeros(len(vals))
    rain[2000:2010] = 2.5        # a wet spell in late March
    rain[5000:5003] = 8.0        # a summer storm
    rain[[2003, 4000, 6000]] = [500.0, 300.0, -5.0]  # impossible hourly values
    vals["precipitation"] = rain
    path = write_synthetic_epw(tmp_path_factory.mktemp("rain") / "rain.epw", comps, vals)
    return read_weather(path), rain


def test_a_few_bad_precipitation_hours_keep_the_rest(rainy):
    (df, meta), rain = rainy
    assert "precipitation" in df
    bad = [2003, 4000, 6000]
    # the impossible hours are missing, not 0 and not interpolated
    assert df["precipitation"].iloc[bad].isna().all()
    good = np.ones(len(rain), bool)
    good[bad] = False
    np.testing.assert_allclose(df["precipitation"].to_numpy()[good], rain[good])
    assert any("set 3 impossible precipitation values" in n for n in meta["notes"])


def test_makeup_is_evaporation_minus_known_rain(rainy):
    (df, _), _ = rainy
    water = thermal.water_temperature(df, _pond())
    rain_known = water["rain"].fillna(0.0)
    # hour by hour: makeup = max(E - P, 0) (rain beyond an hour's evaporation overflows)
    np.testing.assert_allclose(water["makeup"], np.maximum(water["evaporation"]
                                                           - rain_known, 0.0), atol=1e-9)
    assert water["rain"].isna().sum() == 3
    # the storm really cuts the makeup of its hours
    assert (water["makeup"].iloc[5000:5003] == 0.0).all()
    # over the year, to rounding: sum(makeup) = sum(E) - sum(P) + overflow
    overflow = np.maximum(rain_known - water["evaporation"], 0.0).sum()
    assert water["makeup"].sum() == pytest.approx(
        water["evaporation"].sum() - rain_known.sum() + overflow, abs=1e-6)
    # the monthly table's farm makeup [m3] is the same water
    par = np.zeros(len(df))
    table = monthly_forcing_table(df, par, water, _pond())
    assert table.loc["year", "makeup m3"] == pytest.approx(
        water["makeup"].sum() * 1e-3 * 4000.0, rel=1e-9)
    assert table.loc["Mar", "rain mm"] == pytest.approx(2.5 * 9)  # one hour was bad


def test_makeup_adds_harvest_water():
    # makeup water = evaporation - rain + harvest (and blow-down) water, to rounding
    e = np.array([6.0, 5.0, 1.0])
    p = np.array([0.0, 2.0, 4.0])
    v = makeup_water(e, p, 2000.0, harvest_volume_m3=np.array([10.0, 0.0, 5.0]))
    np.testing.assert_allclose(v, [6.0 * 2 + 10.0, 3.0 * 2, 0.0 + 5.0])


def test_tmy2_has_no_rain_shown_as_no_data():
    df, meta = read_weather(os.path.join(PVLIB_DATA, "12839.tm2"))
    assert "precipitation" not in df
    water = thermal.water_temperature(df.iloc[: 24 * 62], _pond(), spinup_years=0)
    assert water["rain"].isna().all()
    daily = thermal.daily_thermal_summary(water, _pond())
    assert daily["rain"].isna().all() and np.isnan(daily.attrs["rain_mm"])
    table = monthly_forcing_table(df.iloc[: 24 * 62], np.zeros(24 * 62), water, _pond())
    assert table["rain mm"].isna().all()  # "no data", never 0.0
    assert "no data" in table.to_string(na_rep="no data")
    # makeup then counts no rain: it equals the evaporation (an upper bound)
    np.testing.assert_allclose(water["makeup"], water["evaporation"].clip(lower=0.0))


def test_implausible_precipitation_record_is_no_data():
    # pvlib's Greensboro TMY3: 3 hours of 300-500 mm and wet hours averaging 19.8 mm h-1
    # (7,045 mm a year, several times the site's rainfall): the record is not hourly rain
    df, meta = read_weather(os.path.join(PVLIB_DATA, "723170TYA.CSV"))
    assert "precipitation" not in df
    assert any("not a plausible hourly record" in n for n in meta["notes"])
    water = thermal.water_temperature(df.iloc[: 24 * 31], _pond(), spinup_years=0)
    assert water["rain"].isna().all()
    # pvlib's Sand Point TMY3: precipitation missing in 8,037 of 8,760 hours: no record
    df, meta = read_weather(os.path.join(PVLIB_DATA, "703165TY.csv"))
    assert "precipitation" not in df
    assert any("precipitation dropped (no data): missing in" in n for n in meta["notes"])


def test_rain_column_missing_from_forcing_keeps_thermal_running():
    idx = pd.date_range("2025-07-01", periods=48, freq="h", tz="Etc/GMT+7")
    f = pd.DataFrame({"ghi": 0.0, "dni": 0.0, "dhi": 0.0, "temp_air": 25.0,
                      "wind_speed": 2.0, "relative_humidity": 40.0, "pressure": 1e5,
                      "solar_zenith": 120.0, "ghi_clear": 0.0,
                      "precipitation": [np.nan] * 24 + [1.0] * 24}, index=idx)
    water = thermal.water_temperature(f, _pond(), spinup_years=0)
    assert water["rain"].iloc[:24].isna().all()
    np.testing.assert_allclose(water["rain"].iloc[24:], 1.0)


def test_bill_makeup_is_thermal_makeup_plus_harvest_and_blowdown(rainy):
    # makeup water = evaporation - rain (hour by hour, where known) + unreturned harvest
    # water + blow-down, to rounding: the thermal stage's daily `makeup` feeds the bill
    from test_bill import _inputs, _results, _scenario

    from pondsim.studies import bill as B

    (df, _), _ = rainy
    water = thermal.water_temperature(df, _pond())
    daily_makeup = water["makeup"].groupby(water.index.floor("D")).sum().to_numpy()
    ds = _results()
    ds["makeup"] = (("day",), daily_makeup)
    inp = _inputs(water_recycle_fraction=0.8, blowdown_per_d=0.01)
    y = B.scenario_bill(ds, _scenario(inp), "p").monthly.loc["year"]
    farm, pond_m3, count = 5000.0, 1000 * 0.25, 5  # test_bill's pond: 5 x 1000 m2, 0.25 m
    vol = ds["harvest_fraction"].sum("day").mean().item() * pond_m3 * count
    expected = (water["makeup"].sum() * 1e-3 * farm + 0.2 * vol
                + 0.01 * pond_m3 * count * 365)
    assert y["makeup_water_m3"] == pytest.approx(expected, rel=1e-9)
