"""Tests for fleet.pv: sun geometry, transposition, temperature, DC output."""

import numpy as np
import pandas as pd
import pvlib
import pytest

from fleet import pv, resource

# Greensboro, North Carolina: the site of pvlib's bundled TMY3 file 723170TYA.
GREENSBORO = (36.1, -79.95)


@pytest.fixture(scope="module")
def greensboro_geometry():
    times = resource.local_hour_midpoints_utc(-5.0)
    geometry = pv.solar_geometry(*GREENSBORO, times, 273.0)
    clear = resource.clear_sky_ghi(geometry, *GREENSBORO, 273.0)
    return geometry, clear


@pytest.fixture(scope="module")
def greensboro_weather():
    return resource.site_weather(*GREENSBORO, n_years=2, seed=7,
                                 temp_mean_c=15.0)


def test_solar_position_matches_spa_worked_example():
    # source: Reda & Andreas 2004, NREL/TP-560-34302, Table A5.1 worked
    # example: 17 Oct 2003 12:30:30 local (UTC-7), lat 39.742476,
    # lon -105.1786, elevation 1830.14 m, 820 mbar, 11 °C, delta T 67 s;
    # topocentric zenith 50.11162°, azimuth 194.34024°.
    times = pd.DatetimeIndex([pd.Timestamp("2003-10-17 12:30:30",
                                           tz="Etc/GMT+7")]).tz_convert("UTC")
    geometry = pv.solar_geometry(39.742476, -105.1786, times, 1830.14,
                                 pressure_pa=82000.0, temperature_c=11.0,
                                 delta_t_s=67.0)
    assert geometry["apparent_zenith"].iloc[0] == pytest.approx(50.11162,
                                                                abs=1e-3)
    assert geometry["azimuth"].iloc[0] == pytest.approx(194.34024, abs=1e-3)


def test_extraterrestrial_normal_irradiance_follows_earth_orbit(
        greensboro_geometry):
    geometry, _ = greensboro_geometry
    dni_extra = geometry["dni_extra"].to_numpy()
    # source: pvlib.irradiance.get_extra_radiation (reference library)
    expected = pvlib.irradiance.get_extra_radiation(geometry.index.day_of_year)
    np.testing.assert_allclose(dni_extra, expected, rtol=1e-12)
    # common practice: perihelion in early January, aphelion in early July,
    # about ±3.3 % around the solar constant.
    assert dni_extra[:24 * 10].mean() > 1400.0
    assert dni_extra[24 * 181:24 * 191].mean() < 1330.0


@pytest.mark.parametrize("latitude, expected", [
    (36.1, (36.1, 180.0)),
    (-25.0, (25.0, 0.0)),
    (4.0, (10.0, 180.0)),   # common practice: >= 10° so rain cleans modules
    (-2.0, (10.0, 0.0)),
    (0.0, (10.0, 180.0)),
])
def test_default_orientation_faces_equator_at_latitude_tilt(latitude,
                                                            expected):
    # common practice: fixed arrays tilted near latitude, facing the equator
    assert pv.default_orientation(latitude) == pytest.approx(expected)


@pytest.mark.parametrize("model", ["perez", "haydavies"])
def test_plane_of_array_matches_direct_pvlib_calls(greensboro_geometry,
                                                   model):
    geometry, clear = greensboro_geometry
    rng = np.random.default_rng(3)
    # Two weather years of cloudy-ish hours built on the clear sky.
    ghi = clear[None, :] * rng.uniform(0.2, 1.05, size=(2, 8760))
    zenith = geometry["zenith"].to_numpy()
    azimuth = geometry["azimuth"].to_numpy()
    dni_extra = geometry["dni_extra"].to_numpy()
    poa = pv.plane_of_array(ghi, zenith, azimuth, dni_extra, 36.0, 180.0,
                            albedo=0.2, model=model)
    assert poa.shape == ghi.shape
    assert np.isfinite(poa).all()

    # source: pvlib.irradiance.erbs + get_total_irradiance (reference
    # library), called one year at a time on the same inputs.
    day_of_year = np.arange(8760) // 24 + 1
    airmass = pvlib.atmosphere.get_relative_airmass(zenith)
    for year in range(2):
        parts = pvlib.irradiance.erbs(ghi[year], zenith, day_of_year)
        with np.errstate(invalid="ignore"):
            reference = pvlib.irradiance.get_total_irradiance(
                36.0, 180.0, zenith, azimuth, parts["dni"], ghi[year],
                parts["dhi"], dni_extra=dni_extra, airmass=airmass,
                albedo=0.2, model=model)["poa_global"]
        day = (zenith < 90.0) & (ghi[year] > 0.0)
        np.testing.assert_allclose(poa[year][day], reference[day],
                                   rtol=1e-9, atol=1e-9)
        assert np.all(poa[year][~day] == 0.0)


