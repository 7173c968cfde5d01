"""The standard catalogue: an integer program that picks at most K kit types
and gives every service unit one of them at least lifecycle cost.

The textbook statement (variables ``y_k``: kit type k is in the catalogue;
``x_uk``: unit u gets kit k; ``z_u``: unit u cannot be served by the chosen
types, penalised by M so that it happens only when no K types serve everyone):

    minimise   sum_uk c_uk x_uk + F sum_k y_k + M sum_u z_u
    subject to sum_k x_uk + z_u = 1          for every unit u
               x_uk <= y_k                   for every feasible pair
               sum_k y_k <= K

Only feasible pairs (the unit meets its reliability target with that kit) get
a variable. This is a p-median / facility-location program [1]_ and it is what
``aggregate=False`` solves, unit by unit.

At national scale (10,000 sites, ~30,000 units, ~10^6 feasible pairs) the
default ``aggregate=True`` solves the same program in a form whose size grows
with distinct cases, not sites, in three exact steps:

1. **Merging.** Two units whose costs over the same feasible kits differ only
   by a per-unit offset and a positive scale (``c_uk = a_u + w_u b_k``, e.g. a
   household count times a per-kit cost plus a kit-independent crew visit)
   rank every kit the same way, so under any catalogue they take the same
   kit. They become one case whose cost per kit is the sum of their costs:
   the offsets add into the case's constant, the scales into its weight, and
   the case's costs are still the true totals (:func:`merge_identical_units`).
2. **Dominance.** A kit that is feasible for no case where another kit is not
   and costs at least as much everywhere can always be swapped for that kit,
   so it is dropped before the program is built.
3. **Ordered-cost form.** With a case's feasible kits sorted by cost,
   ``s_1 <= ... <= s_f``, its cost under a catalogue is
   ``s_1 + sum_j (s_(j+1) - s_j) * [no kit among its j cheapest is chosen]``
   (``s_(f+1)`` being the unserved penalty). One continuous variable per
   *set* of cheapest kits, ``v_P >= v_Q - y_k`` (``P = Q + {k}``), stands for
   the bracket; cases whose kits rank in the same order share every variable,
   and the constant ``sum s_1`` leaves the program. Its LP relaxation equals
   the textbook one [2]_ [3]_, so the LP bound (``lp_bound``) is unchanged.

A greedy-and-interchange heuristic [4]_ gives the solver a starting plan, so a
time limit always returns a plan: the solver's best, or the heuristic's.

Modular plants (:func:`optimise_block_catalogue`) are built from standard
blocks of several kinds (PV blocks, battery blocks, inverters); there the
catalogue standardises the block types of each kind, at most K per kind, and a
plant design is usable only when every block type it uses is chosen: facility
location with one family of facilities per kind, where a customer needs one
open facility of every family at once, in a combination priced as a whole.

References
----------
.. [1] Wolsey, L. A. (1998). Integer Programming. Wiley (strong formulation of
   facility-location-type linking constraints x_uk <= y_k).
.. [2] Cornuejols, G., Nemhauser, G. L. & Wolsey, L. A. (1980). A canonical
   representation of simple plant location problems and its applications.
   SIAM J. Algebraic Discrete Methods 1(3):261-272.
.. [3] Elloumi, S. (2010). A tighter formulation of the p-median problem.
   J. Combinatorial Optimization 19:69-83.
.. [4] Teitz, M. B. & Bart, P. (1968). Heuristic methods for estimating the
   generalized vertex median of a weighted graph. Operations Research
   16(5):955-961.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pulp

#: Normalised costs are compared on this grid (fraction of each unit's cost range) when merging.
MERGE_TOLERANCE = 1e-9
#: Relative optimality gap the solvers are asked to close (CBC's ratio, HiGHS's mip_rel_gap).
SOLVER_REL_GAP = 1e-9
TIME_LIMIT_STATUS = "time limit reached, best plan found"


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
    #: size and timing of the program solved: cases, prefix_sets, kits, dominated_kits,
    #: variables, constraints, nonzeros, build_s, lp_s, solve_s, heuristic_objective_usd
    model_stats: dict = field(default_factory=dict)
    #: kind -> sorted chosen block type ids (:func:`optimise_block_catalogue`; empty otherwise)
    chosen_blocks: dict = field(default_factory=dict)


if pulp.HiGHS().available():
    class _HighsFromStart(pulp.HiGHS):
        """pulp's in-process HiGHS, handed the variables' current values as a starting solution."""

        use_start = False

        def callSolver(self, lp):
            if self.use_start and self.mip:
                import highspy
                sol = highspy.HighsSolution()
                values = [0.0] * len(lp.variables())
                for v in lp.variables():
                    values[v.index] = float(v.varValue or 0.0)
                sol.col_value = values
                sol.value_valid = True
                lp.solverModel.setSolution(sol)
            lp.solverModel.run()
else:  # pragma: no cover - highspy missing
    _HighsFromStart = None


def _solver(name: str, time_limit_s: float, msg: bool = False, *, mip: bool = True, start: bool = False):
    if name == "highs":
        if _HighsFromStart is not None:
            s = _HighsFromStart(mip=mip, msg=msg, timeLimit=time_limit_s, gapRel=SOLVER_REL_GAP)
            s.use_start = start
            return s
        s = pulp.HiGHS_CMD(mip=mip, msg=msg, timeLimit=time_limit_s, gapRel=SOLVER_REL_GAP)
        if not s.available():
            raise RuntimeError("the HiGHS solver is not installed (pip install highspy)")
        return s
    return pulp.COIN_CMD(path=_cbc_path(), mip=mip, msg=msg, timeLimit=time_limit_s,
                         gapRel=SOLVER_REL_GAP, warmStart=start)


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


# --------------------------------------------------------------------------- cost matrices

def _cost_matrix(options: pd.DataFrame) -> tuple[np.ndarray, pd.Index, pd.Index]:
    """Dense cost matrix (units x kits, USD; ``inf`` where infeasible), unit ids, kit ids (sorted).

    A pair listed twice keeps its cheaper cost. Memory: 8 bytes per unit and kit.
    """
    cost = options["cost_usd"].to_numpy(dtype=float)
    if not np.all(np.isfinite(cost)):
        bad = options.loc[~np.isfinite(cost), ["unit_id", "kit_id"]].head(3).to_dict("records")
        raise ValueError(f"catalogue options: cost_usd must be a finite number of USD (e.g. {bad})")
    u, units = pd.factorize(options["unit_id"], sort=True)
    k, kits = pd.factorize(options["kit_id"], sort=True)
    matrix = np.full((len(units), len(kits)), np.inf)
    order = np.argsort(-cost, kind="stable")  # the cheapest of duplicate pairs is written last
    matrix[u[order], k[order]] = cost[order]
    return matrix, pd.Index(units, name="unit_id"), pd.Index(kits, name="kit_id")


def _merge_matrix(matrix: np.ndarray, tolerance: float = MERGE_TOLERANCE) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Group the rows of a cost matrix that are equal up to an offset and a positive scale.

    Each row is normalised to ``b = (c - min c) / (max c - min c)`` over its
    finite entries (``b = 0`` when all are equal), rounded to ``tolerance``,
    and keyed together with its feasibility pattern.

    Returns ``case_of`` (case per row), ``case_cost`` (cases x kits, the sum of
    the members' costs, ``inf`` where infeasible) and ``members`` (rows per case).
    """
    finite = np.isfinite(matrix)
    lo = np.where(finite, matrix, np.inf).min(axis=1, keepdims=True)
    hi = np.where(finite, matrix, -np.inf).max(axis=1, keepdims=True)
    span = hi - lo
    with np.errstate(invalid="ignore", divide="ignore"):
        norm = np.where(span > 0, (matrix - lo) / np.where(span > 0, span, 1.0), 0.0)
    key = np.where(finite, np.rint(norm / tolerance), -1.0).astype(np.int64)
    _, first, case_of = np.unique(key, axis=0, return_index=True, return_inverse=True)
    case_of = case_of.reshape(-1)
    # number cases in order of first appearance, so the numbering follows the units' order
    renumber = np.empty(len(first), dtype=np.int64)
    renumber[np.argsort(first, kind="stable")] = np.arange(len(first))
    case_of = renumber[case_of]
    n_cases = len(first)
    members = np.bincount(case_of, minlength=n_cases)
    case_cost = np.zeros((n_cases, matrix.shape[1]))
    np.add.at(case_cost, case_of, np.where(finite, matrix, 0.0))
    feasible_case = np.zeros((n_cases, matrix.shape[1]), dtype=bool)
    feasible_case[case_of] = finite
    case_cost[~feasible_case] = np.inf
    return case_of, case_cost, members


