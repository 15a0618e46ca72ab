"""The results contract: engine output and forcing aggregates assembled into one
:class:`xarray.Dataset` with dims (policy, member, day), every variable with ``units`` and
``long_name`` (names from :mod:`pondsim.glossary`)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.glossary import CAUTION, RESULTS
from pondsim.operations.crash import CAUSES
from pondsim.operations.engine import HOURS_PER_DAY
from pondsim.operations.harvest import floor_of, season_of_day, washed_out
from pondsim.pond.stress import STRESS_COLUMNS


def _attrs(name: str) -> dict:
    long_name, units = RESULTS[name]
    return {"long_name": long_name, "units": units}


def build_dataset(daily, drivers, hourly_sets, scenario, meta: dict, *,
                  policy_names, members: int, sets: tuple[int, int, int] | None = None,
                  weather_basis: str | None = None) -> xr.Dataset:
    """Assemble engine output and forcing aggregates into the results Dataset.

    Engine arrays are policy-major over ``len(policy_names) * members`` rows; within a
    policy, members run over ``sets = (n_weather_years, n_draws, n_replicates)``, weather
    year slowest. Variables that depend only on the weather year (water temperature, PAR,
    evaporation, ...) have dims ``(day,)`` for one weather year and ``(member, day)``
    otherwise; the carrying capacity likewise per driver set. ``weather_basis`` says
    which weather the run stands on (stored in the attributes and printed beside every
    crash figure); default :func:`default_weather_basis`.
    """
    if isinstance(hourly_sets, pd.DataFrame):
        hourly_sets = [hourly_sets]
    n_years, n_draws, reps = sets if sets is not None else (1, 1, members)
    n_pol = len(policy_names)
    n_days = daily.density.shape[1]
    depth = scenario.pond.depth_m
    eff = scenario.harvest.recovery_efficiency
    washout_days = scenario.harvest.washout_days
    floor = floor_of(scenario)
    crash = scenario.crash
    sellable = bool(crash is not None and crash.salvage_sellable)
    salvaged = daily.salvaged if daily.salvaged is not None else np.zeros_like(daily.removed)
    cause = daily.cause if daily.cause is not None else np.zeros_like(daily.status)

    def cube(a):
        return a.reshape(n_pol, members, n_days)

    hourly = hourly_sets[0]
    dates = pd.DatetimeIndex(hourly.index[::HOURS_PER_DAY]).tz_localize(None).normalize()
    dims3 = ("policy", "member", "day")
    member = np.arange(members)
    year_of_member = member // (n_draws * reps)
    set_of_member = member // reps

    def per_year(column, how, scale=1.0):
        values = []
        for h in hourly_sets:
            if column not in h:
                values.append(np.full(n_days, np.nan))
                continue
            v = h[column].to_numpy(dtype=float).reshape(n_days, HOURS_PER_DAY)
            if how == "sum":  # over the known hours; a day without any stays NaN
                day = np.where(np.isnan(v).all(axis=1), np.nan, np.nansum(v, axis=1))
            else:
                day = v.mean(axis=1)
            values.append(day * scale)
        values = np.stack(values)
        if n_years == 1:
            return ("day",), values[0]
        return ("member", "day"), values[year_of_member]

    def forcing_var(name, column, how, scale=1.0, attrs=None):
        dims, values = per_year(column, how, scale)
        return dims, values, attrs if attrs is not None else _attrs(name)

    k_dims, k_values = (("day",), drivers.capacity[0]) if drivers.n_sets == 1 else \
        (("member", "day"), drivers.capacity[set_of_member])
    ds = xr.Dataset(
        {
            "density": (dims3, cube(daily.density), _attrs("density")),
            "areal_biomass": (dims3, cube(daily.density) * depth, _attrs("areal_biomass")),
            "harvested": (dims3, cube(daily.removed + (salvaged if sellable else 0.0))
                          * depth * eff, {**_attrs("harvested"), "includes_salvage":
                                          int(sellable)}),
            "salvaged": (dims3, cube(salvaged) * depth, {
                "long_name": "biomass left by crashes (salvage; product only where "
                             "crash.salvage_sellable)", "units": "g m-2 d-1"}),
            "harvest_fraction": (dims3, cube(daily.harvest_fraction),
                                 {"long_name": "share of the culture volume harvested",
                                  "units": "1"}),
            "growth_rate": (dims3, cube(daily.growth_rate), _attrs("growth_rate")),
            "gross_growth": (dims3, cube(daily.grown) * depth,
                             {"long_name": "gross biomass growth in the day (before "
                              "respiration, harvest and crash losses)",
                              "units": "g m-2 d-1"}),
            "respiration": (dims3, cube(daily.respired) * depth,
                            {"long_name": "biomass respired in the day (maintenance)",
                             "units": "g m-2 d-1"}),
            "crash_loss": (dims3, cube(daily.lost) * depth,
                           {"long_name": "biomass lost to crashes", "units": "g m-2 d-1"}),
            "crashed": (dims3, cube(daily.crashed).astype(np.int8), _attrs("crashed")),
            "crash_cause": (dims3, cube(cause).astype(np.int8), {
                "long_name": "cause of the day's crash", "units": "1",
                "flag_values": " ".join(str(i) for i in range(len(CAUSES) + 1)),
                "flag_meanings": "no_crash " + " ".join(CAUSES)}),
            "hazard": (dims3, cube(daily.hazard),
                       {"long_name": "daily culture crash hazard", "units": "d-1"}),
            "status": (dims3, cube(daily.status), {
                **_attrs("status"),
                "flag_values": "0 1 2",
                "flag_meanings": "growing restarting_after_crash not_yet_inoculated"}),
            "at_floor": (dims3, cube(daily.at_floor).astype(np.int8), {
                "long_name": "culture at its viable-density floor at the harvest hour "
                             "(below it, or the harvest cut back to it)", "units": "1"}),
            "washed_out": (dims3, cube(washed_out(daily.at_floor, washout_days))
                           .astype(np.int8), {
                "long_name": "culture washed out: at its floor on more than washout_days "
                             "days in a row up to this day", "units": "1"}),
            "carrying_capacity": (k_dims, k_values, _attrs("carrying_capacity")),
            "water_temperature": forcing_var("water_temperature", "water_temperature",
                                             "mean"),
            "par_daily": forcing_var("par_daily", "par", "sum", 3600e-6),
            "evaporation": forcing_var("evaporation", "evaporation", "sum"),
            "rain": forcing_var("rain", "rain", "sum", attrs={
                "long_name": "rain falling on the pond", "units": "mm d-1"}),
            "makeup": forcing_var("makeup", "makeup", "sum", attrs={
                "long_name": "makeup water for evaporation net of rain, max(E - P, 0) "
                             "hour by hour (unknown rain as none)", "units": "mm d-1"}),
            "ghi_daily": forcing_var("ghi_daily", "ghi", "sum", 3600e-6, attrs={
                "long_name": "daily global horizontal irradiation", "units": "MJ m-2 d-1"}),
            **{name: forcing_var(name, name, "sum", attrs={
                "long_name": meaning + " (nominal strain)", "units": "h d-1"})
               for name, meaning in STRESS_COLUMNS.items()},
        },
        coords={
            "policy": list(policy_names),
            "member": member,
            "weather_year": (("member",), year_of_member),
            "draw": (("member",), (member // reps) % n_draws),
            "replicate": (("member",), member % reps),
            "day": np.arange(1, n_days + 1),
            "date": (("day",), dates.to_numpy()),
            "season": (("day",), np.array([s.name for s in scenario.seasons])[
                season_of_day(dates, scenario.seasons)]),
        },
    )
    for name in ("inoculated", "grown", "respired", "removed", "salvaged", "lost", "final"):
        ds[f"ledger_{name}"] = (("policy", "member"),
                                np.asarray(daily.ledger.get(name, np.zeros(n_pol * members))
                                           ).reshape(n_pol, members) * depth,
                                {"long_name": f"annual biomass ledger: {name}",
                                 "units": "g m-2"})
    offset = meta.get("utc_offset_h", scenario.site.utc_offset_h)
    ds["date"].attrs = {"long_name": "local standard date",
                        "timezone": f"local standard time, UTC offset {offset} h"}
    ds.attrs = {
        "title": f"pondsim results: {scenario.study_name}",
        "site": str(scenario.site.name),
        "study": str(scenario.study_name),
        "weather_source": _weather_source(scenario, meta),
        "latitude": float(meta.get("latitude", np.nan) or np.nan),
        "longitude": float(meta.get("longitude", np.nan) or np.nan),
        "strain": scenario.strain.name,
        "growth_form": scenario.strain.growth_form,
        "depth_m": depth,
        "pond_area_m2": scenario.pond.area_m2,
        "pond_count": scenario.pond.count,
        "year": scenario.year,
        "caution": CAUTION,
        "Conventions": "CF-1.10",
        "source": f"pondsim {_version()}",
        "weather_notes": "; ".join(str(n) for n in meta.get("notes", [])),
        "site_check": str(meta.get("site_check", "not run")),
        "weather_years": n_years,
        "parameter_draws": n_draws,
        "replicates": reps,
        "photons_per_joule_umol": float(hourly.attrs.get("photons_per_joule_umol", np.nan)),
        "recovery_efficiency": eff,
        "floor_g_m3": float(floor),
        "washout_days": int(washout_days),
    }
    ds.attrs["weather_basis"] = weather_basis or default_weather_basis(
        scenario, meta, n_years)
    if crash is not None:
        ds.attrs["crash_enabled"] = int(crash.enabled)
        for name in CRASH_ATTRS:
            value = getattr(crash, name)
            ds.attrs[f"crash_{name}"] = int(value) if isinstance(value, bool) else value
    return ds


def _weather_source(scenario, meta) -> str:
    """The weather file and its station (or clear-sky mode), for figure footers; the
    station name is the weather's source, never the site's name."""
    station = str(meta.get("name") or "").strip()
    if scenario.weather.source != "file":
        return "clear-sky weather from monthly normals"
    name = Path(scenario.weather.path).name
    return f"{name} ({station})" if station and station != name else name


#: Crash keys copied into the Dataset attributes (prefixed ``crash_``).
CRASH_ATTRS = ("basis", "background_per_d", "background_t_ref_c", "background_q10",
               "starvation_hazard_per_d", "window_days", "heat_hazard_per_d_h",
               "cold_hazard_per_d_k", "cold_onset_k", "loss_fraction", "salvage_sellable",
               "max_season_probability")


def default_weather_basis(scenario, meta: dict, n_years: int) -> str:
    """Plain words for the weather a run stands on: the scenario's weather year (and
    its source), or the number of weather years when there are several."""
    w = scenario.weather
    if w.source == "file" and w.path is not None:
        source = f"{'typical year of ' if meta.get('typical_year') else ''}{w.path.name}"
    else:
        source = "clear-sky weather from monthly normals"
    if n_years == 1:
        return f"the scenario's weather year {scenario.year} ({source})"
    return f"{n_years} weather years ({source})"


def _version() -> str:
    from pondsim import __version__

    return __version__
