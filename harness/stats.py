"""Paired statistics for comparing layouts round by round."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

#: Above this many non-zero differences the exact null distribution gives way to the normal
#: approximation with continuity and tie corrections.
EXACT_LIMIT = 50


def _exact_upper_tail(n: int, w: float) -> float:
    """P(W+ >= w) under H0 for n untied, non-zero differences (ranks 1..n, each sign 1/2)."""
    total = n * (n + 1) // 2
    counts = np.zeros(total + 1)
    counts[0] = 1.0
    for rank in range(1, n + 1):
        counts[rank:] = counts[rank:] + counts[: total + 1 - rank].copy()
    threshold = math.ceil(w - 1e-9)
    return float(counts[threshold:].sum() / 2.0**n)


def wilcoxon_greater(differences: Sequence[float]) -> tuple[float, float]:
    """One-sided Wilcoxon signed-rank test of H0 "median difference <= 0" against "> 0".

    Zero differences are dropped (Wilcoxon's original treatment); ties share average ranks.
    Returns ``(W+, p)``: the sum of the ranks of positive differences and the p-value, exact
    for up to EXACT_LIMIT untied differences, else from the normal approximation.
    """
    d = np.asarray(differences, dtype=float)
    d = d[d != 0]
    n = d.size
    if n == 0:
        return 0.0, 1.0
    magnitudes = np.abs(d)
    order = np.argsort(magnitudes, kind="mergesort")
    ranks = np.empty(n)
    sorted_mag = magnitudes[order]
    i = 0
    while i < n:  # average ranks over ties
        j = i
        while j + 1 < n and sorted_mag[j + 1] == sorted_mag[i]:
            j += 1
        ranks[order[i : j + 1]] = (i + j) / 2 + 1
        i = j + 1
    w_plus = float(ranks[d > 0].sum())
    tied = np.unique(sorted_mag).size < n
    if n <= EXACT_LIMIT and not tied:
        return w_plus, _exact_upper_tail(n, w_plus)
    mean = n * (n + 1) / 4
    _, tie_counts = np.unique(sorted_mag, return_counts=True)
    var = n * (n + 1) * (2 * n + 1) / 24 - float(((tie_counts**3) - tie_counts).sum()) / 48
    z = (w_plus - mean - 0.5) / math.sqrt(var) if var > 0 else 0.0
    return w_plus, 0.5 * math.erfc(z / math.sqrt(2))


def holm(p_values: Sequence[float]) -> list[float]:
    """Holm's step-down adjusted p-values (family-wise error control), in the input order."""
    m = len(p_values)
    order = sorted(range(m), key=lambda i: p_values[i])
    adjusted = [0.0] * m
    running = 0.0
    for step, i in enumerate(order):
        running = max(running, min(1.0, (m - step) * p_values[i]))
        adjusted[i] = running
    return adjusted


def slower_beyond(slower: Sequence[float], faster: Sequence[float], floor: float) -> float:
    """p-value of "``slower`` takes more than (1 + floor) times ``faster``", paired element by
    element: the one-sided Wilcoxon test above on log-ratios shifted by log(1 + floor).
    The tiers, flips, adaptive looks and the side-by-side gate all decide with this test."""
    d = np.log(np.asarray(slower, dtype=float)) - np.log(np.asarray(faster, dtype=float)) - math.log1p(floor)
    return wilcoxon_greater(d)[1] if d.size else 1.0


def split_rounds(rounds: Sequence[int]) -> tuple[list[int], list[int]]:
    """Choosing and reporting rounds: alternate positions of the sorted rounds; with fewer than
    four, both are every round (the report says so)."""
    ordered = sorted(rounds)
    if len(ordered) < 4:
        return ordered, ordered
    return ordered[0::2], ordered[1::2]
