"""Bias correction and the least-squares ("mse") calibration range, against hand-computed references."""

import sys
from pathlib import Path

import numpy as np
import pytest
import torch
from torch import nn

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import split, trained

from snnconvert import arith
from snnconvert.convert import convert_model, fold
from snnconvert.convert.calibrate import (
    MSE_CANDIDATES,
    activation_ranges,
    bias_shift,
    input_means,
    mse_range,
    range_statistic,
)
from snnconvert.errors import UsageError
from snnconvert.settings.convert import parse_range_rule, parse_weight_rule
from snnconvert.sim import simulate
from snnconvert.sim.reference import run_batch

torch.set_num_threads(1)


def _dense_model(w1, b1, w2, b2) -> nn.Sequential:
    m = nn.Sequential(nn.Flatten(), nn.Linear(len(w1[0]), len(w1)), nn.ReLU(), nn.Linear(len(w2[0]), len(w2)))
    with torch.no_grad():
        for lin, w, b in ((m[1], w1, b1), (m[3], w2, b2)):
            lin.weight.copy_(torch.tensor(w, dtype=torch.float32))
            lin.bias.copy_(torch.tensor(b, dtype=torch.float32))
    return m.eval()


# One hidden unit with w = (0.3, -0.7, 0.1) at k = 2 bits, rule max: s_w = max|w| / (2^(k-1) - 1) = 0.7,
# W = round(w / 0.7) = round(0.43, -1, 0.14) = (0, -1, 0), so eps = s_w W - w = (-0.3, 0, -0.1).
# Calibration frames (1, 0, 1) and (1, 1, 0): xbar = (1, 0.5, 0.5), delta = -0.3 * 1 - 0.1 * 0.5 = -0.35
# (hand-computed; Nagel et al. 2019, ICCV, section 4.2: E[eps x] = eps E[x]).
W1, B1 = [[0.3, -0.7, 0.1]], [0.5]
CAL = np.array([[1.0, 0.0, 1.0], [1.0, 1.0, 0.0]], dtype=np.float32).reshape(2, 1, 1, 3)


def test_bias_shift_of_a_dense_layer_by_hand():
    ops = fold(_dense_model(W1, B1, [[1.0], [-1.0]], [0.0, 0.0]))
    means = input_means(ops, CAL)
    assert means[0].reshape(-1).tolist() == [1.0, 0.5, 0.5]          # (C, H, W): the op flattens it
    eps = np.array([[-0.3, 0.0, -0.1]])
    assert bias_shift(ops[0], eps, means[0]) == pytest.approx([-0.35], abs=1e-7)   # float32 weights of the model


def test_converter_stores_the_corrected_bias():
    model = _dense_model(W1, B1, [[1.0], [-1.0]], [0.0, 0.0])
    kw = {"weight_bits": 2, "payload_bits": 4, "coding": "payload", "calibration": "max"}
    plain = convert_model(model, CAL, **kw)
    fixed = convert_model(model, CAL, **kw, bias_correction=True)
    l0, c0 = plain.layers[0], fixed.layers[0]
    assert l0.weight.tolist() == c0.weight.tolist() == [[0, -1, 0]]
    # bias grid: s_w * s_in = 0.7 * 1 (binary input); B = round(b / 0.7): 0.5 -> 1, 0.5 + 0.35 = 0.85 -> 1
    # (hand-computed); the shift is recorded
    assert l0.bias.tolist() == [1] and c0.bias.tolist() == [1]
    assert c0.info["bias_shift"] == pytest.approx([-0.35], abs=1e-7) and "bias_shift" not in l0.info
    assert fixed.meta["bias_correction"] is True and plain.meta["bias_correction"] is False
    # a bias that the shift moves across a rounding boundary: b = 0.2 -> round(0.2 / 0.7) = 0, 0.55 / 0.7 -> 1
    moved = convert_model(_dense_model(W1, [0.2], [[1.0], [-1.0]], [0.0, 0.0]), CAL, **kw, bias_correction=True)
    assert moved.layers[0].bias.tolist() == [1]
    assert convert_model(_dense_model(W1, [0.2], [[1.0], [-1.0]], [0.0, 0.0]), CAL, **kw).layers[0].bias.tolist() == [0]


