"""Hourly simulation of a kit (or plant block) serving a load: array, charge
controller, battery, load disconnect and inverter.

The kernel is compiled with numba and runs over many (unit, kit, weather year)
combinations at once. One hour, in order:

1. Array power at the controller output: with MPPT, the array's maximum power
   (PVWatts temperature model) times the converter efficiency; with
   PWM/series/shunt, the array current at battery charging voltage (the array
   is tied to the battery), never more than its maximum power; both capped at
   the controller's rated current.
2. Demand on the DC bus: controller self-consumption always; the general and
   the critical load each only while its output is connected (AC: load /
   inverter efficiency + inverter no-load power while any output is on); load
   above the kit's output rating is not served, the critical load first in
   line for the rating.
3. Array power serves the bus first; the surplus charges the battery within
   the battery's C-rate, the controller rating and a taper of charge
   acceptance near full (absorption/float); the rest is spilled (the
   controller regulates the array off its maximum power point).
4. A deferrable load (water pumping: a daily energy need, any hour) runs on
   the array surplus, ahead of charging only while the battery's state of
   charge is at least ``DEFER_MIN_SOC``, and from the battery while it is
   above that level; what the day leaves undone is reported.
5. The battery covers the deficit within its discharge C-rate: critical load
   and self-consumption down to the low-voltage disconnect, the general load
   down to a higher shedding level (disconnect + the unit's separation, zero
   when it has no critical load). Each output, once off, stays off until the
   state of charge climbs back to its reconnect level (hysteresis).
   Controller self-consumption continues while loads are off.
6. Self-discharge.

Every flow is in Wh for the hour (mean W × 1 h). The energy accounting closes
every hour: PV at the bus = direct use + charge + spill; stored change =
charge × charge efficiency − discharge / discharge efficiency − self-discharge;
demand = served + unmet.

References
----------
.. [1] De Soto, W., Klein, S. A., Beckman, W. A. (2006). Improvement and
   validation of a model for photovoltaic array performance. Solar Energy
   80(1):78-88 (single-diode model behind the array power tables).
.. [2] IEEE 1562-2021, Guide for Array and Battery Sizing in Stand-Alone
   Photovoltaic (PV) Systems (loss-of-load and days of autonomy concepts).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .iv import table_lookup

HOURS = 8760
WARMUP_HOURS = 720  # the year's last 30 days run first to set the starting state of charge
EVENING_START, EVENING_END = 18, 22  # local clock hours counted as evening service (4 h)

#: A deferrable load (pump) may take array power ahead of charging, and battery
#: energy, only above this state of charge.
DEFER_MIN_SOC = 0.7

#: Names of the per (pair, year) metrics, in the kernel's output order.
METRICS = (
    "demand_wh", "served_wh", "unmet_wh", "unmet_hours", "disconnected_hours", "days_full_service",
    "evening_demand_wh", "evening_served_wh", "pv_mpp_wh", "pv_bus_wh", "pv_used_wh", "pv_spilled_wh",
    "battery_discharge_wh", "battery_charge_wh", "controller_self_wh", "inverter_loss_wh",
    "soc_min", "soc_mean", "days_full_charge", "balance_residual_wh",
    "critical_demand_wh", "critical_unmet_wh", "deferrable_demand_wh", "deferrable_served_wh",
    "days_supply_tier1", "days_supply_tier2", "days_supply_tier3", "days_supply_tier4", "days_supply_tier5",
)
N_METRICS = len(METRICS)
M = {name: i for i, name in enumerate(METRICS)}
# parameter columns (see fleet.kits.KERNEL_COLUMNS, plus reconnect SOC and array losses)
(P_WP, P_MPPT, P_IMP, P_ALPHA, P_GAMMA, P_VCH, P_CEFF, P_CMAX, P_CSELF, P_ENOM, P_LVD, P_ETAC, P_ETAD,
 P_BCH, P_BDIS, P_SD, P_TAPER, P_ACC, P_MAXLOAD, P_IEFF, P_INL, P_LVR, P_LOSS, P_STRINGS, P_TABLE) = range(25)
N_PARAMS = 25
#: per-unit parameter columns: deferrable Wh per day, pump W, SOC separation of general-load shedding
U_DEFER_WH, U_PUMP_W, U_SEP = range(3)
#: Multi-Tier Framework minimum hours of supply per day and in the evening, tiers 1-5
#: (ESMAP 2015, Beyond Connections; the evening counted here is 18:00-22:00 local).
TIER_HOURS = np.array([4.0, 4.0, 8.0, 16.0, 23.0])
TIER_EVENING_HOURS = np.array([1.0, 2.0, 3.0, 4.0, 4.0])


@njit(cache=True, inline="always")
def _array_power(g, tc, p, op_table, mp_table, grid):
    """(power at the maximum power point, power at the controller output), W.

    Per-string powers come from single-diode tables (:mod:`fleet.iv`): at the
    battery's charging voltage for PWM/series/shunt controllers, at the
    maximum power point inside the input window for MPPT. Array losses
    (soiling, wiring, mismatch) scale the power; the controller's conversion
    efficiency and current rating apply at its output.
    """
    if g <= 0.0:
        return 0.0, 0.0
    k = p[P_STRINGS] * (1.0 - p[P_LOSS])
    mpp = k * table_lookup(mp_table, g, tc, grid[0], grid[1], grid[2], grid[3])
    pv = k * table_lookup(op_table, g, tc, grid[0], grid[1], grid[2], grid[3]) * p[P_CEFF]
    if pv > p[P_CMAX]:
        pv = p[P_CMAX]
    return mpp, pv


@njit(cache=True, inline="always")
def _step(g, tc, gen_w, crit_w, defer_left, pump_w, sep, p, op_t, mp_t, grid, e, on_g, on_c):
    """One hour. Returns (e, on_g, on_c, flows...) with flows in Wh; see the module docstring."""
    enom = p[P_ENOM]
    mpp, pv = _array_power(g, tc, p, op_t, mp_t, grid)
    ac = p[P_IEFF] < 1.0
    # 2. demand on the bus (critical first in line for the output rating)
    crit_cap = min(crit_w, p[P_MAXLOAD]) if on_c else 0.0
    gen_cap = min(gen_w, p[P_MAXLOAD] - crit_cap) if on_g else 0.0
    inv_on = ac and (on_g or (on_c and crit_w > 0.0))
    no_load = p[P_INL] if inv_on else 0.0
    crit_bus = crit_cap / p[P_IEFF] + no_load
    gen_bus = gen_cap / p[P_IEFF]
    self_w = p[P_CSELF]
    demand_bus = self_w + crit_bus + gen_bus
    # 3. array first to the bus, then charge
    direct = min(pv, demand_bus)
    surplus = pv - direct
    deficit = demand_bus - direct
    soc = e / enom
    # 4. a deferrable load takes the surplus before charging once the battery is well
    #    charged, otherwise only what charging leaves (the battery may add to it below)
    defer_pv = 0.0
    want = 0.0
    if defer_left > 0.0:
        want = min(pump_w, defer_left) / p[P_IEFF]
        if soc >= DEFER_MIN_SOC:
            defer_pv = min(surplus, want)
            surplus -= defer_pv
    limit = p[P_BCH]
    if soc > p[P_TAPER]:
        limit *= 1.0 - (1.0 - p[P_ACC]) * (soc - p[P_TAPER]) / (1.0 - p[P_TAPER])
    room = (enom - e) / p[P_ETAC]
    charge = max(min(surplus, limit, room), 0.0)
    e += charge * p[P_ETAC]
    surplus -= charge
    if want > defer_pv:
        more = min(surplus, want - defer_pv)
        defer_pv += more
        surplus -= more
    spill = surplus
    # 5. discharge: the deficit is general load first (the array served the rest first)
    def_g = min(deficit, gen_bus)
    def_c = deficit - def_g
    floor_c = p[P_LVD] * enom if on_c else 0.0
    d_c = 0.0
    avail_c = max(e - floor_c, 0.0) * p[P_ETAD]
    if def_c > 0.0:
        d_c = min(def_c, p[P_BDIS], avail_c)
        e -= d_c / p[P_ETAD]
    d_g = 0.0
    floor_g = (p[P_LVD] + sep) * enom
    on_g_new = on_g
    on_c_new = on_c
    if on_c and def_c > 0.0 and avail_c <= def_c and avail_c < p[P_BDIS]:
        on_c_new = False  # low-voltage disconnect of every output
        on_g_new = False
    if def_g > 0.0:
        avail_g = max(e - floor_g, 0.0) * p[P_ETAD]
        room_dis = max(p[P_BDIS] - d_c, 0.0)
        d_g = min(def_g, room_dis, avail_g)
        e -= d_g / p[P_ETAD]
        if avail_g <= def_g and avail_g < room_dis:
            on_g_new = False  # general load shed
    # the battery adds to the deferrable load while well charged and not needed by the loads
    defer_bat = 0.0
    extra = want - defer_pv
    if extra > 0.0 and e > DEFER_MIN_SOC * enom:
        defer_bat = min(extra, max(p[P_BDIS] - d_c - d_g, 0.0), (e - DEFER_MIN_SOC * enom) * p[P_ETAD])
        e -= defer_bat / p[P_ETAD]
    discharge = d_c + d_g + defer_bat
    unmet_c_bus = def_c - d_c  # falls on the critical load first, then on self-consumption
    crit_bus_served = max(crit_bus - unmet_c_bus, 0.0)
    gen_bus_served = gen_bus - (def_g - d_g)
    if crit_bus > 0.0:
        crit_served = crit_cap * max(crit_bus_served - no_load, 0.0) / max(crit_bus - no_load, 1e-12) if crit_cap > 0.0 else 0.0
    else:
        crit_served = 0.0
    gen_served = gen_bus_served * p[P_IEFF]
    defer_served = (defer_pv + defer_bat) * p[P_IEFF]
    inv_loss = (crit_bus_served + gen_bus_served + defer_pv + defer_bat) - (crit_served + gen_served + defer_served)
    self_served = direct + d_c + d_g - crit_bus_served - gen_bus_served
    # 6. self-discharge and reconnect
    sd = e * p[P_SD]
    e -= sd
    if e < 0.0:
        e = 0.0
    if (not on_c_new) and e >= p[P_LVR] * enom:
        on_c_new = True
    if (not on_g_new) and on_c_new and e >= min(p[P_LVR] + sep, 0.98) * enom:
        on_g_new = True
    return (e, on_g_new, on_c_new, mpp, pv, direct, charge, spill, discharge, gen_served, crit_served,
            defer_served, inv_loss, self_served, sd, defer_pv + defer_bat, defer_pv)


@njit(cache=True)
def _warm_up(poa, tcell, gen, crit, unit_p, scale, p, op_t, mp_t, grid):
    """State after running the year's last WARMUP_HOURS from full charge."""
    e = p[P_ENOM]
    on_g = True
    on_c = True
    defer_left = 0.0
    for h in range(HOURS - WARMUP_HOURS, HOURS):
        if h % 24 == 0:
            defer_left = unit_p[U_DEFER_WH] / scale
        r = _step(poa[h], tcell[h], gen[h] / scale, crit[h] / scale, defer_left, unit_p[U_PUMP_W] / scale,
                  unit_p[U_SEP], p, op_t, mp_t, grid, e, on_g, on_c)
        e, on_g, on_c = r[0], r[1], r[2]
        defer_left -= r[15]
    return e, on_g, on_c


