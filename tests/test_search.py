"""The bounded option search: it must find what simulating every option finds."""

import numpy as np
import pytest

from fleet import economics
from fleet.config import load_config
from fleet.errors import InputError
from fleet.search import first_per_group, group_codes, settle_groups


@pytest.mark.parametrize("seed", range(12))
def test_settled_groups_know_their_cheapest_qualifying_option_as_brute_force_does(seed):
    # source: exhaustive enumeration: with every option's true cost known, each group's cheapest
    # qualifying option must be among the options the search simulated, at the same cost
    rng = np.random.default_rng(seed)
    n = 300
    true = rng.uniform(100.0, 1000.0, n)
    lb = true * rng.uniform(0.6, 1.0, n)
    families = [rng.integers(0, 20, n), np.where(rng.random(n) < 0.5, rng.integers(0, 6, n), -1)]
    qualifies = np.column_stack([rng.random(n) < 0.4, np.ones(n, bool)])
    calls = []

    def simulate(idx):
        calls.append(idx)
        return true[idx], qualifies[idx]

    done = settle_groups(lb, families, simulate)
    for g, codes in enumerate(families):
        for c in np.unique(codes[codes >= 0]):
            q = (codes == c) & qualifies[:, g]
            expected = true[q].min() if q.any() else np.inf
            found = true[q & done].min() if (q & done).any() else np.inf
            assert found == expected
    every = np.concatenate(calls)
    assert len(every) == len(np.unique(every))  # nothing simulated twice
    assert done.sum() < n  # and some options were never simulated


def test_a_group_without_a_qualifying_option_is_simulated_whole():
    # source: exhaustive enumeration: without a qualifying option nothing bounds the search
    lb = np.array([1.0, 2.0, 3.0, 4.0])
    done = settle_groups(lb, [np.zeros(4, int)], lambda idx: (lb[idx] + 1.0, np.zeros((len(idx), 1), bool)))
    assert done.all()


def test_first_per_group_takes_the_lowest_keys_of_each_group():
    codes = np.array([0, 0, 0, 1, 1, -1])
    key = np.array([3.0, 1.0, 2.0, 5.0, 4.0, 0.0])
    assert sorted(first_per_group(codes >= 0, codes, key, 2).tolist()) == [1, 2, 3, 4]
    assert group_codes(np.array([5, 5, 7]), np.array([1, 2, 1]), where=np.array([True, True, False])).tolist() == [0, 1, -1]


@pytest.mark.parametrize("horizon, rate", [(20, 0.08), (15, 0.0), (25, 0.12), (10, 0.03)])
def test_lifecycle_cost_never_rises_with_a_longer_battery_life(horizon, rate):
    # source: brute force over a dense grid of lives; this is why an option's cost with its battery
    # at calendar life bounds its simulated cost from below (cycling only shortens the life)
    lives = np.linspace(0.5, 30.0, 3001)
    cost = economics.lifecycle_cost(1000.0, 300.0, lives, 100.0, 200.0, horizon_years=horizon, rate=rate,
                                    om_fraction=0.02, controller_life_years=10.0, inverter_life_years=10.0,
                                    array_life_years=25.0, delivery_usd=50.0, battery_delivery_usd=20.0)
    assert np.all(np.diff(cost) <= 1e-9)
    assert cost[0] > cost[-1]


def test_an_unknown_option_search_is_refused():
    with pytest.raises(InputError) as err:
        load_config().with_overrides(catalogue={"option_search": "some"})
    assert "catalogue.option_search" in str(err.value)
