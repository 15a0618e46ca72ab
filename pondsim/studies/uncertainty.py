"""Uncertain strain parameters: distributions, Latin hypercube draws, Sobol indices.

A scenario's ``[uncertainty]`` table gives some strain parameters a distribution around
the strain's own value (normal: mean; lognormal: median; triangular: mode; uniform: a
range that brackets it). Draws use a Latin hypercube (McKay, Beckman & Conover 1979,
Technometrics 21:239-245) through ``scipy.stats.qmc``; global sensitivity uses the
Saltelli/Jansen estimators of first-order and total Sobol indices as implemented by
``scipy.stats.sobol_indices`` (Sobol' 2001, Math. Comput. Simul. 55:271-280; Saltelli et
al. 2010, Comput. Phys. Commun. 181:259-270).
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from scipy.stats import qmc

from pondsim.errors import InputError


def frozen_distribution(u, centre: float):
    """The scipy distribution of one :class:`pondsim.scenario.Uncertain` entry."""
    if u.distribution == "normal":
        return stats.norm(loc=centre, scale=u.sd)
    if u.distribution == "lognormal":
        if centre <= 0:
            raise InputError("a lognormal distribution needs a positive strain value",
                             field=f"uncertainty.{u.parameter}")
        return stats.lognorm(s=u.sigma, scale=centre)
    if u.distribution == "uniform":
        return stats.uniform(loc=u.low, scale=u.high - u.low)
    if u.distribution == "triangular":
        width = u.high - u.low
        c = 0.5 if width == 0 else (centre - u.low) / width
        return stats.triang(c=c, loc=u.low, scale=width)
    raise InputError(f"unknown distribution {u.distribution!r}",
                     field=f"uncertainty.{u.parameter}")


def distributions(scenario) -> dict:
    """Parameter name -> frozen scipy distribution, in the scenario's order."""
    return {u.parameter: frozen_distribution(u, float(getattr(scenario.strain, u.parameter)))
            for u in scenario.uncertainty.parameters}


def sample_draws(scenario, n_draws: int, seed: int | None) -> dict[str, np.ndarray]:
    """Latin hypercube draws of the uncertain parameters: name -> array (n_draws,).

    Empty when the scenario declares no uncertain parameter.
    """
    dists = distributions(scenario)
    if not dists:
        return {}
    lhs = qmc.LatinHypercube(d=len(dists), seed=np.random.default_rng(seed))
    u = lhs.random(n_draws)
    return {name: dist.ppf(u[:, i]) for i, (name, dist) in enumerate(dists.items())}


def sobol(func, dists: dict, n: int, seed: int | None):
    """First-order and total Sobol indices of a vectorised model.

    Parameters
    ----------
    func : callable
        ``func(x) -> y`` with ``x`` of shape (d, m) (one column per sample) and ``y`` of
        shape (m,).
    dists : dict of name -> frozen scipy distribution
    n : int
        Base sample size (a power of two); the model is evaluated n * (d + 2) times.
    seed : int, optional

    Returns
    -------
    pandas.DataFrame
        Index: parameter names; columns ``first_order``, ``total``, and their bootstrap
        95 % confidence bounds ``first_order_low/high``, ``total_low/high``.
    """
    import pandas as pd

    names = list(dists)
    rng = np.random.default_rng(seed)
    result = stats.sobol_indices(func=func, n=n, dists=[dists[k] for k in names], rng=rng)
    boot = result.bootstrap(confidence_level=0.95, n_resamples=200)
    return pd.DataFrame({
        "first_order": result.first_order, "total": result.total_order,
        "first_order_low": boot.first_order.confidence_interval.low,
        "first_order_high": boot.first_order.confidence_interval.high,
        "total_low": boot.total_order.confidence_interval.low,
        "total_high": boot.total_order.confidence_interval.high,
    }, index=pd.Index(names, name="parameter"))
