"""Recipe keys: each declared once, in the torch-free settings module of its section.

Each module `snnconvert.settings.<section>` (data, frames, model, train, convert, sweep, export)
has a module-level `KEYS: dict[str, Key]` and a settings class that checks every value with its
Key. `snnconvert.recipe` gathers them, fills defaults, applies `--set` overrides and builds the
settings objects. The README's recipe table
is generated from the same declarations, so the documented default is the real one.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Sequence

from snnconvert.errors import UsageError, check_bool, check_choice, check_float, check_int, check_str


@dataclass(frozen=True)
class Key:
    default: Any
    kind: str                          # int | float | bool | str | choice | path | any
    reason: str                        # one line: why this default
    lo: float | None = None
    hi: float | None = None
    choices: Sequence[str] | None = None
    validator: Callable[[Any, str, str], Any] | None = None   # (value, key, section) -> value, for kind "any"

    def check(self, value, key: str, section: str):
        owner = section
        if self.kind == "int":
            return check_int(value, key, owner, self.lo, self.hi)
        if self.kind == "float":
            return check_float(value, key, owner, self.lo, self.hi)
        if self.kind == "bool":
            return check_bool(value, key, owner)
        if self.kind in ("str", "path"):
            return check_str(value, key, owner)
        if self.kind == "choice":
            return check_choice(value, key, owner, list(self.choices))
        if self.kind == "any":
            return self.validator(value, key, section) if self.validator else value
        raise UsageError(f"internal: unknown key kind {self.kind!r} for '{key}' in [{section}]")
