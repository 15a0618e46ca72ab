"""Tests of pondsim.pond.capacity: daily carrying capacity, K-drop index, monthly K table."""


import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from pondsim.errors import InputError
from pondsim.pond import capacity as cp
from pondsim.pond import kinetics as kn

HOURS = np.arange(24) + 0.5  # middle of each hour [h]
STRAIN = dict(mu_max=1.4, param=250.0, k_biomass=0.2, k_background=3.0, depth_m=0.25)


def day_forcing(peak_par=1800.0, day_length_h=13.0, t_mean=24.0, t_swing=4.0, m_ref=0.05,
                t_min=5.0, t_opt=27.0, t_max=35.0):
    """One synthetic day: a cosine PAR bell, a sinusoidal water temperature.

    Returns PAR [µmol m-2 s-1], f_T [1] and maintenance [d-1], each shaped (1, 24).
    """
    sun = np.clip(np.cos(np.pi * (HOURS - 12.0) / day_length_h), 0.0, None)
    par = peak_par * sun
    temp = t_mean + t_swing * np.sin(2.0 * np.pi * (HOURS - 9.0) / 24.0)
    ft = kn.ctmi(temp, t_min, t_opt, t_max)
    maint = kn.maintenance_rate(temp, m_ref)
    return par[None, :], ft[None, :], maint[None, :]


def year_forcing(n_days=365, seed=0):
    """A synthetic year (n_days, 24) with seasonal light, temperature and cloud."""
    rng = np.random.default_rng(seed)
    doy = np.arange(n_days)
    day_length = 12.0 + 3.0 * np.sin(2 * np.pi * (doy - 80) / 365)
    peak = 1400.0 + 600.0 * np.sin(2 * np.pi * (doy - 80) / 365)
    sun = np.clip(np.cos(np.pi * (HOURS[None, :] - 12.0) / day_length[:, None]), 0.0, None)
    par = peak[:, None] * sun * rng.uniform(0.3, 1.0, (n_days, 1))
    temp = (18.0 + 8.0 * np.sin(2 * np.pi * (doy - 100) / 365)[:, None]
            + 4.0 * np.sin(2 * np.pi * (HOURS - 9.0) / 24.0)[None, :])
    return par, kn.ctmi(temp, 5.0, 27.0, 35.0), kn.maintenance_rate(temp, 0.05)


def net_rate(x, forcing, model, **strain):
    """Mean net specific rate of one day at density x [d-1] (scalar)."""
    return float(cp.daily_net_growth_rate(x, *forcing, model=model, **strain)[0])


def direct_daily_rate(x, forcing, model, **s):
    """The day's mean net rate written out from kinetics (independent of capacity.py)."""
    par, ft, maint = (a[0] for a in forcing)
    rate = kn.specific_growth_self_shading(x, par, ft, maint, mu_max=s["mu_max"],
                                           model=model, param=s["param"],
                                           k_biomass=s["k_biomass"],
                                           k_background=s["k_background"],
                                           depth_m=s["depth_m"])
    return float(np.mean(rate))


# --------------------------------------------------------------------------------------
# The root
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("model", ["steele", "monod", "jassby_platt"])
@pytest.mark.parametrize("peak,t_mean", [(2000.0, 26.0), (900.0, 20.0), (300.0, 12.0)])
def test_k_zeroes_the_daily_net_growth_like_brentq(model, peak, t_mean):
    forcing = day_forcing(peak_par=peak, t_mean=t_mean)
    k = cp.daily_carrying_capacity(*forcing, model=model, **STRAIN)
    assert k.shape == (1,)
    # The net rate used by the solver is the mean of the kinetics' hourly rate.
    assert net_rate(150.0, forcing, model, **STRAIN) == pytest.approx(
        direct_daily_rate(150.0, forcing, model, **STRAIN), rel=1e-12)
    ref = brentq(lambda x: direct_daily_rate(x, forcing, model, **STRAIN), 1e-6, 5000.0,
                 xtol=1e-10, rtol=1e-12)
    # Reference: scipy.optimize.brentq on the same daily balance, one day at a time.
    assert k[0] == pytest.approx(ref, rel=1e-6)
    assert abs(direct_daily_rate(k[0], forcing, model, **STRAIN)) < 1e-8


