"""The numba dispatch kernel against its plain-Python reference (fleet.dispatch_reference).

Random cases (seeded): real candidate kits of the bundled library, some turned into series
or shunt controllers or given a reverse current, random irradiance years with sunny, dull
and dark runs, loads from a trickle to three times what the kit can carry (with evening
peaks above the output rating or the battery's power in some), critical loads with
shedding, deferrable pumping, several blocks sharing a minigrid load, battery temperatures
0-45 degC; then two fixed edge cases (a critical load beyond the battery's discharge C-rate,
and a year without sun). Every metric of ``simulate_pairs`` and every hourly field of
``simulate_trace`` must equal the reference's (relative 1e-7; absolute 1e-6 Wh, tighter for
Ah and SOC), and the hourly energy and charge balances must close in both. The weather and
loads are test inputs for an oracle comparison, never check values. One weather year per
case: about 20 s in all (the reference runs some 25 000 hours a second).
"""

from __future__ import annotations

import numpy as np
import pytest

from fleet import dispatch
from fleet.battery import voltage_tables
from fleet.dispatch_reference import SETPOINT_ORDER, simulate_reference
from fleet.iv import array_power_per_string
from fleet.kits import kernel_parameters

HOURS = dispatch.HOURS
N_CASES = 30
SEED = 20_240_611
RTOL = 1e-7
#: Absolute tolerance by unit: Wh 1e-6 (the brief), Ah, SOC and cycle damage tighter.
ATOL_METRIC = {"soc_min": 1e-9, "soc_mean": 1e-9, "battery_discharge_ah": 1e-8, "battery_charge_ah": 1e-8,
               "cycle_damage": 1e-12}
ATOL_TRACE = {"soc": 1e-9, "charge_ah": 1e-9, "discharge_ah": 1e-9, "self_discharge_ah": 1e-9,
              "battery_rest_voltage_v": 1e-9}
CATEGORIES = ("dc_pwm", "dc_mppt", "ac_shs", "minigrid", "series", "shunt")


def _weather(rng, n_days=365):
    """Plane-of-array irradiance (W/m2) and cell temperature (degC) for one year: runs of
    sunny, dull and dark days (test input)."""
    k = np.empty(n_days)
    d = 0
    while d < n_days:
        kind = rng.choice(3, p=[0.5, 0.33, 0.17])  # sunny, dull, dark
        run = int(rng.integers(*((1, 10), (1, 6), (2, 8))[kind]))  # days
        lo, hi = ((0.65, 1.0), (0.12, 0.45), (0.0, 0.04))[kind]  # fraction of clear-sky irradiance
        k[d:d + run] = rng.uniform(lo, hi, min(run, n_days - d))
        d += run
    day = np.arange(n_days)
    season = np.cos(2 * np.pi * (day - 172) / 365)
    half_day = 6.0 + rng.uniform(0.3, 1.5) * season          # hours from noon to sunset
    peak = rng.uniform(850, 1050) * (0.85 + 0.15 * season)
    hod = np.arange(24) + 0.5
    shape = np.clip(np.cos((hod[None, :] - 12.0) / half_day[:, None] * np.pi / 2), 0, None)
    poa = shape * (peak * k)[:, None] * rng.uniform(0.85, 1.15, (n_days, 24))
    ambient = 22 + 8 * season[:, None] + 5 * np.sin((hod[None, :] - 9) / 24 * 2 * np.pi)
    tc = ambient + 0.03 * poa
    return poa.ravel().astype(np.float32), tc.ravel().astype(np.float32)


def _loads(rng, kit, daily_wh, scale):
    """General and critical load of the unit (W) and its unit parameters (test input)."""
    hod = np.arange(24)
    profile = rng.uniform(0.3, 1.0) + np.where((hod >= 18) & (hod < 22), rng.uniform(1, 4), 0.0) \
        + np.where((hod >= 6) & (hod < 8), rng.uniform(0, 1.5), 0.0)
    profile = profile / profile.sum()
    days = daily_wh * rng.lognormal(0.0, 0.25, 365)
    general = (days[:, None] * profile[None, :] * rng.uniform(0.8, 1.2, (365, 24))).ravel()
    claims = set()
    if rng.random() < 0.3:  # evening appliance peaks above the output rating or the battery's power
        spike_days = rng.random(365) < 0.25
        spike_hour = rng.integers(18, 22, 365)
        idx = np.flatnonzero(spike_days) * 24 + spike_hour[spike_days]
        general[idx] += rng.uniform(0.5, 2.0, idx.size) * kit["max_load_w"]
        claims.add("spikes")
    critical = np.zeros(HOURS)
    sep = 0.0
    if rng.random() < 0.5:
        critical[:] = rng.uniform(0.05, 0.5) * daily_wh / 24.0  # a refrigerator-like steady load
        sep = rng.uniform(0.05, 0.3) if rng.random() < 0.7 else 0.0
        claims.add("critical")
    elif rng.random() < 0.2:
        sep = rng.uniform(0.05, 0.2)
    defer_wh = pump_w = 0.0
    if rng.random() < 0.4:
        defer_wh = rng.uniform(0.1, 0.6) * daily_wh
        pump_w = defer_wh / rng.uniform(2.0, 6.0)
        claims.add("pump")
    unit = np.array([defer_wh, pump_w, sep]) * [scale, scale, 1.0]
    return (general * scale).astype(np.float32), (critical * scale).astype(np.float32), unit, claims


