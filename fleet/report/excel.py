"""Excel workbooks for procurement and leadership.

Two workbooks are written here, both with xlsxwriter:

* the **bill of materials** (:func:`write_bill_of_materials`), in which
  procurement edits unit prices and the spares fraction; every total is a
  live formula that also stores its computed value, so a reader that does
  not recalculate (pandas, openpyxl with ``data_only=True``, a file viewer)
  still sees numbers;
* the **deployment summary** (:func:`write_deployment_summary`), plain
  tables of numbers the caller computed.

Conventions in both:

* every numeric header carries its unit in parentheses;
* text from a user is always written as a string cell and never becomes a
  formula; a text starting with ``=``, ``+``, ``-``, ``@`` (or tab, carriage
  return or a single quote) is written with a leading single quote ``'``
  (see :func:`fleet.report._common.safe_text`; :func:`read_bill_of_materials`
  takes it off again);
* missing or infinite numbers are written as blank cells.

Each writer writes to the path it is given and nothing else.
"""

from __future__ import annotations

import math
from datetime import date, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import xlsxwriter
from xlsxwriter.utility import xl_col_to_name, xl_rowcol_to_cell

from ._common import (
    all_cautions,
    decimals_for,
    excel_number_format,
    flatten_table,
    is_missing,
    is_number,
    normalise_assumptions,
    normalise_lines,
    numeric_columns,
    restore_text,
    safe_text,
)

__all__ = [
    "write_bill_of_materials",
    "write_deployment_summary",
    "read_bill_of_materials",
    "BY_KIT_HEADER_ROW",
    "BY_KIT_COLUMNS",
    "BY_COMPONENT_COLUMNS",
    "BY_DEPOT_COLUMNS",
    "SPARES_FRACTION_CELL",
    "DEPLOYMENT_SHEETS",
]

BOM_LINE_COLUMNS = (
    "scheme", "kit_id", "kit_label", "component_kind", "component_id",
    "description", "unit", "quantity_per_kit", "unit_price_usd",
)
KIT_COUNT_COLUMNS = ("scheme", "kit_id", "depot", "kits")

#: Header texts of the ``by_kit`` sheet, in column order.
BY_KIT_COLUMNS = (
    "scheme",
    "kit_id",
    "kit_label",
    "component_kind",
    "component_id",
    "description",
    "unit",
    "quantity per kit (unit as listed)",
    "kits (count)",
    "spares (unit as listed)",
    "total quantity (unit as listed)",
    "unit price (USD)",
    "extended price (USD)",
    "line",
)
(_SCHEME, _KIT_ID, _KIT_LABEL, _KIND, _COMPONENT, _DESCRIPTION, _UNIT, _QTY,
 _KITS, _SPARES, _TOTAL, _PRICE, _EXTENDED, _LINE) = range(len(BY_KIT_COLUMNS))

#: Zero-based row of the header on ``by_kit`` (the rows above hold the title
#: and the spares-fraction input): ``pandas.read_excel(..., header=3)``.
BY_KIT_HEADER_ROW = 3
_SPARES_ROW, _SPARES_COL = 1, _QTY
#: The spares-fraction input cell on ``by_kit`` (also the defined name
#: ``spares_fraction``).
SPARES_FRACTION_CELL = xl_rowcol_to_cell(_SPARES_ROW, _SPARES_COL, True, True)

#: Values of the ``line`` column on ``by_kit``.
LINE_ITEM, LINE_SUBTOTAL, LINE_TOTAL = "item", "kit subtotal", "grand total"

BY_COMPONENT_COLUMNS = (
    "component_kind",
    "component_id",
    "description",
    "unit",
    "used in kit types (count)",
    "total quantity incl. spares (unit as listed)",
    "extended price (USD)",
    "line",
)
BY_DEPOT_COLUMNS = (
    "depot",
    "scheme",
    "kit_id",
    "kit_label",
    "kits at depot (count)",
    "component_kind",
    "component_id",
    "description",
    "unit",
    "quantity per kit (unit as listed)",
    "quantity at depot excl. spares (unit as listed)",
)

#: Sheets of the deployment summary that come from ``tables``, in order.
DEPLOYMENT_SHEETS = ("program", "by_district", "by_depot", "sites", "kit_types", "comparisons")

_WORKBOOK_OPTIONS = {
    # Belt and braces: we never call write(), but if anyone does, text stays text.
    "strings_to_formulas": False,
    "strings_to_urls": False,
    "strings_to_numbers": False,
    "nan_inf_to_errors": False,
}

