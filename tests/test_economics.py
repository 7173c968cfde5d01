import numpy as np
import numpy_financial as npf
import pytest

from fleet import battery, economics


def test_replacement_present_value_matches_numpy_financial():
    # source: numpy-financial npv (reference library); battery of 100 USD replaced at years 5, 10, 15 in 20
    cash = np.zeros(21)
    cash[[5, 10, 15]] = 100.0
    assert economics.replacement_present_value(100.0, 5.0, 20, 0.08) == pytest.approx(npf.npv(0.08, cash), rel=1e-12)


def test_lifecycle_cost_matches_a_cash_flow_npv():
    # source: numpy-financial npv; capex 1000, O&M 2 %/yr, battery 300 every 6 years, controller 50 every 10
    cash = np.zeros(21)
    cash[0] = 1000.0
    cash[1:] += 20.0
    cash[[6, 12, 18]] += 300.0
    cash[10] += 50.0
    got = economics.lifecycle_cost(1000.0, 300.0, 6.0, 50.0, 0.0, horizon_years=20, rate=0.08, om_fraction=0.02,
                                   controller_life_years=10, inverter_life_years=10)
    assert got == pytest.approx(npf.npv(0.08, cash), rel=1e-12)


def test_lcoe_is_cost_over_discounted_energy():
    # source: Short, Packey & Holt (1995) NREL/TP-462-5173, levelised cost definition; annuity via numpy-financial pv
    energy_pv = -npf.pv(0.08, 20, 100.0)
    assert economics.levelised_cost_usd_per_kwh(1000.0, 100.0, 20, 0.08) == pytest.approx(1000.0 / energy_pv)


def test_cycle_life_fit_passes_near_the_datasheet_points():
    a, b = battery.cycle_life_fit(2000, 800, 450)
    n = battery.cycles_to_failure(np.array([0.2, 0.5, 0.8]), a, b)
    assert np.allclose(n, [2000, 800, 450], rtol=0.12)
    assert b > 0


def test_battery_life_is_the_sooner_of_wear_and_calendar():
    a, b = battery.cycle_life_fit(2000, 800, 450)
    nominal = 600.0
    total = battery.lifetime_throughput_wh(nominal, 0.5, a, b)
    assert battery.service_life_years(total / 2, nominal, 0.5, a, b, 5.0) == pytest.approx(2.0)
    assert battery.service_life_years(total / 20, nominal, 0.5, a, b, 5.0) == pytest.approx(5.0)
    assert battery.service_life_years(0.0, nominal, 0.5, a, b, 5.0) == pytest.approx(5.0)


def test_self_discharge_compounds_to_the_monthly_rate():
    h = battery.self_discharge_per_hour(3.0)
    assert (1 - h) ** (30 * 24) == pytest.approx(0.97, rel=1e-12)
