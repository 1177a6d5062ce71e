"""`snnconvert export NET_DIR OUT_DIR`: hardware tables, manifest and golden vectors."""

from __future__ import annotations

import argparse

HELP = "write Verilog memory tables, a manifest and golden vectors of a converted network"


def add_arguments(p) -> None:
    p.add_argument("net_dir", metavar="NET_DIR", help="folder holding network.json, network.npz and recipe.toml")
    p.add_argument("out_dir", metavar="OUT_DIR", help="export folder to write (new, empty, or an earlier export)")
    p.add_argument("--vectors", type=int, metavar="N", help="golden vectors to write (default: recipe [export] vectors, 16)")
    p.add_argument("--inputs", metavar="FILE.npz",
                   help="a frames file instead of the recipe's data set: array x (N, C, H, W) input payloads, optional y labels")
    p.add_argument("--csv", action=argparse.BooleanOptionalAction, default=None,
                   help="also write CSV tables and vector files (--no-csv: memory files and NPZ only)")
    p.add_argument("--intel-hex", action=argparse.BooleanOptionalAction, default=None,
                   help="also write each table as Intel HEX (default: recipe [export] intel_hex, off)")
    p.add_argument("--coe-mif", action=argparse.BooleanOptionalAction, default=None,
                   help="also write each table as a Xilinx .coe and an Intel .mif block-RAM image (default: recipe "
                        "[export] coe_mif, on)")
    p.add_argument("--pack-bits", type=int, metavar="P",
                   help="pack floor(P/bits) table words into each P-bit word of the .coe/.mif images, lane 0 in the "
                        "least significant bits (default: recipe [export] pack_bits, 0 = unpacked)")
    p.add_argument("--verilog", action=argparse.BooleanOptionalAction, default=None,
                   help="also write the behavioural Verilog model and its self-checking testbench under verilog/ "
                        "(default: recipe [export] verilog, off)")
    p.add_argument("--frontend-vectors", type=int, metavar="N",
                   help="also write front-end vectors (raw events in; rate bins, windows, gated input events, frames "
                        "out) of N test recordings of the recipe's data set (default: recipe [export] "
                        "frontend_vectors, 0)")
    p.add_argument("--frontend-events", metavar="FILE",
                   help="make the front-end vectors from this events file (.npz, .csv, .bin) instead, one stream")
    p.add_argument("--c", action="store_true",
                   help="also write the C99 reference model to OUT_DIR/c (the same files as `snnconvert cmodel OUT_DIR`, "
                        "but listed in the manifest)")


def run(args) -> int:
    from pathlib import Path

    from snnconvert import console
    from snnconvert.errors import UsageError, check_int
    from snnconvert.export import export_from_run
    from snnconvert.files import check_output_path, load_json

    check_output_path(args.out_dir, "OUT_DIR", "folder")
    if args.c and args.vectors == 0:
        raise UsageError("--c needs golden vectors (the C model's main checks them); give --vectors N with N > 0")
    if args.vectors is not None:
        check_int(args.vectors, "vectors", "export", 0)
    if args.frontend_vectors is not None:
        check_int(args.frontend_vectors, "frontend_vectors", "export", 0)
    if args.pack_bits is not None:
        check_int(args.pack_bits, "pack_bits", "export", 0, 4096)
    man_path = export_from_run(args.net_dir, args.out_dir, vectors=args.vectors, csv=args.csv, intel_hex=args.intel_hex,
                               inputs=args.inputs, progress=not args.quiet, coe_mif=args.coe_mif,
                               pack_bits=args.pack_bits, verilog=args.verilog, c_model=args.c,
                               frontend_vectors=args.frontend_vectors, frontend_events=args.frontend_events)
    man = load_json(man_path)
    out = Path(args.out_dir)
    vec = man["vectors"]
    directed = len(vec.get("directed", []))
    console.echo(f"export: {len(man['layers'])} layers, {len(man['files'])} files, "
                 f"{vec['count'] - directed} golden vectors and {directed} directed vectors -> {out}")
    fe = man.get("frontend")
    if fe:
        console.echo(f"export: front-end vectors: {fe['streams']} streams, {fe['windows']} windows, "
                     f"{fe['gated_events']} gated input events -> {out / 'frontend'}")
    if args.c:
        console.echo(f"export: C model -> {out / 'c'}")
    return 0
