"""Array physics: sun geometry, plane-of-array irradiance, cell temperature
and DC output per kWp.

Every function is pure and vectorised. Irradiance arrays may carry a leading
weather-year axis, shape ``(n_years, n_hours)``; geometry arrays have shape
``(n_hours,)`` and are shared by all weather years, because the sun follows
the same path in every synthetic year.

Angles follow the pvlib convention: zenith from vertical, azimuth clockwise
from north (180 = south), tilt from horizontal.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib

#: Lowest tilt kept so that rain washes dust off the modules.
MIN_TILT_DEG = 10.0  # common practice

_TRANSPOSITION_MODELS = ("perez", "haydavies")


def default_orientation(latitude):
    """Fixed-tilt orientation for a site: tilt near latitude, facing the equator.

    Parameters
    ----------
    latitude : float
        Site latitude [degrees north].

    Returns
    -------
    tilt_deg : float
        Surface tilt from horizontal [degrees]: ``|latitude|``, but not less
        than :data:`MIN_TILT_DEG` so that rain can clean the modules.
    azimuth_deg : float
        Surface azimuth [degrees clockwise from north]: 180 (south-facing) in
        the northern hemisphere and on the equator, 0 (north-facing) in the
        southern hemisphere.

    Notes
    -----
    Tilting at latitude maximises annual irradiation only roughly; for
    stand-alone systems a steeper tilt favours the dull season, which a
    caller may choose explicitly.
    """
    latitude = float(latitude)
    tilt = max(abs(latitude), MIN_TILT_DEG)
    azimuth = 180.0 if latitude >= 0.0 else 0.0
    return tilt, azimuth


def solar_geometry(latitude, longitude, times_utc, elevation_m,
                   pressure_pa=None, temperature_c=12.0, delta_t_s=None):
    """Sun position and extraterrestrial normal irradiance.

    Parameters
    ----------
    latitude, longitude : float
        Site position [degrees north, degrees east].
    times_utc : pandas.DatetimeIndex
        Instants, timezone-aware (normally UTC).
    elevation_m : float
        Site elevation above sea level [m].
    pressure_pa : float, optional
        Air pressure used for refraction [Pa]. Default: the standard
        atmosphere pressure at ``elevation_m``.
    temperature_c : float, default 12.0
        Air temperature used for refraction [°C].
    delta_t_s : float, optional
        Difference between terrestrial time and UT1 [s]. Default: pvlib's
        estimate for the year.

    Returns
    -------
    pandas.DataFrame
        Indexed by ``times_utc`` with columns ``zenith``, ``apparent_zenith``
        (refraction-corrected), ``elevation``, ``apparent_elevation``,
        ``azimuth`` [degrees], ``equation_of_time`` [minutes] and
        ``dni_extra`` [W/m²].

    References
    ----------
    .. [1] I. Reda and A. Andreas, "Solar position algorithm for solar
       radiation applications", Solar Energy 76(5):577-589, 2004
       (NREL/TP-560-34302).
    .. [2] J. W. Spencer, "Fourier series representation of the position of
       the sun", Search 2(5):172, 1971.
    """
    times_utc = pd.DatetimeIndex(times_utc)
    if pressure_pa is None:
        pressure_pa = pvlib.atmosphere.alt2pres(elevation_m)
    kwargs = {}
    if delta_t_s is not None:
        kwargs["delta_t"] = delta_t_s
    position = pvlib.solarposition.get_solarposition(
        times_utc, latitude, longitude, altitude=elevation_m,
        pressure=pressure_pa, method="nrel_numpy", temperature=temperature_c,
        **kwargs)
    geometry = position[["zenith", "apparent_zenith", "elevation",
                         "apparent_elevation", "azimuth",
                         "equation_of_time"]].copy()
    geometry["dni_extra"] = np.asarray(
        pvlib.irradiance.get_extra_radiation(times_utc.day_of_year),
        dtype=float)
    return geometry


def _hour_day_of_year(n_hours):
    """Day of year (1-based) for each hour of a year starting on 1 January."""
    return np.arange(n_hours) // 24 + 1


def plane_of_array(ghi_wm2, solar_zenith, solar_azimuth, dni_extra,
                   tilt_deg, azimuth_deg, albedo=0.2, model="perez",
                   day_of_year=None):
    """Global irradiance on a tilted plane from global horizontal irradiance.

    GHI is split into beam and diffuse with the Erbs correlation, then
    transposed with the Perez or Hay-Davies sky model plus isotropic ground
    reflection. All weather years are handled in one call: the year axis is
    flattened against the shared geometry.

    Parameters
    ----------
    ghi_wm2 : array_like, shape (..., n_hours)
        Global horizontal irradiance [W/m²]; leading axes (weather years) are
        allowed.
    solar_zenith, solar_azimuth : array_like, shape (n_hours,)
        True solar zenith and azimuth [degrees].
    dni_extra : array_like, shape (n_hours,)
        Extraterrestrial normal irradiance [W/m²].
    tilt_deg, azimuth_deg : float
        Surface tilt and azimuth [degrees].
    albedo : float, default 0.2
        Ground reflectance [-].
    model : {"perez", "haydavies"}
        Sky diffuse transposition model.
    day_of_year : array_like, shape (n_hours,), optional
        Day of year (1-365) of each hour for the Erbs correlation. Default:
        hour ``h`` is on day ``h // 24 + 1``.

    Returns
    -------
    numpy.ndarray, shape like ``ghi_wm2``
        Plane-of-array global irradiance [W/m²], float64, zero when the sun
        is below the horizon or GHI is zero, never NaN.

    References
    ----------
    .. [1] D. G. Erbs, S. A. Klein and J. A. Duffie, "Estimation of the
       diffuse radiation fraction for hourly, daily and monthly-average
       global radiation", Solar Energy 28(4):293-302, 1982.
    .. [2] R. Perez, P. Ineichen, R. Seals, J. Michalsky and R. Stewart,
       "Modeling daylight availability and irradiance components from direct
       and global irradiance", Solar Energy 44(5):271-289, 1990.
    .. [3] J. E. Hay and J. A. Davies, "Calculations of the solar radiation
       incident on an inclined surface", Proc. First Canadian Solar Radiation
       Data Workshop, 59-72, 1980.
    """
    if model not in _TRANSPOSITION_MODELS:
        raise ValueError(
            f"unknown transposition model {model!r}; "
            f"expected one of {_TRANSPOSITION_MODELS}")
    ghi = np.asarray(ghi_wm2, dtype=float)
    zenith = np.asarray(solar_zenith, dtype=float)
    azimuth = np.asarray(solar_azimuth, dtype=float)
    dni_extra = np.asarray(dni_extra, dtype=float)
    n_hours = ghi.shape[-1]
    if zenith.shape != (n_hours,):
        raise ValueError(
            f"geometry has shape {zenith.shape}, expected ({n_hours},) to "
            f"match the last axis of ghi_wm2")
    if day_of_year is None:
        day_of_year = _hour_day_of_year(n_hours)
    day_of_year = np.asarray(day_of_year)

    shape = ghi.shape
    n_rows = int(np.prod(shape[:-1], dtype=int))

    def tiled(values):
        return np.tile(values, n_rows)

    ghi_flat = np.clip(ghi.reshape(-1), 0.0, None)
    zenith_flat = tiled(zenith)
    parts = pvlib.irradiance.erbs(ghi_flat, zenith_flat, tiled(day_of_year))
    dni = np.nan_to_num(np.asarray(parts["dni"], dtype=float))
    dhi = np.nan_to_num(np.asarray(parts["dhi"], dtype=float))
    airmass = pvlib.atmosphere.get_relative_airmass(zenith)
    with np.errstate(invalid="ignore", divide="ignore"):
        total = pvlib.irradiance.get_total_irradiance(
            tilt_deg, azimuth_deg, zenith_flat, tiled(azimuth), dni,
            ghi_flat, dhi, dni_extra=tiled(dni_extra),
            airmass=tiled(airmass), albedo=albedo, model=model)
    poa = np.nan_to_num(np.asarray(total["poa_global"], dtype=float))
    poa = np.where((zenith_flat < 90.0) & (ghi_flat > 0.0),
                   np.clip(poa, 0.0, None), 0.0)
    return poa.reshape(shape)


def cell_temperature(poa_wm2, temp_air_c, wind_speed_ms=1.0, u0=25.0,
                     u1=6.84):
    """Module cell temperature with the Faiman heat-loss model.

    Parameters
    ----------
    poa_wm2 : array_like
        Plane-of-array global irradiance [W/m²].
    temp_air_c : array_like
        Ambient air temperature [°C]; broadcast against ``poa_wm2``.
    wind_speed_ms : array_like, default 1.0
        Wind speed at module height [m/s].
    u0 : float, default 25.0
        Constant heat-loss coefficient [W/(m²·K)].
    u1 : float, default 6.84
        Wind-dependent heat-loss coefficient [W/(m²·K)/(m/s)].

    Returns
    -------
    numpy.ndarray
        Cell temperature [°C], broadcast shape of the inputs.

    References
    ----------
    .. [1] D. Faiman, "Assessing the outdoor operating temperature of
       photovoltaic modules", Progress in Photovoltaics 16(4):307-315, 2008.
    """
    poa, temp_air = np.broadcast_arrays(np.asarray(poa_wm2, dtype=float),
                                        np.asarray(temp_air_c, dtype=float))
    return np.asarray(pvlib.temperature.faiman(poa, temp_air, wind_speed_ms,
                                               u0=u0, u1=u1), dtype=float)


def dc_power_per_kwp(poa_wm2, cell_temp_c, gamma_pdc_per_k=-0.004,
                     losses_fraction=0.14):
    """Array DC output per kWp of nameplate with the PVWatts DC model.

    Parameters
    ----------
    poa_wm2 : array_like
        Plane-of-array irradiance reaching the cells [W/m²]; used as the
        effective irradiance (no separate angle-of-incidence or spectral
        correction).
    cell_temp_c : array_like
        Cell temperature [°C].
    gamma_pdc_per_k : float, default -0.004
        Power temperature coefficient [1/K].
    losses_fraction : float, default 0.14
        Combined DC losses between the cells and the controller input: soiling,
        wiring and module mismatch [-].

    Returns
    -------
    numpy.ndarray
        DC power per kWp [W/kWp]: 1000 at 1000 W/m², 25 °C and zero losses.

    References
    ----------
    .. [1] A. P. Dobos, "PVWatts Version 5 Manual", NREL/TP-6A20-62641,
       2014.
    """
    if not 0.0 <= losses_fraction < 1.0:
        raise ValueError(
            f"losses_fraction must be in [0, 1), got {losses_fraction}")
    pdc = pvlib.pvsystem.pvwatts_dc(
        np.asarray(poa_wm2, dtype=float), np.asarray(cell_temp_c, dtype=float),
        pdc0=1000.0, gamma_pdc=gamma_pdc_per_k)
    return np.asarray(pdc, dtype=float) * (1.0 - losses_fraction)


def specific_yield_kwh_per_kwp(dc_w_per_kwp):
    """Energy per kWp over each row of hourly DC power.

    Parameters
    ----------
    dc_w_per_kwp : array_like, shape (..., n_hours)
        Hourly-mean DC power [W/kWp], one row per weather year.

    Returns
    -------
    numpy.ndarray, shape (...)
        Specific yield [kWh/kWp] of each row (per year for 8760-hour rows).
    """
    return np.asarray(dc_w_per_kwp, dtype=float).sum(axis=-1) / 1000.0
