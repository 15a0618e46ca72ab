"""Crash hazard fitted to a pond log (pondsim hazardfit): the log reader's errors, the
closed-form constant-hazard estimate, recovery of known parameters from synthetic logs
made by the model (interval coverage and the level of the likelihood-ratio test), and the
command end to end on the invented demo log.

Outside references:
- Constant discrete-time hazard: with d events in N days at risk, the maximum-likelihood
  daily event probability is d / N (geometric / binomial likelihood), so the hazard is
  h = -ln(1 - d/N) ~ d/N (Kalbfleisch & Prentice 2002, The Statistical Analysis of
  Failure Time Data, ch. 1; from memory).
- Profile-likelihood intervals cover at about their nominal rate in large samples
  (Venzon & Moolgavkar 1988, Appl. Statist. 37:87-94); the binomial distribution of the
  number of covering replicates bounds the check.
- Likelihood-ratio tests with parameters on the boundary follow a chi-bar-square mixture
  (Self & Liang 1987, JASA 82:605-610): its rejection rate at alpha = 0.05 should be
  about 0.05 under the null.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from pondsim.cli import main
from pondsim.errors import InputError
from pondsim.operations.simulate import crash_model_of
from pondsim.scenario import load_scenario
from pondsim.studies import crash_fit as cf
from pondsim.studies.crash_fit_command import DEMO_TRUTH
from pondsim.studies.crash_log import parse_pond_log, read_pond_log

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
DEMO_LOG = ROOT / "scenarios" / "kestrel_flats_pond_log.csv"
KEYS = ("background_per_d", "background_q10", "starvation_hazard_per_d",
        "heat_hazard_per_d_h", "cold_hazard_per_d_k")


def _log(rows):
    return parse_pond_log(pd.DataFrame(rows, columns=["pond", "date", "event", "value"]),
                          path="log.csv")


# --------------------------------------------------------------------------------------
# The log reader
# --------------------------------------------------------------------------------------
def test_reader_builds_periods_harvests_and_samples():
    log = _log([["A", "2025-03-01", "inoculated", "60"], ["A", "2025-03-05", "harvest", "0.3"],
                ["B", "2025-03-02", "inoculated", ""], ["A", "2025-03-10", "crash", ""],
                ["A", "2025-03-20", "inoculated", ""], ["A", "2025-03-22", "sample", "120"],
                ["A", "2025-04-30", "end", ""], ["B", "2025-04-01", "end", ""]])
    p = log.periods
    assert list(p["pond"]) == ["A", "A", "B"]
    assert list(p["crashed"]) == [True, False, False]
    assert list(p["days"]) == [10, 42, 31]  # inclusive of both dates
    assert p["inoculum_g_m3"].iloc[0] == 60 and np.isnan(p["inoculum_g_m3"].iloc[1])
    assert log.n_crashes == 1 and log.pond_days == 83
    assert log.harvests["period"].tolist() == [0] and log.samples["period"].tolist() == [1]


@pytest.mark.parametrize("rows, field, words", [
    ([["A", "2025-03-01", "inoculate", ""]], "event", "row 2: unknown event"),
    ([["A", "2025-13-01", "inoculated", ""]], "date", "row 2"),
    ([["A", "2025-03-01", "inoculated", ""], ["A", "2025-03-04", "harvest", "1.5"],
      ["A", "2025-03-05", "end", ""]], "value", "row 3: harvest value 1.5"),
    ([["A", "2025-03-01", "inoculated", ""], ["A", "2025-03-04", "sample", "x"],
      ["A", "2025-03-05", "end", ""]], "value", "not a number"),
    ([["A", "2025-03-01", "inoculated", ""]], "event", "has no crash or end row"),
    ([["A", "2025-03-01", "crash", ""]], "event", "outside any period"),
    ([["A", "2025-03-01", "inoculated", ""], ["A", "2025-03-03", "inoculated", ""],
      ["A", "2025-03-05", "end", ""]], "event", "close it first"),
    ([["A", "2025-03-01", "inoculated", ""], ["A", "2025-03-05", "crash", ""],
      ["A", "2025-03-05", "inoculated", ""], ["A", "2025-03-09", "end", ""]], "date",
     "not after its previous period"),
    ([["", "2025-03-01", "inoculated", ""]], "pond", "missing pond"),
])
def test_reader_errors_name_row_and_field(rows, field, words):
    with pytest.raises(InputError) as err:
        _log(rows)
    assert err.value.field == field
    assert words in str(err.value)
    assert "log.csv" in str(err.value)


def test_command_rejects_a_bad_log_with_status_2(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("pond,date,what\nA,2025-03-01,inoculated\n", encoding="utf-8")
    out = tmp_path / "out"
    assert main(["hazardfit", str(bad), "--scenario", str(DEMO), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "bad.csv" in err and "'event'" in err and "Traceback" not in err
    assert not out.exists() or not [p for p in out.iterdir() if not p.name.startswith(".")]


# --------------------------------------------------------------------------------------
# Synthetic data made by the model
# --------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def hot_scenario():
    """The demo site with t_max lowered to 34 degC, so that summer water exceeds it."""
    sc = load_scenario(DEMO)
    return sc.replace(strain=dataclasses.replace(sc.strain, t_max_c=34.0),
                      crash=dataclasses.replace(sc.crash, **DEMO_TRUTH))


@pytest.fixture(scope="module")
def base_periods(hot_scenario):
    """150 ponds inoculated a little over two days apart, each followed to 31 December
    without crashes: the engine's stress indices along every pond-day."""
    rows = []
    for i in range(150):
        start = pd.Timestamp("2025-01-01") + pd.Timedelta(days=int(2.4 * i))
        rows += [[f"P{i:03d}", start.strftime("%Y-%m-%d"), "inoculated", ""],
                 [f"P{i:03d}", "2025-12-31", "end", ""]]
    return cf.simulate_periods(_log(rows), hot_scenario, policy="threshold 700/400")


