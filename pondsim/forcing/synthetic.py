"""Synthetic day-to-day weather from monthly normals: the generator behind
``python -m pondsim.forcing.climate NORMALS.toml OUT.epw --seed N``.

:func:`synthetic_weather` returns the same table as
:func:`pondsim.forcing.weather.read_weather`: a first-order Markov chain of daily
clearness classes (clear / partly cloudy / overcast) in the manner of Aguiar,
Collares-Pereira & Conde (1988), daily temperature anomalies tied to the day's
cloudiness with AR(1) persistence and, where the normals give it, rain on cloudy days,
in the manner of Richardson (1981). Hours, humidity, wind and pressure follow the
clear-sky mode of :mod:`pondsim.forcing.climate`.

References
----------
Aguiar, R. J., Collares-Pereira, M. & Conde, J. P. (1988) Simple procedure for generating
sequences of daily radiation values using a library of Markov transition matrices.
*Solar Energy* 40:269-279.

Richardson, C. W. (1981) Stochastic simulation of daily precipitation, temperature, and
solar radiation. *Water Resour. Res.* 17:182-190.
"""

from __future__ import annotations

import numpy as np

from pondsim.forcing.climate import (
    MIN_DIURNAL_RANGE_C,
    _base,
    _clearsky_daily,
    _daily_temperature,
    _finish,
    _humidity,
    _monthly_clearness,
    _validate_site,
    validate_normals,
)

#: Daily clearness of the overcast class relative to the month's mean clearness K:
#: c2 = clip(K - OVERCAST_BELOW_MEAN, *OVERCAST_RANGE); the partly cloudy class sits
#: half-way to clear sky (c1 = (1 + c2)/2), clear days at 1. Overcast days so tied to
#: the month's climate keep a hot desert's worst summer days at ~0.3-0.5 of clear sky,
#: as in real records: pvlib's Greensboro and Miami files have no May-August day below
#: 0.34 and 0.41 of clear sky (9.3 and 9.8 MJ m-2 d-1), measured for pondsim.
OVERCAST_BELOW_MEAN = 0.4
OVERCAST_RANGE = (0.15, 0.5)
#: Half-width of the uniform within-class spread of daily clearness (clear days: none).
CLASS_SPREAD = (0.0, 0.1, 0.05)
#: Probability of keeping yesterday's class before the stationary redraw; gives a lag-1
#: autocorrelation of the class of about this value (chosen; daily clearness index
#: autocorrelations of ~0.2–0.4 are typical, from memory).
CLASS_PERSISTENCE = 0.3
#: Daily Tmax / Tmin anomaly per unit of clearness anomaly [degC]: clear days warmer
#: maxima, cooler minima, cloudy days cooler on the whole (chosen for pondsim; signs
#: after Richardson 1981).
TEMP_MAX_PER_CLEARNESS = 14.0
TEMP_MIN_PER_CLEARNESS = -3.0
#: AR(1) residuals of daily Tmax and Tmin: lag-1 coefficient, SD [degC], and the
#: correlation of the two innovations (chosen so that daily mean temperature anomalies
#: have a lag-1 autocorrelation of ~0.7 and an SD of ~2-3 K, as pvlib's TMY files do:
#: 0.61-0.77 and 2.1-4.0 K about a 31-day running mean, measured for pondsim).
TEMP_AR1 = 0.78
TEMP_RESIDUAL_SD_C = 2.6
TEMP_INNOVATION_CORR = 0.7
#: Synthetic rain: chance that an overcast / partly cloudy day is wet, and the local
#: hours over which a wet day's rain falls (afternoon showers; chosen for pondsim).
WET_CHANCE = {2: 0.6, 1: 0.12}
RAIN_HOURS = (14, 15, 16)


def class_clearness(clearness):
    """Daily clearness of the (clear, partly cloudy, overcast) classes of each month.

    Parameters
    ----------
    clearness : array-like [1]
        Mean clearness of each month.

    Returns
    -------
    ndarray, shape (..., 3) [1]
        ``(1, (1 + c2)/2, c2)`` with ``c2 = clip(K - OVERCAST_BELOW_MEAN, *OVERCAST_RANGE)``.
    """
    k = np.asarray(clearness, dtype=float)
    c2 = np.clip(k - OVERCAST_BELOW_MEAN, *OVERCAST_RANGE)
    return np.stack([np.ones_like(c2), 0.5 * (1.0 + c2), c2], axis=-1)


def _class_probabilities(clearness):
    """Stationary class probabilities (clear, partly, overcast) for a mean clearness.

    A binomial mix ``((1-s)^2, 2s(1-s), s^2)`` over the equally spaced class clearness
    values of :func:`class_clearness` has mean ``c0 - 2 s (c0 - c1)``, so
    ``s = (c0 - K) / (c0 - c2)``.
    """
    c0, _, c2 = np.moveaxis(class_clearness(clearness), -1, 0)
    s = np.clip((c0 - np.asarray(clearness, dtype=float)) / (c0 - c2), 0.0, 1.0)
    return np.stack([(1 - s) ** 2, 2 * s * (1 - s), s ** 2], axis=-1)


