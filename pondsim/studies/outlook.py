"""Annual outlook for a business case: yield distribution over weather years and parameter
draws (P50/P75/P90), monthly bands, Sobol sensitivity and the inputs bill.

P-values follow the finance convention of exceedance: P90 is the annual yield exceeded in
90 % of years (the 10th percentile), P50 the median.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.errors import InputError
from pondsim.glossary import G_M2_TO_T_HA
from pondsim.operations.simulate import load_forcing, simulate
from pondsim.results.tables import lead_policy
from pondsim.studies.outlook_blocks import run_blocks, with_member_dim
from pondsim.studies.quantiles import (
    CONFIDENCE,
    EXCEEDANCE,
    format_interval,
    member_cube,
    nested_bootstrap,
)
from pondsim.studies.uncertainty import distributions, sample_draws, sobol

__all__ = ["EXCEEDANCE", "weather_years", "member_cube", "farm_totals", "annual_table",
           "headline", "monthly_bands", "sensitivity", "run_outlook"]


def weather_years(scenario, n_years: int, seed: int):
    """Forcing tables for the outlook: the file's own complete years when it holds
    several real years, else ``n_years`` synthetic years resampled from the typical year
    (:func:`pondsim.forcing.years.generate_years`). Returns ``(tables, meta)``."""
    from pondsim.forcing.years import generate_years

    table, meta = load_forcing(scenario)
    real = _real_years(scenario)
    if real is not None:
        meta = dict(meta)
        meta.setdefault("notes", []).append(f"{len(real)} real weather years used as they are")
        return real, meta
    return generate_years(table, n_years, seed=seed), meta


def _real_years(scenario):
    """The complete real years of a multi-year weather file, re-dated onto the study
    year's calendar (Feb 29 dropped or copied from Feb 28), or None."""
    if scenario.weather.source != "file":
        return None
    from pondsim.forcing.weather import read_weather
    from pondsim.forcing.years import split_years

    site = scenario.site
    table, meta = read_weather(scenario.weather.path, fmt=scenario.weather.format,
                               latitude=site.latitude, longitude=site.longitude,
                               elevation_m=site.elevation_m, utc_offset_h=site.utc_offset_h,
                               max_gap_h=scenario.weather.max_gap_h)
    if meta.get("typical_year") or len(set(table.index.year)) < 2:
        return None
    years = split_years(table)
    target, _ = load_forcing(scenario)
    out = []
    for y in years:
        feb29 = (y.index.month == 2) & (y.index.day == 29)
        y = y[~feb29]
        if len(target) == len(y) + 24:  # leap study year: copy Feb 28 as Feb 29
            feb28 = np.flatnonzero((y.index.month == 2) & (y.index.day == 28))
            y = pd.concat([y.iloc[: feb28[-1] + 1], y.iloc[feb28], y.iloc[feb28[-1] + 1:]])
        y = y.copy()
        y.index = target.index
        out.append(y)
    return out


def farm_totals(pond, count: int, correlation: float = 0.0, seed: int | None = 0):
    """Annual farm totals from per-pond annual values.

    The farm's ``count`` ponds share each cell's weather year and parameter draw; each
    pond takes the crash history of one of the cell's crash replicates, drawn with
    replacement (a bootstrap of the pond population from the cell's replicates), so the
    farm total is ``sum_i x[r_i]``. With ``correlation`` rho > 0 each pond copies a
    shared replicate with probability ``sqrt(rho)`` and draws its own otherwise, which
    gives any two ponds a correlation of exactly rho (both copy with probability rho;
    otherwise they are independent). As many farm realisations are drawn per cell as
    it has replicates.

    Parameters
    ----------
    pond : ndarray (n_policy, n_years, n_draws, n_replicates)
        Annual value of one pond (e.g. [t yr-1]).
    count : int
        Ponds in the farm.
    correlation : float [1]
    seed : int, optional

    Returns
    -------
    ndarray, same shape
        Farm totals (same unit as the input, summed over ponds). With identical
        replicates (no crashes) every total is exactly ``count`` times the pond's.

    Notes
    -----
    Replicates stand for the population of ponds: with few replicates per cell the
    farm's crash spread is estimated from few pond histories (at least 8 replicates
    is advised when ponds crash independently, common practice for a bootstrap).
    """
    rng = np.random.default_rng(seed)
    q = np.sqrt(float(correlation))
    x = np.asarray(pond, dtype=float)
    n_pol, ny, nd, nr = x.shape
    shape = (ny, nd, nr)                                      # one farm per replicate
    shared_n = rng.binomial(int(count), q, size=shape)
    shared = rng.integers(0, nr, size=shape)
    own = rng.multinomial(int(count) - shared_n, np.full(nr, 1.0 / nr))  # (Y, D, F, R)
    dev = x - x[..., :1]                       # exactly 0 for identical replicates
    dev_shared = np.take_along_axis(dev, np.broadcast_to(shared, (n_pol,) + shape), axis=3)
    return (count * x[..., :1] + shared_n[None] * dev_shared
            + np.einsum("pydr,ydfr->pydf", dev, own.astype(float)))


