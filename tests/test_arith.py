"""Checks of the shared integer arithmetic against its stated formulas."""

import numpy as np
import pytest
import torch

from snnconvert import arith as A


@pytest.mark.parametrize("bits,expected", [(2, 1), (3, 3), (4, 7), (8, 127)])  # symmetric signed range (common practice)
def test_weight_max(bits, expected):
    assert A.weight_max(bits) == expected


def test_offline_rounding_is_half_even_like_numpy():
    # numpy/torch round half to even: [-0.5, 0.5, 1.5, 2.5] -> [-0, 0, 2, 2] (their documentation)
    assert A.round_half_even(np.array([-0.5, 0.5, 1.5, 2.5])).tolist() == [0, 0, 2, 2]


@pytest.mark.parametrize("m", [0.5, 0.3, 1.7, 1e-4, 3.0, 0.999999])
def test_fixed_point_multiplier_relative_error(m):
    m0, n = A.fixed_point_multiplier(np.array([m]), bits=16)
    # M = M0 * 2^-n with M0 normalised to [0.5, 1) of a 16-bit word (Jacob et al. 2018, from memory)
    assert 2**15 <= m0[0] < 2**16 and n[0] >= 1
    # rounding to 16 bits: error <= half an ulp, 2^-1 / 2^15 = 2^-16 relative (hand-computed from the bound above)
    assert abs(m0[0] * 2.0 ** -n[0] - m) / m <= 2.0**-16


def test_requantize_matches_rounding_half_up_and_ttfs_gives_same_value():
    rng = np.random.default_rng(0)
    v = rng.integers(-5000, 5000, size=(64, 3))                    # (N, C)
    m0, n = A.fixed_point_multiplier(np.array([0.01, 0.0037, 0.125]), bits=12)
    q = 15
    a = A.requantize(v, m0, n, q)
    # integer multiply then rounding right shift = round half up (Jacob et al. 2018, from memory); float64 is exact here
    exact = np.floor(v * (m0 / 2.0**n) + 0.5)
    assert np.array_equal(a, np.clip(exact, 0, q).astype(np.int64))
    # ttfs: the first crossing step t gives back a = Q - t; zero never fires (time-to-first-spike code,
    # Rueckauer & Liu 2018; Stanojevic et al. 2023)
    t_fire = np.full(v.shape, -1)
    for t in range(q - 1, -1, -1):
        t_fire = np.where(A.ttfs_crosses(v, m0, n, q, t), t, t_fire)
    assert np.array_equal(A.decode_time(t_fire, q), a)
    assert np.array_equal(A.encode_time(a, q), t_fire)
    # torch and numpy give the same integers
    assert torch.equal(A.requantize(torch.from_numpy(v), m0, n, q), torch.from_numpy(a))


@pytest.mark.parametrize("F,w,q,b,bits", [(9, 7, 15, 0, 11), (1, 1, 1, 0, 2), (100, 127, 255, 1000, 23)])
def test_accumulator_bits_formula(F, w, q, b, bits):
    # formula: ceil(log2(F*max|W|*Q + |B| + 1)) + 1 (accumulator bound plus a sign bit):
    # 9*7*15 = 945 -> ceil(log2 946) = 10, + 1 = 11; 1*1*1 = 1 -> ceil(log2 2) = 1, + 1 = 2;
    # 100*127*255 + 1000 = 3,239,500 -> ceil(log2 3,239,501) = 22, + 1 = 23
    assert A.accumulator_bits(F, w, q, b) == bits


def test_limit_accumulator_saturate_and_wrap():
    v = np.array([-200, -128, 0, 127, 128, 300])
    sat, over = A.limit_accumulator(v, 8, "saturate")
    # 8-bit two's complement range is -128..127 (common practice): clamp there, flag what lay outside
    assert sat.tolist() == [-128, -128, 0, 127, 127, 127] and over.tolist() == [1, 0, 0, 0, 1, 1]
    wrp, _ = A.limit_accumulator(v, 8, "wrap")
    # two's complement wrap-around of 8 bits, v mod 256 into -128..127 (common practice): 128 -> -128, 300 -> 44, -200 -> 56
    assert wrp.tolist() == [56, -128, 0, 127, -128, 44]


def test_argmax_ties_go_to_lowest_index():
    v = np.array([[1, 3, 3], [5, 5, 0]])
    # first maximal index, as numpy.argmax (numpy documentation): row 0 -> 1, row 1 -> 0
    assert np.argmax(v, axis=1).tolist() == [1, 0]
    assert A.argmax_first(v).tolist() == [1, 0]
    assert A.argmax_first(torch.from_numpy(v)).tolist() == [1, 0]


