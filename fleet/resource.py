"""Hourly solar resource for any site on land: the embedded climate grid, or
the user's own measured year or monthly values.

The package ``gsee-climate-data`` holds, for each 3° land cell and calendar
month, the distribution of daily-mean global horizontal irradiance (GHI) from
the MERRA-2 reanalysis, 2011-2015. From it this module builds synthetic
weather years:

1. daily GHI with day-to-day persistence, whose distribution in each month is
   the cell's (:func:`synthesize_daily_ghi`);
2. hourly GHI as the Ineichen clear-sky profile times each day's clear-sky
   index (:func:`daily_to_hourly_ghi`);
3. plane-of-array irradiance and cell temperature (:mod:`fleet.pv`).

A user's own data wins over the grid (:func:`site_weather_from`):

* a measured year (:class:`MeasuredYear`, read from an EPW or TMY file by
  :mod:`fleet.weather_files`) is weather year 0 exactly as measured; the
  further years resample the measured days within each calendar month
  (:func:`resample_measured_days`), so they keep the measured monthly means
  and day-to-day spread but differ day by day;
* monthly values (:class:`MonthlyClimate`) keep the shape of the nearest
  cell's daily distribution, rescaled to the table's monthly means.

Hour ``h`` of every hourly array is local standard clock hour ``h`` of a
365-day year starting at local midnight on 1 January.

Reanalysis irradiance is biased high at many places; ``correction_factor``
scales the embedded grid's daily values (never the user's own data).

References
----------
.. [1] R. Gelaro et al., "The Modern-Era Retrospective Analysis for Research
   and Applications, Version 2 (MERRA-2)", Journal of Climate
   30(14):5419-5454, 2017.
.. [2] S. Pfenninger and I. Staffell, "Long-term patterns of European PV
   output using 30 years of validated hourly reanalysis and satellite data",
   Energy 114:1251-1265, 2016.
.. [3] V. A. Graham and K. G. T. Hollands, "A method to generate
   synthetic hourly solar radiation globally", Solar Energy
   44(6):333-341, 1990.
"""

from __future__ import annotations

import datetime as _dt
import functools
import os
from dataclasses import dataclass
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pvlib
from scipy.signal import lfilter
from scipy.special import ndtr, ndtri

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

#: Largest hourly clear-sky index carried from a measured hour to a
#: resampled day (cloud-edge enhancement beyond this is not credible for a
#: whole hour).
MAX_HOURLY_CLEARSKY_INDEX = 1.5

#: Default lag-1 autocorrelation of daily normal scores for synthetic years.
DEFAULT_PERSISTENCE = 0.3

#: ``source`` value of :func:`site_weather_from` meaning the embedded grid.
EMBEDDED = "embedded"

#: Calendar year of the synthetic local clock (any non-leap year would do).
CLOCK_YEAR = 2025

