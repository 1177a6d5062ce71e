"""`snnconvert import MODEL.onnx --recipe RECIPE`: a frame CNN built elsewhere -> a run folder with its train stage."""

from __future__ import annotations

HELP = "import a frame CNN from an ONNX file as the train stage of a run folder (checked against onnxruntime)"


def add_arguments(p) -> None:
    p.add_argument("model", metavar="MODEL.onnx", help="ONNX file of a frame CNN (one input: a batch of frames)")
    p.add_argument("--recipe", required=True, metavar="RECIPE",
                   help="recipe TOML file: its data and frames feed the accuracy measurement and the check")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override a recipe key (repeatable)")
    p.add_argument("--out", metavar="RUN_DIR", help="run folder (default: runs/<recipe name>); the model goes "
                   "to RUN_DIR/train")


def run(args) -> int:
    from snnconvert import console
    from snnconvert.interop import require_onnx
    require_onnx("snnconvert import")
    from pathlib import Path

    from snnconvert import recipe as recipe_mod
    from snnconvert.interop.importer import summary_lines
    from snnconvert.pipeline import import_run
    from snnconvert.pipeline import default_out

    metrics = import_run(args.model, args.recipe, args.out, args.overrides, quiet=args.quiet)
    out = Path(args.out) if args.out else default_out(recipe_mod.load(args.recipe, args.overrides))
    for line in summary_lines(metrics, out):
        console.echo(line)
    return 0
