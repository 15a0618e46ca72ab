"""Tests of pondsim.pond.kinetics: light responses, depth averages, CTMI, maintenance."""

import warnings

import numpy as np
import pytest
from scipy.integrate import quad

from pondsim.errors import InputError
from pondsim.pond import kinetics as kn

# Grid of the depth-average checks: surface PAR [µmol m-2 s-1], attenuation [m-1],
# depth [m]; optical depths from 0.005 to 150.
I0_GRID = (0.0, 1.0, 10.0, 100.0, 500.0, 1000.0, 2500.0)
K_GRID = (0.1, 1.0, 10.0, 100.0, 300.0)
DEPTH_GRID = (0.05, 0.2, 0.5)
PARAMS = {"steele": (50.0, 300.0, 1000.0), "monod": (20.0, 150.0, 600.0),
          "jassby_platt": (10.0, 30.0, 100.0, 400.0)}


def quad_depth_average(f, i0, k, depth, param):
    """Reference: adaptive quadrature (scipy.integrate.quad, QUADPACK) of f(I0 e^-kz)
    over the depth, divided by the depth (definition of the Beer–Lambert depth mean).
    Break points at optical depths 1, 3, 10, 30 help QUADPACK where light dies out."""
    breaks = [s / k for s in (1.0, 3.0, 10.0, 30.0) if s < k * depth]
    value, _ = quad(lambda z: f(i0 * np.exp(-k * z), param), 0.0, depth, epsabs=0.0,
                    epsrel=1e-13, limit=500, points=breaks or None)
    return value / depth


def _grid():
    i0, k, d = np.meshgrid(I0_GRID, K_GRID, DEPTH_GRID, indexing="ij")
    return i0.ravel(), k.ravel(), d.ravel()


def _relative_error(got, ref):
    ref = np.asarray(ref)
    return np.abs(got - ref) / np.where(ref > 0, ref, 1.0)


# --------------------------------------------------------------------------------------
# Point values of the light responses
# --------------------------------------------------------------------------------------
def test_steele_point_values():
    got = kn.steele(np.array([150.0, 300.0, 600.0, 900.0]), 300.0)
    # Steele (1962) Limnol. Oceanogr. 7:137-150, f = (I/Iopt) exp(1 - I/Iopt); values
    # recomputed in REFERENCES.md [R]; f(Iopt) = 1 by the formula.
    np.testing.assert_allclose(got, [0.824361, 1.0, 0.735759, 0.406006], rtol=0, atol=5e-7)


def test_monod_and_jassby_platt_at_their_parameter():
    # Monod/Tamiya form (Tamiya et al. 1953): f(K_I) = 1/2 by the formula.
    assert kn.monod(120.0, 120.0) == pytest.approx(0.5, rel=1e-15)
    # Jassby & Platt (1976) Limnol. Oceanogr. 21:540-547: f(I_k) = tanh(1) = 0.761594
    # (recomputed [R]).
    assert kn.jassby_platt(80.0, 80.0) == pytest.approx(0.761594, abs=5e-7)


@pytest.mark.parametrize("name", sorted(kn.LIGHT_RESPONSES))
def test_light_responses_are_in_unit_interval_and_zero_in_the_dark(name):
    i = np.linspace(0.0, 3000.0, 301)
    f = kn.light_response(name, i, 150.0)
    assert f[0] == 0.0
    assert np.all((f >= 0) & (f <= 1))


def test_light_response_dispatch_and_errors():
    i = np.array([0.0, 50.0, 400.0])
    np.testing.assert_array_equal(kn.light_response("steele", i, 200.0), kn.steele(i, 200.0))
    np.testing.assert_array_equal(kn.light_response(lambda i, p: i / (i + p), i, 50.0),
                                  kn.monod(i, 50.0))
    with pytest.raises(InputError) as err:
        kn.light_response("stele", i, 200.0)
    message = str(err.value)
    for choice in ("'steele'", "'monod'", "'jassby_platt'", "callable", "did you mean"):
        assert choice in message
    assert isinstance(err.value, ValueError)


def test_attenuation_broadcasts_over_members():
    x = np.array([[0.0, 100.0, 1000.0]])  # (1, time)
    kb = np.array([[0.1], [0.3]])  # (member, 1)
    k = kn.attenuation(x, kb, 2.0)
    assert k.shape == (2, 3)
    # Beer–Lambert with additive extinctions: k = k_biomass X + k_background.
    np.testing.assert_allclose(k[1], 0.3 * x[0] + 2.0)


