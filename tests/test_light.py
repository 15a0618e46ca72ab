"""Tests for pondsim.pond.light: surface reflection and PAR at the culture surface."""

from __future__ import annotations

import math
import os

import numpy as np
import pandas as pd
import pvlib
import pytest

from pondsim.errors import InputError
from pondsim.pond import light

ASTM_G173_CSV = os.path.join(os.path.dirname(pvlib.__file__), "data", "ASTMG173.csv")


def _astm_integrals_by_hand():
    """Integrate the shipped CSV with pandas + numpy only (independent of light.py)."""
    table = pd.read_csv(ASTM_G173_CSV, skiprows=1)
    wl = table["wavelength"].to_numpy(dtype=float)
    e = table["global"].to_numpy(dtype=float)
    band = (wl >= 400) & (wl <= 700)
    total = np.trapezoid(e, wl)
    par = np.trapezoid(e[band], wl[band])
    # photon energy h c / λ; CODATA 2018 exact constants
    h, c, na = 6.62607015e-34, 299792458.0, 6.02214076e23
    photons = np.trapezoid(e[band] / (h * c / (wl[band] * 1e-9)), wl[band]) / na
    return par / total, photons / par * 1e6, total


# --- Fresnel ---------------------------------------------------------------------------

def test_normal_incidence_reflectance():
    # REFERENCES.md [R]: R(0°) = ((n − 1)/(n + 1))² = 0.0204 for n = 1.333 (Born & Wolf)
    n = 1.333
    assert light.fresnel_reflectance(0.0, n) == pytest.approx(((n - 1) / (n + 1)) ** 2,
                                                              rel=1e-12)
    assert round(light.fresnel_reflectance(0.0), 4) == 0.0204


def test_reflectance_matches_sin_tan_form():
    # Fresnel's equations in the sin/tan form (Born & Wolf 1999, eqs. 1.5.21a-b), written
    # out independently of the cosine form used in light.py.
    theta = np.radians(np.array([10.0, 35.0, 53.1, 70.0, 85.0]))
    n = 1.333
    theta_t = np.arcsin(np.sin(theta) / n)
    rs = np.sin(theta - theta_t) ** 2 / np.sin(theta + theta_t) ** 2
    rp = np.tan(theta - theta_t) ** 2 / np.tan(theta + theta_t) ** 2
    np.testing.assert_allclose(light.fresnel_reflectance(np.degrees(theta), n),
                               0.5 * (rs + rp), rtol=1e-10)


def test_reflectance_rises_monotonically_to_one():
    # REFERENCES.md [R]: R rises monotonically to 1 at 90° (Fresnel)
    z = np.linspace(0.0, 90.0, 901)
    r = light.fresnel_reflectance(z)
    assert np.all(np.diff(r) > 0)
    assert r[-1] == 1.0
    assert light.fresnel_reflectance(120.0) == 1.0


def test_reflectance_types_and_nan():
    s = pd.Series([0.0, np.nan, 60.0], index=list("abc"))
    out = light.fresnel_reflectance(s)
    assert isinstance(out, pd.Series) and list(out.index) == list("abc")
    assert np.isnan(out["b"]) and out["a"] == light.fresnel_reflectance(0.0)
    assert isinstance(light.fresnel_reflectance(30.0), float)
    arr = light.fresnel_reflectance(np.array([[0.0, 30.0], [60.0, 90.0]]))
    assert arr.shape == (2, 2)


def test_bad_refractive_index():
    with pytest.raises(InputError, match="refractive"):
        light.fresnel_reflectance(10.0, n=0.9)


def test_diffuse_reflectance():
    # REFERENCES.md [R]: uniform-sky ∫R(θ) sin 2θ dθ = 0.066 for n = 1.333
    rd = light.diffuse_reflectance(1.333)
    assert round(rd, 3) == light.DIFFUSE_REFLECTANCE == 0.066
    # Independent check: midpoint rule in cos θ (sin 2θ dθ = −d(cos² θ)).
    mu = (np.arange(200_000) + 0.5) / 200_000
    r = light.fresnel_reflectance(np.degrees(np.arccos(mu)))
    assert rd == pytest.approx(np.sum(r * 2 * mu) / mu.size, abs=1e-6)
    # Payne (1972) J. Atmos. Sci. 29:959-970: measured 0.061 ± 0.005 under overcast;
    # a uniform sky (brighter near the horizon than an overcast one) reflects a little
    # more, so allow 0.001 above the upper end.
    assert 0.061 - 0.005 <= rd <= 0.061 + 0.005 + 0.001


# --- ASTM G173 integrals ----------------------------------------------------------------

def test_par_fraction_astm_g173():
    fraction, _, total = _astm_integrals_by_hand()
    assert light.par_fraction_astm_g173() == pytest.approx(fraction, rel=1e-9)
    # pvlib get_reference_spectra docstring: the global spectrum integrates to
    # about 1000.37 W m-2.
    assert total == pytest.approx(1000.37, abs=0.01)
    # Szeicz (1974) J. Appl. Ecol. 11:617-636: 0.50 ± 0.03; Jacovides et al. (2003)
    # Theor. Appl. Climatol. 74:227-233: 0.454, both measured under mixed skies. The
    # clear-sky AM1.5 spectrum is redder (0.430 here), so the check allows 0.05 below
    # the lower published end.
    assert 0.45 - 0.05 <= light.par_fraction_astm_g173() <= 0.50 + 0.03


