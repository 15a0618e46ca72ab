"""Uncertain strain parameters: distributions, Latin hypercube draws, Sobol indices.

A scenario's ``[uncertainty]`` table gives some strain parameters a distribution around
the strain's own value (normal: mean; lognormal: median; triangular: mode; uniform: a
range that brackets it). Draws use a Latin hypercube (McKay, Beckman & Conover 1979,
Technometrics 21:239-245) through ``scipy.stats.qmc``; global sensitivity uses the
Saltelli/Jansen estimators of first-order and total Sobol indices as implemented by
``scipy.stats.sobol_indices`` (Sobol' 2001, Math. Comput. Simul. 55:271-280; Saltelli et
al. 2010, Comput. Phys. Commun. 181:259-270).

Every distribution is truncated to the strain key's allowed range in the scenario schema
(a draw outside it would be refused by the scenario itself); when the range cuts away more
than ``[uncertainty] max_cut_share`` of the distribution, the scenario is refused instead,
since the truncated distribution would no longer be the one the user described. Draws
that break the cardinal-temperature order t_min < t_opt < t_max (Rosso et al. 1993) are
redrawn, or refused when more than that share of them break it.
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from scipy.stats import qmc

from pondsim.errors import InputError
from pondsim.scenario.schema import SCHEMA

#: Sobol intervals wider than this [1] are flagged as not converged (chosen for pondsim:
#: an index known only to +-0.1 cannot rank parameters).
SOBOL_WIDE = 0.2


class Truncated:
    """A scipy distribution truncated to ``[low, high]``, with ``ppf``, ``cdf``, ``rvs``
    and ``mean``/``var``.

    ``ppf(u) = F^-1(F(low) + u (F(high) - F(low)))`` (inverse-transform sampling of a
    truncated distribution, e.g. Devroye 1986, Non-Uniform Random Variate Generation,
    ch. II; from memory for the chapter).
    """

    def __init__(self, dist, low: float, high: float):
        self.dist, self.low, self.high = dist, float(low), float(high)
        self.f_low = float(dist.cdf(low))
        self.f_high = float(dist.cdf(high))
        self.mass = self.f_high - self.f_low

    def ppf(self, u):
        x = self.dist.ppf(self.f_low + np.asarray(u, dtype=float) * self.mass)
        return np.clip(x, self.low, self.high)

    def cdf(self, x):
        return np.clip((self.dist.cdf(x) - self.f_low) / self.mass, 0.0, 1.0)

    def rvs(self, size=None, random_state=None):
        rng = np.random.default_rng(random_state)
        return self.ppf(rng.random(size))

    def _moment(self, k):
        from scipy import integrate

        val, _ = integrate.quad(lambda x: x ** k * self.dist.pdf(x), self.low, self.high,
                                limit=200)
        return val / self.mass

    def mean(self):
        return self._moment(1)

    def var(self):
        return self._moment(2) - self.mean() ** 2


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


def bounded(u, centre: float, max_cut_share: float, path=None):
    """The distribution of one uncertain parameter truncated to its schema range.

    Raises
    ------
    InputError
        When the range ``[low, high]`` of ``strain.<parameter>`` cuts away more than
        ``max_cut_share`` of the distribution.
    """
    dist = frozen_distribution(u, centre)
    key = SCHEMA["strain"][u.parameter]
    low, high = float(key.low), float(key.high)
    trunc = Truncated(dist, low, high)
    cut = 1.0 - trunc.mass
    if cut > max_cut_share:
        raise InputError(f"{100 * cut:.1f} % of this {u.distribution} distribution lies "
                         f"outside the allowed range [{low:g}, {high:g}] {key.unit} of "
                         f"strain.{u.parameter} (at most {100 * max_cut_share:g} % may be "
                         "cut away, uncertainty.max_cut_share): narrow the distribution",
                         path=path, field=f"uncertainty.{u.parameter}")
    return trunc


def distributions(scenario) -> dict:
    """Parameter name -> distribution truncated to the schema range, in the scenario's
    order (:func:`bounded`)."""
    share = scenario.uncertainty.max_cut_share
    return {u.parameter: bounded(u, float(getattr(scenario.strain, u.parameter)), share,
                                 scenario.path)
            for u in scenario.uncertainty.parameters}


def _cardinal_ok(draws: dict, strain) -> np.ndarray:
    """Rows whose temperatures keep t_min < t_opt < t_max with t_opt above the
    mid-range (the condition of Rosso et al. 1993 that the engine also checks)."""
    n = len(next(iter(draws.values())))
    t = {k: draws.get(k, np.full(n, float(getattr(strain, k))))
         for k in ("t_min_c", "t_opt_c", "t_max_c")}
    return ((t["t_min_c"] < t["t_opt_c"]) & (t["t_opt_c"] < t["t_max_c"])
            & (t["t_opt_c"] > 0.5 * (t["t_min_c"] + t["t_max_c"])))


def sample_draws(scenario, n_draws: int, seed: int | None, *,
                 n_years: int | None = None) -> dict[str, np.ndarray]:
    """Latin hypercube draws of the uncertain parameters: name -> array (n_draws,), or
    (n_years, n_draws) with ``n_years``: every weather year its own draws, one Latin
    hypercube of ``n_years * n_draws`` points over them all.

    Empty when the scenario declares no uncertain parameter.
    """
    dists = distributions(scenario)
    if not dists:
        return {}
    rng = np.random.default_rng(seed)
    lhs = qmc.LatinHypercube(d=len(dists), seed=rng)
    total = n_draws * (n_years or 1)
    u = lhs.random(total)
    draws = {name: dist.ppf(u[:, i]) for i, (name, dist) in enumerate(dists.items())}
    bad = ~_cardinal_ok(draws, scenario.strain)
    share = scenario.uncertainty.max_cut_share
    if bad.any():
        # the share that breaks the order, from a large sample of the marginals (so the
        # decision does not depend on how many draws were asked for)
        check = np.random.default_rng(0).random((20000, len(dists)))
        probe = {name: dist.ppf(check[:, i]) for i, (name, dist) in enumerate(dists.items())}
        p_bad = float(np.mean(~_cardinal_ok(probe, scenario.strain)))
        if p_bad > share:
            raise InputError(f"{100 * p_bad:.1f} % of parameter draws would break t_min_c "
                             "< t_opt_c < t_max_c with t_opt_c above the mid-range (Rosso "
                             "et al. 1993), more than uncertainty.max_cut_share = "
                             f"{share:g}: narrow the temperature distributions",
                             path=scenario.path, field="uncertainty")
    for _ in range(100):  # redraw the few offending rows (plain Monte Carlo for them)
        if not bad.any():
            break
        for name, dist in dists.items():
            draws[name][bad] = dist.ppf(rng.random(int(bad.sum())))
        bad = ~_cardinal_ok(draws, scenario.strain)
    if n_years is not None:
        draws = {k: v.reshape(n_years, n_draws) for k, v in draws.items()}
    return draws


def sobol(func, dists: dict, n: int, seed: int | None, *, confidence: float = 0.95,
          n_resamples: int = 400):
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
        Index: parameter names; columns ``first_order``, ``total``, their bootstrap
        confidence bounds ``first_order_low/high``, ``total_low/high`` (percentile
        bootstrap over the base samples, scipy's ``SobolResult.bootstrap``), and two
        flags: ``total_below_first`` (the total index lies below the first-order one
        beyond both intervals, impossible for the true indices, so the sample is too
        small) and ``wide`` (an interval wider than :data:`SOBOL_WIDE`). The frame's
        ``attrs["warnings"]`` holds one sentence per flagged parameter.
    """
    import pandas as pd

    names = list(dists)
    rng = np.random.default_rng(seed)
    result = stats.sobol_indices(func=func, n=n, dists=[dists[k] for k in names], rng=rng)
    boot = result.bootstrap(confidence_level=confidence, n_resamples=n_resamples)
    table = pd.DataFrame({
        "first_order": result.first_order, "total": result.total_order,
        "first_order_low": boot.first_order.confidence_interval.low,
        "first_order_high": boot.first_order.confidence_interval.high,
        "total_low": boot.total_order.confidence_interval.low,
        "total_high": boot.total_order.confidence_interval.high,
    }, index=pd.Index(names, name="parameter"))
    table["total_below_first"] = table["total_high"] < table["first_order_low"]
    table["wide"] = ((table["first_order_high"] - table["first_order_low"] > SOBOL_WIDE)
                     | (table["total_high"] - table["total_low"] > SOBOL_WIDE))
    notes = []
    for name, r in table.iterrows():
        if r["total_below_first"]:
            notes.append(f"{name}: total index {r['total']:.2f} below first order "
                         f"{r['first_order']:.2f} beyond their intervals")
        elif r["wide"]:
            notes.append(f"{name}: interval wider than {SOBOL_WIDE:g}")
    if notes:
        notes.append(f"Sobol indices not converged at {n} base samples; raise the samples "
                     "(--sobol-samples or uncertainty.sobol_samples)")
    table.attrs["warnings"] = notes
    table.attrs["samples"] = int(n)
    return table