_W_M2_TO_KWH_M2_DAY = 24.0 / 1000.0
_HOURS = 8760


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
    is_own_cell : bool
        True when this is the grid cell that contains the site. False when
        the site's own cell has no data (sea or coast in the reanalysis
        land mask) and the nearest cell with data was taken instead: the
        resource then describes a neighbouring area, and a caller should
        warn (see also ``distance_km``).
    """

    latitude_deg: float
    longitude_deg: float
    distance_km: float
    ghi_bins_wm2: np.ndarray
    bin_weights: np.ndarray
    grid_resolution_deg: float = 3.0
    is_own_cell: bool = True


@dataclass(frozen=True)
class MeasuredYear:
    """One measured (or typical measured) year of hourly weather.

    Built by the readers in :mod:`fleet.weather_files`; any source giving
    these arrays will do.

    Attributes
    ----------
    ghi_wm2 : numpy.ndarray, shape (8760,)
        Hourly-mean global horizontal irradiance [W/m²]; element ``h`` is
        local standard clock hour ``h`` of the file's time zone, counted
        from midnight on 1 January of a 365-day year (29 February dropped).
    temp_air_c : numpy.ndarray, shape (8760,)
        Air temperature [°C].
    wind_speed_ms : numpy.ndarray, shape (8760,)
        Wind speed [m/s].
    latitude_deg, longitude_deg : float
        Station position [degrees north, degrees east].
    utc_offset_hours : float
        The file's local standard time minus UTC [hours].
    elevation_m : float
        Station elevation [m].
    label : str
        Where the data came from, e.g. the file name.
    kind : str
        File format, e.g. ``"EPW"``, ``"TMY3"``, ``"TMY2"``.
    """

    ghi_wm2: np.ndarray
    temp_air_c: np.ndarray
    wind_speed_ms: np.ndarray
    latitude_deg: float
    longitude_deg: float
    utc_offset_hours: float
    elevation_m: float
    label: str = "measured year"
    kind: str = "measured"

    @property
    def daily_ghi_kwh_m2(self):
        """Daily horizontal irradiation, shape (365,) [kWh/m²/day]."""
        return np.asarray(self.ghi_wm2, float).reshape(365, 24).sum(axis=1) / 1000.0


@dataclass(frozen=True)
class MonthlyClimate:
    """Monthly climate values for one site (e.g. from a monthly table).

    Attributes
    ----------
    ghi_kwh_m2_day : numpy.ndarray, shape (12,)
        Mean daily global horizontal irradiation of each month, January
        first [kWh/m²/day].
    temp_mean_c : numpy.ndarray, shape (12,)
        Mean air temperature of each month [°C]; NaN where unknown.
    temp_min_c : numpy.ndarray, shape (12,)
        Mean daily minimum air temperature of each month [°C]; NaN where
        unknown.
    label : str
        Where the values came from, e.g. ``"monthly table m.csv, site A1"``.
    """

    ghi_kwh_m2_day: np.ndarray
    temp_mean_c: np.ndarray = None
    temp_min_c: np.ndarray = None
    label: str = "monthly values"

    def __post_init__(self):
        nan12 = np.full(12, np.nan)
        for name in ("ghi_kwh_m2_day", "temp_mean_c", "temp_min_c"):
            value = getattr(self, name)
            value = nan12 if value is None else np.asarray(value, dtype=float)
            if value.shape != (12,):
                raise ValueError(f"{name} must have 12 monthly values, "
                                 f"got shape {value.shape}")
            object.__setattr__(self, name, value)
        if not np.all(np.isfinite(self.ghi_kwh_m2_day)
                      & (self.ghi_kwh_m2_day >= 0.0)):
            raise ValueError("ghi_kwh_m2_day must be 12 finite values >= 0")


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


def _check_position(latitude, longitude):
    latitude = float(latitude)
    longitude = float(longitude)
    if not (np.isfinite(latitude) and -90.0 <= latitude <= 90.0):
        raise ValueError(f"latitude {latitude} is not in [-90, 90] degrees")
    if not np.isfinite(longitude):
        raise ValueError(f"longitude {longitude} is not a finite number")
    return latitude, longitude


def nearest_climate_cell(latitude, longitude, max_distance_km=300.0):
    """The site's own grid cell, or the nearest cell with data (land).

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
        The cell containing the site (within half a grid step of its centre
        in latitude and longitude) when that cell has data, with
        ``is_own_cell=True``; otherwise the land cell whose centre is
        nearest by great-circle distance, with ``is_own_cell=False``.

    Raises
    ------
    ValueError
        If the position is invalid or no land cell lies within
        ``max_distance_km``; the message gives the distance to the nearest
        land cell.
    """
    latitude, longitude = _check_position(latitude, longitude)
    lat, lon, bins, weights, has_data = _climate_grid()
    resolution = float(abs(lat[1] - lat[0]))
    half = 0.5 * resolution + 1e-9
    i_own = int(np.argmin(np.abs(lat - latitude)))
    lon_gap = np.abs((lon - longitude + 180.0) % 360.0 - 180.0)
    j_own = int(np.argmin(lon_gap))
    inside = abs(lat[i_own] - latitude) <= half and lon_gap[j_own] <= half
    if inside and has_data[i_own, j_own]:
        i, j, own = i_own, j_own, True
        distance = float(great_circle_distance_km(latitude, longitude,
                                                  lat[i], lon[j]))
    else:
        i_land, j_land = np.nonzero(has_data)
        distances = great_circle_distance_km(latitude, longitude,
                                             lat[i_land], lon[j_land])
        k = int(np.argmin(distances))
        i, j, own = int(i_land[k]), int(j_land[k]), False
        distance = float(distances[k])
    if distance > max_distance_km:
        raise ValueError(
            f"no climate data within {max_distance_km:g} km of "
            f"({latitude:.4f}, {longitude:.4f}): the nearest land cell, "
            f"centred at ({lat[i]:g}, {lon[j]:g}), is {distance:.0f} km "
            f"away; supply the site's own weather data or raise "
            f"max_distance_km")
    month_weights = weights[i, j]
    month_weights = month_weights / month_weights.sum(axis=-1, keepdims=True)
    return ClimateCell(
        latitude_deg=float(lat[i]),
        longitude_deg=float(lon[j]),
        distance_km=distance,
        ghi_bins_wm2=np.clip(bins[i, j], 0.0, None),
        bin_weights=month_weights,
        grid_resolution_deg=resolution,
        is_own_cell=own,
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
    normal = pv.extraterrestrial_normal_irradiance(day_of_year)
    cos_sunset = np.clip(-np.tan(phi) * np.tan(delta), -1.0, 1.0)
    omega_s = np.arccos(cos_sunset)
    daily_wh = (24.0 / np.pi) * normal * (
        np.cos(phi) * np.cos(delta) * np.sin(omega_s)
        + omega_s * np.sin(phi) * np.sin(delta))
    return np.clip(daily_wh, 0.0, None) / 1000.0


@functools.lru_cache(maxsize=512)
def _year_extraterrestrial(latitude):
    values = extraterrestrial_daily_irradiation(latitude, np.arange(1, 366))
    values.setflags(write=False)
    return values


def ar1_normal_scores(n_values, persistence, rng, initial=None):
    """Stationary first-order autoregressive series with standard normal
    marginals.

    Parameters
    ----------
    n_values : int
        Length of the series.
    persistence : float
        Lag-1 autocorrelation, in (-1, 1).
    rng : numpy.random.Generator
    initial : float, optional
        Score of the value just before the series; the series then
        continues it. Default: ``z[0]`` is drawn from the stationary
        distribution.

    Returns
    -------
    numpy.ndarray, shape (n_values,)
        ``z[t] = persistence * z[t-1] + sqrt(1 - persistence**2) * e[t]``.
    """
    if not -1.0 < persistence < 1.0:
        raise ValueError(f"persistence must be in (-1, 1), got {persistence}")
    innovations = rng.standard_normal(n_values)
    scale = np.sqrt(1.0 - persistence ** 2)
    z = np.empty(n_values)
    if n_values == 0:
        return z
    # The recursion is a linear filter; lfilter runs it in compiled code.
    if initial is None:
        z[0] = innovations[0]
        if n_values > 1:
            z[1:], _ = lfilter([scale], [1.0, -persistence], innovations[1:],
                               zi=[persistence * z[0]])
    else:
        z[:], _ = lfilter([scale], [1.0, -persistence], innovations,
                          zi=[persistence * float(initial)])
    return z


def _monthly_quantile(cell, month, probability):
    """Inverse of a month's distribution, linear between bin mid-masses."""
    weights = cell.bin_weights[month]
    keep = weights > 0.0
    values = cell.ghi_bins_wm2[month][keep]
    mass = weights[keep]
    cumulative = np.cumsum(mass) - 0.5 * mass
    return np.interp(probability, cumulative, values)


