"""Lifecycle cost: capital cost, replacements, operation and maintenance,
transport, salvage value, net present value and levelised cost of energy served.

All money is in constant (real) USD; the discount rate is real. Year 0 is the
year the kits are bought and delivered; costs of year ``t`` are discounted by
``(1 + rate) ** -t``.

References
----------
.. [1] Short, W., Packey, D. J., Holt, T. (1995). A Manual for the Economic
   Evaluation of Energy Efficiency and Renewable Energy Technologies.
   NREL/TP-462-5173 (present value and levelised cost definitions; the
   residual (salvage) value of equipment at the end of the analysis period
   enters as a negative cost in that year).
"""

from __future__ import annotations

import numpy as np


def discount_factors(horizon_years: int, rate: float) -> np.ndarray:
    """Present-value factors for years 0..horizon (year 0 = 1)."""
    return (1.0 + rate) ** -np.arange(horizon_years + 1, dtype=float)


def replacement_present_value(unit_cost_usd, life_years, horizon_years: int, rate: float) -> np.ndarray:
    """Present value of replacing a part every ``life_years`` within the horizon.

    Replacements happen at years L, 2L, ... strictly before the horizon ends
    (a replacement at the horizon itself buys nothing). Lives shorter than one
    year are counted as one year. Vectorised over ``unit_cost_usd`` and
    ``life_years``.
    """
    cost = np.asarray(unit_cost_usd, dtype=float)
    life = np.maximum(np.asarray(life_years, dtype=float), 1.0)
    cost, life = np.broadcast_arrays(cost, life)
    pv = np.zeros(cost.shape)
    n_max = int(np.ceil(horizon_years / life.min())) if life.size else 0
    for n in range(1, n_max + 1):
        t = n * life
        due = t < horizon_years
        pv += np.where(due, cost * (1.0 + rate) ** -np.where(due, t, 0.0), 0.0)
    return pv


def replacements_count(life_years, horizon_years: int) -> np.ndarray:
    """Number of replacements within the horizon (see :func:`replacement_present_value`)."""
    life = np.maximum(np.asarray(life_years, dtype=float), 1.0)
    return np.ceil(horizon_years / life) - 1.0


def _replacements_before(life: np.ndarray, horizon_years: int) -> np.ndarray:
    """Count of n >= 1 with n * life < horizon: the replacements
    :func:`replacement_present_value` makes, exactly (``ceil(H / L) - 1`` can be
    off by one where ``H / L`` rounds across a whole number). Infinite lives: 0."""
    with np.errstate(invalid="ignore"):
        n = np.ceil(horizon_years / life) - 1.0
        n = np.where(n * life >= horizon_years, n - 1.0, n)
        n = np.where((n + 1.0) * life < horizon_years, n + 1.0, n)
    return np.where(np.isfinite(life), np.maximum(n, 0.0), 0.0)


def salvage_fraction(life_years, horizon_years: int) -> np.ndarray:
    """Share of a part's price still left at the end of the horizon, straight line.

    The part is bought at year 0 and again at every replacement (years L, 2L,
    ... strictly before the horizon, as in :func:`replacement_present_value`);
    the last one bought, at year ``n * L``, has ``n * L + L - H`` of its ``L``
    years left at the horizon ``H``: that share of its price is its residual
    value (straight-line depreciation over its life, common practice). Lives
    shorter than one year count as one year; an infinite life keeps the whole
    price. Vectorised over ``life_years``.

    Parameters
    ----------
    life_years : array_like
        Service life of the part, years.
    horizon_years : int
        Analysis period, years.

    Returns
    -------
    ndarray
        Fraction 0..1 (0 where a life divides the horizon exactly).
    """
    life = np.maximum(np.asarray(life_years, dtype=float), 1.0)
    last_bought = _replacements_before(life, horizon_years) * np.where(np.isfinite(life), life, 0.0)
    with np.errstate(invalid="ignore"):
        left = (last_bought + life - horizon_years) / life
    return np.where(np.isfinite(life), np.clip(left, 0.0, 1.0), 1.0)


def salvage_present_value(unit_cost_usd, life_years, horizon_years: int, rate: float) -> np.ndarray:
    """Present value (USD, year 0) of a part's residual value at the end of the horizon.

    ``unit_cost_usd * salvage_fraction(life_years, horizon_years)``, a credit in
    the horizon year discounted to year 0 by ``(1 + rate) ** -horizon_years``
    [1]_. Positive: subtract it from the net present cost. Vectorised over
    ``unit_cost_usd`` and ``life_years``.

    Parameters
    ----------
    unit_cost_usd : array_like
        Price of the part each time it is bought, USD (constant prices).
    life_years : array_like
        Service life of the part, years.
    horizon_years : int
        Analysis period, years.
    rate : float
        Real discount rate per year.
    """
    cost = np.asarray(unit_cost_usd, dtype=float)
    return cost * salvage_fraction(life_years, horizon_years) * (1.0 + rate) ** -float(horizon_years)


