"""Statistics of accuracies measured on a finite test set (torch-free).

    Wilson score interval (Wilson 1927) of a proportion k/n at confidence 1 - alpha, z = Phi^-1(1 - alpha/2):
        p_hat  = k / n
        center = (p_hat + z^2 / (2n)) / (1 + z^2 / n)
        half   = z / (1 + z^2 / n) * sqrt(p_hat (1 - p_hat) / n + z^2 / (4 n^2))
        interval = [center - half, center + half]   (clipped to [0, 1] against rounding)

    McNemar's exact test (McNemar 1947) of two classifiers decided on the same samples:
        b = samples the first gets right and the second wrong, c = the reverse (discordant pairs)
        under H0 (equal accuracy) b ~ Binomial(b + c, 1/2)
        p = min(1, 2 * P[X <= min(b, c)]),  X ~ Binomial(b + c, 1/2)   (two-sided exact binomial test)
    Concordant samples (both right or both wrong) carry no information about the difference.

Edge cases: n = 0 gives the interval (0, 1) (nothing measured); k = 0 and k = n give intervals
that reach 0 and 1 respectively; no discordant pairs (b = c = 0) gives p = 1.
"""

from __future__ import annotations

import math
from statistics import NormalDist

CONFIDENCE = 0.95   # common practice: 95 % intervals


def wilson_interval(k: int, n: int, confidence: float = CONFIDENCE) -> tuple[float, float]:
    """(low, high) of the Wilson score interval of k successes in n trials (module docstring)."""
    k, n = int(k), int(n)
    if n < 0 or k < 0 or k > n:
        raise ValueError(f"need 0 <= k <= n; got k={k}, n={n}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie in (0, 1); got {confidence}")
    if n == 0:
        return 0.0, 1.0
    z = NormalDist().inv_cdf(1.0 - (1.0 - confidence) / 2.0)
    p = k / n
    z2 = z * z
    denom = 1.0 + z2 / n
    center = (p + z2 / (2 * n)) / denom
    half = z / denom * math.sqrt(p * (1.0 - p) / n + z2 / (4.0 * n * n))
    low = 0.0 if k == 0 else max(0.0, center - half)
    high = 1.0 if k == n else min(1.0, center + half)
    return low, high


def mcnemar_exact_p(b: int, c: int) -> float:
    """Two-sided exact McNemar p-value of b and c discordant pairs: min(1, 2 * P[X <= min(b, c)]),
    X ~ Binomial(b + c, 1/2). b = c = 0 gives 1."""
    b, c = int(b), int(c)
    if b < 0 or c < 0:
        raise ValueError(f"need b, c >= 0; got b={b}, c={c}")
    n = b + c
    if n == 0:
        return 1.0
    m = min(b, c)
    tail = sum(math.comb(n, i) for i in range(m + 1))   # exact integers; one division at the end
    return min(1.0, 2 * tail / 2 ** n)   # int / int: correctly rounded for any n


def discordant_pairs(first_right, second_right) -> tuple[int, int]:
    """(b, c): samples only the first classifier gets right, samples only the second gets right."""
    b = c = 0
    for a, s in zip(first_right, second_right):
        b += bool(a) and not bool(s)
        c += bool(s) and not bool(a)
    return b, c


def percent_interval(ci) -> str:
    """'[97.8, 99.6] %' from an interval of proportions, or '' when there is none."""
    if not ci:
        return ""
    return f"[{100 * ci[0]:.1f}, {100 * ci[1]:.1f}] %"


def p_text(p) -> str:
    """'p = 1.0', 'p = 0.031', 'p < 0.001' for a p-value, '' for None."""
    if p is None:
        return ""
    if p < 0.001:
        return "p < 0.001"
    if p >= 0.995:
        return "p = 1.0"
    return f"p = {p:.2f}" if p >= 0.1 else f"p = {p:.2g}"


def annotation(metrics: dict, key: str) -> str:
    """What follows a printed figure of a metrics dict: '  95 % CI [96.8, 99.4] %' after an accuracy
    with an interval (key + '_ci'), '  (McNemar p = 1.0)' after conversion_loss_pp with its p-value;
    '' when the metrics hold neither (older files)."""
    if key == "conversion_loss_pp":
        p = metrics.get("conversion_loss_p")
        return f"  (McNemar {p_text(p)})" if isinstance(p, (int, float)) else ""
    ci = metrics.get(key + "_ci")
    return f"  95 % CI {percent_interval(ci)}" if isinstance(ci, (list, tuple)) and len(ci) == 2 else ""
