import numpy as np
import pandas as pd
import pytest

from fleet import kits as K


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
    assert rejected.reason.str.contains("NEC 690|Vmp|controller").all()


def test_both_schemes_and_topologies_are_offered(kits):
    k = kits[0]
    assert set(k.scheme) == {"shs", "minigrid"}
    assert set(k[k.scheme == "shs"].topology) == {"dc", "ac"}
    assert k.kit_id.is_unique
    assert (k[k.scheme == "minigrid"].system_voltage_v == 48).all()
