"""Battery chemistry parameters and ageing by energy throughput.

Parameter sets are named dictionaries per chemistry; per-product values
(capacity, usable depth of discharge, cycle-life points, efficiencies) come
from the component library.

References
----------
.. [1] Bindner, H., Cronin, T., Lundsager, P., Manwell, J. F., Abdulwahid, U.,
   Baring-Gould, I. (2005). Lifetime modelling of lead acid batteries.
   Risø-R-1515(EN) (Ah-throughput lifetime model).
.. [2] IEEE 1013-2019, Recommended Practice for Sizing Lead-Acid Batteries for
   Stand-Alone Photovoltaic (PV) Systems.
"""

from __future__ import annotations

import numpy as np

#: Per chemistry: mean battery voltage while charging relative to nominal, the
#: reference voltage of the array tables of PWM/series/shunt controllers (the
#: array current barely changes over the battery's charging range).
#: Lead-acid: bulk ~13.2 V on a 12 V battery; LiFePO4: ~13.4 V on 12.8 V (common practice).
CHEMISTRY = {
    "lead_acid": {"charge_voltage_ratio": 13.2 / 12.0},
    "lifepo4": {"charge_voltage_ratio": 13.4 / 12.8},
}

DOD_POINTS = np.array([0.2, 0.5, 0.8])


def cycle_life_fit(cycles_at_20: float, cycles_at_50: float, cycles_at_80: float) -> tuple[float, float]:
    """Fit ``N(d) = a * d**(-b)`` to three depth-of-discharge/cycle-life points.

    Returns ``(a, b)`` by least squares in log-log space; d is depth of
    discharge as a fraction.
    """
    y = np.log([cycles_at_20, cycles_at_50, cycles_at_80])
    x = np.log(DOD_POINTS)
    slope, intercept = np.polyfit(x, y, 1)
    return float(np.exp(intercept)), float(-slope)


def cycles_to_failure(dod: np.ndarray | float, a: float, b: float) -> np.ndarray:
    """Cycles to end of life at depth of discharge ``dod`` (fraction, clipped to 0.01..1)."""
    return a * np.clip(np.asarray(dod, dtype=float), 0.01, 1.0) ** (-b)


def lifetime_throughput_wh(nominal_wh, usable_dod, a, b) -> np.ndarray:
    """Energy a battery can deliver over its cycle life (Wh), rated at its usable depth of discharge [1]_."""
    return cycles_to_failure(usable_dod, a, b) * np.asarray(usable_dod) * np.asarray(nominal_wh)


def service_life_years(annual_throughput_wh: np.ndarray | float, nominal_wh: float, usable_dod: float,
                       a: float, b: float, calendar_life_years: float) -> np.ndarray:
    """Years until replacement: the sooner of throughput wear-out and calendar life [1]_.

    Parameters
    ----------
    annual_throughput_wh : array_like
        Energy discharged from the battery per year (Wh/year).
    nominal_wh : float
        Nominal energy (V × Ah at the stated rate), Wh.
    usable_dod : float
        Depth of discharge the system allows (fraction).
    a, b : float
        Cycle-life fit from :func:`cycle_life_fit`.
    calendar_life_years : float
        Float life at the reference temperature, years.
    """
    total = lifetime_throughput_wh(nominal_wh, usable_dod, a, b)
    annual = np.asarray(annual_throughput_wh, dtype=float)
    with np.errstate(divide="ignore"):
        wear = np.where(annual > 0, total / np.where(annual > 0, annual, 1.0), np.inf)
    return np.minimum(wear, calendar_life_years)


def self_discharge_per_hour(pct_per_month: float) -> float:
    """Fraction of stored energy lost per hour from a monthly self-discharge rate (30-day month)."""
    return 1.0 - (1.0 - pct_per_month / 100.0) ** (1.0 / (30 * 24))


# ---------------------------------------------------------------------------
# Voltage model: open-circuit voltage against state of charge plus an
# effective resistance (V per C-rate per cell, i.e. ohm·Ah), with the charge
# acceptance of lead-acid near full built into the charging resistance.
# ---------------------------------------------------------------------------

#: State-of-charge knots of every voltage table (uniform, 0 .. 1 in steps of 0.05).
SOC_KNOTS = np.linspace(0.0, 1.0, 21)


