"""Candidate kits and minigrid plant blocks built from a component library,
each electrically checked, with its bill-of-materials lines.

A kit (solar home system) serves one household or facility. A minigrid plant
is modular: a count of standard *PV blocks* (a PV array on its MPPT charge
controller), a count of *battery blocks* (one battery string at the plant's
bus voltage) and a count of *inverters*, all on the plant's
48 V DC bus. Each electrically compatible (PV block, battery block, inverter)
triple is a row of the kit table (a plant *template*, ``scheme='minigrid'``,
one block of each kind); a plant design is a template with its three counts
(:func:`plant_quantities`, :func:`plant_parameters`), chosen per village by
the planner, and the catalogue standardises the block types of each kind.

Electrical rules (each a function or constant below, cited). A combination that
breaks one lands in the ``rejected`` table of :func:`candidate_kits` with the
rule's key (:data:`REJECTION_RULES`) and a readable reason:

* system voltage by array power (:func:`system_voltage_reason`, common practice);
* string open-circuit voltage at the cold design temperature stays under the
  controller's PV input limit (NEC 690.7(A), temperature correction from the
  module's Voc coefficient);
* PWM/series/shunt controllers: one string of modules per 12 V of battery with
  hot maximum-power voltage above the absorption voltage plus a drop margin,
  because the array works at battery voltage (common practice);
* MPPT: hot string Vmp above the absorption voltage plus a headroom
  (common practice for buck converters);
* PWM controller current >= 1.25 x array short-circuit current
  (NEC 690.8(A)(1)); MPPT output current rating >= array STC power / system
  voltage, with at most 20 % array oversizing (common practice);
* battery strings in parallel limited (config; common practice for lead-acid);
* an AC kit's inverter rated for the kit's design output (1.5 W per Wp for
  household kits; an assumption of ours); a plant's inverters are counted for
  its peak and motor starts by the planner;
* a plant's battery block is one string of at least
  :data:`PLANT_MIN_BATTERY_BLOCK_WH` (smaller strings would need many in
  parallel), and a plant parallels at most the configured number of lead-acid
  strings (common practice) or of LiFePO4 blocks (:data:`PLANT_LFP_MAX_PARALLEL`
  unless the program says; an assumption of ours);
* every cable and fuse the kit needs exists in the library (:func:`wiring`).

A unit's motor loads need starting (surge) power above their running power
(:data:`SURGE_MULTIPLIER`, :func:`unit_surge_need_w`); :func:`surge_ok` tells
which AC kits' inverters can start them.

References
----------
.. [1] NFPA 70, National Electrical Code (2023), Article 690.7, 690.8, 690.9,
   240.4 and 240.6(A).
.. [2] IEC 60228:2004, Conductors of insulated cables (via :mod:`fleet.cables`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .battery import CHEMISTRY, CHEMISTRY_INDEX, VOLTAGE_MODEL, cells_in_series, cycle_life_fit, self_discharge_per_hour
from .cables import (SECTIONS_MM2, fuse_rating_a, smallest_section_mm2, string_fuses_needed,
                     voltage_drop_v)
from .components import ComponentLibrary

ABSORPTION_V_PER_12V = {"lead_acid": 14.4, "lifepo4": 14.2}  # common practice
PWM_DROP_MARGIN_V = 0.7  # controller and cable drop per 12 V string, common practice
MPPT_HEADROOM_V = 2.0  # common practice
NEC_690_8_FACTOR = 1.25
MPPT_OVERSIZE = 1.2
LFP_MAX_PARALLEL_MODULES = 8  # rack modules with BMS communication, common practice
SHS_ARRAY_LADDER = (1, 2, 3, 4, 6, 8)
SHS_MAX_ARRAY_W = 2000.0
# A household's appliances peak well above its array power: the inverter of an
# AC kit is the smallest rated at >= 1.5 W per Wp (an assumption of ours).
SHS_INVERTER_PER_WP = 1.5
SHS_USABLE_WH_PER_WP = (1.2, 6.0)
#: Smallest nominal energy of a plant's battery block (one string), Wh: smaller strings would need
#: many in parallel on the plant's bus (an assumption of ours).
PLANT_MIN_BATTERY_BLOCK_WH = 5000.0
#: LiFePO4 battery blocks (each with its own battery management system and fuse or breaker)
#: paralleled on one plant bus when the program does not say (``system.max_plant_lifepo4_blocks``;
#: an assumption of ours: makers state their own limits). Lead-acid plants parallel at most
#: ``system.max_parallel_battery_strings`` strings (common practice for lead-acid).
PLANT_LFP_MAX_PARALLEL = 24
#: Modules of plant PV blocks are at least this large (common practice).
PLANT_MIN_MODULE_W = 250.0

#: Array power (Wp, both ends included) each system voltage is used for. Higher power at a
#: low voltage means battery-side currents past about 40 A at 12 V and 80 A at 24 V, with
#: cables, fuses and controllers to match; small arrays at a high voltage need more modules in
#: series and dearer parts than the load justifies. # common practice: stand-alone design
#: handbooks (e.g. Sandia SAND87-7023, Stand-Alone Photovoltaic Systems: A Handbook of
#: Recommended Design Practices) choose the system voltage from the power and current in this
#: way (# from memory); the bands overlap where both voltages are common, and the catalogue
#: picks by cost there.
SYSTEM_VOLTAGE_BANDS_WP = {12: (0.0, 500.0), 24: (250.0, 2000.0), 48: (1000.0, math.inf)}

#: Topology by array power for household kits: DC kits (loads on the controller's load output)
#: up to 400 Wp, AC kits (inverter on the battery) from 300 Wp (# common practice: past a few
#: hundred watts households run mains appliances; an assumption of ours).
DC_MAX_ARRAY_W = 400.0
AC_MIN_ARRAY_W = 300.0

#: Keys of the rules that turn a combination down (``rule`` column of the rejected table).
REJECTION_RULES = {
    "system_voltage": "system voltage by array power",
    "cold_voc": "string Voc at the cold design temperature over the controller's limit (NEC 690.7)",
    "hot_vmp": "hot string Vmp too low to finish charging the battery",
    "controller_current": "controller current rating (NEC 690.8(A) for PWM; MPPT output current)",
    "battery_parallel": "too many battery strings in parallel",
    "battery_block_size": "battery string too small for a plant's battery block",
    "inverter_rating": "no inverter rated for the kit's design output",
    "cable_section": "cable section beyond the largest available",
    "fuse_rating": "no fuse or breaker of the rating and voltage needed",
}


@dataclass(frozen=True)
class DesignConditions:
    """Temperatures the electrical checks are made at (degC)."""

    cold_ambient_c: float
    hot_cell_c: float


def voc_at_temperature(voc_stc_v: float, coeff_pct_per_k: float, temp_c: float) -> float:
    """Module open-circuit voltage at cell temperature ``temp_c`` (NEC 690.7(A)(1) method)."""
    return voc_stc_v * (1.0 + coeff_pct_per_k / 100.0 * (temp_c - 25.0))


def vmp_at_temperature(vmp_stc_v: float, coeff_voc_pct_per_k: float, temp_c: float) -> float:
    """Module maximum-power voltage at cell temperature; the Voc coefficient stands in
    for the Vmp coefficient, which is a little more negative (common practice)."""
    return vmp_stc_v * (1.0 + 1.15 * coeff_voc_pct_per_k / 100.0 * (temp_c - 25.0))


def battery_strings(system_v: int, battery_v: float) -> int | None:
    """Batteries in series for a system voltage, or None if they do not fit (12.8 V LiFePO4 counts as 12 V)."""
    n = round(system_v / battery_v)
    return n if n >= 1 and abs(n * battery_v - system_v) <= 0.1 * system_v else None


def system_voltage_allowed(system_v, array_wp):
    """Whether a system voltage (V) suits an array power (Wp), per
    :data:`SYSTEM_VOLTAGE_BANDS_WP`; arrays broadcast. A voltage with no band is never allowed."""
    v = np.asarray(system_v, float)
    wp = np.asarray(array_wp, float)
    lo = np.vectorize(lambda x: SYSTEM_VOLTAGE_BANDS_WP.get(int(x), (math.inf, -math.inf))[0], otypes=[float])(v)
    hi = np.vectorize(lambda x: SYSTEM_VOLTAGE_BANDS_WP.get(int(x), (math.inf, -math.inf))[1], otypes=[float])(v)
    return (wp >= lo) & (wp <= hi)


def system_voltage_reason(system_v: int, array_wp: float) -> str:
    """Why ``system_v`` does not suit an array of ``array_wp`` (see :func:`system_voltage_allowed`),
    naming the voltages that do; '' when it does."""
    if bool(system_voltage_allowed(system_v, array_wp)):
        return ""
    fits = [v for v in SYSTEM_VOLTAGE_BANDS_WP if bool(system_voltage_allowed(v, array_wp))]
    band = SYSTEM_VOLTAGE_BANDS_WP.get(int(system_v))
    where = (f"{system_v} V is for {band[0]:.0f}-{band[1]:.0f} Wp" if band and math.isfinite(band[1])
             else f"{system_v} V is for {band[0]:.0f} Wp and more" if band else f"{system_v} V has no power band")
    return (f"{array_wp:.0f} Wp array at {system_v} V: {where} (system voltage by array power"
            + (f"; use {' or '.join(str(v) for v in fits)} V" if fits else "") + ")")


def string_voltage_check(module, n_series: int, system_v: int, chemistry: str, kind_group: str,
                 cond: DesignConditions, max_pv_v: float) -> tuple[str, str]:
    """('', '') when a string of ``n_series`` modules suits the controller and battery, else
    (rule key, reason).

    ``cold_voc``: the string's open-circuit voltage at ``cond.cold_ambient_c``, corrected with
    the module's Voc temperature coefficient (NEC 690.7(A)(1)), exceeds ``max_pv_v`` (V).
    ``hot_vmp``: its maximum-power voltage at ``cond.hot_cell_c`` falls below the absorption
    voltage plus the controller's margin (:data:`PWM_DROP_MARGIN_V` per 12 V for a controller
    that ties the array to the battery, ``kind_group`` 'pwm'; :data:`MPPT_HEADROOM_V` for MPPT).
    """
    voc_cold = n_series * voc_at_temperature(module.voc_v, module.temp_coeff_voc_pct_per_k, cond.cold_ambient_c)
    if voc_cold > max_pv_v:
        return "cold_voc", (f"string Voc {voc_cold:.1f} V at {cond.cold_ambient_c:.0f} degC exceeds controller "
                            f"limit {max_pv_v:.0f} V (NEC 690.7)")
    v_abs = ABSORPTION_V_PER_12V[chemistry] * system_v / 12.0
    vmp_hot = n_series * vmp_at_temperature(module.vmp_v, module.temp_coeff_voc_pct_per_k, cond.hot_cell_c)
    need = v_abs + (PWM_DROP_MARGIN_V * system_v / 12 if kind_group == "pwm" else MPPT_HEADROOM_V)
    if vmp_hot < need:
        return "hot_vmp", (f"hot string Vmp {vmp_hot:.1f} V at {cond.hot_cell_c:.0f} degC below {need:.1f} V "
                           f"needed to finish charging")
    return "", ""


def controller_current_need_a(kind_group: str, module, n_parallel: int, array_wp: float, system_v: float) -> float:
    """Current rating (A) a charge controller needs: 1.25 x the strings' short-circuit current
    for a controller that ties the array to the battery (NEC 690.8(A)(1)); for an MPPT
    controller its output current at the array's STC power and the system voltage, allowing
    the array to be at most :data:`MPPT_OVERSIZE` times the controller (# common practice)."""
    if kind_group == "pwm":
        return NEC_690_8_FACTOR * float(module.isc_a) * n_parallel
    return array_wp / system_v / MPPT_OVERSIZE


def _controller_reason(kind_group: str, c, need_a: float) -> str:
    if kind_group == "pwm":
        return (f"controller {c.controller_id} {c.rated_current_a:.0f} A < {need_a:.1f} A = 1.25 x array Isc "
                f"(NEC 690.8(A))")
    return (f"controller {c.controller_id} {c.rated_current_a:.0f} A < {need_a:.1f} A = array Wp / system V / "
            f"{MPPT_OVERSIZE:g} (MPPT output current, common practice)")


# --------------------------------------------------------------------------------------------
# Surge: motor loads start at several times their running power


#: Starting power of a load as a multiple of its running power, by load kind, for the few
#: seconds a motor takes to start (# common practice: a refrigerator or air-conditioner
#: compressor starts at 3-5 x its running power, 4 is taken; pumps and other induction-motor
#: appliances about 3 x; small fan motors about 2 x). Electronic and resistive loads: 1.
SURGE_MULTIPLIER = {"resistive": 1.0, "electronic": 1.0, "fan": 2.0, "motor": 3.0, "pump": 3.0, "compressor": 4.0}

#: Words in an appliance's name that tell its load kind (first match wins; other names count
#: as resistive or electronic).
LOAD_KIND_WORDS = (("refrigerator", "compressor"), ("freezer", "compressor"), ("air conditioner", "compressor"),
                   ("pump", "pump"), ("washing machine", "motor"), ("mill", "motor"), ("fan", "fan"))


def load_kind(name: str) -> str:
    """Load kind of an appliance from its name (:data:`LOAD_KIND_WORDS`)."""
    low = str(name).lower()
    return next((kind for word, kind in LOAD_KIND_WORDS if word in low), "resistive")


def surge_need_w(peak_w, motor_running_w, multiplier, motor_in_peak=True):
    """Power (W) an output must deliver for a few seconds while the largest motor starts with
    every other load on: the peak plus the motor's extra starting power, ``(multiplier - 1) x
    running`` when the motor's running power is part of ``peak_w``, ``multiplier x running``
    when it is not (e.g. a deferrable pump started on top of the peak). One motor starts at a
    time (# common practice). Arrays broadcast."""
    extra = np.asarray(multiplier, float) - np.where(motor_in_peak, 1.0, 0.0)
    return np.asarray(peak_w, float) + extra * np.asarray(motor_running_w, float)


def appliance_surge_extra_w(appliances) -> float:
    """Largest extra starting power (W) of one appliance of a mix (dicts with ``name`` and
    ``rated_w``, as :data:`fleet.demand.TIER_APPLIANCES`): (multiplier - 1) x rated power."""
    extras = [(SURGE_MULTIPLIER[load_kind(a["name"])] - 1.0) * float(a["rated_w"]) for a in appliances]
    return max(extras, default=0.0)


def unit_surge_need_w(units: pd.DataFrame, design: pd.DataFrame, sites: pd.DataFrame) -> np.ndarray:
    """Surge power (W) each service unit's supply must be able to start (:func:`surge_need_w`).

    ``units`` from :func:`fleet.demand.service_units`, ``design`` the per-unit design figures
    (``peak_power_w``, ``pump_w``) of :func:`fleet.demand.unit_loads`, ``sites`` the site table.
    Households and facilities: their design appliance mix (:data:`fleet.demand.TIER_APPLIANCES`,
    :data:`fleet.demand.FACILITY_APPLIANCES`; survey profiles are taken to hold the same
    motors). Productive uses: the design peak already includes motor starting
    (:data:`fleet.demand.PRODUCTIVE_KINDS`). A pump unit starts its pump
    (:data:`SURGE_MULTIPLIER` ``pump``). A minigrid village: its peak plus the largest extra of
    any member's motor or of the site's pump, which the village peak does not include.
    """
    from .demand import FACILITY_APPLIANCES, TIER_APPLIANCES
    peak = design["peak_power_w"].to_numpy(float)
    pump = design["pump_w"].to_numpy(float) if "pump_w" in design else np.zeros(len(units))
    out = peak.copy()
    pump_x = SURGE_MULTIPLIER["pump"]
    for i, u in enumerate(units.itertuples(index=False)):
        g = u.group
        if g.startswith("t") and g[1:].isdigit():
            out[i] = peak[i] + appliance_surge_extra_w(TIER_APPLIANCES[int(g[1:])])
        elif g in FACILITY_APPLIANCES:
            out[i] = peak[i] + appliance_surge_extra_w(FACILITY_APPLIANCES[g])
        elif g == "pumping":
            out[i] = float(surge_need_w(peak[i], pump[i], pump_x, motor_in_peak=True))
        elif g == "village":
            site = sites.iloc[u.site_index]
            mix = [a for t in range(1, 6) if int(site.get(f"households_t{t}", 0) or 0) > 0 for a in TIER_APPLIANCES[t]]
            for fac, col in (("health_post", "health_posts"), ("school", "schools")):
                if int(site.get(col, 0) or 0) > 0:
                    mix += FACILITY_APPLIANCES[fac]
            out[i] = peak[i] + max(appliance_surge_extra_w(mix), pump_x * pump[i])
    return out


def surge_ok(kits: pd.DataFrame, surge_need, blocks=1) -> np.ndarray:
    """Whether each kit can start each unit's motors: True for DC kits (their appliances have
    electronic soft-start drives, # common practice), else ``blocks`` x the inverter's surge
    rating (``inverter_surge_w``; blocks of a plant share a start) >= the need (W).

    Returns shape (n_kits,) for a scalar need, (n_needs, n_kits) for a 1-D need."""
    need = np.asarray(surge_need, float)
    dc = (kits["topology"] != "ac").to_numpy()
    cap = kits["inverter_surge_w"].to_numpy(float) * np.asarray(blocks, float)
    if need.ndim == 0:
        return dc | (cap >= need)
    return dc[None, :] | (cap[None, :] >= need[:, None])


# --------------------------------------------------------------------------------------------
# Wiring: cable sections and fuses per circuit, priced from the library where it has them


#: One-way cable runs assumed for sizing and pricing, m (# common practice for household kits
#: and plant blocks; a site survey replaces them): PV array to controller, controller to
#: battery, battery to inverter, controller load output to the household's DC distribution box.
CABLE_RUNS_M = {"shs": {"pv": 10.0, "battery": 1.5, "inverter": 1.5, "load": 2.0},
                "minigrid": {"pv": 30.0, "battery": 3.0, "inverter": 3.0, "load": 0.0}}
MAX_DROP_FRACTION = 0.03
#: Battery voltage the inverter's input current is taken at: 90 % of nominal (near its cut-off).
INVERTER_INPUT_V_FRACTION = 0.9
#: What each circuit is called in bill-of-materials lines.
CIRCUITS = {"pv": "PV array to charge controller", "battery": "charge controller to battery",
            "inverter": "battery to inverter", "load": "controller load output to DC distribution box"}


@dataclass(frozen=True)
class WiringStock:
    """Cables and fuses a library stocks, digested for :func:`wiring`.

    ``cables``: section (mm2) -> (cable_id, description, USD per metre), the cheapest per
    section; None when the library has no cable table (every standard section, unpriced).
    ``fuses``: application -> rows (fuse_id, description, rating A, max V DC, USD) sorted by
    price; None when the library has no fuse table (NEC 240.6(A) standard ratings, unpriced).
    """

    cables: dict | None
    fuses: dict | None

    @classmethod
    def of(cls, lib: ComponentLibrary) -> "WiringStock":
        cables = fuses = None
        if lib.cables is not None:
            cables = {}
            for r in lib.cables.sort_values("price_usd_per_m", kind="stable").itertuples(index=False):
                cables.setdefault(float(r.section_mm2), (r.cable_id, r.description, float(r.price_usd_per_m)))
        if lib.fuses is not None:
            fuses = {"pv_string": [], "battery": []}
            for r in lib.fuses.sort_values("price_usd", kind="stable").itertuples(index=False):
                fuses[r.application].append((r.fuse_id, r.description, float(r.rating_a),
                                             float(r.max_voltage_v_dc), float(r.price_usd)))
        return cls(cables, fuses)

    def sections_mm2(self):
        return None if self.cables is None else sorted(self.cables)

    def fuse(self, application: str, current_a: float, voltage_v: float) -> tuple[float, str]:
        """(rating A, fuse_id) of the smallest stocked rating at or above 125 % of the current
        (NEC 690.9(B)) rated for ``voltage_v`` DC, the cheapest at that rating; (NaN, '') if none."""
        if self.fuses is None:
            return fuse_rating_a(current_a), ""
        rows = [r for r in self.fuses[application] if r[3] >= voltage_v - 1e-9]
        rating = fuse_rating_a(current_a, [r[2] for r in rows])
        return rating, next((r[0] for r in rows if r[2] == rating), "")


def _circuit(name: str, current_a: float, run_m: float, circuit_v: float, stock: WiringStock,
             fuse_a: float = 0.0) -> tuple[dict, list[tuple[str, str]]]:
    """Columns of one circuit: design current, section, drop and cable id; a problem when no
    stocked section carries it (ampacity >= 125 % of the current and >= its fuse, NEC 690.8(B)
    and 240.4; drop <= 3 %)."""
    sec = smallest_section_mm2(current_a, run_m, circuit_v, MAX_DROP_FRACTION,
                               available_mm2=stock.sections_mm2(),
                               min_ampacity_a=fuse_a if np.isfinite(fuse_a) else 0.0)
    problems = []
    if np.isfinite(sec):
        drop = float(voltage_drop_v(current_a, run_m, sec, 50.0)) / circuit_v * 100.0
        cable_id = stock.cables[sec][0] if stock.cables is not None else ""
    else:
        drop, cable_id = np.nan, ""
        largest = max(stock.sections_mm2() or SECTIONS_MM2)
        problems.append(("cable_section", f"{CIRCUITS[name]} cable: {current_a:.1f} A over {run_m:g} m at "
                                          f"{circuit_v:.0f} V needs more than the largest available section "
                                          f"{largest:g} mm2 (125 % ampacity, {MAX_DROP_FRACTION:.0%} drop)"))
    return ({f"{name}_circuit_current_a": current_a, f"{name}_cable_mm2": sec, f"{name}_cable_drop_pct": drop,
             f"{name}_cable_id": cable_id}, problems)


def _no_circuit(name: str) -> dict:
    return {f"{name}_circuit_current_a": np.nan, f"{name}_cable_mm2": np.nan, f"{name}_cable_drop_pct": np.nan,
            f"{name}_cable_id": ""}


def wiring(scheme: str, system_v: float, module, n_series: int, n_parallel: int, controller, inverter, *,
           charge_v: float, string_voc_cold_v: float, stock: WiringStock | None = None
           ) -> tuple[dict, list[tuple[str, str]]]:
    """Cable cross-sections and fuse ratings of a kit (per controller), and what is missing.

    * PV circuit: 125 % of the strings' short-circuit current (NEC 690.8(A)(1)), sized for 125 %
      of that continuously (NEC 690.8(B)) and a drop of at most 3 % of the string's maximum-power
      voltage over the assumed run (:data:`CABLE_RUNS_M`); a fuse per string from three strings
      in parallel (NEC 690.9(A)) at the next rating above 125 % of the circuit current, rated for
      the string's cold open-circuit voltage ``string_voc_cold_v`` (V).
    * Battery circuit (controller to battery): the controller's rated current (or its load
      output, if larger), sized the same way against the system voltage; a fuse at the battery
      at the next rating above 125 % of it (NEC 690.9(B), 240.6(A)), rated for the charge
      voltage ``charge_v`` (V); the cable also carries the fuse's rating (NEC 240.4).
      Every fuse or breaker must be rated for the DC voltage of its circuit (NEC 690.9, # from
      memory); an AC-rated device may not interrupt a DC arc.
    * Inverter circuit (AC kits, battery to inverter): the inverter's input at rated power and
      90 % of nominal voltage, with its own fuse at the battery, sized the same way.
    * Load circuit (DC kits, controller load output to the DC distribution box): the load
      output's rating, sized the same way; the controller's electronic overcurrent trip guards
      it.

    Conductor resistances per IEC 60228 class 5 copper at 50 degC (:mod:`fleet.cables`). With
    a ``stock`` from a library's cable and fuse tables only stocked sections and fuses are used
    and their ids returned (``*_cable_id``, ``*_fuse_id``); without, every standard size.

    Returns
    -------
    columns : dict
        ``{pv,battery,inverter,load}_circuit_current_a`` (A), ``..._cable_mm2``,
        ``..._cable_drop_pct`` (%), ``..._cable_id``; ``string_fuse_a``, ``battery_fuse_a``,
        ``inverter_fuse_a`` (A) and ``..._fuse_id``. NaN and '' where the kit has no such part.
    problems : list of (rule, reason)
        Parts the library cannot supply (rules ``cable_section``, ``fuse_rating``).
    """
    stock = stock or WiringStock(None, None)
    runs = CABLE_RUNS_M[scheme]
    out: dict = {}
    problems: list[tuple[str, str]] = []

    def fused(name, application, current_a, voltage_v, what):
        rating, fid = stock.fuse(application, current_a, voltage_v)
        out[f"{name}_fuse_a"], out[f"{name}_fuse_id"] = rating, fid
        if not np.isfinite(rating):
            problems.append(("fuse_rating", f"no {what} fuse of at least {NEC_690_8_FACTOR * current_a:.1f} A "
                                            f"rated for {voltage_v:.0f} V DC in the library"))
        return rating

    i_pv = NEC_690_8_FACTOR * float(module.isc_a) * n_parallel
    cols, p = _circuit("pv", i_pv, runs["pv"], float(module.vmp_v) * n_series, stock)
    out.update(cols)
    problems += p
    if string_fuses_needed(n_parallel):
        fused("string", "pv_string", NEC_690_8_FACTOR * float(module.isc_a), string_voc_cold_v, "PV string")
    else:
        out["string_fuse_a"], out["string_fuse_id"] = np.nan, ""

    i_bat = max(float(controller.rated_current_a), float(controller.load_output_a) if inverter is None else 0.0)
    f_bat = fused("battery", "battery", i_bat, charge_v, "battery")
    cols, p = _circuit("battery", i_bat, runs["battery"], system_v, stock, f_bat)
    out.update(cols)
    problems += p

    if inverter is not None:
        i_inv = float(inverter.rated_power_w) / (float(inverter.efficiency) * INVERTER_INPUT_V_FRACTION * system_v)
        f_inv = fused("inverter", "battery", i_inv, charge_v, "inverter circuit")
        cols, p = _circuit("inverter", i_inv, runs["inverter"], system_v, stock, f_inv)
        out.update(cols)
        problems += p
    else:
        out.update(_no_circuit("inverter"))
        out["inverter_fuse_a"], out["inverter_fuse_id"] = np.nan, ""

    if inverter is None and float(controller.load_output_a) > 0 and runs["load"] > 0:
        cols, p = _circuit("load", float(controller.load_output_a), runs["load"], system_v, stock)
        out.update(cols)
        problems += p
    else:
        out.update(_no_circuit("load"))
    return out, problems


# --------------------------------------------------------------------------------------------
# Kit rows and their bill of materials


def _kit_row(scheme, system_v, module, n_series, n_parallel, battery, b_series, b_parallel,
             controller, n_controllers, inverter, wires: dict) -> dict:
    chem = battery.chemistry
    a, b = cycle_life_fit(battery.cycles_at_20pct_dod, battery.cycles_at_50pct_dod, battery.cycles_at_80pct_dod)
    n_mod = n_series * n_parallel * n_controllers
    n_bat = b_series * b_parallel
    nominal_wh = n_bat * battery.nominal_voltage_v * battery.capacity_ah
    bank_ah = b_parallel * battery.capacity_ah
    array_wp = n_mod * module.power_stc_w
    kind = controller.kind
    v_charge = CHEMISTRY[chem]["charge_voltage_ratio"] * system_v
    inv = inverter is not None
    if inv:
        max_load_w = float(inverter.rated_power_w)
    else:
        max_load_w = float(controller.load_output_a) * system_v * n_controllers
    short = {"lead_acid": "LA", "lifepo4": "LF"}[chem]
    prefix = "S" if scheme == "shs" else "P"
    kit_id = (f"{prefix}{system_v}-{n_mod}x{int(module.power_stc_w)}W-{n_bat}x{int(battery.capacity_ah)}Ah{short}"
              f"-{'M' if kind == 'mppt' else 'P'}{int(controller.rated_current_a)}"
              + (f"-I{int(inverter.rated_power_w)}" if inv else "-DC"))
    label = (f"{system_v} V {'AC' if inv else 'DC'}: {array_wp:.0f} Wp ({n_mod} x {module.power_stc_w:.0f} W), "
             f"{nominal_wh / 1000:.2f} kWh {chem.replace('_', '-')} ({n_bat} x {battery.nominal_voltage_v:g} V "
             f"{battery.capacity_ah:g} Ah), {kind.upper()} {controller.rated_current_a:.0f} A"
             + (f" x {n_controllers}" if n_controllers > 1 else "")
             + (f", inverter {inverter.rated_power_w:.0f} W" if inv else ""))
    plant = scheme == "minigrid"
    blocks = {
        "pv_block_id": (f"PV{system_v}-{n_mod}x{int(module.power_stc_w)}W-M{int(controller.rated_current_a)}"
                        if plant else ""),
        "pv_block_label": (f"{array_wp / 1000:.2f} kWp ({n_series} x {n_parallel} x {module.power_stc_w:.0f} W "
                           f"{module.module_id}) on a {controller.rated_current_a:.0f} A MPPT controller "
                           f"{controller.controller_id}" if plant else ""),
        "battery_block_id": f"BT{system_v}-{n_bat}x{int(battery.capacity_ah)}Ah{short}" if plant else "",
        "battery_block_label": (f"{nominal_wh / 1000:.1f} kWh {chem.replace('_', '-')} string ({n_bat} x "
                                f"{battery.nominal_voltage_v:g} V {battery.capacity_ah:g} Ah {battery.battery_id})"
                                if plant else ""),
    }
    return {
        "kit_id": kit_id, "kit_label": label, "scheme": scheme, "topology": "ac" if inv else "dc", **blocks,
        "system_voltage_v": system_v, "module_id": module.module_id, "modules_in_series": n_series,
        "strings_in_parallel": n_parallel * n_controllers, "modules": n_mod, "array_wp": array_wp,
        "battery_id": battery.battery_id, "chemistry": chem, "batteries_in_series": b_series,
        "battery_strings": b_parallel, "batteries": n_bat, "battery_nominal_wh": nominal_wh,
        "battery_usable_wh": nominal_wh * battery.usable_dod, "battery_ah": bank_ah,
        "controller_id": controller.controller_id, "controller_kind": kind, "controllers": n_controllers,
        "inverter_id": inverter.inverter_id if inv else "", "max_load_w": max_load_w,
        # output surge (a few seconds): the inverter's surge rating; a DC kit's load output has none
        "surge_w": float(inverter.surge_power_w) if inv else max_load_w,
        "inverter_surge_w": float(inverter.surge_power_w) if inv else 0.0,
        # dispatch parameters (see kernel_parameters)
        "charge_voltage_v": v_charge,
        "controller_efficiency": float(controller.efficiency),
        "controller_max_a": float(controller.rated_current_a) * n_controllers,
        "controller_self_w": float(controller.self_consumption_w) * n_controllers,
        "soc_lvd": 1.0 - float(battery.usable_dod),
        "charge_efficiency": float(battery.charge_efficiency),
        "discharge_efficiency": float(battery.discharge_efficiency),
        "battery_max_charge_c": float(battery.max_charge_c_rate),
        "battery_max_discharge_c": float(battery.max_discharge_c_rate),
        "self_discharge_per_h": self_discharge_per_hour(float(battery.self_discharge_pct_per_month)),
        "inverter_efficiency": float(inverter.efficiency) if inv else 1.0,
        "inverter_no_load_w": float(inverter.no_load_w) if inv else 0.0,
        "usable_dod": float(battery.usable_dod), "cycle_life_a": a, "cycle_life_b": b,
        "calendar_life_years": float(battery.calendar_life_years),
        "battery_rated_hours": float(battery.rate_hours),
        "battery_cells": cells_in_series(system_v, chem),
        "inverter_rated_w": float(inverter.rated_power_w) if inv else 0.0,
        "inverter_quadratic_per_w": (inverter_quadratic_loss(float(inverter.rated_power_w), float(inverter.efficiency),
                                                             float(inverter.no_load_w)) if inv else 0.0),
        "reverse_current_a": (0.0 if str(controller.blocks_reverse_current).strip().lower() == "yes"
                              else night_reverse_current_a(module, n_series, system_v, chem) * n_parallel * n_controllers),
        **wires,
    }


def inverter_quadratic_loss(rated_w: float, efficiency_at_rated: float, no_load_w: float) -> float:
    """Coefficient q (1/W) of the inverter loss model ``loss = no_load + q·P_out²`` that gives
    ``efficiency_at_rated`` at rated output (Jantsch, Schmidt & Schmid 1992, with the linear
    term folded into the others)."""
    loss = rated_w * (1.0 / efficiency_at_rated - 1.0)
    return max(loss - no_load_w, 0.0) / rated_w ** 2


def night_reverse_current_a(module, n_series: int, system_v: float, chemistry: str) -> float:
    """Dark current of one string held at the battery's rest voltage at 70 % SOC (A),
    from the module's single-diode fit at 20 degC (:func:`fleet.iv.dark_reverse_current`)."""
    from .battery import open_circuit_voltage
    from .iv import dark_reverse_current, fit_module
    v_batt = float(open_circuit_voltage(0.7, chemistry, cells_in_series(system_v, chemistry)))
    return dark_reverse_current(fit_module(module), v_batt / n_series, 20.0)


class _Parts:
    """The library's rows as plain records by id (fast lookups while building many kits)."""

    def __init__(self, lib: ComponentLibrary):
        self.modules = {r.module_id: r for r in lib.pv_modules.itertuples(index=False)}
        self.batteries = {r.battery_id: r for r in lib.batteries.itertuples(index=False)}
        self.controllers = {r.controller_id: r for r in lib.charge_controllers.itertuples(index=False)}
        self.inverters = {r.inverter_id: r for r in lib.inverters.itertuples(index=False)}
        self.bos = list(lib.balance_of_system.itertuples(index=False))
        self.installation = list(lib.installation.itertuples(index=False))
        self.stock = WiringStock.of(lib)
        self.cable = {} if lib.cables is None else {r.cable_id: r for r in lib.cables.itertuples(index=False)}
        self.fuse = {} if lib.fuses is None else {r.fuse_id: r for r in lib.fuses.itertuples(index=False)}


def _bom(parts: _Parts, kit: dict) -> list[dict]:
    """Bill-of-materials lines of one kit: components, the cables (length x 2 conductors of the
    section chosen per circuit) and fuses sized for it where the library prices them, the
    balance of system and installation."""
    lines = []

    plant = kit["scheme"] == "minigrid"

    def add(kind, cid, desc, unit, qty, price, block="pv"):
        if qty > 0:
            lines.append({"kit_id": kit["kit_id"], "block_kind": block if plant else "kit",
                          "component_kind": kind, "component_id": cid,
                          "description": desc, "unit": unit, "quantity_per_kit": float(qty),
                          "unit_price_usd": float(price)})

    m = parts.modules[kit["module_id"]]
    add("pv_module", m.module_id, m.description, "each", kit["modules"], m.price_usd)
    b = parts.batteries[kit["battery_id"]]
    add("battery", b.battery_id, b.description, "each", kit["batteries"], b.price_usd, "battery")
    c = parts.controllers[kit["controller_id"]]
    add("charge_controller", c.controller_id, c.description, "each", kit["controllers"], c.price_usd)
    if kit["inverter_id"]:
        i = parts.inverters[kit["inverter_id"]]
        add("inverter", i.inverter_id, i.description, "each", 1, i.price_usd, "inverter")
    runs = CABLE_RUNS_M[kit["scheme"]]
    n_ctrl = kit["controllers"]
    for name, per_kit in (("pv", n_ctrl), ("battery", n_ctrl), ("inverter", 1), ("load", n_ctrl)):
        cid = kit.get(f"{name}_cable_id", "")
        if cid:
            cab = parts.cable[cid]
            add("cable", cid, f"{CIRCUITS[name]}: 2 conductors x {runs[name]:g} m, {kit[f'{name}_cable_mm2']:g} mm2 "
                              f"copper; {cab.description}", "m", 2.0 * runs[name] * per_kit, cab.price_usd_per_m,
                "inverter" if name == "inverter" else "pv")
    for name, qty, where in (("string", kit["strings_in_parallel"], "one per PV string"),
                             ("battery", n_ctrl, "at the battery, charge controller circuit"),
                             ("inverter", 1, "at the battery, inverter circuit")):
        fid = kit.get(f"{name}_fuse_id", "")
        if fid:
            f = parts.fuse[fid]
            add("fuse", fid, f"{kit[f'{name}_fuse_a']:g} A, {where}; {f.description}", "each", qty, f.price_usd,
                "inverter" if name == "inverter" else "pv")
    # basis -> (quantity, the plant block it belongs to); a kit is one of each
    per = {"per_kit": (1, "plant"), "per_block": (1, "pv"), "per_module": (kit["modules"], "pv"),
           "per_battery": (kit["batteries"], "battery"), "per_battery_block": (1, "battery"),
           "per_inverter": (1, "inverter"), "per_plant": (1, "plant")}
    for item in parts.bos:
        if item.scheme in (kit["scheme"], "all"):
            qty, block = per[item.basis]
            add("balance_of_system", item.item_id, item.description, item.unit, item.quantity * qty, item.price_usd,
                block)
    for item in parts.installation:
        if item.scheme == kit["scheme"]:
            qty, block = per[item.basis]
            add("installation", item.item, item.description, "each", qty, item.cost_usd, block)
    return lines


def _battery_options(batteries, system_v, usable_range, array_wp, max_parallel):
    """Battery banks whose usable energy is within ``usable_range`` Wh per Wp of the array:
    (options [(battery, in series, strings)], rejections [(battery, reason)] for banks that
    would need more strings in parallel than allowed)."""
    options, rejections = [], []
    lo, hi = usable_range[0] * array_wp, usable_range[1] * array_wp
    for bat in batteries:
        bs = battery_strings(system_v, bat.nominal_voltage_v)
        if bs is None:
            continue
        per_string = bs * bat.nominal_voltage_v * bat.capacity_ah * bat.usable_dod
        lfp_rack = bat.chemistry == "lifepo4" and bat.nominal_voltage_v > 40
        cap = LFP_MAX_PARALLEL_MODULES if lfp_rack else max_parallel
        for bp in range(1, cap + 1):
            if lo <= bp * per_string <= hi:
                options.append((bat, bs, bp))
        first_over = max(cap + 1, math.ceil(lo / per_string - 1e-9))
        last = math.floor(hi / per_string + 1e-9)
        if last >= first_over:
            limit = ("rack modules with BMS communication, common practice" if lfp_rack
                     else "system.max_parallel_battery_strings")
            count = f"{first_over}-{last}" if last > first_over else f"{last}"
            rejections.append((bat, f"{count} strings of {bs} x {bat.battery_id} in parallel would give "
                                    f"{usable_range[0]:g}-{usable_range[1]:g} Wh usable per Wp; at most {cap} "
                                    f"allowed ({limit})"))
    return options, rejections


def candidate_kits(lib: ComponentLibrary, *, voltages_v, max_parallel_strings: int,
                   cond: DesignConditions, max_plant_lifepo4_blocks: int | None = None
                   ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """All electrically valid SHS kits and minigrid blocks from a library.

    Household kits are 12 or 24 V, DC (loads on the controller's output, up to
    :data:`DC_MAX_ARRAY_W`) or AC (inverter on the battery, from :data:`AC_MIN_ARRAY_W`);
    plant blocks are 48 V; every kit's system voltage suits its array power
    (:func:`system_voltage_reason`). Each kit's cables and fuses are sized (:func:`wiring`)
    and, where the library has cable and fuse tables, priced in its bill of materials;
    otherwise the library's balance-of-system lines stand for them
    (:attr:`fleet.components.ComponentLibrary.notes` says which).

    Returns
    -------
    kits : DataFrame, one row per kit or block (``kit_id`` unique) with its
        design, wiring and the dispatch kernel's parameters; ``capex_usd`` is the
        sum of its bill-of-materials lines.
    bom : DataFrame, bill-of-materials lines per kit (``kit_id``,
        ``component_kind``, ``component_id``, ``description``, ``unit``,
        ``quantity_per_kit``, ``unit_price_usd``).
    rejected : DataFrame, combinations turned down: ``scheme``, ``design``,
        ``rule`` (a key of :data:`REJECTION_RULES`) and a readable ``reason``.
    """
    b = _Builder(lib, cond, max_parallel_strings, int(max_plant_lifepo4_blocks or PLANT_LFP_MAX_PARALLEL))
    for v in voltages_v:
        if v in (12, 24):
            b.household_kits(v)
        elif v == 48:
            b.plant_blocks(v)
    return b.tables()


class _Builder:
    """Collects the kits and rejections of :func:`candidate_kits`."""

    def __init__(self, lib: ComponentLibrary, cond: DesignConditions, max_parallel_strings: int,
                 max_lfp_blocks: int = PLANT_LFP_MAX_PARALLEL):
        self.lib, self.cond, self.max_parallel = lib, cond, max_parallel_strings
        self.max_lfp_blocks = max_lfp_blocks
        self.parts = _Parts(lib)
        self.modules = list(self.parts.modules.values())
        self.batteries = list(self.parts.batteries.values())
        self.inverters = sorted(self.parts.inverters.values(), key=lambda r: (r.rated_power_w, r.price_usd))
        self.rows: list[dict] = []
        self.rejected: list[dict] = []
        self._ctrl: dict = {}
        self._wires: dict = {}

    def reject(self, scheme, design, rule, reason):
        self.rejected.append({"scheme": scheme, "design": design, "rule": rule, "reason": reason})

    def controllers(self, group: str, v: int) -> list:
        """Controllers of a kind group ('pwm' = battery-tied, 'mppt') for a system voltage, cheapest first."""
        if (group, v) not in self._ctrl:
            kinds = ("mppt",) if group == "mppt" else ("pwm", "series", "shunt")
            ok = [c for c in self.parts.controllers.values() if c.kind in kinds
                  and v in [int(x) for x in str(c.battery_voltages_v).split(";") if x]]
            self._ctrl[(group, v)] = sorted(ok, key=lambda c: c.price_usd)
        return self._ctrl[(group, v)]

    def add(self, scheme, v, module, ns, npar, bat, bs, bp, ctrl, inv, design):
        """A kit row, unless the library lacks a cable or fuse it needs (then rejections)."""
        key = (scheme, v, module.module_id, ns, npar, ctrl.controller_id, inv.inverter_id if inv else "", bat.chemistry)
        if key not in self._wires:
            voc_cold = ns * voc_at_temperature(module.voc_v, module.temp_coeff_voc_pct_per_k, self.cond.cold_ambient_c)
            self._wires[key] = wiring(scheme, v, module, ns, npar, ctrl, inv, stock=self.parts.stock,
                                      charge_v=ABSORPTION_V_PER_12V[bat.chemistry] * v / 12.0,
                                      string_voc_cold_v=voc_cold)
        wires, problems = self._wires[key]
        for rule, why in problems:
            self.reject(scheme, design + (f" with inverter {inv.inverter_id}" if inv else " (DC)"), rule, why)
        if not problems:
            self.rows.append(_kit_row(scheme, v, module, ns, npar, bat, bs, bp, ctrl, 1, inv, wires))

    def banks(self, scheme, array, v, usable_range, wp):
        """Battery banks for an array, rejecting those that need too many strings in parallel."""
        options, too_many = _battery_options(self.batteries, v, usable_range, wp, self.max_parallel)
        for bat, why in too_many:
            self.reject(scheme, f"{array} + {bat.battery_id}", "battery_parallel", why)
        return options

    def household_kits(self, v: int) -> None:
        cond = self.cond
        for module in self.modules:
            for group in ("pwm", "mppt"):
                ctrls = self.controllers(group, v)
                if not ctrls:
                    continue
                for ns in ([v // 12] if group == "pwm" else [1, 2, 3, 4]):
                    for npar in SHS_ARRAY_LADDER:
                        wp = ns * npar * module.power_stc_w
                        if wp > SHS_MAX_ARRAY_W:
                            continue
                        array = f"{v} V {ns}x{npar} {module.module_id} ({group})"
                        why = system_voltage_reason(v, wp)
                        if why:
                            self.reject("shs", array, "system_voltage", why)
                            continue
                        for bat, bs, bp in self.banks("shs", array, v, SHS_USABLE_WH_PER_WP, wp):
                            design = f"{v} V {ns}x{npar} {module.module_id} + {bs}x{bp} {bat.battery_id} ({group})"
                            chosen, rule, why = None, "controller_current", "no controller of this kind fits"
                            for c in ctrls:
                                rule, why = string_voltage_check(module, ns, v, bat.chemistry, group, cond,
                                                                 c.max_pv_voltage_v)
                                if rule:
                                    continue
                                need_a = controller_current_need_a(group, module, npar, wp, v)
                                if c.rated_current_a < need_a:
                                    rule, why = "controller_current", _controller_reason(group, c, need_a)
                                    continue
                                chosen = c
                                break
                            if chosen is None:
                                self.reject("shs", design, rule, why)
                                continue
                            if chosen.load_output_a > 0 and wp <= DC_MAX_ARRAY_W:
                                self.add("shs", v, module, ns, npar, bat, bs, bp, chosen, None, design)
                            if wp >= AC_MIN_ARRAY_W:
                                need_w = SHS_INVERTER_PER_WP * wp
                                inv = next((i for i in self.inverters if i.battery_voltage_v == v
                                            and i.rated_power_w >= need_w), None)
                                if inv is None:
                                    self.reject("shs", design + " (AC)", "inverter_rating",
                                                f"no {v} V inverter rated {need_w:.0f} W or more "
                                                f"({SHS_INVERTER_PER_WP:g} W per Wp) in the library")
                                else:
                                    self.add("shs", v, module, ns, npar, bat, bs, bp, chosen, inv, design)

    def plant_blocks(self, v: int) -> None:
        """Plant templates at ``v``: every PV block (the longest valid string of a module of at
        least :data:`PLANT_MIN_MODULE_W` on an MPPT controller, as many strings as its current
        rating takes) with every battery block (one string of at least
        :data:`PLANT_MIN_BATTERY_BLOCK_WH`) its string voltage can charge, and every inverter."""
        cond = self.cond
        pv_blocks = []
        for module in self.modules:
            if module.power_stc_w < PLANT_MIN_MODULE_W:
                continue
            for c in self.controllers("mppt", v):
                best, rule, why = None, "", ""
                for ns in range(1, 8):
                    r, w = string_voltage_check(module, ns, v, "lifepo4", "mppt", cond, c.max_pv_voltage_v)
                    if not r:
                        best = ns  # the longest valid string keeps currents low
                    else:
                        rule, why = r, w
                design = f"{module.module_id} on {c.controller_id}"
                if best is None:
                    self.reject("minigrid", design, rule, why)
                    continue
                string_wp = best * module.power_stc_w
                npar = int(c.rated_current_a * v * MPPT_OVERSIZE // string_wp)
                if npar < 1:
                    self.reject("minigrid", design, "controller_current",
                                _controller_reason("mppt", c, controller_current_need_a("mppt", module, 1, string_wp, v)))
                    continue
                wp = npar * string_wp
                design = f"{v} V {best}x{npar} {module.module_id} on {c.controller_id}"
                why = system_voltage_reason(v, wp)
                if why:
                    self.reject("minigrid", design, "system_voltage", why)
                    continue
                pv_blocks.append((module, best, npar, c, design))
        strings = []
        for bat in self.batteries:
            bs = battery_strings(v, bat.nominal_voltage_v)
            if bs is None:
                continue
            wh = bs * bat.nominal_voltage_v * bat.capacity_ah
            if wh < PLANT_MIN_BATTERY_BLOCK_WH:
                self.reject("minigrid", f"battery block {bs} x {bat.battery_id}", "battery_block_size",
                            f"one {v} V string of {bat.battery_id} holds {wh / 1000:.1f} kWh, under the "
                            f"{PLANT_MIN_BATTERY_BLOCK_WH / 1000:g} kWh of a plant battery block")
                continue
            strings.append((bat, bs))
        invs = [i for i in self.inverters if i.battery_voltage_v == v]
        if pv_blocks and strings and not invs:
            self.reject("minigrid", f"{v} V plant", "inverter_rating", f"no {v} V inverter in the library")
        for module, ns, npar, c, design in pv_blocks:
            for bat, bs in strings:
                bank = f"{design} + {bs} x {bat.battery_id}"
                rule, why = string_voltage_check(module, ns, v, bat.chemistry, "mppt", cond, c.max_pv_voltage_v)
                if rule:
                    self.reject("minigrid", bank, rule, why)
                    continue
                for inv in invs:
                    self.add("minigrid", v, module, ns, npar, bat, bs, 1, c, inv, bank)

    def tables(self) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
        rows = self.rows
        # the same kit id can come from string layouts (1 x 4 or 2 x 2 modules): keep the cheapest wired
        row_lines = [_bom(self.parts, r) for r in rows]
        row_capex = [sum(x["quantity_per_kit"] * x["unit_price_usd"] for x in ls) for ls in row_lines]
        lines, capex, keep = {}, {}, []
        for i in sorted(range(len(rows)), key=lambda i: row_capex[i]):
            kid = rows[i]["kit_id"]
            if kid not in lines:
                lines[kid], capex[kid] = row_lines[i], row_capex[i]
                keep.append(i)
        kits = thin_candidates(pd.DataFrame([rows[i] for i in sorted(keep)]), self.lib, capex)
        bom = pd.DataFrame([line for kid in kits["kit_id"] for line in lines[kid]])
        kits = capex_columns(kits, bom)
        bom["item_id"] = purchase_item_ids(bom, kits)
        lead = kits["chemistry"].eq("lead_acid")
        kits["max_battery_blocks"] = np.where(kits["scheme"].eq("minigrid"),
                                              np.where(lead, self.max_parallel, self.max_lfp_blocks), 1)
        rejected = pd.DataFrame(self.rejected, columns=["scheme", "design", "rule", "reason"]).drop_duplicates()
        return kits, bom, rejected.reset_index(drop=True)


USABLE_RATIO_TARGETS = {"shs": (1.5, 2.5, 4.0)}
#: The parts of a plant's capital cost, each bought as many times as the plant has of it:
#: PV blocks, battery blocks, inverters, and what is bought once per plant.
PLANT_PARTS = ("pv", "battery", "inverter", "plant")


def thin_candidates(kits: pd.DataFrame, lib: ComponentLibrary, capex_usd: dict | None = None) -> pd.DataFrame:
    """Keep a ladder of sensible, non-dominated candidates.

    1. Of designs with the same topology, voltage, controller kind, chemistry,
       array power and usable storage, keep the cheapest (e.g. one 100 W module
       rather than two of 50 W) by ``capex_usd`` (kit_id -> USD, the whole bill of
       materials) or, without it, by the price of the main components.
    2. Per array size, keep the storage options nearest each ratio of usable
       Wh per Wp in :data:`USABLE_RATIO_TARGETS` (per chemistry).
    3. Minigrid plant templates: of PV blocks with the same array power, and of battery blocks
       of the same chemistry and nominal energy, keep the cheapest by their main components
       (every inverter stays: the planner counts them per village).
    """
    k = kits.copy()
    if capex_usd is not None:
        k["_capex"] = k["kit_id"].map(capex_usd).astype(float)
    else:
        k["_capex"] = [sum(_component_price(lib, r)) for r in k.to_dict("records")]
    plants = _thin_plant_templates(k[k.scheme == "minigrid"], lib)
    k = k[k.scheme != "minigrid"]
    same = ["scheme", "topology", "system_voltage_v", "controller_kind", "chemistry", "array_wp", "battery_usable_wh"]
    k = k.sort_values(["_capex", "kit_id"]).drop_duplicates(same)
    k["_ratio"] = k["battery_usable_wh"] / k["array_wp"]
    keep_idx = set()
    for (scheme, *_), g in k.groupby(["scheme", "topology", "system_voltage_v", "controller_kind", "chemistry", "array_wp"]):
        for target in USABLE_RATIO_TARGETS[scheme]:
            keep_idx.add((g["_ratio"] - target).abs().idxmin())
    k = pd.concat([k.loc[sorted(keep_idx)], plants])
    return k.drop(columns=["_capex", "_ratio"]).sort_values(["scheme", "array_wp", "battery_usable_wh", "kit_id"]).reset_index(drop=True)


def _thin_plant_templates(t: pd.DataFrame, lib: ComponentLibrary) -> pd.DataFrame:
    """Plant templates whose PV block is the cheapest of its array power and whose battery block
    the cheapest of its chemistry and nominal energy (main components' prices)."""
    if t.empty:
        return t
    pv_price = (t.modules * t.module_id.map(lib.pv_modules.price_usd)
                + t.controllers * t.controller_id.map(lib.charge_controllers.price_usd))
    bat_price = t.batteries * t.battery_id.map(lib.batteries.price_usd)
    pv = pd.DataFrame({"id": t.pv_block_id, "key": t.array_wp, "price": pv_price}).sort_values(["price", "id"])
    bt = pd.DataFrame({"id": t.battery_block_id, "key": t.chemistry + t.battery_nominal_wh.round(0).astype(str),
                       "price": bat_price}).sort_values(["price", "id"])
    best_pv = set(pv.drop_duplicates("key").id)
    best_bt = set(bt.drop_duplicates("key").id)
    return t[t.pv_block_id.isin(best_pv) & t.battery_block_id.isin(best_bt)]


def _component_price(lib: ComponentLibrary, kit: dict):
    yield kit["modules"] * lib.pv_modules.at[kit["module_id"], "price_usd"]
    yield kit["batteries"] * lib.batteries.at[kit["battery_id"], "price_usd"]
    yield kit["controllers"] * lib.charge_controllers.at[kit["controller_id"], "price_usd"]
    if kit["inverter_id"]:
        yield lib.inverters.at[kit["inverter_id"], "price_usd"]


def capex_columns(kits: pd.DataFrame, bom: pd.DataFrame) -> pd.DataFrame:
    """``kits`` with its capital-cost columns summed from its BOM lines (USD): ``capex_usd``; the
    battery, controller and inverter lines (``battery_capex_usd``, ``controller_capex_usd``,
    ``inverter_capex_usd``: what a replacement costs); and, per :data:`PLANT_PARTS`, the lines of
    each plant part (``<part>_part_capex_usd``; a household kit's lines all count as ``pv``)."""
    kits = kits.copy()
    ext = bom.quantity_per_kit * bom.unit_price_usd

    def summed(sel) -> pd.Series:
        return kits["kit_id"].map(ext[sel].groupby(bom.kit_id[sel]).sum()).fillna(0.0).astype(float)

    kits["capex_usd"] = summed(np.ones(len(bom), bool))
    for kind, column in (("battery", "battery_capex_usd"), ("charge_controller", "controller_capex_usd"),
                         ("inverter", "inverter_capex_usd")):
        kits[column] = summed((bom.component_kind == kind).to_numpy())
    if "block_kind" in bom:
        for part in PLANT_PARTS:
            kits[f"{part}_part_capex_usd"] = summed(bom.block_kind.isin([part, "kit"] if part == "pv" else [part])
                                                    .to_numpy())
    return kits


def kernel_parameters(kits: pd.DataFrame, tables, *, reconnect_hysteresis_soc: float,
                      pv_losses_fraction: float, lvd_v_per_cell=None, lvr_v_per_cell=None) -> np.ndarray:
    """Float64 matrix (n_kits, :data:`fleet.dispatch.N_PARAMS`) of the dispatch kernel's
    :data:`fleet.dispatch.KIT_PARAMS`.

    Charge set-points, temperature compensation, Peukert exponent and the other
    chemistry constants come from :data:`fleet.battery.VOLTAGE_MODEL`. The
    low-voltage disconnect of a DC kit's controller follows the discharge
    current so that it acts at the design floor of state of charge (1 - usable
    depth of discharge) whatever the load (current-compensated disconnect); an
    AC system's inverter cuts off at a fixed voltage, the loaded voltage at the
    design floor at its rated power, so that light loads take the battery
    deeper, as on the hardware; the reconnect is the rest voltage
    ``reconnect_hysteresis_soc`` above the floor. ``lvd_v_per_cell`` and
    ``lvr_v_per_cell`` (arrays or scalars, 0 = derived) set them explicitly.
    ``tables`` is the :class:`fleet.iv.KitTables` of the kits.
    """
    from .dispatch import KIND_CODE, KIT_PARAMS
    n = len(kits)
    out = np.zeros((n, len(KIT_PARAMS)))
    col = {name: i for i, name in enumerate(KIT_PARAMS)}
    strings = np.asarray(tables.strings, float)
    t_idx = np.asarray(tables.table_index, np.int64)
    v_string = np.array([tables.tables[t].v_battery_charge_v + tables.tables[t].drop_v for t in t_idx]) if n else np.zeros(0)
    chem = kits["chemistry"].to_numpy()
    model = [VOLTAGE_MODEL[c] for c in chem]
    ah = kits["battery_ah"].to_numpy(float)
    ac = (kits["topology"] == "ac").to_numpy()
    system_v = kits["system_voltage_v"].to_numpy(float)
    inv_rated = kits["inverter_rated_w"].to_numpy(float) if "inverter_rated_w" in kits else np.zeros(n)
    ref_c = np.where(ac, inv_rated / np.maximum(system_v * ah, 1e-9), 1.0 / kits["battery_rated_hours"].to_numpy(float))
    values = {
        "array_multiplier": strings * (1.0 - pv_losses_fraction),
        "controller_kind": kits["controller_kind"].map(KIND_CODE).to_numpy(float),
        "string_charge_v": v_string,
        "controller_efficiency": kits["controller_efficiency"].to_numpy(float),
        "controller_max_a": kits["controller_max_a"].to_numpy(float),
        "controller_self_w": kits["controller_self_w"].to_numpy(float),
        "battery_ah": ah,
        "cells": kits["battery_cells"].to_numpy(float),
        "chemistry": np.array([CHEMISTRY_INDEX[c] for c in chem], float),
        "soc_lvd": kits["soc_lvd"].to_numpy(float),
        "coulombic_efficiency": kits["charge_efficiency"].to_numpy(float),
        "max_charge_c": kits["battery_max_charge_c"].to_numpy(float),
        "max_discharge_c": kits["battery_max_discharge_c"].to_numpy(float),
        "self_discharge_per_h": kits["self_discharge_per_h"].to_numpy(float),
        "rated_hours": kits["battery_rated_hours"].to_numpy(float),
        "max_load_w": kits["max_load_w"].to_numpy(float),
        "ac": ac.astype(float),
        "inverter_no_load_w": kits["inverter_no_load_w"].to_numpy(float),
        "inverter_quadratic_per_w": kits["inverter_quadratic_per_w"].to_numpy(float),
        "reverse_current_a": kits["reverse_current_a"].to_numpy(float),
        "shunt_on_v": np.full(n, SHUNT_ON_VOLTAGE_V),
        "reconnect_hysteresis_soc": np.full(n, reconnect_hysteresis_soc),
        "disconnect_ref_c": ref_c,
        "table_index": t_idx.astype(float),
        "lvd_v_cell": np.broadcast_to(np.asarray(0.0 if lvd_v_per_cell is None else lvd_v_per_cell, float), (n,)),
        "lvr_v_cell": np.broadcast_to(np.asarray(0.0 if lvr_v_per_cell is None else lvr_v_per_cell, float), (n,)),
        "cycle_life_inv_a": 1.0 / kits["cycle_life_a"].to_numpy(float),
        "cycle_life_b": kits["cycle_life_b"].to_numpy(float),
        # DC controllers compensate the disconnect for the load current (it sits at the design
        # floor at any current); an inverter's cut-off is a fixed voltage (# common practice)
        "lvd_compensated": (~ac).astype(float),
    }
    for key, name in (("absorption_v_per_cell", "absorption_v_cell"), ("float_v_per_cell", "float_v_cell"),
                      ("rebulk_v_per_cell", "rebulk_v_cell"), ("series_reconnect_v_per_cell", "series_reconnect_v_cell"),
                      ("temp_comp_v_per_k_cell", "temp_comp_v_per_k_cell"), ("peukert_exponent", "peukert_exponent"),
                      ("capacity_per_k", "capacity_per_k"), ("self_discharge_doubling_k", "self_discharge_doubling_k"),
                      ("absorption_hours", "absorption_hours")):
        values[name] = np.array([m[key] for m in model], float)
    for name, v in values.items():
        out[:, col[name]] = v
    return out


#: On-state voltage of a shunt controller's switch while it short-circuits the array, V
#: (a MOSFET and its wiring; # common practice).
SHUNT_ON_VOLTAGE_V = 0.3


#: Purchase item of a plant's once-per-plant lines (``per_plant`` balance of system, installation).
PLANT_ITEM_ID = "PLANT-SITE-WORKS"


def purchase_item_ids(bom: pd.DataFrame, kits: pd.DataFrame) -> pd.Series:
    """What procurement buys each BOM line as: the kit for household kits; for a plant template's
    lines the PV block, battery block or inverter they belong to (or :data:`PLANT_ITEM_ID`)."""
    ids = kits.set_index("kit_id")
    item = bom.kit_id.astype(object).copy()
    for kind, col in (("pv", "pv_block_id"), ("battery", "battery_block_id"), ("inverter", "inverter_id")):
        sel = (bom.block_kind == kind).to_numpy()
        item[sel] = bom.kit_id[sel].map(ids[col]).to_numpy()
    item[(bom.block_kind == "plant").to_numpy()] = PLANT_ITEM_ID
    return item


def plant_quantities(kit_rows: pd.DataFrame, pv_blocks, battery_blocks, inverters) -> pd.DataFrame:
    """What one kit or one plant of each option amounts to: ``kit_rows`` are the options' kit
    rows (a plant template is one block of each kind) and the counts their PV blocks, battery
    blocks and inverters (1 for household kits).

    Returns a frame aligned with ``kit_rows`` (index 0..n-1): ``capex_usd`` (each part's capital
    cost x its count, :data:`PLANT_PARTS`), ``battery_capex_usd``, ``controller_capex_usd`` and
    ``inverter_capex_usd`` (what a replacement of that component costs), ``array_wp``,
    ``battery_nominal_wh``, ``battery_usable_wh``, ``battery_ah`` (the bank, strings in
    parallel), ``max_load_w``, ``modules``, ``batteries``, ``controllers``, ``inverters``.
    """
    n_pv = np.asarray(pv_blocks, float)
    n_bat = np.asarray(battery_blocks, float)
    n_inv = np.asarray(inverters, float)
    k = kit_rows.reset_index(drop=True)

    def col(name, default=np.nan):  # tables without plant columns are household kits
        return k[name].to_numpy(float) if name in k else np.full(len(k), default)

    has_inv = (k["inverter_id"].astype(str) != "").to_numpy() if "inverter_id" in k else np.zeros(len(k), bool)
    capex = (col("pv_part_capex_usd", np.nan) * n_pv + col("battery_part_capex_usd", 0.0) * n_bat
             + col("inverter_part_capex_usd", 0.0) * n_inv + col("plant_part_capex_usd", 0.0))
    capex = np.where(np.isfinite(capex), capex, col("capex_usd"))  # no split: the whole kit, once
    return pd.DataFrame({
        "capex_usd": capex,
        "battery_capex_usd": col("battery_capex_usd") * n_bat,
        "controller_capex_usd": col("controller_capex_usd") * n_pv,
        "inverter_capex_usd": col("inverter_capex_usd") * n_inv,
        "array_wp": col("array_wp") * n_pv,
        "battery_nominal_wh": col("battery_nominal_wh") * n_bat,
        "battery_usable_wh": col("battery_usable_wh") * n_bat,
        "battery_ah": col("battery_ah") * n_bat,
        "max_load_w": col("max_load_w") * n_inv,
        "modules": col("modules") * n_pv,
        "batteries": col("batteries") * n_bat,
        "controllers": col("controllers") * n_pv,
        "inverters": np.where(has_inv, n_inv, 0.0),
    })


def plant_parameters(params: np.ndarray, pv_blocks, battery_blocks, inverters) -> np.ndarray:
    """Dispatch kernel parameters (:data:`fleet.dispatch.KIT_PARAMS`) of plants: rows of
    template ``params`` (one block of each kind) with their PV blocks, battery blocks and
    inverters in parallel on one DC bus. Array, controller rating, self-consumption and
    night-time reverse current scale with the PV blocks; the bank's Ah with the battery blocks
    (strings in parallel); the output rating and no-load power with the inverters, whose shared
    load-dependent loss ``q P^2`` per inverter becomes ``q P^2 / n`` for the plant (Jantsch et al.
    1992 model, load shared equally); an inverter cut-off referenced to the rated C-rate follows
    the plant's inverter power over its bank. A plant of n of each is the kernel's ``scale = n``
    of one block (the same state of charge, n times every flow)."""
    from .dispatch import K
    out = np.array(params, dtype=np.float64, copy=True)
    n_pv = np.asarray(pv_blocks, float)
    n_bat = np.asarray(battery_blocks, float)
    n_inv = np.asarray(inverters, float)
    for name in ("array_multiplier", "controller_max_a", "controller_self_w", "reverse_current_a"):
        out[:, K[name]] *= n_pv
    out[:, K["battery_ah"]] *= n_bat
    out[:, K["max_load_w"]] *= n_inv
    out[:, K["inverter_no_load_w"]] *= n_inv
    out[:, K["inverter_quadratic_per_w"]] /= n_inv
    ac = out[:, K["ac"]] > 0.5
    out[:, K["disconnect_ref_c"]] *= np.where(ac, n_inv / n_bat, 1.0)
    return out