def _annual_values(ds: xr.Dataset) -> np.ndarray:
    """Annual harvested yield per policy and member [t ha-1 yr-1], (n_policy, n_member)."""
    annual = ds["harvested"].sum("day") * G_M2_TO_T_HA * 365.0 / ds.sizes["day"]
    return annual.transpose("policy", "member").values


def annual_table(ds: xr.Dataset, farm_area_m2: float | None = None, *,
                 count: int | None = None, crash_correlation: float = 0.0,
                 confidence: float = CONFIDENCE, seed: int | None = 0) -> pd.DataFrame:
    """Annual yield per policy with exceedance values and their Monte Carlo intervals.

    Parameters
    ----------
    ds : xarray.Dataset
        Outlook results (:func:`run_outlook`) or any :func:`pondsim.simulate` output.
    farm_area_m2 : float, optional
        Kept for callers of the per-area form; the farm is ``count`` ponds of
        ``ds.attrs["pond_area_m2"]`` (a farm area that is not a whole number of ponds
        is taken as one pond of that area).
    count : int, optional
        Ponds in the farm (default ``ds.attrs["pond_count"]``).
    crash_correlation : float [1]
        Correlation of crash losses between ponds (:func:`farm_totals`).
    confidence : float
    seed : int, optional
        Seed of the bootstrap and of the farm's pond draws.

    Returns
    -------
    pandas.DataFrame
        Index ``policy``. Per pond area: ``mean_t_ha_yr``, ``P50_t_ha_yr``,
        ``P75_t_ha_yr``, ``P90_t_ha_yr`` with ``<name>_low_t_ha_yr`` and
        ``<name>_high_t_ha_yr`` (interval limits at ``confidence_pct``); for the farm,
        the same as ``<name>_farm_t_yr`` [t AFDW yr-1] from the distribution of the sum
        over its ponds; ``mean_g_m2_d``, ``expected_crashes_yr`` (per pond),
        ``members``, ``weather_years``, ``parameter_draws``, ``replicates``,
        ``ponds``, ``confidence_pct``. P90 is the value exceeded with probability 0.9.
    """
    values = _annual_values(ds)
    area = float(ds.attrs.get("pond_area_m2", farm_area_m2 or 1e4))
    n_ponds = int(count if count is not None else ds.attrs.get("pond_count", 1))
    if count is None and farm_area_m2 is not None and not np.isclose(
            n_ponds * area, farm_area_m2):
        area, n_ponds = float(farm_area_m2), 1
    cube = member_cube(values, ds)
    levels = list(EXCEEDANCE.values())
    pond = nested_bootstrap(cube, levels, confidence=confidence, seed=seed)
    farm_c = farm_totals(cube * area / 1e4, n_ponds, crash_correlation, seed=seed)
    farm = nested_bootstrap(farm_c, levels, confidence=confidence, seed=seed)
    farm_all = farm_c.reshape(farm_c.shape[0], -1)
    crashes = ds["crashed"].sum("day").transpose("policy", "member").values
    rows = []
    for j, pol in enumerate(ds["policy"].values):
        row = {"policy": str(pol), "mean_t_ha_yr": float(values[j].mean())}
        for k, name in enumerate(EXCEEDANCE):
            row[f"{name}_t_ha_yr"] = pond[0][j, k]
            row[f"{name}_low_t_ha_yr"] = pond[1][j, k]
            row[f"{name}_high_t_ha_yr"] = pond[2][j, k]
        row["mean_farm_t_yr"] = float(farm_all[j].mean())
        for k, name in enumerate(EXCEEDANCE):
            row[f"{name}_farm_t_yr"] = farm[0][j, k]
            row[f"{name}_low_farm_t_yr"] = farm[1][j, k]
            row[f"{name}_high_farm_t_yr"] = farm[2][j, k]
        row["mean_g_m2_d"] = float(values[j].mean()) / G_M2_TO_T_HA / 365.0
        row["expected_crashes_yr"] = float(crashes[j].mean())
        row["members"] = int(values.shape[1])
        row["weather_years"] = int(cube.shape[1])
        nested = bool(ds.attrs.get("draws_nested", 0))
        row["parameter_draws"] = int(cube.shape[2] * (cube.shape[1] if nested else 1))
        row["replicates"] = int(cube.shape[3])
        row["ponds"] = n_ponds
        row["confidence_pct"] = round(100 * confidence, 6)
        rows.append(row)
    return pd.DataFrame(rows).set_index("policy")


