"""The compiled integrator: the day and hour loop of :mod:`pondsim.operations.engine`,
one member at a time, in machine code (numba).

Same model, same order of events, same daily outputs and the same random streams as the
numpy engine, which stays the reference (``engine="numpy"``): the harvest rule and its
viable-density floor at the harvest hour (:func:`harvest_share`, :func:`floor_share`),
one Runge–Kutta step per lit hour and the exact decay of dark hours, the crash hazard of
named causes at the end of the day (:func:`cause_of_crash`), salvage booked apart from
harvest, and the ledger. ``tests/test_kernel.py`` runs every engine and crash test case
through both engines and compares them. Where the two differ, and why:

* the numpy engine takes the state-dependent ``exp(-tau)`` of the self-shading light mean
  in single precision (relative error ~6e-8, see
  :func:`pondsim.operations.engine._transmission`); this kernel takes it in double
  precision. Daily densities and annual harvests therefore agree to ~1e-6 relative, not
  to the last bit; the logistic form agrees to rounding (~1e-12).
* the weather terms of the crash hazard (background with its Q10, heat, cold shock) are
  computed once per driver set and day by the numpy functions of
  :mod:`pondsim.operations.crash` and passed in, so they are the same numbers; only the
  starvation term (the member's own recent net loss) is computed here, from the daily
  growth rates the kernel has written, in the same order of summation.
* crash draws are the numpy engine's draws (the same ``PCG64(seed)`` table of
  :meth:`pondsim.operations.crash.CrashModel.streams`, row ``stream_of_member[j]``), so a
  member crashes on the same day, of the same cause, in both unless its uniform draw lies
  within ~1e-6 relative of ``1 - exp(-h)`` or of a cause boundary (the starvation hazard
  inherits the growth rate's ~1e-6 difference).

Layout: members are cut into blocks of :data:`BLOCK`; the blocks are shared by the cores
(``numba.prange``: members are independent, and each member's random draws come from its
own stream, so the result does not depend on the number of threads or the chunking).
Within a block the loop runs over days, then hours, then the block's members, whose
independent steps the processor overlaps. Per-hour quantities that do not depend on the
state (µmax·f_T, I0/Iopt, exp(−I0/Iopt), the logistic r) are tabulated per driver set in
numpy first.

Compiled functions are cached on disk (``cache=True``): the first call in a fresh checkout
compiles for a few seconds, later processes load the machine code.
"""

from __future__ import annotations

import math
import types

import numba
import numpy as np
from numba import njit, prange

from pondsim.operations.crash import STARVATION_LOSS_REF_PER_D
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
    crash_stress,
    logistic_inverse_capacity,
)
from pondsim.operations.harvest import HarvestRules
from pondsim.pond import kinetics

#: Light-response models with a compiled depth mean (self-shading form); other models
#: and callables run on the numpy engine.
COMPILED_LIGHT = {"steele": 0, "monod": 1}
_FORM_SELF_SHADING, _FORM_LOGISTIC = 0, 1
_LEDGER = ("inoculated", "grown", "respired", "removed", "salvaged", "lost")


def _probe():  # pragma: no cover - only compiled
    return 0


def _disk_cache_possible() -> bool:
    """Whether numba can keep this module's machine code on disk (beside this file, or in
    the user's cache folder); a read-only install without either compiles once per
    process instead of failing at import."""
    try:
        njit(cache=True)(_probe)
    except RuntimeError:  # numba: "cannot cache function ...: no locator available"
        return False
    return True


_JIT = dict(cache=_disk_cache_possible(), error_model="numpy")

#: Whether this kernel implements the numpy engine's current semantics. False: every
#: call runs on the numpy engine (kept as a switch for the next change of the engine).
PORTED = True


