"""Read and validate the program's site table.

A site table has one row per site (a village, clinic or school to be served by
a solar home system programme or a minigrid). It may come as CSV, XLSX,
GeoPackage or GeoJSON. :func:`read_sites` reads a file; :func:`validate_sites`
checks a frame against the contract below and returns a clean
:class:`geopandas.GeoDataFrame` in EPSG:4326. Every problem found is collected
and raised together in one :class:`fleet.errors.InputError`, so a user can fix
the whole file in one pass.

Contract
--------
Required columns

``site_id``
    Text, non-empty, unique over the table.
``latitude``, ``longitude``
    WGS84 degrees, -90..90 and -180..180. May be left out when the input has a
    point geometry (in any CRS); the geometry is then reprojected to EPSG:4326
    and copied into these columns.
``scheme``
    ``shs`` (solar home systems) or ``minigrid``; case and surrounding spaces
    are ignored.
``households_t1`` ... ``households_t5``
    Number of households in each demand tier (whole numbers >= 0). A missing
    column or a blank cell counts as 0.

Optional columns (default in brackets)

``site_name`` (empty text), ``district`` ("(none)"), ``depot`` ("(none)"),
``health_posts`` (0), ``schools`` (0), ``productive_kwh_day`` (0.0, kWh/day),
``street_lights`` (0), ``pumping_kwh_day`` (0.0, kWh/day, a deferrable load),
``design_temp_min_c`` and ``temp_mean_c`` (NaN, degC: use the programme
default), ``weather_file`` (empty text: no user weather data),
``reliability_target`` (NaN: use the programme's; a fraction in (0, 1), the
largest acceptable unmet share of energy demand), ``ghi_correction`` (NaN: use
the programme's ``resource.correction_factor``; a multiplier 0.3..1.5 on the
embedded reanalysis irradiance at this site, e.g. from a comparison with local
measurements; it does not scale the site's own weather data).

Any other column is carried through untouched, after the contract columns and
in its original order. Column names are matched after stripping surrounding
whitespace and lowercasing.
"""

from __future__ import annotations

import difflib
import math
import numbers
import os
from collections.abc import Hashable
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

from fleet.errors import InputError, Problem

__all__ = [
    "TIER_COLUMNS",
    "REQUIRED_COLUMNS",
    "OPTIONAL_COLUMNS",
    "CONTRACT_COLUMNS",
    "SCHEMES",
    "household_columns",
    "read_sites",
    "validate_sites",
]

#: Household count columns, one per demand tier (tier 1 is the smallest load).
TIER_COLUMNS: tuple[str, ...] = tuple(f"households_t{k}" for k in range(1, 6))

#: Columns a site table must have (latitude/longitude may be replaced by a
#: point geometry; missing tier columns count as zero households).
REQUIRED_COLUMNS: tuple[str, ...] = ("site_id", "latitude", "longitude", "scheme")

#: Optional columns with the value used when the column or the cell is empty.
OPTIONAL_COLUMNS: dict[str, object] = {
    "site_name": "",
    "district": "(none)",
    "depot": "(none)",
    "health_posts": 0,
    "schools": 0,
    "productive_kwh_day": 0.0,
    "productive_kind": "workshop",
    "street_lights": 0,
    "pumping_kwh_day": 0.0,
    "design_temp_min_c": math.nan,
    "temp_mean_c": math.nan,
    "weather_file": "",
    "reliability_target": math.nan,
    "ghi_correction": math.nan,
}

#: Order of the contract columns in a validated frame.
CONTRACT_COLUMNS: tuple[str, ...] = (
    "site_id",
    "site_name",
    "district",
    "depot",
    "latitude",
    "longitude",
    "scheme",
    *TIER_COLUMNS,
    "health_posts",
    "schools",
    "productive_kwh_day",
    "productive_kind",
    "street_lights",
    "pumping_kwh_day",
    "design_temp_min_c",
    "temp_mean_c",
    "weather_file",
    "reliability_target",
    "ghi_correction",
)

#: Accepted values of ``scheme``.
SCHEMES: tuple[str, ...] = ("shs", "minigrid")

