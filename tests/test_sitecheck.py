"""Site check: the scenario's site against the weather file's header, and the data's
daily irradiance peak against the computed solar noon, for every kind of source.

External checks: pvlib's shipped TMY3 (Greensboro NC, NSRDB 723170, UTC-5; Sand Point
AK, 703165, UTC-9) and TMY2 (Miami FL, 12839, UTC-5) files, whose headers give the
stations' coordinates and time zones; solar noon from Spencer's (1971) equation of time
as quoted by Duffie & Beckman (tests/weather_fixtures.py, from memory).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from weather_fixtures import PVLIB_DATA, solar_noon_h

from pondsim import cli, load_scenario
from pondsim.errors import InputError
from pondsim.forcing.sitecheck import (
    NOON_TOLERANCE_H,
    check_site,
    compare_header,
    noon_shift_h,
)
from pondsim.forcing.weather import read_weather
from pondsim.operations.simulate import load_forcing, simulate

pytestmark = pytest.mark.filterwarnings("ignore::pandas.errors.Pandas4Warning")

FILES = {"greensboro_tmy3": PVLIB_DATA / "723170TYA.CSV",
         "sand_point_tmy3": PVLIB_DATA / "703165TY.csv",
         "miami_tmy2": PVLIB_DATA / "12839.tm2"}
ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
DEMO_EPW = ROOT / "weather" / "kestrel_flats.epw"


@pytest.fixture(scope="module")
def as_given():
    """Each file read with its own header's site."""
    return {k: read_weather(p) for k, p in FILES.items()}


def test_clear_sky_centroid_is_the_solar_noon_of_an_outside_formula(as_given):
    """The data check measures against the clear-sky GHI's daily centroid; that centroid
    is solar noon (Spencer 1971 equation of time, Duffie & Beckman; from memory) to
    within a few minutes on every day."""
    forcing, meta = as_given["greensboro_tmy3"]
    clear = forcing["ghi_clear"].to_numpy().reshape(-1, 24)
    mid = np.arange(24) + 0.5
    centroid = (clear * mid).sum(axis=1) / clear.sum(axis=1)
    doy = np.arange(1, len(centroid) + 1)
    noon = solar_noon_h(doy, meta["longitude"], meta["utc_offset_h"])
    assert np.max(np.abs(centroid - noon)) < 6 / 60  # < 6 min every day


@pytest.mark.parametrize("name", list(FILES))
@pytest.mark.parametrize("offset_error_h", [0.0, 0.5, 1.0, -1.0, 11.0])
def test_noon_shift_recovers_a_wrong_utc_offset(as_given, name, offset_error_h):
    """Real measured-weather years (NSRDB TMY files) with their header's offset pass;
    the same data read with an offset wrong by d hours show a shift of -d hours and
    fail (a one-hour error costs ~3 % of yield in the demo)."""
    _, meta = as_given[name]
    forcing, meta2 = read_weather(FILES[name],
                                  utc_offset_h=meta["utc_offset_h"] + offset_error_h)
    check = check_site(forcing, {"utc_offset_h": meta2["utc_offset_h"]})
    wrapped = (-offset_error_h + 12) % 24 - 12
    assert check.noon_shift_h == pytest.approx(wrapped, abs=0.1)
    assert check.ok == (offset_error_h == 0.0)


@pytest.mark.parametrize("name", list(FILES))
def test_longitude_sign_error_and_hour_labels_at_the_wrong_end_fail(as_given, name):
    forcing, meta = as_given[name]
    flipped, _ = read_weather(FILES[name], longitude=-meta["longitude"])
    check = check_site(flipped, {"longitude": -meta["longitude"]}, meta["file_site"])
    assert not check.ok
    assert any("site.longitude" in p for p in check.problems)  # header check
    assert any("irradiance peaks" in p for p in check.problems)  # data check
    # hour labels read at the wrong end of the hour: the data one hour late
    late = forcing.copy()
    late["ghi"] = np.roll(forcing["ghi"].to_numpy(), 1)
    shift, _ = noon_shift_h(late["ghi"], late["ghi_clear"], late.index)
    assert shift == pytest.approx(1.0, abs=0.1)


