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
                 energy fraction, 0..1), street_lights (count), pumping_kwh_day (kWh/day,
                 deferrable), ghi_correction (multiplier on the embedded irradiance, 0.3..1.5),
                 weather_file (an EPW, TMY3 or TMY2 file, relative to the site table's folder,
                 used instead of the embedded resource). Other columns are carried through.
  --tier-profiles survey hourly profiles per tier (csv/xlsx; see README).
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


def _read_inputs(args, problems: list) -> dict:
    """Read the site table, component library, program file, survey profiles and the sites'
    weather files named on the command line; every problem is appended to ``problems``."""
    from .components import read_library
    from .config import load_config
    from .errors import InputError
    from .profiles import read_tier_profiles
    from .sites import read_sites
    from .weather_files import read_site_weather_sources
    loaded = {}
    for name, fn, arg in (("sites", read_sites, args.sites), ("components", read_library, args.components),
                          ("config", load_config, args.config),
                          ("profiles", read_tier_profiles if args.tier_profiles else (lambda a: None), args.tier_profiles)):
        try:
            loaded[name] = fn(arg)
        except InputError as exc:
            problems += exc.problems
    if "sites" in loaded:
        try:
            loaded["weather_sources"] = read_site_weather_sources(loaded["sites"], Path(args.sites).parent,
                                                                  label=str(args.sites))
        except InputError as exc:
            problems += exc.problems
    return loaded


def _check_scheduler(args, problems: list) -> None:
    """Add a problem for a ``--scheduler`` that is not one (before any long work starts)."""
    from .errors import InputError
    from .parallel import parse_scheduler
    try:
        parse_scheduler(args.scheduler)
    except InputError as exc:
        problems += exc.problems


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
    from .errors import InputError, Problem
    from .outputs import write_run
    from .plan import run_plan

    started = time.perf_counter()
    progress = _Progress(args.quiet)
    out = Path(args.out) if args.out else _default_out(Path(args.sites))
    problems = []
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.overwrite:
        problems.append(Problem(str(out), None, None, "already holds a run; choose another --out or pass --overwrite"))
    loaded = _read_inputs(args, problems)
    if args.monthly_resource and "sites" in loaded:
        from .errors import Problem
        from .weather_files import read_monthly_table
        try:
            monthly = read_monthly_table(args.monthly_resource)
            known = set(loaded["sites"].site_id.astype(str))
            for sid in sorted(set(monthly) - known):
                problems.append(Problem(str(args.monthly_resource), None, "site_id", f"site '{sid}' is not in {args.sites}"))
            # a site's own weather file wins over the monthly table
            loaded["weather_sources"] = {**monthly, **loaded.get("weather_sources", {})}
        except InputError as exc:
            problems += exc.problems
    _check_scheduler(args, problems)
    if problems:
        raise InputError(problems)
    progress.stage(f"read {len(loaded['sites'])} sites from {args.sites}")
    loaded["sites"].attrs["source"] = str(args.sites)
    result = run_plan(loaded["sites"], loaded["components"], loaded["config"], tracker=progress, scheduler=args.scheduler,
                      tier_profiles=loaded.get("profiles"), weather_sources=loaded.get("weather_sources"))
    progress.stage("writing outputs")
    from .components import default_library_path
    from .config import default_config_path
    from .outputs import plan_tables
    tables = plan_tables(result)
    from .config import depots_path
    inputs = {"sites": args.sites, "components": args.components or default_library_path(),
              "config": args.config or default_config_path()}
    if depots_path(result.config) is not None:
        inputs["depots"] = depots_path(result.config)
    paths = write_run(result, out, tables=tables, inputs=inputs,
                      overwrite=args.overwrite, started=started)
    _print_summary(result, tables, paths, time.perf_counter() - started)
    return 0


