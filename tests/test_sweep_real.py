"""The sweep with the real point function on a small trained checkpoint.

Covers: identical results for 1 and 2 processes, a real sweep process killed mid-way and
resumed, the command-line output, and the report of a folder holding a real sweep.
"""

import json
import os
import signal
import subprocess
import sys
import time

import pytest
import torch

from snnconvert import sweep
from snnconvert.cli import main

torch.set_num_threads(2)

TINY = {
    "name": "tiny-sweep", "seed": 0,
    "data": {"limit": 300},
    "model": {"layers": [{"type": "conv", "out": 4, "kernel": 3, "stride": 1, "padding": 1, "bn": False},
                         {"type": "maxpool", "size": 2, "stride": 2},
                         {"type": "dense", "units": 16, "bn": False}, {"type": "dense"}]},
    "train": {"epochs": 4, "threads": 2},
}


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    """A tiny CNN trained on 300 simulated-sensor digits (scikit-learn's bundled set)."""
    from snnconvert import data, recipe, train
    root = tmp_path_factory.mktemp("tiny")
    raw = json.loads(json.dumps(TINY))
    raw["data"]["cache_dir"] = str(root / "cache")
    r = recipe.from_dict(raw)
    ds = data.load_dataset(r)
    train.train(r, ds, root / "train", quiet=True)
    return root / "train", ds


def _settings(**kw):
    return sweep.SweepSettings.from_section(kw)


def _keyed(result):
    return {r["key"]: r["metrics"] for r in result.records}


def test_one_and_two_jobs_give_identical_results(trained, tmp_path):
    train_dir, ds = trained
    grid = dict(weight_bits="2,4", payload_bits="1,3", codings=["payload", "ttfs"])
    inputs = sweep.load_inputs(train_dir, dataset=ds)
    one = sweep.run_sweep(inputs, _settings(jobs=1, **grid), tmp_path / "one", progress=False)
    two = sweep.run_sweep(inputs, _settings(jobs=2, **grid), tmp_path / "two", progress=False)
    assert one.computed == two.computed == 8            # 2 weight x 2 payload widths x 2 codings
    assert _keyed(one) == _keyed(two)
    assert (tmp_path / "one" / "sweep.csv").read_bytes() == (tmp_path / "two" / "sweep.csv").read_bytes()
    m = _keyed(one)
    for w in (2, 4):
        for p in (1, 3):
            pay, tt = m[f"payload/w{w}/p{p}/per-tensor/post-training"], m[f"ttfs/w{w}/p{p}/per-tensor/post-training"]
            # payload and time-to-first-spike carry the same integer values: identical networks and decisions
            assert pay["network_fingerprint"] == tt["network_fingerprint"]
            assert pay["spike_accuracy"] == tt["spike_accuracy"]


def test_frame_accuracy_matches_scikit_learn(trained, tmp_path, monkeypatch):
    from sklearn.metrics import accuracy_score
    from snnconvert import data, recipe, train
    train_dir, ds = trained
    _, ckpt = train.load_checkpoint(train_dir)
    given = {**ckpt["recipe"], "sweep": _settings(weight_bits="3", payload_bits="2", jobs=1).as_dict()}

    def no_second_load(*args, **kw):
        raise AssertionError("the sweep loaded the data set again")

    monkeypatch.setattr(data, "load_dataset", no_second_load)
    res = sweep.run_from_recipe(train_dir, given, tmp_path / "s", progress=False, dataset=ds)  # the pipeline's call
    monkeypatch.undo()
    assert recipe.dumps(given) == (tmp_path / "s" / "recipe.toml").read_text()   # saved as given
    model, _ = train.load_checkpoint(train_dir)
    with torch.no_grad():
        pred = model(torch.as_tensor(ds.test[0])).argmax(1).numpy()  # (N,)
    assert res.frame_accuracy == pytest.approx(accuracy_score(ds.test[1], pred), abs=1e-12)


def _lines(path):
    """Complete lines only: a kill may cut the last one short (the next run drops it)."""
    text = path.read_text() if path.is_file() else ""
    return text[: text.rfind("\n") + 1].splitlines()


