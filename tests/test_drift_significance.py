"""The drift detector's statistics against a reference library and hand computations.

- The two-proportion z-test (pooled) is checked against scipy's Pearson chi-square on the
  2x2 table without continuity correction: chi-square = z squared, so the one-sided p-value
  is half the chi-square p-value on the side the shares moved to.
- The odds-ratio test is checked against Woolf's formula worked by hand on one pair of tables.
- Benjamini-Hochberg is checked against ``scipy.stats.false_discovery_control`` and against
  the worked example of Benjamini & Hochberg (1995).
"""

from __future__ import annotations

import math

import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.drift.significance import (
    DOWN,
    UP,
    benjamini_hochberg,
    log_odds_ratio,
    odds_ratio_p,
    proportion_p,
)


def chi_square_one_sided(x1: int, n1: int, x2: int, n2: int, direction: int) -> float:
    """The one-sided p-value of "x2/n2 moved ``direction`` from x1/n1", from scipy's
    chi-square test of the 2x2 table (no continuity correction)."""
    table = [[x1, n1 - x1], [x2, n2 - x2]]
    _, two_sided, _, _ = scipy.stats.chi2_contingency(table, correction=False)
    moved = (x2 / n2 - x1 / n1) * direction
    return two_sided / 2 if moved > 0 else 1 - two_sided / 2


@st.composite
def two_shares(draw: st.DrawFn) -> tuple[int, int, int, int]:
    """Two samples whose pooled share is neither 0 nor 1 (the test is defined)."""
    n1 = draw(st.integers(1, 5000))
    n2 = draw(st.integers(1, 5000))
    x1 = draw(st.integers(0, n1))
    x2 = draw(st.integers(0, n2))
    pooled = x1 + x2
    if pooled == 0:
        x1 = 1 if n1 else 0
    elif pooled == n1 + n2:
        x1 = n1 - 1
    return x1, n1, x2, n2


@settings(max_examples=400, deadline=None)
@given(two_shares(), st.sampled_from([UP, DOWN]))
def test_proportion_test_agrees_with_scipy_chi_square(sample, direction):
    x1, n1, x2, n2 = sample
    ours = proportion_p(x1, n1, x2, n2, direction)
    if x1 * n2 == x2 * n1:  # equal shares: z = 0, p = 1/2 either way
        assert ours == pytest.approx(0.5, abs=1e-12)
        return
    reference = chi_square_one_sided(x1, n1, x2, n2, direction)
    assert ours == pytest.approx(reference, rel=1e-7, abs=1e-15)


@given(st.integers(1, 3000), st.integers(1, 3000), st.sampled_from([UP, DOWN]))
def test_proportion_test_without_any_spread_is_no_evidence(n1, n2, direction):
    assert proportion_p(0, n1, 0, n2, direction) == 1.0
    assert proportion_p(n1, n1, n2, n2, direction) == 1.0
    assert proportion_p(0, 0, 5, 10, direction) == 1.0  # an empty sample


def test_proportion_doctest_value_and_its_z():
    # pooled share (50 + 80) / 2000 = 0.065; z = 0.03 / sqrt(0.065 * 0.935 * 0.002) = 2.7211
    z = 0.03 / math.sqrt(0.065 * 0.935 * (1 / 1000 + 1 / 1000))
    assert z == pytest.approx(2.7211, abs=1e-4)
    p = proportion_p(50, 1000, 80, 1000, UP)
    assert round(p, 4) == 0.0033
    assert p == pytest.approx(scipy.stats.norm.sf(z), rel=1e-12)
    assert proportion_p(50, 1000, 80, 1000, DOWN) == pytest.approx(1 - p, rel=1e-12)


