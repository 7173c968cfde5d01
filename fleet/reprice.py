"""The price round trip: unit prices that procurement filled in on a run's bill of
materials are read back, checked, and the catalogue is chosen again with them.

Prices do not change how a kit behaves, so nothing the run simulated is simulated again:
every option's reliability, battery life and energy served are the run's own (kept in the
run folder's state file); only the costs that depend on component prices are recomputed, and
the catalogue, the comparisons and the cost curves are solved again. Options the run left
unsimulated (their lower-bound costs showed no answer could use them; :mod:`fleet.search`)
get bounds at the new prices, and those a new solution uses are simulated then.

Checks on the workbook (each problem names the sheet and the cell; all are listed at
once and nothing is guessed):

* a unit price that is missing, not a number (text such as ``"1,200"`` or ``"USD 40"``
  included), negative, or not finite;
* a price that moved by more than ``max_change`` times (up or down) from the run's
  price: often a typing slip or a price per pack instead of per piece (accept on purpose
  with ``accept_large_changes``);
* two different prices for the same component on different kits' lines (the catalogue
  prices a component once);
* a spares fraction that is not a number between 0 and 1;
* lines whose kit or component the run does not know (a line added or an id edited).
"""

from __future__ import annotations

import gzip
import math
import pickle
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, Problem
from .kits import capex_columns

#: File in a run folder holding what ``fleet reprice`` needs from the run.
STATE_FILE = "plan_state.pkl.gz"
STATE_VERSION = 2
#: A price more than this many times higher or lower than the run's is listed as implausible.
DEFAULT_MAX_CHANGE = 3.0


@dataclass
class PriceEdits:
    """Unit prices read from a workbook: the price per component id, the spares fraction,
    and the table of prices that differ from the run's."""

    prices: dict[str, float]
    spares_fraction: float
    changed: pd.DataFrame  # component_id, component_kind, description, unit, old/new price, change


def _cell(col: int, row: int) -> str:
    from openpyxl.utils import get_column_letter
    return f"{get_column_letter(col)}{row}"


