"""Calibrate growth parameters from pilot-pond observations.

A pilot pond gives dated density samples, the harvests that were made, and perhaps the
water temperature and the light. :func:`fit_pilot` finds the strain parameters that make
the *same* hourly engine as the yearly simulation (:func:`pondsim.operations.engine.integrate`)
reproduce those samples, by weighted nonlinear least squares on log density; it reports
standard errors, 95 % intervals, correlations, residual diagnostics and warnings for
parameters the data cannot pin down. :func:`fit_logistic_curve` fits the closed-form
logistic curve to a batch growth curve that has no forcing data.


The observations file is described in :mod:`pondsim.studies.fit_observations`.

--------------------------
* Samples are read at one local hour per day, the engine's ``Operation.sample_hour``: the
  most common (rounded) hour of the samples; date-only times are taken as sampled one hour
  before the harvest hour. Samples more than an hour away from it are counted in a note.
* Harvests happen at the scenario's harvest hour (``harvest.hour``) on their date, as a
  :class:`~pondsim.operations.harvest.HarvestRules` table with one period per day: the observed
  fraction on event days and nothing on other days. A sample taken at the harvest hour is
  taken after that harvest (the engine's rule).
* The initial condition ``x0_g_m3`` is the density at the harvest hour of the first
  simulated day (the first sample day if the first sample is at or after the harvest hour,
  else the day before). It is set per member by a "harvest down to a residual" rule on
  that day, so every Jacobian column, including the one for ``x0``, comes out of one
  engine call. The hours of that day before the reset are treated as dark; the state is a
  single density, so what happens before the reset cannot matter.
* Light and water temperature come from the scenario's forcing for the observation dates
  (:func:`pondsim.operations.simulate.load_forcing`,
  :func:`pondsim.operations.simulate.hourly_light_and_water`).
  Observed water temperatures correct the modelled hourly profile of their day by the
  observed-minus-modelled offset, interpolated across the day's readings (one reading
  shifts the whole day; hourly readings replace it). Observed PAR replaces the modelled
  value at the hours read and rescales the rest of that day (hour means, µmol m-2 s-1),
  or rescales the day's modelled profile to the observed daily integral (mol m-2 d-1).
  Crashes are switched off and the harvest capacity and minimum density do not apply:
  the observed harvests are what happened.

The fit
-------
Residuals are :math:`\\sqrt{w_i}\\,(\\ln y_i - \\ln \\hat y_i)`: density errors of pilot
samples are roughly proportional to the density, so logs make them about homoscedastic,
and a fit in logs weighs the thin early culture as much as the dense one. The least
squares solver is :func:`scipy.optimize.least_squares` (trust-region reflective, within
the scenario's allowed ranges). Its Jacobian is a central finite difference with all
2p + 1 parameter sets in ONE engine call (members mapped to driver sets by
``set_of_member``); central rather than forward differences cost no extra call and are
second-order accurate. Covariance :math:`s^2 (J^T J)^{-1}` with
:math:`s^2 = \\sum r_i^2 / (n - p)`, intervals estimate ± t(0.975, n − p)·SE
(Bates & Watts 1988, *Nonlinear Regression Analysis and Its Applications*, ch. 2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize

from pondsim.errors import InputError, did_you_mean
from pondsim.operations.engine import HOURS_PER_DAY, STEP_D, Drivers, Operation, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules
from pondsim.pond import kinetics
from pondsim.studies.fit_observations import Observations
from pondsim.studies.fit_statistics import (
    correlation_matrix,
    identifiability_warnings,
    interval_covers,
    ls_covariance,
    parameter_table,
    residual_diagnostics,
)


@dataclass(frozen=True)
class Param:
    """A parameter the fit can estimate."""

    unit: str
    low: float
    high: float
    scale: float  # typical magnitude, for the solver's variable scaling and FD steps
    doc: str
    key: str | None  # scenario key it is written to ([strain] section), if any


#: Parameters the pilot fit can estimate; the allowed ranges follow the scenario schema.
PARAMETERS: dict[str, Param] = {
    "mu_max_per_d": Param("d-1", 0.05, 5.0, 1.0, "maximum specific growth rate",
                          "mu_max_per_d"),
    "light_param_umol_m2_s": Param("umol m-2 s-1", 5.0, 3000.0, 100.0,
                                   "light parameter of the light response",
                                   "light_param_umol_m2_s"),
    "maintenance_per_d": Param("d-1", 0.0, 1.0, 0.05, "maintenance rate at the reference "
                               "temperature", "maintenance_per_d"),
    "t_opt_c": Param("degC", 0.0, 50.0, 5.0, "optimum temperature (CTMI)", "t_opt_c"),
    "k_biomass_m2_g": Param("m2 g-1", 0.01, 2.0, 0.1, "biomass-specific light extinction",
                            "k_biomass_m2_g"),
    "capacity_g_m3": Param("g m-3", 1.0, 20000.0, 500.0, "carrying capacity over the pilot "
                           "(logistic form)", "capacity_table_g_m3"),
    "x0_g_m3": Param("g m-3", 1e-3, 20000.0, 50.0, "density at the start of the simulated "
                     "pilot", None),
}
GROWTH_FORMS = ("self_shading", "logistic")
# --------------------------------------------------------------------------------------
# The pilot model: observations + scenario forcing -> engine runs for many parameter sets
# --------------------------------------------------------------------------------------
def pilot_hourly(scenario, year: int | None = None, *, map_year: bool = False
                 ) -> pd.DataFrame:
    """Hourly PAR and water temperature of the scenario's forcing for *year*.

    Returns the table of :func:`pondsim.operations.simulate.hourly_light_and_water` with a
    naive (local standard time) index; ``attrs["notes"]`` says how the weather was placed
    into *year*. A weather file of one real year of another calendar year raises
    :class:`InputError` unless ``map_year`` (see
    :func:`pondsim.operations.simulate.load_forcing_for_year`).
    """
    from pondsim.operations.simulate import hourly_light_and_water, load_forcing_for_year

    year = scenario.year if year is None else int(year)
    if year != scenario.year:
        scenario = scenario.replace(year=year)
    forcing, _, notes = load_forcing_for_year(scenario, year, map_year=map_year)
    hourly = hourly_light_and_water(forcing, scenario)
    hourly.attrs["notes"] = notes
    idx = pd.DatetimeIndex(hourly.index)
    if idx.tz is not None:
        idx = idx.tz_localize(None)
    return hourly.set_axis(idx, axis=0)


class PilotModel:
    """The pilot pond as the engine sees it, for any number of parameter sets at once.

    Parameters
    ----------
    observations : Observations
    scenario : pondsim.scenario.Scenario
        Strain, pond, harvest hour; parameters not fitted keep the scenario's values.
    hourly : DataFrame
        :func:`pilot_hourly` of the observations' year.
    growth_form : {"self_shading", "logistic"}
    free : sequence of str
        Names in :data:`PARAMETERS` to estimate, in order.
    sample_hour : int, optional
        Local hour at which samples are read (default: see the module docstring).
    """

    def __init__(self, observations: Observations, scenario, hourly: pd.DataFrame,
                 growth_form: str, free, *, sample_hour: int | None = None):
        obs = observations
        self.obs, self.scenario, self.growth_form = obs, scenario, growth_form
        self.free = tuple(free)
        self.notes = list(obs.notes)
        path = obs.path
        h = int(scenario.harvest.hour)
        self.harvest_hour = h
        rounded = obs.time.round("h")
        if sample_hour is None:
            if (obs.time == obs.time.normalize()).all():
                sample_hour = max(h - 1, 0)
                rounded = obs.time.normalize() + pd.Timedelta(hours=sample_hour)
                self.notes.append(f"times carry no hour: samples taken as read at "
                                  f"{sample_hour:02d}:00, before the {h:02d}:00 harvest")
            else:
                sample_hour = int(pd.Series(rounded.hour).mode().iloc[0])
        elif not 0 <= int(sample_hour) <= 23:
            raise InputError(f"sample hour {sample_hour} out of range; allowed 0-23",
                             field="--sample-hour")
        self.sample_hour = s = int(sample_hour)
        off = np.abs(((rounded.hour - s + 12) % 24) - 12)
        if (off > 1).any():
            self.notes.append(f"{int((off > 1).sum())} sample(s) lie more than 1 h from the "
                              f"modelled sampling hour {s:02d}:00")
        dates = rounded.normalize()
        dup = dates.duplicated()
        if dup.any():
            raise InputError(f"two samples on {dates[dup][0].date()}; the fit takes one "
                             "sample per day (average replicates first)", path=path,
                             field="time")
        first = dates[0]
        self.start = first if s >= h else first - pd.Timedelta(days=1)
        end = dates[-1]
        year = hourly.index[0].year
        if self.start.year != year or end.year != year:
            raise InputError(f"the observations run from {obs.time[0].date()} to "
                             f"{obs.time[-1].date()}; a fit covers one calendar year of "
                             f"forcing ({year})" + (", and needs the day before the first "
                             "sample when it was read before the harvest hour"
                             if s < h else ""), path=path, field="time")
        self.n_days = int((end - self.start).days) + 1
        self.sample_day = ((dates - self.start).days).to_numpy().astype(int)
        d0 = int((self.start - pd.Timestamp(year=year, month=1, day=1)).days)
        window = hourly.iloc[d0 * HOURS_PER_DAY:(d0 + self.n_days) * HOURS_PER_DAY]
        self.hours = window.index
        tw = window["water_temperature"].to_numpy(dtype=float).copy()
        par = np.maximum(window["par"].to_numpy(dtype=float), 0.0).copy()
        self.modelled_temperature = tw.copy()
        tw = self._observed_temperature(tw)
        par = self._observed_par(par)
        self.water_temperature, self.par_observed_or_modelled = tw, par.copy()
        # Hours of day 0 before the reset to x0 are irrelevant: make them dark (no growth).
        par[:h] = 0.0
        self.par = par
        # Harvest fraction of each simulated day; events outside the samples' span drop.
        ev = obs.harvest
        idx = ((ev.index - self.start).days).to_numpy()
        # Day 0 ends at the reset to x0: a harvest before the first sample is part of x0.
        keep = (idx >= 1) & (idx < self.n_days)
        dropped = int((~keep).sum())
        if dropped:
            self.notes.append(f"{dropped} harvest(s) before the first sample or after the "
                              "last one ignored (the fit starts at the first sample)")
        self.fraction = np.zeros(self.n_days)
        self.fraction[idx[keep]] = ev.to_numpy()[keep]
        st = scenario.strain
        lit = par > 0
        self.temperature_range = (float(tw[lit].min()), float(tw[lit].max())) if lit.any() \
            else (float(tw.min()), float(tw.max()))
        self.ftemp_fixed = kinetics.ctmi(tw, st.t_min_c, st.t_opt_c, st.t_max_c)
        self.maint_unit = kinetics.maintenance_rate(tw, 1.0, st.maintenance_theta,
                                                    st.maintenance_t_ref_c)
        self.log_obs = np.log(obs.density_g_m3)
        self.sqrt_w = np.sqrt(obs.weight)
        self.runs = 0

    # -- forcing from the observations -----------------------------------------------
    def _hour_index(self, times):
        rel = (times.round("h") - self.start) // pd.Timedelta(hours=1)
        return np.asarray(rel, dtype=int)

    def _observed_temperature(self, tw):
        series = self.obs.water_temperature_c
        if series is None:
            return tw
        idx = self._hour_index(series.index)
        ok = (idx >= 0) & (idx < len(tw))
        idx, val = idx[ok], series.to_numpy()[ok]
        offset = val - tw[idx]
        out = tw.copy()
        day = idx // HOURS_PER_DAY
        for d in np.unique(day):
            sel = day == d
            hod = idx[sel] % HOURS_PER_DAY
            order = np.argsort(hod)
            shift = np.interp(np.arange(HOURS_PER_DAY), hod[order], offset[sel][order])
            out[d * HOURS_PER_DAY:(d + 1) * HOURS_PER_DAY] += shift
        self.notes.append(f"observed water temperature used on {len(np.unique(day))} day(s)")
        return out

    def _observed_par(self, par):
        series = self.obs.par
        if series is None:
            return par
        out = par.copy()
        if self.obs.par_unit == "mol/m2/d":
            day = ((series.index.normalize() - self.start).days).to_numpy()
            ok = (day >= 0) & (day < self.n_days)
            for d, v in zip(day[ok], series.to_numpy()[ok], strict=True):
                sl = slice(d * HOURS_PER_DAY, (d + 1) * HOURS_PER_DAY)
                modelled = out[sl].sum() * 3600e-6  # mol m-2 d-1
                if modelled > 0:
                    out[sl] *= v / modelled
                elif v > 0:  # no modelled light: spread over the day's 12 central hours
                    out[d * HOURS_PER_DAY + 6:d * HOURS_PER_DAY + 18] = v / (12 * 3600e-6)
            used = int(ok.sum())
        else:
            idx = self._hour_index(series.index)
            ok = (idx >= 0) & (idx < len(out))
            idx, val = idx[ok], series.to_numpy()[ok]
            day = idx // HOURS_PER_DAY
            for d in np.unique(day):
                sel = day == d
                modelled = out[idx[sel]].sum()
                sl = slice(d * HOURS_PER_DAY, (d + 1) * HOURS_PER_DAY)
                if modelled > 0:
                    out[sl] *= val[sel].sum() / modelled
                out[idx[sel]] = val[sel]
            used = len(np.unique(day))
        self.notes.append(f"observed PAR used on {used} day(s)")
        return out

    # -- parameters -------------------------------------------------------------------
    def value_of(self, name: str) -> float:
        """The scenario's value of a parameter (the start of the fit)."""
        st = self.scenario.strain
        if name == "x0_g_m3":
            return float(self.obs.density_g_m3[0])
        if name == "capacity_g_m3":
            if st.capacity_table_g_m3 is not None:
                return float(np.mean(st.capacity_table_g_m3))
            return float(1.3 * self.obs.density_g_m3.max())
        return float(getattr(st, PARAMETERS[name].key))

    def bounds(self, name: str) -> tuple[float, float]:
        p = PARAMETERS[name]
        if name == "t_opt_c":
            st = self.scenario.strain
            # CTMI needs t_min < t_opt < t_max and t_opt above their midpoint.
            return (st.t_min_c + st.t_max_c) / 2 + 0.25, st.t_max_c - 0.25
        return p.low, p.high

    def _column(self, thetas, name):
        if name in self.free:
            return thetas[:, self.free.index(name)]
        return np.full(thetas.shape[0], self.value_of(name))

    def run(self, thetas, *, all_days: bool = False):
        """Model density at the samples [g m-3], shape (m, n_obs), for m parameter sets.

        ``thetas`` has shape (m, p) in the order of ``free``. One engine call.
        With ``all_days`` the density at the sampling hour of every simulated day is
        returned instead, shape (m, n_days).
        """
        thetas = np.atleast_2d(np.asarray(thetas, dtype=float))
        m = thetas.shape[0]
        st = self.scenario.strain
        n_hours = self.n_days * HOURS_PER_DAY
        col = lambda name: self._column(thetas, name)  # noqa: E731
        if "t_opt_c" in self.free:
            ftemp = kinetics.ctmi(self.water_temperature[None, :], st.t_min_c,
                                  col("t_opt_c")[:, None], st.t_max_c)
        else:
            ftemp = np.broadcast_to(self.ftemp_fixed, (m, n_hours))
        maint = col("maintenance_per_d")[:, None] * self.maint_unit[None, :]
        cap = np.broadcast_to(col("capacity_g_m3")[:, None] if self.growth_form == "logistic"
                              else np.ones((1, 1)), (m, self.n_days))
        drivers = Drivers(
            par=np.broadcast_to(self.par, (m, n_hours)), temp_factor=ftemp,
            maintenance=maint, capacity=cap, mu_max=col("mu_max_per_d"),
            light_param=col("light_param_umol_m2_s"), k_biomass=col("k_biomass_m2_g"),
            k_background=np.full(m, st.k_background_per_m), light_model=st.light_model,
            growth_form=self.growth_form, depth_m=self.scenario.pond.depth_m)
        x0 = col("x0_g_m3")
        code = np.where(self.fraction > 0, RULE_CODES["fixed_fraction"], RULE_CODES["none"])
        code[0] = RULE_CODES["fixed_interval"]  # day 0: harvest down to x0 (the reset)
        residual = np.full((m, self.n_days), np.nan)
        residual[:, 0] = x0
        rules = HarvestRules(
            code=np.broadcast_to(code.astype(np.int8), (m, self.n_days)),
            fraction=np.broadcast_to(self.fraction, (m, self.n_days)),
            every_days=np.zeros((m, self.n_days), dtype=np.int32),
            trigger=np.full((m, self.n_days), np.nan), residual=residual,
            period_of_day=np.arange(self.n_days)[None, :])
        # Inoculum large enough to stay above every x0 through the dark hours before the
        # reset (pure decay exp(-m t) there).
        decay = np.exp(-maint[:, :self.harvest_hour].sum(axis=1) * STEP_D)
        inoculum = float(1.5 * np.max(x0 / decay) + 1.0)
        op = Operation(start_day=0, inoculum_g_m3=inoculum, restart_days=0,
                       harvest_hour=self.harvest_hour, recovery_efficiency=1.0,
                       max_fraction=1.0, min_density_g_m3=0.0, sample_hour=self.sample_hour)
        daily = integrate(drivers, rules, op, set_of_member=np.arange(m))
        self.runs += 1
        if not (daily.harvest_fraction[:, 0] > 0).all():  # pragma: no cover - guard
            raise RuntimeError("pilot reset to x0 did not happen; inoculum too small")
        return daily.sampled if all_days else daily.sampled[:, self.sample_day]

    def residuals(self, x_model):
        """Weighted log residuals sqrt(w) (ln y - ln yhat), shape (..., n_obs)."""
        return self.sqrt_w * (self.log_obs - np.log(np.maximum(x_model, 1e-12)))

    def dates(self) -> pd.DatetimeIndex:
        """Sampling time of each simulated day."""
        return pd.date_range(self.start + pd.Timedelta(hours=self.sample_hour),
                             periods=self.n_days, freq="D")


