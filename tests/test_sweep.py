"""Sweep machinery: grid syntax, Pareto front, recommendation, resumable results log, outputs.

These tests drive the sweep with a small deterministic point function so the bookkeeping can be
checked exactly; tests/test_sweep_real.py runs the real conversion on a trained checkpoint.
"""

import csv
import json
from types import SimpleNamespace

import numpy as np
import pytest
import torch

from snnconvert import sweep
from snnconvert.errors import FormatError, UsageError

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


# the project's grid syntax: "a-b" is the inclusive range a..b, commas join parts, the result is sorted
# and without repeats; expected lists hand-expanded from that rule
@pytest.mark.parametrize("text, expected", [
    ("2-8", [2, 3, 4, 5, 6, 7, 8]),
    ("2,4,8", [2, 4, 8]),
    ("2-4,8", [2, 3, 4, 8]),
    (" 3 - 5 ", [3, 4, 5]),
    ("4", [4]),
    (4, [4]),
    ([8, 2, 4, 4], [2, 4, 8]),
    (["2-3", 6], [2, 3, 6]),
])
def test_grid_syntax_accepts(text, expected):
    assert sweep.parse_grid(text, "weight_bits", "sweep", 2, 16) == expected


# reversed or open ranges, foreign separators, non-ints and values outside [2, 16] (1-4, 2-17) are refused
@pytest.mark.parametrize("value", ["8-2", "", "2-", "a", "2;4", "1-4", "2-17", [], [True], True, 2.5, None, "2,,4"])
def test_grid_syntax_rejects(value):
    with pytest.raises(UsageError, match=r"^The 'weight_bits' parameter of sweep must be a grid of ints in \[2, 16\]"):
        sweep.parse_grid(value, "weight_bits", "sweep", 2, 16)


@pytest.mark.parametrize("value, expected", [
    ("", []), ([], []), ("ttfs", ["ttfs"]), ("payload, ttfs", ["payload", "ttfs"]),
    (["binary", "payload", "binary"], ["binary", "payload"]),
])
def test_codings_accepts(value, expected):
    assert sweep.parse_codings(value) == expected


@pytest.mark.parametrize("value", ["rate", ["payload", 3], 5, "payload,spikes"])
def test_codings_rejects(value):
    with pytest.raises(UsageError, match=r"^The 'codings' parameter of sweep must be a list of codings"):
        sweep.parse_codings(value)


@pytest.mark.parametrize("key, value, message", [
    ("jobs", -1, r"The 'jobs' parameter of sweep must be an int in \[0, 256\]. Got -1 instead."),
    ("tolerance_pp", -0.1, r"The 'tolerance_pp' parameter of sweep must be a float in \[0.0, 100.0\]. Got -0.1"),
    ("aware", "yes", r"The 'aware' parameter of sweep must be a bool. Got 'yes' instead."),
    ("aware_epochs", 0, r"The 'aware_epochs' parameter of sweep must be an int in \[1, 1000\]"),
    ("payload_bits", "0-3", r"The 'payload_bits' parameter of sweep must be a grid of ints in \[1, 8\]"),
])
def test_schema_rejects(key, value, message):
    with pytest.raises(UsageError, match=message):
        sweep.SCHEMA[key].check(value, key, "sweep")


def test_schema_defaults_are_valid_and_explained():
    for key, k in sweep.SCHEMA.items():
        k.check(k.default, key, "sweep")
        assert k.reason and "\n" not in k.reason


def test_points_order_and_binary_collapse():
    # grid order: coding, then weight bits, then payload bits; a binary spike carries 1 bit, so binary keeps p=1 only
    pts = sweep.make_points("2-3", "1-3", ["payload", "binary"])
    assert [(p["coding"], p["weight_bits"], p["payload_bits"]) for p in pts] == [
        ("payload", 2, 1), ("payload", 2, 2), ("payload", 2, 3), ("payload", 3, 1), ("payload", 3, 2),
        ("payload", 3, 3), ("binary", 2, 1), ("binary", 3, 1)]
    assert len({p["key"] for p in pts}) == len(pts)


# Pareto optimality (common practice): a point is on the front when no other point is at least
# as cheap and at least as accurate, and strictly better in one of the two.
@pytest.mark.parametrize("costs, accs, front", [
    ([1, 2, 3], [0.5, 0.7, 0.9], [True, True, True]),        # each step buys accuracy
    ([1, 2, 3], [0.9, 0.7, 0.9], [True, False, False]),      # the cheapest is also the best
    ([1, 1, 2], [0.8, 0.8, 0.7], [True, True, False]),       # ties are both kept
    ([3, 1, 2], [0.6, 0.6, 0.8], [False, True, True]),
])
def test_pareto_front(costs, accs, front):
    assert sweep.pareto_front(costs, accs) == front