_TEXT_COLUMNS = ("site_id", "site_name", "district", "depot", "scheme", "weather_file", "productive_kind")
PRODUCTIVE_KINDS = ("workshop", "mill", "welding", "cold_storage")
_COUNT_COLUMNS = (*TIER_COLUMNS, "health_posts", "schools", "street_lights")
_TEMPERATURE_COLUMNS = ("design_temp_min_c", "temp_mean_c")
# Plausible air temperatures at a populated site, degC. Outside this range a
# value is far more likely a unit or typing slip (e.g. kelvin) than real.
_TEMPERATURE_RANGE_C = (-50.0, 60.0)
# Accepted multipliers on the embedded irradiance. Reanalysis bias is rarely
# beyond tens of percent; a value outside this range is more likely a
# percentage or a typing slip than a real correction.
_GHI_CORRECTION_RANGE = (0.3, 1.5)
# Largest disagreement tolerated between a geometry and latitude/longitude
# columns given side by side, degrees (about 11 m at the equator): more than
# rounding, less than a different place.
_COORDINATE_TOLERANCE_DEG = 1e-4
_GEOMETRY_COLUMN = "geometry"
# Counts above this cannot be held exactly as a float64 read from a file.
_LARGEST_COUNT = 2**53

_CSV_EXTENSIONS = (".csv",)
_XLSX_EXTENSIONS = (".xlsx",)
_GPKG_EXTENSIONS = (".gpkg",)
_GEOJSON_EXTENSIONS = (".geojson", ".json")
_SUPPORTED = _CSV_EXTENSIONS + _XLSX_EXTENSIONS + _GPKG_EXTENSIONS + _GEOJSON_EXTENSIONS

# Usual short forms, offered as a hint when a required column is missing.
_ALIASES = {
    "lat": "latitude",
    "y": "latitude",
    "lon": "longitude",
    "lng": "longitude",
    "long": "longitude",
    "x": "longitude",
    "id": "site_id",
    "site": "site_id",
    "type": "scheme",
}


def household_columns() -> tuple[str, ...]:
    """Names of the household count columns, tier 1 to tier 5.

    Returns
    -------
    tuple of str
        ``("households_t1", ..., "households_t5")``, the same as
        :data:`TIER_COLUMNS`.
    """
    return TIER_COLUMNS


# --------------------------------------------------------------------------
# Reading files (the I/O edge)
# --------------------------------------------------------------------------


def read_sites(path: str | os.PathLike, *, label: str | None = None) -> gpd.GeoDataFrame:
    """Read a site table from a file and validate it.

    Parameters
    ----------
    path : str or path-like
        A ``.csv`` (comma separated, UTF-8; a byte-order mark is accepted and a
        Windows-1252 file is read as such), ``.xlsx`` (the sheet named
        ``sites`` if there is one, else the first sheet), ``.gpkg`` (the layer
        named ``sites`` if there is one, else the first layer) or
        ``.geojson``/``.json`` file. The file is only read, never changed.
    label : str, optional
        Name of the file in problem messages; default: ``path`` as given.

    Returns
    -------
    geopandas.GeoDataFrame
        The validated table, see :func:`validate_sites`.

    Raises
    ------
    fleet.errors.InputError
        If the file is missing, empty, unreadable or of an unsupported kind,
        or if the table breaks the contract; all problems are listed at once.

    Notes
    -----
    Row numbers in messages are as a spreadsheet shows them: the header is
    row 1 and the first site is row 2. For GeoPackage and GeoJSON the row is
    the feature's position in the layer plus 2, so the numbering is the same
    as for the table exported to a spreadsheet.
    """
    label = str(path) if label is None else label
    file = Path(path)
    if not file.exists():
        raise InputError([Problem(label, None, None, "file not found")])
    if not file.is_file():
        raise InputError([Problem(label, None, None, "is a folder, not a site table file")])
    if file.stat().st_size == 0:
        raise InputError(
            [Problem(label, None, None, "file is empty (0 bytes): expected a header row and one row per site")]
        )

    suffix = file.suffix.lower()
    if suffix in _CSV_EXTENSIONS:
        frame = _read_csv(file, label)
    elif suffix in _XLSX_EXTENSIONS:
        frame = _read_xlsx(file, label)
    elif suffix in _GPKG_EXTENSIONS or suffix in _GEOJSON_EXTENSIONS:
        frame = _read_vector(file, label)
    else:
        hint = " (save it as .xlsx)" if suffix in (".xls", ".xlsm", ".ods") else ""
        raise InputError(
            [
                Problem(
                    label,
                    None,
                    None,
                    f"unsupported file type '{suffix or '(no extension)'}'{hint}; "
                    f"use one of {', '.join(_SUPPORTED)}",
                )
            ]
        )
    return validate_sites(frame, label)


