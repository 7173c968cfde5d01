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


QUIET = demand.DemandSettings(household_sd=0.0, common_sd=0.0, distribution_losses=0.0)
QUIET_LOSSES = demand.DemandSettings(household_sd=0.0, common_sd=0.0, distribution_losses=0.05)


def _sites(**over):
    base = dict(site_id="A", latitude=0.5, longitude=31.0, scheme="minigrid", households_t1=40, households_t2=30, households_t3=10,
                households_t4=2, households_t5=0, health_posts=1, schools=1, productive_kwh_day=10.0)
    base.update(over)
    return pd.DataFrame([base])


def test_minigrid_peak_is_below_summed_peaks_and_above_the_largest_single_load():
    sites = _sites()
    units = demand.service_units(sites)
    _d = demand.unit_loads(sites, units, demand.DemandSettings(distribution_losses=0.0), seed=1); loads, design = _d.total_w, _d.design
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
    _d = demand.unit_loads(sites, units, QUIET, seed=3); loads0, d0 = _d.total_w, _d.design
    _d = demand.unit_loads(sites, units, QUIET_LOSSES, seed=3); loads5, d5 = _d.total_w, _d.design
    rise, sett = demand.sunrise_sunset_clock_h(0.5, 31.0, round(31.0 / 15))
    light = demand.lighting_duty(rise, sett)
    expected = sum(n * demand.member_year_w(f"t{t}", light, QUIET)[0].sum() / 365 for t, n in [(1, 40), (2, 30), (3, 10), (4, 2)])
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
    _d = demand.unit_loads(sites, units, demand.DemandSettings(), seed=5); a, _ = _d.total_w, _d.design
    _d = demand.unit_loads(sites, units, demand.DemandSettings(), seed=5); b, _ = _d.total_w, _d.design
    _d = demand.unit_loads(sites, units, demand.DemandSettings(), seed=6); c, _ = _d.total_w, _d.design
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_school_load_is_zero_at_weekends():
    sites = _sites(scheme="shs", households_t1=0, households_t2=0, households_t3=0, households_t4=0,
                   health_posts=0, schools=1, productive_kwh_day=0.0)
    units = demand.service_units(sites)
    _d = demand.unit_loads(sites, units, demand.DemandSettings(common_sd=0.0), seed=1); loads, _ = _d.total_w, _d.design
    days = loads[0].reshape(365, 24).sum(axis=1)
    # 1 January 2025 was a Wednesday, so day 3 is Saturday (source: the Gregorian calendar)
    assert days[3] == 0 and days[4] == 0 and days[5] > 0


@pytest.mark.parametrize("latitude", [0.0, 15.0, -25.0])
@pytest.mark.parametrize("tier", [1, 2, 3, 4, 5])
def test_every_day_of_a_tier_profile_meets_the_tier_energy(latitude, tier):
    # source: ESMAP (2015) Beyond Connections, MTF daily energy thresholds (# from memory), checked on the
    # shortest-evening day of the year too, since lighting follows dusk
    rise, sett = demand.sunrise_sunset_clock_h(latitude, 0.0, 0.0)
    year, peak = demand.member_year_w(f"t{tier}", demand.lighting_duty(rise, sett), demand.DemandSettings())
    assert year.sum(axis=1).min() >= demand.MTF_THRESHOLDS[tier]["daily_wh"]
    assert peak >= demand.MTF_THRESHOLDS[tier]["peak_w"]


def test_day_length_from_sunrise_and_sunset_matches_the_textbook_formula():
    # source: Duffie & Beckman, Solar Engineering of Thermal Processes (4th ed.), eq. 1.6.11:
    # N = (2/15) arccos(-tan(lat) tan(decl)); at 40 N on 21 June (decl 23.45) N = 14.86 h (# from memory)
    rise, sett = demand.sunrise_sunset_clock_h(40.0, 0.0, 0.0)
    n = sett - rise
    june21 = 171
    assert demand.solar_declination_deg(np.array([june21 + 1]))[0] == pytest.approx(23.45, abs=0.05)
    assert n[june21] == pytest.approx(14.86, abs=0.05)
    assert np.allclose(demand.sunrise_sunset_clock_h(0.0, 0.0, 0.0)[1] - demand.sunrise_sunset_clock_h(0.0, 0.0, 0.0)[0], 12.0)


def test_lighting_follows_dusk_through_the_year():
    # common practice: evening lighting starts at dusk, so longer winter evenings use more light
    rise, sett = demand.sunrise_sunset_clock_h(15.0, 0.0, 0.0)
    duty = demand.lighting_duty(rise, sett)
    assert duty[355].sum() > duty[172].sum()  # December vs June in the northern hemisphere


def test_street_lights_burn_from_dusk_to_dawn():
    rise, sett = demand.sunrise_sunset_clock_h(10.0, 0.0, 0.0)
    night = demand.night_duty(rise, sett)
    assert np.allclose(night.sum(axis=1), 24.0 - (sett - rise), atol=1e-9)


def test_demand_growth_compounds_to_the_design_year():
    sites = _sites(scheme="shs", households_t4=0, health_posts=0, schools=0, productive_kwh_day=0.0)
    units = demand.service_units(sites)
    base = demand.DemandSettings(household_sd=0.0, common_sd=0.0)
    grown = demand.DemandSettings(household_sd=0.0, common_sd=0.0, growth_pct_per_year=(3.0, 5.0, 0, 0, 0), design_year=10)
    _d = demand.unit_loads(sites, units, base, seed=1); l0, d0 = _d.total_w, _d.design
    _d = demand.unit_loads(sites, units, grown, seed=1); l1, d1 = _d.total_w, _d.design
    # source: compound growth (1 + g)^n
    assert d1.daily_energy_wh.iat[0] / d0.daily_energy_wh.iat[0] == pytest.approx(1.03 ** 10, rel=1e-6)
    assert d1.daily_energy_wh.iat[1] / d0.daily_energy_wh.iat[1] == pytest.approx(1.05 ** 10, rel=1e-6)
    assert d1.first_year_daily_energy_wh.iat[1] == pytest.approx(d0.daily_energy_wh.iat[1], rel=1e-6)


def test_schools_are_off_in_closed_months():
    sites = _sites(scheme="shs", households_t1=0, households_t2=0, households_t3=0, households_t4=0,
                   health_posts=0, schools=1, productive_kwh_day=0.0)
    units = demand.service_units(sites)
    _d = demand.unit_loads(sites, units, demand.DemandSettings(school_closed_months=(4, 8)), seed=1); loads, _ = _d.total_w, _d.design
    by_day = loads[0].reshape(365, 24).sum(axis=1)
    month = demand.MONTH_OF_DAY + 1
    assert by_day[(month == 4) | (month == 8)].max() == 0
    assert by_day[month == 5].max() > 0


@pytest.mark.parametrize("kind", sorted(demand.PRODUCTIVE_KINDS))
def test_each_productive_kind_delivers_its_stated_daily_energy(kind):
    year, peak = demand.member_year_w("productive", np.zeros((365, 24)), demand.DemandSettings(), 12.0,
                                      productive_kind=kind)
    active = year.sum(axis=1) > 0
    assert year.sum(axis=1)[active] == pytest.approx(12_000.0)
    assert peak >= year.max()
    if kind == "cold_storage":
        assert active.all() and (year > 0).all()  # refrigeration runs around the clock
    else:
        assert year[:, :6].sum() == 0  # workshops, mills and welders are idle before dawn