def merge_identical_units(options: pd.DataFrame, *, tolerance: float = MERGE_TOLERANCE
                          ) -> tuple[pd.DataFrame, pd.Series]:
    """Merge units whose costs over the same feasible kits differ only by an offset and a scale.

    Units u and v merge when they have the same feasible kits and
    ``c_vk = a + w * c_uk`` for every such kit with ``w > 0`` (compared on
    costs normalised to each unit's own range, rounded to ``tolerance`` of that
    range). Identical units are the special case ``a = 0, w = 1``. Merged units
    rank kits alike, so under any catalogue they take the same kit and the case
    can stand for all of them.

    Parameters
    ----------
    options : DataFrame
        Feasible pairs: ``unit_id``, ``kit_id``, ``cost_usd`` (USD).
    tolerance : float
        Grid on which normalised costs (0..1 of a unit's cost range) are compared.

    Returns
    -------
    merged : DataFrame
        One row per case and feasible kit: ``case``, ``unit_id`` (the case's
        first unit), ``kit_id``, ``cost_usd`` (sum of the members' costs with
        that kit, USD: the true total of the case), ``weight`` (units merged),
        ``offset_usd`` (sum of the members' cheapest costs, USD: the part no
        catalogue can change).
    case_of : Series
        Case number of every unit_id.
    """
    matrix, units, kits = _cost_matrix(options)
    case_of, case_cost, members = _merge_matrix(matrix, tolerance)
    rep = np.zeros(len(members), dtype=np.int64)
    rep[case_of[::-1]] = np.arange(len(case_of))[::-1]  # first member of each case
    c, k = np.nonzero(np.isfinite(case_cost))
    offset = np.where(np.isfinite(matrix), matrix, np.inf).min(axis=1)
    merged = pd.DataFrame({"case": c, "unit_id": units.to_numpy()[rep[c]], "kit_id": kits.to_numpy()[k],
                           "cost_usd": case_cost[c, k], "weight": members[c].astype(float),
                           "offset_usd": np.bincount(case_of, weights=offset)[c]})
    return merged, pd.Series(case_of, index=units, name="case")


def dominated_kits(case_cost: np.ndarray) -> np.ndarray:
    """Kits (columns) that another kit dominates: feasible wherever they are and no dearer
    anywhere (strictly cheaper somewhere, or equal everywhere and listed first).

    Swapping a dominated kit for its dominator never raises a case's cost nor
    the number of types, so the program without dominated kits has the same optimum.
    """
    m = case_cost.shape[1]
    out = np.zeros(m, dtype=bool)
    for k in range(m):
        le = (case_cost <= case_cost[:, [k]]).all(axis=0)  # kit j no dearer than k for every case
        lt = (case_cost < case_cost[:, [k]]).any(axis=0)
        better = le & (lt | (np.arange(m) < k))
        better[k] = False
        out[k] = better.any()
    return out


# --------------------------------------------------------------------------- heuristic

def _plan_cost(case_cost: np.ndarray, penalty: np.ndarray, chosen: list[int], per_type: float) -> float:
    if not chosen:
        return float(penalty.sum())
    best = case_cost[:, chosen].min(axis=1)
    return float(np.minimum(best, penalty).sum() + per_type * len(chosen))