# --------------------------------------------------------------------------------------
# Pilot fit
# --------------------------------------------------------------------------------------
@dataclass
class PilotFit:
    """Result of :func:`fit_pilot`.

    ``table`` holds estimate, se, ci95_low/high, relative_se, unit, meaning per
    parameter; ``correlation`` the correlation matrix (DataFrame); ``fitted`` the model
    density at the samples [g m-3]; ``residuals`` the weighted log residuals [-];
    ``diagnostics`` RMSE (log), lag-1 autocorrelation, Durbin–Watson, skewness, excess
    kurtosis and the Shapiro–Wilk p-value of the residuals; ``warnings`` plain-language
    warnings; ``model`` the :class:`PilotModel`.
    """

    table: pd.DataFrame
    correlation: pd.DataFrame
    covariance: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    diagnostics: dict
    warnings: list
    notes: list
    model: PilotModel
    growth_form: str
    n_obs: int
    dof: int
    condition_number: float
    n_engine_calls: int
    success: bool
    message: str

    @property
    def estimates(self) -> dict:
        return self.table["estimate"].to_dict()

    def covers(self, truth: dict) -> dict:
        """For each true value given, whether it lies within the 95 % interval."""
        return interval_covers(self.table, truth)

    def report(self) -> str:
        """Plain-text report: estimates, correlations, diagnostics, warnings."""
        m = self.model
        obs = m.obs
        lines = [f"pilot fit ({self.growth_form}): {self.n_obs} samples "
                 f"{obs.time[0]:%Y-%m-%d} to {obs.time[-1]:%Y-%m-%d}, "
                 f"{int((m.fraction > 0).sum())} harvest(s), samples at {m.sample_hour:02d}:00,"
                 f" harvests at {m.harvest_hour:02d}:00; {len(self.table)} parameters, "
                 f"{self.dof} degrees of freedom",
                 "weighted least squares on ln(density); 95 % intervals from the Jacobian "
                 "(s^2 (J'J)^-1, Student t)", ""]
        header = f"{'parameter':24s} {'estimate':>12s} {'SE':>10s} {'95 % interval':>25s}  unit"
        lines.append(header)
        for name, r in self.table.iterrows():
            lines.append(f"{name:24s} {r['estimate']:12.5g} {r['se']:10.3g} "
                         f"[{r['ci95_low']:11.5g}, {r['ci95_high']:11.5g}]  {r['unit']}")
        lines += ["", "correlation matrix:", self.correlation.round(3).to_string(), ""]
        d = self.diagnostics
        lines.append(f"residuals (ln): RMSE {d['rmse']:.4f} (~{100 * d['rmse']:.1f} % of the "
                     f"density), mean {d['mean']:+.4f}, lag-1 autocorrelation "
                     f"{d['lag1_autocorrelation']:+.3f}, Durbin-Watson "
                     f"{d['durbin_watson']:.2f}, skewness {d['skewness']:+.2f}, excess "
                     f"kurtosis {d['excess_kurtosis']:+.2f}, Shapiro-Wilk p "
                     f"{d['shapiro_p']:.3f}")
        lo, hi = m.temperature_range
        lines.append(f"water temperature in lit hours over the pilot: {lo:.1f} to {hi:.1f} "
                     "degC")
        lines.append(f"solver: {self.message} ({self.n_engine_calls} engine calls; "
                     f"condition number of J {self.condition_number:.3g})")
        for note in self.notes:
            lines.append(f"note: {note}")
        for w in self.warnings:
            lines.append(f"WARNING: {w}")
        if not self.warnings:
            lines.append("no identifiability warnings")
        return "\n".join(lines)