def supports(drivers: Drivers) -> bool:
    """Whether the compiled kernel covers this engine version, growth form and light
    model."""
    if not PORTED:
        return False
    if drivers.growth_form == "logistic":
        return isinstance(drivers.light_model, str)
    if drivers.growth_form != "self_shading" or not isinstance(drivers.light_model, str) \
            or drivers.light_model not in COMPILED_LIGHT:
        return False
    if drivers.light_model == "steele":  # the light ratio within exp_poly's range
        ratio = np.asarray(drivers.par) / np.asarray(drivers.light_param)[:, None]
        return bool(np.all(ratio <= EXP_POLY_MAX))
    return True


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
def floor_share(frac, x, floor):
    """``(fraction, at_floor)``: scalar port of
    :func:`pondsim.operations.harvest.cut_back_to_floor` (floor [g m-3], 0: none)."""
    if floor <= 0.0:
        return frac, False
    allowed = 1.0 - floor / x if x > floor else 0.0
    at_floor = (x < floor * (1.0 - 1e-9)) or (frac > allowed + 1e-12)
    return min(frac, allowed), at_floor


@njit(**_JIT)
def cause_of_crash(u, h_bg, h_starve, h_heat, h_cold):
    """``(hazard [d-1], cause)`` of one member-day: scalar port of
    :func:`pondsim.operations.crash.assign_cause` for the four causes of
    :data:`pondsim.operations.crash.CAUSES` (cause 0: no crash, else 1 + index)."""
    total = h_bg + h_starve + h_heat + h_cold
    p = -math.expm1(-total)
    if not u < p:  # no crash (u >= 0, so a crash needs p > 0, hence total > 0)
        return total, 0
    v = u / p  # uniform on [0, 1) given the crash: picks the cause by cumulative shares
    cum = h_bg
    cause = 1 + (v >= cum / total)
    cum += h_starve
    cause += v >= cum / total
    cum += h_heat
    cause += v >= cum / total
    return total, cause


@njit(**_JIT)
def crash_outcome(x, loss_fraction):
    """``(lost, salvaged)`` [g m-3] when a culture of density *x* crashes: the lost share
    is gone, the rest is salvage (booked apart from harvest)."""
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
def _monod_factor(x, i0, param, tau_s, tau_z):
    """Monod depth mean ln[1 + I0 (1 - e^-tau)/(K + I0 e^-tau)] / tau [-]."""
    tau = max(tau_s * x + tau_z, 1e-12)
    absorbed = _absorbed(tau)
    y = i0 * absorbed / (param + i0 * (1.0 - absorbed))
    return (math.log(1.0 + y) if y > 0.05 else math.log1p(y)) / tau


#: Largest |argument| of :func:`exp_poly` (the light ratio I0/Iopt of a driver set must
#: stay below it for the compiled Steele mean; ratios of ~10 are usual).
EXP_POLY_MAX = 80.0


@njit(inline="always", **_JIT)
def _taylor9(y):
    """Taylor polynomial of exp at 0 to degree 9 (truncation < 2.4e-12 for |y| <= 5/16)."""
    return 1.0 + y * (1.0 + y * (0.5 + y * (1 / 6 + y * (1 / 24 + y * (1 / 120 + y * (
        1 / 720 + y * (1 / 5040 + y * (1 / 40320 + y * (1 / 362880)))))))))


@njit(inline="always", **_JIT)
def exp_poly(x):
    """exp(x) for |x| <= :data:`EXP_POLY_MAX` without a library call, so that a loop of
    them runs in the processor's vector lanes: exp(x) = p(x/256)^(2^8), p the Taylor
    polynomial of degree 9 (the eight squarings multiply its truncation and rounding by
    256: relative error below 1e-9, measured 8e-10; the numpy engine takes this
    exponential in single precision, 6e-8)."""
    p = _taylor9(x * (1.0 / 256.0))
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    return p * p


@njit(inline="always", **_JIT)
def exp_poly_40(x):
    """exp(x) for |x| <= 40, as :func:`exp_poly` with seven squarings (error below 5e-10,
    measured 4e-10)."""
    p = _taylor9(x * (1.0 / 128.0))
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    p = p * p
    return p * p