# --- the integer requantizer against an exact rational reference -------------------------------
# Reference: a = clamp(floor(V * M0 / 2^n + 1/2), 0, Q) in exact rationals (fractions.Fraction),
# the stated rule "round half up, then clamp" (Jacob et al. 2018 for the multiply-and-shift form,
# from memory). Careful fixed-point libraries test their rounding shift at 2^i - 2 .. 2^i + 2,
# at exact halves and at the carry into the next power of two (common practice).

from fractions import Fraction  # noqa: E402
import math  # noqa: E402

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


def _ref_requantize(v: int, m0: int, n: int, q: int) -> int:
    return min(max(math.floor(Fraction(v * m0, 2 ** n) + Fraction(1, 2)), 0), q)


def _both(v, m0, n, q):
    """requantize on numpy and on torch; both must give the same integers."""
    v = np.asarray(v, dtype=np.int64).reshape(-1, 1)
    a = A.requantize(v, [m0], [n], q)
    t = A.requantize(torch.from_numpy(v), [m0], [n], q)
    assert np.array_equal(a, t.numpy())
    return a.reshape(-1).tolist()


EDGE_V = sorted({s * (2 ** i + d) for i in range(1, 40, 3) for d in (-2, -1, 0, 1, 2) for s in (1, -1)})


@pytest.mark.parametrize("m0,n", [(1, 1), (3, 2), (32768, 16), (65535, 30), (40503, 17), (2**30 + 1, 40)])
def test_requantize_at_powers_of_two_and_their_negatives(m0, n):
    q = 255
    vs = [v for v in EDGE_V if (abs(v).bit_length() + 1) + m0.bit_length() <= 63]
    assert _both(vs, m0, n, q) == [_ref_requantize(v, m0, n, q) for v in vs]


def test_exact_halves_round_towards_plus_infinity():
    # M = 1/2 (M0 = 1, n = 1): V * M = V / 2 lands on exact halves for odd V
    vs = [1, 3, 5, -1, -3, -5, 7]
    # round half up: 0.5 -> 1, 1.5 -> 2, 2.5 -> 3 (half-to-even would give 0, 2, 2), 3.5 -> 4
    assert _both(vs, 1, 1, 255) == [1, 2, 3, 0, 0, 0, 4]
    # the unclamped rule: floor(x + 1/2) gives -0.5 -> 0, -1.5 -> -1, -2.5 -> -2 (half away from zero: -1, -2, -3);
    # every negative result clamps to 0 either way, so the payloads above are those of both rules
    v = np.array([-1, -3, -5], dtype=np.int64)
    assert ((v * 1 + 1) >> 1).tolist() == [0, -1, -2]


def test_zero_multiplier_gives_silence():
    m0, n = A.fixed_point_multiplier(np.array([0.0, 0.25]), bits=8)
    assert (m0[0], n[0]) == (0, 1)                    # M = 0 -> (0, 1): every payload 0
    assert (m0[1], n[1]) == (128, 9)                  # 0.25 = 128 * 2^-9 exactly
    assert _both([-2**40, -1, 0, 1, 2**40], 0, 1, 255) == [0, 0, 0, 0, 0]


@pytest.mark.parametrize("m,bits,want", [
    (0.999, 4, (8, 3)),            # 0.999 * 16 = 15.98 rounds to 16 = 2^4: carry -> 8 * 2^-3 = 1.0
    (1.0 - 2**-20, 16, (32768, 15)),
    (0.75, 4, (12, 4)),            # exact: 12 / 16
    (7.5, 4, (15, 1)),             # the largest 4-bit M0 with n = 1
])
def test_multiplier_split_and_the_carry_into_the_next_power_of_two(m, bits, want):
    m0, n = A.fixed_point_multiplier(np.array([m]), bits=bits)
    assert (int(m0[0]), int(n[0])) == want
    assert m0[0] < 2 ** bits and n[0] >= 1


@pytest.mark.parametrize("m,bits", [(8.0, 4), (7.99, 4), (2.0, 2), (2.0**31, 31)])
def test_multiplier_that_needs_a_wider_mantissa_is_refused(m, bits):
    # M >= 2^(bits-1), or rounding up to it, needs n < 1 or more than `bits` bits of M0
    with pytest.raises(ValueError, match="does not fit"):
        A.fixed_point_multiplier(np.array([m]), bits=bits)


