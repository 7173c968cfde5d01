"""Rainflow cycle counting of a state-of-charge trace and battery wear by
linear damage summation.

A battery's cycle life falls with the depth of its cycles. To age a battery
from an hourly state-of-charge trace, the trace is reduced to its reversals
(turning points), the reversals are paired into full and half cycles by
rainflow counting as set out in ASTM E1049 clause 5.4.4 [1]_, and each
cycle of range ``r`` (depth of discharge, fraction of capacity) uses up
``count / N(r)`` of the battery's life, with the cycle-life curve
``N(r) = a * r**(-b)`` (see :func:`fleet.battery.cycle_life_fit`), summed
linearly after Miner [2]_.

The counting rule, applied each time a reversal is read (§5.4.4):

* ``X`` is the range between the newest reversal and the one before it,
  ``Y`` the range between the two reversals before that;
* while at least three reversals are held and ``X >= Y``: if ``Y`` contains
  the starting point, ``Y`` counts as a half cycle and the starting point is
  discarded; otherwise ``Y`` counts as one cycle and both of its points are
  discarded;
* at the end, every range left between consecutive held reversals counts as
  a half cycle.

The held reversals form a stack. The streaming functions
(:func:`push_reversal`, :func:`residue_damage`, :func:`reversals`) are numba
compiled and work on a preallocated float64 stack, so the dispatch kernel can
age its battery hour by hour without allocating. A stack of fixed length may
fill up; :func:`push_reversal` then counts its oldest range as a half cycle
early (every range is still counted exactly once, but a deep cycle that would
have closed later is split). The held ranges fall strictly from the bottom of
the stack to the top, so the stack fills only in a run of ever-shallower
cycles longer than the stack (a few dozen reversals are ample for hourly
state-of-charge traces).

:func:`count_cycles` is the plain (unbounded) reference that lists every
cycle; :func:`count_cycles_streaming` lists the same cycles as the streaming
functions count them, for comparing the two.

Units: series values and ranges in the unit of the series (state of charge
as a fraction of capacity for battery ageing); damage is the fraction of
cycle life used (1.0 = end of life).

References
----------
.. [1] ASTM E1049-85 (Reapproved 2017), Standard Practices for Cycle Counting
   in Fatigue Analysis, ASTM International, §5.4.4 Rainflow Counting.
.. [2] Miner, M. A. (1945). Cumulative damage in fatigue. Journal of Applied
   Mechanics 12(3):A159-A164 (linear damage summation).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numba import njit

__all__ = [
    "push_reversal", "residue_damage", "reversals", "count_cycles", "count_cycles_streaming", "damage",
]

_COLUMNS = ["range", "mean", "count"]


# ---------------------------------------------------------------------------
# Streaming kernel functions (numba)
# ---------------------------------------------------------------------------

@njit(cache=True, inline="always")
def push_reversal(stack, n, x, inv_a, b):
    """Read one reversal into the rainflow stack and count the cycles it closes [1]_.

    numba-compiled (inlined when called from another njit function); no
    allocation.

    Parameters
    ----------
    stack : float64 array, len >= 2
        Held reversals in ``stack[0:n]``, oldest first (preallocated; changed
        in place).
    n : int
        Number of reversals held, ``0 <= n <= len(stack)``.
    x : float
        The new reversal (unit of the series; state of charge as a fraction).
        Successive reversals must alternate in direction, as those from
        :func:`reversals` do.
    inv_a : float
        ``1 / a`` of the cycle-life curve ``N(r) = a * r**(-b)`` (1/cycles).
    b : float
        Exponent of the cycle-life curve (dimensionless, typically 0.5-2.5).

    Returns
    -------
    n_new : int
        Number of reversals held afterwards.
    damage_added : float
        Miner damage of the cycles counted, ``sum(count * r**b * inv_a)``
        (fraction of life; ranges ``r <= 0`` add nothing) [2]_.
    cycles_added : float
        Cycles counted: 1 per full cycle, 0.5 per half cycle.

    Notes
    -----
    If the stack is full (``n == len(stack)``) the range between its two
    oldest reversals is first counted as a half cycle and the oldest
    reversal dropped. Then ``x`` is pushed and the §5.4.4 rule applied
    repeatedly to the three newest reversals: with ``X`` the newest range
    and ``Y`` the one before, while ``n >= 3`` and ``X >= Y``, ``Y`` counts
    as a half cycle and the starting point is dropped if ``n == 3``, else
    ``Y`` counts as one cycle and its two points are dropped.
    """
    dmg = 0.0
    cyc = 0.0
    if n == stack.shape[0]:
        r = abs(stack[1] - stack[0])
        if r > 0.0:
            dmg += 0.5 * r ** b * inv_a
        cyc += 0.5
        for i in range(n - 1):
            stack[i] = stack[i + 1]
        n -= 1
    stack[n] = x
    x = stack[n]  # as stored (float64)
    n += 1
    while n >= 3:  # x stays on top: stack[n - 1] == x throughout
        y = abs(stack[n - 2] - stack[n - 3])
        if abs(x - stack[n - 2]) < y:
            break
        if n == 3:  # Y contains the starting point: half cycle, drop the start
            w = 0.5
            stack[0] = stack[1]
            stack[1] = x
            n = 2
        else:  # full cycle: drop both points of Y
            w = 1.0
            stack[n - 3] = x
            n -= 2
        if y > 0.0:
            dmg += w * y ** b * inv_a
        cyc += w
    return n, dmg, cyc


@njit(cache=True)
def residue_damage(stack, n, inv_a, b):
    """Damage of the reversals left on the stack, each consecutive range a half cycle [1]_.

    This is the last step of §5.4.4, done once at the end of a trace.

    Parameters
    ----------
    stack : float64 array
        Held reversals in ``stack[0:n]`` (not changed).
    n : int
        Number of reversals held.
    inv_a, b : float
        ``1 / a`` (1/cycles) and ``b`` of ``N(r) = a * r**(-b)``.

    Returns
    -------
    damage : float
        ``sum(0.5 * r**b * inv_a)`` over the ``n - 1`` ranges (fraction of
        life; ranges ``r <= 0`` add nothing) [2]_.
    cycles : float
        ``0.5 * (n - 1)`` (zero for ``n < 2``).
    """
    dmg = 0.0
    cyc = 0.0
    for i in range(n - 1):
        r = abs(stack[i + 1] - stack[i])
        if r > 0.0:
            dmg += 0.5 * r ** b * inv_a
        cyc += 0.5
    return dmg, cyc


@njit(cache=True)
def reversals(series, out):
    """Turning points of a series, written to ``out`` [1]_.

    Parameters
    ----------
    series : 1-D float64 array
        Values in time order (e.g. state of charge, fraction). No NaN.
    out : float64 array, len >= len(series)
        Receives the reversals in ``out[0:count]``.

    Returns
    -------
    count : int
        Number of reversals. The first point is kept; each later run of
        equal values counts as one point; a point is kept where the
        direction changes, and the last point is kept unless the series is
        constant (then ``count == 1``; ``count == 0`` for an empty series).
        Successive reversals alternate in direction.
    """
    n = series.shape[0]
    if n == 0:
        return 0
    prev = series[0]
    out[0] = prev
    m = 1
    rising = 0  # direction of the last change: +1 up, -1 down, 0 none yet
    for i in range(1, n):
        v = series[i]
        if v == prev:
            continue
        d = 1 if v > prev else -1
        if d == -rising:
            out[m] = prev
            m += 1
        rising = d
        prev = v
    if rising != 0:
        out[m] = prev
        m += 1
    return m


@njit(cache=True)
def _damage_of_reversals(rev, m, stack, inv_a, b):
    """Damage and cycles of ``rev[0:m]`` streamed through ``stack``."""
    n = 0
    total = 0.0
    cycles = 0.0
    for i in range(m):
        n, d, c = push_reversal(stack, n, rev[i], inv_a, b)
        total += d
        cycles += c
    d, c = residue_damage(stack, n, inv_a, b)
    return total + d, cycles + c


# ---------------------------------------------------------------------------
# Python API
# ---------------------------------------------------------------------------

def _as_series(series) -> np.ndarray:
    x = np.ascontiguousarray(np.asarray(series, dtype=np.float64).ravel())
    if not np.all(np.isfinite(x)):
        raise ValueError("series has NaN or infinite values")
    return x


def _reversal_array(series) -> np.ndarray:
    x = _as_series(series)
    out = np.empty(x.shape[0], dtype=np.float64)
    return out[:reversals(x, out)]


def _frame(rows) -> pd.DataFrame:
    return pd.DataFrame(np.asarray(rows, dtype=np.float64).reshape(-1, 3), columns=_COLUMNS)


def count_cycles(series) -> pd.DataFrame:
    """Rainflow cycles of a series, listed one by one (plain reference) [1]_.

    Parameters
    ----------
    series : array_like, 1-D
        Values in time order (state of charge as a fraction for battery
        ageing). Must be finite.

    Returns
    -------
    pandas.DataFrame
        One row per cycle in the order counted (residue half cycles last,
        oldest first), columns ``range`` (peak-to-valley, unit of the
        series), ``mean`` (mid-point of the cycle, unit of the series) and
        ``count`` (1.0 full cycle, 0.5 half cycle).

    Notes
    -----
    The §5.4.4 rule on the reversals of ``series`` (:func:`reversals`) with
    an unbounded stack.
    """
    stack: list[float] = []
    rows = []
    for x in _reversal_array(series):
        stack.append(float(x))
        while len(stack) >= 3:
            big_x = abs(stack[-1] - stack[-2])
            y = abs(stack[-2] - stack[-3])
            if big_x < y:
                break
            if len(stack) == 3:
                rows.append((y, 0.5 * (stack[0] + stack[1]), 0.5))
                del stack[0]
            else:
                rows.append((y, 0.5 * (stack[-3] + stack[-2]), 1.0))
                del stack[-3:-1]
    for p, q in zip(stack[:-1], stack[1:]):
        rows.append((abs(q - p), 0.5 * (p + q), 0.5))
    return _frame(rows)


def count_cycles_streaming(series, stack_len: int | None = None, a: float = 1.0, b: float = 1.0) -> pd.DataFrame:
    """Rainflow cycles as the streaming functions count them, listed one by one.

    Runs :func:`reversals`, :func:`push_reversal` on a stack of
    ``stack_len`` and :func:`residue_damage`, and reads the cycles counted
    at each push from the stack before and after it: the reversals a push
    removes are (after an overflow half cycle) pairs from just below the new
    top, one full cycle each, then possibly the starting point (half cycle).
    For tests and diagnostics; the kernel calls the njit functions directly.

    Parameters
    ----------
    series : array_like, 1-D
        Values in time order. Must be finite.
    stack_len : int, optional
        Stack length (>= 2); default: long enough never to fill.
    a, b : float
        Cycle-life curve ``N(r) = a * r**(-b)`` for the damage totals.

    Returns
    -------
    pandas.DataFrame
        Columns ``range``, ``mean``, ``count`` as :func:`count_cycles`.
        ``attrs`` holds what the njit functions returned, summed:
        ``"damage"`` (fraction of life), ``"cycles"``, and ``"overflows"``,
        the number of pushes that found the stack full.

    Raises
    ------
    RuntimeError
        If the stack after a push is not what the cycles read from it
        imply (an inconsistency in :func:`push_reversal`).
    """
    rev = _reversal_array(series)
    if stack_len is None:
        stack_len = max(rev.shape[0], 2)
    if stack_len < 2:
        raise ValueError("stack_len must be at least 2")
    stack = np.zeros(int(stack_len), dtype=np.float64)
    inv_a = 1.0 / float(a)
    b = float(b)
    n = 0
    rows = []
    total = cycles = 0.0
    overflows = 0

    def half(p, q):
        rows.append((abs(q - p), 0.5 * (p + q), 0.5))

    for x in rev:
        held = [float(v) for v in stack[:n]]
        if n == stack.shape[0]:
            overflows += 1
            half(held[0], held[1])
            del held[0]
        held.append(float(x))
        n, d, c = push_reversal(stack, n, float(x), inv_a, b)
        total += d
        cycles += c
        removed = len(held) - n
        if removed < 0:
            raise RuntimeError("push_reversal added more than one reversal")
        for _ in range(removed // 2):
            p, q = held[-3], held[-2]
            rows.append((abs(q - p), 0.5 * (p + q), 1.0))
            del held[-3:-1]
        if removed % 2:
            half(held[0], held[1])
            del held[0]
        if held != [float(v) for v in stack[:n]]:
            raise RuntimeError("stack after push_reversal does not match the cycles counted")
    d, c = residue_damage(stack, n, inv_a, b)
    total += d
    cycles += c
    for p, q in zip(stack[:n - 1], stack[1:n]):
        half(float(p), float(q))
    out = _frame(rows)
    out.attrs.update(damage=total, cycles=cycles, overflows=overflows)
    return out


def damage(series, a: float, b: float) -> float:
    """Miner damage of a series from its rainflow cycles [1]_, [2]_.

    Parameters
    ----------
    series : array_like, 1-D
        State of charge in time order (fraction of capacity). Must be
        finite.
    a : float
        Coefficient of the cycle-life curve ``N(r) = a * r**(-b)``, cycles
        to failure at a depth of discharge of 1 (cycles, > 0).
    b : float
        Exponent of the curve (dimensionless).

    Returns
    -------
    float
        ``sum(count * r**b / a)`` over the rainflow cycles of ``series``
        (fraction of cycle life used; 1.0 = end of life). Ranges of zero add
        nothing.
    """
    if not a > 0.0:
        raise ValueError("a must be positive")
    rev = _reversal_array(series)
    stack = np.empty(max(rev.shape[0], 2), dtype=np.float64)  # never fills: exact counting
    total, _ = _damage_of_reversals(rev, rev.shape[0], stack, 1.0 / float(a), float(b))
    return float(total)
