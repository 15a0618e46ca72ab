"""Orchestration: scenario -> forcing -> light and water temperature -> drivers -> engine
-> results Dataset. Each stage is a plain function whose inputs and outputs are visible
in its signature; this module only wires them together."""

from __future__ import annotations

import hashlib
from collections import OrderedDict

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.errors import InputError
from pondsim.operations.crash import CrashModel
from pondsim.operations.dataset import build_dataset
from pondsim.operations.engine import HOURS_PER_DAY, Drivers, Operation, integrate
from pondsim.operations.harvest import build_rules, floor_of
from pondsim.pond import capacity, kinetics, light, thermal
from pondsim.pond.stress import stress_flags
from pondsim.scenario import Scenario


def load_forcing(scenario: Scenario):
    """Hourly forcing for the scenario's study year: ``(DataFrame, meta)``."""
    from pondsim.forcing import climate, weather

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
    forcing = _one_year(forcing, scenario)
    apply_site_check(forcing, meta, scenario)
    return forcing, meta


def apply_site_check(forcing: pd.DataFrame, meta: dict, scenario: Scenario) -> None:
    """Check the scenario's site against its weather (:mod:`pondsim.forcing.sitecheck`),
    recording the outcome in ``meta``; raises :class:`InputError` when it fails under
    ``weather.site_check = 'strict'``."""
    from pondsim.forcing.sitecheck import record_site_check

    site = scenario.site
    record_site_check(forcing, meta, {"latitude": site.latitude, "longitude": site.longitude,
                                      "utc_offset_h": site.utc_offset_h},
                      strict=scenario.weather.site_check == "strict", path=scenario.path)


def load_forcing_for_year(scenario: Scenario, year: int, *, map_year: bool = False,
                          what: str = "the observations"):
    """Forcing of the scenario's weather for a calendar *year* of dated records (a pilot
    or a pond log): ``(table, meta, notes)``.

    A file of several real years must hold *year*. A typical-year file (TMY, or a file
    marked typical) is placed into *year*, with a note. A file of ONE real year of
    another calendar year would silently stand in for *year*: that raises
    :class:`InputError` unless ``map_year`` is True, when it is used with a note that
    says so.
    """
    year = int(year)
    forcing, meta = load_forcing(scenario.replace(year=year))
    notes = [str(n) for n in meta.get("notes", [])]
    remapped = [n for n in notes if n.startswith("the file's one whole year")]
    if remapped:
        own = remapped[0].split("whole year ", 1)[1].split(" ", 1)[0]
        if not map_year:
            raise InputError(
                f"{what} are dated {year}, but the weather file holds the real year {own} "
                f"only: its weather would stand in for {year}'s days. Give weather that "
                f"covers {year}, or accept the stand-in explicitly (--map-weather-year)",
                path=scenario.weather.path, field="weather.path")
        notes.append(f"weather of {own} used for {what} dated {year} (--map-weather-year): "
                     "day-to-day weather of the record is not the site's actual weather")
    elif meta.get("typical_year"):
        notes.append(f"typical-year weather placed into {year} for {what}: the record's "
                     "actual weather is not known to the fit")
    return forcing, meta, notes


def _given_forcing(forcing, scenario: Scenario) -> tuple[pd.DataFrame, dict]:
    """``(table, meta)`` from what a caller passed as ``forcing``: a forcing table
    (:func:`pondsim.read_weather`, metadata in its ``attrs``) or a ``(table, meta)`` pair."""
    if isinstance(forcing, pd.DataFrame):
        return _one_year(forcing, scenario), dict(forcing.attrs)
    if isinstance(forcing, tuple) and len(forcing) == 2 \
            and isinstance(forcing[0], pd.DataFrame):
        return _one_year(forcing[0], scenario), dict(forcing[1])
    raise TypeError("forcing must be a forcing table (pondsim.read_weather) or a "
                    f"(table, meta) pair, not {type(forcing).__name__}")


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


