"""Hourly simulation of a kit (or plant block) serving a load: array, charge
controller, battery, load disconnect and inverter, with the regulation rules
of the hardware.

The kernel is compiled with numba and runs over many (unit, kit, weather year)
combinations at once. Its inputs are the hourly array power per string at the
controller's operating point (from :func:`fleet.iv.array_power_per_string`),
the hourly load of one member of a unit, the kit's parameters
(:func:`fleet.kits.kernel_parameters`) and the battery temperature.

The battery is a charge (Ah) store with a voltage model
(:mod:`fleet.battery`): terminal voltage = open-circuit voltage(SOC) ± C-rate ×
effective resistance(SOC). Every regulation decision acts on that voltage.
One hour, in order:

1. **Array.** MPPT: the string power at the maximum power point inside the
   input window × strings × (1 − array losses) × converter efficiency,
   capped at the rated output current × battery voltage. Series, PWM and
   shunt controllers tie the array to the battery: the array is a current
   source (its current at the reference charging voltage), delivering
   current × battery voltage, capped at the rated current.
   A series controller in its *open* state takes nothing from the array; a
   shunt controller in its *shunting* state short-circuits it and dissipates
   array current × its on-state voltage (reported).
2. **Demand on the DC bus.** Controller self-consumption always. Loads only
   while their output is connected, capped at the output rating (the
   controller's load terminal for DC kits, the inverter for AC systems). AC:
   inverter input = output + no-load power + a quadratic loss term
   (Jantsch et al. 1992) while it runs. Night-time reverse current through
   the array (when the controller does not block it) while there is no sun.
3. **Array to the bus, surplus to the battery** within the controller
   rating, the battery's charge C-rate and the current the battery accepts at
   the controller's regulation voltage (absorption, then float for PWM and
   MPPT; series and shunt regulate on/off: when the voltage reaches the
   regulation voltage the array is opened or shorted until the voltage falls
   to the reconnect level). Regulation voltages of lead-acid are temperature
   compensated. Coulombic efficiency falls near full for lead-acid. What the
   battery cannot take is spilled (the array is held off its operating
   point).
4. **Deferrable load** (water pumping: a daily energy need, any hour) runs on
   the surplus, ahead of charging only while the SOC is at least
   ``DEFER_MIN_SOC``, and from the battery while above that level.
5. **Discharge** within the discharge C-rate, the charge drawn raised by
   Peukert's law above the rated current. The general load is disconnected
   when the loaded battery voltage reaches its shedding voltage; the critical
   load and the controller keep going to the low-voltage disconnect. DC kits:
   the controller's disconnect, compensated for the load current so that it
   acts at the design floor of state of charge whatever the load; AC systems:
   the inverter's own cut-off, a fixed voltage (the loaded voltage at the
   floor at its rated power), so light loads take the battery deeper. Without
   a separate shedding stage one disconnect takes every output off. An output
   once off stays off until the battery voltage (at rest, or raised by
   charging current) climbs back to its reconnect voltage (hysteresis).
6. **Self-discharge**, doubling per 10 K above 25 °C.

Every flow is in Wh for the hour (mean W × 1 h). The energy accounting at the
DC bus closes every hour: array power at the controller output + battery
discharge = loads at the bus (served load + inverter loss) + controller
self-consumption + reverse current + battery charge + spilled; the charge
(Ah) balance of the battery closes too.

References
----------
.. [1] IEEE 1562-2021, Guide for Array and Battery Sizing in Stand-Alone
   Photovoltaic (PV) Systems (loss of load, days of autonomy).
.. [2] IEEE 1013-2019, Recommended Practice for Sizing Lead-Acid Batteries for
   Stand-Alone PV Systems; Sandia National Laboratories (1995), Stand-Alone
   Photovoltaic Systems: A Handbook of Recommended Design Practices,
   SAND87-7023 (charge regulation set-points, temperature compensation).
.. [3] Jantsch, M., Schmidt, H., Schmid, J. (1992). Results of the concerted
   action on power conditioning and control. 11th EC PVSEC, 1589-1593
   (inverter loss = no-load + linear + quadratic terms).
.. [4] ASTM E1049-85 (2017), Standard Practices for Cycle Counting in Fatigue
   Analysis, §5.4.4 rainflow counting (battery cycle ageing, Miner's rule).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from .cycles import push_reversal, residue_damage

HOURS = 8760
WARMUP_HOURS = 720  # the year's last 30 days run first to set the starting state of charge
EVENING_START, EVENING_END = 18, 22  # local clock hours counted as evening service (4 h)
#: A deferrable load (pump) may take array power ahead of charging, and battery
#: energy, only above this state of charge.
DEFER_MIN_SOC = 0.7
#: State of charge counted as a full charge (lead-acid needs one regularly).
FULL_CHARGE_SOC = 0.98
#: Rainflow gate: state-of-charge moves smaller than this do not make a reversal
#: (hysteresis filtering of the trace before cycle counting).
RAINFLOW_GATE_SOC = 1e-4
RAINFLOW_STACK = 64
#: Controller kinds in the kernel's numbering.
KIND_CODE = {"pwm": 0, "series": 1, "shunt": 2, "mppt": 3}

#: Kit parameter columns, in the order :func:`fleet.kits.kernel_parameters` writes them.
KIT_PARAMS = (
    "array_multiplier",          # strings in parallel x (1 - array losses)
    "controller_kind",           # KIND_CODE
    "string_charge_v",           # battery-tied kinds: string voltage the per-string power refers to, V
    "controller_efficiency",     # conversion (MPPT) or switch (PWM/series/shunt) efficiency
    "controller_max_a",          # rated current x controllers, A (battery side)
    "controller_self_w",         # self-consumption, W
    "battery_ah",                # bank capacity at its rated hours and 25 degC, Ah
    "cells",                     # cells in series
    "chemistry",                 # fleet.battery.CHEMISTRY_INDEX
    "soc_lvd",                   # design floor of state of charge (1 - usable depth of discharge)
    "coulombic_efficiency",
    "max_charge_c", "max_discharge_c",   # C-rate limits, 1/h
    "self_discharge_per_h",      # fraction per hour at 25 degC
    "rated_hours",               # hours of the capacity rating (Peukert)
    "max_load_w",                # output rating: controller load terminal (DC) or inverter (AC), W
    "ac",                        # 1: inverter on the battery (AC system)
    "inverter_no_load_w",
    "inverter_quadratic_per_w",  # inverter loss = no-load + this x P_out^2, 1/W
    "reverse_current_a",         # night-time reverse current through the array, A (0: blocked)
    "shunt_on_v",                # shunt element voltage while short-circuiting the array, V
    "reconnect_hysteresis_soc",  # reconnect at the rest voltage of floor + this
    "disconnect_ref_c",          # C-rate at which the disconnect voltage sits at the design floor
    "absorption_v_cell", "float_v_cell", "rebulk_v_cell", "series_reconnect_v_cell",   # at 25 degC, V/cell
    "temp_comp_v_per_k_cell", "peukert_exponent", "capacity_per_k", "self_discharge_doubling_k",
    "absorption_hours",
    "table_index",               # which per-string array power series the kit uses
    "lvd_v_cell", "lvr_v_cell",  # explicit disconnect/reconnect settings, V/cell (0: from the design floor)
    "cycle_life_inv_a", "cycle_life_b",  # cycle life N(d) = a d^-b
    "lvd_compensated",           # 1: the disconnect voltage follows the discharge current (DC controller)
)
N_PARAMS = len(KIT_PARAMS)
K = {name: i for i, name in enumerate(KIT_PARAMS)}
(K_MULT, K_KIND, K_VSTR, K_CEFF, K_CMAXA, K_CSELF, K_AH, K_CELLS, K_CHEM, K_SOCLVD, K_ETA, K_MAXC, K_MAXD,
 K_SD, K_RATEH, K_MAXLOAD, K_AC, K_INL, K_IQ, K_REV, K_SHUNTV, K_HYST, K_XREF, K_VABS, K_VFLOAT, K_VREBULK,
 K_VSERREC, K_TCOMP, K_PEUK, K_CAPK, K_SDK, K_ABSH, K_TABLE, K_LVD, K_LVR, K_INVA, K_B, K_LVDCOMP) = range(N_PARAMS)

#: per-unit parameter columns: deferrable Wh per day, pump W, SOC separation of general-load shedding
U_DEFER_WH, U_PUMP_W, U_SEP = range(3)
#: Multi-Tier Framework minimum hours of supply per day and in the evening, tiers 1-5
#: (ESMAP 2015, Beyond Connections; the evening counted here is 18:00-22:00 local).
TIER_HOURS = np.array([4.0, 4.0, 8.0, 16.0, 23.0])
TIER_EVENING_HOURS = np.array([1.0, 2.0, 3.0, 4.0, 4.0])

#: Names of the per (pair, year) metrics, in the kernel's output order.
METRICS = (
    "demand_wh", "served_wh", "unmet_wh", "unmet_hours", "disconnected_hours", "days_full_service",
    "evening_demand_wh", "evening_served_wh", "pv_bus_wh", "pv_used_wh", "pv_spilled_wh",
    "battery_discharge_wh", "battery_charge_wh", "controller_self_wh", "inverter_loss_wh",
    "soc_min", "soc_mean", "days_full_charge", "balance_residual_wh",
    "critical_demand_wh", "critical_unmet_wh", "deferrable_demand_wh", "deferrable_served_wh",
    "days_supply_tier1", "days_supply_tier2", "days_supply_tier3", "days_supply_tier4", "days_supply_tier5",
    "disconnected_days", "evening_hours_served", "controller_loss_wh", "shunt_dissipation_wh",
    "reverse_current_wh", "battery_discharge_ah", "battery_charge_ah", "max_days_without_full_charge",
    "cycle_damage", "cycles_counted", "regulation_hours", "general_disconnects",
)
N_METRICS = len(METRICS)
M = {name: i for i, name in enumerate(METRICS)}

#: Per-pair set-points derived once from the kit, the battery temperature and the unit.
(S_C, S_N, S_VABS, S_VFLOAT, S_VREBULK, S_VSERREC, S_LVD, S_LVR, S_SHED, S_SHEDREC, S_SD, S_K1, S_XN,
 S_ETA, S_XREF, S_LVDK, S_SHEDK) = range(17)
N_SETPOINTS = 17
#: The hour's context is one flat vector per pair: kit parameters, set-points, then the
#: chemistry's voltage tables (4 rows of 21 knots). One array crossing into the inlined hour
#: costs one pair of reference-count operations; three cost three.
OFF_S = N_PARAMS
OFF_V = N_PARAMS + N_SETPOINTS
N_CONTEXT = OFF_V + 4 * 21


@njit(cache=True, inline="always", error_model="numpy")
def _interp(vt, row, soc):
    """Linear interpolation in row ``row`` of a table on 21 evenly spaced SOC knots (0..1),
    clamped. (Rows are indexed in place: slicing a view per call costs reference counting.)"""
    x = soc * 20.0
    if x <= 0.0:
        return vt[row, 0]
    if x >= 20.0:
        return vt[row, 20]
    i = int(x)
    return vt[row, i] + (x - i) * (vt[row, i + 1] - vt[row, i])


@njit(cache=True, error_model="numpy")
def _soc_at_voltage(c, x, v_cell, s_hi):
    """Largest SOC s <= s_hi at which the discharging cell voltage ocv(s) - x r(s) is at most
    ``v_cell`` (the voltage falls monotonically as the battery empties); 0 if none."""
    i, f = _knot(s_hi)
    o = OFF_V
    r = OFF_V + 42
    f_hi = c[o + i] + f * (c[o + i + 1] - c[o + i]) - x * (c[r + i] + f * (c[r + i + 1] - c[r + i]))
    if f_hi <= v_cell:
        return s_hi
    s_a = s_hi
    f_a = f_hi
    k = int(s_hi * 20.0)
    if k > 20:
        k = 20
    while k >= 0:
        s_k = k * 0.05
        f_k = c[o + k] - x * c[r + k]
        if f_k <= v_cell and s_k < s_a:
            return s_k + (v_cell - f_k) / (f_a - f_k) * (s_a - s_k)
        if s_k < s_a:
            s_a = s_k
            f_a = f_k
        k -= 1
    return 0.0


@njit(cache=True, error_model="numpy")
def pair_setpoints(p, vt, temp_c, sep):
    """Set-points of one kit at battery temperature ``temp_c`` (degC) for a unit whose general
    load is shed ``sep`` of SOC above the floor. Voltages per cell. See :data:`KIT_PARAMS`."""
    s = np.empty(N_SETPOINTS)
    dt = temp_c - 25.0
    cap = 1.0 + p[K_CAPK] * dt
    cap = min(max(cap, 0.5), 1.1)
    s[S_C] = p[K_AH] * cap
    s[S_N] = p[K_CELLS]
    comp = p[K_TCOMP] * dt
    s[S_VABS] = p[K_VABS] + comp
    s[S_VFLOAT] = p[K_VFLOAT] + comp
    # re-bulk and series reconnect are compared with the rest voltage, whose table has no
    # temperature dependence: they are not compensated
    s[S_VREBULK] = p[K_VREBULK]
    s[S_VSERREC] = p[K_VSERREC]
    floor = p[K_SOCLVD]
    xr = p[K_XREF]
    # the disconnect voltage at C-rate x is S_LVD + S_LVDK (S_XREF - x): a fixed voltage
    # (S_LVDK = 0; inverters, explicit settings) or one that follows the discharge current so
    # that it sits at the design floor at any current (DC controllers)
    s[S_XREF] = xr
    comp = p[K_LVDCOMP] if p[K_LVD] <= 0.0 else 0.0
    s[S_LVDK] = comp * _interp(vt, 2, floor)
    if p[K_LVD] > 0.0:
        s[S_LVD] = p[K_LVD]
    else:
        s[S_LVD] = _interp(vt, 0, floor) - xr * _interp(vt, 2, floor)
    if p[K_LVR] > 0.0:
        s[S_LVR] = p[K_LVR]
    else:
        s[S_LVR] = _interp(vt, 0, min(floor + p[K_HYST], 0.98))
    if sep > 0.0:
        sf = min(floor + sep, 0.95)
        s[S_SHED] = max(_interp(vt, 0, sf) - xr * _interp(vt, 2, sf), s[S_LVD])
        s[S_SHEDK] = comp * _interp(vt, 2, sf)
        s[S_SHEDREC] = max(_interp(vt, 0, min(sf + p[K_HYST], 0.98)), s[S_LVR])
    else:
        s[S_SHED] = s[S_LVD]
        s[S_SHEDK] = s[S_LVDK]
        s[S_SHEDREC] = s[S_LVR]
    s[S_SD] = p[K_SD] * 2.0 ** (dt / p[K_SDK])
    s[S_K1] = p[K_PEUK] - 1.0
    s[S_XN] = 1.0 / p[K_RATEH]
    s[S_ETA] = p[K_ETA]
    return s


@njit(cache=True, error_model="numpy")
def context(p, vt, temp_c, sep):
    """The flat per-pair vector the hour reads: kit parameters, set-points
    (:func:`pair_setpoints`) and the chemistry's voltage tables."""
    c = np.empty(N_CONTEXT)
    c[:N_PARAMS] = p
    c[OFF_S:OFF_V] = pair_setpoints(p, vt, temp_c, sep)
    for row in range(4):
        for k in range(21):
            c[OFF_V + row * 21 + k] = vt[row, k]
    return c


