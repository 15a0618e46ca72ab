"""Harvest rules as data: one table of rule parameters over all members.

The engine knows nothing of any one policy. Once a day, at the harvest hour, it asks
:func:`removal_fraction` which share of each pond's culture volume to send to harvest.
Every member carries its own rule parameters, so many policies (and many variants of one
policy) run in one vectorised pass. A season plan is the same table with one column per
calendar period and a map from day of year to period.

Rule types (codes in :data:`RULE_CODES`):

``none``
    Never harvest.
``fixed_fraction``
    Every ``every_days`` days remove ``fraction`` of the culture volume.
``threshold``
    When the density has reached ``trigger_g_m3``, harvest down to ``residual_g_m3``.
``fixed_interval``
    Every ``every_days`` days harvest down to ``residual_g_m3`` (or remove ``fraction``).

Operating limits apply to all rules: nothing is harvested below a minimum density, the
removed volume cannot exceed the daily harvest capacity of a pond, and no harvest leaves
the culture below its viable-density floor (:func:`cut_back_to_floor`). A culture held at
or below the floor for more than a set number of days in a row is *washed out*
(:func:`days_at_floor_in_a_row`): its rule dilutes faster than it grows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

RULE_CODES = {"none": 0, "fixed_fraction": 1, "threshold": 2, "fixed_interval": 3}


@dataclass(frozen=True)
class HarvestRules:
    """Harvest rule parameters for ``n`` members and ``s`` calendar periods.

    Attributes
    ----------
    code : ndarray of int, shape (n, s)
        Rule type per member and period, see :data:`RULE_CODES`.
    fraction : ndarray, shape (n, s) [-]
        Share of volume removed (``fixed_fraction``; ``fixed_interval`` without residual).
        NaN where unused.
    every_days : ndarray of int, shape (n, s) [d]
        Days between scheduled harvests.
    trigger : ndarray, shape (n, s) [g m-3]
        Density that triggers a harvest (``threshold``). NaN where unused.
    residual : ndarray, shape (n, s) [g m-3]
        Density left after a harvest (``threshold``, ``fixed_interval``). NaN where unused.
    period_of_day : ndarray of int, shape (n, n_days) or (1, n_days)
        Column of the tables that applies on each day of the year.
    """

    code: np.ndarray
    fraction: np.ndarray
    every_days: np.ndarray
    trigger: np.ndarray
    residual: np.ndarray
    period_of_day: np.ndarray

    @property
    def n_members(self) -> int:
        return self.code.shape[0]

    def on_day(self, day: int):
        """The rule parameters of every member on *day* (0-based day of the year)."""
        col = self.period_of_day[:, day]
        rows = np.arange(self.n_members)
        if self.period_of_day.shape[0] == 1:
            col = np.broadcast_to(col, (self.n_members,))
        pick = (rows, col)
        return (self.code[pick], self.fraction[pick], self.every_days[pick],
                self.trigger[pick], self.residual[pick])


def season_of_day(dates, seasons) -> np.ndarray:
    """Season index (0-based, order of *seasons*) of each date.

    Parameters
    ----------
    dates : pandas.DatetimeIndex or array of datetime64
        One entry per simulated day.
    seasons : sequence of :class:`pondsim.scenario.Season`
    """
    import pandas as pd

    month_to_season = np.zeros(13, dtype=np.int16)
    for i, season in enumerate(seasons):
        month_to_season[list(season.months)] = i
    return month_to_season[pd.DatetimeIndex(dates).month.to_numpy()]


def build_rules(policies, plans, seasons, dates, repeat: int = 1):
    """Rule table for every policy and plan, ``repeat`` members each (policy-major).

    A plain policy applies the same rule in every season; a plan picks one policy per
    season. Returns ``(rules, names)`` with the entry names in table order (policies
    first, then plans).
    """
    by_name = {p.name: p for p in policies}
    entries = [[p] * len(seasons) for p in policies]
    entries += [[by_name[plan.policy_by_season[s.name]] for s in seasons] for plan in plans]
    names = [p.name for p in policies] + [plan.name for plan in plans]
    return rules_from_entries(entries, season_of_day(dates, seasons), repeat), names


def rules_from_entries(entries, period_of_day, repeat: int = 1) -> HarvestRules:
    """Rule table from ``entries[i][s]``: the policy of entry *i* in period *s*.

    Parameters
    ----------
    entries : list of list of :class:`pondsim.scenario.Policy`
        One row per entry (policy, plan or tuning candidate), one policy per period.
    period_of_day : ndarray of int, shape (n_days,)
        Period (column) of each day.
    repeat : int
        Members per entry (entry-major order).
    """
    def table(get, dtype=float):
        rows = np.array([[get(p) for p in row] for row in entries], dtype=dtype)
        return np.repeat(rows, repeat, axis=0)

    nan = float("nan")
    return HarvestRules(
        code=table(lambda p: RULE_CODES[p.type], np.int8),
        fraction=table(lambda p: nan if p.fraction is None else p.fraction),
        every_days=table(lambda p: p.every_days, np.int32),
        trigger=table(lambda p: nan if p.trigger_g_m3 is None else p.trigger_g_m3),
        residual=table(lambda p: nan if p.residual_g_m3 is None else p.residual_g_m3),
        period_of_day=np.asarray(period_of_day, dtype=np.int16)[None, :],
    )


def removal_fraction(rules: HarvestRules, day: int, density_g_m3, days_since_harvest,
                     *, min_density_g_m3: float = 0.0, max_fraction: float = 1.0):
    """Share of each pond's culture volume sent to harvest today [-].

    Parameters
    ----------
    rules : HarvestRules
    day : int
        Day of the year, 0-based.
    density_g_m3 : ndarray, shape (n,) [g m-3]
        Density at the harvest hour.
    days_since_harvest : ndarray of int, shape (n,) [d]
        Whole days since the last scheduled harvest (or since inoculation).
    min_density_g_m3 : float [g m-3]
        Below this density nothing is harvested.
    max_fraction : float [-]
        Daily harvest capacity as a share of the pond volume.

    Returns
    -------
    fraction : ndarray, shape (n,) in [0, max_fraction]
    scheduled : ndarray of bool, shape (n,)
        Members whose schedule fell due today (their day counter restarts).
    """
    code, fraction, every, trigger, residual = rules.on_day(day)
    x = np.asarray(density_g_m3, dtype=float)
    due = days_since_harvest >= every
    # Harvest down to a residual: the share of volume that leaves residual behind.
    with np.errstate(divide="ignore", invalid="ignore"):
        to_residual = np.where(x > residual, 1.0 - residual / x, 0.0)
    down = np.where(np.isnan(residual), fraction, to_residual)
    frac = np.select(
        [code == RULE_CODES["fixed_fraction"],
         code == RULE_CODES["threshold"],
         code == RULE_CODES["fixed_interval"]],
        [np.where(due, fraction, 0.0),
         np.where(x >= trigger, to_residual, 0.0),
         np.where(due, down, 0.0)],
        default=0.0,
    )
    frac = np.where(x >= min_density_g_m3, frac, 0.0)
    frac = np.clip(np.nan_to_num(frac, nan=0.0), 0.0, max_fraction)
    scheduled = due & ((code == RULE_CODES["fixed_fraction"])
                       | (code == RULE_CODES["fixed_interval"]))
    return frac, scheduled


def floor_of(scenario) -> float:
    """The scenario's viable-density floor [g m-3]: ``harvest.floor_g_m3``, by default
    the inoculation density (a :class:`pondsim.scenario.Scenario`)."""
    floor = scenario.harvest.floor_g_m3
    return float(scenario.inoculation.density_g_m3 if floor is None else floor)


def cut_back_to_floor(fraction, density_g_m3, floor_g_m3: float):
    """Cut a harvest back so that it leaves at least the viable floor in the pond.

    Parameters
    ----------
    fraction : ndarray, shape (n,) [-]
        Share of the culture volume the rule asks to remove.
    density_g_m3 : ndarray, shape (n,) [g m-3]
        Density at the harvest hour, before the harvest.
    floor_g_m3 : float [g m-3]
        Viable-density floor (0: no floor).

    Returns
    -------
    fraction : ndarray, shape (n,) [-]
        ``min(fraction, max(0, 1 - floor / X))``: the culture left, (1 - f)·X, is at least
        the floor (or nothing is taken where X is already below it).
    at_floor : ndarray of bool, shape (n,)
        The culture is at its floor: below it at the harvest hour, or its harvest was cut
        back to it (the rule asked to dilute below the floor).

    Notes
    -----
    Dilution by a share f of the volume leaves (1 - f)·X; keeping it at or above the floor
    F needs f <= 1 - F/X. A rule whose share keeps exceeding that bound day after day
    dilutes faster than the culture grows (washout in chemostat terms): the floor holds
    the culture, but only by overriding the rule.
    """
    x = np.asarray(density_g_m3, dtype=float)
    frac = np.asarray(fraction, dtype=float)
    if floor_g_m3 <= 0.0:
        return frac, np.zeros(x.shape, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        allowed = np.where(x > floor_g_m3, 1.0 - floor_g_m3 / x, 0.0)
    at_floor = (x < floor_g_m3 * (1.0 - 1e-9)) | (frac > allowed + 1e-12)
    return np.minimum(frac, allowed), at_floor


def days_at_floor_in_a_row(at_floor) -> np.ndarray:
    """Length of the run of consecutive at-floor days ending on each day [d].

    Parameters
    ----------
    at_floor : ndarray of bool, shape (..., n_days)

    Returns
    -------
    ndarray of int, same shape: 0 where the day is not at the floor, else the number of
    consecutive at-floor days up to and including it.
    """
    b = np.asarray(at_floor, dtype=bool)
    day = np.arange(b.shape[-1])
    last_free = np.maximum.accumulate(np.where(b, -1, day), axis=-1)
    return np.where(b, day - last_free, 0)


def washed_out(at_floor, washout_days: int) -> np.ndarray:
    """Days on which a culture has been at its floor for more than *washout_days* days in
    a row (bool, same shape as *at_floor*)."""
    return days_at_floor_in_a_row(at_floor) > washout_days
