"""Small driver sets for engine tests (not a test module)."""

from __future__ import annotations

import numpy as np

from pondsim.operations.engine import HOURS_PER_DAY, Drivers, Operation
from pondsim.operations.harvest import HarvestRules
from pondsim.pond import kinetics


def drivers(par, *, temp_factor=1.0, maintenance=0.0, capacity=1000.0, mu_max=1.0,
            light_param=300.0, k_biomass=0.2, k_background=2.0, light_model="steele",
            growth_form="logistic", depth_m=0.25, n_days=None) -> Drivers:
    """One driver set from hourly arrays (or scalars repeated over ``n_days``)."""
    par = np.atleast_1d(np.asarray(par, dtype=float))
    if n_days is not None and par.size == 1:
        par = np.full(n_days * HOURS_PER_DAY, par[0])
    n_hours = par.size
    n_days = n_hours // HOURS_PER_DAY

    def hourly(v):
        return np.broadcast_to(np.asarray(v, dtype=float), (n_hours,))[None, :].copy()

    return Drivers(
        par=par[None, :], temp_factor=hourly(temp_factor), maintenance=hourly(maintenance),
        capacity=np.broadcast_to(np.asarray(capacity, float), (n_days,))[None, :].copy(),
        mu_max=np.array([mu_max]), light_param=np.array([light_param]),
        k_biomass=np.array([k_biomass]), k_background=np.array([k_background]),
        light_model=light_model, growth_form=growth_form, depth_m=depth_m)


def rules(n, n_days, *, code=0, fraction=np.nan, every_days=1, trigger=np.nan,
          residual=np.nan) -> HarvestRules:
    def col(v, dtype=float):
        return np.broadcast_to(np.asarray(v, dtype=dtype), (n,))[:, None].copy()

    return HarvestRules(code=col(code, np.int8), fraction=col(fraction),
                        every_days=col(every_days, np.int32), trigger=col(trigger),
                        residual=col(residual),
                        period_of_day=np.zeros((1, n_days), dtype=np.int16))


def diurnal_par(n_days, peak=2000.0, sunrise=6.0, sunset=18.0):
    """Hour-mean PAR of a half-sine day [umol m-2 s-1] (synthetic test forcing)."""
    hours = np.arange(n_days * HOURS_PER_DAY) % HOURS_PER_DAY + 0.5
    phase = (hours - sunrise) / (sunset - sunrise)
    return np.where((phase > 0) & (phase < 1), peak * np.sin(np.pi * phase), 0.0)


def diurnal_temp_factor(n_days, t_mean=24.0, swing=5.0, cardinal=(6.0, 29.0, 39.0)):
    hours = np.arange(n_days * HOURS_PER_DAY) % HOURS_PER_DAY + 0.5
    t = t_mean + swing * np.sin(2 * np.pi * (hours - 9.0) / 24.0)
    return kinetics.ctmi(t, *cardinal), kinetics.maintenance_rate(t, 0.08, 1.07, 20.0)


OPERATION = Operation(start_day=0, inoculum_g_m3=50.0, restart_days=7, harvest_hour=9)
