"""Training throughput: `train.train` against the best bare torch loop of the same model and data.

    project_sps        samples/s of train.train (its loop: augmentation, lr schedule, progress
                       bookkeeping, validation) with the recipe's defaults, per float epoch
    bare_sps[b,t,f]    samples/s of a bare loop: shuffled mini-batches, forward, cross-entropy,
                       backward, Adam step -- batch size b in 32..256, t threads in 1..2, memory
                       format f (contiguous / channels_last); nothing else
    ratio              project at the best bare configuration / max(bare_sps)     goal >= 0.9
    ratio_at_defaults  project at the recipe's defaults / max(bare_sps)           (reported)
    frame_accuracy     default digits recipe, test accuracy of the trained frame CNN  goal >= 0.985
    train_wall_s       default digits recipe, wall time of train.train               goal < 60 s
    idx_run_s          the whole `snnconvert run recipes/idx_files.toml` (data, 10 epochs, conversion, sweep,
                       export, verify, report) on 60,000 28x28 IDX images                goal <= 600 s

Data: 7,000 28x28 binary thin-stroke digits (bench/digits28.py, made from scikit-learn's digits);
model: the layers of recipes/idx_files.toml (the default layers). Every configuration runs in turn
in this one process, the project run in the middle, and the best of --repeats is kept, so machine
load hits all of them alike.
The defaults (batch size, memory format, threads) are chosen from this table.
The 60,000 IDX images are made once by bench/digits28.py and cached in $SNNCONVERT_BENCH_CACHE
(default ~/.cache/snnconvert-bench).
Run: .venv/bin/python bench/train.py [--samples N] [--repeats R] [--quick] [--idx-run N | --idx-run 0]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))
GOALS = {"ratio": (">=", 0.9), "frame_accuracy": (">=", 0.985), "train_wall_s": ("<", 60.0),
         "idx_run_s": ("<=", 600.0)}


def bare_samples_per_second(layers, x, y, batch: int, threads: int, channels_last: bool, samples: int) -> float:
    """Samples/s of a bare training loop (forward, loss, backward, Adam step) over `samples` samples."""
    import torch
    from snnconvert import models
    before = torch.get_num_threads()
    torch.set_num_threads(threads)
    try:
        torch.manual_seed(0)
        model = models.build_model({"layers": layers}, tuple(x.shape[1:]), 10, quiet=True)
        fmt = torch.channels_last if channels_last else torch.contiguous_format
        model = model.to(memory_format=fmt)
        opt = torch.optim.Adam(model.parameters(), lr=1e-3)
        g = torch.Generator().manual_seed(0)
        perm = torch.randperm(len(y), generator=g)[:samples]
        model.train()
        t0 = time.perf_counter()
        for i in range(0, len(perm), batch):
            idx = perm[i:i + batch]
            xb = x[idx].contiguous(memory_format=fmt)  # (B, C, H, W)
            loss = torch.nn.functional.cross_entropy(model(xb), y[idx])
            opt.zero_grad(set_to_none=True)
            loss.backward()
            opt.step()
        return len(perm) / (time.perf_counter() - t0)
    finally:
        torch.set_num_threads(before)


def project_samples_per_second(recipe: dict, ds) -> tuple[float, dict]:
    """Samples/s of train.train's float epochs (history seconds, validation included)."""
    import csv
    from snnconvert import train
    with tempfile.TemporaryDirectory(prefix="bench-train-") as tmp:
        _, m = train.train(recipe, ds, Path(tmp) / "t", quiet=True)
        rows = list(csv.DictReader(open(Path(tmp) / "t" / "history.csv")))
    best = min(float(r["seconds"]) for r in rows if r["phase"] == "float")
    return len(ds.train[1]) / best, m


def default_recipe_figures(overrides) -> dict:
    """Train the default digits recipe once: test accuracy and wall time of train.train."""
    from snnconvert import data, recipe, train
    r = recipe.load(ROOT / "recipes" / "default.toml", overrides)
    ds = data.load_dataset(r, progress=False)
    with tempfile.TemporaryDirectory(prefix="bench-train-") as tmp:
        t0 = time.perf_counter()
        _, m = train.train(r, ds, Path(tmp) / "train", quiet=True)
        wall = time.perf_counter() - t0
    print(f"default recipe: {m['epochs']} epochs, {m['threads']} thread(s): wall {wall:.1f} s; test accuracy "
          f"{100 * m['frame_accuracy']:.2f}% ({m['test_correct']}/{m['test_count']})")
    return {"frame_accuracy": m["frame_accuracy"], "train_wall_s": wall}


def idx_files(n: int) -> tuple[Path, Path]:
    """n 28x28 digit images and labels as IDX files (bench/digits28.py), made once and cached."""
    import os
    import digits28
    from snnconvert.data.idx import write_idx
    folder = Path(os.environ.get("SNNCONVERT_BENCH_CACHE", Path.home() / ".cache" / "snnconvert-bench")) / f"idx{n}"
    images, labels = folder / "images-idx3-ubyte", folder / "labels-idx1-ubyte"
    if not (images.is_file() and labels.is_file()):
        folder.mkdir(parents=True, exist_ok=True)
        t0 = time.perf_counter()
        X, y = digits28.make(n_train=n, n_val=1, n_test=1, seed=0)["train"]
        write_idx(images, (X * 255).astype(np.uint8))       # 0/255: at or above half scale is set
        write_idx(labels, y.astype(np.uint8))
        print(f"made {n:,} IDX images in {time.perf_counter() - t0:.0f} s: {folder}")
    return images, labels