def greedy_interchange(case_cost: np.ndarray, penalty: np.ndarray, max_types: int, per_type: float,
                       max_passes: int = 100) -> tuple[list[int], float]:
    """A good catalogue fast: add the kit that saves most while it saves, then the best
    single swap, drop or add until none improves (vertex substitution, Teitz & Bart 1968).

    ``case_cost`` cases x kits (USD, ``inf`` infeasible); ``penalty`` per case (USD) when
    no chosen kit serves it. Returns chosen columns and the plan's cost (USD).
    """
    m = case_cost.shape[1]
    chosen: list[int] = []
    cost = _plan_cost(case_cost, penalty, chosen, per_type)
    while len(chosen) < max_types:
        trials = [(_plan_cost(case_cost, penalty, chosen + [k], per_type), k) for k in range(m) if k not in chosen]
        if not trials or min(trials)[0] >= cost:
            break
        cost, k = min(trials)
        chosen.append(k)
    for _ in range(max_passes):
        moves = []
        outside = [k for k in range(m) if k not in chosen]
        for i in chosen:
            rest = [j for j in chosen if j != i]
            moves.append((_plan_cost(case_cost, penalty, rest, per_type), rest))
            moves += [(_plan_cost(case_cost, penalty, rest + [k], per_type), rest + [k]) for k in outside]
        if len(chosen) < max_types:
            moves += [(_plan_cost(case_cost, penalty, chosen + [k], per_type), chosen + [k]) for k in outside]
        if not moves:
            break
        best_cost, best = min(moves, key=lambda t: t[0])
        if best_cost >= cost - 1e-9 * max(abs(cost), 1.0):
            break
        cost, chosen = best_cost, sorted(best)
    return sorted(chosen), cost


# --------------------------------------------------------------------------- ordered-cost program

@dataclass
class _Chains:
    """The ordered-cost program's data: prefix sets, their costs and chain links."""

    constant_usd: float
    coef_usd: np.ndarray  # per prefix set: cost saved once any of its kits is chosen
    added_kit: np.ndarray  # per prefix set: the kit that extends its parent
    parent: np.ndarray  # per prefix set: parent prefix set (-1: the empty set)
    words: np.ndarray  # per prefix set: kit membership bitmask (n_sets x n_words, uint64)


def prefix_chains(case_cost: np.ndarray, penalty: np.ndarray) -> _Chains:
    """Prefix sets of every case's kits sorted by cost, shared between cases.

    For case c with sorted feasible costs ``s_1..s_f``, prefix set ``P_j`` (its
    j cheapest kits) carries ``s_(j+1) - s_j`` (``penalty_c - s_f`` for
    ``j = f``); the cost of c under catalogue S is ``s_1 + sum_j [P_j has no
    kit of S] * coef_j``. Equal sets of different cases share one entry.
    """
    n, m = case_cost.shape
    order = np.argsort(case_cost, axis=1, kind="stable")  # infeasible (inf) last, ties by kit
    s = np.take_along_axis(case_cost, order, axis=1)
    n_feasible = np.isfinite(s).sum(axis=1)
    j = np.arange(m)[None, :]
    valid = j < n_feasible[:, None]
    with np.errstate(invalid="ignore"):
        step = np.diff(s, axis=1, append=np.inf)
        step = np.where(j == (n_feasible - 1)[:, None], penalty[:, None] - s, step)
    step = np.where(valid, step, 0.0)
    n_words = (m + 63) // 64
    words = np.zeros((n, m, n_words), dtype=np.uint64)
    bit = np.left_shift(np.uint64(1), (order % 64).astype(np.uint64))
    for w in range(n_words):
        words[:, :, w] = np.bitwise_or.accumulate(np.where(order // 64 == w, bit, np.uint64(0)), axis=1)
    entries = words[valid]  # (case, j) in row-major order: a case's prefixes are consecutive
    entry_kit = order[valid]
    entry_j = np.broadcast_to(j, (n, m))[valid]
    if n_words == 1:
        _, first, inv = np.unique(entries[:, 0], return_index=True, return_inverse=True)
    else:
        _, first, inv = np.unique(entries, axis=0, return_index=True, return_inverse=True)
    inv = inv.reshape(-1)
    coef = np.bincount(inv, weights=step[valid], minlength=len(first))
    size = entry_j[first] + 1
    parent = np.where(entry_j[first] > 0, inv[np.maximum(first - 1, 0)], -1)
    # keep sets that carry a cost, and the chains leading to them
    needed = coef > 0
    for level in range(m, 1, -1):
        at = np.nonzero(needed & (size == level))[0]
        needed[parent[at]] = True
    keep = np.nonzero(needed)[0]
    new_id = np.full(len(first), -1)
    new_id[keep] = np.arange(len(keep))
    par = parent[keep]
    return _Chains(constant_usd=float(s[:, 0].sum()), coef_usd=coef[keep], added_kit=entry_kit[first][keep],
                   parent=np.where(par >= 0, new_id[np.maximum(par, 0)], -1), words=entries[first][keep])


def _build_ordered(chains: _Chains, n_kits: int, max_types: int, per_type: float):
    prob = pulp.LpProblem("catalogue", pulp.LpMinimize)
    y = [prob.add_variable(f"y_{k}", 0, 1, cat=pulp.LpBinary) for k in range(n_kits)]
    v = [prob.add_variable(f"v_{p}", 0, 1) for p in range(len(chains.coef_usd))]
    prob.setObjective(pulp.LpAffineExpression(
        [(yk, per_type) for yk in y] + [(vp, float(c)) for vp, c in zip(v, chains.coef_usd)]))
    ge, le = pulp.LpConstraintGE, pulp.LpConstraintLE
    for p, (k, q) in enumerate(zip(chains.added_kit.tolist(), chains.parent.tolist())):
        if q < 0:  # v_P + y_k >= 1
            prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression([(v[p], 1.0), (y[k], 1.0)]), ge, rhs=1.0),
                               f"c{p}")
        else:  # v_P + y_k - v_Q >= 0
            prob.addConstraint(pulp.LpConstraint(
                pulp.LpAffineExpression([(v[p], 1.0), (y[k], 1.0), (v[q], -1.0)]), ge, rhs=0.0), f"c{p}")
    prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression([(yk, 1.0) for yk in y]), le, rhs=float(max_types)),
                       "types")
    nonzeros = int(len(y) + 2 * len(v) + (chains.parent >= 0).sum())
    return prob, y, v, nonzeros


