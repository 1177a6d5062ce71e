"""A corpus of bad inputs: each is refused with exit 2, one exact `error:` line, no traceback, and
no file created or changed anywhere.

The bad files are made from one small valid run built once per session: the default model
architecture (default-size layer shapes) trained for one epoch on 200 digits, converted, exported,
and swept at one grid point. Each case copies what it needs into its own folder, damages one thing,
runs the command through `snnconvert.cli.main` and compares the folder before and after.
"""

from __future__ import annotations

import io
import json
import os
import shutil
import zipfile

import numpy as np
import pytest
import torch

from snnconvert import data, recipe, train
from snnconvert.cli import main

torch.set_num_threads(1)

BASE_RECIPE = {"name": "corpus", "data": {"limit": 200}, "train": {"epochs": 1, "threads": 1}}


@pytest.fixture(scope="session")
def base(tmp_path_factory):
    """train/ (model.pt), net/ (network.json/.npz), export/ and sweep/ of one small valid run."""
    root = tmp_path_factory.mktemp("corpus-base")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SNNCONVERT_CACHE", str(root / "cache"))
        raw = dict(BASE_RECIPE, data={**BASE_RECIPE["data"], "cache_dir": str(root / "cache")})
        r = recipe.from_dict(raw, base_dir=root)
        train.train(r, data.load_dataset(r, progress=False), root / "train", quiet=True)
        assert main(["convert", str(root / "train"), "--out", str(root / "net"), "--quiet"]) == 0
        assert main(["export", str(root / "net"), str(root / "export"), "--vectors", "1", "--no-csv", "--quiet"]) == 0
        assert main(["sweep", str(root / "train"), "--weight-bits", "4", "--payload-bits", "2", "--jobs", "1",
                     "--out", str(root / "sweep"), "--quiet"]) == 0
    return root


def _snapshot(*folders) -> dict:
    out = {}
    for folder in folders:
        for dirpath, dirnames, filenames in os.walk(folder):
            for name in dirnames + filenames:
                p = os.path.join(dirpath, name)
                st = os.lstat(p)
                out[p] = (st.st_size, st.st_mtime_ns)
    return out


# --- ways to damage a file ---------------------------------------------------------------------

def _json_edit(rel, fn):
    def mutate(d):
        path = d / rel
        obj = json.loads(path.read_text())
        obj = fn(obj) or obj
        path.write_text(json.dumps(obj))
    return mutate


def _set(rel, keys, value):
    """Set obj[k0][k1]... = value in the JSON file `rel`."""
    def fn(obj):
        target = obj
        for k in keys[:-1]:
            target = target[k]
        target[keys[-1]] = value
    return _json_edit(rel, fn)


def _delete(rel, keys):
    def fn(obj):
        target = obj
        for k in keys[:-1]:
            target = target[k]
        del target[keys[-1]]
    return _json_edit(rel, fn)


def _npz_edit(rel, fn):
    def mutate(d):
        path = d / rel
        with np.load(path) as z:
            arrays = {k: z[k] for k in z.files}
        fn(arrays)
        np.savez(path, **arrays)
    return mutate


def _npz_raw(rel, member, header_shape):
    """An NPZ whose member `member` declares `header_shape` but holds 64 bytes."""
    def mutate(d):
        path = d / rel
        with np.load(path) as z:
            arrays = {k: z[k] for k in z.files}
        np.savez(path, **arrays)
        buf = io.BytesIO()
        np.lib.format.write_array_header_1_0(buf, {"descr": "<i8", "fortran_order": False, "shape": header_shape})
        buf.write(b"\0" * 64)
        with zipfile.ZipFile(path, "a") as zf:
            zf.writestr(member + "x.npy", buf.getvalue())
    return mutate


def _write(rel, content: bytes):
    def mutate(d):
        (d / rel).write_bytes(content)
    return mutate


def _ckpt_edit(fn):
    def mutate(d):
        path = d / "train" / "model.pt"
        ck = torch.load(path, weights_only=True)
        fn(ck)
        torch.save(ck, path)
    return mutate


def _first_weight(ck):
    return next(k for k in ck["state_dict"] if k.endswith("weight"))


def _nan(ck):
    ck["state_dict"][_first_weight(ck)].view(-1)[3] = float("nan")


def _inf(ck):
    ck["state_dict"][_first_weight(ck)].view(-1)[0] = float("inf")