# --------------------------------------------------------------------------------------
# Depth averages against adaptive quadrature
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["steele", "monod", "jassby_platt"])
def test_depth_average_matches_adaptive_quadrature(name):
    f = kn.LIGHT_RESPONSES[name]
    i0, k, d = _grid()
    worst = 0.0
    for param in PARAMS[name]:
        got = kn.depth_averaged_response(name, i0, k, d, param)
        ref = [quad_depth_average(f, *args, param) for args in zip(i0, k, d, strict=True)]
        worst = max(worst, _relative_error(got, ref).max())
    # Steele closed form (Steele 1962) and Monod closed form, REFERENCES.md; Jassby–Platt
    # by split Gauss–Legendre quadrature. Reference: scipy.integrate.quad.
    assert worst < 1e-9


@pytest.mark.parametrize("name", ["steele", "monod"])
def test_quadrature_path_reproduces_closed_forms(name):
    """A callable goes through the quadrature; it must match the closed form."""
    f = kn.LIGHT_RESPONSES[name]
    i0, k, d = _grid()
    for param in PARAMS[name]:
        closed = kn.depth_averaged_response(name, i0, k, d, param)
        numeric = kn.depth_averaged_response(lambda i, p, f=f: f(i, p), i0, k, d, param)
        # Closed forms of Steele (1962) and Monod (REFERENCES.md).
        assert _relative_error(numeric, closed).max() < 1e-10


def test_jassby_platt_quadrature_in_very_bright_dense_cultures():
    """Surface light up to 10^4 I_k and optical depth up to 150: still ~1e-10."""
    i_k = 10.0
    worst = 0.0
    for ratio in (1e3, 1e4):
        for tau in (0.01, 3.0, 30.0, 150.0):
            got = kn.depth_averaged_response("jassby_platt", ratio * i_k, tau, 1.0, i_k)
            ref = quad_depth_average(kn.jassby_platt, ratio * i_k, tau, 1.0, i_k)
            worst = max(worst, abs(got / ref - 1.0))
    # Reference: scipy.integrate.quad of tanh (Jassby & Platt 1976) over depth.
    assert worst < 1e-9


