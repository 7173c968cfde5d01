"""Program-scale benchmark: end-to-end time and peak memory against the number of sites.

    python bench/bench_scale.py [--sizes 100 1000 10000] [--years 10] [--scheduler local:2]
                                [--time-budget-s 3600] [--compare-cluster 100] [--seed 0]

Each size is an invented program from ``bench/synthetic_program.py`` (real land
coordinates, invented everything else) planned by ``fleet.plan.run_plan`` in a
fresh Python process, so its peak memory is its own: the largest resident set
of any one process (``ru_maxrss`` from ``os.wait4``) and, where ``psutil`` is
importable (it comes with dask.distributed), the sampled peak of the summed
resident set of the process and its children (cluster workers included).
Printed per size: sites, service units, options simulated
(``len(result.evaluations)``), seconds per stage (``result.timings_s``) with
its share of the end-to-end time, total seconds, CPU seconds and peak MB. Then
the growth exponent of time against sites (least squares on log-log) and the
targets: 10,000 sites within 600 s and 4 GB, exponent at most 1.

``--time-budget-s`` skips a size whose time, extrapolated from the sizes
measured before it, exceeds the budget; extrapolations are printed and
labelled as such, never as measurements.

``--compare-cluster N`` plans N sites in-process and on ``--cluster local:2``
(two single-threaded worker processes) and prints them side by side with the
ratio cluster / in-process (target: at most 1, the cluster not slower) and
whether both gave the same plan; ``--repeat R`` alternates the two R times and
keeps each one's fastest run (a shared machine is noisy).

Every figure printed is measured in this run unless it says EXTRAPOLATION.
"""

from __future__ import annotations

import argparse
import dataclasses
import hashlib
import inspect
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent

TARGET_SITES = 10_000
TARGET_SECONDS = 600.0
TARGET_MEMORY_MB = 4096.0
TARGET_EXPONENT = 1.0
TARGET_YEARS = 10
SAMPLE_INTERVAL_S = 0.2
MEMORY_FIT_SPAN = 4.0
CHILD_FAILED = 1
CHILD_UNSUPPORTED = 3


# --------------------------------------------------------------------------
# The child: one program, one scheduler, one process
# --------------------------------------------------------------------------


def _scheduler_supported() -> bool:
    from fleet.plan import run_plan

    return "scheduler" in inspect.signature(run_plan).parameters


def _is_inprocess(scheduler: str | None) -> bool:
    return scheduler is None or str(scheduler).strip().lower() in ("", "inprocess", "in-process", "none")


def plan_digest(result) -> str:
    """A short fingerprint of the plan (chosen kits, assignment, objective to the cent),
    to tell whether two runs planned the same."""
    h = hashlib.sha1()
    for scheme in sorted(result.catalogues):
        c = result.catalogues[scheme]
        h.update(f"{scheme}|{sorted(c.chosen_kits)}|{round(float(c.objective_usd), 2)}|".encode())
        a = c.assignment.astype(str).sort_index()
        h.update("|".join(f"{k}={v}" for k, v in a.items()).encode())
    return h.hexdigest()[:12]