@njit(inline="always", **_JIT)
def steele_factor(x, a, tau_s, tau_z):
    """Steele's (1962) depth mean over mu_max f_T exp(-a), (e/tau) expm1(a (1 - e^-tau))
    [-], at density *x* [g m-3] with a = I0/Iopt and tau = tau_s x + tau_z; branch-free
    (series below 0.05 chosen by selects) so that the members of a block vectorise.
    Beyond tau = 40, e^-tau < 5e-18 is below double precision next to 1 and is left out.
    """
    tau = max(tau_s * x + tau_z, 1e-12)
    absorbed = 1.0 - exp_poly_40(-min(tau, 40.0))
    small = tau * (1.0 - tau * (0.5 - tau * (1 / 6 - tau * (1 / 24 - tau / 120))))
    absorbed = small if tau < 0.05 else absorbed
    b = a * absorbed
    grow = exp_poly(b) - 1.0
    series = b * (1.0 + b * (0.5 + b * (1 / 6 + b * (1 / 24 + b / 120))))
    grow = series if b < 0.05 else grow
    return math.e * grow / tau


@njit(inline="always", **_JIT)
def _rk_terms(g1, m, xb, x2, x3, x4, g2, g3, g4):
    """Gross growth and respiration [g m-3] of one member's Runge–Kutta hour (the numpy
    engine's weights)."""
    h6 = STEP_D / 6.0
    return (h6 * (g1 * xb + 2.0 * (g2 * x2 + g3 * x3) + g4 * x4),
            (h6 * m) * (xb + 2.0 * (x2 + x3) + x4))


@njit(fastmath={"contract"}, **_JIT)
def _lit_hour(steele, x, scale, a, m, tau_s, tau_z, inv_k, rate_sum, g_tot, r_tot, work):
    """One lit hour of a block of members (classical RK4, forcing held over the hour), the
    Steele self-shading form or the logistic form, written without branches so that the
    members run in the vector lanes. ``scale`` is µmax·f_T·exp(−a) (Steele) or the
    logistic r [d-1]."""
    half = 0.5 * STEP_D
    if steele:
        # one loop per Runge-Kutta stage: short loop bodies let the processor overlap
        # the long dependency chains of several members (work rows: g1 x2 g2 x3 g3 x4)
        for b in range(x.shape[0]):
            xb = x[b]
            g = scale[b] * steele_factor(xb, a[b], tau_s[b], tau_z[b])
            work[0, b] = g
            work[1, b] = xb + half * ((g - m[b]) * xb)
        for b in range(x.shape[0]):
            xs = work[1, b]
            g = scale[b] * steele_factor(xs, a[b], tau_s[b], tau_z[b])
            work[2, b] = g
            work[3, b] = x[b] + half * ((g - m[b]) * xs)
        for b in range(x.shape[0]):
            xs = work[3, b]
            g = scale[b] * steele_factor(xs, a[b], tau_s[b], tau_z[b])
            work[4, b] = g
            work[5, b] = x[b] + STEP_D * ((g - m[b]) * xs)
        for b in range(x.shape[0]):
            xb, mm, g1, x4 = x[b], m[b], work[0, b], work[5, b]
            g4 = scale[b] * steele_factor(x4, a[b], tau_s[b], tau_z[b])
            # (written out here: array writes in an inlined helper stop vectorisation)
            grown, resp = _rk_terms(g1, mm, xb, work[1, b], work[3, b], x4, work[2, b],
                                    work[4, b], g4)
            rate_sum[b] += g1 - mm
            x[b] = xb + grown - resp
            # a negative gross step (logistic die-back above capacity) is respired
            g_tot[b] += max(grown, 0.0)
            r_tot[b] += resp + max(-grown, 0.0)
    else:
        for b in range(x.shape[0]):
            xb, r, mm, ik = x[b], scale[b], m[b], inv_k[b]
            g1 = r * (1.0 - xb * ik)
            x2 = xb + half * ((g1 - mm) * xb)
            g2 = r * (1.0 - x2 * ik)
            x3 = xb + half * ((g2 - mm) * x2)
            g3 = r * (1.0 - x3 * ik)
            x4 = xb + STEP_D * ((g3 - mm) * x3)
            g4 = r * (1.0 - x4 * ik)
            # (written out here: array writes in an inlined helper stop vectorisation)
            grown, resp = _rk_terms(g1, mm, xb, x2, x3, x4, g2, g3, g4)
            rate_sum[b] += g1 - mm
            x[b] = xb + grown - resp
            # a negative gross step (logistic die-back above capacity) is respired
            g_tot[b] += max(grown, 0.0)
            r_tot[b] += resp + max(-grown, 0.0)


