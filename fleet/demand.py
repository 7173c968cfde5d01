"""Hourly demand: Multi-Tier Framework household tiers, community loads and
the service units that kits are sized for.

Every hourly array is indexed by local standard clock hour of a 365-day year
(hour 0 = 00:00-01:00 on 1 January); power is the hour's mean in W, so the
hourly values sum to Wh.

A *service unit* is what one kit (or one minigrid plant) serves: at a solar
home system site, each tier group of households and each community facility
is a unit with a count (one kit each); at a minigrid site the whole village is
one unit.

References
----------
.. [1] ESMAP (2015). Beyond Connections: Energy Access Redefined. World Bank,
   Technical Report 008/15 (Multi-Tier Framework thresholds).
"""

from __future__ import annotations

import zlib

from dataclasses import dataclass

import numpy as np
import pandas as pd

HOURS_PER_YEAR = 8760
DAYS_PER_YEAR = 365

#: Multi-Tier Framework minimum household electricity supply per tier [1]:
#: peak capacity (W), daily energy (Wh/day), daily hours of supply, evening hours.
#: Values from ESMAP (2015), Beyond Connections, table of electricity supply
#: attributes (recalled, see tests).
MTF_THRESHOLDS = {
    1: {"peak_w": 3.0, "daily_wh": 12.0, "hours": 4, "evening_hours": 1},
    2: {"peak_w": 50.0, "daily_wh": 200.0, "hours": 4, "evening_hours": 2},
    3: {"peak_w": 200.0, "daily_wh": 1000.0, "hours": 8, "evening_hours": 3},
    4: {"peak_w": 800.0, "daily_wh": 3400.0, "hours": 16, "evening_hours": 4},
    5: {"peak_w": 2000.0, "daily_wh": 8200.0, "hours": 23, "evening_hours": 4},
}


def _hours(*spans: tuple[float, float]) -> np.ndarray:
    """24 duty fractions: 1 inside the [start, end) local-hour spans, fractional at edges."""
    duty = np.zeros(24)
    for start, end in spans:
        for h in range(24):
            duty[h] += max(0.0, min(end, h + 1) - max(start, h))
    return np.clip(duty, 0.0, 1.0)


def _appliance(name: str, rated_w: float, duty: np.ndarray, lighting: bool = False, critical: bool = False) -> dict:
    """An appliance: rated power (W), hourly duty (24 fractions), whether it
    is lighting that follows dusk and dawn through the year, and whether it is
    a critical load (kept on after other loads are shed)."""
    return {"name": name, "rated_w": rated_w, "duty": duty, "lighting": lighting, "critical": critical}


_EVENING_LIGHT = _hours((18.5, 22.5), (5.5, 6.5))
_PHONE = _hours((17, 19))
_TV = _hours((19, 22.5), (12.5, 13.5))
_FAN = _hours((12, 16), (19, 22))
_FRIDGE = np.full(24, 0.4)  # compressor duty cycle, common practice for a tropical kitchen


