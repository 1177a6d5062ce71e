"""`snnconvert classify NET_OR_EXPORT RECORDING...`: the front end and the integer network on continuous recordings."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HELP = ("run the integer front end and the converted network on continuous recordings: one decision per window "
        "the rate counter finds")

LABEL_COLUMNS = ("start_us", "end_us", "label")


def add_arguments(p) -> None:
    p.add_argument("net", metavar="NET_OR_EXPORT",
                   help="folder written by `snnconvert convert` (network.json) or `snnconvert export` (manifest.json); "
                        "the front end's settings come from the recipe.toml beside it")
    p.add_argument("recordings", metavar="RECORDING", nargs="+", help="event files (.npz, .csv, .bin)")
    p.add_argument("--labels", metavar="FILE", action="append",
                   help="label file of a recording (CSV start_us,end_us,label: one stimulus per line; label = class "
                        "index); give it once per RECORDING, in the same order")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument("--csv", metavar="OUT", help="also write the rows as CSV to OUT")
    p.add_argument("--plot", metavar="OUT.png",
                   help="draw each recording's rate trace with the thresholds and every window labelled with its decision")
    p.add_argument("--sensor", metavar="WxH", help="sensor size for files that store none (default: the recipe's)")


@dataclass
class Recording:
    """One recording's front-end results and decisions."""

    path: Path
    events: int
    duration_us: int
    trace: dict
    rows: list = field(default_factory=list)
    stimuli: np.ndarray | None = None
    missed: list = field(default_factory=list)


def load_network(folder):
    """(IntNetwork, recipe dict, class names) of a convert folder (network.json) or an export folder
    (manifest.json); the recipe is the recipe.toml saved beside it."""
    from snnconvert import recipe as recipe_mod
    from snnconvert.errors import UsageError
    folder = Path(folder)
    if (folder / "network.json").is_file():
        from snnconvert.intnet import IntNetwork
        net = IntNetwork.load(folder)
    elif (folder / "manifest.json").is_file():
        from snnconvert.export.cmodel import load_export
        net = load_export(folder)[1]
    else:
        raise UsageError(f"{folder}: holds neither network.json (a `snnconvert convert` folder) nor manifest.json "
                         f"(a `snnconvert export` folder)")
    if not (folder / "recipe.toml").is_file():
        raise UsageError(f"{folder / 'recipe.toml'}: file not found; classify takes the front end's settings from "
                         f"the recipe saved beside the network")
    r = recipe_mod.load(folder / "recipe.toml")
    fr = r["frames"]
    if fr["window"] != "burst" or fr["per_recording"] != "one":
        raise UsageError(f"{folder / 'recipe.toml'}: classify needs frames.window = \"burst\" and frames.per_recording "
                         f"= \"one\" (one frame per window of the rate counter); got window = {fr['window']!r}, "
                         f"per_recording = {fr['per_recording']!r}")
    classes = net.meta.get("classes") if isinstance(net.meta, dict) else None
    if not (isinstance(classes, list) and len(classes) == net.n_classes):
        classes = [str(c) for c in range(net.n_classes)]
    return net, r, [str(c) for c in classes]


def read_labels(path, n_classes: int) -> np.ndarray:
    """(K, 3) int64 [start_us, end_us, label] of a label file; every field checked."""
    from snnconvert.errors import FormatError, UsageError
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"label file not found: {path}")
    lines = path.read_text(encoding="utf-8").splitlines()
    if not lines or tuple(c.strip() for c in lines[0].split(",")) != LABEL_COLUMNS:
        raise FormatError(f"{path}: line 1: expected the header {','.join(LABEL_COLUMNS)}")
    out = []
    for no, line in enumerate(lines[1:], 2):
        if not line.strip():
            continue
        parts = line.split(",")
        try:
            a, b, c = (int(v) for v in parts)
        except ValueError:
            raise FormatError(f"{path}: line {no}: expected 3 integers start_us,end_us,label; got {line!r}") from None
        if not (0 <= a < b):
            raise FormatError(f"{path}: line {no}: need 0 <= start_us < end_us; got {a}, {b}")
        if not 0 <= c < n_classes:
            raise FormatError(f"{path}: line {no}: label {c} is not a class index in [0, {n_classes - 1}]")
        if out and a < out[-1][1]:
            raise FormatError(f"{path}: line {no}: stimuli must be in time order and must not overlap")
        out.append((a, b, c))
    return np.asarray(out, np.int64).reshape(-1, 3)