@njit(cache=True)
def _simulate_year(poa, tcell, gen, crit, unit_p, scale, p, op_t, mp_t, grid, out):
    # sums are kept in scalars (registers) and written to ``out`` once, at the end
    enom = p[P_ENOM]
    e, on_g, on_c = _warm_up(poa, tcell, gen, crit, unit_p, scale, p, op_t, mp_t, grid)
    demand = served_sum = unmet_sum = unmet_h = off_h = full_days = 0.0
    ev_demand = ev_served = mpp_sum = pv_sum = used = spill_sum = dis_sum = ch_sum = 0.0
    self_sum = inv_sum = soc_sum = full_charge_days = resid = 0.0
    crit_demand = crit_unmet = defer_demand = defer_served_sum = 0.0
    d1 = d2 = d3 = d4 = d5 = 0.0
    soc_min = 1.0
    day_unmet = 0.0
    day_full = False
    day_on = 0.0
    day_evening_on = 0.0
    inv_scale = 1.0 / scale
    defer_day = unit_p[U_DEFER_WH] * inv_scale
    pump = unit_p[U_PUMP_W] * inv_scale
    sep = unit_p[U_SEP]
    eta_c = p[P_ETAC]
    inv_eta_d = 1.0 / p[P_ETAD]
    inv_enom = 1.0 / enom
    defer_left = 0.0
    for h in range(HOURS):
        hod = h % 24
        if hod == 0:
            defer_left = defer_day
            defer_demand += defer_day
        gw = gen[h] * inv_scale
        cw = crit[h] * inv_scale
        lw = gw + cw
        was_on = on_g
        r = _step(poa[h], tcell[h], gw, cw, defer_left, pump, sep, p, op_t, mp_t, grid, e, on_g, on_c)
        e_new, on_g, on_c = r[0], r[1], r[2]
        (mpp, pv, direct, charge, spill, discharge, gen_served, crit_served, defer_served, inv_loss,
         self_served, sd, defer_bus, defer_pv) = r[3:]
        defer_left -= defer_bus
        resid += (e_new - e) - (charge * eta_c - discharge * inv_eta_d - sd)
        e = e_new
        served = gen_served + crit_served
        unmet = lw - served
        demand += lw
        served_sum += served
        unmet_sum += unmet
        if unmet > 1e-6 * (lw + 1e-9) and unmet > 1e-9:
            unmet_h += 1.0
            day_unmet += unmet
        if not was_on:
            off_h += 1.0
        else:
            day_on += 1.0
        if hod >= EVENING_START and hod < EVENING_END:
            ev_demand += lw
            ev_served += served
            if was_on:
                day_evening_on += 1.0
        mpp_sum += mpp
        pv_sum += pv
        used += direct + charge + defer_pv
        spill_sum += spill
        dis_sum += discharge
        ch_sum += charge
        self_sum += self_served
        inv_sum += inv_loss
        crit_demand += cw
        crit_unmet += cw - crit_served
        defer_served_sum += defer_served
        soc = e * inv_enom
        if soc < soc_min:
            soc_min = soc
        soc_sum += soc
        if soc >= 0.99:
            day_full = True
        if hod == 23:
            if day_unmet <= 0.0:
                full_days += 1.0
            if day_full:
                full_charge_days += 1.0
            if day_on >= TIER_HOURS[0] and day_evening_on >= TIER_EVENING_HOURS[0]:
                d1 += 1.0
            if day_on >= TIER_HOURS[1] and day_evening_on >= TIER_EVENING_HOURS[1]:
                d2 += 1.0
            if day_on >= TIER_HOURS[2] and day_evening_on >= TIER_EVENING_HOURS[2]:
                d3 += 1.0
            if day_on >= TIER_HOURS[3] and day_evening_on >= TIER_EVENING_HOURS[3]:
                d4 += 1.0
            if day_on >= TIER_HOURS[4] and day_evening_on >= TIER_EVENING_HOURS[4]:
                d5 += 1.0
            day_unmet = 0.0
            day_full = False
            day_on = 0.0
            day_evening_on = 0.0
    out[0] = demand
    out[1] = served_sum
    out[2] = unmet_sum
    out[3] = unmet_h
    out[4] = off_h
    out[5] = full_days
    out[6] = ev_demand
    out[7] = ev_served
    out[8] = mpp_sum
    out[9] = pv_sum
    out[10] = used
    out[11] = spill_sum
    out[12] = dis_sum
    out[13] = ch_sum
    out[14] = self_sum
    out[15] = inv_sum
    out[16] = soc_min
    out[17] = soc_sum / HOURS
    out[18] = full_charge_days
    out[19] = resid
    out[20] = crit_demand
    out[21] = crit_unmet
    out[22] = defer_demand
    out[23] = defer_served_sum
    out[24] = d1
    out[25] = d2
    out[26] = d3
    out[27] = d4
    out[28] = d5