@njit(cache=True, inline="always", error_model="numpy")
def _knot(soc):
    """(segment index, fraction) of ``soc`` on the 21 evenly spaced SOC knots, clamped."""
    x = soc * 20.0
    if x <= 0.0:
        return 0, 0.0
    if x >= 20.0:
        return 19, 1.0
    i = int(x)
    return i, x - i


@njit(cache=True, inline="always", error_model="numpy")
def _discharge_rate(power_w, a, b, x_max):
    """C-rate (1/h) at which a battery delivers ``power_w`` at its terminals, where
    P = b x - a x^2 (b = cells·C·ocv, a = cells·C·r), the smaller root,
    capped at ``x_max`` and at the battery's maximum-power rate b / 2a. Returns
    (x, power delivered at that rate)."""
    disc = b * b - 4.0 * a * power_w
    x = 0.5 * b / a if disc <= 0.0 else 2.0 * power_w / (b + math.sqrt(disc))
    if x >= x_max:
        return x_max, x_max * (b - a * x_max)
    if disc <= 0.0:
        return x, x * (b - a * x)
    return x, power_w


@njit(cache=True, inline="always", error_model="numpy")
def _peukert(x, xn, k1):
    """Charge drawn per Ah delivered at C-rate x (Peukert above the rated rate xn)."""
    if x <= xn or k1 == 0.0:
        return 1.0
    return math.exp(k1 * math.log(x / xn))


