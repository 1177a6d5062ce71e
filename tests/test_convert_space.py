"""The whole convert option space on a fully trained default-size model.

Every coding (payload, ttfs, binary) x per-channel on/off x both calibrations (max,
percentile:99.9) x both weight-scale rules (max, percentile:99.9) x weight bits 2-8 x payload
bits 1-8 (binary: 1, the only width it accepts) x accumulator (unlimited, saturate, wrap):
952 conversions per accumulator mode, 2,856 in all. No value of any axis is dropped.

Design, to keep this inside a small CI budget (about a minute on top of training):
  - The model is the default recipe trained in full (30 epochs; long training is what leaves
    near-dead channels, which a 3-epoch model does not have), once per module.
  - Activation ranges depend only on the calibration rule, so they are computed once per rule
    and every point is quantized with `build_network` on them (about 1 ms a point). A covering
    subset of 8 points goes through `convert` itself (every value of every axis at least once)
    and must give exactly the same network as that shortcut.
  - Full product, cheap checks: every point converts and runs in the vectorized simulator on
    8 test samples with its single-spike check on (payloads in 0..Q, at most one spike per
    neuron). The saturate and wrap points declare a width one bit below the largest |V| of those
    8 samples without a limit, so they do overflow (asserted).
  - Accuracy on the whole test split (360 samples) for every payload and binary point (fast
    decision-only pass). A ttfs network holds the same integers as its payload twin (asserted
    array by array), and the vectorized simulator decides both from the same integer pass, so
    its accuracy is the twin's; the reference subset steps the ttfs dynamics for real.
  - Reference simulator on a covering subset: for every (coding, weight bits, payload bits)
    the other four axes rotate, and the event-by-event reference must agree exactly with the
    vectorized simulator (events, potentials, decisions, overflows) on 3 samples.
"""

import itertools
import sys
from pathlib import Path

import numpy as np
import pytest
import torch

sys.path.insert(0, str(Path(__file__).parent))

from snnconvert import arith  # noqa: E402
from snnconvert import recipe as R  # noqa: E402
from snnconvert.convert import convert_model, fold, parse_range_rule  # noqa: E402
from snnconvert.convert.calibrate import activation_ranges, calibration_subset  # noqa: E402
from snnconvert.convert.quantize import build_network  # noqa: E402
from snnconvert.sim import reference as REF  # noqa: E402
from snnconvert.sim import simulate  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
CODINGS = ("payload", "ttfs", "binary")
PER_CHANNEL = (False, True)
CALIBRATIONS = ("max", "percentile:99.9")
WEIGHT_SCALES = ("max", "percentile:99.9")
WEIGHT_BITS = tuple(range(2, 9))
PAYLOAD_BITS = tuple(range(1, 9))
ACCUMULATORS = ("unlimited", "saturate", "wrap")


def _points():
    for coding, pc, cal, ws, k in itertools.product(CODINGS, PER_CHANNEL, CALIBRATIONS, WEIGHT_SCALES, WEIGHT_BITS):
        for p in ((1,) if coding == "binary" else PAYLOAD_BITS):
            yield coding, pc, cal, ws, k, p


@pytest.fixture(scope="module")
def trained_default(tmp_path_factory):
    from snnconvert.data import load_dataset
    from snnconvert.train import train
    root = tmp_path_factory.mktemp("space")
    r = R.load(ROOT / "recipes" / "default.toml", [f"data.cache_dir={root / 'cache'}"])
    ds = load_dataset(r, progress=False)
    model, metrics = train(r, ds, root / "train", quiet=True)
    return model, ds, r, metrics["frame_accuracy"]


