"""Model building from layer lists, BN folding and the conversion-aware modules, checked against torch."""

import numpy as np
import pytest
import torch
from torch import nn

from snnconvert import arith, models as M
from snnconvert.errors import UsageError
from snnconvert.settings.model import DEFAULT_LAYERS


DEFAULT = DEFAULT_LAYERS


def test_default_model_structure_params_and_macs(capsys):
    m = M.build_model({"layers": DEFAULT}, (1, 16, 16), 10)
    kinds = [type(x).__name__ for x in m]
    assert kinds == ["Conv2d", "ReLU", "Conv2d", "ReLU", "MaxPool2d", "Conv2d", "ReLU", "MaxPool2d", "Dropout",
                     "Flatten", "Linear", "ReLU", "Linear"]
    d = M.describe(m, (1, 16, 16))
    # MACs by the usual count C_out*H_out*W_out*C_in*k*k per conv and in*out per dense (common practice):
    # 16*16*16*1*9 + 16*16*16*16*9 + 32*8*8*16*9 + 512*64 + 64*10
    assert d["macs"] == 36864 + 589824 + 294912 + 32768 + 640
    # (16*9 + 16) + (16*16*9 + 16) + (32*16*9 + 32) + (512*64 + 64) + (64*10 + 10)
    assert d["params"] == sum(p.numel() for p in m.parameters()) == 160 + 2320 + 4640 + 32832 + 650
    # the two sums above: 160 + 2320 + 4640 + 32832 + 650 = 40,602 and 36864 + ... + 640 = 955,008
    assert "40,602 parameters, 955,008 multiply-accumulates per sample" in capsys.readouterr().err


@pytest.mark.parametrize("layers,shape", [
    ([{"type": "conv", "out": 4, "kernel": 5, "stride": 2, "padding": 0}, {"type": "dense"}], (2, 17, 13)),
    ([{"type": "conv", "out": 3, "bn": True}, {"type": "avgpool", "size": 3, "stride": 2},
      {"type": "dropout", "p": 0.2}, {"type": "dense", "units": 7, "bn": True}, {"type": "dense", "units": 10}], (1, 9, 9)),
    ([{"type": "maxpool", "size": 2}, {"type": "dense", "units": 5}, {"type": "dropout", "p": 0.1}, {"type": "dense"}],
     (3, 8, 8)),
])
def test_built_models_run_and_macs_match_the_formula(layers, shape):
    m = M.build_model(layers, shape, 10, quiet=True).eval()
    out = m(torch.rand(4, *shape))  # (4, 10)
    assert out.shape == (4, 10)
    expected, x = 0, torch.rand(1, *shape)
    for mod in m:
        y = mod(x)
        if isinstance(mod, nn.Conv2d):
            expected += y.numel() * mod.in_channels * mod.kernel_size[0] * mod.kernel_size[1]
        elif isinstance(mod, nn.Linear):
            expected += mod.in_features * mod.out_features
        x = y
    assert M.describe(m, shape)["macs"] == expected


