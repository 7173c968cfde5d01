"""Which options to simulate: an exact search that skips options that cannot matter.

Simulating every (unit, kit[, block counts]) option for every weather year is what makes a
large program slow. Each option has a cheap *lower bound* on its lifecycle cost (its cost with
the battery lasting its whole calendar life: :func:`fleet.plan.lower_bound_costs`; cycling
can only shorten the life and lifecycle cost never falls as the life shortens). Two searches
use the bounds so that options are simulated only when they could change an answer:

* :func:`settle_groups`, per chunk of sites: the cheapest option of a group (a unit's custom
  best kit, a plant template's best block counts, the rule-of-thumb pick) is known exactly
  once the cheapest simulated option that qualifies costs no more than the lowest bound of
  the options not simulated; options are simulated in order of their bounds until then.
* the catalogue rounds (:func:`fleet.plan.choose_catalogue`): the integer program is solved
  with every option not simulated taken as feasible at its lower bound (an optimistic
  program); the options not simulated that its solution uses are simulated and the program is
  solved again, until its solution uses simulated options only. That solution is optimal for
  the program in which every option had been simulated: the optimistic program's optimum is
  at most the true optimum, and this solution is feasible in the true program at that cost.

The search is the lazy evaluation of a branch-and-bound over options with admissible bounds
(Land & Doig 1960; the same argument as a relaxation whose solution turns out feasible).

References
----------
.. [1] Land, A. H. and Doig, A. G. (1960). An automatic method of solving discrete programming
   problems. Econometrica 28(3):497-520.
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np
import pandas as pd

#: How many options of a group are simulated together in one step of :func:`settle_groups`
#: (more per step means fewer kernel calls, and a few options simulated in vain).
BATCH_PER_GROUP = 2
#: Optimistic catalogue rounds before the search stops and says it has not settled.
MAX_ROUNDS = 12


def open_options(lower_bound_usd: np.ndarray, codes: np.ndarray, simulated: np.ndarray,
                 qualifies: np.ndarray, cost_usd: np.ndarray) -> np.ndarray:
    """Options of each group that could still be its cheapest: not simulated, and with a lower
    bound below the cost of the group's cheapest simulated option that qualifies.

    Parameters
    ----------
    lower_bound_usd : (n,) lower bounds of the options' costs, USD.
    codes : (n,) group of each option, 0.. (-1: in no group).
    simulated : (n,) bool, the option was simulated.
    qualifies : (n,) bool, a simulated option that counts for its group (e.g. feasible).
    cost_usd : (n,) true costs of simulated options, USD (anything elsewhere).

    Returns
    -------
    (n,) bool mask.
    """
    codes = np.asarray(codes, np.int64)
    member = codes >= 0
    n_groups = int(codes.max()) + 1 if member.any() else 0
    best = np.full(n_groups, np.inf)
    q = member & simulated & qualifies
    np.minimum.at(best, codes[q], np.asarray(cost_usd, float)[q])
    out = np.zeros(len(codes), bool)
    out[member] = ~simulated[member] & (np.asarray(lower_bound_usd, float)[member] < best[codes[member]])
    return out


def first_per_group(mask: np.ndarray, codes: np.ndarray, order_key: np.ndarray, per_group: int) -> np.ndarray:
    """Positions of the ``per_group`` options with the lowest ``order_key`` in each group,
    among those where ``mask`` holds (ties by position)."""
    idx = np.flatnonzero(mask)
    if not len(idx):
        return idx
    o = np.lexsort((idx, np.asarray(order_key, float)[idx], np.asarray(codes)[idx]))
    idx = idx[o]
    g = np.asarray(codes)[idx]
    start = np.r_[0, np.flatnonzero(g[1:] != g[:-1]) + 1]
    rank = np.arange(len(idx)) - np.repeat(start, np.diff(np.r_[start, len(idx)]))
    return idx[rank < per_group]


def settle_groups(lower_bound_usd: np.ndarray, groups: Sequence[np.ndarray],
                  simulate: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]],
                  per_group: int = BATCH_PER_GROUP) -> np.ndarray:
    """Simulate options, cheapest bound first, until every group's cheapest option is known.

    Parameters
    ----------
    lower_bound_usd : (n,) lower bound of each option's cost, USD.
    groups : per group family, ``codes`` (n,): the option's group (-1: none). Family ``g``'s
        cheapest option is the cheapest simulated option that qualifies for ``g`` (e.g. a
        unit's cheapest feasible kit under one energy target).
    simulate : called with positions of options to simulate; returns their true costs (USD,
        (m,)) and whether each qualifies for each family ((m, len(groups)) bool).
    per_group : options of a group simulated together.

    Returns
    -------
    (n,) bool: the options simulated. Every option not simulated has, in each of its groups, a
    lower bound at least the cost of the group's cheapest qualifying simulated option.
    """
    lb = np.asarray(lower_bound_usd, float)
    n = len(lb)
    simulated = np.zeros(n, bool)
    cost = np.full(n, np.inf)
    qualifies = np.zeros((n, len(groups)), bool)
    while True:
        pick = np.zeros(n, bool)
        for g, codes in enumerate(groups):
            mask = open_options(lb, codes, simulated, qualifies[:, g], cost)
            pick[first_per_group(mask, codes, lb, per_group)] = True
        idx = np.flatnonzero(pick)
        if not len(idx):
            return simulated
        c, q = simulate(idx)
        cost[idx] = np.asarray(c, float)
        qualifies[idx] = np.asarray(q, bool).reshape(len(idx), len(groups))
        simulated[idx] = True


def group_codes(*keys: np.ndarray, where: np.ndarray | None = None) -> np.ndarray:
    """Group number of each row from one or more key columns (-1 where ``where`` is False)."""
    frame = pd.DataFrame({f"k{i}": np.asarray(k) for i, k in enumerate(keys)})
    codes = frame.groupby(list(frame.columns), sort=False).ngroup().to_numpy(np.int64)
    if where is not None:
        codes = np.where(np.asarray(where, bool), codes, -1)
    return codes
