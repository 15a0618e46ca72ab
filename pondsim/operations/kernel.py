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
_JIT = dict(cache=True, error_model="numpy")

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
def _run(hour_a, hour_scale, par, maint, inv_k, param, tau_s, tau_z, form, light, dark,
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
    monod = form == _FORM_SELF_SHADING and light == 1
    h6 = STEP_D / 6.0
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
        # inoculated, grown, respired, removed, salvaged, lost (the order of _LEDGER)
        tot = np.zeros((nb, 6))
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
                    scale = hour_scale[s, hour]
                    xb = x[b]
                    ts, tz = tau_s[s], tau_z[s]
                    if steele:
                        a = hour_a[s, hour]
                        f1, tau1, e1, b1, e_b1 = _steele_first(xb, a, ts, tz)
                        g1 = scale * f1
                        x2 = xb + (0.5 * STEP_D) * ((g1 - m) * xb)
                        g2 = scale * _steele_next(x2, a, ts, tz, tau1, e1, b1, e_b1)
                        x3 = xb + (0.5 * STEP_D) * ((g2 - m) * x2)
                        g3 = scale * _steele_next(x3, a, ts, tz, tau1, e1, b1, e_b1)
                        x4 = xb + STEP_D * ((g3 - m) * x3)
                        g4 = scale * _steele_next(x4, a, ts, tz, tau1, e1, b1, e_b1)
                    elif monod:
                        i0, k_i = par[s, hour], param[s]
                        g1 = scale * _monod_factor(xb, i0, k_i, ts, tz)
                        x2 = xb + (0.5 * STEP_D) * ((g1 - m) * xb)
                        g2 = scale * _monod_factor(x2, i0, k_i, ts, tz)
                        x3 = xb + (0.5 * STEP_D) * ((g2 - m) * x2)
                        g3 = scale * _monod_factor(x3, i0, k_i, ts, tz)
                        x4 = xb + STEP_D * ((g3 - m) * x3)
                        g4 = scale * _monod_factor(x4, i0, k_i, ts, tz)
                    else:  # logistic: r (1 - X/K_g), scale = r of the hour
                        ik = inv_k[s, day]
                        g1 = scale * (1.0 - xb * ik)
                        x2 = xb + (0.5 * STEP_D) * ((g1 - m) * xb)
                        g2 = scale * (1.0 - x2 * ik)
                        x3 = xb + (0.5 * STEP_D) * ((g2 - m) * x2)
                        g3 = scale * (1.0 - x3 * ik)
                        x4 = xb + STEP_D * ((g3 - m) * x3)
                        g4 = scale * (1.0 - x4 * ik)
                    grown = h6 * (g1 * xb + 2.0 * (g2 * x2 + g3 * x3) + g4 * x4)
                    resp = (h6 * m) * (xb + 2.0 * (x2 + x3) + x4)
                    rate_sum[b] += g1 - m
                    x[b] = xb + grown - resp
                    # a negative gross step (logistic die-back) is booked as respired
                    if grown >= 0.0:
                        tot[b, 1] += grown
                        tot[b, 2] += resp
                    else:
                        tot[b, 2] += resp - grown
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
            ledger[lo + b, 6] = x[b]


# --------------------------------------------------------------------------------------
# Python entry
# --------------------------------------------------------------------------------------
def _per_member(a, n: int, dtype) -> np.ndarray:
    """A scalar or (n,) array as a contiguous (n,) array."""
    return np.ascontiguousarray(np.broadcast_to(np.asarray(a, dtype=dtype), (n,)))


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

    def rows_of(t, dtype):
        t = np.asarray(t, dtype)
        return (lambda r: np.broadcast_to(t, (r.stop - r.start, t.shape[1]))) \
            if t.shape[0] == 1 else (lambda r: np.ascontiguousarray(t[r]))

    tables = [rows_of(t, d) for t, d in ((rules.code, np.int64), (rules.fraction, f64),
                                         (rules.every_days, np.int64),
                                         (rules.trigger, f64), (rules.residual, f64))]
    period = np.asarray(rules.period_of_day, dtype=np.int64)
    common = (hour_a, hour_scale, par, np.ascontiguousarray(drivers.maintenance, f64),
              inv_k, np.asarray(drivers.light_param, f64),
              np.asarray(drivers.k_biomass, f64) * drivers.depth_m,
              np.asarray(drivers.k_background, f64) * drivers.depth_m,
              _FORM_LOGISTIC if logistic else _FORM_SELF_SHADING,
              COMPILED_LIGHT.get(drivers.light_model, 0) if not logistic else 0, dark)
    step = max(int(chunk), 1)
    for lo in range(0, n, step):
        rows = slice(lo, min(n, lo + step))
        _run(*common, set_of_member[rows], start_day[rows], inoculum[rows],
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
