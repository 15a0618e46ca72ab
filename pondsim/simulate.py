"""Orchestration: scenario -> forcing -> light and water temperature -> drivers -> engine
-> results Dataset. Each stage is a plain function whose inputs and outputs are visible
in its signature; this module only wires them together."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from . import capacity, kinetics, light, thermal
from .crash import CrashModel
from .engine import HOURS_PER_DAY, Drivers, Operation, integrate
from .errors import InputError
from .harvest import build_rules
from .results import build_dataset
from .scenario import Scenario


def load_forcing(scenario: Scenario):
    """Hourly forcing for the scenario's study year: ``(DataFrame, meta)``."""
    from . import climate, weather

    site, w = scenario.site, scenario.weather
    if w.source == "file":
        forcing, meta = weather.read_weather(
            w.path, fmt=w.format, latitude=site.latitude, longitude=site.longitude,
            elevation_m=site.elevation_m, utc_offset_h=site.utc_offset_h,
            year=scenario.year, max_gap_h=w.max_gap_h)
    else:
        forcing, meta = climate.clearsky_weather(
            latitude=site.latitude, longitude=site.longitude, elevation_m=site.elevation_m,
            utc_offset_h=site.utc_offset_h, normals=w.normals, year=scenario.year,
            name=site.name)
    return _one_year(forcing, scenario), meta


def _one_year(forcing: pd.DataFrame, scenario: Scenario) -> pd.DataFrame:
    """Cut the forcing to the study year and check that every hour is there."""
    year = scenario.year
    sel = forcing[forcing.index.year == year]
    n_days = 366 if pd.Timestamp(year=year, month=12, day=31).dayofyear == 366 else 365
    if len(sel) != n_days * HOURS_PER_DAY:
        years = sorted(set(forcing.index.year))
        raise InputError(f"the weather holds {len(sel)} hours of the study year {year}, "
                         f"not {n_days * HOURS_PER_DAY}; years in the file: {years}. Set "
                         "study.year to a year the file covers in full",
                         path=scenario.weather.path, field="study.year")
    return sel


def hourly_light_and_water(forcing: pd.DataFrame, scenario: Scenario) -> pd.DataFrame:
    """PAR entering the culture and the pond's thermal budget, hour by hour."""
    par = light.par_at_surface(forcing, par_fraction=scenario.light.par_fraction,
                               photons_per_joule=scenario.light.photons_per_joule_umol,
                               refractive_index=scenario.pond.refractive_index)
    water = thermal.water_temperature(forcing, scenario.pond,
                                      wind_height_m=scenario.weather.wind_height_m,
                                      upper_limit_c=scenario.strain.t_max_c)
    out = water.copy()
    out["par"] = np.asarray(par, dtype=float)
    out["ghi"] = forcing["ghi"].to_numpy(dtype=float)
    ppj = scenario.light.photons_per_joule_umol
    out.attrs["photons_per_joule_umol"] = (light.photons_per_joule_par_astm_g173()
                                           if ppj is None else ppj)
    return out


def build_drivers(hourly: pd.DataFrame, scenario: Scenario) -> Drivers:
    """Growth drivers of one driver set from the hourly light and water table."""
    s = scenario.strain
    tw = hourly["water_temperature"].to_numpy(dtype=float)
    par = hourly["par"].to_numpy(dtype=float)
    ftemp = kinetics.ctmi(tw, s.t_min_c, s.t_opt_c, s.t_max_c)
    maint = kinetics.maintenance_rate(tw, s.maintenance_per_d, s.maintenance_theta,
                                      s.maintenance_t_ref_c)
    n_days = len(tw) // HOURS_PER_DAY
    if s.capacity_table_g_m3 is not None:
        dates = hourly.index[::HOURS_PER_DAY]
        k_daily = capacity.monthly_k_table(dates, s.capacity_table_g_m3)
    else:
        k_daily = capacity.daily_carrying_capacity(
            par.reshape(n_days, HOURS_PER_DAY), ftemp.reshape(n_days, HOURS_PER_DAY),
            maint.reshape(n_days, HOURS_PER_DAY), mu_max=s.mu_max_per_d,
            model=s.light_model, param=s.light_param_umol_m2_s,
            k_biomass=s.k_biomass_m2_g, k_background=s.k_background_per_m,
            depth_m=scenario.pond.depth_m, nutrient_limit=s.nutrient_limit_g_m3)
    one = np.ones(1)
    return Drivers(
        par=par[None, :], temp_factor=np.asarray(ftemp, float)[None, :],
        maintenance=np.asarray(maint, float)[None, :],
        capacity=np.asarray(k_daily, float).reshape(1, n_days),
        mu_max=one * s.mu_max_per_d, light_param=one * s.light_param_umol_m2_s,
        k_biomass=one * s.k_biomass_m2_g, k_background=one * s.k_background_per_m,
        light_model=s.light_model, growth_form=s.growth_form,
        depth_m=scenario.pond.depth_m)


