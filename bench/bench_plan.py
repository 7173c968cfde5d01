"""End-to-end plan of the bundled demo program: time per stage and shares.

    python bench/bench_plan.py [--sites 180] [--years 10]

Prints wall time per stage and the option count; also the time per
site-year of the weather stage and per simulated site-kit-hour of dispatch.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from fleet.components import read_library
from fleet.config import load_config
from fleet.plan import run_plan
from fleet.sites import read_sites

DEMO = Path(__file__).resolve().parents[1] / "sites" / "demo_sites.csv"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, default=180)
    ap.add_argument("--years", type=int, default=10)
    args = ap.parse_args()
    sites = read_sites(DEMO).head(args.sites).reset_index(drop=True)
    cfg = load_config().with_overrides(program={"weather_years": args.years})
    t = time.perf_counter()
    r = run_plan(sites, read_library(), cfg)
    total = time.perf_counter() - t
    print(f"{len(sites)} sites, {args.years} weather years, {len(r.evaluations):,} options simulated")
    for stage, s in r.timings_s.items():
        print(f"  {stage:<10} {s:8.1f} s  {100 * s / total:5.1f} %")
    print(f"  {'total':<10} {total:8.1f} s")
    print(f"weather:  {1000 * r.timings_s['weather'] / (len(sites) * args.years):.1f} ms per site-year")
    steps = len(r.evaluations) * args.years * 8760
    print(f"dispatch: {1e9 * r.timings_s['dispatch'] / steps:.1f} ns per site-kit-hour ({steps:,} steps)")


if __name__ == "__main__":
    main()
