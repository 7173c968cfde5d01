"""Array physics: sun geometry, plane-of-array irradiance, cell temperature
and DC output per kWp.

Every function is pure and vectorised. Irradiance arrays may carry a leading
weather-year axis, shape ``(n_years, n_hours)``; geometry arrays have shape
``(n_hours,)`` and are shared by all weather years, because the sun follows
the same path in every synthetic year.

Angles follow the pvlib convention: zenith from vertical, azimuth clockwise
from north (180 = south), tilt from horizontal.

Two solar position methods are offered: the NREL SPA (precise, the reference)
and the Astronomical Almanac's low-precision formulae (within about 0.01° of
SPA for 1950-2050, far cheaper), which the weather years use. Decomposition
(Erbs) and transposition (Perez, Hay-Davies) follow pvlib's formulas exactly
but are evaluated only at sun-up hours, with the angle terms computed once for
all weather years.
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


#: Solar-position methods of :func:`solar_geometry`.
SOLAR_POSITION_METHODS = ("spa", "almanac")

#: Solar constant used with the Spencer orbit series [W/m²] (pvlib's default).
SOLAR_CONSTANT_WM2 = 1366.1

#: Perez et al. (1990) "all sites composite" coefficients, one row per sky
#: clearness bin (1 = overcast ... 8 = clear): f11, f12, f13, f21, f22, f23.
PEREZ_1990_COEFFICIENTS = np.array([
    [-0.0080, 0.5880, -0.0620, -0.0600, 0.0720, -0.0220],
    [0.1300, 0.6830, -0.1510, -0.0190, 0.0660, -0.0290],
    [0.3300, 0.4870, -0.2210, 0.0550, -0.0640, -0.0260],
    [0.5680, 0.1870, -0.2950, 0.1090, -0.1520, -0.0140],
    [0.8730, -0.3920, -0.3620, 0.2260, -0.4620, 0.0010],
    [1.1320, -1.2370, -0.4120, 0.2880, -0.8230, 0.0560],
    [1.0600, -1.6000, -0.3590, 0.2640, -1.1270, 0.1310],
    [0.6780, -0.3270, -0.2500, 0.1560, -1.3770, 0.2510],
])

#: Upper edges of the Perez sky clearness bins 1..7 (bin 8 is open above).
PEREZ_CLEARNESS_EDGES = np.array([1.065, 1.23, 1.5, 1.95, 2.8, 4.5, 6.2])


def julian_day(times_utc):
    """Julian day of timezone-aware instants.

    Parameters
    ----------
    times_utc : pandas.DatetimeIndex
        Timezone-aware instants.

    Returns
    -------
    numpy.ndarray
        Julian day [days] (UT), float64.
    """
    times = pd.DatetimeIndex(times_utc)
    if times.tz is None:
        raise ValueError("times_utc must be timezone-aware")
    ns = times.tz_convert("UTC").tz_localize(None).to_numpy().astype(
        "datetime64[ns]").astype(np.int64)
    # 2440587.5 is the Julian day of the Unix epoch, 1970-01-01 00:00 UT.
    return ns / 86_400e9 + 2440587.5


def extraterrestrial_normal_irradiance(day_of_year,
                                       solar_constant_wm2=SOLAR_CONSTANT_WM2):
    """Extraterrestrial normal irradiance from the day of year.

    Parameters
    ----------
    day_of_year : array_like
        Day of year, 1 = 1 January.
    solar_constant_wm2 : float, default 1366.1
        Solar constant [W/m²].

    Returns
    -------
    numpy.ndarray
        Irradiance normal to the sun's rays outside the atmosphere [W/m²].

    References
    ----------
    .. [1] J. W. Spencer, "Fourier series representation of the position of
       the sun", Search 2(5):172, 1971.
    """
    day_angle = (2.0 * np.pi / 365.0) * (np.asarray(day_of_year, float) - 1.0)
    distance_factor = (1.00011 + 0.034221 * np.cos(day_angle)
                       + 0.00128 * np.sin(day_angle)
                       + 0.000719 * np.cos(2.0 * day_angle)
                       + 7.7e-05 * np.sin(2.0 * day_angle))
    return solar_constant_wm2 * distance_factor


def refraction_correction_deg(elevation_deg, pressure_pa=101325.0,
                              temperature_c=12.0):
    """Atmospheric refraction of the sun's elevation.

    Parameters
    ----------
    elevation_deg : array_like
        Geometric (airless) solar elevation [degrees].
    pressure_pa : float, default 101325
        Air pressure [Pa].
    temperature_c : float, default 12
        Air temperature [°C].

    Returns
    -------
    numpy.ndarray
        Amount to add to the elevation [degrees]; zero once the sun's upper
        limb is below the horizon (elevation < -0.8333°).

    References
    ----------
    .. [1] I. Reda and A. Andreas, "Solar position algorithm for solar
       radiation applications", Solar Energy 76(5):577-589, 2004, eq. 42.
    """
    e = np.asarray(elevation_deg, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = ((pressure_pa / 101000.0) * (283.0 / (273.0 + temperature_c))
                 * 1.02 / (60.0 * np.tan(np.radians(e + 10.3 / (e + 5.11)))))
    return np.where(e >= -(0.26667 + 0.5667), delta, 0.0)


def sun_position_almanac(julian_days, latitude, longitude):
    """Sun position from the Astronomical Almanac's low-precision formulae.

    About a hundred times cheaper than the NREL SPA and within about 0.01°
    of it for 1950-2050 (the tests check a whole year against SPA), which
    is ample for hourly energy planning.

    Parameters
    ----------
    julian_days : array_like
        Julian day [days] (UT), e.g. from :func:`julian_day`.
    latitude, longitude : float
        Position [degrees north, degrees east].

    Returns
    -------
    elevation_deg : numpy.ndarray
        Geometric solar elevation, without refraction [degrees].
    azimuth_deg : numpy.ndarray
        Solar azimuth clockwise from north [degrees, 0..360).
    earth_sun_distance_au : numpy.ndarray
        Earth-sun distance [AU].

    References
    ----------
    .. [1] J. J. Michalsky, "The Astronomical Almanac's algorithm for
       approximate solar position (1950-2050)", Solar Energy 40(3):227-235,
       1988.
    """
    n = np.asarray(julian_days, dtype=float) - 2451545.0
    mean_longitude = np.radians(280.460 + 0.9856474 * n)
    mean_anomaly = np.radians(357.528 + 0.9856003 * n)
    sin_g, cos_g = np.sin(mean_anomaly), np.cos(mean_anomaly)
    # sin 2g = 2 sin g cos g, cos 2g = 2 cos² g - 1: fewer trigonometric calls
    ecliptic_longitude = (mean_longitude + np.radians(1.915) * sin_g
                          + np.radians(0.020) * 2.0 * sin_g * cos_g)
    obliquity = np.radians(23.439 - 4.0e-7 * n)
    sin_lambda, cos_lambda = np.sin(ecliptic_longitude), np.cos(ecliptic_longitude)
    sin_dec = np.sin(obliquity) * sin_lambda
    # Right ascension as a unit vector: (cos λ, cos ε sin λ) / cos δ.
    ra_x = cos_lambda
    ra_y = np.cos(obliquity) * sin_lambda
    cos_dec = np.sqrt(ra_x * ra_x + ra_y * ra_y)
    # Local mean sidereal angle from days since J2000.0.
    sidereal = np.radians((18.697374558 + 24.06570982441908 * n) * 15.0
                          + longitude)
    sin_s, cos_s = np.sin(sidereal), np.cos(sidereal)
    # hour angle = sidereal angle - right ascension (angle difference)
    cos_ha = (cos_s * ra_x + sin_s * ra_y) / cos_dec
    sin_ha = (sin_s * ra_x - cos_s * ra_y) / cos_dec
    phi = np.radians(latitude)
    sin_phi, cos_phi = np.sin(phi), np.cos(phi)
    sin_elevation = sin_phi * sin_dec + cos_phi * cos_dec * cos_ha
    elevation = np.degrees(np.arcsin(np.clip(sin_elevation, -1.0, 1.0)))
    azimuth = np.degrees(np.arctan2(
        -cos_dec * sin_ha,
        sin_dec * cos_phi - cos_dec * sin_phi * cos_ha)) % 360.0
    distance = 1.00014 - 0.01671 * cos_g - 0.00014 * (2.0 * cos_g * cos_g - 1.0)
    return elevation, azimuth, distance


def solar_geometry(latitude, longitude, times_utc, elevation_m,
                   pressure_pa=None, temperature_c=12.0, delta_t_s=None,
                   method="spa"):
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
        Difference between terrestrial time and UT1 [s], SPA only. Default:
        pvlib's estimate for the year.
    method : {"spa", "almanac"}, default "spa"
        ``"spa"``: the NREL Solar Position Algorithm (pvlib ``nrel_numpy``),
        uncertainty ±0.0003°. ``"almanac"``: :func:`sun_position_almanac`,
        within about 0.01° of SPA for 1950-2050 and far cheaper; used for
        the hourly weather years. Refraction is the SPA formula in both.

    Returns
    -------
    pandas.DataFrame
        Indexed by ``times_utc`` with columns ``zenith``, ``apparent_zenith``
        (refraction-corrected), ``elevation``, ``apparent_elevation``,
        ``azimuth`` [degrees] and ``dni_extra`` [W/m²] (Spencer series by
        UTC day of year); with ``method="spa"`` also ``equation_of_time``
        [minutes].

    References
    ----------
    .. [1] I. Reda and A. Andreas, "Solar position algorithm for solar
       radiation applications", Solar Energy 76(5):577-589, 2004
       (NREL/TP-560-34302).
    .. [2] J. J. Michalsky, "The Astronomical Almanac's algorithm for
       approximate solar position (1950-2050)", Solar Energy 40(3):227-235,
       1988.
    .. [3] J. W. Spencer, "Fourier series representation of the position of
       the sun", Search 2(5):172, 1971.
    """
    if method not in SOLAR_POSITION_METHODS:
        raise ValueError(f"unknown solar position method {method!r}; "
                         f"expected one of {SOLAR_POSITION_METHODS}")
    times_utc = pd.DatetimeIndex(times_utc)
    if pressure_pa is None:
        pressure_pa = pvlib.atmosphere.alt2pres(elevation_m)
    if method == "spa":
        kwargs = {}
        if delta_t_s is not None:
            kwargs["delta_t"] = delta_t_s
        position = pvlib.solarposition.get_solarposition(
            times_utc, latitude, longitude, altitude=elevation_m,
            pressure=pressure_pa, method="nrel_numpy",
            temperature=temperature_c, **kwargs)
        geometry = position[["zenith", "apparent_zenith", "elevation",
                             "apparent_elevation", "azimuth",
                             "equation_of_time"]].copy()
    else:
        elevation, azimuth, _ = sun_position_almanac(
            julian_day(times_utc), latitude, longitude)
        apparent = elevation + refraction_correction_deg(
            elevation, pressure_pa, temperature_c)
        geometry = pd.DataFrame({
            "zenith": 90.0 - elevation,
            "apparent_zenith": 90.0 - apparent,
            "elevation": elevation,
            "apparent_elevation": apparent,
            "azimuth": azimuth,
        }, index=times_utc)
    geometry["dni_extra"] = extraterrestrial_normal_irradiance(
        times_utc.tz_convert("UTC").day_of_year.to_numpy())
    return geometry


