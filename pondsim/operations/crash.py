"""Culture crash risk: a daily hazard from overshoot and a falling carrying capacity.

A culture standing near or above its carrying capacity when K falls quickly (a cold snap,
a cloudy spell, the end of summer) is light- or temperature-starved, stressed and open to
grazers and pathogens. The daily hazard is

    h = h_base + h_stress · (1 − exp(−s_over · s_drop))   [d-1]
    s_over = max(0, X/K̄ − ρ_onset) / (1 − ρ_onset)       overshoot above the onset ratio
    s_drop = max(0, ln K̄(t − w) − ln K̄(t)) / d_scale     fall of ln K̄ over w days

where K̄ is the trailing w-day mean of the daily carrying capacity (so that one dull day
among bright ones is not read as a collapse), and the probability of a crash on a day is
1 − exp(−h). The stress term rises linearly with the product of overshoot and K-drop
while both are small and saturates at ``h_stress``, so that no weather makes a crash
certain within a day. ``h_base`` stands for the
contamination and grazer crashes every operator sees regardless of weather. All
parameters are scenario keys; the defaults are ASSUMPTIONS (common practice of this
project, not measurements) to be replaced by a site's own crash history.

Random numbers: member j of every policy uses the j-th stream, a block of 366 uniform
draws from ``numpy.random.Generator(PCG64(seed))`` (common random numbers across
policies, so that policy differences are not drowned by sampling noise). The same seed
gives the same result; the number of members does not change member j's draws.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DAYS_PER_STREAM = 366


def k_drop(k_today, k_before, k_floor: float = 1.0):
    """Fall of ln K over the window, ln K(t − w) − ln K(t) [-] (positive when K falls).

    K is floored at ``k_floor`` [g m-3] so that a day with no growth (K = 0) gives a
    large but finite drop.
    """
    return np.log(np.maximum(k_before, k_floor)) - np.log(np.maximum(k_today, k_floor))


@dataclass(frozen=True)
class CrashModel:
    """Daily crash hazard parameters (see the module docstring).

    Attributes
    ----------
    base_hazard_per_d : float [d-1]
    stress_hazard_per_d : float [d-1]
        Largest hazard the weather stress can add (reached when s_over · s_drop >> 1).
    overshoot_onset : float [-]
        X/K above which overshoot counts.
    window_days : int [d]
        Window of the K-drop index.
    drop_scale : float [-]
        Fall of ln K over the window that counts as one unit of drop stress.
    loss_fraction : float [-]
        Share of the standing biomass lost in a crash (the rest is salvaged as harvest).
    """

    base_hazard_per_d: float = 0.0005
    stress_hazard_per_d: float = 0.25
    overshoot_onset: float = 0.8
    window_days: int = 3
    drop_scale: float = 0.2
    loss_fraction: float = 0.8

    def smoothed(self, k_daily):
        """Trailing ``window_days`` mean of K along the last axis [g m-3]."""
        k = np.asarray(k_daily, dtype=float)
        w = self.window_days
        c = np.cumsum(np.concatenate([np.zeros(k.shape[:-1] + (1,)), k], axis=-1), axis=-1)
        n = np.minimum(np.arange(1, k.shape[-1] + 1), w)
        start = np.maximum(np.arange(k.shape[-1]) + 1 - w, 0)
        return (c[..., 1:] - c[..., start]) / n

    def drop_index(self, k_smooth):
        """ln K̄(t − w) − ln K̄(t) along the last axis (0 for the first w days) [-]."""
        k = np.asarray(k_smooth, dtype=float)
        before = np.concatenate([np.repeat(k[..., :1], self.window_days, axis=-1),
                                 k[..., :-self.window_days]], axis=-1)
        return k_drop(k, before)

    def hazard(self, x, k_smooth, drop):
        """Daily hazard [d-1] for density *x* [g m-3], smoothed K [g m-3] and K-drop [-]."""
        s_over = np.maximum(np.asarray(x) / np.maximum(k_smooth, 1.0)
                            - self.overshoot_onset, 0.0) / (1.0 - self.overshoot_onset)
        s_drop = np.maximum(drop, 0.0) / self.drop_scale
        return self.base_hazard_per_d - self.stress_hazard_per_d * np.expm1(-s_over * s_drop)

    @staticmethod
    def streams(seed: int | None, stream_of_member) -> np.ndarray:
        """Uniform draws [0, 1) of shape (n_members, 366), one row per member's stream."""
        stream_of_member = np.asarray(stream_of_member, dtype=np.intp)
        n_streams = int(stream_of_member.max()) + 1 if stream_of_member.size else 0
        gen = np.random.Generator(np.random.PCG64(seed))
        draws = gen.random((n_streams, DAYS_PER_STREAM), dtype=np.float64)
        return draws[stream_of_member]

    def draw(self, draws, day: int, hazard):
        """Which members crash today: u < 1 − exp(−h)."""
        return draws[:, day] < -np.expm1(-hazard)