@njit(**_JIT)
def _lit_hour_monod(x, scale, i0, m, tau_s, tau_z, k_i, rate_sum, g_tot, r_tot):
    """One lit hour of a block of members, Monod self-shading form (``scale`` µmax·f_T)."""
    half = 0.5 * STEP_D
    for b in range(x.shape[0]):
        xb, sc, ii, kk, mm, ts, tz = x[b], scale[b], i0[b], k_i[b], m[b], tau_s[b], tau_z[b]
        g1 = sc * _monod_factor(xb, ii, kk, ts, tz)
        x2 = xb + half * ((g1 - mm) * xb)
        g2 = sc * _monod_factor(x2, ii, kk, ts, tz)
        x3 = xb + half * ((g2 - mm) * x2)
        g3 = sc * _monod_factor(x3, ii, kk, ts, tz)
        x4 = xb + STEP_D * ((g3 - mm) * x3)
        g4 = sc * _monod_factor(x4, ii, kk, ts, tz)
        grown, resp = _rk_terms(g1, mm, xb, x2, x3, x4, g2, g3, g4)
        rate_sum[b] += g1 - mm
        x[b] = xb + grown - resp
        g_tot[b] += grown
        r_tot[b] += resp


#: Members advanced together through each hour by one thread: their steps are
#: independent, so the processor overlaps them (one member alone waits on each
#: exponential in turn).
BLOCK = 64


