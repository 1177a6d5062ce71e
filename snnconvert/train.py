"""The training loop: train the frame CNN on CPU, optionally fine-tune it conversion-aware, evaluate.

One call, `train(recipe, dataset, out_dir)`, writes to out_dir:
    model.pt       checkpoint (torch.load(weights_only=True) safe: tensors and plain containers)
    recipe.toml    the resolved recipe
    metrics.json   frame_accuracy, per_class_accuracy, confusion, epochs, train_seconds, ...
    model.onnx     the float model (before conversion-aware fine-tuning) as ONNX, when onnx is installed
    history.csv    one row per epoch (phase float/aware)
    curves.png     loss and accuracy per epoch;  confusion.png  test confusion matrix

Every random draw comes from the recipe seed: weight init and dropout (torch.manual_seed of a
sub-seed), batch order and augmentation (a torch.Generator of another sub-seed). Same recipe,
same data, same thread count -> bit-identical checkpoint.

The checkpoint format lives in `checkpoint`, augmentation in `augment`, the figures in `plots`;
load_checkpoint, check_checkpoint_fits, augment, plot_confusion and plot_curves stay importable
from here.
"""

from __future__ import annotations

import contextlib
import copy
import csv
import io
import math
import os
import time
from pathlib import Path

import numpy as np
import torch
from torch import nn

from snnconvert import aware as aware_mod
from snnconvert import checkpoint, console, files, models, plots
from snnconvert.augment import augment
from snnconvert.bnfold import fold_batchnorm
from snnconvert.checkpoint import (CHECKPOINT_FORMAT, CHECKPOINT_VERSION, aware_weight_rule,  # noqa: F401
                                   check_checkpoint_fits, check_model_fits, load_checkpoint)
from snnconvert import recipe as recipe_mod
from snnconvert.errors import UsageError, check_bool, check_int

# ---------------------------------------------------------------- public API