@njit(cache=True, inline="always", error_model="numpy")
def _step(pvs, gw, cw, want, c, soc, on_g, on_c, stage, abs_h):
    """One hour; see the module docstring. ``pvs`` is per-string array power at the
    operating point (W), ``gw``/``cw`` the general and critical load of one member (W),
    ``want`` the deferrable power wanted this hour (W). Returns the new state and the
    hour's flows (Wh; Ah for the ``_ah`` values).

    Table lookups are written out in place rather than through helpers that take the
    table: every inlined helper call with an array argument costs two atomic reference
    count operations, which were most of the hour's time."""
    cap = c[OFF_S + S_C]
    n = c[OFF_S + S_N]
    ncap = n * cap
    i0, f0 = _knot(soc)
    ocv = (c[OFF_V + 0 + i0] + f0 * (c[OFF_V + 0 + i0 + 1] - c[OFF_V + 0 + i0]))
    v_rest = n * ocv
    kind = c[K_KIND]
    eff = c[K_CEFF]
    # 1. array at the controller output
    avail = 0.0
    shunt_w = 0.0
    i_arr = 0.0
    if pvs > 0.0:
        if kind == 3.0:
            avail = pvs * c[K_MULT] * eff
            lim = c[K_CMAXA] * v_rest
            if avail > lim:
                avail = lim
        else:
            i_arr = pvs * c[K_MULT] / c[K_VSTR]
            if i_arr > c[K_CMAXA]:
                i_arr = c[K_CMAXA]
            avail = i_arr * v_rest * eff
    open_ = stage == 3
    usable = 0.0 if open_ else avail
    if open_ and kind == 2.0:
        shunt_w = i_arr * c[K_SHUNTV]
    # 2. demand on the bus
    max_load = c[K_MAXLOAD]
    crit_out = min(cw, max_load) if on_c else 0.0
    gen_out = min(gw, max_load - crit_out) if on_g else 0.0
    if not on_c:
        want = 0.0
    f = 1.0
    nl = 0.0
    if c[K_AC] > 0.0:
        f = 1.0 + c[K_IQ] * (crit_out + gen_out + want)
        if on_c:
            nl = c[K_INL]
    crit_bus = crit_out * f + nl
    gen_bus = gen_out * f
    rev_w = c[K_REV] * v_rest if pvs <= 0.0 else 0.0
    self_bus = c[K_CSELF] + rev_w
    demand_bus = self_bus + crit_bus + gen_bus
    direct = min(usable, demand_bus)
    surplus = usable - direct
    deficit = demand_bus - direct
    # 4. the deferrable load first in line for the surplus once the battery is well charged
    want_bus = want * f
    defer_pv = 0.0
    if want_bus > 0.0 and soc >= DEFER_MIN_SOC:
        defer_pv = min(surplus, want_bus)
        surplus -= defer_pv
    # 3. charge, within the C-rate, the room left and the acceptance at the set-point
    charge_w = 0.0
    charge_ah = 0.0
    x_ch = 0.0
    regulated = False
    s = soc
    if surplus > 0.0:
        rch = (c[OFF_V + 21 + i0] + f0 * (c[OFF_V + 21 + i0 + 1] - c[OFF_V + 21 + i0]))
        v_set = c[OFF_S + S_VFLOAT] if stage == 2 else c[OFF_S + S_VABS]
        x_acc = (v_set - ocv) / rch
        if x_acc < 0.0:
            x_acc = 0.0
        eta = c[OFF_S + S_ETA] * (c[OFF_V + 63 + i0] + f0 * (c[OFF_V + 63 + i0 + 1] - c[OFF_V + 63 + i0]))
        x_room = (1.0 - soc) / eta
        b = ncap * ocv
        x = 2.0 * surplus / (b + math.sqrt(b * b + 4.0 * ncap * rch * surplus))
        if x > x_acc or x > x_room:
            regulated = True  # the battery voltage reached the set-point, or the battery is full
        x_ch = max(min(x, c[K_MAXC], x_room, x_acc), 0.0)
        charge_w = min(x_ch * ncap * (ocv + x_ch * rch), surplus)
        charge_ah = x_ch * cap * eta
        s = soc + x_ch * eta
        surplus -= charge_w
    if want_bus > defer_pv:
        more = min(surplus, want_bus - defer_pv)
        defer_pv += more
        surplus -= more
    spill = surplus + (avail - usable)
    used = usable - surplus
    # 5. discharge: general load first, then critical load (with the inverter's no-load),
    #    then self-consumption and reverse current
    dis_w = 0.0
    dis_ah = 0.0
    unmet_g = 0.0
    unmet_c = 0.0
    unmet_s = 0.0
    on_g_new = on_g
    on_c_new = on_c
    x_dis = 0.0
    defer_bat = 0.0
    if deficit > 0.0:
        def_g = min(deficit, gen_bus)
        rest = deficit - def_g
        def_c = min(rest, crit_bus)
        def_s = rest - def_c
        if s == soc:
            i1, f1 = i0, f0
        else:
            i1, f1 = _knot(s)
        ocv_s = (c[OFF_V + 0 + i1] + f1 * (c[OFF_V + 0 + i1 + 1] - c[OFF_V + 0 + i1]))
        rdis = (c[OFF_V + 42 + i1] + f1 * (c[OFF_V + 42 + i1 + 1] - c[OFF_V + 42 + i1]))
        a = ncap * rdis
        b = ncap * ocv_s
        xmax = c[K_MAXD]
        xn = c[OFF_S + S_XN]
        k1 = c[OFF_S + S_K1]
        t_left = 1.0
        if def_g > 0.0:
            x, p_ok = _discharge_rate(deficit, a, b, xmax)
            short = deficit - p_ok  # above the discharge limit: the general load goes short first
            if short > 0.0:
                unmet_g = min(short, def_g)
                unmet_c = min(short - unmet_g, def_c)
                unmet_s = short - unmet_g - unmet_c
            pf = _peukert(x, xn, k1)
            ah = p_ok / (b - a * x) * pf  # C-rates of charge drawn in the hour
            s_end = s - ah
            thr = c[OFF_S + S_SHED] + c[OFF_S + S_SHEDK] * (c[OFF_S + S_XREF] - x)
            ie, fe = _knot(s_end)
            v_end = c[OFF_V + 0 + ie] + fe * (c[OFF_V + 0 + ie + 1] - c[OFF_V + 0 + ie]) - x * (c[OFF_V + 42 + ie] + fe * (c[OFF_V + 42 + ie + 1] - c[OFF_V + 42 + ie]))
            if s_end >= 0.0 and v_end >= thr:
                dis_w = p_ok
                dis_ah = ah * cap
                s = s_end
                t_left = 0.0
                x_dis = x
            else:
                s_cut = _soc_at_voltage(c, x, thr, s)
                tau = (s - s_cut) / ah if ah > 0.0 else 0.0
                if tau > 1.0:
                    tau = 1.0
                dis_w = p_ok * tau
                dis_ah = ah * cap * tau
                s -= ah * tau
                unmet_g = unmet_g * tau + def_g * (1.0 - tau)
                unmet_c *= tau
                unmet_s *= tau
                t_left = 1.0 - tau
                on_g_new = False
                x_dis = x
                if c[OFF_S + S_SHED] <= c[OFF_S + S_LVD] and c[OFF_S + S_SHEDK] <= c[OFF_S + S_LVDK]:
                    # no separate shedding stage: the one disconnect takes every output off
                    on_c_new = False
                    unmet_c += def_c * t_left
                    def_c = 0.0
        if t_left > 0.0 and def_c + def_s > 0.0:
            pw = def_c + def_s
            if t_left < 1.0:
                i1, f1 = _knot(s)
                ocv_s = (c[OFF_V + 0 + i1] + f1 * (c[OFF_V + 0 + i1 + 1] - c[OFF_V + 0 + i1]))
                rdis = (c[OFF_V + 42 + i1] + f1 * (c[OFF_V + 42 + i1 + 1] - c[OFF_V + 42 + i1]))
                a = ncap * rdis
                b = ncap * ocv_s
            x, p_ok = _discharge_rate(pw, a, b, xmax)
            sh = pw - p_ok
            uc = 0.0
            us2 = 0.0
            if sh > 0.0:
                uc = min(sh, def_c)
                us2 = sh - uc
            pf = _peukert(x, xn, k1)
            ah = p_ok / (b - a * x) * pf
            s_end = s - ah * t_left
            thr = c[OFF_S + S_LVD] + c[OFF_S + S_LVDK] * (c[OFF_S + S_XREF] - x)
            ie, fe = _knot(s_end)
            v_end = c[OFF_V + 0 + ie] + fe * (c[OFF_V + 0 + ie + 1] - c[OFF_V + 0 + ie]) - x * (c[OFF_V + 42 + ie] + fe * (c[OFF_V + 42 + ie + 1] - c[OFF_V + 42 + ie]))
            if def_c <= 0.0 or (s_end >= 0.0 and v_end >= thr):
                unmet_c += uc * t_left
                unmet_s += us2 * t_left
                if s_end < 0.0:  # only self-consumption left: it stops when the battery is flat
                    frac = s / (ah * t_left)
                    unmet_s += p_ok * t_left * (1.0 - frac)
                    dis_w += p_ok * t_left * frac
                    dis_ah += s * cap
                    s = 0.0
                else:
                    dis_w += p_ok * t_left
                    dis_ah += ah * cap * t_left
                    s = s_end
                if x > x_dis:
                    x_dis = x
            else:
                s_cut = _soc_at_voltage(c, x, thr, s)
                tau = (s - s_cut) / ah if ah > 0.0 else 0.0
                if tau > t_left:
                    tau = t_left
                dis_w += p_ok * tau
                dis_ah += ah * cap * tau
                s -= ah * tau
                unmet_c += uc * tau + def_c * (t_left - tau)
                unmet_s += us2 * tau
                on_c_new = False
                on_g_new = False
                # self-consumption and reverse current go on for the rest of the hour
                t2 = t_left - tau
                if def_s > 0.0 and t2 > 0.0:
                    i2, f2 = _knot(s)
                    o2 = (c[OFF_V + 0 + i2] + f2 * (c[OFF_V + 0 + i2 + 1] - c[OFF_V + 0 + i2]))
                    r2 = (c[OFF_V + 42 + i2] + f2 * (c[OFF_V + 42 + i2 + 1] - c[OFF_V + 42 + i2]))
                    x2, p2 = _discharge_rate(def_s, ncap * r2, ncap * o2, xmax)
                    ah2 = p2 / (ncap * (o2 - x2 * r2))
                    d_s = min(ah2 * t2, s)
                    frac = d_s / (ah2 * t2) if ah2 > 0.0 else 0.0
                    dis_w += p2 * t2 * frac
                    dis_ah += d_s * cap
                    s -= d_s
                    unmet_s += def_s * t2 - p2 * t2 * frac
                if x > x_dis:
                    x_dis = x
    # the battery adds to the deferrable load while well charged and not needed by the loads
    extra = want_bus - defer_pv
    if extra > 0.0 and s > DEFER_MIN_SOC and on_c_new:
        room_x = c[K_MAXD] - x_dis
        if room_x > 0.0:
            i3, f3 = _knot(s)
            o3 = (c[OFF_V + 0 + i3] + f3 * (c[OFF_V + 0 + i3 + 1] - c[OFF_V + 0 + i3]))
            r3 = (c[OFF_V + 42 + i3] + f3 * (c[OFF_V + 42 + i3 + 1] - c[OFF_V + 42 + i3]))
            x, pw = _discharge_rate(extra, ncap * r3, ncap * o3, room_x)
            ah = pw / (ncap * (o3 - x * r3)) * _peukert(x, c[OFF_S + S_XN], c[OFF_S + S_K1])
            if ah > s - DEFER_MIN_SOC:
                pw *= (s - DEFER_MIN_SOC) / ah
                ah = s - DEFER_MIN_SOC
            defer_bat = pw
            dis_w += pw
            dis_ah += ah * cap
            s -= ah
    # served, at the loads (out) and at the bus
    gen_bus_served = gen_bus - unmet_g
    crit_bus_served = crit_bus - unmet_c
    self_served = self_bus - unmet_s
    defer_bus = defer_pv + defer_bat
    gen_served = gen_bus_served / f
    crit_served = crit_out * (crit_bus_served / crit_bus) if crit_bus > 0.0 else 0.0
    defer_out = defer_bus / f
    inv_loss = (gen_bus_served + crit_bus_served + defer_bus) - (gen_served + crit_served + defer_out)
    rev_served = rev_w * (self_served / self_bus) if self_bus > 0.0 else 0.0
    ctrl_self = self_served - rev_served
    ctrl_loss = used * (1.0 / eff - 1.0)
    resid = (used + dis_w) - (gen_bus_served + crit_bus_served + defer_bus + self_served + charge_w)
    # 6. self-discharge
    sd = s * c[OFF_S + S_SD]
    s -= sd
    if s < 0.0:
        s = 0.0
    # regulation state and reconnects act on the voltage at the hour's end
    series_like = kind == 1.0 or kind == 2.0
    if (not on_c_new) or (not on_g_new) or stage >= 2 or regulated:
        i4, f4 = _knot(s)
        ocv_end = (c[OFF_V + 0 + i4] + f4 * (c[OFF_V + 0 + i4 + 1] - c[OFF_V + 0 + i4]))
        if series_like:
            if regulated:
                stage = 3
            elif stage == 3 and ocv_end - x_dis * (c[OFF_V + 42 + i4] + f4 * (c[OFF_V + 42 + i4 + 1] - c[OFF_V + 42 + i4])) <= c[OFF_S + S_VSERREC]:
                stage = 0
        else:
            if regulated:
                if stage == 0:
                    stage = 1
                if stage == 1:
                    abs_h += 1.0
                    if abs_h >= c[K_ABSH]:
                        stage = 2
            if stage == 2 and ocv_end < c[OFF_S + S_VREBULK]:
                stage = 0
                abs_h = 0.0
        # reconnect on the battery voltage (at rest, or raised by the charging current)
        v_end = ocv_end + x_ch * (c[OFF_V + 21 + i4] + f4 * (c[OFF_V + 21 + i4 + 1] - c[OFF_V + 21 + i4])) if x_ch > 0.0 else ocv_end
        if (not on_c_new) and v_end >= c[OFF_S + S_LVR]:
            on_c_new = True
        if (not on_g_new) and on_c_new and v_end >= c[OFF_S + S_SHEDREC]:
            on_g_new = True
    return (s, on_g_new, on_c_new, stage, abs_h, avail, used, spill, charge_w, charge_ah, dis_w, dis_ah,
            gen_served, crit_served, defer_out, defer_pv / f, inv_loss, ctrl_self, rev_served, ctrl_loss, shunt_w,
            sd * cap, regulated, resid)


