"""export_network: write the self-contained hardware export folder.

Everything but the manifest's `created` field is a pure function of the network and the input
payloads, so two exports of the same network are byte-identical: tables in layer order,
JSON with sorted keys, NPZ members with the fixed zip date, no timestamps in tables or vectors.
"""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError, check_bool, check_int, fail
from snnconvert.export import fpga
from snnconvert.export import frontvec as fvec
from snnconvert.export import manifest as M
from snnconvert.export.memfile import format_csv, format_intel_hex, format_mem
from snnconvert.export.directed import KINDS as DIRECTED_KINDS
from snnconvert.export.hwfacts import peak_events
from snnconvert.export.vectors import EVENT_COLUMNS, csv_files, event_streams, golden_vectors, pick_samples
from snnconvert.files import atomic_write_bytes, atomic_write_json, load_json, npz_bytes, resolve_inside, sha256_bytes
from snnconvert.intnet import IntNetwork

MANIFEST = "manifest.json"
TABLES_NPZ = "tables.npz"
VECTORS_NPZ = "vectors.npz"
# Folders of the generated reference models (C: export.cmodel, Verilog: export.verilog). They belong to the
# export: every export into a folder removes them and writes them anew when asked, so none is left stale.
MODEL_FOLDERS = ("c", "verilog")
# File suffix of each table kind: <layer id>_<suffix>.mem / .csv
TABLE_SUFFIX = {"weight": "weights", "bias": "bias", "m0": "m0", "shift": "shift"}


def mem_header(lid: str, layer_type: str, kind: str, spec: dict, file: str) -> list[str]:
    shape, depth, bits = spec["shape"], spec["depth"], spec["bits"]
    sign = "signed two's complement" if spec["signed"] else "unsigned"
    return [f"snnconvert export: layer {lid} ({layer_type}), table {kind}",
            f"shape {shape}, layout {spec['layout']}, row-major: word address = flat index, last index fastest",
            f"{depth} words of {bits} bits, {sign}, {spec['hex_digits']} hex digit(s) per word",
            f"Verilog: reg [{bits - 1}:0] mem [0:{depth - 1}]; initial $readmemh(\"{file}\", mem);"]


def _check_inputs(net, x_int, labels, vectors):
    if not isinstance(net, IntNetwork):
        raise TypeError(f"The 'net' parameter of export must be an IntNetwork. Got {type(net).__name__} instead.")
    vectors = check_int(vectors, "vectors", "export", 0)
    x = np.asarray(x_int)
    want = (None,) + tuple(net.input_shape)
    if x.ndim != 4 or tuple(x.shape[1:]) != tuple(net.input_shape) or x.dtype.kind not in "iu":
        raise UsageError(f"The 'x_int' parameter of export must be an int array of shape {want} "
                         f"(integer input payloads). Got {x.dtype} of shape {x.shape} instead.")
    x = x.astype(np.int64)
    if x.size and (x.min() < 0 or x.max() > net.input_q):
        raise UsageError(f"The 'x_int' parameter of export must hold payloads in [0, {net.input_q}]. "
                         f"Got values in [{x.min()}, {x.max()}] instead.")
    if labels is not None:
        labels = np.asarray(labels).reshape(-1)
        if labels.shape[0] != x.shape[0] or labels.dtype.kind not in "iu":
            raise UsageError(f"The 'labels' parameter of export must be {x.shape[0]} integer labels. "
                             f"Got {labels.dtype} of shape {labels.shape} instead.")
        bad = np.flatnonzero((labels < 0) | (labels >= net.n_classes))
        if bad.size:
            raise UsageError(f"The 'labels' parameter of export must hold class labels in [0, {net.n_classes - 1}]. "
                             f"Got {int(labels[bad[0]])} at index {int(bad[0])} instead.")
    return x, labels, vectors


