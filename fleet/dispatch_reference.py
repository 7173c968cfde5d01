"""Plain-Python reference of the hourly dispatch rules of :mod:`fleet.dispatch`.

This module is the test oracle of the numba kernel. It restates the rules of
the kernel's module docstring one small function per rule, with a named
battery state and named flows, in plain Python floats: no numba and no array
arithmetic inside the hour loop. It is slow (tens of thousands of hours per
second) and is not used by the planning run.

The rules, in the order of one hour (see :mod:`fleet.dispatch` for the full
statement):

1. :func:`array_power` -- the array at the controller output.
2. :func:`bus_demand` -- controller self-consumption, reverse current, the
   connected loads at the DC bus (inverter losses for AC systems).
3. The array serves the bus; the surplus goes to the deferrable load (first,
   while the battery is well charged) and to :func:`charge`; the rest is
   spilled.
4. :func:`discharge` -- the battery covers the deficit: every load until the
   general load is shed at its shedding voltage, the critical load and the
   controller until the low-voltage disconnect, the controller alone after
   that; then :func:`pump_from_battery`.
5. :func:`self_discharge`, :func:`regulation_update` (charge stages, the
   on/off state of series and shunt controllers) and :func:`reconnect`.

The year (:func:`simulate_year_reference`) starts from the state left by a
warm-up over the year's last :data:`~fleet.dispatch.WARMUP_HOURS` hours run
from a full battery, and its metrics are sums and counts over the recorded
hours (:func:`year_metrics`); battery wear counts the rainflow cycles
(:func:`fleet.cycles.count_cycles`) of the state-of-charge reversals that pass
the hysteresis gate :data:`~fleet.dispatch.RAINFLOW_GATE_SOC`
(:func:`soc_reversals`).

Where the kernel docstring leaves a convention open, the function that needs
it states the choice made. Three points follow the docstring where the kernel,
as it stood when this oracle was written, did not (the tests in
``tests/test_dispatch_reference.py`` show them):

* the battery takes or gives a power P at the C-rate x that solves the voltage
  model, P = n C x (ocv +/- x r), exactly (the closed-form root), so what it
  can take is not spilled and its voltage is the one of the power it gives;
* in an hour in which the discharge C-rate limits the battery *and* an output
  switches off part-way, the shortfall counts only for the part of the hour
  the output was on, so the energy at the bus balances every hour;
* the battery's draw for the deferrable load is raised by Peukert's law like
  every other discharge.

Units: power in W (an hourly mean, so also Wh for the hour), charge in Ah,
state of charge (SOC) as a fraction of the capacity at battery temperature,
C-rates in 1/h, voltages per cell unless named ``_v`` of the battery.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from types import SimpleNamespace

import numpy as np

from .cycles import count_cycles
from .dispatch import (DEFER_MIN_SOC, EVENING_END, EVENING_START, FULL_CHARGE_SOC, HOURS, KIND_CODE,
                       KIT_PARAMS, METRICS, RAINFLOW_GATE_SOC, TIER_EVENING_HOURS, TIER_HOURS, TRACE_FIELDS,
                       WARMUP_HOURS)

__all__ = ["simulate_year_reference", "trace_reference", "simulate_reference", "setpoints", "kit_from_row",
           "CellModel", "BatteryState", "SetPoints", "Hour", "step", "year_metrics", "soc_reversals"]

SERIES = KIND_CODE["series"]
SHUNT = KIND_CODE["shunt"]
MPPT = KIND_CODE["mppt"]

#: Charge stages (the kernel's ``charge_stage`` codes).
BULK, ABSORPTION, FLOAT, ARRAY_OFF = 0, 1, 2, 3

#: Knots of the voltage tables: SOC 0, 0.05, ..., 1 (fleet.battery.SOC_KNOTS).
N_SEGMENTS = 20

#: Discharge shortfalls below this (W) are rounding, not a shortfall.
SHORTFALL_EPS_W = 1e-12


# ---------------------------------------------------------------------------
# Voltage model
# ---------------------------------------------------------------------------

def table_value(table, soc: float) -> float:
    """Linear interpolation in a table given on the 21 SOC knots 0, 0.05, ..., 1, held
    constant outside 0..1 (what ``numpy.interp(soc, SOC_KNOTS, table)`` does)."""
    position = soc * N_SEGMENTS
    if position <= 0.0:
        return table[0]
    if position >= N_SEGMENTS:
        return table[N_SEGMENTS]
    i = int(position)
    return table[i] + (position - i) * (table[i + 1] - table[i])


class CellModel:
    """Voltage model of one cell (:func:`fleet.battery.voltage_tables`): open-circuit
    voltage (V), charge and discharge resistance (V per C-rate, i.e. ohm·Ah) and the
    relative coulombic efficiency, each a function of SOC."""

    def __init__(self, tables):
        ocv, r_charge, r_discharge, eta = (tuple(float(v) for v in row) for row in tables)
        self.ocv_table, self.r_charge_table, self.r_discharge_table, self.eta_table = ocv, r_charge, r_discharge, eta

    def ocv(self, soc: float) -> float:
        """Rest voltage, V per cell."""
        return table_value(self.ocv_table, soc)

    def r_charge(self, soc: float) -> float:
        """Charging resistance, V per C-rate per cell."""
        return table_value(self.r_charge_table, soc)

    def r_discharge(self, soc: float) -> float:
        """Discharging resistance, V per C-rate per cell."""
        return table_value(self.r_discharge_table, soc)

    def relative_coulombic(self, soc: float) -> float:
        """Coulombic efficiency relative to the battery's rated value (1 below the gassing region)."""
        return table_value(self.eta_table, soc)

    def discharging_voltage(self, soc: float, rate: float) -> float:
        """Terminal voltage per cell while discharging at ``rate`` (1/h), V."""
        return self.ocv(soc) - rate * self.r_discharge(soc)

    def soc_at_discharging_voltage(self, v_cell: float, rate: float, soc_high: float) -> float:
        """Highest SOC at or below ``soc_high`` where the voltage while discharging at ``rate``
        has fallen to ``v_cell`` (V per cell); 0 if it never does.

        The discharging voltage is linear in SOC between knots, so the crossing is found by
        walking down the segments from ``soc_high`` and interpolating in the first segment
        whose lower end is at or below ``v_cell``.
        """
        upper = soc_high
        v_upper = self.discharging_voltage(soc_high, rate)
        if v_upper <= v_cell:
            return soc_high
        for k in range(min(int(soc_high * N_SEGMENTS), N_SEGMENTS), -1, -1):
            knot = k / N_SEGMENTS
            if knot >= upper:
                continue
            v_knot = self.ocv_table[k] - rate * self.r_discharge_table[k]
            if v_knot <= v_cell:
                return knot + (v_cell - v_knot) / (v_upper - v_knot) * (upper - knot)
            upper, v_upper = knot, v_knot
        return 0.0


