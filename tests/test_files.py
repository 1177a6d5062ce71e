"""Shared file handling: atomic writes, safe loads, index paths, cache location."""

import os
from pathlib import Path

import numpy as np
import pytest

from snnconvert.data import cache_dir
from snnconvert.errors import FormatError, UsageError
from snnconvert.files import atomic_write_text, fingerprint, load_npz, resolve_inside


def test_atomic_write_leaves_no_temp_file_and_is_readable_by_others(tmp_path):
    p = atomic_write_text(tmp_path / "a" / "b.txt", "hello")
    assert p.read_text() == "hello"
    assert [q.name for q in p.parent.iterdir()] == ["b.txt"]
    umask = os.umask(0)
    os.umask(umask)
    assert os.stat(p).st_mode & 0o777 == 0o666 & ~umask  # a new file's mode 0666 less the umask (POSIX open(2))


@pytest.mark.parametrize("rel,ok", [("x.npz", True), ("sub/x.npz", True), ("../x.npz", False),
                                    ("sub/../../x.npz", False), ("/etc/passwd", False)])
def test_index_paths_resolve_inside_their_folder(tmp_path, rel, ok):
    if ok:
        assert tmp_path.resolve() in resolve_inside(tmp_path, rel).parents
    else:
        with pytest.raises(UsageError, match="escapes|absolute"):
            resolve_inside(tmp_path, rel)


def test_npz_with_pickled_objects_is_refused(tmp_path):
    np.savez(tmp_path / "evil.npz", a=np.array([{"x": 1}], dtype=object))
    with pytest.raises(FormatError, match="evil.npz"):
        load_npz(tmp_path / "evil.npz")


def test_fingerprint_is_by_value():
    assert fingerprint(np.arange(4), {"a": 1}) == fingerprint(np.arange(4), {"a": 1})
    assert fingerprint(np.arange(4)) != fingerprint(np.arange(4).astype(np.int32))
    # a changed value changes the hash (sha256-based), equal values in new objects do not
    assert fingerprint(np.arange(4), {"a": 1}) != fingerprint(np.arange(4), {"a": 2})
    assert fingerprint(np.arange(4)) != fingerprint(np.arange(1, 5))
    assert len(fingerprint(np.arange(4))) == 16 and int(fingerprint(np.arange(4)), 16) >= 0  # the toolkit's short form: 16 hex digits of sha256


def test_relative_cache_dir_resolves_against_the_recipe_folder(monkeypatch):
    monkeypatch.delenv("SNNCONVERT_CACHE", raising=False)
    assert cache_dir({"cache_dir": "cache"}, Path("/recipes")) == Path("/recipes/cache")
    assert cache_dir({"cache_dir": "/abs"}, Path("/recipes")) == Path("/abs")
    monkeypatch.setenv("SNNCONVERT_CACHE", "/env-cache")
    assert cache_dir({"cache_dir": ""}, Path("/recipes")) == Path("/env-cache")
