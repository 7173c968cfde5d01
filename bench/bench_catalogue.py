"""Catalogue integer program at national scale: solve time against number of sites.

    python bench/bench_catalogue.py [--sizes 100,300,1000,3000,10000] [--solver cbc|highs]
                                    [--seed 0] [--kits 30] [--max-types 4]
                                    [--climate-cells 40] [--kg-km-usd 0.0] [--cost-noise 0.0]
                                    [--time-limit 120] [--no-aggregate]

The option tables are synthetic and invented (for timing only, never a check
value), shaped like a real plan: every site has 1-5 tier groups of households
(1-200 households each), a climate severity taken from its weather cell (sites
of one cell share weather), and a road distance to its depot. A ladder of SHS
kits of increasing size: a kit serves a group when its size covers the tier's
need at the site's severity, with noise near the threshold (per cell, tier and
kit, the way simulated reliability scatters around a sizing rule). Lifecycle
cost per household is capex plus discounted battery replacements (battery life
shortens with severity and lengthens when a kit is oversized for its load, so
cost is not monotone in size); transport adds a per-kit charge by distance
(``--kg-km-usd`` > 0 makes it depend on kit mass too, so that no two sites at
different distances have costs that differ only by an offset and a scale);
every group carries a kit-independent crew-visit cost. ``--cost-noise`` scatters
each group's per-kit costs (as site-by-site simulation results would).

Prints, per size: service units, feasible pairs, distinct cases after merging,
dominated kits dropped, prefix sets and variables of the program, build and
solve seconds, status, objective, LP bound and gap; then the fitted growth
exponent of time against sites and whether the target (at most 60 s and 0.5 %
gap at 10,000 sites) is met.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from fleet.catalogue import optimise_catalogue

#: Invented demo sizing figures (Wp-equivalent need per household, tiers 1-5).
TIER_NEED_WP = np.array([30.0, 90.0, 240.0, 550.0, 1000.0])
HORIZON_YEARS = 15.0
DISCOUNT_RATE = 0.08


def kit_ladder(n_kits: int, rng: np.random.Generator) -> pd.DataFrame:
    """Invented SHS kits: size (Wp), capex and battery share (USD), mass (kg)."""
    size = np.sort(np.geomspace(20.0, 1600.0, n_kits) * rng.uniform(0.96, 1.04, n_kits))
    capex = (40.0 + 1.4 * size ** 0.96) * rng.lognormal(0.0, 0.07, n_kits)
    return pd.DataFrame({"kit_id": [f"shs{i:02d}-{s:.0f}wp" for i, s in enumerate(size)],
                         "size_wp": size, "capex_usd": capex, "battery_usd": 0.35 * capex,
                         "mass_kg": 4.0 + 0.07 * size})


def synthetic_options(n_sites: int, seed: int = 0, *, n_kits: int = 30, climate_cells: int = 40,
                      kit_km_usd: float = 0.04, kg_km_usd: float = 0.0,
                      cost_noise: float = 0.0) -> tuple[pd.DataFrame, list[str]]:
    """A seeded synthetic option table (feasible pairs only) and every unit id.

    Returns ``options`` with ``unit_id``, ``kit_id``, ``cost_usd`` (lifecycle
    cost of the whole group, USD) and the list of all units, including those
    that no kit serves.
    """
    rng = np.random.default_rng(seed)
    kits = kit_ladder(n_kits, rng)
    cell_severity = rng.beta(2.0, 3.0, climate_cells)
    threshold_noise = rng.normal(0.0, 0.05, (climate_cells, 5, n_kits))
    # sites
    cell = rng.integers(0, climate_cells, n_sites)
    distance_km = rng.gamma(2.0, 40.0, n_sites)
    n_groups = rng.integers(1, 6, n_sites)
    # tier groups: the first n_groups tiers of a random permutation per site
    perm = np.argsort(rng.random((n_sites, 5)), axis=1)
    take = np.arange(5)[None, :] < n_groups[:, None]
    site = np.repeat(np.arange(n_sites), 5).reshape(n_sites, 5)[take]
    tier = perm[take]
    count = rng.integers(1, 201, len(site)).astype(float)
    sev = cell_severity[cell[site]]
    # feasibility: size covers the need at this severity, with noise near the threshold
    need = TIER_NEED_WP[tier] * (1.0 + 0.9 * sev)
    size = kits.size_wp.to_numpy()
    feasible = size[None, :] >= need[:, None] * (1.0 + threshold_noise[cell[site], tier, :])
    # battery life: shorter when severe, longer when the kit is oversized for the load
    utilisation = np.minimum(need[:, None] / size[None, :], 1.0)
    life = 5.0 * (1.0 - 0.4 * sev[:, None]) * (1.0 + 0.8 * (1.0 - utilisation))
    replacements = np.zeros_like(life)
    for j in range(1, 10):  # discounted replacements within the horizon
        at = j * life
        replacements += np.where(at < HORIZON_YEARS, (1.0 + DISCOUNT_RATE) ** -at, 0.0)
    per_household = (kits.capex_usd.to_numpy()[None, :] * 1.6  # capex + discounted O&M
                     + kits.battery_usd.to_numpy()[None, :] * replacements
                     + distance_km[site][:, None] * (kit_km_usd + kg_km_usd * kits.mass_kg.to_numpy()[None, :]))
    visit = 25.0 + 0.8 * distance_km[site]
    if cost_noise > 0:  # scatter per group and kit (e.g. site-specific simulation results)
        per_household = per_household * rng.lognormal(0.0, cost_noise, per_household.shape)
    cost = count[:, None] * per_household + visit[:, None]
    unit_ids = np.array([f"site{s:05d}-t{t + 1}" for s, t in zip(site, tier)], dtype=object)
    u, k = np.nonzero(feasible)
    options = pd.DataFrame({"unit_id": unit_ids[u], "kit_id": kits.kit_id.to_numpy()[k],
                            "cost_usd": cost[u, k]})
    return options, unit_ids.tolist()


def growth_exponent(sites, seconds) -> float:
    """Least-squares slope of log(time) against log(sites)."""
    x, y = np.log(np.asarray(sites, float)), np.log(np.maximum(np.asarray(seconds, float), 1e-6))
    return float(np.polyfit(x, y, 1)[0]) if len(x) > 1 else float("nan")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="100,300,1000,3000,10000", help="comma-separated site counts")
    ap.add_argument("--solver", default="cbc", choices=["cbc", "highs"])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--kits", type=int, default=30, help="kits in the ladder (20-40 is typical)")
    ap.add_argument("--max-types", type=int, default=4, help="K, most kit types in the catalogue")
    ap.add_argument("--cost-per-type", type=float, default=20000.0, help="USD per kit type carried")
    ap.add_argument("--climate-cells", type=int, default=40, help="weather cells the sites fall in")
    ap.add_argument("--kg-km-usd", type=float, default=0.0, help="transport per kg and km (0: per kit only)")
    ap.add_argument("--cost-noise", type=float, default=0.0,
                    help="lognormal scatter of each group's per-kit cost (0: costs follow the rules exactly)")
    ap.add_argument("--time-limit", type=float, default=120.0, help="solver time limit, s")
    ap.add_argument("--no-aggregate", action="store_true", help="solve the textbook per-unit model instead")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    print(f"solver {args.solver}, K = {args.max_types}, {args.kits} kits, {args.climate_cells} climate cells, "
          f"transport {args.kg_km_usd} USD/kg/km, cost noise {args.cost_noise}, seed {args.seed}, aggregate {not args.no_aggregate}")
    head = (f"{'sites':>6} {'units':>6} {'pairs':>8} {'cases':>6} {'dom':>4} {'prefix':>6} {'vars':>7} {'build s':>8} "
            f"{'solve s':>8} {'total s':>8}  {'status':<36} {'objective USD':>15} {'LP bound USD':>15} {'gap %':>7}")
    print(head)
    totals = []
    last = None
    for n in sizes:
        options, units = synthetic_options(n, args.seed, n_kits=args.kits, climate_cells=args.climate_cells,
                                           kg_km_usd=args.kg_km_usd, cost_noise=args.cost_noise)
        t = time.perf_counter()
        res = optimise_catalogue(options, units, max_types=args.max_types, cost_per_type_usd=args.cost_per_type,
                                 solver=args.solver, time_limit_s=args.time_limit,
                                 aggregate=not args.no_aggregate)
        total = time.perf_counter() - t
        m = res.model_stats
        totals.append(total)
        last = (n, total, res)
        print(f"{n:>6} {len(units):>6} {len(options):>8} {res.distinct_cases:>6} {m.get('dominated_kits', 0):>4} {m.get('prefix_sets', 0):>6} "
              f"{m.get('variables', 0):>7} {m.get('build_s', 0.0):>8.2f} {m.get('solve_s', 0.0):>8.2f} {total:>8.2f}  "
              f"{res.status:<36} {res.objective_usd:>15,.0f} {res.lower_bound_usd:>15,.0f} {100 * res.gap:>7.3f}",
              flush=True)
    print(f"growth exponent of total time against sites: {growth_exponent(sizes, totals):.2f}")
    if last is not None and last[0] >= 10000:
        n, total, res = last
        ok = total <= 60.0 and res.gap <= 0.005
        print(f"target at {n:,} sites (<= 60 s, gap <= 0.5 %): {'met' if ok else 'NOT met'} "
              f"({total:.1f} s, gap {100 * res.gap:.3f} %)")


if __name__ == "__main__":
    main()
