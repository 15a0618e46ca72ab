"""The logistic growth form: K is its equilibrium with maintenance included, days with
K = 0 stay finite (the culture only respires), and the ledger closes; the demo scenario
under the logistic form runs `run`, `compare` and `outlook`.

Outside references:
- Logistic growth with a proportional loss, dX/dt = r X (1 - X/K_g) - m X, has the
  equilibrium X* = K_g (1 - m/r) (Schaefer 1954, Bull. Inter-Am. Trop. Tuna Comm.
  1:27-56, equilibrium under constant effort; from memory for page details).
- Pure respiration dX/dt = -m X decays as exp(-m t) (first-order kinetics).
"""

from __future__ import annotations

import numpy as np
import pytest
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules

from pondsim.cli import main
from pondsim.operations.engine import check_closure, integrate, logistic_inverse_capacity
from pondsim.pond import kinetics


def test_equilibrium_is_k_with_maintenance_under_constant_forcing():
    k, m = 800.0, 0.1
    d = drivers(300.0, n_days=120, mu_max=0.8, maintenance=m, capacity=k)
    out = integrate(d, rules(1, 120), OPERATION)
    r = float(kinetics.specific_growth_logistic_r(300.0, 1.0, mu_max=0.8, model="steele",
                                                  param=300.0))
    # Without the correction the equilibrium would be K (1 - m/r) (Schaefer 1954).
    assert k * (1 - m / r) < 0.9 * k
    assert out.density[0, -1] == pytest.approx(k, rel=1e-6)
    check_closure(out.ledger)


def test_equilibrium_under_a_daily_cycle_is_near_k():
    n_days = 90
    par = diurnal_par(n_days)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m, capacity=600.0, mu_max=1.2,
                light_param=1000.0)
    out = integrate(d, rules(1, n_days), OPERATION)
    # Over a day X barely moves near K, so the day's net growth is zero at X = K: the
    # end-of-day density settles within 2 % (the first-order error of that argument).
    assert out.density[0, -10:] == pytest.approx(600.0, rel=0.02)


def test_k_zero_days_are_finite_and_only_respire():
    n_days = 40
    m = 0.06
    k = np.where((np.arange(n_days) >= 15) & (np.arange(n_days) < 25), 0.0, 500.0)
    d = drivers(diurnal_par(n_days), maintenance=m, capacity=k, mu_max=1.0)
    out = integrate(d, rules(1, n_days), OPERATION)
    assert np.isfinite(out.density).all() and np.isfinite(out.growth_rate).all()
    x = out.density[0]
    # On K = 0 days there is no gross growth: first-order decay at m (exp(-m) per day).
    np.testing.assert_allclose(x[16:25] / x[15:24], np.exp(-m), rtol=1e-9)
    check_closure(out.ledger)
    # Die-back above K (K falls from 500 to 100 with a dense culture) is booked as a loss,
    # never as negative gross growth.
    k2 = np.where(np.arange(n_days) < 20, 500.0, 100.0)
    drop = integrate(drivers(diurnal_par(n_days), maintenance=m, capacity=k2, mu_max=1.0,
                             light_param=1000.0),
                     rules(1, n_days), OPERATION)
    assert drop.ledger["grown"][0] > 0
    assert drop.density[0, -1] == pytest.approx(100.0, rel=0.05)
    check_closure(drop.ledger)


def test_inverse_capacity_limits():
    grows, inv = logistic_inverse_capacity(np.array([0.0, 500.0, 500.0, 500.0]),
                                           np.array([0.5, 0.5, 0.05, 0.0]),
                                           np.array([0.1, 0.1, 0.1, 0.1]))
    np.testing.assert_array_equal(grows, [False, True, True, True])
    np.testing.assert_allclose(inv, [0.0, (1 - 0.1 / 0.5) / 500.0, 0.0, 0.0])


@pytest.fixture(scope="module")
def logistic_demo(tmp_path_factory):
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    text = (root / "scenarios" / "kestrel_flats.toml").read_text(encoding="utf-8")
    text = text.replace('growth_form = "self_shading"', 'growth_form = "logistic"')
    # A strain that stops growing below 12 degC: the demo's winter water (about 10 degC
    # in December) then gives days with no net growth, K = 0.
    text = text.replace("t_min_c = 2 ", "t_min_c = 12 ")
    text = text.replace('"../weather/kestrel_flats.epw"',
                        f'"{(root / "weather" / "kestrel_flats.epw").as_posix()}"')
    assert 'growth_form = "logistic"' in text and "capacity_table" not in text
    assert "t_min_c = 12 " in text
    path = tmp_path_factory.mktemp("logistic") / "logistic.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_logistic_demo_runs_run_compare_outlook(logistic_demo, tmp_path, capsys):
    out = tmp_path / "o"
    assert main(["run", str(logistic_demo), "--out", str(out / "run"), "--no-plots"]) == 0
    import xarray as xr

    ds = xr.open_dataset(out / "run" / "results.nc", engine="h5netcdf")
    assert np.isfinite(ds["density"].values).all()
    assert (ds["carrying_capacity"].values == 0).any()  # the case has K = 0 days
    assert main(["compare", str(logistic_demo), "--members", "4", "--out",
                 str(out / "cmp")]) == 0
    assert main(["outlook", str(logistic_demo), "--years", "2", "--no-sensitivity",
                 "--out", str(out / "outlook")]) == 0
    text = capsys.readouterr().out
    assert "crashes per pond per year by cause" in text
    assert "synthetic weather years" in text  # the outlook names its weather basis