def front_end_of(recipe: dict, stream):
    from snnconvert import frontend
    return frontend.FrontEnd.from_section(recipe["frames"], stream.width, stream.height)


def classify_recording(net, recipe: dict, stream, path) -> tuple[Recording, list[np.ndarray]]:
    """The front end on one stream: windows, gated event counts and frames (the network runs later,
    once over the windows of every recording). All windows at once: the frames are pixel_values of
    `frontend.window_counts` (equal to frame(gate(...)) of each window), the gated events per window
    are their nonzero pixels."""
    from snnconvert import frontend
    params = front_end_of(recipe, stream)
    if (params.channels, params.size, params.size) != tuple(net.input_shape):
        from snnconvert.errors import UsageError
        raise UsageError(f"the recipe's front end makes frames of shape {(params.channels, params.size, params.size)}, "
                         f"the network takes {tuple(net.input_shape)}")
    cols = frontend.columns(stream)
    tr = frontend.trace(cols.t, params)
    rec = Recording(Path(path), len(stream), int(cols.t[-1] - cols.t[0]) if len(stream) else 0, tr)
    win = tr["windows"]
    frames = frontend.pixel_values(frontend.window_counts(cols, win, params), params)  # (K, C, S, S)
    n_in = np.diff(np.searchsorted(cols.t, win, side="left"), axis=1)[:, 0]
    gated = np.count_nonzero(frames, axis=(1, 2, 3))  # the gate emits one event per nonzero pixel
    rec.rows = [{"file": str(path), "window": k + 1, "start_us": s, "end_us": e, "events_in": a, "events_gated": g}
                for k, ((s, e), a, g) in enumerate(zip(win.tolist(), n_in.tolist(), gated.tolist()))]
    return rec, list(frames)


def decide(net, frames: list[np.ndarray]) -> dict:
    """The integer network on the frames (vectorized simulator): decisions, margins, ttfs early decisions."""
    from snnconvert.sim import simulate
    if not frames:
        return {"decision": [], "margin": [], "early": [], "step": []}
    from snnconvert import arith
    x = arith.quantize_input(np.stack(frames), net.input_q)       # the one input rule: round, clamp to 0..Q_in
    res = simulate(net, x, record=False, stats=False)  # decisions, potentials and ttfs early decisions only
    pot = np.sort(res.potentials, axis=1)
    margin = pot[:, -1] - pot[:, -2] if pot.shape[1] > 1 else pot[:, -1]
    return {"decision": res.decisions.tolist(), "margin": margin.tolist(), "early": res.early_decisions.tolist(),
            "step": res.first_spike_step.tolist()}


def score(rec: Recording, stimuli: np.ndarray, pick: str) -> None:
    """Match windows to stimuli: a window belongs to the stimulus whose span holds its start. Per
    stimulus, the recipe's pick rule (first window, or the one with most events in) gives the
    scored decision; other windows of a stimulus are "extra", windows outside every stimulus "none".
    A stimulus without a window is missed (and counts as wrong)."""
    rec.stimuli = stimuli
    starts = np.asarray([r["start_us"] for r in rec.rows], np.int64)
    idx = np.searchsorted(stimuli[:, 0], starts, side="right") - 1 if len(stimuli) else np.full(starts.size, -1)
    for r, k in zip(rec.rows, idx.tolist()):
        inside = k >= 0 and r["start_us"] < stimuli[k, 1]
        r["stimulus"] = k + 1 if inside else None
        r["label"] = int(stimuli[k, 2]) if inside else None
        r["right"] = "none" if not inside else "extra"
    for k in range(len(stimuli)):
        mine = [r for r in rec.rows if r["stimulus"] == k + 1]
        if not mine:
            rec.missed.append(k + 1)
            continue
        chosen = mine[0] if pick == "first" else max(mine, key=lambda r: (r["events_in"], -r["start_us"]))
        chosen["right"] = "yes" if chosen["decision"] == chosen["label"] else "no"