_MIN_WIDTH, _MAX_WIDTH, _HEADER_WRAP_WIDTH = 8, 60, 22


class _Formats:
    """Cached xlsxwriter formats built from a few switches."""

    def __init__(self, workbook: xlsxwriter.Workbook):
        self.workbook = workbook
        self._cache: dict[tuple, object] = {}

    def get(self, num_format: str | None = None, *, bold=False, input_cell=False,
            header=False, wrap=False, title=False, italic=False, date_format=False):
        key = (num_format, bold, input_cell, header, wrap, title, italic, date_format)
        if key not in self._cache:
            props: dict = {"valign": "top"}
            if num_format is not None:
                props["num_format"] = num_format
            if date_format:
                props["num_format"] = "yyyy-mm-dd hh:mm"
            if bold:
                props["bold"] = True
            if italic:
                props["italic"] = True
            if wrap:
                props["text_wrap"] = True
            if title:
                props.update({"bold": True, "font_size": 13})
            if header:
                props.update({"bold": True, "text_wrap": True, "bg_color": "#D9D9D9",
                              "bottom": 1, "valign": "bottom"})
            if input_cell:
                # Inputs: pale yellow fill, blue text, thin border, unlocked.
                props.update({"bg_color": "#FFF2CC", "font_color": "#1F4E9E",
                              "border": 1, "border_color": "#BF9000", "locked": False})
            self._cache[key] = self.workbook.add_format(props)
        return self._cache[key]


def _display_length(value, decimals: int = 0) -> int:
    if is_missing(value):
        return 0
    if is_number(value):
        return len(f"{float(value):,.{decimals}f}")
    if isinstance(value, (pd.Timestamp, datetime, date)):
        return 16
    return max((len(part) for part in str(value).splitlines()), default=0)


def _column_width(header: str, values, decimals: int = 0) -> float:
    sample = list(values)[:1000]
    content = max((_display_length(v, decimals) for v in sample), default=0)
    head = min(len(header), _HEADER_WRAP_WIDTH)
    head = max(head, max((len(word) for word in header.split()), default=0))
    return float(min(max(content, head, _MIN_WIDTH) + 2, _MAX_WIDTH))


def _write_value(ws, row: int, col: int, value, formats: _Formats, *,
                 num_format: str | None = None, bold=False, input_cell=False, wrap=False):
    """Write one value with the right xlsxwriter call.

    Text goes through :func:`safe_text` and ``write_string``; missing and
    infinite numbers become blank cells.
    """
    if isinstance(value, np.generic):
        value = value.item()
    if is_missing(value):
        ws.write_blank(row, col, None, formats.get(num_format, bold=bold, input_cell=input_cell))
        return
    if isinstance(value, bool):
        ws.write_boolean(row, col, value, formats.get(bold=bold, input_cell=input_cell))
        return
    if is_number(value):
        ws.write_number(row, col, float(value),
                        formats.get(num_format, bold=bold, input_cell=input_cell))
        return
    if isinstance(value, (pd.Timestamp, datetime, date)):
        stamp = pd.Timestamp(value)
        if stamp.tzinfo is not None:
            stamp = stamp.tz_convert("UTC").tz_localize(None)
        ws.write_datetime(row, col, stamp.to_pydatetime(),
                          formats.get(bold=bold, date_format=True, input_cell=input_cell))
        return
    ws.write_string(row, col, safe_text(value),
                    formats.get(bold=bold, input_cell=input_cell, wrap=wrap))