def _light_and_water(forcing: pd.DataFrame, scenario: Scenario) -> pd.DataFrame:
    """PAR entering the culture and the pond's thermal budget, hour by hour (uncached)."""
    par = light.par_at_surface(forcing, par_fraction=scenario.light.par_fraction,
                               photons_per_joule=scenario.light.photons_per_joule_umol,
                               refractive_index=scenario.pond.refractive_index)
    water = thermal.water_temperature(forcing, scenario.pond,
                                      wind_height_m=scenario.weather.wind_height_m,
                                      upper_limit_c=scenario.strain.t_max_c)
    out = water.copy()
    st = scenario.strain
    for name, flag in stress_flags(water["water_temperature"], t_min_c=st.t_min_c,
                                   t_opt_c=st.t_opt_c, t_max_c=st.t_max_c).items():
        out[name] = flag.astype(float)
    out["par"] = np.asarray(par, dtype=float)
    out["ghi"] = forcing["ghi"].to_numpy(dtype=float)
    ppj = scenario.light.photons_per_joule_umol
    out.attrs["photons_per_joule_umol"] = (light.photons_per_joule_par_astm_g173()
                                           if ppj is None else ppj)
    return out


#: Weather years whose light and water tables are kept for reuse within a process
#: (~1.8 MB each): a study that simulates the same year again (the scenario's own year in
#: ``compare``, the Sobol step and ``report``; a file's real years in every outlook round)
#: computes its energy balance once. Kept small so that memory does not grow with an
#: outlook's synthetic weather years (each is used once; recomputing a year costs
#: ~0.1 s since the heat balance is compiled).
PHYSICS_CACHE_SIZE = 8
_PHYSICS_CACHE: OrderedDict[str, pd.DataFrame] = OrderedDict()


def _physics_key(forcing: pd.DataFrame, scenario: Scenario) -> str:
    """Identity of a weather year's light and water: the forcing's content (values,
    index, column names) and every scenario setting they depend on."""
    digest = hashlib.blake2b(digest_size=20)
    digest.update(pd.util.hash_pandas_object(forcing, index=True).to_numpy().tobytes())
    digest.update(repr((tuple(forcing.columns), scenario.light, scenario.pond,
                        scenario.weather.wind_height_m, scenario.strain.t_max_c)).encode())
    return digest.hexdigest()


def hourly_light_and_water(forcing: pd.DataFrame, scenario: Scenario) -> pd.DataFrame:
    """PAR entering the culture and the pond's thermal budget, hour by hour.

    Computed once per weather year and scenario physics within a process and reused
    (keyed by the forcing's content, see :data:`PHYSICS_CACHE_SIZE`); each call returns
    its own shallow copy, so a caller that adds columns does not change the cache.
    """
    key = _physics_key(forcing, scenario)
    table = _PHYSICS_CACHE.get(key)
    if table is None:
        table = _light_and_water(forcing, scenario)
        _PHYSICS_CACHE[key] = table
        while len(_PHYSICS_CACHE) > PHYSICS_CACHE_SIZE:
            _PHYSICS_CACHE.popitem(last=False)
    else:
        _PHYSICS_CACHE.move_to_end(key)
    out = table.copy(deep=False)
    out.attrs = dict(table.attrs)
    return out


#: Strain parameters that may vary between driver sets (parameter draws).
DRAWABLE = ("mu_max_per_d", "light_param_umol_m2_s", "t_min_c", "t_opt_c", "t_max_c",
            "maintenance_per_d", "maintenance_theta", "maintenance_t_ref_c",
            "k_biomass_m2_g", "k_background_per_m")


