"""Transport of kits from the program's depots to the sites.

Each site names its ``depot`` (site table). A depots table gives where each
depot is; the road distance from a depot to a site is estimated as the
straight-line distance times a road-winding factor, and one delivery costs

    shs:       road_km x ``shs_usd_per_kit_km``        + ``handling_usd_per_kit``   (per kit)
    minigrid:  road_km x ``minigrid_usd_per_block_km`` + ``handling_usd_per_kit``   (per plant block)

(program file, ``[transport]``). A replacement battery travels too: it costs
``battery_replacement_share`` of a delivery each time
(:func:`fleet.economics.transport_present_value`).

Distances are measured with geopandas in a metric projection chosen per depot:
the UTM zone of the depot (:meth:`geopandas.GeoSeries.estimate_utm_crs`), in
which that depot and the sites are projected. A single projection for a whole
program would not do: the transverse Mercator scale error grows with the
square of the distance from the zone's central meridian, about
``(dlambda * cos(phi))**2 / 2``, already 4 % at 16 degrees of longitude (the
demo program spans 30). Within 3 degrees of latitude and longitude of its depot
a site's distance is within 0.5 % of the geodesic on the WGS84 ellipsoid
(tests check it against :meth:`pyproj.Geod.inv`); distances to far depots (only
looked at to find the nearest one) are less exact but still far.

Sites whose depot is "(none)" or is not in the depots table are served from
the nearest depot; :func:`depot_warnings` lists them for the plan's warnings.

:func:`read_depots` is the I/O edge; everything else is pure.
"""

from __future__ import annotations

import difflib
import os
from pathlib import Path
from typing import Any, Mapping

import geopandas as gpd
import numpy as np
import pandas as pd

from .errors import InputError, Problem

#: Columns a depots table must have.
DEPOT_COLUMNS: tuple[str, ...] = ("depot", "latitude", "longitude")
#: Depot name of a site that has none (the site table's default).
NO_DEPOT = "(none)"
#: Road distance / straight-line distance outside this range is more likely a slip than a road network.
ROAD_FACTOR_RANGE = (1.0, 3.0)


# --------------------------------------------------------------------------
# Reading (the I/O edge)
# --------------------------------------------------------------------------


def read_depots(path: str | os.PathLike, *, label: str | None = None) -> gpd.GeoDataFrame:
    """Read and validate a depots table (CSV: ``depot``, ``latitude``, ``longitude``).

    Parameters
    ----------
    path : str or path-like
        A comma-separated file, UTF-8 (a byte-order mark is accepted; a
        Windows-1252 file is read as such). Column names are matched after
        stripping spaces and lowercasing; other columns are carried through.
    label : str, optional
        Name of the file in problem messages; default: ``path`` as given.

    Returns
    -------
    geopandas.GeoDataFrame
        See :func:`validate_depots`.

    Raises
    ------
    fleet.errors.InputError
        With every problem found, by file, row (the header is row 1) and column.
    """
    label = str(path) if label is None else label
    file = Path(path)
    if not file.exists():
        raise InputError([Problem(label, None, None, "file not found")])
    if file.is_dir():
        raise InputError([Problem(label, None, None, "is a folder, not a depots table")])
    if file.suffix.lower() != ".csv":
        raise InputError([Problem(label, None, None, f"expected a .csv file, got '{file.suffix}'")])
    last: Exception | None = None
    for encoding in ("utf-8-sig", "cp1252"):
        try:
            frame = pd.read_csv(file, dtype=str, keep_default_na=False, encoding=encoding, skip_blank_lines=False)
            break
        except UnicodeDecodeError as err:
            last = err
        except pd.errors.EmptyDataError:
            raise InputError([Problem(label, None, None, "file is empty: expected a header row "
                                                         "'depot,latitude,longitude' and one row per depot")]) from None
        except (pd.errors.ParserError, ValueError, OSError) as err:
            raise InputError([Problem(label, None, None, f"cannot read as CSV: {err}")]) from None
    else:
        raise InputError([Problem(label, None, None, f"cannot decode the text (save it as UTF-8 CSV): {last}")])
    return validate_depots(frame, label)


