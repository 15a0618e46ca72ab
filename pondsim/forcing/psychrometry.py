"""Psychrometric and pressure relations of FAO-56 (Allen, Pereira, Raes & Smith 1998,
FAO Irrigation and Drainage Paper 56), shared by the weather readers and the pond
energy balance. Temperatures in °C, pressures in kPa."""

import numpy as np
import pandas as pd


def saturation_vapour_pressure(t_c):
    """Saturation vapour pressure over water, FAO-56 eq. 11.

    Parameters
    ----------
    t_c : float, array-like or Series [°C]

    Returns
    -------
    same type [kPa]

    Notes
    -----
    .. math:: e°(T) = 0.6108 \\exp\\left(\\frac{17.27 T}{T + 237.3}\\right)

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 11 and Annex 2 Table 2.3.
    """
    t = np.asarray(t_c, dtype=float) if not isinstance(t_c, pd.Series) else t_c
    return 0.6108 * np.exp(17.27 * t / (t + 237.3))


def slope_saturation_vapour_pressure(t_c):
    """Slope of the saturation vapour pressure curve, FAO-56 eq. 13.

    Parameters
    ----------
    t_c : float, array-like or Series [°C]

    Returns
    -------
    same type [kPa °C-1]

    Notes
    -----
    .. math:: Δ = \\frac{4098\\, e°(T)}{(T + 237.3)^2}

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 13 and Annex 2 Table 2.4.
    """
    t = np.asarray(t_c, dtype=float) if not isinstance(t_c, pd.Series) else t_c
    return 4098.0 * saturation_vapour_pressure(t) / (t + 237.3) ** 2


def psychrometric_constant(pressure_kpa):
    """Psychrometric constant, FAO-56 eq. 8.

    Parameters
    ----------
    pressure_kpa : float, array-like or Series [kPa]

    Returns
    -------
    same type [kPa °C-1]

    Notes
    -----
    γ = c_p P / (ε λ) = 0.665e-3 P, with λ = 2.45 MJ kg-1 as in FAO-56.

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 8 and Annex 2 Table 2.2.
    """
    return 0.665e-3 * pressure_kpa


def pressure_from_elevation(z_m):
    """Standard-atmosphere pressure at an elevation, FAO-56 eq. 7.

    Parameters
    ----------
    z_m : float, array-like or Series [m above sea level]

    Returns
    -------
    same type [kPa]

    Notes
    -----
    .. math:: P = 101.3 \\left(\\frac{293 - 0.0065 z}{293}\\right)^{5.26}

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 7 and Annex 2 Table 2.1.
    """
    return 101.3 * ((293.0 - 0.0065 * np.asarray(z_m, dtype=float)) / 293.0) ** 5.26


def dewpoint_from_rh(temp_air, relative_humidity):
    """Dew-point temperature [°C] from air temperature [°C] and RH [%].

    Inverts FAO-56 eq. 11 for the actual vapour pressure ``e = RH/100 · e°(T)``. RH is
    floored at 1 % so that the logarithm stays finite.
    """
    rh = np.clip(np.asarray(relative_humidity, dtype=float), 1.0, 100.0)
    e = rh / 100.0 * saturation_vapour_pressure(np.asarray(temp_air, dtype=float))
    x = np.log(e / 0.6108)
    return 237.3 * x / (17.27 - x)
