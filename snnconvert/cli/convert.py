"""`snnconvert convert TRAIN_DIR`: trained frame model -> single-spike integer network + metrics."""

from __future__ import annotations

import argparse
from pathlib import Path

HELP = "convert a trained frame model into a single-spike integer network and measure the cost"


def add_arguments(p) -> None:
    p.add_argument("train_dir", metavar="TRAIN_DIR", help="folder written by `snnconvert train` (holds model.pt)")
    p.add_argument("--weight-bits", type=int, metavar="K", help="weight bits, 2..16 (default: the recipe's)")
    p.add_argument("--payload-bits", type=int, metavar="P", help="payload bits, 1..8 (default: the recipe's)")
    p.add_argument("--coding", metavar="CODING", help="payload | ttfs | binary (default: the recipe's); "
                   "binary sends 1-bit spikes, so it sets the payload bits to 1")
    p.add_argument("--per-channel", action="store_true", default=None, help="one weight scale per output channel")
    p.add_argument("--calibration", metavar="RULE", help="activation range: max, mse or percentile:Q (e.g. percentile:99.9)")
    p.add_argument("--weight-scale", metavar="RULE", help="weight range: max, percentile:Q or mean:C "
                   "(C times the mean |w|, for 2-3-bit grids)")
    p.add_argument("--bias-correction", action=argparse.BooleanOptionalAction, default=None,
                   help="shift each bias by the mean weight-grid error on the calibration frames (default: the "
                        "recipe's, false; aware checkpoints are converted without it)")
    p.add_argument("--calib-samples", type=int, metavar="N", help="training samples used to calibrate the ranges")
    p.add_argument("--multiplier-bits", type=int, metavar="B", help="bits of the fixed-point multiplier M0")
    p.add_argument("--tolerance-pp", type=float, metavar="PP", help="conversion loss within tolerance, in points")
    p.add_argument("--input-clip", action=argparse.BooleanOptionalAction, default=None,
                   help="clip count-frame inputs to the payload width 2^p - 1 (default: the recipe's, true)")
    p.add_argument("--accumulator-bits", type=int, metavar="B", help="declared accumulator width, 0 = unlimited")
    p.add_argument("--overflow", metavar="MODE", help="saturate | wrap, with a declared accumulator width")
    p.add_argument("--out", metavar="NET_DIR", help="output folder (default: TRAIN_DIR/../net)")


def run(args) -> int:
    from snnconvert import console
    from snnconvert.convert import ConvertSettings, convert_checkpoint, write_outputs
    from snnconvert.errors import UsageError
    from snnconvert.files import check_output_path
    from snnconvert.sim.metrics import format_table
    from snnconvert.checkpoint import load_checkpoint

    if args.out:
        check_output_path(args.out, "--out", "folder")
    train_dir = Path(args.train_dir)
    if not (train_dir / "model.pt").is_file():
        raise UsageError(f"{train_dir / 'model.pt'}: file not found (TRAIN_DIR must be a folder written by "
                         f"`snnconvert train`)")
    model, ckpt = load_checkpoint(train_dir / "model.pt")
    ckpt_recipe = dict(ckpt["recipe"])
    section = dict(ckpt_recipe["convert"])
    # each option is named after its [convert] key; an option left out keeps the recipe's value
    section.update({k: getattr(args, k) for k in ConvertSettings.KEYS if getattr(args, k, None) is not None})
    if args.coding == "binary" and args.payload_bits is None:
        section["payload_bits"] = 1       # the recipe's payload width belongs to its own coding
    settings = ConvertSettings.from_section(section)
    out = Path(args.out) if args.out else check_output_path(train_dir.resolve().parent / "net", "", "folder")
    net, metrics = convert_checkpoint(train_dir, settings, quiet=args.quiet, loaded=(model, ckpt))
    if args.quiet:   # otherwise measure() has printed it already
        console.echo(format_table(metrics))
    write_outputs(net, metrics, {**ckpt_recipe, "convert": settings.as_dict()}, out)
    console.echo(f"wrote {out}/network.json, network.npz, metrics.json, recipe.toml, confusion.png")
    return 0
