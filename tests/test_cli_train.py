"""`snnconvert train`: files written, printed summary, one-line errors with exit code 2."""

import json
from pathlib import Path

import pytest
import torch

from snnconvert import cli, data
from test_train import SMALL_LAYERS, _toml_layers, digits_frames


ROOT = Path(__file__).resolve().parents[1]
DEFAULT = str(ROOT / "recipes" / "default.toml")
FAST = ["--set", "train.epochs=1", "--set", "train.threads=1", "--set", f"model.layers={_toml_layers(SMALL_LAYERS)}"]


@pytest.fixture
def small_data(monkeypatch):
    """The CLI reads its data through data.load_dataset; here it gets small digit frames instead."""
    ds = digits_frames(300, 60, 100)
    monkeypatch.setattr(data, "load_dataset", lambda recipe: ds)
    return ds


def test_train_command_writes_outputs_and_summary(small_data, tmp_path, capsys):
    out = tmp_path / "run"
    code = cli.main(["train", DEFAULT, *FAST, "--set", "seed=2", "--out", str(out), "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    for name in ("model.pt", "recipe.toml", "metrics.json", "history.csv", "curves.png", "confusion.png", "model.onnx"):
        assert (out / name).is_file(), name
    m = json.loads((out / "metrics.json").read_text())
    assert {"frame_accuracy", "per_class_accuracy", "epochs", "train_seconds"} <= set(m)
    lines = captured.out.splitlines()
    # the interval: scipy.stats.binomtest(k, n).proportion_ci(method="wilson") (Wilson 1927)
    from scipy.stats import binomtest
    ci = binomtest(m["test_correct"], 100).proportion_ci(method="wilson")
    assert lines[0].startswith(f"frame accuracy {100 * m['frame_accuracy']:.2f}% (95 % CI [{100 * ci.low:.1f}, "
                               f"{100 * ci.high:.1f}] %; {m['test_correct']}/100 test frames); 1 epoch in ")
    assert lines[1] == (f"wrote {out}/model.pt, recipe.toml, metrics.json, history.csv, curves.png, confusion.png, "
                        f"model.onnx")
    assert "seed = 2" in (out / "recipe.toml").read_text()
    # model.onnx, read back by onnxruntime (the reference runtime), gives the checkpoint's scores
    ort = pytest.importorskip("onnxruntime")
    from snnconvert.train import load_checkpoint
    model, _ = load_checkpoint(out)
    x = small_data.test[0][:20]
    got = ort.InferenceSession(str(out / "model.onnx"), providers=["CPUExecutionProvider"]).run(
        ["scores"], {"frames": x.numpy()})[0]
    with torch.no_grad():
        assert abs(got - model(x).numpy()).max() <= 1e-4


@pytest.mark.parametrize("argv,message", [
    (["train", "missing.toml"], "error: recipe file not found: missing.toml"),
    (["train", DEFAULT, "--set", "train.epoch=2"],
     "error: --set train.epoch: Unknown key 'epoch' in section [train]. Did you mean 'epochs'?"),
    (["train", DEFAULT, "--set", "convert.weight_bit=2"],
     "error: --set convert.weight_bit: Unknown key 'weight_bit' in section [convert]. Did you mean 'weight_bits'?"),
    (["train", DEFAULT, "--set", "train.batch_size=0"],
     "error: The 'batch_size' parameter of train must be an int in [1, 65536]. Got 0 instead."),
    (["train", DEFAULT, "--set", "train.optimizer=rmsprop"],
     "error: The 'optimizer' parameter of train must be one of 'adam', 'sgd'. Got 'rmsprop' instead."),
    # output side floor((H + 2p - k)/s) + 1 (torch.nn.Conv2d / MaxPool2d documentation): 16 -> 2 -> 0
    (["train", DEFAULT, "--set",
      "model.layers=[{type=\"conv\", out=4, kernel=15, padding=0}, {type=\"maxpool\", size=4}, {type=\"dense\"}]"],
     "error: model.layers[1] (maxpool) with kernel 4, stride 4, padding 0 cannot take input shape (4, 2, 2): "
     "output shape would be (4, 0, 0)."),
    (["train", DEFAULT, "--init", "nowhere/model.pt"], "error: init checkpoint not found: nowhere/model.pt"),
])
def test_train_command_errors(small_data, tmp_path, capsys, argv, message):
    code = cli.main([*argv, "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert err == message
    assert not (tmp_path / "o" / "model.pt").exists()
