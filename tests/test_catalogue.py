import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import sparse
from scipy.optimize import linprog

from fleet.catalogue import (TIME_LIMIT_STATUS, custom_best, dominated_kits, merge_identical_units,
                             optimise_block_catalogue, optimise_catalogue, prefix_chains)


def _instance(seed, n_units=9, n_kits=6, density=0.6):
    rng = np.random.default_rng(seed)
    rows = []
    for u in range(n_units):
        for k in range(n_kits):
            if rng.random() < density or k == n_kits - 1:  # the last kit serves everyone
                rows.append((f"u{u}", f"k{k}", float(rng.integers(100, 1000))))
    return pd.DataFrame(rows, columns=["unit_id", "kit_id", "cost_usd"])


def _profiled_instance(seed, n_units=40, n_kits=8, n_profiles=5, loose_share=0.3):
    """Units built from a few cost profiles: cost = offset + count * profile cost over the profile's
    feasible kits (a ladder: every kit from a threshold up), so many units merge; a share of units
    get their own random costs. The last kit serves everyone."""
    rng = np.random.default_rng(seed)
    first = rng.integers(0, n_kits, n_profiles)
    base = rng.uniform(20.0, 90.0, (n_profiles, n_kits)) + 8.0 * np.arange(n_kits)
    rows = []
    for u in range(n_units):
        p = rng.integers(n_profiles)
        count, offset = float(rng.integers(1, 60)), float(rng.uniform(0.0, 300.0))
        loose = rng.random() < loose_share
        for k in range(first[p], n_kits):
            cost = offset + count * (rng.uniform(20.0, 150.0) if loose else base[p, k])
            rows.append((f"u{u:03d}", f"k{k}", cost))
    return pd.DataFrame(rows, columns=["unit_id", "kit_id", "cost_usd"])


def brute_force(options, units, max_types, fixed):
    kits = sorted(options.kit_id.unique())
    best = np.inf
    table = options.pivot(index="unit_id", columns="kit_id", values="cost_usd").reindex(units)
    for r in range(1, max_types + 1):
        for combo in itertools.combinations(kits, r):
            costs = table[list(combo)].min(axis=1)
            if costs.isna().any():
                continue
            best = min(best, costs.sum() + fixed * r)
    return best


def textbook_lp_bound(options, max_types, fixed):
    """LP relaxation of the textbook program (x_uk <= y_k, sum_k x_uk + z_u = 1, sum_k y_k <= K)
    solved by scipy's linprog, with the penalty M documented in optimise_catalogue."""
    units = sorted(options.unit_id.unique())
    kits = sorted(options.kit_id.unique())
    u = options.unit_id.map({v: i for i, v in enumerate(units)}).to_numpy()
    k = options.kit_id.map({v: i for i, v in enumerate(kits)}).to_numpy()
    n, m, p = len(units), len(kits), len(options)
    big_m = 10.0 * options.cost_usd.max() + 10.0 * fixed + 1.0
    c = np.concatenate([options.cost_usd.to_numpy(), np.full(m, fixed), np.full(n, big_m)])  # x, y, z
    rows = np.arange(p)
    a_ub = sparse.vstack([
        sparse.csr_matrix((np.r_[np.ones(p), -np.ones(p)], (np.r_[rows, rows], np.r_[rows, p + k])), shape=(p, p + m + n)),
        sparse.csr_matrix((np.ones(m), (np.zeros(m, int), p + np.arange(m))), shape=(1, p + m + n))])
    b_ub = np.r_[np.zeros(p), max_types]
    a_eq = sparse.csr_matrix((np.ones(p + n), (np.r_[u, np.arange(n)], np.r_[rows, p + m + np.arange(n)])),
                             shape=(n, p + m + n))
    res = linprog(c, A_ub=a_ub, b_ub=b_ub, A_eq=a_eq, b_eq=np.ones(n), bounds=(0, 1), method="highs")
    assert res.status == 0
    return res.fun


