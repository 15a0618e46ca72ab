"""Monte Carlo error of exceedance values: order-statistic and nested-bootstrap intervals.

Outside references:
- Hahn & Meeker (1991), Statistical Intervals, Wiley, ch. 5 (from memory for the
  chapter): the distribution-free interval [x_(l), x_(u)] for the p-quantile has coverage
  P(l <= B <= u - 1), B ~ binomial(n, p), for every continuous distribution.
- The median of n = 20 at 95 %: ranks 6 and 15, coverage 0.9586 (the classic table value,
  e.g. Conover 1999, Practical Nonparametric Statistics, 3rd ed., Table A3; from memory).
- Davison & Hinkley (1997), Bootstrap Methods and their Application, sec. 3.8 (from
  memory for the section): resampling the top level of a nested design.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from pondsim.studies.quantiles import (
    EXCEEDANCE,
    format_interval,
    nested_bootstrap,
    order_statistic_interval,
    order_statistic_ranks,
)


def test_median_of_twenty_matches_the_table():
    lo, hi, cover = order_statistic_ranks(20, 0.5, 0.95)
    assert (lo, hi) == (6, 15)          # Conover (1999) Table A3, from memory
    assert cover == pytest.approx(0.9586, abs=5e-4)


@pytest.mark.parametrize("dist, n, p", [(stats.norm(10, 2), 200, 0.1),
                                        (stats.expon(scale=3), 60, 0.5),
                                        (stats.lognorm(0.8), 400, 0.1)])
def test_order_statistic_interval_covers_at_the_stated_rate(dist, n, p):
    """Coverage over 3000 repetitions equals the exact binomial coverage (Hahn & Meeker
    1991, ch. 5) within 3.5 standard errors, and is at least the nominal 95 % less that."""
    rng = np.random.default_rng(11)
    truth = dist.ppf(p)
    reps = 3000
    x = np.sort(dist.rvs(size=(reps, n), random_state=rng), axis=1)
    lo, hi, exact = order_statistic_ranks(n, p, 0.95)
    covered = (x[:, lo - 1] <= truth) & (truth < x[:, hi - 1])
    se = np.sqrt(exact * (1 - exact) / reps)
    assert abs(covered.mean() - exact) < 3.5 * se, (covered.mean(), exact)
    assert exact >= 0.95
    assert covered.mean() > 0.95 - 3.5 * np.sqrt(0.95 * 0.05 / reps)
    # the function gives the same order statistics
    assert order_statistic_interval(x[0], p) == (x[0, lo - 1], x[0, hi - 1])


def test_too_few_members_leave_a_side_open():
    # 10th percentile from 20 samples: B ~ binomial(20, 0.1) puts 12 % on 0, so no lower
    # order statistic bounds it at 95 %
    low, high = order_statistic_interval(np.arange(20.0), 0.1)
    assert np.isnan(low) and np.isfinite(high)
    assert "?" in format_interval("P90", 1.0, low, high, "t ha-1 yr-1")


def test_nested_bootstrap_covers_a_random_effects_quantile():
    """Yield = year effect + draw effect + noise, normal: the population 10th percentile
    is mean - 1.2816 sd_total (normal quantile). Resampling whole years (Davison &
    Hinkley 1997, sec. 3.8) must cover it near the nominal rate, where treating the
    members as independent would not."""
    rng = np.random.default_rng(3)
    sd_y, sd_d, sd_e = 2.0, 1.0, 0.5
    truth = 20 - stats.norm.ppf(0.9) * np.sqrt(sd_y**2 + sd_d**2 + sd_e**2)
    reps, ny, nd, nr = 300, 30, 6, 2
    hits_nested = hits_naive = 0
    for _ in range(reps):
        x = (20 + sd_y * rng.standard_normal((1, ny, 1, 1))
             + sd_d * rng.standard_normal((1, ny, nd, 1))
             + sd_e * rng.standard_normal((1, ny, nd, nr)))
        _, lo, hi = nested_bootstrap(x, [0.1], n_boot=200, seed=int(rng.integers(1e9)))
        hits_nested += lo[0, 0] <= truth <= hi[0, 0]
        nlo, nhi = order_statistic_interval(x.ravel(), 0.1)
        hits_naive += nlo <= truth <= nhi
    # percentile bootstrap of a 10th percentile from 30 clusters: coverage ~0.9 (the
    # method's known small-sample shortfall, common practice), well above the naive one
    assert 0.85 <= hits_nested / reps <= 0.99, hits_nested / reps
    assert hits_naive / reps < hits_nested / reps - 0.1


def test_one_free_level_uses_order_statistics():
    x = np.random.default_rng(0).normal(size=(2, 1, 1, 300))
    point, lo, hi = nested_bootstrap(x, list(EXCEEDANCE.values()))
    for j in range(2):
        for k, q in enumerate(EXCEEDANCE.values()):
            assert (lo[j, k], hi[j, k]) == order_statistic_interval(x[j].ravel(), q)
            assert point[j, k] == pytest.approx(np.quantile(x[j], q))
    assert EXCEEDANCE["P90"] == 0.10       # exceedance: P90 is the 10th percentile


def test_interval_text():
    assert format_interval("P90", 17.31, 15.94, 18.44, "t ha-1 yr-1") == \
        "P90 17.3 t ha-1 yr-1, 95 % CI 15.9\u201318.4"
