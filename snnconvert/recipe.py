"""Recipes: one TOML file per experiment, strict, with defaults declared once per section.

A recipe has two top-level keys (`name`, `seed`) and one section per stage. Each section's keys
live in its torch-free settings module (`snnconvert.settings.<section>`: `KEYS` and a frozen
settings class); this module only gathers them, so parsing a recipe imports no stage and no torch.

Resolution order: defaults < file < `--set section.key=value` overrides; then each section is
checked once, by building its settings object (`load_settings` returns these objects too). The
resolved recipe also carries `_base_dir` (the recipe's folder, for relative paths); keys starting
with "_" are never written back to TOML.
"""

from __future__ import annotations

import copy
import importlib
import json
import math
import re
import tomllib
from pathlib import Path
from typing import Any, Iterable

from snnconvert import console, files
from snnconvert.errors import FormatError, UsageError, closest, unknown_key_message
from snnconvert.schema import Key
from snnconvert.settings import SECTIONS, Section

TOP_LEVEL = {
    "name": Key(None, "str", "the recipe file's stem: runs are named after the file unless told otherwise"),
    "seed": Key(0, "int", "one seed drives every random draw; 0 is as good as any and easy to remember",
                lo=0, hi=2**32 - 1),
}


def settings_types() -> dict[str, type[Section]]:
    """{section: its settings class}, from the torch-free modules `snnconvert.settings.<section>`."""
    out = {}
    for section in SECTIONS:
        mod = _settings_module(section)
        found = [v for v in vars(mod).values()
                 if isinstance(v, type) and issubclass(v, Section) and v is not Section and v.SECTION == section]
        if len(found) != 1:
            raise UsageError(f"recipe section [{section}] needs exactly one settings class in {mod.__name__}; "
                             f"found {len(found)}")
        out[section] = found[0]
    return out


def _settings_module(section: str):
    """`snnconvert.settings.<section>`: the section's keys and settings class, without torch."""
    return importlib.import_module(f"snnconvert.settings.{section}")


def schemas() -> dict[str, dict[str, Key]]:
    """{section: {key: Key}} for every section."""
    return {section: cls.KEYS for section, cls in settings_types().items()}


def renamed() -> dict[str, dict[str, str]]:
    """{section: {old key: new key}} from each settings module's optional `RENAMED`."""
    return {section: dict(getattr(_settings_module(section), "RENAMED", {})) for section in SECTIONS}


def retired() -> dict[str, dict[str, str]]:
    """{section: {key no longer read: why}} from each settings module's optional `RETIRED`."""
    return {section: dict(getattr(_settings_module(section), "RETIRED", {})) for section in SECTIONS}


def _rename(section: str, table: dict, where: str) -> None:
    """Read a renamed key under its new name, in place, with a one-line note on stderr; drop a
    retired key (one no longer read) with a note saying why.

    A recipe that gives both the old and the new name is refused (which one is meant is unclear).
    """
    for old, why in retired().get(section, {}).items():
        if old in table:
            table.pop(old)
            console.say(f"note: {where}: [{section}] {old} is no longer used and is ignored: {why} (remove it)")
    for old, new in renamed().get(section, {}).items():
        if old in table:
            if new in table:
                raise UsageError(f"{where}: [{section}] gives both '{old}' (the old name of '{new}') and '{new}'; "
                                 f"keep only '{new}'")
            table[new] = table.pop(old)
            console.say(f"note: {where}: [{section}] {old} is now called {new}; read as {new} = {table[new]!r} "
                        f"(rename it)")


def load(path, overrides: Iterable[str] = ()) -> dict:
    """Read a recipe TOML file, fill defaults, apply `--set` overrides and validate (see `load_settings`)."""
    return load_settings(path, overrides)[0]


