"""`snnconvert convert` and `snnconvert simulate`: files written, exit codes, exact error lines."""

import json
import tomllib

import numpy as np
import pytest
import torch

from snnconvert import checkpoint, recipe, train
from snnconvert.cli import main
from snnconvert.intnet import IntNetwork

torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine

TINY = {"name": "tiny", "data": {"limit": 300}, "train": {"epochs": 2, "threads": 1},
        "model": {"layers": [{"type": "conv", "out": 4, "kernel": 3, "stride": 1, "padding": 1, "bn": False},
                             {"type": "maxpool", "size": 2, "stride": 2}, {"type": "dense"}]}}


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    from snnconvert import data
    root = tmp_path_factory.mktemp("run")
    r = recipe.from_dict(TINY)
    train.train(r, data.load_dataset(r, progress=False), root / "train", quiet=True)
    return root


def test_convert_writes_the_network_metrics_recipe_and_plot(run_dir, capsys):
    code = main(["convert", str(run_dir / "train"), "--weight-bits", "3", "--payload-bits", "2", "--coding", "ttfs",
                 "--per-channel", "--calibration", "max", "--bias-correction", "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    net_dir = run_dir / "net"
    assert out.splitlines()[-1] == f"wrote {net_dir}/network.json, network.npz, metrics.json, recipe.toml, confusion.png"
    assert "spike_accuracy" in out and "energy (estimate)" in out
    net = IntNetwork.load(net_dir)
    assert (net.coding, net.weight_bits, net.payload_bits, net.per_channel) == ("ttfs", 3, 2, True)
    m = json.loads((net_dir / "metrics.json").read_text())
    # single-spike code (Stanojevic et al. 2023); Horowitz 2014 figures are estimates
    assert m["max_spikes_per_neuron"] == 1 and m["energy_is_estimate"] is True and m["coding"] == "ttfs"
    conv = tomllib.loads((net_dir / "recipe.toml").read_text())["convert"]
    assert conv["weight_bits"] == 3 and conv["calibration"] == "max" and conv["per_channel"] is True
    assert conv["bias_correction"] is True and net.meta["bias_correction"] is True
    assert (net_dir / "confusion.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"   # PNG signature (PNG spec)


def test_convert_reads_the_checkpoint_once(run_dir, tmp_path, monkeypatch, capsys):
    reads, real = [], checkpoint.load_checkpoint

    def load_checkpoint(path):
        reads.append(str(path))
        return real(path)
    monkeypatch.setattr(checkpoint, "load_checkpoint", load_checkpoint)   # every reader imports it from here
    assert main(["convert", str(run_dir / "train"), "--out", str(tmp_path / "net"), "--quiet"]) == 0
    assert reads == [str(run_dir / "train" / "model.pt")]


def test_simulate_reruns_and_checks_the_reference(run_dir, capsys):
    assert main(["convert", str(run_dir / "train"), "--out", str(run_dir / "net2"), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["simulate", str(run_dir / "net2"), "--data", str(run_dir / "train"), "--reference", "--limit", "25",
                 "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "frame_accuracy" in out
    assert out.splitlines()[-1].startswith("reference simulator agrees with the vectorized one on 25 samples")


def test_simulate_reads_a_frames_npz(run_dir, tmp_path, capsys):
    assert main(["convert", str(run_dir / "train"), "--out", str(run_dir / "net3"), "--quiet"]) == 0
    net = IntNetwork.load(run_dir / "net3")
    rng = np.random.default_rng(0)
    X = (rng.random((12,) + tuple(net.input_shape)) < 0.3).astype(np.float32)
    np.savez(tmp_path / "f.npz", x=X, y=rng.integers(0, 10, 12))
    capsys.readouterr()
    assert main(["simulate", str(run_dir / "net3"), "--data", str(tmp_path / "f.npz")]) == 0
    assert "spike_accuracy" in capsys.readouterr().out
    np.savez(tmp_path / "bad.npz", x=X)
    assert main(["simulate", str(run_dir / "net3"), "--data", str(tmp_path / "bad.npz")]) == 2
    assert capsys.readouterr().err == (f"error: {tmp_path / 'bad.npz'}: array 'y' (class labels, shape (N,)) is "
                                       f"missing; found ['x'] (a frames file holds the arrays x and y)\n")


def test_every_convert_key_is_an_option_of_the_command():
    from snnconvert.cli import build_parser
    from snnconvert.settings.convert import KEYS
    sub = next(a for a in build_parser()._actions if hasattr(a, "choices") and a.choices and "convert" in a.choices)
    options = {o for a in sub.choices["convert"]._actions for o in a.option_strings}
    assert {f"--{k.replace('_', '-')}" for k in KEYS} - options == set()


def test_the_less_common_convert_options_reach_the_network(run_dir, tmp_path, capsys):
    out = tmp_path / "net"
    assert main(["convert", str(run_dir / "train"), "--weight-bits", "2", "--weight-scale", "mean:0.7",
                 "--multiplier-bits", "8", "--calib-samples", "16", "--tolerance-pp", "3", "--out", str(out),
                 "--quiet"]) == 0
    conv = tomllib.loads((out / "recipe.toml").read_text())["convert"]
    assert (conv["weight_scale"], conv["multiplier_bits"], conv["calib_samples"], conv["tolerance_pp"]) == (
        "mean:0.7", 8, 16, 3.0)
    net = IntNetwork.load(out)
    # an 8-bit multiplier mantissa: every M0 below 2^8 (the fixed-point form M = M0 * 2^-n, common practice)
    m0 = [int(np.max(layer.m0)) for layer in net.layers if layer.m0 is not None]   # the output layer has none
    assert m0 and max(m0) < 2 ** 8
    assert "within tolerance       " in capsys.readouterr().out


@pytest.mark.parametrize("argv,err", [
    (["--payload-bits", "0"], "error: The 'payload_bits' parameter of convert must be an int in [1, 8]. Got 0 instead."),
    (["--weight-bits", "1"], "error: The 'weight_bits' parameter of convert must be an int in [2, 16]. Got 1 instead."),
    (["--coding", "rate"],
     "error: The 'coding' parameter of convert must be one of 'payload', 'ttfs', 'binary'. Got 'rate' instead."),
    (["--coding", "binary", "--payload-bits", "4"],
     "error: The 'payload_bits' parameter of convert must be 1 with coding 'binary' (a binary spike carries no "
     "payload). Got 4 instead."),
    (["--multiplier-bits", "1"],
     "error: The 'multiplier_bits' parameter of convert must be an int in [2, 31]. Got 1 instead."),
    (["--calibration", "pct:99"], "error: The 'calibration' parameter of convert must be 'max', 'mse' or 'percentile:Q' "
                                  "with Q in (0, 100]. Got 'pct:99' instead."),
])
def test_convert_usage_errors(run_dir, argv, err, capsys):
    assert main(["convert", str(run_dir / "train"), "--out", str(run_dir / "never"), *argv]) == 2
    assert capsys.readouterr().err == err + "\n"
    assert not (run_dir / "never").exists()


def test_missing_folders_and_bad_versions(run_dir, tmp_path, capsys):
    assert main(["convert", str(tmp_path / "nope")]) == 2
    assert capsys.readouterr().err == (f"error: {tmp_path / 'nope' / 'model.pt'}: file not found (TRAIN_DIR must be "
                                       f"a folder written by `snnconvert train`)\n")
    assert main(["convert", str(run_dir / "train"), "--out", str(tmp_path / "n"), "--quiet"]) == 0
    meta = json.loads((tmp_path / "n" / "network.json").read_text())
    meta["version"] = 99
    (tmp_path / "n" / "network.json").write_text(json.dumps(meta))
    capsys.readouterr()
    assert main(["simulate", str(tmp_path / "n")]) == 2
    assert "format version 99 is not supported" in capsys.readouterr().err
    assert main(["simulate", str(run_dir / "net"), "--limit", "0"]) == 2
    assert capsys.readouterr().err == "error: The 'limit' parameter of simulate must be an int >= 1. Got 0 instead.\n"


def test_binary_coding_alone_uses_one_bit_and_stores_it(run_dir, tmp_path, capsys):
    # the recipe's payload width (4) belongs to its graded coding; --coding binary alone means p = 1
    assert main(["convert", str(run_dir / "train"), "--coding", "binary", "--out", str(tmp_path / "b"), "--quiet"]) == 0
    assert "binary (k=" in capsys.readouterr().out
    meta = json.loads((tmp_path / "b" / "network.json").read_text())
    assert meta["payload_bits"] == 1 and meta["meta"]["convert"]["payload_bits"] == 1


def test_aware_checkpoint_is_named_and_compared_with_its_float_model(tmp_path, capsys):
    from snnconvert import data
    r = recipe.from_dict({**TINY, "train": {"epochs": 2, "threads": 1, "aware": True, "aware_epochs": 1},
                          "convert": {"weight_bits": 3, "payload_bits": 3}})
    _, tm = train.train(r, data.load_dataset(r, progress=False), tmp_path / "train", quiet=True)
    assert main(["convert", str(tmp_path / "train"), "--out", str(tmp_path / "net"), "--quiet"]) == 0
    out = capsys.readouterr().out
    m = json.loads((tmp_path / "net" / "metrics.json").read_text())
    assert m["frame_model"] == "aware" and m["aware_bits"] == {"weight_bits": 3, "payload_bits": 3}
    assert m["frame_accuracy"] == tm["frame_accuracy"]                 # the aware model that was converted
    assert m["float_accuracy"] == tm["float_frame_accuracy"]           # the float model before fine-tuning
    assert m["loss_vs_float_pp"] == 100 * (m["float_accuracy"] - m["spike_accuracy"])
    assert f"frame model (aware, fine-tuned for k=3 p=3)  {m['frame_accuracy']:.4f}" in out
    assert "float model before fine-tuning" in out and "within tolerance" in out
