"""Paired statistics checked against scipy.stats."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.stats import holm, wilcoxon_greater


@pytest.mark.parametrize("seed", range(8))
@pytest.mark.parametrize("n", [5, 15, 30, 80])
def test_wilcoxon_matches_scipy(seed: int, n: int) -> None:
    """Reference: scipy.stats.wilcoxon(d, alternative='greater') (exact for small untied samples).

    Source: scipy.stats.wilcoxon, SciPy 1.17.
    """
    rng = np.random.default_rng(seed)
    d = rng.normal(0.3 if seed % 2 else 0.0, 1.0, size=n)
    ours_w, ours_p = wilcoxon_greater(d)
    ref = stats.wilcoxon(d, alternative="greater", method="exact" if n <= 50 else "approx", correction=True)
    assert ours_w == pytest.approx(ref.statistic)
    assert ours_p == pytest.approx(ref.pvalue, rel=1e-6, abs=1e-12)


def test_wilcoxon_with_ties_and_zeros_matches_scipy_normal_approximation() -> None:
    """Source: scipy.stats.wilcoxon with zero_method='wilcox' and the normal approximation, SciPy 1.17."""
    d = np.array([0.0, 1, 1, 2, 2, 2, -1, 3, 4, 4, -2, 5, 0.0, 6, 7])
    ours_w, ours_p = wilcoxon_greater(d)
    ref = stats.wilcoxon(d, alternative="greater", zero_method="wilcox", correction=True, method="approx")
    assert ours_w == pytest.approx(ref.statistic)
    assert ours_p == pytest.approx(ref.pvalue, rel=1e-6)


def test_holm_matches_the_textbook_procedure() -> None:
    """Holm (1979): sort p ascending, multiply the k-th smallest by (m - k + 1), enforce monotonicity.

    From memory: S. Holm, A simple sequentially rejective multiple test procedure, Scand. J.
    Statist. 6 (1979). The expected values were worked by hand with that rule:
    sorted 0.005, 0.01, 0.03, 0.04 -> x4, x3, x2, x1 -> 0.02, 0.03, 0.06, 0.04 -> monotone 0.06.
    """
    p = [0.01, 0.04, 0.03, 0.005]
    assert holm(p) == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert holm([]) == []
