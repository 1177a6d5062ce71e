"""What the commands print: --quiet on every command, bars never sharing a line with a message,
a reader that leaves early, output paths refused before any work, numbers in words."""

import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from snnconvert import cli, console, pipeline
from snnconvert.events import EventStream, write_events
from snnconvert.sim.metrics import latency_text
from test_train import SMALL_LAYERS, _toml_layers

ROOT = Path(__file__).resolve().parents[1]
DEFAULT = str(ROOT / "recipes" / "default.toml")
BAR = re.compile(r"\d+%\|")   # a drawn tqdm bar: "reading:  40%|####      | 2/5"


def clean_lines(err: str) -> list[str]:
    """Check that no line holds text after a bar; return the message lines.

    A bar draws with carriage returns on one line and is cleared (spaces, then a carriage return)
    before a message; so a line with a carriage return must end blank, and a line without one
    must hold no bar.
    """
    messages = []
    for line in err.split("\n"):
        if "\r" in line:
            assert line.rsplit("\r", 1)[1].strip() == "", repr(line)
        else:
            assert not BAR.search(line), repr(line)
            messages.append(line)
    return [m for m in messages if m]


# --- the console module ---------------------------------------------------------------------

@pytest.fixture(autouse=True)
def _loud():
    console.set_quiet(False)
    yield
    console.set_quiet(False)


def test_message_during_a_bar_starts_its_own_line(capsys):
    with console.bar(range(5), desc="reading", unit="file") as b:
        for i in b:
            if i == 2:
                console.say("warning: file 2 is odd")
    console.say("[data] done in 1.0 s")
    err = capsys.readouterr().err
    assert BAR.search(err)  # the bar was drawn ...
    assert clean_lines(err) == ["warning: file 2 is odd", "[data] done in 1.0 s"]  # ... never beside a message


def test_error_closes_open_bars_and_starts_a_line(capsys):
    b = console.bar(range(5), desc="reading", unit="file")
    next(iter(b))
    console.error("data.limit is wrong")
    assert b.disable  # closed: nothing more is drawn after the error line
    err = capsys.readouterr().err
    assert clean_lines(err) == ["error: data.limit is wrong"]
    assert err.endswith("\nerror: data.limit is wrong\n")


def test_library_warning_starts_its_own_line(capsys):
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        warnings.showwarning = console.show_warning   # as the program sets it
        with console.bar(range(3), desc="train") as b:
            for _ in b:
                warnings.warn_explicit("lr is large", UserWarning, "train.py", 7)
    assert clean_lines(capsys.readouterr().err) == ["train.py:7: UserWarning: lr is large"] * 3


def test_quiet_draws_no_bar(capsys):
    console.set_quiet(True)
    for _ in console.bar(range(5), desc="reading"):
        console.say("a message still prints")
    assert capsys.readouterr().err == "a message still prints\n" * 5


@pytest.mark.parametrize("n, word, words, text", [
    (0, "epoch", None, "0 epochs"), (1, "epoch", None, "1 epoch"), (2, "epoch", None, "2 epochs"),
    (1, "class", "classes", "1 class"), (10, "class", "classes", "10 classes"),
])
def test_plural(n, word, words, text):
    assert console.plural(n, word, words) == text


# --- words, not Python objects ----------------------------------------------------------------

@pytest.mark.parametrize("samples, shape, mode, classes, text", [
    ({"train": 1257, "val": 180, "test": 360}, (1, 16, 16), "binary", 10,
     "1257 train, 180 validation, 360 test samples, 16x16 binary frames, 10 classes"),
    ({"train": 10, "val": 0, "test": 1}, (2, 28, 28), "polarity", 2,
     "10 train, 0 validation, 1 test sample, 28x28 polarity frames of 2 channels, 2 classes"),
    ({"train": 5, "val": 1, "test": 2}, (1, 8, 12), "count", 1,
     "5 train, 1 validation, 2 test samples, 12x8 count frames, 1 class"),
])
def test_data_line(samples, shape, mode, classes, text):
    assert pipeline.data_line(samples, shape, mode, classes) == text


