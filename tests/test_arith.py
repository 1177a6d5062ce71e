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
