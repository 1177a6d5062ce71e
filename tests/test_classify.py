"""`snnconvert classify` on a generated long recording: every stimulus found, and the decisions equal
the network's decisions on the test frames of the same digits (the frames the data set makes)."""

import json
from pathlib import Path

import numpy as np
import pytest

from snnconvert import arith, stats
from snnconvert import recipe as R
from snnconvert.cli import main
from snnconvert.data.generate import labels_path, write_long_recording

RECIPES = Path(__file__).resolve().parents[1] / "recipes"
K = 8  # stimuli in the long recording


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    """A briefly trained default-size network on 300 simulated digits, converted (payload and ttfs),
    saved as a convert folder and an export folder, each with its recipe; a long recording of K test
    digits with its label file."""
    import torch

    from snnconvert.convert import convert_model
    from snnconvert.data import load_dataset
    from snnconvert.export import export_network
    from snnconvert.sim import simulate
    from snnconvert.train import train
    torch.set_num_threads(1)
    root = tmp_path_factory.mktemp("classify")
    r = R.load(RECIPES / "default.toml", ["data.limit=300", f"data.cache_dir={root / 'cache'}", "train.epochs=3",
                                          "train.threads=1"])
    ds = load_dataset(r, progress=False)
    model, _ = train(r, ds, root / "train", quiet=True)
    calib = np.asarray(ds.train[0][:64])
    nets = {}
    for coding, folder in (("payload", "net"), ("ttfs", "export")):
        net = convert_model(model, calib, weight_bits=4, payload_bits=4 if coding == "payload" else 3, coding=coding,
                            input_q=int(ds.input_q))
        net.meta["classes"] = list(ds.classes)
        x_test, y_test = ds.test
        x_int = arith.quantize_input(x_test, net.input_q)
        if coding == "payload":
            net.save(root / folder)
        else:
            export_network(net, root / folder, x_int[:4], y_test[:4], vectors=4, progress=False)
        R.save(r, root / folder)
        nets[coding] = (net, simulate(net, x_int, record=False))
    rec = root / "long.npz"
    made = write_long_recording(rec, r, K, seed=3, gap_us=100_000, progress=False)
    test_pos = {int(v): j for j, v in enumerate(ds.split_index["test"])}
    return {"root": root, "recording": rec, "made": made, "nets": nets, "ds": ds, "test_pos": test_pos}


def _classify(setup, folder, *extra, capsys):
    code = main(["classify", str(setup["root"] / folder), str(setup["recording"]), "--labels",
                 str(labels_path(setup["recording"])), "--json", "--quiet", *extra])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)


@pytest.mark.parametrize("folder, coding", [("net", "payload"), ("export", "ttfs")])
def test_every_stimulus_found_and_decided_as_on_its_test_frame(setup, folder, coding, capsys):
    res = _classify(setup, folder, capsys=capsys)
    lab = res["labels"]
    assert lab["stimuli"] == K and lab["found"] == K and lab["missed"] == [] and lab["windows_outside"] == 0
    scored = [row for row in res["rows"] if row["right"] in ("yes", "no")]
    assert [row["stimulus"] for row in scored] == list(range(1, K + 1))
    # the scored window of each stimulus is its first (frames.pick = "first"), as in training
    _, sim = setup["nets"][coding]
    y = setup["ds"].test[1]
    pos = [setup["test_pos"][int(i)] for i in setup["made"]["indices"]]
    # exact: the front end gives the stimulus the frame the data set made of that recording
    assert [row["decision"] for row in scored] == [int(sim.decisions[j]) for j in pos]
    assert [row["label"] for row in scored] == [int(y[j]) for j in pos]
    if coding == "ttfs":
        assert [row["early_decision"] for row in scored] == [int(sim.early_decisions[j]) for j in pos]
        assert [row["early_step"] for row in scored] == [int(sim.first_spike_step[j]) for j in pos]
    # accuracy on the long recording vs the network's test accuracy: Wilson intervals overlap and the
    # paired test (exact McNemar, stats.py) finds no difference on the same digits
    right_long = [row["right"] == "yes" for row in scored]
    right_test = [int(sim.decisions[j]) == int(y[j]) for j in pos]
    b, c = stats.discordant_pairs(right_long, right_test)
    assert stats.mcnemar_exact_p(b, c) == 1.0
    k_all = int(np.sum(sim.decisions == y))
    lo_t, hi_t = stats.wilson_interval(k_all, len(y))
    lo_l, hi_l = lab["ci95"]
    assert lo_l <= hi_t and lo_t <= hi_l
    assert lab["right"] == sum(right_long) and res["coding"] == coding


