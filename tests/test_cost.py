"""The datapath cost model (an estimate): hand-computed figures of a 2-layer net, the block packing
table, and the check values of a published event-driven FPGA classifier."""

from __future__ import annotations

import numpy as np
import pytest

from snnconvert import cost
from snnconvert.intnet import IntLayer, IntNetwork
from snnconvert.sim.reference import Tables


def _net(layers, input_shape, coding="binary", payload_bits=1, weight_bits=4) -> IntNetwork:
    return IntNetwork(layers=layers, input_shape=input_shape, input_q=1, coding=coding, payload_bits=payload_bits,
                      weight_bits=weight_bits, per_channel=False, n_classes=layers[-1].out_shape[0])


def _weighted(name, kind, in_shape, out_shape, wshape, acc, q_out=1, kernel=(1, 1), is_output=False, seed=0):
    w = np.random.default_rng(seed).integers(-7, 8, size=wshape)
    o = wshape[0]
    return IntLayer(name=name, kind=kind, in_shape=in_shape, out_shape=out_shape, kernel=kernel, weight=w,
                    bias=np.zeros(o, np.int64), m0=np.full(o, 1 << 14), shift=np.full(o, 16), q_in=1, q_out=q_out,
                    is_output=is_output, acc_bits=acc)


def _events(n_units: int, addrs) -> np.ndarray:
    ev = np.zeros((1, n_units), dtype=bool)
    ev[0, list(addrs)] = True
    return ev


# ------------------------------------------------------------------ a 2-layer net by hand

@pytest.fixture(scope="module")
def two_layer():
    """input 1x4x4 binary -> conv 2 maps 3x3 (2x2x2, acc 5 bits) -> dense 3 outputs (acc 6 bits)."""
    conv = _weighted("conv0", "conv", (1, 4, 4), (2, 2, 2), (2, 1, 3, 3), acc=5, kernel=(3, 3))
    dense = _weighted("dense1", "dense", (2, 2, 2), (3,), (3, 8), acc=6, is_output=True)
    net = _net([conv, dense], (1, 4, 4))
    fan = Tables(net).fanout
    # input events at (0,0), (0,1), (1,1): fan-out 1, 2 and 4 output positions x 2 maps (counted by hand)
    events = [_events(16, [0, 1, 5]), _events(8, [0, 3, 6]), np.zeros((1, 3), bool)]
    return net, events, fan


def test_two_layer_fanout_by_hand(two_layer):
    net, events, fan = two_layer
    assert [int(fan[0][a]) for a in (0, 1, 5)] == [2, 4, 8]
    assert set(fan[1].tolist()) == {3}


def test_two_layer_cycles_by_hand(two_layer):
    net, events, fan = two_layer
    est = cost.estimate(net, events, fan, {"clock_mhz": 100.0, "register_bits": 0})
    conv, dense = est["layers"]
    # conv0: 2 lanes (one per map): ceil(2/2) + ceil(4/2) + ceil(8/2) = 7 event cycles, scan ceil(8/2) = 4
    assert (conv["lanes"], conv["event_cycles_mean"], conv["scan_cycles"], conv["cycles_worst"]) == (2, 7, 4, 11)
    # dense1: 3 lanes; 3 events of fan-out 3: 1 cycle each; scan ceil(3/3) = 1
    assert (dense["lanes"], dense["event_cycles_mean"], dense["scan_cycles"], dense["cycles_worst"]) == (3, 3, 1, 4)
    t = est["total"]
    assert t["cycles_worst"] == 15 and t["latency_us_worst"] == pytest.approx(0.15)
    assert t["samples_per_s"] == pytest.approx(100e6 / 15)
    assert t["sops_mean"] == 2 + 4 + 8 + 9
    piped = cost.estimate(net, events, fan, {"clock_mhz": 100.0, "pipelined": True})
    assert piped["total"]["samples_per_s"] == pytest.approx(100e6 / 11)     # the slowest stage sets it
    assert piped["total"]["latency_us_worst"] == pytest.approx(0.15)        # latency is still the sum


