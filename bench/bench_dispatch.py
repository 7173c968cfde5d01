"""Dispatch kernel speed: compiled batch kernel against the same hourly rules run
as plain Python, side by side in one run.

    python bench/bench_dispatch.py [--pairs 2000] [--years 3]

Prints ns per site-kit-hour for each and their ratio. Inputs are synthetic
(a sunny-day shape and an evening-peaked load), for timing only.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from fleet import dispatch
from fleet.components import read_library
from fleet.iv import tables_for_kits
from fleet.kits import DesignConditions, candidate_kits, kernel_parameters


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pairs", type=int, default=2000)
    ap.add_argument("--years", type=int, default=3)
    args = ap.parse_args()

    lib = read_library()
    kits, _, _ = candidate_kits(lib, voltages_v=[12, 24, 48], max_parallel_strings=3,
                                cond=DesignConditions(5.0, 65.0))
    tables = tables_for_kits(kits, lib)
    params = kernel_parameters(kits, tables, reconnect_hysteresis_soc=0.15, pv_losses_fraction=0.14)
    rng = np.random.default_rng(0)
    h = np.arange(8760) % 24
    shape = np.clip(np.sin((h + 0.5 - 6) / 12 * np.pi), 0, None)
    n_sites = 20
    poa = (shape[None, None, :] * rng.uniform(300, 1000, (n_sites, args.years, 365)).repeat(24, axis=2)).astype(np.float32)
    tc = np.full_like(poa, 35.0)
    loads = (np.where((h >= 18) & (h < 23), 1.0, 0.25)[None, :] * rng.uniform(2, 400, (50, 1))).astype(np.float32)
    site = rng.integers(0, n_sites, args.pairs).astype(np.int64)
    unit = rng.integers(0, loads.shape[0], args.pairs).astype(np.int64)
    kit = rng.integers(0, len(kits), args.pairs).astype(np.int64)
    scale = np.ones(args.pairs)

    crit = np.zeros_like(loads)
    unit_p = np.zeros((loads.shape[0], 3))
    kernel_args = (poa, tc, loads, crit, unit_p, params, tables.p_operating_w, tables.p_mp_w, tables.grid)
    dispatch.simulate_pairs(*kernel_args, site[:2], unit[:2], kit[:2], scale[:2])  # compile / load cache
    t = time.perf_counter()
    dispatch.simulate_pairs(*kernel_args, site, unit, kit, scale)
    batch_s = time.perf_counter() - t
    steps = args.pairs * args.years * 8760
    batch_ns = batch_s / steps * 1e9

    # the same rules, interpreted: one pair-year through the pure-Python body of the kernel step
    step = dispatch._step.py_func
    p = params[kit[0]]
    t_idx = int(p[dispatch.P_TABLE])
    op, mp = tables.p_operating_w[t_idx], tables.p_mp_w[t_idx]
    e, on_g, on_c = p[dispatch.P_ENOM], True, True
    t = time.perf_counter()
    for hh in range(8760):
        r = step(float(poa[site[0], 0, hh]), float(tc[site[0], 0, hh]), float(loads[unit[0], hh]), 0.0, 0.0, 0.0, 0.0,
                 p, op, mp, tables.grid, e, on_g, on_c)
        e, on_g, on_c = r[0], r[1], r[2]
    python_ns = (time.perf_counter() - t) / 8760 * 1e9

    print(f"pairs x years x hours     {args.pairs} x {args.years} x 8760 = {steps:,} steps")
    print(f"compiled batch kernel     {batch_ns:8.1f} ns per site-kit-hour  ({batch_s:.2f} s)")
    print(f"plain Python, same rules  {python_ns:8.1f} ns per site-kit-hour")
    print(f"speed-up                  {python_ns / batch_ns:8.0f} x")


if __name__ == "__main__":
    main()
