"""Sweep machinery: grid syntax, Pareto front, recommendation, resumable results log, outputs.

These tests drive the sweep with a small deterministic point function so the bookkeeping can be
checked exactly; tests/test_sweep_real.py runs the real conversion on a trained checkpoint.
"""

import copy
import csv
import json
from types import SimpleNamespace

import numpy as np
import pytest
import torch

from snnconvert import sweep
from snnconvert.sweep import figures
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
        sweep.KEYS[key].check(value, key, "sweep")


def test_schema_defaults_are_valid_and_explained():
    for key, k in sweep.KEYS.items():
        k.check(k.default, key, "sweep")
        assert k.reason and "\n" not in k.reason


def test_points_order_and_binary_collapse():
    # grid order: coding, then weight bits, then payload bits; a binary spike carries 1 bit, so binary keeps p=1 only
    pts = sweep.make_points(sweep.SweepSettings.from_section(
        {"weight_bits": "2-3", "payload_bits": "1-3", "codings": ["payload", "binary"]}))
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


def _settings(**kw):
    return sweep.SweepSettings.from_section({"weight_bits": "2-4", "payload_bits": "1-2", "jobs": 1, **kw})


def _inputs(tmp_path, ctx, settings):
    """The inputs of a sweep as a caller builds them: the checkpoint's recipe with this [sweep] section."""
    model, ckpt, ds = ctx or _context()
    return sweep.Inputs(tmp_path / "train", model, ckpt, ds, {**ckpt["recipe"], "sweep": settings.as_dict()})


def _run(tmp_path, ctx=None, point_fn=fake_point, executor=None, **kw):
    settings = _settings(**kw)
    return sweep.run_sweep(_inputs(tmp_path, ctx, settings), settings, tmp_path / "sw", executor=executor,
                           point_fn=point_fn, progress=False)


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
    # the recipe saved beside the outputs is the one the sweep was given, unchanged
    from snnconvert import recipe
    assert recipe.dumps(_inputs(tmp_path, None, _settings()).recipe) == (out / "recipe.toml").read_text()
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


def test_test_samples_measure_evenly_spaced_test_samples_and_never_mix(tmp_path):
    seen = []

    def point(model, dataset, recipe, act_max, pt):
        seen.append(dataset.test[1].tolist())
        return fake_point(model, dataset, recipe, act_max, pt)
    model, ckpt, _ = _context()
    y = np.arange(10, dtype=np.int64)
    ds = SimpleNamespace(fingerprint="d1", test=(np.zeros((10, 1, 2, 2), np.float32), y))
    _run(tmp_path, ctx=(model, ckpt, ds), point_fn=point, weight_bits="2", payload_bits="1", test_samples=4)
    # 4 of 10, evenly spaced: round(linspace(0, 9, 4)) = 0, 3, 6, 9 (numpy rounds halves to even: 3.0, 6.0 exact)
    assert seen == [[0, 3, 6, 9]]
    with pytest.raises(UsageError, match="different data"):       # a log of 4 test samples is not reused for 5
        _run(tmp_path, ctx=(model, ckpt, ds), point_fn=point, weight_bits="2", payload_bits="1", test_samples=5)
    _run(tmp_path / "all", ctx=(model, ckpt, ds), point_fn=point, weight_bits="2", payload_bits="1", test_samples=0)
    assert seen[-1] == list(range(10))


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


class ReversedInProcess:
    """The smallest executor: every point in this process, the last first (results may come in any order)."""

    def __init__(self):
        self.ran = []

    def start(self):
        pass

    def map_points(self, task, points):
        for p in reversed(points):
            self.ran.append(p["key"])
            yield task(p)


def test_executor_seam_any_engine_gives_the_pool_results(tmp_path):
    mine = ReversedInProcess()
    res = _run(tmp_path / "mine", executor=mine)
    pool = _run(tmp_path / "pool", executor=sweep.LocalPool(2))
    assert len(mine.ran) == 6 and sorted(mine.ran) == sorted(r["key"] for r in res.records)
    logged = [json.loads(x)["key"] for x in (tmp_path / "mine" / "sw" / "results.jsonl").read_text().splitlines()]
    assert logged == mine.ran                                  # each point logged as it comes back
    assert [r["key"] for r in res.records] == [r["key"] for r in pool.records]   # grid order either way
    assert [(r["params"], r["metrics"]) for r in res.records] == [(r["params"], r["metrics"]) for r in pool.records]
    for name in ("sweep.csv", "recommendation.json"):
        assert (tmp_path / "mine" / "sw" / name).read_bytes() == (tmp_path / "pool" / "sw" / name).read_bytes()


