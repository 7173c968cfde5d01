"""fleet evaluate: one named kit at every site, through the API and the command line."""

import numpy as np
import pandas as pd
import pytest

from fleet.cli import main
from fleet.demand import service_units
from fleet.evaluate import (FROM_PLAN, KitChoiceError, candidate_kit_table, evaluate_kit,
                            find_kit)
from fleet.plan import run_plan
from fleet.sites import validate_sites

# invented sites for the test: one dry and one humid SHS site, one humid minigrid village
SITES = pd.DataFrame([
    dict(site_id="A", latitude=13.5, longitude=2.1, scheme="shs", households_t1=4, households_t2=3, health_posts=1),
    dict(site_id="B", latitude=0.4, longitude=32.5, scheme="minigrid", households_t1=30, households_t2=20,
         households_t3=5, health_posts=1),
    dict(site_id="C", latitude=0.6, longitude=31.5, scheme="shs", households_t3=2, schools=1),
])
FAMILY = ["scheme", "topology", "system_voltage_v", "module_id", "controller_id", "inverter_id", "battery_id"]


@pytest.fixture(scope="module")
def sites():
    return validate_sites(SITES, "tiny")


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("evaluate")
    SITES.to_csv(d / "sites.csv", index=False)
    (d / "program.toml").write_text("[program]\nweather_years = 2\n")
    return d


@pytest.fixture(scope="module")
def candidates(sites, library, config):
    return candidate_kit_table(sites, library, config)


@pytest.fixture(scope="module")
def plan(sites, library, config):
    return run_plan(sites, library, config)


def _shs_kit_of_the_plan(plan):
    """The SHS kit the plan simulated at the most units."""
    ev = plan.evaluations[plan.evaluations.scheme == "shs"]
    return ev.groupby("kit_id").unit_id.nunique().sort_values(kind="stable").index[-1]


def test_the_command_writes_one_row_per_unit_of_the_kit_scheme(files, plan, capsys):
    kit = _shs_kit_of_the_plan(plan)
    out = files / "out" / "evaluation.csv"
    out.parent.mkdir()
    code = main(["evaluate", str(files / "sites.csv"), "--kit", kit, "--config", str(files / "program.toml"),
                 "--csv", str(out), "--quiet"])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    table = pd.read_csv(out, keep_default_na=False, na_values=[""])
    units = service_units(validate_sites(SITES, "tiny"))
    evaluated = table[table.reason.isna()]
    assert list(evaluated.unit_id) == list(units[units.scheme == "shs"].unit_id)
    assert (evaluated.kit_id == kit).all() and (evaluated.blocks == 1).all()
    assert evaluated.unmet_energy_fraction_design.between(0, 1).all()
    # the minigrid site is listed with its reason, not dropped
    other = table[table.reason.notna()]
    assert list(other.site_id) == ["B"] and "minigrid" in other.reason.iat[0]
    assert [p.name for p in out.parent.iterdir()] == ["evaluation.csv"]  # no temporary file left
    assert "units meeting the target" in printed.out and "local electrical codes prevail" in printed.out
    assert f"wrote {out}" in printed.out