def _set_start(y, v, chains: _Chains, chosen: list[int]) -> None:
    n_words = chains.words.shape[1]
    mask = np.zeros(n_words, dtype=np.uint64)
    for k in chosen:
        mask[k // 64] |= np.uint64(1) << np.uint64(k % 64)
    untouched = ~((chains.words & mask[None, :]) != 0).any(axis=1)
    for k, yk in enumerate(y):
        yk.setInitialValue(1.0 if k in chosen else 0.0)
    for vp, one in zip(v, untouched.tolist()):
        vp.setInitialValue(1.0 if one else 0.0)


# --------------------------------------------------------------------------- textbook program

def _build_assignment(matrix: np.ndarray, max_types: int, per_type: float, big_m: float):
    n, m = matrix.shape
    prob = pulp.LpProblem("catalogue", pulp.LpMinimize)
    y = [prob.add_variable(f"y_{k}", 0, 1, cat=pulp.LpBinary) for k in range(m)]
    z = [prob.add_variable(f"z_{u}", 0, 1, cat=pulp.LpBinary) for u in range(n)]
    uu, kk = np.nonzero(np.isfinite(matrix))
    x = [prob.add_variable(f"x_{i}", 0, 1, cat=pulp.LpBinary) for i in range(len(uu))]
    cost = matrix[uu, kk]
    prob.setObjective(pulp.LpAffineExpression(
        [(xi, float(c)) for xi, c in zip(x, cost)] + [(yk, per_type) for yk in y] + [(zu, big_m) for zu in z]))
    ge, le, eq = pulp.LpConstraintGE, pulp.LpConstraintLE, pulp.LpConstraintEQ
    for i, (xi, k) in enumerate(zip(x, kk.tolist())):
        prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression([(y[k], 1.0), (xi, -1.0)]), ge, rhs=0.0), f"l{i}")
    starts = np.searchsorted(uu, np.arange(n + 1))
    for u in range(n):
        terms = [(x[i], 1.0) for i in range(starts[u], starts[u + 1])] + [(z[u], 1.0)]
        prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression(terms), eq, rhs=1.0), f"a{u}")
    prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression([(yk, 1.0) for yk in y]), le, rhs=float(max_types)),
                       "types")
    return prob, y, x, (uu, kk), 2 * len(x) + n + len(x) + n + m


# --------------------------------------------------------------------------- the catalogue

