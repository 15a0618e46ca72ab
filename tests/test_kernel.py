"""The compiled engine against the numpy engine (the reference), case by case.

The numpy engine is itself checked against outside references (closed-form logistic,
Schaefer 1954 surplus production, scipy's solve_ivp, the survival identity for crash
probabilities and competing causes, chemostat washout) in test_engine.py, test_crash.py
and test_harvest_operations.py. Here EVERY test of those modules that runs the engine runs
again with ``integrate`` replaced by a twin that runs both engines on the same arguments
and compares all daily outputs, so the compiled engine inherits each outside check. Then
cases built for the kind of input the compiled engine must get right: all four crash
causes with restarts, a floor that binds and washes cultures out, per-member inoculation,
per-member season plans, several driver sets, shared streams, every growth form and
light model; and invariance of its result to chunking and thread count.

Tolerance: 1e-5 relative on densities, removals, salvage, growth rates and losses, plus
an absolute 1e-5 times the run's largest density (a harvest down to a residual is a small
difference of two densities, so its relative error is larger than theirs; likewise net
growth rates with 1e-5 times the largest rate); crash days,
causes, states and at-floor days identical; hazard 1e-4 relative (stored in single
precision). Why they differ at all: the numpy engine takes the state-dependent exp(-tau)
of the light mean in single precision (relative error ~6e-8 per evaluation, see
engine._transmission); the compiled one in double. Over a year that drift stays near
1e-6 relative (measured below 1e-6 on the cases here); the logistic form shares every
operation and agrees to rounding.
"""

from __future__ import annotations

import dataclasses
import inspect

import numba
import numpy as np
import pytest
import test_crash
import test_engine
import test_harvest_operations
from engine_cases import OPERATION, diurnal_par, diurnal_temp_factor, drivers, rules

from pondsim.operations import crash as cr
from pondsim.operations import engine, kernel, plan_runs
from pondsim.operations.crash import CAUSES, CrashModel
from pondsim.operations.harvest import (
    HarvestRules,
    cut_back_to_floor,
    removal_fraction,
    washed_out,
)

RTOL, ATOL = 1e-5, 1e-9
FIELDS = ("density", "removed", "harvest_fraction", "growth_rate", "lost", "salvaged",
          "sampled", "grown", "respired")


def assert_same(a: engine.Daily, b: engine.Daily):
    """Compiled result *b* equals numpy result *a* within the stated tolerance."""
    atol = ATOL + RTOL * float(np.max(np.abs(a.density), initial=0.0))
    for name in FIELDS:
        x, y = getattr(a, name), getattr(b, name)
        if x is None:
            assert y is None
            continue
        # a net growth rate is a difference of gross and maintenance rates: its absolute
        # tolerance scales with the largest rate, as a harvest's with the largest density
        scale = atol if name != "growth_rate" else \
            ATOL + RTOL * float(np.max(np.abs(x), initial=0.0))
        np.testing.assert_allclose(y, x, rtol=RTOL, atol=scale, err_msg=name)
    for name in ("crashed", "status", "cause", "at_floor"):
        np.testing.assert_array_equal(getattr(b, name), getattr(a, name), err_msg=name)
    np.testing.assert_allclose(b.hazard, a.hazard, rtol=1e-4, atol=1e-7)
    assert set(b.ledger) == set(a.ledger)
    for key in a.ledger:
        np.testing.assert_allclose(b.ledger[key], a.ledger[key], rtol=RTOL, atol=atol,
                                   err_msg=key)


def _both(*args, **kwargs):
    kwargs.pop("engine", None)
    ref = engine.integrate(*args, **kwargs)
    assert_same(ref, engine.integrate(*args, engine="compiled", **kwargs))
    return ref


def _cases(module):
    """Every test function of *module*, one case per parameter set."""
    out = []
    for name, fn in inspect.getmembers(module, inspect.isfunction):
        if not name.startswith("test_") or fn.__module__ != module.__name__:
            continue
        marks = [m for m in getattr(fn, "pytestmark", []) if m.name == "parametrize"]
        if not inspect.signature(fn).parameters:
            out.append(pytest.param(module, name, {}, id=f"{module.__name__}::{name}"))
        elif len(marks) == 1 and set(inspect.signature(fn).parameters) == set(
                a.strip() for a in marks[0].args[0].split(",")):
            names = [a.strip() for a in marks[0].args[0].split(",")]
            for i, values in enumerate(marks[0].args[1]):
                values = values if len(names) > 1 else (values,)
                out.append(pytest.param(module, name, dict(zip(names, values, strict=True)),
                                        id=f"{module.__name__}::{name}[{i}]"))
    return out


