"""One named kit at every site: its reliability, energy flows and battery wear.

Where ``fleet plan`` simulates every candidate kit and picks a catalogue, this
module answers a narrower question a program manager often asks: *how would
this one kit (or plant block) do at each of my sites?* It composes the same
stages as :func:`fleet.plan.run_plan` (demand → weather → candidate kits under
the same design conditions → hourly simulation → :func:`fleet.plan.evaluate`),
so its numbers for a (unit, kit, block count) are the plan's numbers.

Solar home system (SHS) sites: every service unit (each household tier group,
each facility group, productive use, street lights, pumping) gets one kit per
member. Minigrid sites: the village unit gets a plant of identical blocks; the
block count is given, or the smallest in 1..:data:`MAX_BLOCKS` that meets every
target of the plan in the design weather year.

No printing, no file reading (the command line in :mod:`fleet.cli` does that).
"""

from __future__ import annotations

import difflib
import hashlib

import numpy as np
import pandas as pd

from .components import ComponentLibrary
from . import transport
from .config import ProgramConfig
from .demand import service_units
from .dispatch import METRICS
from .errors import InputError
from .iv import tables_for_kits
from .kits import candidate_kits, kernel_parameters
from .plan import (_Quiet, array_losses, battery_temperature_c, build_demand, build_weather, design_conditions,
                   evaluate, shortfall, simulate_chunked, unit_parameters)
from .resource import MeasuredYear

#: Largest block count tried per minigrid village when none is given.
MAX_BLOCKS = 40

#: Columns of :func:`evaluate_kit`'s table, with their meaning. Energy flows are
#: per kit for SHS units (one member's kit) and per plant (all blocks) for minigrid
#: villages; "design" values are read in the design weather year (the
#: ``target_confidence`` quantile of the years; the bad end for every metric).
COLUMNS = {
    "site_id": "site",
    "unit_id": "service unit (site/group); blank where the site was not evaluated",
    "scheme": "shs or minigrid",
    "group": "t1..t5 households, health_post, school, productive, street_light, pumping; village",
    "count": "members of the unit (kits bought = count x blocks)",
    "kit_id": "the kit or plant block",
    "blocks": "identical blocks in the plant (1 for SHS)",
    "blocks_basis": "how the block count was set: given, smallest meeting the targets, or the largest tried",
    "peak_load_w": "design peak load of one member (minigrid: the village), W",
    "demand_kwh_year": "design-year demand per kit (minigrid: per plant), incl. deferrable, kWh/year",
    "target_unmet_fraction": "largest unmet-energy fraction allowed in the design year (site or program)",
    "unmet_energy_fraction_design": "unmet energy / demand in the design weather year",
    "unmet_energy_fraction_mean": "unmet energy / demand, mean over weather years",
    "critical_unmet_fraction_design": "unmet critical (vaccine refrigerator) energy / its demand, design year",
    "deferrable_unmet_fraction_design": "unmet deferrable (pumping) energy / its demand, design year",
    "loss_of_load_probability_design": "hours with unmet load / 8760, design year",
    "loads_disconnected_h_design": "hours with the load output off (LVD or shedding), design year",
    "loads_disconnected_days_design": "days with the load output off at some hour, design year",
    "evening_served_h_design": "evening hours (18-22 h, 1460 a year) fully served, design year",
    "full_service_days_design": "days with no unmet load, design year",
    "tier_required": "Multi-Tier Framework tier whose hours the unit must get (0: none)",
    "tier_achieved_design": "highest tier reached on the required share of days, design year",
    "pv_available_kwh_year": "array energy at the controller output, mean, kWh/year",
    "pv_used_kwh_year": "array energy used by loads and battery, mean, kWh/year",
    "pv_spilled_kwh_year": "array energy left unused (battery full, limits), mean, kWh/year",
    "controller_loss_kwh_year": "charge controller conversion loss and self-consumption, mean, kWh/year",
    "inverter_loss_kwh_year": "inverter no-load and conversion loss, mean, kWh/year",
    "battery_throughput_kwh_year": "energy discharged from the battery, mean, kWh/year",
    "equivalent_full_cycles_year": "Ah discharged / usable Ah, mean, cycles/year",
    "soc_min": "lowest state of charge over all years",
    "soc_mean": "mean state of charge",
    "days_without_full_charge_max": "longest run of days without reaching full charge (lead-acid needs one "
                                    "regularly), days",
    "battery_temp_c": "battery temperature used (site mean air temperature + enclosure offset), degC",
    "battery_life_years": "sooner of cycle wear-out (rainflow) and calendar life at the site, years",
    "battery_replacement_year": "year of the first battery replacement within the horizon (blank: none)",
    "served_kwh_year": "energy served per kit (minigrid: per plant), mean, kWh/year",
    "capex_usd": "capital cost of all the unit's kits (count x blocks), USD",
    "lifecycle_cost_usd": "lifecycle cost of all the unit's kits, net present, USD",
    "meets_target": "meets every target the plan applies (energy or tier, critical, deferrable)",
    "shortfall": "what the kit misses, in words",
    "note": "caveats: peak above the output rating, no block count meeting the targets",
    "reason": "why a site was not evaluated (it belongs to the other scheme)",
}