@pytest.mark.parametrize("layers,shape,classes,pattern", [
    ([{"type": "conv", "out": 8, "kernal": 3}, {"type": "dense"}], (1, 8, 8), 10,
     r"Unknown key 'kernal' in section \[model\.layers\[0\] \(conv\)\]\. Did you mean 'kernel'\?"),
    ([{"type": "conv", "out": 0}, {"type": "dense"}], (1, 8, 8), 10,
     r"^The 'out' parameter of model\.layers\[0\] must be an int in \[1, 4096\]\. Got 0 instead\.$"),
    ([{"type": "pool", "size": 2}, {"type": "dense"}], (1, 8, 8), 10,
     r"The 'type' parameter of model\.layers\[0\] must be one of 'conv', 'maxpool', 'avgpool', 'dense', 'dropout'"),
    ([{"type": "dropout", "p": 1.5}, {"type": "dense"}], (1, 8, 8), 10, r"'p' parameter .* in \[0\.0, 0\.9\]\. Got 1\.5"),
    ([{"type": "conv", "out": 4}], (1, 8, 8), 10, r"The last layer of model\.layers must be a dense layer"),
    ([{"type": "dense", "units": 10, "bn": True}], (1, 8, 8), 10, r"cannot have bn=true"),
    ([{"type": "dense"}, {"type": "dense"}], (1, 8, 8), 10, r"'units' parameter of model\.layers\[0\] is required"),
    ([{"type": "maxpool"}, {"type": "dense"}], (1, 8, 8), 10, r"'size' parameter of model\.layers\[0\] \(maxpool\) is required"),
    ([{"kernel": 3}, {"type": "dense"}], (1, 8, 8), 10, r"has no 'type'"),
    ("conv", (1, 8, 8), 10, r"must be a non-empty list of layer tables"),
    ([{"type": "dense", "units": 5}], (1, 8, 8), 10,
     r"model\.layers\[0\] \(dense\) is the output layer: its units must equal the number of classes\. Got units=5 for 10 classes"),
    ([{"type": "conv", "out": 4, "kernel": 5, "padding": 0}, {"type": "conv", "out": 4, "kernel": 5, "padding": 0},
      {"type": "dense"}], (1, 8, 8), 10,
     # output side floor((H + 2p - k)/s) + 1 (torch.nn.Conv2d documentation): 8 -> 4 -> 0
     r"model\.layers\[1\] \(conv\) with kernel 5, stride 1, padding 0 cannot take input shape \(4, 4, 4\): "
     r"output shape would be \(4, 0, 0\)"),
    ([{"type": "dense", "units": 8}, {"type": "conv", "out": 4}, {"type": "dense"}], (1, 8, 8), 10,
     r"model\.layers\[1\] \(conv\) needs a \(C, H, W\) input but gets shape \(8,\)"),
    ([{"type": "dense"}], (8, 8), 10, r"input shape of the model must be \(C, H, W\)"),
])
def test_invalid_layer_lists(layers, shape, classes, pattern):
    with pytest.raises(UsageError, match=pattern):
        M.build_model({"layers": layers}, shape, classes, quiet=True)


def _with_random_bn_stats(m):
    g = torch.Generator().manual_seed(1)
    for mod in m:
        if isinstance(mod, (nn.BatchNorm2d, nn.BatchNorm1d)):
            n = mod.num_features
            mod.running_mean.copy_(torch.randn(n, generator=g))
            mod.running_var.copy_(torch.rand(n, generator=g) + 0.5)
            mod.weight.data.copy_(torch.randn(n, generator=g))
            mod.bias.data.copy_(torch.randn(n, generator=g))
    return m


def test_fold_batchnorm_matches_eval_model():
    torch.manual_seed(0)
    layers = [{"type": "conv", "out": 6, "bn": True}, {"type": "maxpool", "size": 2},
              {"type": "dense", "units": 12, "bn": True}, {"type": "dense"}]
    m = _with_random_bn_stats(M.build_model(layers, (2, 8, 8), 10, quiet=True)).eval()
    f = M.fold_batchnorm(m)
    assert not any(isinstance(x, (nn.BatchNorm1d, nn.BatchNorm2d)) for x in f)
    x = torch.rand(16, 2, 8, 8)
    torch.testing.assert_close(f(x), m(x), atol=1e-5, rtol=1e-5)
    assert any(isinstance(x, nn.BatchNorm2d) for x in m)  # the input model is untouched


def test_fold_batchnorm_needs_a_layer_before_it():
    with pytest.raises(UsageError, match=r"layer 0 \(BatchNorm2d\) must follow a Conv2d or Linear"):
        M.fold_batchnorm(nn.Sequential(nn.BatchNorm2d(3), nn.Flatten(), nn.Linear(3, 2)))


def test_hand_written_sequential_round_trips_through_its_spec():
    hand = nn.Sequential(nn.Conv2d(2, 5, 3, padding=1), nn.BatchNorm2d(5), nn.ReLU(), nn.AvgPool2d(2),
                         nn.Flatten(), nn.Linear(5 * 4 * 4, 9), nn.ReLU(), nn.Dropout(0.25), nn.Linear(9, 3))
    spec = M.spec_from_model(hand)
    rebuilt = M.build_model(spec, (2, 8, 8), 3, quiet=True)
    assert [type(a) for a in rebuilt] == [type(b) for b in hand]
    rebuilt.load_state_dict(hand.state_dict())  # strict: raises unless keys and shapes are the same
    hand.eval(), rebuilt.eval()
    x = torch.rand(3, 2, 8, 8, generator=torch.Generator().manual_seed(0))
    assert torch.equal(rebuilt(x), hand(x))  # same layers, same order: the same function