@pytest.mark.parametrize("acc", [8, 20, 40])
def test_multiplier_below_every_potential_is_stored_silent_and_changes_no_payload(acc):
    bits = 16
    top = 2 ** (acc - 1) - 1                         # largest potential of a signed acc-bit accumulator
    # just small enough: M0 * 2^(acc-1) <= 2^(n-1)  <=>  M <= 2^-acc (up to the split's rounding)
    m_small, m_live = 2.0 ** -acc, 2.0 ** -acc * 1.01
    m0, n = A.fixed_point_multiplier(np.array([m_small, m_live]), bits=bits)
    s0, sn = A.fixed_point_multiplier(np.array([m_small, m_live]), bits=bits, acc_bits=acc)
    assert (s0[0], sn[0]) == (0, 1)                   # silent
    assert (s0[1], sn[1]) == (m0[1], n[1])            # a multiplier that can reach payload 1 is kept
    assert _ref_requantize(top, int(m0[0]), int(n[0]), 255) == 0     # the unsilenced split gives 0 too
    assert _ref_requantize(top, int(m0[1]), int(n[1]), 255) == 1


def test_a_tiny_multiplier_keeps_a_small_shift():
    # a near-dead channel: M ~ 1e-23 would need n ~ 90 > 62; with the accumulator width it is silent
    with pytest.raises(ValueError, match="shifts n must lie in"):
        A.check_requantize_range(20, *A.fixed_point_multiplier(np.array([1e-23]), bits=16))
    m0, n = A.fixed_point_multiplier(np.array([1e-23]), bits=16, acc_bits=20)
    A.check_requantize_range(20, m0, n)
    assert (m0[0], n[0]) == (0, 1)


@pytest.mark.parametrize("acc,mbits,ok", [(47, 16, True), (48, 16, False), (32, 31, True), (33, 31, False)])
def test_accumulator_plus_multiplier_width_must_fit_63_bits(acc, mbits, ok):
    m0 = np.array([2 ** mbits - 1])
    if ok:
        A.check_requantize_range(acc, m0, np.array([mbits]))
        v = np.array([[-(2 ** (acc - 1))], [2 ** (acc - 1) - 1]], dtype=np.int64)   # the extremes of the width
        got = A.requantize(v, m0, [62], 2 ** 8 - 1).reshape(-1).tolist()
        assert got == [_ref_requantize(int(x), int(m0[0]), 62, 255) for x in v.reshape(-1)]
    else:
        with pytest.raises(ValueError, match="must be <= 63"):
            A.check_requantize_range(acc, m0, np.array([mbits]))
        with pytest.raises(ValueError, match="must be <= 63"):   # on data: numpy would wrap silently
            A.requantize(np.array([[2 ** (acc - 2)]], dtype=np.int64), m0, [mbits], 255)


def test_requantize_refuses_float_potentials_and_bad_shifts():
    with pytest.raises(TypeError, match="int64"):
        A.requantize(torch.zeros((2, 1), dtype=torch.float32), [1], [1], 15)
    with pytest.raises(TypeError, match="int64"):
        A.requantize(np.zeros((2, 1)), [1], [1], 15)
    with pytest.raises(ValueError, match="shifts n"):
        A.requantize(np.zeros((2, 1), dtype=np.int64), [1], [0], 15)
    with pytest.raises(ValueError, match="shifts n"):
        A.requantize(np.zeros((2, 1), dtype=np.int64), [1], [63], 15)
    with pytest.raises(ValueError, match="ttfs threshold"):
        A.ttfs_crosses(np.zeros((2, 1), dtype=np.int64), [1], [60], 255, 0)


@settings(max_examples=300, deadline=None)
@given(st.data())
def test_requantize_equals_the_exact_rational_rule(data):
    mbits = data.draw(st.integers(1, 31))
    acc = data.draw(st.integers(2, 63 - mbits))
    m0 = data.draw(st.integers(0, 2 ** mbits - 1))
    n = data.draw(st.integers(1, 62))
    q = data.draw(st.sampled_from([1, 3, 7, 15, 255, 2 ** 20]))
    vs = data.draw(st.lists(st.integers(-(2 ** (acc - 1)), 2 ** (acc - 1) - 1), min_size=1, max_size=8))
    assert _both(vs, m0, n, q) == [_ref_requantize(v, m0, n, q) for v in vs]
    if q <= 15 and q.bit_length() + n <= 63:
        # ttfs: the first crossing of the falling threshold carries the same value
        v = np.asarray(vs, dtype=np.int64).reshape(-1, 1)
        t_fire = np.full(v.shape, -1)
        for t in range(q - 1, -1, -1):
            t_fire = np.where(A.ttfs_crosses(v, [m0], [n], q, t), t, t_fire)
        assert A.decode_time(t_fire, q).reshape(-1).tolist() == [_ref_requantize(x, m0, n, q) for x in vs]


