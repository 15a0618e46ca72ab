"""Site screening: site tables and folders, per-site seeds, the same numbers serially, on a
local pool and on a dask.distributed LocalCluster, failures, resume, and the ranking of a
sunny low-latitude site against a cloudy high-latitude one.

Every site here is invented (scenarios/sites_demo.csv and the demo weather file).
"""

from __future__ import annotations

import argparse
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from pondsim import load_scenario
from pondsim.errors import InputError
from pondsim.studies.screen import (
    add_screen_parser,
    cmd_screen,
    read_sites,
    screen,
    site_file_stems,
    site_seeds,
)

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
DEMO_SITES = ROOT / "scenarios" / "sites_demo.csv"
DEMO_EPW = ROOT / "weather" / "kestrel_flats.epw"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
SUNNY, CLOUDY = "Coral Terrace (invented)", "Greyfell Moor (invented)"
SMALL = {"members": 1, "years": 2}  # small for speed: 2 weather years x 1 replicate


@pytest.fixture(scope="module")
def scenario():
    return load_scenario(DEMO)


@pytest.fixture(scope="module")
def sites_csv(tmp_path_factory):
    """Three sites: two from monthly normals (clear-sky mode) and one weather file."""
    table = pd.read_csv(DEMO_SITES, comment="#", dtype=str, keep_default_na=False)
    table = table[table["name"].isin([SUNNY, CLOUDY, "Kestrel Flats (invented)"])].copy()
    table.loc[table["weather_file"] != "", "weather_file"] = str(DEMO_EPW)
    path = tmp_path_factory.mktemp("sites") / "sites.csv"
    table.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def serial(scenario, sites_csv, tmp_path_factory):
    out = tmp_path_factory.mktemp("serial")
    return screen(scenario, sites_csv, workers=1, out=out, progress=False, **SMALL), out


def _cli(argv):
    parser = argparse.ArgumentParser(prog="pondsim")
    add_screen_parser(parser.add_subparsers(dest="command"))
    return cmd_screen(parser.parse_args(["screen", *argv]))


# ------------------------------------------------------------------------ site lists
def test_demo_site_table_reads():
    sites = read_sites(DEMO_SITES)
    assert len(sites) == 6
    by_name = {s.name: s for s in sites}
    kestrel = by_name["Kestrel Flats (invented)"]
    assert kestrel.weather_path == DEMO_EPW.resolve() and kestrel.normals is None
    coral = by_name[SUNNY]
    assert coral.latitude == 14.5 and coral.weather_path is None
    assert set(coral.normals) == {"temp_max_c", "temp_min_c", "wind_speed_m_s",
                                  "relative_humidity_pct", "clearness"}
    assert all(len(v) == 12 for v in coral.normals.values())


def _table(tmp_path, rows, header=None):
    header = header or ["name", "latitude", "longitude", "elevation_m", "utc_offset_h",
                        "weather_file"]
    path = tmp_path / "t.csv"
    path.write_text("\n".join([",".join(header)] + [",".join(map(str, r)) for r in rows])
                    + "\n")
    return path


def _row_error(path, row=0) -> str:
    """The reason a row of a site table fails (a bad row fails alone, it does not raise)."""
    site = read_sites(path)[row]
    assert site.error is not None, site
    return site.error


def test_row_without_weather_fails_alone_naming_the_row(tmp_path):
    path = _table(tmp_path, [["a", 10, 20, 0, 1, str(DEMO_EPW)], ["b", 10, 20, 0, 1, ""]])
    assert read_sites(path)[0].error is None
    error = _row_error(path, 1)
    assert "field 'row 2 (b): weather_file'" in error and "normals" in error


def test_bad_values_name_row_and_column(tmp_path):
    assert "field 'row 1 (a): latitude'" in _row_error(
        _table(tmp_path, [["a", 95, 20, 0, 1, str(DEMO_EPW)]]))
    table = pd.read_csv(DEMO_SITES, comment="#", dtype=str, keep_default_na=False).iloc[[0]]
    table["clearness_07"] = "1.7"  # clearness above 1 is impossible
    table.to_csv(tmp_path / "n.csv", index=False)
    error = _row_error(tmp_path / "n.csv")
    assert f"field 'row 1 ({SUNNY}): clearness'" in error and "Jul" in error
    table["clearness_07"] = ""
    table.to_csv(tmp_path / "m.csv", index=False)
    assert "months [7]" in _row_error(tmp_path / "m.csv")
    with pytest.raises(InputError, match="unknown column"):
        read_sites(_table(tmp_path, [["a"]], header=["nmae"]))
    dup = tmp_path / "dup.csv"
    _table(tmp_path, [["a", 1, 1, 1, 1, DEMO_EPW], ["a", 1, 1, 1, 1, DEMO_EPW]]).rename(dup)
    assert read_sites(dup)[0].error is None and "used twice" in _row_error(dup, 1)
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no weather files"):
        read_sites(tmp_path / "empty")


