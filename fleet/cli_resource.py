"""``fleet resource``: the solar resource and array yield at a point or at every
site of a table, from the embedded grid or the user's own weather data.

A thin shell: parse, read files, call :func:`fleet.resource.site_weather_from`,
summarise (:func:`summarise_weather`, pure), print a table or JSON.
Exit status: 0 done, 2 bad input or coordinates off the data.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np

MONTH_NAMES = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep",
               "Oct", "Nov", "Dec")

#: A dull day has less than this fraction of its calendar month's mean daily
#: GHI (over all weather years).
DULL_DAY_FRACTION = 0.5

#: The P90 year is the year whose annual yield at least this share of the
#: weather years reach or exceed.
P90_EXCEEDANCE = 0.9

DESCRIPTION = ("Show the solar resource and the yield of a fixed array at a point "
               "(LAT LON) or at every site of a table (--sites): monthly global "
               "horizontal and plane-of-array irradiation, yield per kWp, the worst "
               "month and the longest run of dull days in the P90 year.")

EPILOG = f"""\
definitions
  GHI            mean daily global horizontal irradiation, kWh/m2/day
  POA            mean daily irradiation on the array plane (tilt = |latitude|, at
                 least 10 deg, facing the equator, unless --tilt/--azimuth), kWh/m2/day
  yield          mean daily DC energy per kWp of modules (PVWatts DC, -0.4 %/K,
                 14 % DC losses, Faiman cell temperature), kWh/kWp/day
  worst month    the month with the lowest mean daily yield
  P90 year       the weather year with the highest annual yield that at least
                 {P90_EXCEEDANCE:.0%} of the weather years reach or exceed (with 10 years,
                 the second worst); the planner's design year follows the same rule
  dull day       a day whose GHI is below {DULL_DAY_FRACTION:.0%} of the mean daily GHI of its
                 calendar month over all weather years
  dull run       the longest run of consecutive dull days in the P90 year

data
  Without a weather file, the embedded MERRA-2 reanalysis (3 deg grid, 2011-2015):
  the site's own grid cell, or the nearest cell with data if its own has none
  (said in the output). Reanalysis irradiance is often biased high; --correction
  (or the program's resource.correction_factor, or a site's ghi_correction)
  scales it. A site's weather_file (EPW, TMY3 .csv, TMY2 .tm2, or a monthly table
  .csv/.xlsx with site_id, month, ghi_kwh_m2_day) wins over the grid: a measured
  year is weather year 0 and the further years resample its days.

