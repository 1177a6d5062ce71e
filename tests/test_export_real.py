"""Export of networks converted from CNNs trained on scikit-learn's digits, end to end."""

import json

import numpy as np
import pytest
import torch

from _convert_helpers import split, trained
from snnconvert import arith
from snnconvert import recipe as R
from snnconvert.cli import main
from snnconvert.convert import convert_model
from snnconvert.export import export_network, verify
from snnconvert.sim import simulate

torch.set_num_threads(2)


def _net(kind, coding, payload_bits=3, weight_bits=4):
    (xtr, _), _ = split(True)
    return convert_model(trained(kind), xtr[::10], weight_bits=weight_bits, payload_bits=payload_bits, coding=coding,
                         per_channel=True, input_q=1)


@pytest.mark.parametrize("kind,coding", [("conv_max", "payload"), ("conv_avg", "ttfs")])
def test_trained_digit_network_exports_and_verifies(tmp_path, kind, coding):
    net = _net(kind, coding)
    _, (xte, yte) = split(True)                                     # 597 = 1797 sklearn digits - 1200 train
    x = arith.quantize_input(xte, net.input_q)                      # (N, 1, 16, 16)
    export_network(net, tmp_path / "e", x, yte, vectors=16, progress=False)
    z = np.load(tmp_path / "e" / "vectors.npz", allow_pickle=False)
    idx = z["sample_index"][z["directed"] == 0]
    assert sorted(set(yte[idx].tolist())) == list(range(10))        # round-robin: all ten digits among 16 vectors
    assert np.array_equal(z["x"][:16], x[idx])
    # the golden decisions and potentials equal the project's batched simulator on the same inputs (directed too)
    sim = simulate(net, z["x"])
    assert np.array_equal(z["potentials"], sim.potentials) and np.array_equal(z["decision"], sim.decisions)
    for i, L in enumerate(net.layers):
        if L.kind == "sumpool" or (L.is_output and coding != "ttfs"):
            continue
        ev = z[f"L{i}_{L.name}.events"]
        pay = sim.payloads[i].reshape(len(z["x"]), -1)
        for s in range(len(z["x"])):
            e = ev[ev[:, 0] == s]
            assert np.array_equal(np.sort(e[:, 1]), np.flatnonzero(pay[s])) and np.array_equal(pay[s][e[:, 1]], e[:, 3])
    res = verify(tmp_path / "e", progress=False)
    assert res.passed, res.summary()
    assert res.samples == len(z["x"]) == 16 + len(json.loads((tmp_path / "e" / "manifest.json").read_text())
                                                  ["vectors"]["directed"])   # every exported vector is re-checked


@pytest.mark.slow
def test_cli_export_reads_the_recipe_data_set(tmp_path, capsys):
    """NET_DIR with network files and recipe.toml: the test split of the recipe's data set is exported."""
    r = R.load(R.Path(__file__).resolve().parents[1] / "recipes" / "default.toml",
               ["data.limit=100", f"data.cache_dir={tmp_path / 'cache'}", "export.vectors=5"])
    net = _net("conv_max", "payload")
    net.save(tmp_path / "net")
    R.save(r, tmp_path / "net")
    assert main(["export", str(tmp_path / "net"), str(tmp_path / "out"), "--quiet"]) == 0
    man = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert man["vectors"]["test_samples"] == 5 and "recipe.toml" in man["files"]
    # conv_max of tests/_convert_helpers.py: conv, max pool, conv, dense -> 4 integer layers (hand-counted)
    directed = len(man["vectors"]["directed"])
    assert capsys.readouterr().out.startswith(f"export: 4 layers, {len(man['files'])} files, 5 golden vectors and "
                                              f"{directed} directed vectors -> ")
    from snnconvert.data import load_dataset
    xte, yte = load_dataset(R.load(tmp_path / "out" / "recipe.toml"), progress=False).test
    z = np.load(tmp_path / "out" / "vectors.npz", allow_pickle=False)
    test = z["directed"] == 0
    assert np.array_equal(z["x"][test], arith.quantize_input(xte, 1)[z["sample_index"][test]])
    assert np.array_equal(z["label"][test], yte[z["sample_index"][test]])
    assert main(["verify", str(tmp_path / "out"), "--quiet"]) == 0