def run_child(n_sites: int, years: int, scheduler: str | None, seed: int, out_json: Path,
              option_search: str = "bounded") -> int:
    """Generate, read and plan one program; write the figures to ``out_json``."""
    sys.path.insert(0, str(HERE))
    from synthetic_program import check, make_depots, make_program

    from fleet.components import read_library
    from fleet.config import load_config
    from fleet.plan import run_plan
    from fleet.sites import read_sites
    from fleet.transport import read_depots

    if not _is_inprocess(scheduler) and not _scheduler_supported():
        out_json.write_text(json.dumps({"unsupported": "run_plan has no 'scheduler' argument yet"}))
        return CHILD_UNSUPPORTED
    t = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="fleet-bench-scale-") as tmp:
        table = make_program(n_sites, seed=seed)
        check(table)
        table.to_csv(Path(tmp) / "sites.csv", index=False)
        make_depots(table).to_csv(Path(tmp) / "depots.csv", index=False)
        sites = read_sites(Path(tmp) / "sites.csv")
        depots = read_depots(Path(tmp) / "depots.csv")
    library = read_library()
    cfg = load_config().with_overrides(program={"weather_years": years}, catalogue={"option_search": option_search})
    cfg = dataclasses.replace(cfg, depots=depots, depots_note="")
    setup_s = time.perf_counter() - t

    kwargs = {} if _is_inprocess(scheduler) else {"scheduler": scheduler}
    t = time.perf_counter()
    result = run_plan(sites, library, cfg, **kwargs)
    total_s = time.perf_counter() - t

    own = resource.getrusage(resource.RUSAGE_SELF)
    out = {
        "sites": len(sites),
        "units": len(result.units),
        "options": len(result.evaluations),
        "options_not_simulated": len(getattr(result, "candidates", ())),
        "search_rounds": int(getattr(result, "search_rounds", 0)),
        "option_search": option_search,
        "years": years,
        "scheduler": scheduler or "inprocess",
        "timings_s": {k: float(v) for k, v in result.timings_s.items()},
        "total_s": total_s,
        "setup_s": setup_s,
        "self_maxrss_mb": own.ru_maxrss / 1024.0,  # Linux: kB
        "digest": plan_digest(result),
    }
    out_json.write_text(json.dumps(out))
    return 0


# --------------------------------------------------------------------------
# The parent: fresh processes, memory sampling, reporting
# --------------------------------------------------------------------------


class TreeSampler(threading.Thread):
    """Peak of the summed resident set of a process and its descendants, sampled.

    A descendant counts from its second sighting under the same name: between
    fork and exec (the solver binary is started that way) a new process shows its
    parent's pages as its own resident set for a moment, which would count them
    twice; after exec its name has changed.
    """

    def __init__(self, pid: int, interval_s: float = SAMPLE_INTERVAL_S):
        super().__init__(daemon=True)
        self.pid, self.interval_s = pid, interval_s
        self.peak_bytes = 0
        self.stop = threading.Event()
        try:
            import psutil
        except ImportError:
            self.psutil = None
        else:
            self.psutil = psutil

    def run(self) -> None:
        if self.psutil is None:
            return
        ps = self.psutil
        try:
            root = ps.Process(self.pid)
        except ps.Error:
            return
        names: dict[int, str] = {}
        while not self.stop.is_set():
            try:
                total = root.memory_info().rss
                children = root.children(recursive=True)
            except ps.Error:
                break
            seen: dict[int, str] = {}
            for p in children:
                try:
                    name = p.name()
                    rss = p.memory_info().rss
                except ps.Error:
                    continue
                seen[p.pid] = name
                if names.get(p.pid) == name:
                    total += rss
            names = seen
            self.peak_bytes = max(self.peak_bytes, total)
            self.stop.wait(self.interval_s)