def run(args) -> int:
    from snnconvert import console, stats
    from snnconvert.errors import UsageError
    from snnconvert.events import parse_sensor, read_events
    from snnconvert.files import atomic_write_text, check_output_path

    for opt in ("csv", "plot"):
        if getattr(args, opt):
            check_output_path(getattr(args, opt), f"--{opt}")
    if args.labels is not None and len(args.labels) != len(args.recordings):
        raise UsageError(f"--labels given {len(args.labels)} times for {len(args.recordings)} recordings; give one "
                         f"label file per RECORDING, in the same order")
    net, r, classes = load_network(args.net)
    side = int(r["data"]["sensor_side"])
    sensor = parse_sensor(args.sensor) if args.sensor else None
    recs, frames = [], []
    for path in console.bar(args.recordings, desc="front end", unit="recording", enabled=not args.quiet):
        stream = read_events(path, sensor=sensor, default_sensor=(side, side), time_unit=r["data"]["time_unit"])
        rec, fr = classify_recording(net, r, stream, path)
        recs.append(rec)
        frames += fr
    out = decide(net, frames)
    i = 0
    ttfs = net.coding == "ttfs"
    for rec in recs:
        for row in rec.rows:
            row["decision"], row["margin"] = int(out["decision"][i]), int(out["margin"][i])
            row["decision_name"] = classes[row["decision"]]
            if ttfs:
                row["early_decision"], row["early_step"] = int(out["early"][i]), int(out["step"][i])
            i += 1
    if args.labels:
        for rec, lab in zip(recs, args.labels):
            score(rec, read_labels(lab, net.n_classes), r["frames"]["pick"])
    result = summary(recs, net, r, args, stats)
    if args.csv:
        atomic_write_text(args.csv, csv_text(recs, ttfs, bool(args.labels)))
    if args.plot:
        plot(recs, classes, args.plot)
    if args.json:
        console.echo(json.dumps(result, sort_keys=True))
    else:
        console.echo(text(result, ttfs, bool(args.labels)))
    return 0


def summary(recs: list[Recording], net, r: dict, args, stats) -> dict:
    """The --json object: front end, network, rows, and with labels the accuracy and its interval."""
    fr = r["frames"]
    res = {"network": str(args.net), "coding": net.coding, "n_classes": net.n_classes,
           "front_end": {k: fr[k] for k in ("bin_us", "relative", "upper", "lower", "background_bins",
                                            "min_duration_us", "merge_gap_us", "size", "mode", "threshold",
                                            "max_count", "pick")},
           "recordings": [{"file": str(x.path), "events": x.events, "duration_us": x.duration_us,
                           "windows": len(x.rows)} for x in recs],
           "rows": [row for x in recs for row in x.rows]}
    if args.labels:
        scored = [row for row in res["rows"] if row["right"] in ("yes", "no")]
        n = sum(len(x.stimuli) for x in recs)
        k = sum(row["right"] == "yes" for row in scored)
        lo, hi = stats.wilson_interval(k, n)
        res["labels"] = {"stimuli": n, "found": n - sum(len(x.missed) for x in recs),
                         "missed": [[str(x.path), m] for x in recs for m in x.missed], "right": k,
                         "accuracy": k / n if n else None, "ci95": [lo, hi],
                         "extra_windows": sum(row["right"] == "extra" for row in res["rows"]),
                         "windows_outside": sum(row["right"] == "none" for row in res["rows"])}
    return res


def _columns(ttfs: bool, labels: bool) -> list[tuple[str, str, int]]:
    cols = [("file", "file", 0), ("window", "#", 3), ("start_us", "start_us", 10), ("end_us", "end_us", 10),
            ("events_in", "events", 7), ("events_gated", "gated", 6), ("decision_name", "decision", 8),
            ("margin", "margin", 7)]
    if ttfs:
        cols += [("early_decision", "early", 5), ("early_step", "step", 4)]
    if labels:
        cols += [("stimulus", "stimulus", 8), ("label", "label", 5), ("right", "right", 5)]
    return cols