def test_the_given_recipe_is_saved_unchanged(tmp_path):
    settings = _settings(codings="")                   # empty: the [convert] coding is swept
    inputs = _inputs(tmp_path, None, settings)
    before = copy.deepcopy(inputs.recipe)
    res = sweep.run_sweep(inputs, settings, tmp_path / "sw", point_fn=fake_point, progress=False)
    assert {r["params"]["coding"] for r in res.records} == {"payload"}
    assert inputs.recipe == before
    from snnconvert import recipe
    assert recipe.dumps(before) == (tmp_path / "sw" / "recipe.toml").read_text()   # codings stays []


# --- plots ---------------------------------------------------------------------------------

def _records(losses_pp: dict, coding="payload", frame=0.98):
    """Result records with the given loss (pp) per (w, p); cost grows with both widths."""
    out = []
    for (w, p), loss in losses_pp.items():
        params = {"coding": coding, "weight_bits": w, "payload_bits": p, "per_channel": False, "aware": False,
                  "aware_epochs": 0}
        metrics = {"frame_accuracy": frame, "spike_accuracy": frame - loss / 100, "weight_memory_bits": 10000 * w,
                   "sops_per_sample": 30000 + 10000 * p + 100 * w,
                   "latency": {"pipeline_stages": 4} if coding != "ttfs" else {"pipeline_stages": 4,
                                                                              "window_steps": 3 * 2 ** p},
                   "energy": {"spike_pj_per_sample": 1000.0 * p * (2 if coding == "payload" else 1)}}
        out.append({"params": params, "metrics": metrics})
    return out


# losses chosen to straddle the 0.5 pp tolerance: 0.3 (within) and 3.0 (beyond) must not share a colour
LOSSES = {(2, 1): 60.0, (2, 2): 3.0, (3, 1): 0.3, (3, 2): 0.0, (4, 1): -0.2, (4, 2): 0.6}


def test_heatmap_colours_by_loss_centred_on_the_tolerance():
    import matplotlib.pyplot as plt
    from matplotlib.colors import BoundaryNorm
    from matplotlib.patches import Rectangle
    recs = _records(LOSSES)
    rows = sweep.table_rows(recs, 0.98, 0.5)
    rec = sweep.recommend(recs, 0.98, 0.5)
    assert (rec["point"]["weight_bits"], rec["point"]["payload_bits"]) == (3, 1)  # least memory within 0.5 pp
    fig = sweep.heatmap_figure(rows, 0.98, 0.5, rec)
    try:
        ax = fig.axes[0]
        im = ax.images[0]
        grid = np.ma.filled(im.get_array(), np.nan)          # (weight bits 2..4, payload bits 1..2)
        want = np.array([[LOSSES[(w, p)] for p in (1, 2)] for w in (2, 3, 4)])
        assert np.allclose(grid, want, atol=1e-9)            # the colour value is the loss, not the accuracy
        assert isinstance(im.norm, BoundaryNorm) and 0.5 in list(im.norm.boundaries)
        rgba = {k: im.cmap(im.norm(v)) for k, v in LOSSES.items()}
        for k, v in LOSSES.items():                           # blue within tolerance, red beyond
            r, _, b, _ = rgba[k]
            assert (b > r) == (v <= 0.5), k
        assert rgba[(3, 1)] != rgba[(2, 2)] and rgba[(2, 2)] != rgba[(2, 1)]
        black = [p for p in ax.patches if isinstance(p, Rectangle) and p.get_edgecolor()[:3] == (0.0, 0.0, 0.0)]
        assert sorted(p.get_xy() for p in black) == sorted(
            (p - 1 - 0.5, [2, 3, 4].index(w) - 0.5) for (w, p), v in LOSSES.items() if v <= 0.5)
        gold = [p for p in ax.patches if isinstance(p, Rectangle) and p not in black]
        assert len(gold) == 1 and gold[0].get_xy() == pytest.approx((0 - 0.46, 1 - 0.46))   # w=3, p=1
        texts = [t.get_text() for t in ax.texts]
        assert "97.7 %\n+0.30 pp" in texts                    # 98 % - 0.3 pp, loss with its sign
    finally:
        plt.close(fig)


def test_heatmap_merges_codings_with_equal_accuracy():
    import matplotlib.pyplot as plt
    recs = _records(LOSSES, "payload") + _records(LOSSES, "ttfs")
    fig = sweep.heatmap_figure(sweep.table_rows(recs, 0.98, 0.5), 0.98, 0.5, sweep.recommend(recs, 0.98, 0.5))
    try:
        panels = [a for a in fig.axes if a.images]
        assert [a.get_title() for a in panels] == ["payload = ttfs coding (equal accuracy at every point)"]
    finally:
        plt.close(fig)
    other = {**LOSSES, (3, 1): 2.0}
    recs = _records(LOSSES, "payload") + _records(other, "ttfs")
    fig = sweep.heatmap_figure(sweep.table_rows(recs, 0.98, 0.5), 0.98, 0.5, {})
    try:
        assert [a.get_title() for a in fig.axes if a.images] == ["payload coding", "ttfs coding"]
    finally:
        plt.close(fig)