def idx_recipe_run(n: int, epochs: int = 10) -> dict:
    """Wall time of the whole `snnconvert run` of the shipped IDX recipe on n images, in a fresh process."""
    import json
    import subprocess
    images, labels = idx_files(n)
    with tempfile.TemporaryDirectory(prefix="bench-idx-") as tmp:
        cmd = [sys.executable, "-m", "snnconvert", "run", str(ROOT / "recipes" / "idx_files.toml"), "--quiet",
               "--out", str(Path(tmp) / "run"), "--set", f"data.idx_images={images}",
               "--set", f"data.idx_labels={labels}", "--set", f"train.epochs={epochs}"]
        t0 = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
        wall = time.perf_counter() - t0
        summary = json.loads((Path(tmp) / "run" / "summary.json").read_text())
    metrics = summary.get("metrics", summary)
    acc = {k: metrics.get(k) for k in ("frame_accuracy", "spike_accuracy")}
    print(f"IDX recipe run on {n:,} images, {epochs} epochs: wall {wall:.0f} s; "
          + ", ".join(f"{k} {100 * v:.2f} %" for k, v in acc.items() if isinstance(v, (int, float))))
    return {"idx_run_s": wall, **{f"idx_{k}": v for k, v in acc.items()}}


def main(argv: list[str] | None = None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=3500, help="samples per bare-loop timing")
    ap.add_argument("--repeats", type=int, default=2, help="timings per configuration (best kept)")
    ap.add_argument("--epochs", type=int, default=2, help="float epochs of the project run (best epoch kept)")
    ap.add_argument("--quick", action="store_true", help="batch sizes 32 and 128 only")
    ap.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                    help="overrides for the 28x28 throughput recipe")
    ap.add_argument("--skip-default", action="store_true", help="skip the default digits recipe's training")
    ap.add_argument("--idx-run", type=int, default=60_000, help="images of the whole IDX recipe run (0: skip)")
    args = ap.parse_args(argv)

    import os
    import torch
    import digits28
    from snnconvert import recipe

    print(f"load average at start: {os.getloadavg()[0]:.1f} (cores: {os.cpu_count()})")
    ds = digits28.dataset(n_train=7000, n_val=700, n_test=700, seed=0)
    r = recipe.load(ROOT / "recipes" / "idx_files.toml", [f"train.epochs={args.epochs}", *args.overrides])
    x = torch.as_tensor(ds.train[0])
    y = torch.as_tensor(ds.train[1])
    layers = r["model"]["layers"]
    batches = (32, 128) if args.quick else (32, 64, 128, 256)
    bare, proj = {}, 0.0
    for _ in range(args.repeats):      # the project run sits between the bare loops, so load hits both alike
        for b in batches:
            for t in (1, 2):
                for cl in (False, True):
                    v = bare_samples_per_second(layers, x, y, b, t, cl, args.samples)
                    bare[(b, t, cl)] = max(bare.get((b, t, cl), 0.0), v)
            if b == batches[len(batches) // 2 - 1]:
                p, m = project_samples_per_second(r, ds)
                proj = max(proj, p)
    # the project at the best bare configuration: what its loop costs at equal settings
    bb, bt, bcl = max(bare, key=bare.get)
    r_best = recipe.load(ROOT / "recipes" / "idx_files.toml",
                         [f"train.epochs={args.epochs}", *args.overrides, f"train.batch_size={bb}", f"train.threads={bt}",
                          f"train.memory_format={'channels_last' if bcl else 'contiguous'}"])
    proj_best, _ = project_samples_per_second(r_best, ds)
    bare_again = bare_samples_per_second(layers, x, y, bb, bt, bcl, args.samples)
    bare[(bb, bt, bcl)] = max(bare[(bb, bt, bcl)], bare_again)
    best_key = max(bare, key=bare.get)
    print(f"{'batch':>5} {'threads':>7} {'format':>14} {'samples/s':>10}")
    for (b, t, cl), v in sorted(bare.items()):
        print(f"{b:>5} {t:>7} {'channels_last' if cl else 'contiguous':>14} {v:>10.0f}")
    print(f"best bare loop: batch {best_key[0]}, {best_key[1]} thread(s), "
          f"{'channels_last' if best_key[2] else 'contiguous'}: {bare[best_key]:.0f} samples/s")
    print(f"project (train.train, recipe defaults: batch {r['train']['batch_size']}, {m['threads']} thread(s), "
          f"{r['train']['memory_format']}): {proj:.0f} samples/s = {proj / bare[best_key]:.2f} of the best")
    print(f"project at the best bare configuration: {proj_best:.0f} samples/s")
    figures = {"project_sps": proj, "best_bare_sps": bare[best_key], "best_bare": best_key,
               "ratio": proj_best / bare[best_key], "ratio_at_defaults": proj / bare[best_key],
               "project_best_sps": proj_best, "threads": m["threads"], "batch_size": r["train"]["batch_size"],
               "frame_accuracy": m["frame_accuracy"], "load_end": os.getloadavg()[0]}
    if not args.skip_default:
        figures.update(default_recipe_figures([]))
    if args.idx_run:
        figures.update(idx_recipe_run(args.idx_run))
    print(f"load average at end: {figures['load_end']:.1f}")
    for key, (op, goal) in GOALS.items():
        if key not in figures:
            continue
        v = figures[key]
        ok = v >= goal if op == ">=" else v <= goal if op == "<=" else v < goal
        print(f"{key}: measured {v:.4g} vs goal {op} {goal:g}: {'met' if ok else 'NOT met'}")
    return figures


if __name__ == "__main__":
    main(sys.argv[1:])
