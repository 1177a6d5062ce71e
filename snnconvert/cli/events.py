"""`snnconvert events FILE`: summary of one recording and the bursts found in it."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from snnconvert import console, frames, frontend
from snnconvert.errors import UsageError
from snnconvert.events import parse_sensor, read_events
from snnconvert.events.formats import TIME_UNITS
from snnconvert.files import check_output_path
from snnconvert.settings.frames import KEYS as FRAMES_KEYS
from snnconvert.settings.frames import FramesSettings

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
    g.add_argument("--bin-us", type=int, default=_FS["bin_us"].default, help="rate counter bin in us (%(default)s)")
    g.add_argument("--background-bins", type=int, default=_FS["background_bins"].default,
                   help="relative thresholds: the background is the event count of this many past bins (%(default)s)")
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


def front_end(args, stream) -> frontend.FrontEnd:
    """The front end of the command's options (the recipe defaults for the rest of [frames])."""
    sec = FramesSettings.from_section({"bin_us": args.bin_us, "background_bins": args.background_bins,
                                       "upper": args.upper, "lower": args.lower, "relative": not args.absolute,
                                       "min_duration_us": args.min_duration_us, "merge_gap_us": args.merge_gap_us,
                                       "size": args.size, "mode": args.mode, "threshold": args.threshold}).as_dict()
    return frontend.FrontEnd.from_section(sec, stream.width, stream.height)


def summarize(stream, params: frontend.FrontEnd) -> tuple[dict, dict]:
    """(the summary printed by the command, also its --json object; the front end's trace)."""
    tr = frontend.trace(stream.t, params)
    found = tr["windows"]
    out = stream.summary()
    counts = np.diff(np.searchsorted(stream.t, found.ravel()).reshape(-1, 2), axis=1).ravel()
    out["bursts"] = [[int(s), int(e), int(n)] for (s, e), n in zip(found, counts)]
    span = (lambda a: [int(a.min()), int(a.max())] if a.size else [0, 0])
    out["thresholds"] = {"bin_us": params.bin_us, "relative": params.relative, "upper": span(tr["upper"]),
                         "lower": span(tr["lower"])}
    return out, tr


def run(args) -> int:
    sensor = parse_sensor(args.sensor) if args.sensor else None
    positive = ("bin_us", "background_bins", "size", "threshold")
    for name in ("bin_us", "background_bins", "min_duration_us", "merge_gap_us", "size", "threshold"):
        v = getattr(args, name)
        if v < (1 if name in positive else 0):
            raise UsageError(f"--{name.replace('_', '-')} must be >= {1 if name in positive else 0}; got {v}")
    for name in ("upper", "lower"):
        if not getattr(args, name) >= 0:
            raise UsageError(f"--{name} must be >= 0; got {getattr(args, name)}")
    if args.plot:
        check_output_path(args.plot, "--plot")
    stream = read_events(args.file, sensor=sensor, time_unit=args.time_unit)
    params = front_end(args, stream)
    info, trace = summarize(stream, params)
    info["file"] = str(args.file)
    if args.plot:
        burst_frames = [frontend.frame(frontend.gate(stream, (s, e), params), params) for s, e, _ in info["bursts"]]
        frames.plot_recording(stream, trace, burst_frames, args.plot, title=Path(args.file).name, mode=args.mode,
                              q=params.payload_max)
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
        (f"bursts    {len(info['bursts'])} (opens at >= {_span(info['thresholds']['upper'])}, stays open at >= "
         f"{_span(info['thresholds']['lower'])} events per {info['thresholds']['bin_us']} us bin)"),
    ]
    if info["bursts"]:
        lines.append(f"  {'#':>3} {'start_us':>10} {'end_us':>10} {'events':>8}")
        lines += [f"  {i:>3} {s:>10} {e:>10} {c:>8}" for i, (s, e, c) in enumerate(info["bursts"], 1)]
    if info.get("plot"):
        lines.append(f"plot      {info['plot']}")
    return "\n".join(lines)


def _span(lo_hi) -> str:
    """'9' for a constant threshold, '9..21' for one that follows the background."""
    return str(lo_hi[0]) if lo_hi[0] == lo_hi[1] else f"{lo_hi[0]}..{lo_hi[1]}"
