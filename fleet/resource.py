"""Hourly solar resource for any site on land, from the embedded climate grid.

The package ``gsee-climate-data`` holds, for each 3° land cell and calendar
month, the distribution of daily-mean global horizontal irradiance (GHI) from
the MERRA-2 reanalysis, 2011-2015. From it this module builds synthetic
weather years:

1. daily GHI with day-to-day persistence, whose distribution in each month is
   the cell's (:func:`synthesize_daily_ghi`);
2. hourly GHI as the Ineichen clear-sky profile times each day's clear-sky
   index (:func:`daily_to_hourly_ghi`);
3. plane-of-array irradiance and cell temperature (:mod:`fleet.pv`).

Hour ``h`` of every hourly array is local standard clock hour ``h`` of a
365-day year starting at local midnight on 1 January.

Reanalysis irradiance is biased high at many places; ``correction_factor``
scales the daily values, and a user's measured data should take precedence.

References
----------
.. [1] R. Gelaro et al., "The Modern-Era Retrospective Analysis for Research
   and Applications, Version 2 (MERRA-2)", Journal of Climate
   30(14):5419-5454, 2017.
.. [2] S. Pfenninger and I. Staffell, "Long-term patterns of European PV
   output using 30 years of validated hourly reanalysis and satellite data",
   Energy 114:1251-1265, 2016.
"""

from __future__ import annotations

import datetime as _dt
import functools
import warnings
from dataclasses import dataclass
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pvlib
from scipy.signal import lfilter
from scipy.special import ndtr

from fleet import pv

#: Mean Earth radius [km] (IUGG) used for great-circle distances.
EARTH_RADIUS_KM = 6371.0088

#: Days in each month of the 365-day synthetic year.
DAYS_PER_MONTH = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])

#: Month index (0 = January) of each day of the 365-day year.
MONTH_OF_DAY = np.repeat(np.arange(12), DAYS_PER_MONTH)

#: Largest daily clear-sky index accepted by :func:`daily_to_hourly_ghi`.
#: A day can be clearer than the climatological-turbidity clear sky, and
#: broken cloud can briefly enhance irradiance, but a whole day more than 20 %
#: above the clear-sky model is not physically credible.
MAX_DAILY_CLEARSKY_INDEX = 1.2

_W_M2_TO_KWH_M2_DAY = 24.0 / 1000.0


@dataclass(frozen=True)
class ClimateCell:
    """One cell of the embedded climate grid.

    Attributes
    ----------
    latitude_deg, longitude_deg : float
        Cell centre [degrees north, degrees east].
    distance_km : float
        Great-circle distance from the requested site to the cell centre [km].
    ghi_bins_wm2 : numpy.ndarray, shape (12, 128)
        Daily-mean GHI at the centre of each distribution bin, per calendar
        month [W/m²]. The smoothed distributions have thin tails below zero;
        these bin values are clipped to zero.
    bin_weights : numpy.ndarray, shape (12, 128)
        Probability of each bin; each month's row sums to one.
    grid_resolution_deg : float
        Grid spacing [degrees].
    """

    latitude_deg: float
    longitude_deg: float
    distance_km: float
    ghi_bins_wm2: np.ndarray
    bin_weights: np.ndarray
    grid_resolution_deg: float = 3.0


@functools.lru_cache(maxsize=1)
def _climate_grid():
    """Load the embedded grid once: coordinates, land mask, bins, weights."""
    import gsee_climate_data

    with gsee_climate_data.load() as data:
        lat = np.asarray(data["lat"], dtype=float)
        lon = np.asarray(data["lon"], dtype=float)
        bins = np.asarray(data["xk"], dtype=float)
        weights = np.nan_to_num(np.asarray(data["pk"], dtype=float), nan=0.0)
    weights = np.clip(weights, 0.0, None)
    month_totals = weights.sum(axis=-1)
    has_data = (np.isfinite(bins).all(axis=(-1, -2))
                & (month_totals > 0.0).all(axis=-1))
    for array in (lat, lon, bins, weights, has_data):
        array.setflags(write=False)
    return lat, lon, bins, weights, has_data