@pytest.mark.parametrize("model", ["monod", "jassby_platt"])
def test_daily_net_growth_decreases_with_density_for_saturating_responses(model):
    forcing = day_forcing()
    x = np.geomspace(1e-3, 5e3, 120)
    # 120 copies of the day, each at its own density.
    g = cp.daily_net_growth_rate(x, *(np.broadcast_to(a, (120, 24)) for a in forcing),
                                 model=model, **STRAIN)
    assert g.shape == (120,)
    # d<f>/dtau = (f(bottom) - <f>)/tau <= 0 for a non-decreasing f (Notes of
    # daily_carrying_capacity).
    assert np.all(np.diff(g) < 0)


def test_steele_k_is_the_stable_upper_root():
    forcing = day_forcing(peak_par=2200.0)
    strain = dict(STRAIN, param=120.0)  # strongly over-lit surface
    k = cp.daily_carrying_capacity(*forcing, model="steele", **strain)[0]
    assert 0 < k < 5000
    assert net_rate(k * 0.999, forcing, "steele", **strain) > 0
    assert net_rate(k * 1.001, forcing, "steele", **strain) < 0
    x = np.geomspace(k, 5e3, 60)
    g = [net_rate(v, forcing, "steele", **strain) for v in x[1:]]
    assert max(g) < 0  # nothing grows above K


def test_photoinhibited_thin_culture_that_grows_when_dense():
    """Steele: a thin culture under 2000 µmol m-2 s-1 with Iopt = 100 is nearly switched
    off (f = 20 e^-19), but a dense one shades itself into the optimum and grows."""
    par = np.where((HOURS > 6) & (HOURS < 18), 2000.0, 0.0)[None, :]
    forcing = (par, np.ones((1, 24)), np.full((1, 24), 0.05))
    strain = dict(mu_max=1.0, param=100.0, k_biomass=0.2, k_background=0.0, depth_m=0.25)
    assert net_rate(0.0, forcing, "steele", **strain) < 0
    k = cp.daily_carrying_capacity(*forcing, model="steele", **strain)[0]
    ref = brentq(lambda x: net_rate(x, forcing, "steele", **strain), 50.0, 5000.0,
                 xtol=1e-10, rtol=1e-12)
    # Reference: scipy.optimize.brentq bracketing the upper root.
    assert k == pytest.approx(ref, rel=1e-6)


def test_steele_peak_optical_depth():
    """The optical depth where Steele's depth average peaks, against a fine scan of the
    closed form (Steele 1962), and increasing with the surface over-light I0/Iopt."""
    a = np.array([0.5, 1.01, 1.5, 3.0, 10.0, 100.0, 1e4])
    tau_p = cp._steele_peak_tau(a)
    tau = np.linspace(1e-4, 20.0, 200001)
    for a_j, t_j in zip(a, tau_p, strict=True):
        scan = tau[np.argmax(kn.depth_averaged_response("steele", a_j, tau, 1.0, 1.0))]
        expected = 0.0 if a_j <= 1 else scan
        assert t_j == pytest.approx(expected, abs=2e-4)
    assert np.all(np.diff(cp._steele_peak_tau(np.geomspace(1.001, 1e5, 400))) > 0)