def build_drivers(hourly_sets, scenario: Scenario, draws: dict | None = None) -> Drivers:
    """Growth drivers for every (weather year, parameter draw) pair.

    Parameters
    ----------
    hourly_sets : DataFrame or list of DataFrame
        Hourly light and water tables (:func:`hourly_light_and_water`), one per weather
        year, all of the same length.
    scenario : Scenario
    draws : dict of str -> ndarray (n_draws,) or (n_years, n_draws), optional
        Strain parameters (names in :data:`DRAWABLE`) that vary between draws; the others
        keep the scenario's value. One-dimensional draws are crossed with every weather
        year; two-dimensional ones are nested (row ``y`` holds weather year ``y``'s own
        draws).

    Returns
    -------
    Drivers
        ``n_years * n_draws`` sets, year-major (set = year * n_draws + draw).
    """
    if isinstance(hourly_sets, pd.DataFrame):
        hourly_sets = [hourly_sets]
    s = scenario.strain
    draws = {} if draws is None else {k: np.asarray(v, dtype=float) for k, v in draws.items()}
    unknown = sorted(set(draws) - set(DRAWABLE))
    if unknown:
        raise InputError(f"parameters {unknown} cannot vary; allowed: {', '.join(DRAWABLE)}",
                         field="uncertainty")
    n_draws = next(iter(draws.values())).shape[-1] if draws else 1
    n_years = len(hourly_sets)
    if any(v.ndim == 2 and v.shape != (n_years, n_draws) for v in draws.values()):
        raise InputError(f"nested draws must have shape ({n_years}, {n_draws})",
                         field="uncertainty")
    year_of_set = np.repeat(np.arange(n_years), n_draws)
    tw = np.stack([h["water_temperature"].to_numpy(float) for h in hourly_sets])[year_of_set]
    par = np.stack([h["par"].to_numpy(float) for h in hourly_sets])[year_of_set]

    def param(name):
        if name in draws:
            v = draws[name]
            return v.ravel() if v.ndim == 2 else np.tile(v, n_years)
        return np.full(n_years * n_draws, float(getattr(s, name)))

    p = {name: param(name) for name in DRAWABLE}
    bad = ~((p["t_min_c"] < p["t_opt_c"]) & (p["t_opt_c"] < p["t_max_c"])
            & (p["t_opt_c"] > 0.5 * (p["t_min_c"] + p["t_max_c"])))
    if bad.any():
        raise InputError(f"{int(bad.sum())} parameter draw(s) break t_min_c < t_opt_c < "
                         "t_max_c with t_opt_c above the mid-range (Rosso et al. 1993); "
                         "narrow the temperature distributions", field="uncertainty")
    col = {k: v[:, None] for k, v in p.items()}
    ftemp = kinetics.ctmi(tw, col["t_min_c"], col["t_opt_c"], col["t_max_c"])
    maint = kinetics.maintenance_rate(tw, col["maintenance_per_d"],
                                      col["maintenance_theta"], col["maintenance_t_ref_c"])
    n_sets, n_hours = tw.shape
    n_days = n_hours // HOURS_PER_DAY
    if s.capacity_table_g_m3 is not None:
        dates = hourly_sets[0].index[::HOURS_PER_DAY]
        k_daily = np.broadcast_to(capacity.monthly_k_table(dates, s.capacity_table_g_m3),
                                  (n_sets, n_days))
    else:
        def per_day(a):
            return a.reshape(n_sets, n_days, HOURS_PER_DAY)

        def per_set(name):
            return p[name][:, None, None]

        k_daily = capacity.daily_carrying_capacity(
            per_day(par), per_day(ftemp), per_day(maint), mu_max=per_set("mu_max_per_d"),
            model=s.light_model, param=per_set("light_param_umol_m2_s"),
            k_biomass=per_set("k_biomass_m2_g"), k_background=per_set("k_background_per_m"),
            depth_m=scenario.pond.depth_m, nutrient_limit=s.nutrient_limit_g_m3)
    return Drivers(
        par=par, temp_factor=np.asarray(ftemp, float), maintenance=np.asarray(maint, float),
        capacity=np.array(k_daily, dtype=float).reshape(n_sets, n_days),
        mu_max=p["mu_max_per_d"], light_param=p["light_param_umol_m2_s"],
        k_biomass=p["k_biomass_m2_g"], k_background=p["k_background_per_m"],
        light_model=s.light_model, growth_form=s.growth_form,
        depth_m=scenario.pond.depth_m, water_temperature=tw, t_max_c=p["t_max_c"])