@njit(cache=True, error_model="numpy")
def _push(stack, n, x, inv_a, b):
    """A rainflow reversal (:func:`fleet.cycles.push_reversal`), called rather than inlined:
    reversals come a few times a day, and inlining them into the hour loop costs every hour."""
    return push_reversal(stack, n, x, inv_a, b)


@njit(cache=True, error_model="numpy", _nrt=False)  # no reference counting in the hour loops
def _warm_up(pv, gen, crit, unit_p, scale, c):
    """State after running the year's last WARMUP_HOURS from full charge."""
    soc = 1.0
    on_g = True
    on_c = True
    stage = 0
    abs_h = 0.0
    defer_left = 0.0
    inv = 1.0 / scale
    for h in range(HOURS - WARMUP_HOURS, HOURS):
        if h % 24 == 0:
            defer_left = unit_p[U_DEFER_WH] * inv
            if stage == 1:
                stage = 0
                abs_h = 0.0
        want = min(unit_p[U_PUMP_W] * inv, defer_left) if defer_left > 0.0 else 0.0
        r = _step(pv[h], gen[h] * inv, crit[h] * inv, want, c, soc, on_g, on_c, stage, abs_h)
        soc, on_g, on_c, stage, abs_h = r[0], r[1], r[2], r[3], r[4]
        defer_left -= r[14]
    return soc, on_g, on_c, stage, abs_h


