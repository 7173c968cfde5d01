"""Report writers: what procurement, leadership and GIS users open.

These pin file behaviour, not physics: formulas and their stored values agree,
user text never turns into a formula or markup, units sit in headers, files
read back with the ordinary readers.  All inputs are small frames made here.
"""

from __future__ import annotations

import base64
import math
import re
import shutil
import subprocess

import geopandas as gpd
import matplotlib
import numpy as np
import openpyxl
import pandas as pd
import pyogrio
import pytest
from matplotlib.figure import Figure
from shapely.geometry import Point

from fleet.report import (
    DEFAULT_CAUTIONS,
    cost_by_kit_type,
    read_bill_of_materials,
    reliability_histogram,
    restore_text,
    safe_text,
    site_map,
    soc_trace,
    write_bill_of_materials,
    write_deployment_html,
    write_deployment_summary,
    write_sites_gpkg,
)
from fleet.report.excel import (
    BY_COMPONENT_COLUMNS,
    BY_DEPOT_COLUMNS,
    BY_KIT_COLUMNS,
    BY_KIT_HEADER_ROW,
    SPARES_FRACTION_CELL,
)

matplotlib.use("Agg")

HOSTILE_LABEL = '=HYPERLINK("http://example.invalid","click")'
HOSTILE_TEXTS = [HOSTILE_LABEL, "+1", "@x", "-48 V bus"]

COL = {name: i + 1 for i, name in enumerate(BY_KIT_COLUMNS)}  # 1-based for openpyxl
FIRST_DATA_ROW = BY_KIT_HEADER_ROW + 2  # 1-based row of the first line


def _bom_lines() -> pd.DataFrame:
    rows = [
        # scheme, kit_id, kit_label, kind, component_id, description, unit, qty, price
        ("shs", "SHS-A", HOSTILE_LABEL, "pv_module", "PV-050", "+1 module 50 Wp", "each", 1.0, 38.0),
        ("shs", "SHS-A", HOSTILE_LABEL, "battery", "BAT-LFP-12-30", "@x battery 12 V 30 Ah", "each", 1.0, 95.5),
        ("shs", "SHS-A", HOSTILE_LABEL, "cable", "CAB-4", "cable 4 mm2", "m", 12.5, 0.85),
        ("shs", "SHS-B", "SHS 100 Wp", "pv_module", "PV-050", "module 50 Wp", "each", 2.0, 38.0),
        ("shs", "SHS-B", "SHS 100 Wp", "lamp", "LED-3W", "-48 V bus lamp", "each", 3.0, 4.2),
        ("minigrid", "MG-BLK", "minigrid block 5 kWp", "pv_module", "PV-400", "module 400 Wp", "each", 13.0, 120.0),
        ("minigrid", "MG-BLK", "minigrid block 5 kWp", "cable", "CAB-4", "cable 4 mm2", "m", 80.0, 0.85),
    ]
    return pd.DataFrame(rows, columns=["scheme", "kit_id", "kit_label", "component_kind",
                                       "component_id", "description", "unit",
                                       "quantity_per_kit", "unit_price_usd"])


def _kit_counts() -> pd.DataFrame:
    rows = [("shs", "SHS-A", "North", 30), ("shs", "SHS-A", "@South", 7),
            ("shs", "SHS-B", "North", 10), ("minigrid", "MG-BLK", "North", 4)]
    return pd.DataFrame(rows, columns=["scheme", "kit_id", "depot", "kits"])


SPARES = 0.1


@pytest.fixture
def bom_path(tmp_path):
    path = tmp_path / "bill_of_materials.xlsx"
    write_bill_of_materials(path, _bom_lines(), _kit_counts(), spares_fraction=SPARES,
                            assumptions={"horizon": (20, "years")},
                            cautions=["Demo prices are invented."])
    return path


def _books(path):
    return openpyxl.load_workbook(path), openpyxl.load_workbook(path, data_only=True)


def _rows_by_line(values_sheet, kind):
    """1-based sheet rows of by_kit whose `line` column is `kind`."""
    return [r for r in range(FIRST_DATA_ROW, values_sheet.max_row + 1)
            if values_sheet.cell(r, COL["line"]).value == kind]


def test_bom_has_the_documented_sheets(bom_path):
    formulas, _ = _books(bom_path)
    assert formulas.sheetnames == ["by_kit", "by_component", "by_depot", "assumptions", "cautions"]


