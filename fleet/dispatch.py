"""Hourly simulation of a kit (or plant block) serving a load: array, charge
controller, battery, load disconnect and inverter.

The kernel is compiled with numba and runs over many (unit, kit, weather year)
combinations at once. One hour, in order:

1. Array power at the controller output: with MPPT, the array's maximum power
   (PVWatts temperature model) times the converter efficiency; with
   PWM/series/shunt, the array current at battery charging voltage (the array
   is tied to the battery), never more than its maximum power; both capped at
   the controller's rated current.
2. Demand on the DC bus: controller self-consumption always; the load only
   while connected (AC: load / inverter efficiency + inverter no-load power;
   load above the kit's output rating is not served).
3. Array power serves the bus first; the surplus charges the battery within
   the battery's C-rate, the controller rating and a taper of charge
   acceptance near full (absorption/float); the rest is spilled (the
   controller regulates the array off its maximum power point).
4. The battery covers the deficit within its discharge C-rate down to the
   low-voltage disconnect state of charge; when it reaches it the load is
   disconnected and stays off until the state of charge climbs back to the
   reconnect level (hysteresis). Controller self-consumption continues from
   the battery while loads are off.
5. Self-discharge.

Every flow is in Wh for the hour (mean W × 1 h). The energy accounting closes
every hour: PV at the bus = direct use + charge + spill; stored change =
charge × charge efficiency − discharge / discharge efficiency − self-discharge;
demand = served + unmet.

References
----------
.. [1] Dobos, A. P. (2014). PVWatts Version 5 Manual. NREL/TP-6A20-62641.
.. [2] IEEE 1562-2021, Guide for Array and Battery Sizing in Stand-Alone
   Photovoltaic (PV) Systems (loss-of-load and days of autonomy concepts).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

HOURS = 8760
WARMUP_HOURS = 720  # the year's last 30 days run first to set the starting state of charge
EVENING_START, EVENING_END = 18, 23  # local clock hours counted as evening service

#: Names of the per (pair, year) metrics, in the kernel's output order.
METRICS = (
    "demand_wh", "served_wh", "unmet_wh", "unmet_hours", "disconnected_hours", "days_full_service",
    "evening_demand_wh", "evening_served_wh", "pv_mpp_wh", "pv_bus_wh", "pv_used_wh", "pv_spilled_wh",
    "battery_discharge_wh", "battery_charge_wh", "controller_self_wh", "inverter_loss_wh",
    "soc_min", "soc_mean", "days_full_charge", "balance_residual_wh",
)
N_METRICS = len(METRICS)
# parameter columns (see fleet.kits.KERNEL_COLUMNS, plus reconnect SOC and array losses)
(P_WP, P_MPPT, P_IMP, P_ALPHA, P_GAMMA, P_VCH, P_CEFF, P_CMAX, P_CSELF, P_ENOM, P_LVD, P_ETAC, P_ETAD,
 P_BCH, P_BDIS, P_SD, P_TAPER, P_ACC, P_MAXLOAD, P_IEFF, P_INL, P_LVR, P_LOSS) = range(23)


@njit(cache=True, inline="always")
def _step(g, tc, load_w, p, e, on):
    """One hour. Returns (e_new, on_new, flows...) with flows in Wh."""
    enom = p[P_ENOM]
    # 1. array
    if g > 0.0:
        mpp = p[P_WP] * g / 1000.0 * (1.0 + p[P_GAMMA] * (tc - 25.0)) * (1.0 - p[P_LOSS])
        if mpp < 0.0:
            mpp = 0.0
        if p[P_MPPT] > 0.5:
            pv = mpp * p[P_CEFF]
        else:
            i_op = p[P_IMP] * g / 1000.0 * (1.0 + p[P_ALPHA] * (tc - 25.0)) * (1.0 - p[P_LOSS])
            pv = min(i_op * p[P_VCH], mpp) * p[P_CEFF]
        if pv > p[P_CMAX]:
            pv = p[P_CMAX]
    else:
        mpp = 0.0
        pv = 0.0
    # 2. demand on the bus
    served_cap = min(load_w, p[P_MAXLOAD])
    if on:
        load_bus = served_cap / p[P_IEFF] + (p[P_INL] if p[P_IEFF] < 1.0 else 0.0)
    else:
        load_bus = 0.0
    self_w = p[P_CSELF]
    demand_bus = self_w + load_bus
    # 3. direct use, charge, spill
    direct = min(pv, demand_bus)
    surplus = pv - direct
    deficit = demand_bus - direct
    soc = e / enom
    limit = p[P_BCH]
    if soc > p[P_TAPER]:
        limit *= 1.0 - (1.0 - p[P_ACC]) * (soc - p[P_TAPER]) / (1.0 - p[P_TAPER])
    room = (enom - e) / p[P_ETAC]
    charge = min(surplus, limit, room)
    if charge < 0.0:
        charge = 0.0
    spill = surplus - charge
    e += charge * p[P_ETAC]
    # 4. discharge
    discharge = 0.0
    unmet_bus = 0.0
    on_new = on
    if deficit > 0.0:
        floor = p[P_LVD] * enom if on else 0.0
        avail = (e - floor) * p[P_ETAD]
        if avail < 0.0:
            avail = 0.0
        discharge = min(deficit, p[P_BDIS], avail)
        unmet_bus = deficit - discharge
        e -= discharge / p[P_ETAD]
        if on and avail <= deficit and avail < p[P_BDIS]:
            on_new = False  # reached the low-voltage disconnect
    # share of the bus load actually delivered (the unmet part falls on the load)
    if on and load_bus > 0.0:
        load_bus_served = load_bus - unmet_bus
        if load_bus_served < 0.0:
            load_bus_served = 0.0
        frac = load_bus_served / load_bus
    else:
        load_bus_served = 0.0
        frac = 0.0
    served = served_cap * frac
    inv_loss = load_bus_served - served
    self_served = direct + discharge - load_bus_served
    # 5. self-discharge and reconnect
    sd = e * p[P_SD]
    e -= sd
    if e < 0.0:
        e = 0.0
    if (not on_new) and e >= p[P_LVR] * enom:
        on_new = True
    return e, on_new, mpp, pv, direct, charge, spill, discharge, served, inv_loss, self_served, sd


@njit(cache=True)
def _warm_up(poa, tcell, load, scale, p):
    """State after running the year's last WARMUP_HOURS from full charge."""
    e = p[P_ENOM]
    on = True
    for h in range(HOURS - WARMUP_HOURS, HOURS):
        r = _step(poa[h], tcell[h], load[h] / scale, p, e, on)
        e, on = r[0], r[1]
    return e, on