def load_settings(path, overrides: Iterable[str] = ()) -> tuple[dict, dict[str, Section]]:
    """(recipe dict, {section: settings object}) of a recipe TOML file, each section checked once.

    Errors (all UsageError, one line): missing file (names the path), TOML syntax (file and
    line), unknown section/key (with the closest valid name), wrong type or range (the template).
    """
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"recipe file not found: {path}")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise UsageError(f"{path}: invalid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise UsageError(f"{path}: not a UTF-8 text file") from None
    return _resolve(raw, overrides, base_dir=path.resolve().parent, name=path.stem, where=str(path))


def from_dict(raw: dict, overrides: Iterable[str] = (), base_dir=".", name: str = "recipe",
              where: str = "the recipe") -> dict:
    """Resolve a recipe given as a dict (as parsed from TOML); see `load`. `where` names the recipe in
    notes about renamed keys."""
    return _resolve(raw, overrides, base_dir, name, where)[0]


def _resolve(raw: dict, overrides: Iterable[str], base_dir, name: str, where: str) -> tuple[dict, dict[str, Section]]:
    types = settings_types()
    sch = {section: cls.KEYS for section, cls in types.items()}
    raw = copy.deepcopy(raw)
    raw.pop("_base_dir", None)
    for key, value in raw.items():
        if isinstance(value, dict):
            if key not in sch:
                raise UsageError(_unknown_section(key, sch))
            _rename(key, value, where)
            for k in value:
                if k not in sch[key]:
                    raise UsageError(unknown_key_message(k, key, sch[key]))
        elif key not in TOP_LEVEL:
            if key in sch:
                raise UsageError(f"'{key}' must be a section ([{key}]), not a value. Got {value!r} instead.")
            raise UsageError(_unknown_top(key, sch))
    for item in overrides:
        section, key, value = _parse_override(item, sch)
        if section is None:
            raw[key] = value
        else:
            if not isinstance(raw.get(section, {}), dict):  # pragma: no cover - rejected above
                raise UsageError(f"'{section}' must be a section")
            raw.setdefault(section, {})[key] = value

    r: dict[str, Any] = {}
    r["name"] = TOP_LEVEL["name"].check(raw.get("name", name), "name", "the recipe")
    r["seed"] = TOP_LEVEL["seed"].check(raw.get("seed", TOP_LEVEL["seed"].default), "seed", "the recipe")
    settings = {section: cls.from_section(raw.get(section, {})) for section, cls in types.items()}
    for section, obj in settings.items():
        r[section] = obj.as_dict()
    r["_base_dir"] = str(Path(base_dir).resolve())
    return r, settings


EMBEDDED = "_embedded"   # marks a recipe read from inside a file; its value names the file


def from_embedded(raw, owner) -> dict:
    """A recipe stored inside a file (model.pt, network.json, a network's recipe.toml), checked
    exactly like a user's recipe file (`from_dict`: sections, keys, types, ranges).

    The result is marked with EMBEDDED so that it never decides where files are written: the data
    cache of such a recipe is the user's ($SNNCONVERT_CACHE or ~/.cache/snnconvert); the cache_dir
    it names is only read from. Its `_base_dir` (for relative data paths) must be an absolute path.
    """
    if not isinstance(raw, dict):
        raise FormatError(f"The 'recipe' field of {owner} must be a recipe object. Got {type(raw).__name__} instead.")
    base = raw.get("_base_dir", None)
    if base is not None and (not isinstance(base, str) or not Path(base).is_absolute()):
        raise FormatError(f"The 'recipe._base_dir' field of {owner} must be an absolute folder path. "
                          f"Got {base!r} instead.")
    raw = {k: v for k, v in raw.items() if not k.startswith("_")}
    try:
        r = from_dict(raw, base_dir=base or ".", name=raw.get("name") if isinstance(raw.get("name"), str) else "recipe")
    except UsageError as exc:
        raise FormatError(f"{owner}: its stored recipe is invalid: {exc}") from None
    r[EMBEDDED] = str(owner)
    return r


def _parse_override(item: str, sch) -> tuple[str | None, str, Any]:
    """'section.key=value' or 'seed=3' -> (section, key, value); value is TOML, else a bare string."""
    if not isinstance(item, str) or "=" not in item:
        raise UsageError(f"--set expects section.key=value. Got {item!r} instead.")
    lhs, text = item.split("=", 1)
    lhs = lhs.strip()
    if "." in lhs:
        section, key = lhs.split(".", 1)
        if section not in sch:
            raise UsageError(f"--set {lhs}: " + _unknown_section(section, sch))
        if key in retired().get(section, {}):
            raise UsageError(f"--set {lhs}: {section}.{key} is no longer used: {retired()[section][key]}")
        if key in renamed().get(section, {}):
            new = renamed()[section][key]
            console.say(f"note: --set {lhs}: {section}.{key} is now called {section}.{new}; read as {section}.{new}")
            key = new
        if key not in sch[section]:
            raise UsageError(f"--set {lhs}: " + unknown_key_message(key, section, sch[section]))
    else:
        section, key = None, lhs
        if key not in TOP_LEVEL:
            raise UsageError(f"--set {lhs}: " + _unknown_top(key, sch))
    try:
        value = tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        value = text.strip()  # a bare word such as cosine or a path
    return section, key, value


def _unknown_section(name: str, sch) -> str:
    hint = closest(name, sch)
    tail = f" Did you mean '{hint}'?" if hint else f" Valid sections: {', '.join(sch)}."
    return f"Unknown section [{name}] in the recipe.{tail}"


def _unknown_top(name: str, sch) -> str:
    valid = list(TOP_LEVEL) + list(sch)
    hint = closest(name, valid)
    tail = f" Did you mean '{hint}'?" if hint else f" Valid keys: {', '.join(TOP_LEVEL)}."
    return f"Unknown top-level key '{name}' in the recipe.{tail}"


def resolve_path(r: dict, value: str) -> Path:
    """A path from the recipe: absolute as given, relative to the recipe's folder otherwise."""
    p = Path(value).expanduser()
    return p if p.is_absolute() else Path(r.get("_base_dir", ".")) / p


def plain(r: dict) -> dict:
    """The recipe without private keys ("_..."), as plain data (for checkpoints and JSON)."""
    return {k: copy.deepcopy(v) for k, v in r.items() if not k.startswith("_")}


# ---------------------------------------------------------------- TOML writer

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def dumps(r: dict) -> str:
    """TOML text of a resolved recipe: top-level scalars first, then one table per section.

    Handles str, int, float (incl. inf/nan), bool, lists and dicts (as inline tables) — the
    types recipes use. None has no TOML form and raises TypeError. Private keys are skipped.
    """
    top = [(k, v) for k, v in r.items() if not k.startswith("_") and not isinstance(v, dict)]
    tables = [(k, v) for k, v in r.items() if not k.startswith("_") and isinstance(v, dict)]
    lines = [f"{_key(k)} = {_value(v, k)}" for k, v in top]
    for name, table in tables:
        lines.append("")
        lines.append(f"[{_key(name)}]")
        lines.extend(f"{_key(k)} = {_value(v, f'{name}.{k}')}" for k, v in table.items() if not k.startswith("_"))
    return "\n".join(lines).lstrip("\n") + "\n"


def _key(k: str) -> str:
    return k if _BARE.match(k) else json.dumps(k, ensure_ascii=False)


def _value(v, where: str) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)  # shortest round-trip form, always with '.' or 'e'
    if isinstance(v, str):
        # JSON string escapes (\" \\ \n \t \uXXXX) are valid TOML basic-string escapes
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)) and any(isinstance(x, dict) for x in v):
        # one inline table per line (e.g. model layers): readable diffs of saved recipes
        return "[\n" + "".join(f"  {_value(x, where)},\n" for x in v) + "]"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x, where) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x, where)}" for k, x in v.items()) + "}"
    raise TypeError(f"recipe value {where} = {v!r} ({type(v).__name__}) has no TOML form")


def save(r: dict, folder) -> Path:
    """Write `folder/recipe.toml` atomically; returns its path."""
    return files.atomic_write_text(Path(folder) / "recipe.toml", dumps(r))


def fingerprint(r: dict, sections: Iterable[str] | None = None) -> str:
    """Short hash of the chosen sections/top-level keys (default: all but `name` and private keys)."""
    if sections is None:
        sections = [k for k in r if not k.startswith("_") and k != "name"]
    picked = {}
    for s in sections:
        if s not in r:
            raise KeyError(f"recipe has no section or key {s!r}")
        picked[s] = r[s]
    return files.fingerprint(picked)


def describe_keys() -> list[tuple[str, str, Any, str]]:
    """(section, key, default, reason) for every recipe key; top-level keys have section ''."""
    rows = [("", k, key.default, key.reason) for k, key in TOP_LEVEL.items()]
    for section, keys in schemas().items():
        rows.extend((section, k, key.default, key.reason) for k, key in keys.items())
    return rows
