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


def test_empty_run_folder_states_every_missing_piece(tmp_path):
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
    assert "verify passed: 2 golden samples" in section(text, "export")   # [export] vectors = 2 above
    # two confusion matrices: the frame model's (train/) and the spike model's (net/)
    assert len(re.findall(r"<img ", section(text, "confusion"))) == 2
    stages = re.findall(r'<tr><td class="l">([a-z]+)</td><td>done</td>', section(text, "overview"))
    assert stages == pipeline.STAGES[:-1]  # the report stage itself is still running when the page is made
