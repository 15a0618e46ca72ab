"""End-to-end: the commands a user runs on the demo scenario.

These check the project's own output contract (files, units, consistency between the
terminal, the CSV and the netCDF). The plausibility flag uses the 4.6 % maximum
solar-to-biomass efficiency of C3 photosynthesis (Zhu, Long & Ort 2008, Curr. Opin.
Biotechnol. 19:153-159).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from pondsim.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("run")
    assert main(["run", str(DEMO), "--out", str(out)]) == 0
    return out


def test_run_writes_results_with_units(run_dir):
    ds = xr.open_dataset(run_dir / "results.nc", engine="h5netcdf")
    assert set(ds["density"].dims) == {"policy", "member", "day"}
    for name in ("density", "areal_biomass", "harvested", "carrying_capacity",
                 "growth_rate", "water_temperature", "par_daily", "evaporation", "crashed",
                 "crash_cause", "salvaged", "status"):
        assert ds[name].attrs.get("units"), name
        assert ds[name].attrs.get("long_name"), name
    assert ds.sizes["day"] == 365
    assert "caution" in ds.attrs and "licensed engineers" in ds.attrs["caution"]
    # The ledger closes in areal units for every policy and member.
    balance = (ds["ledger_inoculated"] + ds["ledger_grown"] - ds["ledger_respired"]
               - ds["ledger_removed"] - ds["ledger_salvaged"] - ds["ledger_lost"]
               - ds["ledger_final"])
    assert float(np.abs(balance).max()) < 1e-6 * float(ds["ledger_grown"].max())


def test_summary_csv_matches_dataset(run_dir):
    summary = pd.read_csv(run_dir / "summary.csv", comment="#", index_col=0)
    ds = xr.open_dataset(run_dir / "results.nc", engine="h5netcdf")
    annual = ds["harvested"].sum("day").mean("member")
    for pol in summary.index:
        # 1 g m-2 = 0.01 t ha-1
        assert summary.loc[pol, "yield_t_ha_yr"] == pytest.approx(
            float(annual.sel(policy=pol)) * 0.01, rel=1e-5)
        months = [c for c in summary.columns if c.startswith("m") and c.endswith("_g_m2")]
        assert sum(summary.loc[pol, months]) == pytest.approx(float(annual.sel(policy=pol)),
                                                             rel=1e-5)
    assert (summary["efficiency_solar_pct"] < 4.6).all()  # Zhu, Long & Ort (2008)
    assert summary["plausible"].all()
    # The washout flag reaches the summary: the share of members washed out agrees with
    # the Dataset's flag.
    washed = (ds["washed_out"].max("day") > 0).mean("member") * 100
    for pol in summary.index:
        assert summary.loc[pol, "washed_out_pct"] == pytest.approx(
            float(washed.sel(policy=pol)))


def test_run_figures_are_png(run_dir):
    for name in ("density.png", "monthly_productivity.png", "forcing.png"):
        assert (run_dir / name).read_bytes()[:8] == PNG_MAGIC


def test_compare_names_best_plan_per_season(tmp_path, capsys):
    out = tmp_path / "cmp"
    assert main(["compare", str(DEMO), "--members", "30", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "each season judged on whole years" in text
    # The interval beside each mean says what it is.
    assert "pct10" in text and "middle 80 % of members" in text
    best = pd.read_csv(out / "best_by_season.csv", comment="#", index_col=0)
    assert list(best.index) == ["Dec-Feb", "Mar-May", "Jun-Aug", "Sep-Nov"]
    for _, row in best.iterrows():
        # No recommended rule washes the culture out; a season within its limits keeps
        # the crash risk within the scenario's 10 %.
        assert row["members_washed_out_pct_season"] == 0
        if row["within_limits"]:
            assert row["members_crashed_pct_season"] <= 10.0
    versus = pd.read_csv(out / "best_plan_vs_policies.csv", comment="#", index_col=0)
    assert versus.index[0] == "plan judged on whole years"
    assert versus["members_washed_out_pct_yr"].iloc[0] == 0
    table = pd.read_csv(out / "comparison.csv", comment="#", index_col=[0, 1])
    # (The mean may fall below pct10 when a few members crash: a skewed distribution.)
    assert (table["yield_pct10_t_ha_season"]
            <= table["yield_pct90_t_ha_season"] + 1e-12).all()
    for name in ("trajectories.png", "seasonal_yield.png", "risk_calendar.png"):
        assert (out / name).read_bytes()[:8] == PNG_MAGIC


def test_comparison_table_is_readable(tmp_path):
    """Units in every column name, season totals per season, counts as integers."""
    from pondsim.operations.simulate import simulate
    from pondsim.scenario import load_scenario
    from pondsim.studies.compare import comparison_table, comparison_view, season_table

    scenario = load_scenario(DEMO)
    raw = season_table(simulate(scenario, members=3, progress=False))
    table = comparison_table(raw)
    units = ("_t_ha", "_g_m2", "_g_m3", "_m3", "_pct", "_per_season", "days_")
    for col in table.columns:
        assert any(u in col for u in units), col
    totals = [c for c in table.columns if c.startswith(("yield_", "harvest", "crash",
                                                         "days_at"))]
    assert totals and all(c.endswith("season") for c in totals)
    for col in ("days_in_season", "harvests_median_per_season"):
        assert pd.api.types.is_integer_dtype(table[col]), col
    path = tmp_path / "c.csv"
    table.to_csv(path)
    back = pd.read_csv(path, index_col=[0, 1])
    assert pd.api.types.is_integer_dtype(back["harvests_median_per_season"])
    view = comparison_view(raw)
    assert ("harvests/season", "median") in view.columns
    assert view[("harvests/season", "median")].str.fullmatch(r"\d+").all()
    assert {("yield t/ha/season", s) for s in ("mean", "pct10", "pct90")} <= set(view.columns)


def test_weather_command_prints_monthly_table_and_figure(tmp_path, capsys):
    fig = tmp_path / "weather.png"
    assert main(["weather", str(DEMO), "--plot", str(fig)]) == 0
    text = capsys.readouterr().out
    for col in ("GHI kWh/m2/d", "PAR mol/m2/d", "Twater mean C", "evap mm/d", "makeup m3"):
        assert col in text
    assert "Jan" in text and "Dec" in text and "year" in text
    assert fig.read_bytes()[:8] == PNG_MAGIC


def test_bad_weather_file_exit_code(tmp_path, capsys):
    bad = tmp_path / "broken.epw"
    bad.write_text("LOCATION,nowhere\nthis is not a weather file\n")
    assert main(["weather", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("pondsim: error:") and str(bad) in err
    assert "Traceback" not in err


def test_members_out_of_range(capsys):
    assert main(["run", str(DEMO), "--members", "0"]) == 2
    assert "--members" in capsys.readouterr().err
