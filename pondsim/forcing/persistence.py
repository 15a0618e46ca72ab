"""Day-to-day persistence of air temperature in synthetic weather years.

A day bootstrap conditioned on clearness classes (:mod:`pondsim.forcing.years`) keeps the
persistence of cloudy spells but draws the days of a class independently, so warm and cold
spells last only as long as the class runs: the lag-1 autocorrelation of daily mean
temperature anomalies falls from ~0.6-0.7 in a source year to ~0.2. Cold snaps of several
days, the events that drop the carrying capacity fastest, become rare.

The remedy here splits each source day's temperature anomaly ``a`` (daily mean minus a
three-harmonic seasonal cycle fitted to the source) into the part its clearness class
explains, ``m[month, class]`` (the mean anomaly of the month's days of that class: a
cloudy summer day is cooler), and a residual ``r``. The synthetic year keeps ``m`` of its
simulated class and replaces the residual of the day it copied by a first-order
autoregressive residual

    r'_t = phi r'_(t-1) + sqrt(1 - phi^2) r_t,

which keeps the residual's variance (so the spread of daily temperatures) and has lag-1
autocorrelation ``phi``; each hour of day t is shifted by ``r'_t - r_t``. ``phi`` is
chosen so that the whole anomaly ``m + r'`` has the source's lag-1 autocorrelation rho:

    phi = (rho (var_m + var_r) - cov_m(1)) / var_r,

with ``cov_m(1)`` the lag-1 autocovariance of ``m`` over consecutive source days (the
class chain reproduces the source's class transitions, so it carries over). This is the
"daily residual as a first-order autoregressive process" of Richardson (1981) applied to
the residual left after the day bootstrap: Richardson, Water Resour. Res. 17:182-190,
doi:10.1029/WR017i001p00182 (there with a multivariate lag-1 model of standardised
residuals conditioned on wet/dry state). The seasonal cycle as a few harmonics follows
the same paper (Fourier series of the means).
"""

from __future__ import annotations

import numpy as np

_HOURS_PER_DAY = 24
#: Harmonics of the seasonal cycle of daily mean temperature (Richardson 1981 uses one;
#: three follow the asymmetric spring/autumn of mid-latitude sites, chosen for pondsim).
HARMONICS = 3
#: Largest autoregressive coefficient allowed [1] (a unit root would let a year drift).
PHI_MAX = 0.95


def seasonal_design(day_of_year, harmonics: int = HARMONICS) -> np.ndarray:
    """Design matrix ``[1, cos(2 pi k d / 365.25), sin(...)]``, shape (n, 2 k + 1)."""
    d = np.asarray(day_of_year, dtype=float)
    cols = [np.ones_like(d)]
    for k in range(1, harmonics + 1):
        w = 2 * np.pi * k * d / 365.25
        cols += [np.cos(w), np.sin(w)]
    return np.stack(cols, axis=-1)


def fit_seasonal_cycle(daily_mean_c, day_of_year, harmonics: int = HARMONICS):
    """Least-squares coefficients of the seasonal cycle of a daily series [degC]."""
    x = seasonal_design(day_of_year, harmonics)
    coef, *_ = np.linalg.lstsq(x, np.asarray(daily_mean_c, dtype=float), rcond=None)
    return coef