def _write_frame(ws, table: pd.DataFrame, formats: _Formats, *, start_row: int = 0,
                 freeze_columns: int = 0, autofilter: bool = True,
                 wrap_columns: dict[str, float] | None = None) -> None:
    """Write a table with a header row, per-column number formats and widths.

    ``wrap_columns`` maps text columns to a fixed width at which their text
    wraps (long notes).
    """
    wrap_columns = wrap_columns or {}
    table = flatten_table(table)
    if table.shape[1] == 0:
        return
    numeric = set(numeric_columns(table))
    header_fmt = formats.get(header=True)
    for col, name in enumerate(table.columns):
        ws.write_string(start_row, col, safe_text(name), header_fmt)
    for col, name in enumerate(table.columns):
        values = table[name].tolist()
        if name in numeric:
            decimals = decimals_for(values, name)
            fmt = excel_number_format(decimals)
            ws.set_column(col, col, _column_width(name, values, decimals))
            for i, value in enumerate(values):
                _write_value(ws, start_row + 1 + i, col, value, formats, num_format=fmt)
        else:
            # Mixed columns (e.g. a metric/value table): a format per cell.
            present = [v for v in values if is_number(v)]
            width_decimals = decimals_for(present, name) if present else 0
            wrap = name in wrap_columns
            width = wrap_columns[name] if wrap else _column_width(name, values, width_decimals)
            ws.set_column(col, col, width)
            for i, value in enumerate(values):
                num_format = None
                if is_number(value):
                    num_format = excel_number_format(decimals_for([value], name))
                _write_value(ws, start_row + 1 + i, col, value, formats,
                             num_format=num_format, wrap=wrap)
    ws.set_row(start_row, 30 if any(len(str(c)) > _HEADER_WRAP_WIDTH for c in table.columns) else None)
    ws.freeze_panes(start_row + 1, freeze_columns)
    if autofilter and len(table):
        ws.autofilter(start_row, 0, start_row + len(table), table.shape[1] - 1)
    _print_setup(ws, start_row)


def _print_setup(ws, header_row: int) -> None:
    ws.set_landscape()
    ws.set_paper(9)  # A4
    ws.fit_to_pages(1, 0)
    ws.repeat_rows(header_row)
    ws.set_margins(left=0.5, right=0.5, top=0.7, bottom=0.7)
    ws.set_header("&L&A")
    ws.set_footer("&Lfleet&RPage &P of &N")


def _write_notes_sheets(workbook, formats: _Formats, *, warnings=None,
                        assumptions=None, cautions=None, include_warnings: bool) -> None:
    if include_warnings:
        ws = workbook.add_worksheet("warnings")
        lines = normalise_lines(warnings)
        _write_frame(ws, pd.DataFrame({"warning": pd.Series(lines, dtype=object)}), formats,
                     autofilter=False, wrap_columns={"warning": 110})
    ws = workbook.add_worksheet("assumptions")
    _write_frame(ws, normalise_assumptions(assumptions), formats, autofilter=False)
    ws = workbook.add_worksheet("cautions")
    _write_frame(ws, pd.DataFrame({"caution": pd.Series(all_cautions(cautions), dtype=object)}),
                 formats, autofilter=False, wrap_columns={"caution": 110})