def default_free(growth_form: str, temperature_range, scenario) -> list[str]:
    """Parameters estimated by default: µmax, light parameter, maintenance, x0, plus
    k_biomass (self_shading) or K (logistic), plus t_opt when the observed water
    temperature brackets the scenario's t_opt."""
    free = ["mu_max_per_d", "light_param_umol_m2_s", "maintenance_per_d"]
    free.append("k_biomass_m2_g" if growth_form == "self_shading" else "capacity_g_m3")
    lo, hi = temperature_range
    if lo < scenario.strain.t_opt_c < hi:
        free.append("t_opt_c")
    return free + ["x0_g_m3"]


def fit_pilot(observations: Observations, scenario, *, model: str | None = None,
              free=None, hourly: pd.DataFrame | None = None, start: dict | None = None,
              sample_hour: int | None = None, max_nfev: int = 60,
              map_weather_year: bool = False) -> PilotFit:
    """Fit growth parameters to pilot observations through the engine.

    Parameters
    ----------
    observations : Observations
        From :func:`read_observations`.
    scenario : pondsim.scenario.Scenario
        Forcing, pond, harvest hour and the values of parameters not fitted (and the
        starting values of those fitted).
    model : {"self_shading", "logistic"}, optional
        Growth form to fit (default: the scenario's).
    free : sequence of str, optional
        Names in :data:`PARAMETERS` to estimate (default :func:`default_free`);
        ``x0_g_m3`` is always estimated.
    hourly : DataFrame, optional
        :func:`pilot_hourly` for the observations' year (computed when omitted).
    start : dict, optional
        Starting values overriding the scenario's.
    sample_hour : int, optional
        Local hour of the samples.
    max_nfev : int
        Most function evaluations of the solver.
    map_weather_year : bool
        Accept a weather file of one real year of another calendar year as the pilot's
        weather (noted in the report); without it that raises :class:`InputError`.

    Returns
    -------
    PilotFit

    Raises
    ------
    InputError
        Unknown model or parameter, too few samples for the parameters, observations
        outside the forcing year.
    """
    form = scenario.strain.growth_form if model is None else model
    if form not in GROWTH_FORMS:
        raise InputError(f"unknown model {form!r}{did_you_mean(str(form), GROWTH_FORMS)}; "
                         f"allowed: {', '.join(GROWTH_FORMS)}", field="--model")
    obs = observations
    if hourly is None:
        hourly = pilot_hourly(scenario, year=int(obs.time[0].year),
                              map_year=map_weather_year)
    probe = PilotModel(obs, scenario, hourly, form, (), sample_hour=sample_hour)
    if free is None:
        free = default_free(form, probe.temperature_range, scenario)
    free = list(dict.fromkeys(list(free) + ["x0_g_m3"]))
    for name in free:
        if name not in PARAMETERS:
            raise InputError(f"unknown parameter {name!r}{did_you_mean(name, PARAMETERS)}; "
                             f"allowed: {', '.join(PARAMETERS)}", field="--fit")
    if form == "logistic" and "k_biomass_m2_g" in free:
        raise InputError("k_biomass_m2_g does not enter the logistic form; fit "
                         "capacity_g_m3 instead", field="--fit")
    if form == "self_shading" and "capacity_g_m3" in free:
        raise InputError("capacity_g_m3 is fitted only with the logistic form (--model "
                         "logistic)", field="--fit")
    p = len(free)
    if obs.n < p + 2:
        raise InputError(f"{obs.n} density samples are too few to fit {p} parameters "
                         f"({', '.join(free)}); need at least {p + 2}", path=obs.path,
                         field="density")
    pm = PilotModel(obs, scenario, hourly, form, free, sample_hour=probe.sample_hour)
    pm.notes.extend(hourly.attrs.get("notes", []))
    warnings = []
    lo_t, hi_t = pm.temperature_range
    if "t_opt_c" in free and not lo_t < scenario.strain.t_opt_c < hi_t:
        warnings.append(f"t_opt_c: the water temperature over the pilot ({lo_t:.1f}-"
                        f"{hi_t:.1f} degC) does not bracket the optimum; the estimate is an "
                        "extrapolation")
    lower = np.array([pm.bounds(n)[0] for n in free])
    upper = np.array([pm.bounds(n)[1] for n in free])
    theta0 = np.array([(start or {}).get(n, pm.value_of(n)) for n in free], dtype=float)
    theta0 = np.clip(theta0, lower + 1e-9 * (upper - lower), upper - 1e-9 * (upper - lower))
    scale = np.maximum(np.abs(theta0), [PARAMETERS[n].scale * 0.1 for n in free])
    cache: dict = {}

    def evaluate(theta):
        key = theta.tobytes()
        if key not in cache:
            # Central differences: the point and 2p neighbours in one engine call.
            h = 1e-4 * scale
            plus = np.minimum(theta + h, upper)
            minus = np.maximum(theta - h, lower)
            sets = np.vstack([theta, theta + np.diag(plus - theta),
                              theta + np.diag(minus - theta)])
            r = pm.residuals(pm.run(sets))
            jac = (r[1:p + 1] - r[p + 1:]).T / (plus - minus)  # d residual / d theta
            cache.clear()
            cache[key] = (r[0], jac)
        return cache[key]

    def fun(theta):
        return evaluate(theta)[0]

    def jac(theta):
        return evaluate(theta)[1]

    res = optimize.least_squares(fun, theta0, jac=jac, bounds=(lower, upper),
                                 x_scale=scale, method="trf", ftol=1e-10, xtol=1e-10,
                                 gtol=1e-10, max_nfev=max_nfev)
    resid, jmat = evaluate(res.x)
    dof = obs.n - p
    _, cov, cond = ls_covariance(jmat, resid, p)
    units = [PARAMETERS[n].unit for n in free]
    docs = [PARAMETERS[n].doc for n in free]
    docs[free.index("x0_g_m3")] = (f"density at {pm.harvest_hour:02d}:00 on "
                                   f"{pm.start.date()} (start of the simulated pilot)")
    table = parameter_table(free, res.x, cov, dof, units, docs)
    corr = correlation_matrix(cov)
    warnings += identifiability_warnings(table, corr, free)
    span = upper - lower
    for j, name in enumerate(free):
        if min(res.x[j] - lower[j], upper[j] - res.x[j]) < 1e-6 * span[j]:
            warnings.append(f"{name}: at the bound of its allowed range ({lower[j]:g}-"
                            f"{upper[j]:g} {units[j]}); its interval is not valid")
    fitted = np.exp(pm.log_obs - resid / np.where(pm.sqrt_w > 0, pm.sqrt_w, 1.0))
    diag = residual_diagnostics(resid)
    if diag["lag1_autocorrelation"] > 0.5:
        warnings.append(f"residuals are serially correlated (lag-1 "
                        f"{diag['lag1_autocorrelation']:.2f}): the model misses a process "
                        "(or the forcing is off) and the intervals are too narrow")
    if diag["shapiro_p"] < 0.01:
        warnings.append(f"residuals do not look normal (Shapiro-Wilk p "
                        f"{diag['shapiro_p']:.3g}); look for outliers")
    if not res.success:
        warnings.append(f"the solver stopped before converging: {res.message}")
    return PilotFit(table=table, correlation=pd.DataFrame(corr, index=free, columns=free),
                    covariance=cov, fitted=fitted, residuals=resid, diagnostics=diag,
                    warnings=warnings, notes=pm.notes, model=pm, growth_form=form,
                    n_obs=obs.n, dof=dof, condition_number=cond, n_engine_calls=pm.runs,
                    success=bool(res.success), message=str(res.message))