def read_price_edits(path, bom: pd.DataFrame, *, max_change: float = DEFAULT_MAX_CHANGE,
                     accept_large_changes: bool = False) -> PriceEdits:
    """Read and check the unit prices of a bill of materials written by ``fleet plan``.

    Parameters
    ----------
    path : path-like
        The ``bill_of_materials.xlsx`` (its ``by_kit`` sheet is read).
    bom : DataFrame
        The run's bill-of-materials lines of every candidate kit (``kit_id``,
        ``component_id``, ``unit_price_usd``, ...): the prices the run used.
    max_change : float
        Largest plausible factor between a new and the run's price (> 1).

    Raises
    ------
    InputError
        With every problem found, each naming the sheet and cell.
    """
    import openpyxl

    from .report.excel import _SPARES_COL, _SPARES_ROW, BY_KIT_COLUMNS, BY_KIT_HEADER_ROW, LINE_ITEM

    label = str(path)
    where = f"{label} [sheet by_kit]"
    problems: list[Problem] = []
    try:
        book = openpyxl.load_workbook(path, data_only=True, read_only=True)
    except FileNotFoundError:
        raise InputError([Problem(label, None, None, "file not found")]) from None
    except Exception as exc:  # not a workbook at all
        raise InputError([Problem(label, None, None, f"cannot be read as an .xlsx workbook ({exc})")]) from None
    try:
        if "by_kit" not in book.sheetnames:
            raise InputError([Problem(label, None, None, "has no 'by_kit' sheet: is it a bill of materials "
                                                       "written by fleet plan?")])
        ws = book["by_kit"]
        rows = [list(r) for r in ws.iter_rows(values_only=True)]
    finally:
        book.close()
    header_row = BY_KIT_HEADER_ROW + 1  # 1-based
    if len(rows) < header_row or [str(v) if v is not None else "" for v in rows[header_row - 1][:len(BY_KIT_COLUMNS)]] \
            != list(BY_KIT_COLUMNS):
        raise InputError([Problem(where, header_row, None, "the header row is not the one fleet plan writes; "
                                                           "columns must not be moved, renamed or deleted")])
    col = {name: i for i, name in enumerate(BY_KIT_COLUMNS)}
    price_col = col["unit price (USD)"]
    spares = rows[_SPARES_ROW][_SPARES_COL] if len(rows) > _SPARES_ROW else None
    spares_cell = _cell(_SPARES_COL + 1, _SPARES_ROW + 1)
    if not _is_number(spares) or not 0.0 <= float(spares) <= 1.0:
        problems.append(Problem(where, _SPARES_ROW + 1, "spares fraction",
                                f"cell {spares_cell}: {spares!r} is not a number between 0 and 1"))

    known = bom.drop_duplicates("component_id").set_index("component_id")
    kit_ids = set(bom.item_id) if "item_id" in bom else set(bom.kit_id)
    seen: dict[str, tuple[float, str]] = {}
    for r in range(header_row, len(rows)):
        row = rows[r]
        if len(row) <= col["line"] or row[col["line"]] != LINE_ITEM:
            continue
        excel_row = r + 1
        cid = "" if row[col["component_id"]] is None else str(row[col["component_id"]])
        kid = "" if row[col["kit_id"]] is None else str(row[col["kit_id"]])
        cell = _cell(price_col + 1, excel_row)
        if kid not in kit_ids or cid not in known.index:
            problems.append(Problem(where, excel_row, "component_id",
                                    f"kit '{kid}' / component '{cid}' is not in the run; lines cannot be added "
                                    "or renamed in the workbook (change the component library and plan again)"))
            continue
        value = row[price_col]
        if value is None or (isinstance(value, str) and not value.strip()):
            problems.append(Problem(where, excel_row, "unit price (USD)", f"cell {cell}: no price for {cid}"))
            continue
        if not _is_number(value):
            problems.append(Problem(where, excel_row, "unit price (USD)",
                                    f"cell {cell}: {value!r} is not a number (write the price in USD as a "
                                    "plain number)"))
            continue
        price = float(value)
        if not math.isfinite(price) or price < 0:
            problems.append(Problem(where, excel_row, "unit price (USD)",
                                    f"cell {cell}: {price:g} is not a price (must be 0 or more)"))
            continue
        old = float(known.at[cid, "unit_price_usd"])
        if not accept_large_changes and old > 0 and (price > old * max_change or price < old / max_change):
            problems.append(Problem(where, excel_row, "unit price (USD)",
                                    f"cell {cell}: {price:,.2f} for {cid} is {price / old:.2g} times the run's "
                                    f"{old:,.2f}; more than {max_change:g} times up or down looks like a slip "
                                    "(check the unit, or rerun with --accept-large-changes)"))
            continue
        if cid in seen and not math.isclose(seen[cid][0], price, rel_tol=1e-9, abs_tol=1e-9):
            problems.append(Problem(where, excel_row, "unit price (USD)",
                                    f"cell {cell}: {price:,.2f} for {cid} differs from {seen[cid][0]:,.2f} in "
                                    f"cell {seen[cid][1]}; a component has one price"))
            continue
        seen.setdefault(cid, (price, cell))
    if problems:
        raise InputError(problems)
    prices = {cid: p for cid, (p, _) in seen.items()}
    rows_changed = []
    for cid, p in prices.items():
        old = float(known.at[cid, "unit_price_usd"])
        if not math.isclose(old, p, rel_tol=1e-12, abs_tol=1e-9):
            k = known.loc[cid]
            rows_changed.append({"component_id": cid, "component_kind": k.component_kind,
                                 "description": k.description, "unit": k.unit, "old unit price (USD)": old,
                                 "new unit price (USD)": p,
                                 "change (%)": 100.0 * (p - old) / old if old > 0 else np.nan})
    changed = pd.DataFrame(rows_changed, columns=["component_id", "component_kind", "description", "unit",
                                                  "old unit price (USD)", "new unit price (USD)", "change (%)"])
    return PriceEdits(prices, float(spares), changed)


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)