def _hour_day_of_year(n_hours):
    """Day of year (1-based) for each hour of a year starting on 1 January."""
    return np.arange(n_hours) // 24 + 1


def relative_airmass(zenith_deg):
    """Relative optical air mass (Kasten & Young 1989).

    Parameters
    ----------
    zenith_deg : array_like
        Solar zenith angle [degrees].

    Returns
    -------
    numpy.ndarray
        Relative air mass [-]; NaN with the sun below the horizon.

    References
    ----------
    .. [1] F. Kasten and A. T. Young, "Revised optical air mass tables and
       approximation formula", Applied Optics 28(22):4735-4738, 1989.
    """
    z = np.asarray(zenith_deg, dtype=float)
    z = np.where(z > 90.0, np.nan, z)
    return 1.0 / (np.cos(np.radians(z))
                  + 0.50572 * (6.07995 + (90.0 - z)) ** -1.6364)


def erbs_decomposition(ghi_wm2, zenith_deg, day_of_year, min_cos_zenith=0.065,
                       max_zenith_deg=87.0):
    """Beam and diffuse parts of global horizontal irradiance (Erbs et al.).

    Parameters
    ----------
    ghi_wm2 : array_like, shape (..., n_hours)
        Global horizontal irradiance [W/m²].
    zenith_deg : array_like, shape (n_hours,)
        True solar zenith [degrees].
    day_of_year : array_like, shape (n_hours,)
        Day of year, for the extraterrestrial irradiance.
    min_cos_zenith : float, default 0.065
        Smallest cosine of zenith used in the clearness index [-].
    max_zenith_deg : float, default 87
        Beyond this zenith all irradiance is taken as diffuse [degrees].

    Returns
    -------
    dni_wm2, dhi_wm2 : numpy.ndarray
        Direct normal and diffuse horizontal irradiance [W/m²], shape of
        ``ghi_wm2``.

    References
    ----------
    .. [1] D. G. Erbs, S. A. Klein and J. A. Duffie, "Estimation of the
       diffuse radiation fraction for hourly, daily and monthly-average
       global radiation", Solar Energy 28(4):293-302, 1982.
    """
    ghi = np.asarray(ghi_wm2, dtype=float)
    zenith = np.asarray(zenith_deg, dtype=float)
    cos_zenith = np.cos(np.radians(zenith))
    horizontal_extra = (extraterrestrial_normal_irradiance(day_of_year)
                        * np.maximum(cos_zenith, min_cos_zenith))
    kt = np.clip(ghi / horizontal_extra, 0.0, 1.0)
    middle = 0.9511 + kt * (-0.1604 + kt * (4.388 + kt * (-16.638
                                                          + kt * 12.336)))
    diffuse_fraction = np.where(kt <= 0.22, 1.0 - 0.09 * kt,
                                np.where(kt <= 0.8, middle, 0.165))
    dhi = diffuse_fraction * ghi
    with np.errstate(divide="ignore", invalid="ignore"):
        dni = (ghi - dhi) / cos_zenith
    bad = (zenith > max_zenith_deg) | (ghi < 0.0) | ~(dni >= 0.0)
    return np.where(bad, 0.0, dni), np.where(bad, ghi, dhi)


