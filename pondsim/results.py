"""The results contract: an :class:`xarray.Dataset` with dims (policy, member, day), its
summary tables, and whole-or-nothing writing to netCDF and CSV."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from .engine import HOURS_PER_DAY
from .glossary import RESULTS
from .harvest import season_of_day

#: Energy content of algal biomass [kJ g-1]; Weyer et al. (2010) BioEnergy Res. 3:204-213
#: use 21.9 kJ g-1 (via REFERENCES.md, secondary); 20-25 kJ g-1 is the usual range.
BIOMASS_ENERGY_KJ_G = 21.9

#: Highest published solar-to-biomass conversion efficiency of photosynthesis, total solar
#: radiation basis: 4.6 % for C3 plants (Zhu, Long & Ort 2008, Curr. Opin. Biotechnol.
#: 19:153-159). Microalgae use the C3 pathway; a result above it is not credible.
MAX_SOLAR_EFFICIENCY = 0.046

G_M2_TO_T_HA = 0.01  # 1 g m-2 = 10 kg ha-1 = 0.01 t ha-1

CAUTION = (
    "Results are estimates from a model, not guarantees of yield or cost. Weather, strain "
    "behaviour, contamination and operations at a real site will differ. Open ponds hold "
    "deep water, rotating paddlewheels, pressurised CO2 and cleaning chemicals: design, "
    "build and operate them to local codes and permits, with licensed engineers."
)


def _attrs(name: str) -> dict:
    long_name, units = RESULTS[name]
    return {"long_name": long_name, "units": units}


def build_dataset(daily, drivers, hourly_sets, scenario, meta: dict, *,
                  policy_names, members: int, sets: tuple[int, int, int] | None = None
                  ) -> xr.Dataset:
    """Assemble engine output and forcing aggregates into the results Dataset.

    Engine arrays are policy-major over ``len(policy_names) * members`` rows; within a
    policy, members run over ``sets = (n_weather_years, n_draws, n_replicates)``, weather
    year slowest. Variables that depend only on the weather year (water temperature, PAR,
    evaporation, ...) have dims ``(day,)`` for one weather year and ``(member, day)``
    otherwise; the carrying capacity likewise per driver set.
    """
    if isinstance(hourly_sets, pd.DataFrame):
        hourly_sets = [hourly_sets]
    n_years, n_draws, reps = sets if sets is not None else (1, 1, members)
    n_pol = len(policy_names)
    n_days = daily.density.shape[1]
    depth = scenario.pond.depth_m
    eff = scenario.harvest.recovery_efficiency

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
            values.append((v.sum(axis=1) if how == "sum" else v.mean(axis=1)) * scale)
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
            "harvested": (dims3, cube(daily.removed) * depth * eff, _attrs("harvested")),
            "harvest_fraction": (dims3, cube(daily.harvest_fraction),
                                 {"long_name": "share of the culture volume harvested",
                                  "units": "1"}),
            "growth_rate": (dims3, cube(daily.growth_rate), _attrs("growth_rate")),
            "crash_loss": (dims3, cube(daily.lost) * depth,
                           {"long_name": "biomass lost to crashes", "units": "g m-2 d-1"}),
            "crashed": (dims3, cube(daily.crashed).astype(np.int8), _attrs("crashed")),
            "hazard": (dims3, cube(daily.hazard),
                       {"long_name": "daily culture crash hazard", "units": "d-1"}),
            "status": (dims3, cube(daily.status), {
                **_attrs("status"),
                "flag_values": "0 1 2",
                "flag_meanings": "growing restarting_after_crash not_yet_inoculated"}),
            "carrying_capacity": (k_dims, k_values, _attrs("carrying_capacity")),
            "water_temperature": forcing_var("water_temperature", "water_temperature",
                                             "mean"),
            "par_daily": forcing_var("par_daily", "par", "sum", 3600e-6),
            "evaporation": forcing_var("evaporation", "evaporation", "sum"),
            "rain": forcing_var("rain", "rain", "sum", attrs={
                "long_name": "rain falling on the pond", "units": "mm d-1"}),
            "ghi_daily": forcing_var("ghi_daily", "ghi", "sum", 3600e-6, attrs={
                "long_name": "daily global horizontal irradiation", "units": "MJ m-2 d-1"}),
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
    for name in ("inoculated", "grown", "respired", "removed", "lost", "final"):
        ds[f"ledger_{name}"] = (("policy", "member"),
                                daily.ledger[name].reshape(n_pol, members) * depth,
                                {"long_name": f"annual biomass ledger: {name}",
                                 "units": "g m-2"})
    offset = meta.get("utc_offset_h", scenario.site.utc_offset_h)
    ds["date"].attrs = {"long_name": "local standard date",
                        "timezone": f"local standard time, UTC offset {offset} h"}
    ds.attrs = {
        "title": f"pondsim results: {scenario.study_name}",
        "site": str(meta.get("name", scenario.site.name)),
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
        "weather_years": n_years,
        "parameter_draws": n_draws,
        "replicates": reps,
        "photons_per_joule_umol": float(hourly.attrs.get("photons_per_joule_umol", np.nan)),
        "recovery_efficiency": eff,
    }
    crash = scenario.crash
    if crash is not None:
        ds.attrs["crash_enabled"] = int(crash.enabled)
        for name in ("base_hazard_per_d", "stress_hazard_per_d", "overshoot_onset",
                     "window_days", "drop_scale", "loss_fraction", "max_season_probability"):
            ds.attrs[f"crash_{name}"] = getattr(crash, name)
    return ds


def _version() -> str:
    from . import __version__

    return __version__


def policy_summary(ds: xr.Dataset) -> pd.DataFrame:
    """One row per policy: annual and monthly yield, harvests, density and efficiency.

    Member means. Photosynthetic efficiency is the energy of the harvested biomass
    (:data:`BIOMASS_ENERGY_KJ_G`) over the incident PAR (converted with the photon
    conversion used by the light stage) and over total solar (GHI).
    """
    n_days = ds.sizes["day"]
    harvested = ds["harvested"]  # g m-2 d-1
    annual_g_m2 = harvested.sum("day").mean("member")
    month = ds["date"].dt.month
    monthly = harvested.groupby(month).sum().mean("member")  # g m-2 per month
    n_harvests = (ds["harvest_fraction"] > 0).sum("day").mean("member")
    mean_density = ds["density"].where(ds["status"] == 0).mean(("member", "day"))
    energy_kj_m2 = annual_g_m2 * BIOMASS_ENERGY_KJ_G
    # Per weather year when there are several: the mean annual incident energy.
    solar_kj_m2 = float(ds["ghi_daily"].sum("day").mean()) * 1e3
    par_j = float(ds["par_daily"].sum("day").mean()) \
        / ds.attrs.get("photons_per_joule_umol", 4.57) * 1e6
    rows = []
    for p in ds["policy"].values:
        e = float(energy_kj_m2.sel(policy=p))
        eff_solar = e / solar_kj_m2 if solar_kj_m2 > 0 else np.nan
        row = {
            "policy": str(p),
            "yield_t_ha_yr": float(annual_g_m2.sel(policy=p)) * G_M2_TO_T_HA * 365 / n_days,
            "productivity_g_m2_d": float(annual_g_m2.sel(policy=p)) / n_days,
            "harvests": float(n_harvests.sel(policy=p)),
            "mean_density_g_m3": float(mean_density.sel(policy=p)),
            "crashes": float(ds["crashed"].sel(policy=p).sum("day").mean()),
            "efficiency_par_pct": 100 * e * 1e3 / par_j if par_j > 0 else np.nan,
            "efficiency_solar_pct": 100 * eff_solar,
            "plausible": bool(not eff_solar > MAX_SOLAR_EFFICIENCY),
        }
        for m in monthly["month"].values:
            row[f"m{int(m):02d}_g_m2"] = float(monthly.sel(policy=p, month=m))
        rows.append(row)
    return pd.DataFrame(rows).set_index("policy")


def _atomic_write(path: Path, write) -> Path:
    """Write through a temporary file in the same folder, then rename: whole or nothing."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    # mkstemp makes the file private (0600); outputs are meant to be shared: use the
    # permissions an ordinary file gets under the user's umask.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def save(result: xr.Dataset, path: str | Path) -> Path:
    """Write a results Dataset to netCDF (h5netcdf engine, compressed), atomically."""
    encoding = {name: {"zlib": True, "complevel": 4, "shuffle": True}
                for name, var in result.data_vars.items() if var.dtype.kind in "fiu"}
    return _atomic_write(Path(path), lambda tmp: result.to_netcdf(
        tmp, engine="h5netcdf", encoding=encoding))


