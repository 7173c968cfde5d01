import numpy as np
import pytest

from fleet import dispatch
from fleet.dispatch import (P_BCH, P_CEFF, P_CMAX, P_CSELF, P_ENOM, P_ETAC, P_ETAD, P_LVD, P_LVR, P_MAXLOAD,
                            P_SD, simulate_pairs, simulate_trace)



def clear_days(peak_wm2=900.0, days=365):
    """A plain sunny-day irradiance shape on the local clock (test input, not a check value)."""
    h = np.arange(days * 24) % 24
    return (np.clip(np.sin((h + 0.5 - 6.0) / 12.0 * np.pi), 0, None) * peak_wm2).astype(np.float32)


TABLES = None


@pytest.fixture(autouse=True)
def _tables(tables):
    global TABLES
    TABLES = tables


def trace(poa, tc, load, p, **kw):
    return simulate_trace(poa, tc, load, p, TABLES, **kw)


def pairs(poa, tc, gen, crit, unit_p, params, *idx):
    return simulate_pairs(poa, tc, gen, crit, unit_p, params, TABLES.p_operating_w, TABLES.p_mp_w, TABLES.grid, *idx)


def _kit(kits, kit_id):
    k = kits[0]
    return int(k.index[k.kit_id == kit_id][0])


def _dc_pwm_kit(kits):
    k = kits[0]
    sel = k[(k.scheme == "shs") & (k.topology == "dc") & (k.controller_kind == "pwm") & (k.chemistry == "lead_acid")]
    return int(sel.index[0])


def test_energy_balance_closes_every_hour(kits, params):
    # source: conservation of energy; every flow of the hour is accounted for
    k = kits[0]
    for idx in (_dc_pwm_kit(kits), int(k.index[(k.scheme == "minigrid")][0])):
        p = params[idx]
        poa = clear_days(700.0) * np.tile(np.r_[np.ones(5), np.full(3, 0.15)], 46)[:365].repeat(24)
        tc = np.full(8760, 40.0, np.float32)
        load = np.tile(np.r_[np.full(18, 0.2), np.full(5, 1.0), [0.2]], 365).astype(np.float32) * p[P_ENOM] / 20
        tr = trace(poa, tc, load, p, critical_w=load * 0.3, deferrable_wh_day=p[P_ENOM] * 0.2,
                            pump_w=p[P_ENOM] * 0.05, shed_separation_soc=0.1)
        assert np.allclose(tr["pv_bus_w"], tr["direct_w"] + tr["charge_w"] + tr["spill_w"] + tr["deferrable_from_pv_w"], atol=1e-6)
        assert np.allclose(tr["direct_w"] + tr["discharge_w"] + tr["deferrable_from_pv_w"],
                           tr["served_w"] + tr["deferrable_served_w"] + tr["inverter_loss_w"] + tr["self_served_w"], atol=1e-6)
        e = np.r_[tr["initial_soc"], tr["soc"]] * p[P_ENOM]
        flows = tr["charge_w"] * p[P_ETAC] - tr["discharge_w"] / p[P_ETAD] - tr["self_discharge_w"]
        assert np.allclose(np.diff(e), flows, atol=1e-6)
        assert (tr["served_w"] <= tr["load_w"] + 1e-9).all()
        assert (tr["spill_w"] >= -1e-9).all() and (tr["discharge_w"] >= -1e-9).all()


def test_days_of_autonomy_without_sun(kits, params):
    # source: IEEE 1562-2021 clause 6; a full battery with no sun carries the load for usable Wh x efficiency / load W
    idx = _dc_pwm_kit(kits)
    p = params[idx].copy()
    p[P_SD] = 0.0
    load_w = 0.01 * p[P_ENOM]
    poa = np.zeros(8760, np.float32)
    poa[-dispatch.WARMUP_HOURS:] = clear_days(1000.0)[-dispatch.WARMUP_HOURS:]  # sunny warm-up fills it
    poa[-30 * 24:] = np.where(np.arange(30 * 24) < 29 * 24, poa[-30 * 24:], 0.0)  # last warm-up day dark
    tr = trace(poa, np.full(8760, 25, np.float32), np.full(8760, load_w, np.float32), p)
    usable = (tr["initial_soc"] - p[P_LVD]) * p[P_ENOM]
    first_off = int(np.argmax(tr["connected"] < 0.5))
    served_before_off = tr["served_w"][:first_off].sum()
    assert served_before_off == pytest.approx(usable * p[P_ETAD] * load_w / (load_w + p[P_CSELF]), rel=0.02)
    assert first_off == pytest.approx(usable * p[P_ETAD] / (load_w + p[P_CSELF]), abs=1.01)
    assert tr["served_w"][first_off:first_off + 24].sum() == 0.0  # stays off without sun