def validate_depots(frame: pd.DataFrame, label: str = "depots") -> gpd.GeoDataFrame:
    """Check a depots table and return it as points in EPSG:4326.

    Rules: columns ``depot`` (text, non-empty, unique, not "(none)"),
    ``latitude`` (-90..90) and ``longitude`` (-180..180) in WGS84 degrees;
    blank rows are skipped. Every problem is collected.

    Returns
    -------
    geopandas.GeoDataFrame
        ``depot`` (str), ``latitude``, ``longitude`` (float), other columns as
        given, point geometry, CRS EPSG:4326; one row per depot.
    """
    df = frame.copy()
    df.columns = [str(c).strip().lower() for c in df.columns]
    missing = [c for c in DEPOT_COLUMNS if c not in df.columns]
    if missing:
        raise InputError([Problem(label, None, c, f"required column '{c}' is missing "
                                                   f"(columns are: {', '.join(map(str, frame.columns))})")
                          for c in missing])
    text = df.astype(str).apply(lambda col: col.str.strip())
    problems: list[Problem] = []
    keep, names, lat, lon = [], [], [], []
    seen: dict[str, int] = {}
    for i in range(len(df)):
        row = i + 2  # the header is row 1
        cells = text.iloc[i]
        if not any(cells.astype(bool)):
            continue  # blank row
        name = cells["depot"]
        ok = True
        if not name:
            problems.append(Problem(label, row, "depot", "empty depot name"))
            ok = False
        elif name.lower() == NO_DEPOT:
            problems.append(Problem(label, row, "depot", f"'{NO_DEPOT}' is reserved for sites without a depot"))
            ok = False
        elif name in seen:
            problems.append(Problem(label, row, "depot", f"depot '{name}' is also on row {seen[name]}"))
            ok = False
        else:
            seen[name] = row
        values = {}
        for col, lo, hi in (("latitude", -90.0, 90.0), ("longitude", -180.0, 180.0)):
            try:
                v = float(cells[col])
            except ValueError:
                problems.append(Problem(label, row, col, f"'{cells[col]}' is not a number (degrees WGS84)"
                                        if cells[col] else "empty: expected degrees WGS84"))
                ok = False
                continue
            if not (np.isfinite(v) and lo <= v <= hi):
                problems.append(Problem(label, row, col, f"{v} is outside {lo:g}..{hi:g} degrees"))
                ok = False
            values[col] = v
        if ok:
            keep.append(i)
            names.append(name)
            lat.append(values["latitude"])
            lon.append(values["longitude"])
    if not problems and not keep:
        problems.append(Problem(label, None, None, "no depots: expected one row per depot"))
    if problems:
        raise InputError(problems)
    extra = [c for c in df.columns if c not in DEPOT_COLUMNS]
    out = pd.DataFrame({"depot": names, "latitude": lat, "longitude": lon})
    for c in extra:
        out[c] = df[c].iloc[keep].to_numpy()
    return gpd.GeoDataFrame(out, geometry=gpd.points_from_xy(out.longitude, out.latitude), crs="EPSG:4326")


# --------------------------------------------------------------------------
# Distances and costs (pure)
# --------------------------------------------------------------------------


def _points(frame) -> gpd.GeoSeries:
    return gpd.GeoSeries(gpd.points_from_xy(np.asarray(frame["longitude"], float), np.asarray(frame["latitude"], float)),
                         crs="EPSG:4326")


def depot_crs(depots: gpd.GeoDataFrame) -> list:
    """The metric CRS of each depot: the UTM zone its point lies in (pyproj CRS objects)."""
    pts = _points(depots)
    return [pts.iloc[[j]].estimate_utm_crs() for j in range(len(pts))]


def straight_distance_km(sites, depots: gpd.GeoDataFrame) -> np.ndarray:
    """Straight-line distance from every site to every depot, km, shape (n_sites, n_depots).

    Column ``j`` is measured in depot ``j``'s UTM zone (:func:`depot_crs`), so a
    site's distance to its own nearby depot is within 0.5 % of the geodesic
    (see the module notes). ``sites`` needs ``latitude`` and ``longitude``
    (WGS84 degrees).
    """
    site_pts = _points(sites)
    depot_pts = _points(depots)
    out = np.zeros((len(site_pts), len(depot_pts)))
    for j, crs in enumerate(depot_crs(depots)):
        origin = depot_pts.iloc[[j]].to_crs(crs).iloc[0]
        out[:, j] = site_pts.to_crs(crs).distance(origin).to_numpy() / 1000.0
    return out


