"""Front-end golden vectors: hand-computed tables, the export, verify naming the first mismatch, compare,
the C front end compiled by the system C compiler, and export from a network folder (CLI)."""

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from test_export import small_inputs, small_net

from snnconvert import frontend
from snnconvert.cli import main
from snnconvert.errors import FormatError, UsageError
from snnconvert.events import EVENT_DTYPE, EventStream, write_events
from snnconvert.export import cfront, cmodel, export_network, verify
from snnconvert.export import frontvec as FV
from snnconvert.export.compare import compare

CC = shutil.which("cc") or shutil.which("gcc")
# ISO C99 with every common warning as an error (gcc options, common practice for portable C)
FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O1"]


def params(**kw):
    base = {"bin_us": 100, "relative": False, "upper_16": 0, "lower_16": 0, "upper_count": 3, "lower_count": 2,
            "background_bins": 4, "min_bins": 0, "merge_bins": 0, "width": 12, "height": 12, "size": 6,
            "mode": "binary", "threshold": 2, "max_count": 1}
    return frontend.FrontEnd(**{**base, **kw})


def events(t, x, y, p=None):
    ev = np.zeros(len(t), EVENT_DTYPE)
    ev["t"], ev["x"], ev["y"] = t, x, y
    ev["p"] = 1 if p is None else p
    return ev


# A hand-made stream on a 12x12 sensor, grid 6 (2x2 sensor pixels per grid pixel), 100 us bins
HAND = events([0, 150, 210, 230, 260, 320, 340, 360, 700], [0, 1, 0, 1, 5, 0, 11, 11, 3],
              [0, 0, 1, 1, 5, 0, 11, 10, 3])


def test_hand_stream_tables_binary_payload_coding():
    out = FV.run_stream(HAND, params(), "payload", 1)
    # hand-computed: bins [0,100) .. [700,800) hold 1, 1, 3, 3, 0, 0, 0, 1 events; absolute hi 3, lo 2:
    # bin 2 opens (3 >= 3), bin 3 stays (3 >= 2), bin 4 closes (0 < 2) -> window bins [2, 4) = [200, 400) us
    assert out["t0"] == 0
    assert out["bins"].tolist() == [[k, 100 * k, c, 3, 2, o] for k, (c, o) in
                                    enumerate(zip([1, 1, 3, 3, 0, 0, 0, 1], [0, 0, 1, 1, 0, 0, 0, 0]))]
    assert out["windows"].tolist() == [[0, 2, 4, 200, 400]]
    # grid (x//2, y//2): events at 210, 230 (and 320) hit grid (0, 0): the 2nd (t 230) emits; 340, 360 hit
    # (5, 5): the 2nd (t 360) emits; 260 hits (2, 2) once: no event. Addresses y*6 + x: 0 and 35.
    assert out["gated"].tolist() == [[0, 230, 0, 0, 0, 1], [0, 360, 5, 5, 0, 1]]
    assert out["input"].tolist() == [[0, 0, 0, 1], [0, 35, 0, 1]]
    assert out["frames"].shape == (1, 1, 6, 6) and out["frames"].sum() == 2


# count mode, max_count 2, 4x4 sensor, grid 2: pixel (0,0) gets 3 events, (i 0, j 1) and (1, 1) one each
COUNT = events([0, 1, 2, 3, 4], [0, 1, 0, 2, 3], [0, 0, 1, 0, 3])


@pytest.mark.parametrize("coding,rows", [
    # payload coding: by address, t = 0 (addresses (c*2 + i)*2 + j: 0, 1, 3), payloads min(n, 2) = 2, 1, 1
    ("payload", [[0, 0, 0, 2], [0, 1, 0, 1], [0, 3, 0, 1]]),
    # ttfs, q = 2: t = q - a: address 0 at step 0, addresses 1 and 3 at step 1 (by step, then address)
    ("ttfs", [[0, 0, 0, 2], [0, 1, 1, 1], [0, 3, 1, 1]]),
])
def test_count_mode_emits_at_window_end_by_address(coding, rows):
    fe = params(bin_us=10, upper_count=1, lower_count=1, width=4, height=4, size=2, mode="count", max_count=2)
    out = FV.run_stream(COUNT, fe, coding, 2)
    assert out["windows"].tolist() == [[0, 0, 1, 0, 10]]          # one bin of 5 events, open at the last bin
    assert out["gated"].tolist() == [[0, 10, 0, 0, 0, 2], [0, 10, 1, 0, 0, 1], [0, 10, 1, 1, 0, 1]]
    assert out["input"].tolist() == rows


