"""Tests for the inputs bill (pondsim.studies.bill_composition, bill_mixing, bill_water,
inputs_bill): stoichiometry, fertilisers, makeup water, raceway hydraulics, mixing power
and the bill."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from pondsim.errors import InputError
from pondsim.studies import bill_composition as comp
from pondsim.studies import bill_mixing as mix
from pondsim.studies import bill_water as water
from pondsim.studies import inputs_bill as inputs

# IUPAC/CIAAW 2021 abridged standard atomic weights, typed here independently of the module.
H, C, N, O, P, CA = 1.008, 12.011, 14.007, 15.999, 30.974, 40.078


# --- stoichiometry ---------------------------------------------------------------------

def test_atomic_weights_are_the_iupac_abridged_values():
    # CIAAW/IUPAC 2021 abridged standard atomic weights
    for el, w in {"H": H, "C": C, "N": N, "O": O, "P": P, "Ca": CA}.items():
        assert comp.ATOMIC_WEIGHTS[el] == w


@pytest.mark.parametrize("formula, expected", [
    ("H2O", 2 * H + O),
    ("CO2", C + 2 * O),
    ("CO(NH2)2", C + O + 2 * N + 4 * H),
    ("(NH4)2HPO4", 2 * N + 9 * H + P + 4 * O),
    ("Ca(H2PO4)2·H2O", CA + 2 * (2 * H + P + 4 * O) + 2 * H + O),
    ("Ca(H2PO4)2.H2O", CA + 2 * (2 * H + P + 4 * O) + 2 * H + O),
    ("CaSO4·2H2O", CA + 32.06 + 4 * O + 2 * (2 * H + O)),
])
def test_molar_mass_from_formula(formula, expected):
    # formula arithmetic with the standard atomic weights [R]
    assert comp.molar_mass(formula) == pytest.approx(expected, rel=1e-12)


def test_formula_errors():
    with pytest.raises(InputError, match="Zz"):
        comp.molar_mass("Zz2O")
    with pytest.raises(InputError, match="cannot read"):
        comp.molar_mass("Ca(H2PO4")
    with pytest.raises(InputError, match="cannot read"):
        comp.molar_mass("co2")


def test_co2_demand_is_carbon_times_co2_over_c_over_utilisation():
    # definition: m_X · f_C · M(CO2)/M(C) / u, with M(CO2)/M(C) = 44.009/12.011
    ratio = (C + 2 * O) / C
    x = np.array([0.0, 1.0, 250.0])
    assert np.allclose(comp.co2_demand(x, 0.45, 0.6), x * 0.45 * ratio / 0.6, rtol=1e-12)
    assert comp.CO2_PER_C == pytest.approx(ratio, rel=1e-12)
    # the rounded 44/12 differs by 0.07 %
    assert comp.CO2_PER_C == pytest.approx(44 / 12, rel=1e-3)


def test_co2_per_kg_biomass_matches_chisti():
    # Chisti (2007) Biotechnol. Adv. 25:294-306: ~50 % carbon -> 1.83 kg CO2 per kg
    # biomass (REFERENCES.md [M], from memory); 44.009/12.011 · 0.5 = 1.832
    assert comp.co2_demand(1.0, carbon_fraction=0.5, utilisation=1.0) == pytest.approx(
        1.833, abs=2e-3)


def test_co2_demand_keeps_series():
    s = pd.Series([1.0, 2.0], index=pd.date_range("2025-01-01", periods=2))
    out = comp.co2_demand(s)
    assert isinstance(out, pd.Series) and out.index.equals(s.index)


def test_nutrient_demand_defaults():
    # defaults from the biomass formula CO0.48H1.83N0.11P0.01 (Chisti 2007, sect. 3) with
    # the IUPAC weights typed above [R]
    m = C + 0.48 * O + 1.83 * H + 0.11 * N + 0.01 * P
    n, p = comp.nutrient_demand(np.array([0.0, 100.0]))
    assert n.tolist() == pytest.approx([0.0, 100 * 0.11 * N / m], rel=1e-12)
    assert p.tolist() == pytest.approx([0.0, 100 * 0.01 * P / m], rel=1e-12)


def test_redfield_mass_ratios():
    # Redfield (1958) C:N:P = 106:16:1 by atoms; masses from the IUPAC atomic weights
    n, p = comp.redfield_n_p(1.0)
    assert n == pytest.approx(16 * 14.007 / (106 * 12.011), rel=1e-12)
    assert p == pytest.approx(30.974 / (106 * 12.011), rel=1e-12)
    assert round(n, 4) == 0.1760 and round(p, 5) == 0.02433


def test_redfield_from_measured_carbon_close_to_measured_n_and_p():
    # Serejo et al. (2015) Environ. Sci. Technol. 49 (abstract): algal-bacterial biomass
    # held C 49 ± 2 %, N 9 %, P 1 % over 175 days. Redfield from 49 % C predicts 8.6 % N
    # and 1.2 % P: a loose cross-check (real cultures depart from Redfield).
    n, p = comp.redfield_n_p(0.49)
    assert n == pytest.approx(0.09, rel=0.10)
    assert p == pytest.approx(0.01, rel=0.25)


# --- fertilisers -----------------------------------------------------------------------

@pytest.mark.parametrize("name, element, nominal", [
    # nominal analyses of the pure compounds, as printed in fertiliser handbooks (from
    # memory): urea 46.6 % N, ammonium nitrate 35 % N, DAP 21.2 % N and 23.5 % P,
    # MAP 12.2 % N and 26.9 % P
    ("urea", "N", 0.466),
    ("ammonium_nitrate", "N", 0.35),
    ("dap", "N", 0.212),
    ("dap", "P", 0.235),
    ("map", "N", 0.122),
    ("map", "P", 0.269),
])
def test_pure_fertiliser_fractions_match_nominal_grades(name, element, nominal):
    assert comp.FERTILISERS[name].fraction(element) == pytest.approx(nominal, rel=0.005)


def test_fertiliser_fractions_follow_their_formulas():
    # [R] from the formulas with the IUPAC atomic weights typed in this file
    urea = C + O + 2 * N + 4 * H
    dap = 2 * N + 9 * H + P + 4 * O
    assert comp.FERTILISERS["urea"].n_fraction == pytest.approx(2 * N / urea, rel=1e-12)
    assert comp.FERTILISERS["dap"].n_fraction == pytest.approx(2 * N / dap, rel=1e-12)
    assert comp.FERTILISERS["dap"].p_fraction == pytest.approx(P / dap, rel=1e-12)
    assert comp.FERTILISERS["urea"].p_fraction == 0.0


def test_trade_grades_convert_p2o5_to_p():
    # P2O5 -> P factor 2·30.974/141.943 = 0.4364 (the usual 0.436, from memory)
    assert comp.P_PER_P2O5 == pytest.approx(2 * P / (2 * P + 5 * O), rel=1e-12)
    assert round(comp.P_PER_P2O5, 3) == 0.436
    # TSP 0-46-0 -> 20.1 % P; pure monocalcium phosphate monohydrate 24.6 % P [R]
    assert comp.FERTILISERS["tsp"].p_fraction == pytest.approx(0.2008, abs=5e-4)
    assert comp.mass_fraction("Ca(H2PO4)2·H2O", "P") == pytest.approx(0.2458, abs=5e-4)
    assert comp.FERTILISERS["dap_18_46_0"].n_fraction == 0.18


def test_fertiliser_mass():
    assert comp.fertiliser_mass(46.646, "urea") == pytest.approx(100.0, rel=1e-4)
    # DAP defaults to its P; N on request
    dap = comp.FERTILISERS["dap"]
    assert comp.fertiliser_mass(1.0, "dap") == pytest.approx(1 / dap.p_fraction)
    assert comp.fertiliser_mass(1.0, "dap", "N") == pytest.approx(1 / dap.n_fraction)
    custom = comp.Fertiliser("mix", 0.2, 0.1, "N", "user")
    assert comp.fertiliser_mass(2.0, custom) == pytest.approx(10.0)
    with pytest.raises(InputError, match="contains no P"):
        comp.fertiliser_mass(1.0, "urea", "P")
    with pytest.raises(InputError, match="did you mean 'urea'"):
        comp.fertiliser_mass(1.0, "ureaa")


def test_fertiliser_plan_credits_the_nitrogen_of_the_phosphate():
    n_kg, p_kg = 70.0, 10.0
    plan = comp.fertiliser_plan(n_kg, p_kg, "urea", "dap_18_46_0")
    dap = comp.FERTILISERS["dap_18_46_0"]
    urea = comp.FERTILISERS["urea"]
    assert plan["dap_18_46_0"] * dap.p_fraction == pytest.approx(p_kg)
    supplied_n = plan["dap_18_46_0"] * dap.n_fraction + plan["urea"] * urea.n_fraction
    assert supplied_n == pytest.approx(n_kg)
    # when the phosphate alone brings more N than needed, no urea (never negative)
    plan = comp.fertiliser_plan(0.1, 10.0, "urea", "dap_18_46_0")
    assert plan["urea"] == 0.0
    # same product for both: one line
    assert list(comp.fertiliser_plan(70.0, 10.0, "dap", "dap")) == ["dap"]


# --- water -----------------------------------------------------------------------------

def test_makeup_water_floors_net_evaporation_per_period():
    evap = np.array([6.0, 2.0, 5.0])
    rain = np.array([0.0, 10.0, 1.0])
    # 6 mm and 4 mm over 1000 m2 -> 6 and 4 m3; the wet day gives 0, not -8
    out = water.makeup_water(evap, rain, 1000.0)
    assert out.tolist() == pytest.approx([6.0, 0.0, 4.0])
    # harvest water, half recycled
    out = water.makeup_water(evap, rain, 1000.0, harvest_volume_m3=10.0, recycle_fraction=0.5)
    assert out.tolist() == pytest.approx([11.0, 5.0, 9.0])
    # summing first would net the wet day against the dry ones and give less
    assert water.makeup_water(evap.sum(), rain.sum(), 1000.0) < 10.0


# --- hydraulics ------------------------------------------------------------------------

def test_manning_worked_example_rectangular_channel():
    # Published worked problem (San Diego State University civil engineering, 2008;
    # facets.sdsu.edu): rectangular channel b = 6 m, y = 1.6 m, n = 0.015,
    # S0 = 0.0025 -> R = 1.043 m, v = 3.428 m/s, Q = 32.91 m3/s (printed, rounded steps)
    r = mix.hydraulic_radius_rectangular(6.0, 1.6)
    assert r == pytest.approx(1.043, abs=5e-4)
    v = mix.manning_velocity(r, 0.0025, 0.015)
    assert v == pytest.approx(3.428, rel=1e-3)
    assert v * 6.0 * 1.6 == pytest.approx(32.91, rel=1e-3)


def test_manning_second_worked_example():
    # Same publisher (2007; jon.sdsu.edu): b = 5 m,
    # y = 0.8 m, n = 0.015, S0 = 0.0025 -> R = 0.606 m, v = 2.387 m/s, Q = 9.548 m3/s
    r = mix.hydraulic_radius_rectangular(5.0, 0.8)
    v = mix.manning_velocity(r, 0.0025, 0.015)
    assert r == pytest.approx(0.606, abs=5e-4)
    assert v == pytest.approx(2.387, rel=1e-3)
    assert v * 4.0 == pytest.approx(9.548, rel=1e-3)


def test_friction_slope_inverts_manning():
    # v = (1/n) R^(2/3) S^(1/2)  <=>  S = (n v / R^(2/3))^2
    r = np.array([0.05, 0.2, 1.043])
    v = np.array([0.1, 0.25, 3.428])
    s = mix.manning_friction_slope(v, r, 0.013)
    assert np.allclose(mix.manning_velocity(r, s, 0.013), v, rtol=1e-12)
    # uniform flow of the worked example: friction slope equals the bed slope 0.0025
    r6 = mix.hydraulic_radius_rectangular(6.0, 1.6)
    assert mix.manning_friction_slope(3.428, r6, 0.015) == pytest.approx(0.0025, rel=2e-3)


def test_head_loss_friction_and_bends():
    # friction only: S·L; with the worked example's channel, 1 km loses 2.5 m
    h = mix.raceway_head_loss(3.428, 6.0, 1.6, 1000.0, n_bends=0, manning_n=0.015)
    assert h == pytest.approx(2.5, rel=2e-3)
    # bends only (L = 0): N k v²/(2 g), g = 9.80665 m s-2 (standard gravity)
    h = mix.raceway_head_loss(0.3, 5.0, 0.3, 0.0, n_bends=2, bend_k=2.0)
    assert h == pytest.approx(2 * 2.0 * 0.09 / (2 * 9.80665), rel=1e-12)
    # vectorised over velocity
    hv = mix.raceway_head_loss(np.array([0.2, 0.3]), 5.0, 0.3, 200.0)
    assert hv.shape == (2,) and hv[1] > hv[0]


def test_paddlewheel_power_definition():
    # P = ρ g Q h / η with ρ = 1000 kg m-3, g = 9.80665 m s-2
    assert mix.paddlewheel_power(0.05, 0.4, 0.2) == pytest.approx(
        1000 * 9.80665 * 0.4 * 0.05 / 0.2, rel=1e-12)


def test_raceway_geometry():
    g = mix.raceway_geometry(1000.0, length_to_width=10, n_channels=2)
    # w = sqrt(A / (r n²)) = 5 m; L = r n w = 100 m; flow path n L = 200 m = A / w
    assert g["channel_width_m"] == pytest.approx(5.0)
    assert g["pond_length_m"] == pytest.approx(100.0)
    assert g["channel_length_m"] == pytest.approx(1000.0 / g["channel_width_m"])
    assert g["pond_length_m"] * g["pond_width_m"] == pytest.approx(1000.0)
    assert g["n_bends"] == 2
    with pytest.raises(InputError, match="even number"):
        mix.raceway_geometry(1000.0, n_channels=3)


def test_mixing_power_of_a_1000_m2_raceway_is_plausible():
    # Published paddlewheel raceway mixing power spans roughly 0.1-4 W per m2 of pond
    # (from memory: ~1-4 W m-3 of culture is often quoted for raceways, i.e. a few tenths
    # to ~1 W m-2 at 0.2-0.3 m depth; small ponds and high velocities run higher).
    # Plausibility band only.
    m = inputs.mixing_power(inputs.RacewayFarm(area_m2=1000.0, depth_m=0.25,
                                               velocity_m_s=0.25))
    assert 0.1 <= m["power_w_m2"] <= 4.0
    # and per culture volume within the 1-4 W m-3 quoted for raceways (same memory)
    assert 1.0 <= m["power_w_m2"] / 0.25 <= 4.0


def test_mixing_power_scales_with_velocity_cubed_and_bends_matter_less_in_big_ponds():
    # both losses go as v², the flow as v -> power as v³ (Manning and k v²/2g)
    slow = inputs.mixing_power(inputs.RacewayFarm(1000.0, velocity_m_s=0.2))["power_w"]
    fast = inputs.mixing_power(inputs.RacewayFarm(1000.0, velocity_m_s=0.3))["power_w"]
    assert fast / slow == pytest.approx(1.5 ** 3, rel=1e-9)
    params = inputs.InputsParams()
    shares = []
    for area in (1000.0, 40000.0):
        m = inputs.mixing_power(inputs.RacewayFarm(area), params)
        bend = 2 * params.bend_k * 0.25 ** 2 / (2 * mix.GRAVITY)
        shares.append(bend / m["head_m"])
    assert shares[1] < shares[0]


def test_mixing_power_uses_given_channel_width():
    m = inputs.mixing_power(inputs.RacewayFarm(1000.0, channel_width_m=4.0))
    assert m["channel_width_m"] == 4.0 and m["channel_length_m"] == pytest.approx(250.0)


# --- bill ------------------------------------------------------------------------------

def _daily(values, start="2025-01-01"):
    return pd.Series(values, index=pd.date_range(start, periods=len(values), freq="D"))


def _year_inputs(seed=0):
    rng = np.random.default_rng(seed)
    days = pd.date_range("2025-01-01", "2025-12-31", freq="D")
    harvested = pd.Series(rng.uniform(0, 200, len(days)), index=days)  # kg farm-1 d-1
    evap = pd.Series(rng.uniform(0, 8, len(days)), index=days)
    rain = pd.Series(np.where(rng.uniform(size=len(days)) < 0.2, 10.0, 0.0), index=days)
    return harvested, evap, rain


PRICES = {"co2_per_t": 50.0, "n_fertiliser_per_t": 400.0, "p_fertiliser_per_t": 700.0,
          "water_per_m3": 0.5, "electricity_per_MWh": 120.0}


def test_bill_annual_row_is_the_sum_of_months():
    harvested, evap, rain = _year_inputs()
    farm = inputs.RacewayFarm(area_m2=1000.0, count=10, depth_m=0.25)
    bill = inputs.inputs_bill(harvested, evap, rain, farm, prices=PRICES)
    assert list(bill.index[:12]) == ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug",
                                     "Sep", "Oct", "Nov", "Dec"]
    assert bill.index[-1] == "year"
    pd.testing.assert_series_equal(bill.iloc[:12].sum(), bill.loc["year"], check_names=False)
    assert bill.loc["year", "biomass_t"] == pytest.approx(harvested.sum() / 1000)


def test_bill_values():
    harvested, evap, rain = _year_inputs(1)
    farm = inputs.RacewayFarm(area_m2=1000.0, count=10, depth_m=0.25)
    params = inputs.InputsParams(recycle_fraction=0.8)
    bill = inputs.inputs_bill(harvested, evap, rain, farm, params=params)
    y = bill.loc["year"]
    total_kg = harvested.sum()
    d = comp.DEFAULT_COMPOSITION
    assert y["co2_t"] == pytest.approx(comp.co2_demand(total_kg, d["carbon_fraction"],
                                                       0.7) / 1000)
    assert y["n_t"] == pytest.approx(d["n_fraction"] * total_kg / 1000)
    assert y["p_t"] == pytest.approx(d["p_fraction"] * total_kg / 1000)
    # fertilisers supply exactly the N and P
    dap, urea = comp.FERTILISERS["dap_18_46_0"], comp.FERTILISERS["urea"]
    assert y["dap_18_46_0_t"] * dap.p_fraction == pytest.approx(y["p_t"])
    assert (y["dap_18_46_0_t"] * dap.n_fraction + y["urea_t"] * urea.n_fraction
            == pytest.approx(y["n_t"]))
    # water: daily floor of evaporation - rain over 10 000 m2, plus 20 % of the harvest
    # volume at 500 g m-3
    expected = ((evap - rain).clip(lower=0).sum() * 1e-3 * 10000.0
                + total_kg * 1e3 / 500.0 * 0.2)
    assert y["makeup_water_m3"] == pytest.approx(expected)
    # mixing: 365 days × 24 h × 10 ponds
    power = inputs.mixing_power(farm, params)["power_w"]
    assert y["mixing_MWh"] == pytest.approx(power * 10 * 24 * 365 * 1e-6)
    assert bill.loc["Feb", "mixing_MWh"] == pytest.approx(power * 10 * 24 * 28 * 1e-6)


def test_bill_prices_multiply_through():
    harvested, evap, rain = _year_inputs(2)
    farm = inputs.RacewayFarm(area_m2=2000.0, count=3)
    bill = inputs.inputs_bill(harvested, evap, rain, farm, prices=PRICES)
    assert np.allclose(bill["co2_cost"], bill["co2_t"] * 50.0)
    assert np.allclose(bill["urea_cost"], bill["urea_t"] * 400.0)
    assert np.allclose(bill["dap_18_46_0_cost"], bill["dap_18_46_0_t"] * 700.0)
    assert np.allclose(bill["water_cost"], bill["makeup_water_m3"] * 0.5)
    assert np.allclose(bill["mixing_cost"], bill["mixing_MWh"] * 120.0)
    parts = bill[["co2_cost", "urea_cost", "dap_18_46_0_cost", "water_cost", "mixing_cost"]]
    assert np.allclose(bill["total_cost"], parts.sum(axis=1))
    # doubling every price doubles every cost
    double = inputs.inputs_bill(harvested, evap, rain, farm,
                                prices={k: 2 * v for k, v in PRICES.items()})
    assert np.allclose(double["total_cost"], 2 * bill["total_cost"])
    # no prices, no cost columns
    plain = inputs.inputs_bill(harvested, evap, rain, farm)
    assert not any(c.endswith("_cost") for c in plain.columns)
    with pytest.raises(InputError, match="did you mean 'co2_per_t'"):
        inputs.inputs_bill(harvested, evap, rain, farm, prices={"co2_per_tt": 1.0})


def test_bill_zero_biomass_gives_zero_co2_n_p():
    _, evap, rain = _year_inputs(3)
    zero = pd.Series(0.0, index=evap.index)
    bill = inputs.inputs_bill(zero, evap, rain, inputs.RacewayFarm(1000.0), prices=PRICES)
    for col in ("biomass_t", "co2_t", "n_t", "p_t", "urea_t", "dap_18_46_0_t", "co2_cost"):
        assert (bill[col] == 0.0).all(), col
    # the ponds still evaporate and are still mixed
    assert bill.loc["year", "makeup_water_m3"] > 0
    assert bill.loc["year", "mixing_MWh"] > 0


def test_bill_accepts_month_numbers_and_partial_years():
    months = pd.Index(range(1, 13))
    harvested = pd.Series(1000.0, index=months)
    evap = pd.Series(150.0, index=months)
    farm = SimpleNamespace(area_m2=1000.0, count=2, depth_m=0.3)  # a scenario-like pond
    bill = inputs.inputs_bill(harvested, evap, None, farm)
    assert bill.loc["year", "biomass_t"] == pytest.approx(12.0)
    recycled = inputs.InputsParams().recycle_fraction
    assert bill.loc["year", "makeup_water_m3"] == pytest.approx(
        12 * 150e-3 * 2000 + 12 * 1000 * 1e3 / 500 * (1 - recycled))
    power = inputs.mixing_power(farm)["power_w"]
    assert bill.loc["year", "mixing_MWh"] == pytest.approx(power * 2 * 24 * 365 * 1e-6)
    # ten daily rows in January: ten days of mixing, not 31
    bill = inputs.inputs_bill(_daily([1.0] * 10), _daily([5.0] * 10), None, farm)
    assert list(bill.index) == ["Jan", "year"]
    assert bill.loc["Jan", "mixing_MWh"] == pytest.approx(power * 2 * 24 * 10 * 1e-6)


def test_bill_over_two_years_labels_months_by_year():
    days = pd.date_range("2024-12-30", periods=4, freq="D")
    s = pd.Series(1.0, index=days)
    bill = inputs.inputs_bill(s, s, None, inputs.RacewayFarm(1000.0))
    assert list(bill.index) == ["2024-12", "2025-01", "total"]


def test_bill_rejects_bad_inputs():
    harvested, evap, rain = _year_inputs()
    farm = inputs.RacewayFarm(1000.0)
    with pytest.raises(InputError, match="same index"):
        inputs.inputs_bill(harvested, evap, rain.iloc[:-1], farm)
    with pytest.raises(InputError, match="pandas Series"):
        inputs.inputs_bill(harvested.to_numpy(), evap, rain, farm)
    with pytest.raises(InputError, match="co2_utilisation"):
        inputs.InputsParams(co2_utilisation=0.0)
    with pytest.raises(InputError, match="fertiliser"):
        inputs.InputsParams(p_fertiliser="bonemeal")


# --- from a results Dataset ------------------------------------------------------------

def _results(n_days=59, members=3):
    dates = pd.date_range("2025-01-01", periods=n_days, freq="D")
    rng = np.random.default_rng(5)
    harvested = rng.uniform(0, 30, (2, members, n_days))  # g m-2 d-1
    fraction = np.where(harvested > 15, 0.2, 0.0)
    dims = ("policy", "member", "day")
    return xr.Dataset(
        {"harvested": (dims, harvested), "harvest_fraction": (dims, fraction),
         "evaporation": (("day",), rng.uniform(0, 6, n_days))},
        coords={"policy": ["a", "b"], "member": np.arange(members),
                "day": np.arange(1, n_days + 1), "date": (("day",), dates.to_numpy())},
        attrs={"pond_area_m2": 1000.0, "pond_count": 4, "depth_m": 0.25},
    )


def test_bill_from_results():
    ds = _results()
    bill = inputs.bill_from_results(ds, policy="b")
    farm_area = 4000.0
    expected_t = float(ds["harvested"].sel(policy="b").mean("member").sum()) * farm_area * 1e-6
    assert bill.loc["year", "biomass_t"] == pytest.approx(expected_t)
    assert list(bill.index) == ["Jan", "Feb", "year"]
    vol = float(ds["harvest_fraction"].sel(policy="b").mean("member").sum()) * 1000 * 0.25 * 4
    evap_m3 = float(ds["evaporation"].clip(min=0).sum()) * 1e-3 * farm_area
    recycled = inputs.InputsParams().recycle_fraction
    assert bill.loc["year", "makeup_water_m3"] == pytest.approx(evap_m3 + vol * (1 - recycled))
    # rain reduces the makeup water; a wrong length is refused
    wet = inputs.bill_from_results(ds, policy="b", rain_mm_daily=np.full(59, 2.0))
    assert wet.loc["year", "makeup_water_m3"] < bill.loc["year", "makeup_water_m3"]
    with pytest.raises(InputError, match="one value per simulated day"):
        inputs.bill_from_results(ds, rain_mm_daily=np.zeros(3))
    with pytest.raises(InputError, match="unknown policy"):
        inputs.bill_from_results(ds, policy="c")

