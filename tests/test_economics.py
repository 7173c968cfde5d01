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


def test_lifecycle_cost_with_transport_and_salvage_matches_a_cash_flow_npv():
    # source: numpy-financial npv on the written-out cash flow; salvage as a negative cost in the
    # last year of the analysis period (Short, Packey & Holt 1995, NREL/TP-462-5173), straight line
    # (common practice). Capex 1000 of which battery 300 (life 6: bought at 0, 6, 12, 18), controller
    # 50 (life 10: bought at 0, 10), no inverter, the other 650 lasting 25 years; O&M 2 %/yr; delivery
    # 40 at year 0 and 20 with each replacement battery.
    cash = np.zeros(21)
    cash[0] = 1000.0 + 40.0
    cash[1:] += 20.0
    cash[[6, 12, 18]] += 300.0 + 20.0
    cash[10] += 50.0
    # at year 20 the battery bought at 18 has 4 of its 6 years left, the controller bought at 10
    # none, the rest 5 of its 25 years
    cash[20] -= 300.0 * 4 / 6 + 650.0 * 5 / 25
    got = economics.lifecycle_cost(1000.0, 300.0, 6.0, 50.0, 0.0, horizon_years=20, rate=0.08, om_fraction=0.02,
                                   controller_life_years=10, inverter_life_years=10, array_life_years=25,
                                   delivery_usd=40.0, battery_delivery_usd=20.0)
    assert got == pytest.approx(npf.npv(0.08, cash), rel=1e-12)


@pytest.mark.parametrize("life, left", [
    (4.0, 0.0),        # bought at 0, 4, 8, 12, 16: worn out exactly at 20
    (6.0, 4 / 6),      # bought at 18: 4 of 6 years left
    (7.0, 1 / 7),      # bought at 14: 1 of 7 years left
    (7.5, 2.5 / 7.5),  # bought at 15: 2.5 of 7.5 years left
    (30.0, 10 / 30),   # never replaced: 10 of 30 years left
])
def test_salvage_present_value_is_the_discounted_remaining_share(life, left):
    # source: numpy-financial npv of a single credit in year 20 (the residual value, Short, Packey &
    # Holt 1995); remaining share by straight-line depreciation (common practice)
    cash = np.zeros(21)
    cash[20] = 100.0 * left
    got = economics.salvage_present_value(100.0, life, 20, 0.07)
    assert got == pytest.approx(npf.npv(0.07, cash), rel=1e-12, abs=1e-12)
    # vectorised: the same in an array
    lives = np.array([life, life])
    np.testing.assert_allclose(economics.salvage_present_value([100.0, 50.0], lives, 20, 0.07),
                               [npf.npv(0.07, cash), npf.npv(0.07, cash) / 2], rtol=1e-12, atol=1e-12)


def test_salvage_counts_the_same_purchases_as_the_replacements():
    # a life of 20/3 years: H / L rounds to 3.0000000000000004; replacements at 6.67 and 13.33 only
    # (the third falls on the horizon), so the last battery bought is worn out exactly at year 20
    life = 20.0 / 3.0
    # source: numpy-financial npv at a zero rate is the plain sum: two replacements of 1 USD
    assert economics.replacement_present_value(1.0, life, 20, 0.0) == pytest.approx(npf.npv(0.0, [0, 1, 1]))
    assert economics.salvage_present_value(100.0, life, 20, 0.05) == pytest.approx(0.0, abs=1e-9)
    # a part that never wears out keeps its whole price (credited in year 20)
    cash = np.zeros(21)
    cash[20] = 100.0
    assert economics.salvage_present_value(100.0, np.inf, 20, 0.05) == pytest.approx(npf.npv(0.05, cash))


def test_lifecycle_cost_without_array_life_leaves_salvage_out():
    # source: numpy-financial npv; the kit's salvage credit is the difference
    kw = dict(horizon_years=20, rate=0.08, om_fraction=0.02, controller_life_years=10, inverter_life_years=8)
    without = economics.lifecycle_cost(800.0, 200.0, 7.0, 40.0, 120.0, **kw)
    with_ = economics.lifecycle_cost(800.0, 200.0, 7.0, 40.0, 120.0, array_life_years=25.0, **kw)
    cash = np.zeros(21)
    # battery bought at 14 (1 of 7 years left), controller at 10 (none), inverter at 16 (4 of 8),
    # the other 440 (25 years) 5 years left
    cash[20] = 200.0 / 7 + 120.0 * 4 / 8 + 440.0 * 5 / 25
    assert without - with_ == pytest.approx(npf.npv(0.08, cash), rel=1e-12)