@pytest.mark.slow
def test_killed_sweep_process_resumes_without_loss(trained, tmp_path):
    train_dir, _ = trained
    out = tmp_path / "sw"
    cmd = [sys.executable, "-m", "snnconvert", "sweep", str(train_dir), "--weight-bits", "2-7",
           "--payload-bits", "1-5", "--jobs", "1", "--out", str(out), "--quiet"]
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    deadline = time.monotonic() + 300
    while len(_lines(out / "results.jsonl")) < 1 and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    proc.send_signal(signal.SIGKILL)
    proc.communicate()
    before = _lines(out / "results.jsonl")
    total = 6 * 5
    assert 1 <= len(before) < total, "the sweep must be killed after its first point and before its last"
    assert not (out / "sweep.csv").exists()
    again = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=600)
    assert again.returncode == 0, again.stderr
    assert f"{total} points ({total - len(before)} computed, {len(before)} from results.jsonl)" in again.stdout
    after = _lines(out / "results.jsonl")
    assert after[:len(before)] == before
    keys = [json.loads(x)["key"] for x in after]
    grid = sweep.make_points(_settings(weight_bits="2-7", payload_bits="1-5"))
    assert sorted(keys) == sorted(p["key"] for p in grid)
    # points from before and after the kill match a sweep run in one go
    fresh = _keyed(sweep.run_sweep(train_dir, _settings(weight_bits="2,7", payload_bits="1,5", jobs=1),
                                   tmp_path / "fresh", progress=False))
    resumed = {json.loads(x)["key"]: json.loads(x)["metrics"] for x in after}
    assert {k: resumed[k] for k in fresh} == fresh
    assert json.loads(before[0])["key"] == "payload/w2/p1/per-tensor/post-training"


def test_cli_prints_table_and_recommendation(trained, tmp_path, capsys):
    from snnconvert import recipe
    train_dir, _ = trained
    out = tmp_path / "cli"
    code = main(["sweep", str(train_dir), "--weight-bits", "3", "--payload-bits", "1,2", "--coding", "payload,ttfs",
                 "--jobs", "1", "--out", str(out), "--tolerance-pp", "100", "--quiet"])
    assert code == 0
    lines = capsys.readouterr().out.splitlines()
    rec = json.loads((out / "recommendation.json").read_text())
    assert lines[0].split() == ["coding", "W", "P", "spike", "%", "95", "%", "CI", "loss", "pp", "p", "weight", "kbit",
                                 "SOPs/sample", "steps", "nJ", "(est.)"]  # two codings: latency and energy columns too
    assert [ln.split()[:3] for ln in lines[2:6]] == [["payload", "3", "1"], ["payload", "3", "2"],
                                                    ["ttfs", "3", "1"], ["ttfs", "3", "2"]]
    # the interval: scipy.stats.binomtest(k, n).proportion_ci(method="wilson") (Wilson 1927)
    from scipy.stats import binomtest
    n = json.loads((out / "results.jsonl").read_text().splitlines()[0])["metrics"]["samples"]
    ci = binomtest(round(rec["frame_accuracy"] * n), n).proportion_ci(method="wilson")
    assert lines[-3] == (f"4 points (4 computed, 0 from results.jsonl); frame accuracy {100 * rec['frame_accuracy']:.2f} % "
                         f"(95 % CI [{100 * ci.low:.1f}, {100 * ci.high:.1f}] %)")
    assert lines[-2] == rec["message"] and lines[-1] == f"outputs in {out}"
    # with a 100 pp tolerance every point qualifies: the cheapest is the one with the least weight memory,
    # then the fewest SOPs per sample (the rule in the recommendation), checked against the logged points
    assert rec["point"]["weight_bits"] == 3 and rec["within_tolerance"] == 4
    logged = [json.loads(x) for x in (out / "results.jsonl").read_text().splitlines()]
    cheapest = min((r["metrics"]["weight_memory_bits"], r["metrics"]["sops_per_sample"]) for r in logged)
    assert (rec["point"]["weight_memory_bits"], rec["point"]["sops_per_sample"]) == cheapest
    # the saved recipe is a valid recipe holding the grid that ran
    r = recipe.load(out / "recipe.toml")
    assert (r["sweep"]["weight_bits"], r["sweep"]["payload_bits"], r["sweep"]["codings"]) == ([3], [1, 2],
                                                                                              ["payload", "ttfs"])


