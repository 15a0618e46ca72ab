"""Heat and vapour transfer between the pond surface and the air.

Wind at 2 m (FAO-56), the latent heat of vaporisation, and the surface transfer models
(wind functions) that turn a vapour-pressure difference into a latent heat flux.

References
----------
Allen, R. G., Pereira, L. S., Raes, D. & Smith, M. (1998) *Crop evapotranspiration:
guidelines for computing crop water requirements*. FAO Irrigation and Drainage Paper 56.

Shuttleworth, W. J. (1993) Evaporation. In Maidment, D. R. (ed.) *Handbook of
Hydrology*, ch. 4. McGraw-Hill.
"""

from __future__ import annotations

import math

import numpy as np

from pondsim.errors import InputError

_MJ_PER_DAY_TO_W = 1e6 / 86400.0


def wind_at_2m(uz, z_m):
    """Wind speed at 2 m from a measurement at height z, FAO-56 eq. 47.

    Parameters
    ----------
    uz : float, array-like or Series [m s-1]
        Wind speed measured at height *z_m*.
    z_m : float [m]
        Measurement height, 0.5-100 m.

    Returns
    -------
    same type as *uz* [m s-1]

    Notes
    -----
    .. math:: u_2 = u_z \\frac{4.87}{\\ln(67.8 z - 5.42)}

    a logarithmic profile over short grass; over open water (smoother) it slightly
    underestimates u_2, which is how the Penman open-water wind function is usually fed.

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 47.
    """
    z = float(z_m)
    if not 0.5 <= z <= 100.0:
        raise InputError(f"wind measurement height must be in 0.5-100 m, got {z_m!r}",
                         field="wind_height_m")
    return uz * (4.87 / math.log(67.8 * z - 5.42))


def latent_heat_vaporisation(t_c):
    """Latent heat of vaporisation of water.

    Parameters
    ----------
    t_c : float, array-like or Series [°C]

    Returns
    -------
    same type [MJ kg-1]

    Notes
    -----
    λ = 2.501 − 0.002361 T (Harrison 1963, as given in FAO-56 Annex 3, eq. 3-1). It is
    used here only to turn the latent heat flux into an evaporated mass; FAO-56's
    constant 2.45 MJ kg-1 corresponds to 20 °C.
    """
    return 2.501 - 0.002361 * t_c


def wind_function(u2):
    """Open-water Penman wind function of Shuttleworth (1993), as an energy flux.

    Parameters
    ----------
    u2 : float, array-like or Series [m s-1]
        Wind speed at 2 m.

    Returns
    -------
    same type [W m-2 kPa-1]
        Latent heat flux per kPa of vapour-pressure deficit at the surface.

    Notes
    -----
    Shuttleworth (1993, eq. 4.2.31 in the Handbook of Hydrology) writes the aerodynamic
    evaporation from open water as

    .. math:: λE = 6.43\\,(1 + 0.536\\,u_2)\\,(e_s - e_a)\\quad[\\mathrm{MJ\\,m^{-2}\\,d^{-1}}]

    which is returned here converted to W m-2 kPa-1 (× 10⁶/86 400).
    """
    return 6.43 * _MJ_PER_DAY_TO_W * (1.0 + 0.536 * u2)


# ---------------------------------------------------------------------------------------
# Pond-size-aware and stability-corrected transfer (the models chosen by name)
# ---------------------------------------------------------------------------------------

#: Latent heat used to turn a mass-transfer law (mm d-1) into a heat flux [J kg-1]:
#: FAO-56's constant 2.45 MJ kg-1 (20 °C).
LATENT_HEAT_20C = 2.45e6
#: hPa (mb) per kPa.
_HPA_PER_KPA = 10.0
#: Harbeck (1962) N(A) = c·A^k: prefactor [mm d-1 (m s-1)-1 hPa-1] and exponent [-],
#: A in m2, wind at 2 m (from memory, see :func:`harbeck_coefficient`).
HARBECK_PREFACTOR = 0.291
HARBECK_AREA_EXPONENT = -0.05
#: Ryan & Harleman forced-convection wind coefficient [W m-2 hPa-1 (m s-1)-1] and
#: free-convection coefficient [W m-2 hPa-1 K-1/3] in SI (see :func:`free_convection`).
RYAN_HARLEMAN_WIND = 3.1
RYAN_HARLEMAN_FREE = 2.7