def test_bom_extended_price_is_total_quantity_times_unit_price(bom_path):
    formulas, values = _books(bom_path)
    fs, vs = formulas["by_kit"], values["by_kit"]
    items = _rows_by_line(vs, "item")
    assert len(items) == len(_bom_lines())
    for r in items:
        total = vs.cell(r, COL["total quantity (unit as listed)"]).value
        price = vs.cell(r, COL["unit price (USD)"]).value
        extended = vs.cell(r, COL["extended price (USD)"]).value
        assert extended == pytest.approx(total * price)
        # the live formula multiplies this row's own total and price cells
        assert fs.cell(r, COL["extended price (USD)"]).value == f"=K{r}*L{r}"
        assert fs.cell(r, COL["total quantity (unit as listed)"]).value == f"=H{r}*I{r}+J{r}"


def test_bom_kit_subtotals_and_grand_total_are_sums_of_their_parts(bom_path):
    formulas, values = _books(bom_path)
    vs, fs = values["by_kit"], formulas["by_kit"]
    ext = COL["extended price (USD)"]
    subtotals = _rows_by_line(vs, "kit subtotal")
    assert len(subtotals) == 3  # one per kit type
    start = FIRST_DATA_ROW
    for r in subtotals:
        parts = [vs.cell(i, ext).value for i in range(start, r)]
        assert vs.cell(r, ext).value == pytest.approx(sum(parts))
        assert fs.cell(r, ext).value == f"=SUM(M{start}:M{r - 1})"
        start = r + 1
    (grand,) = _rows_by_line(vs, "grand total")
    assert vs.cell(grand, ext).value == pytest.approx(sum(vs.cell(r, ext).value for r in subtotals))
    expected = sum(
        (q * k + math.ceil(round(q * k * SPARES, 9))) * p
        for q, k, p in [(1, 37, 38.0), (1, 37, 95.5), (12.5, 37, 0.85), (2, 10, 38.0),
                        (3, 10, 4.2), (13, 4, 120.0), (80, 4, 0.85)])
    assert vs.cell(grand, ext).value == pytest.approx(expected)
    assert fs.cell(grand, ext).value.startswith("=SUMIF(")


def test_bom_spares_round_up_the_fraction_of_deployed_quantity(bom_path):
    formulas, values = _books(bom_path)
    vs, fs = values["by_kit"], formulas["by_kit"]
    got = {}
    for r in _rows_by_line(vs, "item"):
        key = (vs.cell(r, COL["kit_id"]).value, vs.cell(r, COL["component_id"]).value)
        got[key] = vs.cell(r, COL["spares (unit as listed)"]).value
        assert fs.cell(r, COL["spares (unit as listed)"]).value == \
            f"=ROUNDUP(H{r}*I{r}*{SPARES_FRACTION_CELL},0)"
    assert got[("SHS-A", "PV-050")] == 4      # 1 * 37 * 0.1 = 3.7 -> 4
    assert got[("SHS-A", "CAB-4")] == 47      # 12.5 * 37 * 0.1 = 46.25 -> 47
    assert got[("SHS-B", "LED-3W")] == 3      # 3 * 10 * 0.1 = 3 exactly
    assert got[("MG-BLK", "CAB-4")] == 32     # 80 * 4 * 0.1 = 32 exactly
    assert vs[SPARES_FRACTION_CELL.replace("$", "")].value == SPARES