def test_pareto_zooms_to_the_tolerance_band_and_labels_points():
    import matplotlib.pyplot as plt
    recs = _records(LOSSES)
    rows = sweep.table_rows(recs, 0.98, 0.5)
    fig = sweep.pareto_figure(rows, 0.98, 0.5, sweep.recommend(recs, 0.98, 0.5))
    try:
        ax_mem, ax_sops = fig.axes[:2]
        lo, hi = ax_mem.get_ylim()
        # the band: from frame - max(5 * 0.5, 2) = 95.5 % to just above the best point (98.2 %)
        assert 95.0 < lo < 95.5 and 98.2 < hi < 98.6
        labels = {t.get_text() for t in ax_mem.texts}
        assert labels == {"3/1", "3/2", "4/1", "4/2"}           # 2/1 and 2/2 lie 60 and 3 pp below: left out
        assert "2 of 6 points lie below 95.5 %" in ax_mem.get_title()
        fig.canvas.draw()
        for ax in (ax_mem, ax_sops):                   # tick labels never overlap
            boxes = [t.get_window_extent() for t in ax.get_xticklabels() if t.get_text() and t.get_visible()]
            assert len(boxes) >= 2
            assert not any(a.overlaps(b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
            text = [t for t in ax.texts]
            boxes = [t.get_window_extent() for t in text]
            assert not any(a.overlaps(b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
    finally:
        plt.close(fig)


@pytest.mark.parametrize("x, text", [(30000, "30k"), (200000, "200k"), (1.5e6, "1.5M"), (500, "500")])
def test_tick_labels_without_exponents(x, text):
    assert figures._si(x) == text


def test_several_codings_add_latency_and_energy(tmp_path):
    recs = _records(LOSSES, "payload") + _records(LOSSES, "ttfs")
    rows = sweep.table_rows(recs, 0.98, 0.5)
    table = sweep.format_table(rows, sweep.recommend(recs, 0.98, 0.5)).splitlines()
    assert table[0].endswith("steps  nJ (est.)")
    # ttfs w3 p2: window_steps = 3 * 2^2 = 12 steps; energy 1000 pJ * 2 = 2.0 nJ (values of _records)
    assert [ln for ln in table if ln.startswith("ttfs      3  2")][0].split()[9:11] == ["12", "2.0"]
    assert [ln for ln in table if ln.startswith("payload   3  2")][0].split()[9:11] == ["4", "4.0"]
    import matplotlib.pyplot as plt
    fig = sweep.codings_figure(rows)
    try:
        lat = {ln.get_label(): list(ln.get_ydata()) for ln in fig.axes[0].get_lines()}
        assert lat == {"payload": [4, 4], "ttfs": [6, 12]}    # at the widest weight width, p = 1, 2
    finally:
        plt.close(fig)
    one = sweep.format_table(sweep.table_rows(_records(LOSSES), 0.98, 0.5), {})
    assert "steps" not in one


def test_aware_checkpoint_is_named_in_table_plots_and_recommendation(tmp_path):
    ctx = _context()
    ctx[1]["aware"] = {"weight_bits": 3, "payload_bits": 3, "per_channel": False, "learn_act_max": True}
    res = _run(tmp_path, ctx=ctx)
    note = ("checkpoint fine-tuned conversion-aware for weight bits 3, payload bits 3 (per-tensor): points at "
            "other widths convert a model trained for 3/3, and the frame model is that fake-quantized model")
    saved = json.loads((tmp_path / "sw" / "recommendation.json").read_text())
    assert saved["checkpoint"] == {"aware": True, "weight_bits": 3, "payload_bits": 3, "per_channel": False,
                                   "note": note}
    rows = sweep.table_rows(res.records, res.frame_accuracy, res.tolerance_pp)
    assert sweep.format_table(rows, res.recommendation).splitlines()[0] == "note: " + note
    import matplotlib.pyplot as plt
    fig = sweep.heatmap_figure(rows, res.frame_accuracy, 0.5, res.recommendation, note)
    try:
        assert "trained for 3/3" in fig.get_suptitle().replace("\n", " ")
    finally:
        plt.close(fig)
    plain = _run(tmp_path / "plain")
    assert plain.recommendation["checkpoint"] == {"aware": False, "note": ""}


def test_pareto_keeps_the_best_point_in_view_when_all_lose_much():
    import matplotlib.pyplot as plt
    far = {(2, 1): 40.0, (3, 1): 12.0, (4, 1): 10.0}   # every point beyond frame - 2.5 pp
    recs = _records(far)
    fig = sweep.pareto_figure(sweep.table_rows(recs, 0.98, 0.5), 0.98, 0.5, sweep.recommend(recs, 0.98, 0.5))
    try:
        lo, _ = fig.axes[0].get_ylim()
        assert lo < 88.0 - 1.0 + 0.1                  # best point 98 - 10 = 88 %, one point of margin below it
        assert {t.get_text() for t in fig.axes[0].texts} == {"4/1"}
    finally:
        plt.close(fig)
