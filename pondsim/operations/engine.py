"""The integrator: culture density of every member, hour by hour, in one vectorised pass.

State is an array with a leading member axis. Members point at a *driver set*: the hourly
light, temperature factor and maintenance rate and the daily carrying capacity of one
(weather year, parameter draw). Driver sets are computed once and shared by every policy
candidate and crash member that uses them.

Time stepping (rates apart from state updates, as in PCSE): each hour is one classical
fourth-order Runge–Kutta step of the growth equation with that hour's forcing held
constant (the forcing is an hour mean). Dark hours have an exact solution,
X(t + h) = X(t)·exp(−m·h), and take it. Harvests happen at a fixed hour of the day,
before that hour's growth step; crash draws happen at the end of the day.

Every gram is booked: per member, inoculated + grown − respired − removed − salvaged −
lost equals the final standing stock, to rounding. :func:`integrate` raises if it does
not. "Respired" includes die-back (a negative gross growth of the logistic form above its
capacity). "Removed" is what the harvest rules send to harvest; what a crash leaves
(salvaged) is booked apart, so a run without harvests removes nothing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pondsim.operations.crash import WeatherStress, net_loss_today
from pondsim.operations.harvest import HarvestRules, cut_back_to_floor, removal_fraction
from pondsim.pond import kinetics

HOURS_PER_DAY = 24
STEP_D = 1.0 / HOURS_PER_DAY  # one hour [d]

STATUS_GROWING, STATUS_RESTARTING, STATUS_NOT_STARTED = 0, 1, 2
ENGINES = ("numpy", "compiled")


class LedgerError(RuntimeError):
    """The biomass ledger of a run does not close."""


@dataclass(frozen=True)
class Drivers:
    """Growth drivers for ``f`` driver sets over ``n_hours`` hours.

    Attributes
    ----------
    par : ndarray, shape (f, n_hours) [umol m-2 s-1]
        PAR entering the culture.
    temp_factor : ndarray, shape (f, n_hours) [-]
        Cardinal temperature factor of the water temperature.
    maintenance : ndarray, shape (f, n_hours) [d-1]
        Maintenance/respiration rate.
    capacity : ndarray, shape (f, n_days) [g m-3]
        Carrying capacity K of each day (used by the logistic form, and for crash risk).
    mu_max, light_param, k_biomass, k_background : ndarray, shape (f,)
        [d-1], [umol m-2 s-1], [m2 g-1], [m-1].
    light_model : str
        Name in :data:`pondsim.pond.kinetics.LIGHT_RESPONSES`.
    growth_form : {"self_shading", "logistic"}
    depth_m : float [m]
    water_temperature : ndarray, shape (f, n_hours), optional [degC]
        Hour-mean water temperature, for the weather terms of the crash hazard (without
        it the crash hazard sees a constant water temperature at the background's
        reference and no heat or cold stress).
    t_max_c : ndarray, shape (f,), optional [degC]
        Strain's maximum temperature for growth (heat stress of the crash hazard).
    """

    par: np.ndarray
    temp_factor: np.ndarray
    maintenance: np.ndarray
    capacity: np.ndarray
    mu_max: np.ndarray
    light_param: np.ndarray
    k_biomass: np.ndarray
    k_background: np.ndarray
    light_model: str
    growth_form: str
    depth_m: float
    water_temperature: np.ndarray | None = None
    t_max_c: np.ndarray | None = None

    @property
    def n_sets(self) -> int:
        return self.par.shape[0]

    @property
    def n_hours(self) -> int:
        return self.par.shape[1]

    @property
    def n_days(self) -> int:
        return self.n_hours // HOURS_PER_DAY


@dataclass(frozen=True)
class Operation:
    """How the ponds are run (all members share it).

    Attributes
    ----------
    start_day : int or ndarray of int (n,)
        Day of the year (0-based) on which ponds are inoculated (one per member allowed).
    inoculum_g_m3 : float or ndarray (n,) [g m-3]
    restart_days : int [d]
        Days out of service after a crash before reinoculation.
    harvest_hour : int [h]
        Local hour of the harvest decision.
    recovery_efficiency : float [-]
        Share of removed biomass recovered as product.
    max_fraction : float [-]
        Daily harvest capacity as a share of pond volume.
    min_density_g_m3 : float [g m-3]
        Below this density nothing is harvested.
    floor_g_m3 : float [g m-3]
        Viable-density floor: no harvest leaves the culture below it (0: none; the
        scenario's default is the inoculation density, see
        :func:`pondsim.operations.simulate.operation_of`).
    sample_hour : int, optional [h]
        Also record the density at the start of this local hour each day (after that
        hour's harvest), as a pilot pond's daily sample would see it.
    """

    start_day: int | np.ndarray = 0
    inoculum_g_m3: float | np.ndarray = 50.0
    restart_days: int = 7
    harvest_hour: int = 9
    recovery_efficiency: float = 1.0
    max_fraction: float = 1.0
    min_density_g_m3: float = 0.0
    sample_hour: int | None = None
    floor_g_m3: float = 0.0


@dataclass
class Daily:
    """Daily outputs of :func:`integrate` (arrays of shape (n_members, n_days)).

    density [g m-3] at the end of the day; removed [g m-3] culture biomass sent to harvest
    by the harvest rules (before recovery losses); harvest_fraction [-] of the volume;
    growth_rate [d-1] mean net specific rate; lost [g m-3] biomass lost to crashes;
    salvaged [g m-3] the rest of a crashed culture (not harvest); crashed (bool); cause
    (int8: 0 none, else 1 + index in :data:`pondsim.operations.crash.CAUSES`); hazard
    [d-1] crash hazard at the end of the day; status (0 growing, 1 restarting after a
    crash, 2 not yet inoculated); sampled [g m-3] density at ``Operation.sample_hour``
    (None unless asked); at_floor (bool) the culture was at its viable floor at the
    harvest hour (see :func:`pondsim.operations.harvest.cut_back_to_floor`). ``ledger``
    holds the per-member totals [g m-3]: inoculated, grown, respired, removed, salvaged, lost,
    final; ``grown`` and ``respired`` [g m-3]
    are the same two terms per day (gross growth and maintenance respiration, with any
    die-back, of the day, as booked in the ledger).
    """

    density: np.ndarray
    removed: np.ndarray
    harvest_fraction: np.ndarray
    growth_rate: np.ndarray
    lost: np.ndarray
    crashed: np.ndarray
    hazard: np.ndarray
    status: np.ndarray
    ledger: dict
    sampled: np.ndarray | None = None
    at_floor: np.ndarray | None = None
    salvaged: np.ndarray | None = None
    cause: np.ndarray | None = None
    grown: np.ndarray | None = None
    respired: np.ndarray | None = None


def _member_view(a: np.ndarray, set_of_member: np.ndarray | None):
    """Per-step slicer for an (f, ...) array: scalar rows when there is one set."""
    if set_of_member is None:
        return lambda col: a[0, col]
    return lambda col: a[set_of_member, col]


def _transmission(tau):
    """(e^-tau in single precision, 1 - e^-tau accurate in double precision).

    The state-dependent exponential is taken in single precision (4x faster here,
    relative error ~6e-8); where tau is small its complement would lose digits, so
    1 - e^-tau comes from its series there (truncation < 3e-11 relative below 0.05).
    """
    e_tau = np.exp((-tau).astype(np.float32))
    absorbed = 1.0 - e_tau
    small = tau < 0.05
    if small.any():
        t = tau[small]
        absorbed[small] = t * (1.0 - t * (0.5 - t * (1 / 6 - t * (1 / 24 - t / 120))))
    return e_tau, absorbed


def _steele_depth_mean_fast(i0, i_opt):
    """Steele's depth mean as a function of optical depth, for the engine's inner loop.

    Same closed form as :func:`pondsim.pond.kinetics.depth_averaged_response` (Steele 1962):
    <f> = (e/tau)[exp(-a e^-tau) - exp(-a)], a = I0/Iopt, with the exponentials that
    depend on the state in single precision (see :func:`_transmission`) and the
    difference formed without cancellation: exp(-a) expm1(b), b = a(1 - e^-tau), by its
    series where b is small (dawn, dusk, thin cultures). A test bounds the error against
    the double-precision kinetics function (rel. 1e-5).
    """
    a = np.asarray(i0, dtype=float) / i_opt
    exp_a = np.exp(-a)
    a32 = np.asarray(-a, dtype=np.float32)
    e = math.e

    def mean(tau):
        tau = np.maximum(tau, 1e-12)
        e_tau, absorbed = _transmission(tau)
        diff = np.exp(a32 * e_tau) - exp_a
        b = a * absorbed
        small = b < 0.05
        if small.any():
            bs = b[small]  # series of expm1 to b^5: truncation < 2e-11 relative
            series = bs * (1.0 + bs * (0.5 + bs * (1 / 6 + bs * (1 / 24 + bs / 120))))
            diff[small] = (exp_a if np.ndim(exp_a) == 0 else exp_a[small]) * series
        diff *= e
        diff /= tau
        return diff

    return mean


def _monod_depth_mean_fast(i0, k_i):
    """Monod's depth mean (1/tau) ln[1 + I0 (1 - e^-tau)/(K + I0 e^-tau)] for the inner
    loop, with the transmission of :func:`_transmission`."""
    i0 = np.asarray(i0, dtype=float)

    def mean(tau):
        tau = np.maximum(tau, 1e-12)
        e_tau, absorbed = _transmission(tau)
        return np.log1p(i0 * absorbed / (k_i + i0 * e_tau)) / tau

    return mean


FAST_DEPTH_MEANS = {"steele": _steele_depth_mean_fast, "monod": _monod_depth_mean_fast}


def _rates_factory(drivers: Drivers, set_of_member):
    """Return ``(hour_factors, rates)`` for the growth form.

    ``hour_factors(hour, day)`` does the per-hour work that does not depend on density
    (the light-response evaluator for the hour's PAR, µmax·f_T, m, 1/K);
    ``rates(x, factors) -> (specific gross rate, maintenance)`` [d-1] is the lean part
    evaluated at each Runge–Kutta stage.
    """
    take = (lambda v: v[0]) if set_of_member is None else (lambda v: v[set_of_member])
    mu = take(drivers.mu_max)
    param = take(drivers.light_param)
    # Optical depth tau = (k_biomass X + k_background) depth, as slope and intercept.
    tau_slope = take(drivers.k_biomass) * drivers.depth_m
    tau_zero = take(drivers.k_background) * drivers.depth_m
    par = _member_view(drivers.par, set_of_member)
    ftemp = _member_view(drivers.temp_factor, set_of_member)
    maint = _member_view(drivers.maintenance, set_of_member)
    cap = _member_view(drivers.capacity, set_of_member)
    model = drivers.light_model

    if drivers.growth_form == "self_shading":
        fast = FAST_DEPTH_MEANS.get(model) if isinstance(model, str) else None

        def hour_factors(hour, day):
            i0 = par(hour)
            if fast is not None:
                mean_response = fast(i0, param)
            else:
                mean_response = kinetics._depth_average_evaluator(model, i0, param)
            return mu * ftemp(hour), mean_response, maint(hour)

        def rates(x, factors):
            mu_t, mean_response, m = factors
            return mu_t * mean_response(tau_slope * x + tau_zero), m
    elif drivers.growth_form == "logistic":
        day_cache: dict = {}

        def day_factors(day):
            # Daily means of r and m, and the gross-growth capacity K_g that makes K the
            # day's equilibrium with maintenance included (see logistic_gross_capacity).
            if day not in day_cache:
                day_cache.clear()
                hours = range(day * HOURS_PER_DAY, (day + 1) * HOURS_PER_DAY)
                r_mean = sum(kinetics.specific_growth_logistic_r(
                    par(h), ftemp(h), mu_max=mu, model=model, param=param)
                    for h in hours) / HOURS_PER_DAY
                m_mean = sum(maint(h) for h in hours) / HOURS_PER_DAY
                day_cache[day] = logistic_inverse_capacity(cap(day), r_mean, m_mean)
            return day_cache[day]

        def hour_factors(hour, day):
            r = kinetics.specific_growth_logistic_r(par(hour), ftemp(hour), mu_max=mu,
                                                    model=model, param=param)
            grows, inv_kg = day_factors(day)
            return np.where(grows, r, 0.0), inv_kg, maint(hour)

        def rates(x, factors):
            r, inv_kg, m = factors
            # Above K_g the logistic term is negative: a die-back (booked as respired).
            return r * (1.0 - x * inv_kg), m
    else:
        raise ValueError(f"unknown growth form {drivers.growth_form!r}; "
                         "choose 'self_shading' or 'logistic'")
    return hour_factors, rates


def logistic_inverse_capacity(k_day, r_mean, m_mean):
    """``(grows, 1/K_g)`` of the logistic form for a day with carrying capacity K.

    The logistic form dX/dt = r(t)·X·(1 − X/K_g) − m(t)·X has, over a day of nearly
    constant X, zero net growth where Σr·(1 − X/K_g) = Σm, i.e. X = K_g·(1 − m̄/r̄). So
    K (the day's equilibrium, maintenance included) needs K_g = K / (1 − m̄/r̄), taken
    when r̄ > m̄; where r̄ <= m̄ the culture declines whatever K and the gross term has no
    limit (1/K_g = 0). Where K = 0 (no net growth possible that day) the gross growth is
    switched off (``grows`` False) and the culture only respires: finite, no 0·inf.

    Parameters
    ----------
    k_day : array [g m-3]
    r_mean, m_mean : array [d-1]
        Day means of the logistic r and of the maintenance rate.
    """
    k_day = np.asarray(k_day, dtype=float)
    r_mean = np.asarray(r_mean, dtype=float)
    grows = k_day > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(r_mean > m_mean, 1.0 - m_mean / np.where(r_mean > 0, r_mean, 1.0),
                          0.0)
        inv_kg = np.where(grows & (factor > 0), factor / np.where(grows, k_day, 1.0), 0.0)
    return grows, inv_kg


def integrate(drivers: Drivers, rules: HarvestRules, operation: Operation, *,
              set_of_member: np.ndarray | None = None, crash=None,
              stream_of_member: np.ndarray | None = None,
              seed: int | None = None, progress=None, check_ledger: bool = True,
              engine: str = "numpy") -> Daily:
    """Integrate density for every member over the year.

    Parameters
    ----------
    drivers : Drivers
        ``f`` driver sets.
    rules : HarvestRules
        Harvest rules for ``n`` members.
    operation : Operation
    set_of_member : ndarray of int, shape (n,), optional
        Driver set of each member; may be omitted when there is one set.
    crash : pondsim.operations.crash.CrashModel, optional
        Daily crash hazard; None for no crashes.
    seed : int, optional
        Seed of the members' random streams (crash draws).
    stream_of_member : ndarray of int, shape (n,), optional
        Random stream of each member (default: its own index). Giving member j of every
        policy stream j uses common random numbers across policies.
    progress : callable, optional
        Called with the number of days done after each day (for progress bars).
    check_ledger : bool
        Raise :class:`LedgerError` if the biomass ledger does not close.
    engine : {"numpy", "compiled"}
        ``"numpy"`` (this function, the reference; the default here) or ``"compiled"``
        (:func:`pondsim.operations.kernel.integrate_compiled`, same results to ~1e-6
        relative, the default of the scenario key ``[run] engine`` and so of the
        commands); a light model the compiled engine does not cover runs on numpy.

    Returns
    -------
    Daily
    """
    if engine not in ENGINES:
        raise ValueError(f"unknown engine {engine!r}; choose one of {ENGINES}")
    if engine == "compiled":
        from pondsim.operations import kernel

        if kernel.supports(drivers):
            return kernel.integrate_compiled(
                drivers, rules, operation, set_of_member=set_of_member, crash=crash,
                stream_of_member=stream_of_member, seed=seed, progress=progress,
                check_ledger=check_ledger)
    n = rules.n_members
    n_days = drivers.n_days
    if set_of_member is not None:
        set_of_member = np.asarray(set_of_member, dtype=np.intp)
        if set_of_member.shape != (n,):
            raise ValueError("set_of_member must give one driver set per member")
        if drivers.n_sets == 1:
            set_of_member = None
    elif drivers.n_sets != 1:
        raise ValueError("several driver sets need set_of_member")
    hour_factors, rates = _rates_factory(drivers, set_of_member)
    dark = ~(drivers.par > 0).any(axis=0)  # hours dark for every set
    maint = _member_view(drivers.maintenance, set_of_member)
    op = operation

    x = np.zeros(n)
    status = np.full(n, STATUS_NOT_STARTED, dtype=np.int8)
    restart_on = np.full(n, -1, dtype=np.int64)
    since = np.zeros(n, dtype=np.int64)
    age = np.zeros(n, dtype=np.int64)  # days since inoculation
    totals = {k: np.zeros(n) for k in ("inoculated", "grown", "respired", "removed",
                                       "salvaged", "lost")}

    out = Daily(
        density=np.zeros((n, n_days)), removed=np.zeros((n, n_days)),
        harvest_fraction=np.zeros((n, n_days)), growth_rate=np.zeros((n, n_days)),
        lost=np.zeros((n, n_days)), crashed=np.zeros((n, n_days), dtype=bool),
        hazard=np.zeros((n, n_days), dtype=np.float32),
        status=np.zeros((n, n_days), dtype=np.int8), ledger=totals,
        sampled=None if op.sample_hour is None else np.zeros((n, n_days)),
        at_floor=np.zeros((n, n_days), dtype=bool),
        salvaged=np.zeros((n, n_days)), cause=np.zeros((n, n_days), dtype=np.int8),
        grown=np.zeros((n, n_days)), respired=np.zeros((n, n_days)),
    )
    if crash is not None:
        stress = crash_stress(crash, drivers)
        temp_of = _member_view(stress.temp_mean_c, set_of_member)
        heat_of = _member_view(stress.heat_hours, set_of_member)
        cold_of = _member_view(stress.cold_shock_k, set_of_member)
        draws = crash.streams(seed, np.arange(n) if stream_of_member is None
                              else stream_of_member)
    h6 = STEP_D / 6.0
    rate_sum = np.zeros(n)
    grown_before, respired_before = np.zeros(n), np.zeros(n)

    for day in range(n_days):
        # Inoculation at the start of the day: first start, and restarts after crashes.
        start_now = (status == STATUS_NOT_STARTED) & (day >= op.start_day)
        start_now |= (status == STATUS_RESTARTING) & (restart_on <= day)
        if start_now.any():
            x = np.where(start_now, op.inoculum_g_m3, x)
            totals["inoculated"] += np.where(start_now, op.inoculum_g_m3, 0.0)
            status = np.where(start_now, STATUS_GROWING, status).astype(np.int8)
            since = np.where(start_now, 0, since)
            age = np.where(start_now, 0, age)
        rate_sum[:] = 0.0
        for hod in range(HOURS_PER_DAY):
            hour = day * HOURS_PER_DAY + hod
            if hod == op.harvest_hour:
                frac, scheduled = removal_fraction(
                    rules, day, x, since, min_density_g_m3=op.min_density_g_m3,
                    max_fraction=op.max_fraction)
                frac, at_floor = cut_back_to_floor(frac, x, op.floor_g_m3)
                growing = status == STATUS_GROWING
                frac = np.where(growing, frac, 0.0)
                out.at_floor[:, day] = at_floor & growing
                taken = frac * x
                x = x - taken
                totals["removed"] += taken
                out.removed[:, day] = taken
                out.harvest_fraction[:, day] = frac
                since = np.where(scheduled, 0, since)
            if hod == op.sample_hour:
                out.sampled[:, day] = x
            if dark[hour]:
                m = maint(hour)
                decay = np.exp(-m * STEP_D)
                x_new = x * decay
                totals["respired"] += x - x_new
                rate_sum -= m
                x = x_new
                continue
            fac = hour_factors(hour, day)
            g1, m = rates(x, fac)
            k1 = (g1 - m) * x
            x2 = x + (0.5 * STEP_D) * k1
            g2, _ = rates(x2, fac)
            k2 = (g2 - m) * x2
            x3 = x + (0.5 * STEP_D) * k2
            g3, _ = rates(x3, fac)
            k3 = (g3 - m) * x3
            x4 = x + STEP_D * k3
            g4, _ = rates(x4, fac)
            grown = h6 * (g1 * x + 2.0 * (g2 * x2 + g3 * x3) + g4 * x4)
            resp = (h6 * m) * (x + 2.0 * (x2 + x3) + x4)
            rate_sum += g1 - m
            x = x + grown - resp
            # A negative gross step (logistic die-back above capacity) is a loss: book it
            # with respiration so that "grown" stays gross production.
            totals["grown"] += np.maximum(grown, 0.0)
            totals["respired"] += resp + np.maximum(-grown, 0.0)
        out.growth_rate[:, day] = np.where(status == STATUS_GROWING,
                                           rate_sum / HOURS_PER_DAY, 0.0)
        # daily terms from the running ledger totals: no per-hour cost
        out.grown[:, day] = totals["grown"] - grown_before
        out.respired[:, day] = totals["respired"] - respired_before
        grown_before, respired_before = totals["grown"].copy(), totals["respired"].copy()
        since += 1
        if crash is not None:
            growing = status == STATUS_GROWING
            loss = net_loss_today(out.growth_rate, day, age, crash.window_days)
            parts = crash.cause_hazards(temp_of(day), heat_of(day), cold_of(day), loss)
            parts = np.where(growing, parts, 0.0)
            out.hazard[:, day] = parts.sum(axis=0)
            hit, cause = crash.draw(draws, day, parts)
            hit &= growing
            if hit.any():
                lost = np.where(hit, x * crash.loss_fraction, 0.0)
                salvage = np.where(hit, x - lost, 0.0)
                totals["lost"] += lost
                totals["salvaged"] += salvage
                out.lost[:, day] = lost
                out.salvaged[:, day] = salvage
                out.crashed[:, day] = hit
                out.cause[:, day] = np.where(hit, cause, 0)
                x = np.where(hit, 0.0, x)
                status = np.where(hit, STATUS_RESTARTING, status).astype(np.int8)
                restart_on = np.where(hit, day + 1 + op.restart_days, restart_on)
        age += 1
        out.density[:, day] = x
        out.status[:, day] = status
        if progress is not None:
            progress(day + 1)

    totals["final"] = x.copy()
    if check_ledger:
        check_closure(totals)
    return out


def crash_stress(crash, drivers: Drivers):
    """Daily weather stress of every driver set for the crash hazard
    (:meth:`pondsim.operations.crash.CrashModel.weather_stress`). Without water
    temperature in the drivers: the background's reference temperature, no heat, no
    cold shock."""
    if drivers.water_temperature is None:
        shape = (drivers.n_sets, drivers.n_days)
        return WeatherStress(np.full(shape, float(crash.background_t_ref_c)),
                             np.zeros(shape), np.zeros(shape))
    t_max = (np.full(drivers.n_sets, np.inf) if drivers.t_max_c is None
             else np.asarray(drivers.t_max_c, dtype=float))
    return crash.weather_stress(drivers.water_temperature, t_max)


def check_closure(ledger: dict, rtol: float = 1e-9) -> None:
    """Raise :class:`LedgerError` unless inoculated + grown − respired − removed −
    salvaged − lost equals the final stock for every member (relative to the gross
    flow)."""
    balance = (ledger["inoculated"] + ledger["grown"] - ledger["respired"]
               - ledger["removed"] - ledger.get("salvaged", 0.0) - ledger["lost"]
               - ledger["final"])
    scale = ledger["inoculated"] + np.abs(ledger["grown"]) + ledger["respired"] + 1e-12
    worst = float(np.max(np.abs(balance) / scale)) if balance.size else 0.0
    if not math.isfinite(worst) or worst > rtol:
        raise LedgerError(f"biomass ledger does not close: worst relative imbalance {worst:.3g}")