def case_inputs(kits, tables):
    """Inputs of the cases: one row per case of kit parameters, per-string array power (W),
    general and critical load (W), unit parameters, scale, battery temperature, and a
    description (kit, what the case is meant to exercise).

    ``N_CASES`` random cases, then two fixed edge cases: an AC lead-acid kit whose critical
    load needs more than the battery's discharge C-rate allows (the disconnect comes in
    hours the rate limit cuts), and a year without sun in which the warm-up leaves the
    battery flat (a state-of-charge trace that never moves).
    """
    k = kits[0]
    params = kernel_parameters(k, tables, reconnect_hysteresis_soc=0.15, pv_losses_fraction=0.14)
    pools = {
        "dc_pwm": k.index[(k.topology == "dc") & (k.controller_kind == "pwm")],
        "dc_mppt": k.index[(k.topology == "dc") & (k.controller_kind == "mppt")],
        "ac_shs": k.index[(k.scheme == "shs") & (k.topology == "ac")],
        "minigrid": k.index[k.scheme == "minigrid"],
        "series": k.index[k.controller_kind == "pwm"],
        "shunt": k.index[k.controller_kind == "pwm"],
    }
    rng = np.random.default_rng(SEED)
    rows, poa, tc, gen, crit, units, scales, temps, info = [], [], [], [], [], [], [], [], []

    def add(idx, p, w, g, c, u, scale, temp, claims):
        rows.append(p)
        poa.append(w[0])
        tc.append(w[1])
        gen.append(g)
        crit.append(c)
        units.append(u)
        scales.append(scale)
        temps.append(temp)
        info.append({"kit_id": k.loc[idx, "kit_id"], "claims": claims})

    for i in range(N_CASES):
        cat = CATEGORIES[i % len(CATEGORIES)]
        idx = int(rng.choice(pools[cat]))
        kit = k.loc[idx]
        p = params[idx].copy()
        if cat in ("series", "shunt"):
            p[dispatch.K_KIND] = dispatch.KIND_CODE[cat]
        claims = {cat}
        if rng.random() < 0.4:
            p[dispatch.K_REV] = rng.uniform(0.05, 0.6)
            claims.add("reverse")
        scale = float(rng.integers(1, 4)) if cat == "minigrid" else 1.0
        daily_wh = kit["array_wp"] * 3.5 * np.exp(rng.uniform(np.log(0.03), np.log(3.0)))
        g, c, u, more = _loads(rng, kit, daily_wh, scale)
        add(idx, p, _weather(rng), g, c, u, scale, rng.uniform(0.0, 45.0), claims | more)

    # edge 1: a critical load beyond the battery's discharge C-rate on an AC lead-acid kit
    ac_la = k[(k.topology == "ac") & (k.chemistry == "lead_acid") & (k.scheme == "shs")]
    idx = int(ac_la.battery_ah.idxmin())
    p = params[idx].copy()
    battery_w = p[dispatch.K_MAXD] * p[dispatch.K_AH] * k.loc[idx, "system_voltage_v"]
    hod = np.arange(HOURS) % 24
    c = np.where((hod >= 18) & (hod < 22), 1.3 * battery_w, 0.0).astype(np.float32)
    g = np.full(HOURS, 0.05 * battery_w, np.float32)
    add(idx, p, _weather(rng), g, c, np.array([0.0, 0.0, 0.1]), 1.0, 25.0, {"critical", "c_limited_lvd"})

    # edge 2: no sun all year; the reverse current drains the battery flat in the warm-up
    idx = int(k.index[(k.scheme == "minigrid") & (k.chemistry == "lifepo4")][0])
    p = params[idx].copy()
    p[dispatch.K_REV] = 0.5
    dark = np.zeros(HOURS, np.float32), np.full(HOURS, 20.0, np.float32)
    add(idx, p, dark, np.full(HOURS, 0.5 * p[dispatch.K_MAXLOAD], np.float32), np.zeros(HOURS, np.float32),
        np.zeros(3), 1.0, 25.0, {"minigrid", "reverse", "flat"})

    params_c = np.array(rows)
    pv = array_power_per_string(np.array(poa)[:, None, :], np.array(tc)[:, None, :], tables, np.arange(len(rows)),
                                params_c[:, dispatch.K_TABLE].astype(np.int64))
    return (params_c, pv, np.array(gen), np.array(crit), np.array(units), np.array(scales), np.array(temps),
            info)