# relative thresholds, B = 2, upper 2.0 (32/16), lower 1.0 (16/16); counts per 10 us bin:
REL_COUNTS = [2, 2, 5, 2, 1, 4, 0, 3]
# hand-computed from S_k = max(sum of the last 2 closed-bin counts, 2), hi = floor(32 S/32) + 1,
# lo = ceil(16 S / 32): S = 2, 2, 4 (bins 0, 1 closed), 4, 4 (frozen while open), 3 (bins 1, 4), 3, 2 (bins 4, 6)
REL_HI = [3, 3, 5, 5, 5, 4, 4, 3]
REL_LO = [1, 1, 2, 2, 2, 2, 2, 1]
REL_OPEN = [0, 0, 1, 1, 0, 1, 0, 1]


@pytest.mark.parametrize("merge,min_bins,windows", [
    (0, 0, [[0, 2, 4], [1, 5, 6], [2, 7, 8]]),       # raw runs; the last one is open at the last bin
    (2, 0, [[0, 2, 8]]),                              # gaps of 1 bin < 2 merge all three
    (0, 2, [[0, 2, 4]]),                              # one-bin windows dropped
])
def test_relative_thresholds_merge_and_minimum(merge, min_bins, windows):
    t = np.repeat(np.arange(8) * 10, REL_COUNTS)
    fe = params(bin_us=10, relative=True, upper_16=32, lower_16=16, background_bins=2, merge_bins=merge,
                min_bins=min_bins, width=2, height=2, size=1, threshold=1)
    out = FV.run_stream(events(t, np.zeros_like(t), np.zeros_like(t)), fe, "payload", 1)
    assert out["bins"][:, 2:].tolist() == [list(r) for r in zip(REL_COUNTS, REL_HI, REL_LO, REL_OPEN)]
    assert out["windows"][:, :3].tolist() == windows
    assert out["windows"][:, 3:].tolist() == [[10 * a, 10 * b] for _, a, b in windows]


def test_params_round_trip_and_bad_params_name_the_field():
    fe = params(mode="polarity", max_count=3)
    assert FV.params_from_manifest(json.loads(json.dumps(FV.params_dict(fe))), "m.json") == fe
    with pytest.raises(FormatError, match=r"m.json: field 'frontend.params': .*'mode'.*Got 'blur'"):
        FV.params_from_manifest(dict(FV.params_dict(fe), mode="blur"), "m.json")
    with pytest.raises(FormatError, match=r"missing \['size'\]"):
        FV.params_from_manifest({k: v for k, v in FV.params_dict(fe).items() if k != "size"}, "m.json")


def test_network_must_take_the_front_end_frame():
    with pytest.raises(UsageError, match=r"need a network whose input is one front-end frame \[1, 8, 8\] with largest "
                                         r"payload 1; the network takes \[1, 6, 6\]"):
        FV.check_network(params(size=8), (1, 6, 6), 1)


# ------------------------------------------------------------------------------ export and verify

def bursty(seed, n_bursts=3, sensor=12):
    """Seeded stream: sparse noise plus bursts of events on a patch (a demo stream, not sensor data)."""
    rng = np.random.default_rng(seed)
    t = [rng.integers(0, 3000, 12)]
    x, y = [rng.integers(0, sensor, 12)], [rng.integers(0, sensor, 12)]
    for b in range(n_bursts):
        k = 40
        t.append(400 + 900 * b + rng.integers(0, 250, k))
        x.append(rng.integers(2, 9, k))
        y.append(rng.integers(3, 10, k))
    t, x, y = np.concatenate(t), np.concatenate(x), np.concatenate(y)
    order = np.argsort(t, kind="stable")
    return events(t[order], x[order], y[order], np.where(rng.random(t.size) < 0.5, 1, -1))


def source(fe, n=2):
    return FV.FrontEndSource(fe, [bursty(s) for s in range(n)], np.arange(n), np.arange(n) % 3, "demo streams")