@settings(max_examples=300, deadline=None)
@given(st.integers(2, 31), st.fractions(min_value=Fraction(1, 2 ** 60), max_value=Fraction(1, 1)))
def test_multiplier_split_error_is_within_half_an_ulp(bits, m):
    mf = float(m)
    m0, n = A.fixed_point_multiplier(np.array([mf]), bits=bits)
    m0, n = int(m0[0]), int(n[0])
    assert 2 ** (bits - 1) <= m0 < 2 ** bits and n >= 1
    # |M0 * 2^-n - M| <= 2^-(n+1) (half an ulp of the split), i.e. relative error <= 2^-bits, exactly
    assert abs(Fraction(m0, 2 ** n) - Fraction(mf)) <= Fraction(1, 2 ** (n + 1))


# --- weight scales: near-dead and all-zero channels ---------------------------------------------

def test_channel_ranges_are_floored_at_a_fraction_of_the_layer_and_zero_layers_use_unit_range():
    w = np.zeros((4, 3))
    w[0, 1], w[1, 0], w[2, 2] = 0.5, 1e-12, 0.25          # channel 3 all zero; channel 1 near dead
    qm = A.weight_max(4)
    s = A.weight_scale(w, 4, per_channel=True)
    # floor: 2^-8 of the widest channel's 0.5
    np.testing.assert_array_equal(s, np.array([0.5, 0.5 / 256, 0.25, 0.5 / 256]) / qm)
    W = A.quantize_weights(w, s, 4)
    assert W[1].tolist() == [0, 0, 0] and W[0, 1] == qm and W[2, 2] == qm
    np.testing.assert_array_equal(A.weight_scale(w, 4, per_channel=False), np.full(4, 0.5 / qm))
    for pc in (True, False):                               # an all-zero layer: r = 1, W = 0
        np.testing.assert_array_equal(A.weight_scale(np.zeros((3, 2)), 4, pc), np.full(3, 1.0 / qm))
    # the torch twin gives the same ranges
    r = np.array([0.5, 1e-12, 0.25, 0.0])
    np.testing.assert_array_equal(A.channel_ranges(torch.from_numpy(r)).numpy(), A.channel_ranges(r))
    np.testing.assert_array_equal(A.channel_ranges(torch.zeros(3, dtype=torch.float64)).numpy(), np.ones(3))


# ------------------------------------------------------------------ weight rule "mean:c" (ternary threshold)

@pytest.mark.parametrize("per_channel", [False, True])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mean_rule_gives_the_ternary_weight_network_threshold(seed, per_channel):
    # Ternary Weight Networks (Li & Liu 2016, eq. 5-6): W = sign(w) if |w| > Delta else 0,
    # Delta = 0.7 * mean|w| (per layer; here also per output channel)
    w = np.random.default_rng(seed).standard_normal((8, 4, 3, 3)) * 0.1
    a = np.abs(w.reshape(8, -1))
    delta = 0.7 * (a.mean(axis=1, keepdims=True) if per_channel else a.mean())
    want = (np.sign(w.reshape(8, -1)) * (a > delta)).reshape(w.shape).astype(np.int64)
    s = A.weight_scale(w, 2, per_channel, "mean", 0.7)
    assert np.array_equal(A.quantize_weights(w, s, 2), want)
    # with max-abs scales the same grid keeps only |w| > max|w| / 2: under half as many non-zero weights
    kept_max = np.count_nonzero(A.quantize_weights(w, A.weight_scale(w, 2, per_channel), 2))
    assert kept_max < np.count_nonzero(want) / 2


@pytest.mark.parametrize("bits,c,expect", [
    (2, 0.5, 0.5),             # s = 2 c mean|w| = 0.5 while the grid (1 level) stays inside max|w| = 3
    (3, 0.5, 0.5),             # 3 levels of 0.5 reach 1.5 <= 3
    (4, 0.5, 3.0 / 7),         # 7 levels of 0.5 would reach 3.5 > 3: the max rule's step 3 / 7
])
def test_mean_rule_step_is_capped_by_the_max_rule(bits, c, expect):
    w = np.array([[3.0, 0.5, -0.5, 0.5, -0.5, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -1.0]])  # mean|w| = 6 / 12 = 0.5
    assert A.weight_scale(w, bits, False, "mean", c)[0] == expect