def export_network(net: IntNetwork, out_dir, x_int: np.ndarray, labels=None, vectors: int = 16,
                   recipe: dict | None = None, csv: bool = True, intel_hex: bool = False,
                   progress: bool = True, coe_mif: bool = True, pack_bits: int = 0, verilog: bool = False,
                   directed: bool = True, hardware_estimate: dict | None = None, c_model: bool = False,
                   frontend=None) -> Path:
    """Write the export folder `out_dir` and return its manifest path.

    x_int: int64 (N, C, H, W) input payloads of the test samples; `vectors` of them (round-robin over
    classes when `labels` are given) become golden vectors. vectors = 0 writes tables only.
    csv: also CSV tables and vector files; intel_hex: also an Intel HEX file per table.
    coe_mif: also a Xilinx .coe and an Intel .mif block-RAM image per table, with `pack_bits` > 0
    packing floor(pack_bits / bits) table words into one memory word (fpga.LANE_ORDER).
    verilog: also the behavioural Verilog model and its self-checking testbench (export.verilog), with
    empty trace folders verilog/trace/sample_NNNN; c_model: also the C99 model (export.cmodel) under c/.
    Both need vectors > 0; their files are listed in the manifest with their sha256 like every other.
    directed: with vectors > 0, also the directed vectors of export/directed.py after the test samples.
    hardware_estimate: the cost model's estimate of the network (metrics.json), copied to the manifest.
    frontend: a frontvec.FrontEndSource: also the front-end vectors (frontend.npz, frontend/ with csv) of its
    streams, and the front end's parameters in the manifest's `frontend` field.
    An existing export in `out_dir` is replaced (its files that the new export lacks are removed, and
    its c/ and verilog/ folders as a whole: MODEL_FOLDERS); a non-empty folder that holds no export is refused.
    """
    x, labels, vectors = _check_inputs(net, x_int, labels, vectors)
    csv = check_bool(csv, "csv", "export")
    intel_hex = check_bool(intel_hex, "intel_hex", "export")
    coe_mif = check_bool(coe_mif, "coe_mif", "export")
    pack_bits = check_int(pack_bits, "pack_bits", "export", 0, fpga.MAX_PACK_BITS)
    verilog = check_bool(verilog, "verilog", "export")
    c_model = check_bool(c_model, "c_model", "export")
    if c_model and not vectors:
        raise UsageError("the C model needs golden vectors (its main checks them); export with vectors >= 1")
    out = Path(out_dir)
    old_files = previous_export_files(out)

    files: dict[str, bytes] = {}
    npz_tables, specs = {}, {}
    for i, tables in M.layer_tables(net):
        lid = M.layer_id(i, net.layers[i].name)
        specs[i] = {}
        for kind, (spec, a) in tables.items():
            stem = f"{lid}_{TABLE_SUFFIX[kind]}"
            spec = dict(spec, file=f"{stem}.mem", csv=f"{stem}.csv" if csv else None,
                        intel_hex=f"{stem}.hex" if intel_hex else None, npz_key=f"{lid}.{kind}",
                        coe=None, mif=None, packing=None)
            try:
                header = mem_header(lid, net.layers[i].kind, kind, spec, spec["file"])
                files[spec["file"]] = format_mem(a, spec["bits"], spec["signed"], header).encode()
                if coe_mif:
                    names, images = fpga.table_images(stem, a, spec, header[:3], pack_bits)
                    spec.update(names)
                    files.update(images)
            except ValueError as exc:
                raise ValueError(f"layer {lid}, table {kind}: {exc}") from None
            if csv:
                files[spec["csv"]] = format_csv(a, spec["index_names"]).encode()
            if intel_hex:
                files[spec["intel_hex"]] = format_intel_hex(a, spec["bits"], spec["signed"]).encode()
            npz_tables[spec["npz_key"]] = a
            specs[i][kind] = spec
    files[TABLES_NPZ] = npz_bytes(npz_tables)

    directed = check_bool(directed, "directed", "export")
    idx = pick_samples(x.shape[0], vectors, labels)
    xs, lab = x[idx], (None if labels is None else labels[idx])
    vec_info = {"count": int(idx.size), "npz": None, "csv_folder": None}
    codes, dlist = np.zeros(idx.size, np.int64), []
    if idx.size and directed:
        xs, idx, lab, codes, dlist = add_directed(net, xs, idx, lab)
        vec_info.update(count=int(idx.size), test_samples=int((codes == 0).sum()), directed=dlist,
                        directed_kinds=dict(DIRECTED_KINDS))
    if idx.size:
        arrays = golden_vectors(net, xs, idx, lab, progress=progress, directed=codes)
        files[VECTORS_NPZ] = npz_bytes(arrays)
        vec_info["peak_events"] = peak_events(arrays, [sid for sid, _ in event_streams(net)], int(idx.size))
        vec_info.update(npz=VECTORS_NPZ, npz_keys=sorted(arrays), npz_event_columns=["sample"] + EVENT_COLUMNS)
        if csv:
            files.update(csv_files(net, arrays))
            vec_info.update(csv_folder="vectors", sample_folder="vectors/sample_NNNN (NNNN = sample, 4 digits)")
    fe_info = None
    if frontend is not None:
        fvec.check_network(frontend.params, net.input_shape, net.input_q)
        fe_arrays = fvec.frontend_vectors(frontend, net.coding, net.input_q)
        files[fvec.NPZ] = npz_bytes(fe_arrays)
        if csv:
            files.update(fvec.csv_files(fe_arrays))
        fe_info = fvec.manifest_entry(frontend, fe_arrays, csv)
    if verilog:
        from snnconvert.export import verilog as verilog_mod
        ids = [M.layer_id(i, L.name) for i, L in enumerate(net.layers)]
        files.update(verilog_mod.sources(net, ids, specs, arrays if idx.size else {}))
    if recipe is not None:
        from snnconvert import recipe as recipe_mod
        files["recipe.toml"] = recipe_mod.dumps(recipe).encode()

    man = M.build_manifest(net, specs, {k: sha256_bytes(v) for k, v in sorted(files.items())}, vec_info, TABLES_NPZ,
                           created=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                           hardware_estimate=hardware_estimate, frontend=fe_info)
    # Every path is checked before anything changes: a refusal leaves the folder as it was.
    targets = {rel: resolve_inside(out, rel, "file") for rel in files}
    stale = [old_files[rel] for rel in sorted(set(old_files) - set(files))]
    # The old manifest goes first and the new one comes last: a crash in between leaves no manifest
    # that vouches for a half-written folder.
    (out / MANIFEST).unlink(missing_ok=True)
    for path in stale:
        path.unlink(missing_ok=True)
    for name in MODEL_FOLDERS:
        remove_model_folder(out / name)
    for rel, data in files.items():
        atomic_write_bytes(targets[rel], data)
    if verilog:
        verilog_mod.trace_folders(out / verilog_mod.FOLDER, idx.size)
    if not c_model:
        return atomic_write_json(out / MANIFEST, man)
    # The C model is generated from the written folder alone (as `snnconvert cmodel` does), then listed.
    from snnconvert.export import cmodel
    atomic_write_json(out / MANIFEST, man)
    src = {f"{cmodel.FOLDER}/{k}": v.encode() for k, v in cmodel.c_sources(out).items()}
    for rel, data in src.items():
        atomic_write_bytes(resolve_inside(out, rel, "file"), data)
    man["files"] = dict(sorted({**man["files"], **{rel: sha256_bytes(d) for rel, d in src.items()}}.items()))
    return atomic_write_json(out / MANIFEST, man)