@pytest.fixture(scope="module")
def pristine(tmp_path_factory):
    root = tmp_path_factory.mktemp("frontvec")
    x, y = small_inputs()
    export_network(small_net(), root / "binary", x, y, vectors=2, progress=False, directed=False,
                   frontend=source(params(upper_count=4, lower_count=2)))
    x2, y2 = small_inputs(input_q=3)
    export_network(small_net("ttfs", input_q=3), root / "count", x2, y2, vectors=2, progress=False, directed=False,
                   frontend=source(params(relative=True, upper_16=40, lower_16=12, background_bins=3, merge_bins=2,
                                          min_bins=2, mode="count", max_count=3, bin_us=50)))
    return root


@pytest.fixture
def exp(pristine, tmp_path):
    return shutil.copytree(pristine / "binary", tmp_path / "export")


@pytest.mark.parametrize("kind", ["binary", "count"])
def test_export_writes_the_vectors_and_verify_passes(pristine, kind):
    folder = pristine / kind
    man = json.loads((folder / "manifest.json").read_text())
    fe = man["frontend"]
    assert man["version"] == 2 and fe["version"] == 1 and fe["streams"] == 2 and fe["csv_folder"] == "frontend"
    z = np.load(folder / "frontend.npz")
    assert fe["windows"] == len(z["windows"]) > 0 and fe["gated_events"] == len(z["gated"]) > 0
    # the files equal a direct run of frontend.py on the streams, and frame(gated) is each window's frame
    params_ = FV.params_from_manifest(fe["params"], "m")
    for s in range(2):
        mine = FV.run_stream(bursty(s), params_, man["coding"], man["input"]["q"])
        for name in FV.TABLES:
            assert np.array_equal(FV.rows_of(z, name, s), mine[name])
            rows = np.loadtxt(folder / f"frontend/stream_{s:04d}/{name}.csv", delimiter=",", skiprows=1,
                              dtype=np.int64, ndmin=2)
            assert np.array_equal(rows.reshape(-1, len(FV.COLUMNS[name])), mine[name])
    res = verify(folder, progress=False)
    assert res.passed and res.streams == 2, res.summary()
    assert res.summary().startswith("verify: passed: 2 samples, 2 front-end streams, 4 layers")
    assert sorted(p for p in man["files"] if p.startswith("frontend")) == sorted(
        ["frontend.npz", "frontend/summary.csv"] + [f"frontend/stream_{s:04d}/{t}.csv" for s in range(2)
                                                      for t in FV.TABLES])


def _edit(path: Path, lineno: int, fn):
    lines = path.read_text().split("\n")
    lines[lineno - 1] = fn(lines[lineno - 1])
    path.write_text("\n".join(lines))


def _bump(col):
    def fn(line):
        v = line.split(",")
        v[col] = str(int(v[col]) + 1)
        return ",".join(v)
    return fn


def _table(folder, name, s=0):
    return FV.rows_of(np.load(folder / "frontend.npz"), name, s)


@pytest.mark.parametrize("name,col", [("windows", 4), ("gated", 5), ("gated", 1), ("input", 1), ("bins", 2)])
def test_corrupt_line_is_named_by_stream_window_and_row(exp, name, col, capsys):
    rows = _table(exp, name)
    k = len(rows) // 2
    rel = f"frontend/stream_0000/{name}.csv"
    _edit(exp / rel, k + 2, _bump(col))
    bad = rows[k].copy()
    bad[col] += 1
    window, pos = FV.locate(name, rows, k)
    place = {"windows": f"window {window}", "gated": f"window {window}, event {pos}",
             "input": f"window {window}, input event {pos}", "bins": f"bin {k}"}[name]
    want = (f"verify: FAILED: first mismatch: stream 0, front end {name}, {place}: expected "
            f"{FV.fmt_row(name, bad)}, got {FV.fmt_row(name, rows[k])} [{rel} line {k + 2}]")
    assert main(["verify", str(exp), "--quiet"]) == 1
    assert capsys.readouterr().out.strip() == want + " (2 mismatching places in all)"   # the line and its sha256


def test_deleted_gated_line_shows_the_event_that_moved_up(exp):
    rows = _table(exp, "gated")
    rel = exp / "frontend/stream_0000/gated.csv"
    lines = rel.read_text().split("\n")
    del lines[1]                                          # the first gated event (line 2)
    rel.write_text("\n".join(lines))
    m = verify(exp, progress=False).first_mismatch
    assert (m.layer, m.window, m.neuron, m.line) == ("gated", int(rows[1, 0]), 0, 2)
    assert m.expected == FV.fmt_row("gated", rows[1]) and m.got == FV.fmt_row("gated", rows[0])