#: Design appliance mix per tier: name, rated power (W) and hourly duty
#: (fraction of each local hour the appliance runs). Invented for the demo
#: program but built to reach each tier's thresholds (checked in the tests).
TIER_APPLIANCES: dict[int, list[dict]] = {
    1: [
        _appliance("LED lamps (2 x 3 W)", 6.0, _EVENING_LIGHT, lighting=True),
        _appliance("phone charging", 5.0, _PHONE),
        _appliance("radio", 2.0, _hours((6, 7), (19, 21))),
    ],
    2: [
        _appliance("LED lamps (4 x 4 W)", 16.0, _EVENING_LIGHT, lighting=True),
        _appliance("phone charging (2)", 10.0, _PHONE),
        _appliance("television 20 W", 20.0, _TV),
        _appliance("fan 20 W", 20.0, _FAN),
    ],
    3: [
        _appliance("LED lamps (6 x 5 W)", 30.0, _EVENING_LIGHT, lighting=True),
        _appliance("phone charging (3)", 15.0, _PHONE),
        _appliance("television 60 W", 60.0, _TV),
        _appliance("fans (2 x 40 W)", 80.0, _FAN),
        _appliance("laptop 40 W", 40.0, _hours((9, 11), (20, 21))),
        _appliance("iron / blender 400 W", 400.0, _hours((7, 7.3), (18, 18.2))),
    ],
    4: [
        _appliance("LED lamps (8 x 6 W)", 48.0, _EVENING_LIGHT, lighting=True),
        _appliance("phone charging (4)", 20.0, _PHONE),
        _appliance("television 80 W", 80.0, _TV),
        _appliance("fans (3 x 50 W)", 150.0, _FAN),
        _appliance("laptop 50 W", 50.0, _hours((9, 12), (20, 22))),
        _appliance("refrigerator 150 W", 150.0, _FRIDGE),
        _appliance("washing machine 500 W", 500.0, _hours((10, 11))),
        _appliance("iron 1000 W", 1000.0, _hours((7, 7.3), (18, 18.2))),
    ],
    5: [
        _appliance("LED lamps (10 x 8 W)", 80.0, _EVENING_LIGHT, lighting=True),
        _appliance("phone charging (5)", 25.0, _PHONE),
        _appliance("televisions (2 x 80 W)", 160.0, _TV),
        _appliance("fans (3 x 50 W)", 150.0, _FAN),
        _appliance("laptops (2 x 50 W)", 100.0, _hours((9, 12), (20, 22))),
        _appliance("refrigerator 150 W", 150.0, _FRIDGE),
        _appliance("washing machine 500 W", 500.0, _hours((10, 11))),
        _appliance("air conditioner 1200 W", 1200.0, _hours((13, 16), (21, 23))),
        _appliance("electric cooking 2000 W", 2000.0, _hours((18, 19), (7, 7.5))),
    ],
}

#: Community facilities: same structure. A health post runs a vaccine
#: refrigerator around the clock (critical load); a school uses daylight hours
#: on weekdays only.
FACILITY_APPLIANCES: dict[str, list[dict]] = {
    "health_post": [
        _appliance("vaccine refrigerator 80 W", 80.0, np.full(24, 0.45), critical=True),
        _appliance("LED lights (6 x 10 W)", 60.0, _hours((18, 23), (5, 7)), lighting=True),
        _appliance("night light 10 W", 10.0, _hours((0, 5), (23, 24))),
        _appliance("examination lamp and devices 60 W", 60.0, _hours((8, 12), (14, 17))),
        _appliance("laptop and radio 50 W", 50.0, _hours((8, 16))),
    ],
    "school": [
        _appliance("LED lights (8 x 10 W)", 80.0, _hours((7.5, 9), (16, 17))),
        _appliance("laptops (10 x 30 W)", 300.0, _hours((9, 12), (13, 15))),
        _appliance("projector 150 W", 150.0, _hours((10, 12))),
        _appliance("phone charging and printer 60 W", 60.0, _hours((8, 16))),
    ],
}

#: Shape of productive daytime use (workshops): share of the daily energy by hour.
PRODUCTIVE_SHAPE = _hours((8, 12), (13.5, 17.5))
PRODUCTIVE_SHAPE = PRODUCTIVE_SHAPE / PRODUCTIVE_SHAPE.sum()


def _shape(*spans, base=0.0):
    d = _hours(*spans) + base
    return d / d.sum()