class _Code:
    """An object a checkpoint never holds: pickling it stores a reference to code."""


def _pickled(d):
    torch.save({"format": "snnconvert-checkpoint", "payload": _Code()}, d / "train" / "model.pt")


def _recipe(ck, section, key, value):
    ck["recipe"].setdefault(section, {})[key] = value


def _manifest_table(d, fn):
    path = d / "export" / "manifest.json"
    man = json.loads(path.read_text())
    fn(man["layers"][0]["tables"]["weight"], man)
    path.write_text(json.dumps(man))


def _results_line(fn):
    def mutate(d):
        path = d / "sweep" / "results.jsonl"
        lines = path.read_text().splitlines()
        rec = json.loads(lines[0])
        new = fn(rec)
        lines[0] = new if isinstance(new, str) else json.dumps(rec)
        path.write_text("\n".join(lines) + "\n")
    return mutate


def _stale_export(listing, folder=None):
    def mutate(d):
        if folder:
            (d / "export" / folder).mkdir()
        path = d / "export" / "manifest.json"
        man = json.loads(path.read_text())
        man["files"] = listing
        path.write_text(json.dumps(man))
    return mutate


NJ, NZ = "net/network.json", "net/network.npz"
MAN = "export/manifest.json"
SIM = ["simulate", "{d}/net", "--quiet"]
CONV = ["convert", "{d}/train", "--out", "{d}/net2", "--quiet"]
VER = ["verify", "{d}/export", "--quiet"]
EXP = ["export", "{d}/net", "{d}/export", "--quiet"]
SWEEP = ["sweep", "{d}/train", "--weight-bits", "4", "--payload-bits", "2", "--jobs", "1", "--out", "{d}/sweep",
         "--quiet"]
J, Z, M = "{d}/net/network.json", "{d}/net/network.npz", "{d}/export/manifest.json"
PT = "{d}/train/model.pt"
RL = "{d}/sweep/results.jsonl line 1"
MUST_NET = "must be an int array of shape"