def test_two_layer_memory_bits_by_hand(two_layer):
    net, events, fan = two_layer
    est = cost.estimate(net, events, fan, {"register_bits": 0})
    conv, dense = est["layers"]
    # weights 2*9*4, potentials 8*5, bias 2*5, M0 + shift 2*(16+6), FIFO 3 events x (4 address + 1 payload)
    assert conv["memory_bits"] == {"fifo": 15, "weights": 72, "potentials": 40, "bias": 10, "multipliers": 44,
                                   "total": 181}
    # weights 3*8*4, potentials 3*6, bias 3*6, M0 + shift 3*22, FIFO 3 events x (3 address + 1 payload)
    assert dense["memory_bits"] == {"fifo": 12, "weights": 96, "potentials": 18, "bias": 18, "multipliers": 66,
                                    "total": 210}
    assert conv["bus"] == {"address_bits": 4, "payload_bits": 1}
    # every memory fits one block; constants are registers
    assert conv["block_rams"]["total"] == 3 and dense["block_rams"]["total"] == 3
    assert est["total"]["block_rams"] == 6
    small = cost.estimate(net, events, fan, {"register_bits": 256})
    assert small["total"]["block_rams"] == 0        # all of them small enough for registers
    assert small["is_estimate"] is True


def test_per_layer_lanes(two_layer):
    net, events, fan = two_layer
    est = cost.estimate(net, events, fan, {"lanes": [1, 1], "scan_lanes": 2})
    conv, dense = est["layers"]
    assert (conv["event_cycles_mean"], conv["scan_cycles"]) == (14, 4)
    assert (dense["event_cycles_mean"], dense["scan_cycles"]) == (9, 2)
    with pytest.raises(ValueError, match="lanes lists 3 values for 2"):
        cost.estimate(net, events, fan, {"lanes": [1, 1, 1]})


# ------------------------------------------------------------------ block packing

# 18 Kbit configurations 16Kx1 ... 512x36 (from memory, vendor user guides; see REFERENCES.md)
@pytest.mark.parametrize("width,depth,expected", [
    (1, 16384, 1), (1, 16385, 2), (36, 512, 1), (37, 512, 2), (18, 1024, 1), (40, 432, 2),
    (9, 2048, 1), (72, 1024, 4), (0, 100, 0), (4, 0, 0),
])
def test_block_packing(width, depth, expected):
    assert cost.blocks(width, depth) == expected


def test_block_configs_scale_with_block_size():
    assert cost.block_configs(18) == cost.BLOCK_18K
    assert cost.block_configs(36)[0] == (32768, 1) and cost.block_configs(36)[-1] == (1024, 36)


@pytest.mark.parametrize("bits,pj", [(8 * 8 * 1024, 10 / 64), (8 * 8 * 1024 + 8, 20 / 64), (8 * 2 ** 20, 100 / 64),
                                     (8 * 2 ** 21, 100 / 64)])
def test_sram_energy_per_bit(bits, pj):
    # Horowitz 2014 (ISSCC): 64-bit SRAM read 10 pJ (8 KB), 20 pJ (32 KB), 100 pJ (1 MB); from memory
    assert cost.sram_pj_per_bit(bits) == pytest.approx(pj)


# ------------------------------------------------------------------ a published FPGA classifier

@pytest.fixture(scope="module")
def fpga_net():
    """28x28 binary input, three 5x5 conv maps (24x24), 2x2 subsampling, dense to 10 classes, 4-bit weights.

    Accumulators at their worst case: 25 taps * 7 = 175 needs 9 signed bits; 432 * 7 = 3024 needs 13.
    """
    conv = _weighted("conv0", "conv", (1, 28, 28), (3, 24, 24), (3, 1, 5, 5), acc=9, kernel=(5, 5))
    pool = IntLayer(name="maxpool1", kind="maxpool", in_shape=(3, 24, 24), out_shape=(3, 12, 12), kernel=(2, 2),
                    stride=(2, 2), q_in=1, q_out=1)
    dense = _weighted("dense2", "dense", (3, 12, 12), (10,), (10, 432), acc=13, is_output=True)
    net = _net([conv, pool, dense], (1, 28, 28))
    fan = Tables(net).fanout
    # 126 input events (the figure of the published design) at pixels whose 5x5 fan-out is whole: rows and
    # columns 4..23; invented positions, only their count and fan-out matter here
    interior = [y * 28 + x for y in range(4, 24) for x in range(4, 24)][:126]
    return net, fan, interior


@pytest.mark.parametrize("pool_events", [0, 432])      # none to every pooled unit: both ends of the range
def test_published_fpga_network(fpga_net, pool_events):
    """Common practice (a published event-driven FPGA classifier): about 126 input events per digit, five
    18 Kbit block RAMs, a decision in under 20 us at 220 MHz. With one lane per map, a scan of the maps
    at window close and 4-bit weights, the model must land within 2x of the blocks and of the time."""
    net, fan, interior = fpga_net
    events = [_events(784, interior), np.zeros((1, 1728), bool), _events(432, range(pool_events)),
              np.zeros((1, 10), bool)]
    est = cost.estimate(net, events, fan, {"clock_mhz": 220.0, "lanes": 0, "scan_lanes": 0, "block_kbits": 18})
    conv, dense = est["layers"]
    assert conv["sops_mean"] == 126 * 75 == 9450         # hand count: 126 events x 25 taps x 3 maps
    assert conv["lanes"] == 3 and conv["event_cycles_mean"] == 126 * 25 and conv["scan_cycles"] == 1728 // 3
    assert 5 / 2 <= est["total"]["block_rams"] <= 5 * 2
    assert 20 / 2 <= est["total"]["latency_us_worst"] <= 20 * 2


