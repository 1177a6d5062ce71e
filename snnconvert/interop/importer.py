"""The import job: an ONNX frame model + a recipe -> a run folder whose train stage is that model.

`pipeline.import_run(model_path, recipe_path, out)` writes
    out/recipe.toml      the recipe with [model] layers = the imported layer list
    out/stages.json      data and train recorded as done, so `snnconvert run out/recipe.toml --out out`
                         reuses them and goes on with convert, sweep, export, verify, report
    out/data/            the data stage (the recipe's frames)
    out/train/           model.pt (this project's checkpoint), metrics.json, recipe.toml,
                         confusion.png, model.onnx (the float model as read), source.onnx (the file given)
Before anything is written to train/, the original graph runs in onnxruntime and the imported
model in torch on the same test frames: max |score difference| must stay within `AGREE_LIMIT`
and every decision (arg-max) must be the same, else UsageError.
"""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np

from snnconvert import files
from snnconvert import recipe as recipe_mod
from snnconvert.errors import UsageError

# Both sides compute in float (float32 in torch); 1e-4 on scores of order 1-10 leaves room for the
# summation order of the two runtimes and catches any misread weight or layer.
AGREE_LIMIT = 1e-4
CHECK_FRAMES = 2000      # at most this many test frames run through both runtimes


def read_onnx_file(path):
    """(onnx.ModelProto, bytes) of a file; UsageError naming the file if it is not a valid ONNX model."""
    import onnx
    from google.protobuf.message import DecodeError

    path = Path(path)
    if not path.is_file():
        raise UsageError(f"ONNX model file not found: {path}")
    data = path.read_bytes()
    try:
        proto = onnx.load_from_string(data)
    except (DecodeError, ValueError, RuntimeError) as exc:
        raise UsageError(f"{path}: not an ONNX model file ({' '.join(str(exc).split())[:160]})") from None
    for t in proto.graph.initializer:
        if t.data_location == onnx.TensorProto.EXTERNAL:
            raise UsageError(f"{path}: initializer '{t.name}' is stored in an external data file; save the model "
                             f"as one file")
    try:
        onnx.checker.check_model(proto)
    except onnx.checker.ValidationError as exc:
        raise UsageError(f"{path}: not a valid ONNX graph: {' '.join(str(exc).split())[:200]}") from None
    return proto, data


def build_torch_model(graph):
    """The nn.Sequential of `graph.layers` (models.build_model) with the imported weights, in eval mode."""
    import torch
    from torch import nn

    from snnconvert import models
    model = models.build_model({"layers": graph.layers}, graph.input_shape, graph.n_classes, quiet=True)
    weighted = [m for m in model if isinstance(m, (nn.Conv2d, nn.Linear))]
    with torch.no_grad():
        for m, (w, b) in zip(weighted, graph.params, strict=True):
            m.weight.copy_(torch.from_numpy(np.asarray(w, dtype=np.float32)).reshape(m.weight.shape))
            m.bias.copy_(torch.from_numpy(np.asarray(b, dtype=np.float32)))
    return model.eval()


def onnxruntime_scores(proto, graph, x: np.ndarray) -> np.ndarray:
    """Class scores of the original graph in onnxruntime for frames x (N, C, H, W), float64 (N, classes).

    A final Softmax is cut off (the graph's output becomes the scores before it); channels-last
    graphs get the frames transposed to (N, H, W, C); a graph with a fixed batch size runs in
    chunks of that size (the last one padded with zero frames, which are dropped)."""
    import onnx
    import onnxruntime as ort

    proto = copy.deepcopy(proto)
    if graph.scores_name != proto.graph.output[0].name:
        del proto.graph.output[:]
        proto.graph.output.append(onnx.helper.make_tensor_value_info(
            graph.scores_name, onnx.TensorProto.DOUBLE if graph.input_dtype is np.float64 else onnx.TensorProto.FLOAT,
            None))
    opts = ort.SessionOptions()
    opts.intra_op_num_threads = 1
    opts.log_severity_level = 3
    sess = ort.InferenceSession(proto.SerializeToString(), opts, providers=["CPUExecutionProvider"])
    feed = np.asarray(x, dtype=graph.input_dtype)
    if graph.channels_last:
        feed = feed.transpose(0, 2, 3, 1)
    step = graph.batch or 256
    out = []
    for i in range(0, len(feed), step):
        chunk = feed[i:i + step]
        n = len(chunk)
        if graph.batch and n < step:
            chunk = np.concatenate([chunk, np.zeros((step - n, *chunk.shape[1:]), chunk.dtype)])
        out.append(np.asarray(sess.run([graph.scores_name], {graph.input_name: chunk})[0], np.float64)[:n])
    return np.concatenate(out).reshape(len(feed), -1)


def agreement(proto, graph, model, x: np.ndarray) -> dict:
    """Run both runtimes on frames x: {"frames", "max_abs_diff", "decisions_equal"}."""
    import torch
    ref = onnxruntime_scores(proto, graph, x)
    with torch.no_grad():
        got = model(torch.as_tensor(np.asarray(x, np.float32))).double().numpy()   # (N, classes)
    return {"frames": int(len(x)), "max_abs_diff": float(np.abs(ref - got).max()) if len(x) else 0.0,
            "decisions_equal": int((ref.argmax(1) == got.argmax(1)).sum()), "limit": AGREE_LIMIT}