def test_load_stays_off_until_the_reconnect_state_of_charge(kits, params):
    # common practice: low-voltage disconnect with reconnect hysteresis prevents on/off cycling
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    poa = clear_days(250.0)
    load = np.full(8760, 0.04 * p[P_ENOM], np.float32)
    tr = trace(poa, np.full(8760, 30, np.float32), load, p)
    on = tr["connected"] > 0.5
    soc_before = np.r_[tr["initial_soc"], tr["soc"][:-1]]
    went_on = np.flatnonzero(on[1:] & ~on[:-1]) + 1
    went_off = np.flatnonzero(~on[1:] & on[:-1]) + 1
    assert len(went_off) > 3 and len(went_on) > 3
    assert (soc_before[went_on] >= p[P_LVR] - 1e-9).all()
    assert (soc_before[went_off] <= p[P_LVD] + 0.05).all()
    assert (tr["soc"] >= p[P_LVD] - 0.02).all()  # only self-consumption goes below the disconnect level


def test_charge_never_exceeds_controller_or_battery_limits(kits, params):
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    tr = trace(clear_days(1100.0), np.full(8760, 10, np.float32), np.full(8760, 1.0, np.float32), p)
    assert tr["pv_bus_w"].max() <= p[P_CMAX] + 1e-9
    assert tr["charge_w"].max() <= p[P_BCH] + 1e-9


def test_pwm_array_harvest_is_the_single_diode_current_at_battery_voltage(kits, params, library):
    # source: pvlib single-diode model (De Soto et al. 2006) evaluated directly: a 36-cell module tied to a
    # 12 V battery delivers V_batt x I(V_batt), about 70-85 % of its maximum power (# common practice)
    from fleet.iv import PWM_DROP_V_PER_12V, current_at_voltage, fit_module, max_power_point
    k = kits[0]
    pwm = int(k.index[(k.kit_id.str.startswith("S12-1x100W")) & (k.controller_kind == "pwm")][0])
    p = params[pwm]
    tr = trace(np.full(8760, 1000, np.float32), np.full(8760, 25, np.float32), np.zeros(8760, np.float32), p)
    ratio = tr["pv_bus_w"][0] / (tr["pv_mpp_w"][0] * p[dispatch.P_CEFF])
    m = fit_module(library.pv_modules.loc["PV-100-36"])
    v = k.loc[pwm, "charge_voltage_v"] + PWM_DROP_V_PER_12V
    expected = v * float(current_at_voltage(1000.0, 25.0, v, m)) / float(max_power_point(1000.0, 25.0, m)["p_mp"])
    assert ratio == pytest.approx(expected, rel=0.01)
    assert 0.70 < ratio < 0.85


def test_output_rating_caps_the_served_load(kits, params):
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    load = np.full(8760, 2 * p[P_MAXLOAD], np.float32)
    tr = trace(clear_days(1000.0), np.full(8760, 25, np.float32), load, p)
    assert tr["served_w"].max() <= p[P_MAXLOAD] + 1e-9


def test_batch_kernel_matches_the_hourly_trace(kits, params):
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    poa = clear_days(600.0)
    load = np.tile(np.r_[np.full(18, 2.0), np.full(5, 12.0), [2.0]], 365).astype(np.float32)
    out = pairs(poa[None, None, :], np.full((1, 1, 8760), 30, np.float32), load[None, :],
                         np.zeros((1, 8760), np.float32), np.zeros((1, 3)), params,
                         np.zeros(1, np.int64), np.zeros(1, np.int64), np.array([idx]), np.ones(1))
    m = dict(zip(dispatch.METRICS, out[0, 0]))
    tr = trace(poa, np.full(8760, 30, np.float32), load, p)
    assert m["served_wh"] == pytest.approx(tr["served_w"].sum(), rel=1e-9)
    assert m["unmet_wh"] == pytest.approx(tr["load_w"].sum() - tr["served_w"].sum(), rel=1e-6, abs=1e-6)
    assert m["pv_spilled_wh"] == pytest.approx(tr["spill_w"].sum(), rel=1e-9)
    assert m["demand_wh"] == pytest.approx(load.sum(), rel=1e-6)
    assert abs(m["balance_residual_wh"]) < 1e-6