def test_bom_spares_ignore_floating_point_dust(tmp_path):
    # 1 * 100 * 0.07 evaluates to 7.000000000000001 in binary floating point;
    # the stored spares must be 7, as a spreadsheet program computes it.
    lines = _bom_lines().iloc[[0]]
    counts = pd.DataFrame([{"scheme": "shs", "kit_id": "SHS-A", "depot": "North", "kits": 100}])
    path = tmp_path / "b.xlsx"
    write_bill_of_materials(path, lines, counts, spares_fraction=0.07)
    frame = pd.read_excel(path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    item = frame[frame["line"] == "item"].iloc[0]
    assert item["spares (unit as listed)"] == 7
    assert item["total quantity (unit as listed)"] == 107


def test_bom_every_formula_cell_stores_its_value(bom_path):
    formulas, values = _books(bom_path)
    n_formulas = 0
    for name in ("by_kit", "by_component"):
        for row_f, row_v in zip(formulas[name].iter_rows(), values[name].iter_rows()):
            for cf, cv in zip(row_f, row_v):
                if cf.data_type == "f":
                    n_formulas += 1
                    assert cv.value is not None, f"{name}!{cf.coordinate} has no stored value"
                    assert isinstance(cv.value, (int, float))
    assert n_formulas > 20


def test_bom_user_text_is_stored_as_text_not_formula(bom_path):
    formulas, _ = _books(bom_path)
    user_texts = {HOSTILE_LABEL, "+1 module 50 Wp", "@x battery 12 V 30 Ah", "-48 V bus lamp",
                  "@South"}
    seen = set()
    for name in ("by_kit", "by_component", "by_depot"):
        for row in formulas[name].iter_rows():
            for cell in row:
                if cell.data_type == "f":
                    assert "HYPERLINK" not in str(cell.value)
                    continue
                if isinstance(cell.value, str) and restore_text(cell.value) in user_texts:
                    assert cell.value == "'" + restore_text(cell.value)
                    seen.add(restore_text(cell.value))
    assert seen == user_texts
    # read back through fleet, the text is what the user wrote
    lines, spares = read_bill_of_materials(bom_path)
    assert spares == SPARES
    assert set(lines["kit_label"]) == {HOSTILE_LABEL, "SHS 100 Wp", "minigrid block 5 kWp"}
    assert "+1 module 50 Wp" in set(lines["description"])


def test_safe_text_round_trips_and_only_touches_trigger_characters():
    for text in HOSTILE_TEXTS + ["'quoted", "\tx", "plain", "50 Wp", ""]:
        assert restore_text(safe_text(text)) == text
    assert safe_text("plain") == "plain"
    assert safe_text("=1+1") == "'=1+1"


def test_bom_inputs_unlocked_formulas_locked_and_validated(bom_path):
    formulas, _ = _books(bom_path)
    ws = formulas["by_kit"]
    assert ws.protection.sheet is True
    assert ws.protection.password is None
    spares_cell = ws[SPARES_FRACTION_CELL.replace("$", "")]
    assert spares_cell.protection.locked is False
    items = _rows_by_line(ws, "item")
    for r in items:
        assert ws.cell(r, COL["unit price (USD)"]).protection.locked is False
        for name in ("spares (unit as listed)", "total quantity (unit as listed)",
                     "extended price (USD)"):
            assert ws.cell(r, COL[name]).protection.locked is True
        for name in ("quantity per kit (unit as listed)", "kits (count)", "kit_label"):
            assert ws.cell(r, COL[name]).protection.locked is True
    # input cells look different from computed ones
    price_fill = ws.cell(items[0], COL["unit price (USD)"]).fill.fgColor.rgb
    total_fill = ws.cell(items[0], COL["extended price (USD)"]).fill.fgColor.rgb
    assert price_fill != total_fill
    # every input cell is covered by a "decimal >= 0" validation
    validated = set()
    for dv in ws.data_validations.dataValidation:
        assert dv.type == "decimal" and dv.operator == "greaterThanOrEqual"
        assert float(dv.formula1) == 0
        for rng in dv.sqref.ranges:
            for row in ws[rng.coord] if ":" in rng.coord else [[ws[rng.coord]]]:
                for cell in row:
                    validated.add(cell.coordinate)
    inputs = {ws.cell(r, COL["unit price (USD)"]).coordinate for r in items}
    inputs.add(SPARES_FRACTION_CELL.replace("$", ""))
    assert inputs <= validated


def test_bom_numeric_headers_carry_units(bom_path):
    unit_pattern = re.compile(r"\((USD|count|unit as listed)\)$")
    numeric_by_sheet = {
        "by_kit": [c for c in BY_KIT_COLUMNS if "quantity" in c or "price" in c
                   or c.startswith(("kits", "spares"))],
        "by_component": [c for c in BY_COMPONENT_COLUMNS if "(" in c or "quantity" in c],
        "by_depot": [c for c in BY_DEPOT_COLUMNS if "quantity" in c or "kits" in c],
    }
    header_rows = {"by_kit": BY_KIT_HEADER_ROW, "by_component": 0, "by_depot": 0}
    for sheet, columns in numeric_by_sheet.items():
        frame = pd.read_excel(bom_path, sheet_name=sheet, header=header_rows[sheet])
        assert len(columns) >= 2
        for name in columns:
            assert name in frame.columns
            assert unit_pattern.search(name), f"{sheet}: header '{name}' has no unit"
            assert pd.api.types.is_numeric_dtype(frame[name]), f"{sheet}: '{name}' not numeric"


def test_bom_reads_back_with_pandas_as_numbers(bom_path):
    frame = pd.read_excel(bom_path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    items = frame[frame["line"] == "item"]
    assert len(items) == len(_bom_lines())
    for name in ("spares (unit as listed)", "total quantity (unit as listed)",
                 "extended price (USD)"):
        assert items[name].notna().all()
    assert items["extended price (USD)"].to_numpy() == pytest.approx(
        (items["total quantity (unit as listed)"] * items["unit price (USD)"]).to_numpy())


def test_bom_by_component_sums_by_kit_per_component(bom_path):
    by_kit = pd.read_excel(bom_path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    items = by_kit[by_kit["line"] == "item"]
    by_component = pd.read_excel(bom_path, sheet_name="by_component")
    rows = by_component[by_component["line"] == "item"].set_index("component_id")
    expected = items.groupby("component_id")[["total quantity (unit as listed)",
                                              "extended price (USD)"]].sum()
    assert set(rows.index) == set(expected.index) == {"PV-050", "BAT-LFP-12-30", "CAB-4",
                                                      "LED-3W", "PV-400"}
    for cid in expected.index:
        assert rows.loc[cid, "total quantity incl. spares (unit as listed)"] == \
            pytest.approx(expected.loc[cid, "total quantity (unit as listed)"])
        assert rows.loc[cid, "extended price (USD)"] == \
            pytest.approx(expected.loc[cid, "extended price (USD)"])
    assert rows.loc["CAB-4", "used in kit types (count)"] == 2
    grand_component = by_component.loc[by_component["line"] == "grand total", "extended price (USD)"]
    grand_kit = by_kit.loc[by_kit["line"] == "grand total", "extended price (USD)"]
    assert float(grand_component.iloc[0]) == pytest.approx(float(grand_kit.iloc[0]))
    formulas, _ = _books(bom_path)
    assert formulas["by_component"]["F2"].value.startswith("=SUMPRODUCT(EXACT(by_kit!")


def test_bom_by_depot_gives_kits_and_quantities_per_depot(bom_path):
    frame = pd.read_excel(bom_path, sheet_name="by_depot")
    assert list(frame.columns) == list(BY_DEPOT_COLUMNS)
    frame["depot"] = frame["depot"].map(restore_text)
    kits = frame.groupby(["depot", "kit_id"])["kits at depot (count)"].first().to_dict()
    assert kits == {("North", "SHS-A"): 30, ("@South", "SHS-A"): 7,
                    ("North", "SHS-B"): 10, ("North", "MG-BLK"): 4}
    assert frame["quantity at depot excl. spares (unit as listed)"].to_numpy() == pytest.approx(
        (frame["quantity per kit (unit as listed)"] * frame["kits at depot (count)"]).to_numpy())
    north_cable = frame[(frame["depot"] == "North") & (frame["component_id"] == "CAB-4")]
    assert north_cable["quantity at depot excl. spares (unit as listed)"].sum() == \
        pytest.approx(12.5 * 30 + 80 * 4)


def test_bom_carries_assumptions_and_safety_cautions(bom_path):
    assumptions = pd.read_excel(bom_path, sheet_name="assumptions")
    assert list(assumptions.columns) == ["key", "value", "unit"]
    table = assumptions.set_index("key")
    assert table.loc["horizon", "value"] == 20 and table.loc["horizon", "unit"] == "years"
    assert table.loc["spares fraction", "value"] == SPARES
    cautions = pd.read_excel(bom_path, sheet_name="cautions")["caution"].tolist()
    assert cautions[: len(DEFAULT_CAUTIONS)] == list(DEFAULT_CAUTIONS)
    assert "Demo prices are invented." in cautions
    text = " ".join(cautions).lower()
    for word in ("arc", "fus", "cable", "ventilat", "local codes", "licensed"):
        assert word in text


def test_bom_rejects_kit_counts_for_kits_without_lines(tmp_path):
    counts = pd.concat([_kit_counts(), pd.DataFrame(
        [{"scheme": "shs", "kit_id": "GHOST", "depot": "North", "kits": 3}])])
    with pytest.raises(ValueError, match="GHOST"):
        write_bill_of_materials(tmp_path / "b.xlsx", _bom_lines(), counts, spares_fraction=0.05)
    with pytest.raises(ValueError, match="spares_fraction"):
        write_bill_of_materials(tmp_path / "b.xlsx", _bom_lines(), _kit_counts(),
                                spares_fraction=-0.1)


def test_bom_with_no_lines_writes_zero_totals(tmp_path):
    path = tmp_path / "empty.xlsx"
    write_bill_of_materials(path, _bom_lines().iloc[0:0], _kit_counts().iloc[0:0],
                            spares_fraction=0.05)
    frame = pd.read_excel(path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    assert (frame["line"] == "item").sum() == 0
    assert frame.loc[frame["line"] == "grand total", "extended price (USD)"].tolist() == [0]
    component = pd.read_excel(path, sheet_name="by_component")
    assert component.loc[component["line"] == "grand total", "extended price (USD)"].tolist() == [0]


@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice not installed")
def test_bom_formulas_recalculate_to_the_stored_values(bom_path, tmp_path):
    """A spreadsheet program that recalculates gets the numbers we stored."""
    formulas, values = _books(bom_path)
    stripped = tmp_path / "stripped.xlsx"
    formulas.save(stripped)  # openpyxl drops stored values: the program must compute them
    out = tmp_path / "out"
    subprocess.run(["soffice", "--headless", "--convert-to", "xlsx", "--outdir", str(out),
                    str(stripped)], check=True, capture_output=True, timeout=180)
    recalculated = openpyxl.load_workbook(out / "stripped.xlsx", data_only=True)
    for name in ("by_kit", "by_component"):
        for row_f, row_v in zip(formulas[name].iter_rows(), values[name].iter_rows()):
            for cf, cv in zip(row_f, row_v):
                if cf.data_type == "f":
                    assert recalculated[name][cf.coordinate].value == pytest.approx(cv.value)


# --------------------------------------------------------------------------
# Deployment summary (xlsx and html)
# --------------------------------------------------------------------------

def _summary_tables():
    sites = pd.DataFrame({
        "site_id": ["S1", "S2", "S3"],
        "site_name": ["<script>alert('x')</script>", "=cmd|' /C calc'!A0", "Kijiji"],
        "district": ["East", "East", "West"],
        "kit": ["SHS-A", "SHS-B", "MG-BLK x 2"],
        "capex (USD)": [180.5, 310.25, 41250.0],
        "unmet energy fraction (-)": [0.012, 0.004, float("nan")],
        "households (count)": [1, 1, 120],
    })
    program = pd.DataFrame({
        "metric": ["sites", "program capex", "households served", "note"],
        "value": [3, 1234567.891, 122, "@risk note"],
        "unit": ["count", "USD", "count", ""],
    })
    by_district = pd.DataFrame({"district": ["East", "West"], "sites (count)": [2, 1],
                                "capex (USD)": [490.75, 41250.0],
                                "PV (kWp)": [0.15, 10.4], "LCOE (USD/kWh)": [0.61, float("inf")]})
    return {
        "program": program,
        "by_district": by_district,
        "by_depot": pd.DataFrame(),
        "sites": sites,
        "kit_types": pd.DataFrame({"kit": ["SHS-A", "SHS-B"], "PV (kWp)": [0.05, 0.1],
                                   "battery (kWh)": [0.384, 0.768]}),
        "comparisons": pd.DataFrame(columns=["plan", "NPV (USD)"]),
    }


def test_deployment_summary_round_trips_through_pandas(tmp_path):
    path = tmp_path / "deployment_summary.xlsx"
    tables = _summary_tables()
    write_deployment_summary(path, tables, warnings=["3 sites use default temperatures"],
                             assumptions={"discount rate": (0.08, "1/year")},
                             cautions=["Check ground conditions."])
    sheets = pd.read_excel(path, sheet_name=None)
    assert list(sheets) == ["program", "by_district", "by_depot", "sites", "kit_types",
                            "comparisons", "warnings", "assumptions", "cautions"]
    back = sheets["sites"]
    assert list(back.columns) == list(tables["sites"].columns)
    assert back["capex (USD)"].to_numpy() == pytest.approx(tables["sites"]["capex (USD)"].to_numpy())
    assert back["households (count)"].tolist() == [1, 1, 120]
    assert math.isnan(back["unmet energy fraction (-)"].iloc[2])  # NaN written as blank
    assert back["site_name"].iloc[0] == "<script>alert('x')</script>"
    assert restore_text(back["site_name"].iloc[1]) == "=cmd|' /C calc'!A0"
    assert back["site_name"].iloc[1].startswith("'")
    district = sheets["by_district"]
    assert district["capex (USD)"].tolist() == pytest.approx([490.75, 41250.0])
    assert math.isnan(district["LCOE (USD/kWh)"].iloc[1])  # inf written as blank
    program = sheets["program"]
    assert list(program.columns) == ["metric", "value", "unit"]
    assert float(program["value"].iloc[1]) == pytest.approx(1234567.891)
    assert program["value"].iloc[3] == "'@risk note"
    assert sheets["by_depot"].empty
    assert list(sheets["comparisons"].columns) == ["plan", "NPV (USD)"]
    assert len(sheets["comparisons"]) == 0
    assert sheets["warnings"]["warning"].tolist() == ["3 sites use default temperatures"]
    assert sheets["assumptions"].set_index("key").loc["discount rate", "unit"] == "1/year"
    assert "Check ground conditions." in sheets["cautions"]["caution"].tolist()

    book = openpyxl.load_workbook(path)
    assert book["sites"].freeze_panes == "B2"
    assert book["by_district"].freeze_panes == "A2"
    assert book["sites"]["B3"].data_type != "f"
    assert book["sites"].column_dimensions["B"].width >= len("site_name")
    # numbers carry a thousands separator format
    assert "#,##0" in book["by_district"]["C2"].number_format


@pytest.fixture
def html_text(tmp_path):
    rng = np.random.default_rng(7)
    figures = {
        "site map": site_map([36.1, 36.4, 36.9], [-1.2, -1.5, -0.9],
                             ["SHS-A", "SHS-B", "<b>odd</b>"], "Sites"),
        "reliability": reliability_histogram(rng.uniform(0, 0.08, 50), 0.05),
    }
    path = tmp_path / "deployment_summary.html"
    write_deployment_html(path, _summary_tables(), figures, title="Plan <for> East & West",
                          warnings=["<img src=x onerror=alert(1)> in a site file"],
                          assumptions={"discount rate": (0.08, "1/year")},
                          cautions=["Check ground conditions."])
    return path.read_text(encoding="utf-8")


def test_html_is_self_contained(html_text):
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*(https?:)?//""", html_text, re.I)
    assert "http://" not in html_text and "https://" not in html_text
    assert "<link" not in html_text and "@import" not in html_text
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html_text)
    assert len(images) == 2
    for data in images:
        assert base64.b64decode(data)[:8] == b"\x89PNG\r\n\x1a\n"
    assert "<style>" in html_text and "@media print" in html_text


def test_html_escapes_user_text(html_text):
    assert "<script>" not in html_text
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in html_text or \
        "&lt;script&gt;alert('x')&lt;/script&gt;" in html_text
    assert "<img src=x" not in html_text and "&lt;img src=x onerror=alert(1)&gt;" in html_text
    assert "<title>Plan &lt;for&gt; East &amp; West</title>" in html_text


def test_html_has_sections_numbers_and_cautions(html_text):
    positions = [html_text.index(f'<section id="{key}">') for key in (
        "headline", "figures", "by_district", "by_depot", "kit_types", "comparisons",
        "warnings", "sites", "assumptions", "cautions")]
    assert positions == sorted(positions)
    assert "1,234,568" in html_text      # headline total with thousands separator
    assert "41,250" in html_text         # table number with thousands separator
    assert "capex (USD)" in html_text    # units kept in headers
    for caution in DEFAULT_CAUTIONS:
        assert caution.replace("'", "&#x27;") in html_text
    assert "Check ground conditions." in html_text


# --------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------

def test_plots_return_standalone_figures_without_pyplot_state():
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    hours = np.arange(8760)
    soc = 0.6 + 0.3 * np.sin(hours / 24.0)
    disconnected = (hours % 1000) < 12
    figures = [
        site_map([30.0, 30.5], [-1.0, -1.5], ["A", None], "t"),
        reliability_histogram([0.0, 0.02, 0.07], 0.05),
        soc_trace(hours, soc, disconnected, "site S1"),
        cost_by_kit_type(["A", "B"], [100.0, 250.0], [160.0, 400.0]),
    ]
    assert plt.get_fignums() == before
    for fig in figures:
        assert isinstance(fig, Figure)

    legend = [t.get_text() for t in figures[0].axes[0].get_legend().get_texts()]
    assert sorted(legend) == ["A (1)", "no kit (1)"]
    target_lines = [ln for ln in figures[1].axes[0].lines if list(ln.get_xdata()) == [0.05, 0.05]]
    assert len(target_lines) == 1
    assert "1 of 3 sites above" in figures[1].axes[0].get_legend().get_texts()[0].get_text()
    soc_ax = figures[2].axes[0]
    assert soc_ax.get_ylabel() == "state of charge (% of capacity)"
    assert len(soc_ax.collections) == 1  # the shaded disconnect hours
    assert f"{int(disconnected.sum())} h" in soc_ax.get_legend().get_texts()[1].get_text()
    heights = [p.get_height() for p in figures[3].axes[0].patches]
    assert heights == [100.0, 250.0, 160.0, 400.0]
    assert figures[3].axes[0].get_ylabel() == "cost (USD)"


# --------------------------------------------------------------------------
# GeoPackage
# --------------------------------------------------------------------------

def _sites_gdf(crs="EPSG:4326"):
    frame = pd.DataFrame({
        "site_id": ["S1", "S2", "S3"],
        "kit": ["SHS-A", "SHS-B", None],
        "capex (USD)": [180.5, 310.25, 41250.0],
        "households_t1": [3, 0, 40],
        "mixed": pd.Series([1, "two", None], dtype=object),
    })
    geometry = [Point(36.1, -1.2), Point(36.4, -1.5), Point(36.9, -0.9)]
    gdf = gpd.GeoDataFrame(frame, geometry=geometry, crs="EPSG:4326")
    return gdf if crs == "EPSG:4326" else gdf.to_crs(crs)


def test_gpkg_reads_back_with_layers_rows_and_crs(tmp_path):
    path = tmp_path / "sites.gpkg"
    depots = gpd.GeoDataFrame({"depot": ["North"]}, geometry=[Point(36.0, -1.0)], crs="EPSG:4326")
    write_sites_gpkg(path, _sites_gdf(), depots)
    assert sorted(pyogrio.list_layers(path)[:, 0].tolist()) == ["depots", "sites"]
    back = gpd.read_file(path, layer="sites")
    assert back.crs.to_epsg() == 4326
    assert len(back) == 3 and back["site_id"].tolist() == ["S1", "S2", "S3"]
    assert pd.api.types.is_float_dtype(back["capex (USD)"])
    assert pd.api.types.is_integer_dtype(back["households_t1"])
    assert back["mixed"].iloc[0] == "1" and back["mixed"].iloc[1] == "two"
    assert back["mixed"].isna().iloc[2]
    assert back.geometry.x.tolist() == pytest.approx([36.1, 36.4, 36.9])
    assert gpd.read_file(path, layer="depots")["depot"].tolist() == ["North"]


def test_gpkg_reprojects_to_wgs84_replaces_old_file_and_needs_a_crs(tmp_path):
    path = tmp_path / "sites.gpkg"
    write_sites_gpkg(path, _sites_gdf(), gpd.GeoDataFrame(
        {"depot": ["North"]}, geometry=[Point(36.0, -1.0)], crs="EPSG:4326"))
    write_sites_gpkg(path, _sites_gdf("EPSG:32737"))  # UTM 37S in, WGS84 out
    assert pyogrio.list_layers(path)[:, 0].tolist() == ["sites"]
    back = gpd.read_file(path, layer="sites")
    assert back.crs.to_epsg() == 4326
    assert back.geometry.y.tolist() == pytest.approx([-1.2, -1.5, -0.9], abs=1e-7)
    no_crs = _sites_gdf().set_crs(None, allow_override=True)
    with pytest.raises(ValueError, match="CRS"):
        write_sites_gpkg(tmp_path / "x.gpkg", no_crs)
