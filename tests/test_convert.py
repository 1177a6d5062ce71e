"""Converter: layer checks, folding, calibration, weight/bias quantization, accuracy at high precision."""

import sys
from pathlib import Path

import numpy as np
import pytest
import torch
from torch import nn

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import accuracy, split, trained  # noqa: E402

from snnconvert import arith  # noqa: E402
from snnconvert.convert import ConvertSettings, convert_model, fold, folded_forward, parse_range_rule  # noqa: E402
from snnconvert.settings.convert import KEYS  # noqa: E402
from snnconvert.convert.calibrate import activation_ranges, calibration_subset, range_statistic  # noqa: E402
from snnconvert.errors import UsageError  # noqa: E402
from snnconvert.intnet import IntNetwork  # noqa: E402
from snnconvert.models import ClipQuant, make_aware  # noqa: E402
from snnconvert.sim import simulate  # noqa: E402

torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine
X16 = np.zeros((4, 1, 16, 16), dtype=np.float32)


@pytest.mark.parametrize("layers,match", [
    ([nn.Flatten(), nn.Linear(256, 10), nn.Sigmoid()],
     r"layer 2 \(Sigmoid\) is not supported by convert; supported layers: Conv2d, Linear, ReLU"),
    ([nn.Conv2d(1, 2, 3), nn.Conv2d(2, 2, 3), nn.ReLU(), nn.Flatten(), nn.Linear(288, 10)],
     r"layer 1 \(Conv2d\) follows layer 0 without a ReLU"),
    ([nn.Conv2d(1, 2, 3), nn.ReLU(), nn.BatchNorm2d(2), nn.Flatten(), nn.Linear(392, 10)],
     r"layer 2 \(BatchNorm2d\) must follow a Conv2d or Linear"),
    ([nn.Conv2d(1, 2, 3), nn.AvgPool2d(2), nn.ReLU(), nn.Flatten(), nn.Linear(98, 10)],
     r"layer 1 \(AvgPool2d\): average pooling before the activation"),
    ([nn.Flatten(), nn.Linear(256, 10), nn.ReLU()], r"must end with a Linear layer"),
    ([nn.Conv2d(1, 2, 3, dilation=2), nn.ReLU(), nn.Flatten(), nn.Linear(288, 10)], r"layer 0 \(Conv2d\).*dilation"),
    ([nn.Conv2d(1, 2, 3), nn.ReLU(), nn.AvgPool2d(2, padding=1), nn.Flatten(), nn.Linear(128, 10)],
     r"layer 2 \(AvgPool2d\): average pooling must have padding=0"),
    ([nn.Conv2d(1, 2, 3), nn.ReLU(), nn.AvgPool2d(2), nn.MaxPool2d(1), nn.Flatten(), nn.Linear(98, 10)],
     r"layer 2 \(AvgPool2d\) must be followed by a Conv2d or Linear"),
])
def test_unsupported_models_are_rejected_before_work(layers, match):
    with pytest.raises(UsageError, match=match):
        convert_model(nn.Sequential(*layers), X16, weight_bits=4, payload_bits=4, coding="payload")


@pytest.mark.parametrize("kw,msg", [
    ({"payload_bits": 0}, "The 'payload_bits' parameter of convert must be an int in [1, 8]. Got 0 instead."),
    ({"weight_bits": 17}, "The 'weight_bits' parameter of convert must be an int in [2, 16]. Got 17 instead."),
    ({"coding": "rate"}, "The 'coding' parameter of convert must be one of 'payload', 'ttfs', 'binary'. Got 'rate' instead."),
    ({"calibration": "percentile:0"},
     "The 'calibration' parameter of convert must be 'max', 'mse' or 'percentile:Q' with Q in (0, 100]. Got 'percentile:0' instead."),
    ({"overflow": "clip"}, "The 'overflow' parameter of convert must be one of 'saturate', 'wrap'. Got 'clip' instead."),
])
def test_parameters_are_validated_with_the_template(kw, msg):
    args = dict(weight_bits=4, payload_bits=4, coding="payload") | kw
    with pytest.raises(UsageError) as e:
        convert_model(nn.Sequential(nn.Flatten(), nn.Linear(256, 10)), X16, **args)
    assert str(e.value) == msg