def check_plan(res, options, max_types, fixed):
    """The plan is one the option table allows, and its objective is its own total cost."""
    assert len(res.chosen_kits) <= max_types
    served = res.assignment[res.assignment != ""]
    assert set(served) <= set(res.chosen_kits)
    priced = options.merge(served.rename("kit_id").reset_index(), on=["unit_id", "kit_id"])
    assert len(priced) == len(served)  # every assigned pair is a feasible option
    assert res.unserved_units == []
    assert res.objective_usd == pytest.approx(priced.cost_usd.sum() + fixed * len(res.chosen_kits), rel=1e-12)
    return priced.set_index("unit_id").cost_usd.sort_index()


@pytest.mark.parametrize("aggregate", [True, False])
@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("max_types", [1, 2, 3])
def test_integer_program_equals_brute_force_on_small_instances(seed, max_types, aggregate):
    # source: exhaustive enumeration of every catalogue of at most K types (independent check)
    opts = _instance(seed)
    units = sorted(opts.unit_id.unique())
    res = optimise_catalogue(opts, units, max_types=max_types, cost_per_type_usd=150.0, aggregate=aggregate)
    assert res.status == "Optimal"
    assert res.objective_usd == pytest.approx(brute_force(opts, units, max_types, 150.0), rel=1e-9)
    check_plan(res, opts, max_types, 150.0)
    assert res.gap >= 0


@pytest.mark.parametrize("seed", range(4))
def test_merged_program_equals_brute_force_on_offset_and_scaled_units(seed):
    # source: exhaustive enumeration of every catalogue of at most K types (independent check)
    opts = _profiled_instance(seed, n_units=30, n_kits=7)
    units = sorted(opts.unit_id.unique())
    res = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=400.0)
    assert res.distinct_cases < len(units)  # the instance does merge
    assert res.objective_usd == pytest.approx(brute_force(opts, units, 3, 400.0), rel=1e-9)
    check_plan(res, opts, 3, 400.0)


@pytest.mark.parametrize("seed", range(5))
def test_highs_agrees_with_cbc(seed):
    # source: HiGHS (highspy) as an independent second solver, same objective as CBC
    opts = _instance(seed + 11, n_units=40, n_kits=12) if seed % 2 else _profiled_instance(seed, 80, 14)
    units = sorted(opts.unit_id.unique())
    a = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=50.0, solver="cbc")
    b = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=50.0, solver="highs")
    assert a.status == b.status == "Optimal"
    assert a.objective_usd == pytest.approx(b.objective_usd, rel=1e-9)
    assert a.lower_bound_usd == pytest.approx(b.lower_bound_usd, rel=1e-7)


@pytest.mark.parametrize("seed", range(3))
def test_aggregation_gives_the_same_plan_as_the_unit_by_unit_program(seed):
    # source: the textbook program solved unit by unit (aggregate=False) is the reference; the
    # LP bounds agree too (Cornuejols, Nemhauser & Wolsey 1980: the ordered-cost form has the
    # same LP relaxation as x_uk <= y_k)
    opts = _profiled_instance(seed, n_units=120, n_kits=12)
    units = sorted(opts.unit_id.unique()) + ["no-option-unit"]
    on = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=300.0, aggregate=True)
    off = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=300.0, aggregate=False)
    assert on.distinct_cases < off.distinct_cases == len(units) - 1
    assert on.objective_usd == pytest.approx(off.objective_usd, rel=1e-9)
    assert on.lower_bound_usd == pytest.approx(off.lower_bound_usd, rel=1e-9)
    assert on.chosen_kits == off.chosen_kits
    pd.testing.assert_series_equal(on.assignment, off.assignment)
    assert on.unserved_units == off.unserved_units == ["no-option-unit"]
    priced = [opts.merge(r.assignment[r.assignment != ""].rename("kit_id").reset_index(), on=["unit_id", "kit_id"])
              .set_index("unit_id").cost_usd.sort_index() for r in (on, off)]
    pd.testing.assert_series_equal(priced[0], priced[1], rtol=1e-12)


