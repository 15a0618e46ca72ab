"""One site's screening task: simulate the site's weather years and reduce the daily
results to a few summary variables in the worker (see :mod:`pondsim.studies.screen`)."""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import xarray as xr

from pondsim.errors import InputError
from pondsim.glossary import G_M2_TO_T_HA
from pondsim.scenario import Scenario
from pondsim.studies.screen_sites import SiteSpec

#: Exceedance probability of the low band (P90 = exceeded in 90 % of member years).
P90_PERCENTILE = 10.0
MM_HA_TO_M3 = 10.0  # 1 mm over 1 ha = 10 m3


@dataclass(frozen=True)
class SiteTask:
    """Everything a worker needs for one site (picklable)."""

    site: SiteSpec
    scenario: Scenario  # already moved to the site (site_scenario)
    members: int
    n_years: int
    weather_seed: int
    crash_seed: int
    full: bool
    fingerprint: str


@dataclass
class SiteOutcome:
    """What comes back from a worker: a reduced Dataset, or the error."""

    name: str
    result: xr.Dataset | None = None
    error: str | None = None
    seconds: float = 0.0
    skipped: bool = False

    @property
    def ok(self) -> bool:
        return self.error is None


def run_site(task: SiteTask) -> SiteOutcome:
    """Simulate one site and reduce it (the task run by every worker).

    Never raises for a failing site: the error comes back in the outcome, so one bad
    site does not stop the others.
    """
    t0 = time.perf_counter()
    try:
        ds = _simulate_site(task)
        return SiteOutcome(task.site.name, result=ds, seconds=time.perf_counter() - t0)
    except InputError as err:
        return SiteOutcome(task.site.name, error=str(err), seconds=time.perf_counter() - t0)
    except Exception as err:  # report, never stop the other sites
        return SiteOutcome(task.site.name, error=f"{type(err).__name__}: {err}",
                           seconds=time.perf_counter() - t0)


def _simulate_site(task: SiteTask) -> xr.Dataset:
    from pondsim.forcing.years import generate_years
    from pondsim.operations.simulate import load_forcing, simulate

    scenario = task.scenario
    forcing, meta = load_forcing(scenario)
    years = generate_years(forcing, task.n_years, seed=task.weather_seed,
                           year=scenario.year)
    ds = simulate(scenario, members=task.members, seed=task.crash_seed, progress=False,
                  forcing=(forcing, meta), weather_years=years)
    notes = list(meta.get("notes", []))
    if scenario.weather.source == "clearsky":
        notes.append("every day of a month alike (clear-sky mode): the P50-P90 spread "
                     "reflects crash draws only, not weather risk")
    out = reduce_site(ds, name=task.site.name, source=task.site.source, notes=notes)
    out["site_check"] = (("site",), [str(meta.get("site_check", "not run"))])
    if task.full:
        out = xr.merge([out, ds.expand_dims(site=[task.site.name])],
                       combine_attrs="override")
    out.attrs.update({
        "screen_fingerprint": task.fingerprint,
        "weather_seed": task.weather_seed, "crash_seed": task.crash_seed,
        "weather_years": task.n_years, "replicates": task.members,
        "full": int(task.full),
    })
    return out


def reduce_site(ds: xr.Dataset, *, name: str, source: str = "", notes=()) -> xr.Dataset:
    """The summary of one site's simulation, with a ``site`` dimension of length 1.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`pondsim.operations.simulate.simulate` (dims policy, member, day).
    name : str
        Site name (the ``site`` coordinate).

    Returns
    -------
    xarray.Dataset
        See the module docstring, "Summaries"; units in the attributes.
    """
    n_days = ds.sizes["day"]
    per_year = 365.0 / n_days  # a leap year is scaled to 365 days, as policy_summary does
    harvested = ds["harvested"]  # g m-2 d-1
    annual = harvested.sum("day") * G_M2_TO_T_HA * per_year  # (policy, member) t ha-1 yr-1
    monthly = (harvested.groupby(ds["date"].dt.month).sum() * G_M2_TO_T_HA).mean("member")
    crashes = ds["crashed"].sum("day").astype(float) * per_year
    evap_mm = ds["evaporation"].sum("day") * per_year
    if "member" not in evap_mm.dims:
        evap_mm = evap_mm.expand_dims(member=ds["member"].values).copy()
    insolation = ds["ghi_daily"].sum("day") / 3.6 * per_year  # MJ -> kWh
    mean_yield = annual.mean("member")
    evap_per_t = (evap_mm.mean() * MM_HA_TO_M3) / mean_yield.where(mean_yield > 0)
    values = annual.transpose("policy", "member").values
    out = xr.Dataset(
        {
            "annual_yield": (("policy", "member"), values, {
                "long_name": "annual harvested biomass (AFDW)", "units": "t ha-1 yr-1"}),
            "monthly_yield": (("policy", "month"),
                              monthly.transpose("policy", "month").values, {
                "long_name": "monthly harvested biomass, member mean",
                "units": "t ha-1 month-1"}),
            "crashes": (("policy", "member"),
                        crashes.transpose("policy", "member").values, {
                "long_name": "culture crashes per year", "units": "yr-1"}),
            "yield_mean": (("policy",), mean_yield.values, {
                "long_name": "mean annual yield over members", "units": "t ha-1 yr-1"}),
            "yield_p50": (("policy",), np.percentile(values, 50, axis=1), {
                "long_name": "P50 annual yield (median over members)",
                "units": "t ha-1 yr-1"}),
            "yield_p90": (("policy",), np.percentile(values, P90_PERCENTILE, axis=1), {
                "long_name": "P90 annual yield: exceeded in 90 % of member years "
                             "(10th percentile)", "units": "t ha-1 yr-1"}),
            "crash_rate": (("policy",), crashes.mean("member").values, {
                "long_name": "expected culture crashes per year", "units": "yr-1"}),
            "evaporation_per_biomass": (("policy",), evap_per_t.values, {
                "long_name": "pond evaporation per tonne of harvested biomass",
                "units": "m3 t-1"}),
            "evaporation_annual": (("member",), evap_mm.values, {
                "long_name": "annual pond evaporation", "units": "mm yr-1"}),
            "insolation": ((), float(np.mean(insolation.values)), {
                "long_name": "mean annual global horizontal insolation",
                "units": "kWh m-2 yr-1"}),
            "weather_source": ((), str(source)),
            "weather_notes": ((), "; ".join(str(n) for n in notes)),
        },
        coords={
            "policy": ds["policy"].values,
            "member": ds["member"].values,
            "weather_year": (("member",), ds["weather_year"].values),
            "replicate": (("member",), ds["replicate"].values),
            "month": np.arange(1, 13),
        },
    )
    out = out.expand_dims(site=[name])
    for key in ("latitude", "longitude"):
        out = out.assign_coords({key: (("site",), [float(ds.attrs.get(key, np.nan))],
                                       {"units": "degrees_north" if key == "latitude"
                                        else "degrees_east"})})
    return out