def _lead_acid_tables() -> dict:
    # Rest voltage of a 12 V lead-acid battery: 11.8 V empty, 12.0 V at 25 %, 12.2 V at 50 %,
    # 12.4 V at 75 %, 12.7 V full (# common practice, widely published rest-voltage tables).
    ocv = np.interp(SOC_KNOTS, [0.0, 0.25, 0.5, 0.75, 1.0], [11.8, 12.0, 12.2, 12.4, 12.7]) / 6.0
    # Discharge: effective resistance so that at the C/20 rate a 12 V battery reads about
    # 12.5 V full, 12.0 V at half charge, 11.7 V at 20 % and 10.8 V empty (# common practice
    # discharge curves); polarisation grows as the battery empties.
    r_dis = np.interp(SOC_KNOTS, [0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 1.0], [3.3, 1.8, 1.25, 0.95, 0.8, 0.7, 0.7])
    # Charge: the current a battery accepts at 2.40 V per cell (absorption) falls from C/4
    # below 70 % to C/100 at full charge (# common practice); the resistance is what makes the
    # voltage model give exactly that acceptance, so gassing and taper come out of one curve.
    accept = np.interp(SOC_KNOTS, [0.0, 0.7, 0.8, 0.85, 0.9, 0.95, 1.0], [0.25, 0.25, 0.15, 0.1, 0.06, 0.03, 0.01])
    r_ch = (2.40 - ocv) / accept
    # Coulombic efficiency relative to the library value: gassing takes a growing share of
    # the charge above 75 % (# common practice).
    eta = np.interp(SOC_KNOTS, [0.0, 0.75, 0.85, 0.95, 1.0], [1.0, 1.0, 0.95, 0.85, 0.7])
    return {"ocv": ocv, "r_charge": r_ch, "r_discharge": r_dis, "eta": eta}


def _lifepo4_tables() -> dict:
    # Rest voltage per LiFePO4 cell: steep below 10 % and above 95 %, flat between
    # (# from memory: 2.90 V empty, 3.20 V at 10 %, 3.26 V at 20 %, 3.30 V at 50 %, 3.33 V at
    # 90 %, 3.36 V at 95 %, 3.45 V full).
    ocv = np.interp(SOC_KNOTS, [0.0, 0.05, 0.1, 0.2, 0.5, 0.9, 0.95, 1.0],
                    [2.90, 3.10, 3.20, 3.26, 3.30, 3.33, 3.36, 3.45])
    # Cell plus connections and BMS switch: about 0.05 ohm·Ah (0.5 mohm for a 100 Ah cell)
    # (# common practice), higher near empty.
    r_dis = np.interp(SOC_KNOTS, [0.0, 0.1, 0.2, 1.0], [0.25, 0.1, 0.05, 0.05])
    r_ch = np.interp(SOC_KNOTS, [0.0, 0.9, 1.0], [0.05, 0.05, 0.1])
    eta = np.ones_like(SOC_KNOTS)
    return {"ocv": ocv, "r_charge": r_ch, "r_discharge": r_dis, "eta": eta}


#: Per chemistry: cell voltage, the model's tables (per cell, on :data:`SOC_KNOTS`),
#: charge set-points per cell at 25 degC, their temperature compensation, Peukert
#: exponent, capacity and self-discharge temperature effects, calendar-life ageing.
#: Sources: IEEE 1013-2019 and the Sandia stand-alone PV handbook (charge stages and
#: temperature compensation of lead-acid); values marked in the table builders above.
VOLTAGE_MODEL = {
    "lead_acid": {
        "cell_v": 2.0, **_lead_acid_tables(),
        "absorption_v_per_cell": 2.40, "float_v_per_cell": 2.25, "rebulk_v_per_cell": 2.10,
        # a series/shunt controller closes the array again at a rest voltage of 12.5 V
        # (about 85 % SOC here; # common practice for on/off regulation hysteresis)
        "series_reconnect_v_per_cell": 12.5 / 6.0,
        "temp_comp_v_per_k_cell": -0.005,   # -5 mV/K per cell (# common practice)
        "peukert_exponent": 1.15,            # (# common practice, 1.1-1.3 for sealed lead-acid)
        "capacity_per_k": 0.006,             # +/-0.6 %/K around 25 degC (# common practice)
        "self_discharge_doubling_k": 10.0,   # (# common practice)
        "calendar_halving_k": 10.0,          # life halves per 10 K above 25 degC (# common practice)
        "absorption_hours": 2.0,             # (# common practice)
    },
    "lifepo4": {
        "cell_v": 3.2, **_lifepo4_tables(),
        "absorption_v_per_cell": 3.55, "float_v_per_cell": 3.375, "rebulk_v_per_cell": 3.32,
        "series_reconnect_v_per_cell": 3.34,
        "temp_comp_v_per_k_cell": 0.0,       # no compensation for LiFePO4 (# common practice)
        "peukert_exponent": 1.03,
        "capacity_per_k": 0.003,
        "self_discharge_doubling_k": 10.0,
        "calendar_halving_k": 15.0,
        "absorption_hours": 0.5,
    },
}

