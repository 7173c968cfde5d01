"""Program file and component library: defaults, validation, and the bundled demo copies."""

import filecmp
from pathlib import Path

import pandas as pd
import pytest

from fleet.components import KINDS, default_library_path, read_library
from fleet.config import default_config_path, load_config
from fleet.errors import InputError

ROOT = Path(__file__).resolve().parents[1]


def test_demo_copies_in_sites_equal_the_bundled_ones():
    assert filecmp.cmp(ROOT / "sites" / "demo_program.toml", default_config_path(), shallow=False)
    assert filecmp.cmp(ROOT / "sites" / "demo_depots.csv", default_config_path().parent / "demo_depots.csv",
                       shallow=False)
    for kind in KINDS:
        assert filecmp.cmp(ROOT / "sites" / "demo_components" / f"{kind}.csv",
                           default_library_path() / f"{kind}.csv", shallow=False)


def test_demo_prices_say_they_are_invented():
    lib = read_library()
    for table in (lib.pv_modules, lib.batteries, lib.charge_controllers, lib.inverters, lib.balance_of_system):
        assert table.description.str.contains("invented").all()


def test_a_program_file_needs_only_the_keys_it_changes(tmp_path):
    f = tmp_path / "p.toml"
    f.write_text("[program]\nweather_years = 4\n")
    cfg = load_config(f)
    assert cfg["program"]["weather_years"] == 4
    assert cfg["program"]["reliability_target"] == load_config()["program"]["reliability_target"]


def test_program_file_problems_are_all_reported(tmp_path):
    f = tmp_path / "p.toml"
    f.write_text("[program]\nweather_years = 0\nreliabilty_target = 0.1\ndiscount_rate = 'x'\n[catalogue]\nsolver = 'gurobi'\n")
    with pytest.raises(InputError) as exc:
        load_config(f)
    text = str(exc.value)
    for key in ("program.weather_years", "program.reliabilty_target", "program.discount_rate", "catalogue.solver"):
        assert key in text
    assert str(f) in text


def test_broken_toml_is_a_clear_problem(tmp_path):
    f = tmp_path / "p.toml"
    f.write_text("[program\n")
    with pytest.raises(InputError, match="not valid TOML"):
        load_config(f)


def test_component_problems_name_file_row_and_column(tmp_path):
    lib = tmp_path / "lib"
    lib.mkdir()
    for kind in KINDS:
        (lib / f"{kind}.csv").write_bytes((default_library_path() / f"{kind}.csv").read_bytes())
    bat = pd.read_csv(lib / "batteries.csv", dtype=str)
    bat.loc[1, "capacity_ah"] = "lots"
    bat.loc[2, "chemistry"] = "nickel"
    bat.loc[3, "battery_id"] = bat.loc[0, "battery_id"]
    bat.to_csv(lib / "batteries.csv", index=False)
    (lib / "inverters.csv").unlink()
    with pytest.raises(InputError) as exc:
        read_library(lib)
    msgs = [str(p) for p in exc.value.problems]
    assert any("row 3" in m and "capacity_ah" in m for m in msgs)
    assert any("row 4" in m and "chemistry" in m for m in msgs)
    assert any("row 5" in m and "duplicate" in m for m in msgs)
    assert any("inverters.csv" in m and "not found" in m for m in msgs)


def test_library_reads_from_a_workbook_too(tmp_path):
    wb = tmp_path / "lib.xlsx"
    with pd.ExcelWriter(wb) as xw:
        for kind in KINDS:
            pd.read_csv(default_library_path() / f"{kind}.csv", dtype=str).to_excel(xw, sheet_name=kind, index=False)
    a, b = read_library(wb), read_library()
    pd.testing.assert_frame_equal(a.batteries, b.batteries)
    pd.testing.assert_frame_equal(a.installation, b.installation)
