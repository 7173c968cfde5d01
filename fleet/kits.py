"""Candidate kits and minigrid plant blocks built from a component library,
each electrically checked, with its bill-of-materials lines.

A kit (solar home system) serves one household or facility. A minigrid plant
is a whole number of identical *blocks* (PV array on its MPPT controller,
battery bank, inverter) in parallel on a common AC bus.

Electrical rules (each a function below, cited):

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
* battery strings in parallel limited (config; common practice for lead-acid).

References
----------
.. [1] NFPA 70, National Electrical Code (2023), Article 690.7 and 690.8.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .battery import CHEMISTRY, CHEMISTRY_INDEX, VOLTAGE_MODEL, cells_in_series, cycle_life_fit, self_discharge_per_hour
from .cables import fuse_rating_a, smallest_section_mm2, string_fuses_needed, voltage_drop_v
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
BLOCK_USABLE_WH_PER_WP = (1.5, 6.0)


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


def _controllers_for(lib: ComponentLibrary, kind_group: str, system_v: int) -> pd.DataFrame:
    cc = lib.charge_controllers
    ok = cc["battery_voltages_v"].map(lambda s: system_v in [int(v) for v in str(s).split(";") if v])
    kinds = ["mppt"] if kind_group == "mppt" else ["pwm", "series", "shunt"]
    return cc[ok & cc["kind"].isin(kinds)].sort_values("price_usd")


def _array_ok(module: pd.Series, n_series: int, system_v: int, chemistry: str, kind_group: str,
              cond: DesignConditions, max_pv_v: float) -> tuple[bool, str]:
    voc_cold = n_series * voc_at_temperature(module.voc_v, module.temp_coeff_voc_pct_per_k, cond.cold_ambient_c)
    if voc_cold > max_pv_v:
        return False, f"string Voc {voc_cold:.1f} V at {cond.cold_ambient_c:.0f} degC exceeds controller limit {max_pv_v:.0f} V (NEC 690.7)"
    v_abs = ABSORPTION_V_PER_12V[chemistry] * system_v / 12.0
    vmp_hot = n_series * vmp_at_temperature(module.vmp_v, module.temp_coeff_voc_pct_per_k, cond.hot_cell_c)
    need = v_abs + (PWM_DROP_MARGIN_V * system_v / 12 if kind_group == "pwm" else MPPT_HEADROOM_V)
    if vmp_hot < need:
        return False, f"hot string Vmp {vmp_hot:.1f} V below {need:.1f} V needed to finish charging"
    return True, ""


def _kit_row(scheme, topology, system_v, module, n_series, n_parallel, battery, b_series, b_parallel,
             controller, n_controllers, inverter) -> dict:
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
    prefix = "S" if scheme == "shs" else "B"
    kit_id = (f"{prefix}{system_v}-{n_mod}x{int(module.power_stc_w)}W-{n_bat}x{int(battery.capacity_ah)}Ah{short}"
              f"-{'M' if kind == 'mppt' else 'P'}{int(controller.rated_current_a)}"
              + (f"-I{int(inverter.rated_power_w)}" if inv else "-DC"))
    label = (f"{system_v} V {'AC' if inv else 'DC'}: {array_wp:.0f} Wp ({n_mod} x {module.power_stc_w:.0f} W), "
             f"{nominal_wh / 1000:.2f} kWh {chem.replace('_', '-')} ({n_bat} x {battery.nominal_voltage_v:g} V "
             f"{battery.capacity_ah:g} Ah), {kind.upper()} {controller.rated_current_a:.0f} A"
             + (f" x {n_controllers}" if n_controllers > 1 else "")
             + (f", inverter {inverter.rated_power_w:.0f} W" if inv else ""))
    return {
        "kit_id": kit_id, "kit_label": label, "scheme": scheme, "topology": "ac" if inv else "dc",
        "system_voltage_v": system_v, "module_id": module.module_id, "modules_in_series": n_series,
        "strings_in_parallel": n_parallel * n_controllers, "modules": n_mod, "array_wp": array_wp,
        "battery_id": battery.battery_id, "chemistry": chem, "batteries_in_series": b_series,
        "battery_strings": b_parallel, "batteries": n_bat, "battery_nominal_wh": nominal_wh,
        "battery_usable_wh": nominal_wh * battery.usable_dod, "battery_ah": bank_ah,
        "controller_id": controller.controller_id, "controller_kind": kind, "controllers": n_controllers,
        "inverter_id": inverter.inverter_id if inv else "", "max_load_w": max_load_w,
        "surge_w": float(inverter.surge_power_w) if inv else max_load_w,
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
        **wiring(scheme, system_v, module, n_series, n_parallel, controller, inverter),
    }


#: One-way cable runs assumed for sizing, m (# common practice for household kits and plant blocks;
#: a site survey replaces them).
CABLE_RUNS_M = {"shs": {"pv": 10.0, "battery": 1.5}, "minigrid": {"pv": 30.0, "battery": 3.0}}
MAX_DROP_FRACTION = 0.03


def wiring(scheme: str, system_v: float, module, n_series: int, n_parallel: int, controller, inverter) -> dict:
    """Cable cross-sections and fuse ratings of a kit (per controller).

    * PV circuit: 125 % of the strings' short-circuit current (NEC 690.8(A)(1)), sized for 125 %
      of that continuously (NEC 690.8(B)) and a drop of at most 3 % of the string's maximum-power
      voltage over the assumed run; a fuse per string from three strings in parallel (NEC 690.9).
    * Battery circuit: the larger of the controller's rated current and the inverter's input
      current at rated power and 90 % of nominal voltage, sized the same way against the system
      voltage; the battery fuse at the next standard rating above 125 % of it (NEC 240.6(A)).
    Conductor resistances per IEC 60228 class 5 copper at 50 degC (:mod:`fleet.cables`).
    """
    runs = CABLE_RUNS_M[scheme]
    i_pv = NEC_690_8_FACTOR * float(module.isc_a) * n_parallel
    v_string = float(module.vmp_v) * n_series
    pv_mm2 = smallest_section_mm2(i_pv, runs["pv"], v_string, MAX_DROP_FRACTION)
    i_bat = float(controller.rated_current_a)
    if inverter is not None:
        i_bat = max(i_bat, float(inverter.rated_power_w) / (float(inverter.efficiency) * 0.9 * system_v))
    bat_mm2 = smallest_section_mm2(i_bat, runs["battery"], system_v, MAX_DROP_FRACTION)
    drop = (lambda i, run, sec, v: float(voltage_drop_v(i, run, sec, 50.0)) / v * 100.0 if np.isfinite(sec) else np.nan)
    return {
        "pv_circuit_current_a": i_pv, "pv_cable_mm2": pv_mm2,
        "pv_cable_drop_pct": drop(i_pv, runs["pv"], pv_mm2, v_string),
        "string_fuse_a": fuse_rating_a(NEC_690_8_FACTOR * float(module.isc_a)) if string_fuses_needed(n_parallel) else np.nan,
        "battery_circuit_current_a": i_bat, "battery_cable_mm2": bat_mm2,
        "battery_cable_drop_pct": drop(i_bat, runs["battery"], bat_mm2, system_v),
        "battery_fuse_a": fuse_rating_a(i_bat),
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


def _bom(lib: ComponentLibrary, kit: dict) -> list[dict]:
    lines = []

    def add(kind, cid, desc, unit, qty, price):
        if qty > 0:
            lines.append({"kit_id": kit["kit_id"], "component_kind": kind, "component_id": cid,
                          "description": desc, "unit": unit, "quantity_per_kit": float(qty),
                          "unit_price_usd": float(price)})

    m = lib.pv_modules.loc[kit["module_id"]]
    add("pv_module", m.module_id, m.description, "each", kit["modules"], m.price_usd)
    b = lib.batteries.loc[kit["battery_id"]]
    add("battery", b.battery_id, b.description, "each", kit["batteries"], b.price_usd)
    c = lib.charge_controllers.loc[kit["controller_id"]]
    add("charge_controller", c.controller_id, c.description, "each", kit["controllers"], c.price_usd)
    if kit["inverter_id"]:
        i = lib.inverters.loc[kit["inverter_id"]]
        add("inverter", i.inverter_id, i.description, "each", 1, i.price_usd)
    per = {"per_kit": 1, "per_block": 1, "per_module": kit["modules"], "per_battery": kit["batteries"]}
    for item in lib.balance_of_system.itertuples(index=False):
        if item.scheme in (kit["scheme"], "all"):
            add("balance_of_system", item.item_id, item.description, item.unit, item.quantity * per[item.basis], item.price_usd)
    for item in lib.installation.itertuples(index=False):
        if item.scheme == kit["scheme"]:
            add("installation", item.item, item.description, "each", per[item.basis], item.cost_usd)
    return lines


def _battery_options(lib, system_v, usable_range, array_wp, max_parallel):
    for bat in lib.batteries.itertuples(index=False):
        bs = battery_strings(system_v, bat.nominal_voltage_v)
        if bs is None:
            continue
        cap = LFP_MAX_PARALLEL_MODULES if bat.chemistry == "lifepo4" and bat.nominal_voltage_v > 40 else max_parallel
        for bp in range(1, cap + 1):
            usable = bs * bp * bat.nominal_voltage_v * bat.capacity_ah * bat.usable_dod
            if usable_range[0] * array_wp <= usable <= usable_range[1] * array_wp:
                yield bat, bs, bp


def candidate_kits(lib: ComponentLibrary, *, voltages_v, max_parallel_strings: int,
                   cond: DesignConditions) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """All electrically valid SHS kits and minigrid blocks from a library.

    Returns
    -------
    kits : DataFrame, one row per kit or block (``kit_id`` unique) with its
        design and the dispatch kernel's parameters.
    bom : DataFrame, bill-of-materials lines per kit (``kit_id``,
        ``component_kind``, ``component_id``, ``description``, ``unit``,
        ``quantity_per_kit``, ``unit_price_usd``).
    rejected : DataFrame, combinations turned down with the rule that failed.
    """
    rows, rejected = [], []
    shs_v = [v for v in voltages_v if v in (12, 24)]
    for v in shs_v:
        for module in lib.pv_modules.itertuples(index=False):
            for group in ("pwm", "mppt"):
                ctrls = _controllers_for(lib, group, v)
                if ctrls.empty:
                    continue
                series_options = [v // 12] if group == "pwm" else [1, 2, 3, 4]
                for ns in series_options:
                    for npar in SHS_ARRAY_LADDER:
                        wp = ns * npar * module.power_stc_w
                        if wp > SHS_MAX_ARRAY_W:
                            continue
                        for bat, bs, bp in _battery_options(lib, v, SHS_USABLE_WH_PER_WP, wp, max_parallel_strings):
                            chosen, why = None, "no controller of this kind fits"
                            for c in ctrls.itertuples(index=False):
                                ok, why = _array_ok(module, ns, v, bat.chemistry, group, cond, c.max_pv_voltage_v)
                                if not ok:
                                    continue
                                need_a = (NEC_690_8_FACTOR * module.isc_a * npar if group == "pwm"
                                          else wp / v / MPPT_OVERSIZE)
                                if c.rated_current_a < need_a:
                                    why = f"controller {c.controller_id} {c.rated_current_a:.0f} A < {need_a:.1f} A needed (NEC 690.8(A))"
                                    continue
                                chosen = c
                                break
                            if chosen is None:
                                rejected.append({"scheme": "shs", "design": f"{v} V {ns}x{npar} {module.module_id} + {bs}x{bp} {bat.battery_id} ({group})", "reason": why})
                                continue
                            if chosen.load_output_a > 0 and wp <= 400:
                                rows.append(_kit_row("shs", "dc", v, module, ns, npar, bat, bs, bp, chosen, 1, None))
                            if wp >= 300 and v >= 24:
                                invs = lib.inverters[(lib.inverters.battery_voltage_v == v)
                                                     & (lib.inverters.rated_power_w >= SHS_INVERTER_PER_WP * wp)]
                                for inv in invs.sort_values("rated_power_w").head(1).itertuples(index=False):
                                    rows.append(_kit_row("shs", "ac", v, module, ns, npar, bat, bs, bp, chosen, 1, inv))
    if 48 in voltages_v:
        v = 48
        for module in lib.pv_modules.itertuples(index=False):
            for c in _controllers_for(lib, "mppt", v).itertuples(index=False):
                best = None
                for ns in range(1, 8):
                    ok, why = _array_ok(module, ns, v, "lifepo4", "mppt", cond, c.max_pv_voltage_v)
                    if ok:
                        best = ns  # the longest valid string keeps currents low
                if best is None:
                    rejected.append({"scheme": "minigrid", "design": f"{module.module_id} on {c.controller_id}", "reason": why})
                    continue
                npar = int(c.rated_current_a * v * MPPT_OVERSIZE // (best * module.power_stc_w))
                if npar < 1:
                    continue
                wp = best * npar * module.power_stc_w
                if wp < 1000:
                    continue  # a block below 1 kWp is a large SHS, not a plant block
                for bat, bs, bp in _battery_options(lib, v, BLOCK_USABLE_WH_PER_WP, wp, max_parallel_strings):
                    ok, why = _array_ok(module, best, v, bat.chemistry, "mppt", cond, c.max_pv_voltage_v)
                    if not ok:
                        rejected.append({"scheme": "minigrid", "design": f"{module.module_id} on {c.controller_id} with {bat.battery_id}", "reason": why})
                        continue
                    for inv in lib.inverters[lib.inverters.battery_voltage_v == v].itertuples(index=False):
                        if 0.6 * wp <= inv.rated_power_w <= 1.7 * wp:
                            rows.append(_kit_row("minigrid", "ac", v, module, best, npar, bat, bs, bp, c, 1, inv))
    kits = thin_candidates(pd.DataFrame(rows).drop_duplicates("kit_id"), lib)
    bom = pd.DataFrame([line for k in kits.to_dict("records") for line in _bom(lib, k)])
    capex = bom.assign(x=bom.quantity_per_kit * bom.unit_price_usd).groupby("kit_id")["x"].sum()
    kits["capex_usd"] = kits["kit_id"].map(capex).astype(float)
    kits["battery_capex_usd"] = kits["kit_id"].map(_line_cost(bom, "battery")).fillna(0.0)
    kits["controller_capex_usd"] = kits["kit_id"].map(_line_cost(bom, "charge_controller")).fillna(0.0)
    kits["inverter_capex_usd"] = kits["kit_id"].map(_line_cost(bom, "inverter")).fillna(0.0)
    return kits, bom, pd.DataFrame(rejected, columns=["scheme", "design", "reason"])


USABLE_RATIO_TARGETS = {"shs": (1.5, 2.5, 4.0), "minigrid": (2.0, 3.0, 4.5)}


def thin_candidates(kits: pd.DataFrame, lib: ComponentLibrary) -> pd.DataFrame:
    """Keep a ladder of sensible, non-dominated candidates.

    1. Of designs with the same topology, voltage, controller kind, chemistry,
       array power and usable storage, keep the cheapest (e.g. one 100 W module
       rather than two of 50 W).
    2. Per array size, keep the storage options nearest each ratio of usable
       Wh per Wp in :data:`USABLE_RATIO_TARGETS` (per chemistry).
    3. Minigrid blocks use modules of at least 250 W and the inverter nearest
       the array power (common practice).
    """
    k = kits.copy()
    k["_capex"] = [sum(_component_price(lib, r)) for r in k.to_dict("records")]
    mg = k.scheme == "minigrid"
    big = k["module_id"].map(lib.pv_modules["power_stc_w"]) >= 250
    k = k[~mg | big]
    blk = k[k.scheme == "minigrid"]
    if not blk.empty:
        gap = (blk["max_load_w"] - blk["array_wp"]).abs()
        keep = gap.groupby([blk.module_id, blk.controller_id, blk.battery_id, blk.batteries]).idxmin()
        k = pd.concat([k[k.scheme != "minigrid"], k.loc[keep.values]])
    same = ["scheme", "topology", "system_voltage_v", "controller_kind", "chemistry", "array_wp", "battery_usable_wh"]
    k = k.sort_values("_capex").drop_duplicates(same)
    k["_ratio"] = k["battery_usable_wh"] / k["array_wp"]
    keep_idx = set()
    for (scheme, *_), g in k.groupby(["scheme", "topology", "system_voltage_v", "controller_kind", "chemistry", "array_wp"]):
        for target in USABLE_RATIO_TARGETS[scheme]:
            keep_idx.add((g["_ratio"] - target).abs().idxmin())
    k = k.loc[sorted(keep_idx)]
    return k.drop(columns=["_capex", "_ratio"]).sort_values(["scheme", "array_wp", "battery_usable_wh", "kit_id"]).reset_index(drop=True)


def _component_price(lib: ComponentLibrary, kit: dict):
    yield kit["modules"] * lib.pv_modules.at[kit["module_id"], "price_usd"]
    yield kit["batteries"] * lib.batteries.at[kit["battery_id"], "price_usd"]
    yield kit["controllers"] * lib.charge_controllers.at[kit["controller_id"], "price_usd"]
    if kit["inverter_id"]:
        yield lib.inverters.at[kit["inverter_id"], "price_usd"]


def _line_cost(bom: pd.DataFrame, kind: str) -> pd.Series:
    sel = bom[bom.component_kind == kind]
    return (sel.quantity_per_kit * sel.unit_price_usd).groupby(sel.kit_id).sum()


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