def apply_prices(kits: pd.DataFrame, bom: pd.DataFrame, prices: dict[str, float]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """New unit prices on every candidate kit's BOM lines, and the kits' capex columns summed
    again from their lines (:func:`fleet.kits.capex_columns`)."""
    bom = bom.copy()
    new = bom.component_id.map(prices)
    bom["unit_price_usd"] = new.where(new.notna(), bom.unit_price_usd).astype(float)
    return capex_columns(kits, bom), bom


def save_state(result, path) -> None:
    """Write what ``fleet reprice`` needs from a run (the plan without its hourly weather)."""
    import dataclasses

    from . import __version__
    light = dataclasses.replace(result, weather=dataclasses.replace(
        result.weather, poa_wm2=np.zeros((0, 0, 0), np.float32), cell_temp_c=np.zeros((0, 0, 0), np.float32)))
    with gzip.open(path, "wb", compresslevel=5) as f:
        pickle.dump({"state_version": STATE_VERSION, "fleet_version": __version__, "result": light}, f,
                    protocol=pickle.HIGHEST_PROTOCOL)


def load_state(run_dir):
    """The plan saved by :func:`save_state` in a run folder written by this version of fleet.

    The state file is a Python pickle: load only run folders you (or your colleagues) wrote.
    """
    from . import __version__
    path = Path(run_dir) / STATE_FILE
    if not path.is_file():
        raise InputError([Problem(str(Path(run_dir)), None, None,
                                  f"no {STATE_FILE}: the workbook must sit in the run folder that fleet plan wrote")])
    with gzip.open(path, "rb") as f:
        data = pickle.load(f)  # noqa: S301 - our own run folder
    if data.get("state_version") != STATE_VERSION or data.get("fleet_version") != __version__:
        raise InputError([Problem(str(path), None, None,
                                  f"written by fleet {data.get('fleet_version')}; this is fleet {__version__}: "
                                  "plan again with this version")])
    return data["result"]


_CATALOGUE_WARNINGS = ("shs catalogue:", "minigrid catalogue:")


def reprice_plan(result, edits: PriceEdits):
    """The plan chosen again with new unit prices: ``(new PlanResult, changes table)``.

    Kit capex is summed again from every candidate's priced lines; every option's lifecycle
    cost is recomputed with its simulated battery life (:func:`fleet.plan.reprice_evaluations`);
    the catalogue, comparisons and cost curves are solved again
    (:func:`fleet.plan.choose_catalogue`). The changes table lists the prices that moved and what
    they changed: kit types dropped or added and why, units given another kit, totals.
    """
    import dataclasses

    from .plan import choose_catalogue, representative_traces, reprice_candidates, reprice_evaluations, result_simulator

    cfg = result.config
    if not math.isclose(edits.spares_fraction, cfg["catalogue"]["spares_fraction"], abs_tol=1e-12):
        cfg = cfg.with_overrides(catalogue={"spares_fraction": edits.spares_fraction})
    kits, bom = apply_prices(result.kits, result.bom, edits.prices)
    ev = reprice_evaluations(result.evaluations, kits, cfg, result.transport)
    info = result.weather.info
    sun = pd.Series(info.design_month_sun_hours.to_numpy(), index=info.site_id.to_numpy())
    # options the run did not simulate may become worth it at the new prices: their bounds are
    # priced again and the catalogue rounds simulate the ones a solution uses
    cand = reprice_candidates(result.candidates, result.units, kits, cfg)
    cat = choose_catalogue(ev, result.units, kits, cfg, result.screened, sun, candidates=cand,
                           simulate=result_simulator(result, kits, cfg) if len(cand) else None)
    warnings = [w for w in result.warnings if not w.startswith(_CATALOGUE_WARNINGS)
                and "service unit(s) have no kit" not in w] + cat["warnings"]
    new = dataclasses.replace(result, kits=kits, bom=bom, evaluations=cat["evaluations"], options=cat["options"],
                              candidates=cat["candidates"], search_rounds=result.search_rounds + cat["rounds"],
                              catalogues=cat["catalogues"], comparisons=cat["comparisons"],
                              unserved=cat["unserved"], cost_curves=cat["cost_curves"], warnings=warnings,
                              config=cfg, traces={})
    new.traces = representative_traces(new, new.kit_params, new.kit_tables)
    return new, changes_table(result, new, edits)


def _assigned(result) -> pd.DataFrame:
    from .plan import assigned_options
    a = assigned_options(result)
    cols = ["unit_id", "scheme", "kit_id", "blocks", "battery_blocks", "inverters", "capex_usd", "cost_usd",
            "pv_block_id", "battery_block_id", "inverter_id"]
    return a[[c for c in cols if c in a]]


def changes_table(old, new, edits: PriceEdits) -> pd.DataFrame:
    """What the new prices changed, one row per change: ``what``, ``item``, ``before``,
    ``after``, ``change`` and ``why``."""
    rows = []
    for r in edits.changed.itertuples(index=False):
        rows.append({"what": "unit price (USD)", "item": f"{r.component_id}: {r.description}",
                     "before": r[4], "after": r[5], "change": f"{r[6]:+.1f} %" if np.isfinite(r[6]) else "",
                     "why": "price filled in on the bill of materials"})
    old_spares = old.config["catalogue"]["spares_fraction"]
    if not math.isclose(old_spares, edits.spares_fraction, abs_tol=1e-12):
        rows.append({"what": "spares fraction", "item": "all lines", "before": old_spares,
                     "after": edits.spares_fraction, "change": "", "why": "changed on the bill of materials"})
    a_old, a_new = _assigned(old), _assigned(new)
    changed_ids = set(edits.changed.component_id)
    bom = new.bom
    parts_of = bom.groupby("kit_id").component_id.agg(lambda c: sorted(set(c) & changed_ids))
    ev_old = old.evaluations.set_index("pair")
    ev_new = new.evaluations.set_index("pair")
    rel = (ev_new.lifecycle_cost_usd - ev_old.lifecycle_cost_usd) / ev_old.lifecycle_cost_usd.replace(0, np.nan)
    rel_by_kit = rel.groupby(ev_new.kit_id).mean()
    for scheme in ("shs", "minigrid"):
        before = set(old.catalogues[scheme].chosen_kits)
        after = set(new.catalogues[scheme].chosen_kits)
        mean_rel = float(rel[ev_new.scheme == scheme].mean()) if (ev_new.scheme == scheme).any() else 0.0
        def using(a, k):  # units whose kit is k, or whose plant has blocks of type k
            hit = a.kit_id == k
            for col in ("pv_block_id", "battery_block_id", "inverter_id"):
                if scheme == "minigrid" and col in a:
                    hit |= a[col] == k
            return int(hit.sum())

        for kit, verb, units_b, units_a in (
                [(k, "kit type dropped", using(a_old, k), 0) for k in sorted(before - after)]
                + [(k, "kit type added", 0, using(a_new, k)) for k in sorted(after - before)]):
            d = float(rel_by_kit.get(kit, np.nan))
            parts = parts_of.get(kit, [])
            why = (f"its options' lifecycle cost changed {d:+.1%} on average, against {mean_rel:+.1%} for all "
                   f"{scheme} options" + (f"; repriced parts in it: {', '.join(parts)}" if parts else
                                          "; none of its parts was repriced (others' prices moved)"))
            rows.append({"what": f"{scheme}: {verb}", "item": kit, "before": units_b, "after": units_a,
                         "change": "units assigned", "why": why})
        m = a_old[a_old.scheme == scheme].merge(a_new[a_new.scheme == scheme], on="unit_id", how="outer",
                                                suffixes=("_old", "_new"))
        moved = m[(m.kit_id_old != m.kit_id_new) | (m.blocks_old != m.blocks_new)
                  | (m.get("battery_blocks_old", 0) != m.get("battery_blocks_new", 0))
                  | (m.get("inverters_old", 0) != m.get("inverters_new", 0))]
        if len(m):
            rows.append({"what": f"{scheme}: units given another kit or block count", "item": f"{len(m)} units",
                         "before": "", "after": int(len(moved)), "change": f"{len(moved) / len(m):.0%} of units",
                         "why": "the catalogue was chosen again at the new prices"})
            for col, label in (("capex_usd", "capex (USD)"), ("cost_usd", "lifecycle cost (USD)")):
                b, a = float(m[f"{col}_old"].sum()), float(m[f"{col}_new"].sum())
                rows.append({"what": f"{scheme}: {label}", "item": "units served", "before": b, "after": a,
                             "change": f"{100 * (a - b) / b:+.1f} %" if b else "", "why": "new prices and catalogue"})
        ob, oa = old.catalogues[scheme].objective_usd, new.catalogues[scheme].objective_usd
        rows.append({"what": f"{scheme}: catalogue objective (USD)", "item": "lifecycle cost + type costs",
                     "before": ob, "after": oa, "change": f"{100 * (oa - ob) / ob:+.1f} %" if ob else "",
                     "why": f"integer program: {new.catalogues[scheme].status}, gap {new.catalogues[scheme].gap:.2%}"})
    return pd.DataFrame(rows, columns=["what", "item", "before", "after", "change", "why"])
