"""Rainflow counting (fleet.cycles) against ASTM E1049 and the `rainflow` package.

The random traces below are test inputs only; every expected value comes from
the ASTM E1049 example, from `rainflow` (PyPI, 3.x) run on the same input, or
from a property of the §5.4.4 rule proved in the comment beside the check.
"""

from collections import defaultdict

import numpy as np
import pytest
import rainflow
from numba import njit

from fleet.cycles import (count_cycles, count_cycles_streaming, damage, push_reversal, residue_damage,
                          reversals)

# ASTM E1049-85 (2017) §5.4.4, Fig. 6 example load history (points A..I) and its counts
# source: ASTM E1049-85 (2017) §5.4.4, Fig. 6 example as reproduced in the rainflow package tests
# (rainflow 3.x tests/test_rainflow.py: series [-2, 1, -3, 5, -1, 3, -4, 4, -2],
#  counts [(3, 0.5), (4, 1.5), (6, 0.5), (8, 1.0), (9, 0.5)])
ASTM_SERIES = [-2.0, 1.0, -3.0, 5.0, -1.0, 3.0, -4.0, 4.0, -2.0]
ASTM_COUNTS = {3.0: 0.5, 4.0: 1.5, 6.0: 0.5, 8.0: 1.0, 9.0: 0.5}


def _by_range(df):
    out = defaultdict(float)
    for r, c in zip(df["range"], df["count"]):
        out[float(r)] += float(c)
    return dict(out)


def _rainflow_rows(series):
    """(range, mean, count) from rainflow.extract_cycles, in its order, zero ranges left out.

    rainflow 3.2 reports a constant series of 3+ points as one half cycle of range 0
    (it keeps the last point as a reversal); fleet collapses the run to one point.
    Neither adds damage.
    """
    return [(float(r), float(m), float(c)) for r, m, c, _, _ in rainflow.extract_cycles(list(series)) if r > 0]


def _rows(df):
    return list(zip(df["range"].astype(float), df["mean"].astype(float), df["count"].astype(float)))


def _assert_rows_close(got, want, tol=1e-12):
    assert len(got) == len(want)
    if got:
        np.testing.assert_allclose(np.asarray(got), np.asarray(want), rtol=0, atol=tol)


def _reversal_values(series):
    x = np.asarray(series, dtype=np.float64)
    out = np.empty(x.shape[0])
    return out[:reversals(x, out)]


# ---------------------------------------------------------------------------
# Random test traces (inputs only; expected values come from `rainflow`)
# ---------------------------------------------------------------------------

def _traces(seed=20240611, per_kind=80):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(per_kind):
        n = int(rng.integers(3, 400))
        out.append(("uniform", rng.random(n)))
        # random-walk state of charge clipped to [0, 1]: flat runs at empty and full
        out.append(("walk", np.clip(0.5 + np.cumsum(rng.normal(0.0, 0.12, n)), 0.0, 1.0)))
        # quantised values: equal values and equal ranges (X == Y ties in §5.4.4)
        out.append(("ties", rng.integers(0, 5, n) / 4.0))
        # daily SOC shape: charged in daylight, held at 1.0 for hours when full, drawn down at night
        days = int(rng.integers(1, 15))
        soc = [float(rng.uniform(0.3, 1.0))]
        for h in range(days * 24):
            step = rng.uniform(0.05, 0.3) if 8 <= h % 24 < 16 else -rng.uniform(0.0, 0.06)
            soc.append(min(1.0, max(0.2, soc[-1] + step)))
        out.append(("daily", np.array(soc)))
    return out


TRACES = _traces()


# ---------------------------------------------------------------------------
# 1. ASTM E1049 example
# ---------------------------------------------------------------------------

def test_astm_example_counts():
    # source: ASTM E1049-85 (2017) §5.4.4, Fig. 6 example as reproduced in the rainflow package tests
    assert _by_range(count_cycles(ASTM_SERIES)) == ASTM_COUNTS
    assert _by_range(count_cycles_streaming(ASTM_SERIES)) == ASTM_COUNTS
    # source: same example, every point repeated (rainflow 3.x tests, "series with zero derivatives")
    doubled = [v for v in ASTM_SERIES for _ in range(2)]
    assert _by_range(count_cycles(doubled)) == ASTM_COUNTS


def test_astm_example_order_and_means_match_rainflow():
    # source: rainflow 3.2 extract_cycles on the ASTM E1049-85 (2017) Fig. 6 history (order counted, mean)
    want = _rainflow_rows(ASTM_SERIES)
    _assert_rows_close(_rows(count_cycles(ASTM_SERIES)), want, tol=0.0)
    _assert_rows_close(_rows(count_cycles_streaming(ASTM_SERIES)), want, tol=0.0)


def test_astm_example_damage():
    # Miner sum with N(r) = a r^-b over the standard's counts
    # source: ASTM E1049-85 (2017) §5.4.4 Fig. 6 counts (rainflow package tests); Miner (1945) linear sum
    for a, b in ((1.0, 1.0), (1500.0, 1.7), (800.0, 0.6)):
        want = sum(c * r ** b / a for r, c in ASTM_COUNTS.items())
        assert damage(ASTM_SERIES, a, b) == pytest.approx(want, rel=1e-14)


