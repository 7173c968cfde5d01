"""Tests for fleet.resource: climate grid, synthetic days, hours and clock."""

from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest
from scipy.special import ndtri

from fleet import pv, resource

TMY3_GREENSBORO = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"


@pytest.fixture(scope="module")
def greensboro_tmy():
    # source: pvlib bundled measured TMY3 file 723170TYA.CSV (Greensboro NC)
    data, metadata = pvlib.iotools.read_tmy3(TMY3_GREENSBORO,
                                            map_variables=True)
    return data, metadata


@pytest.fixture(scope="module")
def greensboro_cell(greensboro_tmy):
    _, metadata = greensboro_tmy
    return resource.nearest_climate_cell(metadata["latitude"],
                                         metadata["longitude"])


@pytest.fixture(scope="module")
def greensboro_weather(greensboro_tmy):
    _, metadata = greensboro_tmy
    return resource.site_weather(metadata["latitude"], metadata["longitude"],
                                 n_years=3, seed=11, temp_mean_c=15.0)


# --- climate grid ---------------------------------------------------------

def test_climate_cell_has_normalised_monthly_distributions(greensboro_cell):
    cell = greensboro_cell
    assert cell.ghi_bins_wm2.shape == (12, 128)
    assert cell.bin_weights.shape == (12, 128)
    assert cell.ghi_bins_wm2.dtype == np.float64
    assert np.isfinite(cell.ghi_bins_wm2).all()
    assert np.all(cell.ghi_bins_wm2 >= 0.0)
    np.testing.assert_allclose(cell.bin_weights.sum(axis=1), 1.0, rtol=1e-12)
    assert cell.grid_resolution_deg == 3.0
    # The site (36.1 N, 79.95 W) lies between grid lines; its cell centre
    # must be a grid point within half a cell diagonal.
    assert cell.latitude_deg % 3.0 == 0.0 and cell.longitude_deg % 3.0 == 0.0
    assert 0.0 < cell.distance_km < 1.5 * 3.0 * 111.2


def test_ocean_point_is_rejected_with_distance_to_land():
    with pytest.raises(ValueError) as error:
        resource.nearest_climate_cell(0.0, -150.0)
    message = str(error.value)
    assert "(0.0000, -150.0000)" in message
    assert "km away" in message


def test_coastal_point_uses_nearby_land_cell():
    # Offshore of Cape Town, South Africa.
    cell = resource.nearest_climate_cell(-34.3, 18.0)
    assert 0.0 < cell.distance_km < 300.0
    assert monthly_kwh_is_plausible(resource.monthly_mean_ghi(cell))


def monthly_kwh_is_plausible(monthly):
    # common practice: monthly-mean daily GHI on land lies between 0 and
    # about 9 kWh/m²/day.
    return bool(np.all((monthly >= 0.0) & (monthly < 9.0)))


def test_distance_one_degree_of_latitude_is_111_km():
    # A point 1° due north of a land cell centre: no other centre is closer
    # than 2°.
    cell = resource.nearest_climate_cell(37.0, -78.0)
    assert (cell.latitude_deg, cell.longitude_deg) == (36.0, -78.0)
    # common practice: one degree of latitude is 111.2 km on a sphere of
    # mean radius 6371 km.
    assert cell.distance_km == pytest.approx(111.2, abs=0.1)


def test_nearest_cell_search_wraps_around_the_antimeridian():
    # Chukotka: the grid has land cells at 63 N on both 177 E and 180 W.
    from_east = resource.nearest_climate_cell(63.0, 179.5)
    from_west = resource.nearest_climate_cell(63.0, -179.5)
    assert from_east.longitude_deg == -180.0
    assert from_west.longitude_deg == -180.0
    # source: haversine, 0.5° of longitude at 63° latitude
    expected = 6371.0088 * np.radians(0.5) * np.cos(np.radians(63.0))
    assert from_east.distance_km == pytest.approx(expected, rel=1e-3)
    assert from_east.distance_km == pytest.approx(from_west.distance_km)