@njit(cache=True, parallel=True)
def simulate_pairs(poa, tcell, general, critical, unit_params, params, op_tables, mp_tables, grid,
                   site_idx, unit_idx, kit_idx, scale):
    """Metrics for every (unit, kit) pair and weather year.

    Parameters
    ----------
    poa : float32 array (n_sites, n_years, 8760)
        Plane-of-array irradiance, W/m², local clock hours.
    tcell : float32 array (n_sites, n_years, 8760)
        Cell temperature, degC.
    general, critical : float32 arrays (n_units, 8760)
        General and critical load of one member of each unit, W (hourly mean).
    unit_params : float64 array (n_units, 3)
        Per unit: deferrable energy per day (Wh), pump power (W), state-of-charge
        separation between general-load shedding and the disconnect.
    params : float64 array (n_kits, N_PARAMS)
        From :func:`fleet.kits.kernel_parameters` (with strings and table index).
    op_tables, mp_tables : float64 arrays (n_tables, n_g, n_t)
        Per-string array power at the controller's operating point and at the
        maximum power point on the (irradiance, cell temperature) grid, W.
    grid : float64 array (4,)
        (g0, dg, t0, dt) of the tables' grid.
    site_idx, unit_idx, kit_idx : int64 arrays (n_pairs,)
    scale : float64 array (n_pairs,)
        Loads are divided by this (number of identical blocks sharing them).

    Returns
    -------
    float64 array (n_pairs, n_years, len(METRICS))
    """
    n_pairs = site_idx.shape[0]
    n_years = poa.shape[1]
    out = np.zeros((n_pairs, n_years, N_METRICS))
    for i in prange(n_pairs):
        u = unit_idx[i]
        p = params[kit_idx[i]]
        t = int(p[P_TABLE])
        for y in range(n_years):
            _simulate_year(poa[site_idx[i], y], tcell[site_idx[i], y], general[u], critical[u], unit_params[u],
                           scale[i], p, op_tables[t], mp_tables[t], grid, out[i, y])
    return out


