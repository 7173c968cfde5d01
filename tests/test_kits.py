import shutil
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from fleet import kits as K
from fleet.components import default_library_path, read_library
from fleet.demand import TIER_APPLIANCES


def test_cold_open_circuit_voltage_follows_the_temperature_coefficient():
    # source: NEC 690.7(A)(1) (2023): Voc corrected with the manufacturer's temperature coefficient,
    # Voc_max = Voc_stc x (1 + coeff x (T_min - 25 degC)); 49.5 V at -0.27 %/K and -10 degC -> 54.18 V
    assert K.voc_at_temperature(49.5, -0.27, -10.0) == pytest.approx(49.5 * (1 + 0.0027 * 35), rel=1e-12)
    assert K.voc_at_temperature(49.5, -0.27, -10.0) == pytest.approx(54.178, abs=1e-3)


def test_every_kit_respects_the_controller_input_voltage_limit(kits, library):
    k = kits[0]
    cc = library.charge_controllers
    mods = library.pv_modules
    cond_cold = 5.0
    for r in k.itertuples(index=False):
        m = mods.loc[r.module_id]
        voc = r.modules_in_series * K.voc_at_temperature(m.voc_v, m.temp_coeff_voc_pct_per_k, cond_cold)
        assert voc <= cc.loc[r.controller_id, "max_pv_voltage_v"]


def test_pwm_kits_carry_125_percent_of_array_short_circuit_current(kits, library):
    # source: NEC 690.8(A)(1) (2023): circuit current = 125 % of the parallel modules' rated Isc
    k = kits[0]
    pwm = k[k.controller_kind == "pwm"]
    assert len(pwm) > 0
    for r in pwm.itertuples(index=False):
        isc = library.pv_modules.at[r.module_id, "isc_a"] * r.strings_in_parallel
        assert library.charge_controllers.at[r.controller_id, "rated_current_a"] >= 1.25 * isc


def test_battery_bank_matches_the_system_voltage_and_parallel_limit(kits, library):
    k = kits[0]
    for r in k.itertuples(index=False):
        v = library.batteries.at[r.battery_id, "nominal_voltage_v"] * r.batteries_in_series
        assert abs(v - r.system_voltage_v) <= 0.1 * r.system_voltage_v
        if r.chemistry == "lead_acid":
            assert r.battery_strings <= 3  # common practice: few parallel lead-acid strings


def test_pwm_kits_put_one_36_cell_module_in_series_per_12_volts(kits, library):
    # common practice: an array tied to the battery through PWM must be voltage-matched to it
    k = kits[0]
    for r in k[k.controller_kind == "pwm"].itertuples(index=False):
        cells = library.pv_modules.at[r.module_id, "cells_in_series"] * r.modules_in_series
        assert cells == 36 * r.system_voltage_v // 12


def test_kit_capex_equals_the_sum_of_its_bom_lines(kits):
    k, bom, _ = kits
    lines = bom.assign(x=bom.quantity_per_kit * bom.unit_price_usd).groupby("kit_id").x.sum()
    assert np.allclose(k.set_index("kit_id").capex_usd, lines.reindex(k.kit_id).to_numpy())


def test_rejected_designs_name_the_rule(kits):
    rejected = kits[2]
    assert len(rejected) > 0
    assert rejected.rule.isin(list(K.REJECTION_RULES)).all()
    assert (rejected.reason.str.len() > 20).all()
    # the demo library trips each of these rules somewhere
    assert {"system_voltage", "cold_voc", "hot_vmp", "controller_current", "battery_parallel",
            "inverter_rating"} <= set(rejected.rule)
    cited = {"cold_voc": "NEC 690.7", "system_voltage": "system voltage by array power"}
    for rule, text in cited.items():
        assert rejected[rejected.rule == rule].reason.str.contains(text, regex=False).all()


def test_both_schemes_and_topologies_are_offered(kits):
    k = kits[0]
    assert set(k.scheme) == {"shs", "minigrid"}
    assert set(k[k.scheme == "shs"].topology) == {"dc", "ac"}
    assert k.kit_id.is_unique
    assert (k[k.scheme == "minigrid"].system_voltage_v == 48).all()