def great_circle_distance_km(lat1, lon1, lat2, lon2):
    """Great-circle distance on a spherical Earth (haversine formula).

    Parameters
    ----------
    lat1, lon1, lat2, lon2 : array_like
        Positions [degrees]; broadcast against each other.

    Returns
    -------
    numpy.ndarray
        Distance [km] using :data:`EARTH_RADIUS_KM`.

    References
    ----------
    .. [1] R. W. Sinnott, "Virtues of the haversine", Sky and Telescope
       68(2):159, 1984.
    """
    phi1, phi2 = np.radians(lat1), np.radians(lat2)
    dphi = phi2 - phi1
    dlam = np.radians(np.asarray(lon2, dtype=float) - np.asarray(lon1, dtype=float))
    h = (np.sin(dphi / 2.0) ** 2
         + np.cos(phi1) * np.cos(phi2) * np.sin(dlam / 2.0) ** 2)
    return 2.0 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))


def nearest_climate_cell(latitude, longitude, max_distance_km=300.0):
    """The nearest grid cell with data (land) to a site.

    Parameters
    ----------
    latitude, longitude : float
        Site position [degrees north, degrees east]. Longitudes are taken
        modulo 360, so sites across the antimeridian find their neighbours.
    max_distance_km : float, default 300.0
        Furthest acceptable distance to the cell centre [km].

    Returns
    -------
    ClimateCell

    Raises
    ------
    ValueError
        If the position is invalid or no land cell lies within
        ``max_distance_km``; the message gives the distance to the nearest
        land cell.
    """
    latitude = float(latitude)
    longitude = float(longitude)
    if not (np.isfinite(latitude) and -90.0 <= latitude <= 90.0):
        raise ValueError(f"latitude {latitude} is not in [-90, 90] degrees")
    if not np.isfinite(longitude):
        raise ValueError(f"longitude {longitude} is not a finite number")
    lat, lon, bins, weights, has_data = _climate_grid()
    i_land, j_land = np.nonzero(has_data)
    distance = great_circle_distance_km(latitude, longitude,
                                        lat[i_land], lon[j_land])
    k = int(np.argmin(distance))
    i, j = int(i_land[k]), int(j_land[k])
    if distance[k] > max_distance_km:
        raise ValueError(
            f"no climate data within {max_distance_km:g} km of "
            f"({latitude:.4f}, {longitude:.4f}): the nearest land cell, "
            f"centred at ({lat[i]:g}, {lon[j]:g}), is {distance[k]:.0f} km "
            f"away; supply the site's own weather data or raise "
            f"max_distance_km")
    month_weights = weights[i, j]
    month_weights = month_weights / month_weights.sum(axis=-1, keepdims=True)
    return ClimateCell(
        latitude_deg=float(lat[i]),
        longitude_deg=float(lon[j]),
        distance_km=float(distance[k]),
        ghi_bins_wm2=np.clip(bins[i, j], 0.0, None),
        bin_weights=month_weights,
        grid_resolution_deg=float(abs(lat[1] - lat[0])),
    )


def monthly_mean_ghi(cell):
    """Mean daily GHI of each calendar month of a climate cell.

    Parameters
    ----------
    cell : ClimateCell

    Returns
    -------
    numpy.ndarray, shape (12,)
        Mean daily irradiation on the horizontal [kWh/m²/day], January first.
    """
    mean_wm2 = (cell.ghi_bins_wm2 * cell.bin_weights).sum(axis=-1)
    return mean_wm2 * _W_M2_TO_KWH_M2_DAY


def extraterrestrial_daily_irradiation(latitude, day_of_year):
    """Daily irradiation on a horizontal surface outside the atmosphere.

    Parameters
    ----------
    latitude : float
        Latitude [degrees north].
    day_of_year : array_like
        Day of year, 1 = 1 January.

    Returns
    -------
    numpy.ndarray
        Daily extraterrestrial horizontal irradiation [kWh/m²/day]; zero in
        polar night.

    References
    ----------
    .. [1] J. A. Duffie and W. A. Beckman, "Solar Engineering of Thermal
       Processes", 4th ed., Wiley, 2013, eq. 1.10.3.
    .. [2] J. W. Spencer, "Fourier series representation of the position of
       the sun", Search 2(5):172, 1971.
    """
    day_of_year = np.asarray(day_of_year, dtype=float)
    phi = np.radians(latitude)
    delta = pvlib.solarposition.declination_spencer71(day_of_year)
    normal = np.asarray(pvlib.irradiance.get_extra_radiation(day_of_year),
                        dtype=float)
    cos_sunset = np.clip(-np.tan(phi) * np.tan(delta), -1.0, 1.0)
    omega_s = np.arccos(cos_sunset)
    daily_wh = (24.0 / np.pi) * normal * (
        np.cos(phi) * np.cos(delta) * np.sin(omega_s)
        + omega_s * np.sin(phi) * np.sin(delta))
    return np.clip(daily_wh, 0.0, None) / 1000.0