def _rec(w, p, acc, mem, sops, coding="payload"):
    params = {"coding": coding, "weight_bits": w, "payload_bits": p, "per_channel": False, "aware": False,
              "aware_epochs": 0}
    return {"key": sweep.point_key(params), "params": params,
            "metrics": {"frame_accuracy": 0.95, "spike_accuracy": acc, "weight_memory_bits": mem,
                        "sops_per_sample": sops}}


def test_recommendation_cheapest_within_tolerance():
    recs = [_rec(2, 2, 0.90, 100, 50), _rec(3, 2, 0.946, 150, 80), _rec(3, 3, 0.948, 150, 60),
            _rec(4, 4, 0.95, 200, 40)]
    r = sweep.recommend(recs, 0.95, 0.5)
    # 0.946 loses 0.4 pp, within 0.5; equal memory -> fewer SOPs wins (0.948 point)
    assert (r["point"]["weight_bits"], r["point"]["payload_bits"]) == (3, 3)
    assert r["within_tolerance"] == 3 and r["closest"] is None
    assert r["label"] == "payload w3 p3 (per-tensor)"           # the project's point label: coding, W, P, scaling


def test_recommendation_none_qualifies_is_said():
    recs = [_rec(2, 2, 0.80, 100, 50), _rec(3, 3, 0.90, 150, 60)]
    r = sweep.recommend(recs, 0.95, 0.5)
    # 0.90 is the most accurate point, 5 pp below 0.95: none within 0.5 pp
    assert r["point"] is None and r["closest"]["weight_bits"] == 3
    assert r["message"].startswith("no point is within 0.5 pp of the frame accuracy 95.00 %")


# --- the runner with a deterministic stand-in point function --------------------------------

def fake_point(model, dataset, recipe, act_max, point):
    """Accuracy grows with both widths; cost grows with weight bits (memory) and payload bits (SOPs)."""
    w, p = point["weight_bits"], point["payload_bits"]
    return {"frame_accuracy": 0.95, "quantized_accuracy": 0.95 - 0.4 / 2 ** (w + p),
            "spike_accuracy": 0.95 - 0.4 / 2 ** (w + p), "weight_memory_bits": 1000 * w,
            "sops_per_sample": 100 * p, "spikes_per_layer": [p, w]}


def _context(data_fp="d1", seed=0):
    torch.manual_seed(seed)
    model = torch.nn.Sequential(torch.nn.Flatten(), torch.nn.Linear(4, 2))
    x = np.zeros((3, 1, 2, 2), np.float32)
    ds = SimpleNamespace(fingerprint=data_fp, test=(x, np.zeros(3, np.int64)))
    ckpt = {"recipe": {"name": "t", "seed": 0, "convert": {"coding": "payload", "calibration": "max"}},
            "act_max": None}
    return model, ckpt, ds


def _run(tmp_path, ctx=None, **kw):
    args = dict(weight_bits="2-4", payload_bits="1-2", jobs=1, out_dir=tmp_path / "sw", progress=False,
                point_fn=fake_point, context=ctx or _context())
    args.update(kw)
    return sweep.run_sweep(tmp_path / "train", **args)


def test_outputs_and_recommendation(tmp_path):
    res = _run(tmp_path)
    out = tmp_path / "sw"
    assert res.computed == 6 and res.reused == 0
    rows = list(csv.DictReader((out / "sweep.csv").open()))
    assert [(r["weight_bits"], r["payload_bits"]) for r in rows] == [
        ("2", "1"), ("2", "2"), ("3", "1"), ("3", "2"), ("4", "1"), ("4", "2")]
    # loss of w=4,p=2 is 0.4/64*100 = 0.625 pp > 0.5: nothing qualifies at 0.5 pp
    assert res.recommendation["point"] is None
    for name in ("heatmap.png", "pareto.png"):
        assert (out / name).read_bytes()[:8] == PNG_SIGNATURE
    assert json.loads((out / "recommendation.json").read_text())["format"] == sweep.RECOMMENDATION_FORMAT
    assert "[sweep]" in (out / "recipe.toml").read_text()
    lines = (out / "results.jsonl").read_text().splitlines()
    # first grid point w=2, p=1: fake_point's spikes_per_layer is [p, w] = [1, 2]
    assert len(lines) == 6 and json.loads(lines[0])["metrics"]["spikes_per_layer"] == [1, 2]