def _best_assignment(matrix: np.ndarray, chosen: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """Each unit's cheapest chosen kit (column, -1 when none serves it) and its cost (USD, 0 when none)."""
    if not chosen:
        return np.full(matrix.shape[0], -1), np.zeros(matrix.shape[0])
    sub = matrix[:, chosen]
    pick = np.argmin(sub, axis=1)
    cost = sub[np.arange(len(sub)), pick]
    served = np.isfinite(cost)
    return np.where(served, np.asarray(chosen)[pick], -1), np.where(served, cost, 0.0)


def optimise_catalogue(options: pd.DataFrame, all_units: list[str], *, max_types: int,
                       cost_per_type_usd: float, solver: str = "cbc", time_limit_s: float = 120.0,
                       allowed_kits: list[str] | None = None, lp_bound: bool = True,
                       aggregate: bool = True) -> CatalogueResult:
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
    solver : {'cbc', 'highs'}
        CBC (``cbcbox``) or HiGHS (``highspy``).
    time_limit_s : float
        Wall-clock limit of each solver call (s; CBC does not apply it to the LP
        relaxation). When it is reached the best plan found (the solver's, or the
        starting heuristic's when better or when the solver has none) is returned
        with status ``'time limit reached, best plan found'`` and its gap.
    allowed_kits : list of str, optional
        Restrict the choice to these kit types (used for comparisons).
    lp_bound : bool
        Also solve the LP relaxation for a lower bound and the gap (default). Without it the
        gap is 0 when the solver proves optimality and NaN otherwise. The bound is NaN
        when the LP itself does not finish within the time limit.
    aggregate : bool
        Merge units, drop dominated kits and solve the ordered-cost form (default; exact,
        see the module notes). False solves the textbook program unit by unit.

    Returns
    -------
    CatalogueResult
        ``objective_usd`` is the plan's true total: lifecycle costs of the
        assigned kits, plus F per type, plus M per unit that has feasible kits
        but none among the chosen types (M = 10 x the dearest option + 10 F + 1 USD).
        ``model_stats`` gives the program's size and the time spent building
        and solving it.
    """
    t0 = time.perf_counter()
    opts = options if allowed_kits is None else options[options.kit_id.isin(allowed_kits)]
    if opts.empty:
        return CatalogueResult([], pd.Series("", index=pd.Index(all_units, name="unit_id"), dtype=object),
                               "no feasible option" if all_units else "no units", 0.0, 0.0, 0.0,
                               0, len(all_units), 0.0, solver, list(all_units))
    matrix, units, kits = _cost_matrix(opts[["unit_id", "kit_id", "cost_usd"]])
    per_type = float(cost_per_type_usd)
    big_m = 10.0 * float(matrix[np.isfinite(matrix)].max()) + 10.0 * per_type + 1.0
    stats: dict = {"units_in_program": len(units), "pairs": int(np.isfinite(matrix).sum())}
    constant = 0.0
    if aggregate:
        case_of, case_cost, members = _merge_matrix(matrix)
        dominated = dominated_kits(case_cost)
        cols = np.nonzero(~dominated)[0]
        reduced = case_cost[:, cols]
        penalty = members * big_m
        chains = prefix_chains(reduced, penalty)
        constant = chains.constant_usd
        heur_cols, heur_cost = greedy_interchange(reduced, penalty, max_types, per_type)
        heuristic = [int(cols[k]) for k in heur_cols]
        prob, y, v, nonzeros = _build_ordered(chains, len(cols), max_types, per_type)
        distinct = len(members)
        stats.update(cases=distinct, kits=len(cols), dominated_kits=int(dominated.sum()), prefix_sets=len(v),
                     variables=len(y) + len(v), constraints=len(v) + 1, nonzeros=nonzeros)
    else:
        cols = np.arange(len(kits))
        heuristic, heur_cost = greedy_interchange(matrix, np.full(len(units), big_m), max_types, per_type)
        prob, y, x, (uu, kk), nonzeros = _build_assignment(matrix, max_types, per_type, big_m)
        distinct = len(units)
        stats.update(cases=distinct, kits=len(kits), dominated_kits=0, prefix_sets=0,
                     variables=len(y) + len(x) + len(units), constraints=len(x) + len(units) + 1,
                     nonzeros=nonzeros)
    stats.update(heuristic_objective_usd=heur_cost, build_s=time.perf_counter() - t0)

    bound = float("nan")
    if lp_bound:
        t = time.perf_counter()
        prob.solve(_solver(solver, time_limit_s, mip=False))
        if prob.sol_status == pulp.LpSolutionOptimal:  # a relaxation stopped early bounds nothing
            bound = constant + float(pulp.value(prob.objective) or 0.0)
        stats["lp_s"] = time.perf_counter() - t
    if aggregate:
        _set_start(y, v, chains, heur_cols)
    t = time.perf_counter()
    prob.solve(_solver(solver, time_limit_s, start=aggregate))
    stats["solve_s"] = time.perf_counter() - t
    found = prob.sol_status in (pulp.LpSolutionOptimal, pulp.LpSolutionIntegerFeasible)
    status = pulp.LpStatus[prob.status]
    if prob.sol_status == pulp.LpSolutionIntegerFeasible or (not found and heuristic):
        status = TIME_LIMIT_STATUS

    # the plan: the solver's catalogue (or the heuristic's, if better or the solver found none),
    # each unit on its cheapest chosen kit; the objective is recomputed from the plan's own costs
    plans = []
    if found:
        picked = [int(cols[k]) for k, yk in enumerate(y) if (yk.value() or 0) > 0.5]
        if aggregate:
            plans.append(_priced(matrix, picked, per_type, big_m))
        else:  # the textbook program keeps the solver's own assignment and objective
            chosen_x = np.array([xi.value() or 0.0 for xi in x]) > 0.5
            kit_col = np.full(len(units), -1)
            kit_col[uu[chosen_x]] = kk[chosen_x]
            plans.append((float(pulp.value(prob.objective) or 0.0), picked, kit_col))
    if not found or status != "Optimal":
        plans.append(_priced(matrix, heuristic, per_type, big_m))
    total, chosen, kit_col = min(plans, key=lambda p: p[0])

    names = kits.to_numpy()
    listed = pd.Index(all_units, name="unit_id")
    index = listed.append(units[~units.isin(listed)]) if not units.isin(listed).all() else listed
    assignment = pd.Series(np.where(kit_col >= 0, names[np.maximum(kit_col, 0)], ""), index=units, dtype=object)
    assignment = assignment.reindex(index, fill_value="").rename_axis("unit_id")
    if not lp_bound:
        bound = total if status == "Optimal" else float("nan")
    gap = (total - bound) / total if total > 0 else 0.0
    unserved = listed[(assignment.reindex(listed) == "").to_numpy()].tolist()
    return CatalogueResult(sorted(names[chosen].tolist()), assignment, status, total, bound,
                           gap if np.isnan(gap) else max(gap, 0.0), distinct, len(all_units),
                           time.perf_counter() - t0, solver, unserved, stats)


def _priced(matrix: np.ndarray, chosen: list[int], per_type: float, big_m: float) -> tuple[float, list[int], np.ndarray]:
    """A catalogue's plan and true total (USD): assigned costs, F per type, M per unserved unit."""
    kit_col, cost = _best_assignment(matrix, chosen)
    return float(cost.sum() + per_type * len(chosen) + big_m * np.sum(kit_col < 0)), list(chosen), kit_col


def custom_best(options: pd.DataFrame) -> pd.DataFrame:
    """The cheapest feasible kit per unit with no limit on kit types (the price of standardising)."""
    return options.loc[options.groupby("unit_id").cost_usd.idxmin()].reset_index(drop=True)


# --------------------------------------------------------------------------- block catalogue (modular plants)

@dataclass
class _Combinations:
    """Options reduced to the cheapest per unit and combination of block types."""

    matrix: np.ndarray  # units x combinations, USD (inf: no option of the unit uses that combination)
    row: np.ndarray  # units x combinations, position in the options table of that cheapest option (-1: none)
    units: pd.Index  # unit ids (sorted)
    combo_types: np.ndarray  # combinations x kinds: block type (global index) of each kind
    type_kind: np.ndarray  # per block type (global index): position of its kind in ``kinds``
    type_names: np.ndarray  # per block type (global index): its id


def _block_combinations(options: pd.DataFrame, kinds: Sequence[str]) -> _Combinations:
    """The unit x combination cost table: a combination is one block type per kind, and only
    each unit's cheapest option per combination matters (any other costs more under every
    catalogue that allows it). Ties keep the option listed first."""
    cost = options["cost_usd"].to_numpy(dtype=float)
    u, units = pd.factorize(options["unit_id"], sort=True)
    codes, names, kind_of = [], [], []
    for i, kind in enumerate(kinds):
        code, types = pd.factorize(options[kind], sort=True)
        codes.append(code + sum(len(n) for n in names))
        names.append(np.asarray(types, dtype=object))
        kind_of.append(np.full(len(types), i))
    per_row = np.column_stack(codes)
    combo_types, j = np.unique(per_row, axis=0, return_inverse=True)
    j = j.reshape(-1)
    matrix = np.full((len(units), len(combo_types)), np.inf)
    row = np.full(matrix.shape, -1, dtype=np.int64)
    position = np.arange(len(cost))
    order = np.lexsort((-position, -cost))  # dearest first; among equal costs the first listed is written last
    matrix[u[order], j[order]] = cost[order]
    row[u[order], j[order]] = position[order]
    return _Combinations(matrix, row, pd.Index(units, name="unit_id"), combo_types,
                         np.concatenate(kind_of), np.concatenate(names))


def _usable(combo_types: np.ndarray, chosen: np.ndarray) -> np.ndarray:
    """Combinations whose block types are all chosen (``chosen``: bool per block type)."""
    return chosen[combo_types].all(axis=1)


def _block_plan_cost(case_cost: np.ndarray, penalty: np.ndarray, combo_types: np.ndarray,
                     chosen: np.ndarray, per_type: float) -> float:
    """Total (USD) of a choice of block types: each case on its cheapest usable combination
    (or its penalty), plus F per chosen type."""
    usable = _usable(combo_types, chosen)
    best = case_cost[:, usable].min(axis=1) if usable.any() else np.full(len(penalty), np.inf)
    return float(np.minimum(best, penalty).sum() + per_type * chosen.sum())


def greedy_interchange_blocks(case_cost: np.ndarray, penalty: np.ndarray, combo_types: np.ndarray,
                              type_kind: np.ndarray, max_types: int, per_type: float,
                              max_passes: int = 100) -> tuple[np.ndarray, float]:
    """A good choice of block types fast (greedy, then vertex substitution, Teitz & Bart 1968).

    A plant needs one chosen type of every kind, so adding a single type to an
    empty catalogue serves no one; the start is therefore the best single
    combination (one type per kind). Then the type, of any kind, that lowers the
    total most is added while one does and its kind holds fewer than
    ``max_types``; then the best swap of a type for another of the same kind, drop
    or add is made until none lowers the total.

    ``case_cost`` cases x combinations (USD, ``inf`` infeasible); ``penalty`` per
    case (USD); ``combo_types`` combinations x kinds (block type indices);
    ``type_kind`` the kind of every block type. Returns the chosen mask (bool per
    block type) and the plan's total (USD).
    """
    n_types = len(type_kind)
    n_kinds = combo_types.shape[1]
    chosen = np.zeros(n_types, dtype=bool)
    cost = float(penalty.sum())
    if max_types < 1 or case_cost.shape[1] == 0:
        return chosen, cost
    single = np.minimum(case_cost, penalty[:, None]).sum(axis=0) + per_type * n_kinds
    j = int(np.argmin(single))
    if single[j] < cost:
        chosen[combo_types[j]] = True
        cost = _block_plan_cost(case_cost, penalty, combo_types, chosen, per_type)

    def count(mask: np.ndarray) -> np.ndarray:
        return np.bincount(type_kind[mask], minlength=n_kinds)

    def trial(mask: np.ndarray) -> float:
        return _block_plan_cost(case_cost, penalty, combo_types, mask, per_type)

    def with_flips(*flip: int) -> np.ndarray:
        mask = chosen.copy()
        mask[list(flip)] = ~mask[list(flip)]
        return mask

    tol = lambda c: 1e-9 * max(abs(c), 1.0)  # noqa: E731
    while True:  # greedy additions
        room = count(chosen) < max_types
        trials = [(trial(with_flips(t)), t) for t in np.nonzero(~chosen & room[type_kind])[0].tolist()]
        if not trials:
            break
        best_cost, t = min(trials)
        if best_cost >= cost - tol(cost):
            break
        cost, chosen = best_cost, with_flips(t)
    for _ in range(max_passes):  # interchange: swap within a kind, drop, add
        room = count(chosen) < max_types
        inside, outside = np.nonzero(chosen)[0].tolist(), np.nonzero(~chosen)[0].tolist()
        moves = [(trial(with_flips(i)), (i,)) for i in inside]
        moves += [(trial(with_flips(i, t)), (i, t)) for i in inside for t in outside if type_kind[t] == type_kind[i]]
        moves += [(trial(with_flips(t)), (t,)) for t in outside if room[type_kind[t]]]
        if not moves:
            break
        best_cost, flip = min(moves, key=lambda m: m[0])
        if best_cost >= cost - tol(cost):
            break
        cost, chosen = best_cost, with_flips(*flip)
    return chosen, cost


def _build_blocks(case_cost: np.ndarray, penalty: np.ndarray, combo_types: np.ndarray, type_kind: np.ndarray,
                  max_types: int, per_type: float):
    """The block program: binary y per block type, continuous x per (case, feasible combination)
    and z per case, with the aggregated links sum_{j uses t} x_cj <= y_t per case, kind and type."""
    n = case_cost.shape[0]
    n_types, n_kinds = len(type_kind), combo_types.shape[1]
    prob = pulp.LpProblem("block_catalogue", pulp.LpMinimize)
    y = [prob.add_variable(f"y_{t}", 0, 1, cat=pulp.LpBinary) for t in range(n_types)]
    z = [prob.add_variable(f"z_{c}", 0, 1) for c in range(n)]
    cc, jj = np.nonzero(np.isfinite(case_cost))  # row-major: grouped by case
    x = [prob.add_variable(f"x_{i}", 0, 1) for i in range(len(cc))]
    prob.setObjective(pulp.LpAffineExpression(
        [(xi, float(c)) for xi, c in zip(x, case_cost[cc, jj])] + [(yt, per_type) for yt in y]
        + [(zc, float(p)) for zc, p in zip(z, penalty)]))
    le, eq = pulp.LpConstraintLE, pulp.LpConstraintEQ
    starts = np.searchsorted(cc, np.arange(n + 1))
    for c in range(n):
        terms = [(x[i], 1.0) for i in range(starts[c], starts[c + 1])] + [(z[c], 1.0)]
        prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression(terms), eq, rhs=1.0), f"a{c}")
    links = 0
    for k in range(n_kinds):
        key = cc.astype(np.int64) * n_types + combo_types[jj, k]
        order = np.argsort(key, kind="stable")
        cuts = np.nonzero(np.diff(key[order]))[0] + 1
        for group in np.split(order, cuts):
            if not len(group):
                continue
            t = int(combo_types[jj[group[0]], k])
            terms = [(x[i], 1.0) for i in group.tolist()] + [(y[t], -1.0)]
            prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression(terms), le, rhs=0.0), f"l{links}")
            links += 1
    for k in range(n_kinds):
        prob.addConstraint(pulp.LpConstraint(pulp.LpAffineExpression(
            [(y[t], 1.0) for t in np.nonzero(type_kind == k)[0].tolist()]), le, rhs=float(max_types)), f"types{k}")
    nonzeros = int(2 * len(x) + n + n_kinds * len(x) + links + n_types)
    return prob, y, x, z, (cc, jj), links + n + n_kinds, nonzeros