@pytest.mark.parametrize("seed", range(2))
def test_lp_bound_equals_the_textbook_relaxation(seed):
    # source: scipy.optimize.linprog (HiGHS) on the textbook LP relaxation, built independently here
    opts = _instance(seed + 20, n_units=30, n_kits=10, density=0.5)
    units = sorted(opts.unit_id.unique())
    res = optimise_catalogue(opts, units, max_types=2, cost_per_type_usd=20.0)
    assert res.lower_bound_usd == pytest.approx(textbook_lp_bound(opts, 2, 20.0), rel=1e-9)
    assert res.lower_bound_usd <= res.objective_usd * (1 + 1e-12)


def test_offset_and_scale_merge_is_exact():
    # source: algebra; c_v = a + w c_u with w > 0 ranks kits as c_u does, and summing merged costs
    # gives the true totals (the case's cost per kit is the sum of its members' costs)
    base = {"k1": 100.0, "k2": 130.0, "k3": 90.0}
    rows = []
    for unit, (a, w) in {"a": (0.0, 1.0), "b": (55.0, 3.0), "c": (7.5, 0.25)}.items():
        rows += [(unit, k, a + w * c) for k, c in base.items()]
    rows += [("d", k, 500.0 - c) for k, c in base.items()]  # negative scale: reverses the ranking
    rows += [("e", k, c) for k, c in base.items() if k != "k3"]  # different feasible kits
    rows += [("f", k, c ** 1.1) for k, c in base.items()]  # not affine in the costs of a
    opts = pd.DataFrame(rows, columns=["unit_id", "kit_id", "cost_usd"])
    merged, case_of = merge_identical_units(opts)
    assert case_of["a"] == case_of["b"] == case_of["c"]
    assert len({case_of[u] for u in "adef"}) == 4
    case = merged[merged.case == case_of["a"]].set_index("kit_id")
    assert case.weight.iloc[0] == 3
    for k in base:
        assert case.cost_usd[k] == pytest.approx(opts[(opts.kit_id == k) & opts.unit_id.isin(["a", "b", "c"])].cost_usd.sum())
    assert case.offset_usd.iloc[0] == pytest.approx(90.0 + (55.0 + 3.0 * 90.0) + (7.5 + 0.25 * 90.0))
    assert merged.groupby("case").weight.first().sum() == 6


def test_identical_units_are_merged_into_one_case():
    opts = pd.DataFrame([("a", "k1", 10.0), ("a", "k2", 12.0), ("b", "k1", 10.0), ("b", "k2", 12.0),
                         ("c", "k1", 11.0)], columns=["unit_id", "kit_id", "cost_usd"])
    merged, case_of = merge_identical_units(opts)
    assert case_of["a"] == case_of["b"] != case_of["c"]
    assert merged.groupby("case").weight.first().sum() == 3


def test_dominated_kits_are_those_no_better_anywhere():
    # source: exchange argument; a kit feasible nowhere its rival is not, and no cheaper anywhere,
    # can be swapped for the rival in any catalogue without raising cost
    inf = np.inf
    cost = np.array([[10.0, 12.0, 9.0, 10.0, inf],
                     [20.0, 21.0, inf, 20.0, 5.0],
                     [inf, inf, 30.0, inf, 6.0]])
    # kit 1 is dearer than kit 0 everywhere; kit 3 equals kit 0 (the later one goes);
    # kit 2 is cheapest for row 0 but serves another set; kit 4 serves rows 0 nowhere
    assert dominated_kits(cost).tolist() == [False, True, False, True, False]