def measure(n_sites: int, years: int, scheduler: str | None, seed: int, option_search: str = "bounded") -> dict:
    """Plan ``n_sites`` in a fresh process; its figures plus peak memory and CPU time."""
    with tempfile.TemporaryDirectory(prefix="fleet-bench-scale-") as tmp:
        out_json, err_path = Path(tmp) / "out.json", Path(tmp) / "stderr.txt"
        cmd = [sys.executable, str(Path(__file__).resolve()), "--child", str(n_sites), "--years", str(years),
               "--seed", str(seed), "--out-json", str(out_json), "--option-search", option_search]
        if scheduler:
            cmd += ["--scheduler", scheduler]
        wall = time.perf_counter()
        with open(err_path, "wb") as err:
            proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=err)
            sampler = TreeSampler(proc.pid)
            sampler.start()
            # wait4 gives this child's own resource use (ru_maxrss: the largest
            # resident set of it and of the descendants it waited for).
            _, status, usage = os.wait4(proc.pid, 0)
            proc.returncode = os.waitstatus_to_exitcode(status)
            sampler.stop.set()
            sampler.join()
        wall = time.perf_counter() - wall
        if proc.returncode == CHILD_UNSUPPORTED:
            return {"unsupported": json.loads(out_json.read_text())["unsupported"], "sites": n_sites}
        if proc.returncode != 0 or not out_json.exists():
            tail = err_path.read_text(errors="replace").strip().splitlines()[-15:]
            return {"failed": f"exit code {proc.returncode}", "stderr": tail, "sites": n_sites}
        out = json.loads(out_json.read_text())
    out["process_wall_s"] = wall
    out["cpu_s"] = usage.ru_utime + usage.ru_stime
    out["largest_process_mb"] = usage.ru_maxrss / 1024.0
    out["tree_peak_mb"] = sampler.peak_bytes / 2**20 if sampler.psutil is not None else None
    out["peak_mb"] = max(out["largest_process_mb"], out["tree_peak_mb"] or 0.0)
    return out


def fit_power_law(sizes, values) -> tuple[float, float] | None:
    """Least-squares line through (log sites, log value): (exponent, log prefactor);
    None with fewer than two distinct sizes."""
    x, y = np.log(np.asarray(sizes, float)), np.log(np.asarray(values, float))
    if len(set(sizes)) < 2:
        return None
    slope, intercept = np.polyfit(x, y, 1)
    return float(slope), float(intercept)


def extrapolate_seconds(measured: list[dict], n_sites: int) -> tuple[float, str]:
    """Time at ``n_sites`` extrapolated from the measured runs, and how. The growth
    exponent used is the fitted one but at least 1 (small programs carry fixed
    costs that flatten the fit), from the largest measured size."""
    last = max(measured, key=lambda r: r["sites"])
    fit = fit_power_law([r["sites"] for r in measured], [r["total_s"] for r in measured])
    exponent = max(1.0, fit[0]) if fit else 1.0
    how = (f"fitted exponent {fit[0]:.2f}, used {exponent:.2f}" if fit else "exponent 1 assumed (one size measured)")
    return last["total_s"] * (n_sites / last["sites"]) ** exponent, f"from {last['sites']:,} sites, {how}"


def extrapolate_memory_mb(measured: list[dict], n_sites: int) -> tuple[float, str] | None:
    """Peak memory at ``n_sites`` on a straight line (MB = a + b x sites) through the
    measured runs; None unless the sizes span a factor of 4 or more (closer sizes
    differ by little more than the noise of the interpreter's own footprint)."""
    sizes = [r["sites"] for r in measured]
    if max(sizes) < MEMORY_FIT_SPAN * min(sizes):
        return None
    b, a = np.polyfit(np.asarray(sizes, float), [r["peak_mb"] for r in measured], 1)
    return float(a + b * n_sites), f"straight line through {len(sizes)} sizes, {1024 * b:.1f} kB per site"


def _label(stage: str) -> str:
    return stage.replace("sites: ", "  ", 1) if stage.startswith("sites: ") else stage


def print_run(r: dict) -> None:
    print(f"== {r['sites']:,} sites, {r['years']} weather years, scheduler {r['scheduler']} ==")
    print(f"  service units {r['units']:,}; options simulated {r['options']:,}; bounded, not simulated "
          f"{r.get('options_not_simulated', 0):,} ({r.get('option_search', 'bounded')} search, "
          f"{r.get('search_rounds', 0)} catalogue rounds)")
    total = r["total_s"]
    top = 0.0
    for stage, s in r["timings_s"].items():
        if not stage.startswith("sites: "):
            top += s
        print(f"  {_label(stage):<40} {s:9.2f} s  {100 * s / total:6.1f} %")
    print(f"  {'(not in a stage)':<40} {total - top:9.2f} s  {100 * (total - top) / total:6.1f} %")
    print(f"  {'total (run_plan)':<40} {total:9.2f} s  {100.0:6.1f} %")
    if any(k.startswith("sites: ") for k in r["timings_s"]):
        print("  (indented stages are summed over chunks; on several workers they can exceed wall time)")
    print(f"  setup (generate + read table, not in total) {r['setup_s']:.2f} s; "
          f"process wall time {r['process_wall_s']:.1f} s (with imports); CPU {r['cpu_s']:.1f} s")
    tree = f"{r['tree_peak_mb']:.0f} MB" if r["tree_peak_mb"] is not None else "n/a (no psutil)"
    print(f"  peak memory {r['peak_mb']:.0f} MB (largest process {r['largest_process_mb']:.0f} MB; "
          f"process tree, sampled every {SAMPLE_INTERVAL_S} s: {tree})")