def train(recipe: dict, dataset, out_dir, init=None, quiet: bool = False) -> tuple[nn.Sequential, dict]:
    """Train the recipe's model on `dataset`, evaluate on its test split, write the artifacts.

    `init`: None (train from scratch), a checkpoint file/folder, or an nn.Sequential to start
    from. With `[train] aware = true` the float model (trained here, or `init`) is fine-tuned
    conversion-aware for `aware_epochs` with the [convert] weight_bits/payload_bits/per_channel.
    Returns (model in eval mode, metrics dict).
    """
    cfg = recipe["train"]
    seed = int(recipe["seed"])
    out_dir = Path(out_dir)
    _check_dataset(dataset)
    n_classes = len(dataset.classes)
    input_shape = tuple(int(s) for s in dataset.input_shape)
    start = None if init is None else _init_model(init, input_shape, n_classes)
    probe = start if start is not None else models.build_model(recipe["model"], input_shape, n_classes, quiet=True)
    n_threads = resolve_threads(cfg["threads"], models.describe(probe, input_shape)["macs"] * cfg["batch_size"])
    with _threads(n_threads):
        ss = np.random.SeedSequence(seed)
        init_seed, data_seed, aware_seed = (int(s.generate_state(1)[0]) for s in ss.spawn(3))
        history: list[dict] = []
        t0 = time.perf_counter()
        float_acc = None
        if init is None:
            torch.manual_seed(init_seed)
            model = models.build_model(recipe["model"], input_shape, n_classes, quiet=quiet)
            model, hist = _fit(model, dataset, cfg, cfg["epochs"], cfg["lr"], data_seed, quiet, "float")
            history += hist
        else:
            model = start
            if not cfg["aware"]:
                torch.manual_seed(init_seed)
                model, hist = _fit(model, dataset, cfg, cfg["epochs"], cfg["lr"], data_seed, quiet, "float")
                history += hist
        aware_info, act_max, float_model = None, None, model
        if cfg["aware"]:
            float_acc = evaluate(model, *dataset.test)["accuracy"]
            conv = recipe.get("convert", {})
            for k in ("weight_bits", "payload_bits", "per_channel", "weight_scale"):
                if k not in conv:
                    raise UsageError(f"aware training needs '{k}' in the [convert] section of the recipe")
            model, act_max, hist = _finetune(model, dataset, recipe, conv["weight_bits"], conv["payload_bits"],
                                             conv["per_channel"], cfg["aware_epochs"], aware_seed, quiet)
            history += hist
            aware_info = {"weight_bits": int(conv["weight_bits"]), "payload_bits": int(conv["payload_bits"]),
                          "per_channel": bool(conv["per_channel"]), "learn_act_max": bool(cfg["learn_act_max"]),
                          "weight_scale": str(conv["weight_scale"])}
        train_seconds = time.perf_counter() - t0
        ev = evaluate(model, *dataset.test)

    d = models.describe(model, input_shape)
    cm = ev["confusion"]
    per_class = {}
    for i, name in enumerate(dataset.classes):
        total = int(cm[i].sum())
        per_class[str(name)] = float(cm[i, i] / total) if total else None  # no test samples of that class
    val_best = max((h["val_accuracy"] for h in history if h["val_accuracy"] is not None), default=None)
    metrics = {
        "frame_accuracy": ev["accuracy"],
        "test_correct": ev["correct"],
        "test_count": ev["count"],
        "per_class_accuracy": per_class,
        "confusion": cm.tolist(),
        "classes": [str(c) for c in dataset.classes],
        "epochs": sum(1 for h in history if h["phase"] == "float"),
        "aware_epochs": sum(1 for h in history if h["phase"] == "aware"),
        "best_val_accuracy": val_best,
        "train_seconds": round(train_seconds, 3),
        "threads": n_threads,
        "params": d["params"],
        "macs": d["macs"],
        "float_frame_accuracy": float_acc,
        "aware": aware_info,
        "data_fingerprint": str(dataset.fingerprint),
    }
    out_dir.mkdir(parents=True, exist_ok=True)
    ckpt = checkpoint.make_checkpoint(model, dataset, recipe, metrics, act_max, aware_info)
    files.atomic_torch_save(ckpt, out_dir / "model.pt")
    recipe_mod.save(recipe, out_dir)
    files.atomic_write_json(out_dir / "metrics.json", metrics)
    _write_history(history, out_dir / "history.csv")
    _write_float_onnx(float_model, input_shape, out_dir / "model.onnx", quiet)
    plots.save_training_curves(history, out_dir / "curves.png", title=f"{recipe.get('name', 'model')}: training" + (
        f" (conversion-aware fine-tuning for k={aware_info['weight_bits']} p={aware_info['payload_bits']})"
        if aware_info else ""))
    plots.save_confusion(cm, dataset.classes, out_dir / "confusion.png",
                   f"{'conversion-aware ' if aware_info else ''}frame model, test accuracy "
                   f"{100 * ev['accuracy']:.2f}% ({ev['correct']}/{ev['count']})")
    return model, metrics


def finetune_aware(model: nn.Sequential, dataset, recipe: dict, weight_bits: int, payload_bits: int,
                   per_channel: bool, epochs: int, seed: int, quiet: bool = True,
                   weight_scale: str | None = None) -> tuple[nn.Sequential, list]:
    """Conversion-aware fine-tuning of a float model for one (k, p) budget.

    The weights train on the converter's grid: `weight_scale` is its rule ("max" or
    "percentile:Q"; None = the recipe's [convert] weight_scale). a_max starts at the converter's
    range statistic (`convert.calibrate.hidden_ranges`, rule percentile `[train] act_percentile`)
    of each float activation on the training split, then (if `learn_act_max`) trains with the weights. Uses the recipe's [train] optimiser,
    batch size, augmentation and `aware_lr` (cosine to zero). Keeps the best-validation epoch.
    Returns (aware model in eval mode, act_max list of floats, one per activation).
    Deterministic for a given seed and thread count; the input model is not modified. The torch
    thread count is left as the caller set it (parallel sweep workers run one thread each).
    """
    aware, act_max, _ = _finetune(model, dataset, recipe, weight_bits, payload_bits, per_channel,
                                  epochs, int(seed), quiet, weight_scale)
    return aware, act_max