# ---------------------------------------------------------------------------
# Kit, set-points and state
# ---------------------------------------------------------------------------

def kit_from_row(params_row) -> SimpleNamespace:
    """The kit's :data:`~fleet.dispatch.KIT_PARAMS` as attributes (``kit.battery_ah``, ...)."""
    return SimpleNamespace(**{name: float(v) for name, v in zip(KIT_PARAMS, params_row, strict=True)})


@dataclass(frozen=True)
class SetPoints:
    """Set-points of a kit at one battery temperature for one unit (voltages per cell)."""

    capacity_ah: float            #: bank capacity at the battery temperature, Ah
    cells: float                  #: cells in series
    absorption_v: float           #: temperature-compensated absorption voltage, V
    float_v: float                #: float voltage, V
    rebulk_v: float               #: rest voltage below which float returns to bulk, V
    series_reconnect_v: float     #: series/shunt: the array is reconnected at or below this, V
    disconnect_v: float           #: low-voltage disconnect (loaded voltage), V
    reconnect_v: float            #: low-voltage reconnect, V
    shed_v: float                 #: general-load shedding (loaded voltage), V
    shed_reconnect_v: float       #: general-load reconnect, V
    self_discharge_per_h: float   #: fraction of the charge per hour at the battery temperature
    peukert_k1: float             #: Peukert exponent - 1
    rated_rate: float             #: C-rate of the capacity rating (1 / rated hours), 1/h
    coulombic_efficiency: float   #: rated coulombic efficiency
    reference_rate: float         #: C-rate at which disconnect_v and shed_v hold, 1/h
    disconnect_slope: float       #: V per cell the disconnect falls per unit of C-rate above the reference
    shed_slope: float             #: the same for the shedding voltage

    def disconnect_at(self, rate: float) -> float:
        """Disconnect voltage at discharge C-rate ``rate`` (V per cell)."""
        return self.disconnect_v + self.disconnect_slope * (self.reference_rate - rate)

    def shed_at(self, rate: float) -> float:
        """Shedding voltage at discharge C-rate ``rate`` (V per cell)."""
        return self.shed_v + self.shed_slope * (self.reference_rate - rate)


#: Names of :class:`SetPoints` fields in the order of the kernel's set-point vector (S_C ... S_ETA).
SETPOINT_ORDER = tuple(f.name for f in fields(SetPoints))


def setpoints(kit, cell: CellModel, battery_temp_c: float, shed_separation_soc: float) -> SetPoints:
    """Set-points of ``kit`` at ``battery_temp_c`` (degC) for a unit whose general load is shed
    ``shed_separation_soc`` above the design floor of SOC.

    * capacity: +``capacity_per_k`` per K from 25 degC, kept within 0.5..1.1 of the rating;
    * charge voltages: temperature compensation ``temp_comp_v_per_k_cell`` per K;
    * disconnect: the explicit setting, else the loaded voltage at the design floor at the
      reference C-rate ``disconnect_ref_c``; reconnect: the explicit setting, else the rest
      voltage ``reconnect_hysteresis_soc`` above the floor (at most at SOC 0.98);
    * shedding: as the disconnect and reconnect but from floor + separation (at most 0.95),
      never below them; with no separation they are the disconnect and reconnect;
    * self-discharge doubles every ``self_discharge_doubling_k`` above 25 degC.
    """
    dt = battery_temp_c - 25.0
    capacity_factor = min(max(1.0 + kit.capacity_per_k * dt, 0.5), 1.1)
    compensation = kit.temp_comp_v_per_k_cell * dt
    floor = kit.soc_lvd
    ref_rate = kit.disconnect_ref_c
    hysteresis = kit.reconnect_hysteresis_soc
    disconnect = kit.lvd_v_cell if kit.lvd_v_cell > 0.0 else cell.discharging_voltage(floor, ref_rate)
    # a DC controller's disconnect follows the current (it acts at the floor whatever the load);
    # an inverter's, or an explicit setting, is a fixed voltage
    compensated = kit.lvd_compensated if kit.lvd_v_cell <= 0.0 else 0.0
    disconnect_slope = compensated * cell.r_discharge(floor)
    reconnect_v = kit.lvr_v_cell if kit.lvr_v_cell > 0.0 else cell.ocv(min(floor + hysteresis, 0.98))
    if shed_separation_soc > 0.0:
        shed_soc = min(floor + shed_separation_soc, 0.95)
        shed = max(cell.discharging_voltage(shed_soc, ref_rate), disconnect)
        shed_slope = compensated * cell.r_discharge(shed_soc)
        shed_reconnect = max(cell.ocv(min(shed_soc + hysteresis, 0.98)), reconnect_v)
    else:
        shed, shed_reconnect, shed_slope = disconnect, reconnect_v, disconnect_slope
    return SetPoints(
        capacity_ah=kit.battery_ah * capacity_factor,
        cells=kit.cells,
        absorption_v=kit.absorption_v_cell + compensation,
        float_v=kit.float_v_cell + compensation,
        rebulk_v=kit.rebulk_v_cell,  # compared with the rest voltage: not compensated
        series_reconnect_v=kit.series_reconnect_v_cell,
        disconnect_v=disconnect,
        reconnect_v=reconnect_v,
        shed_v=shed,
        shed_reconnect_v=shed_reconnect,
        self_discharge_per_h=kit.self_discharge_per_h * 2.0 ** (dt / kit.self_discharge_doubling_k),
        peukert_k1=kit.peukert_exponent - 1.0,
        rated_rate=1.0 / kit.rated_hours,
        coulombic_efficiency=kit.coulombic_efficiency,
        reference_rate=ref_rate,
        disconnect_slope=disconnect_slope,
        shed_slope=shed_slope,
    )