@pytest.mark.parametrize("bad,pattern", [
    (nn.Sequential(nn.Conv2d(1, 2, 3), nn.Sigmoid(), nn.Flatten(), nn.Linear(2, 2)), r"a hidden Conv2d must be followed by ReLU"),
    (nn.Sequential(nn.Flatten(), nn.Tanh(), nn.Linear(4, 2)), r"layer 1 \(Tanh\) is not supported"),
    (nn.Sequential(nn.Conv2d(1, 2, 3, dilation=2), nn.ReLU(), nn.Flatten(), nn.Linear(2, 2)), r"undilated"),
])
def test_unsupported_hand_written_models(bad, pattern):
    with pytest.raises(UsageError, match=pattern):
        M.spec_from_model(bad)


# ------------------------------------------------------------ fake quantization vs torch's reference ops

def _tie_tensor(qmax, scale, n=400, seed=0):
    """Values k*s and (k + 1/2)*s exactly (s a power of two, so 1/s is exact), plus the max |w| = qmax*s."""
    g = torch.Generator().manual_seed(seed)
    k = torch.randint(-qmax, qmax, (n,), generator=g).float()
    half = torch.randint(0, 2, (n,), generator=g).float() * 0.5
    w = (k + half) * scale
    w[0] = qmax * scale
    return w


def _fake_quant(w, bits, per_channel):
    """The aware layers' weight path: arith's scale rule, then its fake quantizer (max rule)."""
    return arith.fake_quantize_weights_torch(w, arith.weight_scale_torch(w, bits, per_channel), bits)


@pytest.mark.parametrize("bits", [2, 3, 4, 8])
@pytest.mark.parametrize("kind", ["random", "ties"])
def test_weight_fake_quant_equals_torch_per_tensor(bits, kind):
    qm = arith.weight_max(bits)
    if kind == "random":
        w = torch.randn(6, 5, 3, 3, generator=torch.Generator().manual_seed(bits))
    else:
        w = _tie_tensor(qm, 2.0 ** -3).reshape(8, 50)
        assert bool(((w * 8).frac().abs() == 0.5).any())  # exact ties are present
    s = float(w.abs().max() / qm)
    # reference: torch.fake_quantize_per_tensor_affine (x * (1/s), round half to even; REFERENCES.md)
    ref = torch.fake_quantize_per_tensor_affine(w, s, 0, -qm, qm)
    assert torch.equal(_fake_quant(w, bits, per_channel=False), ref)


@pytest.mark.parametrize("bits", [2, 4, 6])
def test_weight_fake_quant_equals_torch_per_channel(bits):
    qm = arith.weight_max(bits)
    w = torch.randn(7, 4, 3, 3, generator=torch.Generator().manual_seed(10 + bits))
    w[2] = 0.0  # an all-zero channel must stay zero, not NaN
    r = w.abs().reshape(7, -1).amax(1)
    # the all-zero channel takes the floor of the scale rule: 2^-8 of the layer's widest channel
    scales = torch.maximum(r, r.max() * 2.0**-8) / qm
    ref = torch.fake_quantize_per_channel_affine(w, scales, torch.zeros(7, dtype=torch.int32), 0, -qm, qm)
    got = _fake_quant(w, bits, per_channel=True)
    assert torch.equal(got, ref)
    assert torch.equal(got[2], torch.zeros_like(got[2]))
    # the scale rule is arith.weight_scale's (max-abs over 2^(k-1)-1 levels)
    np.testing.assert_allclose(scales.double().numpy(), arith.weight_scale(w.numpy(), bits, True), rtol=1e-6)


@pytest.mark.parametrize("payload_bits,a_max", [(1, 1.0), (2, 0.7), (3, 2.5), (4, 1.3), (8, 5.0)])
def test_clipquant_equals_torch_fake_quantize(payload_bits, a_max):
    levels = arith.payload_max(payload_bits)
    cq = M.ClipQuant(a_max, levels)
    s = float(cq.a_max.detach() / levels)
    g = torch.Generator().manual_seed(payload_bits)
    x = torch.randn(2000, generator=g) * a_max
    ties = (torch.arange(-2, 2 * levels + 4) * 0.5) * s  # exact multiples of s/2 (ties when odd)
    x = torch.cat([x, ties])
    ref = torch.fake_quantize_per_tensor_affine(x, s, 0, 0, levels)
    assert torch.equal(cq(x).detach(), ref)