@pytest.mark.parametrize("lat, text", [
    ({"pipeline_stages": 1}, "1 pipeline stage"),
    ({"pipeline_stages": 6}, "6 pipeline stages"),
    ({"pipeline_stages": 4, "window_steps": 50, "first_output_spike_steps_mean": 41.25,
      "samples_without_output_spike": 0},
     "4 pipeline stages, windows of 50 steps to the output, first output spike after 41.2 steps (mean)"),
    ({"pipeline_stages": 4, "window_steps": 50, "first_output_spike_steps_mean": None,
      "samples_without_output_spike": 1},
     "4 pipeline stages, windows of 50 steps to the output, no output spike, 1 sample without an output spike"),
])
def test_latency_in_words(lat, text):
    assert latency_text(lat) == text


def test_run_summary_in_words(capsys):
    s = {"name": "demo", "frame_accuracy": 0.98, "spike_accuracy": 0.975, "conversion_loss_pp": 0.5,
         "agreement": 0.99, "weight_bits": 4, "payload_bits": 4, "coding": "payload", "spikes_per_sample": 3603.2,
         "sops_per_sample": 304313.0, "macs_per_sample": 955008, "verify_passed": True, "recommended": None,
         "tolerance_pp": 0.5, "paths": {"report": "report.html"}}
    pipeline._print_summary(s)
    assert capsys.readouterr().out == """summary of run 'demo'
  frame_accuracy      0.98
  spike_accuracy      0.975
  conversion_loss_pp  0.5
  within tolerance    yes (loss 0.50 pp <= 0.50 pp)
  agreement           0.99
  weight_bits         4
  payload_bits        4
  coding              payload
  spikes_per_sample   3603
  sops_per_sample     3.043e+05
  macs_per_sample     955008
  verify_passed       yes
  recommended         none (sweep off)
  report              report.html
"""


# --- every command takes --quiet -------------------------------------------------------------

QUIET_CASES = [
    (["events", "missing"], "missing: unknown event file type ''; use one of .npz, .csv, .bin"),
    (["train", "missing"], "recipe file not found: missing"),
    (["import", "missing.onnx", "--recipe", "missing"], "recipe file not found: missing"),
    (["convert", "missing"], "missing/model.pt: file not found (TRAIN_DIR must be a folder written by "
                             "`snnconvert train`)"),
    (["simulate", "missing"], "missing/network.json: file not found (NET_DIR must be a folder written by "
                              "`snnconvert convert`)"),
    (["classify", "missing", "rec.npz"], "missing: holds neither network.json (a `snnconvert convert` folder) nor "
                                         "manifest.json (a `snnconvert export` folder)"),
    (["sweep", "missing"], "training folder not found: missing"),
    (["export", "missing", "out"], "network folder missing holds no network.json (run `snnconvert convert` first)"),
    (["verify", "missing"], "export folder not found: missing"),
    (["cmodel", "missing"], "export folder missing holds no manifest.json (run `snnconvert export` first)"),
    (["verilog", "missing"], "export folder not found: missing"),
    (["compare", "missing", "trace"], "export folder missing holds no manifest.json (run `snnconvert export` first)"),
    (["report", "missing"], "run folder not found: missing"),
    (["run", "missing"], "recipe file not found: missing"),
]


def test_quiet_cases_cover_every_command():
    assert sorted(argv[0] for argv, _ in QUIET_CASES) == sorted(cli.COMMANDS)