def test_invalid_latitude_is_rejected():
    with pytest.raises(ValueError, match="latitude"):
        resource.nearest_climate_cell(95.0, 10.0)


# --- embedded resource against measured data ------------------------------

def tmy_monthly_kwh_m2_day(tmy):
    ghi = tmy["ghi"]
    monthly = ghi.groupby(ghi.index.month).sum().to_numpy() / 1000.0
    return monthly / resource.DAYS_PER_MONTH


def test_embedded_annual_ghi_is_close_to_measured_tmy3(greensboro_tmy,
                                                       greensboro_cell):
    tmy, metadata = greensboro_tmy
    # source: pvlib bundled TMY3 723170TYA (measured, Greensboro NC)
    measured_annual = tmy["ghi"].sum() / 1000.0
    cell_annual = float(np.sum(resource.monthly_mean_ghi(greensboro_cell)
                               * resource.DAYS_PER_MONTH))
    # Reanalysis irradiance is biased high (too few clouds), so allow ±15 %.
    assert cell_annual == pytest.approx(measured_annual, rel=0.15)

    daily = resource.synthesize_daily_ghi(greensboro_cell,
                                          metadata["latitude"], 30, seed=5)
    synthetic_annual = daily.sum(axis=1).mean()
    assert synthetic_annual == pytest.approx(measured_annual, rel=0.15)


def test_hourly_weather_annual_ghi_is_close_to_measured_tmy3(
        greensboro_tmy, greensboro_weather):
    tmy, _ = greensboro_tmy
    measured_annual = tmy["ghi"].sum() / 1000.0  # source: pvlib TMY3 723170TYA
    annual = greensboro_weather.ghi_wm2.sum(axis=1) / 1000.0
    # Reanalysis bias high: ±15 %.
    np.testing.assert_allclose(annual, measured_annual, rtol=0.15)


def test_embedded_seasonal_shape_matches_measured_tmy3(greensboro_tmy,
                                                       greensboro_cell):
    tmy, _ = greensboro_tmy
    measured = tmy_monthly_kwh_m2_day(tmy)  # source: pvlib TMY3 723170TYA
    embedded = resource.monthly_mean_ghi(greensboro_cell)
    summer = [4, 5, 6]   # May-July
    winter = [10, 11, 0]  # November-January
    assert measured[summer].min() > measured[winter].max()
    assert embedded[summer].min() > embedded[winter].max()
    assert np.corrcoef(measured, embedded)[0, 1] > 0.95
    # The reanalysis bias is largest in autumn (about +29 % in November
    # here), so single months get a wider band than the annual total.
    np.testing.assert_allclose(embedded, measured, rtol=0.35)
    assert np.all(embedded > measured)  # biased high in every month


def test_hourly_weather_monthly_ghi_follows_measured_tmy3(greensboro_tmy,
                                                          greensboro_weather):
    tmy, _ = greensboro_tmy
    measured = tmy_monthly_kwh_m2_day(tmy)  # source: pvlib TMY3 723170TYA
    daily = greensboro_weather.daily_ghi_kwh_m2.mean(axis=0)
    monthly = (np.bincount(resource.MONTH_OF_DAY, weights=daily)
               / resource.DAYS_PER_MONTH)
    assert monthly[[5, 6]].mean() > 2.0 * monthly[[11, 0]].mean()
    assert np.corrcoef(measured, monthly)[0, 1] > 0.95


# --- synthetic daily series -----------------------------------------------

def test_synthetic_monthly_means_reproduce_the_cell(greensboro_cell):
    daily = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 20, seed=1)
    assert daily.shape == (20, 365)
    monthly = (np.bincount(resource.MONTH_OF_DAY,
                           weights=daily.mean(axis=0))
               / resource.DAYS_PER_MONTH)
    np.testing.assert_allclose(monthly,
                               resource.monthly_mean_ghi(greensboro_cell),
                               rtol=0.05)