#: Productive uses by kind: hourly share of the daily energy, the days it runs
#: (weekdays only, or Monday-Saturday, or every day) and the ratio of the
#: instantaneous peak to the busiest hour's mean power (motor starting,
#: welding arcs). Shapes and ratios are our own assumptions (common practice
#: for village enterprises).
PRODUCTIVE_KINDS = {
    "workshop": {"shape": PRODUCTIVE_SHAPE, "days": "weekdays", "peak_ratio": 2.0},
    "mill": {"shape": _shape((9, 12), (15, 17)), "days": "mon-sat", "peak_ratio": 3.0},
    "welding": {"shape": _shape((9, 12), (14, 16)), "days": "weekdays", "peak_ratio": 4.0},
    "cold_storage": {"shape": _shape((10, 17), base=0.6), "days": "all", "peak_ratio": 1.5},
}


def daily_profile_w(appliances: list[dict]) -> np.ndarray:
    """Mean power per local hour of day (24 values, W) of an appliance mix."""
    return np.sum([a["rated_w"] * a["duty"] for a in appliances], axis=0)


def peak_power_w(appliances: list[dict]) -> float:
    """Largest instantaneous power (W): every appliance that runs in an hour, at once."""
    on = np.array([a["rated_w"] * (a["duty"] > 0) for a in appliances])
    return float(on.sum(axis=0).max())


def daily_energy_wh(appliances: list[dict]) -> float:
    """Daily energy (Wh/day) of an appliance mix."""
    return float(daily_profile_w(appliances).sum())


def tier_table() -> pd.DataFrame:
    """Design figures per tier beside the Multi-Tier Framework thresholds."""
    rows = []
    for tier, apps in TIER_APPLIANCES.items():
        t = MTF_THRESHOLDS[tier]
        prof = daily_profile_w(apps)
        rows.append({
            "tier": tier, "daily_energy_wh": daily_energy_wh(apps), "peak_power_w": peak_power_w(apps),
            "hourly_peak_w": float(prof.max()), "evening_energy_wh": float(prof[18:23].sum()),
            "mtf_min_daily_wh": t["daily_wh"], "mtf_min_peak_w": t["peak_w"],
        })
    return pd.DataFrame(rows)


def day_to_day_factors(n_days: int, sd: float, rng: np.random.Generator, persistence: float = 0.5) -> np.ndarray:
    """Multiplicative daily demand factors with mean 1 and relative spread ``sd``.

    A lognormal AR(1) sequence: demand on consecutive days is correlated
    (households keep habits for a while), lag-1 coefficient ``persistence``.
    """
    if sd <= 0:
        return np.ones(n_days)
    s2 = np.log1p(sd ** 2)
    eps = rng.standard_normal(n_days)
    z = np.empty(n_days)
    z[0] = eps[0]
    a = np.sqrt(1 - persistence ** 2)
    for d in range(1, n_days):
        z[d] = persistence * z[d - 1] + a * eps[d]
    return np.exp(np.sqrt(s2) * z - s2 / 2)


def weekday_mask(year_start_weekday: int = 2) -> np.ndarray:
    """True for Monday-Friday per day of the 365-day year (1 Jan 2025 was a Wednesday = 2)."""
    return ((np.arange(DAYS_PER_YEAR) + year_start_weekday) % 7) < 5


def minigrid_coincidence_factor(n_households: int | np.ndarray) -> np.ndarray:
    """Share of summed household peak powers that coincide at a village peak.

    Rusck's form ``c(n) = c_inf + (1 - c_inf) / sqrt(n)`` with ``c_inf = 0.2``:
    one household coincides fully with itself and a large village approaches
    one fifth of summed peaks (the value of ``c_inf`` is an assumption of ours
    for rural households dominated by evening lighting and television).

    References
    ----------
    .. [1] Rusck, S. (1956). The simultaneous demand in distribution networks
       supplying domestic consumers. ASEA Journal 10, 59-61.
    """
    n = np.maximum(np.asarray(n_households, dtype=float), 1.0)
    return 0.2 + 0.8 / np.sqrt(n)


