"""Recipe settings: one torch-free module per section, each section checked once and passed down."""

import dataclasses
import subprocess
import sys
from pathlib import Path

import pytest

from snnconvert import recipe as R
from snnconvert.errors import UsageError
from snnconvert.settings import SECTIONS, Section
from snnconvert.settings.convert import ConvertSettings

ROOT = Path(__file__).resolve().parent.parent
RECIPES = ROOT / "recipes"

# Python that refuses to import torch, then runs `body`
_NO_TORCH = """
import sys
class _Refuse:
    def find_spec(self, name, path=None, target=None):
        if name == "torch" or name.startswith("torch."):
            raise ImportError("torch is not installed here")
sys.meta_path.insert(0, _Refuse())
"""


def test_parsing_a_recipe_imports_no_torch():
    body = _NO_TORCH + f"""
from snnconvert import recipe
r, settings = recipe.load_settings({str(RECIPES / "default.toml")!r}, ["convert.weight_bits=3"])
assert settings["convert"].weight_bits == 3 == r["convert"]["weight_bits"]
assert not [m for m in sys.modules if m == "torch" or m.startswith("torch.")]
print(sorted(settings))
"""
    res = subprocess.run([sys.executable, "-c", body], capture_output=True, text=True, cwd=ROOT)
    assert res.returncode == 0, res.stderr
    assert res.stdout.split() == ["['budget',", "'convert',", "'data',", "'export',", "'frames',", "'hardware',",
                                  "'model',", "'sweep',", "'train']"]


@pytest.mark.parametrize("section", SECTIONS)
def test_every_section_has_one_settings_class_with_a_field_per_key(section):
    cls = R.settings_types()[section]
    assert issubclass(cls, Section) and cls.SECTION == section
    assert [f.name for f in dataclasses.fields(cls)] == list(cls.KEYS)
    defaults = cls.from_section({})
    assert defaults.as_dict() == {k: key.check(key.default, k, section) for k, key in cls.KEYS.items()}
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(defaults, next(iter(cls.KEYS)), None)


def test_the_recipe_dict_is_the_settings_objects_as_data():
    r, settings = R.load_settings(RECIPES / "default.toml")
    assert set(settings) == set(SECTIONS)
    for section, obj in settings.items():
        assert r[section] == obj.as_dict()


@pytest.mark.parametrize("section,message", [
    ({"payload_bits": 0}, "The 'payload_bits' parameter of convert must be an int in [1, 8]. Got 0 instead."),
    ({"coding": "binary"}, "The 'payload_bits' parameter of convert must be 1 with coding 'binary' (a binary spike "
                           "carries no payload). Got 4 instead."),
    ({"weight_scale": "median"}, ("The 'weight_scale' parameter of convert must be 'max', 'percentile:Q' with Q in "
                                  "(0, 100] or 'mean:C' with C in (0, 10]. Got 'median' instead.")),
])
def test_a_settings_object_is_checked_when_built(section, message):
    with pytest.raises(UsageError) as e:
        ConvertSettings.from_section(section)
    assert str(e.value) == message
    with pytest.raises(UsageError) as e:    # built directly: the same checks
        ConvertSettings(**{**ConvertSettings.from_section({}).as_dict(), **section})
    assert str(e.value) == message


def test_keyword_convert_and_settings_convert_build_the_same_network():
    torch = pytest.importorskip("torch")
    from torch import nn

    from snnconvert.convert import convert_model
    torch.manual_seed(0)
    model = nn.Sequential(nn.Flatten(), nn.Linear(16, 8), nn.ReLU(), nn.Linear(8, 3)).eval()
    x = torch.rand(32, 1, 4, 4).numpy()
    a = convert_model(model, x, weight_bits=3, payload_bits=2, coding="ttfs", weight_scale="percentile:99")
    b = convert_model(model, x, ConvertSettings.from_section({"weight_bits": 3, "payload_bits": 2, "coding": "ttfs",
                                                              "weight_scale": "percentile:99"}))
    import numpy as np
    for la, lb in zip(a.layers, b.layers):
        for f in ("weight", "bias", "m0", "shift"):
            assert np.array_equal(getattr(la, f), getattr(lb, f)), f
    with pytest.raises(TypeError, match="not both"):
        convert_model(model, x, ConvertSettings.from_section({}), weight_bits=3)


