"""One self-contained report.html for a run folder (the layout `snnconvert run` writes).

Every image is inlined as a base64 data URI and the page links to nothing, so it opens offline
and can be mailed as one file. Every text taken from the run folder is HTML-escaped. A piece
that is missing (no sweep, no export) is stated in its section rather than left out.
"""

from __future__ import annotations

import base64
import html
import re
from pathlib import Path

from snnconvert import files, plots, stats
from snnconvert.errors import FormatError, UsageError

# (id, title) of every section, in page order; tests check each id is present.
SECTIONS = [
    ("overview", "Run overview"),
    ("recipe", "Recipe"),
    ("data", "Data"),
    ("training", "Training"),
    ("accuracy", "Frame vs quantized vs spike accuracy"),
    ("sweep", "Bit-width sweep"),
    ("spikes", "Spikes per layer"),
    ("confusion", "Confusion matrices"),
    ("accumulators", "Accumulator widths"),
    ("energy", "Energy estimate"),
    ("hardware", "Hardware estimate and budget"),
    ("export", "Export and verification"),
]

ENERGY_CAVEAT = ("These figures are estimates from operation counts multiplied by assumed per-operation "
                 "energies; they are not measurements. Results on real hardware depend on its implementation "
                 "(memory hierarchy, clocking, process node, idle power).")

_CSS = """
body{font-family:system-ui,-apple-system,Segoe UI,Roboto,sans-serif;margin:2em auto;max-width:1100px;color:#222;
padding:0 1em;line-height:1.45}
h1{font-size:1.6em}h2{font-size:1.25em;border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:2em}
table{border-collapse:collapse;margin:.6em 0}td,th{border:1px solid #ccc;padding:.25em .6em;text-align:right}
th{background:#f3f3f3;text-align:left}td.l{text-align:left}td:not(.l){white-space:nowrap}pre{background:#f7f7f7;padding:.8em;overflow:auto;font-size:.85em;max-height:30em}
img{max-width:100%;height:auto}.pair{display:flex;gap:1em;flex-wrap:wrap}.pair figure{flex:1;min-width:300px;margin:0}
.missing{color:#8a5a00;background:#fff6e0;padding:.4em .7em;border-left:4px solid #e0a800}
.ok{color:#1a6b1a;font-weight:bold}.bad{color:#a01818;font-weight:bold}.note{color:#555;font-size:.92em}
nav a{margin-right:.8em}
"""


def write_report(run_dir) -> Path:
    """Write `run_dir/report.html` atomically from whatever the run folder holds; return its path.

    A run folder is one with the stage log stages.json (written by `snnconvert run` before its
    first stage); any other folder is refused with a UsageError naming what is missing.
    """
    run = Path(run_dir)
    if not run.is_dir():
        raise UsageError(f"run folder not found: {run}")
    if not (run / "stages.json").is_file():
        hint = ""
        for up in run.resolve().parents:
            if (up / "stages.json").is_file():
                hint = f"; the run folder above it is {up}"
                break
        raise UsageError(f"{run} is not a run folder: it has no stages.json (the stage log `snnconvert run` "
                         f"writes){hint}")
    parts = {}
    for sid, fn in _BUILDERS.items():
        try:
            parts[sid] = fn(run)
        except FormatError as exc:  # one unreadable file costs its section, not the report
            parts[sid] = _missing(f"This section cannot be shown: {exc}")
    name = run_name(run)
    nav = " ".join(f'<a href="#{sid}">{_e(title)}</a>' for sid, title in SECTIONS)
    body = "\n".join(f'<section id="{sid}">\n<h2>{_e(title)}</h2>\n{parts[sid]}\n</section>' for sid, title in SECTIONS)
    page = (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f'<title>snnconvert report: {_e(name)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n'
            f'<h1>snnconvert report: {_e(name)}</h1>\n<nav>{nav}</nav>\n{body}\n</body>\n</html>\n')
    return files.atomic_write_text(run / "report.html", page)


def run_name(run: Path) -> str:
    """The run's one name: the recipe's `name` (run folder recipe.toml, else summary.json), else the folder name."""
    import tomllib
    path = run / "recipe.toml"
    if path.is_file():
        try:
            name = tomllib.loads(path.read_text(encoding="utf-8")).get("name")
        except (tomllib.TOMLDecodeError, UnicodeDecodeError):
            name = None
        if isinstance(name, str) and name:
            return name
    try:
        s = _json(run / "summary.json")
    except FormatError:
        s = None
    name = s.get("name") if s else None
    return name if isinstance(name, str) and name else run.resolve().name


# --- helpers -------------------------------------------------------------------------------

def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _missing(text: str) -> str:
    return f'<p class="missing">{_e(text)}</p>'


