import numpy as np
import pytest

from fleet import cables


def test_voltage_drop_of_a_two_wire_run_by_hand():
    # source: IEC 60228:2004 Table 3, class 5 copper 4 mm2: 4.95 ohm/km at 20 degC (from memory);
    # hand calculation: 2 x 10 m x 10 A x 4.95 ohm/km = 0.99 V
    assert cables.voltage_drop_v(10.0, 10.0, 4.0, temp_c=20.0) == pytest.approx(0.99, rel=1e-12)


def test_resistance_rises_with_conductor_temperature():
    # source: IEC 60228:2004 Annex B, copper temperature coefficient 0.00393 /K at 20 degC
    r20 = cables.resistance_ohm_per_km(6.0, 20.0)
    assert cables.resistance_ohm_per_km(6.0, 70.0) == pytest.approx(r20 * (1 + 0.00393 * 50), rel=1e-12)
    with pytest.raises(ValueError):
        cables.resistance_ohm_per_km(5.0)


def test_voltage_drop_governs_a_long_low_voltage_run():
    # hand calculation: 3 % of 12 V over a 10 m run at 10 A allows 0.36 / (2 x 10 x 10) = 1.8 ohm/km;
    # IEC 60228 class 5: 10 mm2 has 1.91, 16 mm2 has 1.21 ohm/km (from memory)
    assert cables.smallest_section_mm2(10.0, 10.0, 12.0, 0.03, temp_c=20.0) == 16.0


def test_current_governs_a_short_run():
    # source: NEC 690.8(B): conductors carry 125 % of the continuous current: 1.25 x 60 A = 75 A;
    # the first section rated for it in cables.AMPACITY_A is 10 mm2 (98 A), and 1 m at 48 V drops
    # far less than 3 %
    sec = cables.smallest_section_mm2(60.0, 1.0, 48.0, 0.03)
    assert sec == 10.0
    assert cables.AMPACITY_A[list(cables.SECTIONS_MM2).index(sec)] >= 75.0
    assert np.isnan(cables.smallest_section_mm2(2000.0, 1.0, 48.0))


def test_fuse_is_the_next_standard_rating_above_125_percent():
    # source: NEC 690.9(B) (125 % of the continuous current) and 240.6(A) standard ratings
    assert cables.fuse_rating_a(14.0) == 20.0   # 17.5 A -> 20 A
    assert cables.fuse_rating_a(16.0) == 20.0   # 20 A exactly
    assert cables.fuse_rating_a(80.0) == 100.0  # 100 A exactly
    assert cables.fuse_rating_a(100.0) == 125.0
    assert cables.string_fuses_needed(3) and not cables.string_fuses_needed(2)


def test_every_candidate_kit_is_wired_within_its_ratings(kits):
    # source: NEC 690.8(A)(1) (PV circuit current 125 % of Isc), 690.8(B) (conductor 125 % of it),
    # 690.9(B) (fuse at least 125 % of the circuit current); 3 % drop limit (# common practice)
    k = kits[0]
    amp = dict(zip(cables.SECTIONS_MM2, cables.AMPACITY_A))
    assert k[["pv_cable_mm2", "battery_cable_mm2", "battery_fuse_a"]].notna().all().all()
    assert (k.pv_cable_mm2.map(amp) >= 1.25 * k.pv_circuit_current_a - 1e-9).all()
    assert (k.battery_cable_mm2.map(amp) >= 1.25 * k.battery_circuit_current_a - 1e-9).all()
    assert (k.battery_fuse_a >= 1.25 * k.battery_circuit_current_a - 1e-9).all()
    assert (k.pv_cable_drop_pct <= 3.0 + 1e-9).all() and (k.battery_cable_drop_pct <= 3.0 + 1e-9).all()
    many = k.strings_in_parallel >= 3
    assert k.loc[many, "string_fuse_a"].notna().all() and k.loc[~many, "string_fuse_a"].isna().all()


def test_inverter_and_load_circuits_are_wired_and_fused(kits):
    # source: NEC 690.8(B) (conductor 125 % of the circuit current), 690.9(B) (fuse >= 125 % of it),
    # 240.4 (a conductor's ampacity covers the rating of the fuse protecting it); 3 % drop (# common practice)
    k = kits[0]
    amp = dict(zip(cables.SECTIONS_MM2, cables.AMPACITY_A))
    ac, dc = k[k.topology == "ac"], k[k.topology == "dc"]
    # inverter input at rated power and 90 % of nominal voltage: P / (efficiency x 0.9 x V)
    i_inv = ac.inverter_rated_w / (ac.inverter_efficiency * 0.9 * ac.system_voltage_v)
    assert np.allclose(ac.inverter_circuit_current_a, i_inv)
    assert (ac.inverter_fuse_a >= 1.25 * i_inv - 1e-9).all()
    assert (ac.inverter_cable_mm2.map(amp) >= ac.inverter_fuse_a).all()
    assert (ac.battery_cable_mm2.map(amp) >= ac.battery_fuse_a).all()
    assert (ac.inverter_cable_drop_pct <= 3.0 + 1e-9).all()
    assert ac.load_cable_mm2.isna().all() and dc.inverter_cable_mm2.isna().all()
    assert (dc.load_cable_mm2.map(amp) >= 1.25 * dc.load_circuit_current_a - 1e-9).all()
    assert (dc.load_cable_drop_pct <= 3.0 + 1e-9).all()


def test_section_choice_keeps_to_the_stocked_sizes_and_the_fuse():
    # hand calculation: 20 A over 1.5 m at 12 V, 3 % drop: 0.36 V / (2 x 1.5 m x 20 A) = 6.0 ohm/km at
    # 50 degC = 5.37 ohm/km at 20 degC (IEC 60228 Annex B, 0.00393 /K); class 5 (from memory): 2.5 mm2 has
    # 7.98, 4 mm2 4.95 ohm/km -> 4 mm2; without 4 mm2 in stock the next stocked size, 10 mm2
    assert cables.smallest_section_mm2(20.0, 1.5, 12.0) == 4.0
    assert cables.smallest_section_mm2(20.0, 1.5, 12.0, available_mm2=[2.5, 10.0, 16.0]) == 10.0
    assert np.isnan(cables.smallest_section_mm2(20.0, 1.5, 12.0, available_mm2=[1.5, 2.5]))
    # source: NEC 240.4: a 60 A fuse needs a conductor of at least 60 A; 4 mm2 carries 55 A, 6 mm2 70 A
    # (cables.AMPACITY_A, from memory)
    assert cables.smallest_section_mm2(20.0, 1.5, 12.0, min_ampacity_a=60.0) == 6.0
    assert cables.ampacity_a([4.0, 6.0]).tolist() == [55.0, 70.0]
    with pytest.raises(ValueError):
        cables.ampacity_a(5.0)


def test_fuse_rating_from_a_stocked_list():
    # source: NEC 690.9(B): at least 125 % of the current; 1.25 x 30 A = 37.5 A -> 40 A from 240.6(A),
    # the next stocked rating (50 A) when 40 A is not stocked, none above the largest
    assert cables.fuse_rating_a(30.0) == 40.0
    assert cables.fuse_rating_a(30.0, [63.0, 50.0, 32.0]) == 50.0
    assert np.isnan(cables.fuse_rating_a(60.0, [32.0, 50.0]))
    assert np.isnan(cables.fuse_rating_a(1.0, []))