@dataclass
class BatteryState:
    """What carries over from one hour to the next."""

    soc: float = 1.0
    general_on: bool = True       #: general-load output connected
    critical_on: bool = True      #: critical-load output (DC) or inverter (AC) connected
    stage: int = BULK             #: BULK, ABSORPTION, FLOAT or ARRAY_OFF (series/shunt regulating)
    absorption_h: float = 0.0     #: hours spent regulating in absorption since bulk


@dataclass
class Hour:
    """Flows of one hour, W (= Wh for the hour) unless named ``_ah``."""

    pv_bus_w: float = 0.0             #: array power available at the controller output
    pv_used_w: float = 0.0            #: array power taken (bus, charge, deferrable load)
    spill_w: float = 0.0              #: array power left unused (incl. while opened/shorted)
    charge_w: float = 0.0             #: into the battery terminals
    charge_ah: float = 0.0            #: stored (after coulombic losses)
    discharge_w: float = 0.0          #: out of the battery terminals
    discharge_ah: float = 0.0         #: drawn from the store (Peukert included)
    general_served_w: float = 0.0     #: at the load
    critical_served_w: float = 0.0    #: at the load
    deferrable_served_w: float = 0.0  #: at the load
    deferrable_from_pv_w: float = 0.0  #: at the load (after the inverter)
    inverter_loss_w: float = 0.0
    controller_self_w: float = 0.0
    reverse_current_w: float = 0.0
    controller_loss_w: float = 0.0    #: conversion/switch loss of the array power used
    shunt_dissipation_w: float = 0.0
    self_discharge_ah: float = 0.0
    regulating: bool = False          #: the battery took less than offered at the set-point (or was full)
    balance_residual_w: float = 0.0   #: array used + discharge - everything served at the bus - charge


# ---------------------------------------------------------------------------
# The rules of one hour
# ---------------------------------------------------------------------------

def array_power(kit, pv_string_w: float, v_rest: float) -> tuple[float, float]:
    """Array power at the controller output (W) and array current (A; battery-tied kinds).

    MPPT: per-string power x ``array_multiplier`` (strings x (1 - losses)) x converter
    efficiency, capped at the rated output current x the battery's rest voltage.
    PWM/series/shunt: the array is a current source, its current at the reference
    charging voltage ``string_charge_v`` (capped at the rated current), delivering
    current x battery voltage x switch efficiency.
    """
    if pv_string_w <= 0.0:
        return 0.0, 0.0
    if kit.controller_kind == MPPT:
        power = pv_string_w * kit.array_multiplier * kit.controller_efficiency
        return min(power, kit.controller_max_a * v_rest), 0.0
    current = min(pv_string_w * kit.array_multiplier / kit.string_charge_v, kit.controller_max_a)
    return current * v_rest * kit.controller_efficiency, current


@dataclass
class BusDemand:
    """What the loads and the controller ask of the DC bus this hour, W."""

    general_out: float     #: general load at its output (after the output rating)
    critical_out: float    #: critical load at its output
    pump_out: float        #: deferrable load wanted at its output
    factor: float          #: bus power per output power (1 for DC; 1 + quadratic loss for AC)
    general: float         #: at the bus
    critical: float        #: at the bus, with the inverter's no-load power
    pump: float            #: at the bus
    self_use: float        #: controller self-consumption + reverse current
    reverse: float         #: reverse current through the dark array

    @property
    def loads(self) -> float:
        """Everything but the deferrable load, W."""
        return self.self_use + self.critical + self.general


def bus_demand(kit, state: BatteryState, v_rest: float, pv_string_w: float, general_w: float,
               critical_w: float, pump_w: float) -> BusDemand:
    """Demand at the DC bus.

    The critical load comes first for the output rating ``max_load_w``, the general load
    gets what is left; each only while its output is connected. The deferrable load runs
    only while the critical output (the inverter, for AC) is on. AC: the inverter's input
    is its planned output x (1 + ``inverter_quadratic_per_w`` x planned output) -- the
    quadratic loss term -- plus its no-load power while it runs; the factor is fixed for
    the hour from the outputs asked for. Reverse current flows through the array in hours
    without array power (``reverse_current_a`` x rest voltage).
    """
    critical_out = min(critical_w, kit.max_load_w) if state.critical_on else 0.0
    general_out = min(general_w, kit.max_load_w - critical_out) if state.general_on else 0.0
    pump_out = pump_w if state.critical_on else 0.0
    factor = 1.0
    no_load = 0.0
    if kit.ac > 0.0:
        factor = 1.0 + kit.inverter_quadratic_per_w * (critical_out + general_out + pump_out)
        if state.critical_on:
            no_load = kit.inverter_no_load_w
    reverse = kit.reverse_current_a * v_rest if pv_string_w <= 0.0 else 0.0
    return BusDemand(general_out=general_out, critical_out=critical_out, pump_out=pump_out, factor=factor,
                     general=general_out * factor, critical=critical_out * factor + no_load,
                     pump=pump_out * factor, self_use=kit.controller_self_w + reverse, reverse=reverse)


@dataclass
class Charge:
    """Result of :func:`charge`."""

    power_w: float = 0.0
    stored_ah: float = 0.0
    rate: float = 0.0
    soc: float = 0.0
    regulated: bool = False


