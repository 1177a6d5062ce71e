"""Conversion-aware fine-tuning: low-bit weights and payloads seen during training."""

import pytest
import torch

from snnconvert import models as M
from snnconvert import train as T
from snnconvert.convert.calibrate import hidden_ranges
from snnconvert.errors import UsageError
from test_train import digits_frames, small_recipe



@pytest.fixture(autouse=True)
def one_thread():
    """finetune_aware keeps the caller's thread count; tiny models train fastest on one thread."""
    before = torch.get_num_threads()
    torch.set_num_threads(1)
    yield
    torch.set_num_threads(before)


@pytest.fixture(scope="module")
def ds():
    return digits_frames()


@pytest.fixture(scope="module")
def float_run(ds, tmp_path_factory):
    out = tmp_path_factory.mktemp("float")
    model, metrics = T.train(small_recipe("train.epochs=4"), ds, out, quiet=True)
    return out, model, metrics


def _naive(model, ds, wb, pb):
    """Post-training fake quantization at the same budget, with calibrated clip ranges, no fine-tuning."""
    folded = M.fold_batchnorm(model).eval()
    act = hidden_ranges(folded, ds.train[0], "percentile", 99.9)
    return M.make_aware(folded, wb, pb, False, act_max=act).eval()


def test_finetune_aware_returns_quantized_model_and_ranges(float_run, ds):
    _, model, _ = float_run
    r = small_recipe()
    aware, act_max = T.finetune_aware(model, ds, r, weight_bits=3, payload_bits=2, per_channel=False, epochs=2, seed=1)
    assert [type(m).__name__ for m in aware][:2] == ["QConv2d", "ClipQuant"]
    cq = [m for m in aware if isinstance(m, M.ClipQuant)]
    assert len(act_max) == len(cq) == 2 and all(a > 0 for a in act_max)
    assert act_max == [float(m.a_max.detach()) for m in cq]
    assert all(m.levels == 3 for m in cq)  # 2^2 - 1 payload levels
    # the same seed gives the same fine-tuned weights
    again, act2 = T.finetune_aware(model, ds, r, 3, 2, False, 2, 1)
    assert act2 == act_max
    assert all(torch.equal(a, b) for a, b in zip(aware.state_dict().values(), again.state_dict().values()))
    assert not any(isinstance(m, M.ClipQuant) for m in model)  # the float model is untouched


def test_aware_training_beats_post_training_quantization_at_low_bits(float_run, ds):
    # Low budgets lose accuracy without training through the quantizer (Jacob et al. 2018; Bu et al. 2022).
    _, model, _ = float_run
    x, y = ds.test
    naive = T.evaluate(_naive(model, ds, 3, 1), x, y)["accuracy"]
    aware, _ = T.finetune_aware(model, ds, small_recipe("train.aware_lr=0.003"), 3, 1, False, 3, 0)
    tuned = T.evaluate(aware, x, y)["accuracy"]
    print(f"3-bit weights, binary payloads: post-training {100 * naive:.1f}%, aware {100 * tuned:.1f}%")
    assert tuned > naive


def test_train_with_aware_flag_writes_an_aware_checkpoint(float_run, ds, tmp_path):
    out, model, fm = float_run
    r = small_recipe("train.aware=true", "train.aware_epochs=1", "convert.weight_bits=4", "convert.payload_bits=3",
                     "convert.per_channel=true")
    aware, m = T.train(r, ds, tmp_path, init=out, quiet=True)
    assert m["aware"] == {"weight_bits": 4, "payload_bits": 3, "per_channel": True, "learn_act_max": True,
                          "weight_scale": "max"}
    assert m["epochs"] == 0 and m["aware_epochs"] == 1
    assert m["float_frame_accuracy"] == pytest.approx(fm["frame_accuracy"])
    raw = torch.load(tmp_path / "model.pt", weights_only=True)
    assert raw["aware"] == m["aware"] and len(raw["act_max"]) == 2
    loaded, ckpt = T.load_checkpoint(tmp_path)
    assert isinstance(loaded[0], M.QConv2d) and loaded[0].per_channel and loaded[0].weight_bits == 4
    x = ds.test[0][:64]
    assert torch.equal(loaded(x), aware(x))
    # an aware checkpoint is not a valid start for another aware fine-tuning
    with pytest.raises(UsageError, match="already conversion-aware"):
        T.train(r, ds, tmp_path / "again", init=tmp_path, quiet=True)


@pytest.mark.parametrize("payload_bits", [1, 2, 4])
def test_aware_start_ranges_take_the_smaller_of_percentile_and_step_size_start(payload_bits):
    # one hidden unit whose activation is relu(x): the statistics are those of the positive inputs
    import numpy as np
    from snnconvert.convert.calibrate import aware_start_ranges
    model = torch.nn.Sequential(torch.nn.Linear(1, 1), torch.nn.ReLU(), torch.nn.Linear(1, 2)).double()
    with torch.no_grad():
        model[0].weight.fill_(1.0)
        model[0].bias.zero_()
    x = np.concatenate([np.linspace(-1, 0, 50), np.linspace(0.01, 1.0, 100), [40.0]]).reshape(-1, 1)
    pos = x[x > 0]
    q = (1 << payload_bits) - 1
    # learned step size start s0 = 2 mean|v| / sqrt(Q) (Esser et al. 2020), a_max = Q s0; percentile 99 of pos
    want = min(float(np.percentile(pos, 99.0)), 2.0 * np.sqrt(q) * float(pos.mean()))
    got = aware_start_ranges(model, x, payload_bits, 99.0)
    assert got == [pytest.approx(want, rel=1e-12)]


def test_two_bit_aware_model_with_the_mean_rule_keeps_most_weights(float_run, ds):
    # with max-abs scales a ternary grid zeroes every weight below max|w| / 2; the mean:0.7 rule
    # keeps those above 0.7 mean|w| (Li & Liu 2016): well over a third of the largest trained layer
    _, model, _ = float_run
    folded = M.fold_batchnorm(model).eval()
    kept = {}
    for rule in (("max", 100.0), ("mean", 0.7)):
        aw = M.make_aware(folded, 2, 2, False, weight_rule=rule)
        big = max((m for m in aw if isinstance(m, (M.QConv2d, M.QLinear))), key=lambda m: m.weight.numel())
        W = big.quantized_weight() / big.weight_scale().float().reshape(-1, *[1] * (big.weight.dim() - 1))
        kept[rule[0]] = float((W.round() != 0).float().mean())
    assert kept["mean"] > 0.35 and kept["max"] < kept["mean"] / 2