def test_bad_site_rows_fail_alone_and_the_rest_complete(scenario, tmp_path):
    """Each kind of bad row (impossible coordinate, text for a number, a missing month,
    no weather at all, a duplicate name) fails that site only, listed with its reason,
    while the good rows are simulated and ranked."""
    table = pd.read_csv(DEMO_SITES, comment="#", dtype=str, keep_default_na=False)
    good = table[table["name"] == SUNNY]
    bad = pd.concat([good] * 5, ignore_index=True)
    bad["name"] = ["lat 123", "lon text", "no June", "no weather", SUNNY]
    bad.loc[0, "latitude"] = "123"
    bad.loc[1, "longitude"] = "east"
    bad.loc[2, "temp_max_c_06"] = ""
    for col in [c for c in bad.columns if c[-3:-2] == "_" and c[-2:].isdigit()]:
        bad.loc[3, col] = ""
    pd.concat([good, bad], ignore_index=True).to_csv(tmp_path / "sites.csv", index=False)
    report = screen(scenario, tmp_path / "sites.csv", workers=1, progress=False,
                    out=tmp_path / "out", log=lambda msg: None, **SMALL)
    ranking = report.ranking
    assert list(ranking.loc[ranking["status"] == "ok", "site"]) == [SUNNY]
    failed = report.failures.set_index("site")["error"]
    assert len(failed) == 5
    assert "latitude" in failed["lat 123"] and "-66.5" in failed["lat 123"]
    assert "longitude" in failed["lon text"]
    assert "temp_max_c_06" in failed["no June"]
    assert "weather_file" in failed["no weather"]
    assert "used twice" in failed[f"{SUNNY} (row 6)"]
    on_disk = pd.read_csv(tmp_path / "out" / "failures.csv")
    assert sorted(on_disk["site"]) == sorted(failed.index)


def test_seeds_are_deterministic_and_distinct():
    assert site_seeds(7, "a") == site_seeds(7, "a")
    assert site_seeds(7, "a") != site_seeds(7, "b")
    assert site_seeds(7, "a") != site_seeds(8, "a")
    w, c = site_seeds(7, "a")
    assert w != c and 0 <= w < 2**63 and 0 <= c < 2**63


def test_file_stems_are_safe_and_unique():
    stems = site_file_stems(["A B", "A_B", "Greyfell Moor (invented)"])
    assert stems["Greyfell Moor (invented)"] == "Greyfell_Moor_invented"
    assert len(set(stems.values())) == 3
    assert all("/" not in s and " " not in s for s in stems.values())


# ------------------------------------------------------------------------ results
def test_serial_results_and_files(serial):
    report, out = serial
    ds = report.dataset
    # Input order, whatever the order of completion.
    assert list(ds["site"].values) == [SUNNY, CLOUDY, "Kestrel Flats (invented)"]
    assert ds["annual_yield"].dims == ("site", "policy", "member")
    assert ds.sizes["member"] == 2  # 2 weather years x 1 replicate
    for name in ("annual_yield", "monthly_yield", "crashes", "yield_p50", "yield_p90",
                 "crash_rate", "evaporation_per_biomass", "insolation"):
        assert ds[name].attrs.get("units"), name
    # Internal consistency (not an outside value): months add up to the year.
    np.testing.assert_allclose(ds["monthly_yield"].sum("month"), ds["yield_mean"],
                               rtol=1e-9)
    assert (ds["yield_p90"] <= ds["yield_p50"] + 1e-12).all()  # exceedance convention
    assert "density" not in ds  # reduced unless full=True
    on_disk = xr.open_dataset(out / "screen.nc", engine="h5netcdf").load()
    xr.testing.assert_allclose(on_disk[["annual_yield", "yield_p50"]],
                               ds[["annual_yield", "yield_p50"]])
    assert len(list((out / "sites").glob("*.nc"))) == 3
    lines = (out / "ranking.csv").read_text().splitlines()
    assert lines[0].startswith("rank,site,")  # a plain table; the caution is in README.txt
    assert "Results are estimates" in (out / "README.txt").read_text()
    ranking = pd.read_csv(out / "ranking.csv")
    assert list(ranking["rank"]) == [1, 2, 3]
    assert ranking["yield_p50_t_ha_yr"].is_monotonic_decreasing
    assert (out / "ranking.png").read_bytes()[:8] == PNG_MAGIC
    assert not (out / "failures.csv").exists()