def test_ordered_cost_form_prices_every_catalogue_exactly():
    # source: exhaustive check over every catalogue of the identity
    # cost(S) = s_1 + sum_j [no kit of S among the j cheapest] (s_(j+1) - s_j)
    # (Cornuejols, Nemhauser & Wolsey 1980)
    rng = np.random.default_rng(5)
    cost = rng.uniform(10.0, 100.0, (25, 7))
    cost[rng.random(cost.shape) < 0.4] = np.inf
    cost[:, 6] = np.where(rng.random(25) < 0.5, np.inf, cost[:, 6])
    cost[np.isinf(cost).all(axis=1), 0] = 50.0
    cost = np.vstack([cost, cost[:3]])  # repeated rows share prefix sets
    penalty = np.full(len(cost), 1e4)
    ch = prefix_chains(cost, penalty)
    assert len(np.unique(ch.words, axis=0)) == len(ch.words)  # each set once
    for r in range(0, 8):
        for combo in itertools.combinations(range(7), r):
            direct = np.minimum(cost[:, list(combo)].min(axis=1) if combo else np.inf, penalty).sum()
            mask = np.uint64(sum(1 << k for k in combo))
            untouched = (ch.words[:, 0] & mask) == 0
            assert ch.constant_usd + ch.coef_usd[untouched].sum() == pytest.approx(direct, rel=1e-12)


def _hard_instance():
    # random costs: the LP relaxation is not integral here, so the solver must branch
    return _instance(3, n_units=40, n_kits=12, density=0.5)


def test_time_limit_returns_the_best_plan_found_with_its_gap():
    # source: brute force (optimum) and scipy linprog (LP bound) as independent references
    opts = _hard_instance()
    units = sorted(opts.unit_id.unique())
    best = brute_force(opts, units, 3, 10.0)
    lp = textbook_lp_bound(opts, 3, 10.0)
    assert lp < best * (1 - 1e-3)  # a real integrality gap
    for aggregate in (True, False):
        # CBC stops at once (a zero time budget); its relaxation solve is not cut short
        res = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=10.0, solver="cbc",
                                 time_limit_s=0.0, aggregate=aggregate)
        assert res.status == TIME_LIMIT_STATUS
        check_plan(res, opts, 3, 10.0)
        assert res.objective_usd >= best * (1 - 1e-12)
        assert res.lower_bound_usd == pytest.approx(lp, rel=1e-9)
        assert res.gap == pytest.approx((res.objective_usd - lp) / res.objective_usd, rel=1e-9)
        assert res.gap > 0
    # HiGHS also cuts the relaxation short: no bound is claimed then
    res = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=10.0, solver="highs", time_limit_s=0.0)
    assert res.status == TIME_LIMIT_STATUS
    check_plan(res, opts, 3, 10.0)
    assert np.isnan(res.lower_bound_usd) and np.isnan(res.gap)
    full = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=10.0, solver="highs")
    assert full.status == "Optimal" and full.objective_usd == pytest.approx(best, rel=1e-9)


def test_without_lp_bound_the_gap_is_zero_when_proven_and_nan_when_stopped():
    opts = _hard_instance()
    units = sorted(opts.unit_id.unique())
    proven = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=10.0, lp_bound=False)
    assert proven.status == "Optimal" and proven.gap == 0 and proven.lower_bound_usd == proven.objective_usd
    stopped = optimise_catalogue(opts, units, max_types=3, cost_per_type_usd=10.0, lp_bound=False, time_limit_s=0.0)
    assert stopped.status == TIME_LIMIT_STATUS and np.isnan(stopped.gap)


def test_units_that_no_chosen_type_serves_are_reported_not_dropped():
    opts = pd.DataFrame([("a", "k1", 10.0), ("b", "k2", 10.0), ("c", "k3", 10.0)], columns=["unit_id", "kit_id", "cost_usd"])
    res = optimise_catalogue(opts, ["a", "b", "c", "d"], max_types=2, cost_per_type_usd=0.0)
    assert len(res.chosen_kits) == 2
    assert sorted(res.unserved_units) == sorted(["d"] + [u for u in "abc" if res.assignment[u] == ""])
    assert len(res.unserved_units) == 2
    assert list(res.assignment.index) == ["a", "b", "c", "d"]