def ar1_normal_scores(n_values, persistence, rng):
    """Stationary first-order autoregressive series with standard normal
    marginals.

    Parameters
    ----------
    n_values : int
        Length of the series.
    persistence : float
        Lag-1 autocorrelation, in (-1, 1).
    rng : numpy.random.Generator

    Returns
    -------
    numpy.ndarray, shape (n_values,)
        ``z[t] = persistence * z[t-1] + sqrt(1 - persistence**2) * e[t]``
        with ``z[0]`` drawn from the stationary distribution.
    """
    if not -1.0 < persistence < 1.0:
        raise ValueError(f"persistence must be in (-1, 1), got {persistence}")
    innovations = rng.standard_normal(n_values)
    scale = np.sqrt(1.0 - persistence ** 2)
    z = np.empty(n_values)
    if n_values == 0:
        return z
    # The recursion is a linear filter; lfilter runs it in compiled code.
    z[0] = innovations[0]
    if n_values > 1:
        z[1:], _ = lfilter([scale], [1.0, -persistence], innovations[1:],
                           zi=[persistence * z[0]])
    return z


def _monthly_quantile(cell, month, probability):
    """Inverse of a month's distribution, linear between bin mid-masses."""
    weights = cell.bin_weights[month]
    keep = weights > 0.0
    values = cell.ghi_bins_wm2[month][keep]
    mass = weights[keep]
    cumulative = np.cumsum(mass) - 0.5 * mass
    return np.interp(probability, cumulative, values)


def synthesize_daily_ghi(cell, latitude, n_years, seed, persistence=0.3,
                         correction_factor=1.0):
    """Synthetic daily global horizontal irradiation with persistence.

    A first-order autoregressive series of normal scores runs continuously
    over all days of all years; each score is mapped through the standard
    normal distribution to a probability and then through the inverse
    distribution of that day's calendar month in the climate cell. Each value
    is finally scaled by the day's extraterrestrial irradiation relative to
    its month's mean, so that days follow the seasonal trend within a month,
    and by ``correction_factor``.

    Parameters
    ----------
    cell : ClimateCell
    latitude : float
        Site latitude [degrees north], for the extraterrestrial scaling.
    n_years : int
        Number of 365-day weather years.
    seed : int or numpy.random.SeedSequence
        Seed for :func:`numpy.random.default_rng`; the same seed gives the
        same series.
    persistence : float, default 0.3
        Lag-1 autocorrelation of the daily normal scores [-].
    correction_factor : float, default 1.0
        Multiplier for reanalysis bias [-].

    Returns
    -------
    numpy.ndarray, shape (n_years, 365)
        Daily irradiation on the horizontal [kWh/m²/day]; day 0 is 1 January.

    References
    ----------
    .. [1] V. A. Graham and K. G. T. Hollands, "A method to generate
       synthetic hourly solar radiation globally", Solar Energy
       44(6):333-341, 1990.
    """
    n_years = int(n_years)
    if n_years < 1:
        raise ValueError(f"n_years must be at least 1, got {n_years}")
    if correction_factor <= 0.0:
        raise ValueError(
            f"correction_factor must be positive, got {correction_factor}")
    rng = np.random.default_rng(seed)
    scores = ar1_normal_scores(n_years * 365, persistence, rng)
    probability = ndtr(scores).reshape(n_years, 365)

    daily_wm2 = np.empty((n_years, 365))
    for month in range(12):
        days = MONTH_OF_DAY == month
        daily_wm2[:, days] = _monthly_quantile(cell, month,
                                               probability[:, days])

    extraterrestrial = extraterrestrial_daily_irradiation(
        latitude, np.arange(1, 366))
    month_mean = (np.bincount(MONTH_OF_DAY, weights=extraterrestrial)
                  / DAYS_PER_MONTH)[MONTH_OF_DAY]
    with np.errstate(invalid="ignore", divide="ignore"):
        seasonal = np.where(month_mean > 0.0, extraterrestrial / month_mean,
                            1.0)
    return daily_wm2 * _W_M2_TO_KWH_M2_DAY * seasonal * correction_factor


