"""Block catalogue integer program for modular minigrid plants: solve time against villages.

    python bench/bench_block_catalogue.py [--sizes 50,100,300,1000,3000] [--solver cbc|highs]
                                          [--seed 0] [--max-types 2] [--cost-per-type 15000]
                                          [--climate-cells 20] [--cost-noise 0.03]
                                          [--time-limit 120] [--target-s 60] [--target-gap 0.5]

The option tables are synthetic and invented (for timing only, never a check
value). Every village has a daily energy need (lognormal, clipped to 40-500
kWh/day), a load factor that sets its peak, and a climate cell (peak sun hours,
ambient temperature, days of autonomy). Block types of three kinds, like the
demo's: 3 PV blocks (1.6/3.2/4.8 kWp, larger blocks cheaper per Wp), 5 battery
blocks (5-72 kWh, lead-acid or lithium iron phosphate, different price per kWh,
usable depth, C-rate, cycle life and calendar life) and 2 inverters (3/5 kW).

For each village and each (PV, battery, inverter) triple the plant is sized by
rule, not simulated:

- PV blocks = ceil(need x oversize / (kWp x peak sun hours x derate));
- battery blocks = the most of ceil(night energy x autonomy days / usable kWh
  per block) and the blocks needed to take the array's charging power at the
  chemistry's C-rate (this couples PV and battery);
- inverters = the most of ceil(1.25 x peak / kW) and the array's AC rating at a
  DC/AC ratio of 1.3 (this couples PV and inverter);
- a triple is infeasible when a count exceeds its parallel limit (PV blocks
  per bus, battery strings in parallel, inverters per cluster).

Lifecycle cost = block counts x block prices + discounted battery and inverter
replacements (battery life from cycle depth and, for lead-acid, ambient
temperature) + a village-only civil-works cost, scattered per village and
triple by ``--cost-noise`` (as site-by-site simulation results would).

Prints, per size: villages, options, distinct cases after merging, variables
and constraints of the program, build, LP and solve seconds, total seconds,
status, objective, LP bound, gap, and how far the starting heuristic was above
the final plan; then the fitted growth exponent of total time against villages
and whether the largest size meets the target (``--target-s``, ``--target-gap``).
All figures are measured in this one run.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
import pandas as pd

from fleet.catalogue import optimise_block_catalogue
from bench_catalogue import growth_exponent  # bench/ is on the path when run as a script

KINDS = ("pv_block_id", "battery_block_id", "inverter_id")
HORIZON_YEARS = 20.0
DISCOUNT_RATE = 0.08

#: Invented block types (prices are for timing only).
PV_BLOCKS = pd.DataFrame({"id": ["pv-1.6kwp", "pv-3.2kwp", "pv-4.8kwp"],
                          "kwp": [1.6, 3.2, 4.8], "usd_per_wp": [0.95, 0.82, 0.76],
                          "max_parallel": [40, 40, 40]})
BATTERY_BLOCKS = pd.DataFrame({
    "id": ["bat-la-9.6kwh", "bat-la-24kwh", "bat-lfp-5.1kwh", "bat-lfp-14.3kwh", "bat-lfp-72kwh"],
    "kwh": [9.6, 24.0, 5.1, 14.3, 72.0],
    "lead_acid": [True, True, False, False, False],
    "usd_per_kwh": [170.0, 150.0, 390.0, 330.0, 290.0],
    "usable_depth": [0.5, 0.5, 0.8, 0.8, 0.8],
    "c_rate": [0.2, 0.2, 0.5, 0.5, 0.5],  # most charging power per kWh of nominal capacity
    "cycles_at_ref": [1200.0, 1500.0, 4000.0, 4500.0, 5000.0],  # cycles to end of life at the usable depth
    "calendar_years": [6.0, 7.0, 12.0, 12.0, 14.0],  # at 25 degC
    "max_parallel": [16, 16, 20, 20, 20],
})
INVERTERS = pd.DataFrame({"id": ["inv-3kw", "inv-5kw"], "kw": [3.0, 5.0], "usd_per_kw": [310.0, 260.0],
                          "max_parallel": [24, 24], "life_years": [10.0, 10.0]})
PV_DERATE = 0.75  # temperature, soiling and wiring losses (common practice)
DC_AC_RATIO = 1.3
INVERTER_MARGIN = 1.25
NIGHT_SHARE = 0.55  # share of the daily energy drawn from the battery


def _discounted_replacements(life_years: np.ndarray) -> np.ndarray:
    """Sum of (1 + r)^-t over replacements at t = life, 2 life, ... within the horizon (per unit of capex)."""
    out = np.zeros_like(life_years, dtype=float)
    for j in range(1, int(math.ceil(HORIZON_YEARS / float(np.min(life_years)))) + 1):
        at = j * life_years
        out += np.where(at < HORIZON_YEARS, (1.0 + DISCOUNT_RATE) ** -at, 0.0)
    return out


def synthetic_options(n_villages: int, seed: int = 0, *, climate_cells: int = 20,
                      cost_noise: float = 0.03) -> tuple[pd.DataFrame, list[str]]:
    """A seeded synthetic plant option table (feasible triples only) and every village id.

    Returns ``options`` with ``unit_id``, ``kit_id`` (plant design), ``cost_usd``
    (lifecycle cost of the village's plant, USD), ``pv_block_id``,
    ``battery_block_id`` and ``inverter_id``, and the list of all villages
    (including any that no triple serves).
    """
    rng = np.random.default_rng(seed)
    # climate cells: peak sun hours (h/day), ambient temperature (degC), autonomy (days)
    psh = rng.uniform(4.0, 6.5, climate_cells)
    ambient = rng.uniform(18.0, 32.0, climate_cells)
    autonomy = rng.uniform(1.0, 1.5, climate_cells)
    # villages
    cell = rng.integers(0, climate_cells, n_villages)
    need_kwh = np.clip(rng.lognormal(np.log(120.0), 0.6, n_villages), 40.0, 500.0)
    load_factor = rng.uniform(0.28, 0.4, n_villages)
    peak_kw = need_kwh / 24.0 / load_factor
    oversize = rng.uniform(1.1, 1.3, n_villages)
    civil_usd = 8000.0 + 60.0 * need_kwh * rng.lognormal(0.0, 0.2, n_villages)

    # every (village, pv, battery, inverter) triple, broadcast as (V, P, B, I)
    v = np.arange(n_villages)[:, None, None, None]
    pv = {c: PV_BLOCKS[c].to_numpy()[None, :, None, None] for c in PV_BLOCKS.columns}
    bt = {c: BATTERY_BLOCKS[c].to_numpy()[None, None, :, None] for c in BATTERY_BLOCKS.columns}
    iv = {c: INVERTERS[c].to_numpy()[None, None, None, :] for c in INVERTERS.columns}
    need = need_kwh[v]
    n_pv = np.ceil(need * oversize[v] / (pv["kwp"].astype(float) * psh[cell][v] * PV_DERATE))
    array_kw = n_pv * pv["kwp"].astype(float)
    usable_kwh = bt["kwh"].astype(float) * bt["usable_depth"].astype(float)
    n_store = np.ceil(need * NIGHT_SHARE * autonomy[cell][v] / usable_kwh)
    n_charge = np.ceil(array_kw / (bt["c_rate"].astype(float) * bt["kwh"].astype(float)))
    n_bat = np.maximum(n_store, n_charge)
    n_inv = np.maximum(np.ceil(INVERTER_MARGIN * peak_kw[v] / iv["kw"].astype(float)),
                       np.ceil(array_kw / (DC_AC_RATIO * iv["kw"].astype(float))))
    feasible = ((n_pv <= pv["max_parallel"]) & (n_bat <= bt["max_parallel"]) & (n_inv <= iv["max_parallel"]))

    # battery life: daily cycle depth against the bank's usable energy (shallower lasts longer, a
    # Woehler-type power law), calendar life halved per 10 degC above 25 degC for lead-acid
    depth = need * NIGHT_SHARE / (n_bat * usable_kwh)
    cycle_years = bt["cycles_at_ref"].astype(float) * np.minimum(depth, 1.0) ** -1.3 / 365.0
    heat = np.where(bt["lead_acid"].astype(bool), 0.5 ** (np.maximum(ambient[cell][v] - 25.0, 0.0) / 10.0), 1.0)
    battery_life = np.minimum(cycle_years, bt["calendar_years"].astype(float) * heat)
    pv_usd = array_kw * 1000.0 * pv["usd_per_wp"].astype(float) * 1.25  # + mounting and wiring
    bat_capex = n_bat * bt["kwh"].astype(float) * bt["usd_per_kwh"].astype(float)
    inv_capex = n_inv * iv["kw"].astype(float) * iv["usd_per_kw"].astype(float)
    bat_usd = bat_capex * (1.0 + _discounted_replacements(battery_life))
    inv_usd = inv_capex * (1.0 + _discounted_replacements(np.broadcast_to(iv["life_years"].astype(float),
                                                                          inv_capex.shape)))
    cost = pv_usd + bat_usd + inv_usd
    if cost_noise > 0:
        cost = cost * rng.lognormal(0.0, cost_noise, cost.shape)
    cost = cost + civil_usd[v]

    village_ids = np.array([f"village{i:05d}" for i in range(n_villages)], dtype=object)
    vi, p, b, i = np.nonzero(feasible)
    pv_id = PV_BLOCKS.id.to_numpy(dtype=object)[p]
    bt_id = BATTERY_BLOCKS.id.to_numpy(dtype=object)[b]
    iv_id = INVERTERS.id.to_numpy(dtype=object)[i]
    options = pd.DataFrame({"unit_id": village_ids[vi], "kit_id": pv_id + "+" + bt_id + "+" + iv_id,
                            "cost_usd": cost[vi, p, b, i], "pv_block_id": pv_id,
                            "battery_block_id": bt_id, "inverter_id": iv_id})
    return options, village_ids.tolist()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="50,100,300,1000,3000", help="comma-separated village counts")
    ap.add_argument("--solver", default="cbc", choices=["cbc", "highs"])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--max-types", type=int, default=2, help="K, most block types of each kind")
    ap.add_argument("--cost-per-type", type=float, default=15000.0, help="USD per block type carried")
    ap.add_argument("--climate-cells", type=int, default=20, help="climate cells the villages fall in")
    ap.add_argument("--cost-noise", type=float, default=0.03,
                    help="lognormal scatter of each village's cost per triple (0: costs follow the rules exactly)")
    ap.add_argument("--time-limit", type=float, default=120.0, help="solver time limit per call, s")
    ap.add_argument("--target-s", type=float, default=60.0, help="target total seconds at the largest size")
    ap.add_argument("--target-gap", type=float, default=0.5, help="target gap at the largest size, %%")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    n_types = len(PV_BLOCKS) + len(BATTERY_BLOCKS) + len(INVERTERS)
    print(f"solver {args.solver}, K = {args.max_types} per kind, {n_types} block types "
          f"({len(PV_BLOCKS)} PV, {len(BATTERY_BLOCKS)} battery, {len(INVERTERS)} inverter), "
          f"F = {args.cost_per_type:,.0f} USD/type, {args.climate_cells} climate cells, "
          f"cost noise {args.cost_noise}, seed {args.seed}")
    print(f"{'villages':>8} {'options':>8} {'cases':>6} {'vars':>7} {'cons':>7} {'gen s':>6} {'build s':>8} "
          f"{'LP s':>7} {'solve s':>8} {'total s':>8}  {'status':<36} {'objective USD':>15} "
          f"{'LP bound USD':>15} {'gap %':>7} {'heur +%':>8}")
    totals = []
    last = None
    for n in sizes:
        t = time.perf_counter()
        options, units = synthetic_options(n, args.seed, climate_cells=args.climate_cells, cost_noise=args.cost_noise)
        gen = time.perf_counter() - t
        t = time.perf_counter()
        res = optimise_block_catalogue(options, units, kinds=KINDS, max_types=args.max_types,
                                       cost_per_type_usd=args.cost_per_type, solver=args.solver,
                                       time_limit_s=args.time_limit)
        total = time.perf_counter() - t
        m = res.model_stats
        totals.append(total)
        last = (n, total, res)
        heur = m.get("heuristic_objective_usd", float("nan"))
        heur_pct = 100.0 * (heur - res.objective_usd) / res.objective_usd if res.objective_usd > 0 else float("nan")
        heur_pct = 0.0 if abs(heur_pct) < 1e-9 else heur_pct  # the same plan, summed in another order
        print(f"{n:>8} {len(options):>8} {res.distinct_cases:>6} {m.get('variables', 0):>7} "
              f"{m.get('constraints', 0):>7} {gen:>6.2f} {m.get('build_s', 0.0):>8.2f} {m.get('lp_s', 0.0):>7.2f} "
              f"{m.get('solve_s', 0.0):>8.2f} {total:>8.2f}  {res.status:<36} {res.objective_usd:>15,.0f} "
              f"{res.lower_bound_usd:>15,.0f} {100 * res.gap:>7.3f} {heur_pct:>8.3f}", flush=True)
        print(f"{'':>8} chosen: " + "; ".join(f"{k}: {', '.join(v) or '-'}" for k, v in res.chosen_blocks.items())
              + f"; unserved villages: {len(res.unserved_units)}", flush=True)
    print(f"growth exponent of total time against villages: {growth_exponent(sizes, totals):.2f}")
    if last is not None:
        n, total, res = last
        ok = total <= args.target_s and 100 * res.gap <= args.target_gap
        print(f"target at {n:,} villages (<= {args.target_s:g} s, gap <= {args.target_gap:g} %): "
              f"{'met' if ok else 'NOT met'} ({total:.1f} s, gap {100 * res.gap:.3f} %)")


if __name__ == "__main__":
    main()
