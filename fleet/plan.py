"""The whole planning run: sites → demand → weather → kits → dispatch →
reliability and cost → catalogue → plan tables.

This module composes the core; it reads no files and prints nothing. Long
stages report through an optional ``tracker`` (the CLI passes progress bars).

The stages that work site by site (demand, weather years, the options to simulate,
dispatch, the options' metrics and costs) run on chunks of sites
(:func:`plan_site_chunk`), in this process or on a Dask cluster
(:mod:`fleet.parallel`); only the options' metrics come back, so memory is bounded
by the chunk, not the program. The catalogue stage (:func:`choose_catalogue`) then
works on every option of the program.
"""

from __future__ import annotations

import time
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np
import pandas as pd

from . import battery, dispatch, economics, rule_of_thumb, transport
from .catalogue import CatalogueResult, custom_best, optimise_block_catalogue, optimise_catalogue
from .components import ComponentLibrary
from .config import ProgramConfig
from .demand import HOURS_PER_YEAR, service_units, settings_from_config, unit_loads
from .errors import InputError, Problem
from .battery import voltage_tables
from .iv import array_power_per_string, tables_for_kits
from .kits import (DesignConditions, candidate_kits, kernel_parameters, plant_parameters, plant_quantities, surge_ok,
                   unit_surge_need_w)
from .pv import combined_losses_fraction
from .resource import EMBEDDED, site_weather_from, utc_offset_hours

#: Kits whose array would give more than this many times the unit's yearly
#: demand are not offered to it (wasteful; keeps the search small).
OVERSIZE_LIMIT = 6.0
#: PV block counts tried per minigrid village and plant template, as multiples of the
#: count whose yearly array yield equals the yearly demand.
BLOCK_COUNT_FACTORS = (1.0, 1.25, 1.55, 1.95, 2.4)
#: Battery block counts tried with each, as usable storage in days of the village's daily
#: energy (the last one is what the rule of thumb asks for: 2 days through the inverter).
STORAGE_DAYS = (0.45, 0.8, 1.3, 2.2)
#: The block kinds a minigrid catalogue standardises (columns of the kit and option tables).
BLOCK_KINDS = ("pv_block_id", "battery_block_id", "inverter_id")


class _Quiet:
    def stage(self, name: str) -> None:  # noqa: D401 - protocol
        pass

    def wrap(self, iterable: Iterable, total: int, desc: str) -> Iterable:
        return iterable


@dataclass
class Weather:
    """Weather of every site, stacked for the kernel."""

    poa_wm2: np.ndarray  # (n_sites, n_years, 8760) float32
    cell_temp_c: np.ndarray  # same
    info: pd.DataFrame  # per site: cell, distance, offset, tilt, temperatures used, annual figures


@dataclass
class PlanResult:
    """Everything a run produces, as tables; writers turn it into files."""

    sites: Any  # GeoDataFrame with the plan's columns
    units: pd.DataFrame
    kits: pd.DataFrame  # every candidate
    bom: pd.DataFrame  # BOM lines of every candidate
    evaluations: pd.DataFrame  # one row per simulated (unit, kit[, blocks]) option
    options: pd.DataFrame  # the feasible options the catalogue chose from
    catalogues: dict[str, CatalogueResult]
    comparisons: pd.DataFrame
    unserved: pd.DataFrame
    weather: Weather
    demand: Any  # fleet.demand.UnitDemand
    unit_params: np.ndarray
    warnings: list[str]
    timings_s: dict[str, float]
    rejected_designs: pd.DataFrame
    config: ProgramConfig
    traces: dict[str, dict] = field(default_factory=dict)
    cost_curves: pd.DataFrame = field(default_factory=pd.DataFrame)
    kit_params: np.ndarray | None = None  # kernel parameters of ``kits``, row for row
    transport: pd.DataFrame = field(default_factory=pd.DataFrame)  # per site: depot, km, delivery USD
    screened: pd.DataFrame = field(default_factory=pd.DataFrame)  # options not simulated, with the reason
    kit_tables: Any = None  # fleet.iv.KitTables of ``kits``
    tier_profiles: dict | None = None
    weather_sources: dict | None = None
    scheduler: str = "inprocess"
    #: options listed but not simulated (:data:`CANDIDATE_COLUMNS`): each one's lower-bound cost
    #: showed that no answer of the run could use it (:mod:`fleet.search`)
    candidates: pd.DataFrame = field(default_factory=pd.DataFrame)
    search_rounds: int = 0  # catalogue rounds that simulated more options


def array_losses(cfg: ProgramConfig) -> float:
    """Combined soiling, wiring and other array losses (fraction of DC power)."""
    p = cfg["pv"]
    return float(combined_losses_fraction(p["soiling_fraction"], p["wiring_fraction"], p["other_losses_fraction"]))


def site_seed(seed: int, site_id: str) -> int:
    """A per-site seed that does not change when other sites are added or removed."""
    return (int(seed) * 1_000_003 + zlib.crc32(str(site_id).encode())) % (2**32)


def build_weather(sites, cfg: ProgramConfig, tracker=None, weather_sources=None, positions=None) -> Weather:
    """Weather years for every site: its own weather data where given, else the embedded grid
    (raises InputError for sites off the data). ``positions``: the sites' positions in the user's
    table when ``sites`` is a part of it (for the row numbers of problems)."""
    tracker = tracker or _Quiet()
    weather_sources = weather_sources or {}
    n_years = cfg["program"]["weather_years"]
    t, r, pvc = cfg["temperature"], cfg["resource"], cfg["pv"]
    poa = np.zeros((len(sites), n_years, HOURS_PER_YEAR), np.float32)
    tc = np.zeros_like(poa)
    rows, problems = [], []
    label = getattr(sites, "attrs", {}).get("source", "site table")
    for i, s in tracker.wrap(enumerate(sites.itertuples(index=False)), len(sites), "weather years"):
        mean_default = not np.isfinite(s.temp_mean_c)
        temp_mean = t["default_mean_c"] if mean_default else float(s.temp_mean_c)
        correction = float(s.ghi_correction) if np.isfinite(s.ghi_correction) else r["correction_factor"]
        source = weather_sources.get(str(s.site_id), EMBEDDED)
        try:
            w = site_weather_from(source, s.latitude, s.longitude, n_years=n_years,
                                  seed=site_seed(cfg["program"]["seed"], s.site_id),
                                  temp_mean_c=temp_mean, temp_daily_amplitude_k=t["daily_amplitude_k"],
                                  correction_factor=correction, persistence=r["persistence"],
                                  albedo=pvc["albedo"], max_distance_km=r["max_distance_km"],
                                  tilt_deg=pvc.get("tilt_deg"), azimuth_deg=pvc.get("azimuth_deg"))
        except ValueError as exc:
            problems.append(Problem(label, (i if positions is None else int(positions[i])) + 2, "latitude", f"site {s.site_id}: {exc}"))
            continue
        poa[i] = w.poa_wm2
        tc[i] = w.cell_temp_c
        annual_poa = w.poa_wm2.sum(axis=1) / 1000.0
        cell = w.cell
        rows.append({
            "site_id": s.site_id, "weather_source": w.source, "weather_source_kind": w.source_kind,
            "weather_data_distance_km": w.data_distance_km,
            "climate_cell_lat": cell.latitude_deg if cell else np.nan,
            "climate_cell_lon": cell.longitude_deg if cell else np.nan,
            "climate_cell_distance_km": cell.distance_km if cell else np.nan,
            "climate_cell_is_own": bool(cell.is_own_cell) if cell else True,
            "ghi_correction_used": correction if w.source_kind == "embedded" else 1.0,
            "utc_offset_h": w.utc_offset_hours,
            "tilt_deg": w.tilt_deg, "azimuth_deg": w.azimuth_deg, "elevation_m": w.elevation_m,
            "temp_mean_c_used": np.nan if w.temperature_from_data else temp_mean,
            "temp_mean_default": mean_default and not w.temperature_from_data,
            "temp_air_min_c": float(w.temp_air_c.min()),
            "temp_air_mean_c": float(w.temp_air_c.mean()),
            "design_temp_min_default": not np.isfinite(s.design_temp_min_c),
            "ghi_kwh_m2_day": float(w.daily_ghi_kwh_m2.mean()),
            "poa_kwh_m2_year_mean": float(annual_poa.mean()), "poa_kwh_m2_year_min": float(annual_poa.min()),
            "worst_month_ghi_kwh_m2_day": _worst_month(w.daily_ghi_kwh_m2),
        })
    if problems:
        raise InputError(problems)
    return Weather(poa, tc, pd.DataFrame(rows))


def _worst_month(daily: np.ndarray) -> float:
    days = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
    month = np.repeat(np.arange(12), days)
    means = np.array([daily[:, month == m].mean() for m in range(12)])
    return float(means.min())


def _design_quantile(values: np.ndarray, q: float, worse: str = "high") -> np.ndarray:
    """Value in the design weather year across years (last axis).

    The empirical q-quantile (inverted CDF: the smallest value whose share of
    years at or below it is at least q) of a metric where high is bad; for a
    metric where low is bad (``worse="low"``) the mirror image, so that both
    are read in the same bad year of ten when q = 0.9.
    """
    if worse == "high":
        return np.quantile(values, q, axis=-1, method="inverted_cdf")
    return -np.quantile(-values, q, axis=-1, method="inverted_cdf")


