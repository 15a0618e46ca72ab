"""Exceedance values and their Monte Carlo error.

Convention (one for every output of pondsim): **P50/P75/P90 are exceedance values**, the
annual yield exceeded with probability 0.50/0.75/0.90, so P90 is the 10th percentile of
the yield distribution (common practice in energy-yield assessments). The limits of a
band are named as percentiles, ``pct10``/``pct90``: ``pct90`` is the high value.

Two intervals for a quantile estimated from a Monte Carlo ensemble:

* :func:`order_statistic_interval` — distribution-free, for independent members: the
  interval between two order statistics whose ranks come from the binomial(n, p)
  distribution (Hahn & Meeker 1991, *Statistical Intervals*, Wiley, ch. 5; from memory
  for the chapter). Its coverage is at least the nominal level for any continuous
  distribution.
* :func:`nested_bootstrap` — for the outlook's ensemble, whose members are not
  independent: crash replicates are nested in parameter draws, which are nested in
  weather years (every weather year has its own draws). The outermost level with more
  than one unit is resampled with replacement, each unit with everything nested in it
  (the cluster bootstrap; Davison & Hinkley 1997, *Bootstrap Methods and their
  Application*, Cambridge University Press, sec. 3.8, from memory for the section, who
  show that resampling the top level alone gives nearly unbiased variances while
  resampling every level overstates them), and the interval is the bootstrap percentile
  interval. Where only one level varies, the members are independent and the
  order-statistic interval is used.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr
from scipy import stats

from pondsim.errors import InputError

#: Exceedance name -> quantile of the yield distribution (P90 = 10th percentile).
EXCEEDANCE = {"P50": 0.50, "P75": 0.25, "P90": 0.10}


def exceedance_quantile(name: str) -> float:
    """Quantile level of an exceedance name: ``"P90"`` -> 0.10 (the value exceeded with
    probability 0.90), ``"P10"`` -> 0.90. The one convention of every pondsim output,
    for a yield as for a cost (for a cost, P90 is the low figure, P10 the high one)."""
    if not (name[:1] == "P" and name[1:].isdigit() and 0 < int(name[1:]) < 100):
        raise InputError(f"not an exceedance name: {name!r} (expected P1 ... P99)",
                         field="exceedance")
    return 1.0 - int(name[1:]) / 100.0


#: Default confidence level of every Monte Carlo interval [1].
CONFIDENCE = 0.95
#: Default number of bootstrap resamples (common practice: 200-1000 for percentile
#: intervals; 400 keeps the interval limits' own noise below ~5 % of their width).
N_BOOT = 400


def order_statistic_ranks(n: int, p: float, confidence: float = CONFIDENCE):
    """1-based ranks ``(l, u)`` of the order statistics bracketing the p-quantile.

    Parameters
    ----------
    n : int
        Number of independent samples.
    p : float
        Quantile level (0.1 for P90).
    confidence : float
        Nominal two-sided level.

    Returns
    -------
    l, u : int
        Ranks (0 or n + 1 where the sample is too small to bound that side) and
    coverage : float
        Exact coverage ``P(l <= B <= u - 1)``, ``B ~ binomial(n, p)``.

    Notes
    -----
    ``x_(l) <= xi_p < x_(u)`` holds exactly when ``l <= B <= u - 1`` where B counts
    samples below the quantile ``xi_p`` (Hahn & Meeker 1991, ch. 5). ``l`` is the
    ``alpha/2`` binomial quantile and ``u - 1`` the ``1 - alpha/2`` one, so each tail
    keeps at most ``alpha/2``.
    """
    alpha = 1.0 - confidence
    binom = stats.binom(n, p)
    lo = int(binom.ppf(alpha / 2))
    hi = int(binom.ppf(1 - alpha / 2)) + 1
    coverage = float(binom.cdf(hi - 1) - binom.cdf(lo - 1))
    return lo, hi, coverage


def order_statistic_interval(x, p: float, confidence: float = CONFIDENCE):
    """Distribution-free confidence interval of the p-quantile of independent samples.

    Parameters
    ----------
    x : array-like, shape (n,)
    p : float
        Quantile level (0.1 for P90).
    confidence : float

    Returns
    -------
    low, high : float
        ``x_(l)`` and ``x_(u)`` (:func:`order_statistic_ranks`); NaN on a side the sample
        is too small to bound (e.g. the 10th percentile from fewer than 35 samples at
        95 %).
    """
    s = np.sort(np.asarray(x, dtype=float).ravel())
    n = s.size
    lo, hi, _ = order_statistic_ranks(n, p, confidence)
    low = s[lo - 1] if lo >= 1 else np.nan
    high = s[hi - 1] if hi <= n else np.nan
    return float(low), float(high)


def nested_bootstrap(cube, levels, *, confidence: float = CONFIDENCE,
                     n_boot: int = N_BOOT, seed: int | None = 0):
    """Quantiles of a nested ensemble and their Monte Carlo intervals.

    Parameters
    ----------
    cube : ndarray, shape (n_policy, n_years, n_draws, n_replicates)
        Annual values; draws are nested in years and replicates in draws.
    levels : sequence of float
        Quantile levels (0.5, 0.25, 0.1 for P50, P75, P90).
    confidence : float
    n_boot : int
    seed : int, optional

    Returns
    -------
    point, low, high : ndarray, shape (n_policy, n_levels)
        Quantiles of all members pooled (linear interpolation, numpy's default) and the
        interval limits: the bootstrap percentile interval when resampling the
        outermost level with more than one unit, or the order-statistic interval when
        only one level varies (then the members are independent).
    """
    levels = np.asarray(levels, dtype=float)
    cube = np.asarray(cube, dtype=float)
    if cube.ndim != 4:
        raise InputError("expected an array (policy, year, draw, replicate)", field="cube")
    n_pol = cube.shape[0]
    pooled = cube.reshape(n_pol, -1)
    point = np.quantile(pooled, levels, axis=1).T
    free = [ax for ax in (1, 2, 3) if cube.shape[ax] > 1]
    if len(free) <= 1:
        lim = np.array([[order_statistic_interval(row, q, confidence) for q in levels]
                        for row in pooled]).reshape(n_pol, len(levels), 2)
        return point, lim[..., 0], lim[..., 1]
    top = free[0]
    units = np.moveaxis(cube, top, 1).reshape(n_pol, cube.shape[top], -1)
    pick = np.random.default_rng(seed).integers(0, units.shape[1],
                                                (n_boot, units.shape[1]))
    q = np.empty((len(levels), n_pol, n_boot))
    for j in range(n_pol):  # one policy at a time bounds memory
        q[:, j, :] = np.quantile(units[j][pick].reshape(n_boot, -1), levels, axis=1)
    alpha = 1.0 - confidence
    low = np.quantile(q, alpha / 2, axis=2).T
    high = np.quantile(q, 1 - alpha / 2, axis=2).T
    return point, low, high


def format_interval(name: str, value: float, low: float, high: float, unit: str,
                    confidence: float = CONFIDENCE, digits: int = 1) -> str:
    """``"P90 17.3 t ha-1 yr-1, 95 % CI 15.9-18.4"`` (an open side shown as ``?``)."""
    def f(v):
        return "?" if not np.isfinite(v) else f"{v:,.{digits}f}"

    return (f"{name} {f(value)} {unit}, {100 * confidence:.0f} % CI "
            f"{f(low)}\u2013{f(high)}")


def member_cube(values: np.ndarray, ds: xr.Dataset) -> np.ndarray:
    """Per-member values arranged by the ensemble's design.

    Parameters
    ----------
    values : ndarray, shape (n_policy, n_member)
    ds : xarray.Dataset
        With member coordinates ``weather_year``, ``draw`` (numbered within its weather
        year when draws are nested) and ``replicate``.

    Returns
    -------
    ndarray, shape (n_policy, n_years, n_draws, n_replicates)
    """
    member = np.arange(ds.sizes["member"])

    def index(name):
        v = ds[name].values if name in ds.coords else np.zeros_like(member)
        return np.unique(v, return_inverse=True)[1]

    iy, idr, ir = index("weather_year"), index("draw"), index("replicate")
    if "replicate" not in ds.coords:
        # members without a replicate number: the members of each (year, draw) cell are
        # its replicates, in member order (e.g. a `run`: crash replicates of one year)
        ir = pd.DataFrame({"y": iy, "d": idr}).groupby(["y", "d"]).cumcount().to_numpy()
    if len(np.unique(np.stack([iy, idr, ir]), axis=1)[0]) != member.size:
        raise InputError("two members share a weather year, draw and replicate",
                         field="member")
    cube = np.full((values.shape[0], iy.max() + 1, idr.max() + 1, ir.max() + 1), np.nan)
    cube[:, iy, idr, ir] = values
    if np.isnan(cube).any():
        raise InputError("the ensemble is not complete over weather years, draws and "
                         "replicates", field="member")
    return cube