def test_plane_of_array_is_zero_at_night(greensboro_weather):
    weather = greensboro_weather
    night = weather.ghi_wm2 == 0.0
    assert night.mean() > 0.4  # roughly half of all hours are dark
    assert np.all(weather.poa_wm2[night] == 0.0)


def test_tilted_equator_facing_array_collects_more_than_horizontal(
        greensboro_weather):
    weather = greensboro_weather
    ghi_annual = weather.ghi_wm2.sum(axis=1) / 1000.0
    poa_annual = weather.poa_wm2.sum(axis=1) / 1000.0
    ratio = poa_annual / ghi_annual
    # common practice: at mid latitudes a latitude-tilt south-facing plane
    # receives roughly 10-20 % more than the horizontal over a year.
    assert np.all(ratio > 1.0)
    assert np.all(ratio < 1.3)


def test_unknown_transposition_model_is_rejected(greensboro_geometry):
    geometry, clear = greensboro_geometry
    with pytest.raises(ValueError, match="transposition model"):
        pv.plane_of_array(clear[None, :], geometry["zenith"],
                          geometry["azimuth"], geometry["dni_extra"], 30.0,
                          180.0, model="isotropic-ish")


def test_cell_temperature_matches_pvlib_faiman():
    poa = np.array([[0.0, 200.0, 800.0, 1000.0], [50.0, 400.0, 600.0, 1100.0]])
    temp_air = np.array([10.0, 20.0, 30.0, 35.0])
    result = pv.cell_temperature(poa, temp_air, wind_speed_ms=2.0)
    # source: pvlib.temperature.faiman (reference library)
    expected = pvlib.temperature.faiman(poa, np.broadcast_to(temp_air,
                                                             poa.shape),
                                        wind_speed=2.0, u0=25.0, u1=6.84)
    np.testing.assert_allclose(result, expected, rtol=1e-12)
    # source: Faiman 2008, T_cell = T_air + G / (U0 + U1 * v)
    assert result[0, 2] == pytest.approx(30.0 + 800.0 / (25.0 + 6.84 * 2.0))


def test_dc_power_matches_pvlib_pvwatts():
    poa = np.array([0.0, 200.0, 1000.0, 800.0])
    cell_temp = np.array([10.0, 30.0, 25.0, 55.0])
    result = pv.dc_power_per_kwp(poa, cell_temp, gamma_pdc_per_k=-0.0037,
                                 losses_fraction=0.14)
    # source: pvlib.pvsystem.pvwatts_dc (reference library)
    expected = pvlib.pvsystem.pvwatts_dc(poa, cell_temp, 1000.0,
                                         -0.0037) * (1.0 - 0.14)
    np.testing.assert_allclose(result, expected, rtol=1e-12)


def test_dc_power_at_standard_test_conditions_is_nameplate():
    # source: Dobos 2014, PVWatts V5 manual: P = G/1000 * Pdc0 *
    # (1 + gamma * (T_cell - 25))
    stc = pv.dc_power_per_kwp(1000.0, 25.0, losses_fraction=0.0)
    assert float(stc) == pytest.approx(1000.0)
    hot = pv.dc_power_per_kwp(1000.0, 45.0, gamma_pdc_per_k=-0.004,
                              losses_fraction=0.0)
    assert float(hot) == pytest.approx(1000.0 * (1.0 - 0.004 * 20.0))