def operation_of(scenario: Scenario) -> Operation:
    """Operating settings for the engine from the scenario."""
    h, ino, pond = scenario.harvest, scenario.inoculation, scenario.pond
    start = 0 if ino.start_date is None else ino.start_date.timetuple().tm_yday - 1
    max_fraction = 1.0 if h.capacity_m3_per_d is None else \
        min(1.0, h.capacity_m3_per_d / pond.volume_m3)
    return Operation(start_day=start, inoculum_g_m3=ino.density_g_m3,
                     restart_days=ino.restart_days, harvest_hour=h.hour,
                     recovery_efficiency=h.recovery_efficiency, max_fraction=max_fraction,
                     min_density_g_m3=h.min_density_g_m3, floor_g_m3=floor_of(scenario))



def simulate(scenario: Scenario, members: int | None = None, seed: int | None = None,
             *, progress: bool | None = None, forcing=None, weather_years=None,
             draws: dict | None = None, weather_basis: str | None = None,
             stream_offset: int = 0) -> xr.Dataset:
    """Simulate a year of the scenario for every policy and member.

    Parameters
    ----------
    scenario : Scenario
        From :func:`pondsim.load_scenario`.
    members : int, optional
        Stochastic (crash) members per driver set and policy (default
        ``scenario.run.members``).
    seed : int, optional
        Seed of the random streams (default ``scenario.run.seed``).
    progress : bool, optional
        Show a progress bar (default ``scenario.run.progress``; only for long runs).
    forcing : DataFrame or (DataFrame, dict), optional
        Forcing already read: the table of :func:`pondsim.read_weather` (metadata in
        ``DataFrame.attrs``) or the ``(table, meta)`` pair of :func:`load_forcing`. A
        table longer than the study year is cut to it.
    weather_years : list of DataFrame, optional
        Several forcing tables of the study year's calendar (e.g. from
        :mod:`pondsim.forcing.years`); each becomes a weather year of the ensemble.
    draws : dict of str -> ndarray, optional
        Strain parameter draws (see :func:`build_drivers`).
    weather_basis : str, optional
        Plain words for the weather years (e.g. "20 synthetic years resampled from ..."),
        stored in the Dataset and printed beside crash figures (default: the scenario's
        weather year, or the number of weather years).
    stream_offset : int
        Random stream of the first member of each policy (member *j* takes stream
        ``stream_offset + j``): a block of an ensemble's weather years run on its own
        (``pondsim.studies.outlook``) draws the crashes it would draw in the whole one.

    Returns
    -------
    xarray.Dataset
        Dims ``(policy, member, day)``; members run over weather year × draw × crash
        replicate (coordinates ``weather_year``, ``draw``, ``replicate``); see
        :func:`pondsim.operations.dataset.build_dataset`.
    """
    reps = scenario.run.members if members is None else int(members)
    seed = scenario.run.seed if seed is None else int(seed)
    show = scenario.run.progress if progress is None else progress
    if weather_years is None:
        table, meta = load_forcing(scenario) if forcing is None else _given_forcing(
            forcing, scenario)
        weather_years = [table]
    else:
        meta = _given_forcing(forcing, scenario)[1] if forcing is not None else {}
    hourly_sets = [hourly_light_and_water(t, scenario) for t in weather_years]
    drivers = build_drivers(hourly_sets, scenario, draws)
    dates = hourly_sets[0].index[::HOURS_PER_DAY]
    per_policy = drivers.n_sets * reps
    rules, names = build_rules(scenario.policies, scenario.plans, scenario.seasons, dates,
                               repeat=per_policy)
    set_of_member = np.tile(np.repeat(np.arange(drivers.n_sets), reps), len(names))
    # common random numbers: member j of every policy takes the same stream
    stream = np.tile(np.arange(per_policy) + int(stream_offset), len(names))
    bar = _progress_bar(show, drivers.n_days, rules.n_members)
    try:
        daily = integrate(drivers, rules, operation_of(scenario),
                          set_of_member=set_of_member, crash=crash_model_of(scenario),
                          seed=seed, stream_of_member=stream, engine=scenario.run.engine,
                          progress=None if bar is None else (lambda d: bar.update(d - bar.n)))
    finally:
        if bar is not None:
            bar.close()
    n_draws = drivers.n_sets // len(hourly_sets)
    return build_dataset(daily, drivers, hourly_sets, scenario, meta, policy_names=names,
                         members=per_policy, sets=(len(hourly_sets), n_draws, reps),
                         weather_basis=weather_basis)


