"""Tests for reading and validating the site table (fleet.sites)."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import LineString, Point

from fleet.errors import InputError
from fleet.sites import (
    CONTRACT_COLUMNS,
    TIER_COLUMNS,
    household_columns,
    read_sites,
    validate_sites,
)

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "sites" / "demo_sites.csv"


def small_table() -> pd.DataFrame:
    """A small valid table written in the tests; values are arbitrary."""
    return pd.DataFrame(
        {
            "site_id": ["A1", "A2", "A3"],
            "site_name": ["North", "Middle", "South"],
            "latitude": [0.5, -0.25, 1.125],
            "longitude": [31.0, 32.0, 32.25],
            "scheme": ["shs", "minigrid", "shs"],
            "households_t1": [10, 40, 0],
            "households_t2": [3, 25, 0],
            "households_t3": [0, 12, 0],
            "households_t4": [0, 4, 0],
            "households_t5": [0, 1, 0],
            "health_posts": [0, 1, 1],
            "schools": [1, 2, 0],
            "productive_kwh_day": [0.0, 12.5, 0.0],
            "temp_mean_c": [23.5, np.nan, 24.0],
            "crew_size": [3, 5, 2],
            # non-empty: a CSV cannot tell an empty text from a missing one
            "survey_note": ["dry season", "by boat", "road washed out"],
        }
    )


def write(frame: pd.DataFrame, path: Path, crs: str | None = None) -> Path:
    """Write a table in the format its suffix names (geo formats carry points)."""
    if path.suffix == ".csv":
        frame.to_csv(path, index=False)
    elif path.suffix == ".xlsx":
        frame.to_excel(path, index=False, sheet_name="sites")
    else:
        attributes = frame.drop(columns=["latitude", "longitude"])
        points = gpd.points_from_xy(frame["longitude"], frame["latitude"], crs="EPSG:4326")
        layer = gpd.GeoDataFrame(attributes, geometry=points, crs="EPSG:4326")
        if crs is not None:
            layer = layer.to_crs(crs)
        layer.to_file(path, engine="pyogrio")
    return path


def problems_at(err: InputError) -> set[tuple[int | None, str | None]]:
    return {(p.row, p.column) for p in err.problems}


def invalid(frame: pd.DataFrame) -> InputError:
    with pytest.raises(InputError) as info:
        validate_sites(frame, "table.csv")
    return info.value


# --- reading every format ---------------------------------------------------


@pytest.mark.parametrize(
    ("name", "crs"),
    [
        ("sites.xlsx", None),
        ("sites.gpkg", None),
        ("sites.geojson", None),
        ("sites.json", None),
        # UTM zone 36N: a projected CRS in metres, must come back as degrees
        ("projected.gpkg", "EPSG:32636"),
    ],
)
def test_every_format_reads_to_the_same_frame_as_csv(tmp_path, name, crs):
    reference = read_sites(write(small_table(), tmp_path / "sites.csv"))
    other = read_sites(write(small_table(), tmp_path / name, crs=crs))

    assert list(other.columns) == list(reference.columns)
    pd.testing.assert_frame_equal(
        pd.DataFrame(other.drop(columns="geometry")),
        pd.DataFrame(reference.drop(columns="geometry")),
        check_exact=False,
        atol=1e-7,  # degrees, after a round trip through UTM
        rtol=0,
    )
    assert other.crs.to_epsg() == 4326
    assert np.allclose(other.geometry.x, reference.geometry.x, atol=1e-7)
    assert np.allclose(other.geometry.y, reference.geometry.y, atol=1e-7)


def test_projected_geometry_is_reprojected_into_latitude_longitude(tmp_path):
    path = write(small_table(), tmp_path / "utm.gpkg", crs="EPSG:32636")
    assert gpd.read_file(path).crs.to_epsg() == 32636
    sites = read_sites(path)
    assert np.allclose(sites["latitude"], [0.5, -0.25, 1.125], atol=1e-7)
    assert np.allclose(sites["longitude"], [31.0, 32.0, 32.25], atol=1e-7)
    assert np.allclose(sites.geometry.x, sites["longitude"]) and np.allclose(sites.geometry.y, sites["latitude"])


def test_validated_frame_has_contract_columns_then_unknown_columns():
    sites = validate_sites(small_table(), "t")
    assert list(sites.columns) == [*CONTRACT_COLUMNS, "crew_size", "survey_note", "geometry"]
    assert isinstance(sites, gpd.GeoDataFrame)
    assert isinstance(sites.index, pd.RangeIndex) and sites.index.start == 0
    assert sites.crs.to_epsg() == 4326
    assert sites["site_id"].dtype == "str"
    for column in TIER_COLUMNS:
        assert sites[column].dtype == np.int64


def test_unknown_columns_are_carried_through_untouched():
    table = small_table()
    sites = validate_sites(table, "t")
    pd.testing.assert_series_equal(sites["crew_size"], table["crew_size"])
    pd.testing.assert_series_equal(sites["survey_note"], table["survey_note"])


def test_defaults_fill_missing_optional_columns_and_tiers():
    table = pd.DataFrame(
        {"site_id": ["S"], "latitude": [1.0], "longitude": [30.0], "scheme": ["shs"], "households_t3": [7]}
    )
    site = validate_sites(table, "t").iloc[0]
    assert [site[c] for c in TIER_COLUMNS] == [0, 0, 7, 0, 0]
    assert site["district"] == "(none)" and site["depot"] == "(none)"
    assert site["site_name"] == "" and site["weather_file"] == ""
    assert site["health_posts"] == 0 and site["schools"] == 0 and site["productive_kwh_day"] == 0.0
    assert np.isnan(site["temp_mean_c"]) and np.isnan(site["design_temp_min_c"])
    assert np.isnan(site["reliability_target"])


def test_caller_frame_is_not_modified():
    table = small_table()
    table.index = [10, 20, 30]
    table.columns = [f" {c.upper()} " if c == "scheme" else c for c in table.columns]
    before = table.copy(deep=True)
    validate_sites(table, "t")
    pd.testing.assert_frame_equal(table, before)


def test_caller_geodataframe_is_not_modified():
    table = small_table()
    points = gpd.points_from_xy(table["longitude"], table["latitude"], crs="EPSG:4326")
    layer = gpd.GeoDataFrame(table.drop(columns=["latitude", "longitude"]), geometry=points).to_crs("EPSG:32636")
    before = layer.copy(deep=True)
    sites = validate_sites(layer, "t")
    assert layer.crs.to_epsg() == 32636
    pd.testing.assert_frame_equal(pd.DataFrame(layer), pd.DataFrame(before))
    assert "latitude" not in layer.columns and "latitude" in sites.columns


def test_file_is_not_modified(tmp_path):
    path = write(small_table(), tmp_path / "sites.csv")
    content = path.read_bytes()
    read_sites(path)
    assert path.read_bytes() == content


def test_column_names_and_scheme_are_matched_loosely():
    table = small_table().rename(columns={"site_id": " Site_ID ", "households_t1": "HOUSEHOLDS_T1"})
    table["scheme"] = [" SHS", "MiniGrid ", "shs"]
    sites = validate_sites(table, "t")
    assert list(sites["scheme"]) == ["shs", "minigrid", "shs"]
    assert list(sites["households_t1"]) == [10, 40, 0]
    assert list(sites["site_id"]) == ["A1", "A2", "A3"]


def test_blank_household_cells_count_as_zero():
    table = small_table().astype({"households_t2": object})
    table.loc[0, "households_t2"] = ""
    table.loc[1, "households_t2"] = None
    sites = validate_sites(table, "t")
    assert list(sites["households_t2"]) == [0, 0, 0]


def test_numeric_site_ids_become_text(tmp_path):
    table = small_table()
    table["site_id"] = [7, 8, 9]
    path = tmp_path / "ids.xlsx"
    table.to_excel(path, index=False)
    assert list(read_sites(path)["site_id"]) == ["7", "8", "9"]


def test_csv_site_id_keeps_leading_zeros(tmp_path):
    table = small_table()
    table["site_id"] = ["007", "008", "009"]
    assert list(read_sites(write(table, tmp_path / "z.csv"))["site_id"]) == ["007", "008", "009"]


def test_xlsx_prefers_a_sheet_named_sites(tmp_path):
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as book:
        pd.DataFrame({"note": ["read me first"]}).to_excel(book, sheet_name="README", index=False)
        small_table().to_excel(book, sheet_name="Sites", index=False)
    assert list(read_sites(path)["site_id"]) == ["A1", "A2", "A3"]


def test_xlsx_without_sites_sheet_reads_the_first(tmp_path):
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as book:
        small_table().to_excel(book, sheet_name="Programme", index=False)
        pd.DataFrame({"note": ["x"]}).to_excel(book, sheet_name="Other", index=False)
    assert len(read_sites(path)) == 3


def test_household_columns_names_five_tiers():
    assert household_columns() == TIER_COLUMNS
    assert TIER_COLUMNS == tuple(f"households_t{k}" for k in range(1, 6))


# --- problems ------------------------------------------------------------------


def test_several_problems_are_reported_together_with_spreadsheet_rows(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text(
        "site_id,latitude,scheme,households_t1,households_t2\n"
        "S1,0.5,shs,10,2\n"  # row 2
        "S1,0.6,shs,12,3\n"  # row 3: duplicate of row 2
        "S3,95,shs,8,1\n"  # row 4: latitude out of range
        "S4,0.7,shs,9,abc\n"  # row 5: not a number
        "S5,0.8,grid,7,1\n",  # row 6: unknown scheme
        encoding="utf-8",
    )
    with pytest.raises(InputError) as info:
        read_sites(path, label="bad.csv")
    err = info.value
    assert problems_at(err) == {
        (None, "longitude"),
        (3, "site_id"),
        (4, "latitude"),
        (5, "households_t2"),
        (6, "scheme"),
    }
    assert all(p.file == "bad.csv" for p in err.problems)
    by_place = {(p.row, p.column): p.message for p in err.problems}
    assert "2" in by_place[(3, "site_id")] and "3" in by_place[(3, "site_id")]
    assert "'abc'" in by_place[(5, "households_t2")]
    assert "'grid'" in by_place[(6, "scheme")]
    assert "5 problems" in str(err)


def test_missing_required_column_is_reported_once():
    err = invalid(small_table().drop(columns=["scheme"]))
    assert [(p.row, p.column) for p in err.problems] == [(None, "scheme")]


def test_missing_column_message_suggests_a_rename():
    err = invalid(small_table().rename(columns={"longitude": "lon"}))
    assert problems_at(err) == {(None, "longitude")}
    assert "'lon'" in err.problems[0].message


def test_empty_site_id_is_a_problem():
    table = small_table()
    table.loc[1, "site_id"] = "  "
    assert problems_at(invalid(table)) == {(3, "site_id")}


@pytest.mark.parametrize("value", [2.5, -1, "abc", "1,000", True])
def test_household_count_must_be_whole_and_non_negative(value):
    table = small_table().astype({"households_t4": object})
    table.loc[0, "households_t4"] = value
    assert problems_at(invalid(table)) == {(2, "households_t4")}


def test_whole_number_given_as_text_or_float_is_accepted():
    table = small_table().astype({"households_t1": object, "schools": object})
    table.loc[0, "households_t1"] = " 12 "
    table.loc[1, "households_t1"] = 40.0
    table.loc[2, "schools"] = "2"
    sites = validate_sites(table, "t")
    assert list(sites["households_t1"]) == [12, 40, 0]
    assert sites.loc[2, "schools"] == 2


@pytest.mark.parametrize(
    ("latitude", "longitude", "ok"),
    [
        # source: EPSG:4326 axis ranges, latitude -90..90, longitude -180..180 degrees
        (90.0, 180.0, True),
        (-90.0, -180.0, True),
        (90.001, 0.0, False),
        (0.0, -180.5, False),
    ],
)
def test_coordinates_must_be_within_wgs84_bounds(latitude, longitude, ok):
    table = small_table()
    table.loc[0, ["latitude", "longitude"]] = [latitude, longitude]
    if ok:
        assert validate_sites(table, "t").loc[0, "latitude"] == latitude
    else:
        assert [p.row for p in invalid(table).problems] == [2]


def test_blank_or_text_coordinate_is_a_problem():
    table = small_table().astype({"latitude": object, "longitude": object})
    table.loc[0, "latitude"] = None
    table.loc[2, "longitude"] = "32 E"
    assert problems_at(invalid(table)) == {(2, "latitude"), (4, "longitude")}


def test_site_with_nothing_to_serve_is_a_problem():
    table = small_table()
    table.loc[2, "health_posts"] = 0  # row 4 had only a health post
    err = invalid(table)
    assert problems_at(err) == {(4, None)}
    assert "nothing to serve" in err.problems[0].message


def test_productive_load_alone_is_something_to_serve():
    table = small_table()
    table.loc[2, ["health_posts", "productive_kwh_day"]] = [0, 3.0]
    assert validate_sites(table, "t").loc[2, "productive_kwh_day"] == 3.0


@pytest.mark.parametrize(
    ("column", "value"),
    [
        ("temp_mean_c", 75.0),  # common practice: a reading far above any air temperature, e.g. in degF
        ("temp_mean_c", "warm"),
        ("design_temp_min_c", -60.0),
        ("reliability_target", 5.0),  # percent given instead of a fraction
        ("reliability_target", 0.0),
        ("reliability_target", 1.0),
        ("productive_kwh_day", -2.0),
    ],
)
def test_optional_numbers_out_of_range_are_problems(column, value):
    table = small_table()
    table[column] = pd.Series([np.nan, np.nan, np.nan], dtype=object)
    table.loc[1, column] = value
    assert problems_at(invalid(table)) == {(3, column)}


def test_reliability_target_fraction_is_kept():
    table = small_table()
    table["reliability_target"] = [0.05, np.nan, 0.01]
    sites = validate_sites(table, "t")
    assert sites.loc[0, "reliability_target"] == 0.05 and np.isnan(sites.loc[1, "reliability_target"])


def test_design_minimum_above_mean_temperature_is_a_problem():
    table = small_table()
    table["design_temp_min_c"] = [10.0, 5.0, 30.0]
    assert problems_at(invalid(table)) == {(4, "design_temp_min_c")}


def test_entirely_blank_rows_are_skipped_and_rows_keep_their_numbers(tmp_path):
    path = tmp_path / "gaps.csv"
    path.write_text(
        "site_id,latitude,longitude,scheme,households_t1\n"
        "S1,0.5,31,shs,10\n"  # row 2
        ",,,,\n"  # row 3: blank
        "\n"  # row 4: blank line
        "S2,0.5,31,solar,10\n",  # row 5
        encoding="utf-8",
    )
    with pytest.raises(InputError) as info:
        read_sites(path)
    assert problems_at(info.value) == {(5, "scheme")}
    path.write_text(path.read_text().replace("solar", "shs"))
    assert list(read_sites(path)["site_id"]) == ["S1", "S2"]


def test_geopackage_rows_are_feature_order_plus_two(tmp_path):
    table = small_table()
    table.loc[2, "scheme"] = "pico"
    path = write(table, tmp_path / "bad.gpkg")
    with pytest.raises(InputError) as info:
        read_sites(path)
    assert problems_at(info.value) == {(4, "scheme")}


def test_non_point_geometry_is_a_problem():
    table = small_table().drop(columns=["latitude", "longitude"])
    shapes = [Point(31, 0.5), LineString([(32, 0), (32.1, 0.1)]), Point(32, 1)]
    err = invalid(gpd.GeoDataFrame(table, geometry=shapes, crs="EPSG:4326"))
    assert problems_at(err) == {(3, "geometry")}


def test_geometry_without_crs_is_taken_as_degrees_and_checked():
    table = small_table().drop(columns=["latitude", "longitude"])
    degrees = gpd.GeoDataFrame(table, geometry=[Point(31, 0.5), Point(32, -0.25), Point(32.25, 1.125)])
    assert list(validate_sites(degrees, "t")["latitude"]) == [0.5, -0.25, 1.125]
    metres = degrees.set_geometry([Point(500000, 55000), Point(32, -0.25), Point(32.25, 1.125)])
    assert problems_at(invalid(metres)) == {(2, "geometry")}


def test_geometry_and_coordinates_that_disagree_are_a_problem():
    table = small_table()
    points = gpd.points_from_xy(table["longitude"], table["latitude"], crs="EPSG:4326")
    layer = gpd.GeoDataFrame(table, geometry=points)
    assert len(validate_sites(layer, "t")) == 3
    layer.loc[1, "latitude"] = 0.75
    assert problems_at(invalid(layer)) == {(3, "geometry")}


def test_duplicate_site_id_message_names_every_row():
    table = pd.concat([small_table(), small_table().iloc[[0]]], ignore_index=True)
    err = invalid(table)
    assert problems_at(err) == {(5, "site_id")}
    assert "rows 2 and 5" in err.problems[0].message


# --- files that cannot be read --------------------------------------------------


def test_header_only_csv_is_a_clear_problem(tmp_path):
    path = tmp_path / "header.csv"
    path.write_text("site_id,latitude,longitude,scheme,households_t1\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_sites(path)
    (problem,) = info.value.problems
    assert problem.row is None and "no sites" in problem.message


def test_layer_without_features_is_a_clear_problem(tmp_path):
    path = tmp_path / "none.geojson"
    gpd.GeoDataFrame({"site_id": []}, geometry=[], crs="EPSG:4326").to_file(path, engine="pyogrio")
    with pytest.raises(InputError) as info:
        read_sites(path)
    (problem,) = info.value.problems
    assert problem.row is None and "no sites" in problem.message


@pytest.mark.parametrize("name", ["empty.csv", "empty.xlsx", "empty.gpkg", "empty.geojson"])
def test_zero_byte_file_is_a_clear_problem(tmp_path, name):
    path = tmp_path / name
    path.write_bytes(b"")
    with pytest.raises(InputError) as info:
        read_sites(path, label=name)
    (problem,) = info.value.problems
    assert problem.file == name and "empty" in problem.message


def test_missing_file_unknown_extension_and_garbage_are_input_errors(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_sites(tmp_path / "nowhere.csv")
    other = tmp_path / "sites.txt"
    other.write_text("site_id\nA\n")
    with pytest.raises(InputError, match="unsupported file type"):
        read_sites(other)
    garbage = tmp_path / "sites.xlsx"
    garbage.write_text("this is not a workbook")
    with pytest.raises(InputError, match="XLSX"):
        read_sites(garbage)
    garbage_gpkg = tmp_path / "sites.gpkg"
    garbage_gpkg.write_text("this is not a geopackage")
    with pytest.raises(InputError, match="GeoPackage"):
        read_sites(garbage_gpkg)


def test_semicolon_separated_csv_gets_a_clear_message(tmp_path):
    path = tmp_path / "semi.csv"
    path.write_text("site_id;latitude;longitude;scheme\nA;0,5;31;shs\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_sites(path)
    (problem,) = info.value.problems
    assert "semicolons" in problem.message


def test_no_column_header_at_all_is_a_problem(tmp_path):
    path = tmp_path / "blank.csv"
    path.write_text("\n\n", encoding="utf-8")
    with pytest.raises(InputError):
        read_sites(path)


# --- the demo programme ------------------------------------------------------------


def test_demo_site_table_validates_and_covers_the_scenario():
    sites = read_sites(DEMO)
    assert len(sites) >= 150
    assert set(sites["scheme"]) == {"shs", "minigrid"}
    assert (sites[list(TIER_COLUMNS)].sum() > 0).all()
    assert sites["depot"].nunique() >= 2
    assert sites["temp_mean_c"].isna().any()  # some sites rely on programme defaults
    assert "survey_round" in sites.columns
