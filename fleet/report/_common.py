"""Helpers shared by the report writers: text safety, number formats, notes.

Nothing here computes physics or cost; it only decides how a value that the
caller already computed is shown.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from datetime import date, datetime

import numpy as np
import pandas as pd

#: Leading characters that a spreadsheet program (or a CSV import of the
#: sheet) may take as the start of a formula.  Tab and carriage return are
#: included because some programs strip them and then see the next character.
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")

#: Prefix put in front of user text that starts with a formula trigger.  A
#: text that itself starts with the prefix is prefixed too, so that
#: :func:`restore_text` can undo :func:`safe_text` exactly.
TEXT_PREFIX = "'"

#: Longest text a worksheet cell can hold.
MAX_CELL_TEXT = 32767

#: Cautions that every output carries, whatever else the caller adds.
DEFAULT_CAUTIONS: tuple[str, ...] = (
    "These are planning outputs, not construction drawings. Every design must "
    "be checked against local codes and standards and approved by a licensed "
    "electrical practitioner before it is bought or built.",
    "DC circuits can sustain arcs that do not extinguish by themselves: use "
    "DC-rated switches, breakers and fuses, and never open a DC circuit under "
    "load with a device not rated to do so.",
    "Fusing and cable sizing shown are indicative: size every conductor for "
    "ampacity and voltage drop at the installed length and temperature, and "
    "fuse every string and every battery connection to protect its conductors.",
    "Batteries store large amounts of energy: ventilate battery enclosures "
    "(lead-acid batteries give off hydrogen while charging), keep sparks and "
    "flames away, wear eye protection, use insulated tools, and follow the "
    "manufacturer's instructions for handling, transport and disposal.",
    "Minigrid plants parallel several battery strings, charge controllers and "
    "inverters on one DC bus: give every battery string its own fuse or breaker "
    "rated for the fault current the other strings can feed into it, and size "
    "the bus bars and main disconnect for the plant's total current; the bill "
    "of materials does not price these plant-level parts.",
    "Prices, weather and demand are estimates; check quantities and prices "
    "with suppliers before committing to a purchase.",
)


def is_missing(value) -> bool:
    """True for None, NaN, NaT, pandas NA and infinite numbers."""
    if value is None or value is pd.NA or value is pd.NaT:
        return True
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, numbers.Real):
        try:
            return not math.isfinite(float(value))
        except (TypeError, ValueError, OverflowError):
            return False
    if isinstance(value, (pd.Timestamp, datetime, date)):
        return bool(pd.isna(value))
    return False


def safe_text(value) -> str:
    """Text made safe to put in a spreadsheet cell.

    A text starting with ``=``, ``+``, ``-``, ``@`` (or tab, carriage return,
    or the prefix itself) is prefixed with a single quote ``'`` so that no
    program takes it for a formula when the sheet is opened, copied or saved
    as CSV.  The text is also cut to the longest a cell can hold.
    """
    text = str(value)
    if text.startswith(FORMULA_TRIGGERS + (TEXT_PREFIX,)):
        text = TEXT_PREFIX + text
    return text[:MAX_CELL_TEXT]


def restore_text(value):
    """Undo :func:`safe_text` on a value read back from a sheet."""
    if isinstance(value, str) and value.startswith(TEXT_PREFIX):
        rest = value[len(TEXT_PREFIX):]
        if rest.startswith(FORMULA_TRIGGERS + (TEXT_PREFIX,)):
            return rest
    return value


def is_number(value) -> bool:
    """True for real numbers (not booleans)."""
    return isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))


def decimals_for(values, column: str = "") -> int:
    """Decimals to show for a set of numbers.

    Integers show none; otherwise about three significant digits of the
    largest magnitude, at most six decimals.  Money (a column whose name
    carries ``USD``) shows cents below 1,000 and whole units above.
    """
    finite = [float(v) for v in values if is_number(v) and math.isfinite(float(v))]
    if not finite:
        return 0
    if all(float(v).is_integer() for v in finite):
        return 0
    largest = max(abs(v) for v in finite)
    if "USD" in column:
        return 0 if largest >= 1000 else 2
    if largest == 0:
        return 0
    return int(min(6, max(0, 2 - math.floor(math.log10(largest)))))


def excel_number_format(decimals: int) -> str:
    """Excel number format with thousands separator and fixed decimals."""
    return "#,##0" + ("." + "0" * decimals if decimals > 0 else "")


def format_number(value, decimals: int) -> str:
    """Number as text with thousands separators, for HTML."""
    if is_missing(value):
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    return f"{float(value):,.{decimals}f}"


def flatten_table(frame: pd.DataFrame | None) -> pd.DataFrame:
    """Table ready to write: named index levels become columns, column
    labels become plain text (levels of a multi-level header are joined)."""
    if frame is None:
        return pd.DataFrame()
    table = frame.copy()
    if any(name is not None for name in table.index.names):
        table = table.reset_index()
    else:
        table = table.reset_index(drop=True)
    if isinstance(table.columns, pd.MultiIndex):
        table.columns = [
            " ".join(str(part) for part in col if str(part) != "").strip()
            for col in table.columns
        ]
    else:
        table.columns = [str(col) for col in table.columns]
    return table


def numeric_columns(table: pd.DataFrame) -> list[str]:
    """Columns whose every non-missing value is a real number."""
    result = []
    for name in table.columns:
        column = table[name]
        if pd.api.types.is_bool_dtype(column):
            continue
        if pd.api.types.is_numeric_dtype(column):
            result.append(name)
            continue
        present = [v for v in column if not is_missing(v)]
        if present and all(is_number(v) for v in present):
            result.append(name)
    return result


def normalise_assumptions(assumptions) -> pd.DataFrame:
    """Assumptions as a frame with columns ``key``, ``value``, ``unit``.

    Accepts such a frame, a mapping ``key -> value`` or
    ``key -> (value, unit)``, or an iterable of ``(key, value[, unit])``.
    """
    columns = ["key", "value", "unit"]
    if assumptions is None:
        return pd.DataFrame(columns=columns)
    if isinstance(assumptions, pd.DataFrame):
        table = flatten_table(assumptions)
        missing = [c for c in ("key", "value") if c not in table.columns]
        if missing:
            raise ValueError(f"assumptions table lacks column(s) {missing}")
        if "unit" not in table.columns:
            table["unit"] = ""
        return table[columns].reset_index(drop=True)
    rows = []
    items = assumptions.items() if isinstance(assumptions, Mapping) else assumptions
    for item in items:
        if isinstance(assumptions, Mapping):
            key, value = item
            if isinstance(value, tuple) and len(value) == 2:
                value, unit = value
            else:
                unit = ""
        else:
            item = tuple(item)
            key, value = item[0], item[1]
            unit = item[2] if len(item) > 2 else ""
        rows.append({"key": key, "value": value, "unit": unit})
    return pd.DataFrame(rows, columns=columns)


def normalise_lines(lines) -> list[str]:
    """A list of text lines from None, a string, an iterable or a frame."""
    if lines is None:
        return []
    if isinstance(lines, str):
        return [lines]
    if isinstance(lines, pd.DataFrame):
        if lines.shape[1] == 0:
            return []
        return [str(v) for v in lines.iloc[:, 0] if not is_missing(v)]
    if isinstance(lines, pd.Series):
        return [str(v) for v in lines if not is_missing(v)]
    if isinstance(lines, Iterable):
        return [str(v) for v in lines if not is_missing(v)]
    return [str(lines)]


def all_cautions(cautions) -> list[str]:
    """The standard cautions followed by the caller's, without repeats."""
    result: list[str] = []
    for line in list(DEFAULT_CAUTIONS) + normalise_lines(cautions):
        if line not in result:
            result.append(line)
    return result