def plane_of_array(ghi_wm2, solar_zenith, solar_azimuth, dni_extra,
                   tilt_deg, azimuth_deg, albedo=0.2, model="perez",
                   day_of_year=None):
    """Global irradiance on a tilted plane from global horizontal irradiance.

    GHI is split into beam and diffuse with the Erbs correlation, then
    transposed with the Perez (1990 all-sites coefficients) or Hay-Davies
    sky model plus isotropic ground reflection. The formulas are those of
    pvlib's ``erbs`` and ``get_total_irradiance`` (the tests compare them),
    evaluated only at hours with the sun up and with the angle terms
    computed once for all weather years.

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
    day_of_year = np.broadcast_to(np.asarray(day_of_year), (n_hours,))

    shape = ghi.shape
    rows = np.clip(ghi.reshape(-1, n_hours), 0.0, None)
    poa = np.zeros_like(rows)
    sun_up = np.flatnonzero((zenith < 90.0) & (rows > 0.0).any(axis=0))
    if sun_up.size == 0:
        return poa.reshape(shape)

    # Angle terms: one value per hour, shared by every weather year.
    z = zenith[sun_up]
    z_rad = np.radians(z)
    cos_z = np.cos(z_rad)
    tilt = np.radians(tilt_deg)
    cos_aoi = np.clip(np.cos(tilt) * cos_z + np.sin(tilt) * np.sin(z_rad)
                      * np.cos(np.radians(azimuth[sun_up] - azimuth_deg)),
                      -1.0, 1.0)
    beam_ratio = np.maximum(cos_aoi, 0.0)
    extra = dni_extra[sun_up]
    iso_view = 0.5 * (1.0 + np.cos(tilt))
    ground_view = 0.5 * (1.0 - np.cos(tilt)) * albedo

    g = rows[:, sun_up]
    dni, dhi = erbs_decomposition(g, z, day_of_year[sun_up])
    if model == "perez":
        airmass = relative_airmass(z)
        kappa_z3 = 1.041 * z_rad ** 3
        with np.errstate(divide="ignore", invalid="ignore"):
            clearness = ((dhi + dni) / dhi + kappa_z3) / (1.0 + kappa_z3)
        sky_bin = np.searchsorted(PEREZ_CLEARNESS_EDGES, clearness,
                                  side="right")
        brightness = dhi * airmass / extra
        c = PEREZ_1990_COEFFICIENTS[np.minimum(sky_bin, 7)]
        f1 = np.maximum(c[..., 0] + c[..., 1] * brightness
                        + c[..., 2] * z_rad, 0.0)
        f2 = c[..., 3] + c[..., 4] * brightness + c[..., 5] * z_rad
        circumsolar_ratio = beam_ratio / np.maximum(cos_z,
                                                    np.cos(np.radians(85.0)))
        sky = np.maximum(dhi * ((1.0 - f1) * iso_view
                                + f1 * circumsolar_ratio
                                + f2 * np.sin(tilt)), 0.0)
    else:
        anisotropy = dni / extra
        rb = beam_ratio / np.maximum(cos_z, 0.01745)
        sky = (np.maximum(dhi * (1.0 - anisotropy) * iso_view, 0.0)
               + np.maximum(dhi * anisotropy * rb, 0.0))
    total = np.maximum(dni * cos_aoi, 0.0) + sky + g * ground_view
    poa[:, sun_up] = np.where(g > 0.0, np.nan_to_num(np.maximum(total, 0.0)),
                              0.0)
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
    poa = np.asarray(poa_wm2, dtype=float)
    temp_air = np.asarray(temp_air_c, dtype=float)
    # Faiman: T_cell = T_air + G / (U0 + U1 * v)
    return temp_air + poa / (u0 + u1 * np.asarray(wind_speed_ms, dtype=float))


#: Soiling loss of the PVWatts default loss breakdown [-].
DEFAULT_SOILING_FRACTION = 0.02
#: DC wiring loss of the PVWatts default loss breakdown [-].
DEFAULT_WIRING_FRACTION = 0.02
#: Default total DC losses between cells and controller input [-] (PVWatts).
DEFAULT_LOSSES_FRACTION = 0.14
#: The remaining losses (mismatch, connections, light-induced degradation,
#: nameplate, availability, shading) such that soiling, wiring and these
#: combine to :data:`DEFAULT_LOSSES_FRACTION`.
DEFAULT_OTHER_LOSSES_FRACTION = 1.0 - (1.0 - DEFAULT_LOSSES_FRACTION) / (
    (1.0 - DEFAULT_SOILING_FRACTION) * (1.0 - DEFAULT_WIRING_FRACTION))


def combined_losses_fraction(soiling_fraction=DEFAULT_SOILING_FRACTION,
                             wiring_fraction=DEFAULT_WIRING_FRACTION,
                             other_losses_fraction=DEFAULT_OTHER_LOSSES_FRACTION):
    """Total DC loss from separate loss fractions, combined as PVWatts does.

    Parameters
    ----------
    soiling_fraction : float, default 0.02
        Dust and dirt on the modules [-].
    wiring_fraction : float, default 0.02
        Resistive loss in DC cables between array and controller [-].
    other_losses_fraction : float, default about 0.1045
        Every other DC loss (mismatch, connections, light-induced
        degradation, nameplate rating, availability, shading) [-].

    Returns
    -------
    float
        ``1 - (1 - soiling) (1 - wiring) (1 - other)`` [-]; the defaults
        give 0.14.

    References
    ----------
    .. [1] A. P. Dobos, "PVWatts Version 5 Manual", NREL/TP-6A20-62641,
       2014, section 3.1.
    """
    parts = {"soiling_fraction": soiling_fraction,
             "wiring_fraction": wiring_fraction,
             "other_losses_fraction": other_losses_fraction}
    kept = 1.0
    for name, value in parts.items():
        value = float(value)
        if not 0.0 <= value < 1.0:
            raise ValueError(f"{name} must be in [0, 1), got {value}")
        kept *= 1.0 - value
    return 1.0 - kept


def dc_power_per_kwp(poa_wm2, cell_temp_c, gamma_pdc_per_k=-0.004,
                     losses_fraction=None, *, soiling_fraction=None,
                     wiring_fraction=None,
                     other_losses_fraction=DEFAULT_OTHER_LOSSES_FRACTION):
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
    losses_fraction : float, optional
        All DC losses between the cells and the controller input in one
        figure [-]. When given, it replaces the three separate fractions
        below (which must then be left out). Default: the separate
        fractions combined by :func:`combined_losses_fraction` (0.14 with
        all defaults).
    soiling_fraction : float, optional
        Soiling loss [-]; default 0.02.
    wiring_fraction : float, optional
        DC wiring loss [-]; default 0.02.
    other_losses_fraction : float, default about 0.1045
        Every other DC loss [-].

    Returns
    -------
    numpy.ndarray
        DC power per kWp [W/kWp]: 1000 at 1000 W/m², 25 °C and zero losses.

    References
    ----------
    .. [1] A. P. Dobos, "PVWatts Version 5 Manual", NREL/TP-6A20-62641,
       2014.
    """
    if losses_fraction is not None:
        if soiling_fraction is not None or wiring_fraction is not None:
            raise ValueError(
                "give either losses_fraction (all DC losses in one figure) "
                "or soiling_fraction/wiring_fraction, not both")
        if not 0.0 <= losses_fraction < 1.0:
            raise ValueError(
                f"losses_fraction must be in [0, 1), got {losses_fraction}")
        total_loss = float(losses_fraction)
    else:
        total_loss = combined_losses_fraction(
            DEFAULT_SOILING_FRACTION if soiling_fraction is None
            else soiling_fraction,
            DEFAULT_WIRING_FRACTION if wiring_fraction is None
            else wiring_fraction,
            other_losses_fraction)
    poa = np.asarray(poa_wm2, dtype=float)
    temp = np.asarray(cell_temp_c, dtype=float)
    # PVWatts DC: P = G/1000 * Pdc0 * (1 + gamma (T_cell - 25 °C))
    pdc = poa * (1.0 + gamma_pdc_per_k * (temp - 25.0))
    return pdc * (1.0 - total_loss)


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