def cmd_reprice(args: argparse.Namespace) -> int:
    from .errors import InputError, Problem
    from .outputs import plan_tables, write_run
    from .reprice import load_state, read_price_edits, reprice_plan

    started = time.perf_counter()
    progress = _Progress(args.quiet)
    workbook = Path(args.workbook)
    run_dir = workbook.resolve().parent
    out = Path(args.out) if args.out else run_dir.parent / f"{run_dir.name}-repriced-{time.strftime('%Y%m%d-%H%M%S')}"
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.overwrite:
        raise InputError([Problem(str(out), None, None, "already holds a run; choose another --out or pass --overwrite")])
    if out.resolve() == run_dir:
        raise InputError([Problem(str(out), None, None, "is the run being repriced; a repriced run goes in a new folder")])
    if not workbook.is_file():
        raise InputError([Problem(str(workbook), None, None, "file not found")])
    progress.stage(f"reading the run in {run_dir}")
    result = load_state(run_dir)
    edits = read_price_edits(workbook, result.bom, max_change=args.max_change,
                             accept_large_changes=args.accept_large_changes)
    progress.stage(f"{len(edits.changed)} unit price(s) changed; choosing the catalogue again")
    new, changes = reprice_plan(result, edits)
    progress.stage("writing outputs")
    tables = plan_tables(new)
    paths = write_run(new, out, tables=tables, inputs={"workbook": workbook}, overwrite=args.overwrite,
                      started=started, extra_tables={"changes": changes},
                      record_extra={"repriced_from": str(run_dir)})
    print(f"\nRepriced {run_dir.name}: {len(edits.changed)} price(s) changed")
    for r in changes.itertuples(index=False):
        if r.what != "unit price (USD)":
            print(f"  {r.what}: {r.item}: {r.before!s} -> {r.after!s} {r.change}")
    _print_summary(new, tables, paths, time.perf_counter() - started)
    return 0


def _print_summary(result, t, paths, seconds: float) -> None:
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


def cmd_demand(args: argparse.Namespace) -> int:
    import numpy as np

    from .config import load_config
    from .demand import demand_summary, service_units, settings_from_config, tier_mean_days, unit_loads
    from .errors import InputError
    from .profiles import read_tier_profiles
    from .resource import utc_offset_hours
    from .sites import read_sites

    problems, loaded = [], {}
    for name, fn, arg in (("sites", read_sites, args.sites), ("config", load_config, args.config),
                          ("profiles", read_tier_profiles if args.tier_profiles else (lambda a: None), args.tier_profiles)):
        try:
            loaded[name] = fn(arg)
        except InputError as exc:
            problems += exc.problems
    if problems:
        raise InputError(problems)
    sites, cfg = loaded["sites"], loaded["config"]
    settings = settings_from_config(cfg, loaded["profiles"])
    units = service_units(sites)
    offsets = np.array([utc_offset_hours(la, lo) for la, lo in zip(sites.latitude, sites.longitude)])
    demand = unit_loads(sites, units, settings, seed=cfg["program"]["seed"], utc_offsets_h=offsets)
    table = demand_summary(sites, units, demand)
    with __import__("pandas").option_context("display.max_rows", 40, "display.width", 160):
        print(table.to_string(index=False, float_format=lambda v: f"{v:,.2f}", max_rows=40))
    print(f"\n{len(table)} sites; design year {cfg['program']['design_year']}; "
          f"total design-year demand {table['design-year demand (kWh/day)'].sum():,.1f} kWh/day")
    if args.csv:
        table.to_csv(args.csv, index=False)
        print(f"wrote {args.csv}")
    if args.plot:
        from matplotlib.figure import Figure
        lat, lon = float(sites.latitude.median()), float(sites.longitude.median())
        days = tier_mean_days(lat, lon, utc_offset_hours(lat, lon), settings)
        fig = Figure(figsize=(9, 4.5))
        ax = fig.add_subplot()
        for col in days.columns:
            ax.plot(days.index + 0.5, days[col], label=col, drawstyle="steps-mid")
        ax.set_yscale("log")
        ax.set_xlabel("local hour")
        ax.set_ylabel("mean power of one household or facility (W)")
        ax.set_title(f"Mean day per tier and facility (near {lat:.1f}, {lon:.1f})")
        ax.set_xticks(range(0, 25, 3))
        ax.grid(True, alpha=0.4)
        ax.legend(fontsize="small", ncol=2)
        fig.tight_layout()
        fig.savefig(args.plot, dpi=110)
        print(f"wrote {args.plot}")
    return 0