def _text_dtypes(columns) -> dict[Hashable, type]:
    """Read contract text columns as text so that e.g. site_id '007' keeps its zeros."""
    return {c: str for c in columns if _normalise(c) in _TEXT_COLUMNS}


def _read_csv(file: Path, label: str) -> pd.DataFrame:
    last_error: Exception | None = None
    for encoding in ("utf-8-sig", "cp1252"):
        try:
            header = pd.read_csv(file, nrows=0, encoding=encoding)
            if len(header.columns) == 1:
                only = str(header.columns[0])
                for separator, name in ((";", "semicolons"), ("\t", "tabs")):
                    if separator in only:
                        raise InputError(
                            [
                                Problem(
                                    label,
                                    None,
                                    None,
                                    f"the header is separated by {name}, not commas; "
                                    "save the table as comma-separated CSV (or as .xlsx)",
                                )
                            ]
                        )
            # Blank lines are kept (as all-empty rows, skipped by validation)
            # so that row numbers match what a spreadsheet shows.
            return pd.read_csv(
                file,
                encoding=encoding,
                dtype=_text_dtypes(header.columns),
                skip_blank_lines=False,
            )
        except UnicodeDecodeError as err:
            last_error = err
            continue
        except pd.errors.EmptyDataError:
            raise InputError(
                [Problem(label, None, None, "file has no header row: expected a header row and one row per site")]
            ) from None
        except (pd.errors.ParserError, ValueError, OSError) as err:
            raise InputError([Problem(label, None, None, f"cannot read as CSV: {err}")]) from None
    raise InputError(
        [Problem(label, None, None, f"cannot decode the text (save it as UTF-8 CSV): {last_error}")]
    )


def _read_xlsx(file: Path, label: str) -> pd.DataFrame:
    try:
        with pd.ExcelFile(file, engine="openpyxl") as book:
            names = [str(n) for n in book.sheet_names]
            wanted = [n for n in names if n.strip().lower() == "sites"]
            sheet = wanted[0] if wanted else names[0]
            header = pd.read_excel(book, sheet_name=sheet, nrows=0)
            return pd.read_excel(book, sheet_name=sheet, dtype=_text_dtypes(header.columns))
    except InputError:
        raise
    except Exception as err:  # openpyxl raises many kinds (zip, xml, key errors)
        raise InputError(
            [Problem(label, None, None, f"cannot read as an XLSX workbook: {type(err).__name__}: {err}")]
        ) from None


def _read_vector(file: Path, label: str) -> gpd.GeoDataFrame:
    try:
        layers = [str(name) for name, _ in pyogrio.list_layers(file)]
        wanted = [n for n in layers if n.strip().lower() == "sites"]
        layer = wanted[0] if wanted else (layers[0] if layers else None)
        if layer is None:
            raise InputError([Problem(label, None, None, "file has no layers: expected one feature per site")])
        frame = gpd.read_file(file, layer=layer, engine="pyogrio")
    except InputError:
        raise
    except Exception as err:  # GDAL reports problems as several exception types
        raise InputError(
            [Problem(label, None, None, f"cannot read as a GeoPackage/GeoJSON file: {err}")]
        ) from None
    # GDAL hands small integer and real fields over as 32-bit; widen them so a
    # table reads the same from every format.
    widen = {}
    for column, dtype in frame.dtypes.items():
        if column == frame.geometry.name or not isinstance(dtype, np.dtype):
            continue
        if dtype.kind == "i" and dtype.itemsize < 8:
            widen[column] = np.int64
        elif dtype.kind == "f" and dtype.itemsize < 8:
            widen[column] = np.float64
    return frame.astype(widen) if widen else frame