@njit(cache=True, error_model="numpy", _nrt=False)
def _simulate_year(pv, gen, crit, unit_p, scale, c, stack, out):
    # sums are kept in scalars (registers) and written to ``out`` once, at the end
    soc, on_g, on_c, stage, abs_h = _warm_up(pv, gen, crit, unit_p, scale, c)
    demand = served_sum = unmet_sum = unmet_h = off_h = full_days = 0.0
    ev_demand = ev_served = avail_sum = used_sum = spill_sum = dis_sum = ch_sum = 0.0
    self_sum = inv_sum = soc_sum = full_charge_days = resid = 0.0
    crit_demand = crit_unmet = defer_demand = defer_served_sum = 0.0
    d1 = d2 = d3 = d4 = d5 = 0.0
    off_days = ev_hours = ctrl_loss_sum = shunt_sum = rev_sum = dis_ah_sum = ch_ah_sum = 0.0
    reg_h = n_disc = 0.0
    gap = 0.0
    max_gap = 0.0
    soc_min = 1.0
    day_unmet = 0.0
    day_full = False
    day_on = 0.0
    day_off = False
    day_evening_on = 0.0
    inv = 1.0 / scale
    defer_day = unit_p[U_DEFER_WH] * inv
    pump = unit_p[U_PUMP_W] * inv
    inv_a = c[K_INVA]
    b_exp = c[K_B]
    # rainflow on the state of charge: reversals through a gate, counted as they come
    n_st = 0
    damage = 0.0
    cycles = 0.0
    peak = soc
    direction = 0
    n_st, dmg, cyc = _push(stack, n_st, soc, inv_a, b_exp)
    defer_left = 0.0
    for h in range(HOURS):
        hod = h % 24
        if hod == 0:
            defer_left = defer_day
            defer_demand += defer_day
            if stage == 1:
                stage = 0
                abs_h = 0.0
        gw = gen[h] * inv
        cw = crit[h] * inv
        lw = gw + cw
        was_on = on_g
        want = min(pump, defer_left) if defer_left > 0.0 else 0.0
        r = _step(pv[h], gw, cw, want, c, soc, on_g, on_c, stage, abs_h)
        soc, on_g, on_c, stage, abs_h = r[0], r[1], r[2], r[3], r[4]
        gen_served = r[12]
        crit_served = r[13]
        defer_left -= r[14]
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
            day_off = True
        else:
            day_on += 1.0
        if was_on and not on_g:
            n_disc += 1.0
        if hod >= EVENING_START and hod < EVENING_END:
            ev_demand += lw
            ev_served += served
            if was_on:
                day_evening_on += 1.0
                if unmet <= 1e-9 + 1e-6 * lw:
                    ev_hours += 1.0
        avail_sum += r[5]
        used_sum += r[6]
        spill_sum += r[7]
        ch_sum += r[8]
        ch_ah_sum += r[9]
        dis_sum += r[10]
        dis_ah_sum += r[11]
        defer_served_sum += r[14]
        inv_sum += r[16]
        self_sum += r[17]
        rev_sum += r[18]
        ctrl_loss_sum += r[19]
        shunt_sum += r[20]
        if r[22]:
            reg_h += 1.0
        resid += r[23]
        crit_demand += cw
        crit_unmet += cw - crit_served
        if soc < soc_min:
            soc_min = soc
        soc_sum += soc
        if soc >= FULL_CHARGE_SOC:
            day_full = True
        # rainflow reversals
        d = soc - peak
        if direction >= 0:
            if d > 0.0:
                peak = soc
                direction = 1
            elif d < -RAINFLOW_GATE_SOC:
                if direction == 1:
                    n_st, dmg, cyc = _push(stack, n_st, peak, inv_a, b_exp)
                    damage += dmg
                    cycles += cyc
                peak = soc
                direction = -1
        else:
            if d < 0.0:
                peak = soc
            elif d > RAINFLOW_GATE_SOC:
                n_st, dmg, cyc = _push(stack, n_st, peak, inv_a, b_exp)
                damage += dmg
                cycles += cyc
                peak = soc
                direction = 1
        if hod == 23:
            if day_unmet <= 0.0:
                full_days += 1.0
            if day_full:
                full_charge_days += 1.0
                gap = 0.0
            else:
                gap += 1.0
                if gap > max_gap:
                    max_gap = gap
            if day_off:
                off_days += 1.0
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
            day_off = False
            day_evening_on = 0.0
    if direction != 0:  # the last extreme; a trace that never moved has no reversal to add
        n_st, dmg, cyc = _push(stack, n_st, peak, inv_a, b_exp)
        damage += dmg
        cycles += cyc
    dmg, cyc = residue_damage(stack, n_st, inv_a, b_exp)
    damage += dmg
    cycles += cyc
    out[0] = demand
    out[1] = served_sum
    out[2] = unmet_sum
    out[3] = unmet_h
    out[4] = off_h
    out[5] = full_days
    out[6] = ev_demand
    out[7] = ev_served
    out[8] = avail_sum
    out[9] = used_sum
    out[10] = spill_sum
    out[11] = dis_sum
    out[12] = ch_sum
    out[13] = self_sum
    out[14] = inv_sum
    out[15] = soc_min
    out[16] = soc_sum / HOURS
    out[17] = full_charge_days
    out[18] = resid
    out[19] = crit_demand
    out[20] = crit_unmet
    out[21] = defer_demand
    out[22] = defer_served_sum
    out[23] = d1
    out[24] = d2
    out[25] = d3
    out[26] = d4
    out[27] = d5
    out[28] = off_days
    out[29] = ev_hours
    out[30] = ctrl_loss_sum
    out[31] = shunt_sum
    out[32] = rev_sum
    out[33] = dis_ah_sum
    out[34] = ch_ah_sum
    out[35] = max_gap
    out[36] = damage
    out[37] = cycles
    out[38] = reg_h
    out[39] = n_disc