def test_tolerance_changes_recommendation(tmp_path):
    res = _run(tmp_path, tolerance_pp=5.0)
    # losses: w+p=3 -> 5.0 pp, the cheapest memory (w=2) has p=1 (5 pp) and p=2 (2.5 pp): fewer SOPs first
    assert (res.recommendation["point"]["weight_bits"], res.recommendation["point"]["payload_bits"]) == (2, 1)


def test_rerun_skips_done_points_and_extends_grid(tmp_path):
    _run(tmp_path)
    again = _run(tmp_path)
    assert (again.computed, again.reused) == (0, 6)
    wider = _run(tmp_path, weight_bits="2-5")
    assert (wider.computed, wider.reused) == (2, 6)     # w=5 adds p=1 and p=2: 2 new points, 6 from the log
    assert len((tmp_path / "sw" / "results.jsonl").read_text().splitlines()) == 8


@pytest.mark.parametrize("change, which", [
    (dict(data_fp="d2"), "data"),
    (dict(seed=1), "model"),
])
def test_changed_fingerprint_refuses_to_mix(tmp_path, change, which):
    _run(tmp_path)
    with pytest.raises(UsageError, match=rf"holds results of a different {which} \({which} fingerprint .* refusing "
                                          r"to mix them: delete the file or pass another --out"):
        _run(tmp_path, ctx=_context(**change))


def test_changed_convert_settings_refuse_to_mix(tmp_path):
    _run(tmp_path)
    ctx = _context()
    ctx[1]["recipe"]["convert"]["calibration"] = "percentile:99"
    with pytest.raises(UsageError, match="different settings"):
        _run(tmp_path, ctx=ctx)


def test_torn_last_line_is_dropped_and_recomputed(tmp_path):
    _run(tmp_path)
    path = tmp_path / "sw" / "results.jsonl"
    text = path.read_text()
    path.write_text(text[: len(text) - 40])  # a kill in the middle of the last write
    res = _run(tmp_path)
    assert (res.computed, res.reused) == (1, 5)          # 40 bytes cut only the 6th of 6 lines
    lines = path.read_text().splitlines()
    assert lines[:5] == text.splitlines()[:5]
    assert [json.loads(x)["key"] for x in lines] == [json.loads(x)["key"] for x in text.splitlines()]


def test_corrupt_middle_line_is_a_format_error(tmp_path):
    _run(tmp_path)
    path = tmp_path / "sw" / "results.jsonl"
    lines = path.read_text().splitlines(keepends=True)
    lines[2] = "{not json\n"
    path.write_text("".join(lines))
    with pytest.raises(FormatError, match=r"results.jsonl: line 3 is not a sweep result"):
        _run(tmp_path)


@pytest.mark.parametrize("argv, message", [
    (["sweep", "{tmp}/nope"], "error: training folder not found: {tmp}/nope\n"),
    (["sweep", "{tmp}", "--weight-bits", "8-2"],
     "error: The 'weight_bits' parameter of sweep must be a grid of ints in [2, 16] like '2-8', '2,4,8' or "
     "[2, 4, 8]. Got '8-2' instead.\n"),
    (["sweep", "{tmp}", "--coding", "rate"],
     "error: The 'codings' parameter of sweep must be a list of codings among 'payload', 'ttfs', 'binary' "
     "(or '' for the coding of [convert]). Got 'rate' instead.\n"),
])
def test_cli_usage_errors(tmp_path, capsys, argv, message):
    from snnconvert.cli import main
    argv = [a.replace("{tmp}", str(tmp_path)) for a in argv]
    assert main(argv) == 2                           # usage errors exit 2, as argparse does (common practice)
    assert capsys.readouterr().err == message.replace("{tmp}", str(tmp_path))


def failing_point(model, dataset, recipe, act_max, point):
    if point["weight_bits"] == 3:
        raise RuntimeError("point w3 failed")
    return fake_point(model, dataset, recipe, act_max, point)


def test_parallel_run_keeps_finished_points_when_one_fails(tmp_path):
    with pytest.raises(RuntimeError, match="point w3 failed"):
        _run(tmp_path, point_fn=failing_point, jobs=2, weight_bits="2-4", payload_bits="1")
    logged = [json.loads(x)["key"] for x in (tmp_path / "sw" / "results.jsonl").read_text().splitlines()]
    assert "payload/w3/p1/per-tensor/post-training" not in logged and len(logged) <= 2
    res = _run(tmp_path, jobs=2, weight_bits="2-4", payload_bits="1")  # resumes with the failure fixed
    assert res.computed == 3 - len(logged) and [r["params"]["weight_bits"] for r in res.records] == [2, 3, 4]
    again = _run(tmp_path / "again", jobs=1, weight_bits="2-4", payload_bits="1")
    assert [(r["params"], r["metrics"]) for r in res.records] == [(r["params"], r["metrics"]) for r in again.records]