def charge(kit, sp: SetPoints, cell: CellModel, soc: float, stage: int, offered_w: float) -> Charge:
    """Charge the battery from ``offered_w`` at the bus.

    The rate the offer would drive is the root of ``P = n C x (ocv + x r_charge)``; it is
    limited by the battery's charge C-rate, the room left (1 - SOC over the coulombic
    efficiency) and the acceptance at the regulation voltage (float in the float stage,
    else absorption): ``(v_set - ocv) / r_charge``. The battery regulates when the offer
    would drive it past the acceptance or past full. Stored charge = rate x C x coulombic
    efficiency (rated value x the relative value at this SOC).
    """
    n, cap = sp.cells, sp.capacity_ah
    ocv = cell.ocv(soc)
    r = cell.r_charge(soc)
    v_set = sp.float_v if stage == FLOAT else sp.absorption_v
    acceptance = max((v_set - ocv) / r, 0.0)
    efficiency = sp.coulombic_efficiency * cell.relative_coulombic(soc)
    room = (1.0 - soc) / efficiency
    a = n * cap * r
    b = n * cap * ocv
    offered_rate = 2.0 * offered_w / (b + math.sqrt(b * b + 4.0 * a * offered_w))
    regulated = offered_rate > acceptance or offered_rate > room
    rate = max(min(offered_rate, min(kit.max_charge_c, room), acceptance), 0.0)
    power = min(rate * cap * n * (ocv + rate * r), offered_w)
    return Charge(power_w=power, stored_ah=rate * cap * efficiency, rate=rate, soc=soc + rate * efficiency,
                  regulated=regulated)


def discharge_rate(cell: CellModel, sp: SetPoints, soc: float, power_w: float, rate_max: float) -> float:
    """C-rate at which the battery delivers ``power_w`` at its terminals,
    ``P = n C x (ocv - x r_discharge)`` solved for its lower root, capped at the battery's
    maximum-power rate and at ``rate_max``."""
    n, cap = sp.cells, sp.capacity_ah
    a = n * cap * cell.r_discharge(soc)
    b = n * cap * cell.ocv(soc)
    disc = b * b - 4.0 * a * power_w
    rate = b / (2.0 * a) if disc <= 0.0 else 2.0 * power_w / (b + math.sqrt(disc))
    return min(rate, rate_max)


def terminal_power(cell: CellModel, sp: SetPoints, soc: float, rate: float) -> float:
    """Power at the battery terminals while discharging at ``rate`` from ``soc``, W."""
    return rate * sp.capacity_ah * sp.cells * (cell.ocv(soc) - rate * cell.r_discharge(soc))


def peukert_factor(sp: SetPoints, rate: float) -> float:
    """Charge drawn per Ah delivered: ``(rate / rated_rate) ** (k - 1)`` above the rated rate, else 1."""
    if rate <= sp.rated_rate or sp.peukert_k1 == 0.0:
        return 1.0
    return (rate / sp.rated_rate) ** sp.peukert_k1


def split_shortfall(short_w: float, demands) -> list[float]:
    """Share a shortfall among demands in order of shedding: each in turn goes short by as
    much as it asks for, the last one takes whatever is left."""
    out = []
    left = short_w
    for d in demands[:-1]:
        take = min(left, d)
        out.append(take)
        left -= take
    out.append(left)
    return out


@dataclass
class Discharge:
    """Result of :func:`discharge`."""

    power_w: float = 0.0
    drawn_ah: float = 0.0
    soc: float = 0.0
    unmet_general: float = 0.0    #: at the bus, W
    unmet_critical: float = 0.0
    unmet_self: float = 0.0
    general_off: bool = False
    critical_off: bool = False
    peak_rate: float = 0.0        #: highest C-rate of the hour's load phases


def discharge(kit, sp: SetPoints, cell: CellModel, soc: float, deficit: float, general: float,
              critical: float) -> Discharge:
    """Cover the bus ``deficit`` from the battery.

    The array's direct share went to self-consumption, then the critical load, then the
    general load, so the deficit falls first on the general load (``general`` at the bus),
    then the critical (``critical``), then self-consumption. The hour runs in phases, each
    at the C-rate that delivers its power (capped at ``max_discharge_c``), drawing
    rate x Peukert factor of SOC per hour:

    1. while the general load draws from the battery, everything runs until the loaded
       voltage reaches the shedding voltage (if it does within the hour: the general
       output switches off at that moment);
    2. the rest of the hour, the critical load and self-consumption run until the loaded
       voltage reaches the disconnect (with no critical load, self-consumption runs until
       the battery is flat);
    3. after a disconnect, self-consumption alone for what is left of the hour, as long as
       there is charge.

    A phase whose power the C-rate limit cuts runs short -- the general load first, then the
    critical -- for as long as the phase lasts.
    """
    out = Discharge(soc=soc)
    share_general = min(deficit, general)
    share_critical = min(deficit - share_general, critical)
    share_self = deficit - share_general - share_critical
    cap = sp.capacity_ah
    rate_max = kit.max_discharge_c
    s = soc
    time_left = 1.0
    if share_general > 0.0:
        # phase 1: all loads until the shedding voltage
        rate = discharge_rate(cell, sp, s, deficit, rate_max)
        power = terminal_power(cell, sp, s, rate)
        short = deficit - power
        short_g, short_c, short_s = (split_shortfall(short, (share_general, share_critical, share_self))
                                     if short > SHORTFALL_EPS_W else (0.0, 0.0, 0.0))
        drawdown = rate * peukert_factor(sp, rate)  # SOC per hour
        s_end = s - drawdown
        if s_end >= 0.0 and cell.discharging_voltage(s_end, rate) >= sp.shed_at(rate):
            run = 1.0
        else:
            s_cut = cell.soc_at_discharging_voltage(sp.shed_at(rate), rate, s)
            run = min((s - s_cut) / drawdown, 1.0) if rate > 0.0 else 0.0
            out.general_off = True
        out.power_w = power * run
        out.drawn_ah = drawdown * cap * run
        s -= drawdown * run
        out.unmet_general = short_g * run + share_general * (1.0 - run)
        out.unmet_critical = short_c * run
        out.unmet_self = short_s * run
        out.peak_rate = rate
        time_left = 1.0 - run
        if out.general_off and sp.shed_v <= sp.disconnect_v and sp.shed_slope <= sp.disconnect_slope:
            # no separate shedding stage: the one disconnect takes every output off
            out.critical_off = True
            out.unmet_critical += share_critical * time_left
            share_critical = 0.0
    if time_left > 0.0 and share_critical + share_self > 0.0:
        # phase 2: critical load and self-consumption until the disconnect
        wanted = share_critical + share_self
        rate = discharge_rate(cell, sp, s, wanted, rate_max)
        power = terminal_power(cell, sp, s, rate)
        short = wanted - power
        short_c, short_s = (split_shortfall(short, (share_critical, share_self))
                            if short > SHORTFALL_EPS_W else (0.0, 0.0))
        drawdown = rate * peukert_factor(sp, rate)
        s_end = s - drawdown * time_left
        if share_critical <= 0.0 or (s_end >= 0.0 and cell.discharging_voltage(s_end, rate) >= sp.disconnect_at(rate)):
            out.unmet_critical += short_c * time_left
            out.unmet_self += short_s * time_left
            if s_end < 0.0:  # self-consumption alone: it stops when the battery is flat
                frac = s / (drawdown * time_left)
                out.unmet_self += power * time_left * (1.0 - frac)
                out.power_w += power * time_left * frac
                out.drawn_ah += s * cap
                s = 0.0
            else:
                out.power_w += power * time_left
                out.drawn_ah += drawdown * cap * time_left
                s = s_end
        else:
            s_cut = cell.soc_at_discharging_voltage(sp.disconnect_at(rate), rate, s)
            run = min((s - s_cut) / drawdown, time_left) if rate > 0.0 else 0.0
            out.power_w += power * run
            out.drawn_ah += drawdown * cap * run
            s -= drawdown * run
            out.unmet_critical += short_c * run + share_critical * (time_left - run)
            out.unmet_self += short_s * run
            out.critical_off = True
            out.general_off = True
            # phase 3: self-consumption (and reverse current) for the rest of the hour
            rest = time_left - run
            if share_self > 0.0 and rest > 0.0:
                rate3 = discharge_rate(cell, sp, s, share_self, rate_max)
                power3 = terminal_power(cell, sp, s, rate3)
                wanted_soc = rate3 * peukert_factor(sp, rate3) * rest
                drawn = min(wanted_soc, s)
                frac = drawn / wanted_soc if rate3 > 0.0 else 0.0
                out.power_w += power3 * rest * frac
                out.drawn_ah += drawn * cap
                s -= drawn
                out.unmet_self += share_self * rest - power3 * rest * frac
        out.peak_rate = max(out.peak_rate, rate)
    out.soc = s
    return out