exit status: 0 done, 2 bad input or coordinates off the data.
"""


def add_parser(subparsers):
    """Register the ``resource`` subcommand on an argparse subparsers object.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The subcommand's parser (its ``func`` default is :func:`cmd_resource`).
    """
    p = subparsers.add_parser(
        "resource", help="solar resource and array yield at a point or at every site",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("latitude", nargs="?", type=float, metavar="LAT",
                   help="latitude, degrees north (WGS84)")
    p.add_argument("longitude", nargs="?", type=float, metavar="LON",
                   help="longitude, degrees east (WGS84)")
    p.add_argument("--sites", metavar="FILE",
                   help="site table (.csv, .xlsx, .gpkg, .geojson) instead of LAT LON")
    p.add_argument("--weather-file", metavar="FILE",
                   help="EPW, TMY3 (.csv) or TMY2 (.tm2) file for the point; without "
                        "LAT LON the file's own position is used")
    p.add_argument("--config", metavar="FILE",
                   help="program file (.toml) for correction factor, persistence, "
                        "default temperatures and albedo; default: bundled demo program")
    p.add_argument("--years", type=int, default=10, metavar="N",
                   help="number of weather years (default 10)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    p.add_argument("--tilt", type=float, metavar="DEG", help="array tilt, degrees from horizontal")
    p.add_argument("--azimuth", type=float, metavar="DEG",
                   help="array azimuth, degrees clockwise from north (180 = south)")
    p.add_argument("--correction", type=float, metavar="X",
                   help="multiplier on the embedded reanalysis GHI (0.3..1.5)")
    p.add_argument("--temp-mean", type=float, metavar="DEGC",
                   help="mean air temperature, degC, where the data have none "
                        "(default: the program's)")
    p.add_argument("--json", action="store_true", help="machine-readable output on stdout")
    p.set_defaults(func=cmd_resource)
    return p


# --------------------------------------------------------------------------
# Summary (pure)
# --------------------------------------------------------------------------


def p90_year_index(annual_values):
    """Index of the P90 year: the highest value at least 90 % of years reach.

    Parameters
    ----------
    annual_values : array_like, shape (n_years,)

    Returns
    -------
    int
        Index of the year with rank ``ceil(0.9 n)`` counted from the highest.
    """
    values = np.asarray(annual_values, dtype=float)
    rank = max(1, math.ceil(P90_EXCEEDANCE * values.size - 1e-9))
    order = np.argsort(-values, kind="stable")
    return int(order[rank - 1])


def longest_run(flags):
    """Length and start of the longest run of True in a 1-D boolean array."""
    flags = np.asarray(flags, dtype=bool)
    best, start, current, current_start = 0, None, 0, 0
    for i, flag in enumerate(flags):
        if flag:
            if current == 0:
                current_start = i
            current += 1
            if current > best:
                best, start = current, current_start
        else:
            current = 0
    return best, start


def _day_text(day_index):
    from fleet.resource import DAYS_PER_MONTH

    first = np.concatenate([[0], np.cumsum(DAYS_PER_MONTH)[:-1]])
    month = int(np.searchsorted(first, day_index, side="right")) - 1
    return f"{day_index - first[month] + 1} {MONTH_NAMES[month]}"


def summarise_weather(weather):
    """Monthly and yearly figures of one site's weather years.

    Parameters
    ----------
    weather : fleet.resource.SiteWeather

    Returns
    -------
    dict
        JSON-ready: ``monthly`` (12 rows of GHI and POA in kWh/m²/day and
        yield in kWh/kWp/day, means over all years), ``annual`` means per
        day, ``worst_month``, ``p90_year`` and ``dull_run`` in it, and the
        data source.
    """
    from fleet import pv
    from fleet.resource import DAYS_PER_MONTH, MONTH_OF_DAY

    n_years = weather.ghi_wm2.shape[0]
    dc = pv.dc_power_per_kwp(weather.poa_wm2, weather.cell_temp_c)
    daily_yield = dc.reshape(n_years, 365, 24).sum(axis=2) / 1000.0
    daily_poa = weather.poa_wm2.reshape(n_years, 365, 24).sum(axis=2, dtype=float) / 1000.0
    daily_ghi = weather.daily_ghi_kwh_m2

    def by_month(daily):
        return np.bincount(MONTH_OF_DAY, weights=daily.mean(axis=0)) / DAYS_PER_MONTH

    ghi_m, poa_m, yield_m = by_month(daily_ghi), by_month(daily_poa), by_month(daily_yield)
    worst = int(np.argmin(yield_m))
    annual_yield = daily_yield.sum(axis=1)
    p90 = p90_year_index(annual_yield)
    month_mean_ghi = ghi_m[MONTH_OF_DAY]
    dull = daily_ghi[p90] < DULL_DAY_FRACTION * month_mean_ghi
    run, start = longest_run(dull)
    cell = weather.cell
    return {
        "source": weather.source,
        "source_kind": weather.source_kind,
        "data_distance_km": round(float(weather.data_distance_km), 1),
        "climate_cell": None if cell is None else {
            "latitude": cell.latitude_deg, "longitude": cell.longitude_deg,
            "resolution_deg": cell.grid_resolution_deg,
            "distance_km": round(cell.distance_km, 1), "is_own_cell": bool(cell.is_own_cell)},
        "tilt_deg": round(weather.tilt_deg, 2), "azimuth_deg": round(weather.azimuth_deg, 2),
        "utc_offset_hours": weather.utc_offset_hours,
        "weather_years": n_years,
        "monthly": [
            {"month": m + 1, "ghi_kwh_m2_day": round(float(ghi_m[m]), 3),
             "poa_kwh_m2_day": round(float(poa_m[m]), 3),
             "yield_kwh_kwp_day": round(float(yield_m[m]), 3)}
            for m in range(12)],
        "annual": {
            "ghi_kwh_m2_day": round(float(daily_ghi.mean()), 3),
            "poa_kwh_m2_day": round(float(daily_poa.mean()), 3),
            "yield_kwh_kwp_day": round(float(daily_yield.mean()), 3),
            "yield_kwh_kwp_year": round(float(annual_yield.mean()), 1)},
        "worst_month": {"month": worst + 1, "name": MONTH_NAMES[worst],
                        "yield_kwh_kwp_day": round(float(yield_m[worst]), 3),
                        "ghi_kwh_m2_day": round(float(ghi_m[worst]), 3)},
        "p90_year": {"year_index": p90, "yield_kwh_kwp_year": round(float(annual_yield[p90]), 1),
                     "longest_dull_run_days": int(run),
                     "dull_run_starts": None if start is None else _day_text(start),
                     "dull_days": int(dull.sum())},
    }


# --------------------------------------------------------------------------
# Command
# --------------------------------------------------------------------------


def _fail(message):
    print(f"fleet resource: {message}", file=sys.stderr)
    return 2


def _weather_kwargs(args, cfg):
    t, r = cfg["temperature"], cfg["resource"]
    return dict(n_years=args.years, seed=args.seed,
                temp_daily_amplitude_k=t["daily_amplitude_k"],
                persistence=r["persistence"], albedo=cfg["pv"]["albedo"],
                max_distance_km=r["max_distance_km"],
                tilt_deg=args.tilt, azimuth_deg=args.azimuth)


def _check_args(args):
    problems = []
    if args.years < 1 or args.years > 200:
        problems.append(f"--years must be 1..200, got {args.years}")
    if args.correction is not None and not 0.3 <= args.correction <= 1.5:
        problems.append(f"--correction must be 0.3..1.5, got {args.correction:g}")
    if args.tilt is not None and not 0.0 <= args.tilt <= 90.0:
        problems.append(f"--tilt must be 0..90 degrees, got {args.tilt:g}")
    if args.azimuth is not None and not 0.0 <= args.azimuth <= 360.0:
        problems.append(f"--azimuth must be 0..360 degrees, got {args.azimuth:g}")
    has_point = args.latitude is not None
    if has_point and args.longitude is None:
        problems.append("give both LAT and LON")
    if args.sites and (has_point or args.weather_file):
        problems.append("give either LAT LON (with an optional --weather-file) or --sites, not both")
    if not args.sites and not has_point and not args.weather_file:
        problems.append("give LAT LON, --weather-file FILE or --sites FILE")
    if has_point and args.longitude is not None:
        if not -90.0 <= args.latitude <= 90.0:
            problems.append(f"latitude {args.latitude:g} is not in -90..90 degrees")
        if not -180.0 <= args.longitude <= 180.0:
            problems.append(f"longitude {args.longitude:g} is not in -180..180 degrees")
    return problems


def cmd_resource(args):
    """Run ``fleet resource``; returns the exit status (0, or 2 for bad input)."""
    from fleet.config import load_config
    from fleet.errors import InputError, Problem
    from fleet.resource import EMBEDDED, site_weather_from

    problems = _check_args(args)
    if problems:
        return _fail("; ".join(problems))
    try:
        cfg = load_config(args.config)
        kwargs = _weather_kwargs(args, cfg)
        default_temp = (args.temp_mean if args.temp_mean is not None
                        else cfg["temperature"]["default_mean_c"])
        default_correction = (args.correction if args.correction is not None
                              else cfg["resource"]["correction_factor"])
        results = []
        if args.sites:
            results = _run_sites(args, kwargs, default_temp, default_correction)
        else:
            source, lat, lon = EMBEDDED, args.latitude, args.longitude
            if args.weather_file:
                from fleet.weather_files import read_weather_file

                source = read_weather_file(args.weather_file)
                if lat is None:
                    lat, lon = source.latitude_deg, source.longitude_deg
            try:
                weather = site_weather_from(source, lat, lon, temp_mean_c=default_temp,
                                            correction_factor=default_correction, **kwargs)
            except ValueError as exc:
                raise InputError([Problem("coordinates", None, None, str(exc))]) from None
            results.append({"site_id": None, "latitude": lat, "longitude": lon,
                            **summarise_weather(weather)})
    except InputError as exc:
        return _fail(str(exc))
    if args.json:
        print(json.dumps({"sites": results, "definitions": _definitions()}, indent=2,
                         ensure_ascii=False))
    elif args.sites:
        print(_sites_table(results))
    else:
        print(_point_text(results[0]))
    return 0


def _run_sites(args, kwargs, default_temp, default_correction):
    from fleet.errors import InputError, Problem
    from fleet.resource import EMBEDDED, site_weather_from
    from fleet.sites import read_sites
    from fleet.weather_files import read_site_weather_sources

    sites = read_sites(args.sites)
    sources = read_site_weather_sources(sites, Path(args.sites).parent, label=str(args.sites))
    problems, results = [], []
    for i, s in enumerate(sites.itertuples(index=False)):
        temp = float(s.temp_mean_c) if np.isfinite(s.temp_mean_c) else default_temp
        correction = float(s.ghi_correction) if np.isfinite(s.ghi_correction) else default_correction
        try:
            weather = site_weather_from(sources.get(str(s.site_id), EMBEDDED), s.latitude,
                                        s.longitude, temp_mean_c=temp,
                                        correction_factor=correction, **kwargs)
        except ValueError as exc:
            problems.append(Problem(str(args.sites), i + 2, "latitude", f"site {s.site_id}: {exc}"))
            continue
        results.append({"site_id": str(s.site_id), "latitude": float(s.latitude),
                        "longitude": float(s.longitude), **summarise_weather(weather)})
    if problems:
        raise InputError(problems)
    return results


def _definitions():
    return {
        "ghi_kwh_m2_day": "mean daily global horizontal irradiation",
        "poa_kwh_m2_day": "mean daily irradiation on the array plane",
        "yield_kwh_kwp_day": "mean daily DC energy per kWp, PVWatts DC, 14 % DC losses",
        "worst_month": "month with the lowest mean daily yield",
        "p90_year": f"weather year with the highest annual yield that at least "
                    f"{P90_EXCEEDANCE:.0%} of the years reach or exceed",
        "dull_day": f"daily GHI below {DULL_DAY_FRACTION:.0%} of its calendar month's mean "
                    f"over all weather years",
        "longest_dull_run_days": "longest run of consecutive dull days in the P90 year",
    }


def _point_text(r):
    lines = [f"Solar resource at ({r['latitude']:.4f}, {r['longitude']:.4f})",
             f"data: {r['source']}"]
    cell = r["climate_cell"]
    if cell is not None and not cell["is_own_cell"]:
        lines.append("caution: the site's own grid cell has no data; the nearest cell with "
                     "data describes a neighbouring area")
    lines.append(f"array: tilt {r['tilt_deg']:g} deg, azimuth {r['azimuth_deg']:g} deg; "
                 f"{r['weather_years']} weather years; clock UTC{r['utc_offset_hours']:+g}")
    lines.append("")
    lines.append(f"{'month':<6}{'GHI':>8}{'POA':>8}{'yield':>8}")
    lines.append(f"{'':<6}{'kWh/m2/d':>8}{'kWh/m2/d':>9}{'kWh/kWp/d':>10}")
    for m in r["monthly"]:
        lines.append(f"{MONTH_NAMES[m['month'] - 1]:<6}{m['ghi_kwh_m2_day']:>8.2f}"
                     f"{m['poa_kwh_m2_day']:>8.2f}{m['yield_kwh_kwp_day']:>8.2f}")
    a = r["annual"]
    lines.append(f"{'year':<6}{a['ghi_kwh_m2_day']:>8.2f}{a['poa_kwh_m2_day']:>8.2f}"
                 f"{a['yield_kwh_kwp_day']:>8.2f}   ({a['yield_kwh_kwp_year']:.0f} kWh/kWp/year)")
    lines.append("")
    w, p = r["worst_month"], r["p90_year"]
    lines.append(f"worst month: {w['name']}, {w['yield_kwh_kwp_day']:.2f} kWh/kWp/day "
                 f"(GHI {w['ghi_kwh_m2_day']:.2f} kWh/m2/day)")
    run = (f"{p['longest_dull_run_days']} day(s) from {p['dull_run_starts']}"
           if p["longest_dull_run_days"] else "no dull days")
    lines.append(f"P90 year: {p['yield_kwh_kwp_year']:.0f} kWh/kWp/year; longest run of "
                 f"dull days: {run}")
    lines.append("(see 'fleet resource --help' for the definitions)")
    return "\n".join(lines)


def _sites_table(results):
    columns = (("site_id", "", 14, "<"), ("lat", "deg", 9, ">"), ("lon", "deg", 10, ">"),
               ("GHI", "kWh/m2/d", 10, ">"), ("POA", "kWh/m2/d", 10, ">"),
               ("yield", "kWh/kWp/d", 11, ">"), ("worst", "month", 7, ">"),
               ("P90 year", "kWh/kWp", 10, ">"), ("dull", "days", 6, ">"))
    lines = ["".join(f"{name:{align}{width}}" for name, _, width, align in columns) + "  data",
             "".join(f"{unit:{align}{width}}" for _, unit, width, align in columns)]
    for r in results:
        a, w, p = r["annual"], r["worst_month"], r["p90_year"]
        cells = (str(r["site_id"])[:13], f"{r['latitude']:.3f}", f"{r['longitude']:.3f}",
                 f"{a['ghi_kwh_m2_day']:.2f}", f"{a['poa_kwh_m2_day']:.2f}",
                 f"{a['yield_kwh_kwp_day']:.2f}", w["name"], f"{p['yield_kwh_kwp_year']:.0f}",
                 str(p["longest_dull_run_days"]))
        lines.append("".join(f"{c:{align}{width}}" for c, (_, _, width, align) in zip(cells, columns))
                     + f"  {r['source']}")
    lines.append("")
    lines.append("GHI, POA, yield: annual means per day; worst: month of lowest yield; P90 year: its "
                 "annual yield; dull: longest run of dull days in it.")
    lines.append("See 'fleet resource --help' for the definitions.")
    return "\n".join(lines)


def main(argv=None):
    """Run the subcommand on its own (for tests and ``python -m``)."""
    parser = argparse.ArgumentParser(prog="fleet")
    sub = parser.add_subparsers(dest="command", required=True)
    add_parser(sub)
    args = parser.parse_args(argv)
    return args.func(args)


if __name__ == "__main__":
    sys.exit(main())