@pytest.fixture(scope="module")
def cases(kits, tables):
    """Every case run through the kernel (batch and trace) and the reference."""
    params, pv, gen, crit, units, scales, temps, info = case_inputs(kits, tables)
    n = len(info)
    ar = np.arange(n, dtype=np.int64)
    batch = dispatch.simulate_pairs(pv, gen, crit, units, params, voltage_tables(), ar, ar, ar, scales, temps)
    out = []
    for i in range(n):
        trace = dispatch.simulate_trace(pv[i, 0], gen[i], params[i], battery_temp_c=temps[i], scale=scales[i],
                                        critical_w=crit[i], deferrable_wh_day=units[i, 0], pump_w=units[i, 1],
                                        shed_separation_soc=units[i, 2])
        ref_metrics, ref_trace = simulate_reference(pv[i, 0], gen[i], crit[i], units[i], scales[i], params[i],
                                                    temps[i])
        out.append(dict(info[i], case=i, params=params[i], metrics=dict(zip(dispatch.METRICS, batch[i, 0])),
                        trace=trace, ref_metrics=ref_metrics, ref_trace=ref_trace, temp=temps[i], unit=units[i]))
    return out


def _describe(case):
    return f"case {case['case']} {case['kit_id']} {sorted(case['claims'])} T={case['temp']:.1f} degC"


def _report(bad, per_case=6):
    lines = []
    for desc, items in bad.items():
        lines.append(f"{desc}: {len(items)} differ")
        lines += ["    " + s for s in items[:per_case]]
    return "\n".join(lines)


def test_every_metric_matches_the_reference(cases):
    bad = {}
    for case in cases:
        for name in dispatch.METRICS:
            got, want = float(case["metrics"][name]), case["ref_metrics"][name]
            if not np.isclose(got, want, rtol=RTOL, atol=ATOL_METRIC.get(name, 1e-6)):
                bad.setdefault(_describe(case), []).append(f"{name}: kernel {got!r} reference {want!r}")
    assert not bad, _report(bad)


def test_every_hourly_field_matches_the_reference(cases):
    bad = {}
    for case in cases:
        tr, ref = case["trace"], case["ref_trace"]
        if not np.isclose(tr["initial_soc"], ref["initial_soc"], rtol=0, atol=1e-12):
            bad.setdefault(_describe(case), []).append(
                f"initial_soc: kernel {tr['initial_soc']!r} reference {ref['initial_soc']!r}")
        for name in dispatch.TRACE_FIELDS:
            ok = np.isclose(tr[name], ref[name], rtol=RTOL, atol=ATOL_TRACE.get(name, 1e-6))
            if not ok.all():
                h = int(np.argmin(ok))
                bad.setdefault(_describe(case), []).append(
                    f"{name}: {int((~ok).sum())} hours, first hour {h}: kernel {tr[name][h]!r} "
                    f"reference {ref[name][h]!r}")
    assert not bad, _report(bad)


def test_set_points_match_the_reference(cases):
    for case in cases:
        sp = case["ref_trace"]["setpoints"]
        want = [getattr(sp, name) for name in SETPOINT_ORDER]
        assert np.allclose(case["trace"]["setpoints"], want, rtol=1e-12, atol=0), _describe(case)


def test_the_batch_kernel_and_its_trace_agree(cases):
    # the two kernel entry points run the same hours: sums of the trace are the batch metrics
    pairs = {"served_wh": "served_w", "pv_spilled_wh": "spill_w", "battery_discharge_ah": "discharge_ah",
             "shunt_dissipation_wh": "shunt_dissipation_w", "reverse_current_wh": "reverse_current_w",
             "regulation_hours": "regulating", "deferrable_served_wh": "deferrable_served_w",
             "balance_residual_wh": "balance_residual_w"}
    for case in cases:
        for metric, field in pairs.items():
            assert case["metrics"][metric] == pytest.approx(case["trace"][field].sum(), rel=1e-9, abs=1e-6), \
                f"{_describe(case)} {metric}"


