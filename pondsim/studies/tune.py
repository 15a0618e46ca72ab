"""Tune the harvest plan season by season, for what the farm can process and sell.

For each season in calendar order, every candidate rule of every type (fixed fraction:
fraction x interval; threshold: residual x trigger/residual ratio; fixed interval:
interval x residual) is simulated as a group of members in ONE vectorised engine pass,
over the weather years and crash replicates, with the seasons already tuned fixed and the
later seasons on their current rule. The best acceptable candidate is then refined with
``scipy.optimize.minimize`` (Nelder-Mead) on its continuous parameters, with common
random numbers so that the objective is smooth in the parameters.

Objective: the *whole-year* value of the plan with the candidate in place (see
:mod:`pondsim.operations.plan_runs`): product harvested over the year plus the product the
standing stock at the year's end would give, less the dewatering cost
(``harvest.dewatering_cost_kg_per_m3``), mean over members [g m-2 per year]. Judging a
season's rule on the whole year makes the stock it hands to the next season count.

Acceptable (:mod:`pondsim.studies.seasons`): crash probability in the season within the
risk limit, the farm's dewatering load within ``harvest.dewatering_capacity_m3_per_d``,
and no member washed out (held at its viable floor for more than
``harvest.washout_days`` days in a row).

Afterwards :func:`tune_scenario` checks each season's tuned rule against the existing
rule it started from on FRESH draws (new weather years and crash streams), with the rest
of the tuned plan in place: a rule that breaks the season's limits less there wins;
with equal standing the tuned rule is kept only where the paired difference of
whole-year value over common random numbers exceeds twice its standard error (a
one-sided z-test at about 2.3 %); otherwise the existing rule stays
(:func:`pondsim.studies.seasons.keep_new_rule`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import minimize

from pondsim.operations.harvest import season_of_day
from pondsim.operations.plan_runs import (
    Ensemble,
    ensemble_of,
    paired_difference,
    run_plans,
    scenario_plans,
)
from pondsim.scenario import Policy
from pondsim.studies.seasons import (
    Limits,
    best_index,
    best_original,
    coordinate_search,
    keep_new_rule,
    offence,
    run_plans_on,
    select,
    stack,
    violations,
)

__all__ = ["Ensemble", "candidates", "evaluate", "tune_plan", "tune_scenario", "describe",
           "tuned_scenario_text", "write_text", "TuneResult", "Z_KEEP"]

#: Candidate grids (per season). Densities are multiples of the season's mean K.
FRACTIONS = np.round(np.linspace(0.03, 0.45, 15), 3)
FRACTION_INTERVALS = (1, 2, 3)
RESIDUAL_SHARES = (0.15, 0.25, 0.35, 0.45, 0.55, 0.65, 0.75)
TRIGGER_RATIOS = (1.1, 1.25, 1.5, 1.8, 2.2)
INTERVALS = (2, 3, 4, 5, 7)

#: A tuned rule replaces the existing one only if its mean paired gain on fresh draws
#: exceeds this many standard errors (one-sided z-test, about 2.3 % false-change rate
#: under a normal sampling distribution of the mean difference).
Z_KEEP = 2.0


def candidates(k_mean: float, floor_g_m3: float = 0.0) -> list[Policy]:
    """The coarse candidate rules for a season whose mean carrying capacity is
    *k_mean* [g m-3]; residuals stay at or above the viable floor *floor_g_m3*."""
    out = []
    for every in FRACTION_INTERVALS:
        for f in FRACTIONS:
            out.append(Policy(name=f"fixed_fraction {f:.3f}/{every} d", type="fixed_fraction",
                              fraction=float(f), every_days=every))
    residuals = sorted({max(share * k_mean, floor_g_m3, 1.0) for share in RESIDUAL_SHARES})
    for residual in residuals:
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
    """Whole-year value [g m-2] and crash probability in *season* of each plan (lists of
    per-season policies), all plans in one engine pass.

    Returns ``(value, p_crash)`` arrays of shape (len(plans),).
    """
    out = run_plans(ens, plans, period_of_day)
    return out.value.mean(axis=1), out.p_crash()[:, season]


def _with(plan, season, policy):
    new = list(plan)
    new[season] = policy
    return new


def _refine(ens, plan, season, period_of_day, best: Policy, limits: Limits, k_mean: float,
            maxfev: int, floor_g_m3: float):
    """Nelder-Mead on the continuous parameters of *best*; returns (policy, outcome)."""
    low_residual = max(1.0, floor_g_m3)

    def make(x):
        if best.type == "fixed_fraction":
            return dataclasses.replace(best, fraction=float(np.clip(x[0], 1e-3, 1.0)))
        if best.type == "threshold":
            residual = float(np.clip(x[0], low_residual, 20000.0))
            ratio = float(np.clip(x[1], 1.02, 10.0))
            return dataclasses.replace(best, residual_g_m3=residual,
                                       trigger_g_m3=residual * ratio)
        return dataclasses.replace(best, residual_g_m3=float(np.clip(x[0], low_residual,
                                                                     20000.0)))

    if best.type == "fixed_fraction":
        x0 = [best.fraction]
    elif best.type == "threshold":
        x0 = [best.residual_g_m3, best.trigger_g_m3 / best.residual_g_m3]
    elif best.type == "fixed_interval" and best.residual_g_m3 is not None:
        x0 = [best.residual_g_m3]
    else:
        return best, run_plans(ens, [_with(plan, season, best)], period_of_day)

    scale = np.array([0.05 if best.type == "fixed_fraction" else 0.1 * k_mean] +
                     ([0.2] if best.type == "threshold" else []))
    memo = {}

    def objective(z):
        policy = make(np.asarray(x0) + z * scale)
        out = run_plans(ens, [_with(plan, season, policy)], period_of_day)
        memo[tuple(np.round(z, 6))] = (policy, out)
        value = float(out.value[0].mean())
        v = violations(out, limits)[0]
        # Beyond a limit the objective falls steeply: 10 % of the value per percentage
        # point of excess crash probability or of excess dewatering load, and all of it
        # for any washout.
        excess = v[season, 1] + v[season, 2] + 10.0 * v[:, 0].max()
        return -(value - 10.0 * excess * abs(value))

    minimize(objective, np.zeros(len(x0)), method="Nelder-Mead",
             options={"maxfev": maxfev, "xatol": 0.05, "fatol": 1e-3})
    tried = list(memo.values())
    merged = stack([o for _, o in tried])
    i, _ = best_index(merged, limits, season=season)
    return tried[i][0], stack([tried[i][1]])


def tune_plan(ens: Ensemble, seasons, dates, start_plan: list[Policy], *, limit: float,
              refine: bool = True, maxfev: int = 12, progress=None,
              dewatering_m3_per_d: float | None = None, runner=None):
    """Tune each season's rule; returns ``(plan, table)``.

    ``table`` has one row per season: the chosen rule, its whole-year objective
    ``objective_g_m2`` [g m-2 per year, member mean], its crash probability in the
    season, washout share, the farm's peak dewatering load [m3 d-1], and whether it meets
    the limits (``within_risk_limit`` for the crash limit alone, ``within_limits`` for
    all). *runner* (:mod:`pondsim.studies.scheduling`) spreads each season's candidate
    pass over its workers (same results); the Nelder-Mead steps run one at a time.
    """
    limits = Limits(limit, dewatering_m3_per_d)
    floor = float(ens.operation.floor_g_m3)
    period_of_day = season_of_day(dates, seasons)
    order = sorted(range(len(seasons)),
                   key=lambda s: int(np.flatnonzero(period_of_day == s)[0]))
    plan = list(start_plan)
    rows = []
    k_daily = ens.drivers.capacity.mean(axis=0)
    for s in order:
        in_season = period_of_day == s
        k_mean = float(max(k_daily[in_season].mean(), 10.0))
        cands = candidates(k_mean, floor)
        # The current rule competes too, so a season is never made worse by the grid.
        pool = [plan[s]] + cands
        out = run_plans_on(runner, ens, [_with(plan, s, c) for c in pool], period_of_day)
        i, _ = best_index(out, limits, season=s)
        best, best_out = pool[i], select(out, [i])
        if refine:
            refined, ref_out = _refine(ens, plan, s, period_of_day, best, limits, k_mean,
                                       maxfev, floor)
            both = stack([best_out, ref_out])
            if best_index(both, limits, season=s)[0] == 1:
                best, best_out = refined, ref_out
        plan[s] = best
        v = violations(best_out, limits)[0]
        rows.append({"season": seasons[s].name, "rule": describe(best),
                     "objective_g_m2": float(best_out.value[0].mean()),
                     "p_crash": float(best_out.p_crash()[0, s]),
                     "p_washout": float(best_out.p_washout()[0, s]),
                     "farm_dewatering_peak_m3_d": float(best_out.farm_peak_m3_d[0, s]),
                     "within_risk_limit": bool(v[s, 1] == 0),
                     "within_limits": bool(v[:, 0].max() == 0 and v[s, 1:].max() == 0),
                     "candidates": len(pool)})
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


@dataclass
class TuneResult:
    """What :func:`tune_scenario` found.

    plan : the recommended rule per season (scenario season order), after the check on
        fresh draws;
    tuned : the rule per season the search found (before that check);
    start : the existing rule per season it started from (the scenario's own rules,
        chosen season by season on whole years);
    table : per season: the search (:func:`tune_plan` columns), the fresh-draw test
        (``gain_g_m2``, ``gain_se_g_m2``: mean paired gain of the tuned rule over the
        existing one in whole-year value and its standard error) and the decision
        (``kept``: "tuned" or "existing", ``reason``) and whether the recommended rule meets the
        limits on the fresh draws (``recommended_within_limits``);
    check : the recommended plan against the best of the scenario's own policies and
        plans on fresh draws (see :func:`check_table`);
    best_original : name of that best original policy or plan;
    meta : the weather metadata of the tuning years (site check, notes).
    """

    plan: list
    tuned: list
    start: list
    table: pd.DataFrame
    check: pd.DataFrame
    best_original: str
    meta: dict = dataclasses.field(default_factory=dict)


def tune_scenario(scenario, *, n_years: int, members: int, seed: int | None = None,
                  refine: bool = True, progress: bool = True, runner=None) -> TuneResult:
    """Tune the scenario's plan per season over ``n_years`` weather years and
    ``members`` crash replicates each, then check it on fresh draws.

    Steps: (1) the scenario's own policies and plans run as whole years; the best one
    (acceptable, highest whole-year value) seeds a coordinate search over the scenario's
    policies, season by season on whole years (:mod:`pondsim.studies.seasons`): the
    *existing* plan; (2) :func:`tune_plan` from it; (3) on fresh weather years and crash
    streams (seed + 1), each season's tuned rule against the existing one with the rest
    of the tuned plan in place (:func:`pondsim.studies.seasons.keep_new_rule`: the rule
    that breaks the limits less, else the tuned rule only where its mean paired gain
    exceeds :data:`Z_KEEP` standard errors); (4) the recommended plan against the best
    original policy or plan on the same fresh draws. *runner*
    (:mod:`pondsim.studies.scheduling`) spreads the passes of many plans over its
    workers; the results do not depend on it.
    """
    from pondsim.operations.simulate import build_drivers, hourly_light_and_water
    from pondsim.studies.outlook import weather_years

    seed = scenario.run.seed if seed is None else seed
    h = scenario.harvest
    limits = Limits(scenario.crash.max_season_probability, h.dewatering_capacity_m3_per_d)

    def ensemble(year_seed, crash_seed):
        years, meta = weather_years(scenario, n_years, year_seed)
        hourly = [hourly_light_and_water(t, scenario) for t in years]
        return ensemble_of(scenario, build_drivers(hourly, scenario), members,
                           crash_seed), hourly[0].index[::24], meta

    ens, dates, meta = ensemble(seed, seed)
    period_of_day = season_of_day(dates, scenario.seasons)
    originals, original_names = scenario_plans(scenario)
    out = run_plans_on(runner, ens, originals, period_of_day)
    i, _ = best_index(out, limits)
    start, _, _, _ = coordinate_search(ens, scenario.policies, originals[i],
                                       period_of_day, limits, runner=runner)
    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(scenario.seasons), unit="season", desc="tuning", leave=False)
    try:
        tuned, table = tune_plan(ens, scenario.seasons, dates, start, limit=limits.
                                 crash_probability, refine=refine,
                                 progress=None if bar is None else bar.update,
                                 dewatering_m3_per_d=limits.dewatering_m3_per_d,
                                 runner=runner)
    finally:
        if bar is not None:
            bar.close()
    names = [s.name for s in scenario.seasons]
    table.insert(0, "started_from", [start[names.index(n)].name for n in table.index])

    # Fresh draws: new weather years and crash streams.
    fresh, _, _ = ensemble(seed + 1, seed + 1)
    changed = [s for s in range(len(names)) if tuned[s] is not start[s]]
    trial = [tuned] + [_with(tuned, s, start[s]) for s in changed]
    out = run_plans_on(runner, fresh, trial, period_of_day)
    plan = list(tuned)
    gain = np.full(len(names), np.nan)
    se = np.full(len(names), np.nan)
    reason = ["existing: the search found no better rule"] * len(names)
    for k, s in enumerate(changed, start=1):
        gain[s], se[s] = paired_difference(out.value[0], out.value[k])
        new, old = offence(out, limits, 0, s), offence(out, limits, k, s)
        if keep_new_rule(new, old, gain[s], se[s], Z_KEEP):
            reason[s] = "tuned: breaks the limits less" if new != old else \
                f"tuned: gain > {Z_KEEP:g} SE"
        else:
            plan[s] = start[s]
            reason[s] = "existing: the tuned rule breaks the limits more" if new != old \
                else f"existing: gain not > {Z_KEEP:g} SE"
    table["gain_g_m2"] = [gain[names.index(n)] for n in table.index]
    table["gain_se_g_m2"] = [se[names.index(n)] for n in table.index]
    table["kept"] = ["existing" if plan[names.index(n)] is start[names.index(n)]
                     else "tuned" for n in table.index]
    table["reason"] = [reason[names.index(n)] for n in table.index]
    table["recommended_rule"] = [describe(plan[names.index(n)]) for n in table.index]

    entries = [plan] + originals
    out = run_plans_on(runner, fresh, entries, period_of_day)
    v = violations(out, limits)[0]
    table["recommended_within_limits"] = [
        bool(v[:, 0].max() == 0 and v[names.index(n), 1:].max() == 0) for n in table.index]
    j = best_original(out, limits, np.arange(1, len(entries)))
    best_name = original_names[j - 1]
    check = check_table(out, [0, j], ["recommended plan", best_name], scenario)
    return TuneResult(plan=plan, tuned=tuned, start=start, table=table, check=check,
                      best_original=best_name, meta=dict(meta))


def check_table(outcome, rows, labels, scenario) -> pd.DataFrame:
    """The plans in *rows* of *outcome* side by side on the same draws.

    Columns, per plan: harvested biomass [t ha-1 yr-1] (mean over members, with the
    pct10-pct90 band holding the middle 80 % of members), the farm's dewatering volume
    [m3 per year], net product [t ha-1 yr-1] (biomass less the dewatering cost, when
    priced), and the mean paired difference against the last plan listed with its
    standard error (common random numbers).
    """
    from pondsim.glossary import G_M2_TO_T_HA

    pond = scenario.pond
    cost = scenario.harvest.dewatering_cost_kg_per_m3
    base = rows[-1]
    result = []
    for row, label in zip(rows, labels, strict=True):
        biomass = outcome.product[row] * G_M2_TO_T_HA
        farm_m3 = outcome.volume_m3[row] * pond.count
        net = biomass - cost * 1e-3 * outcome.volume_m3[row] / (pond.area_m2 * 1e-4)
        d, d_se = paired_difference(outcome.value[row], outcome.value[base])
        r = {"plan": label,
             "biomass_mean_t_ha_yr": biomass.mean(),
             "biomass_pct10_t_ha_yr": np.percentile(biomass, 10),
             "biomass_pct90_t_ha_yr": np.percentile(biomass, 90),
             "dewatering_mean_m3_farm_yr": farm_m3.mean()}
        if cost > 0:
            r["net_product_mean_t_ha_yr"] = net.mean()
        r["value_gain_mean_t_ha_yr"] = d * G_M2_TO_T_HA
        r["value_gain_se_t_ha_yr"] = d_se * G_M2_TO_T_HA if row != base else 0.0
        r["p_washout_year"] = float(outcome.washed[row].any(axis=0).mean())
        result.append(r)
    return pd.DataFrame(result).set_index("plan")
