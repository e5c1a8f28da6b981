"""Run ``isotide`` (as its console command does) with the save's moments marked and slowed.

Used by ``tests/test_interruptions.py`` as ``python tests/interrupt_runner.py ARGS...``.
Environment:

- ``ISOTIDE_TEST_MARKS``: a file; one line is appended at every ``os.fsync``
  (``fsync N``: a temporary file, the journal or the folder flushed) and
  every ``os.replace`` (``replace N NAME``), before it runs, so that a test
  can send a signal at a known moment of the save.
- ``ISOTIDE_TEST_PAUSE``: seconds to wait after a mark (default 0), which
  keeps the process inside that moment while the signal arrives;
  ``ISOTIDE_TEST_PAUSE_AT``: only after the mark whose first two words
  are this text (``replace 2``: before the second rename), else after every
  mark.

Only ``os`` functions are wrapped, so nothing heavy is imported before
:func:`engine.cli.run_program` takes Ctrl-C over.
"""

from __future__ import annotations

import os
import sys
import time

MARKS = os.environ.get("ISOTIDE_TEST_MARKS", "")
PAUSE = float(os.environ.get("ISOTIDE_TEST_PAUSE", "0") or 0)
PAUSE_AT = os.environ.get("ISOTIDE_TEST_PAUSE_AT", "")
_count = {"fsync": 0, "replace": 0}
_real_fsync = os.fsync
_real_replace = os.replace


def _mark(text: str) -> None:
    if MARKS:
        fd = os.open(MARKS, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        try:
            os.write(fd, (text + "\n").encode())
        finally:
            os.close(fd)
    if PAUSE > 0 and (not PAUSE_AT or " ".join(text.split()[:2]) == PAUSE_AT):
        time.sleep(PAUSE)


def _fsync(fd: int) -> None:
    _count["fsync"] += 1
    _mark(f"fsync {_count['fsync']}")
    _real_fsync(fd)


def _replace(src, dst, *args, **kwargs) -> None:
    _count["replace"] += 1
    _mark(f"replace {_count['replace']} {os.path.basename(os.fspath(dst))}")
    _real_replace(src, dst, *args, **kwargs)


os.fsync = _fsync
os.replace = _replace

if __name__ == "__main__":
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    from engine.cli import run_program

    sys.argv = ["isotide", *sys.argv[1:]]
    run_program()