EPILOG_EVALUATE = """\
what it does
  Simulates one named kit (or minigrid plant block) from the candidate list at every site of
  its scheme, hour by hour over the program's weather years, as 'fleet plan' does for every
  candidate, and reports its figures per service unit. Solar home system sites: every tier
  group and facility gets one kit per member. Minigrid sites: the village gets a plant of
  --blocks identical blocks or, without --blocks, the smallest count in 1..40 that meets every
  target in the design weather year (40, with a note, where none does). Sites of the other
  scheme are listed with the reason they were not evaluated.

inputs
  SITES           site table as for 'fleet plan' (see 'fleet plan --help')
  --kit           a kit id from the candidate list; '--list-kits' prints them with their labels
  --components, --config, --tier-profiles   as for 'fleet plan'

table and CSV (one row per service unit; energy per kit, for a minigrid per plant)
  design year     the weather year at the program's target_confidence quantile (0.9: a bad
                  year in ten), read at the bad end of each metric
  unmet_energy_fraction_design/_mean      unmet energy / demand (design year, mean of years)
  loss_of_load_probability_design         hours with unmet load / 8760
  loads_disconnected_h_design/_days_design  hours and days with the load output off (LVD)
  evening_served_h_design                 evening hours (18-22 h, 1460 a year) fully served
  full_service_days_design                days with no unmet load
  pv_available/used/spilled_kwh_year      array energy at the controller output, used, unused
  controller_loss_kwh_year, inverter_loss_kwh_year, battery_throughput_kwh_year
  equivalent_full_cycles_year, soc_min, soc_mean, battery_life_years, battery_replacement_year
  meets_target    meets the reliability target (site or program) and the critical and
                  deferrable load targets; 'shortfall' says what is missed

The figures are planning estimates, not an installation design; local electrical codes prevail.

exit status: 0 done, 2 bad input or unknown kit (all problems listed), 1 unexpected failure.
"""


def _same_file(a, b) -> bool:
    try:
        return Path(a).resolve() == Path(b).resolve()
    except OSError:
        return False


def _write_csv_atomically(table, path: Path) -> None:
    """Write to a temporary file beside ``path``, then rename it over ``path``."""
    import tempfile
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as fh:
            table.to_csv(fh, index=False)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def cmd_evaluate(args: argparse.Namespace) -> int:
    from .errors import InputError, Problem
    from .evaluate import KitChoiceError, candidate_kit_table, evaluate_kit

    progress = _Progress(args.quiet)
    problems, loaded = [], {}
    if not args.list_kits and not args.kit:
        problems.append(Problem("--kit", None, None, "required: the id of the kit to evaluate "
                                                     "('fleet evaluate SITES --list-kits' lists them)"))
    if args.blocks is not None and args.blocks < 1:
        problems.append(Problem("--blocks", None, None, f"must be a whole number >= 1, got {args.blocks}"))
    if args.csv:
        csv = Path(args.csv)
        inputs = [a for a in (args.sites, args.components, args.config, args.tier_profiles) if a]
        if any(_same_file(csv, a) for a in inputs):
            problems.append(Problem(str(csv), None, None, "is one of the inputs; choose another --csv file"))
        elif csv.is_dir():
            problems.append(Problem(str(csv), None, None, "is a folder; give a file name for --csv"))
        elif not csv.parent.is_dir():
            problems.append(Problem(str(csv), None, None, f"folder '{csv.parent}' does not exist"))
    loaded.update(_read_inputs(args, problems))
    _check_scheduler(args, problems)
    if problems:
        raise InputError(problems)
    sites, library, cfg = loaded["sites"], loaded["components"], loaded["config"]
    sites.attrs["source"] = str(args.sites)
    progress.stage(f"read {len(sites)} sites from {args.sites}")

    if args.list_kits:
        progress.stage("candidate kits")
        kits = candidate_kit_table(sites, library, cfg, weather_sources=loaded.get("weather_sources"))
        lines = []
        for scheme, what in (("shs", "solar home system kits"), ("minigrid", "minigrid plant blocks")):
            sel = kits[kits.scheme == scheme]
            lines.append(f"{len(sel)} {what}:")
            lines += [f"  {r.kit_id:<36} {r.kit_label}" for r in sel.itertuples(index=False)]
            lines.append("")
        lines.append("Evaluate one with: fleet evaluate SITES --kit KIT_ID")
        print("\n".join(lines))
        return 0

    try:
        table = evaluate_kit(sites, library, cfg, args.kit, blocks=args.blocks, tracker=progress, scheduler=args.scheduler,
                             tier_profiles=loaded.get("profiles"), weather_sources=loaded.get("weather_sources"))
    except KitChoiceError as exc:
        option = "--blocks" if exc.option == "blocks" else "--kit"
        hint = "" if exc.close_matches or option == "--blocks" else " ('fleet evaluate SITES --list-kits' lists them)"
        raise InputError([Problem(option, None, None, f"{exc}{hint}")]) from None
    print(_evaluation_text(table, cfg))
    if args.csv:
        _write_csv_atomically(table, Path(args.csv))
        print(f"wrote {args.csv}")
    return 0


