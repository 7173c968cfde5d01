import itertools

import numpy as np
import pandas as pd
import pytest

from fleet.catalogue import custom_best, merge_identical_units, optimise_catalogue


def _instance(seed, n_units=9, n_kits=6, density=0.6):
    rng = np.random.default_rng(seed)
    rows = []
    for u in range(n_units):
        for k in range(n_kits):
            if rng.random() < density or k == n_kits - 1:  # the last kit serves everyone
                rows.append((f"u{u}", f"k{k}", float(rng.integers(100, 1000))))
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


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("max_types", [1, 2, 3])
def test_integer_program_equals_brute_force_on_small_instances(seed, max_types):
    # source: exhaustive enumeration of every catalogue of at most K types (independent check)
    opts = _instance(seed)
    units = sorted(opts.unit_id.unique())
    res = optimise_catalogue(opts, units, max_types=max_types, cost_per_type_usd=150.0)
    assert res.objective_usd == pytest.approx(brute_force(opts, units, max_types, 150.0), rel=1e-9)
    assert len(res.chosen_kits) <= max_types
    assert set(res.assignment) <= set(res.chosen_kits)
    assert res.gap >= 0


def test_highs_agrees_with_cbc():
    # source: HiGHS (highspy) as an independent second solver
    opts = _instance(11, n_units=15, n_kits=8)
    units = sorted(opts.unit_id.unique())
    a = optimise_catalogue(opts, units, max_types=2, cost_per_type_usd=50.0, solver="cbc")
    b = optimise_catalogue(opts, units, max_types=2, cost_per_type_usd=50.0, solver="highs")
    assert a.objective_usd == pytest.approx(b.objective_usd, rel=1e-9)


def test_units_that_no_chosen_type_serves_are_reported_not_dropped():
    opts = pd.DataFrame([("a", "k1", 10.0), ("b", "k2", 10.0), ("c", "k3", 10.0)], columns=["unit_id", "kit_id", "cost_usd"])
    res = optimise_catalogue(opts, ["a", "b", "c", "d"], max_types=2, cost_per_type_usd=0.0)
    assert len(res.chosen_kits) == 2
    assert sorted(res.unserved_units) == sorted(["d"] + [u for u in "abc" if res.assignment[u] == ""])
    assert len(res.unserved_units) == 2


def test_identical_units_are_merged_into_one_case():
    opts = pd.DataFrame([("a", "k1", 10.0), ("a", "k2", 12.0), ("b", "k1", 10.0), ("b", "k2", 12.0),
                         ("c", "k1", 11.0)], columns=["unit_id", "kit_id", "cost_usd"])
    merged, case_of = merge_identical_units(opts)
    assert case_of["a"] == case_of["b"] != case_of["c"]
    assert merged.groupby("case").weight.first().sum() == 3


def test_custom_best_takes_the_cheapest_option_per_unit():
    opts = _instance(3)
    best = custom_best(opts)
    assert (best.set_index("unit_id").cost_usd == opts.groupby("unit_id").cost_usd.min()).all()