def test_custom_best_takes_the_cheapest_option_per_unit():
    opts = _instance(3)
    best = custom_best(opts)
    assert (best.set_index("unit_id").cost_usd == opts.groupby("unit_id").cost_usd.min()).all()


# --------------------------------------------------------------------------- block catalogue (modular plants)

KINDS = ("pv_block_id", "battery_block_id", "inverter_id")


def _block_instance(seed, n_units=8, n_kinds=2, n_types=(3, 3), n_designs=6, infeasible=0.3, n_copies=2,
                    n_without=1):
    """Random plant designs per unit (one block type per kind, random lifecycle cost); a share of designs
    is dropped as infeasible, some units are offset-and-scaled copies of others (so they merge), and
    ``n_without`` units have no feasible design at all."""
    rng = np.random.default_rng(seed)
    kinds = KINDS[:n_kinds]
    rows = []
    for u in range(n_units):
        for d in range(n_designs):
            if rng.random() < infeasible:
                continue
            types = [f"{kind.split('_')[0]}{rng.integers(n)}" for kind, n in zip(kinds, n_types)]
            rows.append((f"u{u:02d}", f"d{u}-{d}", float(rng.integers(100, 1000)), *types))
    opts = pd.DataFrame(rows, columns=["unit_id", "kit_id", "cost_usd", *kinds])
    copies = []
    for c in range(n_copies):
        src = opts[opts.unit_id == f"u{c:02d}"]
        copies.append(src.assign(unit_id=f"copy{c}", cost_usd=40.0 + 3.0 * src.cost_usd))
    opts = pd.concat([opts, *copies], ignore_index=True)
    units = sorted(opts.unit_id.unique()) + [f"none{i}" for i in range(n_without)]
    return opts, list(kinds), units


def _big_m(opts, kinds, fixed):
    """The penalty documented in optimise_block_catalogue: 10 x the dearest option kept when only each
    unit's cheapest option per combination of block types counts, + 10 F + 1 USD."""
    return 10.0 * opts.groupby(["unit_id", *kinds]).cost_usd.min().max() + 10.0 * fixed + 1.0


def brute_force_blocks(opts, kinds, max_types, fixed, allowed=None):
    """Every choice of at most K types of each kind; each unit takes its cheapest option built only from
    chosen types, or the penalty M when it has options but none of them is. Returns the least total."""
    for kind, types in (allowed or {}).items():
        opts = opts[opts[kind].isin(types)]
    big_m = _big_m(opts, kinds, fixed)
    u, units = pd.factorize(opts.unit_id)
    cost = opts.cost_usd.to_numpy()
    codes, per_kind = [], []
    for kind in kinds:
        code, types = pd.factorize(opts[kind])
        codes.append(code)
        per_kind.append([list(c) for r in range(max_types + 1) for c in itertools.combinations(range(len(types)), r)])
    best = np.inf
    for choice in itertools.product(*per_kind):
        usable = np.ones(len(opts), dtype=bool)
        for code, chosen in zip(codes, choice):
            usable &= np.isin(code, chosen)
        unit_best = np.full(len(units), np.inf)
        np.minimum.at(unit_best, u[usable], cost[usable])
        served = np.isfinite(unit_best)
        total = unit_best[served].sum() + big_m * (~served).sum() + fixed * sum(len(c) for c in choice)
        best = min(best, total)
    return best