def _run_py(hour_a, hour_scale, par, maint, decay, inv_k, param, tau_s, tau_z, form, light, dark,
         set_of, start_day, inoculum, code, fraction, every, trigger, residual,
         period_of_day, op_int, op_float, crash_on, w_hazard, crash_par, window, table,
         stream_of, o_density, o_removed, o_frac, o_growth, o_lost, o_salvaged, o_crashed,
         o_cause, o_hazard, o_status, o_sampled, o_at_floor, o_grown, o_respired, ledger):
    n = set_of.shape[0]
    n_days = o_density.shape[1]
    restart_days, harvest_hour, sample_hour = op_int[0], op_int[1], op_int[2]
    max_fraction, min_density, floor = op_float[0], op_float[1], op_float[2]
    c_starve, loss_fraction = crash_par[0], crash_par[1]
    per_member_period = period_of_day.shape[0] > 1
    steele = form == _FORM_SELF_SHADING and light == 0
    n_blocks = (n + BLOCK - 1) // BLOCK
    for blk in prange(n_blocks):
        lo = blk * BLOCK
        nb = min(n, lo + BLOCK) - lo
        x = np.zeros(nb)
        status = np.full(nb, STATUS_NOT_STARTED, dtype=np.int64)
        restart_on = np.full(nb, -1, dtype=np.int64)
        since = np.zeros(nb, dtype=np.int64)
        age = np.zeros(nb, dtype=np.int64)
        rate_sum = np.zeros(nb)
        # inoculated, removed, salvaged, lost (grown and respired apart: the hour loop's)
        tot = np.zeros((nb, 6))
        g_tot = np.zeros(nb)
        r_tot = np.zeros(nb)
        sb = set_of[lo:lo + nb]
        tsb, tzb, kb = np.empty(nb), np.empty(nb), np.empty(nb)
        for b in range(nb):
            tsb[b], tzb[b], kb[b] = tau_s[sb[b]], tau_z[sb[b]], param[sb[b]]
        mb, scb, ab, ikb = np.empty(nb), np.empty(nb), np.empty(nb), np.zeros(nb)
        work = np.empty((6, nb))
        grown_before = np.zeros(nb)
        respired_before = np.zeros(nb)
        for day in range(n_days):
            for b in range(nb):
                j = lo + b
                if (status[b] == STATUS_NOT_STARTED and day >= start_day[j]) or \
                        (status[b] == STATUS_RESTARTING and restart_on[b] <= day):
                    x[b] = inoculum[j]
                    tot[b, 0] += inoculum[j]
                    status[b] = STATUS_GROWING
                    since[b] = 0
                    age[b] = 0
                rate_sum[b] = 0.0
                if form == _FORM_LOGISTIC:
                    ikb[b] = inv_k[sb[b], day]
            for hod in range(HOURS_PER_DAY):
                hour = day * HOURS_PER_DAY + hod
                if hod == harvest_hour:
                    for b in range(nb):
                        j = lo + b
                        p = period_of_day[j if per_member_period else 0, day]
                        frac, scheduled = harvest_share(
                            code[j, p], fraction[j, p], every[j, p], trigger[j, p],
                            residual[j, p], x[b], since[b], min_density, max_fraction)
                        frac, at_floor = floor_share(frac, x[b], floor)
                        if status[b] != STATUS_GROWING:
                            frac = 0.0
                            at_floor = False
                        o_at_floor[j, day] = at_floor
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
                if dark[hour]:  # exact decay, X exp(-m h), factors tabulated per set-hour
                    for b in range(nb):
                        s = sb[b]
                        x_new = x[b] * decay[s, hour]
                        r_tot[b] += x[b] - x_new
                        rate_sum[b] -= maint[s, hour]
                        x[b] = x_new
                    continue
                for b in range(nb):  # this hour's factors of each member's driver set
                    s = sb[b]
                    mb[b] = maint[s, hour]
                    scb[b] = hour_scale[s, hour]
                    ab[b] = hour_a[s, hour] if steele else par[s, hour]
                if steele or form == _FORM_LOGISTIC:
                    _lit_hour(steele, x, scb, ab, mb, tsb, tzb, ikb, rate_sum, g_tot, r_tot,
                              work)
                else:
                    _lit_hour_monod(x, scb, ab, mb, tsb, tzb, kb, rate_sum, g_tot, r_tot)
            for b in range(nb):
                j = lo + b
                s = set_of[j]
                growing = status[b] == STATUS_GROWING
                o_growth[j, day] = rate_sum[b] / HOURS_PER_DAY if growing else 0.0
                # daily terms from the running ledger totals, as the numpy engine books them
                o_grown[j, day] = g_tot[b] - grown_before[b]
                o_respired[j, day] = r_tot[b] - respired_before[b]
                grown_before[b] = g_tot[b]
                respired_before[b] = r_tot[b]
                since[b] += 1
                if crash_on and growing:
                    # starvation: mean net rate over the last min(w, age + 1) days
                    first = max(day - window + 1, day - age[b], 0)
                    acc = 0.0
                    for d in range(first, day + 1):
                        acc += o_growth[j, d]
                    loss = max(-(acc / min(age[b] + 1, window)), 0.0)
                    h, cause = cause_of_crash(
                        table[stream_of[j], day], w_hazard[0, s, day],
                        c_starve * loss / STARVATION_LOSS_REF_PER_D,
                        w_hazard[1, s, day], w_hazard[2, s, day])
                    o_hazard[j, day] = h
                    if cause > 0:
                        lost, salvage = crash_outcome(x[b], loss_fraction)
                        tot[b, 5] += lost
                        tot[b, 4] += salvage
                        o_lost[j, day] = lost
                        o_salvaged[j, day] = salvage
                        o_crashed[j, day] = True
                        o_cause[j, day] = cause
                        x[b] = 0.0
                        status[b] = STATUS_RESTARTING
                        restart_on[b] = day + 1 + restart_days
                age[b] += 1
                o_density[j, day] = x[b]
                o_status[j, day] = status[b]
        for b in range(nb):
            for k in range(6):
                ledger[lo + b, k] = tot[b, k]
            ledger[lo + b, 1] = g_tot[b]
            ledger[lo + b, 2] = r_tot[b]
            ledger[lo + b, 6] = x[b]


#: The loop over blocks shared by the cores (dynamically: one block at a time, so a core
#: slowed by other work does not hold the other back), and the same loop on one core for
#: ensembles of one block (no thread start-up).
def _named(fn, name: str):
    """*fn* under another name: numba's on-disk cache is keyed by the function's name and
    signature, not by ``parallel``, so the two builds below need names of their own."""
    code = fn.__code__.replace(co_name=name, co_qualname=name)
    twin = types.FunctionType(code, fn.__globals__, name, fn.__defaults__, fn.__closure__)
    twin.__qualname__ = name
    return twin


