"""`snnconvert cmodel EXPORT_DIR`: write the C99 reference model of an export folder."""

from __future__ import annotations

HELP = "write a C99 model of an exported network and a main that checks every golden vector"


def add_model_arguments(p, language: str, folder: str) -> None:
    """The arguments of a command that generates a reference model from an export folder."""
    p.add_argument("export_dir", metavar="EXPORT_DIR", help="export folder holding manifest.json, memory files and vectors")
    p.add_argument("--out", metavar="DIR", help=f"folder for the {language} files (default: EXPORT_DIR/{folder})")


def add_arguments(p) -> None:
    add_model_arguments(p, "C", "c")


def run(args) -> int:
    from snnconvert import console
    from snnconvert.export.cmodel import FILES, write_c_model
    from snnconvert.files import check_output_path

    if args.out:
        check_output_path(args.out, "--out", "folder")
    out = write_c_model(args.export_dir, args.out)
    console.echo(f"cmodel: {len(FILES)} files -> {out}; build: cc -std=c99 -O2 -o snn_model "
                 f"{out}/snn_model.c {out}/snn_main.c; run: ./snn_model [TRACE_DIR]")
    return 0
