"""The compiled heat-balance loop against the pure-Python loop it replaced.

The reference is the pre-compilation implementation frozen in
``tests/thermal_step_reference.py``; the compiled loop performs the same operations in
the same order, so the two agree to rounding (the compiled ``exp``/``pow`` may differ in
the last bit). Bound used: 1e-9 K on temperatures and 1e-9 relative on the flux terms,
over whole pvlib TMY3 years (Greensboro NC: a warm site; Sand Point AK: ice in winter, so
the ice-surface branch runs) and a shallow stiff case with sub-steps. The published
checks of the scheme itself (1-minute RK4 reference, FAO-56, equilibrium by root
finding) stay in tests/test_thermal.py and run on the compiled loop.
"""

from __future__ import annotations

import numpy as np
import pytest
import thermal_step_reference as reference
from test_thermal import _constant_forcing, _pond, _tmy3_forcing

from pondsim.pond import thermal
from pondsim.pond.thermal_step import integrate_heat_balance

KEYS = ("water_temperature", "water_temperature_end", "ice", "lw", "lat", "conv", "grd",
        "mkq", "evap", "makeup", "surface")


def _both(forcing, pond, t0=None):
    inputs = thermal.heat_exchange_inputs(forcing, pond)
    cols = {k: inputs[k].to_numpy(dtype=float) for k in inputs.columns}
    c = 1000.0 * 4186.0 * pond.depth_m
    t0 = float(forcing["temp_air"].iloc[0]) if t0 is None else t0
    new = integrate_heat_balance(cols, t0, 0.0, 3600.0, c)
    old = reference.integrate_heat_balance({k: v.tolist() for k, v in cols.items()}, t0,
                                           0.0, 3600.0, c)
    return new, old


@pytest.mark.parametrize("name, depth", [("723170TYA.CSV", 0.25), ("703165TY.csv", 0.25),
                                         ("723170TYA.CSV", 0.05)])
def test_compiled_loop_matches_reference_year(name, depth):
    forcing = _tmy3_forcing(name)
    new, old = _both(forcing, _pond(depth_m=depth, ground_temperature_c=None))
    for key in KEYS:
        a, b = np.asarray(new[key]), np.asarray(old[key])
        scale = 1.0 if key in ("water_temperature", "water_temperature_end", "surface") \
            else max(np.max(np.abs(b)), 1e-30)
        assert np.max(np.abs(a - b)) <= 1e-9 * scale, key
    np.testing.assert_array_equal(new["frozen"], np.asarray(old["frozen"]))
    assert new["t_end"] == pytest.approx(old["t_end"], abs=1e-9)
    assert new["ice_end"] == pytest.approx(old["ice_end"], rel=1e-9, abs=1e-6)
    if name == "703165TY.csv":
        # the ice branch really ran (otherwise the comparison would not cover it)
        assert np.sum(new["frozen"]) > 100
        assert np.min(new["surface"]) < -1.0


def test_compiled_loop_matches_reference_with_substeps():
    # 5 cm, strong sun and cold wind: changes > 4 K per hour, so sub-steps run
    f = _constant_forcing(72, ghi=900.0, dhi=100.0, solar_zenith=20.0, ghi_clear=950.0,
                          temp_air=5.0, wind_speed=12.0, relative_humidity=20.0)
    new, old = _both(f, _pond(depth_m=0.05, ground_temperature_c=5.0), t0=-0.0)
    assert np.max(np.abs(np.diff(np.r_[-0.0, new["water_temperature_end"]]))) > 4.0
    for key in KEYS:
        np.testing.assert_allclose(new[key], old[key], rtol=1e-9, atol=1e-9)


def test_end_state_only():
    f = _constant_forcing(48, temp_air=12.0, relative_humidity=70.0, wind_speed=6.0)
    pond = _pond(depth_m=0.3, ground_temperature_c=15.0)
    inputs = thermal.heat_exchange_inputs(f, pond)
    cols = {k: inputs[k].to_numpy(dtype=float) for k in inputs.columns}
    full = integrate_heat_balance(cols, 20.0, 0.0, 3600.0, 1.2e6)
    t, ice = integrate_heat_balance(cols, 20.0, 0.0, 3600.0, 1.2e6, record=False)
    assert (t, ice) == (full["t_end"], full["ice_end"])