def harbeck_coefficient(area_m2, prefactor=HARBECK_PREFACTOR,
                        exponent=HARBECK_AREA_EXPONENT):
    """Mass-transfer coefficient N of Harbeck (1962) as a function of water-surface area.

    Parameters
    ----------
    area_m2 : float or array-like [m2]
        Water surface of one pond (each pond grows its own boundary layer).
    prefactor : float, default 0.291 [mm d-1 (m s-1)-1 hPa-1]
    exponent : float, default −0.05 [-]

    Returns
    -------
    float or ndarray [mm d-1 (m s-1)-1 hPa-1]
        N in E = N u₂ (e₀ − e_a), E [mm d-1], u₂ [m s-1] at 2 m, e [hPa].

    Notes
    -----
    Harbeck (1962) collected mass-transfer coefficients of reservoirs from about 1 to
    30,000 acres (4,000 m2 to 120 km2) and found N falling slowly with surface area
    (abstract [P]); the smaller the water body, the thinner the vapour-laden boundary
    layer over it. The fit N = 0.291 A^-0.05 (A in m2, E in mm d-1, u at 2 m, e in hPa)
    is quoted here from memory of its secondary use in lake-evaporation work; the
    primary table was not seen. Below the smallest reservoir of the data set
    (single raceway ponds of 100-5,000 m2) it is an extrapolation.

    References
    ----------
    Harbeck, G. E. (1962) A practical field technique for measuring reservoir
    evaporation utilizing mass-transfer theory. USGS Prof. Paper 272-E.
    doi:10.3133/pp272E
    """
    return prefactor * np.asarray(area_m2, dtype=float) ** exponent


def harbeck_wind_function(u2, area_m2, prefactor=HARBECK_PREFACTOR,
                          exponent=HARBECK_AREA_EXPONENT):
    """Forced-convection transfer of Harbeck (1962) as a latent heat flux per kPa.

    Parameters
    ----------
    u2 : float or array-like [m s-1]
        Wind speed at 2 m.
    area_m2 : float [m2]
        Water surface of one pond.
    prefactor, exponent : see :func:`harbeck_coefficient`

    Returns
    -------
    same shape as *u2* [W m-2 kPa-1]
        f = N u₂ × 10 hPa/kPa × λ / 86 400 s, λ = 2.45 MJ kg-1 (1 mm = 1 kg m-2).
    """
    n = harbeck_coefficient(area_m2, prefactor, exponent)
    return n * np.asarray(u2, dtype=float) * _HPA_PER_KPA * LATENT_HEAT_20C / 86400.0


def ryan_harleman_wind_function(u2, wind_coefficient=RYAN_HARLEMAN_WIND):
    """Forced-convection term of Ryan, Harleman & Stolzenbach (1974) per kPa.

    Parameters
    ----------
    u2 : float or array-like [m s-1]
        Wind speed at 2 m.
    wind_coefficient : float, default 3.1 [W m-2 hPa-1 (m s-1)-1]

    Returns
    -------
    same shape as *u2* [W m-2 kPa-1]

    Notes
    -----
    Ryan & Harleman wrote b₀ W₂ with b₀ = 14 BTU ft-2 d-1 mph-1 mmHg-1 (from memory;
    their wind term follows the Lake Hefner data); × 0.1314 (W m-2 per BTU ft-2 d-1)
    / 0.44704 (m s-1 per mph) / 1.3332 (hPa per mmHg) = 3.09 W m-2 hPa-1 (m s-1)-1, the
    SI value 3.1 used in lake models that cite them (Rasmussen et al. 1995, as coded in
    lake-evaporation libraries [2]).
    """
    return wind_coefficient * _HPA_PER_KPA * np.asarray(u2, dtype=float)


def virtual_temperature_k(t_c, vapour_pressure_kpa, pressure_kpa):
    """Virtual temperature of moist air [K].

    Parameters
    ----------
    t_c : float or array-like [°C]
    vapour_pressure_kpa : float or array-like [kPa]
    pressure_kpa : float or array-like [kPa]

    Returns
    -------
    ndarray [K]
        T_v = T / (1 − 0.378 e/p), the ideal-gas form for moist air (ratio of molar
        masses 0.622; standard meteorology, from memory).
    """
    return (np.asarray(t_c, dtype=float) + 273.15) / (1.0 - 0.378 * np.asarray(
        vapour_pressure_kpa, dtype=float) / np.asarray(pressure_kpa, dtype=float))


