"""The same plan whichever way the per-site stages run: one process, chunks of any size, or a
dask.distributed cluster of worker processes on the loopback interface."""

import numpy as np
import pandas as pd
import pytest

from fleet.errors import InputError
from fleet.parallel import parse_scheduler, site_chunks
from fleet.plan import run_plan
from fleet.sites import validate_sites


@pytest.fixture(scope="module")
def four_sites():
    df = pd.DataFrame([
        dict(site_id="P1", latitude=13.5, longitude=2.1, scheme="shs", households_t1=4, households_t2=3),
        dict(site_id="P2", latitude=0.4, longitude=32.5, scheme="minigrid", households_t1=30, households_t2=20,
             households_t3=5, health_posts=1),
        dict(site_id="P3", latitude=-0.9, longitude=30.6, scheme="shs", households_t2=5, households_t3=2, schools=1),
        dict(site_id="P4", latitude=14.2, longitude=3.4, scheme="shs", households_t1=8),
    ])
    return validate_sites(df, "four")


@pytest.fixture(scope="module")
def in_process(four_sites, library, config):
    cfg = config.with_overrides(program={"weather_years": 1})
    return cfg, run_plan(four_sites, library, cfg)


def _same_plan(a, b):
    pd.testing.assert_frame_equal(a.evaluations, b.evaluations)
    pd.testing.assert_frame_equal(a.units, b.units)
    for scheme in ("shs", "minigrid"):
        assert a.catalogues[scheme].chosen_kits == b.catalogues[scheme].chosen_kits
        pd.testing.assert_series_equal(a.catalogues[scheme].assignment, b.catalogues[scheme].assignment)
        assert a.catalogues[scheme].objective_usd == pytest.approx(b.catalogues[scheme].objective_usd, rel=1e-12)


def test_chunk_size_does_not_change_the_plan(four_sites, library, in_process):
    cfg, a = in_process
    b = run_plan(four_sites, library, cfg, chunk_sites=1)
    _same_plan(a, b)


def test_a_local_cluster_gives_the_in_process_plan(four_sites, library, in_process):
    # two worker processes bound to 127.0.0.1 (dask.distributed LocalCluster), one thread each
    cfg, a = in_process
    b = run_plan(four_sites, library, cfg, scheduler="local:2", chunk_sites=2)
    assert b.scheduler == "local:2"
    _same_plan(a, b)


def test_a_site_off_the_data_is_reported_with_its_row_from_any_chunk(four_sites, library, in_process):
    cfg, _ = in_process
    bad = four_sites.copy()
    bad.loc[2, ["latitude", "longitude"]] = [0.0, -30.0]  # mid-Atlantic: no resource data within reach
    bad = validate_sites(pd.DataFrame(bad.drop(columns="geometry")), "four")
    with pytest.raises(InputError) as err:
        run_plan(bad, library, cfg, chunk_sites=1)
    assert [p.row for p in err.value.problems] == [4]  # the header is row 1; P3 is the third site


@pytest.mark.parametrize("spec, want", [(None, ("inprocess", None)), ("inprocess", ("inprocess", None)),
                                        ("local:3", ("local", 3)), ("tcp://10.0.0.5:8786", ("address", "tcp://10.0.0.5:8786")),
                                        ("sched.example:8786", ("address", "tcp://sched.example:8786"))])
def test_scheduler_specifications(spec, want):
    assert parse_scheduler(spec) == want


@pytest.mark.parametrize("spec", ["local:0", "local", "threads", "local:two"])
def test_a_bad_scheduler_is_an_input_problem(spec):
    with pytest.raises(InputError, match="scheduler"):
        parse_scheduler(spec)


def test_site_chunks_cover_every_site_once():
    chunks = site_chunks(53, 25)
    assert [len(c) for c in chunks] == [25, 25, 3]
    assert np.array_equal(np.concatenate([list(c) for c in chunks]), np.arange(53))


def test_evaluate_on_a_local_cluster_gives_the_in_process_table(four_sites, library, in_process):
    from fleet.evaluate import evaluate_kit

    cfg, plan = in_process
    kit = plan.catalogues["shs"].chosen_kits[0]
    a = evaluate_kit(four_sites, library, cfg, kit)
    b = evaluate_kit(four_sites, library, cfg, kit, scheduler="local:2", chunk_sites=1)
    pd.testing.assert_frame_equal(a, b)
    # the plan's own option rows agree with the evaluation of the same kit
    ev = plan.evaluations[plan.evaluations.kit_id == kit].set_index("unit_id")
    got = a.dropna(subset=["unit_id"]).set_index("unit_id")
    common = ev.index.intersection(got.index)
    assert len(common) > 0
    assert np.allclose(ev.loc[common, "unmet_fraction_design"], got.loc[common, "unmet_energy_fraction_design"])