def utc_offset_hours(latitude, longitude):
    """Local standard-time offset from UTC at a position.

    The time zone comes from an offline lookup (tzfpy). The standard offset
    is the smaller of the offsets in mid-January and mid-July, which removes
    daylight saving in both hemispheres. Where no zone is found, the nautical
    offset ``round(longitude / 15)`` is used.

    Parameters
    ----------
    latitude, longitude : float
        Position [degrees north, degrees east].

    Returns
    -------
    float
        Offset [hours], positive east of Greenwich (Nairobi: 3.0).
    """
    import tzfpy

    zone_name = tzfpy.get_tz(float(longitude), float(latitude))
    if not zone_name:
        return float(round(((float(longitude) + 180.0) % 360.0 - 180.0) / 15.0))
    zone = ZoneInfo(zone_name)
    offsets = [
        _dt.datetime(2025, month, 15, 12, tzinfo=zone).utcoffset()
        for month in (1, 7)
    ]
    return min(offsets).total_seconds() / 3600.0


def local_hour_midpoints_utc(utc_offset_hours, year=2025):
    """UTC instants at the middle of each local standard-time hour of a year.

    Parameters
    ----------
    utc_offset_hours : float
        Local standard-time offset from UTC [hours].
    year : int, default 2025
        Calendar year of the local clock; 8760 hours are returned even for
        a leap year (the synthetic year has 365 days).

    Returns
    -------
    pandas.DatetimeIndex
        8760 timezone-aware UTC instants; element ``h`` is the midpoint of
        local standard clock hour ``h`` counted from local midnight on
        1 January.
    """
    start_local = pd.Timestamp(year=int(year), month=1, day=1, hour=0,
                               minute=30)
    start_utc = start_local - pd.Timedelta(hours=float(utc_offset_hours))
    return pd.date_range(start_utc.tz_localize("UTC"), periods=8760,
                         freq="h")


def clear_sky_ghi(geometry, latitude, longitude, elevation_m):
    """Ineichen clear-sky global horizontal irradiance.

    Parameters
    ----------
    geometry : pandas.DataFrame
        Output of :func:`fleet.pv.solar_geometry`, indexed by UTC time.
    latitude, longitude : float
        Site position [degrees north, degrees east], for the Linke turbidity
        climatology.
    elevation_m : float
        Site elevation [m].

    Returns
    -------
    numpy.ndarray, shape (n_times,)
        Clear-sky GHI [W/m²], zero with the sun below the horizon.

    References
    ----------
    .. [1] P. Ineichen and R. Perez, "A new airmass independent formulation
       for the Linke turbidity coefficient", Solar Energy 73(3):151-157,
       2002.
    .. [2] R. Perez et al., "A new operational model for satellite-derived
       irradiances: description and validation", Solar Energy
       73(5):307-317, 2002.
    """
    with warnings.catch_warnings():
        # pvlib's lookup uses an index attribute that pandas 3 deprecates;
        # the values are unaffected, so keep the user's console clean
        warnings.filterwarnings("ignore", message=".*dayofyear is deprecated.*")
        turbidity = pvlib.clearsky.lookup_linke_turbidity(
            geometry.index, latitude, longitude)
    airmass_relative = pvlib.atmosphere.get_relative_airmass(
        geometry["apparent_zenith"])
    airmass_absolute = pvlib.atmosphere.get_absolute_airmass(
        airmass_relative, pvlib.atmosphere.alt2pres(elevation_m))
    clear = pvlib.clearsky.ineichen(
        geometry["apparent_zenith"], airmass_absolute, turbidity,
        altitude=elevation_m, dni_extra=geometry["dni_extra"])
    return np.nan_to_num(np.clip(np.asarray(clear["ghi"], dtype=float),
                                 0.0, None))


