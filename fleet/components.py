"""Component library: PV modules, batteries, charge controllers, inverters,
balance of system, installation costs and, optionally, cables and fuses.

A library is a folder of CSV files or one XLSX workbook with a sheet per kind,
named as in :data:`KINDS`. Every numeric field is checked; all problems are
reported together, naming file (or sheet), row and column.

The ``cables`` (price per metre by copper cross-section) and ``fuses`` (fuses
and DC breakers by rating) tables are optional (:data:`OPTIONAL_KINDS`): with
them, each kit's bill of materials prices the cables and fuses sized for it
(:func:`fleet.kits.wiring`); without them, the library's balance-of-system
lines are its only cable and fuse cost, and :attr:`ComponentLibrary.notes`
says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import pandas as pd

from .cables import SECTIONS_MM2
from .errors import InputError, Problem

_TEXT = "text"
_NUM = "number"

#: kind -> {column: (type, lower bound, upper bound)}; the first column is the id.
KINDS: dict[str, dict[str, tuple[str, float | None, float | None]]] = {
    "pv_modules": {
        "module_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "power_stc_w": (_NUM, 1, 1000), "voc_v": (_NUM, 1, 100), "vmp_v": (_NUM, 1, 100),
        "isc_a": (_NUM, 0.01, 30), "imp_a": (_NUM, 0.01, 30),
        "temp_coeff_voc_pct_per_k": (_NUM, -1, 0), "temp_coeff_pmax_pct_per_k": (_NUM, -1, 0),
        "temp_coeff_isc_pct_per_k": (_NUM, -0.2, 0.2), "cells_in_series": (_NUM, 1, 200),
        "mass_kg": (_NUM, 0, 100), "price_usd": (_NUM, 0, None),
    },
    "batteries": {
        "battery_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "chemistry": (_TEXT, None, None), "nominal_voltage_v": (_NUM, 1, 60),
        "capacity_ah": (_NUM, 1, 5000), "rate_hours": (_NUM, 1, 240), "usable_dod": (_NUM, 0.1, 1.0),
        "cycles_at_80pct_dod": (_NUM, 10, 100000), "cycles_at_50pct_dod": (_NUM, 10, 100000),
        "cycles_at_20pct_dod": (_NUM, 10, 100000), "calendar_life_years": (_NUM, 1, 40),
        "max_charge_c_rate": (_NUM, 0.01, 10), "max_discharge_c_rate": (_NUM, 0.01, 10),
        "charge_efficiency": (_NUM, 0.5, 1.0), "discharge_efficiency": (_NUM, 0.5, 1.0),
        "self_discharge_pct_per_month": (_NUM, 0, 30), "mass_kg": (_NUM, 0, 1000),
        "price_usd": (_NUM, 0, None),
    },
    "charge_controllers": {
        "controller_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "kind": (_TEXT, None, None), "rated_current_a": (_NUM, 1, 1000),
        "max_pv_voltage_v": (_NUM, 10, 1500), "battery_voltages_v": (_TEXT, None, None),
        "efficiency": (_NUM, 0.5, 1.0), "self_consumption_w": (_NUM, 0, 100),
        "load_output_a": (_NUM, 0, 1000), "blocks_reverse_current": (_TEXT, None, None),
        "price_usd": (_NUM, 0, None),
    },
    "inverters": {
        "inverter_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "rated_power_w": (_NUM, 10, 1e6), "surge_power_w": (_NUM, 10, 1e7),
        "battery_voltage_v": (_NUM, 12, 60), "efficiency": (_NUM, 0.5, 1.0),
        "no_load_w": (_NUM, 0, 1000), "mass_kg": (_NUM, 0, 1000), "price_usd": (_NUM, 0, None),
    },
    "balance_of_system": {
        "item_id": (_TEXT, None, None), "description": (_TEXT, None, None), "unit": (_TEXT, None, None),
        "scheme": (_TEXT, None, None), "basis": (_TEXT, None, None), "quantity": (_NUM, 0, None),
        "price_usd": (_NUM, 0, None),
    },
    "installation": {
        "scheme": (_TEXT, None, None), "item": (_TEXT, None, None), "basis": (_TEXT, None, None),
        "cost_usd": (_NUM, 0, None), "description": (_TEXT, None, None),
    },
    # single-core copper cable priced per metre of one conductor; a section must be an
    # IEC 60228 size that fleet.cables knows
    "cables": {
        "cable_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "section_mm2": (_NUM, 0.5, 1000), "price_usd_per_m": (_NUM, 0, None),
    },
    # a fuse with its holder, or a DC breaker; application: in a PV string, or at the battery
    "fuses": {
        "fuse_id": (_TEXT, None, None), "description": (_TEXT, None, None),
        "application": (_TEXT, None, None), "rating_a": (_NUM, 0.5, 5000),
        "max_voltage_v_dc": (_NUM, 1, 2000), "price_usd": (_NUM, 0, None),
    },
}

#: Kinds a library may leave out, and what is used instead.
OPTIONAL_KINDS = {
    "cables": "cables are not priced by cross-section: the balance-of-system lines are the only cable cost",
    "fuses": "fuses and breakers are not priced by rating: the balance-of-system lines are the only fuse cost",
}

#: Columns a table may leave out (or leave blank), with the value used instead and why.
#: An inverter's surge (a few seconds) rating at twice its continuous rating is common practice.
OPTIONAL_COLUMNS = {
    ("inverters", "surge_power_w"): (lambda df: 2.0 * df["rated_power_w"], "2 x rated_power_w (common practice)"),
}

_CHOICES = {
    ("batteries", "chemistry"): ("lead_acid", "lifepo4"),
    ("charge_controllers", "kind"): ("pwm", "series", "shunt", "mppt"),
    ("charge_controllers", "blocks_reverse_current"): ("yes", "no"),
    ("balance_of_system", "scheme"): ("shs", "minigrid", "all"),
    ("balance_of_system", "basis"): ("per_kit", "per_module", "per_block", "per_battery", "per_battery_block",
                                     "per_inverter", "per_plant"),
    ("installation", "scheme"): ("shs", "minigrid"),
    ("installation", "basis"): ("per_kit", "per_block", "per_battery_block", "per_inverter", "per_plant"),
    ("fuses", "application"): ("pv_string", "battery"),
}


@dataclass(frozen=True)
class ComponentLibrary:
    """The component tables, each indexed by its id column (installation: plain index).

    ``cables`` and ``fuses`` are None when the library has no such table; ``notes`` tells
    what was assumed in their place and where defaults filled optional columns.
    """

    pv_modules: pd.DataFrame
    batteries: pd.DataFrame
    charge_controllers: pd.DataFrame
    inverters: pd.DataFrame
    balance_of_system: pd.DataFrame
    installation: pd.DataFrame
    source: str
    cables: pd.DataFrame | None = None
    fuses: pd.DataFrame | None = None
    notes: tuple[str, ...] = ()

    def price_of(self, kind: str, component_id: str) -> float:
        return float(getattr(self, kind).loc[component_id, "price_usd"])


def default_library_path() -> Path:
    """Folder of the bundled demo component library (invented prices)."""
    return Path(str(resources.files("fleet").joinpath("data", "demo_components")))


def validate_table(df: pd.DataFrame, kind: str, label: str) -> tuple[pd.DataFrame, list[Problem]]:
    """Check one component table against :data:`KINDS`; return it cleaned and its problems."""
    spec = KINDS[kind]
    problems: list[Problem] = []
    df = df.copy()
    df.columns = [str(c).strip().lower() for c in df.columns]
    optional = {c: default for (k, c), (default, _) in OPTIONAL_COLUMNS.items() if k == kind}
    missing = [c for c in spec if c not in df.columns and c not in optional]
    for c in optional:
        if c not in df.columns:
            df[c] = pd.NA
    blanks = {c: df[c].isna() for c in optional}
    for c in missing:
        problems.append(Problem(label, None, c, "required column is missing"))
    if df.empty:
        problems.append(Problem(label, None, None, "no rows"))
    for col, (typ, lo, hi) in spec.items():
        if col in missing:
            continue
        if typ == _NUM:
            num = pd.to_numeric(df[col], errors="coerce")
            blank = blanks.get(col, pd.Series(False, index=df.index))
            for i in df.index[num.isna() & ~blank]:
                problems.append(Problem(label, int(i) + 2, col, f"expected a number, got {df.at[i, col]!r}"))
            bad = num.notna() & (((num < lo) if lo is not None else False) | ((num > hi) if hi is not None else False))
            for i in df.index[bad]:
                problems.append(Problem(label, int(i) + 2, col, f"{num[i]} is outside {lo}..{hi}"))
            df[col] = num.astype(float)
        else:
            df[col] = df[col].fillna("").astype(str).str.strip()
            choices = _CHOICES.get((kind, col))
            if choices:
                df[col] = df[col].str.lower()
                for i in df.index[~df[col].isin(choices)]:
                    problems.append(Problem(label, int(i) + 2, col, f"{df.at[i, col]!r} is not one of {', '.join(choices)}"))
    id_col = next(iter(spec))
    if kind != "installation" and id_col not in missing:
        dup = df[id_col].duplicated(keep=False)
        for i in df.index[dup]:
            problems.append(Problem(label, int(i) + 2, id_col, f"duplicate id {df.at[i, id_col]!r}"))
        for i in df.index[df[id_col] == ""]:
            problems.append(Problem(label, int(i) + 2, id_col, "empty id"))
    if kind == "charge_controllers" and "battery_voltages_v" not in missing:
        for i, text in df["battery_voltages_v"].items():
            try:
                volts = [int(v) for v in str(text).split(";") if v.strip()]
                assert volts and all(v in (12, 24, 48) for v in volts)
            except (ValueError, AssertionError):
                problems.append(Problem(label, int(i) + 2, "battery_voltages_v", f"expected e.g. '12;24', got {text!r}"))
    for col, default in optional.items():
        if not missing:  # the default may read other columns
            df[col] = df[col].where(~blanks[col], default(df))
    problems += _table_rules(df, kind, label, missing)
    if kind != "installation" and not problems:
        df = df.set_index(id_col, drop=False)
        df.index.name = None
    return df, problems


def _table_rules(df: pd.DataFrame, kind: str, label: str, missing: list[str]) -> list[Problem]:
    """Checks across columns, or against fleet's own tables."""
    problems: list[Problem] = []
    if kind == "cables" and "section_mm2" not in missing:
        for i in df.index[df["section_mm2"].notna() & ~df["section_mm2"].isin(SECTIONS_MM2)]:
            problems.append(Problem(label, int(i) + 2, "section_mm2",
                                    f"{df.at[i, 'section_mm2']:g} mm2 is not a standard cross-section "
                                    f"(IEC 60228: {', '.join(f'{v:g}' for v in SECTIONS_MM2)})"))
    if kind == "inverters" and not {"surge_power_w", "rated_power_w"} & set(missing):
        low = df["surge_power_w"] < df["rated_power_w"]
        for i in df.index[low.fillna(False).astype(bool)]:
            problems.append(Problem(label, int(i) + 2, "surge_power_w",
                                    f"{df.at[i, 'surge_power_w']:g} W is below the continuous rating "
                                    f"{df.at[i, 'rated_power_w']:g} W"))
    return problems