def kit_salvage_present_value(capex_usd, battery_capex_usd, battery_life_years, controller_capex_usd,
                              inverter_capex_usd, *, horizon_years: int, rate: float,
                              controller_life_years: float, inverter_life_years: float,
                              array_life_years: float) -> np.ndarray:
    """Present value (USD) of everything a kit still holds at the end of the horizon.

    The battery, controller and inverter each by their own life (the last one
    bought, at year 0 or at a replacement); the rest of the capital cost
    (modules, mounting, wiring, enclosure, installation) by
    ``array_life_years``. Straight line, credited in the horizon year
    (:func:`salvage_present_value`) [1]_. Vectorised.
    """
    capex = np.asarray(capex_usd, dtype=float)
    battery = np.asarray(battery_capex_usd, dtype=float)
    controller = np.asarray(controller_capex_usd, dtype=float)
    inverter = np.asarray(inverter_capex_usd, dtype=float)
    rest = np.maximum(capex - battery - controller - inverter, 0.0)
    return (salvage_present_value(battery, battery_life_years, horizon_years, rate)
            + salvage_present_value(controller, controller_life_years, horizon_years, rate)
            + salvage_present_value(inverter, inverter_life_years, horizon_years, rate)
            + salvage_present_value(rest, array_life_years, horizon_years, rate))


def transport_present_value(delivery_usd, battery_delivery_usd, battery_life_years, horizon_years: int,
                            rate: float) -> np.ndarray:
    """Present value (USD) of carrying a kit to its site at year 0 and a new battery at
    each battery replacement (:func:`replacement_present_value`). Transport is a cost
    of delivery, with no residual value. Vectorised."""
    return (np.asarray(delivery_usd, dtype=float)
            + replacement_present_value(battery_delivery_usd, battery_life_years, horizon_years, rate))


def annuity_present_value(annual_usd, horizon_years: int, rate: float) -> np.ndarray:
    """Present value of a constant yearly amount paid at the end of years 1..horizon."""
    return np.asarray(annual_usd, dtype=float) * discount_factors(horizon_years, rate)[1:].sum()


def lifecycle_cost(capex_usd, battery_capex_usd, battery_life_years, controller_capex_usd,
                   inverter_capex_usd, *, horizon_years: int, rate: float, om_fraction: float,
                   controller_life_years: float, inverter_life_years: float,
                   array_life_years: float | None = None, delivery_usd=0.0,
                   battery_delivery_usd=0.0) -> np.ndarray:
    """Net present cost (USD) of one kit over the horizon [1]_.

    capex + replacements of battery, controller and inverter + yearly operation
    and maintenance at ``om_fraction`` of capex (paid at the end of years
    1..horizon) + transport (``delivery_usd`` at year 0, ``battery_delivery_usd``
    with every battery replacement; :func:`transport_present_value`) - salvage
    value at the horizon (:func:`kit_salvage_present_value`, only when
    ``array_life_years`` is given; None leaves salvage out). Vectorised.

    Parameters
    ----------
    capex_usd : array_like
        Capital cost of the kit at year 0, USD (battery, controller and
        inverter included).
    battery_capex_usd, controller_capex_usd, inverter_capex_usd : array_like
        Their share of ``capex_usd``, paid again at each replacement, USD.
    battery_life_years : array_like
        Battery service life, years.
    horizon_years : int
        Analysis period, years.
    rate : float
        Real discount rate per year.
    om_fraction : float
        Yearly operation and maintenance cost as a fraction of capex.
    controller_life_years, inverter_life_years : float
        Service lives, years.
    array_life_years : float, optional
        Life of the rest of the kit (modules, mounting, wiring) for its
        residual value, years.
    delivery_usd, battery_delivery_usd : array_like, optional
        Transport of the kit to its site, and of one replacement battery, USD.
    """
    capex = np.asarray(capex_usd, dtype=float)
    total = (capex
             + replacement_present_value(battery_capex_usd, battery_life_years, horizon_years, rate)
             + replacement_present_value(controller_capex_usd, controller_life_years, horizon_years, rate)
             + replacement_present_value(inverter_capex_usd, inverter_life_years, horizon_years, rate)
             + annuity_present_value(om_fraction * capex, horizon_years, rate)
             + transport_present_value(delivery_usd, battery_delivery_usd, battery_life_years, horizon_years, rate))
    if array_life_years is not None:
        total = total - kit_salvage_present_value(
            capex, battery_capex_usd, battery_life_years, controller_capex_usd, inverter_capex_usd,
            horizon_years=horizon_years, rate=rate, controller_life_years=controller_life_years,
            inverter_life_years=inverter_life_years, array_life_years=array_life_years)
    return total


def levelised_cost_usd_per_kwh(lifecycle_cost_usd, annual_served_kwh, horizon_years: int, rate: float) -> np.ndarray:
    """LCOE: net present cost / present value of energy served in years 1..horizon [1]_."""
    energy = annuity_present_value(annual_served_kwh, horizon_years, rate)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(energy > 0, np.asarray(lifecycle_cost_usd, dtype=float) / energy, np.nan)