def test_an_unknown_kit_stops_with_status_2_naming_close_matches(files, candidates, capsys):
    real = candidates.kit_id.iat[len(candidates) // 2]
    code = main(["evaluate", str(files / "sites.csv"), "--kit", real[:-1], "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert "--kit" in err and f"no kit '{real[:-1]}'" in err and real in err and "Traceback" not in err


def test_list_kits_prints_every_candidate_and_exits_0(files, candidates, capsys):
    code = main(["evaluate", str(files / "sites.csv"), "--list-kits", "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    assert all(k in out for k in candidates.kit_id)


def test_blocks_do_not_apply_to_a_home_system_kit(sites, library, config, candidates):
    kit = candidates[candidates.scheme == "shs"].kit_id.iat[0]
    with pytest.raises(KitChoiceError, match="minigrid"):
        evaluate_kit(sites, library, config, kit, blocks=2, candidates=candidates)
    with pytest.raises(KitChoiceError) as exc:
        find_kit(candidates, kit + "x")
    assert kit in exc.value.close_matches


def _comparable_pairs(candidates):
    """(smaller, bigger) SHS kits of one family (same module, controller, inverter and battery
    model): one with more modules only, one with more batteries only, smallest arrays first."""
    shs = candidates[candidates.scheme == "shs"].sort_values(["array_wp", "battery_usable_wh"], kind="stable")
    found = {}
    for _, g in shs.groupby(FAMILY, sort=False):
        for a in g.itertuples(index=False):
            for b in g.itertuples(index=False):
                more_pv = b.modules > a.modules and b.batteries == a.batteries
                more_storage = b.batteries > a.batteries and b.modules == a.modules
                for key, ok in (("pv", more_pv), ("storage", more_storage)):
                    if ok and (key not in found or a.array_wp < found[key][2]):
                        found[key] = (a.kit_id, b.kit_id, a.array_wp)
    return {key: v[:2] for key, v in found.items()}


def test_a_bigger_kit_of_the_same_family_is_never_less_reliable(sites, library, config, candidates):
    # common practice: more array never serves a unit worse; more storage never serves it worse where the
    # array yields at least the demand (in an energy-starved kit a bigger bank's self-discharge and charge
    # losses can outweigh it, so starved units are left out of the storage comparison)
    pairs = _comparable_pairs(candidates)
    assert set(pairs) == {"pv", "storage"}
    for kind, (small, big) in pairs.items():
        a = evaluate_kit(sites, library, config, small, candidates=candidates).set_index("unit_id")
        b = evaluate_kit(sites, library, config, big, candidates=candidates).set_index("unit_id")
        a, b = a[a.reason == ""], b[b.reason == ""]
        if kind == "storage":
            fed = a.pv_available_kwh_year >= a.demand_kwh_year
            a, b = a[fed], b[fed]
        assert (a.unmet_energy_fraction_design > 0).any(), f"{small} meets every load; pick a smaller pair"
        assert (b.unmet_energy_fraction_design <= a.unmet_energy_fraction_design + 1e-12).all(), (small, big)
        assert (b.unmet_energy_fraction_mean <= a.unmet_energy_fraction_mean + 1e-12).all(), (small, big)


def test_more_blocks_never_serve_a_village_worse(sites, library, config, candidates):
    # common practice; the default block-count search relies on it
    kit = candidates[candidates.scheme == "minigrid"].sort_values("array_wp", kind="stable").kit_id.iat[0]
    unmet = [evaluate_kit(sites, library, config, kit, blocks=n, candidates=candidates)
             .set_index("unit_id").loc["B/village", "unmet_energy_fraction_design"] for n in (1, 2, 3)]
    assert unmet[0] > 0
    assert unmet[1] <= unmet[0] + 1e-12 and unmet[2] <= unmet[1] + 1e-12


def _compare_with_plan(table, ev):
    # evaluate's plants have n blocks of each kind: compare with the plan's options that do
    same = ev[(ev.battery_blocks == ev.blocks) & (ev.inverters == ev.blocks)]
    rows = table[table.reason == ""].merge(same, on=["unit_id", "kit_id", "blocks"], suffixes=("", "_plan"))
    assert len(rows) > 0
    for ours, theirs in FROM_PLAN.items():
        plan_col = f"{theirs}_plan" if theirs in table.columns else theirs  # merge suffixes shared names
        np.testing.assert_allclose(rows[ours].to_numpy(float), rows[plan_col].to_numpy(float), rtol=1e-9,
                                   atol=1e-12, equal_nan=True, err_msg=ours)
    for col in ("controller_loss_kwh_year", "inverter_loss_kwh_year"):  # both per kit or per whole plant
        np.testing.assert_allclose(rows[col].to_numpy(float), rows[f"{col}_plan"].to_numpy(float), rtol=1e-9,
                                   err_msg=col)
    return rows


def test_the_api_gives_the_plan_numbers_for_the_same_unit_and_kit(sites, library, config, candidates, plan):
    ev = plan.evaluations
    kit = _shs_kit_of_the_plan(plan)
    shs = evaluate_kit(sites, library, config, kit, candidates=candidates)
    rows = _compare_with_plan(shs, ev[ev.kit_id == kit])
    assert len(rows) == ev[ev.kit_id == kit].unit_id.nunique()
    # a plant of n blocks of each kind, where the plan simulated one like it
    mg_ev = ev[ev.scheme == "minigrid"]
    alike = mg_ev[(mg_ev.battery_blocks == mg_ev.blocks) & (mg_ev.inverters == mg_ev.blocks)]
    assert len(alike) > 0
    first = alike.sort_values(["kit_id", "blocks"]).iloc[0]
    given = evaluate_kit(sites, library, config, first.kit_id, blocks=int(first.blocks), candidates=candidates)
    _compare_with_plan(given, ev[ev.kit_id == first.kit_id])
    # without a count: the smallest n of each kind that meets the targets (one fewer does not)
    mg = mg_ev[mg_ev.feasible & (mg_ev.unit_id == "B/village")].iloc[0]
    auto = evaluate_kit(sites, library, config, mg.kit_id, candidates=candidates)
    village = auto[auto.unit_id == "B/village"].iloc[0]
    assert village.meets_target and "smallest" in village.blocks_basis
    if village.blocks > 1:
        fewer = evaluate_kit(sites, library, config, mg.kit_id, blocks=int(village.blocks) - 1, candidates=candidates)
        assert not fewer[fewer.unit_id == "B/village"].meets_target.iat[0]
