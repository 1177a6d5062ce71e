"""`snnconvert sweep TRAIN_DIR`: convert and measure a grid of bit-widths, resumably, in parallel."""

from __future__ import annotations

from pathlib import Path

HELP = "convert and measure the trained model over a grid of weight/payload bit-widths"


def add_arguments(p) -> None:
    p.add_argument("train_dir", metavar="TRAIN_DIR", help="training folder holding model.pt (or the model.pt itself)")
    p.add_argument("--weight-bits", metavar="GRID", help="weight bit-widths, e.g. 2-8 or 2,4,8 (default: recipe [sweep])")
    p.add_argument("--payload-bits", metavar="GRID", help="payload bit-widths, e.g. 1-6 (default: recipe [sweep])")
    p.add_argument("--coding", metavar="CODING", action="append",
                   help="payload, ttfs or binary; repeat or comma-separate (default: recipe [convert] coding)")
    p.add_argument("--per-channel", action="store_true", default=None, help="one weight scale per output channel")
    p.add_argument("--aware", action="store_true", default=None,
                   help="fine-tune with conversion-aware training at each point before converting")
    p.add_argument("--aware-epochs", type=int, metavar="N", help="epochs of aware fine-tuning per point")
    p.add_argument("--jobs", type=int, metavar="N", help="parallel processes (default: usable cores, fewer when memory is short)")
    p.add_argument("--out", metavar="DIR", help="output folder (default: 'sweep' beside TRAIN_DIR)")
    p.add_argument("--tolerance-pp", type=float, metavar="PP",
                   help="accuracy loss allowed for the recommendation, in percentage points (default 0.5)")


def run(args) -> int:
    from snnconvert import console
    from snnconvert import sweep
    from snnconvert.errors import UsageError
    from snnconvert.files import check_output_path

    # Grid typos are reported before the checkpoint and the data set are loaded.
    for value, name, rng in ((args.weight_bits, "weight_bits", sweep.WEIGHT_BITS_RANGE),
                             (args.payload_bits, "payload_bits", sweep.PAYLOAD_BITS_RANGE)):
        if value is not None:
            sweep.parse_grid(value, name, "sweep", *rng)
    if args.coding:
        sweep.parse_codings(",".join(args.coding))
    if args.out:
        check_output_path(args.out, "--out", "folder")
    path = Path(args.train_dir)
    if not path.exists():
        raise UsageError(f"training folder not found: {path}")
    base = path if path.is_dir() else path.parent
    log = (Path(args.out) if args.out else base.parent / "sweep") / "results.jsonl"
    if log.is_file():
        sweep.read_results(log)   # a damaged result line is named before the model and data are loaded
    from snnconvert import data, train
    model, ckpt = train.load_checkpoint(path)
    recipe = ckpt["recipe"]
    section = recipe["sweep"]   # a checked recipe: every key present

    def pick(value, key):
        return section[key] if value is None else value

    codings = ",".join(args.coding) if args.coding else section["codings"]
    sweep.start_workers(pick(args.jobs, "jobs"))  # workers start while the data set loads
    context = (model, ckpt, data.load_dataset(recipe, progress=not args.quiet))
    train.check_checkpoint_fits(model, ckpt, context[2], path)
    result = sweep.run_sweep(
        path, pick(args.weight_bits, "weight_bits"), pick(args.payload_bits, "payload_bits"), codings,
        per_channel=pick(args.per_channel, "per_channel"), aware=pick(args.aware, "aware"),
        aware_epochs=pick(args.aware_epochs, "aware_epochs"), jobs=pick(args.jobs, "jobs"), out_dir=args.out,
        tolerance_pp=pick(args.tolerance_pp, "tolerance_pp"), progress=not args.quiet, context=context)
    rows = sweep.table_rows(result.records, result.frame_accuracy, result.tolerance_pp)
    console.echo(sweep.format_table(rows, result.recommendation))
    console.echo(f"{len(result.records)} points ({result.computed} computed, {result.reused} from results.jsonl); "
                 f"frame accuracy {100 * result.frame_accuracy:.2f} %")
    console.echo(result.recommendation["message"])
    console.echo(f"outputs in {result.out_dir}")
    return 0