def test_correction_factor_scales_the_series(greensboro_cell):
    plain = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 2, seed=4)
    corrected = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 2,
                                              seed=4, correction_factor=0.9)
    np.testing.assert_allclose(corrected, 0.9 * plain, rtol=1e-12)


def normal_score_lag1(daily):
    """Lag-1 correlation of normal scores formed from within-month ranks."""
    flat = daily.reshape(-1)
    month = np.tile(resource.MONTH_OF_DAY, daily.shape[0])
    scores = np.empty_like(flat)
    for m in range(12):
        pick = month == m
        ranks = np.argsort(np.argsort(flat[pick]))
        scores[pick] = ndtri((ranks + 0.5) / pick.sum())
    return np.corrcoef(scores[:-1], scores[1:])[0, 1]


@pytest.mark.parametrize("persistence", [0.0, 0.3, 0.7])
def test_synthetic_days_have_the_requested_persistence(greensboro_cell,
                                                       persistence):
    daily = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 20, seed=2,
                                          persistence=persistence)
    # The extraterrestrial scaling within a month perturbs ranks slightly;
    # 7300 days give a sampling error near 0.01.
    assert normal_score_lag1(daily) == pytest.approx(persistence, abs=0.05)


def test_ar1_normal_scores_are_standard_and_persistent():
    z = resource.ar1_normal_scores(200_000, 0.6, np.random.default_rng(0))
    assert z.mean() == pytest.approx(0.0, abs=0.02)
    assert z.std() == pytest.approx(1.0, abs=0.02)
    assert np.corrcoef(z[:-1], z[1:])[0, 1] == pytest.approx(0.6, abs=0.01)
    # source: AR(1) theory, lag-k autocorrelation = phi**k
    assert np.corrcoef(z[:-2], z[2:])[0, 1] == pytest.approx(0.36, abs=0.01)


def test_persistence_chains_across_year_boundaries(greensboro_cell):
    daily = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 40, seed=9,
                                          persistence=0.9)
    december_31 = daily[:-1, -1]
    january_1 = daily[1:, 0]
    # With strong persistence, a dull 31 December is followed by a dull
    # 1 January; independent years would give a correlation near zero.
    assert np.corrcoef(december_31, january_1)[0, 1] > 0.4


def test_same_seed_gives_identical_series(greensboro_cell):
    first = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 3, seed=42)
    second = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 3, seed=42)
    other = resource.synthesize_daily_ghi(greensboro_cell, 36.1, 3, seed=43)
    np.testing.assert_array_equal(first, second)
    assert not np.allclose(first, other)


def test_extraterrestrial_daily_irradiation_matches_worked_example():
    # from memory: Duffie & Beckman, Example 1.10.1: latitude 43° N,
    # 15 April (day 105): H0 = 33.8 MJ/m².
    h0 = resource.extraterrestrial_daily_irradiation(43.0, 105)
    assert float(h0) * 3.6 == pytest.approx(33.8, rel=0.01)
    # common practice: no sunrise at 80° N in December
    assert float(resource.extraterrestrial_daily_irradiation(80.0, 355)) == 0.0


# --- daily to hourly ------------------------------------------------------

@pytest.fixture(scope="module")
def clear_sky_greensboro():
    times = resource.local_hour_midpoints_utc(-5.0)
    geometry = pv.solar_geometry(36.1, -79.95, times, 273.0)
    return resource.clear_sky_ghi(geometry, 36.1, -79.95, 273.0)