def free_convection(delta_tv_k, coefficient=RYAN_HARLEMAN_FREE):
    """Free-convection transfer of Ryan, Harleman & Stolzenbach (1974) per kPa.

    Parameters
    ----------
    delta_tv_k : float or array-like [K]
        Virtual temperature of saturated air at the water surface minus that of the air.
    coefficient : float, default 2.7 [W m-2 hPa-1 K-1/3]

    Returns
    -------
    ndarray [W m-2 kPa-1]
        λ_f max(ΔT_v, 0)^(1/3): zero when the water side is not lighter than the air
        (stable stratification: no free convection).

    Notes
    -----
    Ryan & Harleman's free-convection term is 22.4 (ΔΘ_v)^(1/3) BTU ft-2 d-1 mmHg-1 with
    ΔΘ_v in °F (from memory), after the heated-plate analogy (Nu ∝ Ra^(1/3), independent
    of the plate size); × 0.1314 × 1.8^(1/3) / 1.3332 = 2.69 W m-2 hPa-1 K-1/3, the SI
    value 2.7 of the lake-model literature [2].

    References
    ----------
    Ryan, P. J., Harleman, D. R. F. & Stolzenbach, K. D. (1974) Surface heat loss from
    cooling ponds. *Water Resour. Res.* 10:930-938. doi:10.1029/WR010i005p00930
    """
    d = np.maximum(np.asarray(delta_tv_k, dtype=float), 0.0)
    return coefficient * _HPA_PER_KPA * np.cbrt(d)


#: Surface transfer models chosen by name (``[pond] surface_transfer``).
TRANSFER_MODELS = ("ryan_harleman", "harbeck", "penman_shuttleworth")


def surface_transfer(model, u2, *, area_m2=1000.0, harbeck_prefactor=HARBECK_PREFACTOR,
                     harbeck_exponent=HARBECK_AREA_EXPONENT,
                     ryan_harleman_wind=RYAN_HARLEMAN_WIND,
                     free_convection_coefficient=RYAN_HARLEMAN_FREE):
    """Forced and free parts of the surface transfer function of a named model.

    Parameters
    ----------
    model : str
        One of :data:`TRANSFER_MODELS`:

        - ``"harbeck"``: forced N(A) u₂ of Harbeck (1962), falling with pond area, plus
          the free-convection term of Ryan et al. (1974) when the water is warmer (in
          virtual temperature) than the air;
        - ``"ryan_harleman"``: the cooling-pond formula of Ryan et al. (1974), forced
          3.1 u₂ plus the same free-convection term;
        - ``"penman_shuttleworth"``: the open-water Penman wind function
          6.43 (1 + 0.536 u₂) MJ m-2 d-1 kPa-1 (Shuttleworth 1993), no stability term:
          its calm-wind constant acts whatever the stratification.
    u2 : array-like [m s-1]
        Wind speed at 2 m.
    area_m2 : float [m2]
        Water surface of one pond (``harbeck`` only).
    harbeck_prefactor, harbeck_exponent : float
        See :func:`harbeck_coefficient`.
    ryan_harleman_wind : float [W m-2 hPa-1 (m s-1)-1]
    free_convection_coefficient : float [W m-2 hPa-1 K-1/3]
        0 switches the stability term off.

    Returns
    -------
    forced : ndarray [W m-2 kPa-1]
        Wind-driven transfer per kPa of vapour-pressure difference.
    free : float [W m-2 kPa-1 K-1/3]
        Coefficient of max(ΔT_v, 0)^(1/3) (0 for ``penman_shuttleworth``).

    Notes
    -----
    The latent flux is λE = (forced + free·max(ΔT_v, 0)^(1/3)) (e_s(T_w) − e_a) and the
    sensible flux H = (same) γ (T_w − T_a): the Bowen ratio of the same transfer (Bowen
    1926; Ryan et al. use 0.61 hPa K-1 ≈ γ at sea level).

    The default is ``ryan_harleman``, chosen by the FAO-56 check: pond evaporation
    (0.25 m, 1,000 m2) against 1.05 × FAO-56 daily reference ET0 (Allen et al. 1998,
    eq. 6; Kc 1.05 for open water < 2 m deep, Table 12) on pvlib's Greensboro TMY3 and
    Miami TMY2. Annual ratios: ``ryan_harleman`` 0.92 and 1.06 with 21 of 24 months
    inside ±20 % (Greensboro's Nov-Jan 0.66-0.71: water colder than the air, no free
    convection); ``harbeck`` 1.10 and 1.28 (Miami above the band in 11 months);
    ``penman_shuttleworth`` 1.12 and 1.26 (tests/test_transfer.py).
    """
    u2 = np.asarray(u2, dtype=float)
    if model == "penman_shuttleworth":
        return wind_function(u2), 0.0
    if model == "harbeck":
        return (harbeck_wind_function(u2, area_m2, harbeck_prefactor, harbeck_exponent),
                float(free_convection(1.0, free_convection_coefficient)))
    if model == "ryan_harleman":
        return (ryan_harleman_wind_function(u2, ryan_harleman_wind),
                float(free_convection(1.0, free_convection_coefficient)))
    raise InputError(f"unknown surface transfer model {model!r}; choose from "
                     f"{', '.join(TRANSFER_MODELS)}", field="surface_transfer")
