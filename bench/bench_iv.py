"""Speed of the single-diode operating tables: fit, table build, lookups per second.

Run: python bench/bench_iv.py
"""

from __future__ import annotations

import time

import numpy as np
from numba import njit, prange

from fleet import iv
from fleet.components import read_library


@njit(cache=True, parallel=True)
def _lookups(stack, which, g, tc, grid):
    n = which.shape[0]
    out = np.zeros(n)
    for k in prange(n):
        s = 0.0
        tab = stack[which[k]]
        for h in range(g.shape[0]):
            s += iv.table_lookup(tab, g[h], tc[h], grid[0], grid[1], grid[2], grid[3])
        out[k] = s
    return out


def main() -> None:
    lib = read_library()
    rows = list(lib.pv_modules.iterrows())
    t = time.perf_counter()
    for _, row in rows:
        iv._fit_cached.cache_clear()
        iv.fit_module(row)
    print(f"fit_module: {(time.perf_counter() - t) / len(rows) * 1e3:.1f} ms per module (uncached)")
    params = iv.fit_module(rows[1][1])
    n_g, n_t = iv.G_GRID_W_M2.size, iv.T_GRID_C.size
    for kind, kw in (("pwm", {}), ("mppt", {"mppt_window_v": (15.2, 100.0)})):
        reps = 20
        t = time.perf_counter()
        for _ in range(reps):
            tab = iv.build_table(params, kind=kind, n_series=1, v_battery_charge=13.2, **kw)
        dt = (time.perf_counter() - t) / reps
        print(f"build_table {kind}: {dt * 1e3:.1f} ms for a {n_g} x {n_t} grid")
    tabs = [iv.build_table(params, kind="pwm", n_series=1, v_battery_charge=13.2),
            iv.build_table(params, kind="mppt", n_series=1, v_battery_charge=13.2, mppt_window_v=(15.2, 100.0))]
    stack = np.stack([x.p_operating_w for x in tabs])
    grid = np.array(tabs[0].grid)
    rng = np.random.default_rng(0)
    g = rng.uniform(0.0, 1100.0, 8760).astype(np.float32)
    tc = rng.uniform(0.0, 70.0, 8760).astype(np.float32)
    which = rng.integers(0, 2, 2000)
    _lookups(stack, which[:2], g, tc, grid)  # compile
    t = time.perf_counter()
    _lookups(stack, which, g, tc, grid)
    dt = time.perf_counter() - t
    n = which.size * g.size
    print(f"table_lookup: {n / dt / 1e6:.0f} million lookups per second ({dt / n * 1e9:.2f} ns each, all cores)")


if __name__ == "__main__":
    main()