#: Columns taken from :func:`fleet.plan.evaluate` as they are: ours -> the plan's.
FROM_PLAN = {
    "target_unmet_fraction": "target",
    "unmet_energy_fraction_design": "unmet_fraction_design",
    "unmet_energy_fraction_mean": "unmet_fraction_mean",
    "critical_unmet_fraction_design": "critical_unmet_fraction_design",
    "deferrable_unmet_fraction_design": "deferrable_unmet_fraction_design",
    "loss_of_load_probability_design": "lolp_design",
    "loads_disconnected_h_design": "disconnected_hours_design",
    "loads_disconnected_days_design": "disconnected_days_design",
    "evening_served_h_design": "evening_hours_served_design",
    "full_service_days_design": "days_full_service_design",
    "tier_required": "tier_required",
    "tier_achieved_design": "tier_achieved_design",
    "equivalent_full_cycles_year": "battery_cycles_per_year",
    "soc_min": "soc_min",
    "soc_mean": "soc_mean",
    "days_without_full_charge_max": "days_without_full_charge_max",
    "battery_temp_c": "battery_temp_c",
    "battery_life_years": "battery_life_years",
    "battery_replacement_year": "battery_replacement_year",
    "served_kwh_year": "served_kwh_year_per_kit",
    "capex_usd": "capex_usd",
    "lifecycle_cost_usd": "lifecycle_cost_usd",
    "meets_target": "feasible",
}


class KitChoiceError(ValueError):
    """The kit asked for is not among the candidates, or an option does not apply to it."""

    def __init__(self, message: str, close_matches: list[str] | None = None, option: str = "kit_id"):
        super().__init__(message)
        self.close_matches = close_matches or []
        self.option = option  # the argument at fault: "kit_id" or "blocks"


def _needs_weather_for_kits(sites, weather_sources) -> bool:
    """True when a measured weather year may set the cold design temperature."""
    if not weather_sources:
        return False
    blank = ~np.isfinite(sites["design_temp_min_c"].to_numpy(dtype=float))
    return any(isinstance(weather_sources.get(str(s)), MeasuredYear) for s in sites.site_id[blank])


#: Candidate tables already built in this process, by the content of their inputs (a few kept).
_CANDIDATES: dict = {}
_CANDIDATES_KEPT = 4