def _set_block_start(y, x, z, pairs, case_cost: np.ndarray, penalty: np.ndarray, combo_types: np.ndarray,
                     chosen: np.ndarray) -> None:
    """Starting values: the chosen types, each case on its cheapest usable combination (or unserved)."""
    cc, jj = pairs
    usable = _usable(combo_types, chosen)
    masked = np.where(usable[None, :], case_cost, np.inf)
    pick = np.argmin(masked, axis=1)
    best = masked[np.arange(len(masked)), pick]
    served = best < penalty
    for yt, on in zip(y, chosen.tolist()):
        yt.setInitialValue(1.0 if on else 0.0)
    for zc, s in zip(z, served.tolist()):
        zc.setInitialValue(0.0 if s else 1.0)
    on = served[cc] & (jj == pick[cc])
    for xi, o in zip(x, on.tolist()):
        xi.setInitialValue(1.0 if o else 0.0)


def _priced_blocks(comb: _Combinations, chosen: np.ndarray, per_type: float, big_m: float
                   ) -> tuple[float, np.ndarray, np.ndarray]:
    """A choice of block types' plan and true total (USD): each unit on its cheapest usable
    combination, assigned costs + F per chosen type + M per unit left unserved."""
    col, cost = _best_assignment(comb.matrix, np.nonzero(_usable(comb.combo_types, chosen))[0].tolist())
    return float(cost.sum() + per_type * chosen.sum() + big_m * np.sum(col < 0)), chosen, col