@pytest.mark.parametrize("text,parsed", [("max", ("max", 100.0)), ("percentile:99.9", ("percentile", 99.9)),
                                         ("percentile:100", ("percentile", 100.0))])
def test_range_rule_parsing(text, parsed):
    assert parse_range_rule(text) == parsed


def test_settings_fill_defaults_and_reject_unknown_keys():
    s = ConvertSettings.from_section({"weight_bits": 3})
    assert s.weight_bits == 3 and s.payload_bits == KEYS["payload_bits"].default
    with pytest.raises(UsageError, match=r"Unknown key 'weight_bit' in section \[convert\]. Did you mean 'weight_bits'"):
        ConvertSettings.from_section({"weight_bit": 3})


@pytest.mark.parametrize("kind", ["conv_max", "conv_avg"])
def test_folded_float_network_matches_the_original(kind):
    model = trained(kind)
    _, (xte, _) = split()
    with torch.no_grad():
        want = model(torch.from_numpy(xte)).double().numpy()             # (N, 10)
    got = folded_forward(fold(model), xte).numpy()
    np.testing.assert_allclose(got, want, rtol=1e-4, atol=1e-4)        # float32 model vs float64 fold
    assert [op.kind for op in fold(model)][:2] == ["conv", "maxpool" if kind == "conv_max" else "avgpool"]


def test_maxpool_before_relu_is_reordered_exactly():
    torch.manual_seed(0)
    m = nn.Sequential(nn.Conv2d(1, 3, 3, padding=1), nn.MaxPool2d(2), nn.ReLU(), nn.Flatten(), nn.Linear(192, 10)).eval()
    x = np.random.default_rng(0).random((5, 1, 16, 16)).astype(np.float32)
    ops = fold(m)
    assert [op.kind for op in ops] == ["conv", "maxpool", "dense"]
    np.testing.assert_allclose(folded_forward(ops, x).numpy(), m(torch.from_numpy(x)).detach().numpy(), atol=1e-5)


def test_calibration_is_deterministic_and_uses_positive_values():
    idx = calibration_subset(1000, 7)
    # formula: round(i * 999 / 6) for i = 0..6, half to even like numpy (numpy documentation):
    # 166.5 -> 166, 499.5 -> 500, 832.5 -> 832
    assert idx.tolist() == [0, 166, 333, 500, 666, 832, 999]
    assert idx.tolist() == np.round(np.linspace(0, 999, 7)).astype(int).tolist()  # numpy as reference
    v = np.array([0.0, 0.0, 0.0, 1.0, 2.0, 3.0, 4.0, -1.0])
    # numpy's linear-interpolation median of the positive values 1..4 is 2.5 (numpy.percentile as reference)
    assert range_statistic(v, "percentile", 50.0) == np.percentile([1.0, 2.0, 3.0, 4.0], 50.0) == 2.5
    assert range_statistic(v, "max", 100.0) == 4.0                # largest value of v (hand-computed)
    model = trained("mlp")
    (xtr, _), _ = split()
    r1 = activation_ranges(fold(model), xtr[:256], "percentile", 99.9)
    r2 = activation_ranges(fold(model), xtr[:256], "percentile", 99.9)
    assert r1 == r2 and r1[0] > 0
    with torch.no_grad():
        h = torch.relu(model[1](torch.from_numpy(xtr[:256]).flatten(1))).numpy()
    assert r1[0] == pytest.approx(np.percentile(h[h > 0], 99.9), rel=1e-6)


