"""Carrying capacity K per day, its rate of fall, and a seasonal K table.

K [g m-3] is the light-limited density at which a day's net growth of a self-shading
culture is zero, optionally capped by a nutrient limit. The logistic growth form may
instead take K from a user's table of twelve monthly values (:func:`monthly_k_table`).
:func:`k_drop_index` measures how fast K falls, for the crash-risk model.

All functions work on whole arrays: the days, and any leading member axes, are solved at
once (no Python loop over days or members).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.pond.light_response import (
    _depth_average_evaluator,
    _SteeleAverage,
    jassby_platt,
    monod,
)

__all__ = [
    "daily_carrying_capacity",
    "daily_net_growth_rate",
    "k_drop_index",
    "trailing_mean",
    "monthly_k_table",
]

#: Fixed optical depths [1] probed when net growth is not positive where it must be
#: decreasing: 8 per decade from 1e-3 to 1e3. Fixed (not relative to each day's range)
#: so that a larger background extinction only removes probe points, which keeps K
#: monotone in it.
_PROBE_TAU = np.geomspace(1e-3, 1e3, 49)
_MAX_ITER = 60


def _per_day(value, shape, name):
    """Broadcast a strain/pond parameter to ``shape[:-1] + (1,)`` (constant in a day)."""
    v = np.asarray(value, dtype=float)
    if v.ndim and v.shape[-1] != 1:
        raise InputError(f"{name} must not vary within a day; give per-member values the "
                         "shape (member, 1, 1)", field=name)
    return np.broadcast_to(v, shape[:-1] + (1,))


class _DailyBalance:
    """The day's net growth as a function of density, on flattened days.

    Everything that does not depend on X is computed once. Inputs are broadcast to one
    shape (..., day, step) and flattened to rows (one row per day and member); steps
    without light or growth potential add nothing to the light term, so they are
    dropped and the step axis is compressed to the most lit steps of any day.
    """

    def __init__(self, par_hourly, temp_factor_hourly, maint_hourly, *, mu_max, model,
                 param, k_biomass, k_background, depth_m, n_nodes=16):
        par = np.asarray(par_hourly, dtype=float)
        if par.ndim < 2:
            raise InputError("hourly PAR must have shape (..., day, hour)", field="par")
        w = np.asarray(mu_max, dtype=float) * np.asarray(temp_factor_hourly, dtype=float)
        maint = np.asarray(maint_hourly, dtype=float)
        p = np.asarray(param, dtype=float)
        kb, kbg, depth = (np.asarray(v, dtype=float) for v in (k_biomass, k_background,
                                                                depth_m))
        try:
            shape = np.broadcast_shapes(par.shape, w.shape, maint.shape, p.shape, kb.shape,
                                        kbg.shape, depth.shape)
        except ValueError as exc:
            raise InputError(f"forcing and parameters do not broadcast: {exc}") from None
        if shape[-1] != par.shape[-1]:
            raise InputError("PAR must give every step of the day", field="par")
        self.shape = shape[:-1]
        self.n_steps = shape[-1]
        n_rows = int(np.prod(self.shape))
        i0, w, p = (np.broadcast_to(v, shape).reshape(n_rows, shape[-1]) for v in (par, w, p))
        # NaN forcing must give NaN, not be mistaken for a dark step by the compression.
        self.nan = np.isnan(i0).any(axis=-1) | np.isnan(w).any(axis=-1)
        lit = (i0 > 0) & (w > 0)
        i0 = np.where(lit, i0, 0.0)  # negative PAR is round-off: dark
        n_keep = max(int(lit.sum(axis=-1).max(initial=0)), 1)
        order = np.argsort(~lit, axis=-1, kind="stable")[:, :n_keep]
        self.i0 = np.take_along_axis(i0, order, axis=-1)
        self.w = np.take_along_axis(np.where(lit, w, 0.0), order, axis=-1)
        self.param = np.take_along_axis(p, order, axis=-1)
        self.loss = np.broadcast_to(maint, shape).reshape(n_rows, shape[-1]).sum(axis=-1)
        self.nan |= np.isnan(self.loss)
        self.dtau_dx = (_per_day(kb, shape, "k_biomass") * _per_day(depth, shape, "depth_m")
                        ).reshape(n_rows)
        self.tau_clear = (_per_day(kbg, shape, "k_background")
                          * _per_day(depth, shape, "depth_m")).reshape(n_rows)
        if np.any(~(self.dtau_dx > 0)):
            raise InputError("k_biomass and depth_m must be positive for a self-shading "
                             "culture", field="k_biomass")
        self.model = model
        self.n_nodes = n_nodes
        self.average = _depth_average_evaluator(model, self.i0, self.param,
                                                n_nodes=n_nodes).prepare()

    def take(self, rows):
        """The balance restricted to some rows (flattened days)."""
        new = object.__new__(_DailyBalance)
        new.shape, new.n_steps = (len(rows),), self.n_steps
        for name in ("nan", "i0", "w", "param", "loss", "dtau_dx", "tau_clear"):
            setattr(new, name, getattr(self, name)[rows])
        new.model, new.n_nodes = self.model, self.n_nodes
        new.average = self.average.take(rows)
        return new

    def tau(self, x):
        """Optical depth [1] of each row at density x [g m-3]."""
        return self.tau_clear + self.dtau_dx * x

    def __call__(self, x, slope=False):
        """G(x): sum over the day's steps of the net specific rate [d-1 × steps], and,
        if ``slope``, dG/d(tau) [d-1 × steps]."""
        tau = self.tau(np.asarray(x, dtype=float))[:, None]
        if not slope:
            return np.sum(self.w * self.average(tau), axis=-1) - self.loss
        mean, dmean = self.average(tau, slope=True)
        return np.sum(self.w * mean, axis=-1) - self.loss, np.sum(self.w * dmean, axis=-1)

    def column_integral(self):
        """S = sum_h w_h ∫_0^inf f(I0 e^-s) ds [d-1 × steps], so that G(X) <= S/tau - M."""
        total, _ = self.average.integral(np.inf)
        return np.sum(self.w * total, axis=-1)

    def decreasing_from(self):
        """Optical depth [1] from which G is known to decrease in X, per row; None when
        unknown (a callable response).

        0 for a non-decreasing response. For Steele, the optical depth beyond which every
        hour's depth average falls (:func:`_steele_peak_tau` of the day's brightest
        surface light relative to I_opt).
        """
        if isinstance(self.average, _SteeleAverage):
            a_max = np.max(np.where(self.w > 0, self.average.a, 0.0), axis=-1)
            return _steele_peak_tau(a_max)
        if _is_monotone(self.model):
            return np.zeros(self.loss.shape)
        return None


def _steele_peak_tau(a):
    r"""Optical depth at which Steele's depth-averaged response peaks [1].

    Parameters
    ----------
    a : ndarray [1]
        Surface light relative to the optimum, I0 / I_opt.

    Returns
    -------
    ndarray [1]
        :math:`\tau_p`; 0 where a <= 1 (no photoinhibition at the surface).

    Notes
    -----
    With :math:`u = \tau - \ln a` the response at optical depth s is
    :math:`h(s - \ln a)`, :math:`h(u) = e^{-u} H(u)`, :math:`H(u) = \exp(1 - e^{-u})`,
    and :math:`\int_0^{\tau} h = H(u) - e^{1-a}`. The mean peaks where the bottom
    response equals the mean, :math:`e^{-u} H(u)(\ln a + u) = H(u) - e^{1-a}`; the
    left side minus the right is positive at u = 0 for a > 1 and tends to
    :math:`e^{1-a} - e < 0`, so the root is bracketed and found by bisection (to
    1e-12). :math:`\tau_p` increases with a (checked numerically from a = 1.01 to
    1e5), so the day's brightest hour bounds the peaks of all its hours.
    """
    a = np.asarray(a, dtype=float)
    over = a > 1.0
    a_s = np.where(over, a, 2.0)
    s_p = np.log(a_s)
    tail = np.exp(1.0 - a_s)
    u_lo, u_hi = np.zeros_like(a_s), np.full_like(a_s, 60.0)
    for _ in range(60):  # bisection on whole arrays; 60 halvings of [0, 60]
        u = 0.5 * (u_lo + u_hi)
        big_h = np.exp(1.0 - np.exp(-u))
        positive = np.exp(-u) * big_h * (s_p + u) - big_h + tail > 0
        u_lo, u_hi = np.where(positive, u, u_lo), np.where(positive, u_hi, u)
    return np.where(over, s_p + u_hi, 0.0)


def _is_monotone(model):
    """Whether the response is known to be non-decreasing in light."""
    return model in ("monod", "jassby_platt") or model in (monod, jassby_platt)


def daily_net_growth_rate(x, par_hourly, temp_factor_hourly, maint_hourly, *, mu_max,
                          model, param, k_biomass, k_background, depth_m):
    r"""Mean net specific growth rate over each day at a constant density.

    Parameters
    ----------
    x : array-like [g m-3]
        Density, broadcast against the day axes of the result.
    par_hourly : array-like, shape (..., day, hour) [µmol m-2 s-1]
        PAR entering the culture, one value per step of the day.
    temp_factor_hourly : array-like, shape (..., day, hour) [1]
        Temperature factor f_T of each step.
    maint_hourly : array-like, shape (..., day, hour) [d-1]
        Maintenance loss rate of each step.
    mu_max, model, param, k_biomass, k_background, depth_m
        As in :func:`pondsim.pond.kinetics.specific_growth_self_shading`; ``k_biomass``,
        ``k_background`` and ``depth_m`` must not vary within a day (give a member axis
        as shape ``(member, 1, 1)``).

    Returns
    -------
    ndarray, shape (..., day) [d-1]
        :math:`\frac{1}{n}\sum_h [\mu_{max} f_{T,h} \langle f_I\rangle_h(X) - m_h]`
        over the n steps of the day.
    """
    balance = _DailyBalance(par_hourly, temp_factor_hourly, maint_hourly, mu_max=mu_max,
                            model=model, param=param, k_biomass=k_biomass,
                            k_background=k_background, depth_m=depth_m)
    x = np.broadcast_to(np.asarray(x, dtype=float), balance.shape).reshape(-1)
    g = balance(x) / balance.n_steps
    return np.where(balance.nan, np.nan, g).reshape(balance.shape)


def daily_carrying_capacity(par_hourly, temp_factor_hourly, maint_hourly, *, mu_max, model,
                            param, k_biomass, k_background, depth_m, x_max=5000.0,
                            nutrient_limit=None, rtol=1e-6):
    r"""Light-limited carrying capacity of each day.

    Parameters
    ----------
    par_hourly : array-like, shape (..., day, hour) [µmol m-2 s-1]
        PAR entering the culture. Leading axes (e.g. member) broadcast.
    temp_factor_hourly : array-like, shape (..., day, hour) [1]
        Temperature factor f_T of each step (e.g. :func:`pondsim.pond.kinetics.ctmi`).
    maint_hourly : array-like, shape (..., day, hour) [d-1]
        Maintenance loss rate of each step (e.g.
        :func:`pondsim.pond.kinetics.maintenance_rate`), acting day and night.
    mu_max : array-like [d-1]
        Maximum specific growth rate.
    model : str or callable
        Light-response model (see :func:`pondsim.pond.kinetics.light_response`).
    param : array-like [µmol m-2 s-1]
        The model's light parameter (numeric).
    k_biomass : array-like [m2 g-1]
        Biomass-specific extinction; constant within a day.
    k_background : array-like [m-1]
        Background extinction; constant within a day.
    depth_m : array-like [m]
        Culture depth; constant within a day.
    x_max : float, default 5000.0 [g m-3]
        Upper end of the search; returned when net growth is still positive there
        (e.g. without maintenance loss).
    nutrient_limit : array-like [g m-3], optional
        Cap on K set by the nutrient supply (elementwise minimum).
    rtol : float, default 1e-6
        Relative tolerance on K.

    Returns
    -------
    ndarray, shape (..., day) [g m-3]
        Carrying capacity K in [0, x_max]; NaN on a day whose forcing has NaN.

    Notes
    -----
    K is the density at which the day's integrated net growth is zero,

    .. math:: G(X) = \sum_h \left[\mu_{max} f_{T,h}
              \langle f_I\rangle(I_{0,h}, k(X), \mathrm{depth}) - m_h\right] = 0,
              \qquad k(X) = k_{biomass} X + k_{background} .

    *Shape of G.* With optical depth :math:`\tau = k\,\mathrm{depth}` and
    :math:`g(s) = f(I_0 e^{-s})`, :math:`d\langle f\rangle/d\tau = (g(\tau) -
    \langle f\rangle)/\tau`. For a non-decreasing response (Monod, Jassby–Platt) the
    bottom light is the dimmest, so :math:`g(\tau) \le \langle f\rangle` and G
    decreases monotonically in X: the root is unique. Under Steele's photoinhibition
    shading first relieves the over-lit top layer, so each hour's
    :math:`\langle f\rangle` rises and then falls with X (it is unimodal: once
    :math:`g(\tau)` falls below the mean it stays below). K is therefore defined as the
    *largest* density at which G changes sign from positive to negative, the stable
    equilibrium: a culture just below it grows, just above it declines.

    *Upper bound.* Since :math:`g \ge 0`, :math:`\int_0^\tau g\,ds \le
    \int_0^\infty g\,ds`, so :math:`G(X) \le S/\tau(X) - M` with
    :math:`S = \sum_h \mu_{max} f_{T,h} \int_0^\infty g_h\,ds` (closed forms
    :math:`e(1 - e^{-I_0/I_{opt}})` for Steele and :math:`\ln(1 + I_0/K_I)` for Monod)
    and :math:`M = \sum_h m_h`. Hence K ≤ X at which :math:`\tau = S/M`, and this
    bound is nearly exact in dense cultures.

    *Where G decreases.* For a non-decreasing response, everywhere. For Steele, beyond
    the optical depth :math:`\tau_p` at which the brightest hour's average peaks
    (``_steele_peak_tau``; every dimmer hour peaks earlier), so on
    :math:`[\max(\tau_p, \tau_{clear}), \tau_{bound}]` the root is unique. If G is
    not positive at that lower end, any growth lies at lower densities: those days are
    probed at fixed optical depths (8 per decade) from the top down, and K is the
    largest sign change found (a positive window narrower than one probe step, a factor
    1.33, would be missed). A callable response is searched from X = 0 like a
    saturating one, with the same probe when a thin culture does not grow; if its G
    has several sign changes above a growing thin culture, the root found need not be
    the largest.

    *Ends.* K = 0 when G ≤ 0 at every density: a day too cold or too dark to grow (the
    bound shows it at once) or one whose losses exceed growth at every shading.
    K = ``x_max`` when G > 0 at ``x_max`` (e.g. no maintenance loss).

    *Method.* Newton's method in :math:`1/\tau` (in which G is nearly linear for dense
    cultures) from the upper bound, inside a bracket [lower, upper] with
    G(lower) > 0 ≥ G(upper); a step that leaves the bracket is replaced by regula falsi
    in :math:`1/\tau`, then by bisection. Only unconverged days are re-evaluated;
    typically 3-7 evaluations of G in all. For a year of hourly forcing and 100
    parameter sets this takes ~0.3 s with the closed-form responses and ~2 s with
    Jassby–Platt quadrature (2-core test machine).
    """
    x_max = float(x_max)
    if not x_max > 0:
        raise InputError(f"x_max must be positive, got {x_max}", field="x_max")
    bal = _DailyBalance(par_hourly, temp_factor_hourly, maint_hourly, mu_max=mu_max,
                        model=model, param=param, k_biomass=k_biomass,
                        k_background=k_background, depth_m=depth_m)
    n = bal.nan.size
    k = np.zeros(n)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        tau_bound = bal.column_integral() / bal.loss  # inf without maintenance
        x_bound = (tau_bound - bal.tau_clear) / bal.dtau_dx
    x_bound = np.where(np.isnan(x_bound), 0.0, x_bound)
    candidate = (x_bound > 0) & ~bal.nan
    hi = np.minimum(x_bound, x_max)
    g_hi = np.full(n, -1.0)
    lo = np.zeros(n)
    g_lo = np.zeros(n)

    # G at the top of the range where the bound does not settle the sign there.
    top = np.flatnonzero(candidate & (x_bound >= x_max))
    if top.size:
        g_top = bal.take(top)(np.full(top.size, x_max))
        k[top[g_top > 0]] = x_max
        candidate[top[g_top > 0]] = False
        g_hi[top] = g_top

    # Below the bound, find a density above which G is known to decrease.
    rows = np.flatnonzero(candidate)
    stuck = rows[:0]
    if rows.size:
        sub = bal.take(rows)
        tau_dec = sub.decreasing_from()
        unknown = tau_dec is None
        if unknown:  # a callable: start from X = 0, probe below the bound if needed
            tau_dec = sub.tau_clear
            tau_top = sub.tau(hi[rows])
        else:
            tau_top = np.minimum(tau_dec, sub.tau(hi[rows]))
        x_dec = np.clip((tau_dec - sub.tau_clear) / sub.dtau_dx, 0.0, hi[rows])
        g_dec = sub(x_dec)
        grows = g_dec > 0
        lo[rows], g_lo[rows] = x_dec, g_dec
        candidate[rows[~grows]] = False
        # Not growing where G must decrease: any growth lies at lower densities, which
        # exist only when that point is above the clear-water optical depth.
        may_grow = ~grows & (tau_top > sub.tau_clear)
        g_top = g_hi[rows] if unknown else g_dec
        stuck, stuck_top, stuck_g = rows[may_grow], tau_top[may_grow], g_top[may_grow]
    if stuck.size:
        found = _probe(bal.take(stuck), stuck_top, stuck_g, lo, hi, g_lo, g_hi, stuck)
        candidate[stuck[found]] = True

    rows = np.flatnonzero(candidate)
    if rows.size:
        k[rows] = _polish(bal.take(rows), lo[rows], hi[rows], g_lo[rows], g_hi[rows], rtol)
    k = np.where(bal.nan, np.nan, k).reshape(bal.shape)
    if nutrient_limit is not None:
        k = np.minimum(k, np.asarray(nutrient_limit, dtype=float))
    return k


def _probe(sub, tau_top, g_top, lo, hi, g_lo, g_hi, rows):
    """Largest sign change of G below optical depth ``tau_top`` (where G <= 0).

    Probes the fixed optical depths :data:`_PROBE_TAU` between the clear-water value
    and ``tau_top`` from the top down, then X = 0. Writes the bracket of each row found
    into ``lo, hi, g_lo, g_hi`` at ``rows`` and returns which rows were found.
    """
    n = rows.size
    found = np.zeros(n, dtype=bool)
    above_tau, above_g = tau_top.copy(), g_top.copy()
    for tau_j in list(_PROBE_TAU[::-1]) + [None]:
        tau_at = sub.tau_clear if tau_j is None else np.full(n, tau_j)
        todo = np.flatnonzero(~found & (tau_at < above_tau)
                              & ((tau_at > sub.tau_clear) if tau_j is not None else True))
        if todo.size == 0:
            continue
        part = sub.take(todo)
        x_j = (tau_at[todo] - part.tau_clear) / part.dtau_dx
        g_j = part(x_j)
        new = g_j > 0
        hit = rows[todo[new]]
        lo[hit], g_lo[hit] = x_j[new], g_j[new]
        hi[hit] = (above_tau[todo[new]] - part.tau_clear[new]) / part.dtau_dx[new]
        g_hi[hit] = above_g[todo[new]]
        found[todo[new]] = True
        keep = todo[~new]
        above_tau[keep], above_g[keep] = tau_at[keep], g_j[~new]
    return found


def _polish(bal, lo, hi, g_lo, g_hi, rtol):
    """Safeguarded Newton in v = 1/tau on a bracket [lo, hi] with G(lo) > 0 >= G(hi).

    Starts from the upper end. A Newton step that leaves the bracket is replaced by the
    regula-falsi point in v, and that by bisection in tau if it too fails. Returns the
    root [g m-3] for every row of ``bal``.
    """
    x = hi.copy()
    lo, hi, g_lo, g_hi = lo.copy(), hi.copy(), g_lo.copy(), g_hi.copy()
    out = np.empty_like(x)
    active = np.arange(x.size)
    sub = bal
    for _ in range(_MAX_ITER):
        if active.size == 0:
            break
        if sub.nan.size != active.size:  # only unconverged rows are re-evaluated
            sub = bal.take(active)
        xa, la, ha = x[active], lo[active], hi[active]
        gla, gha = g_lo[active], g_hi[active]
        g, dg_dtau = sub(xa, slope=True)
        below = g > 0
        la, gla = np.where(below, xa, la), np.where(below, g, gla)
        ha, gha = np.where(below, ha, xa), np.where(below, gha, g)
        tau, tau_lo, tau_hi = sub.tau(xa), sub.tau(la), sub.tau(ha)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            # Newton in v: dG/dv = -tau^2 dG/dtau.
            v = 1.0 / tau + g / (tau * tau * dg_dtau)
            ok = np.isfinite(v) & (v <= 1.0 / tau_lo) & (v >= 1.0 / tau_hi)
            # Regula falsi in v between the bracket ends.
            v_rf = (gla / tau_hi - gha / tau_lo) / (gla - gha)
            ok_rf = np.isfinite(v_rf) & (v_rf <= 1.0 / tau_lo) & (v_rf >= 1.0 / tau_hi)
            # Bisection: geometric in tau when it is away from 0.
            tau_mid = np.where(tau_lo > 0, np.sqrt(tau_lo * tau_hi), 0.5 * (tau_lo + tau_hi))
            tau_new = np.where(ok, 1.0 / v, np.where(ok_rf, 1.0 / v_rf, tau_mid))
        x_new = np.clip((tau_new - sub.tau_clear) / sub.dtau_dx, la, ha)
        done = ((np.abs(x_new - xa) <= 0.5 * rtol * x_new) | (ha - la <= rtol * ha)
                | (g == 0))
        x_new = np.where(g == 0, xa, x_new)
        x[active], lo[active], hi[active] = x_new, la, ha
        g_lo[active], g_hi[active] = gla, gha
        out[active[done]] = x_new[done]
        active = active[~done]
    out[active] = x[active]
    return out


def trailing_mean(k_daily, window_days=3):
    """Trailing ``window_days`` mean along the last axis (fewer days at the start) [unit of
    the input]; used to draw a smoothed K beside the density."""
    k = np.asarray(k_daily, dtype=float)
    w = int(window_days)
    c = np.cumsum(np.concatenate([np.zeros(k.shape[:-1] + (1,)), k], axis=-1), axis=-1)
    idx = np.arange(k.shape[-1])
    start = np.maximum(idx + 1 - w, 0)
    return (c[..., idx + 1] - c[..., start]) / (idx + 1 - start)


def k_drop_index(k_daily, window_days=3, *, k_floor=1.0):
    r"""Fall of ln K over a trailing window.

    Parameters
    ----------
    k_daily : array-like, shape (..., day) [g m-3]
        Carrying capacity per day.
    window_days : int, default 3 [d]
        Look-back window w.
    k_floor : float, default 1.0 [g m-3]
        K is floored at this value before the logarithm, so a day with K = 0 (too
        cold or dark to grow) gives a large finite drop, ln(K_before / k_floor), rather
        than infinity. NaN in ``k_daily`` propagates.

    Returns
    -------
    ndarray, shape (..., day) [1]
        :math:`D(t) = \ln K(t - w) - \ln K(t)`: positive when K falls, negative when it
        rises. For the first w days the record is taken as flat before its start
        (K(t - w) := K(0)).
    """
    window_days = int(window_days)
    if window_days < 1:
        raise InputError(f"window_days must be at least 1, got {window_days}",
                         field="window_days")
    ln_k = np.log(np.maximum(np.asarray(k_daily, dtype=float), k_floor))
    n = ln_k.shape[-1]
    w = min(window_days, n)
    first = np.repeat(ln_k[..., :1], w, axis=-1)
    past = np.concatenate((first, ln_k[..., : n - w]), axis=-1)
    return past - ln_k


def monthly_k_table(dates, k_by_month):
    r"""Daily carrying capacity from a table of twelve monthly values.

    Parameters
    ----------
    dates : array-like of dates
        Days to evaluate (``pandas.DatetimeIndex``, ``datetime64`` array, or anything
        ``pandas.DatetimeIndex`` accepts). A time zone is dropped: dates are local.
    k_by_month : array-like, shape (..., 12) [g m-3]
        K for January ... December; leading axes (e.g. member) broadcast.

    Returns
    -------
    ndarray, shape (..., n_dates) [g m-3]
        K per day.

    Notes
    -----
    Each month's value is placed on the 15th of that month and K is interpolated
    linearly in days between consecutive anchors (28-31 days apart, so leap years are
    handled by the calendar), periodically across the year end (15 December to
    15 January). Anchoring every month on the 15th rather than at its exact midpoint is
    common practice for monthly climatologies and makes the table value exact on that
    day.
    """
    table = np.asarray(k_by_month, dtype=float)
    if table.ndim < 1 or table.shape[-1] != 12:
        raise InputError(f"the monthly K table needs 12 values, got shape {table.shape}",
                         field="capacity_table_g_m3")
    if np.any(~np.isfinite(table)) or np.any(table < 0):
        raise InputError("monthly K values must be finite and non-negative [g m-3]",
                         field="capacity_table_g_m3")
    index = pd.DatetimeIndex(dates)
    if index.tz is not None:
        index = index.tz_localize(None)
    day = index.to_numpy().astype("datetime64[D]")
    month_start = day.astype("datetime64[M]")
    anchor = month_start.astype("datetime64[D]") + np.timedelta64(14, "D")
    after = day >= anchor
    left_month = np.where(after, month_start, month_start - np.timedelta64(1, "M"))
    right_month = left_month + np.timedelta64(1, "M")
    left = left_month.astype("datetime64[D]") + np.timedelta64(14, "D")
    right = right_month.astype("datetime64[D]") + np.timedelta64(14, "D")
    frac = (day - left).astype(float) / (right - left).astype(float)
    i_left = left_month.astype(int) % 12  # months since 1970-01 -> 0 = January
    i_right = right_month.astype(int) % 12
    return table[..., i_left] * (1.0 - frac) + table[..., i_right] * frac
