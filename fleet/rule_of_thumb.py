"""Rule-of-thumb sizing, the way kits are often sized in programme spreadsheets, so
that a plan can be compared with it on cost and simulated reliability.

The method (a worksheet method of the stand-alone PV handbooks):

* array peak power = daily energy / (peak sun hours of the design month x derate),
  where the design month is the month with the least plane-of-array irradiation
  and the derate lumps temperature, soiling, wiring, controller and battery losses;
* usable battery energy = daily energy x days of autonomy / conversion efficiency
  (the inverter's for minigrids), i.e. nominal energy x allowed depth of discharge.

Each unit then gets the cheapest simulated option that has at least that array
and that usable storage (for a minigrid, counting all its blocks), or the largest
array on offer if none has. Its reliability is the simulation's, not assumed.

References
----------
.. [1] Sandia National Laboratories (1995). Stand-Alone Photovoltaic Systems: A
   Handbook of Recommended Design Practices, SAND87-7023 (array from design-month
   sun hours, battery from days of autonomy and depth of discharge).
.. [2] IEEE 1562-2021, Guide for Array and Battery Sizing in Stand-Alone
   Photovoltaic (PV) Systems, clause 6 (days of autonomy).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Lumped derate of the array output (# common practice: 0.7-0.8 in sizing worksheets).
DERATE = 0.75
#: Days of autonomy (# common practice: 3-5 days for household kits, 2-3 for minigrids with
#: a generator-free design; the lower ends, as spreadsheets tend to use).
AUTONOMY_DAYS = {"shs": 3.0, "minigrid": 2.0}
#: Conversion efficiency between battery and loads for minigrids (inverter; # common practice).
MINIGRID_EFFICIENCY = 0.9

DAYS_IN_MONTH = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def design_month_sun_hours(poa_wm2: np.ndarray) -> np.ndarray:
    """Peak sun hours (kWh/m²/day of plane-of-array irradiation) of the worst month of the
    mean year, per site. ``poa_wm2``: (n_sites, n_years, 8760) hourly W/m²."""
    daily = np.asarray(poa_wm2, float).reshape(poa_wm2.shape[0], poa_wm2.shape[1], 365, 24).sum(axis=3) / 1000.0
    month = np.repeat(np.arange(12), DAYS_IN_MONTH)
    mean_day = daily.mean(axis=1)  # (n_sites, 365)
    monthly = np.stack([mean_day[:, month == m].mean(axis=1) for m in range(12)], axis=1)
    return monthly.min(axis=1)


def array_wp(daily_wh, sun_hours, derate: float = DERATE):
    """Array peak power, Wp: daily energy / (design-month peak sun hours x derate) [1]_."""
    return np.asarray(daily_wh, float) / (np.asarray(sun_hours, float) * derate)


def battery_usable_wh(daily_wh, autonomy_days, efficiency=1.0):
    """Usable battery energy, Wh: daily energy x days of autonomy / efficiency [1]_, [2]_
    (the nominal energy is this over the allowed depth of discharge)."""
    return np.asarray(daily_wh, float) * np.asarray(autonomy_days, float) / np.asarray(efficiency, float)


def rule_needs(wp, usable_wh, daily_wh, sun_hours, scheme):
    """What the rule asks of an option and whether it has it: (array Wp needed, usable Wh
    needed, the option's array ``wp`` and usable storage ``usable_wh`` both reach them).
    ``scheme`` per option: 'shs' or 'minigrid' (its days of autonomy and efficiency)."""
    scheme = np.asarray(scheme)
    eff = np.where(scheme == "minigrid", MINIGRID_EFFICIENCY, 1.0)
    days = np.where(scheme == "minigrid", AUTONOMY_DAYS["minigrid"], AUTONOMY_DAYS["shs"])
    need_wp = array_wp(daily_wh, sun_hours)
    need_usable = battery_usable_wh(daily_wh, days, eff)
    return need_wp, need_usable, (np.asarray(wp, float) >= need_wp) & (np.asarray(usable_wh, float) >= need_usable)


def choose(evaluations: pd.DataFrame, units: pd.DataFrame, kits: pd.DataFrame,
           sun_hours_by_site: pd.Series) -> pd.DataFrame:
    """The option each unit gets under the rule of thumb (one row per unit with an option).

    ``evaluations`` is :func:`fleet.plan.evaluate`'s table (every simulated option),
    ``units`` the service units with ``daily_energy_wh`` and ``deferrable_wh_day``,
    ``kits`` the candidates, ``sun_hours_by_site`` the design-month sun hours by site id.
    Adds ``need_wp`` and ``need_usable_wh`` to the chosen rows.
    """
    if {"array_wp", "battery_usable_wh"} <= set(evaluations.columns):  # per kit or whole plant
        ev = evaluations.assign(wp=evaluations.array_wp, usable=evaluations.battery_usable_wh)
    else:
        k = kits.set_index("kit_id")
        ev = evaluations.assign(
            wp=evaluations.kit_id.map(k.array_wp) * evaluations.blocks,
            usable=evaluations.kit_id.map(k.battery_usable_wh) * evaluations.blocks)
    u = units.set_index("unit_id")
    daily = (u.daily_energy_wh + u.deferrable_wh_day).reindex(ev.unit_id).to_numpy(float)
    sun = ev.site_id.map(sun_hours_by_site).to_numpy(float)
    ev["need_wp"], ev["need_usable_wh"], ev["meets_rule"] = rule_needs(
        ev.wp.to_numpy(float), ev.usable.to_numpy(float), daily, sun, ev.scheme.to_numpy())
    chosen = []
    for _, g in ev.groupby("unit_id", sort=False):
        ok = g[g.meets_rule]
        chosen.append(ok.loc[ok.lifecycle_cost_usd.idxmin()] if len(ok) else
                      g.sort_values(["wp", "usable", "lifecycle_cost_usd"], ascending=[False, False, True]).iloc[0])
    out = pd.DataFrame(chosen).reset_index(drop=True)
    return out.drop(columns=["wp", "usable"])