@pytest.mark.parametrize("k,pc", [(2, False), (2, True), (4, True), (8, False), (16, True)])
def test_weights_are_symmetric_k_bit_and_biases_at_the_accumulator_scale(k, pc):
    model = trained("conv_avg")
    (xtr, _), _ = split()
    net = convert_model(model, xtr[:64], weight_bits=k, payload_bits=4, coding="payload", per_channel=pc)
    qm = 2 ** (k - 1) - 1                                   # symmetric signed range (common practice)
    ops = [op for op in fold(model) if op.weight is not None]
    for L, op in zip([L for L in net.layers if L.weight is not None], ops):
        absmax = np.abs(L.weight).reshape(L.weight.shape[0], -1).max(1)
        assert absmax.max() == qm and np.abs(L.weight).max() <= qm
        if pc:
            assert np.all(absmax == qm)                     # max-abs rule: every channel uses its full range
        if k == 2:
            assert set(np.unique(L.weight)) <= {-1, 0, 1}   # ternary
        s_w, s_in = np.array(L.info["s_w"]), L.info["s_in"]
        # integer bias at the accumulator scale s_w * s_in (Jacob et al. 2018, from memory)
        assert np.array_equal(L.bias, np.rint(op.bias / (s_w * s_in)).astype(np.int64))
        m = np.array(L.info["multiplier"])
        # 16-bit fixed-point multiplier M0 * 2^-n: relative error <= half an ulp = 2^-16 (Jacob et al. 2018, from memory)
        assert np.all(np.abs(L.m0 * 2.0 ** -L.shift - m) <= m * 2.0 ** -16 + 1e-300)


def test_sumpool_divides_the_next_multiplier_and_widens_its_input():
    net = convert_model(trained("conv_avg"), split()[0][0][:64], weight_bits=4, payload_bits=3, coding="payload")
    kinds = [L.kind for L in net.layers]
    assert kinds == ["conv", "sumpool", "conv", "sumpool", "dense", "dense"]
    # hand-computed from the conv_avg layout (_convert_helpers): a 2x2 sum pool adds 4 payloads of at most
    # 2^3 - 1 = 7; after two pools 16x16 -> 4x4 with 8 channels; the second conv has fan-in 6 * 3 * 3 and
    # 4-bit weights of at most 2^3 - 1 = 7 (symmetric signed range, common practice)
    assert net.layers[2].q_in == 4 * 7 and net.layers[2].info["pool_divisor"] == 4
    assert net.layers[4].q_in == 4 * 7 and net.layers[4].in_shape == (8 * 4 * 4,)
    assert net.layers[2].acc_bits == arith.accumulator_bits(6 * 9, 7, 28, int(np.abs(net.layers[2].bias).max()))


def test_high_precision_spike_network_agrees_with_the_float_model(tmp_path):
    model = trained("conv_max")
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:512], weight_bits=12, payload_bits=8, coding="payload", calibration="max")
    pred = simulate(net, arith.quantize_input(xte, 1)).decisions
    with torch.no_grad():
        fpred = model(torch.from_numpy(xte)).argmax(1).numpy()
    assert (pred == fpred).mean() >= 0.995
    net.save(tmp_path)
    again = IntNetwork.load(tmp_path)
    assert np.array_equal(simulate(again, arith.quantize_input(xte, 1)).decisions, pred)


def test_payload_wider_than_8_bits_is_refused():
    # a spike carries at most 8 payload bits, so k = p = 12 is refused (k = 12, p = 8 is tested above)
    with pytest.raises(UsageError, match=r"'payload_bits' parameter of convert must be an int in \[1, 8\]"):
        convert_model(trained("mlp"), X16, weight_bits=12, payload_bits=12, coding="ttfs")


def test_clipquant_ranges_are_used_and_count_frames_clip_to_the_payload():
    model = make_aware(trained("mlp", binary=False), 4, 3, False, act_max=[2.5])
    assert isinstance(model[2], ClipQuant)
    (xtr, _), (xte, yte) = split(binary=False)
    net = convert_model(model, xtr[:64], weight_bits=4, payload_bits=2, coding="payload", input_q=3)
    # s_out = range / (2^p - 1) with p = 2 (formula: uniform payload grid)
    assert net.layers[0].info["range"] == 2.5 and net.layers[0].info["s_out"] == pytest.approx(2.5 / 3)
    net1 = convert_model(model, xtr[:64], weight_bits=4, payload_bits=1, coding="payload", input_q=3, input_clip=True)
    assert net1.input_q == 1                                 # count frames clipped to what one bit carries: 2^1 - 1
    assert convert_model(model, xtr[:64], weight_bits=4, payload_bits=1, coding="payload", input_q=3,
                         input_clip=False).input_q == 3            # or kept at the frame's own count width
    with pytest.raises(UsageError, match="^The 'payload_bits' parameter of convert must be 1 with coding 'binary' "
                       r"\(a binary spike carries no payload\). Got 3 instead.$"):
        convert_model(model, xtr[:64], weight_bits=4, payload_bits=3, coding="binary", input_q=3)
    net2 = convert_model(model, xtr[:64], weight_bits=4, payload_bits=1, coding="binary", input_q=3)
    assert net2.payload_bits == 1 and net2.layers[0].q_out == 1   # binary spikes: 1 bit, largest value 2^1 - 1
    acc = (simulate(net, arith.quantize_input(xte, 3)).decisions == yte).mean()
    assert acc >= accuracy(model, xte, yte) - 0.05


