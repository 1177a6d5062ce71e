"""`snnconvert run`: every stage of a recipe, in order, into one run folder.

    data -> train -> convert -> sweep -> export -> verify -> report -> summary.json

Each stage fingerprints its inputs (the recipe sections it reads plus the fingerprints of the
stages it depends on). A stage whose fingerprint matches the one recorded in `stages.json`, and
whose outputs are all present, is reused instead of redone; `--force STAGE` redoes that stage and
every stage after it. `stages.json` is rewritten atomically after each stage, so Ctrl-C leaves the
finished stages intact and the next run picks up where this one stopped.
"""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

import numpy as np

from snnconvert import console
from snnconvert import recipe as recipe_mod
from snnconvert.errors import UsageError
from snnconvert.files import atomic_write_bytes, atomic_write_json, check_output_path, fingerprint, load_json
from snnconvert.settings import Section
from snnconvert.stages import STAGES
STAGE_LOG_VERSION = 1

# What each stage reads: recipe sections (their settings objects are its fingerprint), and the
# stages whose results it consumes.
_READS = {
    "data": (["data", "frames"], []),
    "train": (["model", "train"], ["data"]),       # + [convert], when training is conversion-aware
    "convert": (["convert", "hardware", "budget"], ["train"]),
    "sweep": (["sweep", "convert", "hardware", "budget"], ["train"]),
    "export": (["export"], ["convert"]),
    "verify": ([], ["export"]),
    "report": ([], ["data", "train", "convert", "sweep", "export", "verify"]),
}
_OUTPUTS = {
    "data": ["data/summary.json"],
    "train": ["train/model.pt", "train/metrics.json"],
    "convert": ["net/network.json", "net/network.npz", "net/metrics.json"],
    "sweep": ["sweep/results.jsonl"],
    "export": ["export/manifest.json"],
    "verify": ["verify.json"],
    "report": ["report.html"],
}


class Run:
    """One run folder and its stage log. `settings`: the recipe's checked sections ({section: settings
    object}, from `recipe.load_settings`), built once and passed to every stage."""

    def __init__(self, recipe: dict, settings: dict[str, Section], out: Path, force: str | None = None):
        self.recipe = recipe
        self.settings = settings
        self.out = Path(out)
        self.force = force
        self.log_path = self.out / "stages.json"
        self.log = self._read_log()
        self.fingerprints: dict[str, str] = {}
        self._dataset = None
        self.actions: dict[str, str] = {}

    def _read_log(self) -> dict:
        if self.log_path.is_file():
            log = load_json(self.log_path)
            if log.get("version") == STAGE_LOG_VERSION:
                return log
        return {"version": STAGE_LOG_VERSION, "stages": {}}

    def _write_log(self) -> None:
        atomic_write_json(self.log_path, self.log)

    def dataset(self):
        if self._dataset is None:
            from snnconvert.data import load_dataset
            self._dataset = load_dataset(self.recipe)
        return self._dataset

    def stage(self, name: str, fn) -> None:
        sections, deps = _READS[name]
        if name == "train" and self.settings["train"].aware:
            sections = [*sections, "convert"]   # fine-tuning reads the [convert] settings it trains for
        reads = {s: self.settings[s].as_dict() for s in sections}
        fp = fingerprint(name, self.recipe.get("seed"), reads,
                         [self.fingerprints[d] for d in deps if d in self.fingerprints])
        self.fingerprints[name] = fp
        rec = self.log["stages"].get(name)
        forced = self.force is not None and STAGES.index(name) >= STAGES.index(self.force)
        outputs_ok = all((self.out / p).exists() for p in _OUTPUTS[name])
        if rec and rec.get("fingerprint") == fp and rec.get("status") == "done" and outputs_ok and not forced:
            self.actions[name] = "reused"
            rec["last_action"] = "reused"
            self._write_log()
            console.say(f"[{name}] reused (inputs unchanged, fingerprint {fp})")
            return
        console.say(f"[{name}] running ...")
        t0 = time.perf_counter()
        self.log["stages"][name] = {"fingerprint": fp, "status": "running"}
        self._write_log()
        fn()
        secs = time.perf_counter() - t0
        self.log["stages"][name] = {"fingerprint": fp, "status": "done", "seconds": round(secs, 2),
                                    "last_action": "ran"}
        self.actions[name] = "ran"
        self._write_log()
        console.say(f"[{name}] done in {secs:.1f} s")