def _require_columns(frame: pd.DataFrame, columns, what: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ValueError(f"{what} lacks column(s): {', '.join(missing)}")


def _roundup(x: float) -> float:
    """Excel ROUNDUP(x, 0) for x >= 0, ignoring floating-point dust
    (1 * 100 * 0.07 is 7, not 8)."""
    return float(math.ceil(round(x, 9)))


def _number_format_for(values) -> str:
    return excel_number_format(0 if decimals_for(values) == 0 else 2)


# --------------------------------------------------------------------------
# Bill of materials
# --------------------------------------------------------------------------

def write_bill_of_materials(path, bom_lines: pd.DataFrame, kit_counts: pd.DataFrame, *,
                            spares_fraction: float, assumptions=None, cautions=None,
                            kit_specs: pd.DataFrame | None = None) -> Path:
    """Write the program's bill of materials workbook.

    Parameters
    ----------
    path : str or os.PathLike
        File to write (``.xlsx``); replaced if it exists.
    bom_lines : pandas.DataFrame
        One row per kit and component line with columns ``scheme``,
        ``kit_id``, ``kit_label``, ``component_kind``, ``component_id``,
        ``description``, ``unit``, ``quantity_per_kit`` (in ``unit``) and
        ``unit_price_usd`` (USD per ``unit``).
    kit_counts : pandas.DataFrame
        Columns ``scheme``, ``kit_id``, ``depot``, ``kits`` (kits, or plant
        blocks, deployed at that depot; count).
    spares_fraction : float
        Spares ordered per line as a fraction of the deployed quantity
        (0.05 = 5 %), rounded up to a whole unit.
    assumptions : DataFrame, mapping or iterable, optional
        Written to the ``assumptions`` sheet (``key``, ``value``, ``unit``).
    cautions : iterable of str, optional
        Added after the standard cautions on the ``cautions`` sheet.
    kit_specs : pandas.DataFrame, optional
        Kit specification table (``property`` with its unit, then one column
        per kit; see :func:`fleet.outputs.kit_specifications`), written to the
        ``kit_specs`` sheet.

    Returns
    -------
    pathlib.Path
        The path written.

    Notes
    -----
    Sheets: ``by_kit`` (editable: unit prices and the spares fraction are
    unlocked input cells, everything else is locked; protection has no
    password), ``by_component``, ``by_depot``, ``kit_specs`` (when given),
    ``assumptions``, ``cautions``.
    On ``by_kit`` the header is on row ``BY_KIT_HEADER_ROW`` (zero-based) and
    the spares fraction in ``SPARES_FRACTION_CELL``::

        spares          = ROUNDUP(quantity per kit * kits * spares fraction, 0)
        total quantity  = quantity per kit * kits + spares
        extended price  = total quantity * unit price
        kit subtotal    = SUM(extended prices of the kit's lines)
        grand total     = SUMIF(line = "item", extended price)

    ``by_component`` sums ``by_kit`` per component id with exact,
    case-sensitive matching (``SUMPRODUCT(EXACT(...) * ...)``) so that ids
    containing ``*``, ``?`` or a leading ``<`` are not read as patterns.
    """
    bom_lines = flatten_table(bom_lines)
    kit_counts = flatten_table(kit_counts)
    _require_columns(bom_lines, BOM_LINE_COLUMNS, "bom_lines")
    _require_columns(kit_counts, KIT_COUNT_COLUMNS, "kit_counts")
    spares_fraction = float(spares_fraction)
    if not math.isfinite(spares_fraction) or spares_fraction < 0:
        raise ValueError(f"spares_fraction must be a number >= 0, got {spares_fraction!r}")

    lines = bom_lines.copy()
    for col in ("scheme", "kit_id", "kit_label", "component_kind", "component_id",
                "description", "unit"):
        lines[col] = [("" if is_missing(v) else str(v)) for v in lines[col]]
    for col in ("quantity_per_kit", "unit_price_usd"):
        lines[col] = pd.to_numeric(lines[col], errors="raise").astype(float)

    counts = kit_counts.copy()
    for col in ("scheme", "kit_id", "depot"):
        counts[col] = [("" if is_missing(v) else str(v)) for v in counts[col]]
    counts["kits"] = pd.to_numeric(counts["kits"], errors="raise").fillna(0).astype(float)

    kit_keys = list(dict.fromkeys(zip(lines["scheme"], lines["kit_id"])))
    counted = set(zip(counts["scheme"], counts["kit_id"]))
    unknown = sorted(counted - set(kit_keys))
    if unknown:
        raise ValueError(
            "kit_counts names kits that have no lines in bom_lines: "
            + ", ".join(f"{s}/{k}" for s, k in unknown))
    kits_total = counts.groupby(["scheme", "kit_id"], sort=False)["kits"].sum().to_dict()

    path = Path(path)
    workbook = xlsxwriter.Workbook(str(path), _WORKBOOK_OPTIONS)
    workbook.set_properties({
        "title": "Bill of materials",
        "comments": "Written by fleet. Unit prices and the spares fraction are inputs; "
                    "totals are formulas with stored values.",
    })
    formats = _Formats(workbook)
    try:
        item_rows = _write_by_kit(workbook, formats, lines, kit_keys, kits_total, spares_fraction)
        _write_by_component(workbook, formats, lines, item_rows)
        _write_by_depot(workbook, formats, lines, counts)
        if kit_specs is not None and len(kit_specs):
            ws = workbook.add_worksheet("kit_specs")
            _write_frame(ws, kit_specs, formats, freeze_columns=1, autofilter=False)
        table = normalise_assumptions(assumptions)
        if not (table["key"].astype(str) == "spares fraction").any():
            table = pd.concat([table, pd.DataFrame(
                [{"key": "spares fraction", "value": spares_fraction,
                  "unit": "fraction of deployed quantity"}])], ignore_index=True)
        _write_notes_sheets(workbook, formats, assumptions=table, cautions=cautions,
                            include_warnings=False)
    finally:
        workbook.close()
    return path


def _write_by_kit(workbook, formats: _Formats, lines: pd.DataFrame, kit_keys, kits_total,
                  spares_fraction: float) -> list[tuple[int, dict]]:
    """Write ``by_kit``; return (sheet row, computed values) of every item line."""
    ws = workbook.add_worksheet("by_kit")
    header_row = BY_KIT_HEADER_ROW
    first_data = header_row + 1
    n_cols = len(BY_KIT_COLUMNS)

    ws.write_string(0, 0, "Bill of materials by kit", formats.get(title=True))
    ws.merge_range(_SPARES_ROW, 0, _SPARES_ROW, _SPARES_COL - 1,
                   "spares fraction (fraction of deployed quantity, 0.05 = 5 %)",
                   workbook.add_format({"bold": True, "align": "right"}))
    ws.write_number(_SPARES_ROW, _SPARES_COL, spares_fraction,
                    formats.get("0.0%", input_cell=True))
    ws.data_validation(_SPARES_ROW, _SPARES_COL, _SPARES_ROW, _SPARES_COL, {
        "validate": "decimal", "criteria": ">=", "value": 0,
        "input_title": "Spares fraction",
        "input_message": "Fraction of the deployed quantity ordered as spares (0.05 = 5 %).",
        "error_title": "Not a valid fraction",
        "error_message": "Enter a number of 0 or more.",
    })
    workbook.define_name("spares_fraction", f"=by_kit!{SPARES_FRACTION_CELL}")
    ws.merge_range(2, 0, 2, n_cols - 1,
                   "Shaded cells are inputs (unit prices, spares fraction); every other "
                   "cell is locked. Totals are formulas and update when inputs change.",
                   formats.get(italic=True))

    for col, name in enumerate(BY_KIT_COLUMNS):
        ws.write_string(header_row, col, name, formats.get(header=True))
    ws.set_row(header_row, 45)

    qty_fmt = _number_format_for(lines["quantity_per_kit"])
    price_fmt = excel_number_format(2)
    count_fmt = excel_number_format(0)

    spares_ref = SPARES_FRACTION_CELL
    row = first_data
    item_rows: list[tuple[int, dict]] = []
    subtotal_cells: list[str] = []
    all_totals: list[float] = []
    bold = formats.get(bold=True)

    for scheme, kit_id in kit_keys:
        kit = lines[(lines["scheme"] == scheme) & (lines["kit_id"] == kit_id)]
        kits = float(kits_total.get((scheme, kit_id), 0.0))
        label = kit["kit_label"].iloc[0]
        first = row
        kit_extended = 0.0
        for rec in kit.itertuples(index=False):
            r = row + 1  # Excel row number
            qty = float(rec.quantity_per_kit)
            price = float(rec.unit_price_usd)
            spares = _roundup(qty * kits * spares_fraction)
            total = qty * kits + spares
            extended = total * price
            kit_extended += extended
            all_totals.append(total)
            for col, value in ((_SCHEME, rec.scheme), (_KIT_ID, rec.kit_id),
                               (_KIT_LABEL, rec.kit_label), (_KIND, rec.component_kind),
                               (_COMPONENT, rec.component_id),
                               (_DESCRIPTION, rec.description), (_UNIT, rec.unit)):
                ws.write_string(row, col, safe_text(value), formats.get())
            _write_value(ws, row, _QTY, qty, formats, num_format=qty_fmt)
            _write_value(ws, row, _KITS, kits, formats, num_format=count_fmt)
            q, k, s, t, p = (f"{xl_col_to_name(c)}{r}" for c in (_QTY, _KITS, _SPARES, _TOTAL, _PRICE))
            ws.write_formula(row, _SPARES, f"=ROUNDUP({q}*{k}*{spares_ref},0)",
                             formats.get(qty_fmt), spares)
            ws.write_formula(row, _TOTAL, f"={q}*{k}+{s}", formats.get(qty_fmt), total)
            if math.isfinite(price):
                ws.write_number(row, _PRICE, price, formats.get(price_fmt, input_cell=True))
            else:
                ws.write_blank(row, _PRICE, None, formats.get(price_fmt, input_cell=True))
                extended = 0.0
            ws.write_formula(row, _EXTENDED, f"={t}*{p}", formats.get(price_fmt), extended)
            ws.write_string(row, _LINE, LINE_ITEM, formats.get())
            item_rows.append((row, {
                "component_id": rec.component_id, "component_kind": rec.component_kind,
                "description": rec.description, "unit": rec.unit,
                "kit": (scheme, kit_id), "total": total, "extended": extended,
            }))
            row += 1
        last = row - 1
        ws.data_validation(first, _PRICE, last, _PRICE, {
            "validate": "decimal", "criteria": ">=", "value": 0,
            "error_title": "Not a valid price",
            "error_message": "Enter a unit price in USD of 0 or more.",
        })
        ws.write_string(row, _SCHEME, safe_text(scheme), bold)
        ws.write_string(row, _KIT_ID, safe_text(kit_id), bold)
        ws.write_string(row, _KIT_LABEL, safe_text(label), bold)
        ws.write_string(row, _DESCRIPTION, "subtotal for this kit type", bold)
        ext_col = xl_col_to_name(_EXTENDED)
        ws.write_formula(row, _EXTENDED, f"=SUM({ext_col}{first + 1}:{ext_col}{last + 1})",
                         formats.get(price_fmt, bold=True), kit_extended)
        ws.write_string(row, _LINE, LINE_SUBTOTAL, bold)
        subtotal_cells.append(f"{ext_col}{row + 1}")
        row += 1

    grand = sum(values["extended"] for _, values in item_rows)
    ext_col, line_col = xl_col_to_name(_EXTENDED), xl_col_to_name(_LINE)
    ws.write_string(row, _DESCRIPTION, "grand total, all kit types", bold)
    if item_rows:
        ws.write_formula(
            row, _EXTENDED,
            f'=SUMIF({line_col}{first_data + 1}:{line_col}{row},"{LINE_ITEM}",'
            f'{ext_col}{first_data + 1}:{ext_col}{row})',
            formats.get(price_fmt, bold=True), grand)
    else:
        ws.write_number(row, _EXTENDED, 0.0, formats.get(price_fmt, bold=True))
    ws.write_string(row, _LINE, LINE_TOTAL, bold)

    # Column widths from the content.
    text_values = {c: [] for c in range(n_cols)}
    for col, key in ((_SCHEME, "scheme"), (_KIT_ID, "kit_id"), (_KIT_LABEL, "kit_label"),
                     (_KIND, "component_kind"), (_COMPONENT, "component_id"),
                     (_DESCRIPTION, "description"), (_UNIT, "unit")):
        text_values[col] = lines[key].tolist()
    number_values = {
        _QTY: lines["quantity_per_kit"].tolist(), _KITS: list(kits_total.values()) or [0],
        _SPARES: all_totals, _TOTAL: all_totals, _PRICE: lines["unit_price_usd"].tolist(),
        _EXTENDED: [grand], _LINE: [LINE_SUBTOTAL],
    }
    for col, name in enumerate(BY_KIT_COLUMNS):
        values = text_values[col] or number_values.get(col, [])
        width = _column_width(name, values, 2 if col in (_PRICE, _EXTENDED) else 0)
        if col == _DESCRIPTION:
            width = max(width, 28.0)
        ws.set_column(col, col, width)

    ws.freeze_panes(header_row + 1, _KIT_LABEL)
    _print_setup(ws, header_row)
    ws.protect("", {"format_columns": True, "format_rows": True,
                    "select_locked_cells": True, "select_unlocked_cells": True})
    return item_rows


def _write_by_component(workbook, formats: _Formats, lines: pd.DataFrame,
                        item_rows: list[tuple[int, dict]]) -> None:
    ws = workbook.add_worksheet("by_component")
    for col, name in enumerate(BY_COMPONENT_COLUMNS):
        ws.write_string(0, col, name, formats.get(header=True))
    ws.set_row(0, 45)

    groups: dict[str, dict] = {}
    for _, values in item_rows:
        group = groups.setdefault(values["component_id"], {
            "component_kind": values["component_kind"], "description": values["description"],
            "unit": values["unit"], "kits": set(), "total": 0.0, "extended": 0.0,
        })
        group["kits"].add(values["kit"])
        group["total"] += values["total"]
        group["extended"] += values["extended"]
    order = sorted(groups, key=lambda cid: (groups[cid]["component_kind"], cid))

    if item_rows:
        first = item_rows[0][0] + 1
        last = max(r for r, _ in item_rows) + 1
    else:
        first = last = BY_KIT_HEADER_ROW + 2

    def ref(col: int) -> str:
        name = xl_col_to_name(col)
        return f"by_kit!${name}${first}:${name}${last}"

    ids_ref, total_ref, ext_ref = ref(_COMPONENT), ref(_TOTAL), ref(_EXTENDED)
    qty_fmt = _number_format_for([g["total"] for g in groups.values()])
    price_fmt = excel_number_format(2)
    row = 1
    for cid in order:
        group = groups[cid]
        id_cell = xl_rowcol_to_cell(row, 1)
        ws.write_string(row, 0, safe_text(group["component_kind"]), formats.get())
        ws.write_string(row, 1, safe_text(cid), formats.get())
        ws.write_string(row, 2, safe_text(group["description"]), formats.get())
        ws.write_string(row, 3, safe_text(group["unit"]), formats.get())
        ws.write_number(row, 4, len(group["kits"]), formats.get(excel_number_format(0)))
        ws.write_formula(row, 5, f"=SUMPRODUCT(EXACT({ids_ref},{id_cell})*{total_ref})",
                         formats.get(qty_fmt), group["total"])
        ws.write_formula(row, 6, f"=SUMPRODUCT(EXACT({ids_ref},{id_cell})*{ext_ref})",
                         formats.get(price_fmt), group["extended"])
        ws.write_string(row, 7, LINE_ITEM, formats.get())
        row += 1
    bold = formats.get(bold=True)
    ws.write_string(row, 2, "grand total, all components", bold)
    grand = sum(g["extended"] for g in groups.values())
    if groups:
        ws.write_formula(row, 6, f"=SUM(G2:G{row})", formats.get(price_fmt, bold=True), grand)
    else:
        ws.write_number(row, 6, 0.0, formats.get(price_fmt, bold=True))
    ws.write_string(row, 7, LINE_TOTAL, bold)

    widths_from = {
        0: [g["component_kind"] for g in groups.values()], 1: list(groups),
        2: [g["description"] for g in groups.values()], 3: [g["unit"] for g in groups.values()],
        4: [1], 5: [g["total"] for g in groups.values()], 6: [grand], 7: [LINE_TOTAL],
    }
    for col, name in enumerate(BY_COMPONENT_COLUMNS):
        ws.set_column(col, col, _column_width(name, widths_from[col], 2 if col == 6 else 0))
    ws.freeze_panes(1, 2)
    _print_setup(ws, 0)
    ws.protect("", {"format_columns": True, "format_rows": True})


def _write_by_depot(workbook, formats: _Formats, lines: pd.DataFrame,
                    counts: pd.DataFrame) -> None:
    per_depot = (counts.groupby(["depot", "scheme", "kit_id"], sort=False)["kits"].sum()
                 .reset_index())
    per_depot = per_depot.sort_values(["depot", "scheme", "kit_id"], kind="stable")
    merged = per_depot.merge(lines, on=["scheme", "kit_id"], how="inner", sort=False)
    table = pd.DataFrame({
        BY_DEPOT_COLUMNS[0]: merged["depot"],
        BY_DEPOT_COLUMNS[1]: merged["scheme"],
        BY_DEPOT_COLUMNS[2]: merged["kit_id"],
        BY_DEPOT_COLUMNS[3]: merged["kit_label"],
        BY_DEPOT_COLUMNS[4]: merged["kits"],
        BY_DEPOT_COLUMNS[5]: merged["component_kind"],
        BY_DEPOT_COLUMNS[6]: merged["component_id"],
        BY_DEPOT_COLUMNS[7]: merged["description"],
        BY_DEPOT_COLUMNS[8]: merged["unit"],
        BY_DEPOT_COLUMNS[9]: merged["quantity_per_kit"],
        BY_DEPOT_COLUMNS[10]: merged["quantity_per_kit"] * merged["kits"],
    }, columns=list(BY_DEPOT_COLUMNS))
    for col in BY_DEPOT_COLUMNS[:4] + BY_DEPOT_COLUMNS[5:9]:
        table[col] = table[col].astype(object)
    ws = workbook.add_worksheet("by_depot")
    _write_frame(ws, table, formats, freeze_columns=1)


def read_bill_of_materials(path) -> tuple[pd.DataFrame, float]:
    """Read the item lines and the spares fraction back from a workbook
    written by :func:`write_bill_of_materials` (for instance after
    procurement filled in prices).

    Returns
    -------
    (lines, spares_fraction)
        ``lines`` has the ``bom_lines`` columns plus ``kits``, ``spares``,
        ``total_quantity`` and ``extended_price_usd`` (the values stored in
        the file, which are current if the file was saved by a program that
        recalculates); user text is restored to what was written.
    """
    import openpyxl

    book = openpyxl.load_workbook(path, data_only=True, read_only=True)
    try:
        sheet = book["by_kit"]
        spares = sheet.cell(_SPARES_ROW + 1, _SPARES_COL + 1).value
    finally:
        book.close()
    raw = pd.read_excel(path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW, dtype=object)
    raw = raw[raw["line"] == LINE_ITEM]
    lines = pd.DataFrame({
        "scheme": raw["scheme"], "kit_id": raw["kit_id"], "kit_label": raw["kit_label"],
        "component_kind": raw["component_kind"], "component_id": raw["component_id"],
        "description": raw["description"], "unit": raw["unit"],
        "quantity_per_kit": pd.to_numeric(raw[BY_KIT_COLUMNS[_QTY]]),
        "unit_price_usd": pd.to_numeric(raw[BY_KIT_COLUMNS[_PRICE]]),
        "kits": pd.to_numeric(raw[BY_KIT_COLUMNS[_KITS]]),
        "spares": pd.to_numeric(raw[BY_KIT_COLUMNS[_SPARES]]),
        "total_quantity": pd.to_numeric(raw[BY_KIT_COLUMNS[_TOTAL]]),
        "extended_price_usd": pd.to_numeric(raw[BY_KIT_COLUMNS[_EXTENDED]]),
    }).reset_index(drop=True)
    for col in ("scheme", "kit_id", "kit_label", "component_kind", "component_id",
                "description", "unit"):
        lines[col] = [("" if is_missing(v) else restore_text(str(v))) for v in lines[col]]
    return lines, float(spares) if spares is not None else float("nan")


# --------------------------------------------------------------------------
# Deployment summary
# --------------------------------------------------------------------------

def write_deployment_summary(path, tables: dict, *, warnings=None, assumptions=None,
                             cautions=None) -> Path:
    """Write the deployment summary workbook.

    Parameters
    ----------
    path : str or os.PathLike
        File to write (``.xlsx``); replaced if it exists.
    tables : dict of str to pandas.DataFrame
        ``program`` (columns ``metric``, ``value``, ``unit``),
        ``by_district``, ``by_depot``, ``sites``, ``kit_types``,
        ``comparisons``; any may be missing or empty.  Column names are
        written as given and should carry units, e.g. ``capex (USD)``.
        Further keys become further sheets after these.
    warnings : iterable of str, optional
    assumptions : DataFrame, mapping or iterable, optional
        ``key``, ``value``, ``unit``.
    cautions : iterable of str, optional
        Added after the standard cautions.

    Returns
    -------
    pathlib.Path
        The path written.

    Notes
    -----
    Sheets, in order: ``program``, ``by_district``, ``by_depot``, ``sites``,
    ``kit_types``, ``comparisons``, any extra tables, ``warnings``,
    ``assumptions``, ``cautions``.  Every sheet has its header in row 1, so
    ``pandas.read_excel(path, sheet_name=None)`` reads them all back.
    """
    tables = dict(tables or {})
    names = list(DEPLOYMENT_SHEETS) + [k for k in tables if k not in DEPLOYMENT_SHEETS]
    path = Path(path)
    workbook = xlsxwriter.Workbook(str(path), _WORKBOOK_OPTIONS)
    workbook.set_properties({"title": "Deployment summary", "comments": "Written by fleet."})
    formats = _Formats(workbook)
    used: set[str] = set()
    try:
        for name in names:
            sheet_name = _sheet_name(name, used)
            ws = workbook.add_worksheet(sheet_name)
            table = flatten_table(tables.get(name))
            freeze = 1 if name == "sites" and table.shape[1] > 1 else 0
            _write_frame(ws, table, formats, freeze_columns=freeze,
                         autofilter=name not in ("program",))
        _write_notes_sheets(workbook, formats, warnings=warnings, assumptions=assumptions,
                            cautions=cautions, include_warnings=True)
    finally:
        workbook.close()
    return path


_RESERVED_SHEETS = {"warnings", "assumptions", "cautions"}


def _sheet_name(name: str, used: set[str]) -> str:
    """A valid, unique worksheet name (at most 31 characters, none of []:*?/\\)."""
    clean = "".join("_" if ch in '[]:*?/\\' else ch for ch in str(name)).strip("'") or "table"
    clean = clean[:31]
    base, i = clean, 1
    while clean.lower() in used or clean.lower() in _RESERVED_SHEETS:
        i += 1
        suffix = f"_{i}"
        clean = base[:31 - len(suffix)] + suffix
    used.add(clean.lower())
    return clean