# --------------------------------------------------------------------------
# Validation (pure)
# --------------------------------------------------------------------------


def validate_sites(df: pd.DataFrame, label: str) -> gpd.GeoDataFrame:
    """Check a site table against the contract and return a clean copy.

    Parameters
    ----------
    df : pandas.DataFrame or geopandas.GeoDataFrame
        The site table as read. A GeoDataFrame's active geometry, if it holds
        points, gives each site's position (any CRS; none set is taken as
        WGS84 degrees). The frame is not modified.
    label : str
        Name of the input in problem messages (usually the file path).

    Returns
    -------
    geopandas.GeoDataFrame
        One row per site with a plain RangeIndex and the columns, in order:
        ``site_id``, ``site_name``, ``district``, ``depot`` (str),
        ``latitude``, ``longitude`` (float64, WGS84 degrees), ``scheme`` (str,
        ``"shs"`` or ``"minigrid"``), ``households_t1`` ... ``households_t5``,
        ``health_posts``, ``schools`` (int64, counts), ``productive_kwh_day``
        (float64, kWh/day), ``design_temp_min_c``, ``temp_mean_c`` (float64,
        degC, NaN = programme default), ``weather_file`` (str, "" = none),
        ``reliability_target`` (float64, largest unmet-energy fraction, NaN =
        programme default), ``ghi_correction`` (float64, multiplier on the
        embedded irradiance, NaN = programme default); then every other input column unchanged; then
        ``geometry`` (points, EPSG:4326).

    Raises
    ------
    fleet.errors.InputError
        With every problem found: missing required columns (once each, row
        None), empty or duplicate ``site_id`` (the message names all rows
        sharing it), coordinates missing, not numbers or out of range, unknown
        ``scheme``, counts that are not whole numbers >= 0, values out of
        range, and sites with nothing to serve (no households, health posts,
        schools or productive load).

    Notes
    -----
    Row numbers are as a spreadsheet shows them: the frame's first row is
    row 2 (the header is row 1), counting rows in order whatever the index.
    Rows that are entirely empty (e.g. blank lines at the end of a sheet) are
    dropped silently and do not shift the numbers of the other rows.
    """
    problems: list[Problem] = []

    def problem(row: int | None, column: str | None, message: str) -> None:
        problems.append(Problem(label, row, column, message))

    geometry = _active_geometry(df)
    n_rows = len(df)

    # -- column names ------------------------------------------------------
    contract: dict[str, int] = {}  # canonical name -> position in df.columns
    unknown: list[int] = []  # positions of columns carried through
    attribute_positions: list[int] = []
    seen: dict[str, list[Hashable]] = {}
    for position, name in enumerate(df.columns):
        if geometry is not None and name == geometry.name:
            continue
        attribute_positions.append(position)
        key = _normalise(name)
        seen.setdefault(key, []).append(name)
        if key in CONTRACT_COLUMNS:
            contract.setdefault(key, position)
        elif key == _GEOMETRY_COLUMN:
            problem(None, str(name), "column name 'geometry' is reserved for the site's point; rename the column")
        else:
            unknown.append(position)
    for key, names in seen.items():
        if key in CONTRACT_COLUMNS and len(names) > 1:
            listed = ", ".join(repr(str(n)) for n in names)
            problem(None, key, f"column given more than once ({listed}); keep one")

    has_geometry = geometry is not None and bool((~_null_geometry(geometry)).any())
    required = ["site_id", "scheme"] + ([] if has_geometry else ["latitude", "longitude"])
    unknown_names = [_normalise(df.columns[i]) for i in unknown]
    for name in required:
        if name not in contract:
            problem(None, name, "required column is missing" + _hint(name, unknown_names))

    columns = {i: df.iloc[:, i].tolist() for i in attribute_positions}

    def cells(name: str) -> list[object] | None:
        return columns[contract[name]] if name in contract else None

    # -- rows that are entirely empty ---------------------------------------
    empty = np.ones(n_rows, dtype=bool)
    for values in columns.values():
        empty &= np.fromiter((_is_blank(v) for v in values), dtype=bool, count=n_rows)
    if geometry is not None:
        empty &= _null_geometry(geometry)
    keep = [r for r in range(n_rows) if not empty[r]]

    if not keep:
        message = "the table has no sites: expected a header row and one row (or feature) per site"
        if not attribute_positions:
            # Nothing at all (e.g. an empty layer): listing every column as
            # missing would bury the one thing to fix.
            raise InputError([Problem(label, None, None, message)])
        problem(None, None, message)
        raise InputError(_in_row_order(problems))

    def row_number(r: int) -> int:
        return r + 2

    # -- text columns --------------------------------------------------------
    site_id = _text_values(cells("site_id"), n_rows, "")
    for r in keep:
        if "site_id" in contract and site_id[r] == "":
            problem(row_number(r), "site_id", "site_id is empty; every site needs a unique id")
    rows_of: dict[str, list[int]] = {}
    for r in keep:
        if site_id[r] != "":
            rows_of.setdefault(site_id[r], []).append(r)
    for value, rows in rows_of.items():
        if len(rows) > 1:
            numbers_text = _join_rows([row_number(r) for r in rows])
            problem(
                row_number(rows[1]),
                "site_id",
                f"site_id '{value}' is used on rows {numbers_text}; each site needs its own id",
            )

    text = {
        name: _text_values(cells(name), n_rows, OPTIONAL_COLUMNS[name])
        for name in ("site_name", "district", "depot", "weather_file", "productive_kind")
    }
    text["productive_kind"] = [v.strip().lower() or "workshop" for v in text["productive_kind"]]
    for r in keep:
        if text["productive_kind"][r] not in PRODUCTIVE_KINDS:
            problem(row_number(r), "productive_kind",
                    f"'{text['productive_kind'][r]}' is not one of {', '.join(PRODUCTIVE_KINDS)}")

    scheme_raw = _text_values(cells("scheme"), n_rows, "")
    scheme = [v.lower() for v in scheme_raw]
    if "scheme" in contract:
        for r in keep:
            if scheme[r] == "":
                problem(row_number(r), "scheme", f"scheme is empty; use one of {', '.join(SCHEMES)}")
            elif scheme[r] not in SCHEMES:
                problem(
                    row_number(r),
                    "scheme",
                    f"unknown scheme '{scheme_raw[r]}'; use one of {', '.join(SCHEMES)}",
                )

    # -- counts and numbers ----------------------------------------------------
    bad_load_rows: set[int] = set()
    counts: dict[str, np.ndarray] = {}
    for name in _COUNT_COLUMNS:
        values = np.zeros(n_rows, dtype=np.int64)
        raw = cells(name)
        if raw is not None:
            for r in keep:
                status, x = _number(raw[r])
                if status == "blank":
                    continue
                if status == "ok" and 0 <= x <= _LARGEST_COUNT and float(x).is_integer():
                    values[r] = int(x)
                    continue
                bad_load_rows.add(r)
                what = "households" if name in TIER_COLUMNS else name.replace("_", " ")
                problem(
                    row_number(r),
                    name,
                    f"must be a whole number of {what} (0 or more); got {_show(raw[r])}",
                )
        counts[name] = values

    def daily_energy(name: str) -> np.ndarray:
        """A non-negative kWh/day column; a bad cell also marks the row's load as unknown."""

        def on_problem(r: int, message: str) -> None:
            bad_load_rows.add(r)
            problem(row_number(r), name, message)

        return _float_column(cells(name), n_rows, keep, default=0.0,
                             check=lambda x: None if x >= 0 else "must be 0 or more kWh/day",
                             on_problem=on_problem, what="kWh/day")

    productive = daily_energy("productive_kwh_day")
    pumping = daily_energy("pumping_kwh_day")
    lo, hi = _TEMPERATURE_RANGE_C
    temperatures = {}
    for name in _TEMPERATURE_COLUMNS:
        temperatures[name] = _float_column(
            cells(name),
            n_rows,
            keep,
            default=math.nan,
            check=lambda x: None if lo <= x <= hi else f"must be between {lo:g} and {hi:g} degC",
            on_problem=lambda r, msg, name=name: problem(row_number(r), name, msg),
            what="degC",
        )
    for r in keep:
        t_min = temperatures["design_temp_min_c"][r]
        t_mean = temperatures["temp_mean_c"][r]
        if not (math.isnan(t_min) or math.isnan(t_mean)) and t_min > t_mean:
            problem(
                row_number(r),
                "design_temp_min_c",
                f"design minimum temperature {t_min:g} degC is above the mean temperature "
                f"{t_mean:g} degC; check the two columns",
            )
    reliability = _float_column(
        cells("reliability_target"),
        n_rows,
        keep,
        default=math.nan,
        check=lambda x: None
        if 0 < x < 1
        else "must be a fraction between 0 and 1 (the largest unmet share of energy, e.g. 0.05 for 5 %)",
        on_problem=lambda r, msg: problem(row_number(r), "reliability_target", msg),
        what="fraction",
    )

    lo_ghi, hi_ghi = _GHI_CORRECTION_RANGE
    ghi_correction = _float_column(
        cells("ghi_correction"),
        n_rows,
        keep,
        default=math.nan,
        check=lambda x: None
        if lo_ghi <= x <= hi_ghi
        else f"must be a multiplier between {lo_ghi:g} and {hi_ghi:g} (e.g. 0.9 to lower the irradiance by 10 %)",
        on_problem=lambda r, msg: problem(row_number(r), "ghi_correction", msg),
        what="multiplier",
    )

    # -- coordinates -----------------------------------------------------------
    latitude, longitude = _coordinates(
        geometry, cells("latitude"), cells("longitude"), keep, n_rows, label, problems
    )

    # -- something to serve ------------------------------------------------------
    for r in keep:
        if r in bad_load_rows:
            continue
        households = sum(int(counts[c][r]) for c in TIER_COLUMNS)
        community = int(counts["health_posts"][r]) + int(counts["schools"][r]) + int(counts["street_lights"][r])
        if households == 0 and community == 0 and productive[r] == 0 and pumping[r] == 0:
            problem(
                row_number(r),
                None,
                "nothing to serve: no households in any tier, no health posts, schools "
                "or productive load",
            )

    if problems:
        raise InputError(_in_row_order(problems))

    # -- build the clean frame -----------------------------------------------------
    idx = np.asarray(keep, dtype=np.int64)
    data: dict[str, object] = {
        "site_id": pd.array([site_id[r] for r in keep], dtype="str"),
        "site_name": pd.array([text["site_name"][r] for r in keep], dtype="str"),
        "district": pd.array([text["district"][r] for r in keep], dtype="str"),
        "depot": pd.array([text["depot"][r] for r in keep], dtype="str"),
        "latitude": latitude[idx],
        "longitude": longitude[idx],
        "scheme": pd.array([scheme[r] for r in keep], dtype="str"),
    }
    for name in TIER_COLUMNS:
        data[name] = counts[name][idx]
    data["health_posts"] = counts["health_posts"][idx]
    data["schools"] = counts["schools"][idx]
    data["productive_kwh_day"] = productive[idx]
    data["productive_kind"] = pd.array([text["productive_kind"][r] for r in keep], dtype="str")
    data["street_lights"] = counts["street_lights"][idx]
    data["pumping_kwh_day"] = pumping[idx]
    data["design_temp_min_c"] = temperatures["design_temp_min_c"][idx]
    data["temp_mean_c"] = temperatures["temp_mean_c"][idx]
    data["weather_file"] = pd.array([text["weather_file"][r] for r in keep], dtype="str")
    data["reliability_target"] = reliability[idx]
    data["ghi_correction"] = ghi_correction[idx]
    out = pd.DataFrame(data, index=pd.RangeIndex(len(keep)))
    # the cells as the file gave them where reading normalised them (case) or filled a
    # default (blank cells): outputs that round-trip the site table use these
    as_given: dict[str, list] = {}
    for name in ("site_name", "district", "depot", "scheme", "productive_kind", "weather_file", "health_posts",
                 "schools", "productive_kwh_day", "street_lights", "pumping_kwh_day"):
        raw = cells(name)
        if raw is None:
            continue
        given = [None if _is_blank(raw[r]) else raw[r] for r in keep]
        used = out[name].tolist()
        if any(g is None or (isinstance(g, str) and g != u) for g, u in zip(given, used)):
            as_given[name] = given
    out.attrs["as_given"] = as_given
    if unknown:
        # Column by column, so that repeated names and dtypes survive as given.
        extras = [df.iloc[idx, i].reset_index(drop=True) for i in unknown]
        out = pd.concat([out, *extras], axis=1)
    points = gpd.points_from_xy(out["longitude"], out["latitude"], crs="EPSG:4326")
    gdf = gpd.GeoDataFrame(out, geometry=points, crs="EPSG:4326")
    gdf.attrs["as_given"] = as_given
    return gdf


