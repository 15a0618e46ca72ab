"""Culture crash risk: a daily hazard made of named causes, each booked when it strikes.

The daily hazard of a growing culture [d-1] is the sum of four cause-specific hazards

    h = h_bg + h_starve + h_heat + h_cold

    h_bg     = b · q10^((T̄ − T_ref)/10)      background: contamination and grazers,
                                             rising with the day's mean water temperature T̄
    h_starve = c_s · L / L_ref               light or carbon starvation: L = max(0, −r̄_w),
                                             r̄_w the culture's mean net specific growth rate
                                             over the last w days since inoculation [d-1],
                                             L_ref = 0.1 d-1
    h_heat   = c_h · H                       heat: H hours of the day with the water above
                                             the strain's maximum temperature t_max [h]
    h_cold   = c_c · C                       cold shock: C = max(0, T̄_prev − T̄ − onset)
                                             [K], T̄_prev the mean of the previous w days

and the probability of a crash on a day is 1 − exp(−h) (a discrete-time hazard,
Kalbfleisch & Prentice 2002, *The Statistical Analysis of Failure Time Data*, ch. 1).

Starvation is measured by what the culture actually does: a standing stock above what the
recent days' light and temperature sustain loses biomass (respiration exceeds
photosynthesis), so its net rate turns negative. This needs no carrying capacity K and has
no artefact where K = 0: on a cold dull day with no growth the loss is only the (slow,
cold) maintenance rate, not an "infinite fall of ln K". In a self-shading culture a net
loss over the day is the same event as X > K (K is the density of zero net growth).

Causes as competing risks: the cause of a crash is drawn with probability h_i / h
(exact for independent causes within the day; e.g. Kalbfleisch & Prentice 2002, ch. 8),
from the same uniform number that decides the crash: with u < p = 1 − exp(−h), u / p is
uniform on [0, 1) and picks the cause by the cumulative shares. So the crash draws do not
change when causes are booked.

Every function here is a pure, vectorised function of daily arrays (a leading member or
driver-set axis), so the engine and the calibration (:mod:`pondsim.studies.crash_fit`)
compute the same hazard from the same arrays. Parameters are scenario keys ([crash]); the
defaults are ASSUMPTIONS to be replaced by a site's own crash history.

Random numbers: member j of every policy uses the j-th stream, a block of 366 uniform
draws from ``numpy.random.Generator(PCG64(seed))`` (common random numbers across
policies, so that policy differences are not drowned by sampling noise). The same seed
gives the same result; the number of members does not change member j's draws.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

HOURS_PER_DAY = 24
DAYS_PER_STREAM = 366

#: Named causes in booking order; the cause code of a crash is its index + 1 (0 = none).
CAUSES = ("background", "starvation", "heat", "cold")
CAUSE_NONE = 0

#: Net loss rate at which ``starvation_hazard_per_d`` applies [d-1] (a fixed scale, so
#: that the key reads as a hazard; the hazard is linear in the loss rate).
STARVATION_LOSS_REF_PER_D = 0.1


# --------------------------------------------------------------------------------------
# Stress indices from daily arrays
# --------------------------------------------------------------------------------------
def daily_mean(hourly, hours_per_day: int = HOURS_PER_DAY):
    """Day means of an hourly array along the last axis, shape (..., n_days)."""
    a = np.asarray(hourly, dtype=float)
    n_days = a.shape[-1] // hours_per_day
    return a[..., :n_days * hours_per_day].reshape(a.shape[:-1] + (n_days, hours_per_day)
                                                   ).mean(axis=-1)


def hours_above(water_temperature_c, t_max_c, hours_per_day: int = HOURS_PER_DAY):
    """Hours of each day with the water above *t_max_c* [h], shape (..., n_days).

    Parameters
    ----------
    water_temperature_c : array, shape (..., n_hours) [degC]
        Hour-mean water temperature.
    t_max_c : float or array broadcasting against the leading axes [degC]
        Strain's maximum temperature for growth (Rosso et al. 1993 cardinal model).
    """
    t = np.asarray(water_temperature_c, dtype=float)
    above = t > np.asarray(t_max_c, dtype=float)[..., None]
    n_days = t.shape[-1] // hours_per_day
    return above[..., :n_days * hours_per_day].reshape(
        t.shape[:-1] + (n_days, hours_per_day)).sum(axis=-1).astype(float)


def cold_shock_k(temp_mean_c, window_days: int, onset_k: float):
    """Fall of the day's mean water temperature below the mean of the previous
    *window_days* days, beyond *onset_k* [K]; 0 on the first day (no previous days).

    C_t = max(0, mean(T̄_{t−w}, …, T̄_{t−1}) − T̄_t − onset), fewer previous days near the
    start of the series.
    """
    t = np.asarray(temp_mean_c, dtype=float)
    w = int(window_days)
    c = np.cumsum(np.concatenate([np.zeros(t.shape[:-1] + (1,)), t], axis=-1), axis=-1)
    idx = np.arange(t.shape[-1])
    start = np.maximum(idx - w, 0)
    count = idx - start
    prev = (c[..., idx] - c[..., start]) / np.maximum(count, 1)
    return np.where(count > 0, np.maximum(prev - t - onset_k, 0.0), 0.0)


def trailing_net_loss(growth_rate, window_days: int):
    """Starvation index L [d-1] of cultures inoculated on day 0, along the last axis.

    L_t = max(0, −mean(r_{t−w+1}, …, r_t)) over the days since inoculation (fewer than
    w at the start), with r the day's mean net specific growth rate [d-1]. The engine
    computes the same value day by day (:func:`net_loss_today`).
    """
    r = np.asarray(growth_rate, dtype=float)
    w = int(window_days)
    c = np.cumsum(np.concatenate([np.zeros(r.shape[:-1] + (1,)), r], axis=-1), axis=-1)
    idx = np.arange(r.shape[-1])
    start = np.maximum(idx + 1 - w, 0)
    mean = (c[..., idx + 1] - c[..., start]) / (idx + 1 - start)
    return np.maximum(-mean, 0.0)


def net_loss_today(growth_rate, day: int, age_days, window_days: int):
    """Starvation index L [d-1] on *day* for members of the given age (days since
    inoculation, 0 on the inoculation day), from the engine's daily rates so far.

    Same definition as :func:`trailing_net_loss`: the mean over the last
    min(w, age + 1) days.
    """
    w = int(window_days)
    lo = max(0, day - w + 1)
    window = growth_rate[:, lo:day + 1]
    lag = day - np.arange(lo, day + 1)
    inside = lag[None, :] <= np.asarray(age_days)[:, None]
    n = np.minimum(np.asarray(age_days) + 1, w)
    return np.maximum(-(np.where(inside, window, 0.0).sum(axis=1) / n), 0.0)


# --------------------------------------------------------------------------------------
# Hazard kernels, one per cause
# --------------------------------------------------------------------------------------
def background_hazard(temp_mean_c, rate_per_d: float, t_ref_c: float, q10: float):
    """Background hazard b · q10^((T̄ − T_ref)/10) [d-1] (q10 = 1: no temperature effect).

    The Q10 form is the usual description of how a biological rate rises with
    temperature (here the growth of grazers and contaminants; common practice).
    """
    return rate_per_d * np.power(q10, (np.asarray(temp_mean_c, dtype=float) - t_ref_c) / 10.0)


def starvation_hazard(net_loss_per_d, hazard_per_d: float):
    """c_s · L / L_ref [d-1] with L the recent net loss rate [d-1], L_ref = 0.1 d-1."""
    return hazard_per_d * np.asarray(net_loss_per_d, dtype=float) / STARVATION_LOSS_REF_PER_D


def heat_hazard(hours_above_t_max, hazard_per_d_h: float):
    """c_h · H [d-1] with H hours of the day above the strain's t_max [h]."""
    return hazard_per_d_h * np.asarray(hours_above_t_max, dtype=float)