TRACE_FIELDS = ("soc", "connected", "pv_mpp_w", "pv_bus_w", "direct_w", "charge_w", "spill_w",
                "discharge_w", "load_w", "served_w", "inverter_loss_w", "self_served_w", "self_discharge_w",
                "critical_load_w", "critical_served_w", "deferrable_served_w", "critical_connected",
                "deferrable_from_pv_w")


@njit(cache=True)
def _trace(poa, tcell, gen, crit, unit_p, scale, p, op_t, mp_t, grid):
    enom = p[P_ENOM]
    e, on_g, on_c = _warm_up(poa, tcell, gen, crit, unit_p, scale, p, op_t, mp_t, grid)
    out = np.zeros((HOURS, 18))
    e0 = e
    defer_left = 0.0
    for h in range(HOURS):
        if h % 24 == 0:
            defer_left = unit_p[U_DEFER_WH] / scale
        gw = gen[h] / scale
        cw = crit[h] / scale
        out[h, 1] = 1.0 if on_g else 0.0
        out[h, 16] = 1.0 if on_c else 0.0
        r = _step(poa[h], tcell[h], gw, cw, defer_left, unit_p[U_PUMP_W] / scale, unit_p[U_SEP], p, op_t, mp_t, grid,
                  e, on_g, on_c)
        e, on_g, on_c = r[0], r[1], r[2]
        defer_left -= r[15]
        out[h, 0] = e / enom
        out[h, 2] = r[3]
        out[h, 3] = r[4]
        out[h, 4] = r[5]
        out[h, 5] = r[6]
        out[h, 6] = r[7]
        out[h, 7] = r[8]
        out[h, 8] = gw + cw
        out[h, 9] = r[9] + r[10]
        out[h, 10] = r[12]
        out[h, 11] = r[13]
        out[h, 12] = r[14]
        out[h, 13] = cw
        out[h, 14] = r[10]
        out[h, 15] = r[11]
        out[h, 17] = r[16]
    return out, e0


