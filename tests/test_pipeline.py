"""`snnconvert run`: the whole job end to end, stage reuse, and every shipped recipe (scaled down)."""

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from snnconvert.cli import main
from test_cli_console import BAR, clean_lines

ROOT = Path(__file__).resolve().parent.parent
RECIPES = ROOT / "recipes"


def _stage_actions(out: Path) -> dict:
    log = json.loads((out / "stages.json").read_text())
    return {k: v["last_action"] for k, v in log["stages"].items()}


@pytest.mark.slow
def test_default_recipe_end_to_end_then_every_stage_reused(tmp_path, capsys):
    out = tmp_path / "run"
    args = ["run", str(RECIPES / "default.toml"), "--out", str(out),
            "--set", f"data.cache_dir={tmp_path / 'cache'}",
            "--set", "sweep.weight_bits=3,4", "--set", "sweep.payload_bits=2,4",
            "--set", "export.vectors=4"]
    assert main(args) == 0
    summary = json.loads((out / "summary.json").read_text())
    for key in ("frame_accuracy", "spike_accuracy", "conversion_loss_pp", "agreement", "weight_bits",
                "payload_bits", "coding", "spikes_per_sample", "sops_per_sample", "macs_per_sample",
                "verify_passed", "recommended", "paths"):
        assert key in summary, key
    assert summary["verify_passed"] is True
    for rel in summary["paths"].values():
        assert (out / rel).exists(), rel
    net_metrics = json.loads((out / "net" / "metrics.json").read_text())
    assert net_metrics["max_spikes_per_neuron"] <= 1
    # the [convert] section of recipes/default.toml: weight_bits = 4, payload_bits = 4, coding = "payload"
    assert summary["weight_bits"] == 4 and summary["payload_bits"] == 4 and summary["coding"] == "payload"
    # the conversion costs at most the recipe's tolerance
    tol = summary["tolerance_pp"]
    assert 100 * (summary["frame_accuracy"] - summary["spike_accuracy"]) <= tol + 1e-9
    assert set(_stage_actions(out).values()) == {"ran"}
    html = (out / "report.html").read_text()
    assert "data:image/png;base64," in html
    captured = capsys.readouterr()
    out_text = captured.out
    assert "summary of run 'default'" in out_text and "verify_passed" in out_text
    # bars are drawn, and every message starts its own line
    assert BAR.search(captured.err)
    lines = clean_lines(captured.err)
    assert all(re.match(r"\[\w+\] |model: |float epoch \d+/40: ", m) for m in lines), lines
    # scikit-learn's train_test_split rounds the test size up: ceil(0.2 * 1797) = 360, then
    # ceil(0.1 / 0.8 * 1437) = 180 for validation; the rest, 1257, trains (the 1797 scikit-learn digits)
    assert any(re.fullmatch(r"\[data\] 1257 train, 180 validation, 360 test samples, 16x16 binary frames, "
                            r"10 classes, \d+\.\d input events per frame \(mean, train split\)", m) for m in lines)
    assert re.search(r"^\[export\] done in \d+\.\d s$", captured.err, re.M)
    loss = summary["conversion_loss_pp"]
    assert "within tolerance" in out_text and f"yes (loss {loss:.2f} pp <= {tol:.2f} pp)" in out_text

    # a second run with the same resolved recipe reuses every stage
    assert main(args) == 0
    assert set(_stage_actions(out).values()) == {"reused"}
    assert json.loads((out / "summary.json").read_text())["stages"]["train"] == "reused"

    # --force redoes that stage and every later one, and nothing before it; --quiet draws no bar
    capsys.readouterr()
    assert main(args + ["--force", "export", "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "\r" not in err and not BAR.search(err)
    assert all(re.fullmatch(r"\[\w+\] (reused .*|running \.\.\.|done in \d+\.\d s)", m) for m in err.splitlines())
    actions = _stage_actions(out)
    assert actions["train"] == "reused" and actions["convert"] == "reused"
    assert actions["export"] == actions["verify"] == actions["report"] == "ran"

    # a changed key invalidates its stage and the stages after it
    assert main(args + ["--set", "convert.weight_bits=5"]) == 0
    actions = _stage_actions(out)
    assert actions["data"] == actions["train"] == "reused"
    assert actions["convert"] == "ran"


@pytest.mark.parametrize("argv,message", [
    (["run", "no/such/recipe.toml"], "no/such/recipe.toml"),
    (["run", str(RECIPES / "default.toml"), "--force", "bogus"], "invalid choice: 'bogus'"),
    (["run", str(RECIPES / "default.toml"), "--set", "convert.weight_bit=3"], "Did you mean 'weight_bits'?"),
])
def test_run_usage_errors_exit_2_with_one_line(argv, message, capsys, tmp_path):
    assert main(argv + ["--out", str(tmp_path / "r")]) == 2   # usage errors exit 2, as argparse does (common practice)
    err = capsys.readouterr().err
    assert err.startswith("error: ") and message in err and err.count("\n") == 1


def test_idx_recipe_without_files_fails_cleanly(tmp_path, capsys):
    code = main(["run", str(RECIPES / "idx_files.toml"), "--out", str(tmp_path / "r"),
                 "--set", f"data.idx_images={tmp_path / 'missing-images'}"])
    assert code == 2
    last = capsys.readouterr().err.strip().splitlines()[-1]   # stage progress lines come first
    assert last.startswith("error: ") and "missing-images" in last and "data.idx_images" in last


@pytest.mark.slow
def test_idx_recipe_runs_on_idx_files(tmp_path):
    # IDX files written from scikit-learn's digits, upsampled to 16x16 (the standard IDX layout)
    from snnconvert.data import digits_images, write_idx
    images, labels = digits_images(16)
    write_idx(tmp_path / "images-idx3-ubyte", np.round(images[:400] * 255).astype(np.uint8))
    write_idx(tmp_path / "labels-idx1-ubyte", labels[:400].astype(np.uint8))
    out = tmp_path / "run"
    assert main(["run", str(RECIPES / "idx_files.toml"), "--out", str(out),
                 "--set", f"data.idx_images={tmp_path / 'images-idx3-ubyte'}",
                 "--set", f"data.idx_labels={tmp_path / 'labels-idx1-ubyte'}",
                 "--set", f"data.cache_dir={tmp_path / 'cache'}", "--set", "train.epochs=3",
                 "--set", "sweep.enabled=false", "--set", "export.vectors=2"]) == 0
    assert json.loads((out / "summary.json").read_text())["verify_passed"] is True


@pytest.mark.slow
def test_recordings_recipe_runs_on_a_generated_folder(tmp_path):
    folder = tmp_path / "recordings"
    proc = subprocess.run([sys.executable, str(RECIPES / "make_recordings.py"), str(folder), "--per-class", "12"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "run"
    assert main(["run", str(RECIPES / "recordings.toml"), "--out", str(out),
                 "--set", f"data.recordings_index={folder / 'index.csv'}",
                 "--set", "train.epochs=3", "--set", "sweep.weight_bits=4", "--set", "sweep.payload_bits=2",
                 "--set", "export.vectors=2"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["verify_passed"] is True and summary["recommended"] is not None


@pytest.mark.slow
def test_saccade_ttfs_recipe_runs(tmp_path):
    out = tmp_path / "run"
    assert main(["run", str(RECIPES / "saccade_ttfs.toml"), "--out", str(out),
                 "--set", f"data.cache_dir={tmp_path / 'cache'}", "--set", "data.limit=300",
                 "--set", "train.epochs=3", "--set", "train.aware_epochs=1",
                 "--set", "sweep.weight_bits=3", "--set", "sweep.payload_bits=3",
                 "--set", "export.vectors=2"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["coding"] == "ttfs" and summary["verify_passed"] is True
    net = json.loads((out / "net" / "metrics.json").read_text())
    assert net["max_spikes_per_neuron"] <= 1


def test_recipes_folder_ships_the_seven_scenarios():
    names = sorted(p.name for p in RECIPES.glob("*.toml"))
    assert names == ["budget_fpga.toml", "default.toml", "idx_files.toml", "recordings.toml", "saccade_recordings.toml",
                     "saccade_ttfs.toml", "tiny_budget.toml"]


def test_interrupt_keeps_finished_stages_and_the_rerun_reuses_them(tmp_path, monkeypatch, capsys):
    out = tmp_path / "run"
    args = ["run", str(RECIPES / "default.toml"), "--out", str(out),
            "--set", f"data.cache_dir={tmp_path / 'cache'}", "--set", "data.limit=300",
            "--set", "train.epochs=2", "--set", "sweep.enabled=false", "--set", "export.vectors=2"]

    from snnconvert import export as export_mod

    def ctrl_c_mid_export(net_dir, out_dir, recipe, **kw):
        out_dir.mkdir(parents=True)
        (out_dir / "L0_conv0_weights.mem").write_text("// cut short\n")   # a half-written export
        raise KeyboardInterrupt

    monkeypatch.setattr(export_mod, "export_from_run", ctrl_c_mid_export)
    assert main(args) == 130            # 128 + SIGINT (2): the shell's exit status for Ctrl-C (common practice)
    assert "interrupted" in capsys.readouterr().err
    log = json.loads((out / "stages.json").read_text())["stages"]
    assert all(log[s]["status"] == "done" for s in ("data", "train", "convert"))
    assert log["export"]["status"] == "running"
    monkeypatch.undo()
    assert main(args) == 0
    actions = _stage_actions(out)
    assert actions["data"] == actions["train"] == actions["convert"] == "reused"
    assert actions["export"] == "ran"


def test_run_summary_flags_a_point_outside_tolerance_and_names_an_aware_frame_model(capsys):
    from snnconvert.pipeline import _print_summary
    s = {"name": "r", "frame_accuracy": 0.98, "spike_accuracy": 0.9439, "conversion_loss_pp": 3.61,
         "tolerance_pp": 0.5, "frame_model": "aware", "aware_bits": {"weight_bits": 3, "payload_bits": 3},
         "float_accuracy": 0.985, "loss_vs_float_pp": 4.11, "agreement": 0.95, "weight_bits": 3, "payload_bits": 3,
         "coding": "payload", "spikes_per_sample": 1.0, "sops_per_sample": 1.0, "macs_per_sample": 1,
         "verify_passed": True, "recommended": None, "paths": {"report": "report.html"}}
    _print_summary(s)
    rows = {line.split("  ")[1]: line.split("  ")[-1] for line in capsys.readouterr().out.splitlines()[1:]}
    assert rows["within tolerance"] == "no (loss 3.61 pp > 0.50 pp)"
    assert rows["frame_accuracy (aware, fine-tuned for k=3 p=3)"] == "0.98"
    assert rows["float model before fine-tuning"] == "0.985" and rows["loss vs float model (pp)"] == "4.11"
