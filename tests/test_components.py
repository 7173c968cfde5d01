"""Component library: the optional cable and fuse tables, the optional inverter surge column."""

import shutil

import pandas as pd
import pytest

from fleet import kits as K
from fleet.components import OPTIONAL_KINDS, default_library_path, read_library
from fleet.errors import InputError


@pytest.fixture
def lib_dir(tmp_path):
    d = tmp_path / "lib"
    shutil.copytree(default_library_path(), d)
    return d


def test_demo_library_prices_cables_and_fuses():
    lib = read_library()
    assert lib.cables is not None and lib.fuses is not None and lib.notes == ()
    # the demo stocks every cross-section fleet.cables can choose (IEC 60228 sizes)
    assert sorted(lib.cables.section_mm2) == sorted(K.SECTIONS_MM2.tolist())
    for table in (lib.cables, lib.fuses):
        assert table.description.str.contains("invented").all()


def test_library_without_cable_and_fuse_tables_falls_back_to_flat_lines(lib_dir):
    (lib_dir / "cables.csv").unlink()
    (lib_dir / "fuses.csv").unlink()
    bos = pd.read_csv(lib_dir / "balance_of_system.csv")
    flat = pd.DataFrame([{"item_id": "BOS-CBL-S", "description": "cable set (test)", "unit": "m", "scheme": "shs",
                          "basis": "per_kit", "quantity": 10, "price_usd": 1.2}])
    pd.concat([bos, flat]).to_csv(lib_dir / "balance_of_system.csv", index=False)
    lib = read_library(lib_dir)
    assert lib.cables is None and lib.fuses is None
    assert len(lib.notes) == 2
    for kind, note in zip(("cables", "fuses"), lib.notes):
        assert f"{kind}.csv not found" in note and OPTIONAL_KINDS[kind] in note
    kits, bom, _ = K.candidate_kits(lib, voltages_v=[12], max_parallel_strings=3, cond=K.DesignConditions(5.0, 65.0))
    assert not bom.component_kind.isin(["cable", "fuse"]).any()
    assert (bom.component_id == "BOS-CBL-S").groupby(bom.kit_id).sum().eq(1).all()
    # the cables are still sized, from every standard section
    assert kits.pv_cable_mm2.notna().all() and (kits.pv_cable_id == "").all()


def test_inverter_surge_defaults_to_twice_the_rating(lib_dir):
    inv = pd.read_csv(lib_dir / "inverters.csv", dtype=str)
    inv.drop(columns="surge_power_w").to_csv(lib_dir / "inverters.csv", index=False)
    lib = read_library(lib_dir)
    # common practice: a few seconds at twice the continuous rating
    assert (lib.inverters.surge_power_w == 2.0 * lib.inverters.rated_power_w).all()
    assert any("surge_power_w" in n and "2 x rated_power_w" in n for n in lib.notes)
    inv.loc[0, "surge_power_w"] = ""
    inv.loc[1, "surge_power_w"] = "3000"
    inv.to_csv(lib_dir / "inverters.csv", index=False)
    lib = read_library(lib_dir)
    assert lib.inverters.surge_power_w.iat[0] == 2.0 * lib.inverters.rated_power_w.iat[0]
    assert lib.inverters.surge_power_w.iat[1] == 3000.0
    assert any("blank in 1 row" in n for n in lib.notes)


def test_cable_fuse_and_surge_problems_name_file_row_and_column(lib_dir):
    cab = pd.read_csv(lib_dir / "cables.csv", dtype=str)
    cab.loc[2, "section_mm2"] = "5"  # not an IEC 60228 size
    cab.to_csv(lib_dir / "cables.csv", index=False)
    fus = pd.read_csv(lib_dir / "fuses.csv", dtype=str)
    fus.loc[0, "application"] = "load"
    fus.loc[1, "rating_a"] = "big"
    fus.to_csv(lib_dir / "fuses.csv", index=False)
    inv = pd.read_csv(lib_dir / "inverters.csv", dtype=str)
    inv.loc[3, "surge_power_w"] = "100"  # below its 3000 W rating
    inv.to_csv(lib_dir / "inverters.csv", index=False)
    with pytest.raises(InputError) as exc:
        read_library(lib_dir)
    msgs = [str(p) for p in exc.value.problems]
    assert any("cables.csv" in m and "row 4" in m and "section_mm2" in m and "standard" in m for m in msgs)
    assert any("fuses.csv" in m and "row 2" in m and "application" in m for m in msgs)
    assert any("fuses.csv" in m and "row 3" in m and "rating_a" in m for m in msgs)
    assert any("inverters.csv" in m and "row 5" in m and "surge_power_w" in m for m in msgs)


def test_workbook_without_the_optional_sheets_reads(tmp_path):
    wb = tmp_path / "lib.xlsx"
    with pd.ExcelWriter(wb) as xw:
        for kind in ("pv_modules", "batteries", "charge_controllers", "inverters", "balance_of_system", "installation"):
            pd.read_csv(default_library_path() / f"{kind}.csv", dtype=str).to_excel(xw, sheet_name=kind, index=False)
    lib = read_library(wb)
    assert lib.cables is None and lib.fuses is None
    assert any("no sheet 'cables'" in n for n in lib.notes)