def test_cold_string_voc_over_the_controller_limit_is_rejected_by_hand():
    # source: NEC 690.7(A)(1) (2023), Voc corrected with the module's coefficient:
    # 49.5 V x (1 + (-0.0027) x (-10 - 25)) = 54.1778 V per module; 3 in series = 162.53 V > 150 V,
    # 2 in series = 108.36 V <= 150 V
    module = SimpleNamespace(voc_v=49.5, vmp_v=41.5, temp_coeff_voc_pct_per_k=-0.27)
    cond = K.DesignConditions(cold_ambient_c=-10.0, hot_cell_c=65.0)
    rule, why = K.string_voltage_check(module, 3, 48, "lifepo4", "mppt", cond, 150.0)
    assert rule == "cold_voc" and "162.5 V" in why and "NEC 690.7" in why
    assert K.string_voltage_check(module, 2, 24, "lifepo4", "mppt", cond, 150.0) == ("", "")


def test_hot_string_vmp_too_low_to_charge_is_rejected_by_hand():
    # common practice: Vmp falls with the Voc coefficient x 1.15; a 36-cell 18.0 V module at -0.32 %/K:
    # at 65 degC 18.0 x (1 - 1.15 x 0.0032 x 40) = 15.35 V >= 14.4 + 0.7 = 15.1 V on a 12 V lead-acid PWM kit;
    # at 75 degC 18.0 x (1 - 1.15 x 0.0032 x 50) = 14.69 V < 15.1 V
    module = SimpleNamespace(voc_v=22.0, vmp_v=18.0, temp_coeff_voc_pct_per_k=-0.32)
    assert K.vmp_at_temperature(18.0, -0.32, 65.0) == pytest.approx(18.0 * (1 - 1.15 * 0.0032 * 40), rel=1e-12)
    ok = K.string_voltage_check(module, 1, 12, "lead_acid", "pwm", K.DesignConditions(5.0, 65.0), 50.0)
    assert ok == ("", "")
    rule, why = K.string_voltage_check(module, 1, 12, "lead_acid", "pwm", K.DesignConditions(5.0, 75.0), 50.0)
    assert rule == "hot_vmp" and "14.7 V" in why and "15.1 V" in why


def test_pwm_controller_below_125_percent_of_isc_is_rejected(kits):
    # source: NEC 690.8(A)(1): 1.25 x 4 strings x 5.90 A = 29.5 A > the 20 A controller
    module = SimpleNamespace(isc_a=5.90)
    assert K.controller_current_need_a("pwm", module, 4, 400.0, 12.0) == pytest.approx(29.5, rel=1e-12)
    rejected = kits[2]
    rows = rejected[rejected.design.str.startswith("12 V 1x4 PV-100-36 + ") & (rejected.rule == "controller_current")]
    assert len(rows) > 0
    assert rows.reason.str.contains("29.5 A = 1.25 x array Isc (NEC 690.8(A))", regex=False).all()


def test_system_voltage_follows_array_power():
    # common practice (the documented bands of K.SYSTEM_VOLTAGE_BANDS_WP): 12 V to 500 Wp, 24 V from
    # 250 to 2000 Wp, 48 V from 1000 Wp; a voltage with no band is never allowed
    wp = np.array([100.0, 300.0, 500.0, 600.0, 1500.0, 2500.0])
    assert K.system_voltage_allowed(12, wp).tolist() == [True, True, True, False, False, False]
    assert K.system_voltage_allowed(24, wp).tolist() == [False, True, True, True, True, False]
    assert K.system_voltage_allowed(48, wp).tolist() == [False, False, False, False, True, True]
    assert not K.system_voltage_allowed(36, 300.0)
    assert K.system_voltage_reason(12, 400.0) == ""
    assert "use 24 V" in K.system_voltage_reason(12, 600.0)
    assert "use 24 or 48 V" in K.system_voltage_reason(12, 1500.0)


def test_every_kit_suits_its_voltage_and_rejections_say_which_would(kits):
    k, _, rejected = kits
    assert K.system_voltage_allowed(k.system_voltage_v.to_numpy(), k.array_wp.to_numpy()).all()
    row = rejected[rejected.design == "12 V 1x6 PV-100-36 (pwm)"]
    assert row.rule.tolist() == ["system_voltage"]
    assert "600 Wp array at 12 V" in row.reason.iat[0] and "use 24 V" in row.reason.iat[0]