@njit(cache=True, parallel=True, error_model="numpy")
def simulate_pairs(pv_w, general, critical, unit_params, params, vtables, source_idx, unit_idx, kit_idx,
                   scale, battery_temp_c):
    """Metrics for every (unit, kit) pair and weather year.

    Parameters
    ----------
    pv_w : float32 array (n_sources, n_years, 8760)
        Per-string array power at the controller's operating point, W (hourly
        mean), from :func:`fleet.iv.array_power_per_string`; a source is a
        (site, array table) combination.
    general, critical : float32 arrays (n_units, 8760)
        General and critical load of one member of each unit, W (hourly mean).
    unit_params : float64 array (n_units, 3)
        Per unit: deferrable energy per day (Wh), pump power (W), state-of-charge
        separation between general-load shedding and the disconnect.
    params : float64 array (n_kits, N_PARAMS)
        :data:`KIT_PARAMS` of each kit (:func:`fleet.kits.kernel_parameters`).
    vtables : float64 array (n_chemistries, 4, 21)
        :func:`fleet.battery.voltage_tables`.
    source_idx, unit_idx, kit_idx : int64 arrays (n_pairs,)
    scale : float64 array (n_pairs,)
        Loads are divided by this (number of identical blocks sharing them).
    battery_temp_c : float64 array (n_pairs,)
        Battery temperature, degC.

    Returns
    -------
    float64 array (n_pairs, n_years, len(METRICS))
    """
    n_pairs = source_idx.shape[0]
    n_years = pv_w.shape[1]
    out = np.zeros((n_pairs, n_years, N_METRICS))
    for i in prange(n_pairs):
        u = unit_idx[i]
        p = params[kit_idx[i]]
        c = context(p, vtables[int(p[K_CHEM])], battery_temp_c[i], unit_params[u, U_SEP])
        stack = np.empty(RAINFLOW_STACK)
        for y in range(n_years):
            _simulate_year(pv_w[source_idx[i], y], general[u], critical[u], unit_params[u], scale[i], c,
                           stack, out[i, y])
    return out


