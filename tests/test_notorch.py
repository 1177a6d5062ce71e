"""Checking an export needs numpy alone: verify, the reference simulator, the export readers and
arith import and run in a Python where torch (and the training/plotting libraries) cannot be imported."""

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
from test_export import small_inputs, small_net

from snnconvert.export import export_network

ROOT = Path(__file__).resolve().parents[1]

# Makes every import of these packages fail, as on a machine where they are not installed.
PRELUDE = textwrap.dedent("""
    import sys
    BLOCKED = ("torch", "scipy", "sklearn", "matplotlib", "joblib", "threadpoolctl")
    class _Blocked:
        def find_spec(self, name, path=None, target=None):
            if name.split(".")[0] in BLOCKED:
                raise ModuleNotFoundError(f"No module named {name!r} (blocked for this test)", name=name)
    sys.meta_path.insert(0, _Blocked())
""")


def _python(code: str, *args: str) -> subprocess.CompletedProcess:
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "OMP_NUM_THREADS": "1"}
    return subprocess.run([sys.executable, "-c", PRELUDE + textwrap.dedent(code), *args], capture_output=True,
                          text=True, env=env, cwd=ROOT, timeout=120, check=False)


def _cli(*args: str) -> subprocess.CompletedProcess:
    """`python -m snnconvert ARGS` with the blocked packages."""
    return _python("""
        import runpy
        runpy.run_module("snnconvert", run_name="__main__", alter_sys=True)
    """, *args)


@pytest.fixture(scope="module")
def exports(tmp_path_factory):
    root = tmp_path_factory.mktemp("notorch")
    x, y = small_inputs()
    for coding in ("payload", "ttfs"):
        export_network(small_net(coding), root / coding, x, y, vectors=4, progress=False)
    return root


def test_the_blocker_really_blocks():
    r = _python("""
        try:
            import torch
        except ImportError as exc:
            print("blocked:", exc)
    """)
    assert r.returncode == 0 and r.stdout.startswith("blocked:"), r.stderr


def test_readers_reference_and_arith_import_and_run_without_torch():
    r = _python("""
        import numpy as np
        import snnconvert.export.verify, snnconvert.sim.reference
        from snnconvert import arith, files, frontend
        from snnconvert.export import manifest, memfile
        from snnconvert.intnet import IntNetwork
        # requantize with numpy alone: 2.5 rounds up to 3 (M = 1/2: M0 = 2^15, n = 16), -2.5 clamps to 0
        m0, n = arith.fixed_point_multiplier(np.array([0.5]), bits=16)
        print(arith.requantize(np.array([[5], [-5]], dtype=np.int64), m0, n, 15).ravel().tolist())
        print(files.fingerprint(np.arange(3), {"a": [1, 2]}) != "")
        # the front end with numpy alone: counts [0, 3, 6, 2, 1] in 10 us bins, hi 5, lo 2 -> bins [2, 4)
        fe = frontend.FrontEnd(bin_us=10, relative=False, upper_16=0, lower_16=0, upper_count=5, lower_count=2,
                               background_bins=1, min_bins=0, merge_bins=0, width=2, height=2, size=1,
                               mode="binary", threshold=1, max_count=1)
        t = np.repeat(np.arange(5) * 10, [0, 3, 6, 2, 1])
        print(frontend.windows(t + 10, fe, t0=0).tolist())
        print(sorted(m for m in sys.modules if m.split(".")[0] in BLOCKED))
    """)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split("\n")[:4] == ["[3, 0]", "True", "[[30, 50]]", "[]"]


@pytest.mark.parametrize("coding", ["payload", "ttfs"])
def test_cli_verify_passes_without_torch(exports, tmp_path, coding):
    res = tmp_path / "verify.json"
    r = _cli("verify", str(exports / coding), "--json", str(res), "--quiet")
    assert r.returncode == 0, r.stderr
    # 4 test samples plus the directed vectors the export adds (listed in its manifest)
    n = json.loads((exports / coding / "manifest.json").read_text())["vectors"]["count"]
    assert n > 4 and r.stdout.startswith(f"verify: passed: {n} samples, 4 layers")
    assert json.loads(res.read_text())["passed"] is True