def _library_key(library: ComponentLibrary) -> str:
    """A digest of the library's tables (content, not identity: a re-read library matches)."""
    h = hashlib.sha256()
    for name in ("pv_modules", "batteries", "charge_controllers", "inverters", "balance_of_system", "installation",
                 "cables", "fuses"):
        df = getattr(library, name, None)
        if df is None:
            h.update(repr((name, None)).encode())
            continue
        h.update(repr((name, list(map(str, df.columns)))).encode())
        h.update(pd.util.hash_pandas_object(df.astype(str), index=True).to_numpy().tobytes())
    return h.hexdigest()


def candidate_kit_table(sites, library: ComponentLibrary, cfg: ProgramConfig, *, weather_info=None,
                        weather_sources=None) -> pd.DataFrame:
    """The candidate kits and plant blocks a plan of these sites would consider.

    One row per kit (``kit_id``, ``kit_label``, ``scheme``, design and kernel
    columns), from :func:`fleet.kits.candidate_kits` under :func:`design_conditions`.
    Where a site's measured weather year sets the cold design temperature, pass
    the plan's ``weather_info`` (else the weather of those sites is built here).
    The table is built once per process for the same library content and
    design conditions; callers get a copy.
    """
    if weather_info is None and _needs_weather_for_kits(sites, weather_sources):
        weather_info = build_weather(sites, cfg, weather_sources=weather_sources).info
    s = cfg["system"]
    cond = design_conditions(sites, cfg, weather_info)
    key = (_library_key(library), cond, tuple(s["voltages_v"]), int(s["max_parallel_battery_strings"]),
           s.get("max_plant_lifepo4_blocks"))
    if key not in _CANDIDATES:
        kits, _, _ = candidate_kits(library, voltages_v=s["voltages_v"],
                                    max_parallel_strings=s["max_parallel_battery_strings"], cond=cond,
                                    max_plant_lifepo4_blocks=s.get("max_plant_lifepo4_blocks"))
        while len(_CANDIDATES) >= _CANDIDATES_KEPT:
            _CANDIDATES.pop(next(iter(_CANDIDATES)))
        _CANDIDATES[key] = kits
    return _CANDIDATES[key].copy()


def find_kit(kits: pd.DataFrame, kit_id: str) -> int:
    """Row position of ``kit_id`` in a candidate table; :class:`KitChoiceError` naming close
    matches when it is not there."""
    ids = kits.kit_id.astype(str).tolist()
    if kit_id in ids:
        return ids.index(kit_id)
    folded = {i.casefold(): n for n, i in enumerate(ids)}
    if str(kit_id).casefold() in folded:
        return folded[str(kit_id).casefold()]
    close = difflib.get_close_matches(str(kit_id), ids, n=5, cutoff=0.6)
    msg = f"no kit '{kit_id}' among the {len(ids)} candidate kits of this component library"
    msg += f"; close matches: {', '.join(close)}" if close else ""
    raise KitChoiceError(msg, close)


