"""report.html: valid, self-contained HTML with every section; missing pieces are stated."""

import json
import re
from html.parser import HTMLParser

import pytest

from snnconvert import report
from snnconvert.cli import main
from snnconvert.files import atomic_write_json

# HTML Living Standard, "void elements" (section 13.1.2): they have no end tag.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


class TagChecker(HTMLParser):
    """Checks that every opened tag is closed in order and collects ids and resource URLs."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.ids, self.urls = [], [], [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.append(a["id"])
        for k in ("src", "href"):
            if k in a:
                self.urls.append(a[k])
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.stack.pop()

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()


def parse(path):
    text = path.read_text(encoding="utf-8")
    p = TagChecker()
    p.feed(text)
    p.close()
    return text, p


def check_page(path):
    text, p = parse(path)
    assert text.startswith("<!DOCTYPE html>")
    assert p.errors == [] and p.stack == []
    assert [i for i in p.ids if i in dict(report.SECTIONS)] == [sid for sid, _ in report.SECTIONS]
    # self-contained: images are data URIs, links stay inside the page, no network references
    assert all(u.startswith("data:image/png;base64,") or u.startswith("#") for u in p.urls)
    assert not re.search(r"https?://", text)
    return text, p


def section(text, sid):
    return re.search(rf'<section id="{sid}">(.*?)</section>', text, re.S).group(1)


def run_folder(path, stages=("data",)):
    """A run folder as `snnconvert run` leaves it after the given stages: the stage log first."""
    path.mkdir(parents=True, exist_ok=True)
    atomic_write_json(path / "stages.json", {"version": 1, "stages": {
        s: {"fingerprint": f"fp-{s}", "status": "done", "seconds": 1.5, "last_action": "ran"} for s in stages}})
    return path


def test_empty_run_folder_states_every_missing_piece(tmp_path):
    run_folder(tmp_path)
    path = report.write_report(tmp_path)
    assert path == tmp_path / "report.html"
    text, _ = check_page(path)
    expected = {"recipe": "No resolved recipe", "accuracy": "No conversion metrics", "sweep": "No sweep was run",
                "spikes": "spike counts are unknown", "confusion": "No confusion matrix (train/confusion.png and train/metrics.json are missing)",
                "accumulators": "accumulator widths are unknown", "energy": "No energy estimate",
                "export": "No export (export/manifest.json is missing)"}
    for sid, words in expected.items():
        assert words in section(text, sid), sid
    assert "Not verified" in section(text, "export")
    assert "estimate" in section(text, "energy") and "real hardware depend" in section(text, "energy")


def test_text_from_the_run_folder_is_escaped(tmp_path):
    run_folder(tmp_path)
    (tmp_path / "recipe.toml").write_text('name = "<script>alert(1)</script>"\n')
    (tmp_path / "net").mkdir()
    atomic_write_json(tmp_path / "net" / "metrics.json", {"frame_accuracy": 0.9, "spike_accuracy": 0.8,
                                                         "coding": "<b>payload</b>"})
    atomic_write_json(tmp_path / "verify.json", {"passed": False, "samples": 2,
                                                "first_mismatch": {"layer": "<img src=x>"}})
    text, p = check_page(report.write_report(tmp_path))
    # character references &lt; &gt; (HTML Living Standard, named character references; html.escape as reference)
    assert "<script>" not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "&lt;b&gt;payload&lt;/b&gt;" in section(text, "accuracy")
    assert "90.00 %" in section(text, "accuracy") and "80.00 %" in section(text, "accuracy")   # 0.9, 0.8 as percent
    assert "verify FAILED" in section(text, "export") and "<img src=x>" not in text


def test_corrupt_json_is_reported_in_its_section(tmp_path):
    run_folder(tmp_path)
    (tmp_path / "sweep").mkdir()
    (tmp_path / "sweep" / "recommendation.json").write_text("{oops")
    text, _ = check_page(report.write_report(tmp_path))
    assert "This section cannot be shown: " in section(text, "sweep")
    assert "recommendation.json: not valid JSON" in section(text, "sweep")


@pytest.mark.parametrize("argv, code, err", [
    (["report", "{tmp}/absent"], 2, "error: run folder not found: {tmp}/absent\n"),
    (["report"], 2, None),
])
def test_cli_errors(tmp_path, capsys, argv, code, err):
    # usage errors exit 2, as argparse does (common practice); the missing-argument text is argparse's own
    assert main([a.replace("{tmp}", str(tmp_path)) for a in argv]) == code
    got = capsys.readouterr().err
    if err is not None:
        assert got == err.replace("{tmp}", str(tmp_path))
    else:
        assert got.startswith("error: snnconvert report: the following arguments are required: RUN_DIR")


def test_cli_writes_the_report(tmp_path, capsys):
    run_folder(tmp_path)
    assert main(["report", str(tmp_path)]) == 0
    assert capsys.readouterr().out == f"report written to {tmp_path / 'report.html'}\n"
    check_page(tmp_path / "report.html")


TINY_RECIPE = """
name = "tiny-report"
seed = 0
[data]
limit = 300
cache_dir = "{cache}"
[model]
layers = [
  {type = "conv", out = 4, kernel = 3, stride = 1, padding = 1, bn = false},
  {type = "maxpool", size = 2, stride = 2},
  {type = "dense", units = 16, bn = false},
  {type = "dense"},
]
[train]
epochs = 6
batch_size = 16
[sweep]
weight_bits = "3,4"
payload_bits = "2"
jobs = 1
[export]
vectors = 2
"""


@pytest.mark.slow
def test_report_of_a_real_run(tmp_path):
    """A whole run on 300 simulated-sensor digits (scikit-learn's bundled set): every section is filled."""
    import base64

    from snnconvert import pipeline
    (tmp_path / "tiny.toml").write_text(TINY_RECIPE.replace("{cache}", str(tmp_path / "cache")))
    run = tmp_path / "run"
    pipeline.run(tmp_path / "tiny.toml", out=run)
    text, p = check_page(run / "report.html")
    assert 'class="missing"' not in text
    m = json.loads((run / "net" / "metrics.json").read_text())
    acc = section(text, "accuracy")
    for key in ("frame_accuracy", "quantized_accuracy", "spike_accuracy"):
        assert f"{100 * m[key]:.2f} %" in acc
    # the sweep's PNG files are inlined byte for byte (base64, RFC 4648)
    sweep_imgs = re.findall(r'src="data:image/png;base64,([^"]+)"', section(text, "sweep"))
    assert [base64.b64decode(s) for s in sweep_imgs] == [(run / "sweep" / n).read_bytes()
                                                         for n in ("heatmap.png", "pareto.png")]
    accu = section(text, "accumulators")
    for name, bits in m["accumulator_bits"].items():
        assert f'<td class="l">{name}</td><td>{bits}</td>' in accu
    assert "Estimate, not a measurement." in section(text, "energy")
    # [export] vectors = 2 above, plus the directed vectors the export lists in its manifest
    directed = len(json.loads((run / "export" / "manifest.json").read_text())["vectors"]["directed"])
    assert (f"verify passed: {2 + directed} golden vectors (2 test samples and {directed} directed vectors)"
            in section(text, "export"))
    # two confusion matrices: the frame model's (train/) and the spike model's (net/)
    assert len(re.findall(r"<img ", section(text, "confusion"))) == 2
    stages = re.findall(r'<tr><td class="l">([a-z]+)</td><td class="l">done</td>', section(text, "overview"))
    assert stages == pipeline.STAGES[:-1]
    # the report stage is still running while the page is made; the page itself is its result
    assert '<td class="l">report</td><td class="l">done (this page)</td>' in section(text, "overview")
    assert "running" not in section(text, "overview")
    assert "<h1>snnconvert report: tiny-report</h1>" in text   # the recipe's name, also on the first run


# --- refusals, words instead of raw values, aware models, energy, export listing ---------------

def test_refuses_a_folder_that_is_not_a_run_folder(tmp_path, capsys):
    (tmp_path / "train").mkdir()
    (tmp_path / "train" / "recipe.toml").write_text('name = "x"\n')
    assert main(["report", str(tmp_path)]) == 2
    assert capsys.readouterr().err == (f"error: {tmp_path} is not a run folder: it has no stages.json "
                                       "(the stage log `snnconvert run` writes)\n")
    assert not (tmp_path / "report.html").exists()
    run_folder(tmp_path)   # a sub-folder of a run names the run folder above it
    assert main(["report", str(tmp_path / "train")]) == 2
    assert capsys.readouterr().err == (f"error: {tmp_path / 'train'} is not a run folder: it has no stages.json "
                                       f"(the stage log `snnconvert run` writes); the run folder above it is "
                                       f"{tmp_path.resolve()}\n")
    assert not (tmp_path / "train" / "report.html").exists()


def visible_text(text):
    """The page's text as a reader sees it, without the style sheet and the recipe file shown verbatim."""
    import html as html_mod
    body = re.sub(r"<style>.*?</style>", "", text, flags=re.S)
    body = re.sub(r'<section id="recipe">.*?</section>', "", body, flags=re.S)
    body = re.sub(r'src="data:[^"]*"', "", body)
    return " ".join(html_mod.unescape(re.sub(r"<[^>]+>", " ", body)).split())


NET = {"frame_accuracy": 0.98, "quantized_accuracy": 0.95, "spike_accuracy": 0.9439, "conversion_loss_pp": 3.61,
       "tolerance_pp": 0.5, "within_tolerance": False, "agreement": 0.95, "coding": "payload", "weight_bits": 3,
       "payload_bits": 3, "per_channel": False, "early_accuracy": None, "samples": 360,
       "latency": {"pipeline_stages": 6}, "spikes_per_sample": 3000.0, "sops_per_sample": 2.0e5,
       "energy": {"spike_pj_per_sample": 91293.9, "frame_pj_per_sample": 4393036.8, "ratio_spike_to_frame": 0.0208,
                  "source": "Horowitz 2014", "notes": ["each SOP is one add"], "is_estimate": True}}
TRAIN = {"frame_accuracy": 0.98, "aware": None, "float_frame_accuracy": None, "epochs": 4, "aware_epochs": 0,
         "per_class_accuracy": {"0": 1.0, "1": None}, "classes": ["0", "1"], "best_val_accuracy": None}
DATA = {"classes": ["0", "1"], "input_shape": [1, 16, 16], "input_q": 1, "samples": {"train": 10, "val": 2, "test": 3},
        "example_recording": {"index": 0, "label": "0", "events": 12, "windows": [[0, 5, 12]]}, "fingerprint": "ab"}


def write_run(tmp_path, net=None, train=None, rec=None):
    run = run_folder(tmp_path / "run", ("data", "train", "convert", "report"))
    (run / "recipe.toml").write_text('name = "demo-run"\nseed = 0\n')
    for folder, name, obj in (("net", "metrics.json", net if net is not None else NET),
                              ("train", "metrics.json", train if train is not None else TRAIN),
                              ("data", "summary.json", DATA), ("sweep", "recommendation.json", rec)):
        if obj is not None:
            (run / folder).mkdir(exist_ok=True)
            atomic_write_json(run / folder / name, obj)
    return run


def test_report_writes_words_not_python_or_json(tmp_path):
    run = write_run(tmp_path)
    text, _ = check_page(report.write_report(run))
    seen = visible_text(text)
    assert "None" not in seen and "{" not in seen and "}" not in seen and "True" not in seen
    assert "<title>snnconvert report: demo-run</title>" in text and "Run demo-run in folder" in seen
    assert "recording 0 (label 0): 12 events, 1 windows" in seen
    assert "training 10, validation 2, test 3" in seen
    assert "no (float training only)" in seen and "n/a" in section(text, "training")
    ov = section(text, "overview")
    assert '<td class="l">report</td><td class="l">done (this page)</td>' in ov and "running" not in ov
    assert '<td class="l">sweep</td><td class="l">not run</td>' in ov


def test_within_tolerance_is_stated(tmp_path):
    text, _ = check_page(report.write_report(write_run(tmp_path)))
    assert "within tolerance: no (loss 3.61 pp > 0.50 pp)" in visible_text(section(text, "accuracy"))
    ok = write_run(tmp_path / "b", net=dict(NET, conversion_loss_pp=0.25, within_tolerance=True))
    text, _ = check_page(report.write_report(ok))
    assert "within tolerance: yes (loss 0.25 pp \u2264 0.50 pp)" in visible_text(section(text, "accuracy"))


AWARE = {"weight_bits": 3, "payload_bits": 3, "per_channel": False, "learn_act_max": True}


@pytest.mark.parametrize("net_keys, train_keys", [
    # the conversion metrics name the frame model
    ({"frame_model": "aware", "aware_bits": {"weight_bits": 3, "payload_bits": 3}, "float_accuracy": 0.9833,
      "loss_vs_float_pp": 3.94}, {}),
    # older conversion metrics: the training metrics tell
    ({}, {"aware": AWARE, "float_frame_accuracy": 0.9833, "aware_epochs": 3}),
])
def test_aware_frame_model_is_named_with_both_losses(tmp_path, net_keys, train_keys):
    run = write_run(tmp_path, net=dict(NET, **net_keys), train=dict(TRAIN, **train_keys))
    text, _ = check_page(report.write_report(run))
    acc = visible_text(section(text, "accuracy"))
    assert "frame model: aware (fake-quantized, fine-tuned for k=3 p=3) 98.00 %" in acc
    assert re.search(r"float model before fine-tuning\s+98.33 %", acc)
    assert re.search(r"against the aware frame model\s+3.61 pp", acc)
    # 98.33 % - 94.39 % = 3.94 pp, computed from the two accuracies when the metrics do not hold it
    assert re.search(r"against the float model before fine-tuning\s+3.94 pp", acc)
    assert "frame model: float" not in acc


def test_accuracies_carry_intervals_and_the_loss_its_p_value(tmp_path):
    net = dict(NET, samples=360, frame_accuracy_ci=[0.9639, 0.9905], quantized_accuracy_ci=[0.915, 0.966],
               spike_accuracy_ci=[0.915, 0.966], conversion_loss_p=0.0002, frame_only_correct=14,
               spike_only_correct=1)
    text, _ = check_page(report.write_report(write_run(tmp_path, net=net)))
    acc = visible_text(section(text, "accuracy"))
    assert re.search(r"frame model: float\s+98.00 % \(95 % CI \[96.4, 99.1\] %\)", acc)
    assert re.search(r"single-spike network, event-driven\s+94.39 % \(95 % CI \[91.5, 96.6\] %\)", acc)
    assert re.search(r"3.61 pp \(McNemar p < 0.001\)", acc)
    assert "the 14 samples only the frame model gets right and the 1 only the spike network" in acc


def test_float_frame_model_has_one_loss(tmp_path):
    text, _ = check_page(report.write_report(write_run(tmp_path, net=dict(NET, frame_model="float"))))
    acc = visible_text(section(text, "accuracy"))
    assert re.search(r"frame model: float\s+98.00 %", acc) and "before fine-tuning" not in acc
    assert re.search(r"against the float frame model\s+3.61 pp", acc)


def test_energy_shows_three_estimates_when_the_dense_baseline_is_there(tmp_path):
    energy = dict(NET["energy"], dense_int_pj_per_sample=300000.0, ratio_spike_to_dense_int=0.3043)
    text, _ = check_page(report.write_report(write_run(tmp_path, net=dict(NET, energy=energy))))
    e = visible_text(section(text, "energy"))
    # nJ = pJ / 1000; share = spike / other: 91.29 / 300.0 = 30.4 %, 91.29 / 4393.0 = 2.1 %
    assert re.search(r"single-spike network \(event-driven, 3-bit weights, 3-bit payloads\)\s+91.3\s", e)
    assert re.search(r"dense integer network at the same widths \(3-bit weights, 3-bit values\)\s+300.0\s+30.4 %", e)
    assert re.search(r"float frame model \(fp32 multiply-adds\)\s+4,393.0\s+2.1 %", e)
    assert "estimate" in e and "No dense integer baseline" not in e
    text, _ = check_page(report.write_report(write_run(tmp_path / "old")))
    assert "No dense integer baseline in these metrics" in visible_text(section(text, "energy"))


def test_sweep_of_an_aware_checkpoint_says_so(tmp_path):
    rec = {"message": "recommended: payload w3 p2", "rule": "least memory", "points": 4, "within_tolerance": 1,
           "point": {"coding": "payload", "weight_bits": 3, "payload_bits": 2, "spike_accuracy": 0.97, "loss_pp": 0.3,
                     "weight_memory_bits": 1000, "sops_per_sample": 2000.0},
           "checkpoint": {"aware": True, "note": "checkpoint fine-tuned conversion-aware for weight bits 3, payload "
                                                 "bits 3 (per-tensor): points at other widths convert a model "
                                                 "trained for 3/3"}}
    text, _ = check_page(report.write_report(write_run(tmp_path, rec=rec)))
    assert "Note: checkpoint fine-tuned conversion-aware for weight bits 3, payload bits 3" in section(text, "sweep")
    # a sweep file without the checkpoint field: the run's training metrics tell
    old = {k: v for k, v in rec.items() if k != "checkpoint"}
    text, _ = check_page(report.write_report(write_run(tmp_path / "b", rec=old, train=dict(TRAIN, aware=AWARE))))
    assert "trained for 3/3" in section(text, "sweep")
    text, _ = check_page(report.write_report(write_run(tmp_path / "c", rec=old)))
    assert "Note:" not in section(text, "sweep")


def test_export_files_are_listed_by_kind(tmp_path):
    run = write_run(tmp_path)
    d = run / "export"
    (d / "vectors" / "sample_0000").mkdir(parents=True)
    (d / "vectors" / "sample_0001").mkdir()
    atomic_write_json(d / "manifest.json", {"format": "snnconvert-export", "version": 1, "coding": "payload",
                                            "per_channel": False, "files": {"a": "b"}})
    for layer in ("L0_conv0", "L1_dense1"):
        for t in ("weights", "bias"):
            (d / f"{layer}_{t}.mem").write_text("0\n")
            (d / f"{layer}_{t}.csv").write_text("0\n")
    for s_ in ("sample_0000", "sample_0001"):
        for f in ("input.csv", "potentials.csv"):
            (d / "vectors" / s_ / f).write_text("0\n")
    (d / "tables.npz").write_bytes(b"PK")
    text, _ = check_page(report.write_report(run))
    ex = section(text, "export")
    rows = re.findall(r'<tr><td class="l">([^<]+)</td><td>(\d+)</td><td>[^<]*B</td>', ex)
    assert rows == [("manifest: what every file holds", "1"), ("memory files for HDL ($readmemh hex words)", "4"),
                    ("tables (CSV)", "4"), ("archives (NPZ)", "1"),
                    ("golden vectors (CSV, one folder per sample)", "4")]
    assert "L0_conv0: bias, weights; L1_dense1: bias, weights" in ex
    assert "2 folders sample_0000 .. sample_0001, 2 files each" in ex
    assert "14 files" in ex