def test_photoinhibition_window_above_a_non_growing_thin_culture():
    """Dim-ish day, very low Iopt: net growth is negative for thin cultures, positive
    only between ~8 and ~24 g m-3 (a case found by hypothesis)."""
    forcing = day_forcing(peak_par=340.0, day_length_h=13.0, t_mean=9.0, m_ref=0.15625)
    strain = dict(mu_max=2.25, param=30.0, k_biomass=0.5, k_background=0.0, depth_m=0.5)
    assert net_rate(0.0, forcing, "steele", **strain) < 0
    assert net_rate(15.0, forcing, "steele", **strain) > 0
    k = cp.daily_carrying_capacity(*forcing, model="steele", **strain)[0]
    ref = brentq(lambda x: net_rate(x, forcing, "steele", **strain), 15.0, 5000.0,
                 xtol=1e-12, rtol=1e-12)
    # Reference: scipy.optimize.brentq bracketing the upper root.
    assert k == pytest.approx(ref, rel=1e-6)
    # More background extinction moves the same optical-depth root to a lower density.
    k_bg = cp.daily_carrying_capacity(*forcing, model="steele",
                                      **dict(strain, k_background=1.0))[0]
    assert k_bg == pytest.approx(k - 1.0 / 0.5, rel=1e-6)


def test_callable_response_gives_the_same_k():
    forcing = day_forcing()
    for name in ("steele", "jassby_platt"):
        f = kn.LIGHT_RESPONSES[name]
        k_named = cp.daily_carrying_capacity(*forcing, model=name, **STRAIN)
        k_callable = cp.daily_carrying_capacity(*forcing, model=lambda i, p, f=f: f(i, p),
                                                **STRAIN)
        np.testing.assert_allclose(k_callable, k_named, rtol=1e-8)


def test_k_is_zero_on_a_day_too_cold_or_dark_and_x_max_without_losses():
    cold = day_forcing(t_mean=3.0, t_swing=1.0)  # below Tmin all day: f_T = 0
    assert np.all(cold[1] == 0)
    dark = day_forcing(peak_par=0.0)
    for forcing in (cold, dark):
        for model in kn.LIGHT_RESPONSES:
            assert cp.daily_carrying_capacity(*forcing, model=model, **STRAIN)[0] == 0.0
    par, ft, _ = day_forcing()
    no_loss = cp.daily_carrying_capacity(par, ft, np.zeros((1, 24)), model="steele",
                                         x_max=3000.0, **STRAIN)
    assert no_loss[0] == 3000.0


def test_growth_limited_by_maintenance_gives_zero_k():
    forcing = day_forcing(peak_par=150.0, m_ref=0.8)
    assert net_rate(0.0, forcing, "monod", **STRAIN) < 0
    assert cp.daily_carrying_capacity(*forcing, model="monod", **STRAIN)[0] == 0.0


def test_nutrient_cap_and_nan_day():
    par, ft, m = year_forcing(n_days=20)
    k = cp.daily_carrying_capacity(par, ft, m, model="steele", **STRAIN)
    capped = cp.daily_carrying_capacity(par, ft, m, model="steele", nutrient_limit=120.0,
                                        **STRAIN)
    np.testing.assert_array_equal(capped, np.minimum(k, 120.0))
    assert np.any(k > 120.0) and np.any(k < 120.0)
    par_nan = par.copy()
    par_nan[3, 12] = np.nan
    k_nan = cp.daily_carrying_capacity(par_nan, ft, m, model="steele", **STRAIN)
    assert np.isnan(k_nan[3]) and np.all(np.isfinite(np.delete(k_nan, 3)))


def test_member_axis_shapes_and_members_equal_scalar_runs():
    par, ft, m = year_forcing(n_days=30)
    mu = np.array([0.8, 1.4, 2.0])[:, None, None]
    kbg = np.array([1.0, 3.0, 8.0])[:, None, None]
    strain = dict(STRAIN, mu_max=mu, k_background=kbg)
    k = cp.daily_carrying_capacity(par, ft, m, model="monod", **strain)
    assert k.shape == (3, 30)
    # Forcing with its own member axis too.
    k2 = cp.daily_carrying_capacity(np.broadcast_to(par, (3, 30, 24)), ft, m, model="monod",
                                    **strain)
    np.testing.assert_array_equal(k, k2)
    one = cp.daily_carrying_capacity(par, ft, m, model="monod",
                                     **dict(STRAIN, mu_max=1.4, k_background=3.0))
    np.testing.assert_allclose(k[1], one, rtol=1e-9)
    with pytest.raises(InputError):
        cp.daily_carrying_capacity(par, ft, m, model="monod",
                                   **dict(STRAIN, k_biomass=np.full(24, 0.2)))