def test_sops_agree_with_the_metrics_count(fpga_net):
    """The estimate's SOPs equal the simulator's fan-out count (events @ fan-out), the metrics' SOPs."""
    net, fan, interior = fpga_net
    ev0 = _events(784, interior)
    est = cost.estimate(net, [ev0, np.zeros((1, 1728), bool), np.zeros((1, 432), bool), np.zeros((1, 10), bool)],
                        fan, None)
    assert est["total"]["sops_mean"] == int((ev0 @ fan[0])[0]) == 9450


# ------------------------------------------------------------------ budgets

def _metrics(**hw):
    return {"weight_memory_bits": 4000, "sops_per_sample": 9450.0, "spike_accuracy": 0.97,
            "conversion_loss_pp": 0.8, "hardware_summary": {"block_rams": 6, "latency_us": 18.5, "energy_nj": 40.0, **hw}}


def test_budget_fits_and_names_every_broken_limit():
    assert cost.check_budget(_metrics(), None)["message"] == "no budget set"
    ok = cost.check_budget(_metrics(), {"block_rams": 6, "latency_us": 20.0, "max_loss_pp": 1.0})
    assert ok["fits"] and ok["message"] == "fits the budget (3 limits)"
    bad = cost.check_budget(_metrics(), {"block_rams": 5, "latency_us": 20.0, "min_accuracy": 0.98,
                                         "weight_memory_bits": 3000})
    assert not bad["fits"]
    assert bad["message"] == ("does not fit: weight_memory_bits 4,000 bits > 3,000 bits; block_rams 6 > 5; "
                              "min_accuracy 0.97 < 0.98")


def test_binding_limit_where_nothing_fits():
    budget = {"block_rams": 4, "latency_us": 20.0}
    checks = [cost.check_budget(_metrics(block_rams=b, latency_us=l), budget) for b, l in ((6, 18.0), (5, 25.0))]
    b = cost.binding_limit(checks)
    assert b["limit"] == "latency_us" or b["limit"] == "block_rams"
    # block_rams: best 5 vs 4 (25 % over); latency: best 18 fits -> block RAMs bind, off by one
    assert b["limit"] == "block_rams" and b["over_by"] == 1
    assert b["message"] == "block_rams binds: the best point reaches 5 against a budget of 4 (off by 1)"


# ------------------------------------------------------------------ the sweep's two rules

def _record(k, acc, blocks, lat, nj, mem):
    params = {"coding": "payload", "weight_bits": k, "payload_bits": 2, "per_channel": False, "aware": False,
              "aware_epochs": 0}
    metrics = {"frame_accuracy": 0.92, "spike_accuracy": acc, "weight_memory_bits": mem, "sops_per_sample": 1e4,
               "hardware_summary": {"block_rams": blocks, "latency_us": lat, "energy_nj": nj, "memory_bits": mem,
                                    "samples_per_s": 1e5}}
    return {"params": params, "metrics": metrics}


def test_sweep_offers_both_rules_and_names_the_binding_limit():
    from snnconvert.sweep.front import recommend
    recs = [_record(3, 0.918, 5, 25.0, 30.0, 10000), _record(4, 0.925, 6, 26.0, 40.0, 14000),
            _record(6, 0.930, 8, 27.0, 55.0, 21000)]
    r = recommend(recs, 0.92, 0.5, {"block_rams": 6, "energy_nj": 50.0})
    assert r["point"]["weight_bits"] == 3                    # cheapest within 0.5 pp: today's rule
    wb = r["within_budget"]
    assert wb["point"]["weight_bits"] == 4 and wb["fitting"] == 2   # most accurate within 6 blocks and 50 nJ
    none = recommend(recs, 0.92, 0.5, {"block_rams": 4, "latency_us": 30.0})["within_budget"]
    assert none["point"] is None and none["binding"]["limit"] == "block_rams" and none["binding"]["over_by"] == 1
    assert none["message"].startswith("no point fits the budget: block_rams binds")
