"""The source-day library of the weather-year generator: every source day with its
daily clearness and class, the monthly class transition matrices, and the weighted draw
of a source day per synthetic day (see :func:`pondsim.forcing.years.stack_years`, Notes,
for the method and its references)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.forcing.columns import OPTIONAL_COLUMNS

_HOURS_PER_DAY = 24


# --------------------------------------------------------------------------- source days
def daily_clearness(ghi, ghi_clear):
    """Daily clearness: daily GHI over daily clear-sky GHI [1].

    Parameters
    ----------
    ghi, ghi_clear : array-like [W m-2], shape (..., n_days * 24)
        Hourly means of whole days (hour-start labels from 00:00).

    Returns
    -------
    ndarray, shape (..., n_days)
        ``sum(ghi) / sum(ghi_clear)`` per day; 0 on a day without clear-sky light
        (polar night).
    """
    g = np.asarray(ghi, dtype=float)
    c = np.asarray(ghi_clear, dtype=float)
    gd = g.reshape(*g.shape[:-1], -1, _HOURS_PER_DAY).sum(axis=-1)
    cd = c.reshape(*c.shape[:-1], -1, _HOURS_PER_DAY).sum(axis=-1)
    return np.where(cd > 0, gd / np.where(cd > 0, cd, 1.0), 0.0)


@dataclass(frozen=True)
class _Library:
    """Every source day, flattened over source years."""

    columns: tuple            # column names, in the source's order
    values: np.ndarray        # (n_columns, n_src_days, 24)
    month: np.ndarray         # (n_src_days,) 1..12
    dom: np.ndarray           # (n_src_days,) day of month
    h0: np.ndarray            # (n_src_days,) clear-sky daily total [Wh m-2]
    k: np.ndarray             # (n_src_days,) daily clearness [1]
    prev: np.ndarray          # (n_src_days,) library row of the day before (cyclic/year)
    start: pd.DatetimeIndex   # (n_src_days,) 00:00 of each source day
    ref_year: pd.DataFrame    # first source year, for the target's geometry


def _library(years: Sequence[pd.DataFrame]) -> _Library:
    columns = tuple(years[0].columns)
    for y in years[1:]:
        if tuple(y.columns) != columns:
            raise InputError("all source years must have the same columns; got "
                             f"{list(columns)} and {list(y.columns)}", field="columns")
    vals, month, dom, prev, start = [], [], [], [], []
    offset = 0
    for y in years:
        n_days = len(y) // _HOURS_PER_DAY
        v = y.to_numpy(dtype=float).T.reshape(len(columns), n_days, _HOURS_PER_DAY)
        # Optional columns (precipitation, sky infrared) may carry "no data" hours: whole
        # days are resampled as they are, so their gaps travel with them.
        required = [i for i, c in enumerate(columns) if c not in OPTIONAL_COLUMNS]
        if not np.isfinite(v[required]).all():
            bad = ~np.isfinite(v[required]).all(axis=(1, 2))
            col = columns[required[int(np.flatnonzero(bad)[0])]]
            raise InputError("source forcing has missing (NaN) values", field=col)
        vals.append(v)
        days = y.index[::_HOURS_PER_DAY]
        month.append(np.asarray(days.month))
        dom.append(np.asarray(days.day))
        start.append(days)
        # the day before Jan 1 is Dec 31 of the same source year (a typical year is
        # treated as cyclic; for real years this one join is artificial)
        prev.append(offset + (np.arange(n_days) - 1) % n_days)
        offset += n_days
    values = np.concatenate(vals, axis=1)
    ci = {c: i for i, c in enumerate(columns)}
    h0 = values[ci["ghi_clear"]].sum(axis=-1)
    k = daily_clearness(values[ci["ghi"]].ravel(), values[ci["ghi_clear"]].ravel())
    return _Library(columns, values, np.concatenate(month), np.concatenate(dom),
                    h0, k, np.concatenate(prev), start[0].append(start[1:]), years[0])


def _class_edges(lib: _Library, n_classes: int) -> np.ndarray:
    """Interior class edges per month, quantiles of the month's daily clearness."""
    q = np.arange(1, n_classes) / n_classes
    return np.stack([np.quantile(lib.k[lib.month == m], q) for m in range(1, 13)])


def _classify(k, month, edges):
    """Class 0 (least clear) .. n_classes-1 (clearest) of each day."""
    e = edges[np.asarray(month) - 1]                       # (n, n_classes-1)
    return (np.asarray(k)[:, None] > e).sum(axis=1)


def _transitions(cls, prev, month, n_classes, prior, *, n_iter=200):
    """Transition matrices per month (of the day transitioned FROM), shape (12, C, C).

    ``P[m, i, j]`` = probability that a day of class ``j`` follows a day of class ``i``
    of month ``m + 1``. Counts of consecutive source days plus ``prior`` per cell are
    balanced (iterative proportional fitting of rows and columns) so that both margins
    equal the month's observed class frequencies ``f`` before the rows are normalised;
    then ``f P = f``: the chain's stationary class mix is the source month's, which keeps
    the monthly mean irradiance unbiased, while the odds of staying in a class remain
    those counted.
    """
    counts = np.full((12, n_classes, n_classes), float(prior))
    today = np.arange(len(cls))
    # only genuine consecutive pairs: skip the cyclic Dec 31 -> Jan 1 join of each year
    real = today - prev == 1
    np.add.at(counts, (month[prev[real]] - 1, cls[prev[real]], cls[today[real]]), 1.0)
    freq = np.stack([np.bincount(cls[month == m], minlength=n_classes)
                     for m in range(1, 13)]).astype(float)
    f = freq / freq.sum(axis=1, keepdims=True)
    q = counts * (f[:, :, None] > 0) * (f[:, None, :] > 0)
    for _ in range(n_iter):
        q = q * _safe_ratio(f, q.sum(axis=2))[:, :, None]
        q = q * _safe_ratio(f, q.sum(axis=1))[:, None, :]
    rows = q.sum(axis=2, keepdims=True)
    # a class absent from a month (ties) never occurs there: give it the month's mix
    return np.where(rows > 0, q / np.where(rows > 0, rows, 1.0), f[:, None, :]), f


