"""Dispatch kernel speed: the compiled kernel against the plain-Python reference
of the same rules (:mod:`fleet.dispatch_reference`), on the same cases, in one run.

    python bench/bench_dispatch.py [--pairs 2000] [--years 3] [--reference-years 2]

"All rules on": the demo library's candidate kits (DC and AC, PWM and MPPT,
lead-acid and LiFePO4, minigrid blocks) plus series and shunt variants of the
PWM kits, with night-time reverse current on some; a quarter of the units carry
a critical load with two-stage shedding and a tenth a deferrable pump; battery
temperatures 15-40 degC. Weather is synthetic (runs of sunny and dull days) and
loads are sized from each kit's array so that disconnects, regulation and
float all occur. Inputs are invented, for timing only.

Prints site-kit-hours per second of each and their ratio.
"""

from __future__ import annotations

import argparse
import os
import time

import numba
import numpy as np

from fleet import dispatch
from fleet.battery import voltage_tables
from fleet.components import read_library
from fleet.dispatch_reference import simulate_year_reference
from fleet.iv import array_power_per_string, tables_for_kits
from fleet.kits import DesignConditions, candidate_kits, kernel_parameters

K = dispatch.K


def cases(n_pairs: int, n_years: int, seed: int = 0, load_share=(0.4, 1.1)):
    lib = read_library()
    kits, _, _ = candidate_kits(lib, voltages_v=[12, 24, 48], max_parallel_strings=3,
                                cond=DesignConditions(5.0, 65.0))
    tables = tables_for_kits(kits, lib)
    params = kernel_parameters(kits, tables, reconnect_hysteresis_soc=0.15, pv_losses_fraction=0.14)
    # series and shunt variants of the PWM kits, some without reverse-current blocking
    pwm = np.flatnonzero(params[:, K["controller_kind"]] == dispatch.KIND_CODE["pwm"])
    extra = []
    for kind in ("series", "shunt"):
        v = params[pwm].copy()
        v[:, K["controller_kind"]] = dispatch.KIND_CODE[kind]
        if kind == "series":
            v[::2, K["reverse_current_a"]] = 0.05
        extra.append(v)
    params = np.vstack([params, *extra])
    rng = np.random.default_rng(seed)
    n_sites = 20
    h = np.arange(8760) % 24
    shape = np.clip(np.sin((h + 0.5 - 6) / 12 * np.pi), 0, None)
    dull = rng.random((n_sites, n_years, 365)) < 0.25
    level = np.where(dull, rng.uniform(80, 300, dull.shape), rng.uniform(600, 1000, dull.shape))
    poa = (shape[None, None, :] * level.repeat(24, axis=2)).astype(np.float32)
    tcell = (25 + poa / 40).astype(np.float32)
    n_tab = len(tables.tables)
    pv = array_power_per_string(poa, tcell, tables, np.repeat(np.arange(n_sites), n_tab),
                                np.tile(np.arange(n_tab), n_sites))
    kit = rng.integers(0, len(params), n_pairs)
    site = rng.integers(0, n_sites, n_pairs)
    source = (site * n_tab + params[kit, K["table_index"]].astype(np.int64)).astype(np.int64)
    # loads: an evening-peaked day whose energy is 40-110 % of the array's mean daily output
    daily_wh = pv[source].sum(axis=2).mean(axis=1) / 365 * params[kit, K["array_multiplier"]]
    shape_load = np.where((h >= 18) & (h < 23), 3.0, 0.6)
    shape_load = shape_load / shape_load[:24].sum()
    general = (shape_load[None, :] * (daily_wh * rng.uniform(*load_share, n_pairs))[:, None]).astype(np.float32)
    critical = np.zeros_like(general)
    unit_p = np.zeros((n_pairs, 3))
    has_crit = rng.random(n_pairs) < 0.25
    critical[has_crit] = general[has_crit] * 0.2
    unit_p[has_crit, 2] = 0.1
    pump = rng.random(n_pairs) < 0.1
    unit_p[pump, 0] = daily_wh[pump] * 0.2
    unit_p[pump, 1] = daily_wh[pump] * 0.05
    temp = rng.uniform(15, 40, n_pairs)
    return (pv, general, critical, unit_p, params, voltage_tables(), source, np.arange(n_pairs, dtype=np.int64),
            kit.astype(np.int64), np.ones(n_pairs), temp)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pairs", type=int, default=2000)
    ap.add_argument("--years", type=int, default=3)
    ap.add_argument("--reference-years", type=int, default=2, help="pair-years run by the plain-Python reference")
    args = ap.parse_args()
    print(f"threads                    {numba.get_num_threads()} (of {os.cpu_count()} CPUs)")
    steps = args.pairs * args.years * 8760
    print(f"cases                      {args.pairs} pairs x {args.years} years x 8760 h = {steps:,} site-kit-hours "
          f"(+{dispatch.WARMUP_HOURS} warm-up hours per pair-year)")
    for label, share in (("stressed (daily load 40-110 % of array output)", (0.4, 1.1)),
                         ("typical (daily load 15-60 % of array output)", (0.15, 0.6))):
        c = cases(args.pairs, args.years, load_share=share)
        pv, general, critical, unit_p, params, vt, source, unit, kit, scale, temp = c
        first = slice(0, 2)
        dispatch.simulate_pairs(pv, general, critical, unit_p, params, vt, source[first], unit[first], kit[first],
                                scale[first], temp[first])  # compile or load the cache
        t = time.perf_counter()
        out = dispatch.simulate_pairs(*c)
        kernel_s = time.perf_counter() - t
        kernel_rate = steps / kernel_s
        n_ref = args.reference_years
        t = time.perf_counter()
        for i in range(n_ref):
            simulate_year_reference(pv[source[i], 0], general[unit[i]], critical[unit[i]], unit_p[unit[i]],
                                    scale[i], params[kit[i]], temp[i])
        ref_rate = n_ref * 8760 / (time.perf_counter() - t)
        m = dict(zip(dispatch.METRICS, out.reshape(-1, dispatch.N_METRICS).T))
        print(f"\n{label}")
        print(f"  pair-years with disconnects {np.mean(m['disconnected_hours'] > 0):.0%}; regulating "
              f"{np.mean(m['regulation_hours'] > 0):.0%}; shunt dissipation {np.mean(m['shunt_dissipation_wh'] > 0):.0%}; "
              f"reverse current {np.mean(m['reverse_current_wh'] > 0):.0%}")
        print(f"  compiled kernel          {kernel_rate / 1e6:10.1f} million site-kit-hours/s  ({kernel_s:.2f} s)")
        print(f"  plain-Python reference   {ref_rate / 1e6:10.3f} million site-kit-hours/s  ({n_ref} pair-years)")
        print(f"  ratio                    {kernel_rate / ref_rate:10.0f} x")


if __name__ == "__main__":
    main()
