"""An advisory lock on a run directory, so that two runs never write into one at once.

The lock is `fcntl.flock` on DIR/.solitons.lock, which holds the owner's pid, host and start
time.  The kernel releases a flock when its process ends, however it ends, so a lock left
by a dead process is simply taken again (with a message naming the dead owner, read from
the file it left).  The file itself is never removed while a run might hold it (removing it
would let a second process lock a new file of the same name); it is emptied on release.
A directory the lock had to create, and that holds nothing but the lock when a refused run
leaves, is removed again, so a refusal leaves no empty output directory.
"""

from __future__ import annotations

import contextlib
import datetime
import fcntl
import json
import os
import socket
from collections.abc import Iterator
from pathlib import Path
from typing import TextIO

from solitons.io.results import OutputError, check_output_dir

LOCK_NAME = ".solitons.lock"


class DirectoryInUse(OutputError):
    """Another live process holds the run directory's lock (the message names it)."""


def _owner_text(record: dict) -> str:
    return (f"pid {record.get('pid', '?')} on host {record.get('host', '?')} "
            f"(since {record.get('since', '?')})")


@contextlib.contextmanager
def holding(directory: str | Path, stream: TextIO | None = None) -> Iterator[Path]:
    """Hold the lock of ``directory`` (created if missing) for the block; DirectoryInUse at
    once if a live process holds it."""
    directory = check_output_dir(directory)
    created = not directory.exists()
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise OutputError(f"{directory}: cannot create it ({error.strerror or error})") from None
    path = directory / LOCK_NAME
    handle = os.open(path, os.O_RDWR | os.O_CREAT, 0o666)
    try:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise DirectoryInUse(f"{directory}: in use by another run, {_owner_text(_read(handle))}; wait for it "
                                 "to finish or choose another --out") from None
        previous = _read(handle)
        if previous and stream is not None:  # its owner died holding it: the kernel released it
            print(f"  took over the lock of {directory} left by a run that ended without releasing it, "
                  f"{_owner_text(previous)}", file=stream, flush=True)
        record = {"pid": os.getpid(), "host": socket.gethostname(),
                  "since": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")}
        os.ftruncate(handle, 0)
        os.pwrite(handle, json.dumps(record).encode(), 0)
        try:
            yield directory
        finally:
            os.ftruncate(handle, 0)
            if created and sorted(p.name for p in directory.iterdir()) == [LOCK_NAME]:
                path.unlink(missing_ok=True)
                with contextlib.suppress(OSError):
                    directory.rmdir()
    finally:
        os.close(handle)


def _read(handle: int) -> dict:
    try:
        data = os.pread(handle, 4096, 0)
        return json.loads(data) if data.strip() else {}
    except (OSError, ValueError):
        return {"pid": "?", "host": "unreadable lock file"}