def write_csv(table: pd.DataFrame, path: str | Path, *, caution: bool = True,
              index: bool = True) -> Path:
    """Write a table to CSV atomically, with the caution as a leading comment line."""
    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            if caution:
                fh.write(f"# {CAUTION}\n")
            table.to_csv(fh, float_format="%.6g", index=index)

    return _atomic_write(Path(path), write)


def monthly_forcing_table(forcing: pd.DataFrame, par, water: pd.DataFrame,
                          pond) -> pd.DataFrame:
    """Monthly weather, light and pond water table (the ``pondsim weather`` output).

    Columns: mean daily GHI [kWh m-2 d-1], mean daily PAR entering the culture
    [mol m-2 d-1], air temperature mean, mean daily max, mean daily min [degC], wind
    [m s-1], relative humidity [%], water temperature mean [degC], evaporation
    [mm d-1], rain [mm per month], makeup water for the farm [m3 per month].
    """
    idx = forcing.index
    day = pd.Index(idx.date, name="date")
    daily = pd.DataFrame({
        "ghi": forcing["ghi"].to_numpy() / 1000.0,  # Wh -> kWh per hour
        "par": np.asarray(par, dtype=float) * 3600e-6,  # umol m-2 s-1 over 1 h -> mol m-2
        "evap": water["evaporation"].to_numpy(),
        "rain": water["rain"].to_numpy() if "rain" in water else 0.0,
    }, index=day).groupby(level=0).sum()
    temps = pd.DataFrame({"t": forcing["temp_air"].to_numpy()}, index=day).groupby(level=0)
    daily["tmax"] = temps["t"].max()
    daily["tmin"] = temps["t"].min()
    month = pd.DatetimeIndex(daily.index).month
    by_m = daily.groupby(month)
    hour_m = idx.month
    makeup_mm = (daily["evap"] - daily["rain"]).clip(lower=0.0)
    table = pd.DataFrame({
        "GHI kWh/m2/d": by_m["ghi"].mean(),
        "PAR mol/m2/d": by_m["par"].mean(),
        "Tair mean C": forcing["temp_air"].groupby(hour_m).mean(),
        "Tair max C": by_m["tmax"].mean(),
        "Tair min C": by_m["tmin"].mean(),
        "wind m/s": forcing["wind_speed"].groupby(hour_m).mean(),
        "RH %": forcing["relative_humidity"].groupby(hour_m).mean(),
        "Twater mean C": water["water_temperature"].groupby(hour_m).mean(),
        "evap mm/d": by_m["evap"].mean(),
        "rain mm": by_m["rain"].sum(),
        "makeup m3": makeup_mm.groupby(month).sum() * 1e-3 * pond.farm_area_m2,
    })
    table.index = pd.Index([pd.Timestamp(2000, m, 1).strftime("%b") for m in table.index],
                           name="month")
    table.loc["year"] = [
        daily["ghi"].mean(), daily["par"].mean(), forcing["temp_air"].mean(),
        daily["tmax"].mean(), daily["tmin"].mean(), forcing["wind_speed"].mean(),
        forcing["relative_humidity"].mean(), water["water_temperature"].mean(),
        daily["evap"].mean(), daily["rain"].sum(),
        makeup_mm.sum() * 1e-3 * pond.farm_area_m2]
    return table