def check_block_plan(res, opts, kinds, units, max_types, fixed):
    """The plan is one the option table allows, and its objective is its own total cost."""
    assert sorted(res.chosen_blocks) == sorted(kinds)
    assert all(len(v) <= max_types for v in res.chosen_blocks.values())
    assert res.chosen_kits == sorted(t for v in res.chosen_blocks.values() for t in v)
    assert list(res.assignment.index) == list(units)
    served = res.assignment[res.assignment != ""]
    priced = opts.merge(served.rename("kit_id").reset_index(), on=["unit_id", "kit_id"])
    assert len(priced) == len(served)  # every assignment is one of that unit's options
    for kind in kinds:
        assert set(priced[kind]) <= set(res.chosen_blocks[kind])
    with_options = set(opts.unit_id)
    assert set(res.unserved_units) == set(units) - set(served.index)
    penalised = len([u for u in res.unserved_units if u in with_options])
    expected = priced.cost_usd.sum() + fixed * len(res.chosen_kits) + _big_m(opts, kinds, fixed) * penalised
    assert res.objective_usd == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("max_types", [1, 2])
@pytest.mark.parametrize("seed", range(4))
def test_block_catalogue_equals_brute_force_on_small_instances(seed, max_types):
    # source: exhaustive enumeration of the definition (every choice of <= K types of each kind)
    n_kinds = 2 + seed % 2
    n_types = [(2, 4), (3, 2, 4), (4, 3), (2, 3, 3)][seed]
    opts, kinds, units = _block_instance(seed, n_units=9, n_kinds=n_kinds, n_types=n_types)
    res = optimise_block_catalogue(opts, units, kinds=kinds, max_types=max_types, cost_per_type_usd=150.0)
    assert res.status == "Optimal"
    assert res.objective_usd == pytest.approx(brute_force_blocks(opts, kinds, max_types, 150.0), rel=1e-6)
    check_block_plan(res, opts, kinds, units, max_types, 150.0)
    assert "none0" in res.unserved_units
    assert res.distinct_cases < res.model_stats["units_in_program"]  # the copies merged
    assert res.model_stats["combinations"] <= res.model_stats["options"]
    assert 0 <= res.gap and res.lower_bound_usd <= res.objective_usd * (1 + 1e-9)


@pytest.mark.parametrize("seed", range(2))
def test_block_catalogue_highs_agrees_with_cbc(seed):
    # source: HiGHS (highspy) as an independent solver, same objective and LP bound as CBC
    opts, kinds, units = _block_instance(seed + 30, n_units=20, n_kinds=3, n_types=(4, 3, 3), n_designs=16)
    a = optimise_block_catalogue(opts, units, kinds=kinds, max_types=2, cost_per_type_usd=80.0, solver="cbc")
    b = optimise_block_catalogue(opts, units, kinds=kinds, max_types=2, cost_per_type_usd=80.0, solver="highs")
    assert a.status == b.status == "Optimal"
    assert a.objective_usd == pytest.approx(b.objective_usd, rel=1e-9)
    assert a.lower_bound_usd == pytest.approx(b.lower_bound_usd, rel=1e-7)
    check_block_plan(b, opts, kinds, units, 2, 80.0)


@pytest.mark.parametrize("max_types", [1, 2])
@pytest.mark.parametrize("seed", range(3))
def test_one_kind_gives_the_kit_catalogue(seed, max_types):
    # source: optimise_catalogue (checked against brute force above) on the same options, with the
    # kit id being the block type and each unit's cheapest option per type
    opts, kinds, units = _block_instance(seed + 50, n_units=12, n_kinds=1, n_types=(5,), n_designs=5)
    res = optimise_block_catalogue(opts, units, kinds=kinds, max_types=max_types, cost_per_type_usd=120.0)
    kit_opts = (opts.groupby(["unit_id", kinds[0]], as_index=False).cost_usd.min()
                .rename(columns={kinds[0]: "kit_id"}))
    ref = optimise_catalogue(kit_opts, units, max_types=max_types, cost_per_type_usd=120.0)
    assert res.objective_usd == pytest.approx(ref.objective_usd, rel=1e-9)
    assert len(res.unserved_units) == len(ref.unserved_units)
    check_block_plan(res, opts, kinds, units, max_types, 120.0)