def _check_block_options(options: pd.DataFrame, kinds: Sequence[str],
                         allowed_types: dict[str, list[str]] | None) -> None:
    if not len(kinds):
        raise ValueError("block catalogue: kinds must name at least one block column")
    if len(set(kinds)) != len(kinds):
        raise ValueError(f"block catalogue: kinds {list(kinds)} name a column twice")
    missing = [c for c in ["unit_id", "kit_id", "cost_usd", *kinds] if c not in options.columns]
    if missing:
        raise ValueError(f"block catalogue options: missing column(s) {missing}")
    blank = options[list(kinds)].isna()
    if blank.any(axis=None):
        r = int(np.nonzero(blank.any(axis=1).to_numpy())[0][0])
        col = blank.columns[blank.iloc[r].to_numpy()][0]
        raise ValueError(f"block catalogue options: row {r} (unit {options.unit_id.iloc[r]!r}, "
                         f"kit {options.kit_id.iloc[r]!r}) has no {col}")
    cost = options["cost_usd"].to_numpy(dtype=float)
    if not np.all(np.isfinite(cost)):
        bad = options.loc[~np.isfinite(cost), ["unit_id", "kit_id"]].head(3).to_dict("records")
        raise ValueError(f"block catalogue options: cost_usd must be a finite number of USD (e.g. {bad})")
    twice = options.duplicated(["unit_id", "kit_id"], keep=False)
    if twice.any():
        bad = options.loc[twice, ["unit_id", "kit_id"]].head(3).to_dict("records")
        raise ValueError(f"block catalogue options: kit_id must be unique within a unit (e.g. {bad})")
    unknown = sorted(set(allowed_types or {}) - set(kinds))
    if unknown:
        raise ValueError(f"block catalogue: allowed_types names {unknown}, which are not among kinds {list(kinds)}")