def test_odds_ratio_test_is_woolfs_formula_by_hand():
    # before: 1000 baskets, 100 hold the left side, 80 the right, 20 both
    # cells (both, left only, right only, neither) = (20, 80, 60, 840); each + 0.5 (Haldane)
    before = (20, 100, 80, 1000)
    # after: 1000 baskets, 120 left, 100 right, 60 both -> cells (60, 60, 40, 840)
    after = (60, 120, 100, 1000)
    log1 = math.log(20.5 * 840.5 / (80.5 * 60.5))  # ln(17230.25 / 4870.25) = ln(3.53786)
    var1 = 1 / 20.5 + 1 / 80.5 + 1 / 60.5 + 1 / 840.5
    log2 = math.log(60.5 * 840.5 / (60.5 * 40.5))  # ln(840.5 / 40.5) = ln(20.75309)
    var2 = 1 / 60.5 + 1 / 60.5 + 1 / 40.5 + 1 / 840.5
    assert log_odds_ratio(*before) == pytest.approx((log1, var1), rel=1e-12)
    assert log_odds_ratio(*after) == pytest.approx((log2, var2), rel=1e-12)
    # the figures written out: log odds ratios 1.26352 and 3.03269, variances 0.07892 and 0.05894
    assert (log1, log2, var1, var2) == pytest.approx((1.26352, 3.03269, 0.07892, 0.05894), abs=1e-5)
    z = (log2 - log1) / math.sqrt(var1 + var2)  # = 1.76917 / sqrt(0.13786) = 4.7649
    assert z == pytest.approx(4.7649, abs=1e-4)
    up = odds_ratio_p(before, after, UP)
    assert up == pytest.approx(0.5 * math.erfc(z / math.sqrt(2)), rel=1e-12)
    assert up == pytest.approx(scipy.stats.norm.sf(4.7649), rel=1e-3)
    assert odds_ratio_p(before, after, DOWN) == pytest.approx(1 - up, rel=1e-12)


def test_odds_ratio_does_not_move_when_one_side_merely_gets_popular():
    # independent sides before and after; the left side doubles in popularity
    before = (10, 100, 100, 1000)  # 10 = 100 x 100 / 1000
    after = (20, 200, 100, 1000)  # 20 = 200 x 100 / 1000
    assert odds_ratio_p(before, after, UP) > 0.3
    assert proportion_p(10, 1000, 20, 1000, UP) < 0.05  # the support alone did rise


@settings(max_examples=300, deadline=None)
@given(st.lists(st.floats(0.0, 1.0, allow_nan=False), min_size=1, max_size=60))
def test_benjamini_hochberg_agrees_with_scipy(p_values):
    ours = benjamini_hochberg(p_values)
    reference = scipy.stats.false_discovery_control(p_values, method="bh")
    assert ours == pytest.approx(list(reference), rel=1e-12, abs=1e-15)


def test_benjamini_hochberg_empty():
    assert benjamini_hochberg([]) == []


# Benjamini & Hochberg (1995), section 4: 15 p-values from a study of myocardial infarction
# treatment; at q = 0.05 the step-up procedure rejects the 4 smallest, Bonferroni only 3.
# Values recalled from memory, not re-checked against the paper.
PAPER_P_VALUES = [
    0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
    0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.0000,
]  # fmt: skip


def test_benjamini_hochberg_worked_example_of_the_paper():
    adjusted = benjamini_hochberg(PAPER_P_VALUES)
    rejected = [p for p, a in zip(PAPER_P_VALUES, adjusted, strict=True) if a <= 0.05]
    assert rejected == [0.0001, 0.0004, 0.0019, 0.0095]
    assert sum(1 for p in PAPER_P_VALUES if p <= 0.05 / 15) == 3  # Bonferroni's 3
    # the 4th: 0.0095 x 15 / 4 = 0.035625; the 5th: min over ranks >= 5 of p x 15 / rank
    assert adjusted[3] == pytest.approx(0.035625, rel=1e-12)
    assert adjusted[4] == pytest.approx(min(p * 15 / r for r, p in enumerate(PAPER_P_VALUES, 1) if r >= 5))
    assert adjusted == pytest.approx(list(scipy.stats.false_discovery_control(PAPER_P_VALUES)), rel=1e-12)


def test_benjamini_hochberg_doctest_values():
    # sorted 0.01, 0.03, 0.04, 0.2 (m = 4): 0.2 x 4/4 = 0.2; 0.04 x 4/3 = 0.0533;
    # 0.03 x 4/2 = 0.06 -> 0.0533 (step-up minimum); 0.01 x 4/1 = 0.04
    adjusted = benjamini_hochberg([0.01, 0.04, 0.03, 0.2])
    assert adjusted == pytest.approx([0.04, 0.16 / 3, 0.16 / 3, 0.2], rel=1e-12)
    assert [round(p, 3) for p in adjusted] == [0.04, 0.053, 0.053, 0.2]