def _seasonal_within_month(latitude):
    """Each day's extraterrestrial irradiation over its month's mean."""
    extraterrestrial = _year_extraterrestrial(float(latitude))
    month_mean = (np.bincount(MONTH_OF_DAY, weights=extraterrestrial)
                  / DAYS_PER_MONTH)[MONTH_OF_DAY]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(month_mean > 0.0, extraterrestrial / month_mean, 1.0)


def synthesize_daily_ghi(cell, latitude, n_years, seed, persistence=0.3,
                         correction_factor=1.0, monthly_mean_kwh_m2_day=None):
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
    monthly_mean_kwh_m2_day : array_like, shape (12,), optional
        Mean daily irradiation wanted in each month [kWh/m²/day]. Each
        month's distribution is then rescaled by the ratio of this value to
        the cell's own monthly mean, keeping the cell's shape (its
        coefficient of variation and skew) and replacing its level.

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

    scale = np.ones(12)
    if monthly_mean_kwh_m2_day is not None:
        wanted = np.asarray(monthly_mean_kwh_m2_day, dtype=float)
        own = monthly_mean_ghi(cell)
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(own > 0.0, wanted / own, 0.0)
    daily_wm2 = np.empty((n_years, 365))
    for month in range(12):
        days = MONTH_OF_DAY == month
        daily_wm2[:, days] = scale[month] * _monthly_quantile(
            cell, month, probability[:, days])
    seasonal = _seasonal_within_month(latitude)
    return daily_wm2 * _W_M2_TO_KWH_M2_DAY * seasonal * correction_factor


def _within_month_normal_scores(values):
    """Normal scores of values ranked within each calendar month.

    ``values`` has shape (n_years, 365); each calendar month of all years
    together is one sample; ties keep their order.
    """
    values = np.asarray(values, dtype=float)
    n_years = values.shape[0]
    scores = np.empty_like(values)
    for month in range(12):
        days = MONTH_OF_DAY == month
        sample = values[:, days].reshape(-1)
        ranks = np.empty(sample.size)
        ranks[np.argsort(sample, kind="stable")] = np.arange(sample.size)
        scores[:, days] = ndtri((ranks + 0.5) / sample.size).reshape(
            n_years, -1)
    return scores


def daily_persistence(daily_kwh_m2, latitude):
    """Lag-1 autocorrelation of the normal scores of daily clearness.

    The daily clearness index (daily over extraterrestrial irradiation) is
    ranked within each calendar month, the ranks turned into standard
    normal scores, and the correlation of consecutive days' scores taken
    over the whole series (year ends included). This is the quantity that
    :func:`synthesize_daily_ghi` and :func:`resample_measured_days` take as
    ``persistence``.

    Parameters
    ----------
    daily_kwh_m2 : array_like, shape (365,) or (n_years, 365)
        Daily horizontal irradiation [kWh/m²/day].
    latitude : float
        Site latitude [degrees north].

    Returns
    -------
    float
        Lag-1 autocorrelation [-].

    References
    ----------
    .. [1] V. A. Graham and K. G. T. Hollands, "A method to generate
       synthetic hourly solar radiation globally", Solar Energy
       44(6):333-341, 1990.
    """
    daily = np.atleast_2d(np.asarray(daily_kwh_m2, dtype=float))
    extraterrestrial = _year_extraterrestrial(float(latitude))
    with np.errstate(invalid="ignore", divide="ignore"):
        clearness = np.where(extraterrestrial > 0.0,
                             daily / extraterrestrial, 0.0)
    scores = _within_month_normal_scores(clearness).reshape(-1)
    return float(np.corrcoef(scores[:-1], scores[1:])[0, 1])


