"""Calibration from pilot-pond observations (pondsim.studies.calibrate).

Outside references:
- Carlson (1913) Biochem. Z. 57:313-334, yeast counts as analysed by Pearl (1927) Q. Rev.
  Biol. 2:532-548 (tests/data/carlson_1913_yeast.csv; 12 of 19 values checked against a
  secondary source, the rest from memory). Pearl's fitted logistic
  y = 665 / (1 + exp(4.1896 - 0.5355 t)) is from memory.
- Schaefer (1954) Bull. Inter-Am. Trop. Tuna Comm. 1:27-56: maximum surplus production
  r K / 4 at N = K/2 (via REFERENCES.md).
- Coverage of 95 % intervals: a correctly specified, nearly linear least-squares problem
  covers the true value in ~95 % of repetitions (Bates & Watts 1988, Nonlinear Regression
  Analysis and Its Applications, ch. 2; from memory). Thresholds below come from the
  binomial distribution of the number covered.

Synthetic pilots are made by make_demo_pilot, which grows the culture through
pondsim.operations.simulate.build_drivers (the yearly simulation's own driver code) rather than the
fit's PilotModel, so a recovery test also checks that the two build the same pond.
"""

from __future__ import annotations

import argparse
import dataclasses
import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from pondsim.errors import InputError
from pondsim.scenario import load_scenario
from pondsim.studies import calibrate as cal

ROOT = Path(__file__).resolve().parents[1]
SCENARIO = ROOT / "scenarios" / "kestrel_flats.toml"
PILOT = ROOT / "scenarios" / "kestrel_flats_pilot.csv"
CARLSON = Path(__file__).parent / "data" / "carlson_1913_yeast.csv"


@pytest.fixture(scope="module")
def scenario():
    return load_scenario(SCENARIO)


@pytest.fixture(scope="module")
def hourly(scenario):
    return cal.pilot_hourly(scenario)


@pytest.fixture(scope="module")
def truth(scenario):
    s = scenario.strain
    return {"mu_max_per_d": s.mu_max_per_d, "light_param_umol_m2_s": s.light_param_umol_m2_s,
            "maintenance_per_d": s.maintenance_per_d, "k_biomass_m2_g": s.k_biomass_m2_g,
            "t_opt_c": s.t_opt_c}