class Undo:
    """What a run adds to the file system before its first stage finishes, so that a refused run
    leaves everything as it found it.

    Taken before the run folder is created: a folder this call creates (with any missing parents)
    is removed whole; in a run folder that already existed, every path it did not hold is removed,
    and its recipe.toml and stages.json get their bytes back. The times of the folders and files
    that existed are restored too, so nothing reads as changed. Finished stages are never touched.
    """

    KEPT = ("recipe.toml", "stages.json")

    def __init__(self, out: Path):
        out = Path(out).absolute()
        top = out
        while not top.parent.exists():
            top = top.parent
        self.out = out
        self.created = None if out.exists() else top           # the highest folder this call creates
        base = top.parent if self.created else out
        self.times = {base: _times(base)}                      # folders whose listing may change
        self.files: dict[Path, tuple[bytes, tuple[int, int]]] = {}
        self.existing: set[Path] = set()
        if self.created is None:
            for dirpath, dirnames, filenames in os.walk(out):
                d = Path(dirpath)
                self.times[d] = _times(d)
                self.existing.update(d / n for n in dirnames + filenames)
            for name in self.KEPT:
                if (out / name).is_file():
                    self.files[out / name] = ((out / name).read_bytes(), _times(out / name))

    def restore(self) -> None:
        if self.created is not None:
            shutil.rmtree(self.created, ignore_errors=True)
        else:
            for dirpath, dirnames, filenames in os.walk(self.out, topdown=True):
                d = Path(dirpath)
                for n in list(dirnames):
                    if d / n not in self.existing:
                        shutil.rmtree(d / n, ignore_errors=True)
                        dirnames.remove(n)
                for n in filenames:
                    if d / n not in self.existing:
                        (d / n).unlink(missing_ok=True)
            for path, (data, times) in self.files.items():
                if path.read_bytes() != data:
                    atomic_write_bytes(path, data)
                os.utime(path, ns=times)
        for d, times in self.times.items():
            if d.is_dir():
                os.utime(d, ns=times)


def _times(path: Path) -> tuple[int, int]:
    st = os.stat(path)
    return st.st_atime_ns, st.st_mtime_ns


def default_out(recipe: dict) -> Path:
    return Path("runs") / recipe["name"]


def run(recipe_path, out=None, overrides=(), force: str | None = None) -> dict:
    """Run the whole job for a recipe; returns the summary dict (also written to summary.json)."""
    if force is not None and force not in STAGES:
        raise UsageError(f"The 'force' parameter of run must be one of {', '.join(map(repr, STAGES))}. Got {force!r} instead.")
    r, settings = recipe_mod.load_settings(recipe_path, overrides)
    out = check_output_path(out or default_out(r), "--out" if out else "", "folder")
    undo = Undo(out)
    run_ = None
    try:
        out.mkdir(parents=True, exist_ok=True)
        recipe_mod.save(r, out)
        run_ = Run(r, settings, out, force)
        run_.stage("data", lambda: _data_stage(run_))
        run_.stage("train", lambda: _train_stage(run_))
        run_.stage("convert", lambda: _convert_stage(run_))
        if settings["sweep"].enabled:
            run_.stage("sweep", lambda: _sweep_stage(run_))
        run_.stage("export", lambda: _export_stage(run_))
        run_.stage("verify", lambda: _verify_stage(run_))
        run_.stage("report", lambda: _report_stage(run_))
    except UsageError:
        if run_ is None or "ran" not in run_.actions.values():
            undo.restore()   # refused before any stage finished: leave the file system as it was
        raise
    summary = _summary(run_)
    atomic_write_json(out / "summary.json", summary)
    _print_summary(summary)
    return summary


# --- stages -------------------------------------------------------------------------------

def _data_stage(run_: Run) -> None:
    from snnconvert import frames
    ds = run_.dataset()
    d = run_.out / "data"
    d.mkdir(parents=True, exist_ok=True)
    Xtr, ytr = ds.train
    events_per_frame = float(np.mean(Xtr.reshape(len(Xtr), -1).sum(axis=1))) if len(Xtr) else 0.0
    summary = {
        "classes": list(ds.classes),
        "input_shape": list(ds.input_shape),
        "input_q": int(ds.input_q),
        "fingerprint": ds.fingerprint,
        "samples": {k: int(len(getattr(ds, k)[1])) for k in ("train", "val", "test")},
        "mean_input_events_per_frame": round(events_per_frame, 2),
    }
    fr = run_.recipe["frames"]
    frames.plot_frames(Xtr, ytr, d / "frames.png", classes=list(ds.classes), mode=fr["mode"], q=ds.input_q,
                       caption=frames.frames_caption("train", fr["mode"], ds.input_shape, fr["threshold"],
                                                     fr["max_count"]))
    if "filters" in ds.info:  # the noise filters' effect: events in, events out, pixels removed
        summary["filters"] = ds.info["filters"]
    example = _example_recording(run_)
    if example is not None:
        summary["example_recording"] = example
    atomic_write_json(d / "summary.json", summary)
    recipe_mod.save(run_.recipe, d)
    console.say(f"[data] {data_line(summary['samples'], ds.input_shape, run_.recipe['frames']['mode'], len(ds.classes))}, "
                f"{events_per_frame:.1f} input events per frame (mean, train split)")