def resample_measured_days(daily_kwh_m2, latitude, n_years, seed,
                           persistence):
    """Weather years made of a measured year's days, with persistence.

    Year 0 is the measured year itself. For the further years, a
    first-order autoregressive series of normal scores (continuing from the
    measured year's last day) is turned into probabilities; in each
    calendar month, probability ``p`` picks the measured day of that month
    whose daily clearness index has rank ``floor(p * n_days)``. Every
    measured day of a month is so equally likely: the further years share
    the measured year's empirical monthly distributions of clearness (mean
    and spread), while the order of days, and so the runs of dull days,
    follows the autoregressive persistence.

    Parameters
    ----------
    daily_kwh_m2 : array_like, shape (365,)
        Measured daily horizontal irradiation [kWh/m²/day].
    latitude : float
        Site latitude [degrees north].
    n_years : int
        Number of weather years wanted, the measured one included.
    seed : int or numpy.random.SeedSequence
    persistence : float
        Lag-1 autocorrelation of the daily normal scores [-].

    Returns
    -------
    source_day : numpy.ndarray of int, shape (n_years, 365)
        Index (0..364) of the measured day each day copies; row 0 is
        ``0..364``.
    daily_kwh_m2 : numpy.ndarray, shape (n_years, 365)
        Daily irradiation of each day [kWh/m²/day]: the source day's
        clearness index times the target day's extraterrestrial irradiation
        (row 0 is the measured series).

    References
    ----------
    .. [1] V. A. Graham and K. G. T. Hollands, "A method to generate
       synthetic hourly solar radiation globally", Solar Energy
       44(6):333-341, 1990.
    """
    measured = np.asarray(daily_kwh_m2, dtype=float)
    if measured.shape != (365,):
        raise ValueError(f"daily_kwh_m2 has shape {measured.shape}, "
                         f"expected (365,)")
    n_years = int(n_years)
    if n_years < 1:
        raise ValueError(f"n_years must be at least 1, got {n_years}")
    extraterrestrial = _year_extraterrestrial(float(latitude))
    with np.errstate(invalid="ignore", divide="ignore"):
        clearness = np.where(extraterrestrial > 0.0,
                             measured / extraterrestrial, 0.0)
    source = np.empty((n_years, 365), dtype=np.int64)
    source[0] = np.arange(365)
    if n_years > 1:
        last_score = _within_month_normal_scores(clearness[None, :])[0, -1]
        rng = np.random.default_rng(seed)
        scores = ar1_normal_scores((n_years - 1) * 365, persistence, rng,
                                   initial=last_score)
        probability = ndtr(scores).reshape(n_years - 1, 365)
        for month in range(12):
            days = np.flatnonzero(MONTH_OF_DAY == month)
            by_clearness = days[np.argsort(clearness[days], kind="stable")]
            rank = np.minimum((probability[:, days] * days.size).astype(int),
                              days.size - 1)
            source[1:, days] = by_clearness[rank]
    with np.errstate(invalid="ignore", divide="ignore"):
        daily = clearness[source] * extraterrestrial[None, :]
    daily[0] = measured
    return source, daily


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


def _julian_day_of_first_hour(utc_offset_hours, year=CLOCK_YEAR):
    """Julian day (UT) at the middle of local hour 0 on 1 January."""
    first = pd.Timestamp(year=int(year), month=1, day=1, hour=0, minute=30,
                         tz="UTC") - pd.Timedelta(hours=float(utc_offset_hours))
    return float(pv.julian_day(pd.DatetimeIndex([first]))[0])


@dataclass(frozen=True)
class SunYear:
    """The sun's path over the 365-day local year of one site.

    Built once per site by :func:`sun_year` and shared by all its weather
    years. Hour ``h`` is the middle of local standard clock hour ``h``.

    Attributes
    ----------
    zenith_deg, apparent_zenith_deg, azimuth_deg : numpy.ndarray, (8760,)
        True and refraction-corrected solar zenith, solar azimuth [degrees].
    dni_extra_wm2 : numpy.ndarray, shape (8760,)
        Extraterrestrial normal irradiance [W/m²] by local day of year.
    clearsky_ghi_wm2 : numpy.ndarray, shape (8760,)
        Ineichen clear-sky GHI [W/m²].
    """

    zenith_deg: np.ndarray
    apparent_zenith_deg: np.ndarray
    azimuth_deg: np.ndarray
    dni_extra_wm2: np.ndarray
    clearsky_ghi_wm2: np.ndarray


def sun_year(latitude, longitude, utc_offset_hours, elevation_m,
             method="almanac"):
    """Sun position and clear sky for every hour of a site's local year.

    Parameters
    ----------
    latitude, longitude : float
        Site position [degrees north, degrees east].
    utc_offset_hours : float
        Local standard time minus UTC [hours].
    elevation_m : float
        Site elevation [m]; sets the pressure for refraction and air mass.
    method : {"almanac", "spa"}, default "almanac"
        Solar position method, see :func:`fleet.pv.solar_geometry`. The
        almanac formulae are within about 0.01° of SPA and far cheaper.

    Returns
    -------
    SunYear
    """
    hours = np.arange(_HOURS)
    day_of_year = hours // 24 + 1
    pressure = pvlib.atmosphere.alt2pres(elevation_m)
    if method == "almanac":
        julian = _julian_day_of_first_hour(utc_offset_hours) + hours / 24.0
        elevation, azimuth, _ = pv.sun_position_almanac(julian, latitude,
                                                        longitude)
        apparent = elevation + pv.refraction_correction_deg(elevation,
                                                            pressure)
        zenith, apparent_zenith = 90.0 - elevation, 90.0 - apparent
    else:
        geometry = pv.solar_geometry(
            latitude, longitude, local_hour_midpoints_utc(utc_offset_hours),
            elevation_m, method=method)
        zenith = geometry["zenith"].to_numpy()
        apparent_zenith = geometry["apparent_zenith"].to_numpy()
        azimuth = geometry["azimuth"].to_numpy()
    dni_extra = np.repeat(pv.extraterrestrial_normal_irradiance(
        np.arange(1, 366)), 24)
    clear = _clear_sky_ghi(apparent_zenith, dni_extra, day_of_year,
                           np.zeros(_HOURS, bool), latitude, longitude,
                           elevation_m)
    return SunYear(zenith, apparent_zenith, azimuth, dni_extra, clear)


def _grid_index(latitude, longitude, n_rows=2160, n_columns=4320):
    """Row and column of a global grid from 90 N and 180 W, cell-centred."""
    step = 180.0 / n_rows
    row = int(np.clip(np.floor((90.0 - latitude) / step), 0, n_rows - 1))
    lon = (float(longitude) + 180.0) % 360.0 - 180.0
    column = int(np.clip(np.floor((lon + 180.0) / step), 0, n_columns - 1))
    return row, column