@pytest.mark.parametrize("name", ["steele", "monod", "jassby_platt"])
def test_depth_average_limits_without_warnings(name):
    f = kn.LIGHT_RESPONSES[name]
    i0 = np.array([0.0, 5.0, 300.0, 2000.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        shallow = kn.depth_averaged_response(name, i0, 0.0, 0.3, 150.0)
        tiny = kn.depth_averaged_response(name, i0, 1e-12, 0.3, 150.0)
        night = kn.depth_averaged_response(name, 0.0, np.array([0.0, 1.0, 1e3]), 0.3, 150.0)
        huge = kn.depth_averaged_response(name, i0, 1e6, 0.3, 150.0)
    # tau -> 0: the mean over depth tends to the surface value (definition of the mean).
    np.testing.assert_allclose(shallow, f(i0, 150.0), rtol=1e-14)
    np.testing.assert_allclose(tiny, f(i0, 150.0), rtol=1e-10)
    np.testing.assert_array_equal(night, 0.0)
    assert np.all(np.isfinite(huge)) and np.all(huge >= 0)
    assert np.all(huge[1:] < 1e-3)


def test_depth_average_broadcasts_member_axis():
    i0 = np.linspace(0.0, 2000.0, 24)[None, :]  # (1, hour)
    param = np.array([[100.0], [300.0], [900.0]])  # (member, 1)
    k = np.array([[5.0], [50.0], [500.0]])
    for name in kn.LIGHT_RESPONSES:
        out = kn.depth_averaged_response(name, i0, k, 0.25, param)
        assert out.shape == (3, 24)
        # Each member equals its own scalar call.
        np.testing.assert_allclose(
            out[2], kn.depth_averaged_response(name, i0[0], 500.0, 0.25, 900.0), rtol=1e-15)


def test_depth_average_decreases_with_attenuation_for_saturating_responses():
    k = np.geomspace(0.01, 1e3, 200)
    for name in ("monod", "jassby_platt"):
        f = kn.depth_averaged_response(name, 1500.0, k, 0.3, 100.0)
        # d<f>/dtau = (f(bottom) - <f>)/tau <= 0 for a non-decreasing f (see capacity).
        assert np.all(np.diff(f) < 0)


# --------------------------------------------------------------------------------------
# Temperature and maintenance
# --------------------------------------------------------------------------------------
def test_ctmi_check_values():
    t = np.array([10.0, 20.0, 30.0, 33.0])
    # Rosso, Lobry & Flandrois (1993) J. Theor. Biol. 162:447-463, CTMI with
    # (Tmin, Topt, Tmax) = (5, 27, 35) °C; values recomputed in REFERENCES.md [R].
    np.testing.assert_allclose(kn.ctmi(t, 5.0, 27.0, 35.0),
                               [0.102191, 0.703711, 0.899022, 0.509091], rtol=0, atol=5e-7)


def test_ctmi_cardinal_points():
    t = np.array([-10.0, 4.9, 5.0, 27.0, 35.0, 35.1, 60.0])
    phi = kn.ctmi(t, 5.0, 27.0, 35.0)
    # Rosso et al. (1993): 0 at and outside Tmin and Tmax, 1 at Topt.
    np.testing.assert_array_equal(phi[[0, 1, 2, 4, 5, 6]], 0.0)
    assert phi[3] == pytest.approx(1.0, rel=1e-15)
    fine = kn.ctmi(np.linspace(5.0, 35.0, 3001), 5.0, 27.0, 35.0)
    assert np.all((fine >= 0) & (fine <= 1 + 1e-15))
    assert np.argmax(fine) == 2200  # the maximum sits at Topt = 27 °C


def test_ctmi_member_parameters_and_bad_cardinals():
    t = np.array([[10.0, 20.0, 30.0]])
    t_opt = np.array([[25.0], [27.0]])
    out = kn.ctmi(t, 5.0, t_opt, 35.0)
    assert out.shape == (2, 3)
    np.testing.assert_allclose(out[1], kn.ctmi(t[0], 5.0, 27.0, 35.0))
    with pytest.raises(InputError):
        kn.ctmi(t, 30.0, 27.0, 35.0)
    with pytest.raises(InputError, match="midpoint"):
        kn.ctmi(t, 10.0, 20.0, 40.0)  # Topt below (Tmin + Tmax)/2: the curve has a pole


def test_maintenance_rate():
    t = np.array([10.0, 20.0, 30.0])
    m = kn.maintenance_rate(t, 0.05)
    assert m[1] == pytest.approx(0.05, rel=1e-15)
    # theta^(T - Tref): a 10 °C rise multiplies by theta^10.
    assert m[2] / m[1] == pytest.approx(1.07 ** 10, rel=1e-12)
    assert m[1] / m[0] == pytest.approx(1.07 ** 10, rel=1e-12)
    # Common practice: a Q10 near 2 for biological rates; theta = 1.07 gives 1.97.
    assert 1.8 < m[2] / m[1] < 2.2
    # Eppley (1972) Fish. Bull. 70:1063-1085: log10 mu = 0.0275 T - 0.070, i.e. 1.0654
    # per °C (from memory); the default theta is close to it.
    assert abs(1.07 - 10 ** 0.0275) < 0.01


# --------------------------------------------------------------------------------------
# Specific rates
# --------------------------------------------------------------------------------------
def test_self_shading_rate_composition_and_night():
    x = np.array([1.0, 100.0, 1000.0])
    kw = dict(mu_max=1.5, model="steele", param=250.0, k_biomass=0.2, k_background=3.0,
              depth_m=0.2)
    day = kn.specific_growth_self_shading(x, 800.0, 0.9, 0.05, **kw)
    k = 0.2 * x + 3.0
    expected = 1.5 * 0.9 * kn.depth_averaged_response("steele", 800.0, k, 0.2, 250.0) - 0.05
    np.testing.assert_allclose(day, expected, rtol=1e-15)
    night = kn.specific_growth_self_shading(x, 0.0, 0.9, 0.05, **kw)
    np.testing.assert_array_equal(night, -0.05)  # respiration acts at night


def test_logistic_r_surface_and_clear_culture():
    i0 = np.array([0.0, 100.0, 600.0, 1800.0])
    r = kn.specific_growth_logistic_r(i0, 0.8, mu_max=1.2, model="jassby_platt", param=150.0)
    np.testing.assert_allclose(r, 1.2 * 0.8 * np.tanh(i0 / 150.0), rtol=1e-15)
    # With the clear-water optical depth, r is the self-shading gross rate as X -> 0.
    r_clear = kn.specific_growth_logistic_r(i0, 0.8, mu_max=1.2, model="steele", param=300.0,
                                            optical_depth=2.0 * 0.25)
    gross0 = kn.specific_growth_self_shading(0.0, i0, 0.8, 0.0, mu_max=1.2, model="steele",
                                             param=300.0, k_biomass=0.2, k_background=2.0,
                                             depth_m=0.25)
    np.testing.assert_allclose(r_clear, gross0, rtol=1e-14)
