"""Adaptive effort: more rounds for a group whose leader cannot yet be told from the runner-up.

The rule (``[timing] max_seconds`` > 0): after the planned rounds, look at the group. Take each
layout's fastest case so far, order the layouts by median, and test the runner-up against the
leader with the ranking's paired test (one-sided Wilcoxon signed-rank on per-round log-ratios
beyond the floor). If that test does not separate them, double the measured rounds and look
again, while the doubled rounds fit in ``max_rounds`` and the doubled time in ``max_seconds``.

Looking repeatedly and stopping when the data look decisive would inflate false separations, so
the ranking divides its alpha by the most looks the policy allows (``Timing.max_looks``): the
tiers then hold at family-wise level alpha whatever the stopping point (Bonferroni over looks,
a union bound; tested with identical layouts in tests/test_adaptive.py).
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Mapping, Sequence

import numpy as np

from harness.stats import holm, slower_beyond, split_rounds

#: Decision level and floor of the look (the ranking's defaults).
LOOK_ALPHA = 0.05
LOOK_FLOOR = 0.03


def leader_undecided(rows: Sequence[tuple[str, int, int, str, int]], layout_of: Mapping[str, str],
                     alpha: float = LOOK_ALPHA, floor: float = LOOK_FLOOR) -> bool:
    """True when the runner-up layout is not separated from the leader on the measured rows,
    judged the way the ranking will judge it: layouts ordered by their best case on the choosing
    half of the rounds, each tested against the leader on the reporting half, Holm-corrected, at
    the ranking's alpha.

    ``rows`` are (case_id, round, position, phase, ns); ``layout_of`` maps the ranked cases
    (parallel builds of the group's kernel) to their layouts; other cases are ignored.
    """
    by_case: dict[str, dict[int, int]] = defaultdict(dict)
    for case_id, rnd, _, phase, ns in rows:
        if phase == "measure" and case_id in layout_of:
            by_case[case_id][rnd] = ns
    rounds = sorted({r for samples in by_case.values() for r in samples})
    choose, report = split_rounds(rounds)
    best: dict[str, tuple[float, str]] = {}
    for case_id, samples in by_case.items():
        chosen = [samples[r] for r in choose if r in samples]
        if not chosen:
            continue
        med = float(np.median(chosen))
        layout = layout_of[case_id]
        if layout not in best or med < best[layout][0]:
            best[layout] = (med, case_id)
    if len(best) < 2:
        return False
    ordered = [case_id for _, case_id in sorted(best.values())]
    leader, others = ordered[0], ordered[1:]
    pvalues = []
    for other in others:
        common = [r for r in report if r in by_case[leader] and r in by_case[other]]
        pvalues.append(slower_beyond([by_case[other][r] for r in common], [by_case[leader][r] for r in common], floor))
    return holm(pvalues)[0] >= alpha  # the runner-up, Holm-adjusted over the step as the tiers do