def text(res: dict, ttfs: bool, labels: bool) -> str:
    fe = res["front_end"]
    rule = (f"{fe['upper']:g}x / {fe['lower']:g}x the background of {fe['background_bins']} bins" if fe["relative"]
            else f"{fe['upper']:g} / {fe['lower']:g} events/s")
    n = len(res["recordings"])
    head_line = (f"classify: {n} recording{'s' if n != 1 else ''}, {res['coding']} network of {res['n_classes']} "
                 f"classes; front end: {fe['bin_us']} us bins, {rule}, {fe['mode']} {fe['size']}x{fe['size']} grid")
    lines = [head_line]
    cols = _columns(ttfs, labels)
    width = max([len(row["file"]) for row in res["rows"]] + [4])
    head = [f"{'file':<{width}}"] + [f"{h:>{w}}" for key, h, w in cols[1:]]
    lines.append("  ".join(head))
    for row in res["rows"]:
        cells = [f"{row['file']:<{width}}"]
        for key, _, w in cols[1:]:
            v = row.get(key)
            cells.append(f"{'-' if v is None else v:>{w}}")
        lines.append("  ".join(cells))
    for rec in res["recordings"]:
        if not rec["windows"]:
            lines.append(f"{rec['file']}: no window ({rec['events']} events)")
    lab = res.get("labels")
    if lab:
        lo, hi = lab["ci95"]
        acc = f"{100 * lab['accuracy']:.1f} %" if lab["accuracy"] is not None else "-"
        lines.append(f"stimuli   {lab['stimuli']}, found {lab['found']}, missed {len(lab['missed'])}; "
                     f"{lab['extra_windows']} more windows inside stimuli (not scored), "
                     f"{lab['windows_outside']} outside")
        lines.append(f"accuracy  {lab['right']}/{lab['stimuli']} = {acc} (95 % CI [{100 * lo:.1f}, {100 * hi:.1f}] %, "
                     f"Wilson; a missed stimulus counts as wrong)")
    return "\n".join(lines)


def csv_text(recs: list[Recording], ttfs: bool, labels: bool) -> str:
    keys = [k for k, _, _ in _columns(ttfs, labels)]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(keys)
    for rec in recs:
        for row in rec.rows:
            w.writerow(["" if row.get(k) is None else row.get(k) for k in keys])
    return buf.getvalue()


def plot(recs: list[Recording], classes: list[str], path) -> Path:
    """One panel per recording (`plots.draw_rate`): rate, thresholds, windows labelled with their
    decision; with labels, green = right, red = wrong, grey = not scored."""
    from snnconvert import plots
    plt = plots.pyplot()
    fig, axes = plt.subplots(len(recs), 1, figsize=(12, 3.2 * len(recs)), squeeze=False)
    colour = {"yes": "tab:green", "no": "tab:red", "extra": "tab:gray", "none": "tab:gray"}
    for ax, rec in zip(axes[:, 0], recs):
        names = [classes[row["decision"]] for row in rec.rows]
        cols = [colour[row["right"]] for row in rec.rows] if rec.stimuli is not None else None
        plots.draw_rate(ax, rec.trace, labels=names, colors=cols)
        if rec.stimuli is not None:
            for j, (a, b, lab) in enumerate(rec.stimuli.tolist()):
                ax.axvspan(a / 1e3, b / 1e3, ymin=0, ymax=0.04, color="tab:purple", lw=0,
                           label="stimulus (its label below the decisions)" if j == 0 else None)
                ax.text((a + b) / 2e3, 0.06, classes[lab], transform=ax.get_xaxis_transform(), fontsize=8,
                        color="indigo", va="bottom", ha="center", bbox={"fc": "white", "ec": "none", "pad": 0.5})
            ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.0, 1.0))
        how = "; windows labelled with the decision (green right, red wrong, grey not scored)" \
            if rec.stimuli is not None else "; windows labelled with the decision"
        ax.set_title(f"{rec.path.name}: {rec.events} events, {len(rec.rows)} windows{how}", fontsize=9)
    fig.tight_layout()
    return plots.save_png(fig, path)