def test_too_many_parallel_battery_strings_are_rejected_by_hand(library):
    # hand calculation: a 12 V 50 Ah lead-acid battery at 50 % depth of discharge holds 300 Wh usable;
    # a 400 Wp array asks 1.2-6.0 Wh per Wp = 480-2400 Wh, i.e. 2 to 8 strings; with at most 3 allowed,
    # strings 4 to 8 are turned down
    lead = [b for b in library.batteries.itertuples(index=False) if b.battery_id == "BAT-LA-12-050"]
    options, too_many = K._battery_options(lead, 12, (1.2, 6.0), 400.0, 3)
    assert [bp for _, _, bp in options] == [2, 3]
    assert len(too_many) == 1 and too_many[0][1].startswith("4-8 strings") and "at most 3 allowed" in too_many[0][1]


def test_household_inverter_is_the_smallest_rated_for_the_design_output(kits, library):
    # assumption of ours, documented as K.SHS_INVERTER_PER_WP: an AC kit's inverter is rated >= 1.5 W per Wp
    k, _, rejected = kits
    inv = library.inverters
    ac = k[(k.scheme == "shs") & (k.topology == "ac")]
    assert len(ac) > 0
    for r in ac.itertuples(index=False):
        need = K.SHS_INVERTER_PER_WP * r.array_wp
        same_v = inv[inv.battery_voltage_v == r.system_voltage_v]
        assert r.inverter_rated_w >= need
        assert r.inverter_rated_w == same_v[same_v.rated_power_w >= need].rated_power_w.min()
        assert r.inverter_surge_w == inv.at[r.inverter_id, "surge_power_w"]
    # the demo's only 12 V inverter (300 W) is too small for a 12 V AC kit of 300 Wp or more
    assert rejected[rejected.rule == "inverter_rating"].reason.str.contains("no 12 V inverter rated").any()


def test_kit_bom_prices_the_cables_and_fuses_chosen_for_it(kits, library):
    k, bom, _ = kits
    cables = library.cables.set_index("cable_id")
    for r in k.itertuples(index=False):
        lines = bom[bom.kit_id == r.kit_id]
        runs = K.CABLE_RUNS_M[r.scheme]
        cab = lines[lines.component_kind == "cable"]
        expect = {"pv": r.pv_cable_mm2, "battery": r.battery_cable_mm2}
        expect["inverter" if r.topology == "ac" else "load"] = (r.inverter_cable_mm2 if r.topology == "ac"
                                                                else r.load_cable_mm2)
        assert len(cab) == len(expect)
        for circuit, section in expect.items():
            line = cab[cab.description.str.startswith(K.CIRCUITS[circuit])]
            assert len(line) == 1
            # length x 2 conductors of the section the sizing chose, at the library's price for it
            assert line.quantity_per_kit.iat[0] == pytest.approx(2 * runs[circuit] * r.controllers)
            assert cables.at[line.component_id.iat[0], "section_mm2"] == section
            assert f"{section:g} mm2" in line.description.iat[0]
            assert line.unit_price_usd.iat[0] == cables.at[line.component_id.iat[0], "price_usd_per_m"]
        fuses = lines[lines.component_kind == "fuse"]
        string = fuses[fuses.description.str.contains("one per PV string")]
        if r.strings_in_parallel >= 3:  # NEC 690.9(A): a fuse per string from three strings in parallel
            assert string.quantity_per_kit.tolist() == [r.strings_in_parallel]
            assert library.fuses.at[string.component_id.iat[0], "rating_a"] == r.string_fuse_a
        else:
            assert string.empty
        battery = fuses[fuses.description.str.contains("charge controller circuit")]
        assert library.fuses.at[battery.component_id.iat[0], "rating_a"] == r.battery_fuse_a
    # the flat cable and fuse lines the priced ones replace are gone from the demo library
    assert not bom.component_id.str.match(r"BOS-(CBL|FUS|BRK)-").any()