@dataclass(frozen=True)
class DemandSettings:
    """How demand is built; see :func:`settings_from_config`.

    Attributes
    ----------
    household_sd, common_sd : float
        Relative day-to-day spread of one household's demand and of the part
        shared by a whole village (weather, market days).
    distribution_losses : float
        Fraction lost in a minigrid's low-voltage network; the plant supplies
        load / (1 - losses).
    growth_pct_per_year : tuple of 5 floats
        Demand growth per household tier (% per year, compounding).
    community_growth_pct_per_year : float
        Growth of health post, school, productive and street-light loads (%/year).
    design_year : int
        Years after connection whose demand the kits are sized for (0 = first year).
    school_closed_months : tuple of int
        Months (1-12) without school term; school loads are off then.
    street_light_w : float
        Power of one street light (W), lit from dusk to dawn.
    tier_profiles : dict, optional
        User hourly profiles replacing tiers: tier -> (12 months, 2 day types
        [weekday, weekend], 24 h) W, and ``"peak:<tier>"`` -> peak W.
    """

    household_sd: float = 0.15
    common_sd: float = 0.08
    distribution_losses: float = 0.05
    growth_pct_per_year: tuple = (0.0, 0.0, 0.0, 0.0, 0.0)
    community_growth_pct_per_year: float = 0.0
    design_year: int = 0
    school_closed_months: tuple = ()
    street_light_w: float = 30.0
    tier_profiles: dict | None = None


def settings_from_config(cfg, tier_profiles: dict | None = None) -> DemandSettings:
    """Demand settings from a :class:`fleet.config.ProgramConfig`."""
    d = cfg["demand"]
    return DemandSettings(
        household_sd=d["household_day_to_day_sd"], common_sd=d["common_day_to_day_sd"],
        distribution_losses=d["minigrid_distribution_losses"],
        growth_pct_per_year=tuple(float(x) for x in d["growth_pct_per_year"]),
        community_growth_pct_per_year=d["community_growth_pct_per_year"],
        design_year=cfg["program"]["design_year"],
        school_closed_months=tuple(int(m) for m in d["school_closed_months"]),
        street_light_w=d["street_light_w"], tier_profiles=tier_profiles)


def growth_factor(pct_per_year: float, years: int) -> float:
    """Compound growth multiplier ``(1 + pct/100) ** years``."""
    return float((1.0 + pct_per_year / 100.0) ** years)


def solar_declination_deg(day_of_year: np.ndarray) -> np.ndarray:
    """Solar declination (degrees), Cooper (1969), Solar Energy 12:333."""
    return 23.45 * np.sin(np.radians(360.0 * (284.0 + np.asarray(day_of_year, dtype=float)) / 365.0))


def sunrise_sunset_clock_h(latitude: float, longitude: float, utc_offset_h: float) -> tuple[np.ndarray, np.ndarray]:
    """Sunrise and sunset per day of the year on the local standard clock (hours).

    Sunset hour angle ``cos(ws) = -tan(lat) tan(decl)`` (Duffie & Beckman,
    Solar Engineering of Thermal Processes, eq. 1.6.10); the clock differs from
    solar time by ``utc_offset - longitude/15`` hours (the equation of time,
    within a quarter of an hour, is neglected).
    """
    day = np.arange(1, DAYS_PER_YEAR + 1)
    decl = np.radians(solar_declination_deg(day))
    cos_ws = np.clip(-np.tan(np.radians(latitude)) * np.tan(decl), -1.0, 1.0)
    half_day_h = np.degrees(np.arccos(cos_ws)) / 15.0
    shift = utc_offset_h - longitude / 15.0
    return 12.0 - half_day_h + shift, 12.0 + half_day_h + shift


