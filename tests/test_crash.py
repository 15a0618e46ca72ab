"""Crash risk of named causes: each hazard kernel alone, limits and monotonicity, the
competing-risk booking of causes, Monte Carlo crash probabilities against the hazard
computed directly, reproducible random streams, restarts, salvage apart from harvest, and
surplus-production optima of the threshold policy.

Outside references:
- Survival analysis identity: with a deterministic daily hazard h_d, the probability of at
  least one event over a period is 1 - exp(-sum h_d); with independent competing causes
  the share of events of cause i is h_i / h (Kalbfleisch & Prentice 2002, The
  Statistical Analysis of Failure Time Data, ch. 1 and 8; from memory). The binomial
  standard error sqrt(p(1-p)/n) bounds the Monte Carlo estimates.
- Q10 temperature coefficient: a rate multiplied by Q10 per 10 K (common practice in
  physiology; the definition, not a measured value).
- Schaefer (1954) Bull. Inter-Am. Trop. Tuna Comm. 1:27-56 [from memory for page details]:
  maximal surplus production r K / 4 at K / 2.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules

from pondsim.operations import crash as cr
from pondsim.operations.crash import CAUSES, CrashModel
from pondsim.operations.engine import STATUS_RESTARTING, check_closure, integrate
from pondsim.operations.harvest import RULE_CODES

QUIET = CrashModel(background_per_d=0.0, starvation_hazard_per_d=0.0,
                   heat_hazard_per_d_h=0.0, cold_hazard_per_d_k=0.0)


def _with_water(d, water_c, t_max=38.0):
    """Drivers with an hourly water temperature for the weather terms."""
    w = np.broadcast_to(np.asarray(water_c, float), d.par.shape).copy()
    return dataclasses.replace(d, water_temperature=w, t_max_c=np.array([t_max]))


# --------------------------------------------------------------------------------------
# Kernels, each cause alone
# --------------------------------------------------------------------------------------
def test_background_alone_follows_q10_and_is_flat_without_it():
    t = np.array([10.0, 20.0, 30.0])
    h = cr.background_hazard(t, 0.004, 20.0, 2.0)
    # Definition of Q10: x2 per +10 K, /2 per -10 K.
    np.testing.assert_allclose(h, [0.002, 0.004, 0.008], rtol=1e-12)
    np.testing.assert_allclose(cr.background_hazard(t, 0.004, 20.0, 1.0), 0.004)
    assert np.all(np.diff(cr.background_hazard(np.linspace(0, 40, 9), 0.004, 20, 3.0)) > 0)


@pytest.mark.parametrize("cause", ["starvation", "heat", "cold"])
def test_zero_stress_gives_the_background_hazard_and_stress_raises_it(cause):
    model = CrashModel(background_per_d=0.003, background_q10=2.0)
    stress = np.linspace(0.0, 5.0, 11)
    kwargs = {"temp_mean_c": 20.0, "heat_hours": 0.0, "cold_shock": 0.0,
              "net_loss_per_d": 0.0}
    key = {"starvation": "net_loss_per_d", "heat": "heat_hours", "cold": "cold_shock"}[cause]
    kwargs[key] = stress
    parts = model.cause_hazards(**kwargs)
    total = parts.sum(axis=0)
    assert total[0] == pytest.approx(0.003)  # zero stress: background alone (at T_ref)
    assert np.all(np.diff(total) > 0)  # monotonic in its stress
    i = CAUSES.index(cause)
    others = np.delete(parts, i, axis=0)
    np.testing.assert_allclose(others[0], 0.003)  # only its own term moves
    assert np.all(others[1:] == 0)


def test_starvation_kernel_scale_and_net_loss_index():
    # 0.1 d-1 of net loss gives starvation_hazard_per_d (the key's definition).
    assert cr.starvation_hazard(0.1, 0.02) == pytest.approx(0.02)
    rates = np.array([[0.3, -0.1, -0.2, -0.3, 0.6]])
    got = cr.trailing_net_loss(rates, 3)
    # Hand: means over the days since inoculation, at most 3: 0.3, 0.1, 0, -0.2, 0.0333
    np.testing.assert_allclose(got[0], [0.0, 0.0, 0.0, 0.2, 0.0], atol=1e-12)
    for day in range(5):  # the engine's day-by-day form gives the same
        today = cr.net_loss_today(rates, day, np.array([day]), 3)
        assert today[0] == pytest.approx(got[0, day], abs=1e-12)


def test_heat_hours_and_cold_shock_by_hand():
    t = np.r_[np.full(24, 30.0), np.full(10, 37.0), np.full(14, 39.5),  # day 1: 14 h hot
              np.full(24, 31.0), np.full(24, 22.0)][None, :]
    h = cr.hours_above(t, np.array([38.0]))
    np.testing.assert_array_equal(h, [[0, 14, 0, 0]])
    mean = cr.daily_mean(t)
    shock = cr.cold_shock_k(mean, 3, 3.0)
    day1 = (10 * 37.0 + 14 * 39.5) / 24
    # Day 2: mean of days 0-1 less day 2 less the onset; day 3: mean of days 0-2.
    np.testing.assert_allclose(shock[0], [0, 0, (30.0 + day1) / 2 - 31.0 - 3.0,
                                          (30.0 + day1 + 31.0) / 3 - 22.0 - 3.0])
    assert cr.heat_hazard(14, 0.02) == pytest.approx(0.28)
    assert cr.cold_hazard(2.0, 0.005) == pytest.approx(0.01)


def test_causes_are_booked_in_proportion_to_their_hazards():
    # Competing risks (Kalbfleisch & Prentice 2002, ch. 8): P(cause i | crash) = h_i / h.
    rng = np.random.default_rng(5)
    n = 200_000
    parts = np.array([0.05, 0.2, 0.1, 0.15])[:, None] * np.ones((1, n))
    hit, cause = cr.assign_cause(rng.random(n), parts)
    p = 1 - np.exp(-0.5)
    assert hit.mean() == pytest.approx(p, abs=4 * np.sqrt(p * (1 - p) / n))
    share = np.bincount(cause[hit], minlength=5)[1:] / hit.sum()
    expected = parts[:, 0] / parts[:, 0].sum()
    se = np.sqrt(expected * (1 - expected) / hit.sum())
    assert np.all(np.abs(share - expected) < 4 * se)
    assert np.all(cause[~hit] == 0)


# --------------------------------------------------------------------------------------
# Through the engine
# --------------------------------------------------------------------------------------
def _warm_case(n_days=60):
    """Logistic culture in water that warms from 20 to 32 degC with a hot spell."""
    d = drivers(300.0, n_days=n_days, mu_max=0.8, capacity=1000.0)
    water = np.repeat(np.linspace(20.0, 32.0, n_days), 24)
    hot = np.repeat((np.arange(n_days) >= 40) & (np.arange(n_days) < 45), 24)
    water = np.where(hot & (np.arange(n_days * 24) % 24 >= 10) & (np.arange(n_days * 24)
                                                                  % 24 < 16), 39.0, water)
    return _with_water(d, water)


def test_crash_probability_matches_direct_hazard():
    n_days = 60
    d = _warm_case(n_days)
    model = CrashModel(background_per_d=0.004, heat_hazard_per_d_h=0.03)
    stress = model.weather_stress(d.water_temperature, d.t_max_c)
    free = integrate(d, rules(1, n_days), OPERATION)
    loss = cr.trailing_net_loss(free.growth_rate, model.window_days)
    h = model.cause_hazards(stress.temp_mean_c, stress.heat_hours, stress.cold_shock_k,
                            loss).sum(axis=0)[0]
    p_direct = -np.expm1(-h.sum())
    n = 4000
    mc = integrate(d, rules(n, n_days), OPERATION, crash=model, seed=7)
    first = mc.crashed.argmax(axis=1)
    p_mc = mc.crashed.any(axis=1).mean()
    se = np.sqrt(p_direct * (1 - p_direct) / n)
    assert abs(p_mc - p_direct) < 4 * se  # binomial bound, 4 standard errors
    assert 0.2 < p_direct < 0.95  # the case is informative, not degenerate
    # The engine's hazard before the first crash is the one computed from daily arrays.
    m = int(np.flatnonzero(mc.crashed.any(axis=1))[0])
    np.testing.assert_allclose(mc.hazard[m, :first[m] + 1], h[:first[m] + 1], rtol=1e-6)
    # Heat crashes fall on the hot days and only there.
    heat_days = np.flatnonzero((mc.cause == 1 + CAUSES.index("heat")).any(axis=0))
    assert heat_days.size and heat_days.min() >= 40 and heat_days.max() <= 44
    check_closure(mc.ledger)  # closes with crashes, salvage and restarts


def test_no_floor_artefact_on_cold_dark_days():
    # A week of zero light and cold water (K = 0, no growth): the starvation hazard is
    # only what the slow cold respiration gives, not a jump from "ln K falling to a floor".
    n_days = 30
    par = diurnal_par(n_days)
    dark = np.repeat((np.arange(n_days) >= 10) & (np.arange(n_days) < 17), 24)
    par = np.where(dark, 0.0, par)
    m_cold = 0.05 * 1.07 ** (4.0 - 20.0)  # maintenance at 4 degC [d-1]
    d = drivers(par, maintenance=m_cold, capacity=np.where(
        np.arange(n_days) >= 10, 0.0, 600.0), mu_max=1.0, growth_form="logistic")
    d = _with_water(d, 4.0)
    model = CrashModel(background_per_d=0.0, cold_hazard_per_d_k=0.0)
    out = integrate(d, rules(1, n_days), OPERATION, crash=model, seed=0)
    h = out.hazard[0]
    assert np.isfinite(h).all()
    # Net loss is at most the cold maintenance rate: h <= c_s * m / 0.1.
    assert h.max() <= model.starvation_hazard_per_d * m_cold / 0.1 * (1 + 1e-6)
    check_closure(out.ledger)


def test_same_seed_same_result_different_seed_differs():
    n_days = 60
    d = _warm_case(n_days)
    model = CrashModel(background_per_d=0.01)
    a = integrate(d, rules(50, n_days), OPERATION, crash=model, seed=3)
    b = integrate(d, rules(50, n_days), OPERATION, crash=model, seed=3)
    c = integrate(d, rules(50, n_days), OPERATION, crash=model, seed=4)
    np.testing.assert_array_equal(a.crashed, b.crashed)
    np.testing.assert_array_equal(a.cause, b.cause)
    np.testing.assert_array_equal(a.density, b.density)
    assert not np.array_equal(a.crashed, c.crashed)
    # A member's stream does not depend on how many members run.
    few = integrate(d, rules(5, n_days), OPERATION, crash=model, seed=3)
    np.testing.assert_array_equal(few.crashed, a.crashed[:5])


def test_restart_takes_the_pond_out_and_salvage_is_not_harvest():
    n_days = 40
    d = drivers(300.0, n_days=n_days, mu_max=0.8, capacity=800.0)
    model = dataclasses.replace(QUIET, background_per_d=0.2, loss_fraction=0.7)
    op = dataclasses.replace(OPERATION, restart_days=5)
    out = integrate(d, rules(200, n_days), op, crash=model, seed=11)
    # First crash of a member that does not crash again on its reinoculation day.
    m, day = next((m, int(np.flatnonzero(out.crashed[m])[0])) for m in range(200)
                  if out.crashed[m, :30].any()
                  and not out.crashed[m, int(np.flatnonzero(out.crashed[m])[0]) + 6])
    assert out.density[m, day] == 0
    assert np.all(out.status[m, day:day + 6] == STATUS_RESTARTING)
    assert np.all(out.density[m, day + 1:day + 6] == 0)
    assert out.density[m, day + 6] > 0  # reinoculated at the start of day + 6
    assert out.lost[m, day] > 0 and out.salvaged[m, day] > 0  # loss and salvage
    assert out.lost[m, day] / (out.lost[m, day] + out.salvaged[m, day]) == pytest.approx(0.7)
    assert out.cause[m, day] == 1  # background is the only cause here
    # No harvest rule: nothing removed, whatever the crashes left.
    assert out.removed.sum() == 0 and out.salvaged.sum() > 0
    check_closure(out.ledger)


def test_best_threshold_policy_reaches_surplus_production_maximum():
    r, k = 0.5, 800.0
    n_days = 300
    d = drivers(300.0, n_days=n_days, mu_max=r, capacity=k)
    residuals = np.linspace(0.30, 0.60, 31) * k
    width = np.array([1.05, 1.15, 1.3, 1.5])
    res, wid = np.meshgrid(residuals, width, indexing="ij")
    triggers = (res * wid).ravel()
    rl = rules(triggers.size, n_days, code=RULE_CODES["threshold"], trigger=triggers,
               residual=res.ravel())
    out = integrate(d, rl, OPERATION)
    yield_per_day = out.removed[:, -100:].mean(axis=1)
    best = yield_per_day.max()
    # Schaefer (1954): r K / 4; a once-a-day threshold rule reaches the discrete-harvest
    # optimum K tanh(r/4) (derived in test_engine) and so lies within 1 % of r K / 4.
    assert best == pytest.approx(r * k / 4.0, rel=0.01)
    assert best <= k * np.tanh(r / 4.0) * (1 + 1e-6)
    # The best rule brackets K/2: it harvests every day, down to the post-harvest stock of
    # the discrete optimum, e^(-r/2) K / (1 + e^(-r/2)) (within one grid step of 8 g m-3).
    i = int(np.argmax(yield_per_day))
    post = np.exp(-r / 2) * k / (1 + np.exp(-r / 2))
    assert abs(res.ravel()[i] - post) <= 8.0 + 1e-9
    assert np.all(out.harvest_fraction[i, -100:] > 0)


def test_dull_days_starve_a_dense_self_shading_culture():
    # A run of three dull days in a bright fortnight: a dense culture loses biomass and
    # its starvation hazard rises there, and nowhere in the bright days before.
    n_days = 20
    par = diurnal_par(n_days)
    dull = np.repeat(np.isin(np.arange(n_days), [10, 11, 12]), 24)
    par = np.where(dull, par * 0.15, par)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m, capacity=1.0, mu_max=1.4,
                light_param=320.0, k_biomass=0.15, k_background=3.0,
                growth_form="self_shading")
    model = dataclasses.replace(QUIET, starvation_hazard_per_d=0.05)
    op = dataclasses.replace(OPERATION, inoculum_g_m3=300.0)
    out = integrate(d, rules(1, n_days), op, crash=model, seed=0)
    h = out.hazard[0]
    assert h[10:14].max() > 0.01
    assert np.all(h[3:9] < 1e-3)
