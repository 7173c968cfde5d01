"""DC conductors and overcurrent protection: resistance, voltage drop, the
smallest standard cross-section for a current and a run, and fuse ratings.

Conventions: cross-sections in mm², lengths in m (one-way run; the circuit
goes out and back), currents in A, voltages in V, temperatures in °C.

References
----------
.. [1] IEC 60228:2004, Conductors of insulated cables, Table 2 (class 2
   stranded) and Table 3 (class 5 flexible): maximum resistance of plain
   annealed copper conductors at 20 °C.
.. [2] IEC 60228:2004, Annex B: temperature correction of conductor
   resistance (copper: 0.00393 per K at 20 °C).
.. [3] NFPA 70, National Electrical Code (2023), 690.8(A)-(B) (PV circuit
   currents and the 125 % factor for conductors and overcurrent devices),
   690.9, and 240.6(A) (standard ampere ratings of fuses and breakers).
"""

from __future__ import annotations

import numpy as np

#: Standard cross-sections, mm² (IEC 60228).
SECTIONS_MM2 = np.array([1.5, 2.5, 4.0, 6.0, 10.0, 16.0, 25.0, 35.0, 50.0, 70.0, 95.0, 120.0])

#: Maximum DC resistance of plain copper at 20 °C, ohm/km, per conductor class [1]_
#: (values from memory of IEC 60228 Tables 2 and 3).
RESISTANCE_20C_OHM_PER_KM = {
    "class2": np.array([12.1, 7.41, 4.61, 3.08, 1.83, 1.15, 0.727, 0.524, 0.387, 0.268, 0.193, 0.153]),
    "class5": np.array([13.3, 7.98, 4.95, 3.30, 1.91, 1.21, 0.780, 0.554, 0.386, 0.272, 0.206, 0.161]),
}

#: Continuous current of a single solar DC cable in free air at 60 °C ambient, A, by
#: cross-section (# from memory: EN 50618 / IEC 62930 cable ratings; local tables prevail).
AMPACITY_A = np.array([30.0, 41.0, 55.0, 70.0, 98.0, 132.0, 176.0, 218.0, 276.0, 347.0, 416.0, 488.0])

COPPER_ALPHA_PER_K = 0.00393

#: Standard ampere ratings of fuses [3]_ (NEC 240.6(A), including the 1, 3, 6 and 10 A fuse
#: ratings it adds).
FUSE_RATINGS_A = np.array([1, 3, 6, 10, 15, 20, 25, 30, 35, 40, 45, 50, 60, 70, 80, 90, 100, 110, 125, 150,
                           175, 200, 225, 250, 300, 350, 400, 450, 500, 600, 700, 800], dtype=float)

NEC_CONTINUOUS_FACTOR = 1.25


def _section_index(section_mm2) -> np.ndarray:
    sec = np.asarray(section_mm2, dtype=float)
    idx = np.searchsorted(SECTIONS_MM2, sec)
    if np.any(idx >= SECTIONS_MM2.size) or np.any(SECTIONS_MM2[np.minimum(idx, SECTIONS_MM2.size - 1)] != sec):
        raise ValueError(f"not a standard cross-section: {section_mm2} (one of {SECTIONS_MM2.tolist()} mm2)")
    return idx


def resistance_ohm_per_km(section_mm2, temp_c=20.0, conductor_class: str = "class5"):
    """Conductor resistance at ``temp_c``, ohm/km, for standard cross-sections [1]_, [2]_."""
    table = RESISTANCE_20C_OHM_PER_KM[conductor_class]
    return table[_section_index(section_mm2)] * (1.0 + COPPER_ALPHA_PER_K * (np.asarray(temp_c, float) - 20.0))


def voltage_drop_v(current_a, one_way_m, section_mm2, temp_c=20.0, conductor_class: str = "class5"):
    """Voltage drop of a two-wire DC circuit: 2 × length × current × resistance per metre."""
    r = resistance_ohm_per_km(section_mm2, temp_c, conductor_class) / 1000.0
    return 2.0 * np.asarray(one_way_m, float) * np.asarray(current_a, float) * r


def smallest_section_mm2(current_a: float, one_way_m: float, system_v: float, max_drop_fraction: float = 0.03,
                         temp_c: float = 50.0, conductor_class: str = "class5", *,
                         available_mm2=None, min_ampacity_a: float = 0.0) -> float:
    """Smallest standard cross-section carrying 125 % of ``current_a`` continuously (NEC
    690.8(B)) with a voltage drop of at most ``max_drop_fraction`` of ``system_v`` at the
    conductor temperature ``temp_c``; NaN if even the largest section does not do.

    ``available_mm2`` limits the choice to the sections a library stocks (default: every
    section in :data:`SECTIONS_MM2`); ``min_ampacity_a`` asks for at least that ampacity, e.g.
    the rating of the fuse that protects the conductor (NEC 240.4).

    The 3 % default is the usual design limit for stand-alone DC circuits (# common practice).
    """
    need_a = max(NEC_CONTINUOUS_FACTOR * current_a, float(min_ampacity_a))
    drop = voltage_drop_v(current_a, one_way_m, SECTIONS_MM2, temp_c, conductor_class)
    ok = (AMPACITY_A >= need_a) & (drop <= max_drop_fraction * system_v)
    if available_mm2 is not None:
        ok &= np.isin(SECTIONS_MM2, np.asarray(available_mm2, float))
    return float(SECTIONS_MM2[np.argmax(ok)]) if ok.any() else float("nan")


def ampacity_a(section_mm2) -> np.ndarray:
    """Continuous current (A) of standard cross-sections, from :data:`AMPACITY_A`."""
    return AMPACITY_A[_section_index(section_mm2)]


def fuse_rating_a(current_a: float, ratings_a=None) -> float:
    """Smallest fuse rating at or above 125 % of the continuous current (NEC 690.9(B));
    from the standard ratings of NEC 240.6(A) unless ``ratings_a`` (those a library stocks)
    is given; NaN above the largest rating."""
    ratings = FUSE_RATINGS_A if ratings_a is None else np.sort(np.asarray(ratings_a, float))
    need = NEC_CONTINUOUS_FACTOR * float(current_a)
    ok = ratings >= need - 1e-9
    return float(ratings[np.argmax(ok)]) if ok.any() else float("nan")


def string_fuses_needed(strings_in_parallel: int) -> bool:
    """Whether each PV string needs its own fuse: with three or more strings in parallel, the
    fault current from the others can exceed a module's reverse-current rating (NEC 690.9(A);
    # common practice for crystalline modules rated for one string's backfeed)."""
    return int(strings_in_parallel) >= 3
