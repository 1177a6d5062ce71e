"""The README documents what the code does: every recipe key, every manifest field, every command."""

from pathlib import Path

import pytest

from snnconvert import recipe
from snnconvert.cli import COMMANDS
from snnconvert.export.manifest import MANIFEST_FIELDS

README = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def test_first_paragraph_states_the_job():
    first = README.split("\n\n")[1]
    for words in ("dynamic vision sensor", "bursts", "frames", "CNN", "fires at most once", "payload",
                  "synaptic operations", "accumulator", "weight tables", "test vectors"):
        assert words in first, words


@pytest.mark.parametrize("section,key", [(s, k) for s, k, _, _ in recipe.describe_keys()])
def test_every_recipe_key_is_documented(section, key):
    assert f"| `{key}` |" in README


@pytest.mark.parametrize("field", sorted(MANIFEST_FIELDS))
def test_every_manifest_field_is_documented(field):
    assert f"| `{field}` |" in README


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_an_example(command):
    assert f"snnconvert {command} " in README


def test_set_up_commands_and_ci_entry_agree():
    assert "make demo" in README and "make test" in README
    ci = (Path(__file__).resolve().parent.parent / ".ci" / "run").read_text()
    assert "make test" in ci