def print_failure(r: dict) -> None:
    if "unsupported" in r:
        print(f"== {r['sites']:,} sites: not run: {r['unsupported']} ==")
    else:
        print(f"== {r['sites']:,} sites: FAILED ({r['failed']}) ==")
        for line in r.get("stderr", []):
            print(f"   | {line}")


def scale(sizes: list[int], years: int, scheduler: str | None, seed: int, budget_s: float | None,
          option_search: str = "bounded") -> None:
    measured: list[dict] = []
    skipped: list[int] = []
    for n in sorted(set(sizes)):
        if budget_s is not None and measured:
            est, how = extrapolate_seconds(measured, n)
            print(f"-- EXTRAPOLATION, not a measurement: {n:,} sites would take about {est:,.0f} s ({how}); "
                  f"budget {budget_s:,.0f} s")
            if est > budget_s:
                print(f"-- skipped {n:,} sites: extrapolated time over the budget")
                skipped.append(n)
                continue
        r = measure(n, years, scheduler, seed, option_search)
        if "total_s" not in r:
            print_failure(r)
            continue
        print_run(r)
        measured.append(r)

    if not measured:
        return
    print("== summary (measured) ==")
    print(f"  {'sites':>8} {'units':>8} {'options':>10} {'total s':>9} {'ms/site':>8} {'peak MB':>8} {'CPU s':>8}")
    for r in measured:
        print(f"  {r['sites']:>8,} {r['units']:>8,} {r['options']:>10,} {r['total_s']:>9.1f} "
              f"{1000 * r['total_s'] / r['sites']:>8.1f} {r['peak_mb']:>8.0f} {r['cpu_s']:>8.1f}")
    sizes_m = [r["sites"] for r in measured]
    fit = fit_power_law(sizes_m, [r["total_s"] for r in measured])
    if fit:
        print(f"  growth exponent of total time vs sites (log-log least squares, {min(sizes_m):,}-"
              f"{max(sizes_m):,} sites): {fit[0]:.2f}")
        stages = [k for k in measured[0]["timings_s"] if not k.startswith("sites: ")]
        parts = []
        for k in stages:
            v = [r["timings_s"].get(k, 0.0) for r in measured]
            if all(x > 0 for x in v):
                parts.append(f"{k} {fit_power_law(sizes_m, v)[0]:.2f}")
        if parts:
            print("  per stage: " + ", ".join(parts))
    else:
        print("  growth exponent: needs two sizes or more")

    print("== targets ==")
    if years != TARGET_YEARS:
        print(f"  (targets are stated for {TARGET_YEARS} weather years; this run used {years})")
    at_target = [r for r in measured if r["sites"] == TARGET_SITES]
    if at_target:
        r = at_target[0]
        print(f"  {TARGET_SITES:,} sites <= {TARGET_SECONDS:.0f} s: measured {r['total_s']:.0f} s: "
              f"{'HOLDS' if r['total_s'] <= TARGET_SECONDS else 'FAILS'}")
        print(f"  {TARGET_SITES:,} sites <= {TARGET_MEMORY_MB / 1024:.0f} GB: measured {r['peak_mb']:.0f} MB: "
              f"{'HOLDS' if r['peak_mb'] <= TARGET_MEMORY_MB else 'FAILS'}")
    else:
        est, how = extrapolate_seconds(measured, TARGET_SITES)
        why = "skipped (time budget)" if TARGET_SITES in skipped else "not run"
        print(f"  {TARGET_SITES:,} sites <= {TARGET_SECONDS:.0f} s: {why}; "
              f"EXTRAPOLATION, not a measurement: about {est:,.0f} s at {years} weather years ({how})")
        mem = extrapolate_memory_mb(measured, TARGET_SITES)
        if mem:
            print(f"  {TARGET_SITES:,} sites <= {TARGET_MEMORY_MB / 1024:.0f} GB: {why}; "
                  f"EXTRAPOLATION, not a measurement: about {mem[0]:,.0f} MB at {years} weather years ({mem[1]})")
        else:
            print(f"  {TARGET_SITES:,} sites <= {TARGET_MEMORY_MB / 1024:.0f} GB: {why}; no extrapolation "
                  f"(measured sizes span less than a factor {MEMORY_FIT_SPAN:g})")
    if fit:
        print(f"  growth exponent <= {TARGET_EXPONENT:g}: measured {fit[0]:.2f} over {min(sizes_m):,}-"
              f"{max(sizes_m):,} sites: {'HOLDS' if fit[0] <= TARGET_EXPONENT else 'FAILS'}"
              + ("" if max(sizes_m) >= TARGET_SITES else " (at these sizes only)"))


