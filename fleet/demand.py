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


def _appliance(name: str, rated_w: float, duty: np.ndarray) -> dict:
    return {"name": name, "rated_w": rated_w, "duty": duty}


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
        _appliance("LED lamps (2 x 3 W)", 6.0, _EVENING_LIGHT),
        _appliance("phone charging", 5.0, _PHONE),
        _appliance("radio", 2.0, _hours((6, 7), (19, 21))),
    ],
    2: [
        _appliance("LED lamps (4 x 4 W)", 16.0, _EVENING_LIGHT),
        _appliance("phone charging (2)", 10.0, _PHONE),
        _appliance("television 20 W", 20.0, _TV),
        _appliance("fan 20 W", 20.0, _FAN),
    ],
    3: [
        _appliance("LED lamps (6 x 5 W)", 30.0, _EVENING_LIGHT),
        _appliance("phone charging (3)", 15.0, _PHONE),
        _appliance("television 60 W", 60.0, _TV),
        _appliance("fans (2 x 40 W)", 80.0, _FAN),
        _appliance("laptop 40 W", 40.0, _hours((9, 11), (20, 21))),
        _appliance("iron / blender 400 W", 400.0, _hours((7, 7.3), (18, 18.2))),
    ],
    4: [
        _appliance("LED lamps (8 x 6 W)", 48.0, _EVENING_LIGHT),
        _appliance("phone charging (4)", 20.0, _PHONE),
        _appliance("television 80 W", 80.0, _TV),
        _appliance("fans (3 x 50 W)", 150.0, _FAN),
        _appliance("laptop 50 W", 50.0, _hours((9, 12), (20, 22))),
        _appliance("refrigerator 150 W", 150.0, _FRIDGE),
        _appliance("washing machine 500 W", 500.0, _hours((10, 11))),
        _appliance("iron 1000 W", 1000.0, _hours((7, 7.3), (18, 18.2))),
    ],
    5: [
        _appliance("LED lamps (10 x 8 W)", 80.0, _EVENING_LIGHT),
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
        _appliance("vaccine refrigerator 80 W", 80.0, np.full(24, 0.45)),
        _appliance("LED lights (6 x 10 W)", 60.0, _hours((18, 23), (5, 7))),
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

#: Shape of productive daytime use (mills, workshops): share of the daily energy by hour.
PRODUCTIVE_SHAPE = _hours((8, 12), (13.5, 17.5))
PRODUCTIVE_SHAPE = PRODUCTIVE_SHAPE / PRODUCTIVE_SHAPE.sum()


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


def yearly_profile_w(daily_w: np.ndarray, daily_factor: np.ndarray, active_days: np.ndarray | None = None) -> np.ndarray:
    """8760 hourly mean powers (W) from a 24-hour shape and per-day factors."""
    f = daily_factor if active_days is None else daily_factor * active_days
    return (f[:, None] * daily_w[None, :]).reshape(-1)


def minigrid_coincidence_factor(n_households: int | np.ndarray) -> np.ndarray:
    """Share of summed household peak powers that coincide at a village peak.

    ``0.2 + 0.8 / sqrt(n)``: one household coincides fully with itself and a
    large village approaches one fifth of summed peaks (common practice; a
    documented assumption refined later).
    """
    n = np.maximum(np.asarray(n_households, dtype=float), 1.0)
    return 0.2 + 0.8 / np.sqrt(n)


def service_units(sites: pd.DataFrame) -> pd.DataFrame:
    """One row per unit a kit or plant serves.

    Columns: ``unit_id``, ``site_index`` (position in ``sites``), ``site_id``,
    ``scheme``, ``group`` ('t1'..'t5', 'health_post', 'school', 'productive'
    at SHS sites; 'village' at minigrid sites) and ``count`` (kits needed when
    one kit serves one member of the group; 1 for a minigrid).
    """
    rows = []
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
    return pd.DataFrame(rows, columns=["unit_id", "site_index", "site_id", "scheme", "group", "count"])


def unit_loads(sites: pd.DataFrame, units: pd.DataFrame, *, seed: int, household_sd: float,
               common_sd: float, distribution_losses: float) -> tuple[np.ndarray, pd.DataFrame]:
    """Hourly load (W) of one member of each unit, and its design figures.

    Parameters
    ----------
    sites : DataFrame
        Validated site table.
    units : DataFrame
        From :func:`service_units`.
    seed : int
        Seed for day-to-day variability; the same seed gives the same loads.
    household_sd, common_sd : float
        Relative day-to-day spread of one household's demand and of the part
        shared by a whole village (weather, market days).
    distribution_losses : float
        Fraction lost in a minigrid's low-voltage network; the plant supplies
        load / (1 - losses).

    Returns
    -------
    loads_w : ndarray, shape (n_units, 8760), float32
        Mean power per local hour at the plant or kit output (W).
    design : DataFrame
        Per unit: ``daily_energy_wh`` (mean), ``peak_power_w`` (design
        instantaneous peak for inverter and load-output sizing),
        ``evening_share`` (share of energy used 18:00-23:00).
    """
    rng_root = np.random.SeedSequence(seed)
    children = rng_root.spawn(len(units))
    weekdays = weekday_mask().astype(float)
    tier_daily = {t: daily_profile_w(a) for t, a in TIER_APPLIANCES.items()}
    tier_peak = {t: peak_power_w(a) for t, a in TIER_APPLIANCES.items()}
    fac_daily = {f: daily_profile_w(a) for f, a in FACILITY_APPLIANCES.items()}
    fac_peak = {f: peak_power_w(a) for f, a in FACILITY_APPLIANCES.items()}
    loads = np.zeros((len(units), HOURS_PER_YEAR), dtype=np.float32)
    peaks = np.zeros(len(units))
    for i, u in enumerate(units.itertuples(index=False)):
        rng = np.random.default_rng(children[i])
        site = sites.iloc[u.site_index]
        if u.group == "village":
            n_hh = sum(int(site[f"households_t{t}"]) for t in range(1, 6))
            common = day_to_day_factors(DAYS_PER_YEAR, common_sd, rng)
            indiv = day_to_day_factors(DAYS_PER_YEAR, household_sd / np.sqrt(max(n_hh, 1)), rng)
            f = common * indiv
            prof = np.zeros(HOURS_PER_YEAR)
            peak_sum = 0.0
            for t in range(1, 6):
                n = int(site[f"households_t{t}"])
                prof += n * yearly_profile_w(tier_daily[t], f)
                peak_sum += n * tier_peak[t]
            coincident = peak_sum * float(minigrid_coincidence_factor(n_hh))
            for fac, col in (("health_post", "health_posts"), ("school", "schools")):
                n = int(site[col])
                active = None if fac == "health_post" else weekdays
                prof += n * yearly_profile_w(fac_daily[fac], f, active)
                coincident += n * fac_peak[fac]
            kwh = float(site["productive_kwh_day"])
            if kwh > 0:
                prof += yearly_profile_w(PRODUCTIVE_SHAPE * kwh * 1000.0, f, weekdays)
                coincident += 2.0 * kwh * 1000.0 * PRODUCTIVE_SHAPE.max()
            prof /= (1.0 - distribution_losses)
            loads[i] = prof
            peaks[i] = max(coincident / (1.0 - distribution_losses), prof.max())
            continue
        f = day_to_day_factors(DAYS_PER_YEAR, np.hypot(household_sd, common_sd), rng)
        if u.group.startswith("t"):
            t = int(u.group[1])
            loads[i] = yearly_profile_w(tier_daily[t], f)
            peaks[i] = tier_peak[t]
        elif u.group in fac_daily:
            active = None if u.group == "health_post" else weekdays
            loads[i] = yearly_profile_w(fac_daily[u.group], f, active)
            peaks[i] = fac_peak[u.group]
        else:  # productive use at an SHS site: one larger kit
            kwh = float(site["productive_kwh_day"])
            loads[i] = yearly_profile_w(PRODUCTIVE_SHAPE * kwh * 1000.0, f, weekdays)
            peaks[i] = 2.0 * kwh * 1000.0 * PRODUCTIVE_SHAPE.max()
    daily = loads.sum(axis=1) / DAYS_PER_YEAR
    hod = np.arange(HOURS_PER_YEAR) % 24
    evening = loads[:, (hod >= 18) & (hod < 23)].sum(axis=1) / np.maximum(loads.sum(axis=1), 1e-9)
    design = pd.DataFrame({"daily_energy_wh": daily, "peak_power_w": peaks, "evening_share": evening})
    return loads, design