# ---------------------------------------------------------------------------
# 2. Agreement with the rainflow package
# ---------------------------------------------------------------------------

def test_reversals_match_rainflow():
    for kind, s in TRACES:
        # source: rainflow 3.2 reversals() (first and last points kept, flat runs collapsed)
        want = [float(v) for _, v in rainflow.reversals(list(s))]
        if len(set(s.tolist())) == 1:
            continue  # constant: rainflow keeps the last point too (see _rainflow_rows)
        np.testing.assert_array_equal(_reversal_values(s), want, err_msg=kind)


def test_cycles_and_damage_match_rainflow():
    rng = np.random.default_rng(7)
    for kind, s in TRACES:
        # source: rainflow 3.2 extract_cycles (ASTM E1049 §5.4.4 implementation), same order and values
        want = _rainflow_rows(s)
        got = count_cycles(s)
        _assert_rows_close(_rows(got), want)
        # same multiset of (range, count)
        _assert_rows_close(sorted((r, c) for r, _, c in _rows(got)), sorted((r, c) for r, _, c in want))
        # streaming functions with a stack that never fills give the plain list exactly
        streamed = count_cycles_streaming(s)
        assert streamed.attrs["overflows"] == 0
        assert streamed.equals(got), kind
        a = float(rng.uniform(300.0, 5000.0))
        b = float(rng.uniform(0.5, 2.5))
        # source: rainflow 3.2 cycles; Miner (1945) linear damage sum with N(r) = a r^-b
        want_d = sum(c * r ** b / a for r, _, c in want)
        assert damage(s, a, b) == pytest.approx(want_d, rel=1e-12, abs=1e-300), kind


def test_flat_full_battery_runs_match_rainflow():
    # SOC held at 1.0 for hours at a time (a full battery), with shallow night cycles
    soc = np.ones(24 * 6)
    rng = np.random.default_rng(3)
    for d in range(6):
        night = np.r_[np.arange(18, 24), np.arange(0, 7)] + 24 * d
        night = night[night < soc.size]
        soc[night] = 1.0 - np.cumsum(rng.uniform(0.01, 0.05, night.size))
    # source: rainflow 3.2 extract_cycles on the same trace
    _assert_rows_close(_rows(count_cycles(soc)), _rainflow_rows(soc))
    want = sum(c * r ** 2.0 / 1000.0 for r, _, c in _rainflow_rows(soc))
    assert damage(soc, 1000.0, 2.0) == pytest.approx(want, rel=1e-12)


# ---------------------------------------------------------------------------
# 3. Streaming with a bounded stack
# ---------------------------------------------------------------------------

def _check_conservation(s, df, a, b):
    """Properties of the §5.4.4 rule that hold for any stack length (proofs beside each check)."""
    rev = _reversal_values(s)
    n_rev = rev.size
    ranges = np.abs(np.diff(rev))
    # Each full cycle removes two reversals, each half cycle one (overflow, starting point,
    # residue), and one reversal is left at the end: sum(count) = (n_rev - 1) / 2, exactly.
    assert df["count"].sum() == max(n_rev - 1, 0) / 2.0
    # Reversals alternate and held ranges fall from the bottom of the stack to the top, so a
    # full cycle Y between neighbours X >= Y and Z > Y turns three ranges Z, Y, X into one of
    # Z - Y + X: counting Y twice (full) and every other range as a half keeps
    # 2 * sum(count * range) equal to the total variation of the reversals.
    total_variation = ranges.sum()
    assert 2.0 * (df["count"] * df["range"]).sum() == pytest.approx(total_variation, rel=1e-9, abs=1e-12)
    if n_rev >= 2:
        assert df["range"].min() > 0.0
        assert df["range"].max() <= rev.max() - rev.min() + 1e-12
    # Damage bounds, f(r) = r^b: (i) "potential" = counted damage + half-cycle damage of the held
    # ranges starts at d0 = sum(0.5 f(r_i) / a) over the reversal ranges; half-cycle steps leave it
    # unchanged, a full-cycle step replaces (Z, X) by (Z - Y + X, Y), which majorizes it, so for
    # convex f (b >= 1) it can only rise (Karamata), for concave f (b <= 1) only fall.
    # (ii) r^b = r * r^(b-1) with r <= R = max - min: d <= or >= sum(c r) R^(b-1) / a.
    d = (df["count"] * df["range"] ** b).sum() / a
    d0 = 0.5 * (ranges ** b).sum() / a
    if n_rev >= 2:
        d_tv = 0.5 * total_variation * (rev.max() - rev.min()) ** (b - 1.0) / a
        lo, hi = (d0, d_tv) if b >= 1.0 else (d_tv, d0)
        assert lo * (1 - 1e-9) - 1e-300 <= d <= hi * (1 + 1e-9) + 1e-300
    # what push_reversal / residue_damage returned agrees with the cycles read from the stack
    assert df.attrs["damage"] == pytest.approx(d, rel=1e-12, abs=1e-300)
    assert df.attrs["cycles"] == df["count"].sum()


