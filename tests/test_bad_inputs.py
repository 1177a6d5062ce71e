"""Corrupt or malformed project files give one-line errors naming the file and field, exit code 2."""

import json
import shutil

import numpy as np
import pytest

from snnconvert.cli import main
from snnconvert.errors import FormatError
from snnconvert.files import load_npz
from snnconvert.intnet import IntLayer, IntNetwork


def _tiny_net(tmp_path):
    rng = np.random.default_rng(0)
    layers = [IntLayer(name="dense0", kind="dense", in_shape=(1, 2, 2), out_shape=(3,),
                       weight=rng.integers(-7, 8, (3, 4)), bias=np.zeros(3, np.int64),
                       m0=np.full(3, 1 << 15), shift=np.full(3, 17), q_in=1, q_out=0, is_output=True, acc_bits=6)]
    net = IntNetwork(layers=layers, input_shape=(1, 2, 2), input_q=1, coding="payload", payload_bits=4,
                     weight_bits=4, per_channel=False, n_classes=3)
    return net.save(tmp_path / "net")


@pytest.mark.parametrize("content,match", [
    (b"garbage", "not an NPZ archive"),                       # no zip header (ZIP format: 'PK\x03\x04')
    (b"PK\x03\x04truncated", "not a readable NPZ file"),      # a zip header, then nothing valid
])
def test_npz_that_is_not_an_archive_is_a_format_error(tmp_path, content, match):
    (tmp_path / "x.npz").write_bytes(content)
    with pytest.raises(FormatError, match=match):
        load_npz(tmp_path / "x.npz")


@pytest.mark.parametrize("drop,field", [("layers", "'layers'"), ("kernel", "'kernel'"), ("input_q", "'input_q'")])
def test_network_json_with_a_missing_field_names_it(tmp_path, drop, field, capsys):
    folder = _tiny_net(tmp_path)
    meta = json.loads((folder / "network.json").read_text())
    if drop == "kernel":
        del meta["layers"][0]["kernel"]
    else:
        del meta[drop]
    (folder / "network.json").write_text(json.dumps(meta))
    with pytest.raises(FormatError, match=f"network.json: malformed integer network \\(missing field {field}\\)"):
        IntNetwork.load(folder)
    assert main(["simulate", str(folder), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and field in err and err.count("\n") == 1


def test_truncated_network_npz_exits_2(tmp_path, capsys):
    folder = _tiny_net(tmp_path)
    data = (folder / "network.npz").read_bytes()
    (folder / "network.npz").write_bytes(data[:60])
    assert main(["simulate", str(folder), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "network.npz: not a readable NPZ file" in err and err.count("\n") == 1


def test_manifest_weight_bits_must_match_the_table_width(tmp_path, capsys):
    folder = _tiny_net(tmp_path)
    x = np.random.default_rng(1).integers(0, 2, (4, 1, 2, 2))
    np.savez(tmp_path / "inputs.npz", x=x)
    out = tmp_path / "export"
    assert main(["export", str(folder), str(out), "--inputs", str(tmp_path / "inputs.npz"), "--vectors", "2",
                 "--quiet"]) == 0
    assert main(["verify", str(out), "--quiet"]) == 0
    capsys.readouterr()
    bad = tmp_path / "bad"
    shutil.copytree(out, bad)
    man = json.loads((bad / "manifest.json").read_text())
    man["layers"][0]["weight_bits"] = 3       # the tables hold 4-bit words
    (bad / "manifest.json").write_text(json.dumps(man))
    assert main(["verify", str(bad), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "'weight_bits' 3" in err and "word width 4" in err and err.count("\n") == 1


def test_corrupt_checkpoint_exits_2(tmp_path, capsys):
    (tmp_path / "train").mkdir()
    (tmp_path / "train" / "model.pt").write_bytes(b"not a checkpoint")
    assert main(["convert", str(tmp_path / "train"), "--out", str(tmp_path / "net")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "model.pt: not a readable checkpoint" in err