def test_a_run_builds_each_setting_once_and_loads_the_data_once(tmp_path, monkeypatch):
    from snnconvert import convert as convert_mod
    from snnconvert import data, export, pipeline
    loads, built, given = [], [], {}
    real_load, real_init = data.load_dataset, Section.__post_init__
    real_checkpoint, real_export = convert_mod.convert_checkpoint, export.export_from_run
    real_settings = R.load_settings

    def load_dataset(*a, **kw):
        loads.append(1)
        return real_load(*a, **kw)

    def post_init(self):
        if not given.get("reading_file"):
            built.append(self.SECTION)
        real_init(self)

    real_embedded = R.from_embedded

    def from_embedded(raw, owner):   # a recipe stored in a file (model.pt, network.json) is checked as data
        given["reading_file"] = True
        try:
            return real_embedded(raw, owner)
        finally:
            given["reading_file"] = False

    def load_settings(*a, **kw):
        given["recipe"] = real_settings(*a, **kw)
        return given["recipe"]

    def convert_checkpoint(train_dir, settings, quiet=False, dataset=None, hardware=None, budget=None):
        given["convert"], given["convert_data"] = settings, dataset
        given["hardware"], given["budget"] = hardware, budget
        return real_checkpoint(train_dir, settings, quiet=quiet, dataset=dataset, hardware=hardware, budget=budget)

    def export_from_run(net_dir, out_dir, recipe=None, **kw):
        given["export"], given["export_data"] = kw["settings"], kw["dataset"]
        return real_export(net_dir, out_dir, recipe, **kw)

    monkeypatch.setattr(data, "load_dataset", load_dataset)
    monkeypatch.setattr(Section, "__post_init__", post_init)
    monkeypatch.setattr(R, "load_settings", load_settings)
    monkeypatch.setattr(R, "from_embedded", from_embedded)
    monkeypatch.setattr(convert_mod, "convert_checkpoint", convert_checkpoint)
    monkeypatch.setattr(export, "export_from_run", export_from_run)
    pipeline.run(RECIPES / "default.toml", tmp_path / "run",
                 [f"data.cache_dir={tmp_path / 'cache'}", "data.limit=120", "train.epochs=1",
                  "sweep.enabled=false", "export.vectors=2"])
    _, settings = given["recipe"]
    assert given["convert"] is settings["convert"] and given["export"] is settings["export"]
    assert given["hardware"] is settings["hardware"] and given["budget"] is settings["budget"]
    assert sorted(built) == sorted(SECTIONS)          # each section of the run's recipe checked once, at load
    assert len(loads) == 1                            # the data set is loaded once per run
    assert given["convert_data"] is given["export_data"]


def test_aware_training_is_redone_when_any_convert_setting_changes(tmp_path):
    from snnconvert import pipeline
    fps = []
    (tmp_path / "r.toml").write_text("[train]\naware = true\n")
    for ws in ("max", "percentile:99"):
        r, settings = R.load_settings(tmp_path / "r.toml", [f"convert.weight_scale={ws}"])
        run_ = pipeline.Run(r, settings, tmp_path / ws.replace(":", "_"))
        run_.fingerprints["data"] = "d"
        run_.stage("train", lambda: None)
        fps.append(run_.fingerprints["train"])
    assert fps[0] != fps[1]


def test_imports_run_one_way():
    # the core never imports the CLI, and only the CLI imports the pipeline (report reads snnconvert.stages)
    import re
    pkg = ROOT / "snnconvert"
    upward = re.compile(r"^\s*(from|import)\s+snnconvert(\.cli\b|\.pipeline\b|\s+import\s+.*\b(cli|pipeline)\b)", re.M)
    offenders = [str(p.relative_to(ROOT)) for p in sorted(pkg.rglob("*.py"))
                 if p.parent.name != "cli" and p.name != "__main__.py" and upward.search(p.read_text())]
    assert offenders == []


def _module_imports() -> dict[str, set[str]]:
    """Module-level imports between the package's modules (`from pkg import sub` counts as sub)."""
    import ast
    pkg = ROOT / "snnconvert"
    names = {}
    for p in pkg.rglob("*.py"):
        parts = list(p.relative_to(ROOT).with_suffix("").parts)
        names[".".join(parts[:-1] if parts[-1] == "__init__" else parts)] = p
    graph = {}
    for mod, p in names.items():
        edges = set()
        for node in ast.parse(p.read_text()).body:
            if isinstance(node, ast.Import):
                edges |= {a.name for a in node.names}
            elif isinstance(node, ast.ImportFrom):
                here = mod.split(".") if p.name == "__init__.py" else mod.split(".")[:-1]
                base = ".".join(here[:len(here) - node.level + 1] + [node.module or ""]) if node.level else node.module
                base = base.rstrip(".")
                subs = {f"{base}.{a.name}" for a in node.names} & names.keys()
                edges |= subs or {base}
        graph[mod] = {e for e in edges if e in names and e != mod}
    return graph


def test_no_import_cycles():
    graph, state, cycles = _module_imports(), {}, []

    def visit(m, path):
        state[m] = "open"
        for n in sorted(graph[m]):
            if state.get(n) == "open":
                cycles.append(path[path.index(n):] + [n])
            elif n not in state:
                visit(n, path + [n])
        state[m] = "done"
    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert cycles == []