def _draw_log(data, theta, rng):
    """Crash days drawn from the discrete hazard h along each period (the engine's rule
    u < 1 - exp(-h)); a pond that does not crash is censored at its end."""
    z = data.covariates()
    h = np.exp(theta[0] + theta[1] * z[0]) + theta[2] * z[1] + theta[3] * z[2] \
        + theta[4] * z[3]
    hit = (rng.random(h.shape) < -np.expm1(-h)) & data.at_risk
    crashed = hit.any(axis=1)
    n_days = np.where(crashed, hit.argmax(axis=1) + 1, data.n_days)
    return data.truncated(n_days, crashed)


def _theta(values):
    return np.array([math.log(values["background_per_d"]),
                     math.log(values["background_q10"]) / 10,
                     values["starvation_hazard_per_d"], values["heat_hazard_per_d_h"],
                     values["cold_hazard_per_d_k"]])


def test_engine_hazard_equals_the_fit_hazard_on_the_same_days(hot_scenario, base_periods):
    # The fit's covariates give the same daily hazard the engine draws crashes from.
    from pondsim.operations.engine import integrate
    from pondsim.operations.harvest import build_rules
    from pondsim.operations.simulate import (
        build_drivers,
        hourly_light_and_water,
        load_forcing,
        operation_of,
    )

    sc = hot_scenario
    hourly = hourly_light_and_water(load_forcing(sc)[0], sc)
    dates = hourly.index[::24]
    policy = [p for p in sc.policies if p.name == "threshold 700/400"]
    rules, _ = build_rules(policy, (), sc.seasons, dates, repeat=3)
    starts = np.array([0, 60, 120])
    op = dataclasses.replace(operation_of(sc), start_day=starts)
    model = dataclasses.replace(crash_model_of(sc), background_per_d=1e-9,
                                starvation_hazard_per_d=1e-9, heat_hazard_per_d_h=1e-9,
                                cold_hazard_per_d_k=1e-9)  # no crash, hazard recorded
    daily = integrate(build_drivers(hourly, sc), rules, op, crash=model, seed=0)
    data = base_periods.subset(np.array([0, 25, 50]))  # ponds starting on days 0, 60, 120
    z = data.covariates()
    h = (np.exp(math.log(1e-9) + math.log(model.background_q10) / 10 * z[0])
         + 1e-9 * (z[1] + z[2] + z[3]))
    for k, s in enumerate(starts):
        n = 365 - s
        np.testing.assert_allclose(daily.hazard[k, s:], h[k, :n], rtol=2e-6)


def test_background_only_log_gives_crashes_over_pond_days(base_periods, hot_scenario):
    # A hand-made log of constant hazard: 7 of the ponds crashed on chosen days, the rest
    # censored at the year's end. No weather term is let in.
    n_days = base_periods.n_days.copy()
    crashed = np.zeros(len(n_days), bool)
    crashed[[3, 17, 40, 41, 90, 120, 133]] = True
    n_days[crashed] = [30, 5, 200, 17, 64, 1, 99]
    data = base_periods.truncated(n_days, crashed)
    quiet = dataclasses.replace(crash_model_of(hot_scenario), background_q10=1.0,
                                starvation_hazard_per_d=0.0, heat_hazard_per_d_h=0.0,
                                cold_hazard_per_d_k=0.0)
    fit = cf.fit_hazard(data, quiet, free=["background_per_d"])
    d, n = 7, int(n_days.sum())
    closed = -math.log1p(-d / n)  # Kalbfleisch & Prentice: p = d / N, h = -ln(1 - p)
    assert fit.table.at["background_per_d", "estimate"] == pytest.approx(closed, rel=1e-5)
    assert closed == pytest.approx(d / n, rel=d / n)  # ~ crashes / pond-days
    assert cf.background_only(data) == pytest.approx(closed, rel=1e-12)
    lo, hi = fit.table.loc["background_per_d", ["ci95_low", "ci95_high"]]
    assert lo < closed < hi
    # The same log with every weather term free: the null model of the LR test is the
    # same closed form.
    full = cf.fit_hazard(data, crash_model_of(hot_scenario), intervals=False)
    assert full.background_only_per_d == pytest.approx(closed, rel=1e-5)