def _evaluation_text(table, cfg) -> str:
    """The evaluation as a readable table: one line per unit, then notes and a summary."""
    import textwrap

    done = table[table.reason == ""]
    skipped = table[table.reason != ""]
    kit_id = str(table.kit_id.iat[0]) if len(table) else ""
    p = cfg["program"]
    cols = (("site_id", 12, "<"), ("unit", 13, "<"), ("members", 8, ">"), ("blocks", 7, ">"),
            ("unmet %", 8, ">"), ("mean %", 7, ">"), ("LOLP %", 7, ">"), ("off h", 6, ">"),
            ("eve. h", 7, ">"), ("SOC min", 8, ">"), ("cycles", 7, ">"), ("batt. y", 8, ">"), ("meets", 6, ">"))
    head = "".join(f"{n:{a}{w}}" for n, w, a in cols)
    lines = [f"kit {kit_id}: design year = the {p['target_confidence']:.0%} quantile of "
             f"{p['weather_years']} weather years", "", head, "-" * len(head)]
    for r in done.itertuples(index=False):
        cells = (str(r.site_id)[:11], str(r.group)[:12], f"{int(r.count):,}", f"{int(r.blocks)}",
                 f"{100 * r.unmet_energy_fraction_design:.1f}", f"{100 * r.unmet_energy_fraction_mean:.1f}",
                 f"{100 * r.loss_of_load_probability_design:.1f}", f"{r.loads_disconnected_h_design:.0f}",
                 f"{r.evening_served_h_design:.0f}", f"{r.soc_min:.2f}", f"{r.equivalent_full_cycles_year:.0f}",
                 f"{r.battery_life_years:.1f}", "yes" if r.meets_target else "NO")
        lines.append("".join(f"{c:{a}{w}}" for c, (_, w, a) in zip(cells, cols)))
    lines.append("")
    lines += textwrap.wrap("unmet %: unmet energy in the design year (mean %: over all years); LOLP %: share of "
                           "hours with unmet load; off h: hours with loads disconnected; eve. h: evening hours (of "
                           "1460) fully served; cycles: equivalent full cycles a year; batt. y: battery life, years",
                           width=104)
    for r in done[(~done.meets_target.astype(bool)) | (done.note != "")].itertuples(index=False):
        text = "; ".join(t for t in (r.shortfall, r.note) if t)
        lines.append(f"  {r.unit_id}: {text}")
    if len(skipped):
        ids = ", ".join(skipped.site_id.astype(str).head(8)) + (", ..." if len(skipped) > 8 else "")
        what = {"shs": "solar home system", "minigrid": "minigrid"}[str(skipped.scheme.iat[0])]
        lines.append(f"not evaluated: {len(skipped)} {what} site(s) ({ids}), the other scheme")
    meets = done.meets_target.astype(bool).to_numpy()
    kits = (done["count"].astype(float) * done["blocks"].astype(float)).to_numpy()
    lines.append("")
    lines.append(f"units meeting the target: {int(meets.sum())} of {len(done)} "
                 f"({kits[meets].sum():,.0f} of {kits.sum():,.0f} kits or blocks)"
                 + (f"; target {p['reliability_target']:.0%} unmet energy unless a site sets its own" if len(done) else ""))
    lines += textwrap.wrap("Caution: planning estimates, not an installation design. Fuse every battery and string, "
                           "size cables for ampacity and voltage drop, ventilate battery enclosures, use DC-rated "
                           "switchgear (DC arcs do not go out by themselves); local electrical codes prevail.",
                           width=104)
    return "\n".join(lines)


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
    p.add_argument("--scheduler", metavar="WHERE", default="inprocess",
                   help="where the per-site stages run: 'inprocess' (default), 'local:N' (N worker processes "
                        "on this machine) or the address of a dask.distributed scheduler (tcp://host:8786); "
                        "the plan is the same whichever way it runs")
    p.add_argument("--monthly-resource", metavar="FILE",
                   help="monthly irradiation per site (csv/xlsx: site_id, month, ghi_kwh_m2_day[, temp_mean_c, temp_min_c]) "
                        "used instead of the embedded resource at those sites")
    p.add_argument("--tier-profiles", metavar="FILE",
                   help="survey-based hourly profiles (csv/xlsx: tier, month, day_type, h00..h23 in W) replacing built-in tiers")
    p.set_defaults(func=cmd_plan)
    d = sub.add_parser("demand", help="demand per site: daily energy, peak, load factor",
                       description="Build the hourly demand of every site and summarise it: first-year and design-year "
                                   "daily energy (kWh/day), design peak (kW), load factor and evening share.",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    d.add_argument("sites", help="site table (.csv, .xlsx, .gpkg, .geojson); see 'fleet plan --help'")
    d.add_argument("--config", metavar="FILE", help="program file (.toml): growth, design year, school months ...")
    d.add_argument("--tier-profiles", metavar="FILE", help="survey-based hourly profiles replacing built-in tiers")
    d.add_argument("--csv", metavar="FILE", help="also write the table as CSV")
    d.add_argument("--plot", metavar="FILE", help="also write a PNG of the mean day of each tier and facility")
    d.set_defaults(func=cmd_demand)
    e = sub.add_parser("evaluate", help="one named kit at every site: reliability, energy flows, battery wear",
                       description="Simulate one kit (or minigrid plant block) from the candidate list at every site "
                                   "of its scheme and report its figures per service unit, as a table and a CSV.",
                       epilog=EPILOG_EVALUATE, formatter_class=argparse.RawDescriptionHelpFormatter)
    e.add_argument("sites", help="site table (.csv, .xlsx, .gpkg, .geojson); see 'fleet plan --help'")
    e.add_argument("--kit", metavar="KIT", help="kit id to evaluate (see --list-kits)")
    e.add_argument("--blocks", metavar="N", type=int,
                   help="minigrid: blocks per plant (default: the smallest count in 1..40 meeting the targets)")
    e.add_argument("--components", metavar="FILE", help="component library (folder of CSVs or .xlsx); default: bundled demo")
    e.add_argument("--config", metavar="FILE", help="program file (.toml); default: bundled demo program")
    e.add_argument("--tier-profiles", metavar="FILE", help="survey-based hourly profiles replacing built-in tiers")
    e.add_argument("--csv", metavar="FILE", help="also write the table as CSV (one row per service unit)")
    e.add_argument("--list-kits", action="store_true", help="print the candidate kit ids with their labels and stop")
    e.add_argument("-q", "--quiet", action="store_true", help="no progress messages")
    e.add_argument("--scheduler", metavar="WHERE", default="inprocess",
                   help="where the sites are simulated: 'inprocess' (default), 'local:N' or a dask.distributed "
                        "scheduler address (see 'fleet plan --help')")
    e.set_defaults(func=cmd_evaluate)

    r = sub.add_parser(
        "reprice", help="choose the catalogue again with prices filled in on a run's bill of materials",
        description="Read the unit prices procurement filled in on a run's bill_of_materials.xlsx (in the run "
                    "folder fleet plan wrote), check them (missing, not a number, negative, a component priced "
                    "twice differently, or more than --max-change times the run's price: every such cell is "
                    "listed by sheet and cell and nothing is guessed), choose the catalogue again with them "
                    "(nothing is simulated again: prices do not change how a kit behaves) and write a new run "
                    "folder whose deployment summary starts with a 'changes' sheet saying what changed and why.")
    r.add_argument("workbook", help="bill_of_materials.xlsx inside a run folder written by fleet plan")
    r.add_argument("--out", metavar="DIR", help="run folder to create (default: <run>-repriced-<timestamp>)")
    r.add_argument("--overwrite", action="store_true", help="replace an existing run folder")
    r.add_argument("--max-change", metavar="F", type=float, default=3.0,
                   help="a price more than F times higher or lower than the run's is reported (default 3)")
    r.add_argument("--accept-large-changes", action="store_true", help="take large price changes as meant")
    r.add_argument("-q", "--quiet", action="store_true", help="no progress messages")
    r.set_defaults(func=cmd_reprice)
    from .cli_resource import add_parser as add_resource_parser
    add_resource_parser(sub)
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