def test_quantize_input_rounds_half_even_and_clips():
    # round half to even like numpy (numpy documentation): 0.5 -> 0, 1.5 -> 2, 2.5 -> 2
    x = np.array([-1.0, 0.4, 0.5, 1.5, 2.5, 7.0])
    assert arith.quantize_input(x, 3).tolist() == [0, 0, 0, 2, 2, 3]
    assert arith.quantize_input(torch.tensor(x), 3).tolist() == [0, 0, 0, 2, 2, 3]
    with pytest.raises(ValueError, match="NaN"):
        arith.quantize_input(np.array([np.nan]), 1)


def test_percentile_weight_scale_clips_the_largest_weights():
    model = trained("mlp")
    (xtr, _), _ = split()
    net = convert_model(model, xtr[:64], weight_bits=4, payload_bits=4, coding="payload", weight_scale="percentile:90")
    w = fold(model)[0].weight
    r = np.percentile(np.abs(w), 90)                                   # numpy's linear-interpolation percentile
    assert np.array(net.layers[0].info["s_w"]) == pytest.approx(r / 7)  # 4-bit symmetric max 2^3 - 1 = 7 (common practice)
    assert (np.abs(net.layers[0].weight) == 7).mean() >= 0.05          # ~10% of the weights clip to +-7


@pytest.mark.parametrize("kind,wb,pb,per_channel,wscale", [("conv_max", 3, 3, False, "max"),
                                                            ("conv_avg", 4, 2, True, "max"),
                                                            ("mlp", 2, 2, False, "max"),
                                                            ("conv_max", 3, 3, True, "percentile:90"),
                                                            ("mlp", 3, 2, False, "percentile:99")])
def test_aware_model_and_its_integer_network_agree_neuron_for_neuron(kind, wb, pb, per_channel, wscale):
    # The aware model fake-quantizes weights, activations and the bias on the accumulator grid, so the
    # integer network is the same function: every ClipQuant output / s_out equals the payload.
    from snnconvert.convert.calibrate import hidden_ranges
    from snnconvert.models import ClipQuant
    base = trained(kind)
    (xtr, _), (xte, _) = split()
    ranges = hidden_ranges(base, xtr[:256], "percentile", 99.99)
    aware = make_aware(base, wb, pb, per_channel, act_max=ranges, weight_rule=parse_range_rule(wscale)).eval()
    net = convert_model(aware, xtr[:64], weight_bits=wb, payload_bits=pb, coding="payload", per_channel=per_channel,
                        weight_scale=wscale)
    # the aware layers train on the converter's integers: same weight and bias grids
    weighted = [m for m in aware if hasattr(m, "quantized_weight")]
    for m, L in zip(weighted, [L for L in net.layers if L.kind in ("conv", "dense")]):
        assert np.array_equal(arith.quantize_weights_torch(m.weight, m.weight_scale(), wb).numpy(), L.weight)
    acts = []
    hooks = [m.register_forward_hook(lambda m_, i_, o_: acts.append(o_.detach())) for m in aware
             if isinstance(m, ClipQuant)]
    with torch.no_grad():
        logits = aware(torch.from_numpy(xte))
    for h in hooks:
        h.remove()
    res = simulate(net, arith.quantize_input(xte, net.input_q))
    hidden = [i for i, L in enumerate(net.layers) if L.kind in ("conv", "dense") and not L.is_output]
    assert len(hidden) == len(acts)
    for a_float, i in zip(acts, hidden):
        scaled = (a_float / net.layers[i].info["s_out"]).numpy().reshape(res.payloads[i].shape)
        assert np.array_equal(np.rint(scaled).astype(np.int64), res.payloads[i]), net.layers[i].name
    # the output potentials are the aware model's logits on the accumulator grid s_w * s_in
    out = net.layers[-1]
    s_acc = np.asarray(out.info["s_w"]) * out.info["s_in"]                 # (classes,)
    assert np.allclose(res.potentials * s_acc, logits.numpy(), rtol=1e-5, atol=1e-4 * s_acc.max())