def remove_model_folder(path: Path) -> None:
    """Remove a generated model folder of an earlier export (a link is unlinked, never followed)."""
    import shutil
    if path.is_symlink() or path.is_file():
        path.unlink()
    elif path.is_dir():
        shutil.rmtree(path)


def add_directed(net: IntNetwork, x, idx, labels):
    """Append the directed vectors to the test samples: (x, sample_index (-1 for directed), labels (-1),
    directed codes, manifest entries [{sample, kind, layer, neuron, words}])."""
    from snnconvert.export.directed import directed_vectors
    from snnconvert.sim.reference import Tables, run_sample
    tables = Tables(net)
    dv = directed_vectors(net, lambda xi: run_sample(net, xi, tables))
    n = len(idx)
    entries = [{"sample": n + k, "kind": d["kind"], "layer": d["layer"], "neuron": d["neuron"], "words": d["words"]}
               for k, d in enumerate(dv)]
    x = np.concatenate([x, np.stack([d["x"] for d in dv])]) if dv else x
    lab = np.full(len(dv), -1, np.int64)
    labels = np.concatenate([np.full(n, -1, np.int64) if labels is None else labels, lab])
    codes = np.concatenate([np.zeros(n, np.int64), [DIRECTED_KINDS[d["kind"]] for d in dv]]).astype(np.int64)
    return x, np.concatenate([idx, np.full(len(dv), -1, np.int64)]), labels, codes, entries


def previous_export_files(out: Path) -> dict[str, Path]:
    """Files listed by an export already in `out` ({path in the manifest: resolved path}), each checked to
    lie inside `out` and to be a file; refuses a non-empty folder that is not an export. Nothing is
    changed here, so a refusal leaves the folder as it was."""
    if not out.exists():
        return {}
    if not out.is_dir():
        raise UsageError(f"export folder {out} exists and is not a folder")
    if not any(out.iterdir()):
        return {}
    man_path = out / MANIFEST
    if not man_path.is_file():
        raise UsageError(f"export folder {out} is not empty and holds no {MANIFEST}; choose an empty or new folder")
    man = load_json(man_path)
    if not isinstance(man, dict) or man.get("format") != M.FORMAT:
        raise UsageError(f"{man_path} is not an snnconvert export manifest; refusing to overwrite {out}")
    files = man.get("files", {})
    if not isinstance(files, dict):
        fail("files", str(man_path), "an object mapping file paths to sha256 digests", repr(files), "field", FormatError)
    listed = {}
    for rel in sorted(files):
        try:
            path = resolve_inside(out, rel, "file")
        except UsageError:
            fail("files", str(man_path), f"a map of paths inside {out}", repr(rel), "field", FormatError)
        if path == out.resolve() or path.is_dir() or rel == MANIFEST:
            fail("files", str(man_path), "a map of the export's files (not folders, not the manifest)", repr(rel),
                 "field", FormatError)
        listed[rel] = path
    return listed