def test_cloudy_days_do_not_move_the_check(as_given):
    """Robust to clouds: dim 70 % of the days at random and cut the afternoon on half
    of those (asymmetric convective cloud); the right site still passes and a one-hour
    error still fails."""
    forcing, _ = as_given["miami_tmy2"]
    rng = np.random.default_rng(5)
    ghi = forcing["ghi"].to_numpy().reshape(-1, 24).copy()
    cloudy = rng.random(len(ghi)) < 0.7
    ghi[cloudy] *= rng.uniform(0.1, 0.6, size=(cloudy.sum(), 1))
    afternoon = cloudy & (rng.random(len(ghi)) < 0.5)
    ghi[np.ix_(afternoon, np.arange(14, 24))] *= 0.2
    shift, days = noon_shift_h(ghi.ravel(), forcing["ghi_clear"], forcing.index)
    assert abs(shift) < NOON_TOLERANCE_H and days >= 20
    shifted, _ = noon_shift_h(np.roll(ghi.ravel(), 1), forcing["ghi_clear"], forcing.index)
    assert abs(shifted) > NOON_TOLERANCE_H


def test_csv_without_metadata_is_checked_from_the_data(tmp_path, as_given):
    """A plain CSV has no header site: only the data can show a wrong offset."""
    forcing, meta = as_given["greensboro_tmy3"]
    frame = pd.DataFrame({"time": forcing.index.tz_localize(None).strftime("%Y-%m-%d %H:%M"),
                          "ghi": forcing["ghi"].to_numpy(),
                          "temp_air": forcing["temp_air"].to_numpy(),
                          "wind_speed": forcing["wind_speed"].to_numpy(),
                          "relative_humidity": forcing["relative_humidity"].to_numpy()})
    path = tmp_path / "station.csv"
    frame.to_csv(path, index=False)
    site = {k: meta[k] for k in ("latitude", "longitude", "elevation_m", "utc_offset_h")}
    good, gmeta = read_weather(path, **site)
    assert check_site(good, site, gmeta["file_site"]).ok
    for wrong in ({**site, "utc_offset_h": 5.0}, {**site, "longitude": 79.9},
                  {**site, "utc_offset_h": -6.0}):
        bad, bmeta = read_weather(path, **wrong)
        check = check_site(bad, wrong, bmeta["file_site"])
        assert not check.ok and "irradiance peaks" in check.text()


@pytest.mark.parametrize("given, header, fails", [
    ({"latitude": 60.0}, {"latitude": 32.4}, True),
    ({"latitude": 32.9}, {"latitude": 32.4}, False),       # a nearby station
    ({"longitude": 179.8}, {"longitude": -179.9}, False),  # across the date line
    ({"longitude": 113.9}, {"longitude": -113.9}, True),   # sign error
    ({"utc_offset_h": 7.0}, {"utc_offset_h": -7.0}, True),
    ({"utc_offset_h": 5.5}, {"utc_offset_h": 5.0}, True),
    ({"latitude": None}, {"latitude": 32.4}, False),       # not given: the file's is used
    ({"latitude": 10.0}, {"latitude": None}, False),       # nothing in the header
])
def test_header_check(given, header, fails):
    assert bool(compare_header(given, header)) == fails