def test_clipquant_straight_through_gradients():
    cq = M.ClipQuant(1.0, 3)
    x = torch.tensor([-0.5, 0.2, 0.5, 0.9, 1.5, 3.0], requires_grad=True)
    cq(x).sum().backward()
    # STE (Bengio et al. 2013): identity inside the clip range, zero outside
    assert x.grad.tolist() == [0.0, 1.0, 1.0, 1.0, 0.0, 0.0]
    # d/da_max: 1 for each clipped input (y = a_max there), rounding residual inside, 0 below zero
    inside = [0.2, 0.5, 0.9]
    residual = sum(round(v * 3) / 3 - v for v in inside)
    assert cq.a_max.grad.item() == pytest.approx(2 + residual, abs=1e-6)


def test_make_aware_structure_and_values():
    torch.manual_seed(0)
    layers = [{"type": "conv", "out": 4, "bn": True}, {"type": "maxpool", "size": 2},
              {"type": "dense", "units": 8}, {"type": "dense"}]
    m = _with_random_bn_stats(M.build_model(layers, (1, 6, 6), 3, quiet=True)).eval()
    a = M.make_aware(m, weight_bits=3, payload_bits=2, per_channel=True, act_max=[2.0, 1.5]).eval()
    assert [type(x).__name__ for x in a] == ["QConv2d", "ClipQuant", "MaxPool2d", "Flatten", "QLinear", "ClipQuant", "QLinear"]
    assert [x.levels for x in a if isinstance(x, M.ClipQuant)] == [3, 3]
    assert all(x.weight_bits == 3 and x.per_channel for x in a if isinstance(x, (M.QConv2d, M.QLinear)))
    x = torch.rand(5, 1, 6, 6)
    h = a[1](a[0](x))  # (5, 4, 6, 6) on the grid step act_max / (2^2 - 1) = 2/3: {0, 2/3, 4/3, 2} (formula)
    assert set(torch.round(h * 1.5).unique().tolist()) <= {0.0, 1.0, 2.0, 3.0}
    # wide budgets and a generous clip make the aware model match the folded float model
    wide = M.make_aware(m, 16, 16, False, act_max=[100.0, 100.0]).eval()
    torch.testing.assert_close(wide(x), m(x), atol=2e-3, rtol=0)
    with pytest.raises(UsageError, match="act_max has 1 values but the model has 2 activations"):
        M.make_aware(m, 4, 4, False, act_max=[1.0])
    with pytest.raises(UsageError, match=r"The 'payload_bits' parameter of convert must be an int in \[1, 16\]\. Got 0"):
        M.make_aware(m, 4, 0, False)


def test_hidden_ranges_max_is_the_largest_relu_output():
    from snnconvert.convert.calibrate import hidden_ranges
    torch.manual_seed(3)
    m = M.build_model([{"type": "conv", "out": 3}, {"type": "dense", "units": 5}, {"type": "dense"}], (1, 5, 5), 2,
                      quiet=True).eval()
    x = torch.rand(40, 1, 5, 5)
    r = hidden_ranges(m, x.numpy(), "max", 100.0)
    with torch.no_grad():
        h1 = m[1](m[0](x))
        h2 = m[4](m[3](m[2](h1)))
    assert r == pytest.approx([float(h1.max()), float(h2.max())])


def test_tiny_budget_recipe_is_the_48k_mac_network():
    # three 5x5 maps without padding on 28x28: 24*24*3*25 = 43,200 MACs; 2x2 pool -> 3*12*12 = 432;
    # dense 432*10 = 4,320: 47,520 multiply-accumulates per sample (counted by hand)
    from pathlib import Path
    from snnconvert import recipe
    r = recipe.load(Path(__file__).resolve().parents[1] / "recipes" / "tiny_budget.toml")
    d = M.describe(M.build_model(r["model"], (1, 28, 28), 10, quiet=True), (1, 28, 28))
    assert d["macs"] == 47_520 and d["params"] == 3 * 25 + 3 + 432 * 10 + 10