def test_cli_verify_names_a_corrupt_table_word_without_torch(exports, tmp_path):
    import shutil
    folder = shutil.copytree(exports / "payload", tmp_path / "export")
    man = json.loads((folder / "manifest.json").read_text())
    spec = man["layers"][2]["tables"]["weight"]                       # conv2 weights, 4-bit
    orig = int(np.load(folder / "tables.npz")[spec["npz_key"]].reshape(-1)[0])
    new = orig - 1 if orig > -7 else orig + 1
    path = folder / spec["file"]
    lines = path.read_text().split("\n")
    lines[4] = format(new & 0xF, "x")          # word 0 follows the 4 '//' header lines; 4-bit two's complement
    path.write_text("\n".join(lines))
    r = _cli("verify", str(folder), "--quiet")
    assert r.returncode == 1, r.stderr
    assert r.stdout.startswith(f"verify: FAILED: table mismatch in {spec['file']} line 5: layer L2_conv2, "
                               f"word 0 [0, 0, 0, 0]: expected {orig}, got {new} (")


def test_a_command_needing_torch_names_the_missing_extra(tmp_path):
    r = _cli("train", "recipes/default.toml", "--out", str(tmp_path / "t"), "--quiet")
    assert r.returncode == 1
    assert r.stderr.splitlines()[-1] in {
        f"error: this command needs {m}, which this install lacks (only verify, compare, cmodel, verilog run without it); "
        f"install the full set: pip install 'snnconvert[full]'" for m in ("torch", "scipy", "sklearn", "matplotlib")}


@pytest.mark.parametrize("coding", ["payload", "ttfs"])
def test_cli_cmodel_and_verilog_generate_the_models_without_torch(exports, tmp_path, coding):
    """Both reference models come from the export folder alone; the same files as generated with torch loaded."""
    import shutil
    from snnconvert.export import cmodel, verilog
    folder = shutil.copytree(exports / coding, tmp_path / "export")
    for command in ("cmodel", "verilog"):
        r = _cli(command, str(folder), "--quiet")
        assert r.returncode == 0, r.stderr
        assert r.stdout.startswith(f"{command}: ") and r.stderr == ""
    assert {n: (folder / "c" / n).read_text() for n in cmodel.FILES} == cmodel.c_sources(exports / coding)
    for name in (verilog.MODEL, verilog.TESTBENCH):
        assert (folder / "verilog" / name).read_bytes() == (verilog.sources(*verilog.read_export(exports / coding))
                                                             [f"verilog/{name}"])
    n = json.loads((folder / "manifest.json").read_text())["vectors"]["count"]
    assert sorted(p.name for p in (folder / "verilog" / "trace").iterdir()) == [f"sample_{s:04d}" for s in range(n)]


def test_cli_compare_without_torch(exports, tmp_path):
    """The export's own vectors/ folder is a trace in the golden-vector layout: it matches; one potential
    changed in a copy is named (exit 1)."""
    import shutil
    folder = exports / "payload"
    n = json.loads((folder / "manifest.json").read_text())["vectors"]["count"]
    r = _cli("compare", str(folder), str(folder / "vectors"), "--quiet")
    assert r.returncode == 0, r.stderr
    assert r.stdout.split("\n")[-2].startswith("compare: passed: ") and f" of {n} samples " in r.stdout
    trace = shutil.copytree(folder / "vectors", tmp_path / "trace")
    path = trace / "sample_0001" / "L2_conv2.potentials.csv"
    lines = path.read_text().split("\n")
    addr, v = lines[3].split(",")
    lines[3] = f"{addr},{int(v) + 1}"
    path.write_text("\n".join(lines))
    r = _cli("compare", str(folder), str(trace), "--quiet")
    assert r.returncode == 1, r.stderr
    assert r.stdout.split("\n")[-2] == (f"compare: FAILED: first mismatch: sample 1, layer L2_conv2, potential, neuron "
                                        f"2 (0, 1, 0): expected {v}, got {int(v) + 1} "
                                        f"[sample_0001/L2_conv2.potentials.csv]")


def test_front_end_vectors_verify_compare_and_c_model_without_torch(tmp_path):
    """An export with front-end vectors: verify re-runs the front end, compare reads its trace tables and
    cmodel writes the C front end, all with numpy alone."""
    from test_frontvec import params, source
    folder = tmp_path / "export"
    x, y = small_inputs()
    export_network(small_net(), folder, x, y, vectors=1, progress=False, directed=False,
                   frontend=source(params(upper_count=4)))
    r = _cli("verify", str(folder), "--quiet")
    assert r.returncode == 0 and r.stdout.startswith("verify: passed: 1 samples, 2 front-end streams"), r.stderr
    r = _cli("compare", str(folder), str(folder), "--quiet")      # the export's frontend/ folder is a trace
    assert r.returncode == 0 and r.stdout.split("\n")[-2].startswith("compare: passed: "), r.stderr
    r = _cli("cmodel", str(folder), "--quiet")
    assert r.returncode == 0, r.stderr
    assert (folder / "c" / "snn_frontend.c").is_file() and (folder / "c" / "snn_frontend_main.c").is_file()