def test_year_for_100_parameter_sets_matches_brentq():
    # Speed is measured by the benchmark, not here (a timed unit test fails on a busy machine).
    par, ft, m = year_forcing()
    rng = np.random.default_rng(3)
    size = (100, 1, 1)
    strain = dict(mu_max=rng.uniform(0.5, 2.0, size), param=rng.uniform(100, 500, size),
                  k_biomass=rng.uniform(0.1, 0.3, size), k_background=rng.uniform(0, 10, size),
                  depth_m=0.25)
    k = cp.daily_carrying_capacity(par, ft, m, model="steele", **strain)
    assert k.shape == (100, 365)
    # Spot-check a few members and days against brentq (reference: scipy.optimize).
    for j, d in ((0, 10), (57, 180), (99, 300)):
        s = {key: (v[j, 0, 0] if np.ndim(v) else v) for key, v in strain.items()}
        f = (par[d:d + 1], ft[d:d + 1], m[d:d + 1])
        if 0 < k[j, d] < 5000:
            ref = brentq(lambda x, f=f, s=s: net_rate(x, f, "steele", **s), 1e-6, 5000.0,
                         xtol=1e-10, rtol=1e-12)
            assert k[j, d] == pytest.approx(ref, rel=1e-6)


# --------------------------------------------------------------------------------------
# Invariants
# --------------------------------------------------------------------------------------
days = st.fixed_dictionaries({
    "peak_par": st.floats(0.0, 2500.0),
    "day_length_h": st.floats(8.0, 16.0),
    "t_mean": st.floats(0.0, 36.0),
    "m_ref": st.floats(0.0, 0.4),
})
strains = st.fixed_dictionaries({
    "model": st.sampled_from(sorted(kn.LIGHT_RESPONSES)),
    "mu_max": st.floats(0.1, 3.0),
    "param": st.floats(30.0, 800.0),
    "k_biomass": st.floats(0.05, 0.5),
    "k_background": st.floats(0.0, 20.0),
    "depth_m": st.floats(0.05, 0.5),
})


def _k(forcing, s, **over):
    s = dict(s, **over)
    model = s.pop("model")
    return cp.daily_carrying_capacity(*forcing, model=model, x_max=5000.0, **s)[0]


@settings(max_examples=60, deadline=None)
@given(days, strains, st.floats(1.0, 3.0), st.floats(0.0, 10.0), st.floats(1.0, 3.0))
def test_k_bounds_and_monotonicity(day, s, mu_factor, extra_background, maint_factor):
    forcing = day_forcing(**day)
    k = _k(forcing, s)
    assert 0.0 <= k <= 5000.0
    tol = 1e-5 * max(k, 1.0)
    # More growth capacity cannot lower K; more background extinction or maintenance
    # cannot raise it (see daily_carrying_capacity Notes).
    assert _k(forcing, s, mu_max=s["mu_max"] * mu_factor) >= k - tol
    assert _k(forcing, s, k_background=s["k_background"] + extra_background) <= k + tol
    more_loss = (forcing[0], forcing[1], forcing[2] * maint_factor)
    assert _k(more_loss, s) <= k + tol