def compare_runs(n_sites: int, years: int, seed: int, variants: list[tuple[str, str | None, str]],
                 repeat: int = 1) -> tuple[dict, dict] | None:
    """Plan ``n_sites`` two ways (label, scheduler, option search), each in a fresh process, and
    print the stages side by side with the ratio second / first; returns the two fastest runs."""
    runs: dict[str, list[dict]] = {label: [] for label, _, _ in variants}
    for _ in range(repeat):
        for label, scheduler, search in variants:
            r = measure(n_sites, years, scheduler, seed, search)
            if "total_s" not in r:
                print_failure(r)
                return None
            runs[label].append(r)
    (la, *_), (lb, *_) = variants
    a = min(runs[la], key=lambda r: r["total_s"])
    b = min(runs[lb], key=lambda r: r["total_s"])
    if repeat > 1:
        for label in (la, lb):
            print(f"  {label} totals s: " + ", ".join(f"{r['total_s']:.2f}" for r in runs[label]))
    w = 40
    print(f"  {'':<{w}} {la:>11} {lb:>11} {'ratio':>7}")
    stages = list(dict.fromkeys([*a["timings_s"], *b["timings_s"]]))
    for k in stages:
        x, y = a["timings_s"].get(k, math.nan), b["timings_s"].get(k, math.nan)
        ratio = y / x if x > 0 else math.nan
        print(f"  {_label(k) + ' s':<{w}} {x:>11.2f} {y:>11.2f} {ratio:>7.2f}")
    rows = [("total (run_plan) s", a["total_s"], b["total_s"], ".2f"),
            ("CPU s (process and its children)", a["cpu_s"], b["cpu_s"], ".1f"),
            ("peak memory MB (see below)", a["peak_mb"], b["peak_mb"], ".0f"),
            ("options simulated", a["options"], b["options"], ",.0f"),
            ("options bounded, not simulated", a.get("options_not_simulated", 0), b.get("options_not_simulated", 0), ",.0f"),
            ("catalogue rounds", a.get("search_rounds", 0), b.get("search_rounds", 0), ".0f")]
    for name, x, y, f in rows:
        print(f"  {name:<{w}} {x:>11{f}} {y:>11{f}} {y / x if x else math.nan:>7.2f}")
    print("  peak memory: larger of the largest process and the sampled process-tree sum (workers included)")
    digests = {r["digest"] for rs in runs.values() for r in rs}
    print(f"  same plan in every run: {'yes' if len(digests) == 1 else 'NO'} (digests {', '.join(sorted(digests))})")
    return a, b