def test_aware_point_fine_tunes_from_the_float_checkpoint(trained, tmp_path):
    from snnconvert import train
    train_dir, _ = trained
    aware = _settings(weight_bits="3", payload_bits="2", aware=True, aware_epochs=1, jobs=1)
    res = sweep.run_sweep(train_dir, aware, tmp_path / "aw", progress=False)
    (rec,) = res.records
    assert rec["key"] == "payload/w3/p2/per-tensor/aware1"
    _, ckpt = train.load_checkpoint(train_dir)
    # the recommendation compares with the float checkpoint, not with the fine-tuned model
    assert res.frame_accuracy == ckpt["metrics"]["frame_accuracy"]
    assert 0.0 <= rec["metrics"]["spike_accuracy"] <= 1.0 and rec["metrics"]["max_spikes_per_neuron"] <= 1
    again = sweep.run_sweep(train_dir, aware, tmp_path / "aw2", progress=False)
    assert again.records[0]["metrics"] == rec["metrics"]  # seeded: the same fine-tuning twice


def test_seeds_axis_trains_one_model_per_seed_and_judges_the_mean(trained, tmp_path, capsys):
    import csv
    import statistics
    train_dir, ds = trained
    inputs = sweep.load_inputs(train_dir, dataset=ds)
    settings = _settings(weight_bits="2,4", payload_bits="2", seeds="0-1", jobs=1, tolerance_pp=100)
    res = sweep.run_sweep(inputs, settings, tmp_path / "sw", progress=False)
    assert sorted(res.per_seed) == [0, 1] and (tmp_path / "sw" / "seed-1" / "train" / "model.pt").is_file()
    assert not (tmp_path / "sw" / "seed-0" / "train").exists()         # seed 0 is the checkpoint's own
    rows = list(csv.DictReader((tmp_path / "sw" / "sweep.csv").open()))
    assert [(r["seed"], r["weight_bits"]) for r in rows] == [("0", "2"), ("0", "4"), ("1", "2"), ("1", "4")]
    summary = list(csv.DictReader((tmp_path / "sw" / "seeds.csv").open()))
    for i, row in enumerate(summary):
        accs = [float(r["spike_accuracy"]) for r in rows if r["weight_bits"] == row["weight_bits"]]
        # reference: Python's statistics module (sample standard deviation)
        assert float(row["spike_accuracy_mean"]) == pytest.approx(statistics.mean(accs), abs=1e-12)
        assert float(row["spike_accuracy_std"]) == pytest.approx(statistics.stdev(accs), abs=1e-12)
        assert (float(row["spike_accuracy_min"]), float(row["spike_accuracy_max"])) == (min(accs), max(accs))
        assert res.records[i]["metrics"]["spike_accuracy"] == pytest.approx(statistics.mean(accs), abs=1e-12)
    rec = json.loads((tmp_path / "sw" / "recommendation.json").read_text())
    assert rec["seeds"] == [0, 1] and "on the mean over 2 training seeds" in rec["rule"]
    assert rec["point"]["weight_bits"] == 2                               # cheapest within a 100 pp tolerance
    assert rec["frame_accuracy"] == pytest.approx(statistics.mean(r.frame_accuracy for r in res.per_seed.values()))
    again = sweep.run_sweep(inputs, settings, tmp_path / "sw", progress=False)   # resumes every seed
    assert (again.computed, again.reused) == (0, 4)


@pytest.mark.parametrize("calib", [7, 64])
def test_tasks_ship_only_the_calibration_subset_and_convert_the_same(trained, calib):
    """A point's task carries the calibration subset of the training split, not the split: same network."""
    from snnconvert.convert.calibrate import calibration_subset
    from snnconvert.sweep.point import evaluate_point, lean
    train_dir, ds = trained
    inputs = sweep.load_inputs(train_dir, dataset=ds)
    recipe = {**inputs.recipe, "convert": {**inputs.recipe["convert"], "calib_samples": calib}}
    point = {"coding": "payload", "weight_bits": 3, "payload_bits": 3, "per_channel": False, "aware": False}
    cut = lean(ds, calib)
    assert len(cut.train[1]) == calib < len(ds.train[1]) and len(cut.val[1]) == 0
    assert (cut.train[0] == ds.train[0][calibration_subset(len(ds.train[1]), calib)]).all()
    full = evaluate_point(inputs.model, lean(ds), recipe, None, point)
    assert evaluate_point(inputs.model, cut, recipe, None, point) == full
