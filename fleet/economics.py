"""Lifecycle cost: capital cost, replacements, operation and maintenance, net
present value and levelised cost of energy served.

All money is in constant (real) USD; the discount rate is real.

References
----------
.. [1] Short, W., Packey, D. J., Holt, T. (1995). A Manual for the Economic
   Evaluation of Energy Efficiency and Renewable Energy Technologies.
   NREL/TP-462-5173 (present value and levelised cost definitions).
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


def annuity_present_value(annual_usd, horizon_years: int, rate: float) -> np.ndarray:
    """Present value of a constant yearly amount paid at the end of years 1..horizon."""
    return np.asarray(annual_usd, dtype=float) * discount_factors(horizon_years, rate)[1:].sum()


def lifecycle_cost(capex_usd, battery_capex_usd, battery_life_years, controller_capex_usd,
                   inverter_capex_usd, *, horizon_years: int, rate: float, om_fraction: float,
                   controller_life_years: float, inverter_life_years: float) -> np.ndarray:
    """Net present cost (USD) of one kit over the horizon.

    capex + replacements of battery, controller and inverter + yearly
    operation and maintenance at ``om_fraction`` of capex. Vectorised.
    """
    capex = np.asarray(capex_usd, dtype=float)
    return (capex
            + replacement_present_value(battery_capex_usd, battery_life_years, horizon_years, rate)
            + replacement_present_value(controller_capex_usd, controller_life_years, horizon_years, rate)
            + replacement_present_value(inverter_capex_usd, inverter_life_years, horizon_years, rate)
            + annuity_present_value(om_fraction * capex, horizon_years, rate))


def levelised_cost_usd_per_kwh(lifecycle_cost_usd, annual_served_kwh, horizon_years: int, rate: float) -> np.ndarray:
    """LCOE: net present cost / present value of energy served in years 1..horizon [1]_."""
    energy = annuity_present_value(annual_served_kwh, horizon_years, rate)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(energy > 0, np.asarray(lifecycle_cost_usd, dtype=float) / energy, np.nan)