@functools.lru_cache(maxsize=4096)
def _linke_turbidity_months(row, column):
    import h5py

    path = os.path.join(os.path.dirname(pvlib.__file__), "data",
                        "LinkeTurbidities.h5")
    with h5py.File(path, "r") as table:
        values = np.asarray(table["LinkeTurbidity"][row, column], float)
    values = values / 20.0  # stored as 20 x turbidity
    values.setflags(write=False)
    return values


def _month_middles(leap_year):
    days = DAYS_PER_MONTH.astype(float).copy()
    if leap_year:
        days[1] = 29.0
    return np.concatenate([[-31 / 2.0], np.cumsum(days) - days / 2.0,
                           [days.sum() + 31 / 2.0]])


def linke_turbidity(latitude, longitude, day_of_year, leap_year=False):
    """Linke turbidity climatology bundled with pvlib, by day of year.

    The monthly values (5' grid) are taken to hold at mid-month and
    interpolated linearly between, across the year end, as pvlib's
    ``lookup_linke_turbidity`` does; the monthly values of each grid cell
    are read once and kept.

    Parameters
    ----------
    latitude, longitude : float
        Position [degrees north, degrees east].
    day_of_year : array_like
        Day of year, 1 = 1 January.
    leap_year : bool or array_like of bool, default False
        Whether each day belongs to a leap year.

    Returns
    -------
    numpy.ndarray
        Linke turbidity [-], shape of ``day_of_year``.

    References
    ----------
    .. [1] J. Remund, L. Wald, M. Lefèvre, T. Ranchin and J. Page,
       "Worldwide Linke turbidity information", Proc. ISES Solar World
       Congress, Göteborg, 2003.
    """
    months = _linke_turbidity_months(*_grid_index(latitude, longitude))
    wrapped = np.concatenate([[months[-1]], months, [months[0]]])
    day_of_year = np.asarray(day_of_year, dtype=float)
    plain = np.interp(day_of_year, _month_middles(False), wrapped)
    leap = np.asarray(leap_year, dtype=bool)
    if not leap.any():
        return plain
    return np.where(leap, np.interp(day_of_year, _month_middles(True),
                                    wrapped), plain)


def _clear_sky_ghi(apparent_zenith, dni_extra, day_of_year, leap_year,
                   latitude, longitude, elevation_m):
    """Ineichen clear-sky GHI on arrays; zero with the sun down."""
    apparent_zenith = np.asarray(apparent_zenith, dtype=float)
    out = np.zeros(apparent_zenith.shape)
    up = np.flatnonzero(apparent_zenith < 90.0)
    if up.size == 0:
        return out
    airmass = pvlib.atmosphere.get_absolute_airmass(
        pv.relative_airmass(apparent_zenith[up]),
        pvlib.atmosphere.alt2pres(elevation_m))
    turbidity = linke_turbidity(latitude, longitude, day_of_year[up],
                                np.asarray(leap_year)[up])
    clear = pvlib.clearsky.ineichen(apparent_zenith[up], airmass, turbidity,
                                    altitude=elevation_m,
                                    dni_extra=dni_extra[up])["ghi"]
    out[up] = np.clip(np.nan_to_num(np.asarray(clear, dtype=float)), 0.0,
                      None)
    return out


