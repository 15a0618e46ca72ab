"""Growth kinetics: temperature response, maintenance and the specific growth rates of
the two growth forms (``self_shading`` and ``logistic``).

Units used throughout: culture density ``x`` in g m-3 (ash-free dry weight), light ``i``
as PAR photon flux in µmol m-2 s-1, temperature in °C, specific rates in d-1, depth in m,
light attenuation ``k`` in m-1.

Every function is a pure numpy kernel. Arguments broadcast by numpy rules, so a strain
parameter may be a scalar or an array with a leading member axis (e.g. shape
``(member, 1)`` against hourly forcing shaped ``(1, hour)`` or ``(member, hour)``).

The light-response models live in :mod:`pondsim.pond.light_response`; their names are
re-exported here because growth rates are built from them.
"""

from __future__ import annotations

import numpy as np

from pondsim.errors import InputError
from pondsim.pond.light_response import (
    LIGHT_RESPONSES,
    _depth_average_evaluator,
    attenuation,
    depth_averaged_response,
    jassby_platt,
    light_response,
    monod,
    steele,
)

__all__ = [
    "LIGHT_RESPONSES",
    "attenuation",
    "ctmi",
    "depth_averaged_response",
    "jassby_platt",
    "light_response",
    "maintenance_rate",
    "monod",
    "specific_growth_logistic_r",
    "specific_growth_self_shading",
    "steele",
]

# --------------------------------------------------------------------------------------
# Temperature and maintenance
# --------------------------------------------------------------------------------------
def ctmi(t, t_min, t_opt, t_max):
    r"""Cardinal temperature model with inflexion (Rosso et al. 1993).

    Parameters
    ----------
    t : array-like [°C]
        Culture (water) temperature.
    t_min, t_opt, t_max : array-like [°C]
        Minimum, optimum and maximum temperatures for growth, with
        ``t_min < t_opt < t_max`` and ``t_opt > (t_min + t_max) / 2``.

    Returns
    -------
    ndarray [1]
        Temperature factor in [0, 1]; 1 at ``t_opt``, 0 at and outside the cardinal
        limits.

    Raises
    ------
    InputError
        If the cardinal temperatures are out of order, or ``t_opt`` is not above the
        midpoint of ``t_min`` and ``t_max``: the denominator below then changes sign
        inside (t_min, t_opt) and the curve has a pole (follows from the formula: the
        bracket is linear in T, negative at t_opt and at t_max, and equals
        (t_opt - t_min)(t_min + t_max - 2 t_opt) at t_min).

    Notes
    -----
    For :math:`T_{min} < T < T_{max}`,

    .. math::
        \varphi(T) = \frac{(T - T_{max})(T - T_{min})^2}
        {(T_{opt} - T_{min})\left[(T_{opt} - T_{min})(T - T_{opt})
        - (T_{opt} - T_{max})(T_{opt} + T_{min} - 2T)\right]}

    and :math:`\varphi = 0` otherwise.

    References
    ----------
    Rosso, L., Lobry, J. R. & Flandrois, J. P. (1993). An unexpected correlation between
    cardinal temperatures of microbial growth highlighted by a new model. Journal of
    Theoretical Biology 162(4), 447-463. doi:10.1006/jtbi.1993.1099

    Bernard, O. & Rémond, B. (2012). Validation of a simple model accounting for light
    and temperature effect on microalgal growth. Bioresource Technology 123, 520-527.
    doi:10.1016/j.biortech.2012.07.022
    """
    t = np.asarray(t, dtype=float)
    t_min, t_opt, t_max = (np.asarray(v, dtype=float) for v in (t_min, t_opt, t_max))
    if np.any(~(t_min < t_opt)) or np.any(~(t_opt < t_max)):
        raise InputError("cardinal temperatures must satisfy t_min < t_opt < t_max",
                         field="t_opt_c")
    if np.any(~(2.0 * t_opt > t_min + t_max)):
        raise InputError("the cardinal temperature model needs t_opt above the midpoint "
                         "(t_min + t_max) / 2, otherwise its curve has a pole",
                         field="t_opt_c")
    inside = (t > t_min) & (t < t_max)
    num = (t - t_max) * (t - t_min) ** 2
    den = (t_opt - t_min) * ((t_opt - t_min) * (t - t_opt)
                             - (t_opt - t_max) * (t_opt + t_min - 2.0 * t))
    # den < 0 on [t_min, t_max] given the checks above; outside, use a dummy value.
    den = np.where(inside, den, -1.0)
    return np.where(inside, num / den, 0.0)