def lighting_duty(sunrise_h: np.ndarray, sunset_h: np.ndarray, lights_out_h: float = 22.5,
                  wake_h: float = 5.5) -> np.ndarray:
    """Per day and hour (365, 24) the share of the hour that lights are on:
    from a quarter hour before sunset until ``lights_out_h``, and from
    ``wake_h`` until a quarter hour after sunrise (common practice for
    household lighting)."""
    h = np.arange(24)[None, :]
    ev_start = np.minimum(sunset_h - 0.25, lights_out_h)[:, None]
    mo_end = np.maximum(sunrise_h + 0.25, wake_h)[:, None]
    evening = np.clip(np.minimum(lights_out_h, h + 1) - np.maximum(ev_start, h), 0, 1)
    morning = np.clip(np.minimum(mo_end, h + 1) - np.maximum(wake_h, h), 0, 1)
    return np.clip(evening + morning, 0, 1)


MONTH_OF_DAY = np.repeat(np.arange(12), [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def appliance_year_w(appliances: list[dict], light_duty: np.ndarray, critical_only: bool = False) -> np.ndarray:
    """(365, 24) mean power (W) of an appliance mix; lighting follows ``light_duty``.
    With ``critical_only`` just the critical appliances."""
    out = np.zeros((DAYS_PER_YEAR, 24))
    for a in appliances:
        if critical_only and not a.get("critical"):
            continue
        out += a["rated_w"] * (light_duty if a.get("lighting") else a["duty"][None, :])
    return out


def critical_year_w(group: str, light_duty: np.ndarray) -> np.ndarray:
    """(365, 24) mean power (W) of the critical part of one member's load (zero for most groups)."""
    if group in FACILITY_APPLIANCES:
        return appliance_year_w(FACILITY_APPLIANCES[group], light_duty, critical_only=True)
    return np.zeros((DAYS_PER_YEAR, 24))


#: A water pump (deferrable load) is sized to deliver its daily energy in this
#: many hours of full power (common practice for solar pumping without storage).
PUMP_HOURS_PER_DAY = 6.0


@dataclass
class UnitDemand:
    """Demand of one member of each service unit in the design year.

    Attributes
    ----------
    general_w : float32 (n_units, 8760)
        Loads shed first at the low-voltage disconnect, W (hourly means).
    critical_w : float32 (n_units, 8760)
        Critical loads (vaccine refrigerators), kept on longer, W.
    design : DataFrame
        Per unit: ``daily_energy_wh`` (general + critical, mean), ``peak_power_w``,
        ``evening_share``, ``first_year_daily_energy_wh``, ``critical_wh_day``,
        ``deferrable_wh_day`` (energy a pump needs each day, any hour) and
        ``pump_w`` (its power).
    """

    general_w: np.ndarray
    critical_w: np.ndarray
    design: pd.DataFrame

    @property
    def total_w(self) -> np.ndarray:
        return self.general_w + self.critical_w


def member_year_w(group: str, light_duty: np.ndarray, settings: DemandSettings,
                  productive_kwh_day: float = 0.0, night_duty: np.ndarray | None = None,
                  productive_kind: str = "workshop") -> tuple[np.ndarray, float]:
    """(365, 24) mean power (W) and design peak (W) of one member of a group
    before day-to-day variation and growth."""
    weekdays = weekday_mask()
    if group.startswith("t"):
        tier = int(group[1])
        prof = (settings.tier_profiles or {}).get(tier)
        if prof is not None:
            day_type = np.where(weekdays, 0, 1)
            year = prof[MONTH_OF_DAY, day_type, :]
            return year, float((settings.tier_profiles or {}).get(f"peak:{tier}", year.max()))
        apps = TIER_APPLIANCES[tier]
        return appliance_year_w(apps, light_duty), peak_power_w(apps)
    if group in FACILITY_APPLIANCES:
        apps = FACILITY_APPLIANCES[group]
        year = appliance_year_w(apps, light_duty)
        if group == "school":
            term = ~np.isin(MONTH_OF_DAY + 1, settings.school_closed_months)
            year = year * (weekdays & term)[:, None]
        return year, peak_power_w(apps)
    if group == "productive":
        kind = PRODUCTIVE_KINDS[productive_kind]
        days = {"weekdays": weekdays, "mon-sat": ((np.arange(DAYS_PER_YEAR) + 2) % 7) < 6,
                "all": np.ones(DAYS_PER_YEAR, bool)}[kind["days"]]
        hourly = kind["shape"] * productive_kwh_day * 1000.0
        return np.tile(hourly, (DAYS_PER_YEAR, 1)) * days[:, None], kind["peak_ratio"] * float(hourly.max())
    if group == "street_light":
        if night_duty is None:
            raise ValueError("street lights need the night duty (dusk to dawn)")
        return settings.street_light_w * night_duty, settings.street_light_w
    raise ValueError(f"unknown service group {group!r}")


def night_duty(sunrise_h: np.ndarray, sunset_h: np.ndarray) -> np.ndarray:
    """Per day and hour (365, 24) the share of the hour between sunset and the next sunrise."""
    h = np.arange(24)[None, :]
    evening = np.clip(np.minimum(24.0, h + 1) - np.maximum(sunset_h[:, None], h), 0, 1)
    morning = np.clip(np.minimum(sunrise_h[:, None], h + 1) - h, 0, 1)
    return np.clip(evening + morning, 0, 1)


def service_units(sites: pd.DataFrame) -> pd.DataFrame:
    """One row per unit a kit or plant serves.

    Columns: ``unit_id``, ``site_index`` (position in ``sites``), ``site_id``,
    ``scheme``, ``group`` ('t1'..'t5', 'health_post', 'school', 'productive',
    'street_light' at SHS sites; 'village' at minigrid sites) and ``count``
    (kits needed when one kit serves one member of the group; 1 for a minigrid).
    """
    rows = []
    has_lights = "street_lights" in sites.columns
    has_pumping = "pumping_kwh_day" in sites.columns
    for pos, s in enumerate(sites.itertuples(index=False)):
        if s.scheme == "minigrid":
            rows.append((f"{s.site_id}/village", pos, s.site_id, "minigrid", "village", 1))
            continue
        for t in range(1, 6):
            n = int(getattr(s, f"households_t{t}"))
            if n > 0:
                rows.append((f"{s.site_id}/t{t}", pos, s.site_id, "shs", f"t{t}", n))
        for fac in ("health_post", "school"):
            n = int(getattr(s, f"{fac}s"))
            if n > 0:
                rows.append((f"{s.site_id}/{fac}", pos, s.site_id, "shs", fac, n))
        if float(s.productive_kwh_day) > 0:
            rows.append((f"{s.site_id}/productive", pos, s.site_id, "shs", "productive", 1))
        if has_lights and int(s.street_lights) > 0:
            rows.append((f"{s.site_id}/street_light", pos, s.site_id, "shs", "street_light", int(s.street_lights)))
        if has_pumping and float(s.pumping_kwh_day) > 0:
            rows.append((f"{s.site_id}/pumping", pos, s.site_id, "shs", "pumping", 1))
    return pd.DataFrame(rows, columns=["unit_id", "site_index", "site_id", "scheme", "group", "count"])


def unit_loads(sites: pd.DataFrame, units: pd.DataFrame, settings: DemandSettings, *, seed: int,
               utc_offsets_h: np.ndarray | None = None) -> tuple[np.ndarray, pd.DataFrame]:
    """Hourly load (W) of one member of each unit in the design year, and its design figures.

    Parameters
    ----------
    sites : DataFrame
        Validated site table.
    units : DataFrame
        From :func:`service_units`.
    settings : DemandSettings
    seed : int
        Seed for day-to-day variability; the same seed gives the same loads.
    utc_offsets_h : array, optional
        Local standard time offset per site (hours), for dusk and dawn on the
        local clock; default longitude / 15.

    Returns
    -------
    UnitDemand
        General and critical hourly loads (W, hourly means at the plant or
        kit output) and per-unit design figures.
    """
    # one seed per unit from the program seed and the unit's id, so that a unit's loads do not
    # depend on which other units are planned with it (chunks of sites give the same loads)
    children = [np.random.SeedSequence([int(seed) % 2**32, zlib.crc32(str(uid).encode())])
                for uid in units.unit_id]
    loads = np.zeros((len(units), HOURS_PER_YEAR), dtype=np.float32)
    crit = np.zeros((len(units), HOURS_PER_YEAR), dtype=np.float32)
    peaks = np.zeros(len(units))
    first_year = np.zeros(len(units))
    deferrable = np.zeros(len(units))
    has_pumping = "pumping_kwh_day" in sites.columns
    yrs = settings.design_year
    hh_growth = [growth_factor(g, yrs) for g in settings.growth_pct_per_year]
    com_growth = growth_factor(settings.community_growth_pct_per_year, yrs)
    sun_cache: dict[int, tuple[np.ndarray, np.ndarray]] = {}

    def sun(site_pos: int) -> tuple[np.ndarray, np.ndarray]:
        if site_pos not in sun_cache:
            site = sites.iloc[site_pos]
            off = float(utc_offsets_h[site_pos]) if utc_offsets_h is not None else round(float(site["longitude"]) / 15.0)
            rise, sett = sunrise_sunset_clock_h(float(site["latitude"]), float(site["longitude"]), off)
            sun_cache[site_pos] = (lighting_duty(rise, sett), night_duty(rise, sett))
        return sun_cache[site_pos]

    for i, u in enumerate(units.itertuples(index=False)):
        rng = np.random.default_rng(children[i])
        site = sites.iloc[u.site_index]
        ld, nd = sun(u.site_index)
        kwh = float(site["productive_kwh_day"])
        pkind = str(site.get("productive_kind", "") or "workshop")
        if u.group == "village":
            n_hh = sum(int(site[f"households_t{t}"]) for t in range(1, 6))
            f = (day_to_day_factors(DAYS_PER_YEAR, settings.common_sd, rng)
                 * day_to_day_factors(DAYS_PER_YEAR, settings.household_sd / np.sqrt(max(n_hh, 1)), rng))
            year = np.zeros((DAYS_PER_YEAR, 24))
            year0 = np.zeros((DAYS_PER_YEAR, 24))
            cyear = np.zeros((DAYS_PER_YEAR, 24))
            cyear0 = np.zeros((DAYS_PER_YEAR, 24))
            peak_sum = 0.0
            for t in range(1, 6):
                n = int(site[f"households_t{t}"])
                if n:
                    y, pk = member_year_w(f"t{t}", ld, settings)
                    year += n * hh_growth[t - 1] * y
                    year0 += n * y
                    peak_sum += n * hh_growth[t - 1] * pk
            coincident = peak_sum * float(minigrid_coincidence_factor(n_hh))
            members = [("health_post", int(site["health_posts"])), ("school", int(site["schools"]))]
            if kwh > 0:
                members.append(("productive", 1))
            if "street_lights" in site.index and int(site["street_lights"]) > 0:
                members.append(("street_light", int(site["street_lights"])))
            for group, n in members:
                if n:
                    y, pk = member_year_w(group, ld, settings, kwh, nd, pkind)
                    year += n * com_growth * y
                    year0 += n * y
                    cy = critical_year_w(group, ld)
                    cyear += n * com_growth * cy
                    cyear0 += n * cy
                    coincident += n * com_growth * pk
            scale = 1.0 / (1.0 - settings.distribution_losses)
            crit[i] = cyear.reshape(-1) * scale  # a refrigerator does not vary with household habits
            loads[i] = (f[:, None] * (year - cyear) + cyear).reshape(-1) * scale
            first_year[i] = (f[:, None] * (year0 - cyear0) + cyear0).sum() * scale / DAYS_PER_YEAR
            peaks[i] = max(coincident * scale, float(loads[i].max()))
            if has_pumping:
                deferrable[i] = float(site["pumping_kwh_day"]) * 1000.0 * com_growth * scale
            continue
        f = day_to_day_factors(DAYS_PER_YEAR, np.hypot(settings.household_sd, settings.common_sd), rng)
        g = hh_growth[int(u.group[1]) - 1] if u.group.startswith("t") else com_growth
        if u.group == "pumping":
            deferrable[i] = float(site["pumping_kwh_day"]) * 1000.0 * g
            peaks[i] = deferrable[i] / PUMP_HOURS_PER_DAY
            continue
        y, pk = member_year_w(u.group, ld, settings, kwh, nd, pkind)
        cy = critical_year_w(u.group, ld)
        crit[i] = cy.reshape(-1) * g
        loads[i] = (f[:, None] * (y - cy) + cy).reshape(-1) * g
        first_year[i] = (f[:, None] * (y - cy) + cy).sum() / DAYS_PER_YEAR
        peaks[i] = max(pk * g, float(loads[i].max()))
    daily = loads.sum(axis=1) / DAYS_PER_YEAR
    hod = np.arange(HOURS_PER_YEAR) % 24
    evening = loads[:, (hod >= 18) & (hod < 23)].sum(axis=1) / np.maximum(loads.sum(axis=1), 1e-9)
    design = pd.DataFrame({"daily_energy_wh": daily, "peak_power_w": peaks, "evening_share": evening,
                           "first_year_daily_energy_wh": first_year,
                           "critical_wh_day": crit.sum(axis=1) / DAYS_PER_YEAR,
                           "deferrable_wh_day": deferrable, "pump_w": deferrable / PUMP_HOURS_PER_DAY})
    return UnitDemand(general_w=loads - crit, critical_w=crit, design=design)


def demand_summary(sites: pd.DataFrame, units: pd.DataFrame, demand: "UnitDemand") -> pd.DataFrame:
    """Per site: daily energy in the first and the design year, peak, load factor and evening share.

    The site's peak is the sum of its units' design peaks (kits of an SHS site
    are separate systems; a minigrid unit's peak already allows for coincidence).
    """
    design = demand.design
    loads_w = demand.total_w
    u = units.assign(daily=design.daily_energy_wh * units["count"],
                     first=design.first_year_daily_energy_wh * units["count"],
                     peak=design.peak_power_w * units["count"],
                     mean_w=loads_w.mean(axis=1) * units["count"],
                     evening=design.evening_share * design.daily_energy_wh * units["count"])
    g = u.groupby("site_id", sort=False)
    out = pd.DataFrame({
        "scheme": g.scheme.first(),
        "service units": g.size(),
        "first-year demand (kWh/day)": g["first"].sum() / 1000.0,
        "design-year demand (kWh/day)": g["daily"].sum() / 1000.0,
        "design peak (kW)": g["peak"].sum() / 1000.0,
        "load factor (mean/peak)": g["mean_w"].sum() / g["peak"].sum(),
        "evening share 18-23 h": g["evening"].sum() / g["daily"].sum(),
    })
    hh = sites.set_index("site_id")[[f"households_t{t}" for t in range(1, 6)]].sum(axis=1)
    out.insert(1, "households", hh.reindex(out.index).astype(int))
    return out.reset_index()


def tier_mean_days(latitude: float, longitude: float, utc_offset_h: float, settings: DemandSettings) -> pd.DataFrame:
    """Mean day (24 local hours, W) of one member of each tier and facility at a place."""
    rise, sett = sunrise_sunset_clock_h(latitude, longitude, utc_offset_h)
    ld, nd = lighting_duty(rise, sett), night_duty(rise, sett)
    cols = {}
    for t in range(1, 6):
        cols[f"tier {t}"] = member_year_w(f"t{t}", ld, settings)[0].mean(axis=0)
    for f in FACILITY_APPLIANCES:
        cols[f.replace("_", " ")] = member_year_w(f, ld, settings)[0].mean(axis=0)
    return pd.DataFrame(cols, index=pd.RangeIndex(24, name="local hour"))