def clear_sky_ghi(geometry, latitude, longitude, elevation_m):
    """Ineichen clear-sky global horizontal irradiance.

    Parameters
    ----------
    geometry : pandas.DataFrame
        Output of :func:`fleet.pv.solar_geometry`, indexed by UTC time.
    latitude, longitude : float
        Site position [degrees north, degrees east], for the Linke turbidity
        climatology (:func:`linke_turbidity`, by UTC day as pvlib does).
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
    index = pd.DatetimeIndex(geometry.index).tz_convert("UTC")
    return _clear_sky_ghi(geometry["apparent_zenith"].to_numpy(),
                          geometry["dni_extra"].to_numpy(),
                          index.day_of_year.to_numpy(),
                          index.is_leap_year, latitude, longitude,
                          elevation_m)


@functools.lru_cache(maxsize=4096)
def site_elevation_m(latitude, longitude):
    """Ground elevation from the map bundled with pvlib (28 m steps).

    Parameters
    ----------
    latitude, longitude : float
        Position [degrees north, degrees east].

    Returns
    -------
    float
        Elevation above sea level [m]; 0 where the map has no data.
    """
    lon = (float(longitude) + 180.0) % 360.0 - 180.0
    return float(pvlib.location.lookup_altitude(float(latitude), lon))


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


def monthly_air_temperature_profile(temp_mean_c, temp_min_c=None,
                                    temp_daily_amplitude_k=5.0):
    """Air temperature on the local clock from monthly values.

    Each month has the daily cycle of :func:`air_temperature_profile` with
    that month's mean, and half-range ``mean - min`` where the month's mean
    daily minimum is known (else ``temp_daily_amplitude_k``). Monthly means
    are kept exactly; the step between months is at midnight.

    Parameters
    ----------
    temp_mean_c : array_like, shape (12,)
        Mean air temperature of each month [°C].
    temp_min_c : array_like, shape (12,), optional
        Mean daily minimum air temperature of each month [°C]; NaN where
        unknown.
    temp_daily_amplitude_k : float, default 5.0
        Half the daily range where the minimum is unknown [K].

    Returns
    -------
    numpy.ndarray, shape (8760,)
        Air temperature at the middle of each local hour [°C].
    """
    mean = np.asarray(temp_mean_c, dtype=float)
    minimum = (np.full(12, np.nan) if temp_min_c is None
               else np.asarray(temp_min_c, dtype=float))
    amplitude = np.where(np.isfinite(minimum), np.clip(mean - minimum, 0.0,
                                                       None),
                         temp_daily_amplitude_k)
    unit_day = air_temperature_profile(0.0, 1.0)[:24]
    by_day = (mean[MONTH_OF_DAY][:, None]
              + amplitude[MONTH_OF_DAY][:, None] * unit_day[None, :])
    return by_day.reshape(_HOURS)


def resampled_hourly_ghi(measured_ghi_wm2, clearsky_ghi_wm2, source_day,
                         daily_kwh_m2):
    """Hours of resampled days from the measured hours of their source days.

    Each hour takes the clear-sky index (measured over clear-sky GHI) of the
    same clock hour on its source day, applied to its own day's clear sky;
    the day is then scaled to its daily total. Hours where the clear sky is
    weak (below 5 % of the day's clear-sky peak) take the source day's
    daily index, because their hourly ratio is dominated by timing and
    measurement noise.

    Parameters
    ----------
    measured_ghi_wm2 : array_like, shape (8760,)
        Measured hourly GHI on the local clock [W/m²].
    clearsky_ghi_wm2 : array_like, shape (8760,)
        Clear-sky GHI on the same clock [W/m²].
    source_day : array_like of int, shape (n_years, 365)
        Measured day each day copies (:func:`resample_measured_days`).
    daily_kwh_m2 : array_like, shape (n_years, 365)
        Wanted daily totals [kWh/m²/day].

    Returns
    -------
    numpy.ndarray, shape (n_years, 8760)
        Hourly-mean GHI [W/m²]; each day sums to ``1000 * daily_kwh_m2``
        Wh/m² where its clear sky is not zero all day.
    """
    measured = np.asarray(measured_ghi_wm2, dtype=float).reshape(365, 24)
    clear = np.asarray(clearsky_ghi_wm2, dtype=float).reshape(365, 24)
    daily = np.asarray(daily_kwh_m2, dtype=float)
    clear_total = clear.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        day_index = np.where(clear_total > 0.0,
                             measured.sum(axis=1, keepdims=True) / clear_total,
                             0.0)
        strong = clear >= 0.05 * clear.max(axis=1, keepdims=True)
        hour_index = np.where(strong & (clear > 0.0), measured / clear,
                              day_index)
    hour_index = np.clip(hour_index, 0.0, MAX_HOURLY_CLEARSKY_INDEX)
    hourly = hour_index[source_day] * clear[None, :, :]
    totals = hourly.sum(axis=2, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(totals > 0.0, 1000.0 * daily[:, :, None] / totals,
                         0.0)
    return (hourly * scale).reshape(daily.shape[0], _HOURS)


@dataclass(frozen=True)
class SiteWeather:
    """Weather years for one site.

    Attributes
    ----------
    ghi_wm2 : numpy.ndarray, shape (n_years, 8760), float32
        Hourly-mean global horizontal irradiance [W/m²].
    poa_wm2 : numpy.ndarray, shape (n_years, 8760), float32
        Hourly-mean plane-of-array global irradiance [W/m²].
    temp_air_c : numpy.ndarray, shape (n_years, 8760), float32
        Air temperature [°C]. Without measured temperatures every year has
        the same profile (then a read-only broadcast view).
    cell_temp_c : numpy.ndarray, shape (n_years, 8760), float32
        Cell temperature [°C].
    daily_ghi_kwh_m2 : numpy.ndarray, shape (n_years, 365)
        Daily horizontal irradiation contained in ``ghi_wm2`` (after the
        clear-sky index cap) [kWh/m²/day].
    utc_offset_hours : float
        Local standard time minus UTC [hours]; hour ``h`` of every array is
        local standard clock hour ``h`` of the year.
    cell : ClimateCell or None
        Climate grid cell the resource (or, for monthly values, the shape of
        its daily distribution) came from; None for a measured year.
    tilt_deg, azimuth_deg : float
        Array orientation [degrees].
    elevation_m : float
        Site elevation [m].
    wind_speed_ms : numpy.ndarray, shape (n_years, 8760), float32
        Wind speed used for the cell temperature [m/s] (read-only broadcast
        view when constant).
    source : str
        Plain description of where the irradiance came from, e.g.
        ``"embedded MERRA-2 3° cell at (0.0, 30.0), 42 km"``.
    source_kind : str
        ``"embedded"``, ``"measured"`` or ``"monthly"``.
    data_distance_km : float
        Distance from the site to where the irradiance data describe: the
        cell centre, or the measuring station (0 for monthly values given
        for the site) [km].
    temperature_from_data : bool
        True when air temperatures came with the weather data (measured
        year, or monthly table temperatures), False when they came from
        ``temp_mean_c``.
    """

    ghi_wm2: np.ndarray
    poa_wm2: np.ndarray
    temp_air_c: np.ndarray
    cell_temp_c: np.ndarray
    daily_ghi_kwh_m2: np.ndarray
    utc_offset_hours: float
    cell: ClimateCell | None
    tilt_deg: float
    azimuth_deg: float
    elevation_m: float
    wind_speed_ms: np.ndarray = None
    source: str = ""
    source_kind: str = EMBEDDED
    data_distance_km: float = float("nan")
    temperature_from_data: bool = False


def _orientation(latitude, tilt_deg, azimuth_deg):
    default_tilt, default_azimuth = pv.default_orientation(latitude)
    tilt = float(default_tilt if tilt_deg is None else tilt_deg)
    azimuth = float(default_azimuth if azimuth_deg is None else azimuth_deg)
    if not 0.0 <= tilt <= 90.0:
        raise ValueError(f"tilt_deg must be in [0, 90] degrees, got {tilt}")
    if not 0.0 <= azimuth <= 360.0:
        raise ValueError(
            f"azimuth_deg must be in [0, 360] degrees, got {azimuth}")
    return tilt, azimuth


def _cell_text(cell):
    text = (f"embedded MERRA-2 {cell.grid_resolution_deg:g}° cell at "
            f"({cell.latitude_deg:.1f}, {cell.longitude_deg:.1f}), "
            f"{cell.distance_km:.0f} km")
    if not cell.is_own_cell:
        text += " (nearest cell with data; the site's own cell has none)"
    return text


def _as_years(profile, n_years):
    profile = np.asarray(profile, dtype=np.float32)
    if profile.ndim == 1:
        return np.broadcast_to(profile, (n_years, profile.size))
    return profile


def site_weather_from(source, latitude, longitude, *, n_years, seed,
                      temp_mean_c=None, temp_daily_amplitude_k=5.0,
                      correction_factor=1.0, persistence=DEFAULT_PERSISTENCE,
                      measured_persistence=True, tilt_deg=None,
                      azimuth_deg=None, albedo=0.2, wind_speed_ms=1.0,
                      max_distance_km=300.0, transposition="perez"):
    """Hourly weather years for a site from the embedded grid or user data.

    The one entry point for the planner and the ``resource`` command. Sun
    position (almanac formulae, :func:`sun_year`), clear sky and plane
    geometry are computed once per site and shared by all weather years.

    Parameters
    ----------
    source : {"embedded", None}, MeasuredYear or MonthlyClimate
        Where the irradiance comes from:

        * :data:`EMBEDDED` (or None): the embedded climate grid, its cell's
          monthly distributions with AR(1) persistence
          (:func:`synthesize_daily_ghi`), times ``correction_factor``; hours
          from the clear sky.
        * :class:`MeasuredYear`: year 0 is the measured year, hour by hour
          (moved by whole hours so that the station's solar time falls on
          the site's clock: by the time-zone difference for a station near
          the site); years 1.. resample measured days within each calendar
          month with persistence (:func:`resample_measured_days`), hours
          from the source days' measured clear-sky indices
          (:func:`resampled_hourly_ghi`); air temperature and wind travel
          with their source days. ``correction_factor`` is not applied.
        * :class:`MonthlyClimate`: the nearest cell's daily distributions,
          each month rescaled to the given monthly mean
          (``monthly_mean_kwh_m2_day`` of :func:`synthesize_daily_ghi`);
          air temperature from the monthly values where given (else
          ``temp_mean_c``). ``correction_factor`` is not applied.
    latitude, longitude : float
        Site position [degrees north, degrees east].
    n_years : int
        Number of 365-day weather years.
    seed : int
        Random seed; the same seed gives the same years.
    temp_mean_c : float, optional
        Mean air temperature [°C], used where the source has none; required
        then.
    temp_daily_amplitude_k : float, default 5.0
        Half the daily air temperature range [K] for generated profiles.
    correction_factor : float, default 1.0
        Multiplier on the embedded grid's daily irradiation [-].
    persistence : float, default 0.3
        Lag-1 autocorrelation of daily normal scores [-] for the embedded
        grid and monthly values (and measured years when
        ``measured_persistence`` is False).
    measured_persistence : bool, default True
        For a measured year, use its own persistence
        (:func:`daily_persistence`, clipped to 0..0.95) instead of
        ``persistence``.
    tilt_deg, azimuth_deg : float, optional
        Array orientation [degrees]; default
        :func:`fleet.pv.default_orientation`.
    albedo : float, default 0.2
        Ground reflectance [-].
    wind_speed_ms : float, default 1.0
        Wind speed for the cell temperature model [m/s] where the source
        has none.
    max_distance_km : float, default 300.0
        Furthest acceptable climate cell [km] (embedded grid and monthly
        values).
    transposition : {"perez", "haydavies"}, default "perez"
        Sky diffuse model of :func:`fleet.pv.plane_of_array`.

    Returns
    -------
    SiteWeather

    Raises
    ------
    ValueError
        For a position off the climate data (embedded grid, monthly values),
        impossible parameters, or no temperature at all.
    """
    latitude, longitude = _check_position(latitude, longitude)
    n_years = int(n_years)
    if n_years < 1:
        raise ValueError(f"n_years must be at least 1, got {n_years}")
    tilt, azimuth = _orientation(latitude, tilt_deg, azimuth_deg)
    if source is None:
        source = EMBEDDED
    if isinstance(source, str) and source != EMBEDDED:
        raise ValueError(f"unknown weather source {source!r}")
    elevation = site_elevation_m(latitude, longitude)
    offset = utc_offset_hours(latitude, longitude)
    sun = sun_year(latitude, longitude, offset, elevation)
    clear = sun.clearsky_ghi_wm2

    cell = None
    temperature_from_data = False
    wind = np.float32(wind_speed_ms)
    if isinstance(source, MeasuredYear):
        kind = "measured"
        # Whole hours that put the station's solar time on the site's clock:
        # the time-zone difference, less the longitude difference (for a
        # station near the site, just the zone difference).
        lon_gap = (longitude - float(source.longitude_deg) + 180.0) % 360.0 - 180.0
        shift = int(round(offset - float(source.utc_offset_hours) - lon_gap / 15.0))
        measured_ghi = np.roll(np.asarray(source.ghi_wm2, float), shift)
        measured_temp = np.roll(np.asarray(source.temp_air_c, float), shift)
        measured_wind = np.roll(np.asarray(source.wind_speed_ms, float), shift)
        measured_daily = measured_ghi.reshape(365, 24).sum(axis=1) / 1000.0
        rho = persistence
        if measured_persistence:
            rho = float(np.clip(daily_persistence(measured_daily, latitude),
                                0.0, 0.95))
        source_day, daily = resample_measured_days(
            measured_daily, latitude, n_years, seed, rho)
        ghi = resampled_hourly_ghi(measured_ghi, clear, source_day, daily)
        ghi[0] = np.clip(measured_ghi, 0.0, None)
        temp_air = measured_temp.reshape(365, 24)[source_day].reshape(
            n_years, _HOURS)
        wind = measured_wind.reshape(365, 24)[source_day].reshape(
            n_years, _HOURS)
        temperature_from_data = True
        distance = float(great_circle_distance_km(
            latitude, longitude, source.latitude_deg, source.longitude_deg))
        description = (f"{source.kind} file {os.path.basename(source.label)}, "
                       f"measured year + {n_years - 1} synthetic "
                       f"(persistence {rho:.2f})")
        if distance >= 1.0:
            description += f", station {distance:.0f} km from the site"
    elif isinstance(source, MonthlyClimate):
        kind = "monthly"
        cell = nearest_climate_cell(latitude, longitude, max_distance_km)
        daily = synthesize_daily_ghi(
            cell, latitude, n_years, seed, persistence=persistence,
            monthly_mean_kwh_m2_day=source.ghi_kwh_m2_day)
        ghi = daily_to_hourly_ghi(daily, clear)
        if np.isfinite(source.temp_mean_c).all():
            temp_air = monthly_air_temperature_profile(
                source.temp_mean_c, source.temp_min_c, temp_daily_amplitude_k)
            temperature_from_data = True
        distance = 0.0
        description = (f"{source.label}, day-to-day spread from the "
                       f"{_cell_text(cell)}")
    elif source == EMBEDDED:
        kind = EMBEDDED
        cell = nearest_climate_cell(latitude, longitude, max_distance_km)
        daily = synthesize_daily_ghi(cell, latitude, n_years, seed,
                                     persistence=persistence,
                                     correction_factor=correction_factor)
        ghi = daily_to_hourly_ghi(daily, clear)
        distance = cell.distance_km
        description = _cell_text(cell)
        if correction_factor != 1.0:
            description += f", GHI x {correction_factor:g}"
    else:
        raise TypeError(f"unknown weather source of type "
                        f"{type(source).__name__}")

    if not temperature_from_data:
        if temp_mean_c is None or not np.isfinite(temp_mean_c):
            raise ValueError("the weather source has no air temperature: "
                             "give temp_mean_c")
        temp_air = air_temperature_profile(float(temp_mean_c),
                                           temp_daily_amplitude_k)

    poa = pv.plane_of_array(ghi, sun.zenith_deg, sun.azimuth_deg,
                            sun.dni_extra_wm2, tilt, azimuth, albedo=albedo,
                            model=transposition)
    temp_air32 = _as_years(temp_air, n_years)
    wind32 = _as_years(np.broadcast_to(np.float32(wind), (_HOURS,))
                       if np.ndim(wind) == 0 else wind, n_years)
    poa32 = poa.astype(np.float32)
    cell_temp = pv.cell_temperature(poa32, temp_air32, wind32).astype(
        np.float32)
    ghi32 = ghi.astype(np.float32)
    return SiteWeather(
        ghi_wm2=ghi32,
        poa_wm2=poa32,
        temp_air_c=temp_air32,
        cell_temp_c=cell_temp,
        daily_ghi_kwh_m2=ghi.reshape(n_years, 365, 24).sum(axis=-1) / 1000.0,
        utc_offset_hours=offset,
        cell=cell,
        tilt_deg=tilt,
        azimuth_deg=azimuth,
        elevation_m=elevation,
        wind_speed_ms=wind32,
        source=description,
        source_kind=kind,
        data_distance_km=float(distance),
        temperature_from_data=temperature_from_data,
    )


def site_weather(latitude, longitude, *, n_years, seed, temp_mean_c,
                 temp_daily_amplitude_k=5.0, correction_factor=1.0,
                 persistence=0.3, tilt_deg=None, azimuth_deg=None,
                 albedo=0.2, wind_speed_ms=1.0, max_distance_km=300.0):
    """Synthetic hourly weather years from the embedded grid.

    Same as ``site_weather_from(EMBEDDED, ...)``; see
    :func:`site_weather_from` for the parameters.

    Returns
    -------
    SiteWeather
    """
    return site_weather_from(
        EMBEDDED, latitude, longitude, n_years=n_years, seed=seed,
        temp_mean_c=temp_mean_c, temp_daily_amplitude_k=temp_daily_amplitude_k,
        correction_factor=correction_factor, persistence=persistence,
        tilt_deg=tilt_deg, azimuth_deg=azimuth_deg, albedo=albedo,
        wind_speed_ms=wind_speed_ms, max_distance_km=max_distance_km)