def headline(table: pd.DataFrame, policy: str, *, farm: bool = False) -> list[str]:
    """``["P50 ... 95 % CI ...", "P90 ..."]`` for one policy of :func:`annual_table`."""
    unit, suffix = ("t yr-1 (farm)", "farm_t_yr") if farm else ("t ha-1 yr-1", "t_ha_yr")
    conf = float(table["confidence_pct"].iloc[0]) / 100
    r = table.loc[policy]
    return [format_interval(n, r[f"{n}_{suffix}"], r[f"{n}_low_{suffix}"],
                            r[f"{n}_high_{suffix}"], unit, conf) for n in ("P50", "P90")]


def monthly_bands(ds: xr.Dataset) -> pd.DataFrame:
    """Per policy and month: the 10th, 50th and 90th percentiles (``pct10``, ``pct50``,
    ``pct90``; ``pct90`` is the high value) and the mean over members of the month's
    harvested productivity [g m-2 d-1]."""
    month = ds["date"].dt.month
    # (policy, member, month); computed once (the outlook's Dataset may be file-backed)
    monthly = ds["harvested"].groupby(month).mean("day").compute()
    rows = []
    for pol in ds["policy"].values:
        for m in monthly["month"].values:
            v = monthly.sel(policy=pol, month=m).values
            q10, q50, q90 = np.percentile(v, [10, 50, 90])
            rows.append({"policy": str(pol), "month": int(m), "pct10_g_m2_d": q10,
                         "pct50_g_m2_d": q50, "pct90_g_m2_d": q90,
                         "mean_g_m2_d": v.mean()})
    return pd.DataFrame(rows).set_index(["policy", "month"])

def sensitivity(scenario, policy: str, *, n: int, seed: int, forcing=None) -> pd.DataFrame:
    """Sobol indices of the annual yield of *policy* to the uncertain parameters, on the
    scenario's own weather year, without crashes (so that the indices speak of growth,
    not of random draws)."""
    import dataclasses

    dists = distributions(scenario)
    if not dists:
        raise InputError("no uncertain parameters: give some strain parameters a "
                         "distribution in [uncertainty]", path=scenario.path,
                         field="uncertainty")
    names = list(dists)
    chosen = [p for p in scenario.policies if p.name == policy]
    plans = [p for p in scenario.plans if p.name == policy]
    quiet = scenario.replace(crash=dataclasses.replace(scenario.crash, enabled=False),
                             policies=scenario.policies if plans else tuple(chosen),
                             plans=tuple(plans))
    forcing = load_forcing(scenario) if forcing is None else forcing

    def model(x):
        draws = {name: x[i] for i, name in enumerate(names)}
        ds = simulate(quiet, members=1, seed=seed, forcing=forcing, draws=draws,
                      progress=False)
        return (ds["harvested"].sel(policy=policy).sum("day").values
                * G_M2_TO_T_HA * 365.0 / ds.sizes["day"])

    return sobol(model, dists, n, seed)


