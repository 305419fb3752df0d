"""The one error type for bad user input.

Every problem a user can fix by editing a file or a command line is raised as
:class:`InputError`. The command line prints ``str(err)`` (one paragraph naming the file,
the key, the problem and the fix) to stderr and exits with status 2, never with a
traceback.
"""

from __future__ import annotations

#: Exit statuses of every command: success, internal or environment fault, bad input,
#: interrupted (128 + SIGINT, the shell convention).
EXIT_OK, EXIT_INTERNAL, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


def _one_line(text: str) -> str:
    # Messages are printed as a single paragraph: fold any line breaks that came from
    # quoted file content or from wrapped library messages.
    return " ".join(str(text).split())


class InputError(Exception):
    """A problem in user input, with the place it occurs and how to fix it.

    Parameters
    ----------
    file : str or os.PathLike
        The file (or other input source, such as ``"command line"``) holding the problem.
    key : str or None
        Dotted path of the offending key, e.g. ``layer "well".thickness_nm`` or
        ``search.trials``; ``None`` for a problem with the file as a whole.
    problem : str
        What is wrong, as a sentence without a final full stop.
    fix : str
        A concrete edit that removes the problem.

    Notes
    -----
    ``str(err)`` is ``"<file>: <key>: <problem>. Fix: <fix>"`` (the key part is left out
    when ``key`` is ``None``).
    """

    def __init__(self, file, key: str | None, problem: str, fix: str):
        super().__init__(file, key, problem, fix)
        self.file = str(file)
        self.key = key
        self.problem = _one_line(problem).rstrip(".")
        self.fix = _one_line(fix)

    def __str__(self) -> str:
        place = self.file if self.key is None else f"{self.file}: {self.key}"
        return f"{place}: {self.problem}. Fix: {self.fix}"


class StorageWriteError(Exception):
    """The campaign storage could not take a write (disk full, quota, I/O error).

    Raised only after the partial write has been taken back, so the storage holds every
    trial that finished before it and nothing half-written. The command line prints the
    message and exits with status 1 (an environment fault, not bad input).

    Parameters
    ----------
    path : str or os.PathLike
        The storage file that refused the write.
    reason : str
        The operating system's account of the failure (e.g. ``No space left on device``).
    """

    def __init__(self, path, reason: str):
        super().__init__(path, reason)
        self.path = str(path)
        self.reason = _one_line(reason)

    def __str__(self) -> str:
        return (f"{self.path}: cannot write to the campaign storage ({self.reason}). Every trial "
                f"that finished before this is kept and the file holds no half-written line. "
                f"Fix: free space (or fix the disk) and run the same command again; the campaign "
                f"resumes where it stopped")