def _defaulted(raw: pd.DataFrame, kind: str) -> list[str]:
    """Notes on optional columns of a raw table that were missing or had blank cells."""
    notes = []
    cols = {str(c).strip().lower(): c for c in raw.columns}
    for (k, col), (_, what) in OPTIONAL_COLUMNS.items():
        if k != kind:
            continue
        if col not in cols:
            notes.append(f"no '{col}' column; taken as {what}")
        elif raw[cols[col]].isna().any():
            notes.append(f"'{col}' blank in {int(raw[cols[col]].isna().sum())} row(s); taken as {what}")
    return notes


def read_library(path: str | Path | None = None) -> ComponentLibrary:
    """Read and validate a component library (folder of CSVs or one XLSX).

    Parameters
    ----------
    path : str or Path, optional
        Folder holding ``<kind>.csv`` files, or an ``.xlsx`` with a sheet per
        kind. None reads the bundled demo library.
    """
    path = Path(path) if path is not None else default_library_path()
    label = str(path)
    problems: list[Problem] = []
    tables: dict[str, pd.DataFrame] = {}
    notes: list[str] = []
    if path.is_dir():
        for kind in KINDS:
            f = path / f"{kind}.csv"
            if not f.exists():
                if kind in OPTIONAL_KINDS:
                    notes.append(f"{f} not found: {OPTIONAL_KINDS[kind]}")
                else:
                    problems.append(Problem(str(f), None, None, "file not found (every component kind needs one)"))
                continue
            try:
                raw = pd.read_csv(f, dtype=str, keep_default_na=False).replace("", pd.NA)
            except (pd.errors.EmptyDataError, pd.errors.ParserError, UnicodeDecodeError) as exc:
                problems.append(Problem(str(f), None, None, f"cannot be read as CSV: {exc}"))
                continue
            tables[kind], p = validate_table(raw, kind, str(f))
            problems += p
            notes += [f"{f}: {n}" for n in _defaulted(raw, kind)]
    elif path.suffix.lower() == ".xlsx" and path.exists():
        try:
            sheets = pd.read_excel(path, sheet_name=None, dtype=str)
        except Exception as exc:  # openpyxl raises many kinds for a damaged file
            raise InputError([Problem(label, None, None, f"cannot be read as XLSX: {exc}")]) from None
        for kind in KINDS:
            if kind not in sheets:
                if kind in OPTIONAL_KINDS:
                    notes.append(f"{label}: no sheet '{kind}': {OPTIONAL_KINDS[kind]}")
                else:
                    problems.append(Problem(label, None, None, f"sheet '{kind}' is missing"))
                continue
            tables[kind], p = validate_table(sheets[kind], kind, f"{label} [{kind}]")
            problems += p
            notes += [f"{label} [{kind}]: {n}" for n in _defaulted(sheets[kind], kind)]
    else:
        raise InputError([Problem(label, None, None, "not a folder of CSV files or an .xlsx workbook")])
    if problems:
        raise InputError(problems)
    return ComponentLibrary(**tables, source=label, notes=tuple(notes))