# --------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------


def _in_row_order(problems: list[Problem]) -> list[Problem]:
    """Whole-file and column problems first, then row by row (stable)."""
    return sorted(problems, key=lambda p: -1 if p.row is None else p.row)


def _normalise(name: Hashable) -> str:
    return str(name).strip().lower()


def _hint(name: str, candidates: list[str]) -> str:
    for candidate in candidates:
        if _ALIASES.get(candidate) == name:
            return f" (found column '{candidate}': rename it to '{name}')"
    close = difflib.get_close_matches(name, candidates, n=1, cutoff=0.8)
    if close:
        return f" (found column '{close[0]}': rename it to '{name}'?)"
    return ""


def _join_rows(rows: list[int]) -> str:
    text = [str(r) for r in rows]
    return text[0] if len(text) == 1 else ", ".join(text[:-1]) + " and " + text[-1]


def _is_blank(value: object) -> bool:
    if value is None or value is pd.NA or value is pd.NaT:
        return True
    if isinstance(value, str):
        return value.strip() == ""
    if isinstance(value, float):
        return math.isnan(value)
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _show(value: object) -> str:
    return repr(value) if isinstance(value, str) else str(value)


def _number(value: object) -> tuple[str, float]:
    """Parse one cell: ('blank', nan), ('ok', x) or ('bad', nan)."""
    if _is_blank(value):
        return "blank", math.nan
    if isinstance(value, (bool, np.bool_)):
        return "bad", math.nan
    if isinstance(value, numbers.Real):
        x = float(value)
    elif isinstance(value, str):
        try:
            x = float(value.strip())
        except ValueError:
            return "bad", math.nan
    else:
        return "bad", math.nan
    if not math.isfinite(x):
        return "bad", math.nan
    return "ok", x