def test_conv_bias_shift_matches_the_mean_over_samples_and_positions():
    rng = np.random.default_rng(3)
    conv = nn.Conv2d(2, 3, 3, stride=2, padding=1)
    model = nn.Sequential(conv, nn.ReLU(), nn.Flatten(), nn.Linear(3 * 3 * 3, 2)).eval()
    x = rng.integers(0, 2, size=(5, 2, 6, 6)).astype(np.float32)
    ops = fold(model)
    eps = rng.normal(size=ops[0].weight.shape)
    got = bias_shift(ops[0], eps, input_means(ops, x)[0])
    # reference: the direct sum of the convolution of every sample at every output position, then the mean
    xp = np.pad(x.astype(np.float64), ((0, 0), (0, 0), (1, 1), (1, 1)))
    ref = np.zeros(3)
    for n in range(5):
        for i in range(3):
            for j in range(3):
                patch = xp[n, :, 2 * i:2 * i + 3, 2 * j:2 * j + 3]
                ref += np.einsum("ocij,cij->o", eps, patch)
    np.testing.assert_allclose(got, ref / (5 * 9), rtol=1e-12, atol=1e-12)


def test_bias_correction_keeps_the_simulators_equal_and_skips_aware_models():
    model = trained("conv_avg")
    (xtr, _), (xte, _) = split()
    net = convert_model(model, xtr[:128], weight_bits=3, payload_bits=3, coding="payload", bias_correction=True)
    assert net.meta["bias_correction"] is True
    assert all("bias_shift" in layer.info for layer in net.layers if layer.kind in ("conv", "dense"))
    x_int = np.clip(np.rint(xte[:24]), 0, net.input_q).astype(np.int64)
    fast = simulate(net, x_int)
    ref = run_batch(net, x_int, progress=False)
    np.testing.assert_array_equal(fast.potentials, np.stack([r.potentials for r in ref]))
    from snnconvert.models import make_aware
    aware = make_aware(model, 3, 3, False, act_max=[1.0] * sum(isinstance(m, nn.ReLU) for m in model)).eval()
    skipped = convert_model(aware, xtr[:128], weight_bits=3, payload_bits=3, coding="payload", bias_correction=True)
    assert skipped.meta["bias_correction"] is False


def test_mse_range_by_hand():
    # 99 values at 1.0 and one at 10.0 on a one-level grid {0, r}: any r < 2 maps 1.0 to r and clips 10.0 to r,
    # E(r) = 99 (r - 1)^2 + (10 - r)^2 is least at r = 218 / 200 = 1.09; the nearest candidate 10 j / 256 is
    # j = 28 (1.09375; j = 27 and 29 give E larger by 0.11 and 0.19, hand-computed). r >= 2 sends 1.0 to 0: E >= 99.
    v = np.array([1.0] * 99 + [10.0])
    assert MSE_CANDIDATES == 256
    assert mse_range(v, 1) == 10.0 * 28 / 256
    # values that lie on the 4-level grid of r = 2 (0.5, 1, 1.5, 2) fit it exactly (E = 0 up to the histogram's
    # half-bin offsets of 2 / 4096, while the next candidates miss by >= 2 / 256 per value): r = max = 2
    assert mse_range(np.repeat([0.5, 1.0, 1.5, 2.0], [40, 30, 20, 10]), 4) == 2.0
    with pytest.raises(ValueError, match="levels >= 1"):
        mse_range(v, 0)
    assert range_statistic(np.array([0.0, -1.0]), "mse", 100.0, 15) == 0.0     # dead layer
    assert range_statistic(v, "mse", 100.0, 1) == 10.0 * 28 / 256


def test_mse_rule_in_the_converter_and_the_settings():
    assert parse_range_rule("mse") == ("mse", 100.0)
    with pytest.raises(UsageError) as e:
        parse_weight_rule("mse")
    assert str(e.value) == ("The 'weight_scale' parameter of convert must be 'max', 'percentile:Q' with Q in (0, 100] "
                            "or 'mean:C' with C in (0, 10]. Got 'mse' instead.")
    model = trained("mlp")
    (xtr, _), _ = split()
    ops = fold(model)
    net = convert_model(model, xtr[:128], weight_bits=4, payload_bits=2, coding="payload", calibration="mse")
    with torch.no_grad():
        h = torch.relu(model[1](torch.from_numpy(xtr[:128]).flatten(1))).numpy()
    r = mse_range(h[h > 0], arith.payload_max(2))
    assert net.layers[0].info["range"] == pytest.approx(r, rel=1e-6)
    assert activation_ranges(ops, xtr[:128], "mse", 100.0, levels=3)[0] == pytest.approx(r, rel=1e-6)
