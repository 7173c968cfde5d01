"""The standard catalogue: an integer program that picks at most K kit types
and gives every service unit one of them at least lifecycle cost.

Variables: ``y_k`` (kit type k is in the catalogue), ``x_uk`` (unit u gets
kit k), ``z_u`` (unit u cannot be served by the chosen types; heavily
penalised so it happens only when no K types can serve everyone).

    minimise   sum_uk c_uk x_uk + F sum_k y_k + M sum_u z_u
    subject to sum_k x_uk + z_u = 1          for every unit u
               x_uk <= y_k                   for every feasible pair
               sum_k y_k <= K

Only feasible pairs (the unit meets its reliability target with that kit)
get a variable. Units whose options and costs are identical are merged into
one weighted row, so the program grows with distinct cases, not sites.

References
----------
.. [1] Wolsey, L. A. (1998). Integer Programming. Wiley (strong formulation of
   facility-location-type linking constraints x_uk <= y_k).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pulp


@dataclass
class CatalogueResult:
    """Outcome of one catalogue optimisation."""

    chosen_kits: list[str]
    assignment: pd.Series  # unit_id -> kit_id ('' when not served)
    status: str
    objective_usd: float
    lower_bound_usd: float
    gap: float
    distinct_cases: int
    units: int
    solve_seconds: float
    solver: str
    unserved_units: list[str] = field(default_factory=list)


def _solver(name: str, time_limit_s: float, msg: bool = False):
    if name == "highs":
        s = pulp.HiGHS(msg=msg, timeLimit=time_limit_s)
        if not s.available():
            s = pulp.HiGHS_CMD(msg=msg, timeLimit=time_limit_s)
        if not s.available():
            raise RuntimeError("the HiGHS solver is not installed (pip install highspy)")
        return s
    return pulp.COIN_CMD(path=_cbc_path(), msg=msg, timeLimit=time_limit_s)


def _cbc_path() -> str:
    """The CBC binary shipped by the ``cbcbox`` package (``pulp[cbc]``), found
    without relying on the virtual environment being activated."""
    try:
        import cbcbox
        return str(cbcbox.cbc_bin_path())
    except (ImportError, AttributeError, OSError):
        import shutil
        found = shutil.which("cbc")
        if found:
            return found
        raise RuntimeError("the CBC solver is not installed (pip install 'pulp[cbc]')") from None


def merge_identical_units(options: pd.DataFrame) -> tuple[pd.DataFrame, pd.Series]:
    """Merge units whose feasible kits and costs are the same.

    Returns the options of one representative per case with ``weight`` (units
    merged) and a Series mapping each unit_id to its case id.
    """
    key = (options.sort_values(["unit_id", "kit_id"])
           .assign(_k=lambda d: d.kit_id + ":" + d.cost_usd.round(2).astype(str))
           .groupby("unit_id")["_k"].agg("|".join))
    case_of = pd.Series(pd.factorize(key)[0], index=key.index, name="case")
    weight = case_of.value_counts().sort_index()
    rep = case_of.reset_index().drop_duplicates("case").set_index("unit_id")["case"]
    merged = options[options.unit_id.isin(rep.index)].copy()
    merged["case"] = merged.unit_id.map(rep)
    merged["weight"] = merged.case.map(weight).astype(float)
    return merged, case_of


def optimise_catalogue(options: pd.DataFrame, all_units: list[str], *, max_types: int,
                       cost_per_type_usd: float, solver: str = "cbc", time_limit_s: float = 120.0,
                       allowed_kits: list[str] | None = None, lp_bound: bool = True) -> CatalogueResult:
    """Choose at most ``max_types`` kit types and assign units at least cost.

    Parameters
    ----------
    options : DataFrame
        Feasible pairs only: ``unit_id``, ``kit_id``, ``cost_usd`` (lifecycle
        cost of serving the whole unit with that kit type, USD).
    all_units : list of str
        Every unit of the scheme, including those with no feasible option.
    max_types : int
        Most kit types the catalogue may hold (K).
    cost_per_type_usd : float
        Fixed cost of carrying one kit type (F).
    allowed_kits : list of str, optional
        Restrict the choice to these kit types (used for comparisons).
    lp_bound : bool
        Also solve the LP relaxation for a lower bound and the gap (default). Without it the
        gap is 0 when the solver proves optimality and NaN otherwise.
    """
    t0 = time.perf_counter()
    opts = options if allowed_kits is None else options[options.kit_id.isin(allowed_kits)]
    servable = sorted(set(opts.unit_id))
    if opts.empty:
        return CatalogueResult([], pd.Series("", index=pd.Index(all_units, name="unit_id"), dtype=object),
                               "no feasible option" if all_units else "no units", 0.0, 0.0, 0.0,
                               0, len(all_units), 0.0, solver, list(all_units))
    merged, case_of = merge_identical_units(opts)
    kits = sorted(set(merged.kit_id))
    big_m = 10.0 * float(merged.groupby("case").cost_usd.max().max()) + 10.0 * cost_per_type_usd + 1.0

    def build(relaxed: bool):
        cat = pulp.LpContinuous if relaxed else pulp.LpBinary
        prob = pulp.LpProblem("catalogue", pulp.LpMinimize)
        y = {k: prob.add_variable(f"y_{i}", 0, 1, cat=cat) for i, k in enumerate(kits)}
        x = {}
        for i, r in enumerate(merged.itertuples(index=False)):
            x[(r.case, r.kit_id)] = (prob.add_variable(f"x_{i}", 0, 1, cat=cat), r.cost_usd * r.weight)
        cases = sorted(set(merged.case))
        w = merged.groupby("case").weight.first()
        z = {c: prob.add_variable(f"z_{c}", 0, 1, cat=cat) for c in cases}
        prob += (pulp.lpSum(v * c for v, c in x.values()) + cost_per_type_usd * pulp.lpSum(y.values())
                 + big_m * pulp.lpSum(z[c] * w[c] for c in cases))
        by_case: dict[int, list] = {}
        for (c, k), (v, _) in x.items():
            by_case.setdefault(c, []).append(v)
            prob += v <= y[k]
        for c in cases:
            prob += pulp.lpSum(by_case[c]) + z[c] == 1
        prob += pulp.lpSum(y.values()) <= max_types
        return prob, y, x, z

    if lp_bound:
        relaxed, *_ = build(True)
        relaxed.solve(_solver(solver, time_limit_s))
        bound = float(pulp.value(relaxed.objective) or 0.0)
    prob, y, x, z = build(False)
    prob.solve(_solver(solver, time_limit_s))
    status = pulp.LpStatus[prob.status]
    if prob.sol_status == pulp.LpSolutionIntegerFeasible:
        status = "time limit reached, best plan found"
    chosen = [k for k, v in y.items() if (v.value() or 0) > 0.5]
    case_kit = {}
    for (c, k), (v, _) in x.items():
        if (v.value() or 0) > 0.5:
            case_kit[c] = k
    assignment = pd.Series("", index=pd.Index(all_units, name="unit_id"), dtype=object)
    for u in servable:
        assignment[u] = case_kit.get(case_of[u], "")
    objective = float(pulp.value(prob.objective) or 0.0)
    if not lp_bound:
        bound = objective if status == "Optimal" else float("nan")
    gap = (objective - bound) / objective if objective > 0 else 0.0
    unserved = [u for u in all_units if assignment[u] == ""]
    return CatalogueResult(sorted(chosen), assignment, status, objective, bound, gap if np.isnan(gap) else max(gap, 0.0),
                           int(case_of.max() + 1), len(all_units), time.perf_counter() - t0, solver, unserved)


def custom_best(options: pd.DataFrame) -> pd.DataFrame:
    """The cheapest feasible kit per unit with no limit on kit types (the price of standardising)."""
    return options.loc[options.groupby("unit_id").cost_usd.idxmin()].reset_index(drop=True)