def _float_column(raw, n_rows, keep, *, default, check, on_problem, what) -> np.ndarray:
    values = np.full(n_rows, default, dtype=np.float64)
    if raw is None:
        return values
    for r in keep:
        status, x = _number(raw[r])
        if status == "blank":
            continue
        if status == "bad":
            on_problem(r, f"must be a number ({what}); got {_show(raw[r])}")
            continue
        message = check(x)
        if message is not None:
            on_problem(r, f"{message}; got {x:g}")
            continue
        values[r] = x
    return values


def _text_values(raw: list[object] | None, n_rows: int, default: object) -> list[str]:
    if raw is None:
        return [str(default)] * n_rows
    out = []
    for value in raw:
        if _is_blank(value):
            out.append(str(default))
        elif isinstance(value, float) and value.is_integer():
            # A numeric id from a spreadsheet or GIS layer: 12.0 means "12".
            out.append(str(int(value)))
        else:
            out.append(str(value).strip())
    return out


def _active_geometry(df: pd.DataFrame) -> gpd.GeoSeries | None:
    if not isinstance(df, gpd.GeoDataFrame):
        return None
    try:
        return df.geometry
    except AttributeError:  # a GeoDataFrame without an active geometry column
        return None


def _null_geometry(geometry: gpd.GeoSeries) -> np.ndarray:
    return np.asarray(geometry.isna() | geometry.is_empty, dtype=bool)


