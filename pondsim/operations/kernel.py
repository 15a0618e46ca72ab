"""The compiled integrator: the day and hour loop of :mod:`pondsim.operations.engine`,
one member at a time, in machine code (numba).

STATUS: NOT YET PORTED to the engine semantics merged on 2026-12-02 (named-cause crash
hazard with separate salvage booking, viable-density floor, per-member inoculation,
logistic gross capacity K_g). This kernel implements the engine as it was before them
(commit c821a97 of branch issue-19). Until :data:`PORTED` is True, :func:`supports` is
False and ``engine="compiled"`` runs the numpy engine; the equivalence tests in
``tests/test_kernel.py`` are skipped. To port: bring :func:`crash_hazard` /
:func:`crash_outcome` / :func:`harvest_share` and the logistic branch of
:func:`_gross_rate` up to ``operations.crash``, ``operations.harvest.cut_back_to_floor``
and ``engine.logistic_inverse_capacity``, add the new daily outputs (salvaged, cause,
at_floor), set PORTED = True and make the tests pass.

Same model, same order of events and same random streams as the numpy engine, which stays
the reference (``engine="numpy"``); ``tests/test_kernel.py`` runs every engine and crash
test case through both and compares them. Where the two differ, and why:

* the numpy engine takes the state-dependent ``exp(-tau)`` of the self-shading light mean
  in single precision (relative error ~6e-8, see
  :func:`pondsim.operations.engine._transmission`); this kernel takes it in double
  precision with ``expm1`` (no cancellation, so no series is needed). Daily densities and
  annual harvests therefore agree to ~1e-6 relative, not to the last bit; the logistic
  form agrees to rounding (~1e-12).
* crash draws are the numpy engine's draws (the same ``PCG64(seed)`` table of
  :meth:`pondsim.operations.crash.CrashModel.streams`, row ``stream_of_member[j]``), so a
  member crashes on the same day in both unless its uniform draw lies within ~1e-7 of
  ``1 - exp(-h)`` (probability ~1e-7 per member-day).

Layout: the loop is over members outside (``numba.prange``: members are independent, and
both cores share them), then days, then hours, so that one member's state stays in
registers and its daily outputs are written in place. The pieces that a model change is
most likely to touch are small jitted functions of their own: :func:`harvest_share` (the
harvest rule of :func:`pondsim.operations.harvest.removal_fraction`),
:func:`crash_hazard` (:meth:`pondsim.operations.crash.CrashModel.hazard`) and
:func:`crash_outcome` (loss and salvage of a crash). Each has a test against its numpy
counterpart on random inputs.

Compiled functions are cached on disk (``cache=True``): the first call in a fresh checkout
compiles for a few seconds, later processes load the machine code.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from pondsim.operations.engine import (
    HOURS_PER_DAY,
    STATUS_GROWING,
    STATUS_NOT_STARTED,
    STATUS_RESTARTING,
    STEP_D,
    Daily,
    Drivers,
    Operation,
    check_closure,
)
from pondsim.operations.harvest import HarvestRules
from pondsim.pond import kinetics

#: Light-response models with a compiled depth mean (self-shading form); other models
#: and callables run on the numpy engine.
COMPILED_LIGHT = {"steele": 0, "monod": 1}
_FORM_SELF_SHADING, _FORM_LOGISTIC = 0, 1
_LEDGER = ("inoculated", "grown", "respired", "removed", "lost")
_JIT = dict(cache=True, error_model="numpy")


#: Whether this kernel implements the numpy engine's current semantics (see the module
#: docstring). False: every call runs on the numpy engine.
PORTED = False


def supports(drivers: Drivers) -> bool:
    """Whether the compiled kernel covers this engine version, growth form and light
    model."""
    if not PORTED:
        return False
    if drivers.growth_form == "logistic":
        return True
    return drivers.growth_form == "self_shading" and isinstance(drivers.light_model, str) \
        and drivers.light_model in COMPILED_LIGHT


# --------------------------------------------------------------------------------------
# Small pieces (ports of one numpy function each)
# --------------------------------------------------------------------------------------
@njit(**_JIT)
def harvest_share(code, fraction, every, trigger, residual, x, since, min_density,
                  max_fraction):
    """Share of the volume harvested and whether the schedule fell due, for one member.

    Scalar port of :func:`pondsim.operations.harvest.removal_fraction` (codes of
    :data:`pondsim.operations.harvest.RULE_CODES`). Returns ``(fraction [-], scheduled)``.
    """
    due = since >= every
    to_residual = 1.0 - residual / x if x > residual else 0.0
    down = fraction if math.isnan(residual) else to_residual
    if code == 1:
        frac = fraction if due else 0.0
    elif code == 2:
        frac = to_residual if x >= trigger else 0.0
    elif code == 3:
        frac = down if due else 0.0
    else:
        frac = 0.0
    if not x >= min_density or math.isnan(frac):
        frac = 0.0
    frac = min(max(frac, 0.0), max_fraction)
    return frac, due and (code == 1 or code == 3)


@njit(**_JIT)
def crash_hazard(x, k_smooth, drop, base, stress, onset, scale):
    """Daily crash hazard [d-1] of one member: scalar port of
    :meth:`pondsim.operations.crash.CrashModel.hazard`."""
    s_over = max(x / max(k_smooth, 1.0) - onset, 0.0) / (1.0 - onset)
    s_drop = max(drop, 0.0) / scale
    return base - stress * math.expm1(-s_over * s_drop)


@njit(**_JIT)
def crash_outcome(x, loss_fraction):
    """``(lost, salvaged)`` [g m-3] when a culture of density *x* crashes: the lost share
    is gone, the rest is harvested (the numpy engine's crash step)."""
    lost = x * loss_fraction
    return lost, x - lost


@njit(inline="always", **_JIT)
def _absorbed(tau):
    """1 - exp(-tau) [-]: ``exp`` where it keeps its digits, its series below 0.05
    (truncation < 3e-11 relative; ``expm1`` costs twice an ``exp`` here)."""
    if tau > 0.05:
        return 1.0 - math.exp(-tau)
    return tau * (1.0 - tau * (0.5 - tau * (1 / 6 - tau * (1 / 24 - tau / 120))))


@njit(inline="always", **_JIT)
def _gross_rate(form, light, x, mu_t, a, exp_a, i0, param, tau_s, tau_z, r, inv_k):
    """Specific gross growth rate [d-1] at density *x* within one hour."""
    if form == _FORM_LOGISTIC:
        return r * (1.0 - x * inv_k)
    tau = max(tau_s * x + tau_z, 1e-12)
    absorbed = _absorbed(tau)
    if light == 0:  # Steele (1962) depth mean: (e/tau) exp(-a) expm1(a (1 - e^-tau))
        b = a * absorbed
        if b > 0.05:
            grow = math.exp(b) - 1.0
        else:
            grow = b * (1.0 + b * (0.5 + b * (1 / 6 + b * (1 / 24 + b / 120))))
        return mu_t * (math.e * exp_a * grow / tau)
    # Monod depth mean: ln[1 + I0 (1 - e^-tau)/(K + I0 e^-tau)] / tau
    y = i0 * absorbed / (param + i0 * (1.0 - absorbed))
    return mu_t * ((math.log(1.0 + y) if y > 0.05 else math.log1p(y)) / tau)


@njit(inline="always", **_JIT)
def _exp_near_zero(d):
    """exp(d) for |d| <= 0.1 by its Taylor series to d^8 (truncation < 3e-15 relative)."""
    return 1.0 + d * (1.0 + d * (0.5 + d * (1 / 6 + d * (1 / 24 + d * (
        1 / 120 + d * (1 / 720 + d * (1 / 5040 + d / 40320)))))))


@njit(inline="always", **_JIT)
def _steele_first(x, a, tau_s, tau_z):
    """Steele depth-mean factor (e/tau) expm1(a (1 - e^-tau)) at the first Runge–Kutta
    stage, with what the later stages of the hour reuse: ``(factor, tau, e^-tau, b, e^b)``.
    """
    tau = max(tau_s * x + tau_z, 1e-12)
    absorbed = _absorbed(tau)
    b = a * absorbed
    if b > 0.05:
        e_b = math.exp(b)
        grow = e_b - 1.0
    else:
        grow = b * (1.0 + b * (0.5 + b * (1 / 6 + b * (1 / 24 + b / 120))))
        e_b = 1.0 + grow
    return math.e * grow / tau, tau, 1.0 - absorbed, b, e_b


@njit(inline="always", **_JIT)
def _steele_next(x, a, tau_s, tau_z, tau1, e1, b1, e_b1):
    """The same factor at a later stage of the hour. The state moves little within an
    hour, so exp(-tau) = e^-tau1 exp(-(tau - tau1)) and exp(b) = e^b1 exp(b - b1) come
    from short series instead of two more exponentials (same value to ~1e-15)."""
    tau = max(tau_s * x + tau_z, 1e-12)
    d = tau - tau1
    if tau > 0.05 and tau1 > 0.05 and abs(d) < 0.1:
        absorbed = 1.0 - e1 * _exp_near_zero(-d)
    else:
        absorbed = _absorbed(tau)
    b = a * absorbed
    if b > 0.05 and b1 > 0.05 and abs(b - b1) < 0.1:
        grow = e_b1 * _exp_near_zero(b - b1) - 1.0
    elif b > 0.05:
        grow = math.exp(b) - 1.0
    else:
        grow = b * (1.0 + b * (0.5 + b * (1 / 6 + b * (1 / 24 + b / 120))))
    return math.e * grow / tau


#: Members advanced together through each hour by one thread: their steps are
#: independent, so the processor overlaps them (one member alone waits on each
#: exponential in turn).
BLOCK = 32


@njit(parallel=True, **_JIT)
def _run(par, ftemp, maint, cap, rtab, mu, param, tau_s, tau_z, form, light, dark,
         set_of, code, fraction, every, trigger, residual, period_of_day,
         op_int, op_float, crash_on, k_smooth, k_fall, table, stream_of, crash_par,
         o_density, o_removed, o_frac, o_growth, o_lost, o_crashed, o_hazard, o_status,
         o_sampled, o_grown, o_respired, ledger):
    n = set_of.shape[0]
    n_days = o_density.shape[1]
    start_day, restart_days, harvest_hour, sample_hour = op_int[0], op_int[1], op_int[2], \
        op_int[3]
    inoculum, max_fraction, min_density = op_float[0], op_float[1], op_float[2]
    per_member_period = period_of_day.shape[0] > 1
    steele = form == _FORM_SELF_SHADING and light == 0
    h6 = STEP_D / 6.0
    n_blocks = (n + BLOCK - 1) // BLOCK
    for blk in prange(n_blocks):
        lo = blk * BLOCK
        nb = min(n, lo + BLOCK) - lo
        x = np.zeros(nb)
        status = np.full(nb, STATUS_NOT_STARTED, dtype=np.int64)
        restart_on = np.full(nb, -1, dtype=np.int64)
        since = np.zeros(nb, dtype=np.int64)
        rate_sum = np.zeros(nb)
        inv_k = np.zeros(nb)
        tot = np.zeros((nb, 5))  # inoculated, grown, respired, removed, lost
        grown_before = np.zeros(nb)
        respired_before = np.zeros(nb)
        for day in range(n_days):
            for b in range(nb):
                if (status[b] == STATUS_NOT_STARTED and day >= start_day) or \
                        (status[b] == STATUS_RESTARTING and restart_on[b] <= day):
                    x[b] = inoculum
                    tot[b, 0] += inoculum
                    status[b] = STATUS_GROWING
                    since[b] = 0
                if form == _FORM_LOGISTIC:
                    k_day = cap[set_of[lo + b], day]
                    inv_k[b] = 1.0 / max(k_day, 1e-300) if k_day > 0 else np.inf
                rate_sum[b] = 0.0
            for hod in range(HOURS_PER_DAY):
                hour = day * HOURS_PER_DAY + hod
                if hod == harvest_hour:
                    for b in range(nb):
                        j = lo + b
                        p = period_of_day[j if per_member_period else 0, day]
                        frac, scheduled = harvest_share(
                            code[j, p], fraction[j, p], every[j, p], trigger[j, p],
                            residual[j, p], x[b], since[b], min_density, max_fraction)
                        if status[b] != STATUS_GROWING:
                            frac = 0.0
                        taken = frac * x[b]
                        x[b] = x[b] - taken
                        tot[b, 3] += taken
                        o_removed[j, day] = taken
                        o_frac[j, day] = frac
                        if scheduled:
                            since[b] = 0
                if hod == sample_hour:
                    for b in range(nb):
                        o_sampled[lo + b, day] = x[b]
                if dark[hour]:
                    for b in range(nb):
                        m = maint[set_of[lo + b], hour]
                        x_new = x[b] * math.exp(-m * STEP_D)
                        tot[b, 2] += x[b] - x_new
                        rate_sum[b] -= m
                        x[b] = x_new
                    continue
                for b in range(nb):
                    s = set_of[lo + b]
                    m = maint[s, hour]
                    i0 = par[s, hour]
                    mu_t = mu[s] * ftemp[s, hour]
                    a = i0 / param[s]
                    exp_a = math.exp(-a)
                    r = rtab[s, hour] if form == _FORM_LOGISTIC else 0.0
                    xb = x[b]
                    if steele:
                        scale = mu_t * exp_a
                        ts, tz = tau_s[s], tau_z[s]
                        f1, tau1, e1, b1, e_b1 = _steele_first(xb, a, ts, tz)
                        g1 = scale * f1
                        x2 = xb + (0.5 * STEP_D) * ((g1 - m) * xb)
                        g2 = scale * _steele_next(x2, a, ts, tz, tau1, e1, b1, e_b1)
                        x3 = xb + (0.5 * STEP_D) * ((g2 - m) * x2)
                        g3 = scale * _steele_next(x3, a, ts, tz, tau1, e1, b1, e_b1)
                        x4 = xb + STEP_D * ((g3 - m) * x3)
                        g4 = scale * _steele_next(x4, a, ts, tz, tau1, e1, b1, e_b1)
                    else:
                        g1 = _gross_rate(form, light, xb, mu_t, a, exp_a, i0, param[s],
                                         tau_s[s], tau_z[s], r, inv_k[b])
                        x2 = xb + (0.5 * STEP_D) * ((g1 - m) * xb)
                        g2 = _gross_rate(form, light, x2, mu_t, a, exp_a, i0, param[s],
                                         tau_s[s], tau_z[s], r, inv_k[b])
                        x3 = xb + (0.5 * STEP_D) * ((g2 - m) * x2)
                        g3 = _gross_rate(form, light, x3, mu_t, a, exp_a, i0, param[s],
                                         tau_s[s], tau_z[s], r, inv_k[b])
                        x4 = xb + STEP_D * ((g3 - m) * x3)
                        g4 = _gross_rate(form, light, x4, mu_t, a, exp_a, i0, param[s],
                                         tau_s[s], tau_z[s], r, inv_k[b])
                    grown = h6 * (g1 * xb + 2.0 * (g2 * x2 + g3 * x3) + g4 * x4)
                    resp = (h6 * m) * (xb + 2.0 * (x2 + x3) + x4)
                    rate_sum[b] += g1 - m
                    x[b] = xb + grown - resp
                    tot[b, 1] += grown
                    tot[b, 2] += resp
            for b in range(nb):
                j = lo + b
                s = set_of[j]
                growing = status[b] == STATUS_GROWING
                o_growth[j, day] = rate_sum[b] / HOURS_PER_DAY if growing else 0.0
                # daily terms from the running ledger totals, as the numpy engine books them
                o_grown[j, day] = tot[b, 1] - grown_before[b]
                o_respired[j, day] = tot[b, 2] - respired_before[b]
                grown_before[b] = tot[b, 1]
                respired_before[b] = tot[b, 2]
                since[b] += 1
                if crash_on:
                    h = 0.0
                    if growing:
                        h = crash_hazard(x[b], k_smooth[s, day], k_fall[s, day],
                                         crash_par[0], crash_par[1], crash_par[2],
                                         crash_par[3])
                    o_hazard[j, day] = h
                    if growing and table[stream_of[j], day] < -math.expm1(-h):
                        lost, salvage = crash_outcome(x[b], crash_par[4])
                        tot[b, 4] += lost
                        tot[b, 3] += salvage
                        o_lost[j, day] = lost
                        o_removed[j, day] += salvage
                        o_crashed[j, day] = True
                        x[b] = 0.0
                        status[b] = STATUS_RESTARTING
                        restart_on[b] = day + 1 + restart_days
                o_density[j, day] = x[b]
                o_status[j, day] = status[b]
        for b in range(nb):
            for k in range(5):
                ledger[lo + b, k] = tot[b, k]
            ledger[lo + b, 5] = x[b]


# --------------------------------------------------------------------------------------
# Python entry
# --------------------------------------------------------------------------------------
def _per_member(a: np.ndarray, n: int) -> np.ndarray:
    """An (n, s) rule table, broadcast to n rows without copying when it has one row."""
    a = np.asarray(a)
    return np.broadcast_to(a, (n, a.shape[1])) if a.shape[0] == 1 else a


def integrate_compiled(drivers: Drivers, rules: HarvestRules, operation: Operation, *,
                       set_of_member=None, crash=None, stream_of_member=None,
                       seed: int | None = None, progress=None, check_ledger: bool = True,
                       chunk: int = 8192) -> Daily:
    """Compiled twin of :func:`pondsim.operations.engine.integrate` (same arguments and
    result; see the module docstring for how the two differ).

    Members run in chunks of *chunk* (both cores share each chunk); ``progress`` is
    called with the number of days' worth of work done after each chunk.
    """
    if not supports(drivers):
        raise ValueError(f"the compiled engine has no depth mean for light model "
                         f"{drivers.light_model!r}; use engine='numpy'")
    n, n_days, f = rules.n_members, drivers.n_days, drivers.n_sets
    if set_of_member is None:
        if f != 1:
            raise ValueError("several driver sets need set_of_member")
        set_of_member = np.zeros(n, dtype=np.intp)
    set_of_member = np.ascontiguousarray(set_of_member, dtype=np.intp)
    if set_of_member.shape != (n,):
        raise ValueError("set_of_member must give one driver set per member")
    op = operation
    f64 = np.float64
    par = np.ascontiguousarray(drivers.par, f64)
    logistic = drivers.growth_form == "logistic"
    rtab = np.ascontiguousarray(kinetics.specific_growth_logistic_r(
        par, drivers.temp_factor, mu_max=np.asarray(drivers.mu_max)[:, None],
        model=drivers.light_model, param=np.asarray(drivers.light_param)[:, None]),
        f64) if logistic else np.zeros((1, 1))
    dark = ~(par > 0).any(axis=0)
    stream = np.arange(n, dtype=np.intp) if stream_of_member is None else \
        np.ascontiguousarray(stream_of_member, dtype=np.intp)
    if crash is not None:
        smooth = crash.smoothed(drivers.capacity)
        k_smooth = np.ascontiguousarray(smooth, f64)
        k_fall = np.ascontiguousarray(crash.drop_index(smooth), f64)
        n_streams = int(stream.max()) + 1 if n else 0
        table = crash.streams(seed, np.arange(n_streams))  # row i = stream i's draws
        crash_par = np.array([crash.base_hazard_per_d, crash.stress_hazard_per_d,
                              crash.overshoot_onset, crash.drop_scale, crash.loss_fraction])
    else:
        k_smooth = k_fall = table = np.zeros((1, 1))
        crash_par = np.zeros(5)
    out = Daily(
        density=np.zeros((n, n_days)), removed=np.zeros((n, n_days)),
        harvest_fraction=np.zeros((n, n_days)), growth_rate=np.zeros((n, n_days)),
        lost=np.zeros((n, n_days)), crashed=np.zeros((n, n_days), dtype=bool),
        hazard=np.zeros((n, n_days), dtype=np.float32),
        status=np.zeros((n, n_days), dtype=np.int8), ledger={},
        sampled=None if op.sample_hour is None else np.zeros((n, n_days)),
        grown=np.zeros((n, n_days)), respired=np.zeros((n, n_days)),
    )
    sampled = out.sampled if out.sampled is not None else np.zeros((n, 1))
    ledger = np.zeros((n, 6))
    op_int = np.array([op.start_day, op.restart_days, op.harvest_hour,
                       -1 if op.sample_hour is None else op.sample_hour], dtype=np.int64)
    op_float = np.array([op.inoculum_g_m3, op.max_fraction, op.min_density_g_m3])
    tables = [_per_member(t, n) for t in (rules.code, rules.fraction, rules.every_days,
                                          rules.trigger, rules.residual)]
    code, fraction, every, trigger, residual = \
        tables[0].astype(np.int64), tables[1].astype(f64), tables[2].astype(np.int64), \
        tables[3].astype(f64), tables[4].astype(f64)
    period = np.asarray(rules.period_of_day, dtype=np.int64)
    common = (np.ascontiguousarray(drivers.temp_factor, f64),
              np.ascontiguousarray(drivers.maintenance, f64),
              np.ascontiguousarray(drivers.capacity, f64), rtab,
              np.asarray(drivers.mu_max, f64), np.asarray(drivers.light_param, f64),
              np.asarray(drivers.k_biomass, f64) * drivers.depth_m,
              np.asarray(drivers.k_background, f64) * drivers.depth_m,
              _FORM_LOGISTIC if logistic else _FORM_SELF_SHADING,
              COMPILED_LIGHT.get(drivers.light_model, 0) if not logistic else 0, dark)
    for lo in range(0, n, max(int(chunk), 1)):
        hi = min(n, lo + max(int(chunk), 1))
        rows = slice(lo, hi)
        _run(par, *common, set_of_member[rows],
             np.ascontiguousarray(code[rows]), np.ascontiguousarray(fraction[rows]),
             np.ascontiguousarray(every[rows]), np.ascontiguousarray(trigger[rows]),
             np.ascontiguousarray(residual[rows]),
             period[rows] if period.shape[0] > 1 else period,
             op_int, op_float, crash is not None, k_smooth, k_fall, table, stream[rows],
             crash_par, out.density[rows], out.removed[rows], out.harvest_fraction[rows],
             out.growth_rate[rows], out.lost[rows], out.crashed[rows], out.hazard[rows],
             out.status[rows], sampled[rows], out.grown[rows], out.respired[rows],
             ledger[rows])
        if progress is not None:
            progress(int(round(n_days * hi / n)))
    out.ledger.update({k: ledger[:, i].copy() for i, k in enumerate(_LEDGER)})
    out.ledger["final"] = ledger[:, 5].copy()
    if check_ledger:
        check_closure(out.ledger)
    return out
