"""Tune the harvest plan season by season.

For each season in calendar order, every candidate rule of every type (fixed fraction:
fraction × interval; threshold: residual × trigger/residual ratio; fixed interval:
interval × residual) is simulated as a group of members in ONE vectorised engine pass,
over the weather years and crash replicates, with the seasons already tuned fixed and the
later seasons on their current policy. The best candidate that meets the scenario's risk
limit (probability of at least one crash in the season) is then refined with
``scipy.optimize.minimize`` (Nelder–Mead) on its continuous parameters, with common
random numbers so that the objective is smooth in the parameters.

Objective of a season: mean over members of the biomass harvested in the season plus the
standing biomass at the season's end [g m-2] — counting the stock left for the next
season keeps a rule from mining the culture just before the season changes.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import minimize

from pondsim.operations.engine import Drivers, Operation, integrate
from pondsim.operations.harvest import rules_from_entries, season_of_day
from pondsim.scenario import Policy

#: Candidate grids (per season). Densities are multiples of the season's mean K.
FRACTIONS = np.round(np.linspace(0.03, 0.45, 15), 3)
FRACTION_INTERVALS = (1, 2, 3)
RESIDUAL_SHARES = (0.15, 0.25, 0.35, 0.45, 0.55, 0.65, 0.75)
TRIGGER_RATIOS = (1.1, 1.25, 1.5, 1.8, 2.2)
INTERVALS = (2, 3, 4, 5, 7)


@dataclass
class Ensemble:
    """What a tuning run evaluates on: drivers, members per candidate, operation."""

    drivers: Drivers
    per_candidate: int  # members per candidate = driver sets × replicates
    set_of_member: np.ndarray  # (per_candidate,)
    operation: Operation
    crash: object
    seed: int
    depth_m: float
    engine: str = "numpy"


def candidates(k_mean: float) -> list[Policy]:
    """The coarse candidate rules for a season whose mean carrying capacity is
    *k_mean* [g m-3]."""
    out = []
    for every in FRACTION_INTERVALS:
        for f in FRACTIONS:
            out.append(Policy(name=f"fixed_fraction {f:.3f}/{every} d", type="fixed_fraction",
                              fraction=float(f), every_days=every))
    for share in RESIDUAL_SHARES:
        residual = max(share * k_mean, 1.0)
        for ratio in TRIGGER_RATIOS:
            out.append(Policy(name=f"threshold {ratio * residual:.0f}/{residual:.0f}",
                              type="threshold", trigger_g_m3=float(ratio * residual),
                              residual_g_m3=float(residual)))
        for every in INTERVALS:
            out.append(Policy(name=f"fixed_interval {every} d to {residual:.0f}",
                              type="fixed_interval", every_days=every,
                              residual_g_m3=float(residual)))
    return out


def evaluate(ens: Ensemble, plans: list[list[Policy]], period_of_day, season: int):
    """Season objective [g m-2] and crash probability of each plan (lists of per-season
    policies), all plans in one engine pass.

    Returns ``(objective, p_crash)`` arrays of shape (len(plans),).
    """
    rules = rules_from_entries(plans, period_of_day, repeat=ens.per_candidate)
    n = len(plans)
    set_of_member = np.tile(ens.set_of_member, n)
    stream = np.tile(np.arange(ens.per_candidate), n)  # common random numbers
    daily = integrate(ens.drivers, rules, ens.operation, set_of_member=set_of_member,
                      crash=ens.crash, seed=ens.seed, stream_of_member=stream,
                      engine=ens.engine)
    in_season = np.asarray(period_of_day) == season
    last = int(np.flatnonzero(in_season)[-1])
    harvested = daily.removed[:, in_season].sum(axis=1) * ens.operation.recovery_efficiency
    value = (harvested + daily.density[:, last]) * ens.depth_m
    crashed = daily.crashed[:, in_season].any(axis=1)
    shape = (n, ens.per_candidate)
    return value.reshape(shape).mean(axis=1), crashed.reshape(shape).mean(axis=1)


def _with(plan, season, policy):
    new = list(plan)
    new[season] = policy
    return new


def _refine(ens, plan, season, period_of_day, best: Policy, limit: float, k_mean: float,
            maxfev: int):
    """Nelder–Mead on the continuous parameters of *best*; returns (policy, value, p)."""
    def make(x):
        if best.type == "fixed_fraction":
            return dataclasses.replace(best, fraction=float(np.clip(x[0], 1e-3, 1.0)))
        if best.type == "threshold":
            residual = float(np.clip(x[0], 1.0, 20000.0))
            ratio = float(np.clip(x[1], 1.02, 10.0))
            return dataclasses.replace(best, residual_g_m3=residual,
                                       trigger_g_m3=residual * ratio)
        return dataclasses.replace(best, residual_g_m3=float(np.clip(x[0], 1.0, 20000.0)))

    if best.type == "fixed_fraction":
        x0 = [best.fraction]
    elif best.type == "threshold":
        x0 = [best.residual_g_m3, best.trigger_g_m3 / best.residual_g_m3]
    elif best.type == "fixed_interval" and best.residual_g_m3 is not None:
        x0 = [best.residual_g_m3]
    else:
        return best, *evaluate(ens, [_with(plan, season, best)], period_of_day, season)

    scale = np.array([0.05 if best.type == "fixed_fraction" else 0.1 * k_mean] +
                     ([0.2] if best.type == "threshold" else []))
    memo = {}

    def objective(z):
        policy = make(np.asarray(x0) + z * scale)
        value, p = evaluate(ens, [_with(plan, season, policy)], period_of_day, season)
        value, p = float(value[0]), float(p[0])
        memo[tuple(np.round(z, 6))] = (policy, value, p)
        # Above the risk limit the objective falls steeply (10 % of the value per
        # percentage point of excess probability).
        return -(value - 10.0 * max(p - limit, 0.0) * abs(value))

    minimize(objective, np.zeros(len(x0)), method="Nelder-Mead",
             options={"maxfev": maxfev, "xatol": 0.05, "fatol": 1e-3})
    ok = [v for v in memo.values() if v[2] <= limit]
    pool = ok if ok else list(memo.values())
    key = (lambda v: v[1]) if ok else (lambda v: -v[2])
    policy, value, p = max(pool, key=key)
    return policy, np.array([value]), np.array([p])


def tune_plan(ens: Ensemble, seasons, dates, start_plan: list[Policy], *, limit: float,
              refine: bool = True, maxfev: int = 12, progress=None):
    """Tune each season's rule; returns ``(plan, table)``.

    ``table`` has one row per season: the chosen rule, its objective [g m-2], its crash
    probability, and whether it meets the limit.
    """
    period_of_day = season_of_day(dates, seasons)
    order = sorted(range(len(seasons)),
                   key=lambda s: int(np.flatnonzero(period_of_day == s)[0]))
    plan = list(start_plan)
    rows = []
    k_daily = ens.drivers.capacity.mean(axis=0)
    for s in order:
        in_season = period_of_day == s
        k_mean = float(max(k_daily[in_season].mean(), 10.0))
        cands = candidates(k_mean)
        plans = [_with(plan, s, c) for c in cands]
        value, p = evaluate(ens, plans, period_of_day, s)
        ok = p <= limit
        i = int(np.argmax(np.where(ok, value, -np.inf))) if ok.any() else int(np.argmin(p))
        best, best_value, best_p = cands[i], value[i:i + 1], p[i:i + 1]
        if refine:
            refined, v, q = _refine(ens, plan, s, period_of_day, best, limit, k_mean, maxfev)
            if (q[0] <= limit or not ok.any()) and v[0] >= best_value[0]:
                best, best_value, best_p = refined, v, q
        plan[s] = best
        rows.append({"season": seasons[s].name, "rule": describe(best),
                     "objective_g_m2": float(best_value[0]),
                     "p_crash": float(best_p[0]), "within_risk_limit": bool(best_p[0] <= limit),
                     "candidates": len(cands)})
        if progress is not None:
            progress(1)
    return plan, pd.DataFrame(rows).set_index("season")


def describe(p: Policy) -> str:
    """A short human description of a rule."""
    if p.type == "fixed_fraction":
        return f"remove {100 * p.fraction:.1f} % every {p.every_days} d"
    if p.type == "threshold":
        return f"at {p.trigger_g_m3:.0f} g/m3 harvest down to {p.residual_g_m3:.0f} g/m3"
    if p.type == "fixed_interval":
        if p.residual_g_m3 is not None:
            return f"every {p.every_days} d harvest down to {p.residual_g_m3:.0f} g/m3"
        return f"every {p.every_days} d remove {100 * p.fraction:.1f} %"
    return "no harvest"


def _toml_value(v) -> str:
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(round(v, 6)) if math.isfinite(v) else "nan"
    return str(v)


def tuned_scenario_text(original: str, seasons, plan: list[Policy],
                        existing_names) -> tuple[str, str]:
    """The original scenario text with the tuned rules appended as [[policy]] tables and
    a [[plan]] using them. Returns ``(text, plan_name)``."""
    taken = set(existing_names)
    plan_name = "tuned plan"
    while plan_name in taken:
        plan_name += "'"
    lines = ["", "# ---- added by `pondsim tune` --------------------------------------------"]
    names = {}
    for season, p in zip(seasons, plan, strict=True):
        name = f"tuned {season.name}"
        while name in taken:
            name += "'"
        taken.add(name)
        names[season.name] = name
        lines += ["", "[[policy]]", f"name = {_toml_value(name)}",
                  f"type = {_toml_value(p.type)}", f"# {describe(p)}"]
        for key in ("fraction", "every_days", "trigger_g_m3", "residual_g_m3"):
            value = getattr(p, key)
            if value is not None and not (key == "every_days" and p.type == "threshold"):
                lines.append(f"{key} = {_toml_value(value)}")
    pairs = ", ".join(f"{_toml_value(k)} = {_toml_value(v)}" for k, v in names.items())
    lines += ["", "[[plan]]", f"name = {_toml_value(plan_name)}",
              f"policy_by_season = {{ {pairs} }}", ""]
    return original.rstrip("\n") + "\n" + "\n".join(lines), plan_name


def write_text(path: Path, text: str) -> Path:
    from pondsim.results.files import atomic_write

    def write(tmp):
        Path(tmp).write_text(text, encoding="utf-8")

    return atomic_write(Path(path), write)


def tune_scenario(scenario, *, n_years: int, members: int, seed: int | None = None,
                  refine: bool = True, progress: bool = True):
    """Tune the scenario's plan per season over ``n_years`` weather years and
    ``members`` crash replicates each.

    Returns ``(plan, table, start_names)``: the tuned rule per season (scenario season
    order), the per-season table, and the names of the starting policies (the scenario's
    best existing policy in each season).
    """
    from pondsim.operations.simulate import (
        build_drivers,
        crash_model_of,
        hourly_light_and_water,
        operation_of,
        simulate,
    )
    from pondsim.studies.compare import best_by_season, season_table
    from pondsim.studies.outlook import weather_years

    seed = scenario.run.seed if seed is None else seed
    years, meta = weather_years(scenario, n_years, seed)
    limit = scenario.crash.max_season_probability
    # Start from the scenario's own best policy in each season.
    ds = simulate(scenario, members=members, seed=seed, forcing=(years[0], meta),
                  weather_years=years, progress=False)
    best = best_by_season(season_table(ds), limit)
    entries = {p.name: p for p in scenario.policies}
    plan_by_name = {pl.name: pl for pl in scenario.plans}
    start = []
    for season in scenario.seasons:
        name = best.loc[season.name, "best_policy"]
        if name in plan_by_name:
            name = plan_by_name[name].policy_by_season[season.name]
        start.append(entries[name])
    hourly = [hourly_light_and_water(t, scenario) for t in years]
    drivers = build_drivers(hourly, scenario)
    ens = Ensemble(drivers=drivers, per_candidate=drivers.n_sets * members,
                   set_of_member=np.repeat(np.arange(drivers.n_sets), members),
                   operation=operation_of(scenario), crash=crash_model_of(scenario),
                   seed=seed, depth_m=scenario.pond.depth_m, engine=scenario.run.engine)
    dates = hourly[0].index[::24]
    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(scenario.seasons), unit="season", desc="tuning", leave=False)
    try:
        plan, table = tune_plan(ens, scenario.seasons, dates, start, limit=limit,
                                refine=refine,
                                progress=None if bar is None else bar.update)
    finally:
        if bar is not None:
            bar.close()
    table.insert(0, "started_from", [start[[s.name for s in scenario.seasons].index(i)].name
                                     for i in table.index])
    return plan, table
