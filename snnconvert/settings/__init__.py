"""Recipe settings: one module per recipe section, none of them importing torch.

The pattern, the same in every section module (`data`, `frames`, `model`, `train`, `convert`,
`hardware`, `budget`, `sweep`, `export`):

    KEYS: dict[str, schema.Key]      every key of the section: default, type, range, the reason
                                     for the default, and the torch-free validator it needs
    <Name>Settings                   a frozen dataclass with one field per key; constructing it
                                     checks every value with its Key exactly once (and any rule
                                     that spans keys), so an instance is always valid
    <Name>Settings.from_section(d)   a recipe section (dict) -> the object; missing keys take
                                     their defaults, unknown keys are refused

`recipe.load` builds one object per section (the only place recipe values are checked) and the
pipeline passes these objects down to the stages. Stage modules read their keys from here, so
parsing a recipe never imports a stage (and so never torch).
"""

from __future__ import annotations

import copy
import dataclasses
from typing import Any, ClassVar

from snnconvert.errors import UsageError, unknown_key_message
from snnconvert.schema import Key

# Section -> its settings module. Order is the order of the job (and of the TOML file).
SECTIONS = ("data", "frames", "model", "train", "convert", "hardware", "budget", "sweep", "export")


@dataclasses.dataclass(frozen=True)
class Section:
    """Base of every section's settings object: validation on construction, dict round trip."""

    SECTION: ClassVar[str] = ""
    KEYS: ClassVar[dict[str, Key]] = {}

    def __post_init__(self):
        for name in self.KEYS:
            object.__setattr__(self, name, self.KEYS[name].check(getattr(self, name), name, self.SECTION))
        self.check_together()

    def check_together(self) -> None:
        """Rules that span several keys (none by default)."""

    @classmethod
    def from_section(cls, section: dict[str, Any] | None = None):
        """A recipe section -> the settings object (defaults for missing keys; unknown keys refused)."""
        section = dict(section or {})
        unknown = sorted(set(section) - set(cls.KEYS))
        if unknown:
            raise UsageError(unknown_key_message(unknown[0], cls.SECTION, cls.KEYS))
        return cls(**{k: copy.deepcopy(section[k] if k in section else key.default) for k, key in cls.KEYS.items()})

    def as_dict(self) -> dict[str, Any]:
        """The section as plain data (for the recipe dict, TOML and fingerprints)."""
        return {k: copy.deepcopy(getattr(self, k)) for k in self.KEYS}

    def replace(self, **changes):
        """A copy with some keys changed, checked like a new object."""
        return type(self).from_section({**self.as_dict(), **changes})