def temperature_anomaly(daily_mean_c, day_of_year, coef) -> np.ndarray:
    """Daily mean temperature less the fitted seasonal cycle [K]; broadcasts over
    leading axes of ``daily_mean_c``."""
    x = seasonal_design(day_of_year, (len(coef) - 1) // 2)
    return np.asarray(daily_mean_c, dtype=float) - x @ coef


def lag1_autocorrelation(a) -> float | np.ndarray:
    """Lag-1 autocorrelation of each row of ``a`` (mean removed per row) [1]."""
    a = np.asarray(a, dtype=float)
    a = a - a.mean(axis=-1, keepdims=True)
    return (a[..., 1:] * a[..., :-1]).sum(axis=-1) / (a * a).sum(axis=-1)


def persistence_model(anomaly, month, cls, consecutive, n_classes: int):
    """Class means ``m[month - 1, class]``, residuals and the coefficient ``phi``.

    Parameters
    ----------
    anomaly : ndarray (n_src_days,) [K]
    month : ndarray (n_src_days,) 1..12
    cls : ndarray (n_src_days,) clearness class
    consecutive : ndarray of bool (n_src_days,)
        True where the day follows its library predecessor in time (pairs used for the
        autocorrelations).
    n_classes : int

    Returns
    -------
    class_mean : ndarray (12, n_classes) [K]
    residual : ndarray (n_src_days,) [K]
    phi : float [1]
    rho_source : float [1]
        Lag-1 autocorrelation of the source anomalies over consecutive days.
    """
    a = np.asarray(anomaly, dtype=float)
    key = (np.asarray(month) - 1) * n_classes + np.asarray(cls)
    total = np.bincount(key, weights=a, minlength=12 * n_classes)
    count = np.bincount(key, minlength=12 * n_classes)
    class_mean = np.where(count > 0, total / np.maximum(count, 1), 0.0)
    m = class_mean[key]
    r = a - m
    now = np.flatnonzero(consecutive)
    before = now - 1
    ac = a - a.mean()
    mc = m - m.mean()
    rho = float((ac[now] * ac[before]).mean() / (ac * ac).mean())
    cov_m1 = float((mc[now] * mc[before]).mean())
    var_m, var_r = float(mc.var()), float(r.var())
    phi = (rho * (var_m + var_r) - cov_m1) / var_r if var_r > 0 else 0.0
    return class_mean.reshape(12, n_classes), r, float(np.clip(phi, 0.0, PHI_MAX)), rho


def autoregressive_shift(residual_drawn, expected, phi: float) -> np.ndarray:
    """Shift of each synthetic day ``r'_t - r_t`` [K], shape (n_years, n_days).

    Parameters
    ----------
    residual_drawn : ndarray (n_years, n_days) [K]
        Residuals of the copied source days.
    expected : ndarray (n_years, n_days) [K]
        Expected residual of a draw for that target day and class (the weighted mean of
        its candidate pool). The recursion runs on the deviations from it,
        ``r'_t - mu_t = phi (r'_(t-1) - mu_(t-1)) + sqrt(1 - phi^2)(r_t - mu_t)``, so that
        ``E[r'_t] = E[r_t]``: without this, structure within a source month (a warm first
        half, a cold second half) would be amplified by ``sqrt((1 + phi)/(1 - phi))`` and
        carried across month ends, biasing monthly means by up to ~1 K (measured on the
        Greensboro TMY3).
    phi : float [1]

    Notes
    -----
    The first day keeps its own residual (drawn from the stationary distribution); the
    recursion is deterministic given the copied days, so no random numbers are drawn.
    """
    r = np.asarray(residual_drawn, dtype=float)
    dev = r - np.asarray(expected, dtype=float)
    out = np.empty_like(dev)
    out[:, 0] = dev[:, 0]
    w = np.sqrt(1.0 - phi * phi)
    for t in range(1, r.shape[1]):  # 365 vectorised steps over all years
        out[:, t] = phi * out[:, t - 1] + w * dev[:, t]
    return out - dev


def apply_shift(data: dict, shift_k, saturation_vapour_pressure) -> dict:
    """Shift hourly air temperature by ``shift_k`` (n_years, n_days) [K], keeping the
    hour's vapour pressure (relative humidity recomputed, FAO-56 eq. 11, capped at 100 %)
    and the sky's emissivity (horizontal infrared scaled by ``(T'/T)^4`` in kelvin,
    Stefan-Boltzmann). Arrays in ``data`` are (n_years, n_days, 24); a new dict is
    returned."""
    out = dict(data)
    s = np.asarray(shift_k, dtype=float)[:, :, None]
    t_old = data["temp_air"]
    t_new = t_old + s
    out["temp_air"] = t_new
    if "relative_humidity" in data:
        e = data["relative_humidity"] * saturation_vapour_pressure(t_old)
        out["relative_humidity"] = np.minimum(100.0, e / saturation_vapour_pressure(t_new))
    if "ir_horizontal" in data:
        out["ir_horizontal"] = data["ir_horizontal"] * ((t_new + 273.15)
                                                        / (t_old + 273.15)) ** 4
    return out