# (id, folders copied from the base run, damage, argv, the exact message after "error: ")
CASES = [
    # --- network.json: every field against its schema ------------------------------------------
    ("net-coding-unknown", ["net"], _set(NJ, ["coding"], "morse"), SIM,
     f"The 'coding' field of {J} must be one of 'payload', 'ttfs', 'binary'. Got 'morse' instead."),
    ("net-payload-bits-99", ["net"], _set(NJ, ["payload_bits"], 99), SIM,
     f"The 'payload_bits' field of {J} must be an int in [1, 8]. Got 99 instead."),
    ("net-payload-bits-str", ["net"], _set(NJ, ["payload_bits"], "4"), SIM,
     f"The 'payload_bits' field of {J} must be an int in [1, 8]. Got '4' instead."),
    ("net-payload-bits-float", ["net"], _set(NJ, ["payload_bits"], 4.5), SIM,
     f"The 'payload_bits' field of {J} must be an int in [1, 8]. Got 4.5 instead."),
    ("net-binary-with-4-bits", ["net"], _set(NJ, ["coding"], "binary"), SIM,
     f"The 'payload_bits' field of {J} must be 1 with coding 'binary'. Got 4 instead."),
    ("net-weight-bits-1", ["net"], _set(NJ, ["weight_bits"], 1), SIM,
     f"The 'weight_bits' field of {J} must be an int in [2, 16]. Got 1 instead."),
    ("net-weight-bits-bool", ["net"], _set(NJ, ["weight_bits"], True), SIM,
     f"The 'weight_bits' field of {J} must be an int in [2, 16]. Got True instead."),
    ("net-per-channel-str", ["net"], _set(NJ, ["per_channel"], "yes"), SIM,
     f"The 'per_channel' field of {J} must be a bool. Got 'yes' instead."),
    ("net-n-classes-0", ["net"], _set(NJ, ["n_classes"], 0), SIM,
     f"The 'n_classes' field of {J} must be an int in [1, 65536]. Got 0 instead."),
    ("net-n-classes-disagrees", ["net"], _set(NJ, ["n_classes"], 12), SIM,
     f"The 'layers[6].out_shape' field of {J} must be [12] of a dense output layer (n_classes). "
     f"Got [10] of a dense layer instead."),
    ("net-multiplier-bits-64", ["net"], _set(NJ, ["multiplier_bits"], 64), SIM,
     f"The 'multiplier_bits' field of {J} must be an int in [2, 31]. Got 64 instead."),
    ("net-acc-limit-negative", ["net"], _set(NJ, ["acc_limit_bits"], -3), SIM,
     f"The 'acc_limit_bits' field of {J} must be an int in [0, 62]. Got -3 instead."),
    ("net-overflow-unknown", ["net"], _set(NJ, ["overflow"], "clip"), SIM,
     f"The 'overflow' field of {J} must be one of 'saturate', 'wrap'. Got 'clip' instead."),
    ("net-input-shape-2d", ["net"], _set(NJ, ["input_shape"], [1, 16]), SIM,
     f"The 'input_shape' field of {J} must be a list of 3 ints >= 1. Got [1, 16] instead."),
    ("net-input-q-0", ["net"], _set(NJ, ["input_q"], 0), SIM,
     f"The 'input_q' field of {J} must be an int in [1, 16777216]. Got 0 instead."),
    ("net-layers-not-list", ["net"], _set(NJ, ["layers"], {"conv0": 1}), SIM,
     f"The 'layers' field of {J} must be a list of layer objects. Got 'dict' instead."),
    ("net-layers-empty", ["net"], _set(NJ, ["layers"], []), SIM,
     f"The 'layers' field of {J} must be a non-empty list of layers. Got [] instead."),
    ("net-layer-kind-unknown", ["net"], _set(NJ, ["layers", 0, "kind"], "lstm"), SIM,
     f"The 'layers[0].kind' field of {J} must be one of 'conv', 'dense', 'maxpool', 'sumpool'. Got 'lstm' instead."),
    ("net-layer-name-int", ["net"], _set(NJ, ["layers", 0, "name"], 5), SIM,
     f"The 'layers[0].name' field of {J} must be a str. Got 5 instead."),
    ("net-in-shape-disagrees", ["net"], _set(NJ, ["layers", 0, "in_shape"], [1, 8, 8]), SIM,
     f"The 'layers[0].in_shape' field of {J} must be the previous layer's output [1, 16, 16]. Got [1, 8, 8] instead."),
    ("net-out-shape-disagrees", ["net"], _set(NJ, ["layers", 0, "out_shape"], [16, 14, 14]), SIM,
     f"The 'layers[0].out_shape' field of {J} must be [16, 16, 16] (from in_shape, kernel, stride and padding). "
     f"Got [16, 14, 14] instead."),
    ("net-declared-channels-vs-weights", ["net"], _set(NJ, ["layers", 0, "out_shape"], [8, 16, 16]), SIM,
     f"The 'L0.weight' array of {Z} {MUST_NET} (8, 1, 3, 3) with values in [-7, 7]. Got shape (16, 1, 3, 3) instead."),
    ("net-kernel-zero", ["net"], _set(NJ, ["layers", 0, "kernel"], [0, 3]), SIM,
     f"The 'layers[0].kernel' field of {J} must be a list of 2 ints >= 1. Got [0, 3] instead."),
    ("net-stride-zero", ["net"], _set(NJ, ["layers", 2, "stride"], [0, 2]), SIM,
     f"The 'layers[2].stride' field of {J} must be a list of 2 ints >= 1. Got [0, 2] instead."),
    ("net-padding-negative", ["net"], _set(NJ, ["layers", 0, "padding"], [-1, 1]), SIM,
     f"The 'layers[0].padding' field of {J} must be a list of 2 ints >= 0. Got [-1, 1] instead."),
    ("net-q-in-negative", ["net"], _set(NJ, ["layers", 1, "q_in"], -1), SIM,
     f"The 'layers[1].q_in' field of {J} must be an int in [1, 16777216]. Got -1 instead."),
    ("net-is-output-str", ["net"], _set(NJ, ["layers", 0, "is_output"], "no"), SIM,
     f"The 'layers[0].is_output' field of {J} must be a bool. Got 'no' instead."),
    ("net-is-output-first", ["net"], _set(NJ, ["layers", 0, "is_output"], True), SIM,
     f"The 'layers[0].is_output' field of {J} must be true for the last layer only. Got True instead."),
    ("net-acc-bits-float", ["net"], _set(NJ, ["layers", 0, "acc_bits"], 8.0), SIM,
     f"The 'layers[0].acc_bits' field of {J} must be an int in [0, 64]. Got 8.0 instead."),
    ("net-missing-coding", ["net"], _delete(NJ, ["coding"]), SIM,
     f"{J}: malformed integer network (missing field 'coding')"),
    ("net-not-an-object", ["net"], _write(NJ, b"[1, 2]"), SIM,
     f"{J}: not an snnconvert integer network (a JSON list, not an object)"),
    ("net-format-other", ["net"], _set(NJ, ["format"], "onnx"), SIM,
     f"{J}: not an snnconvert integer network (format='onnx')"),
    ("net-version-2", ["net"], _set(NJ, ["version"], 2), SIM,
     f"{J}: format version 2 is not supported (this build reads 1)"),
    ("net-recipe-bad-value", ["net"], _set(NJ, ["meta", "recipe", "convert", "weight_bits"], 99), SIM,
     f"{J}: its stored recipe is invalid: The 'weight_bits' parameter of convert must be an int in [2, 16]. "
     f"Got 99 instead."),
    ("net-recipe-unknown-section", ["net"], _set(NJ, ["meta", "recipe", "writer"], {"folder": "/"}), SIM,
     f"{J}: its stored recipe is invalid: Unknown section [writer] in the recipe. Valid sections: data, frames, "
     f"model, train, convert, hardware, budget, sweep, export."),
    ("net-recipe-relative-base", ["net"], _set(NJ, ["meta", "recipe", "_base_dir"], "../.."), SIM,
     f"The 'recipe._base_dir' field of {J} must be an absolute folder path. Got '../..' instead."),
    ("net-recipe-index-not-str", ["net"], _set(NJ, ["meta", "recipe", "data", "recordings_index"], 7), SIM,
     f"{J}: its stored recipe is invalid: The 'recordings_index' parameter of data must be a str. Got 7 instead."),
    # --- network.npz: arrays against the declared shapes and widths ------------------------------
    ("npz-float-weights", ["net"], _npz_edit(NZ, lambda a: a.update({"L0.weight": a["L0.weight"] * 0.5})), SIM,
     f"The 'L0.weight' array of {Z} {MUST_NET} (16, 1, 3, 3) with values in [-7, 7]. Got float64 values instead."),
    ("npz-negative-shift", ["net"], _npz_edit(NZ, lambda a: a["L0.shift"].__setitem__(0, -2)), SIM,
     f"The 'L0.shift' array of {Z} {MUST_NET} (16,) with values in [1, 62]. Got the value -2 instead."),
    ("npz-weight-shape", ["net"], _npz_edit(NZ, lambda a: a.update({"L3.weight": a["L3.weight"][:, :8]})), SIM,
     f"The 'L3.weight' array of {Z} {MUST_NET} (32, 16, 3, 3) with values in [-7, 7]. "
     f"Got shape (32, 8, 3, 3) instead."),
    ("npz-weight-range", ["net"], _npz_edit(NZ, lambda a: a["L5.weight"].__setitem__((0, 0), 99)), SIM,
     f"The 'L5.weight' array of {Z} {MUST_NET} (64, 512) with values in [-7, 7]. Got the value 99 instead."),
    ("npz-m0-negative", ["net"], _npz_edit(NZ, lambda a: a["L6.m0"].__setitem__(1, -5)), SIM,
     f"The 'L6.m0' array of {Z} {MUST_NET} (10,) with values in [0, 2147483647]. Got the value -5 instead."),
    ("npz-bias-missing", ["net"], _npz_edit(NZ, lambda a: a.pop("L1.bias")), SIM, f"{Z}: array 'L1.bias' is missing"),
    ("npz-extra-array", ["net"], _npz_edit(NZ, lambda a: a.update({"L9.weight": np.zeros(3, np.int64)})), SIM,
     f"{Z}: array 'L9.weight' belongs to no layer of {J}"),
    ("npz-weights-on-pool", ["net"], _npz_edit(NZ, lambda a: a.update({"L2.weight": np.zeros(3, np.int64)})), SIM,
     f"{Z}: array 'L2.weight' given for layer 2, a maxpool layer, which has no weight"),
    ("npz-huge-header", ["net"], _npz_raw(NZ, "L0.bias", (10 ** 12,)), SIM,
     f"{Z}: array 'L0.biasx.npy' declares shape (1000000000000,) (8000000000000 bytes) but the file holds at "
     f"most 192 bytes for it"),
    ("npz-object-array", ["net"], _npz_edit(NZ, lambda a: a.update({"L0.bias": np.array([{}], dtype=object)})),
     SIM, f"{Z}: array 'L0.bias.npy' holds Python objects; NPZ files here hold plain numbers only (refused, "
          f"nothing in it was run)"),
    ("npz-not-zip", ["net"], _write(NZ, b"\x93NUMPY garbage"), SIM,
     f"{Z}: not an NPZ archive (it does not start with a zip header)"),
    # --- checkpoints ------------------------------------------------------------------------------
    ("ckpt-pickled-code", ["train"], _pickled, CONV,
     f"{PT}: not a snnconvert checkpoint: it holds Python objects or code, which a checkpoint never contains; "
     f"refused without running any of it"),
    ("ckpt-nan-weight", ["train"], _ckpt_edit(_nan), CONV,
     f"The 'state_dict.0.weight' field of {PT} must be a tensor of finite numbers. Got nan among its 144 values "
     f"instead."),
    ("ckpt-inf-weight", ["train"], _ckpt_edit(_inf), CONV,
     f"The 'state_dict.0.weight' field of {PT} must be a tensor of finite numbers. Got inf among its 144 values "
     f"instead."),
    ("ckpt-frames-disagree-convert", ["train"], _ckpt_edit(lambda c: _recipe(c, "frames", "size", 8)), CONV,
     f"{PT} was trained on frames of shape (1, 16, 16), but its data now gives frames of shape (1, 8, 8); "
     f"use the recipe it was trained with (frames.size, frames.mode)"),
    ("ckpt-frames-disagree-sweep", ["train", "sweep"], _ckpt_edit(lambda c: _recipe(c, "frames", "size", 8)), SWEEP,
     f"{PT} was trained on frames of shape (1, 16, 16), but its data now gives frames of shape (1, 8, 8); "
     f"use the recipe it was trained with (frames.size, frames.mode)"),
    ("ckpt-frames-disagree-simulate", ["train", "net"], _ckpt_edit(lambda c: _recipe(c, "frames", "size", 8)),
     ["simulate", "{d}/net", "--data", "{d}/train", "--quiet"],
     f"{PT} was trained on frames of shape (1, 16, 16), but its data now gives frames of shape (1, 8, 8); "
     f"use the recipe it was trained with (frames.size, frames.mode)"),
    ("net-frames-disagree-simulate", ["net"], _set(NJ, ["meta", "recipe", "frames", "size"], 8), SIM,
     "the network takes frames of shape (1, 16, 16) and has 10 classes, but the data of the recipe stored in the "
     "network gives frames of shape (1, 8, 8) and 10 classes"),
    ("ckpt-recipe-bad-epochs", ["train"], _ckpt_edit(lambda c: _recipe(c, "train", "epochs", -1)), CONV,
     f"{PT}: its stored recipe is invalid: The 'epochs' parameter of train must be an int in [1, 10000]. "
     f"Got -1 instead."),
    ("ckpt-recipe-unknown-key", ["train"], _ckpt_edit(lambda c: _recipe(c, "data", "cache_dri", "/x")), CONV,
     f"{PT}: its stored recipe is invalid: Unknown key 'cache_dri' in section [data]. Did you mean 'cache_dir'?"),
    ("ckpt-recipe-path-type", ["train"], _ckpt_edit(lambda c: _recipe(c, "data", "idx_images", 5)), CONV,
     f"{PT}: its stored recipe is invalid: The 'idx_images' parameter of data must be a str. Got 5 instead."),
    ("ckpt-recipe-not-dict", ["train"], _ckpt_edit(lambda c: c.update(recipe=[1, 2])), CONV,
     f"The 'recipe' field of {PT} must be a recipe object. Got list instead."),
    ("ckpt-spec-shape", ["train"], _ckpt_edit(lambda c: c["model_spec"].update(input_shape=[1, 16])), CONV,
     f"The 'model_spec.input_shape' field of {PT} must be a list of 3 ints >= 1. Got [1, 16] instead."),
    ("ckpt-act-max-negative", ["train"], _ckpt_edit(lambda c: c.update(act_max=[1.0, -2.0])), CONV,
     f"The 'act_max[1]' field of {PT} must be a float > 0.0. Got -2.0 instead."),
    ("ckpt-state-not-tensor", ["train"], _ckpt_edit(lambda c: c["state_dict"].update({"0.bias": [1, 2]})), CONV,
     f"The 'state_dict.0.bias' field of {PT} must be a tensor. Got 'list' instead."),
    ("ckpt-format-other", ["train"], _ckpt_edit(lambda c: c.update(format="other")), CONV,
     f"{PT}: field 'format' must be 'snnconvert-checkpoint'. Got 'other' instead."),
    ("ckpt-not-archive", ["train"], _write("train/model.pt", b"hello"), CONV,
     f"{PT}: not a readable checkpoint (neither a torch archive nor a pickle)"),
    # --- export manifests and tables read by verify ------------------------------------------------
    ("man-huge-depth", ["export"], lambda d: _manifest_table(d, lambda t, m: t.update(depth=10 ** 13)), VER,
     f"The 'layers[0].tables.weight.depth' field of {M} must be an int in [0, 625]. Got 10000000000000 instead."),
    ("man-shape-vs-depth", ["export"], lambda d: _manifest_table(d, lambda t, m: t.update(shape=[16, 1, 3, 4])),
     VER, f"The 'layers[0].tables.weight.shape' field of {M} must be a shape of 144 words (its depth). "
          f"Got [16, 1, 3, 4] instead."),
    ("man-bits-zero", ["export"], lambda d: _manifest_table(d, lambda t, m: t.update(bits=0)), VER,
     f"The 'layers[0].tables.weight.bits' field of {M} must be an int in [1, 62]. Got 0 instead."),
    ("man-signed-str", ["export"], lambda d: _manifest_table(d, lambda t, m: t.update(signed="yes")), VER,
     f"The 'layers[0].tables.weight.signed' field of {M} must be a bool. Got 'yes' instead."),
    ("man-file-escapes", ["export"], lambda d: _manifest_table(d, lambda t, m: t.update(file="../x.mem")), VER,
     "file '../x.mem' escapes the folder {d}/export"),
    ("man-coding-unknown", ["export"], _set(MAN, ["coding"], "morse"), VER,
     f"The 'coding' field of {M} must be one of 'payload', 'ttfs', 'binary'. Got 'morse' instead."),
    ("man-payload-bits-99", ["export"], _set(MAN, ["payload_bits"], 99), VER,
     f"The 'payload_bits' field of {M} must be an int in [1, 8]. Got 99 instead."),
    ("man-output-shape", ["export"], _set(MAN, ["layers", 0, "output_shape"], [16, 15, 16]), VER,
     f"The 'layers[0].output_shape' field of {M} must be [16, 16, 16] (from in_shape, kernel, stride and "
     f"padding). Got [16, 15, 16] instead."),
    ("man-input-q-str", ["export"], _set(MAN, ["input", "q"], "1"), VER,
     f"The 'input.q' field of {M} must be an int in [1, 16777216]. Got '1' instead."),
    ("man-overflow", ["export"], _set(MAN, ["accumulator_limit", "overflow"], "clip"), VER,
     f"The 'accumulator_limit.overflow' field of {M} must be one of 'saturate', 'wrap'. Got 'clip' instead."),
    ("man-vectors-count-str", ["export"], _set(MAN, ["vectors", "count"], "2"), VER,
     f"The 'vectors.count' field of {M} must be an int >= 0. Got '2' instead."),
    ("man-input-not-object", ["export"], _set(MAN, ["input"], [1, 16, 16]), VER,
     f"The 'input' field of {M} must be an object. Got [1, 16, 16] instead."),
    ("man-layers-not-list", ["export"], _set(MAN, ["layers"], "all"), VER,
     f"The 'layers' field of {M} must be a list of layer objects. Got 'all' instead."),
    # --- a stale export folder: every path checked before anything is removed -----------------------
    ("stale-export-escapes", ["net", "export"], _stale_export({"../outside.txt": "0" * 64}), EXP,
     f"The 'files' field of {M} must be a map of paths inside {{d}}/export. Got '../outside.txt' instead."),
    ("stale-export-absolute", ["net", "export"], _stale_export({"/etc/hostname": "0" * 64}), EXP,
     f"The 'files' field of {M} must be a map of paths inside {{d}}/export. Got '/etc/hostname' instead."),
    ("stale-export-folder", ["net", "export"], _stale_export({"sub": "0" * 64}, folder="sub"), EXP,
     f"The 'files' field of {M} must be a map of the export's files (not folders, not the manifest). "
     f"Got 'sub' instead."),
    ("stale-export-list", ["net", "export"], _stale_export(["L0_conv0_weights.mem"]), EXP,
     f"The 'files' field of {M} must be an object mapping file paths to sha256 digests. "
     f"Got ['L0_conv0_weights.mem'] instead."),
    # --- damaged sweep result lines: exit 2 naming the file and the line ------------------------------
    ("results-metric-str", ["train", "sweep"], _results_line(lambda r: r["metrics"].update(spike_accuracy="high")),
     SWEEP, f"The 'metrics.spike_accuracy' field of {RL} must be a float in [0.0, 1.0]. Got 'high' instead."),
    ("results-metric-missing", ["train", "sweep"], _results_line(lambda r: r["metrics"].pop("sops_per_sample")),
     SWEEP, f"The 'metrics.sops_per_sample' field of {RL} must be present. Got a record without it instead."),
    ("results-bad-json", ["train", "sweep"], _results_line(lambda r: '{"format": "snnconvert-sweep-point",'),
     SWEEP, "{d}/sweep/results.jsonl: line 1 is not a sweep result (not valid JSON: Expecting property name "
            "enclosed in double quotes: line 1 column 37 (char 36)); delete the line or the file, or pass another "
            "--out to start a fresh sweep"),
    ("results-key-mismatch", ["train", "sweep"], _results_line(lambda r: r.update(key="payload/w8/p8")), SWEEP,
     f"The 'key' field of {RL} must be 'payload/w4/p2/per-tensor/post-training' (the key of its params). "
     f"Got 'payload/w8/p8' instead."),
    ("results-weight-bits", ["train", "sweep"], _results_line(lambda r: r["params"].update(weight_bits=99)), SWEEP,
     f"The 'params.weight_bits' field of {RL} must be an int in [2, 16]. Got 99 instead."),
    ("results-accuracy-range", ["train", "sweep"], _results_line(lambda r: r["metrics"].update(agreement=1.5)),
     SWEEP, f"The 'metrics.agreement' field of {RL} must be a float in [0.0, 1.0]. Got 1.5 instead."),
    ("results-not-object", ["train", "sweep"], _results_line(lambda r: "[1, 2, 3]"), SWEEP,
     f"The 'record' field of {RL} must be a JSON object. Got [1, 2, 3] instead."),
    ("results-params-missing", ["train", "sweep"], _results_line(lambda r: r.pop("params")), SWEEP,
     f"The 'params' field of {RL} must be present. Got a record without it instead."),
]