def test_clear_sky_grid_ranks_sunny_low_latitude_above_cloudy_high_latitude(serial):
    ds = serial[0].dataset
    # Common practice: at 14.5 deg N with clearness ~0.7 a site receives far more sun in
    # a year than at 56.5 deg N with clearness ~0.4, and a warm sunny site grows more.
    assert float(ds["insolation"].sel(site=SUNNY)) > 1.8 * float(
        ds["insolation"].sel(site=CLOUDY))
    assert float(ds["yield_p50"].sel(site=SUNNY).max()) > float(
        ds["yield_p50"].sel(site=CLOUDY).max())
    ranking = serial[0].ranking.set_index("site")
    assert ranking.loc[SUNNY, "rank"] < ranking.loc[CLOUDY, "rank"]
    # Evaporation per tonne: pond evaporation over harvested biomass (units check only).
    assert (ranking["evaporation_m3_per_t"] > 0).all()


def test_local_pool_gives_identical_numbers(serial, scenario, sites_csv):
    pooled = screen(scenario, sites_csv, workers=2, progress=False, **SMALL)
    xr.testing.assert_identical(pooled.dataset, serial[0].dataset)


def test_dask_local_cluster_gives_identical_numbers(serial, scenario, sites_csv):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as cluster:
        on_cluster = screen(scenario, sites_csv, scheduler=cluster.scheduler_address,
                            progress=False, **SMALL)
    xr.testing.assert_identical(on_cluster.dataset, serial[0].dataset)


# ------------------------------------------------------------------------ failures
def test_broken_site_is_reported_and_resume_skips_finished_sites(scenario, tmp_path,
                                                                 capsys):
    folder = tmp_path / "weather"
    folder.mkdir()
    shutil.copy(DEMO_EPW, folder / "kestrel_a.epw")
    (folder / "broken.epw").write_text("LOCATION,Nowhere,,,,,1,2,0,10\nnot an epw file\n")
    (folder / "README.md").write_text("not a weather file, ignored\n")
    out = tmp_path / "out"
    argv = [str(DEMO), "--sites", str(folder), "--members", "1", "--years", "1",
            "--workers", "1", "--out", str(out), "--no-progress"]
    assert _cli(argv) == 1  # some site failed
    text = capsys.readouterr()
    assert "broken" in text.out and "broken" in text.err
    assert "Results are estimates" in text.out  # the caution is printed
    failures = pd.read_csv(out / "failures.csv", comment="#")
    assert list(failures["site"]) == ["broken"] and failures["error"].str.len().min() > 0
    ranking = pd.read_csv(out / "ranking.csv", comment="#")
    assert list(ranking["status"]) == ["ok", "failed"]
    done = out / "sites" / "kestrel_a.nc"
    mtime = done.stat().st_mtime_ns

    report = screen(scenario, folder, members=1, years=1, workers=1, out=out,
                    resume=True, progress=False, log=lambda msg: None)
    assert report.skipped == ["kestrel_a"] and report.computed == ["broken"]
    assert done.stat().st_mtime_ns == mtime  # not recomputed, not rewritten
    assert list(report.ranking["site"]) == ["kestrel_a", "broken"]
    # A different run configuration does not reuse the file.
    again = screen(scenario, folder, members=2, years=1, workers=1, out=out,
                   resume=True, progress=False, log=lambda msg: None)
    assert "kestrel_a" in again.computed


def test_full_mode_keeps_trajectories(scenario, tmp_path):
    site = [s for s in read_sites(DEMO_SITES) if s.name == SUNNY]
    report = screen(scenario, site, members=1, years=1, workers=1, full=True,
                    out=tmp_path, progress=False)
    ds = report.dataset
    assert ds["density"].dims == ("site", "policy", "member", "day")
    assert ds.sizes["day"] == 365
    on_disk = xr.open_dataset(tmp_path / "screen.nc", engine="h5netcdf")
    assert "harvested" in on_disk and on_disk.attrs["full"] == 1


def test_bad_arguments_are_input_errors(scenario):
    with pytest.raises(InputError) as err:
        screen(scenario, DEMO_SITES, years=0)
    assert err.value.field == "--years"
    with pytest.raises(InputError, match="resume needs"):
        screen(scenario, DEMO_SITES, resume=True)
    with pytest.raises(InputError):
        screen(scenario, ROOT / "no_such_sites.csv")