@pytest.mark.parametrize("argv, message", QUIET_CASES)
def test_every_command_accepts_quiet(argv, message, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert cli.main([*argv, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err == f"error: {message}\n"
    assert list(tmp_path.iterdir()) == []


# --- bars and messages of real commands -------------------------------------------------------

def _bad_recordings(folder: Path) -> Path:
    """Six good recordings and a truncated .bin (4 bytes: not a multiple of the 5-byte event)."""
    lines = ["file,label"]
    for i in range(6):
        t = np.arange(50) * 100
        write_events(EventStream.from_arrays(t, t % 8, t % 8, np.ones(50, int), 8, 8), folder / f"r{i}.npz")
        lines.append(f"r{i}.npz,{i % 2}")
    (folder / "bad.bin").write_bytes(b"\x05\x11\x80\x03")
    (folder / "index.csv").write_text("\n".join(lines + ["bad.bin,0"]) + "\n")
    recipe = folder / "recipe.toml"
    recipe.write_text('name = "bad"\n[data]\nsource = "recordings"\nrecordings_index = "index.csv"\nsensor_side = 8\n')
    return recipe


BAD_BIN = ("error: {d}/bad.bin: truncated: 4 bytes is not a multiple of 5; the last event starts at byte offset 0 "
           "and is incomplete")


@pytest.mark.parametrize("command, before", [("train", ""), ("run", "[data] running ...\n")])
def test_error_while_reading_quiet_and_not(tmp_path, capsys, command, before):
    recipe = _bad_recordings(tmp_path)
    argv = [command, str(recipe), "--out", str(tmp_path / "out")]
    assert cli.main([*argv, "--quiet"]) == 2
    assert capsys.readouterr().err == before + BAD_BIN.format(d=tmp_path) + "\n"
    assert cli.main(argv) == 2
    err = capsys.readouterr().err
    assert BAR.search(err) and "frames:" in err  # the folder's frames bar is drawn without --quiet
    assert clean_lines(err) == [*before.splitlines(), BAD_BIN.format(d=tmp_path)]


FAST = ["--set", "train.epochs=1", "--set", "train.threads=1", "--set", "data.limit=150",
        "--set", f"model.layers={_toml_layers(SMALL_LAYERS)}"]


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    root = tmp_path_factory.mktemp("console")
    cache = ["--set", f"data.cache_dir={root / 'cache'}"]
    for argv in (["train", DEFAULT, *FAST, *cache, "--out", str(root / "train")],
                 ["convert", str(root / "train"), "--out", str(root / "net")],
                 ["export", str(root / "net"), str(root / "export"), "--vectors", "4"]):
        assert cli.main([*argv, "--quiet"]) == 0
    return root, cache


COMMANDS = [
    ("train", lambda r, c, o: ["train", DEFAULT, *FAST, *c, "--out", str(o)], ["model", "float epoch 1/1"]),
    ("convert", lambda r, c, o: ["convert", str(r / "train"), "--out", str(o)], []),
    ("simulate", lambda r, c, o: ["simulate", str(r / "net"), "--reference", "--limit", "6"], []),
    ("export", lambda r, c, o: ["export", str(r / "net"), str(o), "--vectors", "4"], []),
    ("verify", lambda r, c, o: ["verify", str(r / "export")], []),
    ("sweep", lambda r, c, o: ["sweep", str(r / "train"), "--weight-bits", "4", "--payload-bits", "2",
                               "--jobs", "1", "--out", str(o)], []),
]


@pytest.mark.parametrize("quiet", [True, False], ids=["quiet", "bars"])
@pytest.mark.parametrize("name, make, messages", COMMANDS, ids=[c[0] for c in COMMANDS])
def test_bars_silenced_by_quiet_and_never_beside_a_message(trained, tmp_path, capsys, name, make, messages, quiet):
    root, cache = trained
    argv = make(root, cache, tmp_path / name)
    assert cli.main([*argv, "--quiet"] if quiet else argv) == 0
    err = capsys.readouterr().err
    if quiet:
        assert "\r" not in err and not BAR.search(err)
    else:
        assert BAR.search(err), name   # each of these commands waits on at least one bar
    assert [m.split(":")[0] for m in clean_lines(err)] == ([] if quiet else messages)


# --- a reader that leaves early ---------------------------------------------------------------

@pytest.fixture(scope="module")
def recording(tmp_path_factory):
    d = tmp_path_factory.mktemp("pipe")
    t = np.arange(2000) * 25
    write_events(EventStream.from_arrays(t, t % 34, (t // 34) % 34, np.where(t % 2, 1, -1), 34, 34), d / "r.npz")
    return d / "r.npz"


@pytest.mark.parametrize("argv, both, code", [
    (["events", "{f}"], False, 0),
    (["--help"], False, 0),
    (["events", "{f}"], True, 0),           # `2>&1 | head -1`: stderr goes too
    (["events", "{f}.missing.npz"], True, 2),  # the error line is lost with the reader; the exit code is not
])
def test_reader_gone_exits_quietly(recording, argv, both, code):
    """`snnconvert ... | head -1`: the reader closes the pipe (here before the first byte, the
    worst case); the command ends with its own exit code, no message, no traceback."""
    read, write = os.pipe()
    os.close(read)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    try:
        p = subprocess.run([sys.executable, "-m", "snnconvert", *[a.format(f=recording) for a in argv]],
                           stdout=write, stderr=write if both else subprocess.PIPE, env=env, timeout=120)
    finally:
        os.close(write)
    assert p.returncode == code
    assert p.stderr in (None, b"")


# --- output paths refused before any work ------------------------------------------------------

@pytest.mark.parametrize("argv, message", [
    (["events", "rec.npz", "--plot", "{f}/x.png"], "--plot {f}/x.png: cannot write there: {f} is a file, not a folder"),
    (["events", "rec.npz", "--plot", "{f}/a/b/x.png"],
     "--plot {f}/a/b/x.png: cannot write there: {f} is a file, not a folder"),
    (["events", "rec.npz", "--plot", "{d}"], "--plot {d}: cannot write there: {d} is a folder, not a file"),
    (["train", DEFAULT, "--out", "{f}/train"], "--out {f}/train: cannot write there: {f} is a file, not a folder"),
    (["train", DEFAULT, "--out", "{f}"], "--out {f}: cannot write there: {f} is a file, not a folder"),
    (["convert", "train", "--out", "{f}/net"], "--out {f}/net: cannot write there: {f} is a file, not a folder"),
    (["sweep", "train", "--out", "{f}/sweep"], "--out {f}/sweep: cannot write there: {f} is a file, not a folder"),
    (["export", "net", "{f}/export"], "OUT_DIR {f}/export: cannot write there: {f} is a file, not a folder"),
    (["export", "net", "{f}"], "OUT_DIR {f}: cannot write there: {f} is a file, not a folder"),
    (["verify", "export", "--json", "{f}/v.json"], "--json {f}/v.json: cannot write there: {f} is a file, not a folder"),
    (["verify", "export", "--json", "{d}"], "--json {d}: cannot write there: {d} is a folder, not a file"),
    (["run", DEFAULT, "--out", "{f}/deep/run"], "--out {f}/deep/run: cannot write there: {f} is a file, not a folder"),
])
def test_output_path_under_a_file_is_refused_first(tmp_path, capsys, monkeypatch, argv, message):
    monkeypatch.chdir(tmp_path)
    f, d = tmp_path / "notes.txt", tmp_path / "folder"
    f.write_text("keep me\n")
    d.mkdir()
    before = sorted((p, p.stat().st_mtime_ns) for p in tmp_path.rglob("*"))
    assert cli.main([a.format(f=f, d=d) for a in argv]) == 2
    assert capsys.readouterr().err == f"error: {message.format(f=f, d=d)}\n"
    assert sorted((p, p.stat().st_mtime_ns) for p in tmp_path.rglob("*")) == before
    assert f.read_text() == "keep me\n"


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into any folder")
def test_output_path_in_a_read_only_folder_is_refused(tmp_path, capsys):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        assert cli.main(["events", "rec.npz", "--plot", str(ro / "x.png")]) == 2
    finally:
        ro.chmod(0o700)
    assert capsys.readouterr().err == f"error: --plot {ro}/x.png: cannot write there: no permission to write in {ro}\n"