def test_daily_to_hourly_preserves_each_days_total(clear_sky_greensboro):
    clear = clear_sky_greensboro
    clear_daily = clear.reshape(365, 24).sum(axis=1) / 1000.0
    rng = np.random.default_rng(0)
    index = rng.uniform(0.05, 1.4, size=(2, 365))
    daily = index * clear_daily
    hourly = resource.daily_to_hourly_ghi(daily, clear)
    assert hourly.shape == (2, 8760)
    sums = hourly.reshape(2, 365, 24).sum(axis=2) / 1000.0
    capped = index > resource.MAX_DAILY_CLEARSKY_INDEX
    assert capped.any() and (~capped).any()
    np.testing.assert_allclose(sums[~capped], daily[~capped], rtol=1e-12)
    # Capped days carry the cap times the clear-sky day, no more.
    np.testing.assert_allclose(
        sums[capped],
        (resource.MAX_DAILY_CLEARSKY_INDEX * np.broadcast_to(
            clear_daily, daily.shape))[capped], rtol=1e-12)


def test_daily_to_hourly_is_zero_at_night(clear_sky_greensboro):
    clear = clear_sky_greensboro
    hourly = resource.daily_to_hourly_ghi(np.full((1, 365), 4.0), clear)
    night = clear == 0.0
    assert night.mean() > 0.4
    assert np.all(hourly[:, night] == 0.0)
    assert np.all(hourly[:, ~night] > 0.0)
    # Local midnight is dark everywhere in a mid-latitude year.
    assert np.all(hourly.reshape(365, 24)[:, 0] == 0.0)


# --- clock ----------------------------------------------------------------

@pytest.mark.parametrize("latitude, longitude, expected", [
    (-1.29, 36.82, 3.0),     # source: IANA tz database, Africa/Nairobi (EAT)
    (39.74, -105.18, -7.0),  # source: IANA tz database, America/Denver (MST)
    (-33.87, 151.21, 10.0),  # source: IANA tz database, Australia/Sydney
                             # (AEST; January is daylight time there)
    (27.70, 85.32, 5.75),    # source: IANA tz database, Asia/Kathmandu
])
def test_utc_offset_is_local_standard_time(latitude, longitude, expected):
    assert resource.utc_offset_hours(latitude, longitude) == expected


def test_utc_offset_at_sea_follows_nautical_zones():
    # common practice: nautical time zones are longitude / 15 rounded
    assert resource.utc_offset_hours(0.0, -150.0) == -10.0


def test_local_hour_midpoints_start_at_local_midnight():
    times = resource.local_hour_midpoints_utc(3.0, year=2025)
    assert len(times) == 8760
    assert str(times.tz) == "UTC"
    assert times[0] == pd.Timestamp("2024-12-31 21:30", tz="UTC")
    assert times[-1] == pd.Timestamp("2025-12-31 20:30", tz="UTC")
    assert np.all(times[1:] - times[:-1] == pd.Timedelta(hours=1))


def test_clear_sky_peak_falls_near_local_solar_noon():
    # Nairobi region: longitude ~36.8 E on UTC+3 (zone meridian 45 E), so
    # solar noon is about 12:33 local ± the equation of time (±17 min).
    latitude, longitude = -1.29, 36.82
    offset = resource.utc_offset_hours(latitude, longitude)
    times = resource.local_hour_midpoints_utc(offset)
    geometry = pv.solar_geometry(latitude, longitude, times, 1700.0)
    clear = resource.clear_sky_ghi(geometry, latitude, longitude, 1700.0)
    peak_hour = clear.reshape(365, 24).argmax(axis=1)
    assert np.all(np.abs(peak_hour - 12) <= 1)
    assert np.mean(peak_hour == 12) > 0.9  # the hour 12:00-13:00 mostly


# --- air temperature and site weather -------------------------------------

def test_air_temperature_profile_shape():
    temp = resource.air_temperature_profile(20.0, 6.0)
    assert temp.shape == (8760,)
    day = temp[:24]
    assert day.mean() == pytest.approx(20.0, abs=1e-9)
    assert np.argmin(day) in (4, 5)      # minimum near 05:00
    assert np.argmax(day) in (14, 15)    # maximum near 15:00
    assert day.max() == pytest.approx(26.0, abs=0.1)
    assert day.min() == pytest.approx(14.0, abs=0.1)