def evaluate_kit(sites, library: ComponentLibrary, cfg: ProgramConfig, kit_id: str, *, blocks: int | None = None,
                 tracker=None, tier_profiles: dict | None = None, weather_sources: dict | None = None,
                 candidates: pd.DataFrame | None = None, scheduler: str | None = None,
                 chunk_sites: int = 25) -> pd.DataFrame:
    """Metrics of one candidate kit (or minigrid block) at every service unit of its scheme.

    Parameters
    ----------
    sites : GeoDataFrame
        Validated site table (:func:`fleet.sites.read_sites`).
    library : ComponentLibrary
    cfg : ProgramConfig
        The program: weather years, target quantile, targets, economics.
    kit_id : str
        A candidate kit id (:func:`candidate_kit_table`; ``fleet evaluate --list-kits``).
    blocks : int, optional
        Minigrid blocks per village (>= 1). Default: the smallest count in
        1..:data:`MAX_BLOCKS` that meets every target in the design weather
        year (found by bisection, taking more identical blocks never to serve a
        village worse, common practice), else :data:`MAX_BLOCKS` with a note.
    tracker : object with ``stage(name)`` and ``wrap(iterable, total, desc)``, optional
    tier_profiles, weather_sources : as for :func:`fleet.plan.run_plan`.
    candidates : DataFrame, optional
        :func:`candidate_kit_table` of the same sites, library and program, to
        reuse when evaluating several kits in turn (it takes seconds to build).
    scheduler : str, optional
        Where the sites are simulated, ``chunk_sites`` at a time (:mod:`fleet.parallel`);
        the table is the same whichever way.

    Returns
    -------
    DataFrame, one row per service unit of the kit's scheme, in site order, with
    the columns of :data:`COLUMNS`; sites of the other scheme are one row each
    with only ``site_id``, ``scheme``, ``kit_id`` and ``reason`` filled.

    Raises
    ------
    KitChoiceError
        Unknown kit (with close matches), or ``blocks`` given for an SHS kit.
    fleet.errors.InputError
        A site off the solar resource data.
    """
    tracker = tracker or _Quiet()
    if blocks is not None and (int(blocks) != blocks or blocks < 1):
        raise KitChoiceError(f"blocks must be a whole number >= 1, got {blocks}", option="blocks")

    units = service_units(sites)

    # the kit list needs the weather only where a measured year sets the cold design temperature;
    # otherwise an unknown kit is reported before the weather is built
    weather = None
    if candidates is None and _needs_weather_for_kits(sites, weather_sources):
        tracker.stage("weather")
        weather = build_weather(sites, cfg, tracker, weather_sources)
    tracker.stage("kits")
    kits = (candidates if candidates is not None
            else candidate_kit_table(sites, library, cfg, weather_info=weather.info if weather else None))
    k_pos = find_kit(kits, kit_id)
    kit = kits.iloc[[k_pos]].reset_index(drop=True)
    scheme = str(kit.scheme.iat[0])
    if blocks is not None and scheme != "minigrid":
        raise KitChoiceError(f"blocks apply to minigrid plant blocks; {kit.kit_id.iat[0]} is a solar home system kit",
                             option="blocks")
    tables = tables_for_kits(kit, library)
    params = kernel_parameters(kit, tables, reconnect_hysteresis_soc=cfg["system"]["reconnect_hysteresis_soc"],
                               pv_losses_fraction=array_losses(cfg))
    from .parallel import runner, site_chunks

    n_mine = int((units.scheme == scheme).sum())
    tracker.stage(f"simulating {kit.kit_id.iat[0]} at {n_mine} unit(s) x {cfg['program']['weather_years']} years")
    if n_mine == 0:
        return _with_other_scheme_sites(pd.DataFrame(columns=list(COLUMNS)), sites, scheme, kit.kit_id.iat[0])
    chunks = site_chunks(len(sites), chunk_sites)
    with runner(scheduler) as run:
        parts = run.map(evaluate_kit_chunk, chunks, tracker=tracker, desc="site chunks", sites=sites, kit=kit,
                        params=params, tables=tables, cfg=cfg, blocks=blocks, tier_profiles=tier_profiles,
                        weather_sources=weather_sources, numba_threads=run.task_threads)
    problems = [p for part in parts for p in part[2]]
    if problems:
        raise InputError(problems)
    chunk_units = pd.concat([part[0] for part in parts], ignore_index=True)
    ev = pd.concat([part[1] for part in parts if len(part[1])], ignore_index=True)
    rows = _table(ev, chunk_units, kit, cfg)
    return _with_other_scheme_sites(rows, sites, scheme, kit.kit_id.iat[0])