@settings(max_examples=40, deadline=None)
@given(days, strains)
def test_k_is_a_sign_change_of_net_growth(day, s):
    forcing = day_forcing(**day)
    k = _k(forcing, s)
    s = dict(s)
    model = s.pop("model")
    if 0 < k < 5000:
        assert net_rate(k * (1 - 1e-4), forcing, model, **s) > 0
        assert net_rate(k * (1 + 1e-4), forcing, model, **s) < 0
    elif k == 0:
        assert net_rate(0.0, forcing, model, **s) <= 0


# --------------------------------------------------------------------------------------
# K-drop index and the monthly table
# --------------------------------------------------------------------------------------
def test_k_drop_index_on_a_step_drop():
    k = np.r_[np.full(10, 1000.0), np.full(10, 250.0)]
    d = cp.k_drop_index(k, window_days=3)
    assert d.shape == k.shape
    np.testing.assert_allclose(d[10:13], np.log(4.0), rtol=1e-14)
    np.testing.assert_array_equal(d[:10], 0.0)
    np.testing.assert_array_equal(d[13:], 0.0)
    rise = cp.k_drop_index(k[::-1], window_days=3)
    np.testing.assert_allclose(rise[10:13], -np.log(4.0), rtol=1e-14)


def test_k_drop_index_floor_nan_and_member_axis():
    k = np.array([[800.0, 800.0, 0.0, 0.0, np.nan, 500.0],
                  [500.0, 400.0, 300.0, 200.0, 100.0, 50.0]])
    d = cp.k_drop_index(k, window_days=1, k_floor=1.0)
    assert d.shape == (2, 6)
    assert d[0, 2] == pytest.approx(np.log(800.0))  # K = 0 floored at 1 g m-3
    assert d[0, 3] == 0.0
    assert np.isnan(d[0, 4]) and np.isnan(d[0, 5])
    np.testing.assert_allclose(d[1, 1:], np.log(k[1, :-1] / k[1, 1:]))
    with pytest.raises(InputError):
        cp.k_drop_index(k, window_days=0)


def test_monthly_table_hits_values_mid_month_and_wraps_the_year():
    table = np.array([100.0, 200, 300, 400, 500, 600, 700, 800, 900, 1000, 1100, 1200])
    for year in (2023, 2024):  # ordinary and leap year
        dates = pd.date_range(f"{year}-01-01", f"{year}-12-31", freq="D")
        k = cp.monthly_k_table(dates, table)
        assert k.shape == (len(dates),)
        on_15th = dates.day == 15
        np.testing.assert_allclose(k[on_15th], table, rtol=1e-14)
        # Linear between anchors: halfway from 15 Jan to 15 Feb (31 days) after 15.5 days.
        jan31 = k[dates.get_loc(pd.Timestamp(f"{year}-01-31"))]
        assert jan31 == pytest.approx(100.0 + 100.0 * 16 / 31, rel=1e-14)
        # Periodic across the year end: 15 Dec -> 15 Jan spans 31 days.
        jan1 = k[0]
        assert jan1 == pytest.approx(1200.0 + (100.0 - 1200.0) * 17 / 31, rel=1e-14)
        assert np.all((k >= 100.0) & (k <= 1200.0))
    feb29 = cp.monthly_k_table(pd.DatetimeIndex(["2024-02-29"]), table)
    assert feb29[0] == pytest.approx(200.0 + 100.0 * 14 / 29, rel=1e-14)


def test_monthly_table_member_axis_time_zone_and_errors():
    dates = pd.date_range("2021-06-01", periods=40, freq="D", tz="Etc/GMT+5")
    table = np.vstack([np.full(12, 300.0), np.arange(1.0, 13.0) * 100.0])
    k = cp.monthly_k_table(dates, table)
    assert k.shape == (2, 40)
    np.testing.assert_allclose(k[0], 300.0)
    assert k[1, 14] == pytest.approx(600.0)  # 15 June, local date
    with pytest.raises(InputError):
        cp.monthly_k_table(dates, np.ones(11))
    with pytest.raises(InputError):
        cp.monthly_k_table(dates, -np.ones(12))