def test_dc_power_rejects_impossible_losses():
    with pytest.raises(ValueError, match="losses_fraction"):
        pv.dc_power_per_kwp(1000.0, 25.0, losses_fraction=1.2)


def test_specific_yield_sums_hours_per_year():
    dc = np.full((2, 8760), 500.0)
    dc[1, :4380] = 0.0
    np.testing.assert_allclose(pv.specific_yield_kwh_per_kwp(dc),
                               [4380.0, 2190.0])


def test_specific_yield_at_greensboro_is_plausible(greensboro_weather):
    weather = greensboro_weather
    dc = pv.dc_power_per_kwp(weather.poa_wm2, weather.cell_temp_c)
    annual = pv.specific_yield_kwh_per_kwp(dc)
    assert annual.shape == (2,)
    # common practice: fixed-tilt DC yield in the south-eastern United States
    # is roughly 1300-1600 kWh/kWp per year; reanalysis irradiance (biased
    # high) may push it somewhat above.
    assert np.all((annual > 1250.0) & (annual < 1800.0))


# --- fast sun position ------------------------------------------------------

def test_almanac_sun_position_matches_spa_worked_example():
    # source: Reda & Andreas 2004, NREL/TP-560-34302, Table A5.1 (as above);
    # the almanac formulae claim 0.01° over 1950-2050 (Michalsky 1988,
    # Solar Energy 40:227), so allow 0.02°.
    times = pd.DatetimeIndex([pd.Timestamp("2003-10-17 12:30:30",
                                           tz="Etc/GMT+7")]).tz_convert("UTC")
    geometry = pv.solar_geometry(39.742476, -105.1786, times, 1830.14,
                                 pressure_pa=82000.0, temperature_c=11.0,
                                 method="almanac")
    assert geometry["apparent_zenith"].iloc[0] == pytest.approx(50.11162,
                                                                abs=0.02)
    assert geometry["azimuth"].iloc[0] == pytest.approx(194.34024, abs=0.02)


def _sun_vectors(elevation_deg, azimuth_deg):
    e, a = np.radians(elevation_deg), np.radians(azimuth_deg)
    return np.stack([np.cos(e) * np.sin(a), np.cos(e) * np.cos(a), np.sin(e)])


@pytest.mark.parametrize("latitude, longitude, offset", [
    (36.1, -79.95, -5.0),     # Greensboro NC (pvlib TMY3 site)
    (-1.29, 36.82, 3.0),      # Nairobi
    (64.8, -147.7, -9.0),     # Fairbanks AK: low sun, long days
    (-33.9, 18.4, 2.0),       # Cape Town
])
def test_almanac_sun_position_agrees_with_spa_over_a_year(latitude,
                                                          longitude, offset):
    times = resource.local_hour_midpoints_utc(offset)
    # source: pvlib's NREL SPA (reference library), every hour of a year
    spa = pv.solar_geometry(latitude, longitude, times, 0.0, method="spa")
    fast = pv.solar_geometry(latitude, longitude, times, 0.0,
                             method="almanac")
    separation = np.degrees(np.arccos(np.clip(
        (_sun_vectors(spa["elevation"], spa["azimuth"])
         * _sun_vectors(fast["elevation"], fast["azimuth"])).sum(axis=0),
        -1.0, 1.0)))
    # Stated tolerance of the fast path: 0.02° in direction and zenith
    # (Michalsky 1988 claims 0.01°); an hour of sun motion is 15°.
    assert separation.max() < 0.02
    np.testing.assert_allclose(fast["zenith"], spa["zenith"], atol=0.02)
    up = spa["apparent_elevation"] > 1.0
    np.testing.assert_allclose(fast["apparent_zenith"][up],
                               spa["apparent_zenith"][up], atol=0.02)
    np.testing.assert_allclose(fast["dni_extra"], spa["dni_extra"],
                               rtol=1e-12)