def test_wiring_rejects_a_cable_beyond_the_largest_available_section():
    # hand calculation: 4 strings of a 10.4 A module: 1.25 x 4 x 10.4 = 52 A (NEC 690.8(A)(1)); the
    # conductor carries 125 % of it, 65 A (NEC 690.8(B)); a 3 % drop of one module's 41.5 V over 2 x 10 m
    # allows 1.245 V / (2 x 10 m x 52 A) = 1.197 ohm/km at 50 degC, i.e. 1.071 ohm/km at 20 degC
    # (x 1/(1 + 0.00393 x 30), IEC 60228 Annex B); IEC 60228 class 5 (from memory): 16 mm2 has 1.21,
    # 25 mm2 0.780 ohm/km, so 25 mm2
    module = SimpleNamespace(isc_a=10.4, vmp_v=41.5)
    ctrl = SimpleNamespace(rated_current_a=60.0, load_output_a=0.0)
    kw = dict(charge_v=28.4, string_voc_cold_v=52.2)
    cols, problems = K.wiring("shs", 24, module, 1, 4, ctrl, None, **kw)
    assert problems == [] and cols["pv_cable_mm2"] == 25.0
    small = K.WiringStock({s: (f"C{s:g}", "", 1.0) for s in (1.5, 2.5, 4.0, 6.0, 10.0, 16.0)}, None)
    cols, problems = K.wiring("shs", 24, module, 1, 4, ctrl, None, stock=small, **kw)
    assert np.isnan(cols["pv_cable_mm2"])
    assert [rule for rule, _ in problems] == ["cable_section"]
    assert "52.0 A over 10 m" in problems[0][1] and "16 mm2" in problems[0][1]


def test_wiring_reports_the_voltage_drop_by_hand():
    # source: IEC 60228:2004 Table 3 class 5 copper 4 mm2, 4.95 ohm/km at 20 degC (from memory), Annex B
    # coefficient 0.00393 /K: at 50 degC 4.95 x 1.1179 = 5.5336 ohm/km; a 20 A controller circuit over
    # 2 x 1.5 m drops 2 x 1.5 x 20 x 5.5336e-3 = 0.3320 V = 2.767 % of 12 V; the fuse is the next
    # standard rating above 1.25 x 20 A = 25 A (NEC 690.9(B), 240.6(A))
    module = SimpleNamespace(isc_a=2.95, vmp_v=18.0)
    ctrl = SimpleNamespace(rated_current_a=20.0, load_output_a=20.0)
    cols, problems = K.wiring("shs", 12, module, 1, 2, ctrl, None, charge_v=14.4, string_voc_cold_v=22.5)
    assert problems == []
    assert cols["battery_cable_mm2"] == 4.0 and cols["battery_fuse_a"] == 25.0
    assert cols["battery_cable_drop_pct"] == pytest.approx(2 * 1.5 * 20 * 4.95e-3 * (1 + 0.00393 * 30) / 12 * 100,
                                                           rel=1e-9)


def test_fuses_need_the_rating_and_the_dc_voltage():
    # source: NEC 690.9(B): at least 125 % of the circuit current; an overcurrent device must be rated for
    # the circuit's DC voltage (NEC 690.9(D), from memory): a 32 V fuse cannot serve a 48 V battery
    fuses = {"battery": [("F32-125", "", 125.0, 32.0, 10.0), ("F58-150", "", 150.0, 58.0, 20.0),
                         ("F58-125", "", 125.0, 58.0, 15.0)], "pv_string": []}
    stock = K.WiringStock(None, fuses)
    assert stock.fuse("battery", 100.0, 28.8) == (125.0, "F32-125")    # 1.25 x 100 A = 125 A
    assert stock.fuse("battery", 100.0, 57.6) == (125.0, "F58-125")
    assert stock.fuse("battery", 101.0, 57.6) == (150.0, "F58-150")    # 126.25 A -> the next stocked rating
    rating, fid = stock.fuse("battery", 130.0, 57.6)                  # 162.5 A: none stocked
    assert np.isnan(rating) and fid == ""
    module = SimpleNamespace(isc_a=10.4, vmp_v=41.5)
    ctrl = SimpleNamespace(rated_current_a=130.0, load_output_a=0.0)
    _, problems = K.wiring("minigrid", 48, module, 4, 3, ctrl, None, stock=stock, charge_v=57.6,
                           string_voc_cold_v=208.8)
    assert ("fuse_rating" in [r for r, _ in problems]) and any("162.5 A" in why for _, why in problems)