def evaluate(model: nn.Module, x: torch.Tensor, y: torch.Tensor, batch_size: int = 1024) -> dict:
    """accuracy = mean(argmax(model(x)) == y) in eval mode; plus the confusion matrix (rows = true)."""
    from sklearn.metrics import confusion_matrix
    x, y = torch.as_tensor(x), torch.as_tensor(y)
    was = model.training
    model.eval()
    preds = []
    with torch.inference_mode():
        for i in range(0, len(x), batch_size):
            preds.append(model(x[i:i + batch_size]).argmax(1))  # (B,)
    model.train(was)
    pred = torch.cat(preds) if preds else torch.zeros(0, dtype=torch.long)
    n_out = _n_outputs(model)
    correct = int((pred == y).sum())
    cm = confusion_matrix(y.numpy(), pred.numpy(), labels=list(range(n_out)))
    return {"accuracy": correct / len(y) if len(y) else float("nan"), "correct": correct, "count": int(len(y)),
            "confusion": cm, "pred": pred}


# ---------------------------------------------------------------- the loop

def _fit(model, dataset, cfg, epochs, lr, seed, quiet, phase):
    """Mini-batch training with the recipe's optimiser/schedule/augmentation; returns the model
    with the best-validation weights loaded (last epoch if there is no validation split) and
    one history row per epoch. Early stop after `patience` epochs without improvement (0: off)."""
    xtr, ytr = (torch.as_tensor(a) for a in dataset.train)
    xva, yva = (torch.as_tensor(a) for a in dataset.val)
    n = len(ytr)
    if n == 0:
        raise UsageError("the training split is empty; check the [data] section")
    bs = min(cfg["batch_size"], n)
    steps = math.ceil(n / bs)
    total = epochs * steps
    gen = torch.Generator().manual_seed(int(seed))
    fmt = training_memory_format(model, cfg.get("memory_format", "contiguous"))
    model.to(memory_format=fmt)
    params = [p for p in model.parameters() if p.requires_grad]
    if cfg["optimizer"] == "adam":
        opt = torch.optim.Adam(params, lr=lr, weight_decay=cfg["weight_decay"])
    else:
        opt = torch.optim.SGD(params, lr=lr, momentum=cfg["momentum"], weight_decay=cfg["weight_decay"])
    loss_fn = nn.CrossEntropyLoss()
    integral = bool(torch.equal(xtr, xtr.round()))
    l1 = float(cfg.get("activity_l1", 0.0))
    best_acc, best_state, bad, history = -1.0, None, 0, []
    step = 0
    for epoch in range(epochs):
        model.train()
        t_ep = time.perf_counter()
        perm = torch.randperm(n, generator=gen)
        loss_sum, correct = 0.0, 0
        bar = console.bar(range(steps), desc=f"{phase} epoch {epoch + 1}/{epochs}", enabled=not quiet)
        for b in bar:
            for g in opt.param_groups:
                g["lr"] = _lr_at(cfg, lr, step, total, epoch)
            idx = perm[b * bs:(b + 1) * bs]
            xb = augment(xtr[idx], cfg["jitter_px"], cfg["event_dropout"], gen, integral)  # (B, C, H, W)
            xb = xb.contiguous(memory_format=fmt)
            yb = ytr[idx]
            if l1:
                out, act = forward_with_activity(model, xb)  # (B, classes), scalar
                # ramped in over the first quarter of the steps: a full penalty on a fresh network
                # can silence a whole layer before the classifier learns (dead ReLUs never recover)
                loss = loss_fn(out, yb) + l1 * min(1.0, 4.0 * step / total) * act
            else:
                out = model(xb)  # (B, classes)
                loss = loss_fn(out, yb)
            opt.zero_grad(set_to_none=True)
            loss.backward()
            opt.step()
            step += 1
            loss_sum += float(loss.detach()) * len(idx)
            correct += int((out.argmax(1) == yb).sum())
            if not quiet and (b % 10 == 0 or b == steps - 1):
                bar.set_postfix(loss=f"{loss_sum / min(n, (b + 1) * bs):.3f}",
                                acc=f"{100 * correct / min(n, (b + 1) * bs):.1f}%")
        bar.close()
        row = {"phase": phase, "epoch": epoch + 1, "lr": _lr_at(cfg, lr, max(step - 1, 0), total, epoch),
               "train_loss": loss_sum / n, "train_accuracy": correct / n, "val_loss": None, "val_accuracy": None}
        if len(yva):
            model.eval()
            with torch.inference_mode():
                out = model(xva)  # (Nv, classes)
            row["val_loss"] = float(loss_fn(out, yva))
            row["val_accuracy"] = float((out.argmax(1) == yva).float().mean())
            score = row["val_accuracy"]
        else:
            score = epoch  # no validation split: keep the last epoch
        row["seconds"] = round(time.perf_counter() - t_ep, 3)
        history.append(row)
        if not quiet:
            va = "-" if row["val_accuracy"] is None else f"{100 * row['val_accuracy']:.2f}%"
            console.say(f"{phase} epoch {epoch + 1}/{epochs}: loss {row['train_loss']:.4f}, "
                  f"train {100 * row['train_accuracy']:.2f}%, val {va}")
        if score > best_acc:
            best_acc, bad = score, 0
            best_state = copy.deepcopy(model.state_dict())
        else:
            bad += 1
            if cfg["patience"] and bad >= cfg["patience"]:
                break
    model.load_state_dict(best_state)
    model.to(memory_format=torch.contiguous_format)
    model.eval()
    return model, history