def _with_dead_channels(kind: str, whole_layer: bool = False) -> nn.Sequential:
    """A trained digits model with near-dead and all-zero channels, as long training leaves them
    (largest |w| ~ 1e-12 in a conv channel and ~ 1e-23 in a dense channel were seen on the default model)."""
    import copy
    model = copy.deepcopy(trained(kind)).eval()
    with torch.no_grad():
        lin = [m for m in model if isinstance(m, (nn.Conv2d, nn.Linear))]
        if whole_layer:
            lin[0].weight.zero_()                   # an all-zero layer: only its biases drive the next one
            lin[0].bias.copy_(torch.linspace(-0.2, 0.5, lin[0].bias.numel()))
            return model
        lin[0].weight[0] *= 1e-12                   # near-dead conv channel
        lin[0].weight[1] = 0.0                      # all-zero conv channel with a positive bias: a constant
        lin[0].bias[1] = 0.3
        lin[-2].weight[3] *= 1e-23                  # near-dead dense channel
        lin[-2].weight[4] = 0.0
    return model


@pytest.mark.parametrize("kind,whole", [("conv_avg", False), ("mlp", False), ("mlp", True), ("conv_max", True)])
@pytest.mark.parametrize("pc", [False, True])
@pytest.mark.parametrize("coding", ["payload", "ttfs"])
def test_near_dead_and_all_zero_channels_convert_and_simulate_exactly(kind, whole, pc, coding):
    from snnconvert.sim import reference as R
    model = _with_dead_channels(kind, whole)
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:256], weight_bits=4, payload_bits=4, coding=coding, per_channel=pc)
    x = arith.quantize_input(xte[:12], 1)
    vec = simulate(net, x)
    for s, tr in enumerate(R.run_batch(net, x, progress=False)):      # event-by-event, exact integers
        assert np.array_equal(tr.potentials, vec.potentials[s]) and tr.decision == vec.decisions[s]
    for L in net.layers:
        if L.weight is None:
            continue
        assert np.all((L.shift >= 1) & (L.shift <= 62)) and L.acc_bits + int(L.m0.max()).bit_length() <= 63
        s_w = np.array(L.info["s_w"])
        assert s_w.min() >= s_w.max() * 2.0**-8 * (1 - 1e-12)        # the stated floor of channel ranges
    if whole:
        first = next(L for L in net.layers if L.weight is not None)
        assert not first.weight.any()                                 # W = 0 on a unit-range grid
        b = next(op for op in fold(model) if op.weight is not None).bias   # after batch-norm folding
        # s_w = 1 / (2^3 - 1), s_in = 1: B = round(b * 7)
        assert np.array_equal(first.bias, np.rint(b * 7).astype(np.int64))
    else:
        lin = [L for L in net.layers if L.weight is not None]
        assert not lin[0].weight[0].any() and not lin[0].weight[1].any()      # near-dead rounds to 0
        assert not lin[-2].weight[3].any() and not lin[-2].weight[4].any()
        # a channel with no weights and a positive bias fires a constant: round(b / s_out) (clamped to Q)
        s_out = lin[0].info["s_out"]
        want = min(int(np.floor(0.3 / s_out + 0.5)), 15)
        assert np.all(vec.payloads[net.layers.index(lin[0])][:, 1] == want)
        # the dead channels cost nothing: the spike network stays near its float model
        assert (vec.decisions == yte[:12]).mean() >= accuracy(model, xte[:12], yte[:12]) - 0.1