TRACE_FIELDS = ("soc", "connected", "critical_connected", "charge_stage", "pv_bus_w", "pv_used_w", "spill_w",
                "charge_w", "charge_ah", "discharge_w", "discharge_ah", "load_w", "served_w", "critical_load_w",
                "critical_served_w", "deferrable_served_w", "deferrable_from_pv_w", "inverter_loss_w",
                "controller_self_w", "reverse_current_w", "controller_loss_w", "shunt_dissipation_w",
                "self_discharge_ah", "regulating", "balance_residual_w", "battery_rest_voltage_v")


@njit(cache=True, error_model="numpy")
def _trace(pv, gen, crit, unit_p, scale, c):
    soc, on_g, on_c, stage, abs_h = _warm_up(pv, gen, crit, unit_p, scale, c)
    out = np.zeros((HOURS, len(TRACE_FIELDS)))
    soc0 = soc
    defer_left = 0.0
    inv = 1.0 / scale
    for h in range(HOURS):
        if h % 24 == 0:
            defer_left = unit_p[U_DEFER_WH] * inv
            if stage == 1:
                stage = 0
                abs_h = 0.0
        gw = gen[h] * inv
        cw = crit[h] * inv
        out[h, 1] = 1.0 if on_g else 0.0
        out[h, 2] = 1.0 if on_c else 0.0
        want = min(unit_p[U_PUMP_W] * inv, defer_left) if defer_left > 0.0 else 0.0
        r = _step(pv[h], gw, cw, want, c, soc, on_g, on_c, stage, abs_h)
        soc, on_g, on_c, stage, abs_h = r[0], r[1], r[2], r[3], r[4]
        defer_left -= r[14]
        out[h, 0] = soc
        out[h, 3] = stage
        out[h, 4] = r[5]
        out[h, 5] = r[6]
        out[h, 6] = r[7]
        out[h, 7] = r[8]
        out[h, 8] = r[9]
        out[h, 9] = r[10]
        out[h, 10] = r[11]
        out[h, 11] = gw + cw
        out[h, 12] = r[12] + r[13]
        out[h, 13] = cw
        out[h, 14] = r[13]
        out[h, 15] = r[14]
        out[h, 16] = r[15]
        out[h, 17] = r[16]
        out[h, 18] = r[17]
        out[h, 19] = r[18]
        out[h, 20] = r[19]
        out[h, 21] = r[20]
        out[h, 22] = r[21]
        out[h, 23] = 1.0 if r[22] else 0.0
        out[h, 24] = r[23]
        i, f = _knot(soc)
        out[h, 25] = c[OFF_S + S_N] * (c[OFF_V + i] + f * (c[OFF_V + i + 1] - c[OFF_V + i]))
    return out, soc0


def simulate_trace(pv_string_w, load_w, params_row, *, battery_temp_c=25.0, scale=1.0, critical_w=None,
                   deferrable_wh_day=0.0, pump_w=0.0, shed_separation_soc=0.0, vtables=None):
    """Hour-by-hour flows of one kit over one weather year (for plots and checks).

    Parameters
    ----------
    pv_string_w : array (8760,)
        Per-string array power at the kit's operating point, W
        (:func:`fleet.iv.array_power_per_string`).
    load_w : array (8760,)
        General load, W (hourly mean, local clock).
    params_row : array (N_PARAMS,)
        The kit's :data:`KIT_PARAMS`.
    battery_temp_c : float
        Battery temperature, degC.
    scale : float
        Identical blocks sharing the load (the load is divided by it).
    critical_w : array (8760,), optional
        A critical load kept on until the low-voltage disconnect, W.
    deferrable_wh_day, pump_w : float
        A deferrable daily need (Wh) and the pump's power (W).
    shed_separation_soc : float
        General loads are shed this much SOC above the disconnect.

    Returns
    -------
    dict of 8760-long arrays named as :data:`TRACE_FIELDS` (powers in W = Wh per
    hour; ``connected``, ``critical_connected`` are the output states at the
    hour's start; ``load_w`` and ``served_w`` include the critical load;
    ``charge_stage`` is 0 bulk, 1 absorption, 2 float, 3 array opened or
    shorted by a series or shunt controller), plus ``initial_soc`` after the
    warm-up and ``setpoints`` (the pair's set-points, voltages per cell).
    """
    from .battery import voltage_tables
    vt_all = voltage_tables() if vtables is None else vtables
    p = np.asarray(params_row, np.float64)
    vt = vt_all[int(p[K_CHEM])]
    gen = np.ascontiguousarray(load_w, np.float32)
    crit = np.zeros_like(gen) if critical_w is None else np.ascontiguousarray(critical_w, np.float32)
    unit_p = np.array([deferrable_wh_day, pump_w, shed_separation_soc], np.float64)
    c = context(p, np.ascontiguousarray(vt), float(battery_temp_c), float(shed_separation_soc))
    sp = c[OFF_S:OFF_V].copy()
    arr, soc0 = _trace(np.ascontiguousarray(pv_string_w, np.float32), gen, crit, unit_p, float(scale), c)
    d = {name: arr[:, k] for k, name in enumerate(TRACE_FIELDS)}
    d["initial_soc"] = soc0
    d["setpoints"] = sp
    return d


