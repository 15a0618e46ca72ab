"""Invariants of the engine over random cases (hypothesis): density >= 0, harvest <= stock,
the biomass ledger closes, and the engine's fast light kernels agree with the reference
closed forms of pondsim.pond.kinetics (Steele 1962; Monod/Tamiya), which are themselves checked
against scipy quadrature in test_kinetics.py."""

from __future__ import annotations

import numpy as np
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules
from hypothesis import given, settings
from hypothesis import strategies as st

from pondsim.operations.engine import FAST_DEPTH_MEANS, check_closure, integrate
from pondsim.operations.harvest import RULE_CODES
from pondsim.pond import kinetics


@settings(max_examples=25, deadline=None)
@given(
    mu=st.floats(0.2, 3.0), param=st.floats(50.0, 1200.0), kb=st.floats(0.02, 1.0),
    kbg=st.floats(0.0, 30.0), depth=st.floats(0.05, 1.0), m_ref=st.floats(0.0, 0.4),
    form=st.sampled_from(["self_shading", "logistic"]),
    model=st.sampled_from(["steele", "monod", "jassby_platt"]),
    code=st.sampled_from(list(RULE_CODES.values())), fraction=st.floats(0.01, 1.0),
    every=st.integers(1, 9), trigger=st.floats(20.0, 900.0), residual_share=st.floats(0.05, 0.95),
    start=st.integers(0, 10), peak=st.floats(0.0, 2500.0),
)
def test_ledger_closes_and_states_stay_physical(mu, param, kb, kbg, depth, m_ref, form, model,
                                                code, fraction, every, trigger,
                                                residual_share, start, peak):
    n_days = 30
    par = diurnal_par(n_days, peak=peak)
    ft, m = diurnal_temp_factor(n_days)
    d = drivers(par, temp_factor=ft, maintenance=m * (m_ref / 0.08), mu_max=mu,
                light_param=param, k_biomass=kb, k_background=kbg, depth_m=depth,
                light_model=model, growth_form=form, capacity=trigger * 1.5)
    residual = trigger * residual_share
    use_residual = code in (RULE_CODES["threshold"],) or (
        code == RULE_CODES["fixed_interval"] and residual_share > 0.5)
    rl = rules(1, n_days, code=code, fraction=fraction, every_days=every, trigger=trigger,
               residual=residual if use_residual else np.nan)
    op = OPERATION.__class__(**{**OPERATION.__dict__, "start_day": start})
    out = integrate(d, rl, op)  # raises LedgerError if the ledger does not close
    check_closure(out.ledger, rtol=1e-9)
    assert np.all(out.density >= 0)
    assert np.all(out.removed >= 0)
    assert np.all(out.harvest_fraction <= 1.0)
    # What is removed at the harvest hour never exceeds the stock then.
    x_at = np.divide(out.removed, out.harvest_fraction, out=np.zeros_like(out.removed),
                     where=out.harvest_fraction > 0)
    assert np.all(out.removed <= x_at + 1e-12)


@settings(max_examples=40, deadline=None)
@given(i0=st.floats(0.0, 2500.0), param=st.floats(20.0, 1500.0),
       tau=st.floats(1e-9, 400.0), model=st.sampled_from(sorted(FAST_DEPTH_MEANS)))
def test_fast_kernels_match_reference_closed_forms(i0, param, tau, model):
    fast = FAST_DEPTH_MEANS[model](np.array([i0]), param)(np.array([tau]))[0]
    ref = kinetics.depth_averaged_response(model, i0, tau, 1.0, param)
    # Single-precision exponentials: bounded at 1e-5 relative (plus 1e-9 absolute).
    assert abs(fast - ref) <= 1e-5 * abs(ref) + 1e-9


def test_same_input_same_result():
    n_days = 20
    d = drivers(diurnal_par(n_days), growth_form="self_shading")
    rl = rules(3, n_days, code=RULE_CODES["fixed_fraction"], fraction=[0.1, 0.2, 0.3])
    a = integrate(d, rl, OPERATION)
    b = integrate(d, rl, OPERATION)
    np.testing.assert_array_equal(a.density, b.density)
    # Members are independent: a member alone gives the same trajectory as in a batch.
    alone = integrate(d, rules(1, n_days, code=RULE_CODES["fixed_fraction"], fraction=0.2),
                      OPERATION)
    np.testing.assert_allclose(alone.density[0], a.density[1], rtol=1e-12)
