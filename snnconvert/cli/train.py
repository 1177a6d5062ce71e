"""`snnconvert train RECIPE`: train the recipe's frame CNN and write model.pt, recipe.toml, metrics.json, plots."""

from __future__ import annotations

from pathlib import Path

HELP = "train the recipe's frame CNN on CPU (optionally conversion-aware) and evaluate it"


def add_arguments(p) -> None:
    p.add_argument("recipe", metavar="RECIPE", help="recipe TOML file")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override a recipe key (repeatable), e.g. --set train.epochs=5")
    p.add_argument("--out", metavar="DIR", help="output folder (default: runs/<recipe name>/train)")
    p.add_argument("--init", metavar="CHECKPOINT",
                   help="start from this float checkpoint (model.pt or its folder) instead of random weights")


def run(args) -> int:
    from snnconvert import console
    from snnconvert import recipe as recipe_mod
    from snnconvert.errors import UsageError
    from snnconvert.files import check_output_path

    r = recipe_mod.load(args.recipe, args.overrides)
    if args.init is not None and not Path(args.init).exists():
        raise UsageError(f"init checkpoint not found: {args.init}")
    out = check_output_path(Path(args.out) if args.out else Path("runs") / r["name"] / "train",
                            "--out" if args.out else "", "folder")
    from snnconvert import data, train
    dataset = data.load_dataset(r)
    _, m = train.train(r, dataset, out, init=args.init, quiet=args.quiet)
    aware = ""
    if m["aware"]:
        a = m["aware"]
        aware = (f" (conversion-aware: {a['weight_bits']}-bit weights, {a['payload_bits']}-bit payloads; "
                 f"float model {100 * m['float_frame_accuracy']:.2f}%)")
    from snnconvert.stats import percent_interval, wilson_interval
    ci = percent_interval(wilson_interval(m["test_correct"], m["test_count"]))
    console.echo(f"frame accuracy {100 * m['frame_accuracy']:.2f}% (95 % CI {ci}; {m['test_correct']}/{m['test_count']} "
                 f"test frames)"
                 f"{aware}; {console.plural(m['epochs'], 'epoch')} in {m['train_seconds']:.1f} s; {m['params']:,} parameters, "
                 f"{m['macs']:,} MACs per sample")
    console.echo(f"wrote {out}/model.pt, recipe.toml, metrics.json, history.csv, curves.png, confusion.png"
                 + (", model.onnx" if (out / "model.onnx").is_file() else ""))
    return 0
