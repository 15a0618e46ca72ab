"""The closed-form logistic curve fitted to a batch growth curve without forcing data
(``pondsim fit --model curve``)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize

from pondsim.errors import InputError
from pondsim.studies.fit_statistics import (
    correlation_matrix,
    identifiability_warnings,
    ls_covariance,
    parameter_table,
    residual_diagnostics,
)


# --------------------------------------------------------------------------------------
# Closed-form logistic curve (batch culture without forcing)
# --------------------------------------------------------------------------------------
@dataclass
class CurveFit:
    """Result of :func:`fit_logistic_curve`: ``table`` with r, K, N0 and the derived
    time of steepest growth and maximum sustainable yield (estimate, se, 95 % interval),
    ``correlation`` of r, K, N0, ``fitted``, ``residuals`` and ``diagnostics``."""

    table: pd.DataFrame
    correlation: pd.DataFrame
    covariance: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    diagnostics: dict
    warnings: list
    n_obs: int
    dof: int

    def report(self, time_unit: str = "time unit", density_unit: str = "") -> str:
        lines = [f"logistic curve N(t) = K / (1 + (K/N0 - 1) exp(-r t)), {self.n_obs} points, "
                 f"{self.dof} degrees of freedom; least squares; delta-method intervals", ""]
        for name, r in self.table.iterrows():
            unit = (r["unit"].replace("T", time_unit).replace("N", density_unit or "N"))
            lines.append(f"{name:16s} {r['estimate']:12.5g} ± {r['se']:.3g}  "
                         f"[{r['ci95_low']:.5g}, {r['ci95_high']:.5g}]  {unit}")
        d = self.diagnostics
        lines += ["", f"residuals: RMSE {d['rmse']:.4g}, lag-1 autocorrelation "
                  f"{d['lag1_autocorrelation']:+.3f}, Shapiro-Wilk p {d['shapiro_p']:.3f}"]
        lines += [f"WARNING: {w}" for w in self.warnings]
        return "\n".join(lines)


def logistic_curve(t, r, k, n0):
    a = k / n0 - 1.0
    e = np.exp(-r * t)
    return k / (1.0 + a * e)


def fit_logistic_curve(t, n, *, weights=None, log_residuals: bool = False) -> CurveFit:
    r"""Fit the closed-form logistic curve to a batch growth curve.

    Parameters
    ----------
    t : array-like [any time unit T]
        Times, increasing (e.g. hours since inoculation).
    n : array-like [any density unit N], > 0
        Population or density.
    weights : array-like, optional
        Relative weights of the points.
    log_residuals : bool, default False
        Fit ln N instead of N (for errors proportional to N).

    Returns
    -------
    CurveFit
        ``r`` [T-1], ``K`` [N], ``N0`` [N], ``t_inflection`` [T] = ln(K/N0 − 1)/r (the
        time of steepest growth, N = K/2) and ``msy`` [N T-1] = r K / 4, the largest
        sustainable removal rate (Schaefer 1954), with delta-method standard errors.

    Notes
    -----
    .. math:: N(t) = \frac{K}{1 + (K/N_0 - 1)\,e^{-rt}}

    Derived quantities g(θ) take SE = sqrt(∇gᵀ C ∇g) with C the parameter covariance
    (delta method).
    """
    t = np.asarray(t, dtype=float)
    n = np.asarray(n, dtype=float)
    if t.shape != n.shape or t.ndim != 1:
        raise InputError("times and densities must be 1-D arrays of the same length",
                         field="density")
    if len(t) < 5:
        raise InputError(f"{len(t)} points are too few for the logistic curve (3 "
                         "parameters); need at least 5", field="density")
    if not (np.isfinite(t).all() and np.isfinite(n).all()) or (n <= 0).any():
        raise InputError("densities must be finite and > 0", field="density")
    if (np.diff(t) <= 0).any():
        raise InputError("times must be strictly increasing", field="time")
    w = np.ones_like(n) if weights is None else np.asarray(weights, dtype=float)
    sw = np.sqrt(w)
    # Start: K a little above the largest value, r from the logit line.
    k0 = 1.05 * n.max()
    below = n < 0.95 * k0
    slope, intercept = np.polyfit(t[below], np.log(k0 / n[below] - 1.0), 1)
    r0 = max(-slope, 1e-6 / max(np.ptp(t), 1e-12))
    n00 = k0 / (1.0 + math.exp(intercept))

    def model_jac(theta):
        r, k, n0 = theta
        a = k / n0 - 1.0
        e = np.exp(-r * t)
        d = 1.0 + a * e
        y = k / d
        dy_dr = k * a * t * e / d ** 2
        dy_dk = 1.0 / d - k * e / (n0 * d ** 2)
        dy_dn0 = k * k * e / (n0 ** 2 * d ** 2)
        return y, np.column_stack([dy_dr, dy_dk, dy_dn0])

    def fun(theta):
        y, _ = model_jac(theta)
        return sw * ((np.log(n) - np.log(y)) if log_residuals else (n - y))

    def jac(theta):
        y, jy = model_jac(theta)
        return -(sw[:, None] * (jy / y[:, None] if log_residuals else jy))

    res = optimize.least_squares(fun, [r0, k0, n00], jac=jac,
                                 bounds=([0, 0, 0], [np.inf, np.inf, np.inf]),
                                 x_scale=[r0, k0, n00], ftol=1e-14, xtol=1e-14, gtol=1e-14)
    dof = len(t) - 3
    resid = res.fun
    _, cov, _ = ls_covariance(res.jac, resid, 3)
    r, k, n0 = res.x
    q = k / n0 - 1.0
    t_infl = math.log(q) / r if q > 0 else float("nan")
    grads = {
        "t_inflection": np.array([-t_infl / r, 1.0 / (n0 * q * r), -k / (n0 ** 2 * q * r)]),
        "msy": np.array([k / 4.0, r / 4.0, 0.0]),
    }
    names = ["r", "K", "N0", "t_inflection", "msy"]
    est = np.array([r, k, n0, t_infl, r * k / 4.0])
    g = np.vstack([np.eye(3), grads["t_inflection"], grads["msy"]])
    full_cov = g @ cov @ g.T
    units = ["T-1", "N", "N", "T", "N T-1"]
    docs = ["intrinsic growth rate", "carrying capacity", "initial density (t = 0)",
            "time of steepest growth ln(K/N0 - 1)/r", "maximum sustainable yield r K / 4"]
    table = parameter_table(names, est, full_cov, dof, units, docs)
    corr = correlation_matrix(cov)
    warnings = identifiability_warnings(table.iloc[:3], corr, names[:3])
    fitted = logistic_curve(t, r, k, n0)
    return CurveFit(table=table, correlation=pd.DataFrame(corr, index=names[:3],
                                                          columns=names[:3]),
                    covariance=full_cov, fitted=fitted, residuals=resid,
                    diagnostics=residual_diagnostics(resid), warnings=warnings, n_obs=len(t),
                    dof=dof)


