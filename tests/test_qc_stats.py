"""Capability indices, control-chart constants and limits, zone rules (popmeter.qc_stats)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from matplotlib import cbook

from popmeter.qc_stats import (
    D3,
    D4,
    bissell_interval,
    capability_indices,
    d2,
    d3,
    individuals_chart,
    metric_stats,
    tukey_outliers,
    western_electric,
)

# Factors for constructing variables control charts, n = 2..10:
# (d2, d3, D3, D4) as printed in Montgomery, Introduction to Statistical
# Quality Control, Appendix VI (same values in ASTM STP 15D); from memory of
# that table, 3 decimals.
PUBLISHED = {
    2: (1.128, 0.853, 0.000, 3.267),
    3: (1.693, 0.888, 0.000, 2.574),
    4: (2.059, 0.880, 0.000, 2.282),
    5: (2.326, 0.864, 0.000, 2.114),
    6: (2.534, 0.848, 0.000, 2.004),
    7: (2.704, 0.833, 0.076, 1.924),
    8: (2.847, 0.820, 0.136, 1.864),
    9: (2.970, 0.808, 0.184, 1.816),
    10: (3.078, 0.797, 0.223, 1.777),
}


@pytest.mark.parametrize("n", sorted(PUBLISHED))
def test_chart_constants_match_published_table(n):
    # Montgomery, Appendix VI / ASTM STP 15D (table rounded to 3 decimals)
    pd2, pd3, pD3, pD4 = PUBLISHED[n]
    assert d2(n) == pytest.approx(pd2, abs=1e-3)
    assert d3(n) == pytest.approx(pd3, abs=1e-3)
    assert D3(n) == pytest.approx(pD3, abs=1e-3)
    assert D4(n) == pytest.approx(pD4, abs=1e-3)


def test_span_two_constants_match_closed_form():
    # For n = 2 the range is |X1 - X2| ~ |N(0, 2)| (half-normal):
    # E = 2/sqrt(pi), Var = 2 - 4/pi (standard half-normal moments).
    assert d2(2) == pytest.approx(2 / math.sqrt(math.pi), abs=1e-7)
    assert d3(2) == pytest.approx(math.sqrt(2 - 4 / math.pi), abs=1e-6)


NIST_6322 = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def test_individuals_chart_nist_example():
    # NIST/SEMATECH e-Handbook of Statistical Methods, 6.3.2.2 (individuals
    # control chart example): centre 50.81, UCL 55.8041, LCL 45.8159 with
    # the printed factor 3/1.128.
    chart = individuals_chart(np.array(NIST_6322), d2_value=1.128)
    assert chart.center == pytest.approx(50.81, abs=1e-9)
    assert chart.mr_mean == pytest.approx(16.9 / 9, abs=1e-9)
    assert chart.ucl == pytest.approx(55.8041, abs=1e-4)
    assert chart.lcl == pytest.approx(45.8159, abs=1e-4)
    # moving-range chart: UCL = D4 * MRbar with the table's D4 = 3.267 (NIST
    # 6.3.2.2 computes the MR limits this way; the printed figure from memory)
    assert chart.mr_ucl == pytest.approx(3.267 * 16.9 / 9, abs=2e-3)
    assert chart.mr_lcl == 0.0
    # the example is in control
    assert chart.violations == []
    # with the derived d2 (2/sqrt(pi)) the limits move by less than 0.002
    derived = individuals_chart(np.array(NIST_6322))
    assert abs(derived.ucl - 55.8041) < 2e-3


def test_capability_nist_example():
    # NIST e-Handbook 6.1.6: USL 20, LSL 8, mean 16, s 2 -> Cp 1.0, Cpk 0.6667
    cp, cpk = capability_indices(16.0, 2.0, lsl=8.0, usl=20.0)
    assert cp == pytest.approx(1.0, abs=1e-12)
    assert cpk == pytest.approx(0.6667, abs=1e-4)
    # one-sided: only Cpu = (20 - 16)/(3*2)
    cp1, cpk1 = capability_indices(16.0, 2.0, lsl=None, usl=20.0)
    assert cp1 is None and cpk1 == pytest.approx(4 / 6)


def test_bissell_interval_formula():
    # Bissell (1990), Applied Statistics 39(3): Cpk ± z sqrt(1/(9n) + Cpk²/(2(n-1))).
    # Hand calculation: n = 30, Cpk = 1.33, z = 1.959964:
    # sqrt(1/270 + 1.7689/58) = 0.184939 -> half width 0.362474
    low, high = bissell_interval(1.33, 30)
    assert low == pytest.approx(1.33 - 0.362474, abs=1e-5)
    assert high == pytest.approx(1.33 + 0.362474, abs=1e-5)


def test_bissell_interval_covers_true_cpk_about_95_percent():
    # The definition of a 95 % confidence interval: for normal samples with
    # known mean and sigma (Cpk with the sample s, as in Bissell 1990), the
    # interval should cover the true Cpk close to 95 % of the time.
    rng = np.random.default_rng(7)
    n, trials, mu, sigma, lsl, usl = 50, 2000, 12.0, 0.5, 10.0, 15.0
    _, true_cpk = capability_indices(mu, sigma, lsl=lsl, usl=usl)
    samples = rng.normal(mu, sigma, size=(trials, n))
    covered = 0
    for row in samples:
        _, cpk = capability_indices(row.mean(), row.std(ddof=1), lsl=lsl, usl=usl)
        low, high = bissell_interval(cpk, n)
        covered += low <= true_cpk <= high
    assert 0.925 <= covered / trials <= 0.97


def test_tukey_outliers_match_matplotlib_boxplot_fliers():
    # reference library: matplotlib.cbook.boxplot_stats (whis=1.5, Tukey's fences)
    rng = np.random.default_rng(3)
    data = np.concatenate([rng.normal(0, 1, 40), [6.0, -5.5, 9.0]])
    ours = np.sort(data[tukey_outliers(data)])
    ref = np.sort(cbook.boxplot_stats(data, whis=1.5)[0]["fliers"])
    np.testing.assert_array_equal(ours, ref)
    assert ours.size >= 3


def _rules(values, center=0.0, sigma=1.0):
    return [(v.rule, v.index) for v in western_electric(np.array(values), center=center, sigma=sigma)]


def test_western_electric_rule_1():
    # Western Electric Statistical Quality Control Handbook (1956), rule 1
    assert _rules([0, 0.5, 3.2, 0, -3.1]) == [(1, 2), (1, 4)]
    assert _rules([0, 2.99, -2.99]) == []


def test_western_electric_rule_2():
    # rule 2: two of three consecutive points beyond 2 sigma on the same side
    assert _rules([0, 2.5, 0.1, 2.2, 0]) == [(2, 3)]
    # opposite sides do not count
    assert _rules([0, 2.5, -2.5, 0]) == []


def test_western_electric_rule_3():
    # rule 3: four of five consecutive points beyond 1 sigma on the same side
    assert _rules([0, 1.5, 1.2, 0.3, 1.1, 1.4, -0.5]) == [(3, 5)]
    assert _rules([1.5, 1.2, 0.3, 1.1, -1.4]) == []


def test_western_electric_rule_4():
    # rule 4: eight consecutive points on one side of the centre line
    series = [0.2, 0.4, 0.1, 0.3, 0.5, 0.2, 0.6, 0.1, 0.3, -0.2]
    assert _rules(series) == [(4, 7), (4, 8)]
    # a point exactly on the centre line breaks the run
    assert _rules([0.2] * 4 + [0.0] + [0.2] * 4) == []


def test_chart_flags_a_shift_with_indices():
    values = np.array([10.0, 10.2, 9.9, 10.1, 9.8, 10.0, 10.1, 9.9, 10.0, 14.0, 10.1, 9.9])
    chart = individuals_chart(values)
    x_rule1 = [v.index for v in chart.violations if v.chart == "X" and v.rule == 1]
    assert x_rule1 == [9]
    mr_flags = [v.index for v in chart.violations if v.chart == "MR"]
    assert mr_flags == [9, 10]


def test_metric_stats_counts_missing_against_yield():
    values = [12.0, 12.5, None, 11.8, 16.0, 12.2, float("nan"), 12.1]
    stats = metric_stats("steady_rate_hz", values, lsl=10.0, usl=15.0, target=12.5)
    assert stats.n == 6 and stats.n_missing == 2
    assert stats.yield_frac == pytest.approx(5 / 8)
    finite = np.array([12.0, 12.5, 11.8, 16.0, 12.2, 12.1])
    assert stats.mean == pytest.approx(finite.mean())
    assert stats.sd == pytest.approx(finite.std(ddof=1))
    sigma_w = np.abs(np.diff(finite)).mean() / (2 / math.sqrt(math.pi))
    assert stats.sigma_within == pytest.approx(sigma_w)
    assert stats.cp == pytest.approx(5.0 / (6 * sigma_w))
    assert stats.pp == pytest.approx(5.0 / (6 * finite.std(ddof=1)))
    assert stats.cpk_low < stats.cpk < stats.cpk_high
    # position 4 (16.0) is the outlier, reported as a position in the batch
    assert stats.outliers == [4]
    doc = stats.to_json()
    assert doc["control_chart"]["n"] == 6


def test_metric_stats_with_too_few_values():
    stats = metric_stats("ring_hz", [None, 1000.0], lsl=900.0, usl=None)
    assert stats.n == 1 and stats.sd is None and stats.cpk is None and stats.chart is None
    assert stats.yield_frac == 0.5