def test_library_cable_and_fuse_limits_reach_the_rejected_table(tmp_path, library):
    lib_dir = tmp_path / "lib"
    shutil.copytree(default_library_path(), lib_dir)
    cables = pd.read_csv(lib_dir / "cables.csv")
    cables[cables.section_mm2 <= 16].to_csv(lib_dir / "cables.csv", index=False)
    fuses = pd.read_csv(lib_dir / "fuses.csv")
    fuses.loc[fuses.application == "battery", "max_voltage_v_dc"] = 32.0
    fuses.to_csv(lib_dir / "fuses.csv", index=False)
    k, bom, rejected = K.candidate_kits(read_library(lib_dir), voltages_v=[12, 24, 48], max_parallel_strings=3,
                                        cond=K.DesignConditions(5.0, 65.0))
    assert {"cable_section", "fuse_rating"} <= set(rejected.rule)
    assert (k.filter(like="_cable_mm2").fillna(0.0) <= 16.0).all().all()
    # 48 V batteries charge at up to 57.6 V: no 32 V fuse serves them, so no plant block is left
    assert "minigrid" not in set(k.scheme)
    assert rejected[rejected.rule == "fuse_rating"].reason.str.contains("rated for 57 V DC|rated for 58 V DC").all()


def test_surge_need_adds_the_largest_motor_start():
    # common practice: a compressor starts at about 4 x its running power, a pump or appliance motor at 3 x;
    # one motor starts at a time with everything else running
    assert K.surge_need_w(500.0, 150.0, 4.0) == pytest.approx(500 + 3 * 150)
    assert K.surge_need_w(500.0, 200.0, 3.0, motor_in_peak=False) == pytest.approx(500 + 3 * 200)
    assert K.load_kind("refrigerator 150 W") == "compressor" and K.load_kind("LED lamps (2 x 3 W)") == "resistive"
    # tier 4 design mix: washing machine 500 W x (3 - 1) = 1000 W beats the refrigerator's 150 x (4 - 1) = 450 W
    assert K.appliance_surge_extra_w(TIER_APPLIANCES[4]) == pytest.approx(1000.0)
    assert K.appliance_surge_extra_w(TIER_APPLIANCES[1]) == 0.0


def test_unit_surge_need_per_group():
    units = pd.DataFrame({"unit_id": ["a/t4", "a/pumping", "a/t1", "b/village"], "site_index": [0, 0, 0, 1],
                          "group": ["t4", "pumping", "t1", "village"]})
    design = pd.DataFrame({"peak_power_w": [1900.0, 400.0, 13.0, 8000.0], "pump_w": [0.0, 400.0, 0.0, 1000.0]})
    sites = pd.DataFrame({"households_t1": [5, 10], "households_t4": [1, 2], "health_posts": [0, 1], "schools": [0, 0]})
    need = K.unit_surge_need_w(units, design, sites)
    # hand: t4 1900 + 1000; pump 400 x 3 (its running power is the peak); t1 has no motor;
    # village: its peak + the larger of 1000 W (washing machine) and 3 x 1000 W (the pump, not in the peak)
    assert need.tolist() == pytest.approx([2900.0, 1200.0, 13.0, 11000.0])


def test_surge_ok_compares_the_inverter_surge_rating(kits):
    k = kits[0]
    ok = K.surge_ok(k, 2500.0)
    ac = (k.topology == "ac").to_numpy()
    assert ok[~ac].all()  # DC kits: electronic drives, no inverter to stall
    assert (ok[ac] == (k.inverter_surge_w.to_numpy()[ac] >= 2500.0)).all()
    assert not ok[ac & (k.inverter_id == "INV-1000-24").to_numpy()].any()  # 2000 W surge
    assert K.surge_ok(k, [100.0, 1e9]).shape == (2, len(k))
    # two plant blocks in parallel start a motor together
    blk = k[k.scheme == "minigrid"]
    need = 1.5 * blk.inverter_surge_w.min()
    assert not K.surge_ok(blk, need).all() and K.surge_ok(blk, need, blocks=2).all()


# --------------------------------------------------------------------------------------------
# modular minigrid plants: PV blocks, battery blocks and inverters