def build_pairs(units, design, kits, weather, sites, cfg) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Which (unit, kit[, block count]) options to simulate, and which were screened out and why.

    Solar home system options: a kit is screened out when the unit's peak exceeds its output
    rating, its motor start exceeds the inverter's surge rating, or its array cannot yield the
    demand (less the allowed unmet share) even in the best weather year; it is not offered when its
    array yields more than ``OVERSIZE_LIMIT`` times the demand in a mean year (the program's
    smallest kits always are). Minigrid options: each plant template (:mod:`fleet.kits`) with
    ``BLOCK_COUNT_FACTORS`` times the PV blocks whose mean-year yield meets the demand, battery
    blocks for ``STORAGE_DAYS`` of the daily energy (at most the template's parallel limit), and
    the fewest inverters that carry the peak and start the largest motor together.
    Vectorised over units x kits; options are listed unit by unit, kits in table order.
    """
    loss = array_losses(cfg)
    annual = weather.poa_wm2.sum(axis=2, dtype=np.float64)
    yield_best = annual.max(axis=1) / 1e6 * (1 - loss)  # best year, kWh/Wp
    yield_mean = annual.mean(axis=1) / 1e6 * (1 - loss)
    s_idx = units.site_index.to_numpy(np.int64)
    demand_kwh = (design.daily_energy_wh.to_numpy(float) + design.deferrable_wh_day.to_numpy(float)) * 365 / 1000.0
    peak = design.peak_power_w.to_numpy(float)
    site_target = sites["reliability_target"].to_numpy(dtype=float)[s_idx]
    site_target = np.where(np.isfinite(site_target), site_target, cfg["program"]["reliability_target"])
    surge_need = unit_surge_need_w(units, design, sites)  # W a unit's largest motor start asks for
    surge_pass = surge_ok(kits, surge_need)               # (units, kits); DC kits always pass
    wp = kits.array_wp.to_numpy(float)
    max_load = kits.max_load_w.to_numpy(float)
    k_scheme = kits.scheme.to_numpy()
    u_scheme = units.scheme.to_numpy()
    smallest = kits.groupby("scheme").array_wp.min()
    same = u_scheme[:, None] == k_scheme[None, :]
    shs = same & (u_scheme == "shs")[:, None]
    best_kwh = wp[None, :] * yield_best[s_idx][:, None]
    need_kwh = (demand_kwh * (1 - site_target))[:, None]
    reason = np.where(peak[:, None] > max_load[None, :], 1,
                      np.where(~surge_pass, 2, np.where(best_kwh * 0.98 < need_kwh, 3, 0)))
    oversized = ((wp[None, :] * yield_mean[s_idx][:, None] > OVERSIZE_LIMIT * demand_kwh[:, None])
                 & (wp > 2 * smallest.reindex(k_scheme).to_numpy(float))[None, :])
    offered = (shs & (reason == 0) & ~oversized) | (same & ~shs)
    uu, kk = np.nonzero(offered)
    one = np.ones((1, 3), np.int64)
    counts = [one] * len(uu)  # (PV blocks, battery blocks, inverters) per option
    usable = kits.battery_usable_wh.to_numpy(float)
    cap = kits.max_battery_blocks.to_numpy(np.int64) if "max_battery_blocks" in kits else np.ones(len(kits), np.int64)
    surge_w = kits.inverter_surge_w.to_numpy(float) if "inverter_surge_w" in kits else np.zeros(len(kits))
    daily_wh = demand_kwh * 1000.0 / 365.0
    for j in np.flatnonzero(u_scheme[uu] != "shs"):
        u, k = uu[j], kk[j]
        n_energy = demand_kwh[u] / max(wp[k] * yield_mean[s_idx[u]], 1e-9)
        n_pv = sorted({max(1, int(np.ceil(n_energy * f))) for f in BLOCK_COUNT_FACTORS})
        n_bat = sorted({int(min(cap[k], max(1, np.ceil(d * daily_wh[u] / usable[k])))) for d in STORAGE_DAYS})
        # inverters share the load and a motor start (# common practice for paralleled inverters)
        n_inv = max(1, int(np.ceil(peak[u] / max_load[k])), int(np.ceil(surge_need[u] / max(surge_w[k], 1e-9))))
        counts[j] = np.array([(a, b, n_inv) for a in n_pv for b in n_bat], np.int64)
    reps = np.array([len(c) for c in counts], dtype=np.int64)
    unit_rep = np.repeat(uu, reps)
    allc = np.concatenate(counts) if len(counts) else np.zeros((0, 3), np.int64)
    pairs = pd.DataFrame({"unit_idx": unit_rep, "kit_idx": np.repeat(kk, reps), "site_idx": s_idx[unit_rep],
                          "blocks": allc[:, 0], "battery_blocks": allc[:, 1], "inverters": allc[:, 2],
                          "target": site_target[unit_rep]})
    su, sk = np.nonzero(shs & (reason > 0))
    unit_ids, kit_ids = units.unit_id.to_numpy(), kits.kit_id.to_numpy()
    text = {1: lambda u, k: f"peak load {peak[u]:.0f} W exceeds the kit's output rating {max_load[k]:.0f} W",
            2: lambda u, k: (f"motor starting needs {surge_need[u]:.0f} W, above the inverter's surge rating "
                             f"{surge_w[k]:.0f} W"),
            3: lambda u, k: (f"array yields {best_kwh[u, k]:.0f} kWh/year in the best year, demand needs "
                             f"{need_kwh[u, 0]:.0f}")}
    screened = pd.DataFrame({"unit_id": unit_ids[su], "kit_id": kit_ids[sk], "blocks": 1,
                             "reason": [text[reason[u, k]](u, k) for u, k in zip(su, sk)]},
                            columns=["unit_id", "kit_id", "blocks", "reason"])
    return pairs, screened


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """num / den, 0 where den is 0 (nothing asked, nothing missing)."""
    return np.divide(num, den, out=np.zeros_like(num, dtype=float), where=den > 0)


def required_tier(units: pd.DataFrame, sites) -> np.ndarray:
    """Tier whose hours of supply a unit must get: its own tier for SHS households, the
    highest tier present at a minigrid village, 0 (none) for facilities and pumps."""
    out = np.zeros(len(units), dtype=int)
    for i, u in enumerate(units.itertuples(index=False)):
        if u.group.startswith("t"):
            out[i] = int(u.group[1])
        elif u.group == "village":
            s = sites.iloc[u.site_index]
            present = [t for t in range(1, 6) if int(s[f"households_t{t}"]) > 0]
            out[i] = max(present) if present else 0
    return out


def tier_achieved(supply_share: np.ndarray, share_needed: float, max_load_w: np.ndarray,
                  served_wh_day: np.ndarray, household: np.ndarray) -> np.ndarray:
    """Highest Multi-Tier Framework tier a unit gets in each year (0 = below tier 1).

    A tier counts when its hours of supply and evening hours are met on at
    least ``share_needed`` of days (``supply_share`` (..., 5)); for a solar home
    system household also the kit's output rating must reach the tier's peak
    capacity and the energy served per day its daily energy (ESMAP 2015). A
    minigrid village is judged on hours of supply only.
    """
    from .demand import MTF_THRESHOLDS
    achieved = np.zeros(supply_share.shape[:-1], dtype=int)
    for t in range(1, 6):
        ok = supply_share[..., t - 1] >= share_needed
        cap_ok = (max_load_w >= MTF_THRESHOLDS[t]["peak_w"])[:, None] & (served_wh_day >= MTF_THRESHOLDS[t]["daily_wh"])
        ok &= np.where(household[:, None], cap_ok, True)
        achieved = np.where(ok & (achieved == t - 1), t, achieved)
    return achieved


def battery_temperature_c(sites, cfg: ProgramConfig, weather_info: pd.DataFrame | None = None) -> np.ndarray:
    """Battery temperature per site, degC: the mean air temperature of its weather years
    (the site's ``temp_mean_c`` or the program default where the data has none) plus the
    program's enclosure offset."""
    offset = cfg["system"].get("battery_temp_offset_k", 0.0)
    if weather_info is not None and "temp_air_mean_c" in weather_info:
        mean = weather_info["temp_air_mean_c"].to_numpy(dtype=float)
    else:
        mean = (sites["temp_mean_c"].to_numpy(dtype=float) if "temp_mean_c" in sites
                else np.full(len(sites), np.nan))
        mean = np.where(np.isfinite(mean), mean, cfg["temperature"]["default_mean_c"])
    return mean + offset


def option_costs(kit_rows: pd.DataFrame, battery_life_years, delivery_usd, cfg: ProgramConfig,
                 battery_delivery_usd=None):
    """Present values (USD) per kit or block of options: lifecycle cost, of which salvage credit
    and transport. ``kit_rows`` are the options' kits (``capex_usd``, ``battery_capex_usd``,
    ``controller_capex_usd``, ``inverter_capex_usd``), ``delivery_usd`` one delivery to the
    option's site (a battery replacement travels at ``transport.battery_replacement_share`` of it,
    unless ``battery_delivery_usd`` says what one costs)."""
    e = cfg["economics"]
    p = cfg["program"]
    life = np.asarray(battery_life_years, dtype=float)
    delivery = np.asarray(delivery_usd, dtype=float)
    battery_delivery = (cfg["transport"]["battery_replacement_share"] * delivery if battery_delivery_usd is None
                        else np.asarray(battery_delivery_usd, dtype=float))
    parts = (kit_rows.capex_usd.to_numpy(float), kit_rows.battery_capex_usd.to_numpy(float), life,
             kit_rows.controller_capex_usd.to_numpy(float), kit_rows.inverter_capex_usd.to_numpy(float))
    lives = dict(horizon_years=p["horizon_years"], rate=p["discount_rate"],
                 controller_life_years=e["controller_life_years"], inverter_life_years=e["inverter_life_years"])
    lcc_one = economics.lifecycle_cost(*parts, om_fraction=e["om_fraction_per_year"],
                                       array_life_years=e["array_life_years"], delivery_usd=delivery,
                                       battery_delivery_usd=battery_delivery, **lives)
    salvage_one = economics.kit_salvage_present_value(*parts, array_life_years=e["array_life_years"], **lives)
    transport_one = economics.transport_present_value(delivery, battery_delivery, life, p["horizon_years"],
                                                      p["discount_rate"])
    return lcc_one, salvage_one, transport_one


def option_counts(table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(PV blocks, battery blocks, inverters) of each option of a pairs or evaluations table;
    a table with only ``blocks`` means plants of that many identical blocks (each kind)."""
    n_pv = table["blocks"].to_numpy(float)
    n_bat = table["battery_blocks"].to_numpy(float) if "battery_blocks" in table else n_pv
    n_inv = table["inverters"].to_numpy(float) if "inverters" in table else n_pv
    return n_pv, n_bat, n_inv


def deliveries(table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Deliveries from the depot per kit or plant, at year 0 and with each battery replacement:
    one (and one battery) per household kit; one per PV block and per battery block of a plant
    (its inverters travel with them; an assumption of ours), and one per battery block."""
    n_pv, n_bat, _ = option_counts(table)
    plant = table["scheme"].to_numpy() == "minigrid"
    return np.where(plant, n_pv + n_bat, 1.0), np.where(plant, n_bat, 1.0)


def _option_costs_delivered(qty, life, delivery_usd, table, cfg):
    """:func:`option_costs` of options with their deliveries (``delivery_usd``: one delivery)."""
    first, battery = deliveries(table)
    one = np.asarray(delivery_usd, float)
    return option_costs(qty, life, one * first, cfg,
                        battery_delivery_usd=cfg["transport"]["battery_replacement_share"] * one * battery)


def plant_design_label(kit_rows: pd.DataFrame, n_pv, n_bat, n_inv) -> np.ndarray:
    """'3 x PV48-..., 2 x BT48-..., 2 x INV-...' for plants, '' for household kits."""
    if "scheme" not in kit_rows or "pv_block_id" not in kit_rows:
        return np.full(len(kit_rows), "", dtype=object)
    out = np.full(len(kit_rows), "", dtype=object)
    plant = np.flatnonzero(kit_rows.scheme.to_numpy() == "minigrid")
    pv, bt, inv = (kit_rows[c].to_numpy()[plant] for c in BLOCK_KINDS)
    out[plant] = [f"{int(a)} x {p}, {int(b)} x {q}, {int(c)} x {r}"
                  for a, p, b, q, c, r in zip(np.asarray(n_pv)[plant], pv, np.asarray(n_bat)[plant], bt,
                                              np.asarray(n_inv)[plant], inv)]
    return out


def reprice_evaluations(ev: pd.DataFrame, kits: pd.DataFrame, cfg: ProgramConfig,
                        site_delivery: pd.DataFrame | None) -> pd.DataFrame:
    """The options of ``ev`` (from :func:`evaluate`) with their capex and lifecycle costs computed
    again from ``kits`` (new prices); reliability, battery life and energy are unchanged.
    ``site_delivery`` is the run's per-site transport table (``site_id``, ``delivery_usd``)."""
    out = ev.copy()
    k = kits.set_index("kit_id").loc[ev.kit_id.to_numpy()].reset_index()
    if site_delivery is not None and len(site_delivery):
        delivery = ev.site_id.map(site_delivery.set_index("site_id").delivery_usd).fillna(0.0).to_numpy(float)
    else:
        delivery = np.zeros(len(ev))
    q = plant_quantities(k, *option_counts(ev))
    lcc_one, salvage_one, transport_one = _option_costs_delivered(q, ev.battery_life_years.to_numpy(float),
                                                                  delivery, ev, cfg)
    mult = ev["count"].to_numpy(float)
    out["capex_usd"] = q.capex_usd.to_numpy(float) * mult
    out["lifecycle_cost_usd"] = lcc_one * mult
    out["transport_usd"] = transport_one * mult
    out["salvage_usd"] = salvage_one * mult
    p = cfg["program"]
    out["lcoe_usd_per_kwh"] = economics.levelised_cost_usd_per_kwh(
        lcc_one, ev.served_kwh_year_per_kit.to_numpy(float), p["horizon_years"], p["discount_rate"])
    return out


def calendar_lives(kit_rows: pd.DataFrame, battery_temp_c) -> np.ndarray:
    """Calendar life (years) of each option's battery at its temperature
    (:func:`fleet.battery.calendar_life_at`, per chemistry)."""
    chem = kit_rows.chemistry.to_numpy()
    temp = np.asarray(battery_temp_c, float)
    out = np.zeros(len(kit_rows))
    for name in np.unique(chem):
        rows = chem == name
        out[rows] = battery.calendar_life_at(kit_rows.calendar_life_years.to_numpy()[rows], temp[rows], name)
    return out


def _option_delivery(pairs, cfg, sites, site_delivery_usd) -> np.ndarray:
    """One delivery (USD) to each option's site: ``site_delivery_usd`` per site, else what the
    program's depots give, else 0."""
    depots = getattr(cfg, "depots", None)
    if site_delivery_usd is None and sites is not None and depots is not None:
        site_delivery_usd = transport.site_transport(sites, depots, cfg["transport"]).delivery_usd.to_numpy()
    return (np.asarray(site_delivery_usd, dtype=float)[pairs.site_idx.to_numpy()]
            if site_delivery_usd is not None else np.zeros(len(pairs)))


def lower_bound_costs(pairs: pd.DataFrame, units: pd.DataFrame, kits: pd.DataFrame, cfg: ProgramConfig,
                      sites=None, weather_info=None, site_delivery_usd=None) -> pd.DataFrame:
    """A lower bound on each option's lifecycle cost, before it is simulated (:mod:`fleet.search`).

    The simulated cost (:func:`evaluate`) differs only by the battery's life, the sooner of its
    cycling wear-out and its calendar life (:func:`fleet.battery.life_from_damage`); with the
    calendar life the cost is lowest, because lifecycle cost never rises with a longer life
    (each replacement comes later or drops out, and the last battery bought keeps more of its
    value at the horizon). Returns, per option: ``lb_cost_usd`` (USD, for all the unit's kits),
    ``calendar_life_years``, ``delivery_usd`` (one delivery), ``array_wp`` and
    ``battery_usable_wh`` (the kit's or plant's).
    """
    k = kits.iloc[pairs.kit_idx.to_numpy()].reset_index(drop=True)
    u = units.iloc[pairs.unit_idx.to_numpy()].reset_index(drop=True)
    qty = plant_quantities(k, *option_counts(pairs))
    temp = (battery_temperature_c(sites, cfg, weather_info)[pairs.site_idx.to_numpy()]
            if sites is not None else np.full(len(pairs), 25.0))
    calendar = calendar_lives(k, temp)
    delivery = _option_delivery(pairs, cfg, sites, site_delivery_usd)
    lcc_one, _, _ = _option_costs_delivered(qty, calendar, delivery, pairs.assign(scheme=u.scheme.to_numpy()), cfg)
    return pd.DataFrame({"lb_cost_usd": lcc_one * u["count"].to_numpy(float), "calendar_life_years": calendar,
                         "delivery_usd": delivery, "array_wp": qty.array_wp.to_numpy(float),
                         "battery_usable_wh": qty.battery_usable_wh.to_numpy(float)})


def evaluate(pairs, metrics, units, design, kits, cfg, sites=None, weather_info=None,
             site_delivery_usd=None) -> pd.DataFrame:
    """Reliability, service and lifecycle cost of every simulated option.

    Lifecycle cost (:func:`fleet.economics.lifecycle_cost`) includes transport from
    the depot (``transport_usd``: one delivery per kit or block at year 0 and a
    share of one with every battery replacement) and subtracts the salvage value
    left at the end of the horizon (``salvage_usd``); both present values, USD,
    for all the unit's kits. ``site_delivery_usd`` (per site, USD per kit or
    block; :func:`fleet.transport.site_transport`) defaults to what the program's
    depots give (``cfg.depots``), or 0 without ``sites`` or depots.
    """
    m = {name: metrics[:, :, j] for j, name in enumerate(dispatch.METRICS)}
    q = cfg["program"]["target_confidence"]
    # fractions of energy: sums of float32 hourly loads leave rounding dust (~1e-20) either side of 0
    unmet_frac = np.clip(_ratio(m["unmet_wh"], m["demand_wh"]), 0.0, 1.0)
    crit_frac = np.clip(_ratio(m["critical_unmet_wh"], m["critical_demand_wh"]), 0.0, 1.0)
    defer_frac = np.clip(_ratio(m["deferrable_demand_wh"] - m["deferrable_served_wh"], m["deferrable_demand_wh"]), 0.0, 1.0)
    k = kits.iloc[pairs.kit_idx.to_numpy()].reset_index(drop=True)
    u = units.iloc[pairs.unit_idx.to_numpy()].reset_index(drop=True)
    counts = option_counts(pairs)
    qty = plant_quantities(k, *counts)  # one kit, or one plant with its blocks
    mult = u["count"].to_numpy(dtype=float)  # kits (plants) bought for the unit
    supply_share = np.stack([m[f"days_supply_tier{t}"] for t in range(1, 6)], axis=-1) / 365.0
    household = u.group.str.match(r"t[1-5]$").to_numpy()
    achieved = tier_achieved(supply_share, cfg["program"]["tier_days_share"], qty.max_load_w.to_numpy(),
                             m["served_wh"] / 365.0, household)
    needed = required_tier(units, sites)[pairs.unit_idx.to_numpy()] if sites is not None else np.zeros(len(u), int)
    temp_batt = (battery_temperature_c(sites, cfg, weather_info)[pairs.site_idx.to_numpy()]
                 if sites is not None else np.full(len(pairs), 25.0))
    life = battery.life_from_damage(m["cycle_damage"].mean(axis=1), calendar_lives(k, temp_batt))
    p = cfg["program"]
    delivery = _option_delivery(pairs, cfg, sites, site_delivery_usd)
    lcc_one, salvage_one, transport_one = _option_costs_delivered(qty, life, delivery,
                                                                  pairs.assign(scheme=u.scheme.to_numpy()), cfg)
    served_kwh_year = m["served_wh"].mean(axis=1) / 1000.0  # the kernel ran whole plants
    out = pd.DataFrame({
        "unit_id": u.unit_id, "site_id": u.site_id, "scheme": u.scheme, "group": u.group,
        "count": u["count"], "kit_id": k.kit_id, "blocks": counts[0].astype(np.int64),
        "battery_blocks": counts[1].astype(np.int64), "inverters": counts[2].astype(np.int64),
        "plant_design": plant_design_label(k, *counts),
        **{col: (k[col].to_numpy() if col in k else np.full(len(k), "", object)) for col in BLOCK_KINDS},
        "array_wp": qty.array_wp.to_numpy(), "battery_usable_wh": qty.battery_usable_wh.to_numpy(),
        "target": pairs.target,
        "unmet_fraction_design": _design_quantile(unmet_frac, q),
        "critical_unmet_fraction_design": _design_quantile(crit_frac, q),
        "deferrable_unmet_fraction_design": _design_quantile(defer_frac, q),
        "tier_required": needed,
        "tier_achieved_design": _design_quantile(achieved.astype(float), q, worse="low").astype(int),
        "tier_hours_days_share_design": _design_quantile(
            np.take_along_axis(supply_share, np.maximum(needed - 1, 0)[:, None, None], axis=-1)[..., 0], q, worse="low"),
        "unmet_fraction_mean": unmet_frac.mean(axis=1),
        "unmet_fraction_worst": unmet_frac.max(axis=1),
        "lolp_design": _design_quantile(m["unmet_hours"] / HOURS_PER_YEAR, q),
        "disconnected_hours_design": _design_quantile(m["disconnected_hours"], q),
        "days_full_service_design": _design_quantile(m["days_full_service"], q, worse="low"),
        "evening_served_fraction_design": _design_quantile(m["evening_served_wh"] / np.maximum(m["evening_demand_wh"], 1e-9), q, worse="low"),
        "pv_spilled_fraction_mean": (m["pv_spilled_wh"] / np.maximum(m["pv_bus_wh"], 1e-9)).mean(axis=1),
        "soc_min": m["soc_min"].min(axis=1), "soc_mean": m["soc_mean"].mean(axis=1),
        "battery_cycles_per_year": m["battery_discharge_ah"].mean(axis=1) / (qty.battery_ah.to_numpy() * k.usable_dod.to_numpy()),
        "battery_life_years": life,
        "battery_replacement_year": np.where(life < p["horizon_years"], np.ceil(life), np.nan),
        "battery_temp_c": temp_batt,
        "days_without_full_charge_max": m["max_days_without_full_charge"].max(axis=1),
        "disconnected_days_design": _design_quantile(m["disconnected_days"], q),
        "evening_hours_served_design": _design_quantile(m["evening_hours_served"], q, worse="low"),
        "pv_used_fraction_mean": (m["pv_used_wh"] / np.maximum(m["pv_bus_wh"], 1e-9)).mean(axis=1),
        "controller_loss_kwh_year": (m["controller_loss_wh"] + m["controller_self_wh"]).mean(axis=1) / 1000.0,
        "inverter_loss_kwh_year": m["inverter_loss_wh"].mean(axis=1) / 1000.0,
        "served_kwh_year_per_kit": served_kwh_year,
        "capex_usd": qty.capex_usd.to_numpy() * mult,
        "lifecycle_cost_usd": lcc_one * mult,
        "transport_usd": transport_one * mult,
        "salvage_usd": salvage_one * mult,
        "balance_residual_wh": np.abs(m["balance_residual_wh"]).max(axis=1),
    })
    p_cfg = cfg["program"]
    energy_ok = out.unmet_fraction_design <= out.target + 1e-12
    tier_ok = out.tier_achieved_design >= out.tier_required
    service_ok = {"unmet": energy_ok, "tier": tier_ok, "both": energy_ok & tier_ok}[p_cfg["service_target"]]
    others_ok = ((tier_ok if p_cfg["service_target"] in ("tier", "both") else True)
                 & (out.critical_unmet_fraction_design <= p_cfg["critical_reliability_target"] + 1e-12)
                 & (out.deferrable_unmet_fraction_design <= p_cfg["deferrable_reliability_target"] + 1e-12))
    out["feasible"] = service_ok & others_ok
    # what the option meets apart from the unit's energy target (for curves against the target)
    out["meets_other_targets"] = others_ok
    out["lcoe_usd_per_kwh"] = economics.levelised_cost_usd_per_kwh(
        lcc_one, served_kwh_year, p["horizon_years"], p["discount_rate"])
    out["pair"] = np.arange(len(out))
    return out


def _best_block_counts(ev: pd.DataFrame) -> pd.DataFrame:
    """Per (minigrid unit, block type): the cheapest feasible block count."""
    mg = ev[(ev.scheme == "minigrid") & ev.feasible]
    return mg.loc[mg.groupby(["unit_id", "kit_id"]).lifecycle_cost_usd.idxmin()]


def catalogue_options(ev: pd.DataFrame) -> pd.DataFrame:
    """Feasible options for the integer program: SHS pairs and the best block count per block type."""
    shs = ev[(ev.scheme == "shs") & ev.feasible]
    return pd.concat([shs, _best_block_counts(ev)], ignore_index=True).rename(columns={"lifecycle_cost_usd": "cost_usd"})


def shortfall(row, cfg) -> str:
    """What an option misses, in words."""
    p = cfg["program"]
    parts = []
    if p["service_target"] in ("unmet", "both") and row.unmet_fraction_design > row.target + 1e-12:
        parts.append(f"unmet energy {row.unmet_fraction_design:.1%} in the design year, target {row.target:.1%}")
    if row.critical_unmet_fraction_design > p["critical_reliability_target"] + 1e-12:
        parts.append(f"critical load unmet {row.critical_unmet_fraction_design:.1%}, target {p['critical_reliability_target']:.1%}")
    if row.deferrable_unmet_fraction_design > p["deferrable_reliability_target"] + 1e-12:
        parts.append(f"deferrable energy unmet {row.deferrable_unmet_fraction_design:.1%}, "
                     f"target {p['deferrable_reliability_target']:.0%}")
    if p["service_target"] in ("tier", "both") and row.tier_achieved_design < row.tier_required:
        parts.append(f"tier {row.tier_achieved_design} reached, tier {row.tier_required} required")
    return "; ".join(parts) or "meets every target"


def explain_unserved(units, ev, screened, catalogues, options, result_cfg=None) -> pd.DataFrame:
    """Why each unit without a kit has none, and the nearest option."""
    rows = []
    for u in units.itertuples(index=False):
        res = catalogues[u.scheme]
        kit = res.assignment.get(u.unit_id, "")
        if kit:
            continue
        mine = ev[ev.unit_id == u.unit_id]
        if (options.unit_id == u.unit_id).any():
            reason = f"feasible kits exist, but none among the {len(res.chosen_kits)} catalogue types"
            near = options[options.unit_id == u.unit_id].sort_values("cost_usd").iloc[0]
            rows.append((u.unit_id, u.site_id, u.scheme, u.group, u.count, reason, near.kit_id, near.unmet_fraction_design))
            continue
        if not mine.empty:
            near = mine.sort_values(["unmet_fraction_design", "critical_unmet_fraction_design"]).iloc[0]
            name = str(near.get("plant_design", "") or "") or near.kit_id  # a plant: its blocks and counts
            reason = f"no candidate meets the target: nearest is {name} ({shortfall(near, result_cfg)})"
            rows.append((u.unit_id, u.site_id, u.scheme, u.group, u.count, reason, near.kit_id, near.unmet_fraction_design))
        else:
            s = screened[screened.unit_id == u.unit_id]
            reason = "no candidate kit fits: " + (s.reason.iloc[-1] if not s.empty else "no candidate of this scheme")
            rows.append((u.unit_id, u.site_id, u.scheme, u.group, u.count, reason, "", np.nan))
    return pd.DataFrame(rows, columns=["unit_id", "site_id", "scheme", "group", "count", "reason",
                                       "nearest_kit_id", "nearest_unmet_fraction_design"])


def solver_columns(scheme: str) -> list[str]:
    """Option columns the catalogue program of a scheme reads."""
    return ["unit_id", "kit_id", "cost_usd", *(BLOCK_KINDS if scheme == "minigrid" else ())]


def solve_catalogue(scheme: str, options: pd.DataFrame, scheme_units: list[str], cfg: ProgramConfig, *,
                    max_types: int, time_limit_s: float | None = None, lp_bound: bool = True) -> CatalogueResult:
    """The catalogue program of a scheme: kit types for household kits
    (:func:`fleet.catalogue.optimise_catalogue`); for minigrids at most ``max_types`` types of
    each block kind, PV block, battery block and inverter
    (:func:`fleet.catalogue.optimise_block_catalogue`), F per type of any kind."""
    c = cfg["catalogue"]
    kw = dict(max_types=int(max_types), cost_per_type_usd=c["cost_per_kit_type_usd"], solver=c["solver"],
              time_limit_s=c["time_limit_s"] if time_limit_s is None else time_limit_s, lp_bound=lp_bound)
    opts = options[solver_columns(scheme)]
    if scheme == "minigrid":
        return optimise_block_catalogue(opts, scheme_units, kinds=BLOCK_KINDS, **kw)
    return optimise_catalogue(opts, scheme_units, **kw)


def types_used(scheme: str, chosen: pd.DataFrame) -> int:
    """Kit types (household kits) or block types of every kind (minigrids) a set of options uses."""
    if not len(chosen):
        return 0
    if scheme == "minigrid":
        return int(sum(chosen[col].nunique() for col in BLOCK_KINDS))
    return int(chosen.kit_id.nunique())


def compare(ev, options, units, catalogues, cfg, thumb: pd.DataFrame | None = None,
            one_type: dict[str, CatalogueResult] | None = None) -> pd.DataFrame:
    """The plan beside a custom best kit per unit, a single kit type per scheme and, when
    given, the rule-of-thumb sizing (:mod:`fleet.rule_of_thumb`), with simulated reliability.
    ``one_type``: the one-type catalogue per scheme when already solved."""
    rows = []
    for scheme, res in catalogues.items():
        sch_units = units[units.scheme == scheme].unit_id.tolist()
        if not sch_units:
            continue
        opts = options[options.scheme == scheme]
        plan = opts.merge(res.assignment.rename("kit_id").reset_index(), on=["unit_id", "kit_id"])
        custom = custom_best(opts) if not opts.empty else opts
        one = (one_type or {}).get(scheme) or solve_catalogue(scheme, opts, sch_units, cfg, max_types=1)
        single = opts.merge(one.assignment.rename("kit_id").reset_index(), on=["unit_id", "kit_id"])
        one_name = "one type of each block for all" if scheme == "minigrid" else "one kit type for all"
        designs = [("plan (standard catalogue)", plan, len(res.chosen_kits)),
                   ("custom best kit per unit", custom, types_used(scheme, custom)),
                   (one_name, single, types_used(scheme, single))]
        if thumb is not None and len(thumb):
            rot = thumb[thumb.scheme == scheme].rename(columns={"lifecycle_cost_usd": "cost_usd"})
            designs.append(("rule of thumb (design-month sun, days of autonomy)", rot, types_used(scheme, rot)))
        for name, sel, ntypes in designs:
            meets = (sel.unmet_fraction_design <= sel.target + 1e-12) & sel.get("feasible", True)
            rows.append({
                "scheme": scheme, "design": name, "kit types": ntypes,
                "units served": int(len(sel)), "units in scheme": len(sch_units),
                "capex (USD)": float(sel.capex_usd.sum()), "lifecycle cost (USD)": float(sel.cost_usd.sum()),
                "lifecycle cost with type costs (USD)": float(sel.cost_usd.sum())
                + ntypes * cfg["catalogue"]["cost_per_kit_type_usd"],
                "mean unmet energy, design year (%)": float(100 * np.average(sel.unmet_fraction_design, weights=sel["count"])) if len(sel) else np.nan,
                "units meeting every target": int(np.sum(meets)) if len(sel) else 0,
            })
    return pd.DataFrame(rows)


def _chosen_cost(options: pd.DataFrame, res: CatalogueResult) -> tuple[int, float]:
    """Units given a kit by a catalogue solution and their lifecycle cost (USD)."""
    chosen = options.merge(res.assignment[res.assignment != ""].rename("kit_id").reset_index(),
                           on=["unit_id", "kit_id"])
    return int(len(chosen)), float(chosen.cost_usd.sum())


#: Points of the cost curves every run draws: catalogue sizes, and energy targets (unmet fraction).
CURVE_KIT_TYPES = tuple(range(1, 9))
CURVE_TARGETS = (0.01, 0.02, 0.05, 0.10, 0.20)
#: Time limit of each cost-curve point's integer program, s (at most the program's own).
CURVE_TIME_LIMIT_S = 20.0


@dataclass(frozen=True)
class SolvePoint:
    """One catalogue program: a scheme, the most types allowed and the energy target (None:
    every unit's own target); ``plan`` for the run's own catalogue (full time limit, LP bound)."""

    scheme: str
    max_types: int
    target: float | None
    plan: bool = False


def _curve_point_list(scheme: str, cfg: ProgramConfig, uniform: bool, kit_types=CURVE_KIT_TYPES,
                      targets=CURVE_TARGETS) -> list[tuple[str, float, SolvePoint]]:
    """(varied, value, program) of each cost-curve point of a scheme; a point whose options are
    the run's own (every catalogue size; the program's target when no site sets its own) is
    the plan's program with another number of types."""
    k_program = int(cfg["catalogue"][f"max_kit_types_{scheme}"])
    t_program = cfg["program"]["reliability_target"]
    out = []
    for k in kit_types:
        out.append(("kit types", float(k), SolvePoint(scheme, int(k), None, plan=int(k) == k_program)))
    for t in targets:
        same = abs(t - t_program) < 1e-12 and uniform
        out.append(("energy target (unmet fraction)", float(t),
                    SolvePoint(scheme, k_program, None if same else float(t), plan=same)))
    return out


def _feasible_at(ev: pd.DataFrame, target: float | None, cfg: ProgramConfig) -> pd.Series:
    """Which options count under a uniform energy target (None: the options' own feasibility):
    a design-year unmet fraction at most ``target`` and the other targets met."""
    if target is None:
        return ev.feasible
    energy_mode = cfg["program"]["service_target"] in ("unmet", "both")
    return ev.meets_other_targets & ((ev.unmet_fraction_design <= target + 1e-12) if energy_mode else True)


def options_at(ev: pd.DataFrame, scheme: str, target: float | None, cfg: ProgramConfig) -> pd.DataFrame:
    """Simulated options of a scheme the catalogue may use under ``target`` (:func:`_feasible_at`),
    with the program's columns and the option's row in ``ev`` (``pair``)."""
    need = [*dict.fromkeys(["unit_id", "kit_id", "scheme", "feasible", "lifecycle_cost_usd", "pair",
                            *(c for c in solver_columns(scheme) if c != "cost_usd")])]
    mine = ev.loc[ev.scheme.to_numpy() == scheme]
    return catalogue_options(mine[need].assign(feasible=_feasible_at(mine, target, cfg)))


def _optimistic_options(ev, cand_best, units, kits, point: SolvePoint, cfg) -> pd.DataFrame:
    """The options of a catalogue program with every option not simulated taken as feasible at
    its lower-bound cost (:mod:`fleet.search`); ``candidate`` is its row in ``cand_best``
    (-1 for a simulated option). Per plant template only the cheapest is kept."""
    sim = options_at(ev, point.scheme, point.target, cfg).assign(candidate=-1)
    if not len(cand_best):
        return sim
    c = cand_best[units.scheme.to_numpy()[cand_best.unit_idx.to_numpy(np.int64)] == point.scheme]
    if not len(c):
        return sim
    k = kits.iloc[c.kit_idx.to_numpy()]
    extra = pd.DataFrame({"unit_id": units.unit_id.to_numpy()[c.unit_idx.to_numpy()], "kit_id": k.kit_id.to_numpy(),
                          "scheme": point.scheme, "cost_usd": c.lb_cost_usd.to_numpy(float), "pair": -1,
                          "candidate": c.index.to_numpy(),
                          **{col: k[col].to_numpy() for col in BLOCK_KINDS if point.scheme == "minigrid" and col in k}})
    both = pd.concat([sim, extra], ignore_index=True)
    # simulated first among equal costs; one option per (unit, kit) (a plant template's cheapest)
    both = both.assign(_not_simulated=both.candidate >= 0).sort_values(["cost_usd", "_not_simulated"], kind="stable")
    return both.drop_duplicates(["unit_id", "kit_id"]).drop(columns="_not_simulated").sort_index()


def _cheapest_candidates(cand: pd.DataFrame) -> pd.DataFrame:
    """Per (unit, kit) the option not simulated with the lowest bound (the only one an optimistic
    program can use)."""
    if not len(cand):
        return cand
    return cand.loc[cand.groupby(["unit_idx", "kit_idx"], sort=False).lb_cost_usd.idxmin()]


def settle_catalogues(points: list[SolvePoint], ev: pd.DataFrame, cand: pd.DataFrame | None, units: pd.DataFrame,
                      kits: pd.DataFrame, cfg: ProgramConfig, simulate=None, tracker=None):
    """Solve catalogue programs, simulating the options their solutions need (:mod:`fleet.search`).

    Each round solves the programs not yet settled with the options not simulated taken as
    feasible at their lower bounds, simulates (``simulate(rows of cand)`` -> evaluations) the
    ones the solutions use, and repeats until every solution uses simulated options only; a
    settled solution stays optimal as more options are simulated (their costs only rise).
    After ``fleet.search.MAX_ROUNDS`` rounds, or without ``simulate``, a program left unsettled is
    solved over the simulated options and its status says so, with the optimistic program's
    cost as its bound. Returns (point -> CatalogueResult, evaluations with the new options,
    candidates left, rounds).
    """
    import dataclasses

    from .search import MAX_ROUNDS

    tracker = tracker or _Quiet()
    c = cfg["catalogue"]
    cand = cand if cand is not None else pd.DataFrame(columns=list(CANDIDATE_COLUMNS))
    scheme_units = {s: units.unit_id[units.scheme == s].tolist() for s in ("shs", "minigrid")}
    results: dict[SolvePoint, CatalogueResult] = {}
    pending = list(dict.fromkeys(points))
    rounds = 0

    def solve(point, opts):
        limit = None if point.plan else min(float(c["time_limit_s"]), CURVE_TIME_LIMIT_S)
        return solve_catalogue(point.scheme, opts, scheme_units[point.scheme], cfg, max_types=point.max_types,
                               time_limit_s=limit, lp_bound=point.plan)

    while pending:
        best = _cheapest_candidates(cand)
        with ThreadPoolExecutor(max_workers=2) as pool:  # the solver runs as a separate process
            by_options = {(p.scheme, p.target): None for p in pending}  # programs with the same options
            for key in by_options:
                by_options[key] = _optimistic_options(ev, best, units, kits, SolvePoint(key[0], 1, key[1]), cfg)
            opts = {p: by_options[(p.scheme, p.target)] for p in pending}
            futures = {p: pool.submit(solve, p, opts[p]) for p in pending}
            solved = {p: f.result() for p, f in futures.items()}
        need, unsettled = set(), []
        for p in pending:
            chosen = _chosen_rows(opts[p], solved[p])
            used = chosen.candidate[chosen.candidate >= 0].to_numpy()
            if len(used):
                unsettled.append(p)
                need.update(used.tolist())
                need.update(_next_candidates(cand, chosen.unit_id[chosen.candidate >= 0], units, kits, p.scheme,
                                             solved[p].chosen_kits).tolist())
                # a unit with no simulated option that counts here is served only by hope: all of its
                # options must be known (the big penalty on an unserved unit makes the program try each)
                # and from round EXHAUST_FROM_ROUND on, any unit still given an unsimulated option gets
                # all of its options simulated (the types the program tries change from round to round)
                known = opts[p].unit_id[opts[p].candidate < 0]
                hopeful = chosen.unit_id[chosen.candidate >= 0].to_numpy()
                hopeful = hopeful if rounds + 1 >= EXHAUST_FROM_ROUND else np.setdiff1d(hopeful, known.to_numpy())
                if len(hopeful):
                    wanted = np.isin(units.unit_id.to_numpy(), hopeful)
                    need.update(cand.index[wanted[cand.unit_idx.to_numpy(np.int64)]].tolist())
            else:
                results[p] = solved[p]
        if not unsettled:
            break
        if simulate is None or rounds >= MAX_ROUNDS:
            for p in unsettled:  # the best over what was simulated, bounded by the optimistic program
                res = solve(p, options_at(ev, p.scheme, p.target, cfg))
                bound = min(res.lower_bound_usd, solved[p].lower_bound_usd if p.plan else solved[p].objective_usd)
                gap = (res.objective_usd - bound) / res.objective_usd if res.objective_usd > 0 else 0.0
                results[p] = dataclasses.replace(
                    res, lower_bound_usd=bound, gap=max(gap, res.gap),
                    status=f"{res.status} over the options simulated (search not settled after {rounds} rounds)")
            break
        rounds += 1
        rows = cand.loc[sorted(need)]
        tracker.stage(f"catalogue round {rounds}: {len(rows):,} more options simulated for "
                      f"{len(unsettled)} catalogue program(s)")
        new = simulate(rows)
        ev = pd.concat([ev, new], ignore_index=True)
        ev["pair"] = np.arange(len(ev))
        cand = cand.drop(index=rows.index)
        pending = unsettled
    return results, ev, cand, rounds


#: Options not simulated of one unit and kit (or plant template) simulated together in a
#: catalogue round: the ones with the lowest bounds.
ROUND_BATCH = 3
#: From this catalogue round on, a unit still given an option not simulated has all its options
#: simulated (bounds the number of rounds; each round builds the weather of its sites again).
EXHAUST_FROM_ROUND = 4


def _next_candidates(cand: pd.DataFrame, unit_ids, units: pd.DataFrame, kits: pd.DataFrame, scheme: str,
                     chosen_types) -> np.ndarray:
    """Rows of ``cand`` worth simulating with a solution's unsimulated choices (fewer rounds):
    for each of ``unit_ids``, its options under the solution's types (household kits among
    ``chosen_types``; plant templates whose blocks all are), ``ROUND_BATCH`` per kit, lowest
    bounds first."""
    chosen = set(map(str, chosen_types))
    if scheme == "minigrid":
        usable = np.all([kits[c].astype(str).isin(chosen).to_numpy() for c in BLOCK_KINDS if c in kits], axis=0)
    else:
        usable = kits.kit_id.astype(str).isin(chosen).to_numpy()
    wanted = np.isin(units.unit_id.to_numpy(), np.asarray(unit_ids))
    rows = cand[wanted[cand.unit_idx.to_numpy(np.int64)] & usable[cand.kit_idx.to_numpy(np.int64)]]
    if not len(rows):
        return np.zeros(0, np.int64)
    rows = rows.sort_values("lb_cost_usd", kind="stable")
    return rows.groupby(["unit_idx", "kit_idx"], sort=False).head(ROUND_BATCH).index.to_numpy()


def _chosen_rows(options: pd.DataFrame, res: CatalogueResult) -> pd.DataFrame:
    """The options a catalogue solution gives its units."""
    return options.merge(res.assignment[res.assignment != ""].rename("kit_id").reset_index(),
                         on=["unit_id", "kit_id"])


def catalogue_points(units: pd.DataFrame, cfg: ProgramConfig, ev: pd.DataFrame) -> list[SolvePoint]:
    """Every catalogue program a run solves: the plan's, one type for all, the cost curves'."""
    c = cfg["catalogue"]
    t_program = cfg["program"]["reliability_target"]
    uniform = bool(np.allclose(ev.target.to_numpy(float), t_program)) if len(ev) else True
    out = []
    for scheme in ("shs", "minigrid"):
        if not (units.scheme == scheme).any():
            continue
        out.append(SolvePoint(scheme, int(c[f"max_kit_types_{scheme}"]), None, plan=True))
        out.append(SolvePoint(scheme, 1, None, plan=int(c[f"max_kit_types_{scheme}"]) == 1))
        out += [p for _, _, p in _curve_point_list(scheme, cfg, uniform)]
    return list(dict.fromkeys(out))


def cost_curves(ev: pd.DataFrame, units: pd.DataFrame, cfg: ProgramConfig,
                solved: dict[SolvePoint, CatalogueResult]) -> pd.DataFrame:
    """Lifecycle cost of the best catalogue against the number of kit types allowed (at the
    program's targets) and against the energy target (at the program's number of types), per
    scheme: one integer program per point (:func:`settle_catalogues` solves them).

    Under a uniform target ``t`` an option counts when its design-year unmet fraction is at
    most ``t`` and it meets the other targets (critical and deferrable loads, tier of service).
    Returns one row per point with the solver's status and gap (0 when the solver proves the
    point optimal; no separate LP bound is solved for the curves).
    """
    c = cfg["catalogue"]
    t_program = cfg["program"]["reliability_target"]
    uniform = bool(np.allclose(ev.target.to_numpy(float), t_program)) if len(ev) else True
    rows = []
    for scheme in ("shs", "minigrid"):
        scheme_units = units[units.scheme == scheme].unit_id.tolist()
        if not scheme_units:
            continue
        for varied, value, point in _curve_point_list(scheme, cfg, uniform):
            res = solved[point]
            n_served, cost = _chosen_cost(options_at(ev, scheme, point.target, cfg), res)
            rows.append({
                "scheme": scheme, "varied": varied, "value": value, "kit types allowed": point.max_types,
                "kit types chosen": len(res.chosen_kits), "units served": n_served,
                "units in scheme": len(scheme_units),
                "lifecycle cost (USD)": cost,
                "lifecycle cost with type costs (USD)": cost + len(res.chosen_kits) * c["cost_per_kit_type_usd"],
                "solver status": res.status, "gap (%)": 100.0 * res.gap,
            })
    return pd.DataFrame(rows)


def design_conditions(sites, cfg: ProgramConfig, weather_info: pd.DataFrame | None = None) -> DesignConditions:
    """Temperatures the kits' electrical checks use: the coldest site design minimum (a
    measured year's coldest hour where the site gives none; the program default where any
    site has neither) and the program's hot cell temperature."""
    mins = sites["design_temp_min_c"].to_numpy(dtype=float).copy()
    if weather_info is not None and len(weather_info):
        from_data = weather_info.temp_air_min_c.to_numpy(dtype=float)
        measured = (weather_info.weather_source_kind == "measured").to_numpy()
        mins = np.where(~np.isfinite(mins) & measured, from_data, mins)
    cold = float(np.nanmin(mins)) if np.isfinite(mins).any() else cfg["temperature"]["default_min_c"]
    if not np.isfinite(mins).all():
        cold = min(cold, cfg["temperature"]["default_min_c"])
    return DesignConditions(cold_ambient_c=cold, hot_cell_c=cfg["system"]["design_cell_temp_hot_c"])


def build_demand(sites, cfg: ProgramConfig, tier_profiles: dict | None = None):
    """Service units of every site with their design demand columns, and their hourly loads
    (:class:`fleet.demand.UnitDemand`) on each site's local clock."""
    units = service_units(sites)
    offsets = np.array([utc_offset_hours(la, lo) for la, lo in zip(sites.latitude, sites.longitude)])
    demand = unit_loads(sites, units, settings_from_config(cfg, tier_profiles), seed=cfg["program"]["seed"],
                        utc_offsets_h=offsets)
    return pd.concat([units, demand.design], axis=1), demand


#: Sites per chunk of the per-site stages (weather, array power, dispatch, option metrics):
#: about 35 MB of weather and at most a few hundred MB of array power per chunk at 10 years.
CHUNK_SITES = 25


def _design_conditions_for(sites, cfg: ProgramConfig, weather_sources) -> DesignConditions:
    """:func:`design_conditions` of the whole program, building the weather of only the sites whose
    measured year sets their cold design temperature (those without ``design_temp_min_c``)."""
    info = None
    if weather_sources:
        from .weather_files import MeasuredYear
        blank = ~np.isfinite(sites["design_temp_min_c"].to_numpy(dtype=float))
        need = [i for i in np.flatnonzero(blank)
                if isinstance(weather_sources.get(str(sites.site_id.iat[i])), MeasuredYear)]
        if need:
            part = build_weather(sites.iloc[need].reset_index(drop=True), cfg, weather_sources=weather_sources,
                                 positions=need).info
            info = pd.DataFrame({"temp_air_min_c": np.nan, "weather_source_kind": "embedded"}, index=range(len(sites)))
            info.loc[need, "temp_air_min_c"] = part.temp_air_min_c.to_numpy()
            info.loc[need, "weather_source_kind"] = part.weather_source_kind.to_numpy()
    return design_conditions(sites, cfg, info)


@dataclass
class SiteChunk:
    """What the per-site stages give for a chunk of sites (positions ``first``..): units with
    their design demand, weather summary, options screened out, and the simulated options' metrics."""

    first: int
    units: pd.DataFrame
    info: pd.DataFrame
    screened: pd.DataFrame
    evaluations: pd.DataFrame
    problems: list
    seconds: dict
    candidates: pd.DataFrame = field(default_factory=pd.DataFrame)  # options not simulated (CANDIDATE_COLUMNS)


def plan_site_chunk(positions, *, sites, kits, params, tables, cfg: ProgramConfig, delivery_usd,
                    tier_profiles=None, weather_sources=None, numba_threads: int | None = None) -> SiteChunk:
    """The per-site stages for the sites at ``positions`` (consecutive): demand, weather years,
    the options to simulate (:func:`build_pairs`), dispatch (:func:`simulate_chunked`) and the
    options' metrics and costs (:func:`evaluate`). Every result depends only on these sites and
    the program, so chunks can run anywhere and in any order (:mod:`fleet.parallel`). Input
    problems (a site off the resource data) are returned, not raised, so that all are reported."""
    from .parallel import kernel_threads

    pos = np.asarray(list(positions), dtype=np.int64)
    seconds: dict[str, float] = {}
    with kernel_threads(numba_threads):
        t = time.perf_counter()
        sub = sites.iloc[pos].reset_index(drop=True)
        units, demand = build_demand(sub, cfg, tier_profiles)
        seconds["demand"] = time.perf_counter() - t
        t = time.perf_counter()
        try:
            weather = build_weather(sub, cfg, None, weather_sources, positions=pos)
        except InputError as exc:
            return SiteChunk(int(pos[0]), units.iloc[0:0], pd.DataFrame(), pd.DataFrame(), pd.DataFrame(),
                             list(exc.problems), seconds)
        seconds["weather"] = time.perf_counter() - t
        t = time.perf_counter()
        pairs, screened = build_pairs(units, demand.design, kits, weather, sub, cfg)
        seconds["options"] = time.perf_counter() - t
        run = _chunk_simulator(weather, demand, units, sub, kits, params, tables, cfg,
                               np.asarray(delivery_usd, float)[pos], seconds)
        info = weather.info.assign(design_month_sun_hours=rule_of_thumb.design_month_sun_hours(weather.poa_wm2))
        if option_search(cfg) == "every":
            ev, cand = run(pairs), pairs.iloc[0:0].assign(lb_cost_usd=0.0)
        else:
            t = time.perf_counter()
            ev, cand = search_site_options(pairs, units, kits, cfg, sub, weather.info,
                                           np.asarray(delivery_usd, float)[pos],
                                           info.design_month_sun_hours.to_numpy(float), run)
            seconds["search"] = time.perf_counter() - t - seconds.get("dispatch", 0.0) - seconds.get("metrics", 0.0)
    cand = _candidate_table(cand, pos)
    units = units.assign(site_index=pos[units.site_index.to_numpy()])
    return SiteChunk(int(pos[0]), units, info, screened, ev, [], seconds, cand)


def option_search(cfg: ProgramConfig) -> str:
    """How options are chosen for simulation: 'bounded' (default; :mod:`fleet.search`) or
    'every' (every option build_pairs lists is simulated)."""
    return str(cfg["catalogue"].get("option_search", "bounded"))


#: Columns of the table of options not simulated (numbers within the program: units, sites and
#: kits by position).
CANDIDATE_COLUMNS = ("unit_idx", "site_idx", "kit_idx", "blocks", "battery_blocks", "inverters", "target",
                     "lb_cost_usd", "calendar_life_years", "delivery_usd")


def _candidate_table(cand: pd.DataFrame, pos: np.ndarray) -> pd.DataFrame:
    """Options of a chunk left unsimulated, slim, with sites numbered across the program (units
    are numbered across the program when the chunks are joined)."""
    out = pd.DataFrame({c: cand[c].to_numpy() if c in cand else np.zeros(len(cand)) for c in CANDIDATE_COLUMNS})
    out["site_idx"] = pos[out.site_idx.to_numpy(np.int64)] if len(out) else out.site_idx
    for c in ("unit_idx", "site_idx", "kit_idx"):
        out[c] = out[c].astype(np.int32)
    for c in ("blocks", "battery_blocks", "inverters"):
        out[c] = out[c].astype(np.int16)
    return out


def _chunk_simulator(weather, demand, units, sites, kits, params, tables, cfg, delivery_usd, seconds):
    """A function simulating options (a pairs table of these sites) and returning their
    evaluations; adds its time to ``seconds['dispatch']`` and ``seconds['metrics']``."""
    uparams = unit_parameters(units, cfg)
    temp = battery_temperature_c(sites, cfg, weather.info)

    def run(rows: pd.DataFrame) -> pd.DataFrame:
        rows = rows.reset_index(drop=True)
        t = time.perf_counter()
        metrics = simulate_chunked(weather, demand, uparams, params, tables, rows, _Quiet(), temp)
        seconds["dispatch"] = seconds.get("dispatch", 0.0) + time.perf_counter() - t
        t = time.perf_counter()
        ev = evaluate(rows, metrics, units, demand.design, kits, cfg, sites, weather.info,
                      site_delivery_usd=delivery_usd)
        seconds["metrics"] = seconds.get("metrics", 0.0) + time.perf_counter() - t
        return ev

    return run


def search_site_options(pairs, units, kits, cfg, sites, weather_info, delivery_usd, sun_hours, run):
    """Simulate the options of a chunk that some per-unit answer needs (:func:`fleet.search.settle_groups`):
    each unit's cheapest feasible kit (household kits) or each plant template's cheapest feasible
    block counts, and the option the rule of thumb gives it (:func:`fleet.rule_of_thumb.choose`:
    the cheapest meeting the rule, else the largest). Returns (evaluations of the simulated
    options in the order of ``pairs``, the options not simulated with their lower bounds).
    The catalogue rounds simulate more where the catalogue needs them (:func:`choose_catalogue`)."""
    from .search import group_codes, settle_groups

    bounds = lower_bound_costs(pairs, units, kits, cfg, sites, weather_info, delivery_usd)
    lb = bounds.lb_cost_usd.to_numpy(float)
    u = pairs.unit_idx.to_numpy(np.int64)
    scheme = units.scheme.to_numpy()[u]
    plant = scheme == "minigrid"
    custom = group_codes(u, np.where(plant, pairs.kit_idx.to_numpy(np.int64), -1))
    daily = (units.daily_energy_wh + units.deferrable_wh_day).to_numpy(float)[u]
    wp, usable = bounds.array_wp.to_numpy(float), bounds.battery_usable_wh.to_numpy(float)
    meets = rule_of_thumb.rule_needs(wp, usable, daily, np.asarray(sun_hours, float)[pairs.site_idx.to_numpy()],
                                     scheme)[2]
    # the rule's fallback when no option meets it: the largest array, then the most storage
    frame = pd.DataFrame({"u": u, "wp": wp, "usable": usable})
    top_wp = frame.groupby("u").wp.transform("max").to_numpy()
    top_usable = frame.usable.where(wp == top_wp).groupby(frame.u).transform("max").to_numpy()
    any_meets = np.bincount(u[meets], minlength=len(units)).astype(bool)[u]
    rule = np.where(any_meets, meets, (wp == top_wp) & (usable == top_usable))
    # the custom best under the program's targets and under each uniform target of the cost curves
    # (their catalogues then need few rounds); the rule of thumb's pick counts whatever it meets
    targets = [None, *CURVE_TARGETS]
    parts = []

    def simulate(idx):
        ev = run(pairs.iloc[idx]).assign(_position=idx)
        parts.append(ev)
        qual = [_feasible_at(ev, t, cfg).to_numpy(bool) for t in targets] + [np.ones(len(ev), bool)]
        return ev.lifecycle_cost_usd.to_numpy(float), np.column_stack(qual)

    done = settle_groups(lb, [custom] * len(targets) + [np.where(rule, u, -1)], simulate)
    ev = (pd.concat(parts, ignore_index=True).sort_values("_position", kind="stable").drop(columns="_position")
          .reset_index(drop=True) if parts else run(pairs.iloc[0:0]))
    return ev, pd.concat([pairs, bounds[["lb_cost_usd", "calendar_life_years", "delivery_usd"]]], axis=1)[~done]


def simulate_options_chunk(item, *, sites, kits, params, tables, cfg: ProgramConfig, delivery_usd,
                           tier_profiles=None, weather_sources=None, numba_threads: int | None = None) -> pd.DataFrame:
    """Simulate given options of a few sites (``item``: the sites' positions and the options, a
    table with ``CANDIDATE_COLUMNS`` and ``unit_id``), building the sites' demand and weather
    again (both are seeded per site, so they are the ones the first pass used); returns their
    evaluations (:func:`evaluate`)."""
    from .parallel import kernel_threads

    positions, rows = item
    pos = np.asarray(list(positions), dtype=np.int64)
    with kernel_threads(numba_threads):
        sub = sites.iloc[pos].reset_index(drop=True)
        units, demand = build_demand(sub, cfg, tier_profiles)
        weather = build_weather(sub, cfg, None, weather_sources, positions=pos)
        local_site = pd.Series(np.arange(len(pos)), index=pos)
        local_unit = pd.Series(np.arange(len(units)), index=units.unit_id.to_numpy())
        pairs = pd.DataFrame({"unit_idx": local_unit.loc[rows.unit_id.to_numpy()].to_numpy(np.int64),
                              "kit_idx": rows.kit_idx.to_numpy(np.int64),
                              "site_idx": local_site.loc[rows.site_idx.to_numpy()].to_numpy(np.int64),
                              "blocks": rows.blocks.to_numpy(np.int64),
                              "battery_blocks": rows.battery_blocks.to_numpy(np.int64),
                              "inverters": rows.inverters.to_numpy(np.int64), "target": rows.target.to_numpy(float)})
        run = _chunk_simulator(weather, demand, units, sub, kits, params, tables, cfg,
                               np.asarray(delivery_usd, float)[pos], {})
        return run(pairs)


#: Option columns the rule-of-thumb comparison reads (a slice, not a copy of every column).
THUMB_COLUMNS = ("unit_id", "site_id", "scheme", "count", "kit_id", "blocks", "battery_blocks", "inverters",
                 *BLOCK_KINDS, "array_wp", "battery_usable_wh", "target", "feasible", "unmet_fraction_design",
                 "capex_usd", "lifecycle_cost_usd")


def choose_catalogue(ev: pd.DataFrame, units: pd.DataFrame, kits: pd.DataFrame, cfg: ProgramConfig,
                     screened: pd.DataFrame, sun_hours: pd.Series, candidates: pd.DataFrame | None = None,
                     simulate=None, tracker=None) -> dict:
    """The catalogue stage on the options' metrics and costs: the integer program per scheme,
    one type for all and the cost curves (:func:`settle_catalogues`, simulating with
    ``simulate`` the options in ``candidates`` that they need), reasons for units without a kit
    and the comparisons (custom per unit, rule of thumb, one kit for all). Returns a dict of
    those, the evaluations with the options simulated here, the candidates left, and
    ``warnings``."""
    c = cfg["catalogue"]
    points = catalogue_points(units, cfg, ev)
    solved, ev, candidates, rounds = settle_catalogues(points, ev, candidates, units, kits, cfg, simulate, tracker)
    options = catalogue_options(ev)
    catalogues = {}
    for scheme in ("shs", "minigrid"):
        point = SolvePoint(scheme, int(c[f"max_kit_types_{scheme}"]), None, plan=True)
        catalogues[scheme] = solved.get(point) or solve_catalogue(scheme, options[options.scheme == scheme], [], cfg,
                                                                  max_types=point.max_types)
    one_type = {p.scheme: solved[p] for p in points if p.max_types == 1 and p.target is None}
    unserved = explain_unserved(units, ev, screened, catalogues, options, cfg)
    comparisons = compare(ev, options, units, catalogues, cfg,
                          thumb=rule_of_thumb.choose(ev[[c for c in THUMB_COLUMNS if c in ev]], units, kits, sun_hours)
                          if len(ev) else None, one_type=one_type)
    curves = cost_curves(ev, units, cfg, solved)
    warnings = []
    for scheme, res in catalogues.items():
        if res.gap > 0.01:
            warnings.append(f"{scheme} catalogue: gap to the LP bound is {res.gap:.1%} ({res.status}).")
    if len(unserved):
        warnings.append(f"{len(unserved)} service unit(s) have no kit; see the 'unserved' table for reasons.")
    return {"options": options, "catalogues": catalogues, "unserved": unserved, "comparisons": comparisons,
            "cost_curves": curves, "warnings": warnings, "evaluations": ev, "candidates": candidates,
            "rounds": rounds}


def _weather_warnings(info: pd.DataFrame, cfg: ProgramConfig) -> list[str]:
    warnings = []
    n_default = int(info.temp_mean_default.sum())
    if n_default:
        ids = ", ".join(info.site_id[info.temp_mean_default].head(10))
        warnings.append(f"{n_default} site(s) have no temp_mean_c; the program default "
                        f"{cfg['temperature']['default_mean_c']} degC was used ({ids}{', ...' if n_default > 10 else ''}).")
    for r in info[~info.climate_cell_is_own].itertuples(index=False):
        warnings.append(f"site {r.site_id}: its own resource grid cell has no data; the nearest cell with data, "
                        f"{r.climate_cell_distance_km:.0f} km away, was used.")
    measured = info[(info.weather_source_kind == "measured") & (info.weather_data_distance_km > 50)]
    for r in measured.itertuples(index=False):
        warnings.append(f"site {r.site_id}: its weather file's station is {r.weather_data_distance_km:.0f} km away.")
    return warnings


def run_plan(sites, library: ComponentLibrary, cfg: ProgramConfig, tracker=None,
             tier_profiles: dict | None = None, weather_sources: dict | None = None,
             scheduler: str | None = None, chunk_sites: int = CHUNK_SITES) -> PlanResult:
    """Plan a program end to end; see the module docstring.

    ``tier_profiles`` (from :func:`fleet.profiles.read_tier_profiles`) replaces
    the built-in hourly profiles of the tiers it names; ``weather_sources``
    (site_id -> measured year or monthly climate, from
    :mod:`fleet.weather_files`) replaces the embedded resource at those sites.
    ``scheduler`` says where the per-site stages run (:mod:`fleet.parallel`: in this
    process by default, ``"local:N"`` or a ``dask.distributed`` scheduler address); they run
    ``chunk_sites`` sites at a time, so memory is bounded by the chunk, not the program. The
    plan is the same whichever way it ran.
    """
    from .parallel import runner, site_chunks

    tracker = tracker or _Quiet()
    timings: dict[str, float] = {}
    warnings: list[str] = []

    t = time.perf_counter()
    tracker.stage("kits")
    s = cfg["system"]
    cond = _design_conditions_for(sites, cfg, weather_sources)
    kits, bom, rejected = candidate_kits(library, voltages_v=s["voltages_v"], max_parallel_strings=s["max_parallel_battery_strings"], cond=cond,
                                    max_plant_lifepo4_blocks=s.get("max_plant_lifepo4_blocks"))
    warnings += [f"component library: {n}" for n in library.notes]
    tables = tables_for_kits(kits, library)
    params = kernel_parameters(kits, tables, reconnect_hysteresis_soc=s["reconnect_hysteresis_soc"],
                               pv_losses_fraction=array_losses(cfg))
    delivery = transport.site_transport(sites, getattr(cfg, "depots", None), cfg["transport"])
    warnings += transport.depot_warnings(delivery, getattr(cfg, "depots", None), getattr(cfg, "depots_note", ""))
    timings["kits"] = time.perf_counter() - t

    t = time.perf_counter()
    chunks = site_chunks(len(sites), chunk_sites)
    with runner(scheduler) as run:
        tracker.stage(f"sites: demand, weather, dispatch and metrics, {len(chunks)} chunk(s) of up to "
                      f"{chunk_sites} sites, {cfg['program']['weather_years']} years ({run.name})")
        shared = dict(sites=sites, kits=kits, params=params, tables=tables, cfg=cfg,
                      delivery_usd=delivery.delivery_usd.to_numpy(), tier_profiles=tier_profiles,
                      weather_sources=weather_sources, numba_threads=run.task_threads)
        parts = run.map(plan_site_chunk, chunks, tracker=tracker, desc="site chunks", **shared)
        scheduler_name = run.name
        problems = [p for part in parts for p in part.problems]
        if problems:
            raise InputError(problems)
        for part in parts:
            for k, v in part.seconds.items():
                timings[f"sites: {k} (summed over chunks)"] = timings.get(f"sites: {k} (summed over chunks)", 0.0) + v
        # units and options numbered across the program, in site order
        units = pd.concat([p.units for p in parts], ignore_index=True)
        screened = pd.concat([p.screened for p in parts], ignore_index=True)
        ev = pd.concat([p.evaluations for p in parts], ignore_index=True)
        ev["pair"] = np.arange(len(ev))
        offsets = np.cumsum([0] + [len(p.units) for p in parts[:-1]])
        cand = pd.concat([p.candidates.assign(unit_idx=p.candidates.unit_idx.to_numpy(np.int64) + o)
                          for p, o in zip(parts, offsets) if len(p.candidates)] or [_candidate_table(
                              pd.DataFrame(columns=list(CANDIDATE_COLUMNS)), np.zeros(0, np.int64))], ignore_index=True)
        cand["unit_idx"] = cand.unit_idx.astype(np.int32)
        info = pd.concat([p.info for p in parts], ignore_index=True)
        del parts  # the chunks' tables now live in the program's; holding both doubled the memory
        timings["sites"] = time.perf_counter() - t
        warnings += _weather_warnings(info, cfg)

        t = time.perf_counter()
        tracker.stage(f"catalogue ({len(ev):,} options simulated, {len(cand):,} bounded without simulating)")
        sun = pd.Series(info.design_month_sun_hours.to_numpy(), index=info.site_id.to_numpy())
        simulate = options_simulator(run, units, chunk_sites, tracker, **shared)
        cat = choose_catalogue(ev, units, kits, cfg, screened, sun, candidates=cand, simulate=simulate,
                               tracker=tracker)
        ev = cat["evaluations"]
        warnings += cat["warnings"]
        timings["catalogue"] = time.perf_counter() - t

    t = time.perf_counter()
    weather = Weather(np.zeros((0, 0, HOURS_PER_YEAR), np.float32), np.zeros((0, 0, HOURS_PER_YEAR), np.float32), info)
    result = PlanResult(sites=sites, units=units, kits=kits, bom=bom, evaluations=ev, catalogues=cat["catalogues"],
                        comparisons=cat["comparisons"], unserved=cat["unserved"], weather=weather, demand=None,
                        cost_curves=cat["cost_curves"], kit_params=params, transport=delivery,
                        unit_params=unit_parameters(units, cfg), options=cat["options"], screened=screened,
                        kit_tables=tables, tier_profiles=tier_profiles, weather_sources=weather_sources,
                        scheduler=scheduler_name, candidates=cat["candidates"], search_rounds=cat["rounds"],
                        warnings=warnings, timings_s=timings, rejected_designs=rejected, config=cfg)
    result.traces = representative_traces(result, params, tables)
    timings["traces"] = time.perf_counter() - t
    return result


def reprice_candidates(cand: pd.DataFrame, units: pd.DataFrame, kits: pd.DataFrame, cfg: ProgramConfig) -> pd.DataFrame:
    """The options not simulated with their lower-bound costs computed again from ``kits``
    (new prices; :func:`lower_bound_costs`, with the calendar lives and deliveries kept)."""
    if not len(cand):
        return cand
    k = kits.iloc[cand.kit_idx.to_numpy(np.int64)].reset_index(drop=True)
    u = units.iloc[cand.unit_idx.to_numpy(np.int64)].reset_index(drop=True)
    table = cand.reset_index(drop=True).assign(scheme=u.scheme.to_numpy())
    qty = plant_quantities(k, *option_counts(table))
    lcc_one, _, _ = _option_costs_delivered(qty, cand.calendar_life_years.to_numpy(float),
                                            cand.delivery_usd.to_numpy(float), table, cfg)
    return cand.assign(lb_cost_usd=lcc_one * u["count"].to_numpy(float))


def result_simulator(result: "PlanResult", kits: pd.DataFrame | None = None, cfg: ProgramConfig | None = None):
    """:func:`options_simulator` for a finished plan (in this process), e.g. to choose its
    catalogue again with new prices (``kits``) without losing exactness."""
    from .parallel import InProcess

    return options_simulator(InProcess(), result.units, CHUNK_SITES, None, sites=result.sites,
                             kits=result.kits if kits is None else kits, params=result.kit_params,
                             tables=result.kit_tables, cfg=result.config if cfg is None else cfg,
                             delivery_usd=result.transport.delivery_usd.to_numpy(),
                             tier_profiles=result.tier_profiles, weather_sources=result.weather_sources,
                             numba_threads=None)


def options_simulator(run, units: pd.DataFrame, chunk_sites: int, tracker=None, **shared):
    """A function simulating rows of the candidates table (:data:`CANDIDATE_COLUMNS`, units and
    sites numbered across the program) where ``run`` (:mod:`fleet.parallel`) runs chunks:
    the rows' sites, ``chunk_sites`` at a time (:func:`simulate_options_chunk`). Returns their
    evaluations, in the order of the sites."""
    unit_ids = units.unit_id.to_numpy()

    def simulate(rows: pd.DataFrame) -> pd.DataFrame:
        rows = rows.assign(unit_id=unit_ids[rows.unit_idx.to_numpy(np.int64)]).sort_values("site_idx", kind="stable")
        site = rows.site_idx.to_numpy(np.int64)
        wanted = np.unique(site)
        items = []
        for a in range(0, len(wanted), max(1, int(chunk_sites))):
            group = wanted[a:a + max(1, int(chunk_sites))]
            items.append((group, rows[np.isin(site, group)]))
        parts = run.map(simulate_options_chunk, items, tracker=tracker, desc="options for the catalogue", **shared)
        return pd.concat(parts, ignore_index=True)

    return simulate


def unit_parameters(units: pd.DataFrame, cfg: ProgramConfig) -> np.ndarray:
    """Per-unit kernel parameters: deferrable Wh/day, pump W and the state-of-charge
    separation between shedding general loads and the disconnect (only for units
    with a critical load)."""
    sep = np.where(units.critical_wh_day.to_numpy() > 0, cfg["system"]["critical_shed_separation_soc"], 0.0)
    return np.column_stack([units.deferrable_wh_day.to_numpy(float), units.pump_w.to_numpy(float), sep])


def simulate_chunked(weather: Weather, demand, unit_params, params, tables, pairs: pd.DataFrame, tracker,
                     battery_temp_c: np.ndarray, max_sources: int = 400) -> np.ndarray:
    """Run the kernel over the option list, a group of sites at a time.

    The hourly per-string array power of every (site, array table) source in the
    group is computed first (:func:`fleet.iv.array_power_per_string`), then the
    kernel runs every option of those sites. Peak memory is bounded by
    ``max_sources`` x years x 8760 x 4 bytes, whatever the program size.
    """
    n = len(pairs)
    n_years = weather.poa_wm2.shape[1]
    out = np.zeros((n, n_years, dispatch.N_METRICS))
    if n == 0:
        return out
    vt = voltage_tables()
    site = pairs.site_idx.to_numpy(np.int64)
    table = np.asarray(tables.table_index, np.int64)[pairs.kit_idx.to_numpy(np.int64)]
    order = np.argsort(site, kind="stable")
    # groups of whole sites, each with at most max_sources distinct (site, table) sources
    groups, start, seen = [], 0, set()
    for j, idx in enumerate(order):
        key = (site[idx], table[idx])
        if key not in seen and len(seen) >= max_sources and site[idx] != site[order[j - 1]]:
            groups.append(order[start:j])
            start, seen = j, set()
        seen.add(key)
    groups.append(order[start:])
    for g in tracker.wrap(groups, len(groups), "dispatch"):
        keys, src = np.unique(np.column_stack([site[g], table[g]]), axis=0, return_inverse=True)
        pv = array_power_per_string(weather.poa_wm2, weather.cell_temp_c, tables, keys[:, 0], keys[:, 1])
        sl = pairs.iloc[g]
        # each option's own parameters: a plant is its template with its block counts
        own = plant_parameters(params[sl.kit_idx.to_numpy(np.int64)], *option_counts(sl))
        out[g] = dispatch.simulate_pairs(
            pv, demand.general_w, demand.critical_w, unit_params, own, vt,
            np.asarray(src, np.int64).ravel(), sl.unit_idx.to_numpy(np.int64), np.arange(len(g), dtype=np.int64),
            np.ones(len(g)), np.asarray(battery_temp_c, float)[site[g]])
    return out


def assigned_options(result: PlanResult) -> pd.DataFrame:
    """The evaluation row of the option each unit was given (units without a kit excluded)."""
    opts = result.options
    parts = []
    for scheme, res in result.catalogues.items():
        a = res.assignment[res.assignment != ""].rename("kit_id").reset_index()
        parts.append(opts.merge(a, on=["unit_id", "kit_id"]))
    return pd.concat(parts, ignore_index=True) if parts else opts.iloc[0:0]


def site_hourly_inputs(result: PlanResult, site_pos: int):
    """Weather years and the service units' hourly demand of one site of a plan, built again
    (both are seeded per site, so they are the ones the plan simulated): (Weather, units, UnitDemand)."""
    sub = result.sites.iloc[[int(site_pos)]].reset_index(drop=True)
    weather = build_weather(sub, result.config, None, result.weather_sources, positions=[int(site_pos)])
    units, demand = build_demand(sub, result.config, result.tier_profiles)
    return weather, units, demand


def representative_traces(result: PlanResult, params: np.ndarray, tables) -> dict[str, dict]:
    """A year of state of charge at a median site per scheme, in its design weather year."""
    out = {}
    chosen = assigned_options(result)
    ev = result.evaluations
    for scheme in ("shs", "minigrid"):
        sel = chosen[chosen.scheme == scheme]
        if sel.empty:
            continue
        row = sel.iloc[(sel.unmet_fraction_design - sel.unmet_fraction_design.median()).abs().argsort().iloc[0]]
        pair = ev.loc[row.pair]
        k_idx = int(np.flatnonzero(result.kits.kit_id.to_numpy() == row.kit_id)[0])
        s_idx = int(result.units.site_index.to_numpy()[result.units.unit_id.to_numpy() == row.unit_id][0])
        weather, units, demand = site_hourly_inputs(result, s_idx)
        u_idx = int(np.flatnonzero(units.unit_id.to_numpy() == row.unit_id)[0])
        unit_params = unit_parameters(units, result.config)
        years = weather.poa_wm2.shape[1]
        pv = array_power_per_string(weather.poa_wm2, weather.cell_temp_c, tables, [0],
                                    [int(tables.table_index[k_idx])])[0]
        t_batt = float(battery_temperature_c(result.sites, result.config, result.weather.info)[s_idx])
        # the design year is the year whose unmet fraction is the design quantile
        unmet = []
        own = plant_parameters(params[[k_idx]], *option_counts(ev.loc[[row.pair]]))[0]
        for y in range(years):
            up = unit_params[u_idx]
            tr = dispatch.simulate_trace(pv[y], demand.general_w[u_idx], own,
                                         battery_temp_c=t_batt,
                                         critical_w=demand.critical_w[u_idx], deferrable_wh_day=up[0],
                                         pump_w=up[1], shed_separation_soc=up[2])
            unmet.append((tr["load_w"].sum() - tr["served_w"].sum(), y, tr))
        unmet.sort(key=lambda t: t[0])
        q = result.config["program"]["target_confidence"]
        _, y, tr = unmet[min(int(np.ceil(q * years)) - 1, years - 1)]
        tr.update(unit_id=row.unit_id, kit_id=row.kit_id, weather_year=y, blocks=int(pair.blocks),
                  plant_design=str(pair.get("plant_design", "")))
        out[scheme] = tr
    return out