def daily_to_hourly_ghi(daily_kwh_m2, clearsky_ghi_wm2,
                        max_clearsky_index=MAX_DAILY_CLEARSKY_INDEX):
    """Hourly GHI from daily totals and a clear-sky profile.

    Each hour is the clear-sky GHI times the day's clear-sky index, the
    ratio of the daily value to the day's clear-sky irradiation, so that each
    day's hours sum to its daily value.

    Parameters
    ----------
    daily_kwh_m2 : array_like, shape (n_years, 365)
        Daily irradiation on the horizontal [kWh/m²/day].
    clearsky_ghi_wm2 : array_like, shape (8760,)
        Hourly-mean clear-sky GHI on the local clock [W/m²].
    max_clearsky_index : float, default 1.2
        Cap on the daily clear-sky index [-]. A whole day more than 20 %
        brighter than the clear-sky model is not physically credible; where
        a daily value exceeds the cap, the day is set to the cap and its total
        is reduced accordingly. Days with no clear-sky irradiation (polar
        night) get zero.

    Returns
    -------
    numpy.ndarray, shape (n_years, 8760)
        Hourly-mean GHI [W/m²]; for uncapped days the 24 hours sum to
        ``1000 * daily_kwh_m2`` Wh/m².
    """
    daily = np.asarray(daily_kwh_m2, dtype=float)
    clear = np.asarray(clearsky_ghi_wm2, dtype=float)
    if clear.shape != (8760,):
        raise ValueError(f"clearsky_ghi_wm2 has shape {clear.shape}, "
                         f"expected (8760,)")
    if daily.ndim != 2 or daily.shape[1] != 365:
        raise ValueError(f"daily_kwh_m2 has shape {daily.shape}, "
                         f"expected (n_years, 365)")
    clear_by_day = clear.reshape(365, 24)
    clear_daily_wh = clear_by_day.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        index = np.where(clear_daily_wh > 0.0,
                         1000.0 * daily / clear_daily_wh, 0.0)
    index = np.clip(index, 0.0, max_clearsky_index)
    hourly = index[:, :, None] * clear_by_day[None, :, :]
    return hourly.reshape(daily.shape[0], 8760)


def air_temperature_profile(temp_mean_c, temp_daily_amplitude_k=5.0):
    """Typical-day air temperature on the local clock, repeated over a year.

    The daily cycle rises as a half cosine from its minimum at 05:00 to its
    maximum at 15:00 local time and falls as a half cosine back to the next
    day's minimum, so warming is faster than cooling. Its daily mean is
    ``temp_mean_c``.

    Parameters
    ----------
    temp_mean_c : float
        Daily mean air temperature [°C].
    temp_daily_amplitude_k : float, default 5.0
        Half the daily range (maximum minus mean) [K].

    Returns
    -------
    numpy.ndarray, shape (8760,)
        Air temperature at the middle of each local hour [°C].
    """
    hour_of_day = np.arange(24) + 0.5
    t_min, t_max = 5.0, 15.0
    rising = (hour_of_day >= t_min) & (hour_of_day < t_max)
    # Phase 0 at the minimum, pi at the maximum, 2*pi back at the minimum.
    phase = np.where(
        rising,
        np.pi * (hour_of_day - t_min) / (t_max - t_min),
        np.pi + np.pi * ((hour_of_day - t_max) % 24.0) / (24.0 - (t_max - t_min)),
    )
    day = temp_mean_c - temp_daily_amplitude_k * np.cos(phase)
    return np.tile(day, 365)