def optimise_block_catalogue(options: pd.DataFrame, all_units: list[str], *, kinds: Sequence[str],
                             max_types: int, cost_per_type_usd: float, solver: str = "cbc",
                             time_limit_s: float = 120.0, allowed_types: dict[str, list[str]] | None = None,
                             lp_bound: bool = True) -> CatalogueResult:
    """Choose at most ``max_types`` block types of each kind for modular plants and give
    every unit one plant design built only from chosen types, at least cost.

    A design (an option) uses one block type of every kind (e.g. a PV block, a
    battery block and an inverter type). Facility location with one family of
    facilities per kind: a unit is served by a design only when all of the
    design's types are open, at most K types are open in each family, and each
    open type costs F (Wolsey 1998; Cornuejols, Nemhauser & Wolsey 1980). Variables: ``y_t`` (block type t is in the
    catalogue, binary), ``x_cj`` (case c is built as combination j, one block
    type per kind), ``z_c`` (case c is left unserved):

        minimise   sum_cj C_cj x_cj + F sum_t y_t + M sum_c w_c z_c
        subject to sum_j x_cj + z_c = 1                      every case c
                   sum_{j of c using t} x_cj <= y_t          every case c, kind, type t of that kind
                   sum_{t of kind} y_t <= K                  every kind

    Exact reductions, so the program grows with distinct cases, not units:
    only each unit's cheapest option per combination of block types matters
    (any other costs more under every catalogue that allows it); units whose
    cost rows over combinations agree up to an offset and a positive scale
    choose alike under any catalogue and merge into one case of ``w_c`` units,
    ``C_cj`` the sum of their costs (see :func:`merge_identical_units`). The
    linking rows are the aggregated form of ``x_cj <= y_t`` over a case's
    combinations that share type t; since a case takes at most one combination
    they are valid, and they are tighter in the LP relaxation (Wolsey 1998). With y
    binary, each case's best x is a vertex of its simplex of usable
    combinations, so x and z are continuous.

    A greedy-and-interchange plan over block types (Teitz & Bart 1968; start with the best
    single combination, add the type that lowers the total most, then swap types
    within a kind while that lowers it, see :func:`greedy_interchange_blocks`)
    is the solver's starting solution and the fallback at a time limit.

    Parameters
    ----------
    options : DataFrame
        Feasible plant options only: ``unit_id``, ``kit_id`` (the plant design;
        unique within a unit), ``cost_usd`` (lifecycle cost of serving the whole
        unit with that plant, USD) and one column per name in ``kinds`` holding
        the block type of that kind the design uses.
    all_units : list of str
        Every unit of the scheme, including those with no feasible option.
    kinds : sequence of str
        The block kind columns, e.g. ``("pv_block_id", "battery_block_id", "inverter_id")``.
    max_types : int
        Most block types of each kind the catalogue may hold (K).
    cost_per_type_usd : float
        Fixed cost of carrying one block type, of any kind (F, USD).
    solver : {'cbc', 'highs'}
        CBC (``cbcbox``) or HiGHS (``highspy``).
    time_limit_s : float
        Wall-clock limit of each solver call (s); as in :func:`optimise_catalogue`,
        when it is reached the best plan found (the solver's, or the heuristic's)
        is returned with status ``'time limit reached, best plan found'``.
    allowed_types : dict of kind -> list of str, optional
        Restrict the choice of each named kind to these types (e.g. one type of
        each kind for every unit, for comparisons).
    lp_bound : bool
        Also solve the LP relaxation for a lower bound and the gap (default); without
        it the gap is 0 when the solver proves optimality and NaN otherwise.

    Returns
    -------
    CatalogueResult
        ``chosen_kits``: every chosen block type id (all kinds, sorted);
        ``chosen_blocks``: kind -> sorted chosen type ids; ``assignment``: unit_id ->
        the option's ``kit_id`` ('' when unserved). ``objective_usd`` is the plan's
        true total: lifecycle costs of the assigned options, plus F per chosen type,
        plus M per unit that has options but none built from chosen types
        (M = 10 x the dearest option kept by the reduction + 10 F + 1 USD, the rule of
        :func:`optimise_catalogue`). ``gap`` = (total - bound) / total.
        ``model_stats`` gives sizes and timings.

    References
    ----------
    See the module notes: Wolsey (1998) for the strong linking constraints,
    Cornuejols, Nemhauser & Wolsey (1980) for the facility-location form, Teitz &
    Bart (1968) for the interchange heuristic.
    """
    t0 = time.perf_counter()
    kinds = list(kinds)
    _check_block_options(options, kinds, allowed_types)
    opts = options.reset_index(drop=True)
    opts = opts.assign(**{k: opts[k].astype(str) for k in kinds})
    for kind, types in (allowed_types or {}).items():
        opts = opts[opts[kind].isin([str(t) for t in types])]
    opts = opts.reset_index(drop=True)
    listed = pd.Index(all_units, name="unit_id")
    if opts.empty:
        return CatalogueResult([], pd.Series("", index=listed, dtype=object),
                               "no feasible option" if all_units else "no units", 0.0, 0.0, 0.0,
                               0, len(all_units), 0.0, solver, list(all_units), {}, {k: [] for k in kinds})
    comb = _block_combinations(opts, kinds)
    per_type = float(cost_per_type_usd)
    big_m = 10.0 * float(comb.matrix[np.isfinite(comb.matrix)].max()) + 10.0 * per_type + 1.0
    case_of, case_cost, members = _merge_matrix(comb.matrix)
    penalty = members * big_m
    heuristic, heur_cost = greedy_interchange_blocks(case_cost, penalty, comb.combo_types, comb.type_kind,
                                                     max_types, per_type)
    prob, y, x, z, pairs, n_constraints, nonzeros = _build_blocks(case_cost, penalty, comb.combo_types,
                                                                  comb.type_kind, max_types, per_type)
    stats: dict = {"units_in_program": len(comb.units), "options": len(opts),
                   "pairs": int(np.isfinite(comb.matrix).sum()), "combinations": len(comb.combo_types),
                   "cases": len(members), "kinds": len(kinds), "block_types": len(comb.type_kind),
                   "variables": len(y) + len(x) + len(z), "constraints": n_constraints, "nonzeros": nonzeros,
                   "heuristic_objective_usd": heur_cost, "build_s": time.perf_counter() - t0}

    bound = float("nan")
    if lp_bound:
        t = time.perf_counter()
        prob.solve(_solver(solver, time_limit_s, mip=False))
        if prob.sol_status == pulp.LpSolutionOptimal:  # a relaxation stopped early bounds nothing
            bound = float(pulp.value(prob.objective) or 0.0)
        stats["lp_s"] = time.perf_counter() - t
    _set_block_start(y, x, z, pairs, case_cost, penalty, comb.combo_types, heuristic)
    t = time.perf_counter()
    prob.solve(_solver(solver, time_limit_s, start=True))
    stats["solve_s"] = time.perf_counter() - t
    found = prob.sol_status in (pulp.LpSolutionOptimal, pulp.LpSolutionIntegerFeasible)
    status = pulp.LpStatus[prob.status]
    if prob.sol_status == pulp.LpSolutionIntegerFeasible or (not found and heuristic.any()):
        status = TIME_LIMIT_STATUS

    # the plan: the solver's block types (or the heuristic's, if better or the solver found none),
    # each unit on its cheapest usable combination; the objective is recomputed from the plan's own costs
    plans = []
    if found:
        picked = np.array([(yt.value() or 0) > 0.5 for yt in y], dtype=bool)
        plans.append(_priced_blocks(comb, picked, per_type, big_m))
    if not found or status != "Optimal":
        plans.append(_priced_blocks(comb, heuristic, per_type, big_m))
    total, chosen, col = min(plans, key=lambda p: p[0])

    units = comb.units
    index = listed.append(units[~units.isin(listed)]) if not units.isin(listed).all() else listed
    served = col >= 0
    rows = comb.row[np.arange(len(units)), np.maximum(col, 0)]
    kit = opts["kit_id"].to_numpy(dtype=object)[np.maximum(rows, 0)]
    assignment = pd.Series(np.where(served, kit, ""), index=units, dtype=object)
    assignment = assignment.reindex(index, fill_value="").rename_axis("unit_id")
    if not lp_bound:
        bound = total if status == "Optimal" else float("nan")
    gap = (total - bound) / total if total > 0 else 0.0
    unserved = listed[(assignment.reindex(listed) == "").to_numpy()].tolist()
    names = comb.type_names
    blocks = {kind: sorted(names[chosen & (comb.type_kind == i)].tolist()) for i, kind in enumerate(kinds)}
    return CatalogueResult(sorted(names[chosen].tolist()), assignment, status, total, bound,
                           gap if np.isnan(gap) else max(gap, 0.0), len(members), len(all_units),
                           time.perf_counter() - t0, solver, unserved, stats, blocks)