def _round(scenario, *, n_years, n_draws, members, seed, progress, real, runner=None,
           spill_dir=None, block_years=None):
    """One round of the ensemble: its weather years (new synthetic ones, or the real
    ones) x draws nested in each year x crash replicates, in blocks of weather years
    (:mod:`pondsim.studies.outlook_blocks`)."""
    years, meta = (real if real is not None else weather_years(scenario, n_years, seed))
    draws = (sample_draws(scenario, n_draws, seed, n_years=len(years))
             if scenario.uncertainty.parameters else {})
    ds = run_blocks(scenario, years, draws or None, members=members, n_draws=n_draws,
                    seed=seed, meta=meta, weather_basis=years_basis(scenario, meta,
                                                                    len(years)),
                    runner=runner, spill_dir=spill_dir, block_years=block_years,
                    progress=progress)
    ds.attrs["draws_nested"] = 1
    return ds, meta


def _merge_rounds(parts, axis: str) -> xr.Dataset:
    """Concatenate rounds along ``member``, numbering on along ``axis``: new synthetic
    ``weather_year``s; new ``draw``s in the same real years; or, with real years and no
    uncertain parameter, new crash ``replicate``s."""
    if len(parts) == 1:
        return parts[0]
    pieces, offset = [], {"weather_year": 0, "draw": 0, "replicate": 0}
    sizes = {"weather_year": "weather_years", "draw": "parameter_draws",
             "replicate": "replicates"}
    for ds in parts:
        d = with_member_dim(ds)
        d = d.assign_coords({axis: d[axis] + offset[axis]})
        offset[axis] += int(ds.attrs[sizes[axis]])
        pieces.append(d)
    ds = xr.concat(pieces, dim="member", data_vars="all", coords="different",
                   compat="equals", join="exact", combine_attrs="override")
    ds = ds.assign_coords(member=np.arange(ds.sizes["member"]))
    ds.attrs[sizes[axis]] = offset[axis]
    return ds


