"""Current-voltage behaviour of PV modules and strings at a charge
controller's operating point, and lookup tables of it for the hourly kernel.

With a series, PWM or shunt controller the array is tied to the battery and
works at battery voltage (plus the drop of cable and blocking diode), not at
its maximum power point; with MPPT it works at its maximum power point, but
only inside the controller's input voltage window. Both need the module's
I-V curve, here the single-diode model with the De Soto temperature and
irradiance dependence [1]_, its reference parameters fitted from datasheet
values [1]_, [2]_ and the current at a voltage from the explicit Lambert W
solution [3]_ (both as implemented in pvlib [4]_).

A single-diode solve per hour, site and kit is too slow for the planning
runs, so :func:`build_table` tabulates string power on a grid of
plane-of-array irradiance and cell temperature once per module
configuration, and :func:`table_lookup` interpolates it bilinearly inside the
numba dispatch kernel.

Conventions: irradiance in W/m², temperatures in °C, module voltage in V per
module, string voltage in V for ``n_series`` modules in series sharing one
current, power in W per string at the array terminals (controller efficiency
and array losses are applied by the caller).

References
----------
.. [1] De Soto, W., Klein, S. A. and Beckman, W. A. (2006). Improvement and
   validation of a model for photovoltaic array performance. Solar Energy
   80(1):78-88. doi:10.1016/j.solener.2005.06.010
.. [2] Duffie, J. A. and Beckman, W. A. (2013). Solar Engineering of Thermal
   Processes, 4th ed., Wiley, ch. 23 (five-parameter fit from datasheet
   values).
.. [3] Jain, A. and Kapoor, A. (2004). Exact analytical solutions of the
   parameters of real solar cells using Lambert W-function. Solar Energy
   Materials and Solar Cells 81(2):269-277. doi:10.1016/j.solmat.2003.11.018
.. [4] Holmgren, W. F., Hansen, C. W. and Mikofski, M. A. (2018). pvlib
   python: a python package for modeling solar energy systems. Journal of
   Open Source Software 3(29):884. doi:10.21105/joss.00884
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import pvlib
from numba import njit, prange
from pvlib.ivtools.sdm import fit_desoto
from scipy import optimize

#: Boltzmann constant, eV/K (CODATA 2018).
BOLTZMANN_EV_PER_K = 8.617333262e-5
#: Band gap of crystalline silicon at 25 °C and its relative temperature
#: dependence, as used by De Soto et al. (2006) [1]_ (eV, 1/K).
EG_REF_SILICON_EV = 1.121
DEG_DT_SILICON_PER_K = -0.0002677
STC_IRRADIANCE_W_M2 = 1000.0
STC_TEMPERATURE_C = 25.0

#: Drop between a battery-tied string and the battery terminals while
#: charging: blocking diode ~0.5 V plus cable ~0.2 V, per 12 V of battery
#: (common practice; the same margin as ``fleet.kits.PWM_DROP_MARGIN_V``).
PWM_DROP_V_PER_12V = 0.7

#: Default table grid: plane-of-array irradiance 0..1400 W/m² in 25 W/m²
#: steps and cell temperature -20..90 °C in 2.5 K steps.
G_GRID_W_M2 = np.arange(0.0, 1400.0 + 1e-9, 25.0)
T_GRID_C = np.arange(-20.0, 90.0 + 1e-9, 2.5)

BATTERY_TIED_KINDS = ("pwm", "series", "shunt")
CONTROLLER_KINDS = BATTERY_TIED_KINDS + ("mppt",)

# Relative tolerance on the reproduction of the datasheet STC point by a fit.
_STC_RTOL = 1e-3


# ---------------------------------------------------------------------------
# Fitting reference parameters from datasheet values
# ---------------------------------------------------------------------------

def _field(row, name):
    if isinstance(row, tuple) and hasattr(row, "_fields"):  # itertuples() row
        return getattr(row, name)
    return row[name]


def fit_module(row, *, full_output: bool = False):
    """De Soto single-diode reference parameters from datasheet values.

    Parameters
    ----------
    row : mapping, pandas Series or ``itertuples`` row
        One module of the component library with ``voc_v``, ``isc_a``,
        ``vmp_v``, ``imp_a`` (at STC, V and A), ``temp_coeff_voc_pct_per_k``,
        ``temp_coeff_isc_pct_per_k`` (%/K of the STC value) and
        ``cells_in_series``.
    full_output : bool, default False
        Also return a dict describing the fit.

    Returns
    -------
    params : dict
        Keyword arguments of :func:`pvlib.pvsystem.calcparams_desoto`:
        ``alpha_sc`` (A/K), ``a_ref`` (V, modified ideality factor
        n·Ns·k·Tref/q), ``I_L_ref`` (A), ``I_o_ref`` (A), ``R_sh_ref`` (Ω),
        ``R_s`` (Ω), ``EgRef`` (eV), ``dEgdT`` (1/K), ``irrad_ref`` (W/m²),
        ``temp_ref`` (°C).
    info : dict, only if ``full_output``
        ``method`` ('five_equations': the five datasheet conditions met
        exactly by :func:`pvlib.ivtools.sdm.fit_desoto`; or
        'bounded_least_squares', see Notes), ``ideality_factor`` (n) and the
        relative errors ``stc_error_p_mp``, ``stc_error_v_oc``,
        ``stc_error_i_sc``, ``stc_error_v_mp`` of the fitted model at STC.

    Notes
    -----
    The five conditions (short circuit, open circuit, maximum power point,
    zero slope of power there, open-circuit voltage 2 K above reference) are
    those of De Soto et al. [1]_ and Duffie & Beckman [2]_. The solver is
    started from several initial guesses (ideality factor 1.0-1.5, shunt
    resistance 10-100 x Voc/Isc) because a single start often fails to
    converge. For some datasheets the only exact solution has a negative
    shunt resistance (the stated Voc coefficient cannot be met together with
    the STC curve); then the same five conditions are solved in the
    least-squares sense with the shunt resistance bounded to
    1..10^4 x Voc/Isc, which misses the STC power by typically 0.2 % and
    at most about 2 % (reported in ``info``). Results are cached per set of datasheet values.

    References
    ----------
    .. [1] De Soto, Klein & Beckman (2006), Solar Energy 80:78-88.
    .. [2] Duffie & Beckman (2013), Solar Engineering of Thermal Processes,
       4th ed., ch. 23.
    """
    voc = float(_field(row, "voc_v"))
    isc = float(_field(row, "isc_a"))
    vmp = float(_field(row, "vmp_v"))
    imp = float(_field(row, "imp_a"))
    beta_voc = float(_field(row, "temp_coeff_voc_pct_per_k")) / 100.0 * voc  # %/K -> V/K
    alpha_sc = float(_field(row, "temp_coeff_isc_pct_per_k")) / 100.0 * isc  # %/K -> A/K
    n_cells = int(round(float(_field(row, "cells_in_series"))))
    params, info = _fit_cached(voc, isc, vmp, imp, beta_voc, alpha_sc, n_cells)
    if full_output:
        return dict(params), dict(info)
    return dict(params)


def _check_datasheet(voc, isc, vmp, imp, n_cells):
    problems = []
    if not 0.0 < vmp < voc:
        problems.append(f"need 0 < Vmp < Voc (got Vmp {vmp} V, Voc {voc} V)")
    if not 0.0 < imp < isc:
        problems.append(f"need 0 < Imp < Isc (got Imp {imp} A, Isc {isc} A)")
    if n_cells < 1:
        problems.append(f"need at least one cell in series (got {n_cells})")
    if problems:
        raise ValueError("datasheet values cannot be fitted: " + "; ".join(problems))


def _stc_errors(params, voc, isc, vmp, imp):
    mp = max_power_point(STC_IRRADIANCE_W_M2, STC_TEMPERATURE_C, params)
    return {
        "stc_error_p_mp": float(mp["p_mp"] / (vmp * imp) - 1.0),
        "stc_error_v_oc": float(mp["v_oc"] / voc - 1.0),
        "stc_error_i_sc": float(mp["i_sc"] / isc - 1.0),
        "stc_error_v_mp": float(mp["v_mp"] / vmp - 1.0),
    }


def _physical(p) -> bool:
    return all(np.isfinite(p[k]) and p[k] > 0.0 for k in ("I_L_ref", "I_o_ref", "R_s", "R_sh_ref", "a_ref"))


@lru_cache(maxsize=1024)
def _fit_cached(voc, isc, vmp, imp, beta_voc, alpha_sc, n_cells):
    _check_datasheet(voc, isc, vmp, imp, n_cells)
    vth_ref = BOLTZMANN_EV_PER_K * (STC_TEMPERATURE_C + 273.15)
    for n_ideal, rsh_factor in itertools.product((1.1, 1.0, 1.3, 1.5), (30.0, 100.0, 10.0)):
        a0 = n_ideal * vth_ref * n_cells
        guess = {"a_0": a0, "Io_0": isc * math.exp(-voc / a0), "Rsh_0": rsh_factor * voc / isc}
        try:
            with np.errstate(all="ignore"):
                p, _ = fit_desoto(vmp, imp, voc, isc, alpha_sc, beta_voc, n_cells,
                                  EgRef=EG_REF_SILICON_EV, dEgdT=DEG_DT_SILICON_PER_K,
                                  temp_ref=STC_TEMPERATURE_C, irrad_ref=STC_IRRADIANCE_W_M2,
                                  init_guess=guess)
        except RuntimeError:
            continue
        if not _physical(p):
            continue
        p = _as_params(p)
        err = _stc_errors(p, voc, isc, vmp, imp)
        if max(abs(e) for e in err.values()) < _STC_RTOL:
            return p, {"method": "five_equations", "ideality_factor": p["a_ref"] / (vth_ref * n_cells), **err}
    p = _fit_bounded_least_squares(voc, isc, vmp, imp, beta_voc, alpha_sc, n_cells)
    err = _stc_errors(p, voc, isc, vmp, imp)
    return p, {"method": "bounded_least_squares", "ideality_factor": p["a_ref"] / (vth_ref * n_cells), **err}


def _as_params(p) -> dict:
    return {
        "alpha_sc": float(p["alpha_sc"]), "a_ref": float(p["a_ref"]), "I_L_ref": float(p["I_L_ref"]),
        "I_o_ref": float(p["I_o_ref"]), "R_sh_ref": float(p["R_sh_ref"]), "R_s": float(p["R_s"]),
        "EgRef": EG_REF_SILICON_EV, "dEgdT": DEG_DT_SILICON_PER_K,
        "irrad_ref": STC_IRRADIANCE_W_M2, "temp_ref": STC_TEMPERATURE_C,
    }


def _five_conditions(x, voc, isc, vmp, imp, beta_voc, alpha_sc):
    """Residuals (in units of Isc) of the five datasheet conditions of [1]_
    in scaled unknowns x = (IL/Isc, ln(Io/Isc), Rs·Isc/Voc, a/Voc, Gsh·Voc/Isc)."""
    il = x[0] * isc
    io = isc * np.exp(x[1])
    rs = x[2] * voc / isc
    a = x[3] * voc
    gsh = x[4] * isc / voc
    t_ref = STC_TEMPERATURE_C + 273.15
    v_mp_diode = vmp + imp * rs
    e_mp = io / a * np.exp(v_mp_diode / a)
    t2 = t_ref + 2.0
    voc2 = voc + 2.0 * beta_voc
    a2 = a * t2 / t_ref
    eg2 = EG_REF_SILICON_EV * (1.0 + DEG_DT_SILICON_PER_K * 2.0)
    io2 = io * (t2 / t_ref) ** 3 * np.exp((EG_REF_SILICON_EV / t_ref - eg2 / t2) / BOLTZMANN_EV_PER_K)
    return np.array([
        isc - il + io * np.expm1(isc * rs / a) + isc * rs * gsh,
        -il + io * np.expm1(voc / a) + voc * gsh,
        imp - il + io * np.expm1(v_mp_diode / a) + v_mp_diode * gsh,
        imp - vmp * (e_mp + gsh) / (1.0 + rs * (e_mp + gsh)),
        -(il + 2.0 * alpha_sc) + io2 * np.expm1(voc2 / a2) + voc2 * gsh,
    ]) / isc


def _fit_bounded_least_squares(voc, isc, vmp, imp, beta_voc, alpha_sc, n_cells):
    vth_ref = BOLTZMANN_EV_PER_K * (STC_TEMPERATURE_C + 273.15)
    a0 = 1.1 * vth_ref * n_cells
    io0 = isc * math.exp(-voc / a0)
    rs0 = max((a0 * math.log1p((isc - imp) / io0) - vmp) / imp, 1e-3 * voc / isc)
    x0 = np.array([1.0, math.log(io0 / isc), rs0 * isc / voc, a0 / voc, 0.01])
    lower = np.array([0.5, -80.0, 0.0, 1e-3, 1e-4])
    upper = np.array([1.5, 0.0, 1.0, 0.5, 1.0])
    res = optimize.least_squares(_five_conditions, np.clip(x0, lower, upper), bounds=(lower, upper),
                                 args=(voc, isc, vmp, imp, beta_voc, alpha_sc))
    x = res.x
    return _as_params({"alpha_sc": alpha_sc, "a_ref": x[3] * voc, "I_L_ref": x[0] * isc,
                       "I_o_ref": isc * math.exp(x[1]), "R_sh_ref": voc / isc / x[4], "R_s": x[2] * voc / isc})


# ---------------------------------------------------------------------------
# Single-diode evaluation on arrays
# ---------------------------------------------------------------------------

def _diode_parameters(effective_irradiance, temp_cell, params):
    """Broadcast inputs and return (shape, lit mask, IL, Io, Rs, Rsh, nNsVth) on the lit points."""
    g, t = np.broadcast_arrays(np.asarray(effective_irradiance, dtype=float),
                               np.asarray(temp_cell, dtype=float))
    lit = g > 0.0
    il, io, rs, rsh, nnsvth = pvlib.pvsystem.calcparams_desoto(
        g[lit], t[lit], params["alpha_sc"], params["a_ref"], params["I_L_ref"], params["I_o_ref"],
        params["R_sh_ref"], params["R_s"], EgRef=params["EgRef"], dEgdT=params["dEgdT"],
        irrad_ref=params["irrad_ref"], temp_ref=params["temp_ref"])
    return g.shape, lit, il, io, rs, rsh, nnsvth


def current_at_voltage(effective_irradiance, temp_cell, v_module, params):
    """Module current at a terminal voltage (single-diode model).

    Parameters
    ----------
    effective_irradiance : array-like
        Irradiance reaching the cells, W/m².
    temp_cell : array-like
        Cell temperature, °C.
    v_module : array-like
        Module terminal voltage, V (broadcast with the other inputs).
    params : dict
        From :func:`fit_module`.

    Returns
    -------
    ndarray of current, A. Above the open-circuit voltage the model current
    is negative (the module would absorb current); in the dark
    (irradiance <= 0) it is 0 (the dark diode current is not modelled: a
    blocking diode or the controller stops back-feed).

    References
    ----------
    .. [1] De Soto, Klein & Beckman (2006), Solar Energy 80:78-88.
    .. [2] Jain & Kapoor (2004), Solar Energy Materials and Solar Cells
       81:269-277 (explicit Lambert W solution used by
       :func:`pvlib.pvsystem.i_from_v`).
    """
    g, t, v = np.broadcast_arrays(np.asarray(effective_irradiance, dtype=float),
                                  np.asarray(temp_cell, dtype=float), np.asarray(v_module, dtype=float))
    shape, lit, il, io, rs, rsh, nnsvth = _diode_parameters(g, t, params)
    out = np.zeros(shape)
    if lit.any():
        out[lit] = pvlib.pvsystem.i_from_v(v[lit], il, io, rs, rsh, nnsvth, method="lambertw")
    return out


def max_power_point(effective_irradiance, temp_cell, params, method: str = "newton"):
    """Maximum power point of a module (single-diode model).

    Parameters
    ----------
    effective_irradiance : array-like
        Irradiance reaching the cells, W/m².
    temp_cell : array-like
        Cell temperature, °C.
    params : dict
        From :func:`fit_module`.
    method : {'newton', 'brentq'}, default 'newton'
        Solver of :func:`pvlib.pvsystem.max_power_point` (Newton is the
        fast one on large arrays). Open-circuit voltage and short-circuit
        current come from the explicit Lambert W solution [2]_.

    Returns
    -------
    dict of ndarrays (broadcast shape of the inputs): ``p_mp`` (W),
    ``v_mp`` (V), ``i_mp`` (A), ``v_oc`` (V), ``i_sc`` (A); all 0 where
    irradiance <= 0.

    References
    ----------
    .. [1] De Soto, Klein & Beckman (2006), Solar Energy 80:78-88.
    .. [2] Jain & Kapoor (2004), Solar Energy Materials and Solar Cells
       81:269-277 (via :func:`pvlib.pvsystem.v_from_i` and
       :func:`pvlib.pvsystem.i_from_v`).
    """
    shape, lit, il, io, rs, rsh, nnsvth = _diode_parameters(effective_irradiance, temp_cell, params)
    out = {k: np.zeros(shape) for k in ("p_mp", "v_mp", "i_mp", "v_oc", "i_sc")}
    if lit.any():
        mp = pvlib.pvsystem.max_power_point(il, io, rs, rsh, nnsvth, method=method)
        for k in ("p_mp", "v_mp", "i_mp"):
            out[k][lit] = np.asarray(mp[k], dtype=float)
        zero = np.zeros_like(il)
        out["v_oc"][lit] = pvlib.pvsystem.v_from_i(zero, il, io, rs, rsh, nnsvth, method="lambertw")
        out["i_sc"][lit] = pvlib.pvsystem.i_from_v(zero, il, io, rs, rsh, nnsvth, method="lambertw")
    return out


# ---------------------------------------------------------------------------
# Operating-point tables
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class OperatingTable:
    """String power at a controller's operating point on a (G, Tc) grid.

    Attributes
    ----------
    kind : str
        Controller kind: 'pwm', 'series', 'shunt' (array tied to the battery)
        or 'mppt'.
    n_series : int
        Modules in series in the string.
    v_battery_charge_v : float
        Battery voltage while charging, V.
    drop_v : float
        Drop between string and battery for battery-tied kinds, V (the string
        works at ``v_battery_charge_v + drop_v``); 0 for MPPT.
    mppt_window_v : tuple of float or None
        (min, max) string voltage the MPPT can track, V.
    g_grid_w_m2, t_grid_c : ndarray
        Evenly spaced irradiance (W/m², starting at 0) and cell temperature
        (°C) grid points.
    p_operating_w : ndarray (n_g, n_t)
        String power at the controller's operating point, W, at the array
        terminals (>= 0).
    p_mp_w : ndarray (n_g, n_t)
        String maximum power, W (what an ideal unconstrained tracker gets).
    v_operating_v : ndarray (n_g, n_t)
        String voltage at the operating point, V.
    """

    kind: str
    n_series: int
    v_battery_charge_v: float
    drop_v: float
    mppt_window_v: tuple | None
    g_grid_w_m2: np.ndarray = field(repr=False)
    t_grid_c: np.ndarray = field(repr=False)
    p_operating_w: np.ndarray = field(repr=False)
    p_mp_w: np.ndarray = field(repr=False)
    v_operating_v: np.ndarray = field(repr=False)

    @property
    def grid(self) -> tuple[float, float, float, float]:
        """(g0 W/m², dg W/m², t0 °C, dt K) for :func:`table_lookup`."""
        g, t = self.g_grid_w_m2, self.t_grid_c
        return float(g[0]), float(g[1] - g[0]), float(t[0]), float(t[1] - t[0])

    def lookup(self, effective_irradiance, temp_cell, which: str = "operating"):
        """Bilinear lookup (NumPy) of ``p_operating_w`` or ('mpp') ``p_mp_w``, W."""
        table = {"operating": self.p_operating_w, "mpp": self.p_mp_w}[which]
        return table_lookup_numpy(table, effective_irradiance, temp_cell, *self.grid)


def _even_grid(values, name) -> np.ndarray:
    a = np.asarray(values, dtype=float)
    if a.ndim != 1 or a.size < 2:
        raise ValueError(f"{name} needs at least two points")
    step = np.diff(a)
    if not (step > 0).all() or not np.allclose(step, step[0], rtol=1e-9, atol=1e-12):
        raise ValueError(f"{name} must be evenly spaced and increasing")
    return a


def build_table(params, *, kind: str, n_series: int, v_battery_charge: float,
                mppt_window_v: tuple[float, float] | None = None, drop_v: float | None = None,
                g_grid=G_GRID_W_M2, t_grid=T_GRID_C) -> OperatingTable:
    """Tabulate string power at the controller's operating point.

    Parameters
    ----------
    params : dict
        Module parameters from :func:`fit_module`.
    kind : {'pwm', 'series', 'shunt', 'mppt'}
        Controller kind.
    n_series : int
        Modules in series in one string (they share the current and split the
        voltage).
    v_battery_charge : float
        Battery voltage while charging, V.
    mppt_window_v : (float, float), required for 'mppt'
        Lowest and highest string voltage the tracker works at, V (e.g.
        battery voltage plus the buck converter's headroom, and the
        controller's PV input limit).
    drop_v : float, optional
        Battery-tied kinds: drop from string to battery while charging, V;
        default :data:`PWM_DROP_V_PER_12V` per 12 V of ``v_battery_charge``
        (rounded to whole 12 V steps). Ignored for MPPT.
    g_grid, t_grid : 1-D array-like
        Evenly spaced irradiance (W/m², first point 0 recommended so that no
        light gives no power) and cell temperature (°C) grids.

    Returns
    -------
    OperatingTable

    Notes
    -----
    Battery-tied kinds: the string works at ``V = v_battery_charge + drop_v``
    and gives ``V · I(V / n_series)`` (clipped at 0 above open circuit).
    MPPT: the maximum power point while ``n_series · v_mp`` is inside the
    window, else the power at the nearest window edge (power is unimodal in
    voltage, so the edge is the best the tracker can do). Regulation
    (opening, shorting or tapering when the battery is full) is the dispatch
    kernel's business, not the table's.

    References
    ----------
    .. [1] De Soto, Klein & Beckman (2006), Solar Energy 80:78-88.
    .. [2] Jain & Kapoor (2004), Solar Energy Materials and Solar Cells
       81:269-277.
    """
    kind = str(kind).strip().lower()
    if kind not in CONTROLLER_KINDS:
        raise ValueError(f"unknown controller kind {kind!r}; expected one of {CONTROLLER_KINDS}")
    n_series = int(n_series)
    if n_series < 1:
        raise ValueError("n_series must be at least 1")
    g_axis = _even_grid(g_grid, "g_grid")
    t_axis = _even_grid(t_grid, "t_grid")
    g2, t2 = np.meshgrid(g_axis, t_axis, indexing="ij")
    mpp = max_power_point(g2, t2, params)
    p_mp = n_series * mpp["p_mp"]
    v_string_mp = n_series * mpp["v_mp"]
    if kind == "mppt":
        if mppt_window_v is None:
            raise ValueError("mppt_window_v=(min, max) string voltage is required for MPPT")
        v_lo, v_hi = (float(v) for v in mppt_window_v)
        if not 0.0 <= v_lo < v_hi:
            raise ValueError(f"bad MPPT window {mppt_window_v}")
        v_op = np.clip(v_string_mp, v_lo, v_hi)
        inside = (v_string_mp >= v_lo) & (v_string_mp <= v_hi)
        i_edge = current_at_voltage(g2, t2, v_op / n_series, params)
        p_op = np.where(inside, p_mp, np.maximum(v_op * i_edge, 0.0))
        drop = 0.0
        window = (v_lo, v_hi)
    else:
        drop = (PWM_DROP_V_PER_12V * max(1, round(v_battery_charge / 12.0))
                if drop_v is None else float(drop_v))
        v_string = float(v_battery_charge) + drop
        v_op = np.full(g2.shape, v_string)
        p_op = np.maximum(v_string * current_at_voltage(g2, t2, v_string / n_series, params), 0.0)
        window = None
    dark = g2 <= 0.0
    p_op = np.where(dark, 0.0, np.minimum(p_op, p_mp))
    return OperatingTable(kind=kind, n_series=n_series, v_battery_charge_v=float(v_battery_charge),
                          drop_v=float(drop), mppt_window_v=window, g_grid_w_m2=g_axis, t_grid_c=t_axis,
                          p_operating_w=p_op, p_mp_w=np.where(dark, 0.0, p_mp), v_operating_v=v_op)


# ---------------------------------------------------------------------------
# Lookup
# ---------------------------------------------------------------------------

@njit(cache=True, inline="always")
def table_lookup(table_2d, g, tc, g0, dg, t0, dt):
    """Bilinear interpolation in a (G, Tc) table, clamped at the grid edges.

    numba-compiled (inlined when called from another njit function).

    Parameters
    ----------
    table_2d : float64 array (n_g, n_t), n_g >= 2, n_t >= 2
        Values on the grid ``g0 + i·dg``, ``t0 + j·dt``.
    g : float
        Irradiance, W/m².
    tc : float
        Cell temperature, °C.
    g0, dg : float
        First irradiance grid point and step, W/m².
    t0, dt : float
        First temperature grid point, °C, and step, K.

    Returns
    -------
    float: the interpolated value. Points outside the grid (and NaN) take
    the value at the nearest edge.
    """
    ng = table_2d.shape[0]
    nt = table_2d.shape[1]
    x = (g - g0) / dg
    if not x > 0.0:  # also catches NaN
        x = 0.0
    elif x > ng - 1.0:
        x = ng - 1.0
    y = (tc - t0) / dt
    if not y > 0.0:
        y = 0.0
    elif y > nt - 1.0:
        y = nt - 1.0
    i = int(x)
    if i > ng - 2:
        i = ng - 2
    j = int(y)
    if j > nt - 2:
        j = nt - 2
    fx = x - i
    fy = y - j
    v0 = table_2d[i, j] + fy * (table_2d[i, j + 1] - table_2d[i, j])
    v1 = table_2d[i + 1, j] + fy * (table_2d[i + 1, j + 1] - table_2d[i + 1, j])
    return v0 + fx * (v1 - v0)


def table_lookup_numpy(table_2d, g, tc, g0, dg, t0, dt):
    """Vectorised NumPy twin of :func:`table_lookup` (same clamping), for
    checks and for use outside the kernel. ``g`` and ``tc`` broadcast."""
    table_2d = np.asarray(table_2d, dtype=float)
    ng, nt = table_2d.shape
    x = np.nan_to_num((np.asarray(g, dtype=float) - g0) / dg, nan=0.0)
    y = np.nan_to_num((np.asarray(tc, dtype=float) - t0) / dt, nan=0.0)
    x = np.clip(x, 0.0, ng - 1.0)
    y = np.clip(y, 0.0, nt - 1.0)
    i = np.minimum(x.astype(np.int64), ng - 2)
    j = np.minimum(y.astype(np.int64), nt - 2)
    fx, fy = x - i, y - j
    v0 = table_2d[i, j] + fy * (table_2d[i, j + 1] - table_2d[i, j])
    v1 = table_2d[i + 1, j] + fy * (table_2d[i + 1, j + 1] - table_2d[i + 1, j])
    return v0 + fx * (v1 - v0)


# ---------------------------------------------------------------------------
# Tables for a set of kits
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class KitTables:
    """Stacked operating tables for the dispatch kernel.

    Attributes
    ----------
    p_operating_w, p_mp_w : float64 arrays (n_tables, n_g, n_t)
        Per-string power at the operating point and at the maximum power
        point, W.
    table_index : int64 array (n_kits,)
        Row of the stacks each kit uses (in the order of the kits table).
    strings : float64 array (n_kits,)
        Strings in parallel per kit (multiply the per-string power by it).
    grid : float64 array (4,)
        (g0, dg, t0, dt) shared by all tables.
    tables : list of OperatingTable
    """

    p_operating_w: np.ndarray
    p_mp_w: np.ndarray
    table_index: np.ndarray
    strings: np.ndarray
    grid: np.ndarray
    tables: list


def tables_for_kits(kits, library, *, g_grid=G_GRID_W_M2, t_grid=T_GRID_C,
                    drop_v_per_12v: float = PWM_DROP_V_PER_12V, mppt_headroom_v: float = 2.0) -> KitTables:
    """Operating tables for every kit of a candidate table, one per distinct
    (module, controller kind, modules in series, charge voltage, window).

    Parameters
    ----------
    kits : DataFrame
        From :func:`fleet.kits.candidate_kits` (uses ``module_id``,
        ``controller_id``, ``controller_kind``, ``modules_in_series``,
        ``strings_in_parallel``, ``charge_voltage_v``, ``system_voltage_v``).
    library : ComponentLibrary
        Its ``pv_modules`` and ``charge_controllers`` tables indexed by id.
    drop_v_per_12v : float
        Battery-tied drop per 12 V of system voltage, V.
    mppt_headroom_v : float
        The MPPT window starts at charge voltage + this headroom, V (buck
        converter, common practice); it ends at the controller's
        ``max_pv_voltage_v``.
    """
    keys, index, tables = {}, [], []
    for kit in kits.itertuples(index=False):
        kind = str(kit.controller_kind).lower()
        v_ch = float(kit.charge_voltage_v)
        if kind == "mppt":
            v_max = float(library.charge_controllers.loc[kit.controller_id, "max_pv_voltage_v"])
            window, drop = (v_ch + mppt_headroom_v, v_max), None
        else:
            window, drop = None, drop_v_per_12v * float(kit.system_voltage_v) / 12.0
        key = (kit.module_id, "mppt" if kind == "mppt" else "battery_tied", int(kit.modules_in_series),
               round(v_ch, 6), window, drop)
        if key not in keys:
            params = fit_module(library.pv_modules.loc[kit.module_id])
            keys[key] = len(tables)
            tables.append(build_table(params, kind=kind, n_series=int(kit.modules_in_series),
                                      v_battery_charge=v_ch, mppt_window_v=window, drop_v=drop,
                                      g_grid=g_grid, t_grid=t_grid))
        index.append(keys[key])
    if not tables:
        g, t = _even_grid(g_grid, "g_grid"), _even_grid(t_grid, "t_grid")
        empty = np.zeros((0, g.size, t.size))
        return KitTables(empty, empty.copy(), np.zeros(0, np.int64), np.zeros(0),
                         np.array([g[0], g[1] - g[0], t[0], t[1] - t[0]]), [])
    return KitTables(
        p_operating_w=np.ascontiguousarray(np.stack([t.p_operating_w for t in tables])),
        p_mp_w=np.ascontiguousarray(np.stack([t.p_mp_w for t in tables])),
        table_index=np.asarray(index, dtype=np.int64),
        strings=kits["strings_in_parallel"].to_numpy(dtype=np.float64),
        grid=np.array(tables[0].grid, dtype=np.float64),
        tables=tables,
    )


# ---------------------------------------------------------------------------
# Hourly array power for the dispatch kernel
# ---------------------------------------------------------------------------

@njit(cache=True, parallel=True)
def _array_power_kernel(poa, tcell, tables, site_idx, table_idx, g0, dg, t0, dt, out):
    n_src = site_idx.shape[0]
    n_years = poa.shape[1]
    n_h = poa.shape[2]
    for i in prange(n_src * n_years):
        k = i // n_years
        y = i % n_years
        s = site_idx[k]
        t = tables[table_idx[k]]
        for h in range(n_h):
            g = poa[s, y, h]
            out[k, y, h] = table_lookup(t, g, tcell[s, y, h], g0, dg, t0, dt) if g > 0.0 else 0.0


def array_power_per_string(poa_wm2, cell_temp_c, tables: "KitTables", site_idx, table_idx, which="operating"):
    """Hourly per-string array power for (site, table) sources, W, float32.

    Parameters
    ----------
    poa_wm2, cell_temp_c : float32 arrays (n_sites, n_years, n_hours)
        Plane-of-array irradiance (W/m²) and cell temperature (°C).
    tables : KitTables
    site_idx, table_idx : int arrays (n_sources,)
        The site and the table row of each source.
    which : {'operating', 'mpp'}
        Power at the controller's operating point, or at the maximum power point.

    Returns
    -------
    float32 array (n_sources, n_years, n_hours): power at the string terminals
    (array losses and controller efficiency are applied by the dispatch kernel).
    """
    stack = {"operating": tables.p_operating_w, "mpp": tables.p_mp_w}[which]
    poa = np.asarray(poa_wm2, np.float32)
    tc = np.asarray(cell_temp_c, np.float32)
    site_idx = np.asarray(site_idx, np.int64)
    out = np.zeros((site_idx.size,) + poa.shape[1:], np.float32)
    if site_idx.size:
        g0, dg, t0, dt = (float(v) for v in tables.grid)
        _array_power_kernel(poa, tc, stack, site_idx, np.asarray(table_idx, np.int64), g0, dg, t0, dt, out)
    return out


def dark_reverse_current(params, v_module: float, temp_cell: float = 25.0) -> float:
    """Current a module takes in the dark when a battery holds it at ``v_module`` (A, >= 0).

    With no light the single-diode model leaves the diode and the shunt path:
    ``I = I_o·(exp(V / a) − 1) + V / R_sh`` with the reference diode current,
    modified ideality factor and shunt resistance of the fit (at night the
    irradiance scaling of the shunt resistance does not apply; the reference
    value stands for the dark shunt), and ``a`` scaled to the cell temperature.
    This is the night-time reverse current a controller without a blocking
    element lets flow from the battery through the array.

    References
    ----------
    .. [1] De Soto, Klein & Beckman (2006), Solar Energy 80:78-88.
    """
    tk = temp_cell + 273.15
    a = params["a_ref"] * tk / (params.get("temp_ref", STC_TEMPERATURE_C) + 273.15)
    i_diode = params["I_o_ref"] * math.expm1(v_module / a)
    return max(i_diode + v_module / params["R_sh_ref"], 0.0)