def test_site_weather_shapes_units_and_orientation(greensboro_weather):
    w = greensboro_weather
    for name in ("ghi_wm2", "poa_wm2", "cell_temp_c"):
        array = getattr(w, name)
        assert array.shape == (3, 8760), name
        assert array.dtype == np.float32, name
        assert np.isfinite(array).all(), name
    assert w.temp_air_c.shape == (3, 8760) and w.temp_air_c.dtype == np.float32
    assert w.wind_speed_ms.shape == (3, 8760)
    assert w.daily_ghi_kwh_m2.shape == (3, 365)
    np.testing.assert_allclose(w.daily_ghi_kwh_m2,
                               w.ghi_wm2.reshape(3, 365, 24).sum(axis=2)
                               / 1000.0, rtol=1e-5)
    assert w.utc_offset_hours == -5.0  # source: IANA tz America/New_York EST
    assert (w.tilt_deg, w.azimuth_deg) == pytest.approx((36.1, 180.0))
    # source: pvlib bundled TMY3 metadata gives 273 m at the airport; the
    # bundled altitude map is coarser.
    assert w.elevation_m == pytest.approx(273.0, abs=100.0)
    assert w.cell.latitude_deg == 36.0
    # Cells heat above ambient in sunshine and hardly at night.
    sunny = w.poa_wm2 > 600.0
    assert np.all(w.cell_temp_c[sunny] > w.temp_air_c[sunny] + 10.0)


def test_site_weather_is_reproducible(greensboro_tmy):
    _, metadata = greensboro_tmy
    kwargs = dict(n_years=2, temp_mean_c=15.0)
    first = resource.site_weather(metadata["latitude"], metadata["longitude"],
                                  seed=3, **kwargs)
    second = resource.site_weather(metadata["latitude"],
                                   metadata["longitude"], seed=3, **kwargs)
    np.testing.assert_array_equal(first.poa_wm2, second.poa_wm2)


def test_site_weather_southern_site_faces_north():
    w = resource.site_weather(-15.4, 28.3, n_years=2, seed=1,
                              temp_mean_c=21.0)   # Lusaka, Zambia
    assert (w.tilt_deg, w.azimuth_deg) == pytest.approx((15.4, 0.0))
    assert w.utc_offset_hours == 2.0  # source: IANA tz Africa/Lusaka (CAT)
    ratio = w.poa_wm2.sum() / w.ghi_wm2.sum()
    assert 1.0 < ratio < 1.2  # common practice: modest gain at low latitude


# --- own cell or a neighbour --------------------------------------------------

def test_inland_site_uses_its_own_cell():
    cell = resource.nearest_climate_cell(-1.29, 36.82)   # Nairobi
    assert cell.is_own_cell
    assert abs(cell.latitude_deg + 1.29) <= 1.5
    assert abs(cell.longitude_deg - 36.82) <= 1.5


def test_island_site_without_data_in_its_cell_is_flagged():
    # Malé, Maldives (4.17 N, 73.51 E): its 3° cell is sea in the reanalysis
    # land mask, so the nearest cell with data, on the Indian mainland or
    # Sri Lanka side, is taken and flagged.
    cell = resource.nearest_climate_cell(4.17, 73.51)
    assert not cell.is_own_cell
    assert (abs(cell.latitude_deg - 4.17) > 1.5
            or abs(cell.longitude_deg - 73.51) > 1.5)
    weather = resource.site_weather(4.17, 73.51, n_years=1, seed=1,
                                    temp_mean_c=28.0)
    assert "nearest cell with data" in weather.source
    assert weather.cell.is_own_cell is False


# --- clear sky on the fast path -----------------------------------------------

@pytest.mark.filterwarnings("ignore:.*dayofyear is deprecated")
@pytest.mark.parametrize("latitude, longitude", [
    (36.1, -79.95), (-1.29, 36.82), (13.5, 2.1), (-33.9, 18.4)])