def test_photons_per_joule_astm_g173():
    _, per_joule, _ = _astm_integrals_by_hand()
    assert light.photons_per_joule_par_astm_g173() == pytest.approx(per_joule, rel=1e-9)
    # Thimijan & Heins (1983) HortScience 18:818-822, Table 3: 4.57 µmol J-1 for sunlight.
    assert light.photons_per_joule_par_astm_g173() == pytest.approx(4.57, rel=0.02)


def test_flat_spectrum_photons_per_joule():
    # REFERENCES.md [R]: a spectrum flat in energy over 400-700 nm gives 4.598 µmol J-1;
    # the Planck-constant arithmetic used by light.py applied to that spectrum.
    wl = np.linspace(400e-9, 700e-9, 3001)
    per_joule = np.trapezoid(wl, wl) / (light._PLANCK * light._LIGHT_SPEED
                                        * light._AVOGADRO) / (wl[-1] - wl[0]) * 1e6
    assert per_joule == pytest.approx(4.598, abs=0.0005)


# --- transmitted shortwave and PAR -------------------------------------------------------

def test_transmitted_shortwave_decomposition():
    ghi, dhi, z = 800.0, 200.0, 40.0
    expected = (ghi - dhi) * (1 - light.fresnel_reflectance(z)) \
        + dhi * (1 - light.diffuse_reflectance())
    assert light.transmitted_shortwave(ghi, dhi, z) == pytest.approx(expected, rel=1e-12)
    # Energy bound: the water never receives more than ghi, and at normal incidence
    # loses the Fresnel share of the beam (REFERENCES.md [R], 0.0204).
    assert light.transmitted_shortwave(1000.0, 0.0, 0.0) == pytest.approx(
        1000.0 * (1 - 0.0204), abs=0.1)


def test_night_gives_zero():
    out = light.transmitted_shortwave(np.array([5.0, 0.0, -2.0, 300.0]),
                                      np.array([5.0, 0.0, 0.0, 100.0]),
                                      np.array([92.0, 60.0, 60.0, 90.0]))
    np.testing.assert_array_equal(out, 0.0)


def test_transmitted_series_and_nan():
    idx = pd.date_range("2025-06-01 10:00", periods=3, freq="h", tz="Etc/GMT+5")
    out = light.transmitted_shortwave(pd.Series([500.0, np.nan, 400.0], idx),
                                      pd.Series([100.0, 100.0, 500.0], idx),
                                      pd.Series([30.0, 30.0, 30.0], idx))
    assert isinstance(out, pd.Series) and out.index.equals(idx)
    assert np.isnan(out.iloc[1])
    # dhi above ghi is treated as all-diffuse ghi
    assert out.iloc[2] == pytest.approx(400.0 * (1 - light.diffuse_reflectance()))


def _forcing(days=2):
    idx = pd.date_range("2025-06-01", periods=24 * days, freq="h", tz="Etc/GMT+7")
    hour = idx.hour.to_numpy() + 0.5
    zen = np.clip(np.abs(hour - 12.0) * 15.0 + 20.0, 0, 120)
    ghi = np.where(zen < 90, 900.0 * np.cos(np.radians(zen)), 0.0)
    return pd.DataFrame({"ghi": ghi, "dhi": 0.2 * ghi, "solar_zenith": zen}, index=idx)


def test_par_at_surface_defaults_and_override():
    f = _forcing()
    par = light.par_at_surface(f)
    assert par.name == "par" and par.index.equals(f.index)
    s_t = light.transmitted_shortwave(f["ghi"], f["dhi"], f["solar_zenith"])
    np.testing.assert_allclose(par, s_t * light.par_fraction_astm_g173()
                               * light.photons_per_joule_par_astm_g173())
    assert (par[f["solar_zenith"] >= 90] == 0).all()
    np.testing.assert_allclose(light.par_at_surface(f, 0.5, 4.57), s_t * 0.5 * 4.57)
    # Full summer sun: ~2000 µmol m-2 s-1 of PAR at 1000 W m-2 (common practice)
    one = pd.DataFrame({"ghi": [1000.0], "dhi": [100.0], "solar_zenith": [10.0]},
                       index=f.index[:1])
    assert 1700 < light.par_at_surface(one).iloc[0] < 2300


def test_par_missing_column():
    with pytest.raises(InputError, match="dhi"):
        light.par_at_surface(_forcing().drop(columns="dhi"))


def test_daily_par_by_local_day():
    f = _forcing(days=3)
    par = light.par_at_surface(f)
    daily = light.daily_par(par)
    assert len(daily) == 3 and daily.name == "par_daily"
    # local midnights of a UTC-7 index
    assert (daily.index.hour == 0).all() and str(daily.index.tz) == "Etc/GMT+7"
    first_day = par.iloc[:24].sum() * 3600 / 1e6
    assert daily.iloc[0] == pytest.approx(first_day, rel=1e-12)
    # A clear summer day gives ~40-65 mol m-2 d-1 at the surface (common practice).
    assert 30 < daily.iloc[0] < 70
    assert math.isfinite(daily.sum())
