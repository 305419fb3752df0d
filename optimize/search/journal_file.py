"""A crash-safe Optuna journal file: torn tails are cut, failed writes taken back.

Optuna's journal is one JSON object per line, appended under a file lock. A writer that
dies in the middle of an append (SIGKILL, power loss) or whose disk fills up leaves a
*torn tail*: the last line has no terminating newline. Optuna's reader skips such a
last line, but a later append written straight after it merges the two into one invalid
line, and from then on every reader fails and no finished trial can be read.

:class:`CrashSafeJournalFileBackend` closes that hole from both sides:

* before every append, under the journal's lock, it looks at the last byte; when the
  file does not end in a newline, the torn bytes are copied to ``<journal>.torn`` and
  cut off (a torn line was never a complete log, so no reader ever applied it);
* a write that fails part-way (``ENOSPC``, ``EDQUOT``, ``EIO``) is truncated back to the
  size before the append and reported as :class:`~optimize.errors.StorageWriteError`.

The file stays a plain Optuna journal that any stock ``JournalFileBackend`` reads.
"""

from __future__ import annotations

import json
import os
import sys
from typing import Any

from optuna.storages.journal import JournalFileBackend

from tunnelsmith.optimize.errors import InputError, StorageWriteError

TORN_SUFFIX = ".torn"
_CHUNK_BYTES = 1 << 16


def torn_tail_bytes(path) -> int:
    """Length in bytes of the unterminated last line of ``path`` (0 when it ends cleanly)."""
    try:
        descriptor = os.open(path, os.O_RDONLY)
    except FileNotFoundError:
        return 0
    try:
        return _torn_length(descriptor, os.fstat(descriptor).st_size)
    finally:
        os.close(descriptor)


def _torn_length(descriptor: int, size: int) -> int:
    # Search backwards from the end in chunks for the last newline; everything after it
    # is the torn tail. Reads at most one chunk when the file ends cleanly.
    end = size
    while end > 0:
        start = max(0, end - _CHUNK_BYTES)
        chunk = os.pread(descriptor, end - start, start)
        cut = chunk.rfind(b"\n")
        if cut >= 0:
            return size - (start + cut + 1)
        end = start
    return size


def report_torn_tail(path) -> None:
    """Tell the user (stderr, one line) that a reader is skipping a torn last line."""
    torn = torn_tail_bytes(path)
    if torn:
        print(f"note: {path} ends in an unfinished line of {torn} bytes (a writer stopped in the middle "
              f"of an append); it is ignored and every complete trial is read. The next "
              f"`tunnelsmith optimize` on this run keeps a copy in {os.path.basename(path)}{TORN_SUFFIX} "
              f"and removes it.", file=sys.stderr)


class CrashSafeJournalFileBackend(JournalFileBackend):
    """Optuna's journal file backend with torn-tail repair and all-or-nothing appends.

    Parameters
    ----------
    file_path : str
        The journal file (created when missing).
    sync_each_append : bool, default True
        ``fsync`` after every append, as Optuna's own backend does. Subclasses that
        sync once per batch pass ``False`` and call :meth:`sync`.

    Notes
    -----
    Every append is one ``O_APPEND`` write sequence under the journal's file lock, so
    other processes see it whole or not at all once the lock is released. Torn-tail
    repair also runs under that lock, so it can never cut a line that a live writer is
    still writing.
    """

    def __init__(self, file_path: str, *, sync_each_append: bool = True) -> None:
        super().__init__(file_path)
        self._sync_each_append = sync_each_append
        self.torn_bytes_removed = 0

    def read_logs(self, log_number_from: int):
        try:
            yield from super().read_logs(log_number_from)
        except ValueError as error:  # json.JSONDecodeError is a ValueError
            raise _damaged_journal(self._file_path, error) from None

    def repair(self) -> int:
        """Cut a torn tail now (under the file lock); returns the bytes removed."""
        from optuna.storages.journal._file import get_lock_file

        with get_lock_file(self._lock):
            descriptor = os.open(self._file_path, os.O_RDWR)
            try:
                return self._cut_torn_tail(descriptor, os.fstat(descriptor).st_size)
            finally:
                os.close(descriptor)

    def _cut_torn_tail(self, descriptor: int, size: int) -> int:
        if size == 0 or os.pread(descriptor, 1, size - 1) == b"\n":
            return 0
        torn = _torn_length(descriptor, size)
        tail = os.pread(descriptor, torn, size - torn)
        with open(self._file_path + TORN_SUFFIX, "ab") as keep:
            keep.write(tail + b"\n")
            keep.flush()
            os.fsync(keep.fileno())
        os.ftruncate(descriptor, size - torn)
        os.fsync(descriptor)
        self.torn_bytes_removed += torn
        print(f"note: {self._file_path} ended in an unfinished line of {torn} bytes (a writer stopped in "
              f"the middle of an append); it was moved to {os.path.basename(self._file_path)}{TORN_SUFFIX} "
              f"and no complete trial was touched.", file=sys.stderr)
        return torn

    def append_logs(self, logs: list[dict[str, Any]]) -> None:
        from optuna.storages.journal._file import get_lock_file

        payload = ("\n".join(json.dumps(log, separators=(",", ":")) for log in logs) + "\n").encode("utf-8")
        with get_lock_file(self._lock):
            descriptor = os.open(self._file_path, os.O_RDWR | os.O_APPEND)
            try:
                size = os.fstat(descriptor).st_size
                size -= self._cut_torn_tail(descriptor, size)
                try:
                    _write_all(descriptor, payload)
                    if self._sync_each_append:
                        os.fsync(descriptor)
                except OSError as error:
                    # Take the partial append back so the file ends on a complete line.
                    try:
                        os.ftruncate(descriptor, size)
                    except OSError:
                        pass  # the next writer's torn-tail repair cuts it instead
                    raise StorageWriteError(self._file_path, error.strerror or str(error)) from None
            finally:
                os.close(descriptor)

    def sync(self) -> None:
        """Force everything appended so far onto the disk."""
        descriptor = os.open(self._file_path, os.O_RDONLY)
        try:
            os.fsync(descriptor)
        finally:
            os.close(descriptor)


def _write_all(descriptor: int, payload: bytes) -> None:
    view = memoryview(payload)
    while view:
        written = os.write(descriptor, view)
        view = view[written:]


def _damaged_journal(path: str, error: Exception) -> InputError:
    line = _first_bad_line(path)
    where = f" at line {line}" if line else ""
    return InputError(
        path, None,
        f"the campaign journal is damaged{where} ({error}); the lines before it are intact",
        f"keep a copy of the file, then cut it before the damaged line (e.g. `head -n {max(line - 1, 0)} "
        f"{os.path.basename(path)} > fixed && mv fixed {os.path.basename(path)}`) and run the same "
        f"command again; trials recorded after that line are lost" if line else
        "keep a copy of the file and restore it from a backup",
    )


def _first_bad_line(path: str) -> int:
    with open(path, "rb") as handle:
        for number, line in enumerate(handle, start=1):
            if not line.endswith(b"\n"):
                return 0  # only an unterminated last line: not damage
            try:
                json.loads(line)
            except ValueError:
                return number
    return 0
