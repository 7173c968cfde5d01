"""Transport from depots: the depots table, distances, delivery costs and their place in the lifecycle cost."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pyproj import Geod

from fleet import dispatch, economics, transport
from fleet.config import load_config
from fleet.demand import service_units
from fleet.errors import InputError
from fleet.plan import evaluate
from fleet.sites import read_sites, validate_sites

# source: pyproj Geod.inv, geodesics on the WGS84 ellipsoid (GeographicLib; Karney 2013, J. Geodesy 87:43)
GEOD = Geod(ellps="WGS84")
ROOT = Path(__file__).resolve().parents[1]
#: relative tolerance of a UTM-zone straight line against the geodesic within 3 degrees of the
#: depot: the zone's scale error is at most about 0.2 % there (k0 = 0.9996 on the central meridian,
#: (dlambda cos phi)^2 / 2 more at 6 degrees from it; from memory)
TOLERANCE = 0.005

SETTINGS = {"road_factor": 1.4, "shs_usd_per_kit_km": 0.03, "minigrid_usd_per_block_km": 0.6,
            "handling_usd_per_kit": 4.0, "battery_replacement_share": 0.5}


def _geodesic_km(lat0, lon0, lat, lon):
    lat, lon = np.asarray(lat, float), np.asarray(lon, float)
    return GEOD.inv(np.full(lat.shape, lon0), np.full(lat.shape, lat0), lon, lat)[2] / 1000.0


def _depots(rows):
    return transport.validate_depots(pd.DataFrame(rows, columns=["depot", "latitude", "longitude"]), "test depots")


def test_distances_match_the_geodesic_near_each_depot_anywhere_on_earth():
    # depots in both hemispheres, near the equator, at 60 N and across the antimeridian's zone edge
    depots = _depots([("A", 13.6, 2.6), ("B", -0.2, 30.7), ("C", 60.2, 24.9), ("D", -35.3, 149.1),
                      ("E", 1.0, 179.0)])
    rng = np.random.default_rng(3)
    rows = []
    for d in depots.itertuples(index=False):
        lat = d.latitude + rng.uniform(-3, 3, 40)
        lon = (d.longitude + rng.uniform(-3, 3, 40) + 180.0) % 360.0 - 180.0
        rows += [dict(site_id=f"{d.depot}{i}", latitude=la, longitude=lo, depot=d.depot)
                 for i, (la, lo) in enumerate(zip(lat, lon))]
    sites = pd.DataFrame(rows)
    got = transport.assign_depots(sites, depots, road_factor=1.0)
    assert got.depot_found.all() and (got.depot_used == sites.depot).all()
    for d in depots.itertuples(index=False):
        mine = (sites.depot == d.depot).to_numpy()
        ref = _geodesic_km(d.latitude, d.longitude, sites.latitude[mine], sites.longitude[mine])
        np.testing.assert_allclose(got.straight_km[mine], ref, rtol=TOLERANCE)


def test_road_distance_and_delivery_cost_follow_the_settings():
    depots = _depots([("North", 13.5, 2.1), ("South", 0.4, 32.5)])
    sites = pd.DataFrame([dict(site_id="s", latitude=14.1, longitude=2.9, depot="North", scheme="shs"),
                          dict(site_id="m", latitude=0.9, longitude=31.8, depot="South", scheme="minigrid")])
    t = transport.site_transport(sites, depots, SETTINGS)
    km = np.array([_geodesic_km(13.5, 2.1, [14.1], [2.9])[0], _geodesic_km(0.4, 32.5, [0.9], [31.8])[0]])
    np.testing.assert_allclose(t.road_km, 1.4 * km, rtol=TOLERANCE)
    # one kit: road km x USD per kit-km + handling; one plant block: road km x USD per block-km + handling
    np.testing.assert_allclose(t.delivery_usd, [1.4 * km[0] * 0.03 + 4.0, 1.4 * km[1] * 0.6 + 4.0], rtol=TOLERANCE)
    # no depots: no distance and no cost
    none = transport.site_transport(sites, None, SETTINGS)
    assert none.delivery_usd.eq(0.0).all() and none.road_km.isna().all()
    assert "transport cost is zero" in transport.depot_warnings(none, None)[0]


def test_sites_without_a_known_depot_use_the_nearest_and_are_listed():
    depots = _depots([("Cedar Yard", -0.2, 30.7), ("Dune Yard", 13.6, 2.6)])
    sites = pd.DataFrame([
        dict(site_id="a", latitude=13.0, longitude=3.0, depot="(none)"),
        dict(site_id="b", latitude=0.5, longitude=31.0, depot="Cedar yard"),  # misspelt
        dict(site_id="c", latitude=0.5, longitude=31.0, depot="Dune Yard"),  # named: used though far
        dict(site_id="d", latitude=-1.0, longitude=30.0, depot=""),
    ])
    t = transport.assign_depots(sites, depots, 1.3)
    assert t.depot_used.tolist() == ["Dune Yard", "Cedar Yard", "Dune Yard", "Cedar Yard"]
    assert t.depot_found.tolist() == [False, False, True, False]
    # the named depot is used even when another is nearer
    assert t.straight_km[2] == pytest.approx(_geodesic_km(13.6, 2.6, [0.5], [31.0])[0], rel=0.05)
    warnings = transport.depot_warnings(t, depots)
    assert len(warnings) == 2
    text = " ".join(warnings)
    assert "'Cedar yard'" in text and "did you mean 'Cedar Yard'" in text
    assert "a, d" in text and "name no depot" in text
    assert not any(" c" in w.split(":")[-1] for w in warnings)


def test_a_bad_depots_table_names_every_problem_by_row_and_column(tmp_path):
    f = tmp_path / "depots.csv"
    f.write_text("Depot , Latitude,longitude\n"
                 "North,13.5,2.1\n"
                 "North,14.0,2.0\n"
                 ",1,1\n"
                 "East,95,2\n"
                 "West,1.0,abc\n"
                 "\n"
                 "(none),1,1\n")
    with pytest.raises(InputError) as exc:
        transport.read_depots(f)
    found = {(p.row, p.column) for p in exc.value.problems}
    assert found == {(3, "depot"), (4, "depot"), (5, "latitude"), (6, "longitude"), (8, "depot")}
    assert all(p.file == str(f) for p in exc.value.problems)
    g = tmp_path / "no_lon.csv"
    g.write_text("depot,latitude\nNorth,1\n")
    with pytest.raises(InputError) as exc:
        transport.read_depots(g)
    assert [(p.row, p.column) for p in exc.value.problems] == [(None, "longitude")]
    with pytest.raises(InputError, match="file not found"):
        transport.read_depots(tmp_path / "missing.csv")


def test_the_depots_file_is_relative_to_the_program_file_and_not_inherited(tmp_path):
    (tmp_path / "depots").mkdir()
    (tmp_path / "depots" / "ours.csv").write_text("depot,latitude,longitude\nNorth,13.5,2.1\n")
    named = tmp_path / "named.toml"
    named.write_text('[transport]\ndepots_file = "depots/ours.csv"\nroad_factor = 1.5\n')
    cfg = load_config(named)
    assert cfg.depots.depot.tolist() == ["North"] and cfg.depots.crs.to_epsg() == 4326
    assert cfg.with_overrides(program={"seed": 1}).depots is cfg.depots
    # a program file that names no depots file gets none, and says so
    plain = tmp_path / "plain.toml"
    plain.write_text("[program]\nseed = 5\n")
    cfg = load_config(plain)
    assert cfg.depots is None and "transport cost is zero" in cfg.depots_note
    # a named file that is not there is an input problem of the program file
    wrong = tmp_path / "wrong.toml"
    wrong.write_text('[transport]\ndepots_file = "nowhere.csv"\n')
    with pytest.raises(InputError) as exc:
        load_config(wrong)
    (p,) = exc.value.problems
    assert p.file == str(wrong) and p.column == "transport.depots_file"
    bad = tmp_path / "bad.toml"
    bad.write_text("[transport]\nroad_factor = 0.8\n")
    with pytest.raises(InputError, match="transport.road_factor"):
        load_config(bad)


def test_the_demo_depots_cover_every_demo_site():
    cfg = load_config(ROOT / "sites" / "demo_program.toml")
    sites = read_sites(ROOT / "sites" / "demo_sites.csv")
    t = transport.assign_depots(sites, cfg.depots, cfg["transport"]["road_factor"])
    assert t.depot_found.all()
    assert transport.depot_warnings(t, cfg.depots) == []


def test_the_lifecycle_cost_carries_transport_and_salvage(kits, config, tmp_path):
    f = tmp_path / "depots.csv"
    f.write_text("depot,latitude,longitude\nNorth,13.5,2.1\nSouth,0.4,32.5\n")
    cfg = config.with_overrides(transport={"depots_file": str(f), **SETTINGS})
    sites = validate_sites(pd.DataFrame([
        dict(site_id="A", latitude=14.1, longitude=2.9, depot="North", scheme="shs", households_t1=4, households_t2=3),
        dict(site_id="B", latitude=0.9, longitude=31.8, depot="South", scheme="minigrid", households_t1=30),
    ]), "tiny")
    units = service_units(sites)
    kit_table = kits[0]
    rows = []
    for u_idx, u in enumerate(units.itertuples(index=False)):
        k_idx = int(np.flatnonzero(kit_table.scheme.to_numpy() == u.scheme)[0])
        rows.append((u_idx, k_idx, u.site_index, 1 if u.scheme == "shs" else 3, 0.05))
    pairs = pd.DataFrame(rows, columns=["unit_idx", "kit_idx", "site_idx", "blocks", "target"])
    metrics = np.zeros((len(pairs), 1, dispatch.N_METRICS))  # nothing simulated: the battery lasts its calendar life
    ev = evaluate(pairs, metrics, units, None, kit_table, cfg, sites)
    still = evaluate(pairs, metrics, units, None, kit_table, cfg, sites, site_delivery_usd=np.zeros(len(sites)))
    np.testing.assert_allclose(ev.lifecycle_cost_usd - still.lifecycle_cost_usd, ev.transport_usd, rtol=1e-12)
    # one delivery per kit or block at year 0 and half of one with each battery replacement
    km = np.array([_geodesic_km(13.5, 2.1, [14.1], [2.9])[0], _geodesic_km(0.4, 32.5, [0.9], [31.8])[0]])
    one = np.where(sites.scheme == "shs", 1.4 * km * 0.03, 1.4 * km * 0.6) + 4.0
    site = pairs.site_idx.to_numpy()
    p = cfg["program"]
    # a plant of 3 PV blocks, 3 battery blocks and 3 inverters: 6 deliveries, 3 battery shares
    first = np.where(ev.scheme == "minigrid", ev.blocks + ev.battery_blocks, 1)
    battery = np.where(ev.scheme == "minigrid", ev.battery_blocks, 1)
    expected = (one[site] * first + economics.replacement_present_value(
        0.5 * one[site] * battery, ev.battery_life_years.to_numpy(), p["horizon_years"], p["discount_rate"]))
    np.testing.assert_allclose(ev.transport_usd, expected * ev["count"], rtol=TOLERANCE)
    # the salvage credit is what the cost without salvage exceeds it by
    e = cfg["economics"]
    k = kit_table.iloc[pairs.kit_idx.to_numpy()]
    no_salvage = economics.lifecycle_cost(
        k.capex_usd.to_numpy(), k.battery_capex_usd.to_numpy(), ev.battery_life_years.to_numpy(),
        k.controller_capex_usd.to_numpy(), k.inverter_capex_usd.to_numpy(), horizon_years=p["horizon_years"],
        rate=p["discount_rate"], om_fraction=e["om_fraction_per_year"], controller_life_years=e["controller_life_years"],
        inverter_life_years=e["inverter_life_years"]) * ev["count"] * ev.blocks
    assert (ev.salvage_usd > 0).all()
    np.testing.assert_allclose(still.lifecycle_cost_usd + still.salvage_usd, no_salvage, rtol=1e-12)
