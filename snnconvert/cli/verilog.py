"""`snnconvert verilog EXPORT_DIR`: write the Verilog model and testbench of an export folder."""

from __future__ import annotations

HELP = "write a behavioural Verilog model of an exported network and a testbench that checks every golden vector"


def add_arguments(p) -> None:
    from snnconvert.cli.cmodel import add_model_arguments
    add_model_arguments(p, "Verilog", "verilog")


def run(args) -> int:
    import os

    from snnconvert import console
    from snnconvert.export.verilog import MODEL, write_verilog
    from snnconvert.files import check_output_path

    if args.out:
        check_output_path(args.out, "--out", "folder")
    tb = write_verilog(args.export_dir, args.out)
    rel = os.path.relpath(tb.parent, args.export_dir)
    console.echo(f"verilog: model and testbench -> {tb.parent}; run in {args.export_dir}: iverilog -g2005 -o snn_tb.vvp "
                 f"{rel}/{tb.name} {rel}/{MODEL} && vvp snn_tb.vvp [+trace]")
    return 0