def test_sun_year_clear_sky_is_the_same_with_fast_and_precise_sun():
    # source: pvlib's NREL SPA (reference library) through the same chain
    fast = resource.sun_year(36.1, -79.95, -5.0, 273.0, method="almanac")
    precise = resource.sun_year(36.1, -79.95, -5.0, 273.0, method="spa")
    daily_fast = fast.clearsky_ghi_wm2.reshape(365, 24).sum(axis=1)
    daily_precise = precise.clearsky_ghi_wm2.reshape(365, 24).sum(axis=1)
    np.testing.assert_allclose(daily_fast, daily_precise, rtol=2e-3)


def test_relative_airmass_matches_pvlib():
    zenith = np.array([0.0, 30.0, 60.0, 80.0, 89.5, 95.0])
    # source: pvlib.atmosphere.get_relative_airmass, Kasten & Young 1989
    expected = pvlib.atmosphere.get_relative_airmass(zenith)
    np.testing.assert_allclose(pv.relative_airmass(zenith), expected,
                               rtol=1e-12, equal_nan=True)


def test_erbs_decomposition_matches_pvlib(greensboro_geometry):
    geometry, clear = greensboro_geometry
    rng = np.random.default_rng(5)
    ghi = clear * rng.uniform(0.1, 1.1, size=clear.shape)
    zenith = geometry["zenith"].to_numpy()
    day = np.arange(8760) // 24 + 1
    dni, dhi = pv.erbs_decomposition(ghi, zenith, day)
    # source: pvlib.irradiance.erbs (reference library)
    expected = pvlib.irradiance.erbs(ghi, zenith, day)
    np.testing.assert_allclose(dni, expected["dni"], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(dhi, expected["dhi"], rtol=1e-9, atol=1e-9)


def test_unknown_solar_position_method_is_rejected():
    times = resource.local_hour_midpoints_utc(0.0)[:2]
    with pytest.raises(ValueError, match="solar position method"):
        pv.solar_geometry(0.0, 0.0, times, 0.0, method="guess")


# --- separate DC losses -------------------------------------------------------

def test_default_separate_losses_equal_the_pvwatts_total():
    poa = np.array([200.0, 800.0])
    temp = np.array([20.0, 50.0])
    # source: Dobos 2014, PVWatts V5 manual: default total DC losses 14 %
    np.testing.assert_allclose(pv.dc_power_per_kwp(poa, temp),
                               pv.dc_power_per_kwp(poa, temp,
                                                   losses_fraction=0.14),
                               rtol=1e-12)
    assert pv.combined_losses_fraction() == pytest.approx(0.14, abs=1e-12)


def test_pvwatts_loss_breakdown_combines_multiplicatively():
    # from memory: PVWatts V5 default losses are soiling 2, shading 3,
    # snow 0, mismatch 2, wiring 2, connections 0.5, light-induced
    # degradation 1.5, nameplate 1, age 0, availability 3 (%) (Dobos 2014,
    # PVWatts V5 manual), combining to 14.08 %.
    other = 1.0 - (0.97 * 0.98 * 0.995 * 0.985 * 0.99 * 0.97)
    total = pv.combined_losses_fraction(0.02, 0.02, other)
    assert total == pytest.approx(0.1408, abs=5e-5)


def test_soiling_and_wiring_scale_the_output():
    base = pv.dc_power_per_kwp(1000.0, 25.0, soiling_fraction=0.0,
                               wiring_fraction=0.0, other_losses_fraction=0.0)
    assert float(base) == pytest.approx(1000.0)
    dusty = pv.dc_power_per_kwp(1000.0, 25.0, soiling_fraction=0.05,
                                wiring_fraction=0.03,
                                other_losses_fraction=0.0)
    # source: PVWatts V5 manual, losses combine as a product of (1 - loss)
    assert float(dusty) == pytest.approx(1000.0 * 0.95 * 0.97)


def test_total_and_separate_losses_cannot_both_be_given():
    with pytest.raises(ValueError, match="either losses_fraction"):
        pv.dc_power_per_kwp(1000.0, 25.0, losses_fraction=0.1,
                            soiling_fraction=0.02)
    with pytest.raises(ValueError, match="soiling_fraction"):
        pv.dc_power_per_kwp(1000.0, 25.0, soiling_fraction=1.5)
