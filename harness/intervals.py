"""Intervals for every figure a report prints: percentile bootstrap over measured rounds.

Samples of one group are paired by round (every case ran once per round, interleaved), so a
figure that compares cases of one group resamples whole rounds: the drift shared within a round
stays paired. Figures that combine groups (speedups across thread counts, a kernel mix) resample
each group's rounds independently, since different groups never share a round. Repeated runs
(``sweep --repeat``) are resampled at two levels, repetitions and then rounds within them, so
the between-run variance is in every interval that pools them.

The method is Efron's percentile bootstrap (common practice; B = 2000 replicates, seeded so a
report is reproducible).
"""

from __future__ import annotations

import zlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

REPLICATES = 2000
CONFIDENCE = 0.95


@dataclass(frozen=True)
class Interval:
    """A point estimate with a two-sided interval at ``confidence``."""

    value: float
    lo: float
    hi: float

    def text(self, spec: str, suffix: str = "") -> str:
        """``1.23 [1.10, 1.31]``; empty when the value is not finite."""
        if not np.isfinite(self.value):
            return ""
        if not (np.isfinite(self.lo) and np.isfinite(self.hi)):
            return f"{self.value:{spec}}{suffix}"
        return f"{self.value:{spec}}{suffix} [{self.lo:{spec}}, {self.hi:{spec}}]"


NAN = Interval(np.nan, np.nan, np.nan)


def _rng(key: str) -> np.random.Generator:
    return np.random.default_rng(zlib.crc32(key.encode()))


@dataclass(frozen=True)
class Rounds:
    """Paired samples of one group: a (rounds x cases) matrix of ns, one column per label.

    ``blocks`` gives each round's repetition (all zero for a single run); resampling draws
    repetitions with replacement, then rounds within each drawn repetition.
    """

    labels: tuple[str, ...]
    ns: np.ndarray
    blocks: np.ndarray
    name: str = ""  # the group's identity: seeds its one bootstrap draw, shared by all its figures
    _memo: dict = field(default_factory=dict, compare=False, repr=False)  # resamples per key, drawn once

    @classmethod
    def from_series(cls, series: dict[str, pd.Series], blocks: pd.Series | None = None, name: str = "") -> Rounds:
        """Inner-join per-label series indexed by round (rounds missing for any label are dropped)."""
        frame = pd.concat(series, axis=1, join="inner").dropna()
        b = np.zeros(len(frame), dtype=int) if blocks is None else blocks.reindex(frame.index).fillna(0).to_numpy(int)
        return cls(tuple(frame.columns), frame.to_numpy(float), b, name)

    def column(self, label: str) -> np.ndarray:
        return self.ns[:, self.labels.index(label)]

    def resample(self, key: str, replicates: int | None = None) -> np.ndarray:
        """Row indices of ``replicates`` bootstrap resamples, shape (replicates, rounds); the same
        key gives the same resamples, so every figure of a group can share one draw."""
        replicates = replicates or REPLICATES
        memo_key = ("rows", key, replicates)
        if memo_key not in self._memo:
            self._memo[memo_key] = self._draw(key, replicates)
        return self._memo[memo_key]

    def _draw(self, key: str, replicates: int) -> np.ndarray:
        rng = _rng(key)
        n = len(self.ns)
        blocks = np.unique(self.blocks)
        if blocks.size <= 1:
            return rng.integers(0, n, size=(replicates, n))
        members = [np.flatnonzero(self.blocks == b) for b in blocks]
        out = np.empty((replicates, n), dtype=int)
        for r in range(replicates):
            chosen = rng.integers(0, len(members), size=len(members))
            rows = np.concatenate([rng.choice(members[c], size=members[c].size) for c in chosen])
            out[r] = np.resize(rows, n)  # blocks of unequal size: keep the round count fixed
        return out

    def medians(self, key: str, replicates: int | None = None) -> np.ndarray:
        """Bootstrap medians per label, shape (replicates, labels)."""
        replicates = replicates or REPLICATES
        if len(self.ns) == 0:
            return np.full((replicates, len(self.labels)), np.nan)
        memo_key = ("medians", key, replicates)
        if memo_key not in self._memo:
            self._memo[memo_key] = np.median(self.ns[self.resample(key, replicates)], axis=1)
        return self._memo[memo_key]


def percentile(point: float, replicates: np.ndarray, confidence: float = CONFIDENCE) -> Interval:
    """Percentile interval of bootstrap replicates around a point estimate."""
    finite = replicates[np.isfinite(replicates)]
    if not np.isfinite(point) or finite.size == 0:
        return Interval(point, np.nan, np.nan)
    tail = (1 - confidence) / 2 * 100
    lo, hi = np.percentile(finite, [tail, 100 - tail])
    return Interval(float(point), float(lo), float(hi))


def median_interval(rounds: Rounds, label: str, key: str, confidence: float = CONFIDENCE) -> Interval:
    boot = rounds.medians(key)[:, rounds.labels.index(label)]
    return percentile(float(np.median(rounds.column(label))), boot, confidence)


def ratio_interval(rounds: Rounds, num: str, den: str, key: str, confidence: float = CONFIDENCE) -> Interval:
    """Ratio of two cases' medians, paired by round (both columns drawn from the same rounds)."""
    boot = rounds.medians(key)
    i, j = rounds.labels.index(num), rounds.labels.index(den)
    point = float(np.median(rounds.column(num)) / np.median(rounds.column(den)))
    return percentile(point, boot[:, i] / boot[:, j], confidence)


def combine(parts: Sequence[tuple[Rounds, str]], fn: Callable[[list[np.ndarray]], np.ndarray], key: str,
            confidence: float = CONFIDENCE) -> Interval:
    """A figure computed from the medians of cases of several groups.

    Groups are resampled independently, cases of one group together. ``parts`` lists
    (group rounds, label); ``fn`` maps the list of per-part median arrays (each of
    shape (k,)) to the figure, elementwise, so it serves the point (k = 1) and the replicates.
    """
    points = [np.array([np.median(r.column(label))]) for r, label in parts]
    drawn: dict[int, np.ndarray] = {}  # parts of one group share its resamples (they are paired)
    for n, (r, _) in enumerate(parts):
        if id(r) not in drawn:
            drawn[id(r)] = r.medians(r.name or f"{key}|{n}")
    boots = [drawn[id(r)][:, r.labels.index(label)] for r, label in parts]
    return percentile(float(fn(points)[0]), fn(boots), confidence)