def _coordinates(geometry, lat_raw, lon_raw, keep, n_rows, label, problems):
    """Latitude and longitude in WGS84 degrees for every row (NaN where unknown).

    A point geometry, reprojected to EPSG:4326, wins over latitude/longitude
    columns; when both are given they must agree.
    """

    def problem(r: int, column: str, message: str) -> None:
        problems.append(Problem(label, r + 2, column, message))

    # Points from the geometry, reprojected to WGS84.
    geo_lat = np.full(n_rows, np.nan)
    geo_lon = np.full(n_rows, np.nan)
    has_point = np.zeros(n_rows, dtype=bool)
    if geometry is not None:
        null = _null_geometry(geometry)
        kinds = geometry.geom_type.to_numpy()
        for r in keep:
            if null[r]:
                continue
            if kinds[r] == "Point":
                has_point[r] = True
            else:
                problem(r, "geometry", f"geometry must be a point (the site's location); got {kinds[r]}")
        if has_point.any():
            points = gpd.GeoSeries(np.asarray(geometry.array)[has_point], crs=geometry.crs)
            assumed = geometry.crs is None
            try:
                wgs84 = points if assumed else points.to_crs("EPSG:4326")
            except Exception as err:  # pyproj raises several kinds
                problems.append(
                    Problem(label, None, "geometry", f"cannot convert the geometry's CRS to EPSG:4326: {err}")
                )
                has_point[:] = False
            else:
                geo_lon[has_point] = shapely.get_x(wgs84.array)
                geo_lat[has_point] = shapely.get_y(wgs84.array)
                note = " (the layer has no CRS, so WGS84 degrees were assumed)" if assumed else ""
                for r in np.flatnonzero(has_point):
                    lat, lon = geo_lat[r], geo_lon[r]
                    if not (-90 <= lat <= 90 and -180 <= lon <= 180):  # also catches NaN
                        problem(
                            r,
                            "geometry",
                            f"point (x {lon:g}, y {lat:g}) is outside WGS84 longitude -180..180 / "
                            f"latitude -90..90{note}",
                        )
                        has_point[r] = False
                        geo_lat[r] = geo_lon[r] = np.nan

    # Latitude and longitude columns, each checked on its own.
    column_values = {}
    for column, raw, limit in (("latitude", lat_raw, 90.0), ("longitude", lon_raw, 180.0)):
        values = np.full(n_rows, np.nan)
        if raw is not None:
            for r in keep:
                status, x = _number(raw[r])
                if status == "blank":
                    if not has_point[r]:
                        problem(r, column, f"{column} is empty; give WGS84 degrees")
                elif status == "bad":
                    problem(r, column, f"{column} must be a number (WGS84 degrees); got {_show(raw[r])}")
                elif not -limit <= x <= limit:
                    problem(r, column, f"{column} must be between {-limit:g} and {limit:g} degrees; got {x:g}")
                else:
                    values[r] = x
        column_values[column] = values
    col_lat, col_lon = column_values["latitude"], column_values["longitude"]

    latitude = np.where(has_point, geo_lat, col_lat)
    longitude = np.where(has_point, geo_lon, col_lon)
    for r in keep:
        if has_point[r]:
            if np.isfinite(col_lat[r]) and np.isfinite(col_lon[r]) and (
                abs(col_lat[r] - geo_lat[r]) > _COORDINATE_TOLERANCE_DEG
                or abs(col_lon[r] - geo_lon[r]) > _COORDINATE_TOLERANCE_DEG
            ):
                problem(
                    r,
                    "geometry",
                    f"geometry (latitude {geo_lat[r]:.5f}, longitude {geo_lon[r]:.5f}) and the "
                    f"latitude/longitude columns ({col_lat[r]:.5f}, {col_lon[r]:.5f}) disagree; "
                    "correct one or drop the columns",
                )
        elif geometry is not None and lat_raw is None and lon_raw is None and _null_geometry(geometry)[r]:
            problem(r, "geometry", "site has no point and no latitude/longitude")
    return latitude, longitude