def assign_depots(sites, depots: gpd.GeoDataFrame | None, road_factor: float) -> pd.DataFrame:
    """Which depot serves each site, and how far it is.

    A site is served from the depot it names; a site whose depot is "(none)",
    blank or not in ``depots`` from the nearest depot (straight line).

    Parameters
    ----------
    sites : DataFrame
        ``site_id``, ``latitude``, ``longitude`` (WGS84 degrees), optional ``depot``.
    depots : GeoDataFrame or None
        :func:`read_depots`; None: no depots (distances NaN).
    road_factor : float
        Road distance / straight-line distance (1.0..3.0; common practice
        1.3-1.5 on rural road networks).

    Returns
    -------
    DataFrame, one row per site in order: ``site_id``, ``depot`` (as named),
    ``depot_used``, ``depot_found`` (bool: the named depot is in the table; a blank
    name reads "(none)"),
    ``straight_km``, ``road_km``.
    """
    lo, hi = ROAD_FACTOR_RANGE
    if not lo <= road_factor <= hi:
        raise ValueError(f"road_factor {road_factor} is outside {lo}..{hi}")
    n = len(sites)
    named = (pd.Series(np.asarray(sites["depot"], dtype=object)).fillna("").astype(str).str.strip().to_numpy()
             if "depot" in sites else np.full(n, NO_DEPOT))
    named = np.where(named == "", NO_DEPOT, named)
    out = pd.DataFrame({"site_id": np.asarray(sites["site_id"]).astype(str), "depot": named})
    if depots is None or len(depots) == 0:
        return out.assign(depot_used="", depot_found=False, straight_km=np.nan, road_km=np.nan)
    d = straight_distance_km(sites, depots)
    names = depots["depot"].astype(str).to_numpy()
    index = {name: j for j, name in enumerate(names)}
    own = np.array([index.get(name, -1) for name in named], dtype=int)
    found = own >= 0
    col = np.where(found, own, np.argmin(d, axis=1) if n else own)
    straight = d[np.arange(n), col] if n else np.zeros(0)
    return out.assign(depot_used=names[col] if n else names[:0], depot_found=found, straight_km=straight,
                      road_km=straight * road_factor)


def delivery_cost_usd(road_km, scheme, settings: Mapping[str, Any]) -> np.ndarray:
    """Cost of carrying one kit (SHS) or one plant block (minigrid) from its depot, USD.

    ``road_km * rate + handling``, with ``rate`` = ``shs_usd_per_kit_km`` or
    ``minigrid_usd_per_block_km`` by scheme and ``handling_usd_per_kit`` per kit
    or block (``settings``: the program's ``[transport]`` section). NaN distance
    (no depots) costs 0. Vectorised.
    """
    km = np.asarray(road_km, dtype=float)
    rate = np.where(np.asarray(scheme) == "minigrid", settings["minigrid_usd_per_block_km"],
                    settings["shs_usd_per_kit_km"])
    return np.where(np.isfinite(km), km * rate + settings["handling_usd_per_kit"], 0.0)


def site_transport(sites, depots: gpd.GeoDataFrame | None, settings: Mapping[str, Any]) -> pd.DataFrame:
    """Per site: depot, distances (:func:`assign_depots`) and ``delivery_usd``, the cost of
    one kit or block delivered there (:func:`delivery_cost_usd`); all zero without depots."""
    t = assign_depots(sites, depots, settings["road_factor"])
    t["delivery_usd"] = delivery_cost_usd(t.road_km.to_numpy(), np.asarray(sites["scheme"]), settings)
    return t


def depot_warnings(assignment: pd.DataFrame, depots: gpd.GeoDataFrame | None = None,
                   no_depots_note: str = "") -> list[str]:
    """Warnings for the plan: no depots at all, or sites served from the nearest depot
    because their own is "(none)" or not in the depots table (one line per missing name,
    with a close match where one exists)."""
    if depots is None or len(depots) == 0:
        return [no_depots_note or "no depots file (program [transport] depots_file): transport cost is zero."]
    out = []
    names = depots["depot"].astype(str).tolist()
    fallback = assignment[~assignment.depot_found]
    for name, g in fallback.groupby("depot", sort=True):
        ids = ", ".join(g.site_id.head(10)) + (", ..." if len(g) > 10 else "")
        used = ", ".join(sorted(set(g.depot_used)))
        if name == NO_DEPOT:
            why = "name no depot"
        else:
            close = difflib.get_close_matches(name, names, n=1)
            why = f"name depot '{name}', which is not in the depots table" + (f" (did you mean '{close[0]}'?)" if close else "")
        out.append(f"{len(g)} site(s) {why}; the nearest depot was used ({used}), "
                   f"up to {g.road_km.max():.0f} km by road: {ids}.")
    return out