def data_line(samples: dict, input_shape, mode: str, n_classes: int) -> str:
    """`1257 train, 180 validation, 360 test samples, 16x16 binary frames, 10 classes` (2 channels noted)."""
    c, h, w = input_shape
    channels = f" of {console.plural(c, 'channel')}" if c != 1 else ""
    return (f"{samples['train']} train, {samples['val']} validation, "
            f"{console.plural(samples['test'], 'test sample')}, {w}x{h} {mode} frames{channels}, "
            f"{console.plural(n_classes, 'class', 'classes')}")


def _example_recording(run_: Run) -> dict | None:
    """Plot the first training recording: rate trace, thresholds, bursts and their frames."""
    from snnconvert import frames
    ds = run_.dataset()
    if ds.recordings is None or len(ds.recordings) == 0:
        return None
    i = int(ds.split_index["train"][0]) if ds.split_index.get("train") is not None else 0
    stream, label = ds.recordings[i]
    fr = run_.recipe["frames"]
    trace = frames.recording_trace(stream, fr)
    wins = [(int(a), int(b)) for a, b in trace["windows"]]
    shown = [frames.bin_window(stream, a, b, fr["mode"], fr["size"], fr["threshold"], fr["max_count"]) for a, b in wins[:6]]
    frames.plot_recording(stream, trace, shown, run_.out / "data" / "events.png", mode=fr["mode"], q=ds.input_q,
                          title=f"recording {i} (label {ds.classes[label]}): {len(stream)} events, {len(wins)} windows")
    return {"index": i, "label": ds.classes[label], "events": len(stream),
            "windows": [[int(a), int(b), int(np.count_nonzero((stream.t >= a) & (stream.t < b)))] for a, b in wins]}


def _train_stage(run_: Run) -> None:
    from snnconvert.train import train
    train(run_.recipe, run_.dataset(), run_.out / "train")


def _convert_stage(run_: Run) -> None:
    from snnconvert.convert import convert_checkpoint, write_outputs
    net, metrics = convert_checkpoint(run_.out / "train", run_.settings["convert"], dataset=run_.dataset(),
                                      hardware=run_.settings["hardware"], budget=run_.settings["budget"])
    write_outputs(net, metrics, run_.recipe, run_.out / "net")


def _sweep_stage(run_: Run) -> None:
    from snnconvert.sweep import run_from_recipe
    run_from_recipe(run_.out / "train", run_.recipe, run_.out / "sweep", dataset=run_.dataset())


def _export_stage(run_: Run) -> None:
    from snnconvert.export import export_from_run
    target = run_.out / "export"
    if target.exists():  # an export of an older network, or one cut short by Ctrl-C: never mix the two
        shutil.rmtree(target)
    export_from_run(run_.out / "net", target, run_.recipe, settings=run_.settings["export"], dataset=run_.dataset())


def _verify_stage(run_: Run) -> None:
    from snnconvert.export import verify
    res = verify(run_.out / "export")
    atomic_write_json(run_.out / "verify.json", res.to_dict())
    if not res.passed:
        console.say(f"[verify] {res.first_mismatch.message()}")


def _report_stage(run_: Run) -> None:
    from snnconvert.report import write_report
    write_report(run_.out)


# --- summary ------------------------------------------------------------------------------

def _summary(run_: Run) -> dict:
    out = run_.out
    m = load_json(out / "net" / "metrics.json")
    v = load_json(out / "verify.json")
    rec = None
    if (out / "sweep" / "recommendation.json").is_file():
        rec = load_json(out / "sweep" / "recommendation.json")
    paths = {"report": "report.html", "export": "export", "network": "net", "checkpoint": "train/model.pt"}
    if rec is not None:
        paths["sweep"] = "sweep/sweep.csv"
    keys = ["frame_accuracy", "frame_model", "aware_bits", "float_accuracy", "loss_vs_float_pp",
            "quantized_accuracy", "spike_accuracy", "conversion_loss_pp", "within_tolerance", "agreement",
            "frame_accuracy_ci", "spike_accuracy_ci", "conversion_loss_p", "frame_only_correct", "spike_only_correct",
            "weight_bits", "payload_bits", "coding", "spikes_per_sample", "sops_per_sample",
            "macs_per_sample", "max_spikes_per_neuron", "weight_memory_bits", "hardware_summary", "budget"]
    s = {k: m.get(k) for k in keys}
    s.update({
        "name": run_.recipe["name"],
        "verify_passed": bool(v.get("passed")),
        "recommended": rec,
        "tolerance_pp": run_.recipe["convert"]["tolerance_pp"],
        "paths": paths,
        "stages": {k: run_.actions.get(k, "skipped") for k in STAGES},
    })
    return s


