"""What the tool prints: progress bars and messages on stderr, results on stdout.

Every progress bar is made by `bar()`, every message line by `say()` (stderr) and every result
line by `echo()` (stdout). That one path gives three promises:

- `--quiet` (`set_quiet`) silences every bar, wherever in the code it is made;
- a bar never shares a line with a message. Before a message, the bars on screen are cleared;
  when stderr is a file or a pipe (where a carriage return does not start a line), the bar's
  line is ended first. So every message, and every `error: ...` line, starts a line;
- a reader that goes away early (`snnconvert ... | head -1`) ends the output quietly: what is
  left to print goes to the null device, the command still finishes its files, no traceback.

Bars disappear when they finish (`leave=False`): what they measured is reported in words.
"""

from __future__ import annotations

import os
import sys
import weakref

from tqdm import tqdm

_state = {"quiet": False}
_BARS: "weakref.WeakSet[tqdm]" = weakref.WeakSet()


def set_quiet(quiet: bool) -> None:
    """Silence (True) or allow (False) every progress bar made from now on."""
    _state["quiet"] = bool(quiet)


def is_quiet() -> bool:
    return _state["quiet"]


def _drop(stream_name: str) -> None:
    """Point a stream whose reader has gone at the null device, so later writes and the
    interpreter's final flush succeed silently."""
    stream = getattr(sys, stream_name)
    try:
        fd = stream.fileno()
    except (AttributeError, OSError, ValueError):  # not backed by a file descriptor (a test capture)
        return
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(null, fd)
    finally:
        os.close(null)


class _Stderr:
    """The current `sys.stderr` (looked up at each write), remembering whether the cursor is at
    the start of a line. A carriage return starts a line only on a terminal."""

    def __init__(self):
        self._dirty = None   # the stream whose cursor is not at a line start, if any

    @property
    def at_line_start(self) -> bool:
        return self._dirty is not sys.stderr

    def write(self, s: str) -> int:
        if not s:
            return 0
        try:
            sys.stderr.write(s)
        except BrokenPipeError:
            _drop("stderr")
        fresh = s.endswith("\n") or (s.endswith("\r") and self.isatty())
        self._dirty = None if fresh else sys.stderr
        return len(s)

    def flush(self) -> None:
        try:
            sys.stderr.flush()
        except BrokenPipeError:
            _drop("stderr")

    def isatty(self) -> bool:
        try:
            return bool(sys.stderr.isatty())
        except (AttributeError, ValueError):
            return False

    def __getattr__(self, name):
        return getattr(sys.stderr, name)


_ERR = _Stderr()


def bar(iterable=None, *, desc: str, total: int | None = None, unit: str = "it", enabled: bool = True,
        **kwargs) -> tqdm:
    """A progress bar on stderr; drawn only if `enabled` and the tool is not quiet."""
    b = tqdm(iterable, desc=desc, total=total, unit=unit, file=_ERR, leave=False, dynamic_ncols=True,
             disable=_state["quiet"] or not enabled, **kwargs)
    if not b.disable:
        _BARS.add(b)
    return b


def _fresh_line() -> None:
    if not _ERR.at_line_start:
        _ERR.write("\n")


def say(msg: str) -> None:
    """One message line on stderr (stage, warning, error), never on a bar's line."""
    with tqdm.external_write_mode(file=_ERR):  # clears the bars, draws them again afterwards
        _fresh_line()
        _ERR.write(f"{msg}\n")
        _ERR.flush()


def echo(text: str = "", end: str = "\n") -> None:
    """Result text on stdout. Bars are cleared first, for a terminal or a log that shows both
    streams; a reader that has gone away is not an error."""
    with tqdm.external_write_mode(file=_ERR):
        _fresh_line()
        _ERR.flush()
        try:
            sys.stdout.write(f"{text}{end}")
            sys.stdout.flush()
        except BrokenPipeError:
            _drop("stdout")


def show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """`warnings.showwarning` for the program: the warning as a message line."""
    import warnings
    say(warnings.formatwarning(message, category, filename, lineno, line).rstrip("\n"))


def error(msg: str) -> None:
    """The `error: ...` line. Bars still open belong to the failed work: they are closed first."""
    for b in list(_BARS):
        b.close()
    say(f"error: {msg}")


def finish() -> None:
    """Flush both streams before the interpreter exits; a reader that has gone is not an error."""
    for name in ("stdout", "stderr"):
        try:
            getattr(sys, name).flush()
        except BrokenPipeError:
            _drop(name)
        except (AttributeError, ValueError):
            pass


def plural(n: int, word: str, words: str | None = None) -> str:
    """`1 epoch`, `3 epochs`; `words` for an irregular plural."""
    return f"{n} {word if n == 1 else (words or word + 's')}"
