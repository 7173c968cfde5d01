"""Readers for a user's own weather data.

Two kinds of file are read here, and nothing else in this module touches the
file system:

* an hourly measured (or typical measured) year, as EPW, TMY3 (CSV) or TMY2,
  read with :mod:`pvlib.iotools` into a :class:`fleet.resource.MeasuredYear`
  (:func:`read_weather_file`);
* a table of monthly values per site (CSV or XLSX), read into
  :class:`fleet.resource.MonthlyClimate` per site (:func:`read_monthly_table`).

:func:`read_site_weather_sources` resolves the ``weather_file`` column of a
site table into one of these per site. Every reader checks the whole file
and raises one :class:`fleet.errors.InputError` with every problem found, by
file, line or row, and column. The weather years themselves are built by
:func:`fleet.resource.site_weather_from`.

Monthly table contract
----------------------
One row per site and calendar month; the header row is row 1.

``site_id``
    Text, the site's id in the site table.
``month``
    Whole number 1..12; each month exactly once per site.
``ghi_kwh_m2_day``
    Mean daily global horizontal irradiation of the month, 0..12
    kWh/m²/day.
``temp_mean_c`` (optional)
    Mean air temperature of the month, -50..60 °C; for a site, all twelve
    months or none.
``temp_min_c`` (optional)
    Mean daily minimum air temperature of the month, -50..60 °C, not above
    ``temp_mean_c``; all twelve months or none.

Other columns are ignored.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from fleet.errors import InputError, Problem
from fleet.resource import DAYS_PER_MONTH, MeasuredYear, MonthlyClimate

__all__ = [
    "HOURLY_KINDS",
    "MONTHLY_COLUMNS",
    "weather_file_kind",
    "read_weather_file",
    "read_monthly_table",
    "read_site_weather_sources",
]

#: Hourly file formats understood by :func:`read_weather_file`.
HOURLY_KINDS = ("EPW", "TMY3", "TMY2")

#: Columns of a monthly table: name -> required.
MONTHLY_COLUMNS = {
    "site_id": True,
    "month": True,
    "ghi_kwh_m2_day": True,
    "temp_mean_c": False,
    "temp_min_c": False,
}

_MONTH_NAMES = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep",
                "Oct", "Nov", "Dec")
# Highest plausible monthly-mean daily GHI anywhere on Earth is about
# 8-9 kWh/m²/day; 12 leaves room while catching Wh or MJ given by mistake.
_MONTHLY_GHI_RANGE = (0.0, 12.0)
_TEMPERATURE_RANGE_C = (-50.0, 60.0)
# Hourly plausibility: GHI cannot exceed the solar constant by much (cloud
# enhancement included); temperature and wind ranges hold at any station.
_HOURLY_GHI_RANGE = (0.0, 1500.0)
_HOURLY_TEMPERATURE_RANGE_C = (-90.0, 70.0)
_HOURLY_WIND_RANGE = (0.0, 75.0)
# Problems listed per column before the rest are summarised in one line.
_MAX_LISTED = 20
_FIRST_DAY_OF_MONTH = np.concatenate([[0], np.cumsum(DAYS_PER_MONTH)[:-1]])


def _check_file(path, label):
    file = Path(path)
    if not file.exists():
        raise InputError([Problem(label, None, None, "file not found")])
    if not file.is_file():
        raise InputError([Problem(label, None, None,
                                  "is a folder, not a weather file")])
    if file.stat().st_size == 0:
        raise InputError([Problem(label, None, None, "file is empty (0 bytes)")])
    return file


def _first_lines(file, n=2):
    with open(file, "r", encoding="utf-8", errors="replace") as handle:
        return [handle.readline() for _ in range(n)]


def weather_file_kind(path):
    """What kind of weather file a path holds, from its name and first lines.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    str or None
        ``"EPW"`` (``.epw``), ``"TMY2"`` (``.tm2``), ``"TMY3"`` (``.csv``
        whose second line starts with ``Date (MM/DD/YYYY)``), ``"monthly"``
        (other ``.csv``, or ``.xlsx``), or None for anything else. The file
        must exist for a ``.csv`` to be told apart.
    """
    file = Path(path)
    suffix = file.suffix.lower()
    if suffix == ".epw":
        return "EPW"
    if suffix in (".tm2", ".tmy2"):
        return "TMY2"
    if suffix == ".xlsx":
        return "monthly"
    if suffix == ".csv":
        try:
            lines = _first_lines(file)
        except OSError:
            return "monthly"
        if len(lines) > 1 and lines[1].strip().lower().startswith(
                "date (mm/dd/yyyy)"):
            return "TMY3"
        return "monthly"
    return None


# --------------------------------------------------------------------------
# Hourly files
# --------------------------------------------------------------------------


def _parse_hourly(file, kind):
    """Read with pvlib; return month, day, hour (1..24, hour ending), values,
    first data line number and metadata."""
    import pvlib

    if kind == "EPW":
        data, meta = pvlib.iotools.read_epw(str(file))
        month, day, hour = (data[c].to_numpy() for c in ("month", "day", "hour"))
        values = {
            "Global Horizontal Radiation": data["ghi"].to_numpy(float),
            "Dry Bulb Temperature": data["temp_air"].to_numpy(float),
            "Wind Speed": data["wind_speed"].to_numpy(float),
        }
        # EPW codes missing values with 9999 (radiation), 99.9 (temperature)
        # and 999 (wind speed).
        missing = {"Global Horizontal Radiation": 9999.0,
                   "Dry Bulb Temperature": 99.9, "Wind Speed": 999.0}
        first_line = 9
    elif kind == "TMY3":
        data, meta = pvlib.iotools.read_tmy3(str(file), map_variables=True)
        dates = data["Date (MM/DD/YYYY)"].astype(str).str.split("/", expand=True)
        month = pd.to_numeric(dates[0], errors="coerce").to_numpy()
        day = pd.to_numeric(dates[1], errors="coerce").to_numpy()
        hour = pd.to_numeric(data["Time (HH:MM)"].astype(str).str.split(
            ":").str[0], errors="coerce").to_numpy()
        values = {
            "GHI (W/m^2)": data["ghi"].to_numpy(float),
            "Dry-bulb (C)": data["temp_air"].to_numpy(float),
            "Wspd (m/s)": data["wind_speed"].to_numpy(float),
        }
        missing = {}
        first_line = 3
    else:  # TMY2: temperature and wind in tenths
        data, meta = pvlib.iotools.read_tmy2(str(file))
        month, day, hour = (data[c].to_numpy() for c in ("month", "day", "hour"))
        values = {
            "GHI": data["GHI"].to_numpy(float),
            "DryBulb": data["DryBulb"].to_numpy(float) / 10.0,
            "Wspd": data["Wspd"].to_numpy(float) / 10.0,
        }
        missing = {}
        first_line = 2
    for name, code in missing.items():
        values[name] = np.where(values[name] >= code, np.nan, values[name])
    return month, day, hour, values, first_line, meta


def _summarise(problems, label, column, lines, message):
    for line in lines[:_MAX_LISTED]:
        problems.append(Problem(label, int(line), column, message))
    if len(lines) > _MAX_LISTED:
        problems.append(Problem(
            label, None, column,
            f"{message} on {len(lines) - _MAX_LISTED} more lines "
            f"(first {_MAX_LISTED} listed)"))


def read_weather_file(path, *, label=None):
    """Read an hourly EPW, TMY3 or TMY2 file as one measured year.

    Parameters
    ----------
    path : str or path-like
        ``.epw`` (EnergyPlus weather), ``.csv`` (TMY3) or ``.tm2`` (TMY2).
        Only read, never changed; never fetched from a network address.
    label : str, optional
        Name of the file in problem messages; default ``path`` as given.

    Returns
    -------
    fleet.resource.MeasuredYear
        Hourly GHI [W/m²], air temperature [°C] and wind speed [m/s]; element
        ``h`` is the hour from ``h`` to ``h + 1`` of the file's local standard
        time counted from midnight on 1 January (the files' values belong to
        the hour ending at their time stamp). A 29 February present in the
        file is dropped, leaving 365 days. The file's latitude, longitude,
        time zone and elevation come with it; ``label`` is the file name.

    Raises
    ------
    fleet.errors.InputError
        If the file is missing, of an unknown kind, unreadable, has hours
        missing or repeated, or has values missing or out of range (by line
        and column), or lacks its position; all problems at once.

    References
    ----------
    .. [1] S. Wilcox and W. Marion, "Users manual for TMY3 data sets",
       NREL/TP-581-43156, 2008.
    .. [2] W. Marion and K. Urban, "User's manual for TMY2s", NREL, 1995.
    .. [3] U.S. Department of Energy, "Auxiliary programs" (EnergyPlus
       weather file format), chapter 2.
    """
    label = str(path) if label is None else label
    file = _check_file(path, label)
    kind = weather_file_kind(file)
    if kind not in HOURLY_KINDS:
        raise InputError([Problem(
            label, None, None,
            "not an hourly weather file: expected .epw (EnergyPlus), .csv "
            "(TMY3, second line 'Date (MM/DD/YYYY),Time (HH:MM),...') or .tm2 "
            "(TMY2)")])
    try:
        month, day, hour, values, first_line, meta = _parse_hourly(file, kind)
    except Exception as err:  # pvlib and pandas raise many kinds on bad text
        raise InputError([Problem(label, None, None,
                                  f"cannot read as {kind}: "
                                  f"{type(err).__name__}: {err}")]) from None

    problems = []
    for key, low, high in (("latitude", -90.0, 90.0),
                           ("longitude", -180.0, 180.0), ("TZ", -12.0, 14.0)):
        value = meta.get(key)
        try:
            ok = value is not None and low <= float(value) <= high
        except (TypeError, ValueError):
            ok = False
        if not ok:
            problems.append(Problem(label, 1, key,
                                    f"header {key} must be a number in "
                                    f"{low:g}..{high:g}; got {value!r}"))

    n = len(hour)
    lines = first_line + np.arange(n)
    month = np.asarray(month, dtype=float)
    day = np.asarray(day, dtype=float)
    hour = np.asarray(hour, dtype=float)
    leap_day = (month == 2) & (day == 29)
    month_ok = np.isfinite(month) & (month >= 1) & (month <= 12) & (month % 1 == 0)
    month_days = np.where(month_ok, DAYS_PER_MONTH[np.where(month_ok, month, 1).astype(int) - 1], 0)
    day_ok = (np.isfinite(day) & (day >= 1) & (day % 1 == 0)
              & ((day <= month_days) | leap_day))
    hour_ok = np.isfinite(hour) & (hour >= 1) & (hour <= 24) & (hour % 1 == 0)
    bad_time = ~(month_ok & day_ok & hour_ok)
    _summarise(problems, label, "date/time", lines[bad_time],
               "date or hour is not a valid month/day/hour (1..24)")

    keep = ~bad_time & ~leap_day
    slot = np.full(n, -1, dtype=np.int64)
    m = month[keep].astype(int) - 1
    slot[keep] = ((_FIRST_DAY_OF_MONTH[m] + day[keep].astype(int) - 1) * 24
                  + hour[keep].astype(int) - 1)
    counts = np.bincount(slot[keep], minlength=8760)
    repeated = keep & (counts[np.clip(slot, 0, None)] > 1)
    if repeated.any():
        _summarise(problems, label, "date/time", lines[repeated],
                   "this hour appears more than once in the file")
    absent = np.flatnonzero(counts == 0)
    if absent.size and not bad_time.any():
        shown = ", ".join(_slot_text(s) for s in absent[:10])
        more = f" and {absent.size - 10} more" if absent.size > 10 else ""
        problems.append(Problem(
            label, None, "date/time",
            f"{absent.size} hour(s) of the year are missing: {shown}{more}; "
            f"a weather file must cover a whole year hour by hour"))

    ranges = dict(zip(values, (_HOURLY_GHI_RANGE, _HOURLY_TEMPERATURE_RANGE_C,
                               _HOURLY_WIND_RANGE)))
    for (column, array), (low, high), unit in zip(values.items(),
                                                  ranges.values(),
                                                  ("W/m²", "°C", "m/s")):
        bad = keep & ~(np.isfinite(array) & (array >= low) & (array <= high))
        _summarise(problems, label, column, lines[bad],
                   f"value missing or outside {low:g}..{high:g} {unit}")
    if problems:
        raise InputError(problems)

    order = np.argsort(slot[keep])
    arrays = {}
    for name, array in zip(("ghi", "temp", "wind"), values.values()):
        arrays[name] = np.asarray(array[keep][order], dtype=float)
    elevation = meta.get("altitude", 0.0)
    try:
        elevation = float(elevation)
    except (TypeError, ValueError):
        elevation = 0.0
    return MeasuredYear(
        ghi_wm2=arrays["ghi"],
        temp_air_c=arrays["temp"],
        wind_speed_ms=arrays["wind"],
        latitude_deg=float(meta["latitude"]),
        longitude_deg=float(meta["longitude"]),
        utc_offset_hours=float(meta["TZ"]),
        elevation_m=elevation if math.isfinite(elevation) else 0.0,
        label=os.path.basename(str(path)),
        kind=kind,
    )


def _slot_text(slot):
    day, hour = divmod(int(slot), 24)
    month = int(np.searchsorted(_FIRST_DAY_OF_MONTH, day, side="right")) - 1
    return (f"{day - _FIRST_DAY_OF_MONTH[month] + 1} {_MONTH_NAMES[month]} "
            f"{hour:02d}:00-{hour + 1:02d}:00")


# --------------------------------------------------------------------------
# Monthly tables
# --------------------------------------------------------------------------


def _read_table(file, label):
    suffix = file.suffix.lower()
    try:
        if suffix == ".csv":
            return pd.read_csv(file, dtype={"site_id": str}, encoding="utf-8-sig",
                               skip_blank_lines=False)
        if suffix == ".xlsx":
            with pd.ExcelFile(file, engine="openpyxl") as book:
                names = [str(n) for n in book.sheet_names]
                wanted = [n for n in names if n.strip().lower() == "monthly"]
                return pd.read_excel(book, sheet_name=wanted[0] if wanted
                                     else names[0], dtype={"site_id": str})
    except UnicodeDecodeError as err:
        raise InputError([Problem(label, None, None,
                                  f"cannot decode the text (save it as UTF-8 "
                                  f"CSV): {err}")]) from None
    except pd.errors.EmptyDataError:
        raise InputError([Problem(label, None, None,
                                  "file has no header row")]) from None
    except Exception as err:  # parser, zip and xml errors of many kinds
        raise InputError([Problem(label, None, None,
                                  f"cannot read the table: "
                                  f"{type(err).__name__}: {err}")]) from None
    raise InputError([Problem(
        label, None, None,
        f"unsupported file type '{suffix or '(no extension)'}' for a monthly "
        f"table; use .csv or .xlsx")])


def _number(value):
    if value is None or isinstance(value, (bool, np.bool_)):
        return None if value is None else "bad"
    if isinstance(value, str):
        if value.strip() == "":
            return None
        try:
            value = float(value.strip())
        except ValueError:
            return "bad"
    try:
        x = float(value)
    except (TypeError, ValueError):
        return "bad"
    if math.isnan(x):
        return None
    return x if math.isfinite(x) else "bad"


def read_monthly_table(path, *, label=None):
    """Read a table of monthly irradiation (and temperature) per site.

    Parameters
    ----------
    path : str or path-like
        ``.csv`` (UTF-8) or ``.xlsx`` (the sheet named ``monthly`` if there
        is one, else the first). See the module docstring for the columns.
    label : str, optional
        Name of the file in problem messages; default ``path`` as given.

    Returns
    -------
    dict of str to fleet.resource.MonthlyClimate
        One entry per site id, months January to December; temperatures
        NaN where the table has none for the site.

    Raises
    ------
    fleet.errors.InputError
        With every problem: missing columns, empty site ids, months that are
        not whole numbers 1..12 or not each given exactly once per site, GHI
        outside 0..12 kWh/m²/day, temperatures out of range or given for
        only some months, a minimum above the mean.
    """
    label = str(path) if label is None else label
    file = _check_file(path, label)
    frame = _read_table(file, label)
    problems = []
    columns = {}
    for position, name in enumerate(frame.columns):
        key = str(name).strip().lower()
        if key in MONTHLY_COLUMNS and key not in columns:
            columns[key] = position
    for name, required in MONTHLY_COLUMNS.items():
        if required and name not in columns:
            problems.append(Problem(label, None, name,
                                    "required column is missing"))
    if problems:
        raise InputError(problems)

    def cells(name):
        if name not in columns:
            return [None] * len(frame)
        return frame.iloc[:, columns[name]].tolist()

    site_cells, month_cells = cells("site_id"), cells("month")
    numbers = {name: cells(name) for name in
               ("ghi_kwh_m2_day", "temp_mean_c", "temp_min_c")}
    rows_of = {}  # site -> month -> [row numbers]
    values = {}  # site -> {column: 12 values}
    for r in range(len(frame)):
        row = r + 2
        raw = [site_cells[r], month_cells[r], *(numbers[c][r] for c in numbers)]
        if all(_number(v) is None for v in raw[1:]) and (
                raw[0] is None or (isinstance(raw[0], float) and math.isnan(raw[0]))
                or str(raw[0]).strip() == ""):
            continue  # an empty line
        site = site_cells[r]
        site = "" if site is None or (isinstance(site, float) and math.isnan(site)) \
            else str(site).strip()
        if isinstance(site_cells[r], float) and float(site_cells[r]).is_integer():
            site = str(int(site_cells[r]))
        if site == "":
            problems.append(Problem(label, row, "site_id", "site_id is empty"))
        month = _number(month_cells[r])
        if month is None or month == "bad" or not float(month).is_integer() \
                or not 1 <= month <= 12:
            problems.append(Problem(label, row, "month",
                                    f"must be a whole number 1..12; got "
                                    f"{month_cells[r]!r}"))
            month = None
        else:
            month = int(month)
        parsed = {}
        for name, (low, high), unit, required in (
                ("ghi_kwh_m2_day", _MONTHLY_GHI_RANGE, "kWh/m²/day", True),
                ("temp_mean_c", _TEMPERATURE_RANGE_C, "degC", False),
                ("temp_min_c", _TEMPERATURE_RANGE_C, "degC", False)):
            x = _number(numbers[name][r])
            if x is None:
                if required:
                    problems.append(Problem(label, row, name,
                                            f"is empty; give {unit}"))
                parsed[name] = math.nan
            elif x == "bad":
                problems.append(Problem(label, row, name,
                                        f"must be a number ({unit}); got "
                                        f"{numbers[name][r]!r}"))
                parsed[name] = math.nan
            elif not low <= x <= high:
                problems.append(Problem(label, row, name,
                                        f"must be between {low:g} and "
                                        f"{high:g} {unit}; got {x:g}"))
                parsed[name] = math.nan
            else:
                parsed[name] = x
        if (math.isfinite(parsed["temp_min_c"]) and math.isfinite(parsed["temp_mean_c"])
                and parsed["temp_min_c"] > parsed["temp_mean_c"]):
            problems.append(Problem(label, row, "temp_min_c",
                                    f"minimum {parsed['temp_min_c']:g} degC is "
                                    f"above the mean {parsed['temp_mean_c']:g} "
                                    f"degC"))
        if site == "" or month is None:
            continue
        rows_of.setdefault(site, {}).setdefault(month, []).append(row)
        table = values.setdefault(site, {n: np.full(12, np.nan) for n in numbers})
        given = {n: np.zeros(12, bool) for n in numbers}
        table.setdefault("_given", given)
        for name in numbers:
            table[name][month - 1] = parsed[name]
            if _number(numbers[name][r]) is not None:
                table["_given"][name][month - 1] = True

    for site, months in rows_of.items():
        for month, rows in months.items():
            if len(rows) > 1:
                listed = ", ".join(str(x) for x in rows)
                problems.append(Problem(label, rows[1], "month",
                                        f"site {site}: {_MONTH_NAMES[month - 1]} "
                                        f"is given on rows {listed}; give each "
                                        f"month once"))
        absent = [_MONTH_NAMES[m - 1] for m in range(1, 13) if m not in months]
        if absent:
            problems.append(Problem(label, None, "month",
                                    f"site {site}: months missing: "
                                    f"{', '.join(absent)}; give all twelve"))
        given = values[site]["_given"]
        for name in ("temp_mean_c", "temp_min_c"):
            count = int(given[name].sum())
            if 0 < count < 12 and not absent:
                lacking = [_MONTH_NAMES[m] for m in range(12) if not given[name][m]]
                problems.append(Problem(label, None, name,
                                        f"site {site}: given for some months "
                                        f"but not {', '.join(lacking)}; give "
                                        f"all twelve or none"))
    if not rows_of and not problems:
        problems.append(Problem(label, None, None,
                                "the table has no rows: expected twelve rows "
                                "(months) per site"))
    if problems:
        raise InputError(sorted(problems, key=lambda p: -1 if p.row is None
                                else p.row))
    name = os.path.basename(str(path))
    return {
        site: MonthlyClimate(
            ghi_kwh_m2_day=table["ghi_kwh_m2_day"],
            temp_mean_c=table["temp_mean_c"],
            temp_min_c=table["temp_min_c"],
            label=f"monthly table {name}, site {site}")
        for site, table in values.items()
    }


# --------------------------------------------------------------------------
# Site table -> weather sources
# --------------------------------------------------------------------------


def read_site_weather_sources(sites, base_dir=None, *, label="site table"):
    """Read every site's own weather file named in its ``weather_file`` column.

    Parameters
    ----------
    sites : pandas.DataFrame
        Validated site table (:func:`fleet.sites.validate_sites`) with
        ``site_id`` and ``weather_file`` columns.
    base_dir : str or path-like, optional
        Folder that relative ``weather_file`` paths start from (normally the
        site table's folder). Default: the current folder.
    label : str, default "site table"
        Name of the site table in problem messages.

    Returns
    -------
    dict of str to MeasuredYear or MonthlyClimate
        For each site with a ``weather_file``: the measured year (EPW, TMY3,
        TMY2) or its monthly values (monthly table, looked up by
        ``site_id``). Sites without one are absent (they use the embedded
        grid). Each file is read once however many sites name it.

    Raises
    ------
    fleet.errors.InputError
        With every problem: for each site row whose file cannot be used, a
        problem on its ``weather_file`` cell, and the problems found in each
        file once.
    """
    base = Path(base_dir) if base_dir is not None else Path(".")
    problems = []
    read = {}  # resolved path -> result or InputError
    out = {}
    for r, (site_id, name) in enumerate(zip(sites["site_id"], sites["weather_file"])):
        name = "" if name is None or (isinstance(name, float) and math.isnan(name)) \
            else str(name).strip()
        if not name:
            continue
        row = r + 2
        path = Path(name)
        if not path.is_absolute():
            path = base / path
        key = str(path.resolve()) if path.exists() else str(path)
        if key not in read:
            kind = weather_file_kind(path) if path.exists() else None
            try:
                if not path.exists():
                    raise InputError([Problem(name, None, None, "file not found")])
                if kind in HOURLY_KINDS:
                    read[key] = read_weather_file(path, label=name)
                elif kind == "monthly":
                    read[key] = read_monthly_table(path, label=name)
                else:
                    raise InputError([Problem(
                        name, None, None,
                        "unknown kind of weather file: use .epw, .csv (TMY3 or "
                        "a monthly table), .tm2 or .xlsx (monthly table)")])
            except InputError as err:
                read[key] = err
                problems.extend(err.problems)
        result = read[key]
        if isinstance(result, InputError):
            problems.append(Problem(label, row, "weather_file",
                                    f"site {site_id}: '{name}' cannot be used "
                                    f"(see its problems)"))
        elif isinstance(result, dict):
            if str(site_id) in result:
                out[str(site_id)] = result[str(site_id)]
            else:
                problems.append(Problem(label, row, "weather_file",
                                        f"site {site_id} is not in the monthly "
                                        f"table '{name}'"))
        else:
            out[str(site_id)] = result
    if problems:
        raise InputError(problems)
    return out