def _safe_ratio(a, b):
    return np.where(b > 0, a / np.where(b > 0, b, 1.0), 0.0)



def _candidates(t_month, t_dom, lib: _Library, cls, n_classes, window_days):
    """Padded table of source days per (target day, class) and their counts.

    Candidates of target day t and class c: source days of t's calendar month, at most
    ``window_days`` days of month from t's, of class c. Where that set is empty, the whole
    month's days of class c; where the month has none, any day of the window.
    """
    same_month = lib.month[None, :] == t_month[:, None]                # (n_t, n_src)
    near = same_month & (np.abs(lib.dom[None, :] - t_dom[:, None]) <= window_days)
    of_class = cls[None, None, :] == np.arange(n_classes)[None, :, None]
    pool = near[:, None, :] & of_class                                 # (n_t, C, n_src)
    empty = ~pool.any(axis=2)
    pool = np.where(empty[:, :, None], same_month[:, None, :] & of_class, pool)
    # a class with no day in the month (ties, e.g. every day of a month equally clear):
    # the chain can only enter it across a month boundary; take any day of the window
    still = ~pool.any(axis=2)
    pool = np.where(still[:, :, None], near[:, None, :], pool)
    counts = pool.sum(axis=2)
    # stable argsort puts each pool's members first, in library order
    order = np.argsort(~pool, axis=2, kind="stable")[:, :, : counts.max()]
    return order, counts


def _balance_weights(order, counts, p_class, group, *, n_iter=500, tol=1e-6):
    """Base weights of the source days so that, over the target calendar, each source
    day of a (month, class) group is expected to be drawn equally often.

    A date window clipped to the month covers the month's middle days from more target
    dates than its first and last days; drawing uniformly within the window would favour
    mid-month days and shift monthly means by the chance weather of the month's edges.
    Iterative proportional fitting rescales the weights until the expected number of
    draws of each source day (the target day's class probability ``p_class[t, c]`` times
    the day's share of the window's weight) equals the mean over its group.

    Parameters
    ----------
    order, counts : from :func:`_candidates`
    p_class : ndarray (n_t, n_classes)
        Probability of each class on each target day.
    group : ndarray of int (n_src,)
        (month, class) group of each source day.

    Returns
    -------
    weights : ndarray (n_src,)
    residual : float
        Largest relative departure of a day's expected draws from its group mean.
    """
    m = order.shape[2]
    valid = np.arange(m)[None, None, :] < counts[:, :, None]
    rows = order[valid]
    n_src = len(group)
    appear = np.bincount(rows, minlength=n_src) > 0
    w = np.ones(n_src)
    target = None
    residual = np.inf
    for _ in range(n_iter):
        wc = np.where(valid, w[order], 0.0)
        frac = wc / wc.sum(axis=2, keepdims=True)
        picks = np.bincount(rows, weights=(p_class[:, :, None] * frac)[valid],
                            minlength=n_src)
        if target is None:  # group totals do not change with the weights
            total = np.bincount(group, weights=picks)
            n_days = np.bincount(group, weights=appear.astype(float))
            target = total[group] / np.where(n_days[group] > 0, n_days[group], 1.0)
        ratio = np.where(appear & (picks > 0), target / np.where(picks > 0, picks, 1.0), 1.0)
        residual = float(np.max(np.abs(ratio - 1.0)))
        if residual < tol:
            break
        w = w * ratio
    return w, residual


def _draw_days(rng, cls, order, counts, base_w):
    """Source day of every synthetic day, shape (n_years, n_t).

    Day ``t`` of class ``c`` draws one day of the (t, c) pool with probability
    proportional to ``base_w`` (:func:`_balance_weights`), independently of other days:
    all persistence comes from the class chain. Vectorised: the pools' cumulative
    probabilities are laid end to end (pool ``r`` spans ``[r, r + 1]``) and searched once.
    """
    n_t, n_c, m = order.shape
    valid = np.arange(m)[None, None, :] < counts[:, :, None]
    w = np.where(valid, base_w[order], 0.0)
    cum = np.cumsum(w, axis=2) / w.sum(axis=2, keepdims=True)
    cum[..., -1] = 1.0                         # guard against rounding
    pool = np.arange(n_t)[None, :] * n_c + cls                  # (N, n_t)
    flat = (cum + np.arange(n_t * n_c).reshape(n_t, n_c, 1)).ravel()
    u = rng.random(cls.shape)
    pos = np.searchsorted(flat, pool + u, side="right") - pool * m
    slot = np.minimum(pos, counts.reshape(-1)[pool] - 1)
    return order.reshape(n_t * n_c, m)[pool, slot]
