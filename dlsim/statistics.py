"""Confidence intervals over realizations: one helper for runs, sweeps and convergence studies.

The interval of a mean over n independent realizations is Student's t interval,
mean ± t_{(1+level)/2, n-1} s/√n with s the sample standard deviation (ddof = 1); see any
statistics text, e.g. Montgomery & Runger, *Applied Statistics and Probability for Engineers*.
With few realizations the t quantile is large (12.7 for n = 2 at 95 %) and the interval can reach
past zero for a positive quantity: :func:`interval_warnings` says so in one line and
:func:`realizations_needed` says how many realizations would reach a requested half-width.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Two-sided confidence level of every interval dlsim reports.
CONFIDENCE = 0.95
#: Fewer realizations than this give an interval dominated by the t quantile (t = 2.78 at n = 5
#: against 1.96 for many): a warning says so (common practice).
MIN_REALIZATIONS = 5
#: Most realizations :func:`realizations_needed` will suggest.
MAX_SUGGESTED = 100_000


@dataclass(frozen=True)
class Interval:
    """Mean and Student-t interval of n values (NaN where undefined, n < 2)."""

    n: int
    mean: float
    std: float
    lo: float
    hi: float
    level: float = CONFIDENCE

    @property
    def half_width(self) -> float:
        return 0.5 * (self.hi - self.lo)

    @property
    def sem(self) -> float:
        """Standard error of the mean, std/√n (NaN for n < 2)."""
        return self.std / math.sqrt(self.n) if self.n >= 2 else math.nan

    @property
    def method(self) -> str:
        if self.n < 2:
            return "one value: no spread to estimate"
        return f"Student t, {100 * self.level:g}%, {self.n} realizations"


def t_quantile(n: int, level: float = CONFIDENCE) -> float:
    """t_{(1+level)/2, n-1} (scipy.stats.t)."""
    from scipy.stats import t as student_t

    return float(student_t.ppf(0.5 + 0.5 * level, n - 1))


def mean_interval(values, level: float = CONFIDENCE) -> Interval:
    """The mean of ``values`` with its two-sided Student-t interval (NaNs are not allowed)."""
    v = np.asarray(values, dtype=float)
    n = int(v.size)
    if n == 0:
        return Interval(0, math.nan, math.nan, math.nan, math.nan, level)
    mean = float(v.mean())
    if n < 2:
        return Interval(n, mean, math.nan, math.nan, math.nan, level)
    std = float(v.std(ddof=1))
    half = t_quantile(n, level) * std / math.sqrt(n)
    return Interval(n, mean, std, mean - half, mean + half, level)


def realizations_needed(std: float, half_width: float, level: float = CONFIDENCE) -> int:
    """The fewest realizations n whose t interval t_{n-1} s/√n is no wider than ``half_width``,
    taking the spread ``std`` as known; capped at :data:`MAX_SUGGESTED`."""
    if not (std > 0 and half_width > 0):
        return 2
    n = max(2, math.ceil((1.96 * std / half_width) ** 2))   # the normal quantile: a lower bound
    while n < MAX_SUGGESTED and t_quantile(n, level) * std / math.sqrt(n) > half_width:
        n += max(1, n // 20)
    return min(n, MAX_SUGGESTED)


def interval_warnings(iv: Interval, quantity: str = "the CRSS", unit: str = "MPa",
                      relative_target: float = 0.05) -> list[str]:
    """One-line warnings when an interval rests on too few realizations to mean much."""
    if iv.n < 2:
        return []
    out = []
    wanted = realizations_needed(iv.std, relative_target * abs(iv.mean), iv.level)
    if iv.n < MIN_REALIZATIONS:
        out.append(f"the {100 * iv.level:g}% interval of {quantity} rests on {iv.n} "
                   f"realizations (t = {t_quantile(iv.n, iv.level):.3g}); use at least "
                   f"{MIN_REALIZATIONS} (common practice)")
    if iv.mean > 0 and iv.lo < 0:
        out.append(f"the {100 * iv.level:g}% interval of {quantity} reaches below zero "
                   f"({iv.lo:.4g} {unit}): the spread is too large for {iv.n} realizations")
    if out or iv.half_width > relative_target * abs(iv.mean):
        out.append(f"about {wanted} realizations would give {quantity} to ±"
                   f"{100 * relative_target:g}% ({100 * iv.level:g}%)")
    return out