@pytest.mark.parametrize("module,name,kwargs", _cases(test_engine) + _cases(test_crash)
                         + _cases(test_harvest_operations))
def test_every_engine_case_agrees(monkeypatch, module, name, kwargs):
    """Each engine, crash and harvest-operations test, with both engines compared on
    every engine call (directly and through the plan runner)."""
    monkeypatch.setattr(module, "integrate", _both)
    monkeypatch.setattr(plan_runs, "integrate", _both)
    getattr(module, name)(**kwargs)


# --------------------------------------------------------------------------------------
# Cases built for the compiled engine's kind of input
# --------------------------------------------------------------------------------------
def _two_sets(n_days, form, model, *, t_max=33.0):
    """Two driver sets with diurnal light and water temperature: warm spells above t_max
    (heat), a sudden cold spell (cold shock), a dull spell (starvation)."""
    hours = np.arange(n_days * 24)
    day = hours // 24
    ft, m = diurnal_temp_factor(n_days)
    dull = (day >= 20) & (day < 26)
    sets = []
    for peak, cap in ((2000.0, np.linspace(900.0, 250.0, n_days)),
                      (1200.0, np.linspace(600.0, 300.0, n_days))):
        par = np.where(dull, 0.1, 1.0) * diurnal_par(n_days, peak=peak)
        d = drivers(par, temp_factor=ft, maintenance=m, growth_form=form,
                    light_model=model, capacity=cap, mu_max=1.2)
        water = 24.0 + 5.0 * np.sin(2 * np.pi * (hours % 24 - 9.0) / 24.0)
        water = np.where((day >= 35) & (day < 40), water + 8.0, water)  # hot spell
        water = np.where((day >= 45) & (day < 48), water - 10.0, water)  # cold snap
        sets.append(dataclasses.replace(d, water_temperature=water[None, :],
                                        t_max_c=np.array([t_max])))
    return engine.Drivers(**{
        k: (np.concatenate([getattr(sets[0], k), getattr(sets[1], k)])
            if isinstance(getattr(sets[0], k), np.ndarray) else getattr(sets[0], k))
        for k in sets[0].__dataclass_fields__})


def _random_plans(n, n_days, rng):
    return HarvestRules(
        code=rng.integers(0, 4, (n, 2)).astype(np.int8),
        fraction=rng.uniform(0.05, 0.6, (n, 2)), every_days=rng.integers(1, 5, (n, 2)),
        trigger=rng.uniform(150, 700, (n, 2)),
        residual=np.where(rng.random((n, 2)) < 0.3, np.nan, rng.uniform(30, 300, (n, 2))),
        period_of_day=np.where(np.arange(n_days) < 30, 0, 1)[None, :].repeat(n, 0))


@pytest.mark.parametrize("form,model", [("logistic", "steele"), ("logistic", "monod"),
                                        ("self_shading", "steele"),
                                        ("self_shading", "monod")])
