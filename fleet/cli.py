"""Command-line shell: ``fleet plan`` and friends.

A thin layer: parse arguments, call the core, print progress and a summary.
Exit status: 0 success, 2 bad input (every problem listed), 1 unexpected error.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from . import __version__

EPILOG_PLAN = """\
inputs
  SITES          site table: .csv, .xlsx, .gpkg or .geojson, one row a site. Required columns:
                 site_id, latitude and longitude (WGS84 degrees; or a point geometry), scheme
                 ('shs' or 'minigrid'), households_t1 ... households_t5 (households per
                 Multi-Tier Framework tier; missing tiers count as 0). Optional: site_name,
                 district, depot, health_posts, schools, productive_kwh_day (kWh/day),
                 temp_mean_c and design_temp_min_c (degC), reliability_target (largest unmet
                 energy fraction, 0..1). Other columns are carried through to the outputs.
  --components   component library: a folder of CSV files or an .xlsx with one sheet per kind
                 (pv_modules, batteries, charge_controllers, inverters, balance_of_system,
                 installation). Default: the bundled demo library (invented prices).
  --config       program file (TOML): reliability target, weather years, seed, discount rate,
                 most kit types per scheme... Keys left out take the bundled demo values.

outputs (in the run folder)
  bill_of_materials.xlsx   component lines per kit type, by component and by depot, USD
  deployment_summary.xlsx  program totals, districts, depots, sites, kit types, comparisons
  deployment_summary.html  the same with maps and charts, one offline file
  sites.gpkg               the site layer with the plan's columns (EPSG:4326)
  run.json                 inputs with hashes, versions, seed, timings, solver results

exit status: 0 done, 2 bad input (all problems listed), 1 unexpected failure.
"""


class _Progress:
    """Stage messages and tqdm bars on stderr (silent with --quiet)."""

    def __init__(self, quiet: bool):
        self.quiet = quiet
        self.t0 = time.perf_counter()

    def stage(self, name: str) -> None:
        if not self.quiet:
            print(f"[{time.perf_counter() - self.t0:6.1f} s] {name}", file=sys.stderr, flush=True)

    def wrap(self, iterable, total: int, desc: str):
        if self.quiet:
            return iterable
        from tqdm import tqdm
        return tqdm(iterable, total=total, desc=f"  {desc}", file=sys.stderr, leave=False, mininterval=0.5)


def _default_out(sites: Path) -> Path:
    stamp = time.strftime("%Y%m%d-%H%M%S")
    return Path("outputs") / f"{sites.stem}-{stamp}"


def cmd_plan(args: argparse.Namespace) -> int:
    from .components import read_library
    from .config import load_config
    from .errors import InputError, Problem
    from .outputs import write_run
    from .plan import run_plan
    from .sites import read_sites

    started = time.perf_counter()
    progress = _Progress(args.quiet)
    out = Path(args.out) if args.out else _default_out(Path(args.sites))
    problems = []
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.overwrite:
        problems.append(Problem(str(out), None, None, "already holds a run; choose another --out or pass --overwrite"))
    loaded = {}
    for name, fn, arg in (("sites", read_sites, args.sites), ("components", read_library, args.components),
                          ("config", load_config, args.config)):
        try:
            loaded[name] = fn(arg)
        except InputError as exc:
            problems += exc.problems
    if problems:
        raise InputError(problems)
    progress.stage(f"read {len(loaded['sites'])} sites from {args.sites}")
    loaded["sites"].attrs["source"] = str(args.sites)
    result = run_plan(loaded["sites"], loaded["components"], loaded["config"], tracker=progress)
    progress.stage("writing outputs")
    from .components import default_library_path
    from .config import default_config_path
    paths = write_run(result, out, inputs={"sites": args.sites, "components": args.components or default_library_path(),
                                           "config": args.config or default_config_path()},
                      overwrite=args.overwrite, started=started)
    _print_summary(result, paths, time.perf_counter() - started)
    return 0


def _print_summary(result, paths, seconds: float) -> None:
    from .outputs import plan_tables
    t = plan_tables(result)
    prog = t["program"].set_index("metric")
    lines = ["", f"Plan for {len(result.sites)} sites in {seconds:.0f} s", ""]
    for scheme, res in result.catalogues.items():
        lines.append(f"{scheme}: {len(res.chosen_kits)} type(s), {res.status}, gap {res.gap:.2%}")
        kt = t["kit_types"][t["kit_types"].scheme == scheme]
        for r in kt.itertuples(index=False):
            lines.append(f"   {r.kit_id:<36} {int(r._3):>6} deployed   {r.description}")
    for metric in ("array", "battery (nominal)", "capex", "lifecycle cost (net present)", "cost per household (lifecycle)",
                   "unmet energy in the design weather year", "service units with no kit"):
        r = prog.loc[metric]
        v = float(r.value)
        val = f"{v:,.0f}" if v.is_integer() else f"{v:,.1f}"
        lines.append(f"{metric:<42} {val:>14} {r.unit}")
    lines.append("")
    for p in paths.values():
        lines.append(f"wrote {p}")
    print("\n".join(lines))


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fleet",
        description="Plan standard solar kit catalogues for electrification programs: simulate every site "
                    "hour by hour over synthetic weather years, pick the least-cost catalogue that meets the "
                    "reliability target, and write a bill of materials and a deployment summary.",
        epilog="Run 'fleet plan --help' for inputs, units and outputs.")
    parser.add_argument("--version", action="version", version=f"fleet {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    p = sub.add_parser("plan", help="plan a program from a site table",
                       description="Plan a whole program: demand, weather, kits, hourly simulation, catalogue, outputs.",
                       epilog=EPILOG_PLAN, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("sites", help="site table (.csv, .xlsx, .gpkg, .geojson)")
    p.add_argument("--components", metavar="FILE", help="component library (folder of CSVs or .xlsx); default: bundled demo")
    p.add_argument("--config", metavar="FILE", help="program file (.toml); default: bundled demo program")
    p.add_argument("--out", metavar="DIR", help="run folder to create (default: outputs/<sites>-<timestamp>)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing run folder")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress messages")
    p.set_defaults(func=cmd_plan)
    return parser


def main(argv: list[str] | None = None) -> int:
    from .errors import InputError

    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except InputError as exc:
        print(f"fleet: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fleet: interrupted; no outputs were written", file=sys.stderr)
        return 130
    except FileExistsError as exc:
        print(f"fleet: {exc}", file=sys.stderr)
        return 2
    except Exception as exc:  # an environment problem or a bug: say so plainly, keep earlier outputs
        if os.environ.get("FLEET_DEBUG"):
            raise
        print(f"fleet: unexpected error ({type(exc).__name__}): {exc}\n"
              "no outputs were written; set FLEET_DEBUG=1 to see the traceback", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
