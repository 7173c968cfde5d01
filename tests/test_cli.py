"""The whole run through the command line, on a small slice of the demo program."""

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import openpyxl
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "sites" / "demo_sites.csv"


def run_fleet(*args, cwd=None):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "fleet", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, env=env, timeout=900)


@pytest.fixture(scope="module")
def small_program(tmp_path_factory):
    d = tmp_path_factory.mktemp("prog")
    demo = pd.read_csv(DEMO)
    pick = pd.concat([demo[(demo.site_id.str[:2] == r) & (demo.scheme == s)].head(n)
                      for r in ("EQ", "SA") for s, n in (("shs", 3), ("minigrid", 1))])
    pick.loc[pick.index[0], "site_name"] = "=HYPERLINK(\"x\")"  # user text must never become a formula
    sites = d / "sites.csv"
    pick.to_csv(sites, index=False)
    cfg = d / "program.toml"
    cfg.write_text("[program]\nweather_years = 2\n\n[catalogue]\nmax_kit_types_shs = 2\nmax_kit_types_minigrid = 1\n")
    out = d / "run"
    res = run_fleet("plan", sites, "--config", cfg, "--out", out, "--quiet")
    return {"sites": sites, "config": cfg, "out": out, "result": res, "table": pick}


def test_plan_writes_all_five_outputs(small_program):
    res = small_program["result"]
    assert res.returncode == 0, res.stderr
    for name in ("bill_of_materials.xlsx", "deployment_summary.xlsx", "deployment_summary.html", "sites.gpkg", "run.json"):
        assert (small_program["out"] / name).is_file()
        assert str(small_program["out"] / name) in res.stdout
    assert not any(p.name.startswith(".") for p in small_program["out"].parent.iterdir())