#: Peak bytes per series-day of a run (one policy × member × day): the engine's daily
#: arrays (~46 B), the results Dataset (~54 B) and writing it to netCDF (~40 B), measured
#: with tracemalloc on the demo (benchmarks.engine); an estimate, not a bound.
BYTES_PER_SERIES_DAY = 140

#: Peak bytes of a run that do not grow with the members: the hourly forcing, light and
#: water tables and driver arrays of one driver set (weather year x draw) and the
#: Dataset's per-day variables; measured with tracemalloc on the demo as the intercept of
#: peak against members: about 14 MB while the heat balance was a loop over Python lists,
#: 3-13 MB since it is compiled (the upper value when xarray writes netCDF to memory
#: without dask loaded; 20 and 200 members measured).
BYTES_PER_DRIVER_SET = 6_000_000


def memory_estimate(scenario: Scenario, members: int, n_sets: int = 1) -> int:
    """Peak memory [bytes] of simulating and writing ``members`` crash members of each of
    ``n_sets`` driver sets (weather years × parameter draws) for every policy and plan."""
    n_days = pd.Timestamp(year=scenario.year, month=12, day=31).dayofyear
    entries = len(scenario.policies) + len(scenario.plans)
    return (int(n_sets) * BYTES_PER_DRIVER_SET
            + int(entries) * int(members) * int(n_sets) * n_days * BYTES_PER_SERIES_DAY)


def memory_available() -> int:
    """Memory the system can give this process now [bytes] (MemAvailable on Linux,
    else physical memory)."""
    import os

    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def check_memory(scenario: Scenario, members: int, n_sets: int = 1, *,
                 share: float = 0.7, field: str = "--members") -> None:
    """Raise :class:`InputError` with the estimate and the limit when a run's daily outputs
    would need more than *share* of the memory available now."""
    need = memory_estimate(scenario, members, n_sets)
    limit = share * memory_available()
    if need > limit:
        per_member = memory_estimate(scenario, 1, n_sets)
        most = max(int(limit // per_member), 0)
        raise InputError(
            f"{members:,} member(s) x {n_sets} weather year(s)/draw(s) x "
            f"{len(scenario.policies) + len(scenario.plans)} policies/plans would need about "
            f"{need / 1e9:,.1f} GB for the daily outputs; the limit is {limit / 1e9:,.1f} GB "
            f"({share:.0%} of the memory available now); allowed here: at most {most:,} "
            "member(s)", path=scenario.path, field=field)


def crash_model_of(scenario: Scenario) -> CrashModel | None:
    """The scenario's crash hazard model, or None when crashes are switched off."""
    c = scenario.crash
    if c is None or not c.enabled:
        return None
    return CrashModel(background_per_d=c.background_per_d,
                      background_t_ref_c=c.background_t_ref_c,
                      background_q10=c.background_q10,
                      starvation_hazard_per_d=c.starvation_hazard_per_d,
                      window_days=c.window_days, heat_hazard_per_d_h=c.heat_hazard_per_d_h,
                      cold_hazard_per_d_k=c.cold_hazard_per_d_k, cold_onset_k=c.cold_onset_k,
                      loss_fraction=c.loss_fraction, salvage_sellable=c.salvage_sellable)


def _progress_bar(show: bool, n_days: int, n_members: int):
    # Worth a bar only when the run takes more than a few seconds (~2e7 member-hours/s).
    if not show or n_days * HOURS_PER_DAY * n_members < 5e7:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=n_days, unit="day", desc="simulating", leave=False)