def pump_from_battery(kit, sp: SetPoints, cell: CellModel, soc: float, wanted_w: float,
                      rate_used: float) -> tuple[float, float, float]:
    """The battery's share of the deferrable load, at the bus.

    The pump runs from the battery at the C-rate that delivers ``wanted_w``, within the
    discharge C-rate left after the hour's other loads (``rate_used``), and stops part-way
    through the hour when the SOC reaches :data:`~fleet.dispatch.DEFER_MIN_SOC`. Its draw is
    raised by Peukert's law like every discharge. Returns (power W, Ah drawn, new SOC).
    """
    room = kit.max_discharge_c - rate_used
    if room <= 0.0:
        return 0.0, 0.0, soc
    rate = discharge_rate(cell, sp, soc, wanted_w, room)
    power = terminal_power(cell, sp, soc, rate)
    drawdown = rate * peukert_factor(sp, rate)  # SOC per hour
    if drawdown > soc - DEFER_MIN_SOC:  # runs only until the threshold
        power *= (soc - DEFER_MIN_SOC) / drawdown
        drawdown = soc - DEFER_MIN_SOC
    return power, drawdown * sp.capacity_ah, soc - drawdown


def self_discharge(sp: SetPoints, soc: float) -> tuple[float, float]:
    """SOC after the hour's self-discharge, and the SOC lost."""
    lost = soc * sp.self_discharge_per_h
    return max(soc - lost, 0.0), lost


def regulation_update(kit, sp: SetPoints, cell: CellModel, state: BatteryState, regulated: bool,
                      soc: float, discharge_rate_h: float) -> None:
    """Charge stage at the end of the hour (changes ``state.stage``/``absorption_h``).

    Series and shunt: the hour the battery regulates, the array is opened (series) or
    shorted (shunt) -- stage ARRAY_OFF -- until the battery voltage (rest voltage less the
    discharge polarisation of the hour) falls to the series reconnect voltage.
    PWM and MPPT: a regulating hour in bulk starts absorption; absorption counts its
    regulating hours and turns to float after ``absorption_hours``; float returns to bulk
    when the rest voltage falls below the rebulk voltage. (Absorption is abandoned at
    midnight: :func:`new_day`.)
    """
    ocv = cell.ocv(soc)
    if kit.controller_kind in (SERIES, SHUNT):
        if regulated:
            state.stage = ARRAY_OFF
        elif state.stage == ARRAY_OFF and ocv - discharge_rate_h * cell.r_discharge(soc) <= sp.series_reconnect_v:
            state.stage = BULK
        return
    if regulated:
        if state.stage == BULK:
            state.stage = ABSORPTION
        if state.stage == ABSORPTION:
            state.absorption_h += 1.0
            if state.absorption_h >= kit.absorption_hours:
                state.stage = FLOAT
    if state.stage == FLOAT and ocv < sp.rebulk_v:
        state.stage = BULK
        state.absorption_h = 0.0


def reconnect(sp: SetPoints, cell: CellModel, state: BatteryState, soc: float, charge_rate: float) -> None:
    """Outputs that are off come back when the battery voltage (rest voltage, raised by the
    hour's charging current) reaches the reconnect voltage: the critical output at the
    low-voltage reconnect, the general output (only with the critical one on) at its own."""
    v = cell.ocv(soc)
    if charge_rate > 0.0:
        v = v + charge_rate * cell.r_charge(soc)
    if not state.critical_on and v >= sp.reconnect_v:
        state.critical_on = True
    if not state.general_on and state.critical_on and v >= sp.shed_reconnect_v:
        state.general_on = True


def new_day(state: BatteryState) -> None:
    """Midnight: an unfinished absorption starts again from bulk the next day."""
    if state.stage == ABSORPTION:
        state.stage = BULK
        state.absorption_h = 0.0


