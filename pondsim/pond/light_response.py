"""Light response of growth: f(I) models and their depth averages in a self-shading
culture with Beer-Lambert attenuation.

Light ``i`` is PAR photon flux in µmol m-2 s-1, attenuation ``k`` in m-1, depth in m,
density ``x`` in g m-3. Models are chosen by name from :data:`LIGHT_RESPONSES` or passed
as a callable ``f(i, param)`` returning values in [0, 1]. Pure numpy kernels that
broadcast over a leading member axis.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from functools import lru_cache

import numpy as np

from pondsim.errors import InputError, did_you_mean

__all__ = [
    "LIGHT_RESPONSES",
    "attenuation",
    "depth_averaged_response",
    "jassby_platt",
    "light_response",
    "monod",
    "steele",
]

_E = np.e


# --------------------------------------------------------------------------------------
# Light responses f(I) in [0, 1]
# --------------------------------------------------------------------------------------
def steele(i, i_opt):
    r"""Steele's photoinhibition light response.

    Parameters
    ----------
    i : array-like [µmol m-2 s-1]
        PAR photon flux.
    i_opt : array-like [µmol m-2 s-1]
        Irradiance at which the response peaks (f = 1).

    Returns
    -------
    ndarray [1]
        Relative rate in [0, 1].

    Notes
    -----
    .. math:: f(I) = \frac{I}{I_{opt}} \exp\left(1 - \frac{I}{I_{opt}}\right)

    References
    ----------
    Steele, J. H. (1962). Environmental control of photosynthesis in the sea.
    Limnology and Oceanography 7(2), 137-150. doi:10.4319/lo.1962.7.2.0137
    """
    a = np.asarray(i, dtype=float) / i_opt
    return a * np.exp(1.0 - a)


def monod(i, k_i):
    r"""Saturating (Monod form, Tamiya et al. 1953) light response.

    Parameters
    ----------
    i : array-like [µmol m-2 s-1]
        PAR photon flux.
    k_i : array-like [µmol m-2 s-1]
        Half-saturation irradiance (f = 1/2 at I = K_I).

    Returns
    -------
    ndarray [1]
        Relative rate in [0, 1).

    Notes
    -----
    .. math:: f(I) = \frac{I}{K_I + I}

    References
    ----------
    Tamiya, H., Hase, E., Shibata, K., Mituya, A., Iwamura, T., Nihei, T. & Sasa, T.
    (1953). Kinetics of growth of *Chlorella*, with special reference to its dependence
    on quantity of available light and on temperature. In Burlew, J. S. (ed.), Algal
    Culture from Laboratory to Pilot Plant, Carnegie Inst. Washington Publ. 600, 204-232.
    """
    i = np.asarray(i, dtype=float)
    den = k_i + i
    # I = K_I = 0 would be 0/0; there is no light, so no growth.
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, i / np.where(den > 0, den, 1.0), 0.0)


def jassby_platt(i, i_k):
    r"""Jassby–Platt hyperbolic-tangent light response.

    Parameters
    ----------
    i : array-like [µmol m-2 s-1]
        PAR photon flux.
    i_k : array-like [µmol m-2 s-1]
        Saturation-onset irradiance I_k (initial slope 1/I_k).

    Returns
    -------
    ndarray [1]
        Relative rate in [0, 1).

    Notes
    -----
    .. math:: f(I) = \tanh\left(\frac{I}{I_k}\right)

    References
    ----------
    Jassby, A. D. & Platt, T. (1976). Mathematical formulation of the relationship
    between photosynthesis and light for phytoplankton. Limnology and Oceanography 21(4),
    540-547. doi:10.4319/lo.1976.21.4.0540
    """
    return np.tanh(np.asarray(i, dtype=float) / i_k)


#: Light-response models by name; each is ``f(i, param) -> [0, 1]``.
LIGHT_RESPONSES: dict[str, Callable] = {
    "steele": steele,
    "monod": monod,
    "jassby_platt": jassby_platt,
}


def _resolve(model) -> Callable:
    """Return the light-response function for a name or a callable."""
    if callable(model):
        return model
    if isinstance(model, str) and model in LIGHT_RESPONSES:
        return LIGHT_RESPONSES[model]
    choices = ", ".join(repr(k) for k in LIGHT_RESPONSES)
    hint = did_you_mean(model, LIGHT_RESPONSES) if isinstance(model, str) else ""
    raise InputError(f"unknown light-response model {model!r}{hint}; valid choices: "
                     f"{choices}, or a callable f(i, param)", field="light_model")


def light_response(model, i, param):
    """Evaluate a light-response model chosen by name or given as a callable.

    Parameters
    ----------
    model : str or callable
        One of the keys of :data:`LIGHT_RESPONSES` (``"steele"``, ``"monod"``,
        ``"jassby_platt"``) or a callable ``f(i, param)`` returning values in [0, 1].
    i : array-like [µmol m-2 s-1]
        PAR photon flux.
    param : array-like [µmol m-2 s-1]
        The model's light parameter (I_opt, K_I or I_k).

    Returns
    -------
    ndarray [1]
        Relative rate.

    Raises
    ------
    InputError
        For an unknown model name; the message lists the valid choices.
    """
    return _resolve(model)(np.asarray(i, dtype=float), param)


# --------------------------------------------------------------------------------------
# Self-shading
# --------------------------------------------------------------------------------------
def attenuation(x, k_biomass, k_background):
    r"""Beer–Lambert light attenuation coefficient of the culture.

    Parameters
    ----------
    x : array-like [g m-3]
        Culture density (ash-free dry weight).
    k_biomass : array-like [m2 g-1]
        Biomass-specific extinction coefficient.
    k_background : array-like [m-1]
        Extinction of the medium without algae.

    Returns
    -------
    ndarray [m-1]
        Attenuation coefficient k.

    Notes
    -----
    .. math:: k = k_{biomass} X + k_{background}, \qquad I(z) = I_0 e^{-k z}

    A chlorophyll-specific extinction of 0.014 m2 (mg Chl a)-1 (Atlas & Bannister 1980,
    Limnol. Oceanogr. 25:157-159) corresponds to ~0.1-0.4 m2 g-1 dry weight at 1-3 %
    chlorophyll.
    """
    return k_biomass * np.asarray(x, dtype=float) + k_background


@lru_cache(maxsize=16)
def _gauss_legendre(n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Legendre nodes and weights on [-1, 1], computed once per node count."""
    x, w = np.polynomial.legendre.leggauss(n_nodes)
    x.setflags(write=False)
    w.setflags(write=False)
    return x, w


