"""Process statistics for production QC: capability, control charts, rules.

Pure computations on numpy arrays; nothing here reads files or prints.

- Control-chart constants ``d2(n)``, ``d3(n)``, ``D3(n)``, ``D4(n)`` are derived
  by numerical integration of the distribution of the range of ``n``
  independent standard normal values (Tippett 1925; the integrals as in
  Montgomery, *Introduction to Statistical Quality Control*, sec. 6 and
  Appendix VI, where the rounded table is printed):

      d2(n) = E[W]   = ∫ [1 - Φ(x)^n - (1 - Φ(x))^n] dx
      E[W²]          = 2 ∫∫_{x<y} [1 - Φ(y)^n - (1 - Φ(x))^n + (Φ(y) - Φ(x))^n] dx dy
      d3(n) = sqrt(E[W²] - d2²),  D3 = max(0, 1 - 3 d3/d2),  D4 = 1 + 3 d3/d2

- Individuals (X) and moving-range (MR) charts: the within-process sigma is
  the average moving range of span 2 divided by ``d2(2)`` (NIST/SEMATECH
  e-Handbook of Statistical Methods, 6.3.2.2).
- Capability indices Cp, Cpk (within sigma) and Pp, Ppk (overall sample
  standard deviation) as in the NIST e-Handbook 6.1.6, with the approximate
  95 % interval for Cpk of Bissell (1990), "How reliable is your capability
  index?", Applied Statistics 39(3), 331-340:
  ``Cpk ± z * sqrt(1/(9n) + Cpk²/(2(n-1)))``.
- Outliers by Tukey's fences (Tukey 1977, *Exploratory Data Analysis*): values
  more than 1.5 interquartile ranges outside the quartiles.
- The four Western Electric zone rules (Western Electric Co., *Statistical
  Quality Control Handbook*, 1956; also NIST e-Handbook 6.3.2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from statistics import NormalDist
from typing import Any

import numpy as np

_STD_NORMAL = NormalDist()

#: Grid used for the range-distribution integrals: the standard normal is
#: negligible beyond ±9 (Φ(-9) ≈ 1e-19) and the integrands are smooth, so the
#: trapezoid rule on this grid is accurate far beyond the table's 3 decimals.
_GRID_HALF_WIDTH = 9.0
_GRID_POINTS = 1801


def _phi_grid() -> tuple[np.ndarray, np.ndarray]:
    x = np.linspace(-_GRID_HALF_WIDTH, _GRID_HALF_WIDTH, _GRID_POINTS)
    cdf = np.array([0.5 * (1.0 + math.erf(v / math.sqrt(2.0))) for v in x])
    return x, cdf


@lru_cache(maxsize=64)
def _range_moments(n: int) -> tuple[float, float]:
    """E[W] and E[W²] of the range W of n standard normal values."""
    if n < 2:
        raise ValueError(f"range needs at least 2 values per subgroup, got n={n}")
    x, cdf = _phi_grid()
    h = float(x[1] - x[0])
    first = 1.0 - cdf**n - (1.0 - cdf) ** n
    mean_w = float(np.trapezoid(first, dx=h))
    # double integral over x < y written as y = x + t, t >= 0 on the same grid:
    # trapezoid over x (smooth and decaying: spectrally accurate), composite
    # Simpson over t (the t-integral starts at the boundary t = 0).
    m = x.size
    inner_t = np.zeros(m)
    for k in range(m):
        cx = cdf[: m - k]
        cy = cdf[k:]
        g = 1.0 - cy**n - (1.0 - cx) ** n + (cy - cx) ** n
        inner_t[k] = np.trapezoid(g, dx=h) if g.size > 1 else 0.0
    if m % 2 == 0:  # Simpson needs an even number of intervals; the tail is ~0
        inner_t = np.append(inner_t, 0.0)
    weights = np.ones(inner_t.size)
    weights[1:-1:2] = 4.0
    weights[2:-1:2] = 2.0
    second = 2.0 * float(h / 3.0 * weights @ inner_t)
    return mean_w, second


def d2(n: int) -> float:
    """Mean of the relative range W = R/σ of ``n`` normal values (dimensionless)."""
    return _range_moments(n)[0]


def d3(n: int) -> float:
    """Standard deviation of the relative range W = R/σ of ``n`` normal values."""
    mean_w, second = _range_moments(n)
    return math.sqrt(max(second - mean_w**2, 0.0))


def D3(n: int) -> float:
    """Lower range-chart factor: LCL_R = D3 * R̄ (0 for n <= 6)."""
    return max(0.0, 1.0 - 3.0 * d3(n) / d2(n))


def D4(n: int) -> float:
    """Upper range-chart factor: UCL_R = D4 * R̄."""
    return 1.0 + 3.0 * d3(n) / d2(n)


def moving_ranges(values: np.ndarray) -> np.ndarray:
    """Absolute differences of consecutive values (span 2); length n-1."""
    v = np.asarray(values, dtype=float)
    return np.abs(np.diff(v))


@dataclass
class Violation:
    """A control-chart rule broken at one point.

    ``rule`` is 1-4 (Western Electric zone rules); ``index`` is the position
    (0-based, in the charted series) of the point that completes the pattern;
    ``chart`` is "X" (individuals) or "MR" (moving range).
    """

    rule: int
    index: int
    chart: str
    description: str


@dataclass
class IndividualsChart:
    """Individuals (X) and moving-range (MR) chart of one series.

    Limits in the series' own unit. ``sigma_within = mr_mean / d2(2)``.
    ``mr`` has one value fewer than ``values``; ``mr[i]`` belongs to point
    ``i + 1``. ``violations`` lists X-chart zone-rule hits and MR points above
    their upper limit.
    """

    values: np.ndarray
    center: float
    ucl: float
    lcl: float
    sigma_within: float
    mr: np.ndarray
    mr_mean: float
    mr_ucl: float
    mr_lcl: float
    violations: list[Violation] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        """JSON-ready form (limits and violations; NaN as None)."""
        return {
            "n": int(self.values.size),
            "center": _num(self.center),
            "ucl": _num(self.ucl),
            "lcl": _num(self.lcl),
            "sigma_within": _num(self.sigma_within),
            "mr_mean": _num(self.mr_mean),
            "mr_ucl": _num(self.mr_ucl),
            "mr_lcl": _num(self.mr_lcl),
            "violations": [
                {"rule": v.rule, "index": v.index, "chart": v.chart, "description": v.description}
                for v in self.violations
            ],
        }


def _num(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def individuals_chart(values: np.ndarray, *, d2_value: float | None = None) -> IndividualsChart:
    """Individuals and moving-range chart limits with rule violations.

    Method: NIST/SEMATECH e-Handbook 6.3.2.2. Centre = mean; sigma_within =
    MR̄ / d2; X limits = centre ± 3 sigma_within; MR limits = D3·MR̄ and
    D4·MR̄ (span 2). Western Electric zone rules on X; MR points above their
    UCL flagged as rule 1 on the MR chart.

    Parameters
    ----------
    values : array of float
        The series in time order (NaN not allowed: drop missing values first).
    d2_value : float, optional
        The d2 constant for span-2 moving ranges. Default: :func:`d2` (2),
        derived by integration (1.12838 = 2/sqrt(pi)); pass 1.128 to reproduce
        printed examples that use the rounded table value.

    Raises
    ------
    ValueError
        Fewer than 2 values, or non-finite values.
    """
    v = np.asarray(values, dtype=float)
    if v.ndim != 1 or v.size < 2:
        raise ValueError("an individuals chart needs at least 2 values")
    if not np.all(np.isfinite(v)):
        raise ValueError("individuals_chart: values must be finite (drop missing values first)")
    dd = d2(2) if d2_value is None else float(d2_value)
    mr = moving_ranges(v)
    mr_mean = float(mr.mean())
    sigma = mr_mean / dd
    center = float(v.mean())
    chart = IndividualsChart(
        values=v,
        center=center,
        ucl=center + 3.0 * sigma,
        lcl=center - 3.0 * sigma,
        sigma_within=sigma,
        mr=mr,
        mr_mean=mr_mean,
        mr_ucl=D4(2) * mr_mean,
        mr_lcl=D3(2) * mr_mean,
    )
    chart.violations = western_electric(v, center=center, sigma=sigma)
    for i, r in enumerate(mr):
        if r > chart.mr_ucl:
            chart.violations.append(
                Violation(1, i + 1, "MR", "moving range above its upper control limit")
            )
    return chart


_RULE_TEXT = {
    1: "one point beyond 3 sigma",
    2: "2 of 3 points beyond 2 sigma on one side",
    3: "4 of 5 points beyond 1 sigma on one side",
    4: "8 points in a row on one side of the centre line",
}


def western_electric(values: np.ndarray, *, center: float, sigma: float) -> list[Violation]:
    """The four Western Electric zone rules on an individuals series.

    Rules (Western Electric *Statistical Quality Control Handbook*, 1956;
    NIST e-Handbook 6.3.2):

    1. one point beyond 3 sigma from the centre line;
    2. two of three consecutive points beyond 2 sigma, same side;
    3. four of five consecutive points beyond 1 sigma, same side;
    4. eight consecutive points on the same side of the centre line.

    A violation is flagged at the point that completes the pattern, and only
    when that point itself is one of the offending points (beyond the zone, on
    that side), so each flag lands on an unusual point. A point exactly on
    the centre line breaks a rule-4 run.

    Parameters
    ----------
    values : array of float
        The series in time order.
    center, sigma : float
        Centre line and within sigma (same unit as ``values``). With
        ``sigma <= 0`` only rule 4 can be judged (zones collapse) and rules
        1-3 are skipped.

    Returns
    -------
    list of Violation, sorted by index then rule.
    """
    v = np.asarray(values, dtype=float)
    z = (v - center) / sigma if sigma > 0 else np.zeros_like(v)
    out: list[Violation] = []
    n = v.size
    for i in range(n):
        if sigma > 0 and abs(z[i]) > 3.0:
            out.append(Violation(1, i, "X", _RULE_TEXT[1]))
        for side in (1.0, -1.0):
            if sigma > 0:
                if i >= 2 and side * z[i] > 2.0:
                    window = side * z[i - 2 : i + 1]
                    if np.count_nonzero(window > 2.0) >= 2:
                        out.append(Violation(2, i, "X", _RULE_TEXT[2]))
                if i >= 4 and side * z[i] > 1.0:
                    window = side * z[i - 4 : i + 1]
                    if np.count_nonzero(window > 1.0) >= 4:
                        out.append(Violation(3, i, "X", _RULE_TEXT[3]))
            if i >= 7:
                window = side * (v[i - 7 : i + 1] - center)
                if np.all(window > 0):
                    out.append(Violation(4, i, "X", _RULE_TEXT[4]))
    out.sort(key=lambda viol: (viol.index, viol.rule))
    return out


def capability_indices(
    mean: float, sigma: float, *, lsl: float | None, usl: float | None
) -> tuple[float | None, float | None]:
    """Cp and Cpk for a process with the given mean and sigma.

    NIST e-Handbook 6.1.6: Cp = (USL - LSL) / (6σ); Cpk = min(USL - μ,
    μ - LSL) / (3σ). With one limit only, Cp is None and Cpk is the one-sided
    index (Cpu or Cpl). None when sigma is not positive.
    """
    if not sigma > 0 or (lsl is None and usl is None):
        return None, None
    cp = (usl - lsl) / (6.0 * sigma) if lsl is not None and usl is not None else None
    sides = []
    if usl is not None:
        sides.append((usl - mean) / (3.0 * sigma))
    if lsl is not None:
        sides.append((mean - lsl) / (3.0 * sigma))
    return cp, min(sides)


def bissell_interval(cpk: float, n: int, *, confidence: float = 0.95) -> tuple[float, float]:
    """Approximate two-sided confidence interval for Cpk (Bissell 1990).

    ``Cpk ± z_{1-α/2} · sqrt(1/(9n) + Cpk²/(2(n-1)))`` with z from the
    standard normal (1.95996 for the default 95 %). Needs n >= 2.
    """
    if n < 2:
        raise ValueError("Bissell's interval needs n >= 2")
    z = _STD_NORMAL.inv_cdf(0.5 + confidence / 2.0)
    half = z * math.sqrt(1.0 / (9.0 * n) + cpk**2 / (2.0 * (n - 1)))
    return cpk - half, cpk + half


def tukey_outliers(values: np.ndarray, *, k: float = 1.5) -> np.ndarray:
    """Indices of values outside [Q1 - k·IQR, Q3 + k·IQR] (Tukey's fences).

    Quartiles by linear interpolation (numpy's default, as matplotlib's box
    plots use). ``k`` default 1.5, Tukey's inner fences.
    """
    v = np.asarray(values, dtype=float)
    if v.size < 4:
        return np.zeros(0, dtype=int)
    q1, q3 = np.percentile(v, [25.0, 75.0])
    iqr = q3 - q1
    return np.flatnonzero((v < q1 - k * iqr) | (v > q3 + k * iqr))


@dataclass
class MetricStats:
    """Batch statistics of one limited metric.

    ``n`` counts units with a value; ``n_missing`` units without one (they
    count against ``yield_frac``, the fraction of all units inside the
    limits). Cp/Cpk use ``sigma_within`` (average moving range / d2, units in
    batch order); Pp/Ppk the overall sample standard deviation ``sd``
    (ddof=1). ``cpk_low``/``cpk_high``: Bissell 95 % interval. ``outliers``:
    positions (into the units list given) flagged by Tukey's fences. Any
    figure that cannot be computed (too few values, zero spread) is None.
    """

    metric: str
    n: int
    n_missing: int
    mean: float | None
    sd: float | None
    min: float | None
    max: float | None
    yield_frac: float | None
    lsl: float | None
    usl: float | None
    target: float | None
    sigma_within: float | None
    cp: float | None
    cpk: float | None
    cpk_low: float | None
    cpk_high: float | None
    pp: float | None
    ppk: float | None
    outliers: list[int]
    chart: IndividualsChart | None = None

    def to_json(self) -> dict[str, Any]:
        """JSON-ready form (NaN as None), including the control chart."""
        doc: dict[str, Any] = {}
        for key in (
            "metric", "n", "n_missing", "mean", "sd", "min", "max", "yield_frac", "lsl",
            "usl", "target", "sigma_within", "cp", "cpk", "cpk_low", "cpk_high", "pp", "ppk",
        ):
            value = getattr(self, key)
            doc[key] = _num(value) if isinstance(value, float) else value
        doc["outliers"] = list(self.outliers)
        doc["control_chart"] = self.chart.to_json() if self.chart is not None else None
        return doc


def metric_stats(
    metric: str,
    values: list[float | None] | np.ndarray,
    *,
    lsl: float | None,
    usl: float | None,
    target: float | None = None,
) -> MetricStats:
    """Statistics of one metric over the units of a batch (in batch order).

    Parameters
    ----------
    metric : str
        Name (reports only).
    values : sequence of float or None
        One entry per unit; None/NaN where the unit has no value.
    lsl, usl : float or None
        Lower/upper spec limits (either may be None for one-sided limits).
    target : float, optional
        Nominal value, carried through for reports.
    """
    raw = np.array([np.nan if x is None else float(x) for x in values], dtype=float)
    finite = np.isfinite(raw)
    positions = np.flatnonzero(finite)
    v = raw[finite]
    n = int(v.size)
    n_missing = int(raw.size - n)
    inside = np.ones(n, dtype=bool)
    if lsl is not None:
        inside &= v >= lsl
    if usl is not None:
        inside &= v <= usl
    stats = MetricStats(
        metric=metric, n=n, n_missing=n_missing,
        mean=float(v.mean()) if n else None,
        sd=float(v.std(ddof=1)) if n >= 2 else None,
        min=float(v.min()) if n else None,
        max=float(v.max()) if n else None,
        yield_frac=float(inside.sum()) / raw.size if raw.size else None,
        lsl=lsl, usl=usl, target=target,
        sigma_within=None, cp=None, cpk=None, cpk_low=None, cpk_high=None, pp=None, ppk=None,
        outliers=[int(positions[i]) for i in tukey_outliers(v)],
    )
    if n >= 2:
        chart = individuals_chart(v)
        stats.chart = chart
        stats.sigma_within = chart.sigma_within
        stats.cp, stats.cpk = capability_indices(stats.mean, chart.sigma_within, lsl=lsl, usl=usl)
        stats.pp, stats.ppk = capability_indices(stats.mean, stats.sd, lsl=lsl, usl=usl)
        if stats.cpk is not None:
            stats.cpk_low, stats.cpk_high = bissell_interval(stats.cpk, n)
    return stats


__all__ = [
    "D3",
    "D4",
    "IndividualsChart",
    "MetricStats",
    "Violation",
    "bissell_interval",
    "capability_indices",
    "d2",
    "d3",
    "individuals_chart",
    "metric_stats",
    "moving_ranges",
    "tukey_outliers",
    "western_electric",
]