@njit(cache=True)
def _simulate_year(poa, tcell, load, scale, p, out):
    enom = p[P_ENOM]
    e, on = _warm_up(poa, tcell, load, scale, p)
    for k in range(N_METRICS):
        out[k] = 0.0
    soc_min = 1.0
    day_unmet = 0.0
    day_full = False
    resid = 0.0
    for h in range(HOURS):
        lw = load[h] / scale
        was_on = on
        r = _step(poa[h], tcell[h], lw, p, e, on)
        e_new, on = r[0], r[1]
        mpp, pv, direct, charge, spill, discharge, served, inv_loss, self_served, sd = r[2:]
        resid += (e_new - e) - (charge * p[P_ETAC] - discharge / p[P_ETAD] - sd)
        e = e_new
        unmet = lw - served
        out[0] += lw
        out[1] += served
        out[2] += unmet
        if unmet > 1e-6 * (lw + 1e-9) and unmet > 1e-9:
            out[3] += 1.0
            day_unmet += unmet
        if not was_on:
            out[4] += 1.0
        hod = h % 24
        if hod >= EVENING_START and hod < EVENING_END:
            out[6] += lw
            out[7] += served
        out[8] += mpp
        out[9] += pv
        out[10] += direct + charge
        out[11] += spill
        out[12] += discharge
        out[13] += charge
        out[14] += self_served
        out[15] += inv_loss
        soc = e / enom
        if soc < soc_min:
            soc_min = soc
        out[17] += soc
        if soc >= 0.99:
            day_full = True
        if hod == 23:
            if day_unmet <= 0.0:
                out[5] += 1.0
            if day_full:
                out[18] += 1.0
            day_unmet = 0.0
            day_full = False
    out[16] = soc_min
    out[17] /= HOURS
    out[19] = resid