def test_n_blocks_sharing_a_load_equal_one_block_with_a_share():
    # identical blocks in parallel with an equal split behave as one block with 1/N of the load
    p = np.zeros((1, dispatch.N_PARAMS))
    p[0] = [3000, 1, 0, 0.0005, -0.004, 52.8, 0.97, 5000, 2, 10000, 0.15, 0.97, 0.98, 5000, 10000, 0, 0.95, 0.1,
            5000, 0.95, 30, 0.3, 0.14, 8, 0]
    poa = clear_days(800.0)[None, None, :]
    tc = np.full_like(poa, 30)
    load = np.full((1, 8760), 2400.0, np.float32)
    crit = np.full((1, 8760), 300.0, np.float32)
    up = np.array([[6000.0, 1500.0, 0.1]])
    a = pairs(poa, tc, load, crit, up, p, np.zeros(1, np.int64), np.zeros(1, np.int64), np.zeros(1, np.int64), np.array([3.0]))
    b = pairs(poa, tc, load / 3, crit / 3, up / [3, 3, 1], p, np.zeros(1, np.int64), np.zeros(1, np.int64),
                       np.zeros(1, np.int64), np.ones(1))
    assert np.allclose(a, b, rtol=1e-5)


def test_critical_load_stays_on_after_general_loads_are_shed(kits, params):
    # common practice: two-stage load shedding keeps a vaccine refrigerator powered longer than lights
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    poa = clear_days(250.0)
    gen = np.full(8760, 0.03 * p[P_ENOM], np.float32)
    crit = np.full(8760, 0.005 * p[P_ENOM], np.float32)
    tr = trace(poa, np.full(8760, 30, np.float32), gen, p, critical_w=crit, shed_separation_soc=0.1)
    gen_off = tr["connected"] < 0.5
    crit_off = tr["critical_connected"] < 0.5
    assert gen_off.sum() > 0
    assert crit_off.sum() < gen_off.sum()
    assert not (crit_off & ~gen_off).any()  # the critical output is never on its own off
    crit_unmet = (tr["critical_load_w"] - tr["critical_served_w"]).sum() / tr["critical_load_w"].sum()
    gen_unmet = ((tr["load_w"] - tr["critical_load_w"]) - (tr["served_w"] - tr["critical_served_w"])).sum() / gen.sum()
    assert crit_unmet < gen_unmet


def test_deferrable_load_runs_within_the_day_when_energy_allows(kits, params):
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    days = 365
    need = 0.1 * p[P_ENOM]
    sunny = trace(clear_days(1000.0), np.full(8760, 25, np.float32), np.zeros(8760, np.float32), p,
                           deferrable_wh_day=need, pump_w=need / 4)
    per_day = sunny["deferrable_served_w"].reshape(days, 24).sum(axis=1)
    assert np.allclose(per_day, need, rtol=1e-6)  # served in full, never more than the day's need
    dull = trace(clear_days(60.0), np.full(8760, 25, np.float32), np.zeros(8760, np.float32), p,
                          deferrable_wh_day=need, pump_w=need / 4)
    assert dull["deferrable_served_w"].reshape(days, 24).sum(axis=1).max() < need  # shortfall shows up
    from_battery = dull["deferrable_served_w"] - dull["deferrable_from_pv_w"] > 1e-9
    assert from_battery.any()
    # the pump never takes the battery below its threshold (self-discharge aside)
    assert (dull["soc"][from_battery] >= dispatch.DEFER_MIN_SOC - 1e-3).all()


def test_days_meeting_tier_hours_count_connected_hours(kits, params):
    # source: ESMAP (2015) Beyond Connections: hours of supply per day and in the evening per tier
    idx = _dc_pwm_kit(kits)
    p = params[idx]
    load = np.full(8760, 0.001 * p[P_ENOM], np.float32)
    out = pairs(clear_days(1000.0)[None, None, :], np.full((1, 1, 8760), 25, np.float32), load[None, :],
                         np.zeros((1, 8760), np.float32), np.zeros((1, 3)), params,
                         np.zeros(1, np.int64), np.zeros(1, np.int64), np.array([idx]), np.ones(1))
    m = dict(zip(dispatch.METRICS, out[0, 0]))
    assert m["disconnected_hours"] == 0
    for t in range(1, 6):
        assert m[f"days_supply_tier{t}"] == 365
    dark = pairs(np.zeros((1, 1, 8760), np.float32), np.full((1, 1, 8760), 25, np.float32),
                          np.full((1, 8760), 0.05 * p[P_ENOM], np.float32), np.zeros((1, 8760), np.float32),
                          np.zeros((1, 3)), params, np.zeros(1, np.int64), np.zeros(1, np.int64), np.array([idx]), np.ones(1))
    assert dict(zip(dispatch.METRICS, dark[0, 0]))["days_supply_tier1"] == 0