@pytest.mark.parametrize("which", ["ref_trace", "trace"])
def test_energy_and_charge_balance_close_every_hour(cases, which):
    # source: conservation of energy and charge -- the module docstring of fleet.dispatch: the energy
    # accounting at the DC bus closes every hour, and so does the battery's charge (Ah) balance
    bad = {}
    for case in cases:
        tr = case[which]
        cap = case["ref_trace"]["setpoints"].capacity_ah
        soc = np.r_[tr["initial_soc"], tr["soc"]]
        ah = tr["charge_ah"] - tr["discharge_ah"] - tr["self_discharge_ah"]
        checks = {
            "energy at the bus (balance_residual_w)": np.abs(tr["balance_residual_w"]) <= 1e-6,
            "array = used + spilled": np.isclose(tr["pv_bus_w"], tr["pv_used_w"] + tr["spill_w"], rtol=0,
                                                 atol=1e-6),
            "charge Ah": np.isclose(np.diff(soc) * cap, ah, rtol=0, atol=1e-8),
            "served <= load": tr["served_w"] <= tr["load_w"] + 1e-6,
        }
        for name, ok in checks.items():
            if not ok.all():
                h = int(np.argmin(ok))
                bad.setdefault(_describe(case), []).append(f"{name}: {int((~ok).sum())} hours, first hour {h}")
    assert not bad, _report(bad)


def test_a_trace_that_never_moves_has_no_cycles(cases):
    # source: ASTM E1049-85 (2017) §5.4.4: cycles are ranges between reversals; a constant series has none
    case = next(c for c in cases if "flat" in c["claims"])
    assert np.all(case["ref_trace"]["soc"] == case["ref_trace"]["initial_soc"])
    assert case["ref_metrics"]["cycles_counted"] == 0.0
    assert case["metrics"]["cycles_counted"] == 0.0


def test_the_cases_exercise_every_rule(cases):
    """Each rule the comparison is meant to cover happens, in enough cases to matter."""
    def n_cases(pred):
        return sum(bool(pred(c)) for c in cases)

    def tr(c):
        return c["ref_trace"]

    counts = {
        "general disconnects": n_cases(lambda c: c["ref_metrics"]["general_disconnects"] > 0),
        "critical output / inverter off": n_cases(lambda c: (tr(c)["critical_connected"] < 0.5).any()),
        "general shed, critical served": n_cases(
            lambda c: ((tr(c)["connected"] < 0.5) & (tr(c)["critical_connected"] > 0.5)
                       & (tr(c)["critical_served_w"] > 0)).any()),
        "series controller opened": n_cases(
            lambda c: "series" in c["claims"] and (tr(c)["charge_stage"] == 3).any()),
        "shunt dissipation": n_cases(lambda c: c["ref_metrics"]["shunt_dissipation_wh"] > 0),
        "reverse current": n_cases(lambda c: c["ref_metrics"]["reverse_current_wh"] > 0),
        "absorption": n_cases(lambda c: (tr(c)["charge_stage"] == 1).any()),
        "float": n_cases(lambda c: (tr(c)["charge_stage"] == 2).any()),
        "pump at night (battery)": n_cases(
            lambda c: ((tr(c)["deferrable_served_w"] > 0) & (tr(c)["pv_bus_w"] == 0)).any()),
        "pump on array power": n_cases(lambda c: (tr(c)["deferrable_from_pv_w"] > 0).any()),
        "inverter losses": n_cases(lambda c: c["ref_metrics"]["inverter_loss_wh"] > 0),
        "output rating caps the load": n_cases(
            lambda c: ((tr(c)["connected"] > 0.5) & (tr(c)["load_w"] > c["params"][dispatch.K_MAXLOAD] + 1e-6)).any()),
        "spill": n_cases(lambda c: c["ref_metrics"]["pv_spilled_wh"] > 0),
        "critical short while connected": n_cases(
            lambda c: ((tr(c)["critical_connected"] > 0.5)
                       & (tr(c)["critical_served_w"] < tr(c)["critical_load_w"] - 1e-6)).any()),
    }
    minimum = {"general disconnects": 8, "critical output / inverter off": 4, "general shed, critical served": 2,
               "series controller opened": 3, "shunt dissipation": 3, "reverse current": 5, "absorption": 5,
               "float": 5, "pump at night (battery)": 2, "pump on array power": 4, "inverter losses": 8,
               "output rating caps the load": 2, "spill": 20, "critical short while connected": 1}
    short = {name: (counts[name], need) for name, need in minimum.items() if counts[name] < need}
    assert not short, f"too few cases exercise (found, needed): {short}; all counts: {counts}"
    temps = [c["temp"] for c in cases]
    assert min(temps) < 10.0 and max(temps) > 35.0