@pytest.mark.parametrize("case_id,folders,damage,argv,message", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_refused_with_one_exact_line(base, tmp_path, monkeypatch, capsys, case_id, folders, damage,
                                                  argv, message):
    d = tmp_path / "case"
    for f in folders:
        shutil.copytree(base / f, d / f)
    damage(d)
    monkeypatch.setenv("SNNCONVERT_CACHE", str(tmp_path / "user-cache"))
    before = _snapshot(tmp_path, base)
    capsys.readouterr()
    code = main([a.format(d=d) for a in argv])
    cap = capsys.readouterr()
    assert (code, cap.err.count("\n"), cap.err.startswith("error: ")) == (2, 1, True), cap.err
    assert "Traceback" not in cap.err + cap.out
    assert cap.err == f"error: {message.format(d=d)}\n"
    assert _snapshot(tmp_path, base) == before


def test_a_stored_cache_dir_never_chooses_where_files_are_written(base, tmp_path, monkeypatch, capsys):
    """A checkpoint whose stored recipe names a cache folder elsewhere: the conversion runs, nothing is
    written there, and a recording simulated anew goes to the user's cache."""
    d = tmp_path / "case"
    shutil.copytree(base / "train", d / "train")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()

    def point_elsewhere(ck):
        _recipe(ck, "data", "cache_dir", str(elsewhere))
        _recipe(ck, "data", "limit", 150)            # a subset the cache does not hold yet
    _ckpt_edit(point_elsewhere)(d)
    monkeypatch.setenv("SNNCONVERT_CACHE", str(tmp_path / "user-cache"))
    assert main(["convert", str(d / "train"), "--out", str(d / "net"), "--quiet"]) == 0
    assert list(elsewhere.iterdir()) == []
    assert [p.name.startswith("recordings-") for p in (tmp_path / "user-cache").iterdir()] == [True]
    assert "_embedded" not in json.loads((d / "net" / "network.json").read_text())["meta"]["recipe"]


def test_report_names_a_damaged_result_line_in_its_sweep_section(base, tmp_path):
    from snnconvert.files import atomic_write_json
    from snnconvert.report import write_report
    run = tmp_path / "run"
    shutil.copytree(base / "sweep", run / "sweep")
    # the stage log a run folder starts with (report refuses a folder without it)
    atomic_write_json(run / "stages.json", {"version": 1, "stages": {
        "sweep": {"fingerprint": "fp-sweep", "status": "done", "seconds": 1.0, "last_action": "ran"}}})
    _results_line(lambda r: r["metrics"].update(spike_accuracy="high"))(run)
    page = write_report(run).read_text()
    assert (f"This section cannot be shown: The &#x27;metrics.spike_accuracy&#x27; field of "
            f"{run}/sweep/results.jsonl line 1 must be a float in [0.0, 1.0]. Got &#x27;high&#x27; instead.") in page


# --- `run` refused before any stage finished: no run folder, no new or changed file -------------

def _recordings_recipe(index_line: str, csv_text: str | None):
    """A recipe reading recordings through `rec/index.csv` (one `index_line`), and `rec/a.csv`."""
    def setup(d):
        (d / "rec").mkdir(parents=True)
        (d / "rec" / "index.csv").write_text(f"file,label\n{index_line}\n")
        if csv_text is not None:
            (d / "rec" / "a.csv").write_text(csv_text)
        (d / "r.toml").write_text('name = "bad"\n[data]\nsource = "recordings"\nrecordings_index = "rec/index.csv"\n')
    return setup


def _existing_run(setup):
    """`setup`, then a run folder from before: its recipe, its stage log and a file of the user's."""
    def mutate(d):
        setup(d)
        (d / "run").mkdir()
        (d / "run" / "recipe.toml").write_text('name = "before"\n')
        (d / "run" / "stages.json").write_text('{"version": 1, "stages": {}}')
        (d / "run" / "notes.txt").write_text("kept\n")
    return mutate


BAD_LINE = _recordings_recipe("a.csv,0", "t,x,y,p\n1,2\n")
CSV = "{d}/rec/a.csv"
RUN_CASES = [
    ("run-recording-bad-line", BAD_LINE, "{d}/run", f"{CSV}: line 2: expected 4 integers, got '1,2'"),
    ("run-recording-missing", _recordings_recipe("gone.csv,0", None), "{d}/run",
     "{d}/rec/index.csv: line 2: file not found: {d}/rec/gone.csv"),
    ("run-index-missing-new-parents", lambda d: (BAD_LINE(d), (d / "rec" / "index.csv").unlink()), "{d}/new/deep/run",
     "file not found: {d}/rec/index.csv (set data.recordings_index)"),
    ("run-recording-bad-line-existing-run", _existing_run(BAD_LINE), "{d}/run",
     f"{CSV}: line 2: expected 4 integers, got '1,2'"),
]


@pytest.mark.parametrize("case_id,setup,out,message", RUN_CASES, ids=[c[0] for c in RUN_CASES])
def test_a_refused_run_leaves_no_run_folder_behind(tmp_path, monkeypatch, capsys, case_id, setup, out, message):
    d = tmp_path / "case"
    d.mkdir()
    setup(d)
    monkeypatch.setenv("SNNCONVERT_CACHE", str(tmp_path / "user-cache"))
    (tmp_path / "user-cache").mkdir()
    before = _snapshot(tmp_path)
    capsys.readouterr()
    code = main(["run", str(d / "r.toml"), "--out", out.format(d=d), "--quiet"])
    cap = capsys.readouterr()
    # the stage line comes first (the refusal happens inside the data stage), then the one error line
    assert (code, cap.err) == (2, f"[data] running ...\nerror: {message.format(d=d)}\n"), cap.err
    assert "Traceback" not in cap.err + cap.out
    assert _snapshot(tmp_path) == before