def test_corrupt_raw_event_in_csv_is_named(exp):
    raw = _table(exp, "events", 1)
    _edit(exp / "frontend/stream_0001/events.csv", 4, _bump(0))     # raw event 2 of stream 1, one us later
    t, x, y, p = (int(v) for v in raw[2])
    m = verify(exp, progress=False).first_mismatch
    assert m.message() == (f"first mismatch: stream 1, front end events, raw event 2: expected (t {t + 1}, x {x}, "
                           f"y {y}, p {p}), got (t {t}, x {x}, y {y}, p {p}) [frontend/stream_0001/events.csv line 4]")


def test_changed_parameter_is_caught_by_re_running_the_front_end(exp):
    """The manifest is not in its own sha256 list: a changed opening count must show in the re-run tables."""
    path = exp / "manifest.json"
    man = json.loads(path.read_text())
    man["frontend"]["params"]["upper_count"] += 1
    path.write_text(json.dumps(man))
    m = verify(exp, progress=False).first_mismatch
    # every bin row carries hi = upper_count: bin 0 of stream 0 differs first, in the NPZ
    assert (m.kind, m.sample, m.layer, m.neuron, m.file) == ("frontend", 0, "bins", 0, "frontend.npz")


@pytest.mark.parametrize("edit,message", [
    (lambda fe: fe["params"].update(mode="blur"), r"field 'frontend.params': The 'mode' parameter"),
    (lambda fe: fe.update(version=7), r"front-end vector version 7 is not supported \(this build reads 1\)"),
])
def test_bad_frontend_manifest_exits_2(exp, edit, message, capsys):
    path = exp / "manifest.json"
    man = json.loads(path.read_text())
    edit(man["frontend"])
    path.write_text(json.dumps(man))
    with pytest.raises(FormatError, match=message):
        verify(exp, progress=False)
    assert main(["verify", str(exp), "--quiet"]) == 2
    assert capsys.readouterr().err.startswith("error: ")


def test_version_1_manifest_without_frontend_still_verifies(exp):
    for rel in list(json.loads((exp / "manifest.json").read_text())["files"]):
        if rel.startswith("frontend"):
            (exp / rel).unlink()
    man = json.loads((exp / "manifest.json").read_text())
    man.update(version=1, files={k: v for k, v in man["files"].items() if not k.startswith("frontend")})
    del man["frontend"]
    (exp / "manifest.json").write_text(json.dumps(man))
    res = verify(exp, progress=False)
    assert res.passed and res.streams == 0


# ------------------------------------------------------------------------------ compare

def test_compare_checks_the_front_end_tables_of_a_trace(pristine, tmp_path):
    folder = pristine / "binary"
    trace = tmp_path / "trace"
    shutil.copytree(folder / "frontend", trace / "frontend")
    res = compare(folder, trace)
    assert res.passed and [r[:4] for r in res.rows if r[0] == "frontend"] == [
        ["frontend", t, 2, 2] for t in FV.CHECKED]
    rows = _table(folder, "gated", 1)
    path = trace / "frontend/stream_0001/gated.csv"
    lines = path.read_text().split("\n")
    lines[1], lines[2] = lines[2], lines[1]                   # two events swapped: a set still matches
    path.write_text("\n".join(lines))
    assert compare(folder, trace, unordered=True).passed
    res = compare(folder, trace)
    assert res.summary() == (f"compare: FAILED: first mismatch: stream 1, front end gated, window {rows[0, 0]}, event 0: "
                             f"expected {FV.fmt_row('gated', rows[0])}, got {FV.fmt_row('gated', rows[1])} "
                             f"[frontend/stream_0001/gated.csv]")
    (trace / "frontend/stream_0009").mkdir()
    with pytest.raises(FormatError, match="stream_0009: no golden front-end stream of that name"):
        compare(folder, trace)


# ------------------------------------------------------------------------------ C front end

needs_cc = pytest.mark.skipif(CC is None, reason="no C compiler (cc); the Debian package gcc provides one")


