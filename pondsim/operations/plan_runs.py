"""Season plans run as whole years and valued as an operator would value them.

A *plan* is one harvest rule per season. Many plans (the candidates of a tuning step, the
one-season changes of a coordinate search, the scenario's own policies) run in ONE engine
pass, each as a group of members over the same driver sets and the same crash streams
(common random numbers), so that differences between plans are not drowned in crash
noise. Each plan-member is then reduced to what a plan is judged on:

- its *whole-year value* [g m-2]: product recovered from harvests over the year plus the
  product the standing stock at the year's end would give, less the dewatering cost when
  one is set. Judging every season's choice on the whole year makes the stock a season
  hands to the next one count: a rule that mines the culture at the end of its season
  pays for it in the next season's regrowth;
- per season: whether a crash struck, whether the culture washed out (held at its viable
  floor for more than ``washout_days`` days in a row, see
  :func:`pondsim.operations.harvest.washed_out`), and the farm's dewatering load.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pondsim.operations.engine import Drivers, Operation, integrate
from pondsim.operations.harvest import rules_from_entries, washed_out
from pondsim.operations.simulate import crash_model_of, operation_of

#: Days over which the farm's dewatering load is averaged: ponds harvested on a schedule
#: of a few days are staggered, so the plant sees a running mean (assumption).
DEWATERING_WINDOW_D = 7


@dataclass
class Ensemble:
    """What plans are run on: drivers, members per plan, operation, crash model.

    ``pond_volume_m3`` and ``pond_count`` turn harvested shares of the volume into
    dewatering volumes; ``dewatering_cost_kg_per_m3`` [kg AFDW m-3] prices them in
    biomass (0: value = biomass); ``washout_days`` [d] see
    :func:`pondsim.operations.harvest.washed_out`.
    """

    drivers: Drivers
    per_candidate: int  # members per plan = driver sets x crash replicates
    set_of_member: np.ndarray  # (per_candidate,) driver set of each member
    operation: Operation
    crash: object
    seed: int
    depth_m: float
    pond_volume_m3: float = 1.0
    pond_count: int = 1
    washout_days: int = 7
    dewatering_cost_kg_per_m3: float = 0.0
    engine: str = "compiled"  # integrator: see pondsim.operations.engine.integrate


def ensemble_of(scenario, drivers: Drivers, members: int, seed: int) -> Ensemble:
    """The ensemble of *scenario* over *drivers* with *members* crash replicates per
    driver set."""
    return Ensemble(
        drivers=drivers, per_candidate=drivers.n_sets * members,
        set_of_member=np.repeat(np.arange(drivers.n_sets), members),
        operation=operation_of(scenario), crash=crash_model_of(scenario), seed=seed,
        depth_m=scenario.pond.depth_m, pond_volume_m3=scenario.pond.volume_m3,
        pond_count=scenario.pond.count, washout_days=scenario.harvest.washout_days,
        dewatering_cost_kg_per_m3=scenario.harvest.dewatering_cost_kg_per_m3,
        engine=scenario.run.engine)


def scenario_plans(scenario):
    """The scenario's policies (one rule all year) and plans as per-season rule lists,
    with their names: ``(plans, names)``."""
    by_name = {p.name: p for p in scenario.policies}
    plans = [[p] * len(scenario.seasons) for p in scenario.policies]
    plans += [[by_name[pl.policy_by_season[s.name]] for s in scenario.seasons]
              for pl in scenario.plans]
    return plans, [p.name for p in scenario.policies] + [pl.name for pl in scenario.plans]


@dataclass
class PlanOutcome:
    """Per plan and member (arrays of shape (p, m)), per plan, season and member
    ((p, s, m)) and per plan and season ((p, s)).

    value [g m-2 per year]: whole-year value (see the module docstring);
    product [g m-2 per year]: biomass recovered from harvests;
    volume_m3 [m3 per pond per year]: culture volume sent to dewatering;
    season_product [g m-2 per season] (p, s, m);
    crashed, washed (bool, (p, s, m)): a crash / a washout in the season;
    farm_peak_m3_d [m3 d-1] (p, s): highest running mean (:data:`DEWATERING_WINDOW_D`) of
    the farm's daily dewatering volume in the season, member mean.
    """

    value: np.ndarray
    product: np.ndarray
    volume_m3: np.ndarray
    season_product: np.ndarray
    crashed: np.ndarray
    washed: np.ndarray
    farm_peak_m3_d: np.ndarray

    def p_crash(self) -> np.ndarray:
        """(p, s) share of members with at least one crash in the season."""
        return self.crashed.mean(axis=-1)

    def p_washout(self) -> np.ndarray:
        """(p, s) share of members washed out in the season."""
        return self.washed.mean(axis=-1)


def run_plans(ens: Ensemble, plans, period_of_day, n_seasons: int | None = None
              ) -> PlanOutcome:
    """Run every plan (a list of per-season policies) over the ensemble in one pass.

    Parameters
    ----------
    ens : Ensemble
    plans : list of list of :class:`pondsim.scenario.Policy`
        ``plans[i][s]``: the rule of plan *i* in season *s*.
    period_of_day : ndarray of int, shape (n_days,)
        Season of each day.
    n_seasons : int, optional
        Default: the length of the plans.
    """
    n = len(plans)
    n_seasons = len(plans[0]) if n_seasons is None else n_seasons
    rules = rules_from_entries(plans, period_of_day, repeat=ens.per_candidate)
    set_of_member = np.tile(ens.set_of_member, n)
    stream = np.tile(np.arange(ens.per_candidate), n)  # common random numbers
    daily = integrate(ens.drivers, rules, ens.operation, set_of_member=set_of_member,
                      crash=ens.crash, seed=ens.seed, stream_of_member=stream,
                      engine=ens.engine)
    m = ens.per_candidate
    eff = ens.operation.recovery_efficiency
    removed = daily.removed.reshape(n, m, -1)
    share = daily.harvest_fraction.reshape(n, m, -1)
    product = removed.sum(axis=-1) * eff * ens.depth_m
    volume = share.sum(axis=-1) * ens.pond_volume_m3
    # The dewatering cost in biomass per m2 of pond: kg m-3 x m3 per pond / m2 per pond.
    cost = ens.dewatering_cost_kg_per_m3 * 1e3 * volume * ens.depth_m / ens.pond_volume_m3
    final = daily.density[:, -1].reshape(n, m) * eff * ens.depth_m
    washed_daily = washed_out(daily.at_floor, ens.washout_days).reshape(n, m, -1)
    crashed_daily = daily.crashed.reshape(n, m, -1)
    farm_daily = share.mean(axis=1) * ens.pond_volume_m3 * ens.pond_count  # (n, days)
    farm_running = _running_mean(farm_daily, DEWATERING_WINDOW_D)
    period = np.asarray(period_of_day)
    season_product = np.zeros((n, n_seasons, m))
    crashed = np.zeros((n, n_seasons, m), dtype=bool)
    washed = np.zeros((n, n_seasons, m), dtype=bool)
    peak = np.zeros((n, n_seasons))
    for s in range(n_seasons):  # a loop over seasons, not members
        days = period == s
        if not days.any():
            continue
        season_product[:, s] = removed[:, :, days].sum(axis=-1) * eff * ens.depth_m
        crashed[:, s] = crashed_daily[:, :, days].any(axis=-1)
        washed[:, s] = washed_daily[:, :, days].any(axis=-1)
        peak[:, s] = farm_running[:, days].max(axis=-1)
    return PlanOutcome(value=product + final - cost, product=product, volume_m3=volume,
                       season_product=season_product, crashed=crashed, washed=washed,
                       farm_peak_m3_d=peak)


def _running_mean(a: np.ndarray, window: int) -> np.ndarray:
    """Trailing running mean over the last axis (shorter windows at the start)."""
    c = np.cumsum(a, axis=-1)
    out = c.copy()
    out[..., window:] = c[..., window:] - c[..., :-window]
    count = np.minimum(np.arange(1, a.shape[-1] + 1), window)
    return out / count


def paired_difference(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    """Mean and standard error of the paired difference ``a - b`` over members.

    *a* and *b* are values of two plans on the same members (same weather years and
    crash streams: common random numbers), so the pairing removes the noise the two
    share. SE = sd(a - b) / sqrt(n) (sample sd, n - 1 degrees of freedom).
    """
    d = np.asarray(a, dtype=float) - np.asarray(b, dtype=float)
    if d.size < 2:
        return float(d.mean()), float("inf")
    return float(d.mean()), float(d.std(ddof=1) / np.sqrt(d.size))
