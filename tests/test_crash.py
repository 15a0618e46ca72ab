"""Crash risk: Monte Carlo crash probabilities against the hazard computed directly, risk
flags on a synthetic K drop, reproducible random streams, ledger closure with restarts,
and surplus-production optima of the threshold policy.

Outside references:
- Survival analysis identity: with a deterministic daily hazard h_d, the probability of at
  least one event over a period is 1 - exp(-sum h_d) (e.g. Kalbfleisch & Prentice 2002,
  The Statistical Analysis of Failure Time Data, ch. 1; from memory). The binomial
  standard error sqrt(p(1-p)/n) bounds the Monte Carlo estimate.
- Schaefer (1954) Bull. Inter-Am. Trop. Tuna Comm. 1:27-56 [from memory for page details]:
  maximal surplus production r K / 4 at K / 2.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules

from pondsim.operations.crash import CrashModel
from pondsim.operations.engine import STATUS_RESTARTING, check_closure, integrate
from pondsim.operations.harvest import RULE_CODES


def _stressed_case(n_days=60):
    """Logistic culture near K when K falls by half on day 30 (synthetic step drop)."""
    k = np.where(np.arange(n_days) < 30, 1000.0, 500.0)
    return drivers(300.0, n_days=n_days, mu_max=0.8, capacity=k)


def test_crash_probability_matches_direct_hazard():
    n_days = 60
    d = _stressed_case(n_days)
    crash = CrashModel(base_hazard_per_d=0.002, stress_hazard_per_d=0.3)
    no_harvest = rules(1, n_days)
    # Crash-free trajectory: the hazard path every member follows until its first crash.
    free = integrate(d, no_harvest, OPERATION)
    smooth = crash.smoothed(d.capacity[0])
    h = crash.hazard(free.density[0], smooth, crash.drop_index(smooth))
    p_direct = -np.expm1(-h.sum())
    n = 4000
    mc = integrate(d, rules(n, n_days), OPERATION, crash=crash, seed=7)
    p_mc = (mc.crashed.sum(axis=1) > 0).mean()
    se = np.sqrt(p_direct * (1 - p_direct) / n)
    assert abs(p_mc - p_direct) < 4 * se  # binomial bound, 4 standard errors
    assert 0.2 < p_direct < 0.95  # the case is informative, not degenerate
    check_closure(mc.ledger)  # closes with crashes, salvage and restarts


def test_step_drop_flags_the_right_days_and_k_half_is_safer():
    n_days = 60
    d = _stressed_case(n_days)
    crash = CrashModel(window_days=3)
    at_k = integrate(d, rules(1, n_days), OPERATION, crash=crash, seed=1)
    # Surplus-production operating point: daily pulse h* = 1 - exp(-r/2) keeps X near K/2.
    half = integrate(d, rules(1, n_days, code=RULE_CODES["fixed_fraction"],
                              fraction=1 - np.exp(-0.4)), OPERATION, crash=crash, seed=1)
    stress_at_k = at_k.hazard[0] - crash.base_hazard_per_d
    flagged = np.flatnonzero(stress_at_k > crash.base_hazard_per_d)
    # K falls on day 30; the 3-day mean keeps falling until day 32 and the drop index
    # (window 3 d) stays positive until day 34: risk days lie there and nowhere else.
    assert flagged.size >= 3
    assert flagged.min() >= 30
    assert flagged.max() <= 34
    stress_half = half.hazard[0] - crash.base_hazard_per_d
    assert (stress_half > crash.base_hazard_per_d).sum() < flagged.size


def test_same_seed_same_result_different_seed_differs():
    n_days = 60
    d = _stressed_case(n_days)
    crash = CrashModel(base_hazard_per_d=0.01)
    a = integrate(d, rules(50, n_days), OPERATION, crash=crash, seed=3)
    b = integrate(d, rules(50, n_days), OPERATION, crash=crash, seed=3)
    c = integrate(d, rules(50, n_days), OPERATION, crash=crash, seed=4)
    np.testing.assert_array_equal(a.crashed, b.crashed)
    np.testing.assert_array_equal(a.density, b.density)
    assert not np.array_equal(a.crashed, c.crashed)
    # A member's stream does not depend on how many members run.
    few = integrate(d, rules(5, n_days), OPERATION, crash=crash, seed=3)
    np.testing.assert_array_equal(few.crashed, a.crashed[:5])


def test_restart_takes_the_pond_out_then_reinoculates():
    n_days = 40
    d = drivers(300.0, n_days=n_days, mu_max=0.8, capacity=800.0)
    crash = CrashModel(base_hazard_per_d=0.2, stress_hazard_per_d=0.0, loss_fraction=0.7)
    op = dataclasses.replace(OPERATION, restart_days=5)
    out = integrate(d, rules(200, n_days), op, crash=crash, seed=11)
    # First crash of a member that does not crash again on its reinoculation day.
    m, day = next((m, int(np.flatnonzero(out.crashed[m])[0])) for m in range(200)
                  if out.crashed[m, :30].any()
                  and not out.crashed[m, int(np.flatnonzero(out.crashed[m])[0]) + 6])
    assert out.density[m, day] == 0
    assert np.all(out.status[m, day:day + 6] == STATUS_RESTARTING)
    assert np.all(out.density[m, day + 1:day + 6] == 0)
    assert out.density[m, day + 6] > 0  # reinoculated at the start of day + 6
    assert out.lost[m, day] > 0 and out.removed[m, day] > 0  # loss and salvage
    assert out.lost[m, day] / (out.lost[m, day] + out.removed[m, day]) == pytest.approx(0.7)
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


def test_self_shading_drop_on_dark_days_raises_hazard():
    # A run of three dull days in a bright fortnight: K falls, a dense culture is at risk.
    n_days = 20
    par = diurnal_par(n_days)
    dull = np.repeat(np.isin(np.arange(n_days), [10, 11, 12]), 24)
    par = np.where(dull, par * 0.15, par)
    ft, m = diurnal_temp_factor(n_days)
    from pondsim.pond.capacity import daily_carrying_capacity

    k = daily_carrying_capacity(par.reshape(n_days, 24), ft.reshape(n_days, 24),
                                m.reshape(n_days, 24), mu_max=1.4, model="steele",
                                param=320.0, k_biomass=0.15, k_background=3.0, depth_m=0.25)
    assert k[11] < 0.5 * k[8]
    d = drivers(par, temp_factor=ft, maintenance=m, capacity=k, mu_max=1.4,
                light_param=320.0, k_biomass=0.15, k_background=3.0,
                growth_form="self_shading")
    crash = CrashModel()
    op = dataclasses.replace(OPERATION, inoculum_g_m3=300.0)
    out = integrate(d, rules(1, n_days), op, crash=crash, seed=0)
    stress = out.hazard[0] - crash.base_hazard_per_d
    assert stress[10:14].max() > 10 * crash.base_hazard_per_d
    assert np.all(stress[3:9] < crash.base_hazard_per_d)