def simulate(pv_string_w, load_w, params, *, critical_w=None, unit_params=None, battery_temp_c=25.0,
             scale=None, kit_ids=None):
    """Metrics of one or many kits serving one or many loads over weather years.

    Every combination of load (unit) and kit is simulated in every weather year.

    Parameters
    ----------
    pv_string_w : array (n_kits, n_years, 8760) or (n_years, 8760)
        Per-string array power of each kit at its operating point, W; a 2-D array
        is shared by all kits (only right when they have the same array table).
    load_w : array (n_units, 8760) or (8760,)
        General load of each unit, W.
    params : array (n_kits, N_PARAMS) or (N_PARAMS,)
        :data:`KIT_PARAMS` of each kit.
    critical_w : like ``load_w``, optional
    unit_params : array (n_units, 3), optional
        Deferrable Wh/day, pump W, shedding separation (SOC) per unit.
    battery_temp_c : float
    scale : array (n_units,), optional
        Identical blocks sharing each unit's load.
    kit_ids : sequence of str, optional
        Names for the kits in the result.

    Returns
    -------
    DataFrame, one row per (unit, kit, weather year), with columns ``unit``,
    ``kit``, ``year`` and every name in :data:`METRICS`, plus
    ``unmet_energy_fraction``, ``loss_of_load_probability`` (hours with unmet
    load / 8760) and ``equivalent_full_cycles`` (Ah discharged / usable Ah).
    """
    import pandas as pd
    from .battery import voltage_tables
    params = np.atleast_2d(np.asarray(params, np.float64))
    n_kits = params.shape[0]
    pv = np.asarray(pv_string_w, np.float32)
    if pv.ndim == 2:
        pv = np.broadcast_to(pv, (n_kits,) + pv.shape)
    pv = np.ascontiguousarray(pv)
    if pv.shape[0] != n_kits or pv.shape[-1] != HOURS:
        raise ValueError(f"pv_string_w must be (n_kits={n_kits}, n_years, {HOURS}); got {pv.shape}")
    gen = np.atleast_2d(np.asarray(load_w, np.float32))
    n_units = gen.shape[0]
    crit = np.zeros_like(gen) if critical_w is None else np.atleast_2d(np.asarray(critical_w, np.float32))
    up = np.zeros((n_units, 3)) if unit_params is None else np.atleast_2d(np.asarray(unit_params, np.float64))
    sc = np.ones(n_units) if scale is None else np.asarray(scale, np.float64)
    uu, kk = np.meshgrid(np.arange(n_units), np.arange(n_kits), indexing="ij")
    uu, kk = uu.ravel().astype(np.int64), kk.ravel().astype(np.int64)
    out = simulate_pairs(pv, np.ascontiguousarray(gen), np.ascontiguousarray(crit), up, params, voltage_tables(),
                         kk, uu, kk, sc[uu], np.full(uu.size, float(battery_temp_c)))
    n_years = pv.shape[1]
    df = pd.DataFrame(out.reshape(-1, N_METRICS), columns=list(METRICS))
    names = np.asarray(kit_ids if kit_ids is not None else np.arange(n_kits))
    df.insert(0, "year", np.tile(np.arange(n_years), uu.size))
    df.insert(0, "kit", np.repeat(names[kk], n_years))
    df.insert(0, "unit", np.repeat(uu, n_years))
    with np.errstate(divide="ignore", invalid="ignore"):
        df["unmet_energy_fraction"] = np.where(df.demand_wh > 0, df.unmet_wh / df.demand_wh, 0.0)
        df["loss_of_load_probability"] = df.unmet_hours / HOURS
        usable_ah = params[kk, K_AH] * (1.0 - params[kk, K_SOCLVD])
        df["equivalent_full_cycles"] = df.battery_discharge_ah / np.repeat(usable_ah, n_years)
    return df


#: Metrics where a high value is the bad outcome (the design year takes their upper quantile);
#: for the rest of :data:`SUMMARY_METRICS` low is bad.
_HIGH_IS_BAD = ("unmet_energy_fraction", "loss_of_load_probability", "disconnected_hours", "disconnected_days",
                "max_days_without_full_charge", "cycle_damage", "pv_spilled_wh")
SUMMARY_METRICS = _HIGH_IS_BAD + ("days_full_service", "evening_hours_served", "soc_min", "served_wh")


def summarise_years(runs, confidence: float = 0.9):
    """Mean and design-year value of the main metrics across weather years.

    Parameters
    ----------
    runs : DataFrame
        From :func:`simulate` (one row per unit, kit and weather year).
    confidence : float
        The design year is the empirical ``confidence`` quantile of the years
        (inverted CDF) of each metric, taken on the bad side: the upper quantile
        where high is bad (unmet energy, hours disconnected ...), the lower where
        low is bad (days of full service, minimum SOC ...).

    Returns
    -------
    DataFrame indexed by (unit, kit) with ``<metric>_mean`` and ``<metric>_design``
    columns for every name in :data:`SUMMARY_METRICS`.
    """
    import pandas as pd
    g = runs.groupby(["unit", "kit"], sort=False)
    out = {}
    for name in SUMMARY_METRICS:
        out[f"{name}_mean"] = g[name].mean()
        if name in _HIGH_IS_BAD:
            out[f"{name}_design"] = g[name].agg(lambda v: np.quantile(v, confidence, method="inverted_cdf"))
        else:
            out[f"{name}_design"] = g[name].agg(lambda v: -np.quantile(-v, confidence, method="inverted_cdf"))
    return pd.DataFrame(out)