def _coverage(base_periods, hot_scenario, replicates, seed):
    base = crash_model_of(hot_scenario)
    truth = _theta(DEMO_TRUTH)
    rng = np.random.default_rng(seed)
    hits = {k: 0 for k in KEYS}
    crashes = []
    for _ in range(replicates):
        data = _draw_log(base_periods, truth, rng)
        crashes.append(int(data.crashed.sum()))
        fit = cf.fit_hazard(data, base)
        for k, ok in fit.covers(DEMO_TRUTH).items():
            hits[k] += ok
    return {k: v / replicates for k, v in hits.items()}, np.mean(crashes)


def _coverage_bounds(replicates, level=0.95):
    # Two-sided 0.2 % binomial band around the nominal rate.
    return (stats.binom.ppf(0.001, replicates, level) / replicates,
            stats.binom.ppf(0.999, replicates, level) / replicates)


def test_intervals_cover_known_parameters(base_periods, hot_scenario):
    replicates = 24
    rate, mean_crashes = _coverage(base_periods, hot_scenario, replicates, seed=1)
    low, high = _coverage_bounds(replicates)
    print(f"95 % profile intervals, {replicates} synthetic logs of 150 ponds "
          f"(~{mean_crashes:.0f} crashes each): coverage {rate}")
    for k, r in rate.items():
        assert low <= r <= high, (k, r)


@pytest.mark.slow
def test_intervals_cover_known_parameters_many_replicates(base_periods, hot_scenario):
    replicates = 300
    rate, mean_crashes = _coverage(base_periods, hot_scenario, replicates, seed=2)
    low, high = _coverage_bounds(replicates)
    print(f"coverage over {replicates} logs (~{mean_crashes:.0f} crashes each): {rate}")
    for k, r in rate.items():
        assert low <= r <= high, (k, r)


def _lr_rejections(base_periods, hot_scenario, replicates, seed):
    quiet = {**DEMO_TRUTH, "background_q10": 1.0, "starvation_hazard_per_d": 0.0,
             "heat_hazard_per_d_h": 0.0, "cold_hazard_per_d_k": 0.0,
             "background_per_d": 0.006}
    rng = np.random.default_rng(seed)
    base = crash_model_of(hot_scenario)
    p = [cf.fit_hazard(_draw_log(base_periods, _theta(quiet), rng), base,
                       intervals=False).lr_p_value for _ in range(replicates)]
    return float(np.mean(np.array(p) < 0.05))


def test_lr_test_holds_its_level_under_a_background_only_truth(base_periods, hot_scenario):
    replicates = 200
    rate = _lr_rejections(base_periods, hot_scenario, replicates, seed=3)
    print(f"LR test at alpha 0.05, background-only truth, {replicates} logs: "
          f"rejection rate {rate:.3f}")
    lo = stats.binom.ppf(0.001, replicates, 0.05) / replicates
    hi = stats.binom.ppf(0.999, replicates, 0.05) / replicates
    assert lo <= rate <= hi


def test_lr_test_detects_the_weather_terms(base_periods, hot_scenario):
    rng = np.random.default_rng(4)
    fit = cf.fit_hazard(_draw_log(base_periods, _theta(DEMO_TRUTH), rng),
                        crash_model_of(hot_scenario), intervals=False)
    assert fit.lr_p_value < 1e-3


# --------------------------------------------------------------------------------------
# The command on the demo log
# --------------------------------------------------------------------------------------
def test_hazardfit_on_the_demo_log_recovers_its_invented_values(tmp_path, capsys):
    out = tmp_path / "fit"
    assert main(["hazardfit", str(DEMO_LOG), "--scenario", str(DEMO), "--out",
                 str(out)]) == 0
    text = capsys.readouterr().out
    assert "likelihood ratio" in text and "profile-likelihood" in text
    table = pd.read_csv(out / "hazard_parameters.csv", index_col=0, comment="#")
    for key, value in DEMO_TRUTH.items():
        row = table.loc[key]
        if row["status"].startswith("fitted"):
            assert row["ci95_low"] <= value <= row["ci95_high"], key
    # Every hazard term is either fitted (its interval checked above) or kept with the
    # scenario's value because the log holds none of its stress.
    assert table["status"].str.startswith(("fitted", "kept")).all()
    copy = load_scenario(out / "kestrel_flats_hazard.toml")
    assert copy.crash.background_per_d == pytest.approx(
        table.loc["background_per_d", "estimate"], rel=1e-3)
    assert "hazardfit" in copy.crash.basis and "kestrel_flats_pond_log.csv" in copy.crash.basis
    periods = pd.read_csv(out / "hazard_periods.csv", comment="#")
    log = read_pond_log(DEMO_LOG)
    assert len(periods) == len(log.periods)
    assert periods["expected_crashes"].sum() == pytest.approx(log.n_crashes, rel=0.05)