def check_fits(graph, ds, source) -> None:
    """UsageError naming both shapes (or class counts) when the graph does not take the data set's frames."""
    if tuple(ds.input_shape) != tuple(graph.input_shape):
        layout = ", read from its channels-last input" if graph.channels_last else ""
        raise UsageError(f"{source}: the model takes frames of shape {tuple(graph.input_shape)} (C, H, W{layout}) "
                         f"but the recipe's frames have shape {tuple(ds.input_shape)}")
    if graph.n_classes != len(ds.classes):
        raise UsageError(f"{source}: the model gives {graph.n_classes} class scores but the recipe's data has "
                         f"{len(ds.classes)} classes")


def write_train_folder(folder, r: dict, ds, proto, data: bytes, graph, source: Path) -> dict:
    """The train folder of an imported graph (see the module docstring), measured on the data set `ds`
    (the layout `train.train` reads) after the onnxruntime check. Returns the metrics."""
    import torch

    from snnconvert import models, train
    from snnconvert.interop.onnx_write import write_onnx

    folder = Path(folder)
    check_fits(graph, ds, source)
    model = build_torch_model(graph)
    x_test = np.asarray(ds.test[0])
    x_check = x_test[:CHECK_FRAMES] if len(x_test) else np.asarray(ds.train[0])[:CHECK_FRAMES]
    agree = agreement(proto, graph, model, x_check)
    if agree["max_abs_diff"] > AGREE_LIMIT or agree["decisions_equal"] != agree["frames"]:
        raise UsageError(f"{source}: the imported model disagrees with onnxruntime on {agree['frames']} frames: "
                         f"max |score difference| {agree['max_abs_diff']:.3g} (limit {AGREE_LIMIT:g}), "
                         f"{agree['frames'] - agree['decisions_equal']} decisions differ; nothing was written to train/")
    import onnxruntime
    ev = train.evaluate(model, torch.as_tensor(x_test), torch.as_tensor(np.asarray(ds.test[1])))
    d = models.describe(model, graph.input_shape)
    cm = ev["confusion"]
    per_class = {str(name): (float(cm[i, i] / cm[i].sum()) if cm[i].sum() else None)
                 for i, name in enumerate(ds.classes)}
    imported = {"source": source.name, "sha256": files.sha256_bytes(data), "channels_last": graph.channels_last,
                "onnxruntime_version": onnxruntime.__version__, "onnxruntime_frames": agree["frames"],
                "onnxruntime_max_abs_diff": agree["max_abs_diff"], "onnxruntime_limit": AGREE_LIMIT,
                "onnxruntime_decisions_equal": agree["decisions_equal"]}
    metrics = {"frame_accuracy": ev["accuracy"], "test_correct": ev["correct"], "test_count": ev["count"],
               "per_class_accuracy": per_class, "confusion": cm.tolist(), "classes": [str(c) for c in ds.classes],
               "epochs": 0, "aware_epochs": 0, "best_val_accuracy": None, "train_seconds": None,
               "threads": torch.get_num_threads(), "params": d["params"], "macs": d["macs"],
               "float_frame_accuracy": None, "aware": None, "data_fingerprint": str(ds.fingerprint),
               "imported": imported}
    spec = {"layers": graph.layers, "input_shape": list(graph.input_shape), "n_classes": graph.n_classes,
            "classes": [str(c) for c in ds.classes], "input_q": int(ds.input_q)}
    ckpt = {"format": train.CHECKPOINT_FORMAT, "version": train.CHECKPOINT_VERSION,
            "state_dict": {k: v.detach().clone() for k, v in model.state_dict().items()},
            "model_spec": spec, "recipe": copy.deepcopy(r), "data_fingerprint": str(ds.fingerprint),
            "metrics": metrics, "act_max": None, "aware": None}
    folder.mkdir(parents=True, exist_ok=True)
    files.atomic_torch_save(ckpt, folder / "model.pt")
    recipe_mod.save(r, folder)
    files.atomic_write_json(folder / "metrics.json", metrics)
    files.atomic_write_bytes(folder / "source.onnx", data)
    write_onnx(model, graph.input_shape, folder / "model.onnx")
    train.plot_confusion(cm, ds.classes, folder / "confusion.png",
                         f"imported frame model, test accuracy {100 * ev['accuracy']:.2f}% "
                         f"({ev['correct']}/{ev['count']})")
    return metrics


def summary_lines(metrics: dict, out) -> list[str]:
    """The import summary: frame accuracy, size, the onnxruntime agreement, what was written."""
    m, im = metrics, metrics["imported"]
    return [
        f"imported {im['source']}: {m['params']:,} parameters, {m['macs']:,} MACs per sample"
        + (" (channels-last input)" if im["channels_last"] else ""),
        f"onnxruntime {im['onnxruntime_version']} vs torch on {im['onnxruntime_frames']} test frames: "
        f"max |score difference| {im['onnxruntime_max_abs_diff']:.2e} (limit {im['onnxruntime_limit']:g}), "
        f"decisions equal {im['onnxruntime_decisions_equal']}/{im['onnxruntime_frames']}",
        f"frame accuracy {100 * m['frame_accuracy']:.2f}% ({m['test_correct']}/{m['test_count']} test frames)",
        f"wrote {out}/recipe.toml, stages.json, data/, train/ (model.pt, metrics.json, recipe.toml, confusion.png, "
        f"model.onnx, source.onnx); next: snnconvert run {out}/recipe.toml --out {out}",
    ]