def daily_clearness_chain(month_of_day, clearness, rng, n_series=1):
    """Daily clearness from a first-order Markov chain of weather classes.

    Parameters
    ----------
    month_of_day : array-like of int (1..12), length n_days
    clearness : array-like, 12 values
        Target mean clearness of each month.
    rng : numpy.random.Generator
    n_series : int
        Independent series generated side by side.

    Returns
    -------
    k : ndarray, shape (n_series, n_days)
        Daily clearness (daily GHI / clear-sky daily GHI).
    cls : ndarray of int, same shape
        Class index: 0 clear, 1 partly cloudy, 2 overcast.

    Notes
    -----
    Transition matrix of month *m*: ``P = rho I + (1 - rho) 1 pi_m^T`` (keep the class
    with probability ``rho`` = :data:`CLASS_PERSISTENCE`, else draw from ``pi_m``).
    Its stationary distribution is ``pi_m`` (:func:`_class_probabilities`), so the
    expected monthly mean clearness equals the normal; ``rho`` sets the persistence of
    spells. The class idea follows Aguiar, Collares-Pereira & Conde (1988), Solar Energy
    40:269–279, who tabulate Markov transition matrices of daily clearness classes.
    """
    month_of_day = np.asarray(month_of_day, dtype=int)
    n_days = len(month_of_day)
    pi = _class_probabilities(clearness)            # (12, 3)
    cum = np.cumsum(pi, axis=1)
    keep = rng.random((n_series, n_days)) < CLASS_PERSISTENCE
    draw_u = rng.random((n_series, n_days))
    spread_u = rng.uniform(-1.0, 1.0, (n_series, n_days))
    cls = np.empty((n_series, n_days), dtype=int)
    for d in range(n_days):
        fresh = (draw_u[:, d][:, None] > cum[month_of_day[d] - 1][None, :-1]).sum(axis=1)
        if d == 0:
            cls[:, 0] = fresh
        else:
            cls[:, d] = np.where(keep[:, d], cls[:, d - 1], fresh)
    centres = class_clearness(clearness)[month_of_day - 1]  # (n_days, 3)
    centre = np.take_along_axis(np.broadcast_to(centres, (n_series,) + centres.shape),
                                cls[..., None], axis=-1)[..., 0]
    k = np.minimum(centre + np.asarray(CLASS_SPREAD)[cls] * spread_u, 1.0)
    return k, cls


def _match_monthly(k, h0, month_of_day, kmon):
    """Scale each month's cloudiness so the insolation-weighted mean clearness is the
    target: every day's deficit 1 − k is multiplied by one factor per month, so clear
    days stay clear and the adjustment is shared by all cloudy days (none is pushed to
    near darkness), with no day below the month's overcast floor minus its spread."""
    k = k.copy()
    floor = class_clearness(kmon)[:, 2] - CLASS_SPREAD[2]
    for m in range(1, 13):
        sel = month_of_day == m
        w = h0[sel]
        deficit = 1.0 - k[sel]
        target = kmon[m - 1] * w.sum()
        lo_k = min(floor[m - 1], k[sel].min())

        def mean_for(f, deficit=deficit, w=w, lo_k=lo_k):
            return (np.clip(1.0 - f * deficit, lo_k, 1.0) * w).sum()

        lo, hi = 0.0, 1.0
        while mean_for(hi) > target and hi < 1e3:
            hi *= 2.0
        for _ in range(60):  # bisection: the weighted mean falls as f grows
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if mean_for(mid) > target else (lo, mid)
        k[sel] = np.clip(1.0 - 0.5 * (lo + hi) * deficit, lo_k, 1.0)
    return k


def _temperature_anomalies(k, kmon_day, rng):
    """Daily Tmax/Tmin anomalies [degC]: cloudiness-tied part plus AR(1) residuals."""
    n = len(k)
    corr = np.array([[1.0, TEMP_INNOVATION_CORR], [TEMP_INNOVATION_CORR, 1.0]])
    chol = np.linalg.cholesky(corr)
    z = rng.standard_normal((n, 2)) @ chol.T
    eps = np.empty((n, 2))
    eps[0] = z[0] * TEMP_RESIDUAL_SD_C
    scale = TEMP_RESIDUAL_SD_C * np.sqrt(1.0 - TEMP_AR1 ** 2)
    for d in range(1, n):
        eps[d] = TEMP_AR1 * eps[d - 1] + scale * z[d]
    dk = k - kmon_day
    return (TEMP_MAX_PER_CLEARNESS * dk + eps[:, 0],
            TEMP_MIN_PER_CLEARNESS * dk + eps[:, 1])