@dataclass(frozen=True)
class SiteWeather:
    """Synthetic weather years for one site.

    Attributes
    ----------
    ghi_wm2 : numpy.ndarray, shape (n_years, 8760), float32
        Hourly-mean global horizontal irradiance [W/m²].
    poa_wm2 : numpy.ndarray, shape (n_years, 8760), float32
        Hourly-mean plane-of-array global irradiance [W/m²].
    temp_air_c : numpy.ndarray, shape (8760,), float32
        Air temperature [°C], the same in every year.
    cell_temp_c : numpy.ndarray, shape (n_years, 8760), float32
        Cell temperature [°C].
    daily_ghi_kwh_m2 : numpy.ndarray, shape (n_years, 365)
        Daily horizontal irradiation contained in ``ghi_wm2`` (after the
        clear-sky index cap) [kWh/m²/day].
    utc_offset_hours : float
        Local standard time minus UTC [hours]; hour ``h`` of every array is
        local standard clock hour ``h`` of the year.
    cell : ClimateCell
        Climate grid cell the resource came from.
    tilt_deg, azimuth_deg : float
        Array orientation [degrees].
    elevation_m : float
        Site elevation [m].
    """

    ghi_wm2: np.ndarray
    poa_wm2: np.ndarray
    temp_air_c: np.ndarray
    cell_temp_c: np.ndarray
    daily_ghi_kwh_m2: np.ndarray
    utc_offset_hours: float
    cell: ClimateCell
    tilt_deg: float
    azimuth_deg: float
    elevation_m: float


def site_weather(latitude, longitude, *, n_years, seed, temp_mean_c,
                 temp_daily_amplitude_k=5.0, correction_factor=1.0,
                 persistence=0.3, tilt_deg=None, azimuth_deg=None,
                 albedo=0.2, wind_speed_ms=1.0, max_distance_km=300.0):
    """Synthetic hourly weather years for a site, on its local clock.

    Sun position, clear sky and plane geometry are computed once for the
    site and shared by all weather years.

    Parameters
    ----------
    latitude, longitude : float
        Site position [degrees north, degrees east].
    n_years : int
        Number of 365-day weather years.
    seed : int
        Random seed; the same seed gives the same years.
    temp_mean_c : float
        Mean air temperature [°C].
    temp_daily_amplitude_k : float, default 5.0
        Half the daily air temperature range [K].
    correction_factor : float, default 1.0
        Multiplier on the reanalysis daily irradiation [-].
    persistence : float, default 0.3
        Lag-1 autocorrelation of daily normal scores [-].
    tilt_deg, azimuth_deg : float, optional
        Array orientation [degrees]; default
        :func:`fleet.pv.default_orientation`.
    albedo : float, default 0.2
        Ground reflectance [-].
    wind_speed_ms : float, default 1.0
        Wind speed for the cell temperature model [m/s].
    max_distance_km : float, default 300.0
        Furthest acceptable climate cell [km].

    Returns
    -------
    SiteWeather
    """
    cell = nearest_climate_cell(latitude, longitude, max_distance_km)
    default_tilt, default_azimuth = pv.default_orientation(latitude)
    tilt = float(default_tilt if tilt_deg is None else tilt_deg)
    azimuth = float(default_azimuth if azimuth_deg is None else azimuth_deg)
    elevation = float(pvlib.location.lookup_altitude(latitude, longitude))
    offset = utc_offset_hours(latitude, longitude)

    times = local_hour_midpoints_utc(offset)
    geometry = pv.solar_geometry(latitude, longitude, times, elevation)
    clear = clear_sky_ghi(geometry, latitude, longitude, elevation)

    daily = synthesize_daily_ghi(cell, latitude, n_years, seed,
                                 persistence=persistence,
                                 correction_factor=correction_factor)
    ghi = daily_to_hourly_ghi(daily, clear)
    poa = pv.plane_of_array(
        ghi, geometry["zenith"].to_numpy(), geometry["azimuth"].to_numpy(),
        geometry["dni_extra"].to_numpy(), tilt, azimuth, albedo=albedo)
    temp_air = air_temperature_profile(temp_mean_c, temp_daily_amplitude_k)
    cell_temp = pv.cell_temperature(poa, temp_air, wind_speed_ms)
    return SiteWeather(
        ghi_wm2=ghi.astype(np.float32),
        poa_wm2=poa.astype(np.float32),
        temp_air_c=temp_air.astype(np.float32),
        cell_temp_c=cell_temp.astype(np.float32),
        daily_ghi_kwh_m2=ghi.reshape(-1, 365, 24).sum(axis=-1) / 1000.0,
        utc_offset_hours=offset,
        cell=cell,
        tilt_deg=tilt,
        azimuth_deg=azimuth,
        elevation_m=elevation,
    )