def _write(tmp_path, text, name="obs.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------------------
# Closed-form logistic curve: Carlson's yeast
# --------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def carlson():
    data = pd.read_csv(CARLSON, comment="#")
    return data["hours"].to_numpy(float), data["count"].to_numpy(float)


def test_carlson_yeast_logistic_matches_pearl(carlson):
    t, n = carlson
    fit = cal.fit_logistic_curve(t, n)
    est = fit.table["estimate"]
    # Pearl (1927) logistic for Carlson (1913): K = 665, r = 0.5355 h-1 (from memory).
    assert est["K"] == pytest.approx(665.0, rel=0.02)
    assert est["r"] == pytest.approx(0.5355, rel=0.05)
    # Pearl's curve passes K/2 at 4.1896 / 0.5355 = 7.82 h (from memory, derived).
    assert est["t_inflection"] == pytest.approx(4.1896 / 0.5355, abs=0.3)
    # Pearl's N0 = 665 / (1 + e^4.1896) = 9.9 (from memory, derived); first count 9.6
    # (Carlson 1913).
    assert est["N0"] == pytest.approx(9.9, rel=0.15)
    assert fit.diagnostics["rmse"] < 10.0  # counts within ~1.5 % of K: common practice
    for name, row in fit.table.iterrows():
        assert row["ci95_low"] < row["estimate"] < row["ci95_high"], name


def test_logistic_curve_derived_quantities_and_delta_method(carlson):
    t, n = carlson
    fit = cal.fit_logistic_curve(t, n)
    r, k, n0, t_infl, msy = fit.table["estimate"]
    # Schaefer (1954): the largest growth rate of the logistic is r K / 4, at N = K/2,
    # read here off the fitted curve itself by finite differences.
    tt = np.linspace(0, 18, 180001)
    curve = cal.logistic_curve(tt, r, k, n0)
    slope = np.gradient(curve, tt)
    assert slope.max() == pytest.approx(msy, rel=1e-6)
    assert tt[np.argmax(slope)] == pytest.approx(t_infl, abs=1e-3)
    assert cal.logistic_curve(t_infl, r, k, n0) == pytest.approx(k / 2, rel=1e-9)
    # Delta method against Monte Carlo propagation of the same parameter covariance.
    rng = np.random.default_rng(7)
    draws = rng.multivariate_normal([r, k, n0], fit.covariance[:3, :3], size=40000)
    mc_t = np.log(draws[:, 1] / draws[:, 2] - 1.0) / draws[:, 0]
    mc_msy = draws[:, 0] * draws[:, 1] / 4.0
    assert fit.table.at["t_inflection", "se"] == pytest.approx(mc_t.std(), rel=0.05)
    assert fit.table.at["msy", "se"] == pytest.approx(mc_msy.std(), rel=0.05)


def test_logistic_curve_recovers_synthetic_truth():
    t = np.linspace(0, 20, 25)
    true = dict(r=0.4, k=800.0, n0=15.0)
    rng = np.random.default_rng(11)
    covered = 0
    reps = 200
    for _ in range(reps):
        n = cal.logistic_curve(t, true["r"], true["k"], true["n0"]) + rng.normal(0, 8.0, t.size)
        tab = cal.fit_logistic_curve(t, np.maximum(n, 1.0)).table
        covered += all(tab.at[name, "ci95_low"] <= v <= tab.at[name, "ci95_high"]
                       for name, v in (("r", 0.4), ("K", 800.0), ("N0", 15.0)))
    # Joint coverage of three 95 % intervals is >= 85 % (Bonferroni); binomial(200, 0.85)
    # falls below 160 with probability < 2 % (common practice for a seeded check).
    assert covered >= 160


# --------------------------------------------------------------------------------------
# Observations: units, column mapping, bad input
# --------------------------------------------------------------------------------------
def test_units_and_column_mapping(tmp_path):
    body = "Date,DW,cut\n2025-03-01 08:00,0.25,\n2025-03-02 08:00,0.30,0.2\n"
    path = _write(tmp_path, body)
    obs = cal.read_observations(path, columns={"time": "Date", "density": "DW",
                                               "harvest_fraction": "cut"},
                                density_unit="g/L")
    np.testing.assert_allclose(obs.density_g_m3, [250.0, 300.0])  # 1 g/L = 1000 g m-3
    assert obs.harvest.to_dict() == {pd.Timestamp("2025-03-02"): 0.2}
    mg = cal.parse_observations(pd.DataFrame({"time": ["2025-03-01"], "density_mg_l": [250]}))
    np.testing.assert_allclose(mg.density_g_m3, [250.0])  # 1 mg/L = 1 g m-3
    od = cal.parse_observations(pd.DataFrame({"time": ["2025-03-01"], "od": [1.5]}),
                                od_factor_g_l=0.4)
    np.testing.assert_allclose(od.density_g_m3, [600.0])  # 1.5 OD x 0.4 g/L per OD
    vol = cal.parse_observations(
        pd.DataFrame({"time": ["2025-03-01", "2025-03-02"], "density_g_m3": [100, 120],
                      "harvest_volume_m3": [0, 150]}), pond_volume_m3=500.0)
    assert vol.harvest.iloc[0] == pytest.approx(0.3)
    two = cal.parse_observations(
        pd.DataFrame({"time": ["2025-03-01 08:00", "2025-03-02 08:00", "2025-03-02 15:00"],
                      "density_g_m3": [100, 120, None], "harvest_fraction": [0, 0.5, 0.5]}))
    assert two.harvest.iloc[0] == pytest.approx(0.75)  # two halvings leave a quarter
    assert cal.parse_column_map("time=Date, density=DW_g_L") == {"time": "Date",
                                                                 "density": "DW_g_L"}


@pytest.mark.parametrize("body, kwargs, field, words", [
    ("time,density_g_m3\n2025-03-02,100\n2025-03-01,110\n", {}, "time", "increasing"),
    ("time,density_g_m3\n2025-03-01,100\n2025-03-01,110\n", {}, "time", "duplicated"),
    ("time,density_g_m3\n2025-03-01,100\n2025-03-02,-5\n", {}, "density_g_m3", "positive"),
    ("time,density\n2025-03-01,100\n", {"density_unit": "lb/gal"}, "--density-unit",
     "g/m3, g/L, mg/L"),
    ("time,od\n2025-03-01,1.2\n", {}, "--od-factor", "calibration factor"),
    ("when,density_g_m3\n2025-03-01,100\n", {}, "time", "columns in the file: when"),
    ("time,biomass\n2025-03-01,100\n", {}, "density", "--columns density=NAME"),
    ("time,dw\n2025-03-01,100\n", {"columns": {"density": "DW"}}, "DW", "not in the file"),
    ("time,density_g_m3\nyesterday,100\n", {}, "time", "cannot read the times"),
    ("time,density_g_m3,harvest_fraction\n2025-03-01,100,1.5\n", {}, "harvest_fraction",
     "[0, 1)"),
    ("time,density_g_m3\n2025-03-01,abc\n", {}, "density_g_m3", "not a number"),
    ("time,density_g_m3,par\n2025-03-01,100,30\n", {}, "--par-unit", "mol/m2/d"),
])
def test_bad_observations_raise_input_error(tmp_path, body, kwargs, field, words):
    path = _write(tmp_path, body)
    with pytest.raises(InputError) as err:
        cal.read_observations(path, **kwargs)
    assert err.value.path == path
    assert err.value.field == field
    assert words in str(err.value)


def test_missing_file_and_too_few_points(tmp_path, scenario, hourly):
    with pytest.raises(InputError, match="not found"):
        cal.read_observations(tmp_path / "nope.csv")
    path = _write(tmp_path, "time,density_g_m3\n2025-03-20 08:00,60\n2025-03-21 08:00,80\n"
                  "2025-03-22 08:00,100\n")
    obs = cal.read_observations(path)
    with pytest.raises(InputError, match="too few to fit") as err:
        cal.fit_pilot(obs, scenario, hourly=hourly)
    assert err.value.path == path
    with pytest.raises(InputError, match="too few"):
        cal.fit_logistic_curve([0, 1, 2], [1, 2, 3])
    with pytest.raises(InputError, match="unknown model"):
        cal.fit_pilot(obs, scenario, hourly=hourly, model="gompertz")
    with pytest.raises(InputError, match="unknown parameter"):
        cal.fit_pilot(obs, scenario, hourly=hourly, free=["mu_max"])
    two_a_day = cal.parse_observations(pd.DataFrame(
        {"time": ["2025-03-20 08:00", "2025-03-20 15:00", "2025-03-21 08:00"],
         "density_g_m3": [60, 70, 80]}))
    with pytest.raises(InputError, match="one sample per day"):
        cal.fit_pilot(two_a_day, scenario, hourly=hourly, free=["mu_max_per_d"])


# --------------------------------------------------------------------------------------
# The pilot model
# --------------------------------------------------------------------------------------
def test_pilot_model_vectorised_runs_agree_and_start_at_x0(scenario, hourly):
    obs = cal.parse_observations(pd.DataFrame({
        "time": pd.date_range("2025-04-01 10:00", periods=12, freq="D").strftime(
            "%Y-%m-%d %H:%M"),
        "density_g_m3": np.linspace(80, 300, 12),
        "harvest_fraction": [0] * 5 + [0.4] + [0] * 6}))
    free = ("mu_max_per_d", "maintenance_per_d", "x0_g_m3")
    pm = cal.PilotModel(obs, scenario, hourly, "self_shading", free)
    assert pm.start == pd.Timestamp("2025-04-01")  # sampled after the 09:00 harvest hour
    thetas = np.array([[2.0, 0.05, 80.0], [1.5, 0.10, 120.0], [2.5, 0.02, 60.0]])
    together = pm.run(thetas)
    one_by_one = np.vstack([pm.run(th[None, :]) for th in thetas])
    np.testing.assert_allclose(together, one_by_one, rtol=1e-12)
    # The first sample (10:00, one hour after the 09:00 reset) lies near x0.
    np.testing.assert_allclose(together[:, 0], thetas[:, 2], rtol=0.1)
    # The harvest on day 5 at 09:00 removes 40 %: an hour later the culture holds ~60 %
    # of what it holds without that harvest (one hour of growth apart).
    none = cal.PilotModel(obs.without_harvests(), scenario, hourly, "self_shading", free)
    ratio = together[:, 5] / none.run(thetas)[:, 5]
    np.testing.assert_allclose(ratio, 0.6, rtol=0.01)
    np.testing.assert_allclose(together[:, :5], none.run(thetas)[:, :5], rtol=1e-12)


def test_observed_forcing_overrides_the_modelled(scenario, hourly):
    base = pd.DataFrame({"time": ["2025-04-01 08:00", "2025-04-02 08:00",
                                  "2025-04-03 08:00"], "density_g_m3": [100, 120, 140]})
    pm0 = cal.PilotModel(cal.parse_observations(base), scenario, hourly, "self_shading", ())
    tw0 = pm0.water_temperature
    temp = base.assign(water_temperature_c=[None, tw0[48 + 8] + 3.0, None])
    pm1 = cal.PilotModel(cal.parse_observations(temp), scenario, hourly, "self_shading", ())
    day = slice(48, 72)  # 2 April: the model starts on 31 March (sampled before 09:00)
    np.testing.assert_allclose(pm1.water_temperature[day] - tw0[day], 3.0)
    np.testing.assert_allclose(np.delete(pm1.water_temperature, np.r_[day]),
                               np.delete(tw0, np.r_[day]))
    par = base.assign(par_mol_m2_d=[None, 20.0, None])
    pm2 = cal.PilotModel(cal.parse_observations(par), scenario, hourly, "self_shading", ())
    daily = pm2.par_observed_or_modelled[day].sum() * 3600e-6  # mol m-2 d-1
    assert daily == pytest.approx(20.0, rel=1e-12)
    assert len(pm2.notes) == 1 and "PAR" in pm2.notes[0]


# --------------------------------------------------------------------------------------
# Parameter recovery through the engine
# --------------------------------------------------------------------------------------
def _recovery(scenario, hourly, seeds, free, days):
    """Per parameter: in how many seeded repetitions the 95 % interval holds the truth,
    and how many misses came without a warning naming the parameter."""
    truth = {n: getattr(scenario.strain, n) for n in free}
    hits = dict.fromkeys(free, 0)
    silent = dict.fromkeys(free, 0)
    for seed in seeds:
        df = cal.make_demo_pilot(scenario, hourly=hourly, days=days, seed=seed,
                                 harvest_days=(14, 22, 30))
        obs = cal.parse_observations(df)
        start = {n: 1.3 * v for n, v in truth.items()}  # start away from the truth
        fit = cal.fit_pilot(obs, scenario, hourly=hourly, free=free, start=start)
        assert fit.success
        for name, ok in fit.covers(truth).items():
            hits[name] += ok
            silent[name] += not ok and not any(w.startswith(name) for w in fit.warnings)
    return hits, silent


def test_recovery_coverage_10_repetitions(scenario, hourly):
    hits, _ = _recovery(scenario, hourly, range(100, 110),
                        ["mu_max_per_d", "maintenance_per_d"], days=40)
    # Nominal 95 % per parameter (Bates & Watts 1988, from memory). With 10 repetitions
    # binomial(10, 0.95) gives fewer than 8 hits with probability 1.2 %, so >= 8 is the
    # threshold (the two estimates are strongly correlated, so they are not counted as
    # independent checks); the 50-repetition test below asks for 90 %.
    for name, n in hits.items():
        assert n >= 8, f"{name}: {n}/10 intervals covered the truth"


@pytest.mark.slow
def test_recovery_coverage_50_repetitions(scenario, hourly):
    free = ["mu_max_per_d", "light_param_umol_m2_s", "maintenance_per_d"]
    hits, silent = _recovery(scenario, hourly, range(200, 250), free, days=45)
    # Nominal 95 % (Bates & Watts 1988, from memory): at least 90 % of 50 for the rate
    # parameters (binomial(50, 0.95) falls below 45 with probability 3.8 %).
    for name in ("mu_max_per_d", "maintenance_per_d"):
        assert hits[name] >= 45, f"{name}: {hits[name]}/50 intervals covered the truth"
    # The light parameter is weakly identified by daily samples of a dense culture and
    # its linearised interval undercovers (measured ~70 %); a miss must then come with a
    # warning about that parameter: silent misses no more often than the nominal 5 % allow
    # (at most 5 of 50, as for the 90 % rule above).
    name = "light_param_umol_m2_s"
    print(f"coverage {hits}, misses without a warning {silent}")
    assert silent[name] <= 5, f"{name}: {silent[name]}/50 misses without a warning"


def test_logistic_form_recovers_capacity(scenario, hourly):
    strain = dataclasses.replace(scenario.strain, growth_form="logistic", mu_max_per_d=1.2,
                                 capacity_table_g_m3=(600.0,) * 12)
    sc = scenario.replace(strain=strain)
    obs = cal.parse_observations(cal.make_demo_pilot(sc, hourly=hourly, days=40, seed=3))
    fit = cal.fit_pilot(obs, sc, hourly=hourly, free=["mu_max_per_d", "capacity_g_m3"],
                        start={"mu_max_per_d": 0.8, "capacity_g_m3": 900.0})
    assert fit.covers({"mu_max_per_d": 1.2, "capacity_g_m3": 600.0}) == {
        "mu_max_per_d": True, "capacity_g_m3": True}
    # mu_max and K trade off in a pilot held below K: the warning must say so.
    assert any("capacity_g_m3" in w and "correlated" in w for w in fit.warnings)


def test_harvests_in_the_observations_are_honoured(scenario, hourly):
    obs = cal.read_observations(PILOT)
    assert len(obs.harvest) == 4
    free = ["mu_max_per_d"]
    with_h = cal.fit_pilot(obs, scenario, hourly=hourly, free=free)
    without = cal.fit_pilot(obs.without_harvests(), scenario, hourly=hourly, free=free)
    mu = scenario.strain.mu_max_per_d
    assert with_h.covers({"mu_max_per_d": mu}) == {"mu_max_per_d": True}
    # Ignoring the harvests, the model cannot make the drops: the fit worsens several-fold
    # and mu_max is pulled low to keep the curve under the post-harvest samples.
    assert without.diagnostics["rmse"] > 3 * with_h.diagnostics["rmse"]
    assert without.estimates["mu_max_per_d"] < with_h.table.at["mu_max_per_d", "ci95_low"]
    # The misfit shows in the diagnostics: runs of same-signed residuals.
    assert without.diagnostics["lag1_autocorrelation"] > 0.5
    assert any("serially correlated" in w for w in without.warnings)


def test_t_opt_not_bracketed_is_warned(scenario, hourly):
    obs = cal.read_observations(PILOT)
    # the pilot's spring water (lit hours up to ~29 degC with the Ryan-Harleman transfer)
    # does not reach an optimum of 33 degC
    scenario = dataclasses.replace(
        scenario, strain=dataclasses.replace(scenario.strain, t_opt_c=33.0))
    fit = cal.fit_pilot(obs, scenario, hourly=hourly, free=["mu_max_per_d", "t_opt_c"])
    lo, hi = fit.model.temperature_range
    assert not lo < scenario.strain.t_opt_c < hi
    assert any(w.startswith("t_opt_c: the water temperature") for w in fit.warnings)
    assert "t_opt_c" not in cal.default_free("self_shading", (lo, hi), scenario)
    assert "t_opt_c" in cal.default_free("self_shading", (15.0, 35.0), scenario)


# --------------------------------------------------------------------------------------
# The demo pilot file and the command
# --------------------------------------------------------------------------------------
def test_demo_pilot_file_is_the_documented_generator_output(scenario, hourly):
    # Reproducibility of the shipped file from make_demo_pilot(seed=DEMO_SEED) (a
    # snapshot of the tool's own output, not an outside check).
    shipped = pd.read_csv(PILOT, comment="#")
    again = cal.make_demo_pilot(scenario, hourly=hourly)
    assert list(shipped.columns) == list(again.columns)
    np.testing.assert_allclose(shipped["density_g_m3"], again["density_g_m3"], atol=0.006)
    assert (shipped["time"] == again["time"]).all()
    # The noise is ~5 % lognormal: log scatter around the noiseless run.
    clean = cal.make_demo_pilot(scenario, hourly=hourly, noise_cv=0.0)
    scatter = np.log(shipped["density_g_m3"] / clean["density_g_m3"])
    assert 0.03 < scatter.std() < 0.07
    assert stats.shapiro(scatter).pvalue > 0.01


def _parse(argv):
    parser = argparse.ArgumentParser(prog="pondsim")
    sub = parser.add_subparsers(dest="command")
    cal.add_fit_parser(sub)
    return parser.parse_args(argv)


def test_cmd_fit_on_demo_pilot_recovers_scenario(tmp_path, scenario, truth, capsys):
    before = hashlib.sha256(SCENARIO.read_bytes()).hexdigest()
    out = tmp_path / "fit"
    args = _parse(["fit", str(PILOT), "--scenario", str(SCENARIO), "--out", str(out)])
    assert cal.cmd_fit(args) == 0
    printed = capsys.readouterr().out
    assert "95 % interval" in printed and "correlation matrix" in printed
    table = pd.read_csv(out / "fit_parameters.csv", index_col=0)
    fitted_names = [n for n in table.index if n in truth]
    assert set(fitted_names) >= {"mu_max_per_d", "light_param_umol_m2_s",
                                 "maintenance_per_d", "k_biomass_m2_g"}
    for name in fitted_names:
        assert table.at[name, "ci95_low"] <= truth[name] <= table.at[name, "ci95_high"], name
    # The original scenario is untouched; the copy loads, has the fitted values and a
    # weather path that still resolves from the out folder.
    assert hashlib.sha256(SCENARIO.read_bytes()).hexdigest() == before
    copy = load_scenario(out / "kestrel_flats_fitted.toml")
    assert copy.strain.mu_max_per_d == pytest.approx(table.at["mu_max_per_d", "estimate"],
                                                     rel=1e-5)
    assert copy.weather.path == scenario.weather.path
    assert "t_max_c" not in table.index
    assert copy.strain.t_max_c == scenario.strain.t_max_c  # not fitted: kept
    text = (out / "kestrel_flats_fitted.toml").read_text()
    assert text.startswith("# Copy of kestrel_flats.toml")
    assert "# d-1, maximum specific growth rate" in text  # comments kept
    # The fit's own uncertainty replaces the scenario's for the fitted parameters.
    spread = {u.parameter: u for u in copy.uncertainty.parameters}
    for name in fitted_names:
        if name == "t_opt_c":  # documented: normal with sd = SE (fitted when bracketed)
            assert spread[name].distribution == "normal"
            assert spread[name].sd == pytest.approx(table.at[name, "se"], rel=1e-3)
            continue
        assert spread[name].distribution == "lognormal"
        rel_se = table.at[name, "se"] / table.at[name, "estimate"]
        assert spread[name].sigma == pytest.approx(rel_se, rel=1e-3)
    assert (out / "fit.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    series = pd.read_csv(out / "fit_series.csv")
    assert len(series) == 45


def test_cmd_fit_column_mapping_and_units(tmp_path, scenario):
    shipped = pd.read_csv(PILOT, comment="#")
    export = pd.DataFrame({"Date": shipped["time"], "DW_g_L": shipped["density_g_m3"] / 1000,
                           "Harvested m3": shipped["harvest_fraction"] * 500.0})
    path = tmp_path / "export.csv"
    export.to_csv(path, index=False)
    out = tmp_path / "fit2"
    args = _parse(["fit", str(path), "--scenario", str(SCENARIO), "--out", str(out),
                   "--columns", "time=Date,density=DW_g_L,harvest_volume=Harvested m3",
                   "--density-unit", "g/L", "--pond-volume", "500", "--fit",
                   "mu_max_per_d", "--no-plots"])
    assert cal.cmd_fit(args) == 0
    table = pd.read_csv(out / "fit_parameters.csv", index_col=0)
    lo, hi = table.loc["mu_max_per_d", ["ci95_low", "ci95_high"]]
    assert lo <= scenario.strain.mu_max_per_d <= hi
    assert not (out / "fit.png").exists()


def test_cmd_fit_logistic_writes_capacity_table(tmp_path, scenario):
    out = tmp_path / "fit3"
    args = _parse(["fit", str(PILOT), "--scenario", str(SCENARIO), "--out", str(out),
                   "--model", "logistic", "--fit", "mu_max_per_d,capacity_g_m3",
                   "--no-plots"])
    assert cal.cmd_fit(args) == 0
    copy = load_scenario(out / "kestrel_flats_fitted.toml")
    k = pd.read_csv(out / "fit_parameters.csv", index_col=0).at["capacity_g_m3", "estimate"]
    assert copy.strain.growth_form == "logistic"
    assert copy.strain.capacity_table_g_m3[3] == pytest.approx(k, rel=1e-5)  # April


def test_cmd_fit_curve_mode(tmp_path, carlson):
    t, n = carlson
    path = tmp_path / "batch.csv"
    pd.DataFrame({"time": t, "density_g_m3": n}).to_csv(path, index=False)
    out = tmp_path / "curve"
    assert cal.cmd_fit(_parse(["fit", str(path), "--model", "curve", "--out", str(out)])) == 0
    table = pd.read_csv(out / "fit_parameters.csv", index_col=0)
    # Pearl (1927) for Carlson (1913): K = 665 (from memory).
    assert table.at["K", "estimate"] == pytest.approx(665.0, rel=0.02)
    assert (out / "fit.png").exists()


def test_cmd_fit_writes_a_whole_output_set(tmp_path, carlson, monkeypatch):
    """`pondsim fit` writes one output set (manifest + README, moved into place whole); a
    fit that fails while writing leaves the previous set byte for byte; a folder that is
    a file is refused before any fitting."""
    import json

    from pondsim.results import files as F
    from pondsim.studies import fit_command

    t, n = carlson
    path = tmp_path / "batch.csv"
    pd.DataFrame({"time": t, "density_g_m3": n}).to_csv(path, index=False)
    out = tmp_path / "curve"
    assert cal.cmd_fit(_parse(["fit", str(path), "--model", "curve", "--out", str(out)])) == 0
    assert F.verify_output_set(out) == []
    manifest = json.loads((out / F.MANIFEST_NAME).read_text())
    assert manifest["command"] == "fit"
    assert set(manifest["files"]) == {"fit_parameters.csv", "fit_report.txt", "fit.png",
                                      F.README_NAME}
    before = {p.name: p.read_bytes() for p in out.iterdir() if not p.name.startswith(".")}

    def half_a_figure(t, n, fit, png, *args):
        Path(png).write_bytes(b"\x89PNG half")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(fit_command, "plot_curve", half_a_figure)
    with pytest.raises(OSError):
        cal.cmd_fit(_parse(["fit", str(path), "--model", "curve", "--out", str(out)]))
    assert {p.name: p.read_bytes() for p in out.iterdir()
            if not p.name.startswith(".")} == before
    assert F.verify_output_set(out) == []
    assert [p.name for p in out.iterdir() if p.name.startswith(".")] == [F.LOCK_NAME]

    def no_fit(*args, **kwargs):
        raise AssertionError("fitted before checking the output folder")

    monkeypatch.setattr(fit_command, "fit_logistic_curve", no_fit)
    monkeypatch.setattr(fit_command, "fit_pilot", no_fit)
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    with pytest.raises(F.OutputError, match="is a file"):
        cal.cmd_fit(_parse(["fit", str(path), "--model", "curve", "--out", str(blocker)]))
    with pytest.raises(F.OutputError, match="is a file"):
        cal.cmd_fit(_parse(["fit", str(PILOT), "--scenario", str(SCENARIO), "--out",
                            str(blocker)]))


def test_cmd_fit_needs_a_scenario(tmp_path):
    with pytest.raises(InputError, match="--scenario"):
        cal.cmd_fit(_parse(["fit", str(PILOT), "--out", str(tmp_path)]))


def test_unidentified_parameter_keeps_the_scenarios_uncertainty(tmp_path, scenario):
    # A short or badly dated pilot record can leave a parameter unidentified (SE many
    # times its estimate: a day-first record read month-first once gave maintenance an
    # SE/estimate of 7e36). Its SE must not become the copy's [uncertainty] entry (the
    # copy then failed its own range check and the whole fit ended in an error about a
    # file the user never wrote): like an infinite SE, the entry goes, and the copy says
    # why; an SE of 1.39 x the estimate (the demo pilot's light parameter) still counts.
    from types import SimpleNamespace

    from pondsim.studies.fit_outputs import write_fitted_scenario

    est = {"mu_max_per_d": 1.9, "maintenance_per_d": 1e-6, "k_biomass_m2_g": 0.1}
    table = pd.DataFrame({"se": [0.1, 7.0, 0.139]}, index=list(est))
    obs = SimpleNamespace(path=tmp_path / "pilot.csv")
    model = SimpleNamespace(scenario=scenario, obs=obs,
                            dates=lambda: pd.DatetimeIndex(["2025-04-01"]))
    fit = SimpleNamespace(estimates=est, table=table, growth_form="self_shading",
                          warnings=[], model=model)
    path = write_fitted_scenario(fit, SCENARIO, tmp_path / "copy.toml")
    copy = load_scenario(path)
    spread = {u.parameter: u for u in copy.uncertainty.parameters}
    assert "maintenance_per_d" not in spread
    assert spread["mu_max_per_d"].sigma == pytest.approx(0.1 / 1.9, rel=1e-3)
    assert spread["k_biomass_m2_g"].sigma == pytest.approx(1.39, rel=1e-3)
    assert "maintenance_per_d is not identified by the pilot record" in path.read_text()