def test_text_csv_and_plot(setup, capsys, tmp_path):
    csv_out, png = tmp_path / "rows.csv", tmp_path / "plot.png"
    assert main(["classify", str(setup["root"] / "net"), str(setup["recording"]), "--labels",
                 str(labels_path(setup["recording"])), "--csv", str(csv_out), "--plot", str(png), "--quiet"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("classify: 1 recording, payload network of 10 classes; front end: 1000 us bins, "
                             "8x / 2x the background of 32 bins, binary 16x16 grid")
    assert out[1].split() == ["file", "#", "start_us", "end_us", "events", "gated", "decision", "margin", "stimulus",
                              "label", "right"]
    assert out[-2].startswith(f"stimuli   {K}, found {K}, missed 0;")
    assert out[-1].startswith("accuracy  ") and "Wilson" in out[-1]
    rows = csv_out.read_text().splitlines()
    assert rows[0] == "file,window,start_us,end_us,events_in,events_gated,decision_name,margin,stimulus,label,right"
    assert len(rows) == len(out) - 4 + 1  # one CSV line per table row, plus the header
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948 §5.2)


def test_gated_events_and_margins_are_consistent(setup, capsys):
    res = _classify(setup, "net", capsys=capsys)
    for row in res["rows"]:
        # binary frames: at most one input event per grid pixel, never more than the events in the window
        assert 0 <= row["events_gated"] <= min(row["events_in"], 256)
        assert row["margin"] >= 0 and row["end_us"] > row["start_us"]
        assert (row["end_us"] - row["start_us"]) % 1000 == 0  # whole 1 ms bins


@pytest.mark.parametrize("make, args, message", [
    (None, ["{root}/nothing"], ("error: {root}/nothing: holds neither network.json (a `snnconvert convert` folder) "
                                "nor manifest.json (a `snnconvert export` folder)\n")),
    (None, ["{root}/net", "{rec}", "--labels", "a.csv", "--labels", "b.csv"],
     "error: --labels given 2 times for 1 recordings; give one label file per RECORDING, in the same order\n"),
    ("start_us,end_us,label\n5,3,1\n", ["{root}/net", "{rec}", "--labels", "{f}"],
     "error: {f}: line 2: need 0 <= start_us < end_us; got 5, 3\n"),
    ("start_us,end_us,label\n0,10,12\n", ["{root}/net", "{rec}", "--labels", "{f}"],
     "error: {f}: line 2: label 12 is not a class index in [0, 9]\n"),
    ("t,x\n", ["{root}/net", "{rec}", "--labels", "{f}"],
     "error: {f}: line 1: expected the header start_us,end_us,label\n"),
])
def test_usage_errors(setup, tmp_path, capsys, make, args, message):
    f = tmp_path / "labels.csv"
    if make is not None:
        f.write_text(make)
    sub = {"root": str(setup["root"]), "rec": str(setup["recording"]), "f": str(f)}
    argv = [a.format(**sub) for a in args]
    if len(argv) == 1:
        argv.append(str(setup["recording"]))
    assert main(["classify", *argv, "--quiet"]) == 2
    assert capsys.readouterr().err == message.format(**sub)
