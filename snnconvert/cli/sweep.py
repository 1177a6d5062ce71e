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
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the points on Dask: local:N starts N worker processes here, tcp://HOST:PORT uses a "
                        "running scheduler (needs snnconvert[cluster])")
    p.add_argument("--seeds", metavar="GRID",
                   help="training seeds, e.g. 0-4: one model per seed, points judged on the mean (default: recipe seed)")
    p.add_argument("--out", metavar="DIR", help="output folder (default: 'sweep' beside TRAIN_DIR)")
    p.add_argument("--tolerance-pp", type=float, metavar="PP",
                   help="accuracy loss allowed for the recommendation, in percentage points (default 0.5)")


def frame_ci(records) -> str:
    """' (95 % CI [..] %)' of the frame accuracy, read from a post-training point; '' when none has it."""
    from snnconvert.stats import percent_interval
    for r in records:
        ci = r["metrics"].get("frame_accuracy_ci")
        if not r["params"]["aware"] and isinstance(ci, list) and len(ci) == 2:
            return f" (95 % CI {percent_interval(ci)})"
    return ""


def run(args) -> int:
    from snnconvert import console
    from snnconvert import sweep
    from snnconvert.errors import UsageError
    from snnconvert.files import check_output_path

    given = {"weight_bits": args.weight_bits, "payload_bits": args.payload_bits,
             "codings": ",".join(args.coding) if args.coding else None, "per_channel": args.per_channel,
             "aware": args.aware, "aware_epochs": args.aware_epochs, "jobs": args.jobs,
             "tolerance_pp": args.tolerance_pp, "scheduler": args.scheduler, "seeds": args.seeds}
    given = {k: v for k, v in given.items() if v is not None}
    flags = sweep.SweepSettings.from_section(given)   # typos are reported before the model and data load
    if flags.scheduler:
        from snnconvert.sweep.cluster import check_available
        check_available()
    if args.out:
        check_output_path(args.out, "--out", "folder")
    path = Path(args.train_dir)
    if not path.exists():
        raise UsageError(f"training folder not found: {path}")
    base = path if path.is_dir() else path.parent
    log = (Path(args.out) if args.out else base.parent / "sweep") / "results.jsonl"
    if log.is_file():
        sweep.read_results(log)   # a damaged result line is named before the model and data are loaded
    from snnconvert import train
    model, ckpt = train.load_checkpoint(path)
    section = dict(ckpt["recipe"].get("sweep") or {})
    section.update({k: getattr(flags, k) for k in given})
    settings = sweep.SweepSettings.from_section(section)
    recipe = {**ckpt["recipe"], "sweep": settings.as_dict()}   # the recipe of this sweep, saved beside it
    executor = sweep.executor_for(settings)
    try:
        executor.start()  # workers start while the data set loads
        inputs = sweep.load_inputs(path, checkpoint=(model, ckpt), recipe=recipe, progress=not args.quiet)
        result = sweep.run_sweep(inputs, settings, args.out, executor=executor, progress=not args.quiet)
    finally:
        sweep.close_executor(executor)
    rows = sweep.table_rows(result.records, result.frame_accuracy, result.tolerance_pp)
    console.echo(sweep.format_table(rows, result.recommendation))
    if result.summary:
        from snnconvert.sweep.seeds import format_summary
        console.echo(f"over seeds {', '.join(map(str, result.recommendation['seeds']))}:")
        console.echo(format_summary(result.summary))
    console.echo(f"{len(result.records)} points ({result.computed} computed, {result.reused} from results.jsonl); "
                 f"frame accuracy {100 * result.frame_accuracy:.2f} %{frame_ci(result.records)}")
    console.echo(result.recommendation["message"])
    console.echo(f"outputs in {result.out_dir}")
    return 0
