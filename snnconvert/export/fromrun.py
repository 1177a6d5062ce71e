"""Export a converted network folder (network.json/npz + recipe.toml) with its test inputs.

The golden inputs are the test split of the network's own data set, quantized to input payloads
by arith.quantize_input, or a frames file given by the user (data.load_frames_file: `x` (N, C, H, W)
input payloads, optional `y` labels).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert import arith
from snnconvert.errors import UsageError, check_int
from snnconvert.intnet import IntNetwork
from snnconvert.settings.export import ExportSettings


def load_inputs(path, net: IntNetwork) -> tuple[np.ndarray, np.ndarray | None]:
    """(x int64 (N, C, H, W), y int64 (N,) or None) from a frames file with array `x` and optional `y`."""
    from snnconvert.data import load_frames_file
    return load_frames_file(path, net.input_shape, net.input_q, net.n_classes, need_labels=False)


def test_inputs(net: IntNetwork, recipe: dict, progress: bool = True, dataset=None) -> tuple[np.ndarray, np.ndarray]:
    """Test frames of the recipe's data set (or of `dataset`, already loaded) as input payloads:
    a0 = clamp(round(frame), 0, Q_in)."""
    if dataset is None:
        from snnconvert import data
        dataset = data.load_dataset(recipe, progress=progress)
    x, y = dataset.test                                                  # (N, C, H, W) float32, (N,)
    return arith.quantize_input(x, net.input_q).astype(np.int64), np.asarray(y, dtype=np.int64)


def export_from_run(net_dir, out_dir, recipe: dict | None = None, vectors: int | None = None,
                    csv: bool | None = None, intel_hex: bool | None = None, inputs=None,
                    progress: bool = True, settings: ExportSettings | None = None, dataset=None,
                    coe_mif: bool | None = None, pack_bits: int | None = None, verilog: bool | None = None,
                    c_model: bool = False, frontend_vectors: int | None = None, frontend_events=None) -> Path:
    """Export the network in `net_dir` to `out_dir`; returns the manifest path.

    recipe: the resolved recipe (default: net_dir/recipe.toml). settings: its checked [export] section
    (default: built from the recipe). vectors/csv/intel_hex/coe_mif/pack_bits/verilog: None keeps the
    setting. inputs: an NPZ path to use instead of the data set's test split. dataset: the recipe's
    data set, if already loaded. c_model: also write the C99 model under c/ (listed in the manifest).
    frontend_vectors: front-end vectors of that many test recordings (None keeps the setting);
    frontend_events: an events file to make them from instead (one stream; `frontend_source`).
    """
    from snnconvert import recipe as recipe_mod
    from snnconvert.export.writer import export_network

    from snnconvert.export.writer import previous_export_files
    previous_export_files(Path(out_dir))       # refuse a bad target before any work
    net_dir = Path(net_dir)
    if not (net_dir / "network.json").is_file():
        raise UsageError(f"network folder {net_dir} holds no network.json (run `snnconvert convert` first)")
    net = IntNetwork.load(net_dir)
    if recipe is None and (net_dir / "recipe.toml").is_file():
        recipe, loaded = recipe_mod.load_settings(net_dir / "recipe.toml")
        recipe[recipe_mod.EMBEDDED] = str(net_dir / "recipe.toml")   # a file of the folder: it never chooses where files go
        settings = settings or loaded["export"]
    if settings is None:
        settings = ExportSettings.from_section(recipe["export"] if recipe is not None else {})
    vectors = settings.vectors if vectors is None else vectors
    csv = settings.csv if csv is None else csv
    intel_hex = settings.intel_hex if intel_hex is None else intel_hex
    opts = {k: getattr(settings, k) if v is None else v
            for k, v in (("coe_mif", coe_mif), ("pack_bits", pack_bits), ("verilog", verilog))}
    n_fe = settings.frontend_vectors if frontend_vectors is None else check_int(
        frontend_vectors, "frontend_vectors", "export", 0)
    fe, dataset = frontend_source(net, recipe, n_fe, frontend_events, dataset, progress)
    if inputs is not None:
        x, y = load_inputs(inputs, net)
    elif recipe is None:
        raise UsageError(f"{net_dir / 'recipe.toml'} is missing, so the test data is unknown; give --inputs FILE.npz")
    else:
        x, y = test_inputs(net, recipe, progress, dataset)
    return export_network(net, out_dir, x, y, vectors=vectors, recipe=recipe, csv=csv, intel_hex=intel_hex,
                          progress=progress, hardware_estimate=_hardware_estimate(net_dir),
                          c_model=c_model, frontend=fe, **opts)


def frontend_source(net: IntNetwork, recipe: dict | None, count: int, events=None, dataset=None, progress=True):
    """(frontvec.FrontEndSource or None (count 0, no events file), the data set (loaded here when needed)).

    events: one events file (read like `snnconvert classify` reads a recording); else `count` recordings of
    the test split of `dataset`, picked round-robin over the classes (vectors.pick_samples); index = the
    recording's position in the test split. The parameters come from the recipe's [frames] section."""
    from snnconvert.export.frontvec import FrontEndSource, check_network
    from snnconvert.export.vectors import pick_samples
    from snnconvert.frontend import FrontEnd
    if not count and events is None:
        return None, dataset
    if recipe is None:
        raise UsageError("front-end vectors need the recipe's [frames] section; the network folder holds no recipe.toml")
    fr = recipe["frames"]
    if fr["window"] != "burst":
        raise UsageError(f"front-end vectors need frames.window = \"burst\" (the front end's windows); the recipe "
                         f"has {fr['window']!r}")
    check_network(FrontEnd.from_section(fr, 1, 1), net.input_shape, net.input_q)   # before any data is read
    if events is not None:
        from snnconvert.events import read_events
        side = int(recipe["data"]["sensor_side"])
        stream = read_events(events, default_sensor=(side, side), time_unit=recipe["data"]["time_unit"])
        params = FrontEnd.from_section(fr, stream.width, stream.height)
        return FrontEndSource(params, [stream], np.zeros(1, np.int64), np.full(1, -1, np.int64),
                              f"events file {Path(events).name}"), dataset
    if dataset is None:
        from snnconvert import data
        dataset = data.load_dataset(recipe, progress=progress)
    recs = dataset.recordings
    if recs is None:
        raise UsageError("front-end vectors need the data set's recordings (or --frontend-events FILE)")
    te = np.asarray(dataset.split_index["test"], np.int64)
    labels = np.asarray(recs.labels, np.int64)[te]
    pick = pick_samples(te.size, count, labels)
    params = FrontEnd.from_section(fr, recs.width, recs.height)
    return FrontEndSource(params, [recs[int(te[i])][0] for i in pick.tolist()], pick, labels[pick],
                          "test split of the recipe's data set (index: position in the test split)"), dataset


def _hardware_estimate(net_dir: Path) -> dict | None:
    """The cost model's estimate stored in net_dir/metrics.json, or None (no file, or no estimate in it)."""
    from snnconvert.errors import FormatError
    from snnconvert.files import load_json
    path = net_dir / "metrics.json"
    if not path.is_file():
        return None
    m = load_json(path)
    est = m.get("hardware_estimate") if isinstance(m, dict) else None
    if est is not None and not (isinstance(est, dict) and est.get("is_estimate") is True
                                and isinstance(est.get("layers"), list) and isinstance(est.get("total"), dict)):
        raise FormatError(f"The 'hardware_estimate' field of {path} must be a cost model estimate "
                          f"(is_estimate, layers, total). Got {type(est).__name__} instead.")
    return est