_run = njit(parallel=True, **_JIT)(_named(_run_py, "_run_parallel"))
_run_serial = njit(**_JIT)(_named(_run_py, "_run_serial"))


# --------------------------------------------------------------------------------------
# Python entry
# --------------------------------------------------------------------------------------
def _per_member(a, n: int, dtype) -> np.ndarray:
    """A scalar or (n,) array as a contiguous, writable (n,) array (a read-only array
    would be a second machine-code version of the kernel)."""
    return np.array(np.broadcast_to(np.asarray(a, dtype=dtype), (n,)))


def hour_tables(drivers: Drivers):
    """Per driver set and hour, what the kernel's inner loop needs that does not depend
    on the state: ``(a, scale, inv_k)``.

    a = I0/Iopt [-]; scale [d-1] = µmax·f_T·exp(−a) (Steele), µmax·f_T (Monod), or the
    logistic r of the hour, 0 on days without growth (logistic); inv_k [m3 g-1] (f, n_days)
    = 1/K_g of the logistic form (:func:`pondsim.operations.engine.logistic_inverse_capacity`
    of the day means of r and m, as the numpy engine takes them).
    """
    f64 = np.float64
    par = np.asarray(drivers.par, f64)
    mu = np.asarray(drivers.mu_max, f64)[:, None]
    param = np.asarray(drivers.light_param, f64)[:, None]
    mu_t = mu * np.asarray(drivers.temp_factor, f64)
    n_days = drivers.n_days
    if drivers.growth_form == "logistic":
        r = np.asarray(kinetics.specific_growth_logistic_r(
            par, drivers.temp_factor, mu_max=mu, model=drivers.light_model, param=param), f64)
        r = np.broadcast_to(r, par.shape)
        per_day = (drivers.n_sets, n_days, HOURS_PER_DAY)
        r3 = r[:, :n_days * HOURS_PER_DAY].reshape(per_day)
        m3 = np.asarray(drivers.maintenance, f64)[:, :n_days * HOURS_PER_DAY].reshape(per_day)
        r_sum, m_sum = r3[..., 0].copy(), m3[..., 0].copy()
        for h in range(1, HOURS_PER_DAY):  # hour by hour, the numpy engine's order
            r_sum += r3[..., h]
            m_sum += m3[..., h]
        grows, inv_k = logistic_inverse_capacity(drivers.capacity, r_sum / HOURS_PER_DAY,
                                                 m_sum / HOURS_PER_DAY)
        scale = np.where(np.repeat(grows, HOURS_PER_DAY, axis=1), r, 0.0)
        return np.zeros((1, 1)), np.ascontiguousarray(scale, f64), \
            np.ascontiguousarray(inv_k, f64)
    a = par / param
    scale = mu_t * np.exp(-a) if drivers.light_model == "steele" else mu_t
    return np.ascontiguousarray(a), np.ascontiguousarray(scale, f64), np.zeros((1, 1))