class _DepthAverage:
    """Depth average of a light response as a function of optical depth tau.

    Everything that does not depend on tau is computed once at construction, so a root
    search over density re-evaluates only what changes. Subclasses give
    ``integral(tau) -> (F, f_bottom)`` with F = ∫_0^tau f(I0 e^-s) ds [1] and
    f_bottom = f(I0 e^-tau); ``tau = np.inf`` gives the whole-column integral.
    """

    f_top: np.ndarray
    #: Attributes that hold one value per row (first axis), for :meth:`take`.
    _row_fields: tuple[str, ...] = ()

    def prepare(self):
        """Precompute what repeated evaluations share (nothing by default)."""
        return self

    def take(self, rows):
        """The same average restricted to some rows of 2-D (row, step) inputs."""
        new = copy.copy(self)
        for name in self._row_fields + ("f_top",):
            value = getattr(self, name)
            if isinstance(value, np.ndarray) and value.ndim:
                setattr(new, name, value[rows])
        return new

    def __call__(self, tau, slope=False):
        """Mean response <f>(tau) and, if ``slope``, d<f>/d(tau) = (f_bottom - <f>)/tau."""
        tau = np.asarray(tau, dtype=float)
        pos = tau > 0
        tau_safe = np.where(pos, tau, 1.0)
        total, f_bottom = self.integral(tau)
        # tau -> 0 (clear, shallow culture): the mean tends to the surface response.
        mean = np.where(pos, total / tau_safe, self.f_top)
        if not slope:
            return mean
        return mean, np.where(pos, (f_bottom - mean) / tau_safe, 0.0)


class _SteeleAverage(_DepthAverage):
    """Closed-form depth average of Steele's response."""

    _row_fields = ("a", "exp_a")

    def __init__(self, i0, i_opt):
        self.a = np.asarray(i0, dtype=float) / i_opt
        self.exp_a = np.exp(-self.a)
        self.f_top = _E * self.a * self.exp_a

    def integral(self, tau):
        a, exp_a = self.a, self.exp_a
        e_tau = np.exp(-tau)
        b = a * -np.expm1(-tau)  # a (1 - e^-tau), exact for small tau
        q = np.exp(-a * e_tau)  # exp(-I_bottom / I_opt)
        # exp(-a e^-tau) - exp(-a) = e^-a expm1(b): the expm1 form keeps full precision
        # when the difference is small (shallow optical depth or dim light).
        diff = np.where(b < 1.0, exp_a * np.expm1(np.minimum(b, 1.0)), q - exp_a)
        return _E * diff, _E * a * e_tau * q