def step(kit, sp: SetPoints, cell: CellModel, state: BatteryState, pv_string_w: float, general_w: float,
         critical_w: float, pump_w: float) -> Hour:
    """Run one hour: updates ``state`` in place and returns the hour's flows.

    ``pv_string_w`` is the per-string array power at the operating point, ``general_w`` and
    ``critical_w`` the loads of one member, ``pump_w`` the deferrable power wanted (W).
    """
    hour = Hour()
    soc = state.soc
    v_rest = sp.cells * cell.ocv(soc)
    # 1. array
    available, array_current = array_power(kit, pv_string_w, v_rest)
    array_off = state.stage == ARRAY_OFF
    usable = 0.0 if array_off else available
    if array_off and kit.controller_kind == SHUNT:
        hour.shunt_dissipation_w = array_current * kit.shunt_on_v
    # 2. demand at the bus; the array serves it first
    bus = bus_demand(kit, state, v_rest, pv_string_w, general_w, critical_w, pump_w)
    direct = min(usable, bus.loads)
    surplus = usable - direct
    deficit = bus.loads - direct
    # 3-4. surplus: the deferrable load first while the battery is well charged, then charging
    pump_from_pv = 0.0
    if bus.pump > 0.0 and soc >= DEFER_MIN_SOC:
        pump_from_pv = min(surplus, bus.pump)
        surplus -= pump_from_pv
    ch = Charge(soc=soc)
    if surplus > 0.0:
        ch = charge(kit, sp, cell, soc, state.stage, surplus)
        surplus -= ch.power_w
    if bus.pump > pump_from_pv:
        more = min(surplus, bus.pump - pump_from_pv)
        pump_from_pv += more
        surplus -= more
    hour.spill_w = surplus + (available - usable)
    hour.pv_used_w = usable - surplus
    # 5. discharge
    dis = Discharge(soc=ch.soc)
    if deficit > 0.0:
        dis = discharge(kit, sp, cell, ch.soc, deficit, bus.general, bus.critical)
    general_on = state.general_on and not dis.general_off
    critical_on = state.critical_on and not dis.critical_off
    s = dis.soc
    dis_w, dis_ah = dis.power_w, dis.drawn_ah
    pump_bat = 0.0
    if bus.pump - pump_from_pv > 0.0 and s > DEFER_MIN_SOC and critical_on:
        pump_bat, ah, s = pump_from_battery(kit, sp, cell, s, bus.pump - pump_from_pv, dis.peak_rate)
        dis_w += pump_bat
        dis_ah += ah
    # served at the bus and at the loads
    general_bus_served = bus.general - dis.unmet_general
    critical_bus_served = bus.critical - dis.unmet_critical
    self_served = bus.self_use - dis.unmet_self
    pump_bus = pump_from_pv + pump_bat
    hour.general_served_w = general_bus_served / bus.factor
    hour.critical_served_w = bus.critical_out * (critical_bus_served / bus.critical) if bus.critical > 0.0 else 0.0
    hour.deferrable_served_w = pump_bus / bus.factor
    hour.deferrable_from_pv_w = pump_from_pv / bus.factor
    hour.inverter_loss_w = ((general_bus_served + critical_bus_served + pump_bus)
                            - (hour.general_served_w + hour.critical_served_w + hour.deferrable_served_w))
    hour.reverse_current_w = bus.reverse * (self_served / bus.self_use) if bus.self_use > 0.0 else 0.0
    hour.controller_self_w = self_served - hour.reverse_current_w
    hour.controller_loss_w = hour.pv_used_w * (1.0 / kit.controller_efficiency - 1.0)
    hour.pv_bus_w = available
    hour.charge_w, hour.charge_ah = ch.power_w, ch.stored_ah
    hour.discharge_w, hour.discharge_ah = dis_w, dis_ah
    hour.regulating = ch.regulated
    hour.balance_residual_w = (hour.pv_used_w + dis_w) - (general_bus_served + critical_bus_served + pump_bus
                                                          + self_served + ch.power_w)
    # 6. self-discharge, then the state for the next hour
    s, lost = self_discharge(sp, s)
    hour.self_discharge_ah = lost * sp.capacity_ah
    state.soc = s
    state.general_on, state.critical_on = general_on, critical_on
    regulation_update(kit, sp, cell, state, ch.regulated, s, dis.peak_rate)
    reconnect(sp, cell, state, s, ch.rate)
    return hour


# ---------------------------------------------------------------------------
# A year
# ---------------------------------------------------------------------------

@dataclass
class Record:
    """One simulated hour with the state it started from and its loads (W)."""

    hour_of_day: int
    general_on_at_start: bool
    critical_on_at_start: bool
    general_w: float
    critical_w: float
    flows: Hour
    state: BatteryState   #: at the end of the hour (a copy)


def _prepare(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c, vtables):
    from .battery import voltage_tables
    kit = kit_from_row(params_row)
    tables = voltage_tables() if vtables is None else vtables
    cell = CellModel(np.asarray(tables, np.float64)[int(kit.chemistry)])
    deferrable_wh_day, pump_w, separation = (float(v) for v in unit_params)
    sp = setpoints(kit, cell, float(battery_temp_c), separation)
    # inputs at the kernel's precision (float32), as Python floats
    pv = np.asarray(pv_string_w, np.float32).tolist()
    gen = np.asarray(general_w, np.float32).tolist()
    crit = [0.0] * HOURS if critical_w is None else np.asarray(critical_w, np.float32).tolist()
    if not len(pv) == len(gen) == len(crit) == HOURS:
        raise ValueError(f"hourly inputs must have {HOURS} values")
    return kit, cell, sp, pv, gen, crit, deferrable_wh_day, pump_w, float(scale)


def _run(kit, sp, cell, state, pv, gen, crit, deferrable_wh_day, pump_w, scale, hours, keep=True):
    """Run ``hours`` (indices into the year) from ``state``; the loads are shared by ``scale``
    identical blocks. The deferrable load gets its daily need at each midnight and asks for
    its pump power while need is left. Returns the list of :class:`Record` (if ``keep``)."""
    share = 1.0 / scale
    need_per_day = deferrable_wh_day * share
    pump = pump_w * share
    need_left = 0.0
    records = []
    for h in hours:
        hod = h % 24
        if hod == 0:
            need_left = need_per_day
            new_day(state)
        general = gen[h] * share
        critical = crit[h] * share
        wanted = min(pump, need_left) if need_left > 0.0 else 0.0
        on_g, on_c = state.general_on, state.critical_on
        flows = step(kit, sp, cell, state, pv[h], general, critical, wanted)
        need_left -= flows.deferrable_served_w
        if keep:
            records.append(Record(hod, on_g, on_c, general, critical, flows, BatteryState(**vars(state))))
    return records