def test_units_no_chosen_block_types_serve_are_reported():
    # source: hand calculation from the definition; with one type per kind only one of a and b can be
    # served (10 USD), the other pays M = 10 x 10 + 10 x 0 + 1 = 101 USD, c has no option at all
    opts = pd.DataFrame([("a", "a1", 10.0, "pv1", "bat1"), ("b", "b1", 10.0, "pv2", "bat2")],
                        columns=["unit_id", "kit_id", "cost_usd", "pv_block_id", "battery_block_id"])
    kinds = ["pv_block_id", "battery_block_id"]
    res = optimise_block_catalogue(opts, ["a", "b", "c"], kinds=kinds, max_types=1, cost_per_type_usd=0.0)
    assert res.objective_usd == pytest.approx(111.0, rel=1e-12)
    assert len(res.unserved_units) == 2 and "c" in res.unserved_units
    served = "a" if res.assignment["a"] else "b"
    assert res.assignment[served] == f"{served}1"
    assert res.chosen_blocks == {"pv_block_id": [f"pv{1 if served == 'a' else 2}"],
                                 "battery_block_id": [f"bat{1 if served == 'a' else 2}"]}
    check_block_plan(res, opts, kinds, ["a", "b", "c"], 1, 0.0)


@pytest.mark.parametrize("seed", range(2))
def test_allowed_block_types_are_respected(seed):
    # source: exhaustive enumeration of the definition restricted to the allowed types
    opts, kinds, units = _block_instance(seed + 70, n_units=10, n_kinds=3, n_types=(3, 3, 2))
    allowed = {kinds[0]: ["pv0", "pv1"], kinds[2]: ["inverter0"]}
    res = optimise_block_catalogue(opts, units, kinds=kinds, max_types=2, cost_per_type_usd=60.0,
                                   allowed_types=allowed)
    for kind, types in allowed.items():
        assert set(res.chosen_blocks[kind]) <= set(types)
    assert res.objective_usd == pytest.approx(brute_force_blocks(opts, kinds, 2, 60.0, allowed), rel=1e-6)
    restricted = opts[opts[kinds[0]].isin(allowed[kinds[0]]) & opts[kinds[2]].isin(allowed[kinds[2]])]
    check_block_plan(res, restricted, kinds, units, 2, 60.0)


def test_block_catalogue_time_limit_returns_a_plan():
    # source: exhaustive enumeration of the definition gives the optimum the plan cannot beat
    opts, kinds, units = _block_instance(9, n_units=40, n_kinds=3, n_types=(5, 4, 4), n_designs=8)
    best = brute_force_blocks(opts, kinds, 2, 30.0)
    for solver in ("cbc", "highs"):
        res = optimise_block_catalogue(opts, units, kinds=kinds, max_types=2, cost_per_type_usd=30.0,
                                       solver=solver, time_limit_s=0.0)
        assert res.status in ("Optimal", TIME_LIMIT_STATUS)
        check_block_plan(res, opts, kinds, units, 2, 30.0)
        assert res.objective_usd >= best * (1 - 1e-12)
        if res.status == TIME_LIMIT_STATUS and np.isfinite(res.lower_bound_usd):
            assert res.gap == pytest.approx((res.objective_usd - res.lower_bound_usd) / res.objective_usd)


def test_block_catalogue_rejects_bad_options():
    opts, kinds, units = _block_instance(1)
    with pytest.raises(ValueError, match="missing column"):
        optimise_block_catalogue(opts.drop(columns=kinds[1]), units, kinds=kinds, max_types=1, cost_per_type_usd=0.0)
    with pytest.raises(ValueError, match="unique within a unit"):
        optimise_block_catalogue(pd.concat([opts, opts.head(1)]), units, kinds=kinds, max_types=1,
                                 cost_per_type_usd=0.0)
    with pytest.raises(ValueError, match="not among kinds"):
        optimise_block_catalogue(opts, units, kinds=kinds, max_types=1, cost_per_type_usd=0.0,
                                 allowed_types={"wind_block_id": ["w1"]})