CHEMISTRY_INDEX = {"lead_acid": 0, "lifepo4": 1}


def voltage_tables() -> np.ndarray:
    """Float64 array (n_chemistries, 4, 21): open-circuit voltage (V per cell), charge and
    discharge resistance (V per C-rate per cell = ohm·Ah) and relative coulombic efficiency
    on :data:`SOC_KNOTS`, in :data:`CHEMISTRY_INDEX` order, for the dispatch kernel."""
    out = np.zeros((len(CHEMISTRY_INDEX), 4, SOC_KNOTS.size))
    for name, i in CHEMISTRY_INDEX.items():
        m = VOLTAGE_MODEL[name]
        out[i] = [m["ocv"], m["r_charge"], m["r_discharge"], m["eta"]]
    return out


def open_circuit_voltage(soc, chemistry: str, cells: int = 1) -> np.ndarray:
    """Rest (open-circuit) voltage, V, of ``cells`` cells in series at state of charge ``soc``."""
    return cells * np.interp(np.clip(soc, 0.0, 1.0), SOC_KNOTS, VOLTAGE_MODEL[chemistry]["ocv"])


def terminal_voltage(soc, c_rate, chemistry: str, cells: int = 1) -> np.ndarray:
    """Terminal voltage, V, at state of charge ``soc`` and current ``c_rate`` (1/h; positive
    charging, negative discharging): open-circuit voltage plus the current times the
    effective resistance of its direction."""
    m = VOLTAGE_MODEL[chemistry]
    soc = np.clip(soc, 0.0, 1.0)
    x = np.asarray(c_rate, dtype=float)
    r = np.where(x >= 0, np.interp(soc, SOC_KNOTS, m["r_charge"]), np.interp(soc, SOC_KNOTS, m["r_discharge"]))
    return cells * (np.interp(soc, SOC_KNOTS, m["ocv"]) + x * r)


def cells_in_series(system_v: float, chemistry: str) -> int:
    """Cells in series for a nominal system voltage (12 V lead-acid = 6 cells, 12.8 V LiFePO4 = 4)."""
    return int(round(system_v / VOLTAGE_MODEL[chemistry]["cell_v"])) if chemistry == "lead_acid" \
        else int(round(system_v / 12.0 * 4))


def capacity_temperature_factor(temp_c, chemistry: str) -> np.ndarray:
    """Available capacity relative to 25 degC (linear, clipped to 0.5 .. 1.1)."""
    k = VOLTAGE_MODEL[chemistry]["capacity_per_k"]
    return np.clip(1.0 + k * (np.asarray(temp_c, float) - 25.0), 0.5, 1.1)


def calendar_life_at(calendar_life_25c_years, temp_c, chemistry: str) -> np.ndarray:
    """Calendar life at battery temperature: halves every ``calendar_halving_k`` above 25 degC
    (Arrhenius-type rule of thumb, # common practice); no gain below 25 degC."""
    k = VOLTAGE_MODEL[chemistry]["calendar_halving_k"]
    return np.asarray(calendar_life_25c_years, float) * 2.0 ** (-np.maximum(np.asarray(temp_c, float) - 25.0, 0.0) / k)


def peukert_factor(c_rate, rated_hours, chemistry: str) -> np.ndarray:
    """Charge drawn per Ah delivered at discharge rate ``c_rate`` (1/h): Peukert's law
    ``(I / I_rated) ** (k - 1)`` above the rated current, 1 at or below it (no credit is taken
    for slower discharge). Peukert, W. (1897). Elektrotechnische Zeitschrift 20:20-21."""
    k = VOLTAGE_MODEL[chemistry]["peukert_exponent"]
    ratio = np.maximum(np.asarray(c_rate, float) * rated_hours, 1.0)
    return ratio ** (k - 1.0)


def life_from_damage(cycle_damage_per_year, calendar_life_years) -> np.ndarray:
    """Battery service life, years: the sooner of cycling wear-out (Miner's rule: the
    rainflow damage of the state-of-charge trace per year reaches 1) and calendar life.

    Parameters
    ----------
    cycle_damage_per_year : array_like
        Sum over the year's rainflow cycles of 1 / N(depth), from the dispatch kernel.
    calendar_life_years : array_like
        Calendar life at the battery's temperature, years.

    References
    ----------
    .. [1] ASTM E1049-85 (2017), §5.4.4; Miner, M. A. (1945). Cumulative damage in fatigue.
       J. Applied Mechanics 12:A159-A164.
    """
    d = np.asarray(cycle_damage_per_year, float)
    with np.errstate(divide="ignore"):
        wear = np.where(d > 0, 1.0 / np.where(d > 0, d, 1.0), np.inf)
    return np.minimum(wear, np.asarray(calendar_life_years, float))