def synthetic_rain(cls, month_of_day, precipitation_mm, rng):
    """Hourly rain [mm h-1] on the cloudy days of a synthetic year.

    Parameters
    ----------
    cls : ndarray of int, (n_days,)
        Daily weather class (0 clear, 1 partly cloudy, 2 overcast).
    month_of_day : ndarray of int (1..12), (n_days,)
    precipitation_mm : array-like, 12 values [mm per month]
        Monthly normal.
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, (24 n_days,) [mm h-1]

    Notes
    -----
    A day of class c is wet with chance :data:`WET_CHANCE` [c] (clear days stay dry); a
    wet day's depth is exponential, its mean chosen so that the month's expected total,
    given the month's drawn classes, is the normal (the wet-day occurrence /
    exponential-amount structure of Richardson 1981); it falls evenly over
    :data:`RAIN_HOURS`. Months whose draw has no
    cloudy day stay dry, as a real dry month does.
    """
    cls = np.asarray(cls, dtype=int)
    month_of_day = np.asarray(month_of_day, dtype=int)
    chance = np.select([cls == 2, cls == 1], [WET_CHANCE[2], WET_CHANCE[1]], 0.0)
    wet = rng.random(len(cls)) < chance
    amount = rng.exponential(1.0, len(cls))
    daily = np.zeros(len(cls))
    for m in range(1, 13):
        sel = month_of_day == m
        n_wet = float(chance[sel].sum())  # expected wet days given the month's classes
        if n_wet > 0:
            daily[sel] = np.where(wet[sel], amount[sel], 0.0) \
                * float(precipitation_mm[m - 1]) / n_wet
    hourly = np.zeros((len(cls), 24))
    hourly[:, list(RAIN_HOURS)] = daily[:, None] / len(RAIN_HOURS)
    return hourly.ravel()


def synthetic_weather(*, latitude, longitude, elevation_m, utc_offset_h, normals, seed,
                      year=2025, name="site", match_monthly=False, source=None):
    """Hourly forcing from monthly normals with seeded day-to-day weather.

    Parameters
    ----------
    latitude, longitude, elevation_m, utc_offset_h, normals, year, name, source
        As :func:`clearsky_weather`.
    seed : int
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same table.
    match_monthly : bool
        False (default): each month's mean clearness and temperatures match the normals
        in expectation and vary from one seed (one "year") to another, as real years do.
        True: daily clearness is rescaled so each month's mean clearness equals the
        normal exactly (clear days stay at clear sky).

    Returns
    -------
    data, meta
        As :func:`clearsky_weather`; ``meta['seed']`` and notes record the generator.

    Notes
    -----
    * Daily clearness: :func:`daily_clearness_chain` (three classes, first-order Markov
      chain, after Aguiar, Collares-Pereira & Conde 1988, Solar Energy 40:269–279); the
      day's hourly GHI is its clear-sky GHI times the day's clearness.
    * Daily Tmax/Tmin: normal + :data:`TEMP_MAX_PER_CLEARNESS` (resp. ``MIN``) times the
      day's clearness anomaly + correlated AR(1) residuals, the structure of Richardson
      (1981), Water Resour. Res. 17:182–190 (residuals conditioned on the day's state,
      lag-1 persistence); Tmin is kept at least :data:`MIN_DIURNAL_RANGE_C` below Tmax.
    * Hours, humidity, wind and pressure as in :func:`clearsky_weather`.
    """
    nrm = validate_normals(normals, path=source)
    site = _validate_site(latitude, longitude, elevation_m, utc_offset_h, path=source)
    lat, lon, elev, off = (site[k] for k in ("latitude", "longitude", "elevation_m",
                                             "utc_offset_h"))
    rng = np.random.default_rng(seed)
    index, n_days, pressure, rise, sset = _base(lat, lon, elev, off, year)
    month_of_day = np.asarray(index.month[::24])
    h0 = _clearsky_daily(index, lat, lon, elev, pressure)
    kmon, kind = _monthly_clearness(nrm, h0, month_of_day, source)
    k, cls = daily_clearness_chain(month_of_day, kmon, rng)
    k, cls = k[0], cls[0]
    if match_monthly:
        k = _match_monthly(k, h0, month_of_day, kmon)
    m = month_of_day - 1
    dtx, dtn = _temperature_anomalies(k, kmon[m], rng)
    tx = nrm["temp_max_c"][m] + dtx
    tn = np.minimum(nrm["temp_min_c"][m] + dtn, tx - MIN_DIURNAL_RANGE_C)
    temp = _daily_temperature(index, n_days, rise, sset, tx, tn)
    rh = _humidity(temp, n_days, nrm["relative_humidity_pct"][m])
    wind = np.repeat(nrm["wind_speed_m_s"][m], 24)
    notes = [f"synthetic weather from monthly normals ({kind}), seed {seed}: Markov chain "
             "of daily clearness classes, cloud-tied AR(1) temperature anomalies"
             + ("; monthly clearness matched exactly" if match_monthly else "")]
    df, meta = _finish(index, lat, lon, elev, pressure, temp, rh, wind, np.repeat(k, 24),
                       name, notes, "synthetic", year, off,
                       str(source) if source else "normals")
    if "precipitation_mm" in nrm:
        df["precipitation"] = synthetic_rain(cls, month_of_day, nrm["precipitation_mm"],
                                             rng)
        meta["notes"][0] += "; rain on cloudy days to the monthly normal in expectation"
    meta["seed"] = seed
    return df, meta
