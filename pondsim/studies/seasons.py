"""Season choices judged on whole years.

Ranking each season's slice of whole-year runs rewards a rule that mines the standing
stock at the end of its season: the slice books the extra harvest, and nobody books the
thin culture the next season inherits. Here a season's rule is chosen *with the rest of
the plan in place*: every change of one season's rule is run as a whole year (all
changes in one vectorised pass, common random numbers) and valued on the whole year
(:func:`pondsim.operations.plan_runs.run_plans`). Coordinate search repeats this until
no single-season change improves the plan.

A rule is acceptable in a season when, in that season, the share of members with at
least one crash is within the risk limit, the farm's dewatering load is within its
capacity (when one is set), and no member washes out; a plan is acceptable when every
season is. Where no rule meets the limits in a season, the least offending one is kept
and the season is flagged.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
import pandas as pd

from pondsim.operations.plan_runs import Ensemble, PlanOutcome, run_plans


@dataclass(frozen=True)
class Limits:
    """Operating limits a season's rule must meet.

    crash_probability : share of members with >= 1 crash in the season [-]
    dewatering_m3_per_d : farm dewatering capacity [m3 d-1] (None: no limit)
    """

    crash_probability: float
    dewatering_m3_per_d: float | None = None


def violations(outcome: PlanOutcome, limits: Limits) -> np.ndarray:
    """How far each plan exceeds each limit in each season, shape (p, s, 3) [-].

    Columns: share of members washed out; crash probability above the limit; dewatering
    load above the capacity as a share of the capacity. All zero: acceptable.
    """
    over_crash = np.maximum(outcome.p_crash() - limits.crash_probability, 0.0)
    if limits.dewatering_m3_per_d is None:
        over_water = np.zeros_like(over_crash)
    else:
        over_water = np.maximum(outcome.farm_peak_m3_d / limits.dewatering_m3_per_d - 1.0,
                                0.0)
    return np.stack([outcome.p_washout(), over_crash, over_water], axis=-1)


def best_index(outcome: PlanOutcome, limits: Limits, season: int | None = None,
               among=None) -> tuple[int, bool]:
    """The plan with the highest mean whole-year value among the acceptable ones.

    Acceptable: no washout, crash and dewatering limits met, in *season* (in every
    season when None). Where none is acceptable: the least offending (washout share
    first, then dewatering excess, a physical limit, then crash excess, then value).
    Returns ``(index, acceptable)``.
    """
    among = np.arange(outcome.value.shape[0]) if among is None else np.asarray(among)
    v = violations(outcome, limits)[among]
    if season is not None:
        v = v[:, season:season + 1]
    excess = v.max(axis=1)  # (k, 3): worst season of each limit
    value = outcome.value[among].mean(axis=1)
    ok = excess.max(axis=1) == 0
    if ok.any():
        return int(among[np.argmax(np.where(ok, value, -np.inf))]), True
    order = np.lexsort((-value, excess[:, 1], excess[:, 2], excess[:, 0]))
    return int(among[order[0]]), False


def offence(outcome: PlanOutcome, limits: Limits, row: int, season: int) -> tuple:
    """How plan *row* breaks the limits in *season*, as a tuple that sorts the way
    :func:`best_index` ranks (washout share, dewatering excess, crash excess); all zero
    when the season is acceptable."""
    v = violations(outcome, limits)[row, season]
    return float(v[0]), float(v[2]), float(v[1])


def keep_new_rule(new: tuple, old: tuple, gain: float, se: float, z: float) -> bool:
    """Whether a new rule replaces the old one in a season, on draws neither was chosen
    on. *new*, *old*: their :func:`offence` tuples; *gain*, *se*: mean paired gain of
    the new rule in whole-year value and its standard error.

    A rule that breaks the limits less wins; with equal standing, the new rule must gain
    more than *z* standard errors (one-sided z-test of the paired difference).
    """
    if new != old:
        return new < old
    return gain > z * se


def best_original(outcome: PlanOutcome, limits: Limits, among) -> int:
    """The best of a set of plans as a user would name it: the highest whole-year value
    among those acceptable in every season; else among those that never wash out; else
    the least offending (:func:`best_index`)."""
    among = np.asarray(among)
    i, ok = best_index(outcome, limits, among=among)
    if ok:
        return i
    clean = among[outcome.washed[among].any(axis=(1, 2)) == 0]
    if len(clean) == 0:
        return i
    return int(clean[np.argmax(outcome.value[clean].mean(axis=1))])


def _run_group(job):
    """One group of plans (a picklable task for :func:`run_plans_on`)."""
    ens, plans, period_of_day, n_seasons = job
    return run_plans(ens, plans, period_of_day, n_seasons)


def run_plans_on(runner, ens: Ensemble, plans, period_of_day,
                 n_seasons: int | None = None) -> PlanOutcome:
    """:func:`~pondsim.operations.plan_runs.run_plans`, with the plans split into one
    contiguous group per worker of *runner* (:mod:`pondsim.studies.scheduling`) when it
    has several and there are enough plans. Every plan's members take the same random
    streams whichever group it is in (common random numbers), so the outcome is the
    same as in one pass."""
    n_seasons = len(plans[0]) if n_seasons is None else n_seasons
    if runner is None or not runner.parallel or len(plans) < 2 * runner.workers:
        return run_plans(ens, plans, period_of_day, n_seasons)
    edges = np.linspace(0, len(plans), runner.workers + 1).round().astype(int)
    jobs = [(ens, plans[a:b], period_of_day, n_seasons)
            for a, b in zip(edges[:-1], edges[1:], strict=True) if b > a]
    return stack(runner.map(_run_group, jobs))


def coordinate_search(ens: Ensemble, policies, start, period_of_day, limits: Limits,
                      max_passes: int = 4, extra=(), runner=None):
    """Best plan from *policies* season by season, each season judged on whole years.

    Each pass runs the current plan and every one-season change of it in one engine
    pass; every season then takes its best rule given the others (the current plan
    stays where no change is better). Stops when no season changes, when a plan comes
    back, or after *max_passes*; returns the best plan seen (acceptable first, then
    the least offending, then the highest whole-year value).

    Plans in *extra* (e.g. the scenario's own policies and plans) ride along in the
    first pass, on the same members.

    *runner* (:mod:`pondsim.studies.scheduling`) spreads each pass over its workers.

    Returns ``(plan, outcome, row, extra_outcome)``: the plan (list of policies), the
    :class:`PlanOutcome` of the pass that evaluated it, its row there, and the outcome
    of the *extra* plans (None without them).
    """
    n_seasons = len(start)
    current = list(start)
    seen = []
    best = None  # (ranking key, plan, outcome, row)
    extra_out = None
    for k in range(max_passes):
        plans = [current]
        where = {}  # (season, policy name) -> row
        for s in range(n_seasons):
            for p in policies:
                if p.name != current[s].name:
                    where[(s, p.name)] = len(plans)
                    plans.append(current[:s] + [p] + current[s + 1:])
        n_search = len(plans)
        if k == 0 and len(extra):
            plans = plans + [list(e) for e in extra]
        out = run_plans_on(runner, ens, plans, period_of_day, n_seasons)
        if n_search < len(plans):
            extra_out = select(out, slice(n_search, None))
            out = select(out, slice(0, n_search))
        v = violations(out, limits)[0]  # (s, 3)
        # Plans rank as best_index ranks them: washout, dewatering, crash, then value.
        key = (-v[:, 0].max(), -v[:, 2].sum(), -v[:, 1].sum(), float(out.value[0].mean()))
        if best is None or key > best[0]:
            best = (key, list(current), out, 0)
        seen.append(tuple(p.name for p in current))
        new = list(current)
        for s in range(n_seasons):
            rows = [0] + [where[(s, p.name)] for p in policies if (s, p.name) in where]
            i, _ = best_index(out, limits, season=s, among=rows)
            new[s] = plans[i][s]
        if tuple(p.name for p in new) in seen:
            break
        current = new
    _, plan, out, row = best
    return plan, out, row, extra_out


def select(outcome: PlanOutcome, rows) -> PlanOutcome:
    """The outcome of some plans only (*rows*: a slice or index array)."""
    return PlanOutcome(**{f.name: getattr(outcome, f.name)[rows]
                          for f in fields(outcome)})


def stack(outcomes) -> PlanOutcome:
    """One :class:`PlanOutcome` holding the plans of several, in order."""
    return PlanOutcome(**{f.name: np.concatenate([getattr(o, f.name) for o in outcomes])
                          for f in fields(outcomes[0])})


def plan_table(seasons, plan, outcome: PlanOutcome, row: int, limits: Limits,
               per_year: float = 1.0) -> pd.DataFrame:
    """One row per season for the plan in row *row* of *outcome*: the rule, the season's
    product [t ha-1 per season] (mean and pct10-pct90 band over members), the shares of
    members with a crash or a washout in the season [%], the farm's peak dewatering load
    [m3 d-1] and whether the season meets the limits."""
    from pondsim.glossary import G_M2_TO_T_HA

    v = violations(outcome, limits)[row]
    rows = []
    for s, season in enumerate(seasons):
        prod = outcome.season_product[row, s] * G_M2_TO_T_HA
        rows.append({
            "season": season.name, "best_policy": plan[s].name,
            "yield_mean_t_ha_season": float(prod.mean()),
            "yield_pct10_t_ha_season": float(np.percentile(prod, 10)),
            "yield_pct90_t_ha_season": float(np.percentile(prod, 90)),
            "members_crashed_pct_season": 100 * float(outcome.p_crash()[row, s]),
            "members_washed_out_pct_season": 100 * float(outcome.p_washout()[row, s]),
            "farm_dewatering_peak_m3_d": float(outcome.farm_peak_m3_d[row, s]),
            "within_limits": bool(v[:, 0].max() == 0 and v[s, 1:].max() == 0),
        })
    return pd.DataFrame(rows).set_index("season")


def whole_year_plan(scenario, slice_best: pd.DataFrame, members: int, seed: int,
                    forcing=None):
    """The scenario's best plan with each season judged on whole years (``compare``).

    Starts from the slice ranking *slice_best* (:func:`pondsim.studies.compare.
    best_by_season`; a plan named there contributes its rule for the season) and runs
    :func:`coordinate_search` over the scenario's policies on the same weather year,
    members and crash streams as :func:`pondsim.operations.simulate.simulate`.

    Returns ``(table, summary)``: :func:`plan_table` of the chosen plan, plus a column
    ``slice_best`` (what the slice ranking named), and a one-row-per-plan frame with the
    whole-year yield of the chosen plan and of the best single policy or plan of the
    scenario (mean and pct10-pct90 over members [t ha-1 yr-1]) and the paired difference
    of whole-year value with its standard error [t ha-1 yr-1].
    """
    from pondsim.glossary import G_M2_TO_T_HA
    from pondsim.operations.harvest import season_of_day
    from pondsim.operations.plan_runs import ensemble_of, paired_difference, scenario_plans
    from pondsim.operations.simulate import (
        build_drivers,
        hourly_light_and_water,
        load_forcing,
    )

    table, _ = load_forcing(scenario) if forcing is None else forcing
    hourly = hourly_light_and_water(table, scenario)
    ens = ensemble_of(scenario, build_drivers([hourly], scenario), members, seed)
    period_of_day = season_of_day(hourly.index[::24], scenario.seasons)
    limits = Limits(scenario.crash.max_season_probability,
                    scenario.harvest.dewatering_capacity_m3_per_d)
    originals, names = scenario_plans(scenario)
    by_name = dict(zip(names, originals, strict=True))
    start = [by_name[slice_best.loc[s.name, "best_policy"]][i]
             for i, s in enumerate(scenario.seasons)]
    plan, found, row, theirs = coordinate_search(ens, scenario.policies, start,
                                                 period_of_day, limits, extra=originals)
    out = stack([select(found, [row]), theirs])
    j = best_original(out, limits, np.arange(1, len(names) + 1))
    result = plan_table(scenario.seasons, plan, out, 0, limits)
    result["slice_best"] = [str(slice_best.loc[s.name, "best_policy"])
                            for s in scenario.seasons]
    rows = []
    for row, label in ((0, "plan judged on whole years"), (j, names[j - 1])):
        y = out.product[row] * G_M2_TO_T_HA * 365 / len(period_of_day)
        d, se = paired_difference(out.value[0], out.value[row])
        rows.append({"plan": label, "yield_mean_t_ha_yr": y.mean(),
                     "yield_pct10_t_ha_yr": np.percentile(y, 10),
                     "yield_pct90_t_ha_yr": np.percentile(y, 90),
                     "value_gain_of_chosen_mean_t_ha_yr": d * G_M2_TO_T_HA,
                     "value_gain_of_chosen_se_t_ha_yr": se * G_M2_TO_T_HA if row else 0.0,
                     "members_washed_out_pct_yr": 100 * float(
                         out.washed[row].any(axis=0).mean())})
    return result, pd.DataFrame(rows).set_index("plan")
