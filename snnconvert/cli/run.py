"""`snnconvert run RECIPE`: the whole job, stage by stage, into one run folder."""

from __future__ import annotations

HELP = "run every stage of a recipe: data, train, convert, sweep, export, verify, report"


def add_arguments(p) -> None:
    from snnconvert.stages import STAGES
    p.add_argument("recipe", metavar="RECIPE", help="recipe TOML file, e.g. recipes/default.toml")
    p.add_argument("--out", metavar="DIR", default=None, help="run folder (default: runs/<recipe name>)")
    p.add_argument("--set", dest="overrides", metavar="SECTION.KEY=VALUE", action="append", default=[],
                   help="override a recipe key, e.g. --set convert.weight_bits=3 (repeatable)")
    p.add_argument("--force", metavar="STAGE", choices=STAGES, default=None,
                   help=f"redo this stage and every later one ({', '.join(STAGES)})")


def run(args) -> int:
    from snnconvert.pipeline import run as run_pipeline
    summary = run_pipeline(args.recipe, out=args.out, overrides=args.overrides, force=args.force)
    return 0 if summary["verify_passed"] else 1
