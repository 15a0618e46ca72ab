"""Harvest operations a practitioner runs: viable floor, washout, whole-year season
choices, dewatering capacity and cost, the fresh-draw test of a tuned rule.

Outside references:
- Chemostat washout (Monod 1950, Ann. Inst. Pasteur 79:390-410; Novick & Szilard 1950,
  Science 112:715-716 [from memory for pages]): a culture diluted faster than its
  specific growth rate cannot hold its density. For a pulse dilution of a share f of the
  volume once a day, the equivalent dilution rate is D = -ln(1 - f) d-1, and a culture
  growing at r d-1 near its floor holds only if f < 1 - exp(-r) (derived here).
- Schaefer (1954) Bull. Inter-Am. Trop. Tuna Comm. 1:27-56 [from memory for page
  details]: with the logistic flow map over an interval tau, X_pre = K/(1 + (K/R - 1)
  e^(-r tau)); the yield per interval X_pre - R is largest at R* = K/(1 + e^(r tau/2)),
  giving K tanh(r tau/4) per interval (derived from the closed-form logistic; tends to
  r K tau/4 as r tau -> 0).
- scipy.stats.ttest_rel (reference library): the paired t statistic equals the mean
  paired difference over its standard error.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from engine_cases import OPERATION, drivers, rules
from scipy import stats

from pondsim.operations.engine import integrate
from pondsim.operations.harvest import (
    RULE_CODES,
    cut_back_to_floor,
    days_at_floor_in_a_row,
    season_of_day,
    washed_out,
)
from pondsim.operations.plan_runs import Ensemble, PlanOutcome, paired_difference, run_plans
from pondsim.scenario import Policy, Season
from pondsim.studies.seasons import Limits, best_index, coordinate_search, keep_new_rule
from pondsim.studies.tune import tune_plan

ALL_YEAR = [Season("all", tuple(range(1, 13)))]


def _ensemble(d, op, **kw):
    return Ensemble(drivers=d, per_candidate=1, set_of_member=np.zeros(1, int),
                    operation=op, crash=None, seed=0, depth_m=d.depth_m, **kw)


def _dates(n_days):
    return pd.date_range("2025-01-01", periods=n_days, freq="D")


# ---- the floor ------------------------------------------------------------------------

def test_cut_back_leaves_exactly_the_floor():
    x = np.array([1000.0, 500.0, 120.0, 80.0, 0.0])
    frac, at_floor = cut_back_to_floor(np.full(5, 0.5), x, 100.0)
    # (1 - f) X >= floor, equality where the cut applied; nothing taken below the floor.
    np.testing.assert_allclose((1 - frac) * x, [500.0, 250.0, 100.0, 80.0, 0.0])
    np.testing.assert_array_equal(at_floor, [False, False, True, True, True])
    frac0, flag0 = cut_back_to_floor(np.full(5, 0.5), x, 0.0)  # no floor: rule as written
    np.testing.assert_array_equal(frac0, 0.5)
    assert not flag0.any()


def test_days_at_floor_in_a_row_counts_runs():
    b = np.array([[0, 1, 1, 0, 1, 1, 1, 1], [1, 1, 1, 1, 1, 1, 1, 1]], dtype=bool)
    np.testing.assert_array_equal(days_at_floor_in_a_row(b),
                                  [[0, 1, 2, 0, 1, 2, 3, 4], [1, 2, 3, 4, 5, 6, 7, 8]])
    np.testing.assert_array_equal(washed_out(b, 3).any(axis=1), [True, True])
    np.testing.assert_array_equal(washed_out(b, 4).any(axis=1), [False, True])


def test_no_harvest_leaves_the_culture_below_its_floor():
    n_days = 60
    d = drivers(300.0, n_days=n_days, mu_max=0.3, capacity=800.0)
    op = dataclasses.replace(OPERATION, floor_g_m3=OPERATION.inoculum_g_m3)
    fractions = np.array([0.05, 0.2, 0.5, 0.9])
    out = integrate(d, rules(4, n_days, code=RULE_CODES["fixed_fraction"],
                             fraction=fractions), op)
    took = out.harvest_fraction > 0
    x_before = np.where(took, out.removed / np.where(took, out.harvest_fraction, 1), np.inf)
    left = x_before - out.removed
    assert np.all(left[took] >= op.floor_g_m3 * (1 - 1e-12))


# ---- washout ----------------------------------------------------------------------------

@pytest.mark.parametrize("fraction, flagged", [(0.22, False), (0.30, True)])
def test_diluting_faster_than_growth_is_flagged(fraction, flagged):
    # Chemostat washout criterion for a daily pulse (module docstring): the culture
    # holds above its floor only if f < 1 - exp(-r (1 - X/K)) = 0.245 at X = 50 g m-3
    # (r = 0.3 d-1, K = 800 g m-3); 0.30 dilutes faster than it grows, 0.22 does not.
    r, k = 0.3, 800.0
    assert (fraction > 1 - np.exp(-r)) == flagged
    d = drivers(300.0, n_days=90, mu_max=r, capacity=k)
    op = dataclasses.replace(OPERATION, floor_g_m3=OPERATION.inoculum_g_m3)
    plan = [[Policy("f", "fixed_fraction", fraction=fraction, every_days=1)]]
    out = run_plans(_ensemble(d, op, washout_days=7), plan,
                    season_of_day(_dates(90), ALL_YEAR))
    assert bool(out.washed[0, 0, 0]) == flagged


def test_tune_never_chooses_a_washed_out_rule():
    # Floor above the best residual K/(1 + e^(r/2)) = 370 g m-3: rules held at the
    # floor every day yield most, and are washed out by definition.
    r, k, floor = 0.3, 800.0, 450.0
    n_days = 120
    d = drivers(300.0, n_days=n_days, mu_max=r, capacity=k)
    op = dataclasses.replace(OPERATION, floor_g_m3=floor, inoculum_g_m3=floor)
    ens = _ensemble(d, op, washout_days=7)
    period = season_of_day(_dates(n_days), ALL_YEAR)
    start = [Policy("daily 30 %", "fixed_fraction", fraction=0.30, every_days=1)]
    from pondsim.studies.tune import candidates

    pool = [[c] for c in candidates(k, floor)]
    every = run_plans(ens, pool, period)
    assert every.washed[int(np.argmax(every.value.mean(axis=1))), 0].all()  # would win
    plan, table = tune_plan(ens, ALL_YEAR, _dates(n_days), start, limit=1.0, maxfev=10)
    chosen = run_plans(ens, [plan], period)
    assert not chosen.washed.any()
    assert table.loc["all", "p_washout"] == 0 and table.loc["all", "within_limits"]


def test_best_index_skips_washout_and_limits():
    value = np.array([[10.0], [9.0], [8.0]])
    washed = np.array([[[True]], [[False]], [[False]]])
    crashed = np.array([[[False]], [[True]], [[False]]])
    out = PlanOutcome(value=value, product=value, volume_m3=value,
                      season_product=value[:, None, :], crashed=crashed, washed=washed,
                      farm_peak_m3_d=np.array([[100.0], [100.0], [300.0]]))
    assert best_index(out, Limits(0.5)) == (2, True)
    assert best_index(out, Limits(1.0)) == (1, True)
    # Nothing acceptable: washout ranks worst, then excess dewatering load (a physical
    # limit), then excess crash risk.
    assert best_index(out, Limits(0.5, dewatering_m3_per_d=200.0)) == (1, False)


# ---- surplus production with the floor in place -----------------------------------------

def test_fixed_interval_cut_back_reaches_the_surplus_production_optimum():
    r, k, tau = 0.5, 800.0, 3
    n_days = 240
    residual_star = k / (1 + np.exp(r * tau / 2))  # 256.7 g m-3 (module docstring)
    residuals = np.linspace(0.7, 1.3, 61) * residual_star
    d = drivers(300.0, n_days=n_days, mu_max=r, capacity=k)
    op = dataclasses.replace(OPERATION, floor_g_m3=OPERATION.inoculum_g_m3)  # 50 < R*
    out = integrate(d, rules(residuals.size, n_days, code=RULE_CODES["fixed_interval"],
                             every_days=tau, residual=residuals), op)
    rate = out.removed[:, -120:].sum(axis=1) / 120  # steady state [g m-3 d-1]
    best = int(np.argmax(rate))
    assert residuals[best] == pytest.approx(residual_star, rel=0.011)
    assert rate[best] == pytest.approx(k * np.tanh(r * tau / 4) / tau, rel=1e-4)


# ---- carry-over -------------------------------------------------------------------------

def test_season_choice_counts_the_stock_handed_on():
    # Slow culture (r = 0.05 d-1): stripping the stock at the end of January wins
    # January's slice but leaves February-December to regrow from the floor.
    r, k = 0.05, 1000.0
    d = drivers(300.0, n_days=365, mu_max=r, capacity=k)
    op = dataclasses.replace(OPERATION, floor_g_m3=50.0, inoculum_g_m3=500.0)
    ens = _ensemble(d, op)
    seasons = [Season("Jan", (1,)), Season("Feb-Dec", tuple(range(2, 13)))]
    period = season_of_day(_dates(365), seasons)
    steady = Policy("steady", "fixed_fraction", fraction=float(1 - np.exp(-r / 2)))
    miner = Policy("miner", "fixed_interval", every_days=30, residual_g_m3=50.0)
    out = run_plans(ens, [[steady, steady], [miner, miner], [miner, steady]], period)
    # The slice ranking (each policy's own whole-year run) names the miner for January...
    assert out.season_product[1, 0, 0] > out.season_product[0, 0, 0]
    # ... but over the year, mining January loses.
    assert out.value[2, 0] < out.value[0, 0]
    plan, _, _, _ = coordinate_search(ens, [steady, miner], [miner, steady], period,
                                      Limits(1.0))
    assert [p.name for p in plan] == ["steady", "steady"]


# ---- dewatering -------------------------------------------------------------------------

def _dewatering_case():
    r, k, n_days = 0.3, 800.0, 150
    d = drivers(300.0, n_days=n_days, mu_max=r, capacity=k)
    return d, season_of_day(_dates(n_days), ALL_YEAR), _dates(n_days)


def test_tune_keeps_the_farm_within_its_dewatering_capacity():
    d, period, dates = _dewatering_case()
    ens = _ensemble(d, OPERATION, pond_volume_m3=500.0, pond_count=8)
    start = [Policy("start", "fixed_fraction", fraction=0.1)]
    free, _ = tune_plan(ens, ALL_YEAR, dates, start, limit=1.0, refine=False)
    free_out = run_plans(ens, [free], period)
    cap = 0.5 * float(free_out.farm_peak_m3_d.max())
    capped, table = tune_plan(ens, ALL_YEAR, dates, start, limit=1.0, refine=False,
                              dewatering_m3_per_d=cap)
    capped_out = run_plans(ens, [capped], period)
    assert capped_out.farm_peak_m3_d.max() <= cap
    assert capped_out.value.mean() < free_out.value.mean()  # the limit binds
    assert table.loc["all", "within_limits"]


def test_dewatering_cost_turns_the_objective_into_net_product():
    d, period, dates = _dewatering_case()
    start = [Policy("start", "fixed_fraction", fraction=0.1)]
    kw = dict(pond_volume_m3=500.0, pond_count=8)
    plain = _ensemble(d, OPERATION, **kw)
    priced = _ensemble(d, OPERATION, dewatering_cost_kg_per_m3=0.2, **kw)
    a, _ = tune_plan(plain, ALL_YEAR, dates, start, limit=1.0, refine=False)
    b, _ = tune_plan(priced, ALL_YEAR, dates, start, limit=1.0, refine=False)
    both = run_plans(priced, [a, b], period)
    # Net value = biomass - 0.2 kg m-3 x volume: the priced choice processes less water
    # and nets more than the biomass-only choice, priced the same way.
    assert both.volume_m3[1].mean() < both.volume_m3[0].mean()
    assert both.value[1].mean() > both.value[0].mean()
    gross = run_plans(plain, [b], period)
    cost = 0.2e3 * both.volume_m3[1] * d.depth_m / 500.0  # g m-2
    np.testing.assert_allclose(gross.value[0] - cost, both.value[1], rtol=1e-12)


# ---- the fresh-draw test ---------------------------------------------------------------

def test_paired_difference_matches_scipy_paired_t():
    rng = np.random.default_rng(4)
    common = rng.normal(100, 20, 50)  # shared noise (common random numbers)
    a = common + rng.normal(1.0, 1.0, 50)
    b = common + rng.normal(0.0, 1.0, 50)
    mean, se = paired_difference(a, b)
    t = stats.ttest_rel(a, b).statistic  # scipy reference
    assert mean / se == pytest.approx(t, rel=1e-12)
    assert se < np.std(a - common) * 2  # the shared noise is gone from the SE


def test_a_tuned_rule_must_beat_the_existing_one_on_fresh_draws():
    ok = (0.0, 0.0, 0.0)
    # Equal standing: the paired gain must exceed z standard errors (z = 2).
    assert keep_new_rule(ok, ok, gain=2.1, se=1.0, z=2.0)
    assert not keep_new_rule(ok, ok, gain=1.9, se=1.0, z=2.0)
    assert not keep_new_rule(ok, ok, gain=-5.0, se=1.0, z=2.0)
    # A rule that breaks the limits less wins whatever the gain; washout counts first.
    assert keep_new_rule(ok, (0.0, 0.0, 0.7), gain=-50.0, se=1.0, z=2.0)
    assert not keep_new_rule((0.0, 0.0, 0.02), ok, gain=50.0, se=1.0, z=2.0)
    assert keep_new_rule((0.0, 0.5, 0.0), (0.1, 0.0, 0.0), gain=0.0, se=1.0, z=2.0)


def test_lead_policy_passes_over_rules_that_wash_the_culture_out():
    """The business case leads with the best P50 among rules that keep the culture above
    its viable floor (compare's per-season rule, applied to the year)."""
    import pandas as pd
    import xarray as xr

    from pondsim.results.tables import lead_policy

    annual = pd.DataFrame({"P50_t_ha_yr": [30.0, 20.0, 10.0]},
                          index=pd.Index(["mine", "steady", "slow"], name="policy"))
    washed = np.zeros((3, 4, 5), dtype=np.int8)  # policy x member x day
    washed[0, 3, 2] = 1  # one member of the highest-yield rule washes out once
    ds = xr.Dataset({"washed_out": (("policy", "member", "day"), washed),
                     "at_floor": (("policy", "member", "day"), washed.astype(bool))},
                    coords={"policy": ["mine", "steady", "slow"]})
    assert lead_policy(annual, ds) == "steady"
    ds["washed_out"][:] = 1  # every rule washes out: the highest P50, flagged elsewhere
    assert lead_policy(annual, ds) == "mine"
    assert lead_policy(annual, ds.drop_vars(["washed_out", "at_floor"])) == "mine"