def test_linke_turbidity_matches_pvlib_lookup(latitude, longitude):
    times = resource.local_hour_midpoints_utc(0.0)[::24]
    # source: pvlib.clearsky.lookup_linke_turbidity (reference library)
    expected = pvlib.clearsky.lookup_linke_turbidity(times, latitude,
                                                     longitude)
    got = resource.linke_turbidity(latitude, longitude,
                                   times.day_of_year.to_numpy())
    np.testing.assert_allclose(got, expected.to_numpy(), rtol=1e-12)


@pytest.mark.filterwarnings("ignore:.*dayofyear is deprecated")
def test_clear_sky_matches_pvlib_location_clearsky():
    times = resource.local_hour_midpoints_utc(-5.0)
    geometry = pv.solar_geometry(36.1, -79.95, times, 273.0)
    ours = resource.clear_sky_ghi(geometry, 36.1, -79.95, 273.0)
    # source: pvlib.location.Location.get_clearsky (Ineichen, reference
    # library) with the same solar position
    location = pvlib.location.Location(36.1, -79.95, altitude=273.0)
    expected = location.get_clearsky(times, model="ineichen",
                                     solar_position=geometry)["ghi"]
    np.testing.assert_allclose(ours, np.clip(expected.to_numpy(), 0, None),
                               rtol=1e-9, atol=1e-9)


# --- temperatures from monthly values -----------------------------------------

def test_monthly_temperature_profile_keeps_each_months_mean_and_minimum():
    # Greensboro TMY3 monthly mean air temperatures, computed from the file
    tmy, _ = pvlib.iotools.read_tmy3(TMY3_GREENSBORO, map_variables=True)
    # source: pvlib bundled TMY3 723170TYA (measured)
    month = (tmy.index - pd.Timedelta(hours=1)).month.to_numpy() - 1
    mean = np.bincount(month, weights=tmy["temp_air"].to_numpy()) / np.bincount(month)
    minimum = mean - 6.0
    profile = resource.monthly_air_temperature_profile(mean, minimum)
    by_day = profile.reshape(365, 24)
    got_mean = np.bincount(resource.MONTH_OF_DAY, weights=by_day.mean(axis=1)) / resource.DAYS_PER_MONTH
    np.testing.assert_allclose(got_mean, mean, atol=1e-9)
    np.testing.assert_allclose(by_day.min(axis=1), minimum[resource.MONTH_OF_DAY], atol=0.1)


def test_weather_source_without_temperature_needs_a_mean():
    with pytest.raises(ValueError, match="temp_mean_c"):
        resource.site_weather_from(resource.EMBEDDED, 36.1, -79.95, n_years=1,
                                   seed=1)


def test_orientation_can_be_given():
    w = resource.site_weather_from(resource.EMBEDDED, 36.1, -79.95, n_years=1,
                                   seed=1, temp_mean_c=15.0, tilt_deg=20.0,
                                   azimuth_deg=200.0)
    assert (w.tilt_deg, w.azimuth_deg) == (20.0, 200.0)
    with pytest.raises(ValueError, match="tilt_deg"):
        resource.site_weather_from(resource.EMBEDDED, 36.1, -79.95,
                                   n_years=1, seed=1, temp_mean_c=15.0,
                                   tilt_deg=95.0)


def test_embedded_source_is_described_with_cell_and_distance(greensboro_weather):
    w = greensboro_weather
    # source: great-circle distance (36.1 N, 79.95 W) to the cell centre
    # (36 N, 81 W), haversine on a 6371 km sphere: about 95 km
    assert w.source == "embedded MERRA-2 3° cell at (36.0, -81.0), 95 km"
    assert w.source_kind == "embedded"
    assert w.data_distance_km == pytest.approx(95.0, abs=1.0)
    assert not w.temperature_from_data