def _year(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c, vtables):
    kit, cell, sp, pv, gen, crit, defer, pump, scale = _prepare(pv_string_w, general_w, critical_w, unit_params,
                                                                scale, params_row, battery_temp_c, vtables)
    state = BatteryState()
    _run(kit, sp, cell, state, pv, gen, crit, defer, pump, scale, range(HOURS - WARMUP_HOURS, HOURS), keep=False)
    initial = BatteryState(**vars(state))
    records = _run(kit, sp, cell, state, pv, gen, crit, defer, pump, scale, range(HOURS))
    return SimpleNamespace(kit=kit, sp=sp, cell=cell, initial=initial, records=records,
                           deferrable_wh_day=defer * (1.0 / scale))


def soc_reversals(initial_soc: float, socs, gate: float = RAINFLOW_GATE_SOC) -> list[float]:
    """Turning points of an hourly SOC trace through a hysteresis gate.

    Starts with ``initial_soc``. The running extreme follows the trace in its current
    direction; the direction turns -- and the extreme is recorded as a reversal -- only
    when the trace moves more than ``gate`` back from it. The last extreme is recorded at
    the end (unless the trace never moved).
    """
    points = [initial_soc]
    extreme = initial_soc
    direction = 0  # +1 rising, -1 falling, 0 not yet moved
    for soc in socs:
        move = soc - extreme
        if direction >= 0:
            if move > 0.0:
                extreme, direction = soc, 1
            elif move < -gate:
                if direction == 1:
                    points.append(extreme)
                extreme, direction = soc, -1
        else:
            if move < 0.0:
                extreme = soc
            elif move > gate:
                points.append(extreme)
                extreme, direction = soc, 1
    if direction != 0:
        points.append(extreme)
    return points


def cycle_wear(points, inv_a: float, b: float) -> tuple[float, float]:
    """Miner damage ``sum(count r**b / a)`` and the number of cycles (full = 1, half = 0.5) of
    the rainflow cycles (ASTM E1049 §5.4.4, :func:`fleet.cycles.count_cycles`) of ``points``."""
    cycles = count_cycles(points)
    damage = 0.0
    count = 0.0
    for r, c in zip(cycles["range"].tolist(), cycles["count"].tolist()):
        if r > 0.0:
            damage += c * r ** b * inv_a
        count += c
    return damage, count


def _is_short(load_w: float, unmet_w: float) -> bool:
    """An hour with unmet load (beyond rounding)."""
    return unmet_w > 1e-6 * (load_w + 1e-9) and unmet_w > 1e-9


def _fully_served(load_w: float, unmet_w: float) -> bool:
    return unmet_w <= 1e-9 + 1e-6 * load_w