def operation_of(scenario: Scenario) -> Operation:
    """Operating settings for the engine from the scenario."""
    h, ino, pond = scenario.harvest, scenario.inoculation, scenario.pond
    start = 0 if ino.start_date is None else ino.start_date.timetuple().tm_yday - 1
    max_fraction = 1.0 if h.capacity_m3_per_d is None else \
        min(1.0, h.capacity_m3_per_d / pond.volume_m3)
    return Operation(start_day=start, inoculum_g_m3=ino.density_g_m3,
                     restart_days=ino.restart_days, harvest_hour=h.hour,
                     recovery_efficiency=h.recovery_efficiency, max_fraction=max_fraction,
                     min_density_g_m3=h.min_density_g_m3)


def simulate(scenario: Scenario, members: int | None = None, seed: int | None = None,
             *, progress: bool | None = None, forcing=None) -> xr.Dataset:
    """Simulate a year of the scenario for every policy and member.

    Parameters
    ----------
    scenario : Scenario
        From :func:`pondsim.load_scenario`.
    members : int, optional
        Members per policy (default ``scenario.run.members``).
    seed : int, optional
        Seed of the random streams (default ``scenario.run.seed``).
    progress : bool, optional
        Show a progress bar (default ``scenario.run.progress``; only for long runs).
    forcing : (DataFrame, dict), optional
        Forcing already read by :func:`load_forcing`.

    Returns
    -------
    xarray.Dataset
        Dims ``(policy, member, day)``; see :func:`pondsim.results.build_dataset`.
    """
    members = scenario.run.members if members is None else int(members)
    seed = scenario.run.seed if seed is None else int(seed)
    show = scenario.run.progress if progress is None else progress
    table, meta = load_forcing(scenario) if forcing is None else forcing
    hourly = hourly_light_and_water(table, scenario)
    drivers = build_drivers(hourly, scenario)
    dates = hourly.index[::HOURS_PER_DAY]
    rules, names = build_rules(scenario.policies, scenario.plans, scenario.seasons, dates,
                               repeat=members)
    stream = np.tile(np.arange(members), len(names))  # common random numbers
    bar = _progress_bar(show, drivers.n_days, rules.n_members)
    try:
        daily = integrate(drivers, rules, operation_of(scenario),
                          crash=crash_model_of(scenario), seed=seed, stream_of_member=stream,
                          progress=None if bar is None else (lambda d: bar.update(1)))
    finally:
        if bar is not None:
            bar.close()
    return build_dataset(daily, drivers, hourly, scenario, meta, policy_names=names,
                         members=members)


def crash_model_of(scenario: Scenario) -> CrashModel | None:
    """The scenario's crash hazard model, or None when crashes are switched off."""
    c = scenario.crash
    if c is None or not c.enabled:
        return None
    return CrashModel(base_hazard_per_d=c.base_hazard_per_d,
                      stress_hazard_per_d=c.stress_hazard_per_d,
                      overshoot_onset=c.overshoot_onset, window_days=c.window_days,
                      drop_scale=c.drop_scale, loss_fraction=c.loss_fraction)


def _progress_bar(show: bool, n_days: int, n_members: int):
    # Worth a bar only when the run takes more than a few seconds (~2e7 member-hours/s).
    if not show or n_days * HOURS_PER_DAY * n_members < 5e7:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=n_days, unit="day", desc="simulating", leave=False)