def simulate_trace(poa_wm2, cell_temp_c, load_w, params_row, tables, scale=1.0, critical_w=None,
                   deferrable_wh_day=0.0, pump_w=0.0, shed_separation_soc=0.0):
    """Hour-by-hour flows of one kit over one weather year (for plots and checks).

    ``load_w`` is the general load (W); ``critical_w`` an optional critical
    load kept on until the disconnect; ``deferrable_wh_day`` and ``pump_w`` a
    deferrable daily need. ``tables`` is the :class:`fleet.iv.KitTables` the
    parameters' table index refers to. Returns a dict of 8760-long arrays named as
    :data:`TRACE_FIELDS` (powers in W = Wh per hour; ``connected`` and
    ``critical_connected`` are the output states at the hour's start; ``load_w``
    and ``served_w`` include the critical load) and ``initial_soc`` after the
    warm-up.
    """
    gen = np.asarray(load_w, np.float32)
    crit = np.zeros_like(gen) if critical_w is None else np.asarray(critical_w, np.float32)
    unit_p = np.array([deferrable_wh_day, pump_w, shed_separation_soc], np.float64)
    p = np.asarray(params_row, np.float64)
    t = int(p[P_TABLE])
    arr, e0 = _trace(np.asarray(poa_wm2, np.float32), np.asarray(cell_temp_c, np.float32), gen, crit, unit_p,
                     float(scale), p, tables.p_operating_w[t], tables.p_mp_w[t], tables.grid)
    d = {name: arr[:, k] for k, name in enumerate(TRACE_FIELDS)}
    d["initial_soc"] = e0 / params_row[P_ENOM]
    return d