def test_scenario_run_records_the_check_and_strict_refuses(tmp_path):
    scenario = load_scenario(DEMO)
    forcing, meta = load_forcing(scenario)
    assert meta["site_check_ok"] and meta["site_check"].startswith("passed")
    moved = scenario.replace(site=dataclasses.replace(scenario.site, utc_offset_h=7.0))
    forcing, meta = load_forcing(moved)
    assert not meta["site_check_ok"] and "site check FAILED" in " ".join(meta["notes"])
    ds = simulate(moved, members=1, forcing=(forcing, meta), progress=False)
    assert ds.attrs["site_check"].startswith("FAILED")
    strict = moved.replace(weather=dataclasses.replace(moved.weather, site_check="strict"))
    with pytest.raises(InputError) as err:
        load_forcing(strict)
    assert err.value.field == "site" and "utc_offset_h" in str(err.value)


def test_cli_strict_exits_2_and_writes_nothing(tmp_path, capsys):
    text = DEMO.read_text(encoding="utf-8").replace("latitude = 32.4", "latitude = 60")
    text = text.replace('"../weather/kestrel_flats.epw"', f'"{DEMO_EPW.as_posix()}"')
    path = tmp_path / "north.toml"
    path.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    assert cli.main(["run", str(path), "--out", str(out), "--strict"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "site.latitude = 60" in err
    assert not out.exists()
    assert cli.main(["weather", str(path), "--strict"]) == 2
    capsys.readouterr()
    assert cli.main(["weather", str(path)]) == 0  # default: a warning on the summary
    assert "WARNING: site check FAILED" in capsys.readouterr().out


@pytest.mark.parametrize("lon, offset, passes", [
    (-113.9, -7, True),    # the demo: 0.6 h from its meridian
    (113.9, -7, False),    # longitude sign error
    (-113.9, 7, False),    # offset sign error
    (75.99, 8, True),      # UTC+8 far west of its meridian (3 h; from memory: Kashgar)
    (-157.4, 14, True),    # UTC+14 east of the date line (wraps: 0.5 h)
    (-9.0, 1, True),       # UTC+1 at 9 deg W (from memory: Galicia)
    (-3.0, 8, False),      # the wrong zone altogether
])
def test_zone_check_of_longitude_against_utc_offset(lon, offset, passes):
    from pondsim.forcing.sitecheck import ZONE_TOLERANCE_H, zone_mismatch_h

    mismatch = zone_mismatch_h(lon, offset)
    assert (abs(mismatch) <= ZONE_TOLERANCE_H) == passes
    assert -12.0 <= mismatch < 12.0
    assert zone_mismatch_h(-105.0, -7) == pytest.approx(0.0)
    assert zone_mismatch_h(None, -7) is None


def test_clear_sky_site_with_a_longitude_sign_error_is_flagged(tmp_path, capsys):
    # Clear-sky mode computes its weather from the coordinates as given, so the data
    # check passes whatever the longitude; before the zone check a sign error in the
    # longitude ran silently with the sun at night (screen ranked such a row normally).
    normals = (ROOT / "weather" / "kestrel_flats_normals.toml").read_text(encoding="utf-8")
    table = normals[normals.index("[normals]") + len("[normals]"):]
    table = "\n".join(line for line in table.splitlines()  # the scenario takes no rain
                      if not line.startswith("precipitation_mm"))
    text = DEMO.read_text(encoding="utf-8")
    text = text.replace('source = "file"', 'source = "clearsky"')
    text = text.replace('path = "../weather/kestrel_flats.epw"   # relative to this file\n',
                        "")
    text = text.replace("[pond]", "[weather.normals]" + table + "\n[pond]", 1)
    good = tmp_path / "clear.toml"
    good.write_text(text, encoding="utf-8")
    assert cli.main(["weather", str(good)]) == 0
    assert "site check passed" in capsys.readouterr().out
    bad = tmp_path / "east.toml"
    bad.write_text(text.replace("longitude = -113.9", "longitude = 113.9"), encoding="utf-8")
    assert cli.main(["weather", str(bad)]) == 0
    out = capsys.readouterr().out
    assert "WARNING: site check FAILED" in out and "sign of site.longitude" in out
    assert cli.main(["weather", str(bad), "--strict"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "longitude 113.9" in err