@pytest.mark.slow
def test_every_convert_option_on_the_trained_default_model(trained_default):
    model, ds, recipe, frame_acc = trained_default
    torch.set_num_threads(1)
    Xtr = np.asarray(ds.train[0])
    xcal = Xtr[calibration_subset(len(Xtr), recipe["convert"]["calib_samples"])]
    Xte, yte = ds.test
    x = arith.quantize_input(np.asarray(Xte), ds.input_q)
    y = np.asarray(yte)
    few = x[:8]
    ops = fold(model)
    ranges = {cal: activation_ranges(ops, xcal, *parse_range_rule(cal)) for cal in CALIBRATIONS}
    w = [op.weight for op in ops if op.weight is not None]
    rel = min(float(np.abs(a.reshape(len(a), -1)).max(1).min() / np.abs(a).max()) for a in w)
    print(f"\nfully trained default model: frame accuracy {frame_acc:.4f}, narrowest channel range "
          f"{rel:.3g} of its layer's widest")

    def build(coding, pc, cal, ws, k, p, acc_bits=0, overflow="saturate"):
        return build_network(ops, ranges[cal], input_shape=x.shape[1:], input_q=int(ds.input_q), weight_bits=k,
                             payload_bits=p, coding=coding, per_channel=pc, weight_rule=parse_range_rule(ws),
                             multiplier_bits=16, acc_limit_bits=acc_bits, overflow=overflow)

    acc, widths, n_points = {}, {}, 0
    for pt in _points():
        coding, pc, cal, ws, k, p = pt
        net = build(*pt)
        n_points += 1
        if coding == "ttfs":
            # the same integers as the payload network: the vectorized decisions (and so the accuracy) are
            # those of the payload twin; the reference subset below steps the ttfs dynamics for real
            twin = build("payload", pc, cal, ws, k, p)
            for a, b_ in zip(net.layers, twin.layers):
                for f in ("weight", "bias", "m0", "shift"):
                    assert getattr(a, f) is None or np.array_equal(getattr(a, f), getattr(b_, f)), (pt, f)
            acc[pt] = acc[("payload",) + pt[1:]]
        else:
            fast = simulate(net, x, record=False, stats=False)
            acc[pt] = float((fast.decisions == y).mean())
        # single-spike check (payloads in 0..Q) and the largest |V|, on 8 samples
        res = simulate(net, few, record=False)
        assert int(res.overflows.sum()) == 0
        top = int(res.max_abs_v.max())
        b = max(2, top.bit_length() - 1)             # |V| = top >= 2^b lies outside [-2^(b-1), 2^(b-1) - 1]
        widths[pt] = b
        for mode in ("saturate", "wrap"):
            lim = build(*pt, acc_bits=b, overflow=mode)
            rl = simulate(lim, few, record=False)
            assert int(rl.overflows.sum()) > 0, (pt, mode, b)
            n_points += 1
    assert n_points == 952 * len(ACCUMULATORS)

    # covering subset through convert_model() itself: each value of every axis at least once
    for i, p in enumerate(PAYLOAD_BITS):
        coding = ("payload", "ttfs")[i % 2] if p > 1 else "binary"
        pt = (coding, PER_CHANNEL[i % 2], CALIBRATIONS[(i // 2) % 2], WEIGHT_SCALES[(i // 4) % 2], WEIGHT_BITS[i % 7], p)
        mode = ACCUMULATORS[i % 3]
        full = convert_model(model, xcal, weight_bits=pt[4], payload_bits=p, coding=coding, per_channel=pt[1],
                             calibration=pt[2], weight_scale=pt[3], input_q=int(ds.input_q),
                             accumulator_bits=0 if mode == "unlimited" else widths[pt],
                             overflow="saturate" if mode == "unlimited" else mode)
        short = build(*pt, acc_bits=full.acc_limit_bits, overflow=full.overflow)
        for a, b_ in zip(full.layers, short.layers):
            for f in ("weight", "bias", "m0", "shift"):
                assert np.array_equal(getattr(a, f), getattr(b_, f)) if getattr(a, f) is not None else True, (pt, f)
            assert a.acc_bits == b_.acc_bits
    assert {WEIGHT_BITS[i % 7] for i in range(8)} == set(WEIGHT_BITS)

    # reference simulator on a covering subset: every (coding, k, p), the other axes rotating
    triples = sorted({(c, k, p) for c, _, _, _, k, p in _points()})
    for j, (coding, k, p) in enumerate(triples):
        pc, cal, ws = PER_CHANNEL[j % 2], CALIBRATIONS[(j // 2) % 2], WEIGHT_SCALES[(j // 4) % 2]
        mode = ACCUMULATORS[j % 3]
        pt = (coding, pc, cal, ws, k, p)
        net = build(*pt, acc_bits=0 if mode == "unlimited" else widths[pt], overflow="saturate" if mode == "unlimited"
                    else mode)
        xs = x[[0, 1, 2]]
        vec = simulate(net, xs)
        for s, tr in enumerate(REF.run_batch(net, xs, progress=False)):
            assert np.array_equal(tr.potentials, vec.potentials[s]), pt
            assert tr.decision == vec.decisions[s] and tr.early_decision == vec.early_decisions[s], pt
            assert tr.overflows == vec.overflows[s].tolist(), pt
            for i, L in enumerate(net.layers):
                if L.kind == "sumpool" or (L.is_output and coding != "ttfs"):
                    continue
                a = vec.payloads[i][s].reshape(-1)
                got = np.zeros_like(a)
                got[tr.layer_events[i]["addr"]] = tr.layer_events[i]["payload"]
                assert np.array_equal(got, a), (pt, L.name)
    assert len(triples) == 7 * 8 * 2 + 7

    # measured accuracies (printed with -s), and what 8-bit quantization is known to keep
    for pc in PER_CHANNEL:
        row = " ".join(f"k{k}:{100 * acc[('payload', pc, 'percentile:99.9', 'max', k, 4)]:.1f}" for k in WEIGHT_BITS)
        print(f"payload p=4, {'per-channel' if pc else 'per-tensor '}: {row}")
        row = " ".join(f"p{p}:{100 * acc[('payload', pc, 'percentile:99.9', 'max', 3, p)]:.1f}" for p in PAYLOAD_BITS)
        print(f"payload k=3, {'per-channel' if pc else 'per-tensor '}: {row}")
        row = " ".join(f"k{k}:{100 * acc[('binary', pc, 'percentile:99.9', 'max', k, 1)]:.1f}" for k in WEIGHT_BITS)
        print(f"binary,      {'per-channel' if pc else 'per-tensor '}: {row}")
    # 8-bit weights and payloads lose next to nothing after post-training quantization (Jacob et al. 2018;
    # Rueckauer et al. 2017, from memory): within 1 pp of the frame model on the test split
    for pc, cal, ws in itertools.product(PER_CHANNEL, CALIBRATIONS, WEIGHT_SCALES):
        assert acc[("payload", pc, cal, ws, 8, 8)] >= frame_acc - 0.01, (pc, cal, ws)
        assert acc[("ttfs", pc, cal, ws, 8, 8)] == acc[("payload", pc, cal, ws, 8, 8)]   # same integers