def integrate_compiled(drivers: Drivers, rules: HarvestRules, operation: Operation, *,
                       set_of_member=None, crash=None, stream_of_member=None,
                       seed: int | None = None, progress=None, check_ledger: bool = True,
                       chunk: int = 8192) -> Daily:
    """Compiled twin of :func:`pondsim.operations.engine.integrate` (same arguments and
    result; see the module docstring for how the two differ).

    Members run in chunks of *chunk* (both cores share each chunk); ``progress`` is
    called with the number of days' worth of work done after each chunk. The result does
    not depend on *chunk* or on the number of threads.
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
    hour_a, hour_scale, inv_k = hour_tables(drivers)
    dark = ~(par > 0).any(axis=0)
    stream = np.arange(n, dtype=np.intp) if stream_of_member is None else \
        np.ascontiguousarray(stream_of_member, dtype=np.intp)
    if crash is not None:
        stress = crash_stress(crash, drivers)
        parts = crash.cause_hazards(stress.temp_mean_c, stress.heat_hours,
                                    stress.cold_shock_k, 0.0)
        # background, heat, cold per set and day (starvation is the member's own)
        w_hazard = np.ascontiguousarray(parts[[0, 2, 3]], f64)
        n_streams = int(stream.max()) + 1 if n else 0
        table = crash.streams(seed, np.arange(n_streams))  # row i = stream i's draws
        crash_par = np.array([crash.starvation_hazard_per_d, crash.loss_fraction])
        window = int(crash.window_days)
    else:
        w_hazard, table, crash_par, window = np.zeros((3, 1, 1)), np.zeros((1, 1)), \
            np.zeros(2), 1
    out = Daily(
        density=np.zeros((n, n_days)), removed=np.zeros((n, n_days)),
        harvest_fraction=np.zeros((n, n_days)), growth_rate=np.zeros((n, n_days)),
        lost=np.zeros((n, n_days)), crashed=np.zeros((n, n_days), dtype=bool),
        hazard=np.zeros((n, n_days), dtype=np.float32),
        status=np.zeros((n, n_days), dtype=np.int8), ledger={},
        sampled=None if op.sample_hour is None else np.zeros((n, n_days)),
        at_floor=np.zeros((n, n_days), dtype=bool),
        salvaged=np.zeros((n, n_days)), cause=np.zeros((n, n_days), dtype=np.int8),
        grown=np.zeros((n, n_days)), respired=np.zeros((n, n_days)),
    )
    sampled = out.sampled if out.sampled is not None else np.zeros((n, 1))
    ledger = np.zeros((n, 7))
    op_int = np.array([op.restart_days, op.harvest_hour,
                       -1 if op.sample_hour is None else op.sample_hour], dtype=np.int64)
    op_float = np.array([op.max_fraction, op.min_density_g_m3, op.floor_g_m3], f64)
    start_day = _per_member(op.start_day, n, np.int64)
    inoculum = _per_member(op.inoculum_g_m3, n, f64)

    def rows_of(t, dtype):  # contiguous rows (one machine-code version of the kernel)
        t = np.asarray(t, dtype)
        return (lambda r: np.repeat(t, r.stop - r.start, axis=0)) \
            if t.shape[0] == 1 else (lambda r: np.ascontiguousarray(t[r]))

    tables = [rows_of(t, d) for t, d in ((rules.code, np.int64), (rules.fraction, f64),
                                         (rules.every_days, np.int64),
                                         (rules.trigger, f64), (rules.residual, f64))]
    period = np.asarray(rules.period_of_day, dtype=np.int64)
    maint = np.ascontiguousarray(drivers.maintenance, f64)
    common = (hour_a, hour_scale, par, maint, np.exp(-maint * STEP_D), inv_k,
              np.asarray(drivers.light_param, f64),
              np.asarray(drivers.k_biomass, f64) * drivers.depth_m,
              np.asarray(drivers.k_background, f64) * drivers.depth_m,
              _FORM_LOGISTIC if logistic else _FORM_SELF_SHADING,
              COMPILED_LIGHT.get(drivers.light_model, 0) if not logistic else 0, dark)
    step = max(int(chunk), 1)
    run = _run if n > BLOCK else _run_serial
    for lo in range(0, n, step):
        rows = slice(lo, min(n, lo + step))
        with numba.parallel_chunksize(1):
            run(*common, set_of_member[rows], start_day[rows], inoculum[rows],
                 *(t(rows) for t in tables),
                 period[rows] if period.shape[0] > 1 else period,
                 op_int, op_float, crash is not None, w_hazard, crash_par, window, table,
                 stream[rows], out.density[rows], out.removed[rows], out.harvest_fraction[rows],
                 out.growth_rate[rows], out.lost[rows], out.salvaged[rows], out.crashed[rows],
                 out.cause[rows], out.hazard[rows], out.status[rows], sampled[rows],
                 out.at_floor[rows], out.grown[rows], out.respired[rows], ledger[rows])
        if progress is not None:
            progress(int(round(n_days * rows.stop / n)))
    out.ledger.update({k: ledger[:, i].copy() for i, k in enumerate(_LEDGER)})
    out.ledger["final"] = ledger[:, 6].copy()
    if check_ledger:
        check_closure(out.ledger)
    return out