class _MonodAverage(_DepthAverage):
    """Closed-form depth average of the Monod response."""

    _row_fields = ("i0", "k_i")

    def __init__(self, i0, k_i):
        self.i0 = np.asarray(i0, dtype=float)
        self.k_i = k_i
        self.f_top = monod(self.i0, k_i)

    def integral(self, tau):
        i_bottom = self.i0 * np.exp(-tau)
        den = self.k_i + i_bottom
        ok = den > 0
        den_safe = np.where(ok, den, 1.0)
        # ln[(K+I0)/(K+I0 e^-tau)] = log1p(I0 (1 - e^-tau) / (K + I0 e^-tau))
        ratio = np.where(ok, self.i0 * -np.expm1(-tau) / den_safe, 0.0)
        return np.log1p(ratio), np.where(ok, i_bottom / den_safe, 0.0)


class _QuadratureAverage(_DepthAverage):
    """Depth average of any light response by split Gauss–Legendre quadrature.

    Bright layer s in [0, s_c] (two panels in optical depth), dim layer below integrated
    in light u = I0 e^-s (one panel); s_c = ln(I0 / i_scale) clipped to [0, tau]. Each
    layer is evaluated only where it has non-zero thickness, so a dense culture costs one
    panel per step.
    """

    _row_fields = ("lit", "i0", "param", "s_scale", "bright_full")

    def __init__(self, func, i0, param, n_nodes, i_scale):
        self.func = func
        self.nodes, self.weights = _gauss_legendre(int(n_nodes))
        i0 = np.asarray(i0, dtype=float)
        self.lit = i0 > 0
        self.i0 = np.where(self.lit, i0, 1.0)
        p = np.asarray(param)
        # A numeric parameter is masked along with the light; anything else (a callable's
        # own parameter object) is passed through unchanged.
        self.param_is_array = p.dtype.kind in "biuf" and p.ndim > 0
        self.param = p.astype(float) if self.param_is_array else param
        self.f_top = np.where(self.lit, func(i0, param), 0.0)
        # Optical depth at which light falls to the response's own scale (<= 0 when the
        # surface is already dimmer).
        with np.errstate(divide="ignore"):  # a subnormal I0 / i_scale gives log 0
            self.s_scale = np.maximum(np.log(self.i0 / i_scale), 0.0)
        self.bright_full = None

    def prepare(self):
        """Integrate the whole bright layer once, for repeated calls with deep cultures."""
        if self.bright_full is None:
            self.bright_full = self.integral(self.s_scale)[0]
        return self

    def integral(self, tau):
        tau = np.asarray(tau, dtype=float)
        shape = np.broadcast_shapes(tau.shape, self.i0.shape, self.s_scale.shape,
                                    np.shape(self.param) if self.param_is_array else ())
        i0 = np.broadcast_to(self.i0, shape)
        tau_b = np.broadcast_to(np.maximum(tau, 0.0), shape)
        s_c = np.minimum(np.broadcast_to(self.s_scale, shape), tau_b)
        if self.param_is_array:
            param = np.broadcast_to(self.param, shape)

            def f(u, mask):
                return self.func(u, param[mask])
        else:
            param = self.param

            def f(u, mask):
                return self.func(u, param)

        lit = np.broadcast_to(self.lit, shape)
        total = np.zeros(shape)
        bright = s_c > 0
        if self.bright_full is not None:
            full = bright & (tau_b >= np.broadcast_to(self.s_scale, shape))
            total[full] = np.broadcast_to(self.bright_full, shape)[full]
            bright &= ~full
        if bright.any():
            i0_m, half = i0[bright], 0.25 * s_c[bright]
            acc = 0.0
            for centre in (half, 3.0 * half):
                for xj, wj in zip(self.nodes, self.weights, strict=True):
                    acc = acc + wj * f(i0_m * np.exp(-(centre + half * xj)), bright)
            total[bright] = acc * half
        u_hi = i0 * np.exp(-s_c)
        # u_hi - I0 e^-tau, without cancellation when the dim layer is thin.
        width = u_hi * -np.expm1(-(tau_b - s_c))
        dim = (width > 0) & lit
        if dim.any():
            w_m = width[dim]
            u_mid = u_hi[dim] - 0.5 * w_m
            acc = 0.0
            for xj, wj in zip(self.nodes, self.weights, strict=True):
                u = u_mid + 0.5 * w_m * xj
                acc = acc + wj * f(u, dim) / u
            total[dim] += 0.5 * w_m * acc
        f_bottom = np.where(lit, self.func(i0 * np.exp(-tau_b), param), 0.0)
        return np.where(lit, total, 0.0), f_bottom