def test_season_with_every_cause_floor_and_plans_agrees(form, model):
    """Every crash cause, restarts, a binding floor, per-member start and inoculum,
    per-member two-period plans, two driver sets and streams shared by pairs."""
    n_days, n = 60, 160
    d = _two_sets(n_days, form, model)
    rng = np.random.default_rng(5)
    op = engine.Operation(start_day=rng.integers(0, 6, n), inoculum_g_m3=rng.uniform(
        40.0, 120.0, n), restart_days=4, harvest_hour=10, max_fraction=0.6,
        min_density_g_m3=60.0, sample_hour=14, floor_g_m3=70.0)
    crash = CrashModel(background_per_d=0.01, starvation_hazard_per_d=0.3,
                       heat_hazard_per_d_h=0.05, cold_hazard_per_d_k=0.05,
                       cold_onset_k=1.0, window_days=3, loss_fraction=0.7)
    kw = dict(set_of_member=np.arange(n) % 2, crash=crash, seed=9,
              stream_of_member=np.arange(n) // 2)
    rl = _random_plans(n, n_days, rng)
    a = engine.integrate(d, rl, op, **kw)
    b = engine.integrate(d, rl, op, engine="compiled", **kw)
    assert_same(a, b)
    # the case exercises what it claims (so that it can fail)
    causes = set(np.unique(a.cause[a.crashed]))
    assert {1, 3, 4} <= causes and a.crashed.sum() > 20, causes
    if form == "self_shading":
        assert 2 in causes  # starvation of dense self-shading cultures in the dull spell
    assert a.at_floor.sum() > 50
    np.testing.assert_array_equal(washed_out(b.at_floor, 3), washed_out(a.at_floor, 3))
    assert washed_out(a.at_floor, 3).any()
    assert (a.salvaged[a.crashed] > 0).all() and (a.salvaged[~a.crashed] == 0).all()


def test_no_crash_model_and_quiet_model_agree_and_book_no_salvage():
    n_days = 40
    d = _two_sets(n_days, "self_shading", "steele")
    rl = _random_plans(30, n_days, np.random.default_rng(1))
    kw = dict(set_of_member=np.arange(30) % 2, seed=3)
    for crash in (None, test_crash.QUIET):
        a = engine.integrate(d, rl, OPERATION, crash=crash, **kw)
        b = engine.integrate(d, rl, OPERATION, crash=crash, engine="compiled", **kw)
        assert_same(a, b)
        assert not b.crashed.any() and b.ledger["salvaged"].sum() == 0.0


@pytest.mark.parametrize("params", [
    dict(window_days=1, loss_fraction=1.0),  # whole culture lost: no salvage
    dict(window_days=10, loss_fraction=0.0, background_q10=1.0),  # all salvage, no Q10
    dict(window_days=2, starvation_hazard_per_d=3.0, background_per_d=0.0),  # starvation
])
def test_crash_parameter_edges_agree(params):
    n_days, n = 50, 48
    d = _two_sets(n_days, "self_shading", "steele")
    rl = _random_plans(n, n_days, np.random.default_rng(7))
    crash = dataclasses.replace(CrashModel(background_per_d=0.02, cold_onset_k=1.0),
                                **params)
    kw = dict(set_of_member=np.arange(n) % 2, crash=crash, seed=11)
    a = engine.integrate(d, rl, OPERATION, **kw)
    b = engine.integrate(d, rl, OPERATION, engine="compiled", **kw)
    assert_same(a, b)
    assert a.crashed.sum() > 3
    if crash.loss_fraction == 1.0:
        assert b.ledger["salvaged"].sum() == 0.0
    if crash.loss_fraction == 0.0:
        assert b.ledger["lost"].sum() == 0.0 and b.ledger["salvaged"].sum() > 0


def test_result_does_not_depend_on_chunks_or_threads():
    """Members' streams are their own: the same result, bit for bit, whatever the chunk
    size or the number of threads."""
    n_days, n = 40, 70
    d = _two_sets(n_days, "self_shading", "steele")
    rl = _random_plans(n, n_days, np.random.default_rng(2))
    crash = CrashModel(background_per_d=0.02, cold_hazard_per_d_k=0.05, cold_onset_k=1.0)
    kw = dict(set_of_member=np.arange(n) % 2, crash=crash, seed=4)
    ref = kernel.integrate_compiled(d, rl, OPERATION, **kw)
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = kernel.integrate_compiled(d, rl, OPERATION, chunk=9, **kw)
    finally:
        numba.set_num_threads(threads)
    assert ref.crashed.any()
    for name in FIELDS + ("crashed", "cause", "status", "hazard", "at_floor"):
        if getattr(ref, name) is not None:
            np.testing.assert_array_equal(getattr(one, name), getattr(ref, name), name)


def test_harvest_share_and_floor_match_the_numpy_rules():
    """The scalar harvest rule and floor equal the numpy ones on random states of every
    rule, with densities below, at and above the floor, and no floor."""
    rng = np.random.default_rng(1)
    n = 4000
    rl = HarvestRules(
        code=rng.integers(0, 4, (n, 1)).astype(np.int8), fraction=rng.uniform(0, 1, (n, 1)),
        every_days=rng.integers(1, 6, (n, 1)).astype(np.int32),
        trigger=np.where(rng.random((n, 1)) < 0.2, np.nan, rng.uniform(0, 800, (n, 1))),
        residual=np.where(rng.random((n, 1)) < 0.3, np.nan, rng.uniform(0, 500, (n, 1))),
        period_of_day=np.zeros((1, 1), np.int16))
    x = rng.uniform(0, 1000, n)
    x[:50] = 0.0
    x[50:100] = 200.0  # exactly at the floor below
    since = rng.integers(0, 8, n)
    frac, sched = removal_fraction(rl, 0, x, since, min_density_g_m3=100.0, max_fraction=0.7)
    for floor in (0.0, 200.0):
        cut, at = cut_back_to_floor(frac, x, floor)
        for j in range(n):
            f, s = kernel.harvest_share(int(rl.code[j, 0]), rl.fraction[j, 0],
                                        int(rl.every_days[j, 0]), rl.trigger[j, 0],
                                        rl.residual[j, 0], x[j], int(since[j]), 100.0, 0.7)
            assert f == pytest.approx(frac[j], rel=1e-15, abs=0.0) and s == sched[j]
            g, a = kernel.floor_share(f, x[j], floor)
            assert g == cut[j] and a == at[j]
        assert at.any() or floor == 0.0


def test_cause_of_crash_matches_assign_cause():
    """Crash decision, cause and total hazard from the same uniform number, on random
    hazards spanning zero, single causes and the boundaries between causes."""
    rng = np.random.default_rng(3)
    n = 20000
    parts = rng.exponential(0.3, (len(CAUSES), n)) * (rng.random((len(CAUSES), n)) < 0.6)
    u = rng.random(n)
    u[:200] = -np.expm1(-parts[:, :200].sum(axis=0))  # exactly at p: no crash
    hit, cause = cr.assign_cause(u, parts)
    for j in range(n):
        h, c = kernel.cause_of_crash(u[j], *parts[:, j])
        assert h == parts[:, j].sum() and c == cause[j] and (c > 0) == hit[j]
    assert len(np.unique(cause[hit])) == len(CAUSES)
    lost, salvage = kernel.crash_outcome(300.0, 0.6)
    assert lost == pytest.approx(180.0) and salvage == pytest.approx(120.0)


def test_unsupported_light_model_runs_on_numpy():
    """A light model without a compiled depth mean falls back to the numpy engine."""
    d = drivers(500.0, n_days=5, growth_form="self_shading", light_model="jassby_platt")
    assert not kernel.supports(d)
    a = engine.integrate(d, rules(2, 5), OPERATION)
    b = engine.integrate(d, rules(2, 5), OPERATION, engine="compiled")
    np.testing.assert_array_equal(a.density, b.density)
    with pytest.raises(ValueError, match="unknown engine"):
        engine.integrate(d, rules(2, 5), OPERATION, engine="fortran")


# --------------------------------------------------------------------------------------
# Through simulate: the results Dataset of the demo on both engines
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("sellable", [False, True])
def test_demo_dataset_is_the_same_on_both_engines(sellable):
    """Every variable of the demo's results Dataset (harvest with and without sellable
    salvage, crashes by cause, at-floor and washout days) on both engines; crash
    hazards raised so that every policy crashes."""
    from pathlib import Path

    from pondsim.operations.simulate import simulate
    from pondsim.scenario import load_scenario

    demo = load_scenario(Path(__file__).resolve().parents[1] / "scenarios"
                         / "kestrel_flats.toml")
    crash = dataclasses.replace(demo.crash, salvage_sellable=sellable,
                                background_per_d=0.01, starvation_hazard_per_d=0.2)
    out = {}
    for name in ("numpy", "compiled"):
        sc = dataclasses.replace(demo, crash=crash,
                                 run=dataclasses.replace(demo.run, engine=name))
        out[name] = simulate(sc, members=3, progress=False)
    a, b = out["numpy"], out["compiled"]
    assert set(a.data_vars) == set(b.data_vars)
    for var in a.data_vars:
        x, y = a[var].values, b[var].values
        if x.dtype.kind in "biu":
            np.testing.assert_array_equal(y, x, err_msg=var)
        elif x.dtype.kind == "f":
            scale = float(np.nanmax(np.abs(x), initial=0.0))
            np.testing.assert_allclose(y, x, rtol=RTOL, atol=ATOL + RTOL * scale,
                                       err_msg=var)
    assert int(b["crashed"].sum()) > 10 and float(b["salvaged"].sum()) > 0
    # salvage is product exactly when sellable: on crash days without a harvest the day's
    # product is the recovered salvage, or nothing
    eff = demo.harvest.recovery_efficiency
    only_crash = (b["crashed"] == 1) & (b["harvest_fraction"] == 0)
    assert bool(only_crash.any())
    expected = eff * b["salvaged"].where(only_crash) * (1.0 if sellable else 0.0)
    np.testing.assert_allclose(b["harvested"].where(only_crash).values, expected.values,
                               rtol=1e-12, atol=1e-12)