def maintenance_rate(t, m_ref, theta=1.07, t_ref=20.0):
    r"""Maintenance (respiration) loss rate with an Arrhenius-type temperature factor.

    Parameters
    ----------
    t : array-like [°C]
        Culture temperature.
    m_ref : array-like [d-1]
        Maintenance rate at ``t_ref``.
    theta : array-like [1], default 1.07
        Temperature coefficient per °C. 1.07 is common practice in water-quality models;
        it is close to the 1.066 per °C of Eppley's (1972) envelope for the maximum
        growth rate of phytoplankton (log10 µ = 0.0275 T − 0.070; from memory).
    t_ref : array-like [°C], default 20.0
        Reference temperature.

    Returns
    -------
    ndarray [d-1]
        Loss rate, acting day and night.

    Notes
    -----
    .. math:: m(T) = m_{ref}\,\theta^{\,T - T_{ref}}

    References
    ----------
    Eppley, R. W. (1972). Temperature and phytoplankton growth in the sea. Fishery
    Bulletin 70(4), 1063-1085.
    """
    t = np.asarray(t, dtype=float)
    return m_ref * np.power(theta, t - t_ref)


# --------------------------------------------------------------------------------------
# Specific rates of the two growth forms
# --------------------------------------------------------------------------------------
def specific_growth_self_shading(x, i0, temp_factor, maint, *, mu_max, model, param,
                                 k_biomass, k_background, depth_m):
    r"""Net specific growth rate of a self-shading culture.

    Parameters
    ----------
    x : array-like [g m-3]
        Culture density.
    i0 : array-like [µmol m-2 s-1]
        PAR just below the surface.
    temp_factor : array-like [1]
        Temperature factor f_T (e.g. :func:`ctmi`).
    maint : array-like [d-1]
        Maintenance loss rate m (e.g. :func:`maintenance_rate`).
    mu_max : array-like [d-1]
        Maximum specific growth rate.
    model : str or callable
        Light-response model (see :func:`light_response`).
    param : array-like [µmol m-2 s-1]
        The model's light parameter.
    k_biomass : array-like [m2 g-1]
        Biomass-specific extinction.
    k_background : array-like [m-1]
        Background extinction.
    depth_m : array-like [m]
        Culture depth.

    Returns
    -------
    ndarray [d-1]
        Net specific rate (negative at night and when self-shading wins).

    Notes
    -----
    .. math:: \mu = \mu_{max} f_T \langle f_I \rangle(I_0, k(X), \mathrm{depth}) - m

    with :math:`k(X)` from :func:`attenuation` and :math:`\langle f_I\rangle` from
    :func:`depth_averaged_response`.
    """
    k = attenuation(x, k_biomass, k_background)
    f_avg = depth_averaged_response(model, i0, k, depth_m, param)
    return mu_max * temp_factor * f_avg - maint


def specific_growth_logistic_r(i0, temp_factor, *, mu_max, model, param, optical_depth=0.0):
    r"""Intrinsic growth rate r of the logistic growth form.

    Parameters
    ----------
    i0 : array-like [µmol m-2 s-1]
        PAR just below the surface.
    temp_factor : array-like [1]
        Temperature factor f_T.
    mu_max : array-like [d-1]
        Maximum specific growth rate.
    model : str or callable
        Light-response model.
    param : array-like [µmol m-2 s-1]
        The model's light parameter.
    optical_depth : array-like [1], default 0.0
        Optical depth of the clear culture, ``k_background * depth_m``. With the default
        0 the response is taken at the surface PAR; with the clear-water optical depth,
        r equals the self-shading form's gross rate as X → 0.

    Returns
    -------
    ndarray [d-1]
        Gross intrinsic rate r (maintenance is subtracted separately in
        dX/dt = r X (1 − X/K) − m X).

    Notes
    -----
    .. math:: r = \mu_{max} f_T f(I_0)

    (or :math:`\langle f \rangle` over the clear-culture optical depth when
    ``optical_depth > 0``). The surface value is the choice by default because r is the
    rate of a thin, unshaded culture; under a strongly photoinhibiting Steele response
    this underestimates r in a pond whose medium itself absorbs light.
    """
    evaluate = _depth_average_evaluator(model, i0, param)
    return mu_max * temp_factor * evaluate(optical_depth)
