"""`snnconvert events FILE`: summary of one recording and the bursts found in it."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from snnconvert import console, frames, windows
from snnconvert.errors import UsageError
from snnconvert.events import parse_sensor, read_events
from snnconvert.events.formats import TIME_UNITS
from snnconvert.files import check_output_path
from snnconvert.settings.frames import KEYS as FRAMES_KEYS

HELP = "summarize an event recording: events, duration, rate, ON/OFF balance and bursts"

_FS = FRAMES_KEYS


def add_arguments(p) -> None:
    p.add_argument("file", metavar="FILE",
                   help="event file: .npz (own, or plain with arrays t, x, y, p), .csv (t,x,y,p) or .bin (40-bit layout)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.add_argument("--plot", metavar="OUT.png", help="draw the rate trace, thresholds, bursts and burst frames")
    p.add_argument("--sensor", metavar="WxH",
                   help="sensor size, for files that do not store it (.bin, plain NPZ, CSV without '# sensor WxH'); "
                        "e.g. 34x34")
    p.add_argument("--time-unit", choices=TIME_UNITS, default="us",
                   help="unit of the times in CSV and plain NPZ files; s and ms may have decimals (%(default)s)")
    g = p.add_argument_group("bursts (defaults as in the recipe's [frames] section)")
    g.add_argument("--bin-us", type=int, default=_FS["bin_us"].default, help="rate window in us (%(default)s)")
    g.add_argument("--upper", type=float, default=_FS["upper"].default,
                   help="start threshold: x background, or events/s with --absolute (%(default)s)")
    g.add_argument("--lower", type=float, default=_FS["lower"].default,
                   help="end threshold: x background, or events/s with --absolute (%(default)s)")
    g.add_argument("--absolute", action="store_true", help="thresholds in events/s, not relative to background")
    g.add_argument("--min-duration-us", type=int, default=_FS["min_duration_us"].default,
                   help="drop shorter bursts (%(default)s)")
    g.add_argument("--merge-gap-us", type=int, default=_FS["merge_gap_us"].default,
                   help="merge bursts closer than this (%(default)s)")
    g.add_argument("--size", type=int, default=_FS["size"].default, help="plotted frame side (%(default)s)")
    g.add_argument("--mode", choices=frames.MODES, default=_FS["mode"].default, help="plotted frame mode (%(default)s)")
    g.add_argument("--threshold", type=int, default=_FS["threshold"].default,
                   help="binary frames: events per pooled pixel (%(default)s)")


def summarize(stream, bin_us, upper, lower, relative, min_duration_us, merge_gap_us) -> dict:
    """The summary printed by the command (also its --json object)."""
    found = windows.bursts(stream, bin_us, upper, lower, relative, min_duration_us, merge_gap_us)
    tk, rate = windows.rate_trace(stream, bin_us)
    hi, lo = windows.thresholds(rate, bin_us, upper, lower, relative) if rate.size else (0.0, 0.0)
    out = stream.summary()
    counts = np.diff(np.searchsorted(stream.t, np.asarray(found, np.int64).ravel()).reshape(-1, 2), axis=1).ravel() \
        if found else []
    out["bursts"] = [[int(s), int(e), int(n)] for (s, e), n in zip(found, counts)]
    out["thresholds_hz"] = {"upper": hi, "lower": min(lo, hi), "relative": relative}
    return out


def run(args) -> int:
    sensor = parse_sensor(args.sensor) if args.sensor else None
    for name in ("bin_us", "min_duration_us", "merge_gap_us", "size", "threshold"):
        v = getattr(args, name)
        if v < (1 if name in ("bin_us", "size", "threshold") else 0):
            raise UsageError(f"--{name.replace('_', '-')} must be >= {1 if name in ('bin_us', 'size', 'threshold') else 0}; got {v}")
    for name in ("upper", "lower"):
        if not getattr(args, name) >= 0:
            raise UsageError(f"--{name} must be >= 0; got {getattr(args, name)}")
    if args.plot:
        check_output_path(args.plot, "--plot")
    stream = read_events(args.file, sensor=sensor, time_unit=args.time_unit)
    info = summarize(stream, args.bin_us, args.upper, args.lower, not args.absolute, args.min_duration_us,
                     args.merge_gap_us)
    info["file"] = str(args.file)
    if args.plot:
        burst_frames = [frames.bin_window(stream, s, e, args.mode, args.size, args.threshold,
                                          _FS["max_count"].default) for s, e, _ in info["bursts"]]
        th = (info["thresholds_hz"]["upper"], info["thresholds_hz"]["lower"])
        frames.plot_recording(stream, [(s, e) for s, e, _ in info["bursts"]], windows.rate_trace(stream, args.bin_us),
                              burst_frames, args.plot, thresholds=th, title=Path(args.file).name, mode=args.mode,
                              q=frames.input_q(args.mode, _FS["max_count"].default))
        info["plot"] = str(args.plot)
    if args.json:
        console.echo(json.dumps(info, sort_keys=True))
    else:
        console.echo(format_text(info))
    return 0


def format_text(info: dict) -> str:
    lines = [f"file      {info['file']}"]
    if info["empty"]:
        lines += [f"sensor    {info['width']}x{info['height']}", "events    0 (empty recording)"]
        return "\n".join(lines)
    n = info["events"]
    lines += [
        f"events    {n} (ON {info['on']} = {100 * info['on'] / n:.1f}%, OFF {info['off']})",
        f"time      {info['t_first_us']} .. {info['t_last_us']} us (duration {info['duration_us']} us)",
        f"rate      {info['rate_hz']:.0f} events/s",
        f"sensor    {info['width']}x{info['height']}",
        f"bursts    {len(info['bursts'])} (upper {info['thresholds_hz']['upper']:.0f} events/s, "
        f"lower {info['thresholds_hz']['lower']:.0f} events/s)",
    ]
    if info["bursts"]:
        lines.append(f"  {'#':>3} {'start_us':>10} {'end_us':>10} {'events':>8}")
        lines += [f"  {i:>3} {s:>10} {e:>10} {c:>8}" for i, (s, e, c) in enumerate(info["bursts"], 1)]
    if info.get("plot"):
        lines.append(f"plot      {info['plot']}")
    return "\n".join(lines)