def test_small_stack_conserves():
    rng = np.random.default_rng(11)
    overflowed = 0
    for kind, s in TRACES[::2]:
        a = float(rng.uniform(300.0, 5000.0))
        b = float(rng.choice([0.5, 0.8, 1.0, 1.6, 2.5]))
        for stack_len in (2, 3, 4):
            df = count_cycles_streaming(s, stack_len=stack_len, a=a, b=b)
            overflowed += df.attrs["overflows"] > 0
            _check_conservation(s, df, a, b)
        _check_conservation(s, count_cycles_streaming(s, a=a, b=b), a, b)
    assert overflowed > 50  # the bounded stacks were really exercised


def test_large_stack_equals_unbounded():
    for kind, s in TRACES:
        df = count_cycles_streaming(s, stack_len=64)
        assert df.attrs["overflows"] == 0
        assert df.equals(count_cycles(s)), kind


def test_converging_history_forces_overflow():
    # Ever-shallower cycles (0, 1, 0.02, 0.98, ...) keep every reversal on the stack.
    k = np.arange(40)
    s = np.where(k % 2 == 0, 0.01 * k, 1.0 - 0.01 * k)
    rev = _reversal_values(s)
    assert rev.size == s.size
    full = count_cycles_streaming(s, stack_len=64, a=1000.0, b=1.5)
    assert full.attrs["overflows"] == 0
    # source: rainflow 3.2 extract_cycles on the same trace
    _assert_rows_close(_rows(full), _rainflow_rows(s))
    small = count_cycles_streaming(s, stack_len=4, a=1000.0, b=1.5)
    assert small.attrs["overflows"] > 0
    _check_conservation(s, small, 1000.0, 1.5)


@njit(cache=False)
def _kernel_like(rev, m, stack, inv_a, b):
    # how the dispatch kernel uses it: scalars and one preallocated stack, push per reversal
    n = 0
    dmg = 0.0
    cyc = 0.0
    for i in range(m):
        n, d, c = push_reversal(stack, n, rev[i], inv_a, b)
        dmg += d
        cyc += c
    d, c = residue_damage(stack, n, inv_a, b)
    return dmg + d, cyc + c


def test_push_reversal_inside_njit_matches_streaming_helper():
    for kind, s in TRACES[:40]:
        rev = _reversal_values(s)
        for stack_len in (3, 8):
            got_d, got_c = _kernel_like(rev, rev.size, np.zeros(stack_len), 1.0 / 2000.0, 1.3)
            ref = count_cycles_streaming(s, stack_len=stack_len, a=2000.0, b=1.3)
            assert got_d == pytest.approx(ref.attrs["damage"], rel=1e-12, abs=1e-300)
            assert got_c == ref.attrs["cycles"]


# ---------------------------------------------------------------------------
# 4. Edge cases
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("s", [[], [0.7], [1.0, 1.0], [1.0] * 30])
def test_constant_series(s):
    # no range, no cycle (a battery held full does not age by cycling)
    assert len(count_cycles(s)) == 0
    assert len(count_cycles_streaming(s)) == 0
    assert damage(s, 1000.0, 1.5) == 0.0
    assert _reversal_values(s).size == min(len(s), 1)


def test_two_points_is_one_half_cycle():
    # source: ASTM E1049-85 (2017) §5.4.4 as implemented in rainflow 3.2 (ranges left at the end each
    # count as a half cycle); rainflow itself returns nothing for a two-point series (its 3.1.0
    # change #56), so the single range is checked against the rule, not the package.
    df = count_cycles([0.2, 0.9])
    assert _rows(df) == [(pytest.approx(0.7, abs=1e-15), pytest.approx(0.55, abs=1e-15), 0.5)]
    assert damage([0.2, 0.9], 1000.0, 1.5) == pytest.approx(0.5 * 0.7 ** 1.5 / 1000.0, rel=1e-14)


@pytest.mark.parametrize("s", [np.linspace(1.0, 0.2, 9), [0.1, 0.1, 0.3, 0.3, 0.3, 0.8, 1.0, 1.0]])
def test_monotone_series_is_one_half_cycle(s):
    # source: rainflow 3.2 extract_cycles on the same series
    want = _rainflow_rows(s)
    assert [c for _, _, c in want] == [0.5]
    _assert_rows_close(_rows(count_cycles(s)), want)
    assert damage(s, 1000.0, 2.0) == pytest.approx(0.5 * want[0][0] ** 2 / 1000.0, rel=1e-14)


def test_nan_is_rejected():
    with pytest.raises(ValueError):
        count_cycles([0.5, np.nan, 0.7])
    with pytest.raises(ValueError):
        damage([0.5, np.inf, 0.7], 1000.0, 1.0)