@njit(cache=True, parallel=True)
def simulate_pairs(poa, tcell, loads, params, site_idx, unit_idx, kit_idx, scale):
    """Metrics for every (unit, kit) pair and weather year.

    Parameters
    ----------
    poa : float32 array (n_sites, n_years, 8760)
        Plane-of-array irradiance, W/m², local clock hours.
    tcell : float32 array (n_sites, n_years, 8760)
        Cell temperature, degC.
    loads : float32 array (n_units, 8760)
        Load of one member of each unit, W (hourly mean).
    params : float64 array (n_kits, 23)
        From :func:`fleet.kits.kernel_parameters`.
    site_idx, unit_idx, kit_idx : int64 arrays (n_pairs,)
    scale : float64 array (n_pairs,)
        The load is divided by this (number of identical blocks sharing it).

    Returns
    -------
    float64 array (n_pairs, n_years, len(METRICS))
    """
    n_pairs = site_idx.shape[0]
    n_years = poa.shape[1]
    out = np.zeros((n_pairs, n_years, N_METRICS))
    for i in prange(n_pairs):
        for y in range(n_years):
            _simulate_year(poa[site_idx[i], y], tcell[site_idx[i], y], loads[unit_idx[i]], scale[i],
                           params[kit_idx[i]], out[i, y])
    return out


TRACE_FIELDS = ("soc", "connected", "pv_mpp_w", "pv_bus_w", "direct_w", "charge_w", "spill_w",
                "discharge_w", "load_w", "served_w", "inverter_loss_w", "self_served_w", "self_discharge_w")


@njit(cache=True)
def _trace(poa, tcell, load, scale, p):
    enom = p[P_ENOM]
    e, on = _warm_up(poa, tcell, load, scale, p)
    out = np.zeros((HOURS, 13))
    e0 = e
    for h in range(HOURS):
        lw = load[h] / scale
        r = _step(poa[h], tcell[h], lw, p, e, on)
        out[h, 1] = 1.0 if on else 0.0
        e, on = r[0], r[1]
        out[h, 0] = e / enom
        out[h, 2] = r[2]
        out[h, 3] = r[3]
        out[h, 4] = r[4]
        out[h, 5] = r[5]
        out[h, 6] = r[6]
        out[h, 7] = r[7]
        out[h, 8] = lw
        out[h, 9] = r[8]
        out[h, 10] = r[9]
        out[h, 11] = r[10]
        out[h, 12] = r[11]
    return out, e0


def simulate_trace(poa_wm2, cell_temp_c, load_w, params_row, scale=1.0):
    """Hour-by-hour flows of one kit over one weather year (for plots and checks).

    Returns a dict of 8760-long arrays named as :data:`TRACE_FIELDS`
    (powers in W = Wh per hour; ``connected`` is the state at the hour's
    start) and ``initial_soc`` after the warm-up.
    """
    arr, e0 = _trace(np.asarray(poa_wm2, np.float32), np.asarray(cell_temp_c, np.float32),
                     np.asarray(load_w, np.float32), float(scale), np.asarray(params_row, np.float64))
    d = {name: arr[:, k] for k, name in enumerate(TRACE_FIELDS)}
    d["initial_soc"] = e0 / params_row[P_ENOM]
    return d