def _json(path: Path):
    """The parsed JSON object, or None when the file is absent; FormatError when it is unreadable."""
    if not path.is_file():
        return None
    obj = files.load_json(path)
    if not isinstance(obj, dict):
        raise FormatError(f"{path}: expected a JSON object, got {type(obj).__name__}")
    return obj


def _img(path: Path, alt: str) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{data}">'


def _figure(path: Path, caption: str, missing: str) -> str:
    if not path.is_file():
        return _missing(missing)
    return f"<figure>{_img(path, caption)}<figcaption class=\"note\">{_e(caption)}</figcaption></figure>"




def _fmt(v) -> str:
    """A value in words: yes/no, n/a, grouped digits, lists joined with commas, dicts as 'key value'."""
    if v is None:
        return "n/a"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        if v != v:
            return "n/a"
        if abs(v) >= 1e4:
            return f"{v:,.0f}"
        return f"{v:,.4g}" if abs(v) >= 1e-3 or v == 0 else f"{v:.3e}"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, (list, tuple)):
        return ", ".join(_fmt(x) for x in v) if v else "none"
    if isinstance(v, dict):
        return "; ".join(f"{_label(k)} {_fmt(x)}" for k, x in v.items()) if v else "none"
    return str(v)


# Words for the metric keys the report shows in tables; other keys are shown with '_' as spaces.
LABELS = {
    "spikes_per_sample": "spikes per sample (mean over the test set)",
    "max_spikes_per_neuron": "most spikes of one neuron in one sample",
    "sops_per_sample": "synaptic operations (SOPs) per sample",
    "macs_per_sample": "multiply-accumulates of the frame model per sample",
    "sops_per_mac": "SOPs per frame-model MAC",
    "per_channel": "weight scales",
    "test_samples": "test samples", "samples": "test samples",
    "weight_bits": "weight bits", "payload_bits": "payload bits",
    "agreement": "spike network and frame model give the same class",
    "pipeline_stages": "pipeline stages", "window_steps": "time steps to the output window's close",
    "first_output_spike_steps_mean": "time steps to the first output spike (mean)",
    "samples_without_output_spike": "samples without an output spike",
}


def _label(k) -> str:
    return LABELS.get(str(k), str(k).replace("_", " "))


_NUMERIC = re.compile(r"^[-+]?[\d,]*\.?\d+(e[-+]?\d+)?( ?(%|pp|s|B|kB|MB))?$")