def compare_cluster(n_sites: int, years: int, cluster: str, seed: int, repeat: int = 1) -> None:
    best = f", best of {repeat} alternating runs each" if repeat > 1 else ""
    print(f"== in-process vs {cluster}: {n_sites:,} sites, {years} weather years (each in a fresh process{best}) ==")
    out = compare_runs(n_sites, years, seed, [("in-process", None, "bounded"), (cluster, cluster, "bounded")], repeat)
    if out:
        ratio = out[1]["total_s"] / out[0]["total_s"]
        print(f"  target cluster / in-process <= 1: measured {ratio:.2f}: {'HOLDS' if ratio <= 1 else 'FAILS'}")


def compare_search(n_sites: int, years: int, seed: int, repeat: int = 1) -> None:
    """Every listed option simulated against the bounded search, same program, side by side."""
    best = f", best of {repeat} alternating runs each" if repeat > 1 else ""
    print(f"== every option simulated vs the bounded search: {n_sites:,} sites, {years} weather years "
          f"(in-process, each in a fresh process{best}) ==")
    out = compare_runs(n_sites, years, seed, [("every", None, "every"), ("bounded", None, "bounded")], repeat)
    if out:
        print(f"  speed-up every / bounded: {out[0]['total_s'] / out[1]['total_s']:.2f}x end to end, "
              f"{out[0]['options'] / max(out[1]['options'], 1):.2f}x fewer options simulated")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter, epilog=__doc__)
    ap.add_argument("--sizes", type=int, nargs="+", default=None,
                    help="program sizes in sites (default 100 1000 10000, unless only --compare-cluster is given)")
    ap.add_argument("--years", type=int, default=TARGET_YEARS, help="weather years (default 10)")
    ap.add_argument("--scheduler", default=None,
                    help="scheduler for the --sizes runs: inprocess (default), local:N or tcp://host:port")
    ap.add_argument("--seed", type=int, default=0, help="seed of the invented programs (default 0)")
    ap.add_argument("--time-budget-s", type=float, default=None,
                    help="skip sizes whose extrapolated time exceeds this many seconds")
    ap.add_argument("--compare-cluster", type=int, metavar="N", default=None,
                    help="also plan N sites in-process and on --cluster, side by side")
    ap.add_argument("--cluster", default="local:2", help="scheduler of --compare-cluster (default local:2)")
    ap.add_argument("--repeat", type=int, default=1,
                    help="--compare-cluster: alternate the two this many times and keep each one's fastest (default 1)")
    ap.add_argument("--option-search", choices=("bounded", "every"), default="bounded",
                    help="how the --sizes runs choose options to simulate (default bounded)")
    ap.add_argument("--compare-search", type=int, metavar="N", default=None,
                    help="also plan N sites simulating every option and with the bounded search, side by side")
    ap.add_argument("--child", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--out-json", type=Path, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child is not None:
        return run_child(args.child, args.years, args.scheduler, args.seed, args.out_json, args.option_search)
    if args.compare_cluster is not None and args.compare_cluster < 1:
        ap.error("--compare-cluster must be >= 1")
    sizes = args.sizes if args.sizes is not None else ([] if args.compare_cluster or args.compare_search
                                                       else [100, 1000, 10_000])
    if any(n < 1 for n in sizes) or args.years < 1 or args.repeat < 1:
        ap.error("sizes, --years and --repeat must be >= 1")
    print(f"python {sys.version.split()[0]}, {os.cpu_count()} CPUs visible; every figure is measured in this run "
          f"unless marked EXTRAPOLATION")
    if sizes:
        scale(sizes, args.years, args.scheduler, args.seed, args.time_budget_s, args.option_search)
    if args.compare_cluster:
        compare_cluster(args.compare_cluster, args.years, args.cluster, args.seed, args.repeat)
    if args.compare_search:
        compare_search(args.compare_search, args.years, args.seed, args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