def test_bill_of_materials_totals_equal_their_parts(small_program):
    from fleet.report.excel import BY_KIT_HEADER_ROW
    path = small_program["out"] / "bill_of_materials.xlsx"
    df = pd.read_excel(path, sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    items = df[df.line == "item"]
    ext = "extended price (USD)"
    assert np.allclose(items[ext], items["total quantity (unit as listed)"] * items["unit price (USD)"])
    for kit, g in items.groupby("kit_id"):
        sub = df[(df.line == "kit subtotal") & (df.kit_id == kit)][ext]
        assert sub.iloc[0] == pytest.approx(g[ext].sum())
    assert df[df.line == "grand total"][ext].iloc[0] == pytest.approx(items[ext].sum())
    wb = openpyxl.load_workbook(path)
    ws = wb["by_kit"]
    assert any(c.data_type == "f" for row in ws.iter_rows() for c in row)  # live formulas are there


def test_every_site_has_a_kit_or_a_reason(small_program):
    sites = pd.read_excel(small_program["out"] / "deployment_summary.xlsx", sheet_name="sites")
    assert len(sites) == len(small_program["table"])
    has_kit = sites["kits"].fillna("").astype(str) != ""
    has_reason = sites["not served (reason)"].fillna("").astype(str) != ""
    assert (has_kit | has_reason).all()


def test_program_totals_equal_the_sum_over_sites(small_program):
    book = pd.read_excel(small_program["out"] / "deployment_summary.xlsx", sheet_name=None)
    prog = book["program"].set_index("metric")["value"]
    sites = book["sites"]
    assert float(prog["capex"]) == pytest.approx(sites["capex (USD)"].sum(), rel=1e-9)
    assert float(prog["lifecycle cost (net present)"]) == pytest.approx(sites["lifecycle cost (USD)"].sum(), rel=1e-9)
    assert float(prog["array"]) == pytest.approx(sites["array (kWp)"].sum(), rel=1e-9)
    dist = book["by_district"]
    assert dist["capex (USD)"].sum() == pytest.approx(sites["capex (USD)"].sum(), rel=1e-9)
    assert dist["sites"].sum() == len(sites)


def test_bom_total_equals_program_capex(small_program):
    from fleet.report.excel import BY_KIT_HEADER_ROW
    bom = pd.read_excel(small_program["out"] / "bill_of_materials.xlsx", sheet_name="by_kit", header=BY_KIT_HEADER_ROW)
    items = bom[bom.line == "item"]
    no_spares = (items["quantity per kit (unit as listed)"] * items["kits (count)"] * items["unit price (USD)"]).sum()
    prog = pd.read_excel(small_program["out"] / "deployment_summary.xlsx", sheet_name="program").set_index("metric")["value"]
    assert no_spares == pytest.approx(float(prog["capex"]), rel=1e-9)


def test_user_text_is_never_a_formula(small_program):
    wb = openpyxl.load_workbook(small_program["out"] / "deployment_summary.xlsx")
    ws = wb["sites"]
    cells = [c for row in ws.iter_rows() for c in row if isinstance(c.value, str) and "HYPERLINK" in c.value]
    assert cells and all(c.data_type == "s" for c in cells)


def test_site_layer_is_a_geopackage_with_plan_columns(small_program):
    layer = gpd.read_file(small_program["out"] / "sites.gpkg", layer="sites")
    assert len(layer) == len(small_program["table"])
    assert layer.crs.to_epsg() == 4326
    assert {"plan_kits", "plan_capex_usd", "plan_unmet_fraction_design"} <= set(layer.columns)
    assert "survey_round" in layer.columns  # unknown columns carried through


def test_run_record_names_inputs_with_hashes(small_program):
    rec = json.loads((small_program["out"] / "run.json").read_text())
    assert set(rec["inputs"]) == {"sites", "components", "config"}
    assert all(len(v["sha256"]) == 64 for v in rec["inputs"].values())
    assert rec["seed"] == 20261201
    assert rec["catalogue"]["shs"]["status"] in ("Optimal", "time limit reached, best plan found")


def test_an_existing_run_is_not_overwritten(small_program):
    before = {p.name: p.stat().st_mtime_ns for p in small_program["out"].iterdir()}
    res = run_fleet("plan", small_program["sites"], "--config", small_program["config"], "--out", small_program["out"])
    assert res.returncode == 2
    assert "already holds a run" in res.stderr
    assert {p.name: p.stat().st_mtime_ns for p in small_program["out"].iterdir()} == before


def test_a_failed_run_leaves_the_earlier_outputs_intact(small_program, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("site_id,latitude,longitude,scheme\nA,95,30,shs\n")
    before = {p.name: p.stat().st_mtime_ns for p in small_program["out"].iterdir()}
    res = run_fleet("plan", bad, "--out", small_program["out"], "--overwrite")
    assert res.returncode == 2
    assert {p.name: p.stat().st_mtime_ns for p in small_program["out"].iterdir()} == before


BAD_INPUTS = {
    "missing column": ("site_id,latitude,scheme,households_t1\nA,1.0,shs,3\n", ["column 'longitude'"]),
    "duplicate site_id": ("site_id,latitude,longitude,scheme,households_t1\nA,1,30,shs,3\nA,1.1,30,shs,3\n",
                          ["row 3", "column 'site_id'"]),
    "latitude out of range": ("site_id,latitude,longitude,scheme,households_t1\nA,95,30,shs,3\n",
                              ["row 2", "column 'latitude'"]),
    "non-numeric households": ("site_id,latitude,longitude,scheme,households_t1\nA,1,30,shs,abc\n",
                               ["row 2", "column 'households_t1'"]),
    "empty file": ("", ["empty"]),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_input_exits_2_naming_file_row_and_column(case, tmp_path):
    text, expected = BAD_INPUTS[case]
    f = tmp_path / "sites.csv"
    f.write_text(text)
    res = run_fleet("plan", f, "--out", tmp_path / "run")
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    assert str(f) in res.stderr
    for e in expected:
        assert e in res.stderr.lower() or e in res.stderr
    assert not (tmp_path / "run").exists()


def test_all_problems_are_reported_at_once(tmp_path):
    f = tmp_path / "sites.csv"
    f.write_text("site_id,latitude,longitude,scheme,households_t1\nA,95,30,shs,3\nA,1,30,grid,x\n")
    res = run_fleet("plan", f, "--out", tmp_path / "run")
    assert res.returncode == 2
    for e in ("column 'latitude'", "column 'scheme'", "column 'households_t1'", "column 'site_id'"):
        assert e in res.stderr


def test_help_explains_inputs_and_units():
    res = run_fleet("plan", "--help")
    assert res.returncode == 0
    for word in ("households_t1", "WGS84", "kWh/day", "bill_of_materials.xlsx", "--components", "exit status"):
        assert word in res.stdout


def test_demand_command_summarises_each_site(tmp_path):
    csv, png = tmp_path / "demand.csv", tmp_path / "demand.png"
    res = run_fleet("demand", DEMO, "--csv", csv, "--plot", png)
    assert res.returncode == 0, res.stderr
    table = pd.read_csv(csv)
    demo = pd.read_csv(DEMO)
    assert len(table) == len(demo)
    assert (table["design-year demand (kWh/day)"] >= table["first-year demand (kWh/day)"] * (1 - 1e-6)).all()
    assert ((table["load factor (mean/peak)"] > 0) & (table["load factor (mean/peak)"] <= 1)).all()
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_a_sites_weather_file_replaces_the_embedded_resource(tmp_path):
    # source: pvlib's bundled measured TMY3 file for Greensboro, NC (723170TYA.CSV); with one weather
    # year the plan's year is the measured year itself, so the site's mean daily GHI is the file's
    import shutil

    import pvlib
    src = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"
    shutil.copy(src, tmp_path / "station.csv")
    data, meta = pvlib.iotools.read_tmy3(src, map_variables=True)
    ghi = data["ghi"].to_numpy()[: 365 * 24]
    (tmp_path / "sites.csv").write_text(
        "site_id,latitude,longitude,scheme,households_t1,households_t2,weather_file\n"
        f"GB-1,{meta['latitude']},{meta['longitude']},shs,4,2,station.csv\n")
    (tmp_path / "p.toml").write_text("[program]\nweather_years = 1\n")
    res = run_fleet("plan", tmp_path / "sites.csv", "--config", tmp_path / "p.toml", "--out", tmp_path / "run", "--quiet")
    assert res.returncode == 0, res.stderr
    sites = pd.read_excel(tmp_path / "run" / "deployment_summary.xlsx", sheet_name="sites")
    assert sites["GHI (kWh/m2/day)"].iloc[0] == pytest.approx(ghi.sum() / 1000 / 365, rel=0.01)


def test_a_missing_weather_file_is_reported_by_row(tmp_path):
    (tmp_path / "sites.csv").write_text(
        "site_id,latitude,longitude,scheme,households_t1,weather_file\nA,1,30,shs,4,nowhere.epw\n")
    res = run_fleet("plan", tmp_path / "sites.csv", "--out", tmp_path / "run")
    assert res.returncode == 2
    assert "Traceback" not in res.stderr and "nowhere.epw" in res.stderr


def test_resource_command_reports_a_point():
    res = run_fleet("resource", "13.5", "2.1", "--years", "2", "--json")
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    assert len(json.dumps(out)) > 100
    off = run_fleet("resource", "0", "-150")
    assert off.returncode == 2 and "Traceback" not in off.stderr


def test_a_monthly_resource_table_sets_the_sites_irradiation(tmp_path):
    # the table's monthly means come back as the site's mean daily GHI (weighted by days per month)
    days = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]
    ghi = [4.0, 4.5, 5.0, 5.5, 6.0, 6.0, 5.5, 5.0, 5.0, 4.5, 4.0, 4.0]
    rows = "\n".join(f"A,{m + 1},{g}" for m, g in enumerate(ghi))
    (tmp_path / "monthly.csv").write_text("site_id,month,ghi_kwh_m2_day\n" + rows + "\n")
    (tmp_path / "sites.csv").write_text("site_id,latitude,longitude,scheme,households_t1\nA,13.5,2.1,shs,5\n")
    (tmp_path / "p.toml").write_text("[program]\nweather_years = 3\n")
    res = run_fleet("plan", tmp_path / "sites.csv", "--config", tmp_path / "p.toml", "--monthly-resource",
                    tmp_path / "monthly.csv", "--out", tmp_path / "run", "--quiet")
    assert res.returncode == 0, res.stderr
    sites = pd.read_excel(tmp_path / "run" / "deployment_summary.xlsx", sheet_name="sites")
    expected = sum(d * g for d, g in zip(days, ghi)) / 365
    assert sites["GHI (kWh/m2/day)"].iloc[0] == pytest.approx(expected, rel=0.04)


def test_geopackage_round_trips_the_site_tables_own_columns_and_has_a_layer_per_depot(small_program):
    import pyogrio

    out = small_program["out"] / "sites.gpkg"
    table = small_program["table"].reset_index(drop=True)
    layer = gpd.read_file(out, layer="sites")
    for col in table.columns:
        got, want = layer[col], table[col]
        if pd.api.types.is_numeric_dtype(want):
            assert np.allclose(got.to_numpy(float), want.to_numpy(float), equal_nan=True), col
        else:
            assert got.fillna("").astype(str).tolist() == want.fillna("").astype(str).tolist(), col
    layers = set(pyogrio.list_layers(out)[:, 0])
    for depot, part in table.groupby("depot"):
        name = "depot_" + "".join(c if c.isalnum() or c == "_" else "_" for c in depot).strip("_").lower()
        assert name in layers
        assert sorted(gpd.read_file(out, layer=name).site_id) == sorted(part.site_id)


def test_bill_of_materials_has_kit_specifications_with_controller_settings(small_program):
    book = openpyxl.load_workbook(small_program["out"] / "bill_of_materials.xlsx")
    ws = book["kit_specs"]
    rows = {r[0].value: [c.value for c in r[1:]] for r in ws.iter_rows(min_row=2)}
    kits_used = [c.value for c in ws[1][1:]]
    assert kits_used
    volts = rows["system voltage (V)"]
    chem = rows["chemistry"]
    for v, c, lvd, lvr, absorb, flt in zip(volts, chem, rows["low-voltage disconnect at 25 degC (V)"],
                                          rows["low-voltage reconnect (V)"], rows["absorption voltage at 25 degC (V)"],
                                          rows["float voltage at 25 degC (V)"]):
        per_12 = 12.0 / v
        # disconnect below reconnect below float below absorption (the hysteresis of every controller)
        assert lvd < lvr < flt <= absorb
        if c == "lead_acid":
            # common practice (IEEE 1013 / SAND87-7023 set-point ranges, from memory): 12 V lead-acid
            # disconnect 11.4-12.0 V, float 13.2-13.8 V, absorption 14.1-14.8 V at 25 degC
            assert 11.0 <= lvd * per_12 <= 12.2 and 13.2 <= flt * per_12 <= 13.8 and 14.1 <= absorb * per_12 <= 14.8
        else:
            # common practice (LiFePO4, 4 cells in series per 12.8 V, from memory): charge 3.45-3.65 V/cell,
            # disconnect 2.8-3.25 V/cell
            cells = v / 12 * 4
            assert 3.4 <= absorb / cells <= 3.65 and 2.8 <= lvd / cells <= 3.25
    assert all(x is None or x > 0 for x in rows["battery fuse (controller circuit) (A)"])


def test_html_report_renders_in_headless_chromium(small_program):
    # the report is opened the way a reader would: a browser with no network
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    driver_bin = shutil.which("chromedriver")
    if not (chromium and driver_bin):
        pytest.skip("Chromium is installed by .ci/run (apt-get install chromium chromium-driver)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = chromium
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 "--window-size=1280,2000"):
        opts.add_argument(flag)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(driver_bin), options=opts)
    try:
        driver.get((small_program["out"] / "deployment_summary.html").as_uri())
        state = driver.execute_script("""
            const imgs = Array.from(document.images);
            return {ready: document.readyState, title: document.title,
                    images: imgs.map(i => ({alt: i.alt, ok: i.complete && i.naturalWidth > 0, w: i.naturalWidth})),
                    sections: Array.from(document.querySelectorAll('section h2')).map(h => h.textContent),
                    width: document.documentElement.scrollWidth};
        """)
        driver.save_screenshot(str(small_program["out"].parent / "report_screenshot.png"))
        logs = driver.get_log("browser")
    finally:
        driver.quit()
    assert state["ready"] == "complete"
    errors = [e for e in logs if e["level"] in ("SEVERE", "ERROR")]
    assert errors == []
    alts = [i["alt"] for i in state["images"]]
    assert all(i["ok"] for i in state["images"]), state["images"]
    assert any("kit type" in a and "Sites" in a for a in alts)  # the map
    assert any("Monthly energy balance" in a for a in alts)
    assert any("Cost against the number of kit types" in a for a in alts)
    assert any("State of charge" in a for a in alts)
    assert len(alts) >= 6
    assert "Cautions" in state["sections"]


def _price_cells(path):
    """(sheet, workbook, {row: (kit_id, component_kind, component_id, price cell)}) of the item lines."""
    from fleet.report.excel import BY_KIT_COLUMNS, BY_KIT_HEADER_ROW

    book = openpyxl.load_workbook(path)
    ws = book["by_kit"]
    col = {name: i + 1 for i, name in enumerate(BY_KIT_COLUMNS)}
    lines = {}
    for r in range(BY_KIT_HEADER_ROW + 2, ws.max_row + 1):
        if ws.cell(r, col["line"]).value == "item":
            lines[r] = (ws.cell(r, col["kit_id"]).value, ws.cell(r, col["component_kind"]).value,
                        ws.cell(r, col["component_id"]).value, ws.cell(r, col["unit price (USD)"]))
    return ws, book, lines


def test_reprice_with_unchanged_prices_gives_the_same_plan(small_program, tmp_path):
    out = tmp_path / "same"
    res = run_fleet("reprice", small_program["out"] / "bill_of_materials.xlsx", "--out", out, "--quiet")
    assert res.returncode == 0, res.stderr
    a = json.loads((small_program["out"] / "run.json").read_text())["catalogue"]
    b = json.loads((out / "run.json").read_text())["catalogue"]
    for scheme in ("shs", "minigrid"):
        assert a[scheme]["kit_types"] == b[scheme]["kit_types"]
        assert a[scheme]["objective_usd"] == pytest.approx(b[scheme]["objective_usd"], rel=1e-9)


def test_reprice_round_trip_changes_the_plan_when_prices_change(small_program, tmp_path):
    book_path = tmp_path / "bill_of_materials.xlsx"
    run = tmp_path / "run"
    shutil.copytree(small_program["out"], run)
    book_path = run / "bill_of_materials.xlsx"
    ws, book, lines = _price_cells(book_path)
    before = json.loads((run / "run.json").read_text())["catalogue"]["shs"]["kit_types"]
    # the batteries of the chosen SHS kits become ten times dearer (a real price shock, accepted on purpose)
    hit = {cid for kid, kind, cid, _ in lines.values() if kid in before and kind == "battery"}
    for kid, kind, cid, cell in lines.values():
        if cid in hit:
            cell.value = float(cell.value) * 10.0
    book.save(book_path)
    out = tmp_path / "repriced"
    res = run_fleet("reprice", book_path, "--out", out, "--quiet", "--accept-large-changes")
    assert res.returncode == 0, res.stderr
    after = json.loads((out / "run.json").read_text())
    assert after["repriced_from"] == str(run.resolve())
    changes = pd.read_excel(out / "deployment_summary.xlsx", sheet_name="changes")
    priced = changes[changes.what == "unit price (USD)"]
    assert {i.split(":")[0] for i in priced["item"]} == hit
    assert (priced.after / priced.before).round(9).eq(10.0).all()
    # the plan moved: other kit types, or the same types given to fewer units
    shs = changes[changes.what.str.startswith("shs: units given another")]
    assert after["catalogue"]["shs"]["kit_types"] != before or int(shs.after.iloc[0]) > 0
    assert after["catalogue"]["shs"]["objective_usd"] > json.loads((run / "run.json").read_text())["catalogue"]["shs"]["objective_usd"]
    # the new bill of materials carries the new prices
    _, _, new_lines = _price_cells(out / "bill_of_materials.xlsx")
    old_price = {cid: float(c.value) / 10.0 for _, _, cid, c in lines.values() if cid in hit}
    for _, _, cid, c in new_lines.values():
        if cid in old_price:
            assert float(c.value) == pytest.approx(10.0 * old_price[cid])


def test_reprice_lists_bad_price_cells_by_sheet_and_cell_and_writes_nothing(small_program, tmp_path):
    run = tmp_path / "run"
    shutil.copytree(small_program["out"], run)
    book_path = run / "bill_of_materials.xlsx"
    ws, book, lines = _price_cells(book_path)
    rows = sorted(lines)
    cells = [lines[r][3] for r in rows[:4]]
    cells[0].value = "1,200"   # text, not a number
    cells[1].value = -5.0      # negative
    cells[2].value = None      # missing
    cells[3].value = float(cells[3].value or 1.0) * 50.0  # an implausible jump
    book.save(book_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    res = run_fleet("reprice", book_path, "--out", tmp_path / "never", "--quiet")
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    for c in cells:
        assert f"cell {c.coordinate}" in res.stderr
        assert f"row {c.row}" in res.stderr
    assert "sheet by_kit" in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no new run folder
