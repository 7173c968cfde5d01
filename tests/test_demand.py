import numpy as np
import pandas as pd
import pytest

from fleet import demand


@pytest.mark.parametrize("tier", [1, 2, 3, 4, 5])
def test_each_tier_profile_meets_its_multi_tier_framework_thresholds(tier):
    # source: ESMAP (2015) Beyond Connections, Multi-Tier Framework for household electricity
    # supply: minimum peak capacity 3/50/200/800/2000 W and daily energy 12/200/1000/3400/8200 Wh
    # for tiers 1-5 (# from memory)
    thresholds = {1: (3, 12), 2: (50, 200), 3: (200, 1000), 4: (800, 3400), 5: (2000, 8200)}
    peak_min, energy_min = thresholds[tier]
    apps = demand.TIER_APPLIANCES[tier]
    assert demand.peak_power_w(apps) >= peak_min
    assert demand.daily_energy_wh(apps) >= energy_min
    assert demand.MTF_THRESHOLDS[tier]["daily_wh"] == energy_min
    assert demand.MTF_THRESHOLDS[tier]["peak_w"] == peak_min


@pytest.mark.parametrize("tier", [1, 2, 3])
def test_household_tiers_peak_in_the_evening(tier):
    # common practice: rural household demand peaks after dusk (lighting, television)
    prof = demand.daily_profile_w(demand.TIER_APPLIANCES[tier])
    assert 18 <= int(np.argmax(prof)) <= 22


def test_tiers_rise_in_energy():
    e = [demand.daily_energy_wh(demand.TIER_APPLIANCES[t]) for t in range(1, 6)]
    assert all(a < b for a, b in zip(e, e[1:]))


def test_day_to_day_factors_have_mean_one_and_requested_spread():
    rng = np.random.default_rng(1)
    f = demand.day_to_day_factors(200_000, 0.15, rng)
    assert f.mean() == pytest.approx(1.0, abs=0.01)
    assert f.std() == pytest.approx(0.15, rel=0.05)
    assert (f > 0).all()


def _sites(**over):
    base = dict(site_id="A", scheme="minigrid", households_t1=40, households_t2=30, households_t3=10,
                households_t4=2, households_t5=0, health_posts=1, schools=1, productive_kwh_day=10.0)
    base.update(over)
    return pd.DataFrame([base])


def test_minigrid_peak_is_below_summed_peaks_and_above_the_largest_single_load():
    sites = _sites()
    units = demand.service_units(sites)
    loads, design = demand.unit_loads(sites, units, seed=1, household_sd=0.15, common_sd=0.08, distribution_losses=0.0)
    s = sites.iloc[0]
    singles = [demand.peak_power_w(demand.TIER_APPLIANCES[t]) for t in range(1, 6) if s[f"households_t{t}"] > 0]
    singles += [demand.peak_power_w(a) for a in demand.FACILITY_APPLIANCES.values()]
    summed = sum(s[f"households_t{t}"] * demand.peak_power_w(demand.TIER_APPLIANCES[t]) for t in range(1, 6))
    summed += sum(demand.peak_power_w(a) for a in demand.FACILITY_APPLIANCES.values()) + 2 * 10_000 * demand.PRODUCTIVE_SHAPE.max()
    peak = design.peak_power_w.iat[0]
    assert max(singles) <= peak <= summed
    assert loads[0].max() <= peak * (1 + 1e-6)


def test_minigrid_energy_is_the_sum_of_its_members_and_losses_add_on_top():
    sites = _sites(health_posts=0, schools=0, productive_kwh_day=0.0)
    units = demand.service_units(sites)
    loads0, d0 = demand.unit_loads(sites, units, seed=3, household_sd=0.0, common_sd=0.0, distribution_losses=0.0)
    loads5, d5 = demand.unit_loads(sites, units, seed=3, household_sd=0.0, common_sd=0.0, distribution_losses=0.05)
    expected = sum(n * demand.daily_energy_wh(demand.TIER_APPLIANCES[t]) for t, n in [(1, 40), (2, 30), (3, 10), (4, 2)])
    assert d0.daily_energy_wh.iat[0] == pytest.approx(expected, rel=1e-5)
    assert d5.daily_energy_wh.iat[0] == pytest.approx(expected / 0.95, rel=1e-5)


def test_shs_site_gets_one_unit_per_tier_group_and_facility():
    sites = _sites(scheme="shs", households_t4=0)
    units = demand.service_units(sites)
    assert list(units.group) == ["t1", "t2", "t3", "health_post", "school", "productive"]
    assert list(units["count"]) == [40, 30, 10, 1, 1, 1]


def test_loads_are_reproducible_for_a_seed_and_differ_between_seeds():
    sites = _sites(scheme="shs")
    units = demand.service_units(sites)
    a, _ = demand.unit_loads(sites, units, seed=5, household_sd=0.15, common_sd=0.08, distribution_losses=0)
    b, _ = demand.unit_loads(sites, units, seed=5, household_sd=0.15, common_sd=0.08, distribution_losses=0)
    c, _ = demand.unit_loads(sites, units, seed=6, household_sd=0.15, common_sd=0.08, distribution_losses=0)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_school_load_is_zero_at_weekends():
    sites = _sites(scheme="shs", households_t1=0, households_t2=0, households_t3=0, households_t4=0,
                   health_posts=0, schools=1, productive_kwh_day=0.0)
    units = demand.service_units(sites)
    loads, _ = demand.unit_loads(sites, units, seed=1, household_sd=0.1, common_sd=0.0, distribution_losses=0)
    days = loads[0].reshape(365, 24).sum(axis=1)
    # 1 January 2025 was a Wednesday, so day 3 is Saturday (source: the Gregorian calendar)
    assert days[3] == 0 and days[4] == 0 and days[5] > 0