def test_plant_templates_combine_block_types_and_split_their_capex(kits):
    k, bom, rejected = kits
    mg = k[k.scheme == "minigrid"]
    assert len(mg) and (mg.system_voltage_v == 48).all() and (mg.topology == "ac").all()
    # one template per (PV block, battery block, inverter): the catalogue standardises each kind
    assert not mg.duplicated(["pv_block_id", "battery_block_id", "inverter_id"]).any()
    assert mg.pv_block_id.nunique() > 1 and mg.battery_block_id.nunique() > 1 and mg.inverter_id.nunique() > 1
    # a battery block is one string at the bus voltage (# common practice: strings, not single cells,
    # are paralleled), at least PLANT_MIN_BATTERY_BLOCK_WH
    assert (mg.battery_strings == 1).all() and (mg.battery_nominal_wh >= K.PLANT_MIN_BATTERY_BLOCK_WH).all()
    assert (rejected.rule == "battery_block_size").any()
    parts = mg[[f"{p}_part_capex_usd" for p in K.PLANT_PARTS]].sum(axis=1)
    np.testing.assert_allclose(parts, mg.capex_usd, rtol=1e-12)  # the parts are the whole bill of materials
    lines = bom[bom.kit_id.isin(mg.kit_id)]
    assert set(lines.block_kind) <= {"pv", "battery", "inverter", "plant"}
    assert set(lines[lines.component_kind == "battery"].block_kind) == {"battery"}
    assert set(lines[lines.component_kind == "inverter"].block_kind) == {"inverter"}
    assert set(lines[lines.component_kind.isin(["pv_module", "charge_controller"])].block_kind) == {"pv"}
    # procurement buys blocks: each line's item is the block of its kind
    pv = lines[lines.block_kind == "pv"]
    assert (pv.item_id == pv.kit_id.map(mg.set_index("kit_id").pv_block_id)).all()
    # lead-acid plants keep the program's parallel-string limit; LiFePO4 plants the plant limit
    lead = mg.chemistry == "lead_acid"
    assert (mg.max_battery_blocks[lead] == 3).all() and (mg.max_battery_blocks[~lead] == K.PLANT_LFP_MAX_PARALLEL).all()


def test_plant_quantities_are_the_blocks_times_their_counts(kits):
    k = kits[0]
    mg = k[k.scheme == "minigrid"].head(3).reset_index(drop=True)
    n_pv, n_bat, n_inv = np.array([1, 4, 7]), np.array([1, 2, 9]), np.array([1, 3, 2])
    q = K.plant_quantities(mg, n_pv, n_bat, n_inv)
    expect = (mg.pv_part_capex_usd * n_pv + mg.battery_part_capex_usd * n_bat + mg.inverter_part_capex_usd * n_inv
              + mg.plant_part_capex_usd)
    np.testing.assert_allclose(q.capex_usd, expect)
    np.testing.assert_allclose(q.capex_usd.iloc[0], mg.capex_usd.iloc[0])  # one of each is the template
    np.testing.assert_allclose(q.array_wp, mg.array_wp * n_pv)
    np.testing.assert_allclose(q.battery_usable_wh, mg.battery_usable_wh * n_bat)
    np.testing.assert_allclose(q.max_load_w, mg.max_load_w * n_inv)
    np.testing.assert_allclose(q.battery_capex_usd, mg.battery_capex_usd * n_bat)
    shs = k[k.scheme == "shs"].head(2).reset_index(drop=True)
    np.testing.assert_allclose(K.plant_quantities(shs, [1, 1], [1, 1], [1, 1]).capex_usd, shs.capex_usd)


def test_inverters_sharing_a_load_lose_q_p_squared_over_n():
    # source: Jantsch, Schmidt & Schmid (1992) inverter loss model P_loss = P0 + q P^2 per inverter;
    # n equal inverters sharing P each carry P/n: n (P0 + q (P/n)^2) = n P0 + q P^2 / n
    from fleet.dispatch import K as P, KIT_PARAMS
    row = np.zeros((1, len(KIT_PARAMS)))
    row[0, P["inverter_no_load_w"]], row[0, P["inverter_quadratic_per_w"]] = 25.0, 4e-6
    row[0, P["max_load_w"]], row[0, P["ac"]], row[0, P["disconnect_ref_c"]] = 5000.0, 1.0, 0.2
    row[0, P["battery_ah"]], row[0, P["array_multiplier"]] = 280.0, 12.0
    plant = K.plant_parameters(row, [2], [4], [3])[0]
    p_out = 9000.0
    by_hand = 3 * (25.0 + 4e-6 * (p_out / 3) ** 2)
    assert plant[P["inverter_no_load_w"]] + plant[P["inverter_quadratic_per_w"]] * p_out ** 2 == pytest.approx(by_hand)
    assert plant[P["max_load_w"]] == 15000.0 and plant[P["battery_ah"]] == 4 * 280.0
    assert plant[P["array_multiplier"]] == 24.0
    # the cut-off's reference C-rate is the plant's inverter power over its bank
    assert plant[P["disconnect_ref_c"]] == pytest.approx(0.2 * 3 / 4)