def evaluate_kit_chunk(positions, *, sites, kit, params, tables, cfg: ProgramConfig, blocks=None, tier_profiles=None,
                       weather_sources=None, numba_threads: int | None = None):
    """One kit at the service units of its scheme at the sites at ``positions``: (units with their
    design demand, option metrics as :func:`fleet.plan.evaluate` gives them with ``blocks_basis``,
    input problems). Independent of other sites, so chunks may run anywhere (:mod:`fleet.parallel`)."""
    from .parallel import kernel_threads

    pos = np.asarray(list(positions), dtype=np.int64)
    sub = sites.iloc[pos].reset_index(drop=True)
    units, demand = build_demand(sub, cfg, tier_profiles)
    design = demand.design
    scheme = str(kit.scheme.iat[0])
    mine = units.index[units.scheme == scheme].to_numpy()
    if len(mine) == 0:
        return units.iloc[0:0], pd.DataFrame(), []
    try:
        weather = build_weather(sub, cfg, None, weather_sources, positions=pos)
    except InputError as exc:
        return units.iloc[0:0], pd.DataFrame(), list(exc.problems)
    site_target = sub["reliability_target"].to_numpy(dtype=float)
    target = np.where(np.isfinite(site_target), site_target, cfg["program"]["reliability_target"])
    unit_params = unit_parameters(units, cfg)
    t_batt = battery_temperature_c(sub, cfg, weather.info)
    # one delivery cost per site for every round of the block-count search
    depots = getattr(cfg, "depots", None)
    delivery = (transport.site_transport(sub, depots, cfg["transport"]).delivery_usd.to_numpy()
                if depots is not None else np.zeros(len(sub)))

    def run(unit_idx: np.ndarray, counts: np.ndarray) -> pd.DataFrame:
        s_idx = units.site_index.to_numpy()[unit_idx]
        pairs = pd.DataFrame({"unit_idx": unit_idx, "kit_idx": 0, "site_idx": s_idx,
                              "blocks": np.asarray(counts, int), "target": target[s_idx]})
        metrics = simulate_chunked(weather, demand, unit_params, params, tables, pairs, _Quiet(), t_batt)
        ev = evaluate(pairs, metrics, units, design, kit, cfg, sub, weather.info, site_delivery_usd=delivery)
        # the kernel ran whole plants (n of each block), so every figure is per kit or per plant
        m = {name: metrics[:, :, j].mean(axis=1) for j, name in enumerate(METRICS)}
        ev["pv_available_kwh_year"] = m["pv_bus_wh"] / 1000.0
        ev["pv_used_kwh_year"] = m["pv_used_wh"] / 1000.0
        ev["pv_spilled_kwh_year"] = m["pv_spilled_wh"] / 1000.0
        ev["battery_throughput_kwh_year"] = m["battery_discharge_wh"] / 1000.0
        return ev

    with kernel_threads(numba_threads):
        if scheme == "shs" or blocks is not None:
            ev = run(mine, np.full(len(mine), 1 if blocks is None else int(blocks)))
            ev["blocks_basis"] = "one kit per member" if scheme == "shs" else "given"
        else:
            ev = _smallest_block_counts(run, mine)
    return units.loc[mine].reset_index(drop=True), ev, []


def _smallest_block_counts(run, mine: np.ndarray) -> pd.DataFrame:
    """Per village, the smallest block count in 1..MAX_BLOCKS meeting every target (bisection,
    every village in one batch per round); MAX_BLOCKS with a note where none does."""
    lo = np.zeros(len(mine), int)  # known not to meet (0 blocks serve nothing)
    hi = np.full(len(mine), MAX_BLOCKS + 1)  # known to meet (MAX_BLOCKS + 1 stands for "none tried")
    seen: dict[tuple[int, int], pd.Series] = {}
    while True:
        todo = np.flatnonzero(hi - lo > 1)
        if todo.size == 0:
            break
        mid = (lo[todo] + hi[todo]) // 2
        ev = run(mine[todo], mid)
        for j, (i, n) in enumerate(zip(todo, mid)):
            row = ev.iloc[j]
            seen[(int(i), int(n))] = row
            if bool(row.feasible):
                hi[i] = n
            else:
                lo[i] = n
    out = []
    for i in range(len(mine)):
        if hi[i] <= MAX_BLOCKS:
            row = seen[(i, int(hi[i]))].copy()
            row["blocks_basis"] = f"smallest count in 1..{MAX_BLOCKS} meeting the targets"
        else:
            row = seen[(i, MAX_BLOCKS)].copy()
            row["blocks_basis"] = f"largest count tried ({MAX_BLOCKS}); none in 1..{MAX_BLOCKS} meets the targets"
        out.append(row)
    return pd.DataFrame(out).reset_index(drop=True)


