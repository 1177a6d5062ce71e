"""Recipe loading, strict validation, overrides and the TOML writer (checked with the standard tomllib)."""

import math
import tomllib
from pathlib import Path

import pytest

from snnconvert import recipe as R
from snnconvert.errors import UsageError

ROOT = Path(__file__).resolve().parents[1]
DEFAULT = ROOT / "recipes" / "default.toml"


def write(tmp_path, text, name="exp.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_default_recipe_resolves_every_section_with_defaults():
    r = R.load(DEFAULT)
    assert r["name"] == "default" and r["seed"] == 0
    assert set(R.SECTIONS) <= set(r)
    for section, keys in R.schemas().items():
        assert set(r[section]) == set(keys), section
    assert r["_base_dir"] == str(DEFAULT.parent.resolve())
    assert r["train"]["epochs"] >= 1 and r["model"]["layers"][-1]["type"] == "dense"


@pytest.mark.parametrize("text,pattern", [
    ("[train]\nepoch = 3\n", r"Unknown key 'epoch' in section \[train\]\. Did you mean 'epochs'\?"),
    ("[convert]\nweight_bit = 3\n", r"Did you mean 'weight_bits'\?"),
    ("[trian]\nepochs = 3\n", r"Unknown section \[trian\] in the recipe\. Did you mean 'train'\?"),
    ("sed = 3\n", r"Unknown top-level key 'sed' in the recipe\. Did you mean 'seed'\?"),
    ("train = 3\n", r"'train' must be a section"),
    ("[convert]\npayload_bits = 0\n",
     r"^The 'payload_bits' parameter of convert must be an int in \[1, \d+\]\. Got 0 instead\.$"),
    ("[train]\nlr = \"fast\"\n", r"^The 'lr' parameter of train must be a float in \[0\.0, 10\.0\]\. Got 'fast' instead\.$"),
    ("[train]\nschedule = \"linear\"\n", r"The 'schedule' parameter of train must be one of 'constant', 'step', 'cosine'"),
    ("[train]\naware = 1\n", r"The 'aware' parameter of train must be a bool\. Got 1 instead\."),
    ("seed = -1\n", r"The 'seed' parameter of the recipe must be an int"),
    ("[model]\nlayers = [{type = \"conv\", out = 8, kernal = 3}, {type = \"dense\"}]\n",
     r"Unknown key 'kernal' in section \[model\.layers\[0\] \(conv\)\]\. Did you mean 'kernel'\?"),
])
def test_invalid_recipes_give_one_line_errors(tmp_path, text, pattern):
    with pytest.raises(UsageError, match=pattern) as ei:
        R.load(write(tmp_path, text))
    assert "\n" not in str(ei.value)


def test_missing_file_names_the_path(tmp_path):
    missing = tmp_path / "nope.toml"
    with pytest.raises(UsageError, match=f"recipe file not found: {missing}"):
        R.load(missing)


def test_toml_syntax_error_names_file_and_line(tmp_path):
    p = write(tmp_path, "seed = 1\n[train]\nepochs = = 3\n")
    # tomllib reports "(at line 3, column ...)" (Python standard library)
    with pytest.raises(UsageError, match=r"exp\.toml: invalid TOML: .*line 3"):
        R.load(p)


@pytest.mark.parametrize("override,section,key,expected", [
    ("train.epochs=5", "train", "epochs", 5),
    ("train.lr=0.01", "train", "lr", 0.01),
    ("train.schedule=step", "train", "schedule", "step"),            # bare word falls back to a string
    ("train.optimizer=\"sgd\"", "train", "optimizer", "sgd"),          # quoted TOML string
    ("train.aware=true", "train", "aware", True),
    ("seed=3", None, "seed", 3),
    ("name=other", None, "name", "other"),
    ("model.layers=[{type=\"conv\", out=4}, {type=\"dense\"}]", "model", "layers",
     # the layer schema's defaults fill in: 3x3 kernel, stride 1, padding 1 ("same" size; common practice)
     [{"type": "conv", "out": 4, "kernel": 3, "stride": 1, "padding": 1, "bn": False}, {"type": "dense", "bn": False}]),
])
def test_overrides_apply_with_toml_values(override, section, key, expected):
    r = R.load(DEFAULT, [override])
    got = r[key] if section is None else r[section][key]
    assert got == expected and type(got) is type(expected)


@pytest.mark.parametrize("override,pattern", [
    ("train.epochs", r"--set expects section\.key=value\. Got 'train\.epochs' instead\."),
    ("train.epoch=3", r"--set train\.epoch: Unknown key 'epoch' in section \[train\]\. Did you mean 'epochs'\?"),
    ("trian.epochs=3", r"Unknown section \[trian\]"),
    ("train.epochs=0", r"The 'epochs' parameter of train must be an int in \[1, 10000\]\. Got 0 instead\."),
    ("convert.payload_bits=0", r"The 'payload_bits' parameter of convert must be an int in \[1, \d+\]\. Got 0 instead\."),
])
def test_bad_overrides(override, pattern):
    with pytest.raises(UsageError, match=pattern):
        R.load(DEFAULT, [override])


def test_dumps_round_trips_through_tomllib(tmp_path):
    r = R.load(DEFAULT, ["train.epochs=7", "seed=11"])
    text = R.dumps(r)
    assert "_base_dir" not in text
    folder = tmp_path / "out"
    path = R.save(r, folder)
    assert path == folder / "recipe.toml" and path.read_text() == text
    back = R.load(path)
    back["_base_dir"] = r["_base_dir"]
    back["name"] = r["name"]  # the saved file's stem is "recipe"; the name travels inside it
    assert tomllib.loads(text)["name"] == "default"  # the stem of recipes/default.toml; tomllib as the reference parser
    assert back == r


@pytest.mark.parametrize("value", [
    'quote " and backslash \\ here', "tab\tnew\nline", "unicode é ✓", "", 0, -5, 2**40, 0.1, -1e-300, 1e300,
    True, False, [1, 2, 3], [], ["a", "b"], [{"type": "conv", "out": 8}, {"p": 0.5}], {"a": 1, "b c": "d"},
])
def test_toml_writer_values_parse_back_identically(value):
    # the standard library's tomllib is the reference parser
    text = R.dumps({"sec": {"v": value}})
    assert tomllib.loads(text)["sec"]["v"] == value


def test_toml_writer_special_floats_and_refusals():
    # TOML 1.0 has inf, -inf and nan floats; tomllib as the reference parser
    parsed = tomllib.loads(R.dumps({"s": {"a": math.inf, "b": -math.inf, "c": math.nan}}))["s"]
    assert parsed["a"] == math.inf and parsed["b"] == -math.inf and math.isnan(parsed["c"])
    with pytest.raises(TypeError, match=r"recipe value s\.x = None \(NoneType\) has no TOML form"):
        R.dumps({"s": {"x": None}})  # TOML 1.0 has no null value


def test_fingerprint_depends_only_on_chosen_sections():
    a = R.load(DEFAULT)
    b = R.load(DEFAULT, ["train.epochs=2"])
    assert R.fingerprint(a, ["model", "data"]) == R.fingerprint(b, ["model", "data"])
    assert R.fingerprint(a, ["train"]) != R.fingerprint(b, ["train"])
    assert R.fingerprint(a) != R.fingerprint(b)
    assert R.fingerprint(a) == R.fingerprint(R.load(DEFAULT, ["name=renamed"]))  # the name is not content
    with pytest.raises(KeyError, match="no section or key 'bogus'"):
        R.fingerprint(a, ["bogus"])


def test_describe_keys_covers_every_key_with_a_reason():
    rows = R.describe_keys()
    seen = {(s, k) for s, k, _, _ in rows}
    assert ("", "seed") in seen and ("model", "layers") in seen and ("train", "epochs") in seen
    for section, keys in R.schemas().items():
        assert {(section, k) for k in keys} <= seen
    assert all(isinstance(reason, str) and reason.strip() for _, _, _, reason in rows)


def test_relative_paths_resolve_in_the_recipe_folder(tmp_path):
    r = R.load(write(tmp_path, "seed = 1\n"))
    assert R.resolve_path(r, "data/x.idx") == tmp_path.resolve() / "data" / "x.idx"
    assert R.resolve_path(r, "/abs/x.idx") == Path("/abs/x.idx")


@pytest.mark.parametrize("section,old,new", [(s, o, n) for s, m in R.renamed().items() for o, n in m.items()])
def test_every_renamed_key_reads_under_its_new_name(section, old, new, tmp_path, capsys):
    value = R.schemas()[section][new].default
    (tmp_path / "old.toml").write_text(f"[{section}]\n{old} = {value!r}\n")
    got = R.load(tmp_path / "old.toml")[section]
    assert got[new] == value and old not in got
    assert f"[{section}] {old} is now called {new}" in capsys.readouterr().err
    assert ("train", "shift", "jitter_px") in [(s, o, n) for s, m in R.renamed().items() for o, n in m.items()]


@pytest.mark.parametrize("value,rule", [("max", ("max", 100.0)), ("percentile:99", ("percentile", 99.0)),
                                        ("mean:0.7", ("mean", 0.7)), ("mean:10", ("mean", 10.0))])
def test_weight_scale_rules_parse(value, rule):
    r = R.from_dict({"convert": {"weight_scale": value}})
    from snnconvert.settings.convert import ConvertSettings
    assert ConvertSettings.from_section(r["convert"]).weight_rule == rule


@pytest.mark.parametrize("value", ["mean", "mean:0", "mean:11", "mean:x", "median:0.7", "percentile:0"])
def test_weight_scale_rule_refused(value):
    with pytest.raises(UsageError) as e:
        R.from_dict({"convert": {"weight_scale": value}})
    assert str(e.value) == ("The 'weight_scale' parameter of convert must be 'max', 'percentile:Q' with Q in (0, 100] "
                            f"or 'mean:C' with C in (0, 10]. Got {value!r} instead.")