def _table(headers: list[str], rows: list[list], left: int = 1) -> str:
    """HTML table; the first `left` columns and every cell that is not a number are left-aligned."""
    def cell(tag, i, v):
        text = _fmt(v) if tag == "td" else str(v)
        cls = ' class="l"' if i < left or (tag == "td" and not _NUMERIC.match(text)) else ""
        return f"<{tag}{cls}>{_e(text)}</{tag}>"
    head = "".join(cell("th", i, h) for i, h in enumerate(headers))
    body = "".join("<tr>" + "".join(cell("td", i, v) for i, v in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _kv(d: dict, keys=None) -> str:
    keys = [k for k in (keys or d) if k in d and not str(k).startswith("_")]
    return _table(["quantity", "value"], [[_label(k), d[k]] for k in keys])


def _pct(v) -> str:
    return "n/a" if not isinstance(v, (int, float)) or isinstance(v, bool) else f"{100 * float(v):.2f} %"


def _pct_ci(v, ci) -> str:
    """'98.61 % (95 % CI [96.8, 99.4] %)': an accuracy with its Wilson interval when there is one."""
    if isinstance(ci, (list, tuple)) and len(ci) == 2 and _pct(v) != "n/a":
        return f"{_pct(v)} (95 % CI {stats.percent_interval(ci)})"
    return _pct(v)


def _pp_p(v, p) -> str:
    """'0.28 pp (McNemar p = 1.0)': a conversion loss with its paired p-value when there is one."""
    return _pp(v) + (f" (McNemar {stats.p_text(p)})" if isinstance(p, (int, float)) and _pp(v) != "n/a" else "")


def _pp(v) -> str:
    return "n/a" if not isinstance(v, (int, float)) or isinstance(v, bool) else f"{float(v):.2f} pp"


def _net_metrics(run: Path) -> dict | None:
    return _json(run / "net" / "metrics.json")


def _layer_dict(m: dict, key: str, run: Path | None = None) -> dict:
    """A per-layer {layer name: value} metric in network order ("input" first), or {} when absent.

    JSON files are written with sorted keys, so the order comes from net/network.json.
    """
    v = m.get(key)
    if not isinstance(v, dict):
        return {}
    net = _json(run / "net" / "network.json") if run is not None else None
    names = [L.get("name") for L in net.get("layers", []) if isinstance(L, dict)] if net else []
    order = {n: i for i, n in enumerate(["input"] + names)}
    return dict(sorted(v.items(), key=lambda kv: order.get(kv[0], len(order))))


def _confusion_png(cm, classes, title: str) -> str:
    """Draw a confusion matrix (`plots.confusion_figure`) when its PNG is missing but the numbers exist."""
    return f'<img alt="chart" src="{plots.png_data_uri(plots.confusion_figure(cm, classes, title))}">'


# --- sections ------------------------------------------------------------------------------

_STATUS = {"done": "done", "running": "started, not finished"}


def _overview(run: Path) -> str:
    from snnconvert.stages import STAGES
    out = [f"<p>Run <strong>{_e(run_name(run))}</strong> in folder <code>{_e(run.resolve())}</code>.</p>"]
    stages = _json(run / "stages.json") or {}
    items = stages.get("stages", {})
    items = items if isinstance(items, dict) else {}
    rows = []
    for name in STAGES + sorted(set(items) - set(STAGES)):
        st = items.get(name)
        if name == "report":  # this page is the report stage's output: it is done once you read it
            rows.append([name, "done (this page)", "", "", st.get("fingerprint", "") if isinstance(st, dict) else ""])
        elif not isinstance(st, dict):
            rows.append([name, "not run", "", "", ""])
        else:
            secs = st.get("seconds")
            rows.append([name, _STATUS.get(st.get("status"), str(st.get("status", "unknown"))),
                         f"{secs:.1f}" if isinstance(secs, (int, float)) else "",
                         {"ran": "computed", "reused": "reused (inputs unchanged)"}.get(st.get("last_action"), ""),
                         st.get("fingerprint", "")])
    out.append(_table(["stage", "status", "seconds", "last run", "input fingerprint"], rows))
    out.append('<p class="note">Seconds are wall time on the machine that ran the stage; they depend on its CPU.</p>')
    return "\n".join(out)


def _recipe(run: Path) -> str:
    path = run / "recipe.toml"
    if not path.is_file():
        return _missing("No resolved recipe (recipe.toml) in the run folder.")
    return ('<p class="note">The recipe as resolved for this run: every key, defaults included.</p>'
            f"<pre>{_e(path.read_text(encoding='utf-8'))}</pre>")


def _data(run: Path) -> str:
    s = _json(run / "data" / "summary.json")
    if s:
        rows = []
        classes = s.get("classes")
        if isinstance(classes, list):
            rows.append(["classes", f"{len(classes)}: {_fmt(classes)}"])
        shape = s.get("input_shape")
        if isinstance(shape, list) and len(shape) == 3:
            rows.append(["frame shape", f"{shape[0]} x {shape[1]} x {shape[2]} (channels x height x width)"])
        if "input_q" in s:
            rows.append(["largest input value", s["input_q"]])
        samples = s.get("samples")
        if isinstance(samples, dict):
            names = {"train": "training", "val": "validation", "test": "test"}
            keys = [k for k in names if k in samples] + [k for k in samples if k not in names]  # file keys are sorted
            rows.append(["samples", ", ".join(f"{names.get(k, k)} {_fmt(samples[k])}" for k in keys)])
        if "mean_input_events_per_frame" in s:
            rows.append(["input spikes per frame (mean, training split)", s["mean_input_events_per_frame"]])
        ex = s.get("example_recording")
        if isinstance(ex, dict):
            wins = ex.get("windows") if isinstance(ex.get("windows"), list) else []
            rows.append(["example recording", f"recording {_fmt(ex.get('index'))} (label {_fmt(ex.get('label'))}): "
                                              f"{_fmt(ex.get('events'))} events, {len(wins)} windows"])
        if "fingerprint" in s:
            rows.append(["data fingerprint", s["fingerprint"]])
        known = {"classes", "input_shape", "input_q", "samples", "mean_input_events_per_frame", "example_recording",
                 "fingerprint"}
        rows += [[_label(k), v] for k, v in s.items() if k not in known]
        out = [_table(["quantity", "value"], rows)]
    else:
        out = [_missing("No data summary (data/summary.json).")]
    out.append(_figure(run / "data" / "events.png", "event rate, detected bursts and their frames",
                       "No event plot (data/events.png)."))
    out.append(_figure(run / "data" / "frames.png", "example frames of every class, on one fixed colour scale",
                       "No frame plot (data/frames.png)."))
    return "\n".join(out)


def _aware_words(a) -> str:
    if not isinstance(a, dict):
        return ""
    scales = "per-channel" if a.get("per_channel") else "per-tensor"
    return f"k={_fmt(a.get('weight_bits'))} p={_fmt(a.get('payload_bits'))}, {scales}"


def _training(run: Path) -> str:
    m = _json(run / "train" / "metrics.json")
    if not m:
        out = [_missing("No training metrics (train/metrics.json).")]
    else:
        aware = m.get("aware")
        ci = None
        if isinstance(m.get("test_correct"), int) and isinstance(m.get("test_count"), int) \
                and 0 <= m["test_correct"] <= m["test_count"]:
            ci = stats.wilson_interval(m["test_correct"], m["test_count"])
        rows = [["test accuracy of the frame model" + (" (aware, fake-quantized)" if aware else ""),
                 _pct_ci(m.get("frame_accuracy"), ci)]]
        if "test_correct" in m and "test_count" in m:
            rows.append(["test frames classified correctly", f"{_fmt(m['test_correct'])} of {_fmt(m['test_count'])}"])
        if m.get("best_val_accuracy") is not None:
            rows.append(["best validation accuracy", _pct(m["best_val_accuracy"])])
        rows.append(["float training epochs", m.get("epochs", "n/a")])
        if isinstance(aware, dict):
            rows.append(["conversion-aware fine-tuning", f"yes: {_fmt(m.get('aware_epochs'))} epochs for "
                                                          f"{_aware_words(aware)}"])
            rows.append(["float model before fine-tuning, test accuracy", _pct(m.get("float_frame_accuracy"))])
        else:
            rows.append(["conversion-aware fine-tuning", "no (float training only)"])
        for k, what in (("params", "parameters"), ("macs", "multiply-accumulates per sample")):
            if k in m:
                rows.append([what, m[k]])
        if isinstance(m.get("train_seconds"), (int, float)):
            rows.append(["training time (depends on the CPU)",
                         f"{m['train_seconds']:.1f} s on {_fmt(m.get('threads', 'n/a'))} thread(s)"])
        if m.get("data_fingerprint"):
            rows.append(["data fingerprint", m["data_fingerprint"]])
        out = [_table(["quantity", "value"], rows)]
        per = m.get("per_class_accuracy")
        if isinstance(per, dict) and per:
            out.append("<p>Test accuracy per class:</p>" +
                       _table(["class"] + [str(k) for k in per], [["accuracy"] + [_pct(v) for v in per.values()]]))
    aware = m.get("aware") if m else None
    out.append(_figure(run / "train" / "curves.png",
                       "training curves" + (" (conversion-aware epochs shaded)" if isinstance(aware, dict) else ""),
                       "No training curves (train/curves.png)."))
    return "\n".join(out)


def _frame_model(run: Path, m: dict) -> dict:
    """What the conversion compared with: 'aware' or 'float', the aware budget, the float model's accuracy.

    Taken from the conversion metrics when they say it, else from the training metrics."""
    try:
        t = _json(run / "train" / "metrics.json") or {}
    except FormatError:
        t = {}
    bits = m.get("aware_bits") if isinstance(m.get("aware_bits"), dict) else t.get("aware")
    kind = m.get("frame_model") if m.get("frame_model") in ("float", "aware") else (
        "aware" if isinstance(bits, dict) else "float")
    float_acc = m.get("float_accuracy")
    if float_acc is None:
        float_acc = t.get("float_frame_accuracy") if kind == "aware" else m.get("frame_accuracy")
    return {"kind": kind, "bits": bits if isinstance(bits, dict) else None, "float_accuracy": float_acc}


def _within_words(loss, tol, ok) -> str:
    if not isinstance(loss, (int, float)) or not isinstance(tol, (int, float)):
        return ""
    if ok is None:
        ok = loss <= tol + 1e-9
    return (f"within tolerance: yes (loss {loss:.2f} pp &le; {tol:.2f} pp)" if ok else
            f"within tolerance: no (loss {loss:.2f} pp &gt; {tol:.2f} pp)")


def _accuracy(run: Path) -> str:
    m = _net_metrics(run)
    if not m:
        return _missing("No conversion metrics (net/metrics.json): the network was not converted.")
    fm = _frame_model(run, m)
    spike = m.get("spike_accuracy")
    if fm["kind"] == "aware":
        b = fm["bits"] or {}
        rows = [[f"frame model: aware (fake-quantized, fine-tuned for k={_fmt(b.get('weight_bits'))} "
                 f"p={_fmt(b.get('payload_bits'))})", _pct_ci(m.get("frame_accuracy"), m.get("frame_accuracy_ci"))],
                ["float model before fine-tuning", _pct(fm["float_accuracy"])]]
    else:
        rows = [["frame model: float", _pct_ci(m.get("frame_accuracy"), m.get("frame_accuracy_ci"))]]
    rows += [["integer network, evaluated densely", _pct_ci(m.get("quantized_accuracy"), m.get("quantized_accuracy_ci"))],
             ["single-spike network, event-driven", _pct_ci(spike, m.get("spike_accuracy_ci"))]]
    out = [_table(["model", "test accuracy"], rows)]
    loss = m.get("conversion_loss_pp")
    losses = [[f"against the {'aware' if fm['kind'] == 'aware' else 'float'} frame model",
               _pp_p(loss, m.get("conversion_loss_p"))]]
    if fm["kind"] == "aware":
        lf = m.get("loss_vs_float_pp")
        if lf is None and isinstance(fm["float_accuracy"], (int, float)) and isinstance(spike, (int, float)):
            lf = 100.0 * (fm["float_accuracy"] - spike)
        losses.append(["against the float model before fine-tuning", _pp(lf)])
    out.append(_table(["loss of the single-spike network", "percentage points"], losses))
    if isinstance(m.get("conversion_loss_p"), (int, float)):
        out.append(f'<p class="note">Intervals: 95 % Wilson score intervals on the {_e(_fmt(m.get("samples")))} test '
                   f"samples. The loss is paired (both models decide on the same samples): McNemar's exact test on "
                   f"the {_e(_fmt(m.get('frame_only_correct')))} samples only the frame model gets right and the "
                   f"{_e(_fmt(m.get('spike_only_correct')))} only the spike network gets right; a large p means the "
                   "loss cannot be told from noise on this test set.</p>")
    verdict = _within_words(loss, m.get("tolerance_pp"), m.get("within_tolerance"))
    if verdict:
        ok = "yes" in verdict.split("(")[0]
        out.append(f'<p class="{"ok" if ok else "bad"}">{verdict}</p>')
    facts = []
    if "coding" in m:
        facts.append(["coding", m["coding"]])
    for k in ("weight_bits", "payload_bits"):
        if k in m:
            facts.append([_label(k), m[k]])
    if "per_channel" in m:
        facts.append(["weight scales", "one per output channel" if m["per_channel"] else "one per tensor"])
    if isinstance(m.get("agreement"), (int, float)):
        facts.append(["spike network and frame model give the same class", _pct(m["agreement"])])
    n = m.get("test_samples", m.get("samples"))
    if n is not None:
        facts.append(["test samples", n])
    if facts:
        out.append(_table(["setting", "value"], facts))
    return "\n".join(out)


def _sweep(run: Path) -> str:
    d = run / "sweep"
    if not d.is_dir():
        return _missing("No sweep was run for this folder (sweep/ is missing). Run "
                        f"`snnconvert sweep {run / 'train'} --out {d}` and then `snnconvert report {run}`.")
    rec = _json(d / "recommendation.json")
    out = []
    if (d / "results.jsonl").is_file():
        from snnconvert.sweep import read_results   # every line checked; a damaged one is named and refused
        out.append(f"<p>{len(read_results(d / 'results.jsonl'))} grid points measured (sweep/results.jsonl).</p>")
    if rec:
        note = (rec.get("checkpoint") or {}).get("note") if isinstance(rec.get("checkpoint"), dict) else None
        if note is None:  # a sweep written before it recorded the checkpoint: the run's training says it
            try:
                aware = (_json(run / "train" / "metrics.json") or {}).get("aware")
            except FormatError:
                aware = None
            from snnconvert.sweep import checkpoint_info
            note = checkpoint_info(aware)["note"]
        if note:
            out.append(f'<p class="bad">Note: {_e(note)}.</p>')
        cls = "ok" if rec.get("point") else "bad"
        out.append(f'<p class="{cls}">{_e(rec.get("message", ""))}</p>')
        pt = rec.get("point") or rec.get("closest")
        if isinstance(pt, dict):
            what = "recommended point" if rec.get("point") else "most accurate point (none within tolerance)"
            out.append(_table([what, "value"], [
                ["coding", pt.get("coding", "n/a")], ["weight bits", pt.get("weight_bits", "n/a")],
                ["payload bits", pt.get("payload_bits", "n/a")],
                ["spike accuracy", _pct_ci(pt.get("spike_accuracy"), [pt.get("spike_accuracy_ci_low"),
                                                                     pt.get("spike_accuracy_ci_high")]
                                           if pt.get("spike_accuracy_ci_low") is not None else None)],
                ["loss against the frame model", _pp_p(pt.get("loss_pp"), pt.get("conversion_loss_p"))],
                ["weight memory (bits)", pt.get("weight_memory_bits", "n/a")],
                ["SOPs per sample", pt.get("sops_per_sample", "n/a")]]))
        out.append(f'<p class="note">Rule: {_e(rec.get("rule", ""))}. '
                   f'{_e(_fmt(rec.get("within_tolerance")))} of {_e(_fmt(rec.get("points")))} points are within '
                   "tolerance.</p>")
        wb = rec.get("within_budget")
        if isinstance(wb, dict) and wb.get("message"):
            out.append(f'<p class="{"ok" if wb.get("point") else "bad"}">{_e(wb["message"])}</p>'
                       f'<p class="note">Second rule: {_e(wb.get("rule", ""))}; {_e(_fmt(wb.get("fitting")))} of '
                       f'{_e(_fmt(rec.get("points")))} points fit the budget.</p>')
    else:
        out.append(_missing("No recommendation (sweep/recommendation.json): the sweep did not finish."))
    out.append(_figure(d / "heatmap.png", "loss against the frame model over weight bits x payload bits; outlined: "
                       "within tolerance; star: recommended", "No heatmap (sweep/heatmap.png)."))
    out.append(_figure(d / "pareto.png", "accuracy against weight memory and SOPs per sample, near the frame model; "
                       "Pareto front marked", "No Pareto plot (sweep/pareto.png)."))
    if (d / "codings.png").is_file():
        out.append(_figure(d / "codings.png", "what the codings change: latency in time steps and estimated energy",
                           ""))
    return "\n".join(out)


def _spikes(run: Path) -> str:
    m = _net_metrics(run)
    if not m:
        return _missing("No conversion metrics (net/metrics.json): spike counts are unknown.")
    out = [_kv(m, ["spikes_per_sample", "max_spikes_per_neuron", "sops_per_sample", "macs_per_sample",
                   "sops_per_mac"])]
    lat = m.get("latency")
    if isinstance(lat, dict) and lat:
        out.append("<p>Latency:</p>" + _table(["quantity", "value"], [[_label(k), v] for k, v in lat.items()]))
    layers = _layer_dict(m, "spikes_per_layer", run)
    if not layers:
        out.append(_missing("The conversion metrics hold no per-layer spike counts."))
        return "\n".join(out)
    out.append(_table(["layer", "spikes per sample (mean over the test set)"], [[k, v] for k, v in layers.items()]))
    plt = plots.pyplot()
    fig, ax = plt.subplots(figsize=(6.5, 2.6))
    ax.bar([str(k) for k in layers], [float(v or 0) for v in layers.values()], color="tab:blue")
    ax.set_ylabel("spikes per sample")
    ax.grid(axis="y", alpha=0.3)
    out.append(f'<img alt="chart" src="{plots.png_data_uri(fig)}">')
    return "\n".join(out)


def _confusion(run: Path) -> str:
    def one(png: Path, metrics: Path, caption: str) -> str:
        if png.is_file():
            return _figure(png, caption, "")
        m = _json(metrics)
        if m and isinstance(m.get("confusion"), list):
            classes = m.get("classes") if isinstance(m.get("classes"), list) else range(len(m["confusion"]))
            return f'<figure>{_confusion_png(m["confusion"], classes, caption)}<figcaption class="note">{_e(caption)}' \
                   "</figcaption></figure>"
        return _missing(f"No confusion matrix ({png.relative_to(run)} and {metrics.relative_to(run)} are missing).")
    try:
        aware = (_json(run / "train" / "metrics.json") or {}).get("aware")
    except FormatError:
        aware = None
    frame = ("frame model: aware (fake-quantized), test set" if isinstance(aware, dict) else
             "frame model: float, test set")
    return ('<div class="pair">' +
            one(run / "train" / "confusion.png", run / "train" / "metrics.json", frame) +
            one(run / "net" / "confusion.png", run / "net" / "metrics.json", "single-spike network (event-driven), test set") +
            "</div>")


def _accumulators(run: Path) -> str:
    m = _net_metrics(run)
    if not m:
        return _missing("No conversion metrics (net/metrics.json): accumulator widths are unknown.")
    widths = _layer_dict(m, "accumulator_bits", run)
    if not widths:
        return _missing("The conversion metrics hold no accumulator widths.")
    seen, over = _layer_dict(m, "max_abs_potential"), _layer_dict(m, "overflows")
    rows = []
    for name, bits in widths.items():
        v = seen.get(name)
        used = None if not isinstance(v, int) else int(v).bit_length() + 1  # signed bits the data actually needed
        rows.append([name, bits, "" if v is None else v, "" if used is None else used, over.get(name, "")])
    declared = m.get("declared_accumulator_bits")
    note = ("no declared accumulator width: every layer uses its worst-case width" if not declared else
            f"declared accumulator width {declared} bits; values beyond it saturate or wrap and are counted")
    return (_table(["layer", "worst-case bits", "largest |V| on test data", "bits used on test data", "overflows"],
                   rows) +
            '<p class="note">Worst case: |V| &le; fan-in &middot; max|W| &middot; Q<sub>in</sub> + |B|, signed; '
            f"{_e(note)}.</p>")


def _num(v):
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def _energy(run: Path) -> str:
    m = _net_metrics(run)
    e = m.get("energy") if m else None
    if not isinstance(e, dict):
        return _missing("No energy estimate in the conversion metrics (net/metrics.json).") + \
            f'<p class="note">{_e(ENERGY_CAVEAT)}</p>'
    get = lambda k: _num(e.get(k, m.get(k)))  # noqa: E731
    spike, dense, frame = get("spike_pj_per_sample"), get("dense_int_pj_per_sample"), get("frame_pj_per_sample")
    k, p = m.get("weight_bits"), m.get("payload_bits")
    rows = []
    for name, v in ((f"single-spike network (event-driven, {_fmt(k)}-bit weights, {_fmt(p)}-bit payloads)", spike),
                    (f"dense integer network at the same widths ({_fmt(k)}-bit weights, {_fmt(p)}-bit values)", dense),
                    ("float frame model (fp32 multiply-adds)", frame)):
        if v is not None:
            share = "" if v is spike or spike is None or not v else f"{100 * spike / v:.1f} %"
            rows.append([name, f"{v / 1000:,.1f}", share])
    out = [f"<p><strong>Estimate, not a measurement.</strong> {_e(ENERGY_CAVEAT)}</p>",
           _table(["network (estimate)", "nJ per sample (estimate)", "spike network's share"], rows)]
    if dense is None:
        out.append('<p class="note">No dense integer baseline in these metrics: the gain against the float model '
                   "mixes the gain from fewer bits with the gain from sparsity.</p>")
    else:
        out.append('<p class="note">Spike against dense integer: the gain from sparsity alone; dense integer against '
                   "float: the gain from fewer bits.</p>")
    if e.get("source"):
        out.append(f'<p class="note">Per-operation energies: {_e(e["source"])}</p>')
    notes = e.get("notes") or []
    if isinstance(notes, list) and notes:
        out.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>")
    return "\n".join(out)


def _hardware(run: Path) -> str:
    m = _net_metrics(run)
    est = m.get("hardware_estimate") if m else None
    if not isinstance(est, dict) or not isinstance(est.get("layers"), list):
        return _missing("No hardware estimate in the conversion metrics (net/metrics.json).")
    from snnconvert import cost
    t, e, hw = est["total"], est["energy"], est["hardware"]
    out = ["<p><strong>Estimate from a stated datapath model, not a synthesis result.</strong> "
           f"{_e(_fmt(hw.get('clock_mhz')))} MHz, "
           f"{'pipelined' if hw.get('pipelined') else 'one sample at a time'}, "
           f"{_e(_fmt(hw.get('block_kbits')))} Kbit block RAMs; see the README, 'Hardware cost model'.</p>"]
    b = m.get("budget")
    if isinstance(b, dict) and b.get("message"):
        out.append(f'<p class="{"ok" if b.get("fits") else "bad"}">Budget: {_e(b["message"])}</p>')
    rows = [[x["name"], x["lanes"], f"{x['input_events_mean']:.1f}", f"{x['cycles_mean']:,.1f}", x["cycles_worst"],
             f"{x['memory_bits']['total']:,}", x["block_rams"]["total"],
             f"{x['bus']['address_bits']} + {x['bus']['payload_bits']}"] for x in est["layers"]]
    rows.append(["total", "", "", f"{t['cycles_mean']:,.1f}", t["cycles_worst"], f"{t['memory_bits']['total']:,}",
                 t["block_rams"], ""])
    out.append(_table(["layer", "lanes", "input events (mean)", "cycles (mean)", "cycles (worst)", "memory bits",
                       "block RAMs", "address + payload bits"], rows))
    sps = "n/a" if t.get("samples_per_s") is None else f"{t['samples_per_s']:,.0f}"
    out.append(f"<p>Latency {t['latency_us_mean']:.2f} µs mean, {t['latency_us_worst']:.2f} µs worst on the test "
               f"split; {sps} samples/s. Energy per sample: {e['spike']['total_pj'] / 1e3:,.2f} nJ spike datapath, "
               f"{e['dense_int']['total_pj'] / 1e3:,.2f} nJ dense integer datapath (same widths), "
               f"{e['float']['total_pj'] / 1e3:,.2f} nJ float (arithmetic and memory accesses; estimates).</p>")
    out.append(f'<img alt="cycles and memory per layer" src="{plots.png_data_uri(cost.layers_figure(est))}">')
    out.append("<ul>" + "".join(f"<li>{_e(a)}</li>" for a in est.get("assumptions", [])) + "</ul>")
    return "\n".join(out)


_KINDS = [  # (kind, test on the path relative to the export folder), first match wins
    ("manifest: what every file holds", lambda r: r == "manifest.json"),
    ("recipe", lambda r: r.endswith(".toml")),
    ("memory files for HDL ($readmemh hex words)", lambda r: "/" not in r and r.endswith(".mem")),
    ("memory files for FPGA tools (.coe/.mif)", lambda r: "/" not in r and r.endswith((".coe", ".mif"))),
    ("memory files (Intel HEX)", lambda r: "/" not in r and r.endswith(".hex")),
    ("tables (CSV)", lambda r: "/" not in r and r.endswith(".csv")),
    ("archives (NPZ)", lambda r: r.endswith(".npz")),
    ("golden vectors (CSV, one folder per sample)", lambda r: r.startswith("vectors/")),
    ("reference models (HDL)", lambda r: r.endswith((".v", ".sv", ".vhd"))),
    ("reference models (C)", lambda r: r.endswith((".c", ".h"))),
]


def _names(rel: list[str]) -> str:
    """Short listing: per-layer tables grouped by layer, vector folders counted, else the first names."""
    import re
    layers: dict = {}
    rest = []
    for r in rel:
        m_ = re.match(r"^(L\d+_[A-Za-z0-9]+)_(\w+)\.\w+$", r)
        if m_:
            layers.setdefault(m_.group(1), []).append(m_.group(2))
        else:
            rest.append(r)
    parts = [f"{k}: {', '.join(sorted(set(v)))}" for k, v in layers.items()]
    folders = sorted({r.split("/")[1] for r in rest if r.count("/") >= 2})
    if folders:
        parts.append(f"{len(folders)} folders {folders[0]} .. {folders[-1]}, "
                     f"{len(rest) // max(1, len(folders))} files each")
        rest = [r for r in rest if r.count("/") < 2]
    parts += rest[:6] + ([f"and {len(rest) - 6} more"] if len(rest) > 6 else [])
    return "; ".join(parts)


def _size(n: int) -> str:
    for unit, div in (("MB", 1e6), ("kB", 1e3)):
        if n >= div:
            return f"{n / div:,.1f} {unit}"
    return f"{n} B"


def _export_table(d: Path) -> str:
    paths = sorted(p for p in d.rglob("*") if p.is_file())
    groups: dict = {}
    for p in paths:
        rel = p.relative_to(d).as_posix()
        kind = next((k for k, test in _KINDS if test(rel)), "other files")
        groups.setdefault(kind, []).append((rel, p.stat().st_size))
    order = [k for k, _ in _KINDS] + ["other files"]
    rows = [[k, len(groups[k]), _size(sum(s for _, s in groups[k])), _names([r for r, _ in groups[k]])]
            for k in order if k in groups]
    return (f"<p>{len(paths)} files, {_size(sum(p.stat().st_size for p in paths))}:</p>" +
            _table(["kind", "files", "size", "names"], rows))


def _export(run: Path) -> str:
    d = run / "export"
    out = []
    man = _json(d / "manifest.json")
    if man is None:
        out.append(_missing(f"No export (export/manifest.json is missing). Run `snnconvert export {run / 'net'} {d}`."))
    else:
        out.append(f"<p>Export folder: <code>{_e(d.resolve())}</code></p>")
        facts = [[_label(k), man[k]] for k in ("format", "version", "created", "coding", "weight_bits", "payload_bits")
                 if k in man and not isinstance(man[k], (dict, list))]
        if "per_channel" in man:
            facts.append(["weight scales", "one per output channel" if man["per_channel"] else "one per tensor"])
        out.append(_table(["field", "value"], facts) if facts else "")
        out.append(_export_table(d))
    v = _json(run / "verify.json")
    if v is None:
        out.append(_missing("Not verified (verify.json is missing). Run `snnconvert verify` on the export folder."))
    elif v.get("passed"):
        vec = (man or {}).get("vectors") or {}
        directed = len(vec.get("directed") or []) if isinstance(vec, dict) else 0
        n = v.get("samples")
        what = (f"{_e(_fmt(n))} golden vectors ({_e(_fmt(n - directed))} test samples and {directed} directed "
                "vectors)") if isinstance(n, int) and 0 < directed <= n else f"{_e(_fmt(n if n is not None else 'n/a'))} golden vectors"
        out.append(f'<p class="ok">verify passed: {what} re-simulated bit-exactly from the export folder alone.</p>')
    else:
        mm = v.get("first_mismatch")
        where = _fmt(mm) if isinstance(mm, dict) else _fmt(mm)
        out.append(f'<p class="bad">verify FAILED: first mismatch: {_e(where)}</p>')
    return "\n".join(out)


_BUILDERS = {"overview": _overview, "recipe": _recipe, "data": _data, "training": _training,
             "accuracy": _accuracy, "sweep": _sweep, "spikes": _spikes, "confusion": _confusion,
             "accumulators": _accumulators, "energy": _energy, "hardware": _hardware, "export": _export}