def training_memory_format(model: nn.Module, name: str):
    """torch.channels_last for `name` = "channels_last" and a model with convolutions, else contiguous
    (`[train] memory_format`; bench/train.py measures both). Same values either way up to float rounding."""
    if name == "channels_last" and any(isinstance(m, nn.Conv2d) for m in model.modules()):
        return torch.channels_last
    return torch.contiguous_format


def forward_with_activity(model: nn.Sequential, x: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """(model(x), A) with A = sum_l f_l * mean_n ||a_l[n]||_1 / sum_l MACs_l, the synaptic-operation
    share of the activity.

    a_l is the tensor entering weighted layer l (conv/dense) after ReLU and pooling, f_l =
    MACs_l / a_l[n].numel() the mean fan-out of one of its values, MACs_l the layer's dense
    multiply-accumulates per sample. For binary-coded events ||a||_0 * f would be the SOPs; the
    L1 norm is its usual convex stand-in (common practice for sparse spiking activity), so A
    approximates SOPs / MACs. The first weighted layer's input is the data itself and is not
    penalised; dropout is skipped so the penalty sees the activity the converted network will.
    A model with a single weighted layer gives A = 0.
    """
    reg = x.new_zeros(())
    total_macs, feed, seen_weighted = 0, x, False
    for m in model:
        y = m(x)
        if isinstance(m, (nn.Conv2d, nn.Linear)):
            fan_in = m.in_features if isinstance(m, nn.Linear) else \
                m.in_channels // m.groups * m.kernel_size[0] * m.kernel_size[1]
            macs_l = y[0].numel() * fan_in
            total_macs += macs_l
            if seen_weighted:
                reg = reg + (macs_l / feed[0].numel()) * feed.abs().flatten(1).sum(1).mean()
            seen_weighted = True
            feed = y
        elif not isinstance(m, nn.Dropout):
            feed = y if feed is x else m(feed)  # after a dropout, follow the undropped tensor
        x = y
    return x, reg / max(total_macs, 1)


def _lr_at(cfg, lr, step, total, epoch) -> float:
    """constant: lr;  step: lr * gamma^floor(epoch / step_epochs);  cosine: lr * (1 + cos(pi * step / total)) / 2."""
    if cfg["schedule"] == "cosine":
        return lr * 0.5 * (1.0 + math.cos(math.pi * step / max(total, 1)))
    if cfg["schedule"] == "step":
        return lr * cfg["step_gamma"] ** (epoch // cfg["step_epochs"])
    return lr


def _finetune(model, dataset, recipe, weight_bits, payload_bits, per_channel, epochs, seed, quiet,
              weight_scale=None):
    from snnconvert.settings.convert import parse_weight_rule
    from snnconvert.convert.calibrate import aware_start_ranges, calibration_subset
    cfg = recipe["train"]
    check_int(epochs, "aware_epochs", "train", 1, 100000)
    check_bool(per_channel, "per_channel", "convert")
    weight_rule = parse_weight_rule(recipe["convert"]["weight_scale"] if weight_scale is None else weight_scale,
                                   "weight_scale", "convert")
    folded = fold_batchnorm(model).eval()
    # a_max starts at the converter's range statistic (act_percentile rule), or lower at few payload
    # bits (see aware_start_ranges), over the converter's calibration subset of the training split
    x_train = np.asarray(dataset.train[0])
    x_cal = x_train[calibration_subset(len(x_train), int(recipe["convert"].get("calib_samples", 512)))]
    act0 = aware_start_ranges(folded, x_cal, payload_bits, cfg["act_percentile"])
    aware = aware_mod.make_aware(folded, weight_bits, payload_bits, per_channel, act_max=act0,
                              learn_act_max=cfg["learn_act_max"], weight_rule=weight_rule)
    torch.manual_seed(int(seed))
    aware, hist = _fit(aware, dataset, cfg, epochs, cfg["aware_lr"], int(seed) ^ 0x5EED, quiet, "aware")
    act_max = [float(m.a_max.detach().clamp_min(1e-6)) for m in aware if isinstance(m, aware_mod.ClipQuant)]
    return aware, act_max, hist


# ---------------------------------------------------------------- helpers

def _init_model(init, input_shape, n_classes):
    if isinstance(init, nn.Module):
        if not isinstance(init, nn.Sequential):
            raise UsageError(f"init must be an nn.Sequential or a checkpoint path. Got {type(init).__name__} instead.")
        models.spec_from_model(init)  # rejects unsupported layer patterns early
        model = copy.deepcopy(init)
    else:
        model, ckpt = load_checkpoint(init)
        if ckpt["aware"]:
            raise UsageError(f"init checkpoint {init} is already conversion-aware; start from a float checkpoint")
    model.eval()
    check_model_fits(model, input_shape, n_classes, "init model")
    return model


def _check_dataset(ds) -> None:
    for attr in ("train", "val", "test", "classes", "input_shape", "input_q", "fingerprint"):
        if not hasattr(ds, attr):
            raise TypeError(f"dataset has no attribute '{attr}' (see the data contract in DEVELOPERS.md)")
    for split in ("train", "val", "test"):
        x, y = getattr(ds, split)
        if len(x) != len(y):
            raise UsageError(f"dataset split '{split}' has {len(x)} frames but {len(y)} labels")


def _write_float_onnx(model, input_shape, path: Path, quiet: bool) -> None:
    """model.onnx of the float model (before any conversion-aware fine-tuning), when onnx is installed."""
    from snnconvert.interop import ONNX_EXTRA, missing_packages
    if "onnx" in missing_packages():
        if not quiet:
            console.say(f"model.onnx not written: onnx is not installed ({ONNX_EXTRA})")
        return
    from snnconvert.interop.onnx_write import write_onnx
    write_onnx(model, input_shape, path)


def _n_outputs(model) -> int:
    last = [m for m in model.modules() if isinstance(m, nn.Linear)]
    return last[-1].out_features if last else 0


# Below this many multiply-accumulates per training step (forward), one thread is the choice.
# bench/train.py on the 28x28 default model (2.9 M MACs per sample, 93-370 M per step at batch 32-128):
# on a shared 2-core machine (load ~7) a second thread made training 4-8x SLOWER (187 -> 24
# samples/s at batch 32, 668 -> 168 at batch 128), while on an idle one it can at best halve the
# time. The choice may depend on the model size only, never on the load (same machine, same
# weights), so the second thread is kept for steps where its best case clearly pays.
SMALL_STEP_MACS = 1_000_000_000


def resolve_threads(threads: int, macs_per_step: int | None = None) -> int:
    """threads > 0: as given. 0 (auto): 1 for small steps (< SMALL_STEP_MACS multiply-accumulates,
    forward only), else the cores this process may use, at most 2 (the target laptop). Never reads
    the machine load: on one machine the thread count, and so the weights, depend on the model alone."""
    if threads:
        return int(threads)
    if macs_per_step is not None and macs_per_step < SMALL_STEP_MACS:
        return 1
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cores = os.cpu_count() or 1
    return max(1, min(2, cores))


@contextlib.contextmanager
def _threads(threads: int):
    """Set torch's intra-op threads for the block and restore the caller's setting after."""
    before = torch.get_num_threads()
    torch.set_num_threads(int(threads))
    try:
        yield
    finally:
        torch.set_num_threads(before)


def _write_history(history, path) -> None:
    buf = io.StringIO()
    cols = ["phase", "epoch", "lr", "train_loss", "train_accuracy", "val_loss", "val_accuracy", "seconds"]
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n")
    w.writeheader()
    for h in history:
        w.writerow({k: ("" if h.get(k) is None else h[k]) for k in cols})
    files.atomic_write_text(path, buf.getvalue())


# public names of the figures, as callers import them from here
plot_confusion = plots.save_confusion
plot_curves = plots.save_training_curves
