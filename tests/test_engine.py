"""The engine against closed forms, surplus-production theory and scipy's solve_ivp.

Outside references:
- Closed-form logistic B(t) = K / (1 + (K/B0 - 1) e^(-rt)) (Verhulst; as quoted for
  Schaefer 1954 in REFERENCES.md).
- Schaefer (1954) Bull. Inter-Am. Trop. Tuna Comm. 1:27-56 [from memory for page details]:
  maximal surplus production r*K/4 at B* = K/2 under continuous harvesting.
- scipy.integrate.solve_ivp (reference library), RK45 at rtol 1e-8, integrated hour by
  hour (knot to knot) so that it never steps across a change of forcing.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules
from scipy.integrate import solve_ivp

from pondsim.operations.engine import HOURS_PER_DAY, check_closure, integrate
from pondsim.operations.harvest import RULE_CODES
from pondsim.pond import kinetics


def test_logistic_constant_forcing_matches_closed_form():
    # PAR at the Steele optimum gives f(I) = 1, so r = mu_max exactly.
    r, k, x0 = 0.8, 900.0, 50.0
    d = drivers(300.0, n_days=20, mu_max=r, capacity=k, light_param=300.0)
    out = integrate(d, rules(1, 20), dataclasses.replace(OPERATION, inoculum_g_m3=x0))
    t = np.arange(1, 21)  # end of each day [d]
    closed = k / (1.0 + (k / x0 - 1.0) * np.exp(-r * t))  # Verhulst logistic, closed form
    np.testing.assert_allclose(out.density[0], closed, rtol=1e-6)


def _discrete_optimum(r, k):
    """Best daily pulse fraction and yield for the logistic, exact.

    Over one day the logistic flow map is x -> K / (1 + (K/x - 1) e^(-r)); with a pulse
    harvest of fraction h once a day the steady pre-harvest stock is
    X = K (1 - a/(1-h)) / (1 - a), a = e^(-r), and the yield h X is maximal at
    h* = 1 - e^(-r/2) with Y* = K tanh(r/4). As r -> 0, Y* -> r K / 4 (Schaefer 1954):
    the discrete correction is tanh(r/4) / (r/4) (0.9948 at r = 0.5 d-1).
    """
    return 1.0 - np.exp(-r / 2.0), k * np.tanh(r / 4.0)


def test_fixed_fraction_best_yield_is_surplus_production_maximum():
    r, k = 0.5, 800.0
    n_days = 300
    fractions = np.linspace(0.05, 0.40, 71)
    d = drivers(300.0, n_days=n_days, mu_max=r, capacity=k)
    rl = rules(fractions.size, n_days, code=RULE_CODES["fixed_fraction"], fraction=fractions)
    out = integrate(d, rl, OPERATION)
    yield_per_day = out.removed[:, -30:].mean(axis=1)  # steady state, g m-3 d-1
    best = int(np.argmax(yield_per_day))
    h_star, y_star = _discrete_optimum(r, k)
    # Exact discrete optimum of the daily pulse harvest (derived in _discrete_optimum).
    assert abs(fractions[best] - h_star) <= 0.005 + 1e-12
    assert yield_per_day[best] == pytest.approx(y_star, rel=1e-3)
    # Schaefer (1954): r K / 4, within 1 % once the stated discrete correction is applied
    # and within 1 % even without it at r = 0.5 d-1.
    assert yield_per_day[best] == pytest.approx(r * k / 4.0, rel=0.01)
    # ... and the stock swings around K/2: exactly K/(1 + e^(-r/2)) before the harvest
    # of the optimal fraction h*, and e^(-r/2) times that after it.
    pre = out.removed[:, -1] / fractions
    root_a = np.exp(-r / 2.0)
    pre_star = k / (1.0 + root_a)
    assert pre[best] == pytest.approx(k * (1 - np.exp(-r) / (1 - fractions[best]))
                                      / (1 - np.exp(-r)), rel=1e-4)
    assert root_a * pre_star < k / 2 < pre_star


def test_self_shading_settles_at_computed_capacity():
    from pondsim.pond.capacity import daily_carrying_capacity

    n_days = 80
    par = diurnal_par(n_days)
    ft, m = diurnal_temp_factor(n_days)
    kw = dict(mu_max=1.4, model="steele", param=320.0, k_biomass=0.15,
              k_background=3.0, depth_m=0.25)
    k_day = daily_carrying_capacity(par[:24][None, :], ft[:24][None, :], m[:24][None, :],
                                    **kw)[0]
    d = drivers(par, temp_factor=ft, maintenance=m, capacity=k_day,
                mu_max=kw["mu_max"], light_param=kw["param"], k_biomass=kw["k_biomass"],
                k_background=kw["k_background"], growth_form="self_shading")
    out = integrate(d, rules(1, n_days), OPERATION)
    # Density at the same hour on successive days converges to K (within 1 %).
    assert out.density[0, -1] == pytest.approx(k_day, rel=0.01)
    assert abs(out.density[0, -1] - out.density[0, -2]) < 1e-3 * k_day


def _reference_solve_ivp(d, x0, harvest_fraction, harvest_hour, n_days):
    """Per-member reference: solve_ivp RK45 (rtol 1e-8) hour by hour, same harvests
    (daily from the day after inoculation)."""
    x = x0
    harvested = 0.0
    par, ft, m = d.par[0], d.temp_factor[0], d.maintenance[0]
    mu, p = d.mu_max[0], d.light_param[0]
    kb, kbg, depth = d.k_biomass[0], d.k_background[0], d.depth_m
    for hour in range(n_days * HOURS_PER_DAY):
        if hour % HOURS_PER_DAY == harvest_hour and hour >= HOURS_PER_DAY:
            take = harvest_fraction * x
            harvested += take
            x -= take

        def rhs(t, y, i0=par[hour], f=ft[hour], mm=m[hour]):
            k = kb * y + kbg
            avg = kinetics.depth_averaged_response("steele", i0, k, depth, p)
            return (mu * f * avg - mm) * y

        sol = solve_ivp(rhs, (0.0, 1.0 / HOURS_PER_DAY), [x], rtol=1e-8, atol=1e-10)
        x = float(sol.y[0, -1])
    return harvested, x


def test_annual_harvest_agrees_with_solve_ivp():
    n_days = 45  # a short season keeps the per-hour reference quick
    par = diurnal_par(n_days, peak=1900.0)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m, capacity=1.0, mu_max=1.4,
                light_param=320.0, k_biomass=0.15, k_background=3.0,
                growth_form="self_shading")
    frac = 0.25
    out = integrate(d, rules(1, n_days, code=RULE_CODES["fixed_fraction"], fraction=frac),
                    OPERATION)
    ref_harvest, ref_final = _reference_solve_ivp(d, OPERATION.inoculum_g_m3, frac,
                                                  OPERATION.harvest_hour, n_days)
    # Issue requirement: harvested biomass within 0.1 % of solve_ivp at rtol 1e-8.
    assert out.removed[0].sum() == pytest.approx(ref_harvest, rel=1e-3)
    assert out.density[0, -1] == pytest.approx(ref_final, rel=1e-3)


def test_threshold_policy_keeps_density_between_residual_and_trigger():
    n_days = 120
    par = diurnal_par(n_days)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m, mu_max=1.4, light_param=320.0,
                k_biomass=0.15, k_background=3.0, growth_form="self_shading")
    trigger, residual = 300.0, 180.0  # K of this forcing is about 376 g m-3
    out = integrate(d, rules(1, n_days, code=RULE_CODES["threshold"], trigger=trigger,
                             residual=residual), OPERATION)
    harvested_days = np.flatnonzero(out.harvest_fraction[0] > 0)
    assert harvested_days.size > 5
    # After each harvest the density at the harvest hour is the residual: the removed
    # share is exactly 1 - residual / X.
    x_before = out.removed[0, harvested_days] / out.harvest_fraction[0, harvested_days]
    assert np.all(x_before >= trigger)
    np.testing.assert_allclose(x_before - out.removed[0, harvested_days], residual,
                               rtol=1e-12)
    # Once the culture first reached the trigger, end-of-day density stays within the
    # band widened by one day's net growth (decisions are taken once a day).
    after = out.density[0, harvested_days[0]:]
    day_growth = np.max(np.diff(out.density[0]) / out.density[0, :-1])
    assert after.min() >= residual * 0.9
    assert after.max() <= trigger * (1 + day_growth)


def test_fixed_interval_dates_are_exact():
    n_days = 60
    d = drivers(300.0, n_days=n_days, mu_max=0.6, capacity=900.0)
    out = integrate(d, rules(1, n_days, code=RULE_CODES["fixed_interval"], every_days=5,
                             residual=100.0), OPERATION)
    days = np.flatnonzero(out.harvest_fraction[0] > 0)
    # Inoculated on day 0; the first harvest falls due every_days later, then every 5 d.
    np.testing.assert_array_equal(days, np.arange(5, n_days, 5))


def test_harvest_capacity_and_minimum_density_are_honoured():
    n_days = 30
    d = drivers(300.0, n_days=n_days, mu_max=0.6, capacity=900.0)
    op = dataclasses.replace(OPERATION, max_fraction=0.1, min_density_g_m3=200.0)
    out = integrate(d, rules(1, n_days, code=RULE_CODES["fixed_fraction"], fraction=0.5),
                    op)
    frac = out.harvest_fraction[0]
    assert frac.max() == pytest.approx(0.1)
    x_at_harvest = np.where(frac > 0, out.removed[0] / np.where(frac > 0, frac, 1), np.inf)
    assert np.all(x_at_harvest[frac > 0] >= 200.0)
    first = np.flatnonzero(frac > 0)[0]
    assert out.density[0, first - 1] < 200.0 * 1.2  # it waited for the minimum density


def test_late_start_keeps_pond_empty_until_inoculation():
    n_days = 20
    d = drivers(300.0, n_days=n_days)
    out = integrate(d, rules(1, n_days), dataclasses.replace(OPERATION, start_day=10))
    assert np.all(out.density[0, :10] == 0)
    assert np.all(out.status[0, :10] == 2)
    assert out.density[0, 10] > OPERATION.inoculum_g_m3
    check_closure(out.ledger)


def test_ledger_catches_an_imbalance():
    from pondsim.operations.engine import LedgerError

    ledger = {k: np.array([1.0]) for k in ("inoculated", "grown", "respired", "removed",
                                           "lost", "final")}
    with pytest.raises(LedgerError):
        check_closure(ledger)


def test_daily_gross_growth_and_respiration_close_the_day_by_day_balance():
    # The per-day terms are the ledger's terms day by day: for every day,
    # density(d) = density(d-1) + inoculated + grown - respired - removed - lost
    # (mass balance of the culture, the ledger identity applied to one day).
    n_days = 40
    par = diurnal_par(n_days, peak=1900.0)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m, mu_max=1.4, light_param=320.0,
                k_biomass=0.15, k_background=3.0, growth_form="self_shading")
    out = integrate(d, rules(2, n_days, code=RULE_CODES["fixed_fraction"],
                             fraction=np.array([0.1, 0.3])), OPERATION)
    assert out.grown.shape == out.respired.shape == (2, n_days)
    np.testing.assert_allclose(out.grown.sum(axis=1), out.ledger["grown"], rtol=1e-12)
    np.testing.assert_allclose(out.respired.sum(axis=1), out.ledger["respired"],
                               rtol=1e-12)
    previous = np.concatenate([np.zeros((2, 1)), out.density[:, :-1]], axis=1)
    inoculated = np.zeros((2, n_days))
    inoculated[:, 0] = OPERATION.inoculum_g_m3
    balance = previous + inoculated + out.grown - out.respired - out.removed - out.lost
    np.testing.assert_allclose(balance, out.density, rtol=1e-9, atol=1e-9)
    assert np.all(out.grown >= 0) and np.all(out.respired >= 0)
    # dark hours respire, light hours grow: both terms are present every day
    assert np.all(out.respired[:, 1:] > 0) and np.all(out.grown[:, 1:] > 0)