def build(folder: Path, sources: dict) -> Path:
    cdir = folder / "c"
    cdir.mkdir(exist_ok=True)
    for name, text in sources.items():
        (cdir / name).write_text(text)
    exe = cdir / "snn_frontend"
    done = subprocess.run([CC, *FLAGS, "-o", str(exe), *(str(cdir / n) for n in cfront.MAIN_FILES)],
                          check=False, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    return exe


@needs_cc
@pytest.mark.parametrize("kind", ["binary", "count"])
def test_c_front_end_passes_bit_exactly_and_its_trace_equals_frontend_py(pristine, tmp_path, kind):
    folder = shutil.copytree(pristine / kind, tmp_path / "export")
    src = cmodel.c_sources(folder)
    assert set(cfront.FILES) <= set(src)
    exe = build(folder, src)
    trace = tmp_path / "trace"
    run = subprocess.run([str(exe), str(trace)], check=False, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0 and run.stdout == "PASS: 2 front-end streams match bit for bit\n", run.stdout
    man = json.loads((folder / "manifest.json").read_text())
    fe = FV.params_from_manifest(man["frontend"]["params"], "m")
    for s in range(2):   # the C tables against frontend.py directly, and against the golden files
        mine = FV.run_stream(bursty(s), fe, man["coding"], man["input"]["q"])
        for name in FV.CHECKED:
            text = (trace / f"frontend/stream_{s:04d}/{name}.csv").read_text()
            assert text == (folder / f"frontend/stream_{s:04d}/{name}.csv").read_text()
            assert text == FV.csv_bytes(FV.COLUMNS[name], mine[name]).decode()
    assert compare(folder, trace).passed


@needs_cc
@pytest.mark.parametrize("coding,fe", [
    ("payload", params(mode="polarity", size=3, max_count=3, relative=True, upper_16=24, lower_16=8,
                       background_bins=5, bin_us=40)),
    ("ttfs", params(mode="polarity", size=5, max_count=2, merge_bins=3, min_bins=1)),
])
def test_c_front_end_polarity_mode_from_the_manifest_fields_alone(tmp_path, coding, fe):
    """Two channels (OFF events to channel 1) and uneven sensor/grid ratios, C against frontend.py: the C
    sources come from a manifest's front-end fields and frontend.npz arrays alone."""
    src = source(fe, 3)
    q = fe.payload_max
    z = FV.frontend_vectors(src, coding, q)
    man = {"frontend": FV.manifest_entry(src, z, True), "coding": coding, "input": {"q": q}}
    assert set(z["gated"][:, 5].tolist()) == {0, 1}              # both channels emit
    exe = build(tmp_path, cfront.c_sources(json.loads(json.dumps(man)), z, "manifest.json"))
    run = subprocess.run([str(exe), str(tmp_path / "trace")], check=False, capture_output=True, text=True,
                         timeout=120)
    assert run.returncode == 0 and run.stdout == "PASS: 3 front-end streams match bit for bit\n", run.stdout
    for s in range(3):
        mine = FV.run_stream(bursty(s), fe, coding, q)
        for name in FV.CHECKED:
            assert (tmp_path / f"trace/frontend/stream_{s:04d}/{name}.csv").read_text() == \
                FV.csv_bytes(FV.COLUMNS[name], mine[name]).decode()


@needs_cc
def test_c_front_end_with_a_wrong_hysteresis_rule_names_the_first_mismatch(tmp_path):
    # counts 1, 3, 2, 1 per 10 us bin, hi 3, lo 2: bin 1 opens, bin 2 stays open (2 >= 2), bin 3 closes
    t = np.repeat(np.arange(4) * 10, [1, 3, 2, 1])
    fe = params(bin_us=10, upper_count=3, lower_count=2)
    x, y = small_inputs()
    folder = tmp_path / "export"
    export_network(small_net(), folder, x, y, vectors=1, progress=False, directed=False, frontend=FV.FrontEndSource(
        fe, [events(t, 0 * t, 0 * t)], np.zeros(1), np.zeros(1), "hand"))
    assert FV.rows_of(np.load(folder / "frontend.npz"), "windows", 0).tolist() == [[0, 1, 3, 10, 30]]
    src = cmodel.c_sources(folder)
    # a common mistake: closing at c <= lo instead of c < lo, so bin 2 closes the window
    wrong = cfront.OPEN_LINE.replace("(c >= lo)", "(c > lo)")
    assert wrong != cfront.OPEN_LINE
    src["snn_frontend.c"] = src["snn_frontend.c"].replace(cfront.OPEN_LINE, wrong)
    run = subprocess.run([str(build(folder, src))], check=False, capture_output=True, text=True, timeout=120)
    assert run.returncode == 1
    assert run.stdout == ("FAIL: first mismatch: stream 0, front end bins, bin 2: expected (bin 2, t_start 20, "
                          "count 2, upper 3, lower 2, open 1), got (bin 2, t_start 20, count 2, upper 3, lower 2, "
                          "open 0)\n")


# ------------------------------------------------------------------------------ from a network folder

@pytest.fixture(scope="module")
def net_dir(tmp_path_factory):
    """A network folder: small_net (input 1x6x6, binary) and a recipe whose front end makes 6x6 binary frames."""
    from snnconvert import recipe
    root = tmp_path_factory.mktemp("frontvec-net")
    small_net().save(root / "net")
    r = recipe.from_dict({"name": "fv", "data": {"limit": 150, "cache_dir": str(root / "cache")},
                          "frames": {"size": 6}}, base_dir=root)
    recipe.save(r, root / "net")
    return root


def test_cli_export_with_an_events_file(net_dir, tmp_path, capsys):
    ev = bursty(3, sensor=32)
    write_events(EventStream(ev, 32, 32), tmp_path / "rec.npz")
    x, _ = small_inputs()
    np.savez(tmp_path / "x.npz", x=x)
    out = tmp_path / "export"
    assert main(["export", str(net_dir / "net"), str(out), "--vectors", "1", "--inputs", str(tmp_path / "x.npz"),
                 "--frontend-events", str(tmp_path / "rec.npz"), "--quiet"]) == 0
    man = json.loads((out / "manifest.json").read_text())
    fe = man["frontend"]
    assert fe["source"] == "events file rec.npz" and fe["streams"] == 1
    assert fe["params"]["width"] == 32 and fe["params"]["size"] == 6 and fe["params"]["relative"] is True
    printed = capsys.readouterr().out.splitlines()
    assert printed[1] == (f"export: front-end vectors: 1 streams, {fe['windows']} windows, {fe['gated_events']} "
                          f"gated input events -> {out / 'frontend'}")
    assert verify(out, progress=False).passed


def test_cli_export_front_end_vectors_of_the_test_split(net_dir, tmp_path):
    from snnconvert import data, recipe
    out = tmp_path / "export"
    x, _ = small_inputs()
    np.savez(tmp_path / "x.npz", x=x)   # golden inputs for the 3-class small_net; the streams come from the data set
    assert main(["export", str(net_dir / "net"), str(out), "--vectors", "1", "--inputs", str(tmp_path / "x.npz"),
                 "--frontend-vectors", "3", "--no-csv", "--quiet"]) == 0
    man = json.loads((out / "manifest.json").read_text())
    z = np.load(out / "frontend.npz")
    ds = data.load_dataset(recipe.load(net_dir / "net" / "recipe.toml"), progress=False)
    te = ds.split_index["test"]
    # round-robin over the classes: the first recording of each of the first three classes in the test split
    labels = ds.recordings.labels[te]
    want = [int(np.flatnonzero(labels == c)[0]) for c in np.unique(labels)[:3]]
    assert z["stream_index"].tolist() == want and z["label"].tolist() == labels[want].tolist()
    assert man["frontend"]["csv_folder"] is None and verify(out, progress=False).passed
    # every simulated digit recording holds at least one burst (the front end the network was trained on)
    assert sorted(set(z["windows"][:, 0].tolist())) == [0, 1, 2] and len(z["gated"]) > 0


def test_cli_export_refuses_a_network_the_front_end_does_not_feed(net_dir, tmp_path, capsys):
    from snnconvert import recipe
    r = recipe.load(net_dir / "net" / "recipe.toml", overrides=["frames.size=8"])
    folder = shutil.copytree(net_dir / "net", tmp_path / "net")
    recipe.save(r, folder)
    assert main(["export", str(folder), str(tmp_path / "export"), "--frontend-vectors", "1", "--quiet"]) == 2
    assert capsys.readouterr().err.strip() == (
        "error: front-end vectors need a network whose input is one front-end frame [1, 8, 8] with largest payload "
        "1; the network takes [1, 6, 6] with largest payload 1 (frames.windows_used = 1 and the [frames] mode of "
        "training)")
