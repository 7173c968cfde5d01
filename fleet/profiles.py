"""Reading user hourly demand profiles (for example from a household survey).

A profile table (CSV or XLSX) has one row per tier, or per tier and month,
or per tier, month and day type, with 24 hourly mean powers:

    tier, month, day_type, h00, h01, ..., h23, peak_w

``tier`` is 1-5; ``month`` 1-12 or blank (all months); ``day_type``
``weekday``, ``weekend`` or blank (both); ``h00`` is 00:00-01:00 on the
local clock, in W (the hour's mean power of one household); ``peak_w``
(optional) the household's instantaneous peak in W, default the largest
hourly value. More specific rows win over general ones. A tier named in the
table replaces the built-in appliance mix for that tier.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, Problem

HOUR_COLUMNS = [f"h{h:02d}" for h in range(24)]
DAY_TYPES = {"weekday": (0,), "weekend": (1,), "": (0, 1), "all": (0, 1)}


def read_tier_profiles(path: str | Path) -> dict:
    """Read and validate a profile table; return ``{tier: (12, 2, 24) W, "peak:<tier>": W}``.

    Raises InputError with every problem (file, row, column).
    """
    label = str(path)
    p = Path(path)
    try:
        if p.suffix.lower() == ".xlsx":
            raw = pd.read_excel(p, dtype=str)
        elif p.suffix.lower() == ".csv":
            raw = pd.read_csv(p, dtype=str, keep_default_na=False)
        else:
            raise InputError([Problem(label, None, None, "expected a .csv or .xlsx profile table")])
    except FileNotFoundError:
        raise InputError([Problem(label, None, None, "file not found")]) from None
    except (pd.errors.EmptyDataError, ValueError) as exc:
        raise InputError([Problem(label, None, None, f"cannot be read: {exc}")]) from None
    return validate_tier_profiles(raw, label)


def validate_tier_profiles(raw: pd.DataFrame, label: str) -> dict:
    """Check a profile table (see module docstring) and build the arrays."""
    df = raw.copy()
    df.columns = [str(c).strip().lower() for c in df.columns]
    problems = [Problem(label, None, c, "required column is missing") for c in ["tier", *HOUR_COLUMNS] if c not in df.columns]
    if df.empty:
        problems.append(Problem(label, None, None, "no rows"))
    if problems:
        raise InputError(problems)
    df = df.fillna("")
    for col in ("month", "day_type", "peak_w"):
        if col not in df.columns:
            df[col] = ""
    entries = []
    for i, r in df.iterrows():
        row = int(i) + 2
        try:
            tier = int(str(r.tier).strip())
            assert 1 <= tier <= 5
        except (ValueError, AssertionError):
            problems.append(Problem(label, row, "tier", f"expected a tier 1-5, got {r.tier!r}"))
            continue
        month_txt = str(r.month).strip()
        try:
            months = list(range(12)) if month_txt == "" else [int(float(month_txt)) - 1]
            assert all(0 <= m < 12 for m in months)
        except (ValueError, AssertionError):
            problems.append(Problem(label, row, "month", f"expected a month 1-12 or blank, got {r.month!r}"))
            continue
        dt = str(r.day_type).strip().lower()
        if dt not in DAY_TYPES:
            problems.append(Problem(label, row, "day_type", f"expected weekday, weekend or blank, got {r.day_type!r}"))
            continue
        values = pd.to_numeric(pd.Series([r[c] for c in HOUR_COLUMNS]), errors="coerce").to_numpy()
        bad = [HOUR_COLUMNS[k] for k in range(24) if not np.isfinite(values[k]) or values[k] < 0]
        for col in bad:
            problems.append(Problem(label, row, col, f"expected a power in W >= 0, got {r[col]!r}"))
        peak = np.nan
        if str(r.peak_w).strip():
            peak = pd.to_numeric(str(r.peak_w), errors="coerce")
            if not np.isfinite(peak) or peak < np.nanmax(values):
                problems.append(Problem(label, row, "peak_w", "expected a peak in W at least the largest hourly value"))
                continue
        if bad:
            continue
        specificity = (month_txt != "") + (dt not in ("", "all"))
        entries.append((specificity, tier, months, DAY_TYPES[dt], values, peak))
    if problems:
        raise InputError(problems)
    out: dict = {}
    filled: dict[int, np.ndarray] = {}
    for _, tier, months, days, values, peak in sorted(entries, key=lambda e: e[0]):
        arr = out.setdefault(tier, np.zeros((12, 2, 24)))
        mask = filled.setdefault(tier, np.zeros((12, 2), bool))
        for m in months:
            for d in days:
                arr[m, d] = values
                mask[m, d] = True
        if np.isfinite(peak):
            out[f"peak:{tier}"] = max(out.get(f"peak:{tier}", 0.0), float(peak))
    for tier, mask in filled.items():
        if not mask.all():
            missing = sorted({int(m) + 1 for m, d in zip(*np.nonzero(~mask))})
            problems.append(Problem(label, None, None, f"tier {tier} has no profile for month(s) {missing}"))
    if problems:
        raise InputError(problems)
    return out