def run_outlook(scenario, *, n_years: int, n_draws: int | None = None, members: int = 1,
                seed: int | None = None, progress: bool | None = None,
                converge: bool = False, target_pct: float | None = None,
                max_members: int | None = None, report=None, runner=None,
                spill_dir=None, block_years: int | None = None):
    """The outlook ensemble: weather years x parameter draws x crash replicates.

    Parameters
    ----------
    scenario : Scenario
    n_years : int
        Synthetic weather years of the first round (ignored for a file of real years,
        which are all used as they are).
    n_draws : int, optional
        Parameter draws per round (default ``uncertainty.draws``).
    members : int
        Crash replicates per weather year and draw.
    seed : int, optional
    progress : bool, optional
    converge : bool
        Grow the ensemble in rounds until the lead policy's (highest P50 without
        washout) P90 is known to within ``target_pct`` % of its P50 (95 % interval
        half-width), or until the next round would pass ``max_members`` members per
        policy. Each round doubles the ensemble: new synthetic years (as many as so
        far) with their own draws, or, with
        real years, as many new draws per year as so far (new crash replicates when no
        parameter is uncertain). Every weather year has its
        own ``n_draws`` parameter draws (nested), so distinct draws grow with the years.
    target_pct : float, optional [%]
        Default ``uncertainty.p90_target_pct``.
    max_members : int, optional
        Default ``uncertainty.max_members``.
    report : callable, optional
        ``report(text)`` after each round (e.g. ``print``).
    runner : pondsim.studies.scheduling.Runner, optional
        Where the blocks of weather years run (default: in this process); the results
        do not depend on it.
    spill_dir : path, optional
        Folder for the blocks' daily outputs: memory then stays flat in the number of
        weather years and the returned Dataset is backed by those files (keep the folder
        until done with it). Default: everything in memory.
    block_years : int, optional
        Weather years per block (default
        :func:`pondsim.studies.outlook_blocks.years_per_block`).

    Returns
    -------
    ds, meta
        The ensemble (draws nested in weather years: ``draw`` numbers a year's own
        draws), with attributes ``converged`` (1/0, absent without ``converge``),
        ``p90_half_width_pct`` and ``p90_target_pct``; ``meta["rounds"]`` lists every
        round's size and headline (the convergence record).
    """
    seed = scenario.run.seed if seed is None else int(seed)
    unc = scenario.uncertainty
    n_draws = int(n_draws or unc.draws) if unc.parameters else 1
    target = float(unc.p90_target_pct if target_pct is None else target_pct)
    cap = int(unc.max_members if max_members is None else max_members)
    real = _real_years(scenario)
    real_pair = None
    if real is not None:
        _, meta0 = load_forcing(scenario)
        meta0 = dict(meta0)
        meta0["notes"] = list(meta0.get("notes", [])) + [
            f"{len(real)} real weather years used as they are"]
        real_pair = (real, meta0)
    axis = ("weather_year" if real is None else "draw" if unc.parameters else "replicate")
    seeds = np.random.SeedSequence(seed).generate_state(64, dtype=np.uint32)
    parts, rounds, meta = [], [], {}
    size_y, size_d, size_r = n_years, n_draws, members
    for k in range(64):
        # round 1 keeps the given seed, so a single round is the plain ensemble
        sub = seed if k == 0 else int(seeds[k])
        ds_k, meta = _round(scenario, n_years=size_y, n_draws=size_d, members=size_r,
                            seed=sub, progress=progress, real=real_pair, runner=runner,
                            spill_dir=spill_dir, block_years=block_years)
        parts.append(ds_k)
        ds = _merge_rounds(parts, axis)
        ds.attrs["weather_basis"] = years_basis(scenario, meta,
                                                int(ds.attrs["weather_years"]))
        if not converge:
            return ds, meta
        table = annual_table(ds, seed=seed)
        lead = lead_policy(table, ds)
        r = table.loc[lead]
        half = 0.5 * (r["P90_high_t_ha_yr"] - r["P90_low_t_ha_yr"])
        half_pct = 100 * half / r["P50_t_ha_yr"] if r["P50_t_ha_yr"] > 0 else np.inf
        n_mem = ds.sizes["member"]
        done = bool(np.isfinite(half_pct) and half_pct <= target)
        rounds.append({"round": k + 1, "members": n_mem,
                       "weather_years": int(r["weather_years"]),
                       "parameter_draws": int(r["parameter_draws"]),
                       "replicates": int(r["replicates"]), "lead_policy": lead,
                       "P50_t_ha_yr": r["P50_t_ha_yr"], "P90_t_ha_yr": r["P90_t_ha_yr"],
                       "P90_low_t_ha_yr": r["P90_low_t_ha_yr"],
                       "P90_high_t_ha_yr": r["P90_high_t_ha_yr"],
                       "p90_half_width_pct": half_pct, "p90_target_pct": target})
        if report is not None:
            report(f"  round {k + 1}: {n_mem} members per policy "
                   f"({r['weather_years']:.0f} weather years x "
                   f"{r['parameter_draws'] / r['weather_years']:.0f} draws each x "
                   f"{r['replicates']:.0f} crash replicates); P90 of {lead!r} 95 % CI "
                   "half-width "
                   f"{half_pct:.1f} % of P50 (target {target:g} %)")
        # next round doubles the ensemble: as many new synthetic years (each with its
        # own draws) as so far, or, with real years, as many new draws per year (or new
        # crash replicates when no parameter is uncertain)
        size_y = int(ds.attrs["weather_years"])
        size_d = int(ds.attrs["parameter_draws"]) if axis == "draw" else n_draws
        size_r = int(ds.attrs["replicates"]) if axis == "replicate" else members
        if done or 2 * n_mem > cap:
            break
    ds.attrs.update({"converged": int(done), "p90_half_width_pct": float(half_pct),
                     "p90_target_pct": target, "rounds": len(rounds)})
    meta = dict(meta)
    meta["rounds"] = rounds
    return ds, meta


def years_basis(scenario, meta: dict, n_years: int) -> str:
    """Plain words for the weather years of :func:`weather_years`: the file's real years,
    or synthetic years resampled from the scenario's weather year."""
    w = scenario.weather
    name = w.path.name if w.source == "file" and w.path is not None else \
        "clear-sky weather from monthly normals"
    if any("real weather years" in str(n) for n in meta.get("notes", [])):
        return f"{n_years} real weather years of {name}"
    return (f"{n_years} synthetic weather years resampled from the scenario's weather "
            f"year ({name})")