def _table(ev: pd.DataFrame, units: pd.DataFrame, kit: pd.DataFrame, cfg: ProgramConfig) -> pd.DataFrame:
    u = units.set_index("unit_id").loc[ev.unit_id]
    b = ev.blocks.to_numpy(float)
    max_load = float(kit.max_load_w.iat[0])
    peak = u.peak_power_w.to_numpy(float)
    out = pd.DataFrame({
        "site_id": ev.site_id.to_numpy(), "unit_id": ev.unit_id.to_numpy(), "scheme": ev.scheme.to_numpy(),
        "group": ev.group.to_numpy(), "count": ev["count"].to_numpy(), "kit_id": ev.kit_id.to_numpy(),
        "blocks": ev.blocks.to_numpy(int), "blocks_basis": ev.blocks_basis.to_numpy(),
        "peak_load_w": peak,
        # one member's demand for SHS; the whole village's for a minigrid plant
        "demand_kwh_year": (u.daily_energy_wh.to_numpy(float) + u.deferrable_wh_day.to_numpy(float)) * 365.0 / 1000.0,
    })
    for ours, theirs in FROM_PLAN.items():
        out[ours] = ev[theirs].to_numpy()
    for col in ("pv_available_kwh_year", "pv_used_kwh_year", "pv_spilled_kwh_year", "controller_loss_kwh_year",
                "inverter_loss_kwh_year", "battery_throughput_kwh_year"):
        out[col] = ev[col].to_numpy(float)
    out["meets_target"] = out["meets_target"].astype(bool)
    out["shortfall"] = [("" if ok else shortfall(r, cfg)) for ok, r in zip(out.meets_target, ev.itertuples(index=False))]
    notes = []
    for pk, nb, basis in zip(peak, b, ev.blocks_basis):
        n = []
        rating = max_load * nb
        if pk > rating:
            n.append(f"design peak {pk:,.0f} W exceeds the output rating {rating:,.0f} W (the excess counts as unmet)")
        if str(basis).startswith("largest"):
            n.append(f"no block count in 1..{MAX_BLOCKS} meets the targets")
        notes.append("; ".join(n))
    out["note"] = notes
    out["reason"] = ""
    return out[list(COLUMNS)]


def _with_other_scheme_sites(rows: pd.DataFrame, sites, scheme: str, kit_id: str) -> pd.DataFrame:
    """Rows in site order, with one row per site of the other scheme saying why it has no figures."""
    other = {"shs": "minigrid", "minigrid": "shs"}[scheme]
    what = {"shs": "a solar home system kit", "minigrid": "a minigrid plant block"}[scheme]
    parts = []
    for s in sites.itertuples(index=False):
        if s.scheme == scheme:
            parts.append(rows[rows.site_id == s.site_id])
        else:
            parts.append(pd.DataFrame([{"site_id": s.site_id, "scheme": other, "kit_id": kit_id,
                                        "reason": f"{other} site; {kit_id} is {what}"}]))
    out = pd.concat([p for p in parts if len(p)], ignore_index=True) if parts else rows.iloc[0:0]
    out = out.reindex(columns=list(COLUMNS))
    for col in ("unit_id", "group", "blocks_basis", "shortfall", "note", "reason"):
        out[col] = out[col].fillna("")
    out["meets_target"] = out["meets_target"].astype("boolean")
    for col in ("count", "blocks", "tier_required", "tier_achieved_design"):
        out[col] = out[col].astype("Int64")
    return out
