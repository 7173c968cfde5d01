"""Turn a :class:`fleet.plan.PlanResult` into the run folder's tables and
files: bill of materials, deployment summary (workbook and HTML), site layer
and run record. Writing is atomic: the folder appears complete or not at all.
"""

from __future__ import annotations

import hashlib
import json
import os
import platform
import shutil
import time
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from .kits import PLANT_ITEM_ID, plant_quantities
from .plan import PlanResult, assigned_options, option_counts

#: Cautions beyond the report writers' standard ones (fleet.report DEFAULT_CAUTIONS).
CAUTIONS = [
    "Lithium batteries need a battery management system and must not be charged below 0 degC; a battery "
    "short circuit can start a fire: fuse the battery close to its terminals.",
    "PV modules produce voltage whenever light falls on them; cover or isolate arrays before working on them.",
    "Component prices in the bundled demo library are invented; replace them with quotations before any decision.",
]


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for pkg in ("fleet", "numpy", "pandas", "geopandas", "pvlib", "pulp", "numba", "gsee-climate-data",
                "openpyxl", "xlsxwriter", "matplotlib"):
        try:
            out[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file, or of every file in a folder in name order."""
    h = hashlib.sha256()
    p = Path(path)
    files = sorted(f for f in p.rglob("*") if f.is_file()) if p.is_dir() else [p]
    for f in files:
        h.update(f.name.encode())
        h.update(f.read_bytes())
    return h.hexdigest()


def plan_tables(result: PlanResult) -> dict[str, pd.DataFrame]:
    """The tables every output draws on."""
    units = result.units
    chosen = assigned_options(result)
    kits = result.kits.set_index("kit_id")
    c = chosen.merge(units[["unit_id", "daily_energy_wh", "peak_power_w"]], on="unit_id", how="left")
    n_pv, n_bat, n_inv = option_counts(c)
    q = plant_quantities(kits.loc[c.kit_id.to_numpy()].reset_index(), n_pv, n_bat, n_inv)
    # household kits bought, or a plant's PV blocks + battery blocks + inverters
    c["kits_bought"] = c["count"] * np.where(c.scheme == "minigrid", n_pv + n_bat + n_inv, 1)
    c["array_kwp"] = q.array_wp.to_numpy() * c["count"].to_numpy() / 1000.0
    c["battery_kwh"] = q.battery_nominal_wh.to_numpy() * c["count"].to_numpy() / 1000.0
    c["demand_kwh_day"] = c.daily_energy_wh * c["count"] / 1000.0
    c["unmet_kwh_day"] = c.demand_kwh_day * c.unmet_fraction_design
    c["critical_kwh_day"] = c.unit_id.map(units.set_index("unit_id").critical_wh_day) * c["count"] / 1000.0
    c["critical_unmet_kwh_day"] = c.critical_kwh_day * c.critical_unmet_fraction_design
    c["tier_shortfall"] = np.where(c.tier_achieved_design < c.tier_required, c["count"], 0)
    sites = result.sites.copy()
    hh = sites[[f"households_t{t}" for t in range(1, 6)]].sum(axis=1)

    per_site = c.groupby("site_id").agg(
        kits_bought=("kits_bought", "sum"), array_kwp=("array_kwp", "sum"), battery_kwh=("battery_kwh", "sum"),
        capex_usd=("capex_usd", "sum"), lifecycle_cost_usd=("cost_usd", "sum"),
        demand_kwh_day=("demand_kwh_day", "sum"), unmet_kwh_day=("unmet_kwh_day", "sum"),
        critical_kwh_day=("critical_kwh_day", "sum"), critical_unmet_kwh_day=("critical_unmet_kwh_day", "sum"),
        lowest_tier_reached=("tier_achieved_design", "min"), below_tier=("tier_shortfall", "sum"))
    label = c.assign(part=lambda d: np.where(d.scheme == "minigrid", "plant: " + d.plant_design.astype(str),
                                             d.group + ": " + d["count"].astype(str) + " x " + d.kit_id))
    per_site["kits"] = label.groupby("site_id").part.agg("; ".join)
    un = result.unserved
    unserved = (un.group.astype(str) + ": " + un.reason.astype(str)).groupby(un.site_id).agg("; ".join) \
        if len(un) else pd.Series(dtype=object)
    demand_all = pd.Series(result.units.daily_energy_wh.to_numpy() * result.units["count"].to_numpy() / 1000.0,
                           index=result.units.site_id).groupby(level=0).sum()
    sites = sites.set_index("site_id", drop=False)
    plan_cols = pd.DataFrame(index=sites.index)
    plan_cols["kits"] = per_site.kits.reindex(sites.index).fillna("")
    plan_cols["kits_bought"] = per_site.kits_bought.reindex(sites.index).fillna(0).astype(int)
    plan_cols["array_kwp"] = per_site.array_kwp.reindex(sites.index).fillna(0.0)
    plan_cols["battery_kwh"] = per_site.battery_kwh.reindex(sites.index).fillna(0.0)
    plan_cols["demand_kwh_day"] = demand_all.reindex(sites.index).fillna(0.0)
    plan_cols["unmet_fraction_design"] = (per_site.unmet_kwh_day / per_site.demand_kwh_day.replace(0, np.nan)).reindex(sites.index)
    plan_cols["critical_unmet_fraction_design"] = (per_site.critical_unmet_kwh_day / per_site.critical_kwh_day.replace(0, np.nan)).reindex(sites.index)
    plan_cols["lowest_tier_reached"] = per_site.lowest_tier_reached.reindex(sites.index)
    plan_cols["households_below_their_tier"] = per_site.below_tier.reindex(sites.index).fillna(0).astype(int)
    plan_cols["capex_usd"] = per_site.capex_usd.reindex(sites.index).fillna(0.0)
    plan_cols["lifecycle_cost_usd"] = per_site.lifecycle_cost_usd.reindex(sites.index).fillna(0.0)
    plan_cols["households"] = hh.to_numpy()
    plan_cols["cost_per_household_usd"] = plan_cols.lifecycle_cost_usd / plan_cols.households.replace(0, np.nan)
    plan_cols["not_served"] = unserved.reindex(sites.index).fillna("")
    w = result.weather.info.set_index("site_id")
    plan_cols["ghi_kwh_m2_day"] = w.ghi_kwh_m2_day.reindex(sites.index)
    plan_cols["temp_mean_default_used"] = w.temp_mean_default.reindex(sites.index)
    site_layer = sites.join(plan_cols.add_prefix("plan_")).reset_index(drop=True)
    # the site table's own columns as the user gave them; where reading filled a default or
    # normalised a cell, the value the plan used goes in a plan_<column>_used column
    for name, given in result.sites.attrs.get("as_given", {}).items():
        if name in site_layer and len(given) == len(site_layer):
            site_layer[f"plan_{name}_used"] = site_layer[name]
            site_layer[name] = pd.Series(given, dtype=object)

    per_site_full = sites[["site_id", "site_name", "district", "depot", "scheme"]].join(plan_cols)
    # what procurement buys (household kits; a plant's blocks and inverters) per depot
    c["depot"] = c.site_id.map(sites.depot)
    kit_counts, bom = purchase_items(c, result.kits, result.bom)
    chosen_ids = c.kit_id.unique()

    def rollup(by: str) -> pd.DataFrame:
        g = per_site_full.groupby(by)
        t = pd.DataFrame({
            "sites": g.size(),
            **{f"households tier {k}": result.sites.groupby(by)[f"households_t{k}"].sum() for k in range(1, 6)},
            "kits or blocks": g.kits_bought.sum(), "array (kWp)": g.array_kwp.sum(),
            "battery (kWh)": g.battery_kwh.sum(), "demand (kWh/day)": g.demand_kwh_day.sum(),
            "capex (USD)": g.capex_usd.sum(), "lifecycle cost (USD)": g.lifecycle_cost_usd.sum(),
        })
        t["cost per household (USD)"] = t["lifecycle cost (USD)"] / t[[f"households tier {k}" for k in range(1, 6)]].sum(axis=1).replace(0, np.nan)
        un = c.assign(by=c.site_id.map(sites[by])).groupby("by")[["unmet_kwh_day", "demand_kwh_day"]].sum()
        t["unmet energy, design year (%)"] = 100 * un.unmet_kwh_day / un.demand_kwh_day.replace(0, np.nan)
        t["sites with a unit not served"] = per_site_full.assign(x=per_site_full.not_served != "").groupby(by).x.sum()
        items = _items_by(c, sites[by])
        unit_word = dict(zip(items.kit_id, np.where(items.scheme == "shs", "kits", "units")))
        by_type = items.pivot_table(index="by", columns="kit_id", values="kits", aggfunc="sum", fill_value=0)
        by_type.columns = [f"{k} ({unit_word[k]})" for k in by_type.columns]
        t = t.join(by_type).fillna({col: 0 for col in by_type.columns})
        return t.reset_index().rename(columns={by: by})

    by_district = rollup("district")
    by_depot = rollup("depot")
    kit_types = catalogue_types(kit_counts, result.kits, result.config["system"]["reconnect_hysteresis_soc"])
    n_hh = int(hh.sum())
    total_demand = float(per_site_full.demand_kwh_day.sum())
    served_demand = float(c.demand_kwh_day.sum())
    program = pd.DataFrame([
        ("sites", len(sites), "sites"),
        *[(f"households tier {k}", int(result.sites[f"households_t{k}"].sum()), "households") for k in range(1, 6)],
        ("health posts", int(result.sites.health_posts.sum()), "facilities"),
        ("schools", int(result.sites.schools.sum()), "facilities"),
        ("solar home system kits", int(c[c.scheme == "shs"].kits_bought.sum()), "kits"),
        ("minigrid plants", int(c[c.scheme == "minigrid"]["count"].sum()), "plants"),
        ("  their PV blocks", int((c["count"] * c.blocks)[c.scheme == "minigrid"].sum()), "blocks"),
        ("  their battery blocks", int((c["count"] * c.battery_blocks)[c.scheme == "minigrid"].sum()), "blocks"),
        ("  their inverters", int((c["count"] * c.inverters)[c.scheme == "minigrid"].sum()), "inverters"),
        ("kit types in the catalogue (SHS)", len(result.catalogues["shs"].chosen_kits), "types"),
        ("block types in the catalogue (minigrid)", len(result.catalogues["minigrid"].chosen_kits), "types"),
        ("array", float(c.array_kwp.sum()), "kWp"),
        ("battery (nominal)", float(c.battery_kwh.sum()), "kWh"),
        ("demand", total_demand, "kWh/day"),
        ("capex", float(c.capex_usd.sum()), "USD"),
        ("lifecycle cost (net present)", float(c.cost_usd.sum()), "USD"),
        ("  of which transport from the depots (net present)", float(c.transport_usd.sum()) if "transport_usd" in c else 0.0, "USD"),
        ("  of which salvage value at the horizon (credit, net present)", -float(c.salvage_usd.sum()) if "salvage_usd" in c else 0.0, "USD"),
        ("cost per household (lifecycle)", float(c.cost_usd.sum()) / max(n_hh, 1), "USD/household"),
        ("cost per kWh served (LCOE)", _program_lcoe(c, result), "USD/kWh"),
        ("unmet energy in the design weather year", 100 * float(c.unmet_kwh_day.sum()) / max(served_demand, 1e-9), "% of demand of served units"),
        ("demand of units with no kit", _clean_zero(total_demand - served_demand, total_demand), "kWh/day"),
        ("critical load unmet in the design weather year", 100 * float(c.critical_unmet_kwh_day.sum()) / max(float(c.critical_kwh_day.sum()), 1e-9), "% of critical demand"),
        (f"households or units short of their tier's hours of supply on {result.config['program']['tier_days_share']:.0%} of days",
         int(c.tier_shortfall.sum()), "households or units"),
        ("service units with no kit", len(result.unserved), "units"),
    ], columns=["metric", "value", "unit"])
    sites_table = per_site_full.reset_index(drop=True).rename(columns={
        "kits_bought": "kits or blocks", "array_kwp": "array (kWp)", "battery_kwh": "battery (kWh)",
        "demand_kwh_day": "demand (kWh/day)", "unmet_fraction_design": "unmet energy, design year (fraction)",
        "capex_usd": "capex (USD)", "lifecycle_cost_usd": "lifecycle cost (USD)",
        "cost_per_household_usd": "cost per household (USD)", "not_served": "not served (reason)",
        "critical_unmet_fraction_design": "critical load unmet, design year (fraction)",
        "lowest_tier_reached": "lowest tier reached, design year",
        "households_below_their_tier": "households or units below their tier (count)",
        "ghi_kwh_m2_day": "GHI (kWh/m2/day)", "temp_mean_default_used": "default temperature used"})
    by_scheme = {scheme: monthly_balance(tr) for scheme, tr in result.traces.items()}
    monthly = [by_scheme[scheme].reset_index().assign(
                   scheme=scheme, unit_id=tr["unit_id"], kit_id=tr["kit_id"], weather_year=tr["weather_year"] + 1)
               for scheme, tr in result.traces.items()]
    monthly_table = (pd.concat(monthly, ignore_index=True)[
        ["scheme", "unit_id", "kit_id", "weather_year", "month", "pv_available_kwh", "pv_used_kwh", "pv_spilled_kwh",
         "demand_kwh", "served_kwh", "unmet_kwh"]].rename(columns={
            "weather_year": "design weather year (number)", "pv_available_kwh": "array energy available (kWh)",
            "pv_used_kwh": "array energy used (kWh)", "pv_spilled_kwh": "array energy spilled (kWh)",
            "demand_kwh": "demand (kWh)", "served_kwh": "served (kWh)", "unmet_kwh": "unmet (kWh)"})
        if monthly else pd.DataFrame())
    specs = None
    if result.kit_params is not None and len(chosen_ids):
        rows = np.flatnonzero(result.kits.kit_id.isin(chosen_ids).to_numpy())
        specs = kit_specifications(result.kits.iloc[rows], result.kit_params[rows])
    unserved_table = result.unserved.rename(columns={"nearest_unmet_fraction_design": "nearest option unmet energy (fraction)"})
    return {"program": program, "demand_by_tier": demand_by_tier(result), "by_district": by_district, "by_depot": by_depot, "sites": sites_table,
            "kit_types": kit_types, "comparisons": result.comparisons,
            "cost_curves": result.cost_curves, "monthly_balance": monthly_table, "unserved": unserved_table,
            "_bom": bom, "_kit_counts": kit_counts, "_kit_specs": specs, "_monthly": by_scheme, "_site_layer": site_layer, "_chosen": c}


def _items_by(c: pd.DataFrame, key: pd.Series) -> pd.DataFrame:
    """Purchase items (``kit_id``: a household kit, or a plant's block or inverter type) and how
    many of each, per value of ``key`` (a site column, indexed by site id), as column ``by``."""
    n_pv, n_bat, n_inv = option_counts(c)
    by = c.site_id.map(key).to_numpy()
    mg = (c.scheme == "minigrid").to_numpy()
    count = c["count"].to_numpy(float)
    parts = [pd.DataFrame({"scheme": "shs", "kit_id": c.kit_id[~mg].to_numpy(), "by": by[~mg], "kits": count[~mg]})]
    for col, n in (("pv_block_id", n_pv), ("battery_block_id", n_bat), ("inverter_id", n_inv)):
        if mg.any():
            parts.append(pd.DataFrame({"scheme": "minigrid", "kit_id": c[col][mg].to_numpy(), "by": by[mg],
                                       "kits": (count * n)[mg]}))
    out = pd.concat(parts, ignore_index=True)
    out["kits"] = out["kits"].round().astype(int)
    return out


def purchase_items(c: pd.DataFrame, kits: pd.DataFrame, bom: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """What procurement buys for the assigned options ``c`` (with a ``depot`` column): counts per
    (scheme, item, depot) as ``kit_counts`` (``kit_id`` is the item: a household kit, or a plant's
    PV block, battery block or inverter type) and the BOM lines of one of each item (a block's
    lines from the first plant template that has it; once-per-plant lines as their own item)."""
    items = _items_by(c, c.drop_duplicates("site_id").set_index("site_id").depot)
    plants = c[c.scheme == "minigrid"]
    if "item_id" in bom and len(plants) and (bom.block_kind == "plant").any():
        once = plants.groupby(plants.depot)["count"].sum()
        items = pd.concat([items, pd.DataFrame({"scheme": "minigrid", "kit_id": PLANT_ITEM_ID, "by": once.index,
                                                "kits": once.to_numpy().astype(int)})], ignore_index=True)
    counts = (items.groupby(["scheme", "kit_id", "by"], as_index=False).kits.sum()
              .rename(columns={"by": "depot"}))
    counts = counts[counts.kits > 0]
    used = c.kit_id.unique()
    lines = bom[bom.kit_id.isin(used)]
    if "item_id" in lines:
        lines = lines.sort_values("kit_id", kind="stable")
        first = lines.drop_duplicates("item_id")[["item_id", "kit_id"]]
        lines = lines.merge(first, on=["item_id", "kit_id"])
        lines = lines[lines.item_id.isin(counts.kit_id)]
        label = _item_labels(kits)
        lines = lines.assign(kit_id=lines.item_id).drop(columns=["item_id", "block_kind"], errors="ignore")
        lines = lines.merge(pd.DataFrame({"kit_id": list(label), "kit_label": list(label.values())}), on="kit_id")
        lines["scheme"] = np.where(lines.kit_id.isin(kits.kit_id[kits.scheme == "shs"]), "shs", "minigrid")
    else:
        lines = lines.merge(kits[["kit_id", "kit_label", "scheme"]], on="kit_id")
    return counts.reset_index(drop=True), lines.reset_index(drop=True)


def _item_labels(kits: pd.DataFrame) -> dict:
    """Description of every purchase item: household kits, plant block types and inverters."""
    label = dict(zip(kits.kit_id, kits.kit_label))
    mg = kits[kits.scheme == "minigrid"]
    label.update(dict(zip(mg.pv_block_id, "PV block: " + mg.pv_block_label)))
    label.update(dict(zip(mg.battery_block_id, "battery block: " + mg.battery_block_label)))
    label.update({i: f"inverter {i}, {w:.0f} W" for i, w in zip(mg.inverter_id, mg.inverter_rated_w)})
    label[PLANT_ITEM_ID] = "once-per-plant works and materials"
    return label


def catalogue_types(kit_counts: pd.DataFrame, kits: pd.DataFrame, hysteresis_soc: float) -> pd.DataFrame:
    """The catalogue as deployed: household kit types and a plant's block and inverter types,
    with how many were deployed and what each is."""
    n = kit_counts.groupby(["scheme", "kit_id"], as_index=False).kits.sum()
    shs = n[n.scheme == "shs"].merge(kits, on=["scheme", "kit_id"])
    rows = pd.DataFrame({
        "scheme": shs.scheme, "kit_id": shs.kit_id, "description": shs.kit_label,
        "kits or blocks deployed": shs.kits, "array (Wp)": shs.array_wp, "battery nominal (Wh)": shs.battery_nominal_wh,
        "battery usable (Wh)": shs.battery_usable_wh, "system voltage (V)": shs.system_voltage_v,
        "controller": shs.controller_id, "inverter": shs.inverter_id, "output rating (W)": shs.max_load_w,
        "capex per kit (USD)": shs.capex_usd,
        "low-voltage disconnect (SOC)": shs.soc_lvd,
        "reconnect (SOC)": np.minimum(shs.soc_lvd + hysteresis_soc, 0.95),
    })
    mg = kits[kits.scheme == "minigrid"]
    label = _item_labels(kits)
    blocks = []
    for col, part in (("pv_block_id", "pv"), ("battery_block_id", "battery"), ("inverter_id", "inverter")):
        first = mg.drop_duplicates(col).set_index(col)
        for r in n[(n.scheme == "minigrid") & n.kit_id.isin(first.index)].itertuples(index=False):
            f = first.loc[r.kit_id]
            blocks.append({
                "scheme": "minigrid", "kit_id": r.kit_id, "description": label.get(r.kit_id, ""),
                "kits or blocks deployed": r.kits,
                "array (Wp)": f.array_wp if part == "pv" else np.nan,
                "battery nominal (Wh)": f.battery_nominal_wh if part == "battery" else np.nan,
                "battery usable (Wh)": f.battery_usable_wh if part == "battery" else np.nan,
                "system voltage (V)": f.system_voltage_v,
                "controller": f.controller_id if part == "pv" else "",
                "inverter": r.kit_id if part == "inverter" else "",
                "output rating (W)": f.max_load_w if part == "inverter" else np.nan,
                "capex per kit (USD)": f[f"{part}_part_capex_usd"],
                "low-voltage disconnect (SOC)": f.soc_lvd if part == "battery" else np.nan,
                "reconnect (SOC)": min(f.soc_lvd + hysteresis_soc, 0.95) if part == "battery" else np.nan,
            })
    return pd.concat([rows, pd.DataFrame(blocks, columns=rows.columns)], ignore_index=True)


def _clean_zero(value: float, scale: float) -> float:
    """``value``, or 0.0 where it is rounding noise relative to ``scale`` (no '-0.000')."""
    return 0.0 if abs(value) <= 1e-9 * max(abs(scale), 1.0) else float(value)


def demand_by_tier(result: PlanResult) -> pd.DataFrame:
    """Design-year demand by service group and scheme: members, energy and peak per member."""
    u = result.units
    members = u["count"].where(u.group != "village", 1)
    t = u.assign(members=members, energy=u.daily_energy_wh * u["count"] / 1000.0,
                 first=u.first_year_daily_energy_wh * u["count"] / 1000.0,
                 critical=u.critical_wh_day * u["count"] / 1000.0, deferrable=u.deferrable_wh_day * u["count"] / 1000.0)
    g = t.groupby(["scheme", "group"])
    out = pd.DataFrame({
        "units or households": g.members.sum(),
        "first-year demand (kWh/day)": g["first"].sum(),
        "design-year demand (kWh/day)": g.energy.sum(),
        "critical part (kWh/day)": g.critical.sum(),
        "deferrable (kWh/day)": g.deferrable.sum(),
        "demand per member (Wh/day)": 1000 * g.energy.sum() / g.members.sum(),
        "design peak per member (W)": g.apply(lambda d: float(np.average(d.peak_power_w, weights=d["count"])), include_groups=False),
    })
    return out.reset_index()


def _program_lcoe(c: pd.DataFrame, result: PlanResult) -> float:
    p = result.config["program"]
    served = float((c.served_kwh_year_per_kit * c["count"]).sum())
    from .economics import levelised_cost_usd_per_kwh
    return float(levelised_cost_usd_per_kwh(float(c.cost_usd.sum()), served, p["horizon_years"], p["discount_rate"]))


def assumptions(result: PlanResult) -> list[tuple[str, object, str]]:
    cfg = result.config
    rows = []
    for section, keys in cfg.values.items():
        for k, v in keys.items():
            rows.append((f"{section}.{k}", v if not isinstance(v, list) else ", ".join(map(str, v)), ""))
    rows += [
        ("solar resource", "MERRA-2 reanalysis daily GHI distributions 2011-2015 on a 3 degree grid "
         "(Gelaro et al. 2017; Pfenninger & Staffell 2016), synthetic years with AR(1) persistence", ""),
        ("hourly irradiance", "Ineichen clear sky (pvlib, bundled Linke turbidity) x daily clear-sky index; Erbs; Perez; Faiman", ""),
        ("clock", "hours are local standard time from the site's time zone (tzfpy), without daylight saving", ""),
        ("design weather year", f"the {cfg['program']['target_confidence']:.0%} quantile of {cfg['program']['weather_years']} synthetic years", ""),
        ("battery ageing", "energy-throughput life from the cycle-life curve at the usable depth of discharge, capped by calendar life", ""),
        ("demand", "Multi-Tier Framework tier appliance mixes; minigrid loads summed with a coincidence factor for peaks", ""),
    ]
    return rows


def figures(result: PlanResult, tables: dict) -> dict:
    from .report import plots
    figs = {}
    layer = tables["_site_layer"]
    lab = layer.plan_kits.where(layer.plan_kits != "", "no kit").str.split(";").str[0].str.split(": ").str[-1].str.split(" x ").str[-1]
    lab = lab.where(~layer.plan_kits.str.startswith("plant:"), "minigrid plant")
    figs["Sites by main kit type"] = plots.site_map(layer.longitude.to_numpy(), layer.latitude.to_numpy(), lab.to_numpy(),
                                                     "Sites coloured by their main kit or block type")
    c = tables["_chosen"]
    figs["Reliability of served units"] = plots.reliability_histogram(
        c.unmet_fraction_design.to_numpy(), result.config["program"]["reliability_target"],
        title="Unmet energy per service unit in the design weather year", what="service units")
    for scheme, tr in result.traces.items():
        figs[f"State of charge at a typical {scheme} unit"] = plots.soc_trace(
            np.arange(len(tr["soc"])), tr["soc"], tr["connected"] < 0.5,
            f"{tr['unit_id']} with {tr['kit_id']} (design weather year {tr['weather_year'] + 1})")
    for scheme, tr in result.traces.items():
        what = f"per plant ({tr.get('plant_design', '')})" if scheme == "minigrid" else "per kit"
        figs[f"Monthly energy balance at a typical {scheme} unit"] = plots.monthly_energy_balance(
            tables["_monthly"][scheme],
            f"{tr['unit_id']} with {tr['kit_id']}, design weather year, {what}")
    kt = tables["kit_types"]
    per = c.groupby("kit_id")[["capex_usd", "cost_usd"]].sum().reindex(kt.kit_id)
    figs["Cost by kit type"] = plots.cost_by_kit_type(kt.kit_id.to_numpy(), per.capex_usd.to_numpy(), per.cost_usd.to_numpy())
    if len(result.cost_curves):
        figs["Cost against the number of kit types and the energy target"] = plots.cost_curves(
            result.cost_curves, "Lifecycle cost of the best catalogue (one integer program per point)")
    return figs


#: Hour-of-year to calendar month for the kernel's 8760-hour (non-leap) year.
HOUR_MONTH = pd.date_range("2001-01-01", periods=8760, freq="h").month.to_numpy()


def monthly_balance(trace: dict, multiplier: float = 1.0) -> pd.DataFrame:
    """Monthly sums (kWh) of an hourly trace (:func:`fleet.dispatch.simulate_trace`): array
    energy available at the controller output, used and spilled; demand (general and critical
    loads), served and unmet. ``multiplier`` scales a per-block trace to the plant."""
    k = float(multiplier) / 1000.0
    frame = pd.DataFrame({
        "pv_available_kwh": np.asarray(trace["pv_bus_w"], float) * k,
        "pv_used_kwh": np.asarray(trace["pv_used_w"], float) * k,
        "pv_spilled_kwh": np.asarray(trace["spill_w"], float) * k,
        "demand_kwh": np.asarray(trace["load_w"], float) * k,
        "served_kwh": np.asarray(trace["served_w"], float) * k,
    })
    frame["unmet_kwh"] = frame.demand_kwh - frame.served_kwh
    out = frame.groupby(HOUR_MONTH[: len(frame)]).sum()
    out.index.name = "month"
    return out


def write_run(result: PlanResult, out_dir: str | Path, *, inputs: dict[str, str], overwrite: bool = False,
              started: float | None = None, tables: dict | None = None, extra_tables: dict | None = None,
              record_extra: dict | None = None) -> dict[str, Path]:
    """Write all outputs into ``out_dir`` atomically and return their paths.

    The files are written into a hidden sibling folder first and moved into
    place only when all are complete, so a failed run leaves any earlier
    run folder untouched. ``tables`` may pass in :func:`plan_tables` already built;
    ``extra_tables`` (name -> table) are written first in the deployment summary (the
    ``changes`` of a repriced run) and ``record_extra`` is added to ``run.json``.
    """
    from .report import (write_bill_of_materials, write_deployment_html, write_deployment_summary,
                         write_sites_gpkg)
    out = Path(out_dir)
    if out.exists() and any(out.iterdir()) and not overwrite:
        raise FileExistsError(f"{out} already holds a run; choose another --out or pass --overwrite")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        tables = tables if tables is not None else plan_tables(result)
        notes = assumptions(result)
        spares = result.config["catalogue"]["spares_fraction"]
        write_bill_of_materials(tmp / "bill_of_materials.xlsx", tables["_bom"], tables["_kit_counts"],
                                spares_fraction=spares, assumptions=notes, cautions=CAUTIONS,
                                kit_specs=tables.get("_kit_specs"))
        public = {**(extra_tables or {}), **{k: v for k, v in tables.items() if not k.startswith("_")}}
        write_deployment_summary(tmp / "deployment_summary.xlsx", public, warnings=result.warnings,
                                 assumptions=notes, cautions=CAUTIONS)
        write_deployment_html(tmp / "deployment_summary.html", public, figures(result, tables),
                              title=result.config["program"]["name"], warnings=result.warnings,
                              assumptions=notes, cautions=CAUTIONS)
        write_sites_gpkg(tmp / "sites.gpkg", tables["_site_layer"], getattr(result.config, "depots", None))
        from .reprice import STATE_FILE, save_state
        save_state(result, tmp / STATE_FILE)
        record = {
            "fleet_run": 1,
            "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "inputs": {k: {"path": str(v), "sha256": file_sha256(v)} for k, v in inputs.items() if v},
            "versions": _versions(),
            "seed": result.config["program"]["seed"],
            "config": result.config.values,
            "timings_s": {k: round(v, 3) for k, v in result.timings_s.items()}
                          | ({"total": round(time.perf_counter() - started, 3)} if started else {}),
            "catalogue": {s: {"kit_types": r.chosen_kits, "status": r.status, "objective_usd": r.objective_usd,
                              "lp_bound_usd": r.lower_bound_usd, "gap": r.gap, "units": r.units,
                              "distinct_cases": r.distinct_cases, "solve_seconds": round(r.solve_seconds, 3),
                              "solver": r.solver}
                          for s, r in result.catalogues.items()},
            "options_simulated": int(len(result.evaluations)),
            "options_bounded_not_simulated": int(len(getattr(result, "candidates", ()))),
            "option_search": str(result.config["catalogue"].get("option_search", "bounded")),
            "catalogue_search_rounds": int(getattr(result, "search_rounds", 0)),
            "warnings": result.warnings,
            **(record_extra or {}),
        }
        (tmp / "run.json").write_text(json.dumps(record, indent=2, default=_json_default))
        if out.exists():
            old = out.parent / f".{out.name}.old-{os.getpid()}"
            out.rename(old)
            tmp.rename(out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            tmp.rename(out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    from .reprice import STATE_FILE
    return {name: out / name for name in ("bill_of_materials.xlsx", "deployment_summary.xlsx",
                                          "deployment_summary.html", "sites.gpkg", "run.json", STATE_FILE)}


def _json_default(o):
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating,)):
        return float(o)
    if isinstance(o, Path):
        return str(o)
    return str(o)


def kit_specifications(kits: pd.DataFrame, params: np.ndarray, *, battery_temp_c: float = 25.0) -> pd.DataFrame:
    """Specification sheet of kit types: one row per property (with its unit), one column per kit.

    Electrical data of the array, battery, controller and inverter; the controller's settings
    for the whole battery (not per cell) at ``battery_temp_c``: low-voltage disconnect (at the
    battery's rated discharge current for DC kits, whose disconnect follows the load current;
    the inverter's fixed cut-off for AC systems), reconnect, absorption and float voltages and
    the temperature compensation; cable sections and fuse ratings
    (:func:`fleet.kits.wiring`). ``params`` are the kits' kernel parameters
    (:func:`fleet.kits.kernel_parameters`), row for row.
    """
    from . import dispatch
    from .battery import voltage_tables
    vt = voltage_tables()
    K = dispatch.K
    rows: dict[str, dict] = {}

    def put(name, unit, values):
        rows[f"{name} ({unit})" if unit else name] = dict(zip(kits.kit_id, values))

    def col(name, default=np.nan):
        return kits[name].to_numpy() if name in kits else np.full(len(kits), default, dtype=object)

    put("description", "", col("kit_label", ""))
    put("scheme", "", col("scheme", ""))
    put("topology", "", np.where(col("topology", "") == "ac", "AC (inverter on the battery)", "DC (loads on the controller)"))
    put("system voltage", "V", col("system_voltage_v"))
    put("PV module", "", col("module_id", ""))
    put("modules in series", "count", col("modules_in_series"))
    put("strings in parallel", "count", col("strings_in_parallel"))
    put("array", "Wp", col("array_wp"))
    put("battery", "", col("battery_id", ""))
    put("chemistry", "", col("chemistry", ""))
    put("batteries in series x strings", "", [f"{int(a)} x {int(b)}" for a, b in zip(col("batteries_in_series", 0), col("battery_strings", 0))])
    put("battery capacity", "Ah", col("battery_ah"))
    put("battery nominal energy", "Wh", col("battery_nominal_wh"))
    put("battery usable energy", "Wh", col("battery_usable_wh"))
    put("usable depth of discharge", "fraction", col("usable_dod"))
    put("charge controller", "", col("controller_id", ""))
    put("controller kind", "", np.char.upper(col("controller_kind", "").astype(str)))
    put("controller rated current (all controllers)", "A", col("controller_max_a"))
    put("inverter", "", col("inverter_id", ""))
    put("output rating", "W", col("max_load_w"))
    set_lvd, set_lvr, set_abs, set_flt, comp = [], [], [], [], []
    for i in range(len(kits)):
        p = params[i]
        n = p[K["cells"]]
        sp = dispatch.pair_setpoints(p, vt[int(p[K["chemistry"]])], float(battery_temp_c), 0.0)
        x = p[K["disconnect_ref_c"]] if p[K["ac"]] > 0 else 1.0 / p[K["rated_hours"]]
        set_lvd.append(n * (sp[dispatch.S_LVD] + sp[dispatch.S_LVDK] * (sp[dispatch.S_XREF] - x)))
        set_lvr.append(n * sp[dispatch.S_LVR])
        set_abs.append(n * sp[dispatch.S_VABS])
        set_flt.append(n * sp[dispatch.S_VFLOAT])
        comp.append(1000.0 * n * p[K["temp_comp_v_per_k_cell"]])
    put(f"low-voltage disconnect at {battery_temp_c:g} degC", "V", set_lvd)
    put("low-voltage reconnect", "V", set_lvr)
    put(f"absorption voltage at {battery_temp_c:g} degC", "V", set_abs)
    put(f"float voltage at {battery_temp_c:g} degC", "V", set_flt)
    put("charge voltage temperature compensation", "mV/K", comp)
    put("PV circuit design current (1.25 x Isc)", "A", col("pv_circuit_current_a"))
    put("PV cable cross-section (copper)", "mm2", col("pv_cable_mm2"))
    put("PV cable voltage drop", "%", col("pv_cable_drop_pct"))
    put("string fuse (where 3 or more strings)", "A", col("string_fuse_a"))
    for circuit, what in (("battery", "controller to battery"), ("inverter", "battery to inverter"),
                          ("load", "controller load output to distribution")):
        put(f"{what}: design current", "A", col(f"{circuit}_circuit_current_a"))
        put(f"{what}: cable cross-section (copper)", "mm2", col(f"{circuit}_cable_mm2"))
        put(f"{what}: cable voltage drop", "%", col(f"{circuit}_cable_drop_pct"))
    put("battery fuse (controller circuit)", "A", col("battery_fuse_a"))
    put("battery fuse (inverter circuit)", "A", col("inverter_fuse_a"))
    put("capex per kit", "USD", col("capex_usd"))
    table = pd.DataFrame(rows).T
    table.index.name = "property"
    return table.reset_index()
