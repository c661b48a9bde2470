"""The statistics behind per-country figures: exact Poisson intervals, empirical
Bayes shrinkage of rates, location quotients with intervals.

Distribution quantiles come from ``scipy.special``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from scipy.special import gammaincinv, ndtri

__all__ = [
    "Z95",
    "EBPrior",
    "eb_gamma_prior",
    "garwood",
    "location_quotient",
    "shrunk_rates",
]

# The standard normal 97.5% quantile (1.959964…), for two-sided 95% intervals.
Z95 = float(ndtri(0.975))


def garwood(count: int, level: float = 0.95) -> tuple[float, float]:
    """Exact (Garwood 1936) confidence interval for a Poisson count.

    lower = χ²(α/2; 2k)/2 (0 when k = 0), upper = χ²(1 − α/2; 2k + 2)/2; half a
    χ² quantile with 2a degrees of freedom is the Gamma(a) quantile.
    """
    alpha = 1 - level
    lower = 0.0 if count == 0 else float(gammaincinv(count, alpha / 2))
    upper = float(gammaincinv(count + 1, 1 - alpha / 2))
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
    s2 = (
        sum(n * (y / n - m) ** 2 for y, n in zip(counts, exposures, strict=True) if n > 0) / total_n
    )
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
    return [(y + prior.shape) / (n + prior.rate) for y, n in zip(counts, exposures, strict=True)]


def location_quotient(a: int, b: int, c: int, n: int, z: float = Z95) -> tuple[float, float, float]:
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
