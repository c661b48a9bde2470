"""The statistics behind per-country figures: exact Poisson intervals, empirical
Bayes shrinkage of rates, location quotients with intervals.

Pure Python (no SciPy at run time); the tests check the intervals against
``scipy.stats.chi2``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "EBPrior",
    "chi2_quantile",
    "eb_gamma_prior",
    "gamma_p",
    "gamma_quantile",
    "garwood",
    "location_quotient",
    "shrunk_rates",
]


def gamma_p(a: float, x: float) -> float:
    """Regularised lower incomplete gamma P(a, x): series for x < a + 1, else a continued fraction
    (the classical pair of expansions, Numerical Recipes §6.2; common practice)."""
    if x <= 0:
        return 0.0
    lg = math.lgamma(a)
    if x < a + 1:
        term = total = 1.0 / a
        n = a
        for _ in range(10_000):
            n += 1
            term *= x / n
            total += term
            if abs(term) < abs(total) * 1e-15:
                break
        return min(1.0, total * math.exp(-x + a * math.log(x) - lg))
    # Lentz's continued fraction for Q(a, x).
    tiny = 1e-300
    b = x + 1 - a
    c = 1 / tiny
    d = 1 / b
    h = d
    for i in range(1, 10_000):
        an = -i * (i - a)
        b += 2
        d = an * d + b
        d = tiny if abs(d) < tiny else d
        c = b + an / c
        c = tiny if abs(c) < tiny else c
        d = 1 / d
        delta = d * c
        h *= delta
        if abs(delta - 1) < 1e-15:
            break
    return max(0.0, 1.0 - math.exp(-x + a * math.log(x) - lg) * h)


def gamma_quantile(p: float, a: float) -> float:
    """x with P(a, x) = p, by bisection on a bracket (monotone, so always converges)."""
    if p <= 0:
        return 0.0
    if p >= 1:
        return math.inf
    lo, hi = 0.0, max(1.0, a)
    while gamma_p(a, hi) < p:
        lo, hi = hi, hi * 2
    for _ in range(200):
        mid = (lo + hi) / 2
        if gamma_p(a, mid) < p:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-12 * max(1.0, hi):
            break
    return (lo + hi) / 2


def chi2_quantile(p: float, df: float) -> float:
    """Quantile of the chi-square distribution: 2 × the Gamma(df/2) quantile."""
    return 2 * gamma_quantile(p, df / 2)


def garwood(count: int, level: float = 0.95) -> tuple[float, float]:
    """Exact (Garwood 1936) confidence interval for a Poisson count.

    lower = χ²(α/2; 2k)/2 (0 when k = 0), upper = χ²(1 − α/2; 2k + 2)/2.
    """
    alpha = 1 - level
    lower = 0.0 if count == 0 else chi2_quantile(alpha / 2, 2 * count) / 2
    upper = chi2_quantile(1 - alpha / 2, 2 * count + 2) / 2
    return lower, upper


@dataclass(frozen=True)
class EBPrior:
    """Gamma(shape, rate) prior of the rates per unit of exposure."""

    shape: float
    rate: float
    mean: float
    variance: float


def eb_gamma_prior(counts: Sequence[int], exposures: Sequence[float]) -> EBPrior:
    """Method-of-moments Gamma prior for Poisson rates (Marshall 1991, global estimator).

    m = Σy / Σn; s² = Σ n_i (y_i/n_i − m)² / Σn; between-area variance
    v = s² − m / n̄ (n̄ the mean exposure); if v ≤ 0 there is no detectable
    variation and every rate shrinks to m (v set to a tiny positive value).
    """
    total_n = sum(exposures)
    if total_n <= 0 or not counts:
        return EBPrior(1.0, 1.0, 0.0, 0.0)
    m = sum(counts) / total_n
    s2 = sum(n * (y / n - m) ** 2 for y, n in zip(counts, exposures) if n > 0) / total_n
    n_bar = total_n / len([n for n in exposures if n > 0])
    v = s2 - m / n_bar
    v = max(v, 1e-12 * max(m, 1e-12) ** 2)
    if m <= 0:
        return EBPrior(1.0, 1.0, 0.0, v)
    return EBPrior(shape=m * m / v, rate=m / v, mean=m, variance=v)


def shrunk_rates(
    counts: Sequence[int], exposures: Sequence[float], prior: EBPrior | None = None
) -> list[float]:
    """Posterior mean rates (y + shape) / (n + rate) under the Gamma prior."""
    prior = prior or eb_gamma_prior(counts, exposures)
    return [(y + prior.shape) / (n + prior.rate) for y, n in zip(counts, exposures)]


def location_quotient(
    a: int, b: int, c: int, n: int, z: float = 1.959964
) -> tuple[float, float, float]:
    """LQ = (a/b) / (c/n) and a 95% interval on the log scale.

    a: rows of the group in the country, b: rows in the country, c: rows of the
    group overall, n: all rows. The group's share in the country and overall
    are treated as two binomial proportions (delta method, as for a risk
    ratio): Var(ln LQ) ≈ 1/a − 1/b + 1/c − 1/n. With a = 0 the LQ is 0, its
    lower limit 0, and the upper limit uses a = 0.5.
    """
    if b <= 0 or c <= 0 or n <= 0:
        return math.nan, math.nan, math.nan
    lq = (a / b) / (c / n)
    aa = a if a > 0 else 0.5
    var = max(0.0, 1 / aa - 1 / b + 1 / c - 1 / n)
    centre = math.log((aa / b) / (c / n))
    low = 0.0 if a == 0 else math.exp(centre - z * math.sqrt(var))
    high = math.exp(centre + z * math.sqrt(var))
    return lq, low, high