def _depth_average_evaluator(model, i0, param, *, n_nodes=16, i_scale=None):
    """Return a :class:`_DepthAverage` for the model: ``evaluate(tau, slope=False)``."""
    func = _resolve(model)
    # Negative PAR can only be round-off from upstream interpolation: treat it as dark.
    i0 = np.maximum(np.asarray(i0, dtype=float), 0.0)
    if func is steele:
        return _SteeleAverage(i0, param)
    if func is monod:
        return _MonodAverage(i0, param)
    if n_nodes < 2:
        raise InputError(f"n_nodes must be at least 2, got {n_nodes}", field="n_nodes")
    scale = param if i_scale is None else i_scale
    return _QuadratureAverage(func, i0, param, n_nodes, scale)


def depth_averaged_response(model, i0, k, depth_m, param, n_nodes=16, *, i_scale=None):
    r"""Light response averaged over the depth of a self-shading culture.

    Parameters
    ----------
    model : str or callable
        Name in :data:`LIGHT_RESPONSES` or a callable ``f(i, param)``.
    i0 : array-like [µmol m-2 s-1]
        PAR photon flux just below the surface. Negative values are treated as 0.
    k : array-like [m-1]
        Attenuation coefficient (see :func:`attenuation`).
    depth_m : array-like [m]
        Culture depth.
    param : array-like [µmol m-2 s-1]
        The model's light parameter.
    n_nodes : int, default 16
        Gauss–Legendre nodes per panel for models without a closed form (three panels,
        so ``3 * n_nodes`` evaluations of ``f``).
    i_scale : array-like [µmol m-2 s-1], optional
        Irradiance at which the quadrature switches from optical depth to light as the
        integration variable. Defaults to ``param``; set it for a callable whose
        ``param`` is not an irradiance scale.

    Returns
    -------
    ndarray [1]
        Depth-mean relative rate :math:`\langle f \rangle` in [0, 1].

    Notes
    -----
    With optical depth :math:`s = k z` and :math:`\tau = k\,\mathrm{depth}`,

    .. math:: \langle f \rangle = \frac{1}{\tau}\int_0^{\tau} f(I_0 e^{-s})\,ds .

    Closed forms (Steele 1962; Monod/Tamiya), written with ``expm1``/``log1p`` so that
    they keep full precision as :math:`\tau \to 0`, where
    :math:`\langle f \rangle \to f(I_0)`:

    .. math::
        \langle f \rangle_{Steele} = \frac{e}{\tau}\left[\exp\left(-\frac{I_0}{I_{opt}}
        e^{-\tau}\right) - \exp\left(-\frac{I_0}{I_{opt}}\right)\right]

        \langle f \rangle_{Monod} = \frac{1}{\tau}
        \ln\frac{K_I + I_0}{K_I + I_0 e^{-\tau}}

    Other models (Jassby–Platt, callables) use Gauss–Legendre quadrature. In a dense
    culture the light is gone within the top few per cent of the depth, so the interval
    is split where light falls to ``i_scale``: the bright layer
    :math:`s \in [0, s_c]`, :math:`s_c = \ln(I_0/i_{scale})`, is integrated in optical
    depth on two panels, and the dim layer below in light :math:`u = I_0 e^{-s}`,

    .. math:: \int_{s_c}^{\tau} f(I_0 e^{-s})\,ds = \int_{I_0 e^{-\tau}}^{I_0 e^{-s_c}}
              \frac{f(u)}{u}\,du ,

    whose integrand is smooth down to :math:`u = 0` for any response with
    :math:`f(0) = 0` and a finite initial slope, so the accuracy does not degrade with
    :math:`\tau`. With 16 nodes per panel the Jassby–Platt average agrees with adaptive
    quadrature to ~1e-12 relative for :math:`I_0/I_k` up to ~1000 and any :math:`\tau`
    (checked up to 150), and to ~2e-10 up to :math:`I_0/I_k = 10^5`; 8 nodes per panel
    give ~1e-9 at :math:`I_0/I_k = 100`.
    Night (:math:`I_0 = 0`) gives exactly 0.

    References
    ----------
    Steele, J. H. (1962). Limnology and Oceanography 7(2), 137-150.
    doi:10.4319/lo.1962.7.2.0137

    Jassby, A. D. & Platt, T. (1976). Limnology and Oceanography 21(4), 540-547.
    doi:10.4319/lo.1976.21.4.0540
    """
    tau = np.asarray(k, dtype=float) * depth_m
    evaluate = _depth_average_evaluator(model, i0, param, n_nodes=n_nodes, i_scale=i_scale)
    return evaluate(tau)