def _print_summary(s: dict) -> None:
    def fmt(k, v):
        if k == "recommended" and v is None:
            return "none (sweep off)"
        if v is None:
            return "-"
        if isinstance(v, bool):
            return "yes" if v else "no"
        if isinstance(v, float):
            return f"{v:.4g}" + stats.annotation(s, k.split(" ")[0])
        if isinstance(v, dict):
            return v.get("label") or ", ".join(f"{k} {v[k]}" for k in list(v)[:4])
        return str(v)
    from snnconvert import stats
    from snnconvert.sim.metrics import tolerance_verdict
    rows = [(k, s[k]) for k in ("frame_accuracy", "spike_accuracy", "conversion_loss_pp")]
    if s.get("conversion_loss_pp") is not None:
        rows.append(("within tolerance", tolerance_verdict(s["conversion_loss_pp"], s["tolerance_pp"])))
    if s.get("frame_model") == "aware":
        b = s.get("aware_bits") or {}
        rows[0] = (f"frame_accuracy (aware, fine-tuned for k={b.get('weight_bits')} p={b.get('payload_bits')})",
                   s["frame_accuracy"])
        rows += [("float model before fine-tuning", s.get("float_accuracy")),
                 ("loss vs float model (pp)", s.get("loss_vs_float_pp"))]
    rows += [(k, s[k]) for k in ("agreement", "weight_bits", "payload_bits", "coding", "spikes_per_sample",
                                 "sops_per_sample", "macs_per_sample", "verify_passed", "recommended")]
    hw = s.get("hardware_summary")
    if hw:
        rows.append(("hardware (estimate)", f"{hw['block_rams']} block RAMs, {hw['latency_us']:.2f} us worst latency, "
                                            f"{hw['energy_nj']:.2f} nJ per sample"))
    if s.get("budget"):
        rows.append(("budget", s["budget"]["message"]))
    wb = (s.get("recommended") or {}).get("within_budget") if isinstance(s.get("recommended"), dict) else None
    if wb and wb.get("message"):
        rows.append(("within budget", wb["message"]))
    w = max(len(k) for k, _ in rows)
    console.echo(f"summary of run '{s['name']}'")
    for k, v in rows:
        console.echo(f"  {k:<{w}}  {fmt(k, v)}")
    console.echo(f"  {'report':<{w}}  {s['paths']['report']}")


# --- a model from elsewhere: the data and train stages of a run, from an ONNX graph ------------
def import_run(model_path, recipe_path, out=None, overrides=(), quiet: bool = False) -> dict:
    """Import `model_path` with the recipe's data into the run folder `out` (default runs/<recipe name>).
    Returns the train metrics (with an "imported" entry: source file, hash, onnxruntime agreement)."""
    from snnconvert.interop import require_onnx
    require_onnx("snnconvert import")
    from snnconvert.interop.importer import check_fits, read_onnx_file, write_train_folder
    from snnconvert.interop.onnx_read import read_graph
    from snnconvert.settings.model import ModelSettings

    r, settings = recipe_mod.load_settings(recipe_path, overrides)
    out = check_output_path(Path(out) if out else default_out(r), "--out" if out else "", "folder")
    proto, data = read_onnx_file(model_path)
    try:
        graph = read_graph(proto)
    except UsageError as exc:
        raise UsageError(f"{model_path}: {exc}") from None
    r = {**r, "model": {**r["model"], "layers": graph.layers}}
    settings = {**settings, "model": ModelSettings.from_section({"layers": graph.layers})}
    run_ = Run(r, settings, out, force="train")
    ds = run_.dataset()
    check_fits(graph, ds, model_path)
    out.mkdir(parents=True, exist_ok=True)
    recipe_mod.save(r, out)
    run_.stage("data", lambda: _data_stage(run_))
    result = {}
    run_.stage("train", lambda: result.update(write_train_folder(out / "train", r, ds, proto, data, graph,
                                                                 Path(model_path))))
    return result