def year_metrics(kit, initial: BatteryState, records, deferrable_wh_day: float) -> dict:
    """The year's :data:`~fleet.dispatch.METRICS` from its hourly records.

    Energies are sums of the hourly flows (Wh), at the loads for served/unmet/demand (the
    deferrable load counted apart), at the bus for the battery and array. An hour is
    *short* when its unmet load exceeds 1e-6 of the load (and 1e-9 W); *disconnected* when
    the general output was off at its start. Per day: full service (no short hour), a full
    charge (SOC >= :data:`~fleet.dispatch.FULL_CHARGE_SOC` at the end of some hour), any
    disconnected hour, and the Multi-Tier Framework supply tiers (connected hours in the day
    and in the evening 18:00-22:00 at least the tier's). ``evening_hours_served`` counts
    evening hours connected and fully served. Battery wear: rainflow cycles of the SOC
    reversals from the SOC after the warm-up, with the kit's cycle-life curve.
    """
    m = dict.fromkeys(METRICS, 0.0)
    soc_min = 1.0
    days_without_full = 0.0
    for rec in records:
        f = rec.flows
        load = rec.general_w + rec.critical_w
        served = f.general_served_w + f.critical_served_w
        unmet = load - served
        m["demand_wh"] += load
        m["served_wh"] += served
        m["unmet_wh"] += unmet
        m["unmet_hours"] += _is_short(load, unmet)
        m["disconnected_hours"] += not rec.general_on_at_start
        m["general_disconnects"] += rec.general_on_at_start and not rec.state.general_on
        if EVENING_START <= rec.hour_of_day < EVENING_END:
            m["evening_demand_wh"] += load
            m["evening_served_wh"] += served
            m["evening_hours_served"] += rec.general_on_at_start and _fully_served(load, unmet)
        m["pv_bus_wh"] += f.pv_bus_w
        m["pv_used_wh"] += f.pv_used_w
        m["pv_spilled_wh"] += f.spill_w
        m["battery_charge_wh"] += f.charge_w
        m["battery_charge_ah"] += f.charge_ah
        m["battery_discharge_wh"] += f.discharge_w
        m["battery_discharge_ah"] += f.discharge_ah
        m["deferrable_served_wh"] += f.deferrable_served_w
        m["inverter_loss_wh"] += f.inverter_loss_w
        m["controller_self_wh"] += f.controller_self_w
        m["reverse_current_wh"] += f.reverse_current_w
        m["controller_loss_wh"] += f.controller_loss_w
        m["shunt_dissipation_wh"] += f.shunt_dissipation_w
        m["regulation_hours"] += f.regulating
        m["balance_residual_wh"] += f.balance_residual_w
        m["critical_demand_wh"] += rec.critical_w
        m["critical_unmet_wh"] += rec.critical_w - f.critical_served_w
        soc_min = min(soc_min, rec.state.soc)
        m["soc_mean"] += rec.state.soc
    m["soc_mean"] /= HOURS
    m["soc_min"] = soc_min
    for d in range(HOURS // 24):
        day = records[24 * d: 24 * d + 24]
        m["deferrable_demand_wh"] += deferrable_wh_day
        loads_unmet = [(r.general_w + r.critical_w, r.general_w + r.critical_w - r.flows.general_served_w
                        - r.flows.critical_served_w) for r in day]
        m["days_full_service"] += not any(_is_short(load, unmet) for load, unmet in loads_unmet)
        if any(r.state.soc >= FULL_CHARGE_SOC for r in day):
            m["days_full_charge"] += 1.0
            days_without_full = 0.0
        else:
            days_without_full += 1.0
            m["max_days_without_full_charge"] = max(m["max_days_without_full_charge"], days_without_full)
        connected = sum(r.general_on_at_start for r in day)
        evening = sum(r.general_on_at_start for r in day if EVENING_START <= r.hour_of_day < EVENING_END)
        m["disconnected_days"] += connected < 24
        for t in range(5):
            m[f"days_supply_tier{t + 1}"] += connected >= TIER_HOURS[t] and evening >= TIER_EVENING_HOURS[t]
    points = soc_reversals(initial.soc, [r.state.soc for r in records])
    m["cycle_damage"], m["cycles_counted"] = cycle_wear(points, kit.cycle_life_inv_a, kit.cycle_life_b)
    return {k: float(v) for k, v in m.items()}


def simulate_year_reference(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c,
                            vtables=None) -> dict:
    """Metrics of one kit serving one unit over one weather year (the reference of
    :func:`fleet.dispatch.simulate_pairs` for one pair and year).

    Parameters
    ----------
    pv_string_w : array (8760,)
        Per-string array power at the kit's operating point, W (hourly mean;
        :func:`fleet.iv.array_power_per_string`). Used at float32 precision, like the kernel.
    general_w, critical_w : arrays (8760,)
        General and critical load of the unit, W (``critical_w`` may be None: none).
        Float32 precision.
    unit_params : sequence of 3 floats
        Deferrable need per day (Wh), pump power (W), SOC separation of general-load
        shedding above the disconnect (0: shed at the disconnect).
    scale : float
        Identical blocks sharing the unit's loads (loads and the deferrable need are
        divided by it).
    params_row : array (N_PARAMS,)
        The kit's :data:`~fleet.dispatch.KIT_PARAMS`.
    battery_temp_c : float
        Battery temperature, degC.
    vtables : array (n_chemistries, 4, 21), optional
        :func:`fleet.battery.voltage_tables` (the default).

    Returns
    -------
    dict of float named as :data:`~fleet.dispatch.METRICS` (Wh, Ah, hours, days, SOC,
    cycles, fraction of cycle life). The year starts from the state left by running its
    last :data:`~fleet.dispatch.WARMUP_HOURS` hours from a full battery.
    """
    y = _year(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c, vtables)
    return year_metrics(y.kit, y.initial, y.records, y.deferrable_wh_day)


def _trace_of(y) -> dict:
    sp, cell = y.sp, y.cell
    rows = {name: [] for name in TRACE_FIELDS}
    for rec in y.records:
        f = rec.flows
        values = {
            "soc": rec.state.soc, "connected": float(rec.general_on_at_start),
            "critical_connected": float(rec.critical_on_at_start), "charge_stage": float(rec.state.stage),
            "pv_bus_w": f.pv_bus_w, "pv_used_w": f.pv_used_w, "spill_w": f.spill_w, "charge_w": f.charge_w,
            "charge_ah": f.charge_ah, "discharge_w": f.discharge_w, "discharge_ah": f.discharge_ah,
            "load_w": rec.general_w + rec.critical_w, "served_w": f.general_served_w + f.critical_served_w,
            "critical_load_w": rec.critical_w, "critical_served_w": f.critical_served_w,
            "deferrable_served_w": f.deferrable_served_w, "deferrable_from_pv_w": f.deferrable_from_pv_w,
            "inverter_loss_w": f.inverter_loss_w, "controller_self_w": f.controller_self_w,
            "reverse_current_w": f.reverse_current_w, "controller_loss_w": f.controller_loss_w,
            "shunt_dissipation_w": f.shunt_dissipation_w, "self_discharge_ah": f.self_discharge_ah,
            "regulating": float(f.regulating), "balance_residual_w": f.balance_residual_w,
            "battery_rest_voltage_v": sp.cells * cell.ocv(rec.state.soc),
        }
        for name in TRACE_FIELDS:
            rows[name].append(values[name])
    out = {name: np.asarray(v, np.float64) for name, v in rows.items()}
    out["initial_soc"] = y.initial.soc
    out["setpoints"] = sp
    return out


def trace_reference(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c,
                    vtables=None) -> dict:
    """Hour-by-hour flows of one kit over one weather year (the reference of
    :func:`fleet.dispatch.simulate_trace`).

    The parameters are those of :func:`simulate_year_reference`.

    Returns
    -------
    dict of float64 arrays (8760,) named as :data:`~fleet.dispatch.TRACE_FIELDS`: W (= Wh for
    the hour) for powers, Ah for ``charge_ah``, ``discharge_ah``, ``self_discharge_ah``; SOC at
    the end of the hour for ``soc``; V for ``battery_rest_voltage_v`` (end of hour); 0/1 for
    ``connected`` and ``critical_connected`` (at the hour's start) and ``regulating``; the
    stage code for ``charge_stage`` (end of hour: 0 bulk, 1 absorption, 2 float, 3 array
    opened or shorted). ``load_w`` and ``served_w`` include the critical load,
    ``deferrable_from_pv_w`` is at the load, like ``deferrable_served_w``. Also ``initial_soc`` (after the warm-up) and
    ``setpoints`` (:class:`SetPoints`).
    """
    y = _year(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c, vtables)
    return _trace_of(y)


def simulate_reference(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c,
                       vtables=None) -> tuple[dict, dict]:
    """:func:`simulate_year_reference` and :func:`trace_reference` from one run (same arguments)."""
    y = _year(pv_string_w, general_w, critical_w, unit_params, scale, params_row, battery_temp_c, vtables)
    return year_metrics(y.kit, y.initial, y.records, y.deferrable_wh_day), _trace_of(y)