def cold_hazard(cold_shock, hazard_per_d_k: float):
    """c_c · C [d-1] with C the cold shock [K] (:func:`cold_shock_k`)."""
    return hazard_per_d_k * np.asarray(cold_shock, dtype=float)


@dataclass(frozen=True)
class WeatherStress:
    """Daily weather stress of ``f`` driver sets, arrays of shape (f, n_days).

    temp_mean_c [degC] day-mean water temperature; heat_hours [h] hours above t_max;
    cold_shock_k [K] fall of T̄ beyond the onset (:func:`cold_shock_k`).
    """

    temp_mean_c: np.ndarray
    heat_hours: np.ndarray
    cold_shock_k: np.ndarray


@dataclass(frozen=True)
class CrashModel:
    """Daily crash hazard parameters (see the module docstring for the equations).

    Attributes
    ----------
    background_per_d : float [d-1]
        Background hazard at ``background_t_ref_c``.
    background_t_ref_c : float [degC]
    background_q10 : float [-]
        Factor by which the background hazard rises per 10 K of water temperature.
    starvation_hazard_per_d : float [d-1]
        Starvation hazard at a recent mean net loss of 0.1 d-1 (linear in the loss).
    window_days : int [d]
        Window of the recent days (starvation's mean net rate, cold shock's reference).
    heat_hazard_per_d_h : float [d-1 h-1]
        Hazard per hour of the day above the strain's t_max.
    cold_hazard_per_d_k : float [d-1 K-1]
        Hazard per kelvin of cold shock.
    cold_onset_k : float [K]
        Fall of the day-mean water temperature below the previous days' mean that
        counts as no shock.
    loss_fraction : float [-]
        Share of the standing biomass lost in a crash (the rest is salvage).
    salvage_sellable : bool
        Whether the salvage counts as harvested product.
    """

    background_per_d: float = 0.002
    background_t_ref_c: float = 20.0
    background_q10: float = 2.0
    starvation_hazard_per_d: float = 0.02
    window_days: int = 3
    heat_hazard_per_d_h: float = 0.02
    cold_hazard_per_d_k: float = 0.005
    cold_onset_k: float = 3.0
    loss_fraction: float = 0.8
    salvage_sellable: bool = False

    def weather_stress(self, water_temperature_c, t_max_c) -> WeatherStress:
        """Daily weather stress from hourly water temperature (f, n_hours) [degC] and
        each set's t_max (f,) [degC]."""
        temp = daily_mean(water_temperature_c)
        return WeatherStress(temp_mean_c=temp,
                             heat_hours=hours_above(water_temperature_c, t_max_c),
                             cold_shock_k=cold_shock_k(temp, self.window_days,
                                                       self.cold_onset_k))

    def cause_hazards(self, temp_mean_c, heat_hours, cold_shock, net_loss_per_d):
        """Hazard of each cause [d-1], shape (4, ...) in the order of :data:`CAUSES`."""
        parts = np.broadcast_arrays(
            background_hazard(temp_mean_c, self.background_per_d, self.background_t_ref_c,
                              self.background_q10),
            starvation_hazard(net_loss_per_d, self.starvation_hazard_per_d),
            heat_hazard(heat_hours, self.heat_hazard_per_d_h),
            cold_hazard(cold_shock, self.cold_hazard_per_d_k))
        return np.stack(parts)

    @staticmethod
    def streams(seed: int | None, stream_of_member) -> np.ndarray:
        """Uniform draws [0, 1) of shape (n_members, 366), one row per member's stream.

        Stream *k* is row *k* of one PCG64 sequence read row by row; only the rows from
        the smallest to the largest stream asked for are drawn (the generator is advanced
        past the rows before, one 64-bit output per double), so a block of members whose
        streams start at *k* gets exactly the draws it would get in the whole ensemble.
        """
        stream_of_member = np.asarray(stream_of_member, dtype=np.intp)
        if not stream_of_member.size:
            return np.zeros((0, DAYS_PER_STREAM))
        first = int(stream_of_member.min())
        n_streams = int(stream_of_member.max()) + 1 - first
        bits = np.random.PCG64(seed)
        if first:
            bits.advance(first * DAYS_PER_STREAM)
        draws = np.random.Generator(bits).random((n_streams, DAYS_PER_STREAM),
                                                 dtype=np.float64)
        return draws[stream_of_member - first]

    @staticmethod
    def draw(draws, day: int, parts):
        """Which members crash today and of which cause.

        Parameters
        ----------
        draws : ndarray (n, 366)
        day : int
        parts : ndarray (4, n) [d-1]
            Cause hazards (:meth:`cause_hazards`).

        Returns
        -------
        hit : ndarray of bool (n,)
            u < 1 − exp(−h), h the sum of the parts.
        cause : ndarray of int8 (n,)
            1 + index in :data:`CAUSES` for members hit, 0 otherwise.
        """
        return assign_cause(draws[:, day], parts)


def assign_cause(u, parts):
    """Crash decision and cause from one uniform number per member (module docstring).

    ``u`` (n,) uniform on [0, 1); ``parts`` (k, n) cause hazards [d-1]. Returns
    ``(hit, cause)`` with cause 1..k for members hit and 0 otherwise.
    """
    parts = np.asarray(parts, dtype=float)
    total = parts.sum(axis=0)
    p = -np.expm1(-total)
    hit = u < p
    share = np.cumsum(parts, axis=0) / np.where(total > 0, total, 1.0)
    v = u / np.where(p > 0, p, 1.0)
    cause = 1 + (v[None, :] >= share[:-1]).sum(axis=0)
    return hit, np.where(hit, cause, CAUSE_NONE).astype(np.int8)
