r"""Crash hazard fitted to a site's pond log by maximum likelihood, through the engine.

Each logged pond-period (inoculation to crash, or to the day the log stops following it)
is simulated on the site's weather by the same engine and drivers as ``pondsim run``
(:func:`pondsim.operations.engine.integrate`, crashes off, the logged harvests or a
scenario policy), which gives for every pond-day the stress indices of
:mod:`pondsim.operations.crash`: day-mean water temperature T̄, the starvation index L
(recent net loss rate), hours above t_max H and the cold shock C. The hazard

.. math:: h_t = e^{a + \beta (\bar T_t - T_{ref})} + c_s L_t / L_{ref} + c_h H_t + c_c C_t

(a = ln b; q10 = e^{10 β}) is the scenario's hazard written with unconstrained a and β.
The log-likelihood of the periods is the discrete-time survival likelihood

.. math:: \ell = \sum_{\text{crash days}} \ln(1 - e^{-h_t}) - \sum_{\text{survived days}} h_t

with each period right-censored at its end when it did not crash (Kalbfleisch & Prentice
2002, *The Statistical Analysis of Failure Time Data*, ch. 1; the grouped-time form of
Prentice & Gloeckler 1978, Biometrics 34:57-67). The pond-days of a period are at risk
from its inoculation day to its last day, as in the engine, which draws crashes at the end
of every growing day.

Estimates maximise ℓ within the scenario schema's ranges (SLSQP with the analytic
gradient). 95 % intervals are profile-likelihood intervals: the values ψ of one parameter
where 2[ℓ̂ − max ℓ(ψ, others)] = χ²₁(0.95) = 3.84 (Venzon & Moolgavkar 1988, Appl.
Statist. 37:87-94); a coefficient whose interval reaches 0 has 0 as its lower limit. The
weather terms (β and the c's) are tested against a background-only hazard by the
likelihood ratio 2(ℓ̂ − ℓ̂₀). The c's cannot be negative, so under the null they sit on
the boundary and the reference distribution is the chi-bar-square mixture
Σ_j C(k, j) 2^{-k} χ²_{m + j} (k boundary coefficients, m = 1 for β; Self & Liang 1987,
JASA 82:605-610; exact for orthogonal information, an approximation otherwise). The
background-only estimate has a closed form: the daily crash probability is crashes /
pond-days at risk, b̂ = −ln(1 − crashes / pond-days) ≈ crashes / pond-days.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import optimize, stats

from pondsim.errors import InputError
from pondsim.operations.crash import STARVATION_LOSS_REF_PER_D, CrashModel, trailing_net_loss
from pondsim.operations.engine import HOURS_PER_DAY, crash_stress, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules, rules_from_entries
from pondsim.studies.fit_statistics import interval_covers

#: Parameters of the fit, in order: (name, unit, meaning, scenario key, lower, upper)
#: on the fit's own scale (a = ln b, β = ln(q10)/10); bounds follow the scenario schema.
PARAMS = (
    ("ln_background", "ln d-1", "log of the background hazard at background_t_ref_c",
     "background_per_d", math.log(1e-6), 0.0),
    ("beta_per_k", "K-1", "temperature slope of the background, ln(q10)/10",
     "background_q10", math.log(0.1) / 10, math.log(20.0) / 10),
    ("starvation_hazard_per_d", "d-1", "starvation hazard at 0.1 d-1 of net loss",
     "starvation_hazard_per_d", 0.0, 50.0),
    ("heat_hazard_per_d_h", "d-1 h-1", "hazard per hour above t_max",
     "heat_hazard_per_d_h", 0.0, 10.0),
    ("cold_hazard_per_d_k", "d-1 K-1", "hazard per K of cold shock",
     "cold_hazard_per_d_k", 0.0, 10.0),
)
NAMES = tuple(p[0] for p in PARAMS)
WEATHER = NAMES[1:]
CHI2_95 = float(stats.chi2.ppf(0.95, 1))


@dataclass
class PeriodStress:
    """Stress indices of P pond-periods, padded to L days (arrays of shape (P, L)).

    ``temp_anomaly_k`` T̄ − T_ref [K], ``starvation`` L / L_ref [-], ``heat_hours`` [h],
    ``cold_shock_k`` [K], ``density_g_m3`` modelled end-of-day density; ``n_days`` (P,)
    days at risk; ``crashed`` (P,) bool (a crash on the last day at risk).
    """

    temp_anomaly_k: np.ndarray
    starvation: np.ndarray
    heat_hours: np.ndarray
    cold_shock_k: np.ndarray
    density_g_m3: np.ndarray
    n_days: np.ndarray
    crashed: np.ndarray
    notes: list = field(default_factory=list)

    @property
    def at_risk(self) -> np.ndarray:
        return np.arange(self.temp_anomaly_k.shape[1])[None, :] < self.n_days[:, None]

    @property
    def event(self) -> np.ndarray:
        return (np.arange(self.temp_anomaly_k.shape[1])[None, :]
                == (self.n_days - 1)[:, None]) & self.crashed[:, None]

    def covariates(self) -> np.ndarray:
        """(4, P, L): T̄ − T_ref, L/L_ref, H, C."""
        return np.stack([self.temp_anomaly_k, self.starvation, self.heat_hours,
                         self.cold_shock_k])

    def subset(self, rows) -> PeriodStress:
        """The periods in *rows*."""
        return PeriodStress(*(a[rows] for a in (
            self.temp_anomaly_k, self.starvation, self.heat_hours, self.cold_shock_k,
            self.density_g_m3, self.n_days, self.crashed)), notes=list(self.notes))

    def truncated(self, n_days, crashed) -> PeriodStress:
        """The same periods cut at *n_days* (crashed or censored there)."""
        return dataclasses.replace(self, n_days=np.asarray(n_days, dtype=int),
                                   crashed=np.asarray(crashed, dtype=bool))


# --------------------------------------------------------------------------------------
# Simulating the logged periods
# --------------------------------------------------------------------------------------
def simulate_periods(log, scenario, *, policy: str | None = None,
                     map_year: bool = False) -> PeriodStress:
    """Run every logged period through the engine on the site's weather.

    Parameters
    ----------
    log : pondsim.studies.crash_log.PondLog
    scenario : Scenario
        Site, weather, pond, strain and operations (harvest hour and capacity), and the
        crash model's fixed settings (T_ref, window, cold onset).
    policy : str, optional
        Harvest policy of the periods when the log holds no harvest rows (default: the
        scenario's first policy); with harvest rows, the logged harvests are replayed.
    map_year : bool
        Let a one-real-year weather file stand in for other years (noted).
    """
    from pondsim.operations.simulate import (
        build_drivers,
        crash_model_of,
        hourly_light_and_water,
        load_forcing_for_year,
        operation_of,
    )

    notes = []
    tables = []
    for year in log.years():
        forcing, _, year_notes = load_forcing_for_year(scenario, year, map_year=map_year,
                                                       what="the pond log's periods")
        notes += [n for n in year_notes if n not in notes]
        tables.append(hourly_light_and_water(forcing, scenario.replace(year=year)))
    hourly = pd.concat(tables) if len(tables) > 1 else tables[0]
    drivers = build_drivers(hourly, scenario)
    dates = pd.DatetimeIndex(hourly.index[::HOURS_PER_DAY]).tz_localize(None).normalize()
    periods = log.periods
    n = len(periods)
    start = dates.get_indexer(pd.DatetimeIndex(periods["start"]))
    n_days = periods["days"].to_numpy(dtype=int)
    rules = _period_rules(log, scenario, policy, dates, start, notes)
    ino = periods["inoculum_g_m3"].to_numpy(dtype=float)
    op = dataclasses.replace(operation_of(scenario), start_day=start,
                             inoculum_g_m3=np.where(np.isnan(ino),
                                                    scenario.inoculation.density_g_m3, ino))
    daily = integrate(drivers, rules, op)
    model = crash_model_of(scenario.replace(crash=dataclasses.replace(
        scenario.crash, enabled=True))) or CrashModel()
    stress = crash_stress(model, drivers)
    length = int(n_days.max())
    idx = np.minimum(start[:, None] + np.arange(length)[None, :], len(dates) - 1)
    rows = np.arange(n)[:, None]
    rates = daily.growth_rate[rows, idx]
    out = PeriodStress(
        temp_anomaly_k=stress.temp_mean_c[0][idx] - model.background_t_ref_c,
        starvation=trailing_net_loss(rates, model.window_days) / STARVATION_LOSS_REF_PER_D,
        heat_hours=stress.heat_hours[0][idx], cold_shock_k=stress.cold_shock_k[0][idx],
        density_g_m3=daily.density[rows, idx], n_days=n_days,
        crashed=periods["crashed"].to_numpy(dtype=bool), notes=notes)
    pad = ~out.at_risk
    for a in (out.temp_anomaly_k, out.starvation, out.heat_hours, out.cold_shock_k):
        a[pad] = 0.0
    return out


def _period_rules(log, scenario, policy, dates, start, notes) -> HarvestRules:
    n, n_days = len(log.periods), len(dates)
    if len(log.harvests):
        fraction = np.zeros((n, n_days))
        day = dates.get_indexer(pd.DatetimeIndex(log.harvests["date"]))
        fraction[log.harvests["period"].to_numpy(), day] = log.harvests["fraction"].to_numpy()
        code = np.where(fraction > 0, RULE_CODES["fixed_fraction"], RULE_CODES["none"])
        notes.append(f"{len(log.harvests)} logged harvests replayed at the scenario's "
                     f"harvest hour ({scenario.harvest.hour:02d}:00); periods without "
                     "harvest rows are not harvested")
        return HarvestRules(code=code.astype(np.int8), fraction=fraction,
                            every_days=np.zeros((n, n_days), np.int32),
                            trigger=np.full((n, n_days), np.nan),
                            residual=np.full((n, n_days), np.nan),
                            period_of_day=np.arange(n_days)[None, :])
    from pondsim.operations.harvest import season_of_day

    names = [p.name for p in scenario.policies]
    name = names[0] if policy is None else policy
    if name not in names:
        raise InputError(f"unknown policy {name!r}; the scenario's policies: "
                         + ", ".join(names), field="--policy")
    chosen = next(p for p in scenario.policies if p.name == name)
    notes.append(f"the log has no harvest rows: every period follows the scenario's policy "
                 f"{name!r}")
    return rules_from_entries([[chosen] * len(scenario.seasons)],
                              season_of_day(dates, scenario.seasons), repeat=n)


# --------------------------------------------------------------------------------------
# Likelihood
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Days:
    """Pond-days at risk reduced to what the likelihood needs: the crash days'
    covariates, and for survived days the sums of L/L_ref, H, C plus the count of days
    at each distinct water-temperature anomaly (ponds share the calendar's weather, so
    the background term Σ n_k e^{a + β u_k} has far fewer terms than pond-days; exact)."""

    z_event: np.ndarray  # (4, n_crashes)
    anomaly_k: np.ndarray  # (n_levels,) distinct T̄ - T_ref of survived days [K]
    count: np.ndarray  # (n_levels,) survived days at each level
    sums: np.ndarray  # (3,) sums of L/L_ref, H, C over survived days

    @classmethod
    def of(cls, data: PeriodStress) -> _Days:
        z = data.covariates()
        risk, event = data.at_risk, data.event
        survived = risk & ~event
        zs = z[:, survived]
        levels, count = np.unique(zs[0], return_counts=True)
        return cls(z_event=z[:, event], anomaly_k=levels, count=count.astype(float),
                   sums=zs[1:].sum(axis=1))


def neg_log_likelihood(theta, data, *, grad: bool = False):
    """−ℓ(θ) of the periods (module docstring), and its gradient when asked.

    θ = (a, β, c_s, c_h, c_c) on the fit's scale (:data:`PARAMS`); *data* is a
    :class:`PeriodStress`.
    """
    days = data if isinstance(data, _Days) else _Days.of(data)
    theta = np.asarray(theta, dtype=float)
    bg_s = days.count * np.exp(theta[0] + theta[1] * days.anomaly_k)
    ze = days.z_event
    bg_e = np.exp(theta[0] + theta[1] * ze[0])
    h_e = np.maximum(bg_e + theta[2] * ze[1] + theta[3] * ze[2] + theta[4] * ze[3], 1e-300)
    nll = float(bg_s.sum() + theta[2:] @ days.sums - np.log(-np.expm1(-h_e)).sum())
    if not grad:
        return nll
    w_e = -1.0 / np.expm1(h_e)
    g = np.array([bg_s.sum() + (w_e * bg_e).sum(),
                  (bg_s * days.anomaly_k).sum() + (w_e * bg_e * ze[0]).sum(),
                  *(days.sums + (w_e * ze[1:]).sum(axis=1))])
    return nll, g


def background_only(data: PeriodStress) -> float:
    """Closed-form MLE of a constant hazard [d-1]: −ln(1 − crashes / pond-days)."""
    crashes = int(data.crashed.sum())
    days = int(data.n_days.sum())
    if crashes == 0:
        return 0.0
    return -math.log1p(-crashes / days)


def _maximise(days, theta0, free, lower, upper):
    free = np.asarray(free, dtype=bool)

    def fun(x):
        th = theta0.copy()
        th[free] = x
        nll, g = neg_log_likelihood(th, days, grad=True)
        return nll, g[free]

    if not free.any():
        return theta0.copy(), neg_log_likelihood(theta0, days)
    # SLSQP: on these shared machines L-BFGS-B's Fortran core ran ~7x slower (thread
    # contention in its BLAS calls) for the same optimum.
    res = optimize.minimize(fun, theta0[free], jac=True, method="SLSQP",
                            bounds=list(zip(lower[free], upper[free], strict=True)),
                            options={"ftol": 1e-12, "maxiter": 500})
    th = theta0.copy()
    th[free] = res.x
    return th, float(res.fun)


@dataclass
class HazardFit:
    """Result of :func:`fit_hazard`: ``table`` (per parameter of the scenario's [crash]
    section: estimate, ci95_low, ci95_high, unit, status, meaning), the likelihood-ratio
    test of the weather terms, counts and notes."""

    table: pd.DataFrame
    theta: np.ndarray
    free: tuple
    log_likelihood: float
    log_likelihood_background: float
    lr_statistic: float
    lr_p_value: float
    lr_df: str
    n_periods: int
    n_crashes: int
    pond_days: int
    background_only_per_d: float
    notes: list

    def estimates(self) -> dict:
        """Scenario [crash] key -> fitted (or kept) value."""
        return self.table["estimate"].to_dict()

    def covers(self, truth: dict) -> dict:
        """For each true value (scenario keys), whether the 95 % interval holds it."""
        return interval_covers(self.table, truth)


def _to_scenario(name, value):
    if name == "ln_background":
        return math.exp(value)
    if name == "beta_per_k":
        return math.exp(10.0 * value)
    return float(value)


def _from_model(model: CrashModel) -> np.ndarray:
    return np.array([math.log(max(model.background_per_d, 1e-6)),
                     math.log(model.background_q10) / 10.0, model.starvation_hazard_per_d,
                     model.heat_hazard_per_d_h, model.cold_hazard_per_d_k])


def fit_hazard(data: PeriodStress, base: CrashModel, *, free=None,
               intervals: bool = True) -> HazardFit:
    """Maximum-likelihood hazard parameters with profile intervals and the LR test.

    Parameters
    ----------
    data : PeriodStress
        From :func:`simulate_periods` (or cut from it).
    base : CrashModel
        Values of parameters not fitted, and T_ref, window and cold onset (fixed).
    free : sequence of str, optional
        Scenario keys to estimate (default: all five); a weather term whose stress is
        zero on every pond-day at risk cannot be estimated and keeps its base value.
    intervals : bool
        Compute the profile-likelihood intervals (the costly part).
    """
    keys = [p[3] for p in PARAMS]
    free_keys = list(keys if free is None else free)
    for k in free_keys:
        if k not in keys:
            raise InputError(f"unknown parameter {k!r}; allowed: {', '.join(keys)}",
                             field="--fit")
    if "background_per_d" not in free_keys:
        free_keys.insert(0, "background_per_d")
    notes = list(data.notes)
    if data.crashed.sum() == 0:
        raise InputError("the log holds no crash: the hazard cannot be estimated (the "
                         "background is then below ~3 / pond-days, the rule of three)",
                         field="event")
    risk = data.at_risk
    z = data.covariates()
    days = _Days.of(data)
    is_free = np.array([p[3] in free_keys for p in PARAMS])
    for j, p in enumerate(PARAMS[1:], start=1):
        stress = z[j - 1][risk]  # covariate of parameter j
        silent = np.ptp(stress) == 0 if j == 1 else not np.any(stress > 0)
        if is_free[j] and silent:
            is_free[j] = False
            notes.append(f"{p[3]}: its stress is zero (or constant) on every pond-day of "
                         "the log, so the log cannot estimate it; kept at the scenario's "
                         "value")
    lower = np.array([p[4] for p in PARAMS])
    upper = np.array([p[5] for p in PARAMS])
    start = _from_model(base)
    start[0] = math.log(max(background_only(data), 1e-6))
    start[1:] = np.where(is_free[1:], np.clip(0.0, lower[1:], upper[1:]), start[1:])
    theta, nll = _maximise(days, start, is_free, lower, upper)
    # Several starts guard against a local optimum (the likelihood is smooth but not
    # concave in a and β jointly with the c's).
    for scale in (0.5, 2.0):
        alt = np.where(is_free, start, theta)
        alt[2:] = np.where(is_free[2:], np.clip(_from_model(base)[2:] * scale, lower[2:],
                                                upper[2:]), theta[2:])
        th2, nll2 = _maximise(days, alt, is_free, lower, upper)
        if nll2 < nll - 1e-9:
            theta, nll = th2, nll2
    null_free = np.zeros(len(PARAMS), bool)
    null_free[0] = True
    null_start = theta.copy()
    null_start[1:] = np.where(is_free[1:], 0.0, theta[1:])
    null_start[0] = math.log(max(background_only(data), 1e-6))
    theta0, nll0 = _maximise(days, null_start, null_free, lower, upper)
    lr = max(2.0 * (nll0 - nll), 0.0)
    k_bound = int(is_free[2:].sum())
    m_free = int(is_free[1])
    if k_bound + m_free:
        weights = [math.comb(k_bound, j) / 2 ** k_bound for j in range(k_bound + 1)]
        p_value = float(sum(w * (stats.chi2.sf(lr, m_free + j) if m_free + j else
                                 float(lr <= 0)) for j, w in enumerate(weights)))
        df = (f"chi-bar-square: {m_free} free + {k_bound} boundary parameter(s)"
              if k_bound else f"chi-square, {m_free} df")
    else:
        p_value, df = float("nan"), "no weather term to test"

    rows = []
    for j, p in enumerate(PARAMS):
        low = high = float("nan")
        status = "fitted" if is_free[j] else "kept (scenario value)"
        if is_free[j] and intervals:
            low, high, reach = _profile_interval(days, theta, nll, j, is_free, lower, upper)
            if reach:
                status = "fitted; interval reaches the allowed range: " + reach
        value = _to_scenario(p[0], theta[j])
        lo = _to_scenario(p[0], low) if np.isfinite(low) else low
        hi = _to_scenario(p[0], high) if np.isfinite(high) else high
        unit = {"background_per_d": "d-1", "background_q10": "1"}.get(p[3], p[1])
        rows.append({"parameter": p[3], "estimate": value, "ci95_low": lo,
                     "ci95_high": hi, "unit": unit, "status": status,
                     "meaning": p[2] if p[3] not in ("background_per_d", "background_q10")
                     else {"background_per_d": "background hazard at background_t_ref_c",
                           "background_q10": "factor per 10 K of water temperature"}[p[3]]})
    table = pd.DataFrame(rows).set_index("parameter")
    return HazardFit(table=table, theta=theta, free=tuple(np.array(NAMES)[is_free]),
                     log_likelihood=-nll, log_likelihood_background=-nll0,
                     lr_statistic=lr, lr_p_value=p_value, lr_df=df,
                     n_periods=len(data.n_days), n_crashes=int(data.crashed.sum()),
                     pond_days=int(data.n_days.sum()),
                     background_only_per_d=float(math.exp(theta0[0])), notes=notes)


def _profile_interval(days, theta, nll, j, is_free, lower, upper):
    """(low, high, note) of the 95 % profile-likelihood interval of parameter j."""
    others = is_free.copy()
    others[j] = False
    warm = {"theta": theta.copy()}

    def excess(v):
        th = warm["theta"].copy()
        th[j] = v
        th_opt, value = _maximise(days, th, others, lower, upper)
        warm["theta"] = th_opt
        return 2.0 * (value - nll) - CHI2_95

    scale = max(abs(theta[j]) * 0.2, 1e-3 if j > 1 else 0.05)
    limits, reach = [], []
    for direction, bound in ((-1, lower[j]), (1, upper[j])):
        warm["theta"] = theta.copy()
        if theta[j] == bound or excess(bound) < 0:
            limits.append(bound)
            if j != 0 and not (j > 1 and direction < 0):
                reach.append("upper" if direction > 0 else "lower")
            continue
        warm["theta"] = theta.copy()
        near, step = theta[j], scale
        far = np.clip(near + direction * step, lower[j], upper[j])
        while excess(far) < 0 and far != bound:
            near, step = far, step * 2.0
            far = np.clip(near + direction * step, lower[j], upper[j])
        warm["theta"] = theta.copy()
        limits.append(optimize.brentq(excess, min(near, far), max(near, far),
                                      xtol=1e-6 * max(1.0, abs(theta[j]))))
    return limits[0], limits[1], " and ".join(reach)
