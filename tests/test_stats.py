"""Wilson intervals and McNemar's exact test against scipy and published worked values."""

import math

import pytest
from scipy.stats import binomtest

from snnconvert.stats import discordant_pairs, mcnemar_exact_p, p_text, percent_interval, wilson_interval


@pytest.mark.parametrize("k,n", [(0, 1), (1, 1), (0, 10), (10, 10), (7, 20), (355, 360), (359, 360),
                                 (360, 360), (1, 1797), (1500, 1797)])
def test_wilson_matches_scipy(k, n):
    # reference: scipy.stats.binomtest(k, n).proportion_ci(method="wilson") (Wilson 1927)
    ref = binomtest(k, n).proportion_ci(method="wilson")
    low, high = wilson_interval(k, n)
    assert low == pytest.approx(ref.low, abs=1e-12)
    assert high == pytest.approx(ref.high, abs=1e-12)
    assert low <= k / n <= high


@pytest.mark.parametrize("k,n,low,high", [
    # Newcombe 1998, Stat. Med. 17:857-872, Table II, method 3 (Wilson score); values from memory
    (81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (0, 20, 0.0, 0.1611), (1, 29, 0.0061, 0.1718)])
def test_wilson_published_values(k, n, low, high):
    lo, hi = wilson_interval(k, n)
    assert (round(lo, 4), round(hi, 4)) == (low, high)


def test_wilson_edges():
    assert wilson_interval(0, 0) == (0.0, 1.0)                  # nothing measured: nothing known
    assert wilson_interval(0, 50)[0] == 0.0 and wilson_interval(50, 50)[1] == 1.0
    a, b = wilson_interval(30, 40, 0.90), wilson_interval(30, 40, 0.99)
    assert b[0] < a[0] and a[1] < b[1]                          # higher confidence, wider interval
    for bad in ((3, 2), (-1, 2), (1, -1)):
        with pytest.raises(ValueError):
            wilson_interval(*bad)


@pytest.mark.parametrize("b,c", [(0, 1), (1, 0), (1, 2), (3, 10), (10, 3), (5, 5), (0, 7), (40, 60), (120, 90),
                                 (600, 530)])
def test_mcnemar_matches_scipy(b, c):
    # reference: exact McNemar = two-sided binomial test of b in b + c trials, p = 0.5 (McNemar 1947)
    ref = binomtest(b, b + c, 0.5).pvalue
    assert mcnemar_exact_p(b, c) == pytest.approx(ref, rel=1e-9)


def test_mcnemar_by_hand():
    assert mcnemar_exact_p(0, 0) == 1.0                          # no discordant pairs: no evidence
    assert mcnemar_exact_p(1, 0) == 1.0                          # one flipped sample means nothing
    assert mcnemar_exact_p(0, 5) == 2 / 32                       # 2 * P[X = 0], X ~ B(5, 1/2), by hand
    assert mcnemar_exact_p(1, 9) == pytest.approx(2 * 11 / 1024)  # 2 * (1 + 10) / 2^10, by hand
    assert mcnemar_exact_p(3000, 3000) == 1.0 and math.isfinite(mcnemar_exact_p(2000, 3000))
    with pytest.raises(ValueError):
        mcnemar_exact_p(-1, 2)


def test_discordant_pairs_and_text():
    assert discordant_pairs([1, 1, 0, 0, 1], [1, 0, 1, 0, 0]) == (2, 1)
    assert p_text(1.0) == "p = 1.0" and p_text(0.0625) == "p = 0.062" and p_text(1e-5) == "p < 0.001"
    assert p_text(None) == "" and percent_interval(None) == ""
    assert percent_interval((0.9679, 0.99405)) == "[96.8, 99.4] %"
