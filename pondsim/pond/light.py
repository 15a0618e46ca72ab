"""Photosynthetically active radiation (PAR) entering the culture.

Shortwave irradiance on the horizontal is split into its beam and diffuse parts, each
reduced by reflection at the flat water surface (Fresnel's equations for the beam, a
hemispherical average for isotropic sky light), and converted to a PAR photon flux with a
PAR fraction and a photons-per-joule factor integrated from the ASTM G173 reference
spectrum that pvlib ships.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pandas as pd
from scipy import integrate

from pondsim.errors import InputError

#: Reflectance of a flat water surface (n = 1.333) for isotropic sky light [-].
#: Recomputed by :func:`diffuse_reflectance` as 0.0664; Payne (1972) measured
#: 0.061 +/- 0.005 under overcast skies (J. Atmos. Sci. 29:959-970).
DIFFUSE_REFLECTANCE = 0.066

#: Refractive index of water in the visible [-] (Born & Wolf 1999; common practice).
WATER_REFRACTIVE_INDEX = 1.333

# CODATA 2018 exact SI constants.
_PLANCK = 6.62607015e-34  # J s
_LIGHT_SPEED = 299792458.0  # m s-1
_AVOGADRO = 6.02214076e23  # mol-1

_SECONDS_PER_HOUR = 3600.0


def _check_index(n):
    if not (isinstance(n, int | float) and math.isfinite(n) and 1.0 <= n <= 2.0):
        raise InputError(f"refractive index must be a number in 1.0-2.0, got {n!r}",
                         field="refractive_index")
    return float(n)


def _like(template, values, name=None):
    """Return *values* as a Series if *template* is one, else as an ndarray/float."""
    if isinstance(template, pd.Series):
        return pd.Series(values, index=template.index, name=name)
    if np.ndim(values) == 0:
        return float(values)
    return values


def fresnel_reflectance(zenith_deg, n=WATER_REFRACTIVE_INDEX):
    """Unpolarised Fresnel reflectance of a flat water surface.

    Parameters
    ----------
    zenith_deg : float, array-like or pandas.Series [deg]
        Angle of incidence measured from the surface normal (for a horizontal pond, the
        solar zenith angle). Values at or beyond 90 deg give 1; NaN gives NaN.
    n : float, default 1.333 [-]
        Refractive index of the water relative to air.

    Returns
    -------
    float, ndarray or Series [-]
        Fraction of the incident irradiance that is reflected, in the type of the input.

    Notes
    -----
    With the refracted angle θt from Snell's law, sin θi = n sin θt, the reflectances
    for the two polarisations are

    .. math::

        r_s = \\left(\\frac{\\cos θ_i - n\\cos θ_t}{\\cos θ_i + n\\cos θ_t}\\right)^2,\\quad
        r_p = \\left(\\frac{\\cos θ_t - n\\cos θ_i}{\\cos θ_t + n\\cos θ_i}\\right)^2,

    and unpolarised light is reflected by R = (r_s + r_p)/2 ([1], eqs. 1.5.20-21). This
    cosine form equals the usual sin/tan form and has no 0/0 at normal incidence, where
    R = ((n − 1)/(n + 1))² = 0.0204 for n = 1.333.

    References
    ----------
    .. [1] Born, M. & Wolf, E. (1999) *Principles of Optics*, 7th ed., Cambridge
       University Press, section 1.5.3. doi:10.1017/CBO9781139644181
    """
    n = _check_index(n)
    z = np.asarray(zenith_deg, dtype=float)
    # Beyond the horizon (and exactly at grazing) everything is reflected.
    zi = np.radians(np.clip(z, 0.0, 90.0))
    cos_i = np.cos(zi)
    sin_t = np.sin(zi) / n
    cos_t = np.sqrt(1.0 - sin_t * sin_t)  # n >= 1, so never negative under the root
    rs = ((cos_i - n * cos_t) / (cos_i + n * cos_t)) ** 2
    rp = ((cos_t - n * cos_i) / (cos_t + n * cos_i)) ** 2
    r = 0.5 * (rs + rp)
    r = np.where(z >= 90.0, 1.0, r)  # NaN stays NaN: NaN >= 90 is False
    return _like(zenith_deg, r, name="reflectance")


@functools.cache
def diffuse_reflectance(n=WATER_REFRACTIVE_INDEX):
    """Reflectance of a flat water surface for isotropic (uniform) sky light.

    Parameters
    ----------
    n : float, default 1.333 [-]
        Refractive index of the water relative to air.

    Returns
    -------
    float [-]
        Hemispherical reflectance; 0.0664 for n = 1.333 (rounded as
        :data:`DIFFUSE_REFLECTANCE`).

    Notes
    -----
    For radiance independent of direction, the irradiance arriving from zenith angles
    θ..θ+dθ is proportional to cos θ sin θ dθ, whose integral over the hemisphere is 1/2,
    so

    .. math:: R_d = \\int_0^{π/2} R(θ)\\,\\sin 2θ\\,dθ,

    evaluated with adaptive Gauss-Kronrod quadrature (:func:`scipy.integrate.quad`).
    Payne (1972) [1]_ measured 0.061 ± 0.005 for overcast skies, which are brighter at
    the zenith than a uniform sky and so reflect a little less.

    References
    ----------
    .. [1] Payne, R. E. (1972) Albedo of the sea surface. *J. Atmos. Sci.* 29:959-970.
       doi:10.1175/1520-0469(1972)029<0959:AOTSS>2.0.CO;2
    """
    n = _check_index(n)
    value, _ = integrate.quad(
        lambda t: fresnel_reflectance(math.degrees(t), n) * math.sin(2.0 * t),
        0.0, math.pi / 2.0, epsabs=1e-12, epsrel=1e-10)
    return float(value)


@functools.cache
def _astm_g173_par_integrals():
    """(PAR energy, total energy, PAR photons) integrals of ASTM G173 global tilt."""
    from pvlib.spectrum import get_reference_spectra

    spectra = get_reference_spectra()  # W m-2 nm-1 on the native wavelength grid
    wavelength_nm = spectra.index.to_numpy(dtype=float)
    irradiance = spectra["global"].to_numpy(dtype=float)
    par = (wavelength_nm >= 400.0) & (wavelength_nm <= 700.0)
    total_w_m2 = np.trapezoid(irradiance, wavelength_nm)
    par_w_m2 = np.trapezoid(irradiance[par], wavelength_nm[par])
    # photon flux [mol m-2 s-1] = integral of E λ / (h c N_A) dλ
    par_mol_m2_s = np.trapezoid(irradiance[par] * wavelength_nm[par] * 1e-9,
                                wavelength_nm[par]) / (_PLANCK * _LIGHT_SPEED * _AVOGADRO)
    return float(par_w_m2), float(total_w_m2), float(par_mol_m2_s)


def par_fraction_astm_g173():
    """Fraction of shortwave energy in the PAR band (400-700 nm) of ASTM G173.

    Returns
    -------
    float [-]
        ∫ E dλ over 400-700 nm divided by ∫ E dλ over 280-4000 nm of the ASTM G173-03
        *global tilt* spectrum, by the trapezoidal rule on the file's native grid:
        429.83 / 1000.37 W m-2 = 0.4297.

    Notes
    -----
    The global-tilt column (direct plus sky diffuse on a 37° tilted plane, AM1.5) is used
    because a pond receives both beam and sky light; the direct+circumsolar column
    gives 0.416. A clear-sky spectrum is redder than a climatological mix of clear and
    cloudy hours, so this value sits below measured ratios of PAR to global irradiance,
    0.45-0.50 (Szeicz 1974, 50 ± 3 %; Jacovides et al. 2003, 0.454): under cloudy
    climates pass a measured ``par_fraction`` to :func:`par_at_surface`.

    References
    ----------
    .. [1] ASTM G173-03 (2012) Standard Tables for Reference Solar Spectral Irradiances:
       Direct Normal and Hemispherical on 37° Tilted Surface. doi:10.1520/G0173-03R12
    .. [2] Szeicz, G. (1974) Solar radiation for plant growth. *J. Appl. Ecol.*
       11:617-636. doi:10.2307/2402214
    .. [3] Jacovides, C. P. et al. (2003) Global photosynthetically active radiation and
       its relationship with global solar radiation in the Eastern Mediterranean basin.
       *Theor. Appl. Climatol.* 74:227-233. doi:10.1007/s00704-002-0685-5
    """
    par_w_m2, total_w_m2, _ = _astm_g173_par_integrals()
    return par_w_m2 / total_w_m2


def photons_per_joule_par_astm_g173():
    """PAR photons per joule of PAR energy in the ASTM G173 global-tilt spectrum.

    Returns
    -------
    float [µmol J-1]
        4.6015 µmol J-1 from the pvlib-shipped file.

    Notes
    -----
    .. math:: q = \\frac{\\int_{400}^{700} E(λ)\\,λ\\,dλ}{h\\,c\\,N_A\\int_{400}^{700}E(λ)\\,dλ}

    with λ in m and CODATA 2018 values of h, c and N_A, by the trapezoidal rule.
    Thimijan & Heins (1983, Table 3) give 4.57 µmol J-1 for sunlight; a spectrum flat in
    energy over 400-700 nm gives 4.598.

    References
    ----------
    .. [1] Thimijan, R. W. & Heins, R. D. (1983) Photometric, radiometric, and quantum
       light units of measure: a review of procedures for interconversion. *HortScience*
       18:818-822. doi:10.21273/HORTSCI.18.6.818
    """
    par_w_m2, _, par_mol_m2_s = _astm_g173_par_integrals()
    return par_mol_m2_s / par_w_m2 * 1e6


def transmitted_shortwave(ghi, dhi, solar_zenith, n=WATER_REFRACTIVE_INDEX):
    """Shortwave irradiance that passes the water surface.

    Parameters
    ----------
    ghi : float, array-like or Series [W m-2]
        Global horizontal irradiance.
    dhi : float, array-like or Series [W m-2]
        Diffuse horizontal irradiance. Values above ``ghi`` (measurement noise) are
        treated as ``ghi``; the beam part is ``ghi - dhi``, never negative.
    solar_zenith : float, array-like or Series [deg]
        Solar zenith angle, for hour means best taken at mid-hour.
    n : float, default 1.333 [-]
        Refractive index of the water.

    Returns
    -------
    float, ndarray or Series [W m-2]
        Transmitted irradiance; 0 at night (zenith ≥ 90° or ghi ≤ 0); NaN where any input
        is NaN.

    Notes
    -----
    .. math:: S_t = (G - D)\\,[1 - R(θ_z)] + D\\,(1 - R_d)

    with R from :func:`fresnel_reflectance` and R_d from :func:`diffuse_reflectance`.
    Treating the beam part as arriving from the solar zenith ignores the circumsolar
    share of the diffuse light; its error is below 1 % of the reflected part.
    """
    g = np.asarray(ghi, dtype=float)
    d = np.minimum(np.asarray(dhi, dtype=float), g)
    z = np.asarray(solar_zenith, dtype=float)
    beam = np.maximum(g - d, 0.0)
    r_beam = np.asarray(fresnel_reflectance(z, n), dtype=float)
    out = beam * (1.0 - r_beam) + np.maximum(d, 0.0) * (1.0 - diffuse_reflectance(n))
    night = (z >= 90.0) | (g <= 0.0)
    out = np.where(night, 0.0, out)
    template = next((x for x in (ghi, dhi, solar_zenith) if isinstance(x, pd.Series)), ghi)
    return _like(template, out, name="q_shortwave")


def _step_hours(index):
    if not isinstance(index, pd.DatetimeIndex):
        raise InputError("forcing must have a DatetimeIndex", field="index")
    if len(index) < 2:
        return 1.0
    steps = np.asarray((index[1:] - index[:-1]).total_seconds(), dtype=float)
    step = float(steps[0]) / _SECONDS_PER_HOUR
    if step <= 0 or not np.allclose(steps, steps[0]):
        raise InputError("forcing time steps must be uniform and increasing",
                         field="index")
    return step


def par_at_surface(forcing, par_fraction=None, photons_per_joule=None, *,
                   refractive_index=WATER_REFRACTIVE_INDEX):
    """PAR photon flux entering the culture.

    Parameters
    ----------
    forcing : pandas.DataFrame
        Hourly forcing with columns ``ghi``, ``dhi`` [W m-2] and ``solar_zenith`` [deg].
    par_fraction : float, optional [-]
        Share of shortwave energy in 400-700 nm. Default
        :func:`par_fraction_astm_g173` (0.4297).
    photons_per_joule : float, optional [µmol J-1]
        Default :func:`photons_per_joule_par_astm_g173` (4.6015).
    refractive_index : float, default 1.333 [-]

    Returns
    -------
    pandas.Series [µmol m-2 s-1]
        ``par``, indexed like *forcing*; 0 at night.

    Notes
    -----
    PAR = S_t · f_PAR · q with S_t from :func:`transmitted_shortwave`. Fresnel
    reflectance barely changes across 400-700 nm, so reflecting before splitting off the
    PAR band is exact enough.
    """
    missing = [c for c in ("ghi", "dhi", "solar_zenith") if c not in forcing.columns]
    if missing:
        raise InputError(f"forcing lacks column(s) {', '.join(missing)}",
                         field=missing[0])
    f_par = par_fraction_astm_g173() if par_fraction is None else float(par_fraction)
    q = photons_per_joule_par_astm_g173() if photons_per_joule is None \
        else float(photons_per_joule)
    if not 0.0 < f_par <= 1.0:
        raise InputError(f"PAR fraction must be in (0, 1], got {f_par}", field="par_fraction")
    if not 3.0 <= q <= 6.0:
        raise InputError(f"photons per joule must be in 3-6 umol J-1, got {q}",
                         field="photons_per_joule")
    s_t = transmitted_shortwave(forcing["ghi"], forcing["dhi"], forcing["solar_zenith"],
                                refractive_index)
    return pd.Series(s_t.to_numpy() * f_par * q, index=forcing.index, name="par")


def daily_par(par):
    """Daily PAR photon dose by local day.

    Parameters
    ----------
    par : pandas.Series [µmol m-2 s-1]
        Step-mean PAR with a uniform, tz-aware DatetimeIndex in local standard time whose
        timestamps label the start of each step.

    Returns
    -------
    pandas.Series [mol m-2 d-1]
        ``par_daily`` indexed by local midnight. A partial first or last day sums only the
        steps present.
    """
    step_h = _step_hours(par.index)
    dose = par.groupby(par.index.floor("D")).sum(min_count=1) * step_h * _SECONDS_PER_HOUR
    dose = dose * 1e-6
    dose.name = "par_daily"
    return dose
