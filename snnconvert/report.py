"""One self-contained report.html for a run folder (the layout `snnconvert run` writes).

Every image is inlined as a base64 data URI and the page links to nothing, so it opens offline
and can be mailed as one file. Every text taken from the run folder is HTML-escaped. A piece
that is missing (no sweep, no export) is stated in its section rather than left out.
"""

from __future__ import annotations

import base64
import html
import io
import json
from pathlib import Path

from snnconvert import files
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
th{background:#f3f3f3}td.l,th.l{text-align:left}pre{background:#f7f7f7;padding:.8em;overflow:auto;font-size:.85em;max-height:30em}
img{max-width:100%;height:auto}.pair{display:flex;gap:1em;flex-wrap:wrap}.pair figure{flex:1;min-width:300px;margin:0}
.missing{color:#8a5a00;background:#fff6e0;padding:.4em .7em;border-left:4px solid #e0a800}
.ok{color:#1a6b1a;font-weight:bold}.bad{color:#a01818;font-weight:bold}.note{color:#555;font-size:.92em}
nav a{margin-right:.8em}
"""


def write_report(run_dir) -> Path:
    """Write `run_dir/report.html` atomically from whatever the run folder holds; return its path."""
    run = Path(run_dir)
    if not run.is_dir():
        raise UsageError(f"run folder not found: {run}")
    parts = {}
    for sid, fn in _BUILDERS.items():
        try:
            parts[sid] = fn(run)
        except FormatError as exc:  # one unreadable file costs its section, not the report
            parts[sid] = _missing(f"This section cannot be shown: {exc}")
    name = _recipe_name(run) or run.name
    nav = " ".join(f'<a href="#{sid}">{_e(title)}</a>' for sid, title in SECTIONS)
    body = "\n".join(f'<section id="{sid}">\n<h2>{_e(title)}</h2>\n{parts[sid]}\n</section>' for sid, title in SECTIONS)
    page = (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f'<title>snnconvert report: {_e(name)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n'
            f'<h1>snnconvert report: {_e(name)}</h1>\n<nav>{nav}</nav>\n{body}\n</body>\n</html>\n')
    return files.atomic_write_text(run / "report.html", page)


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


def _png_of(fig) -> str:
    import matplotlib.pyplot as plt
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    plt.close(fig)
    return f'<img alt="chart" src="data:image/png;base64,{base64.b64encode(buf.getvalue()).decode("ascii")}">'


def _fmt(v) -> str:
    if isinstance(v, bool) or v is None:
        return str(v)
    if isinstance(v, float):
        if abs(v) >= 1e4:
            return f"{v:,.0f}"
        return f"{v:,.4g}" if abs(v) >= 1e-3 or v == 0 else f"{v:.3e}"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, (list, dict)):
        return json.dumps(v)
    return str(v)


def _table(headers: list[str], rows: list[list], left: int = 1) -> str:
    def cell(tag, i, v):
        cls = ' class="l"' if i < left else ""
        return f"<{tag}{cls}>{_e(_fmt(v) if tag == 'td' else v)}</{tag}>"
    head = "".join(cell("th", i, h) for i, h in enumerate(headers))
    body = "".join("<tr>" + "".join(cell("td", i, v) for i, v in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _kv(d: dict, keys=None) -> str:
    keys = [k for k in (keys or d) if k in d and not str(k).startswith("_")]
    return _table(["field", "value"], [[k, d[k]] for k in keys])


def _pct(v) -> str:
    return "n/a" if v is None else f"{100 * float(v):.2f} %"


def _recipe_name(run: Path) -> str | None:
    s = _json(run / "summary.json")
    return s.get("name") if isinstance(s, dict) else None


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


def _confusion_png(cm, title: str) -> str:
    """Draw a confusion matrix (rows = true class) when its PNG is missing but the numbers exist."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np
    cm = np.asarray(cm)  # (classes, classes)
    fig, ax = plt.subplots(figsize=(4.2, 3.8))
    ax.imshow(cm, cmap="Blues")
    for i in range(cm.shape[0]):
        for j in range(cm.shape[1]):
            if cm[i, j]:
                ax.text(j, i, str(cm[i, j]), ha="center", va="center", fontsize=7,
                        color="white" if cm[i, j] > cm.max() / 2 else "black")
    ax.set_xlabel("predicted")
    ax.set_ylabel("true")
    ax.set_title(title, fontsize=9)
    return _png_of(fig)


# --- sections ------------------------------------------------------------------------------

def _overview(run: Path) -> str:
    out = [f"<p>Run folder: <code>{_e(run.resolve())}</code></p>"]
    stages = _json(run / "stages.json")
    if not stages:
        out.append(_missing("No stage log (stages.json): this folder was not made by `snnconvert run`, "
                            "or the run stopped before its first stage finished."))
    else:
        items = stages.get("stages", stages) if isinstance(stages, dict) else {}
        from snnconvert.pipeline import STAGES
        items = items if isinstance(items, dict) else {}
        rank = {n: i for i, n in enumerate(STAGES)}
        rows = []
        for name, st in sorted(items.items(), key=lambda kv: rank.get(kv[0], len(rank))):  # job order
            if isinstance(st, dict):
                rows.append([name, st.get("status", ""), st.get("seconds", ""), st.get("fingerprint",
                                                                                      st.get("input_fingerprint", ""))])
        out.append(_table(["stage", "status", "seconds", "input fingerprint"], rows) if rows else
                   f"<pre>{_e(json.dumps(stages, indent=2))}</pre>")
    return "\n".join(out)


def _recipe(run: Path) -> str:
    path = run / "recipe.toml"
    if not path.is_file():
        return _missing("No resolved recipe (recipe.toml) in the run folder.")
    return f"<pre>{_e(path.read_text(encoding='utf-8'))}</pre>"


def _data(run: Path) -> str:
    s = _json(run / "data" / "summary.json")
    out = [_kv(s) if s else _missing("No data summary (data/summary.json).")]
    out.append('<div class="pair">' +
               _figure(run / "data" / "events.png", "event rate, detected bursts and frame windows",
                       "No event plot (data/events.png).") +
               _figure(run / "data" / "frames.png", "example frames", "No frame plot (data/frames.png).") + "</div>")
    return "\n".join(out)


def _training(run: Path) -> str:
    m = _json(run / "train" / "metrics.json")
    out = [_kv({k: v for k, v in m.items() if not isinstance(v, (list, dict))}) if m else
           _missing("No training metrics (train/metrics.json).")]
    out.append(_figure(run / "train" / "curves.png", "training curves", "No training curves (train/curves.png)."))
    return "\n".join(out)


def _accuracy(run: Path) -> str:
    m = _net_metrics(run)
    if not m:
        return _missing("No conversion metrics (net/metrics.json): the network was not converted.")
    rows = [["frame model (float)", _pct(m.get("frame_accuracy"))],
            ["integer network, evaluated densely", _pct(m.get("quantized_accuracy"))],
            ["single-spike network, event-driven", _pct(m.get("spike_accuracy"))]]
    out = [_table(["model", "test accuracy"], rows)]
    facts = {k: m[k] for k in ("conversion_loss_pp", "agreement", "coding", "weight_bits", "payload_bits",
                              "per_channel", "test_samples") if k in m}
    if facts:
        out.append(_kv(facts))
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
        cls = "ok" if rec.get("point") else "bad"
        out.append(f'<p class="{cls}">{_e(rec.get("message", ""))}</p>')
        out.append(f'<p class="note">Rule: {_e(rec.get("rule", ""))}.</p>')
    else:
        out.append(_missing("No recommendation (sweep/recommendation.json): the sweep did not finish."))
    out.append(_figure(d / "heatmap.png", "spike accuracy over weight bits x payload bits",
                       "No heatmap (sweep/heatmap.png)."))
    out.append(_figure(d / "pareto.png", "accuracy against weight memory and SOPs per sample; Pareto front marked",
                       "No Pareto plot (sweep/pareto.png)."))
    return "\n".join(out)


def _spikes(run: Path) -> str:
    m = _net_metrics(run)
    if not m:
        return _missing("No conversion metrics (net/metrics.json): spike counts are unknown.")
    out = [_kv(m, ["spikes_per_sample", "max_spikes_per_neuron", "sops_per_sample", "macs_per_sample",
                   "sops_per_mac"])]
    layers = _layer_dict(m, "spikes_per_layer", run)
    if not layers:
        out.append(_missing("The conversion metrics hold no per-layer spike counts."))
        return "\n".join(out)
    out.append(_table(["layer", "spikes per sample (mean over the test set)"], [[k, v] for k, v in layers.items()]))
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, ax = plt.subplots(figsize=(6.5, 2.6))
    ax.bar([str(k) for k in layers], [float(v or 0) for v in layers.values()], color="tab:blue")
    ax.set_ylabel("spikes per sample")
    ax.grid(axis="y", alpha=0.3)
    out.append(_png_of(fig))
    return "\n".join(out)


def _confusion(run: Path) -> str:
    def one(png: Path, metrics: Path, caption: str) -> str:
        if png.is_file():
            return _figure(png, caption, "")
        m = _json(metrics)
        if m and isinstance(m.get("confusion"), list):
            return f'<figure>{_confusion_png(m["confusion"], caption)}<figcaption class="note">{_e(caption)}' \
                   "</figcaption></figure>"
        return _missing(f"No confusion matrix ({png.relative_to(run)} and {metrics.relative_to(run)} are missing).")
    return ('<div class="pair">' +
            one(run / "train" / "confusion.png", run / "train" / "metrics.json", "frame model (float), test set") +
            one(run / "net" / "confusion.png", run / "net" / "metrics.json", "spike model (event-driven), test set") +
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
        used = None if v is None else int(v).bit_length() + 1  # signed bits the data actually needed
        rows.append([name, bits, "" if v is None else v, "" if used is None else used, over.get(name, "")])
    declared = m.get("declared_accumulator_bits")
    note = ("no declared accumulator width: every layer uses its worst-case width" if not declared else
            f"declared accumulator width {declared} bits; values beyond it saturate or wrap and are counted")
    return (_table(["layer", "worst-case bits", "largest |V| on test data", "bits used on test data", "overflows"],
                   rows) +
            '<p class="note">Worst case: |V| &le; fan-in &middot; max|W| &middot; Q<sub>in</sub> + |B|, signed; '
            f"{_e(note)}.</p>")


def _energy(run: Path) -> str:
    m = _net_metrics(run)
    e = m.get("energy") if m else None
    if not isinstance(e, dict):
        return _missing("No energy estimate in the conversion metrics (net/metrics.json).") + \
            f'<p class="note">{_e(ENERGY_CAVEAT)}</p>'
    rows = [[k, e[k]] for k in ("spike_pj_per_sample", "frame_pj_per_sample", "ratio_spike_to_frame") if k in e]
    out = [f"<p><strong>Estimate, not a measurement.</strong> {_e(ENERGY_CAVEAT)}</p>",
           _table(["quantity (estimate)", "value"], rows)]
    if e.get("source"):
        out.append(f'<p class="note">Per-operation energies: {_e(e["source"])}</p>')
    notes = e.get("notes") or []
    if notes:
        out.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>")
    return "\n".join(out)


def _export(run: Path) -> str:
    d = run / "export"
    out = []
    man = _json(d / "manifest.json")
    if man is None:
        out.append(_missing(f"No export (export/manifest.json is missing). Run `snnconvert export {run / 'net'} {d}`."))
    else:
        out.append(f"<p>Export folder: <code>{_e(d.resolve())}</code></p>")
        facts = {k: man[k] for k in ("format", "version", "created", "coding", "weight_bits", "payload_bits")
                 if k in man}
        out.append(_kv(facts) if facts else "")
        listing = sorted(str(p.relative_to(d)) for p in d.rglob("*") if p.is_file())
        out.append(f"<p>{len(listing)} files; tables: "
                   f"{_e(', '.join(x for x in listing if '/' not in x and x != 'manifest.json') or 'none')}</p>")
    v = _json(run / "verify.json")
    if v is None:
        out.append(_missing("Not verified (verify.json is missing). Run `snnconvert verify` on the export folder."))
    elif v.get("passed"):
        out.append(f'<p class="ok">verify passed: {_e(v.get("samples", "?"))} golden samples re-simulated '
                   "bit-exactly from the export folder alone.</p>")
    else:
        out.append(f'<p class="bad">verify FAILED: first mismatch {_e(json.dumps(v.get("first_mismatch")))}</p>')
    return "\n".join(out)


_BUILDERS = {"overview": _overview, "recipe": _recipe, "data": _data, "training": _training,
             "accuracy": _accuracy, "sweep": _sweep, "spikes": _spikes, "confusion": _confusion,
             "accumulators": _accumulators, "energy": _energy, "export": _export}
