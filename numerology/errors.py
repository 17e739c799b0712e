"""Error types for bad input.

Every problem with what a user gave us (a requirement file, a design file, a
CSV of taps, a command-line option) is raised as :class:`InputError`. The
command line turns it into one line on stderr and exit status 2. An
infeasible request is *not* an error: it is an answer (see ``solver``).
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad user input, located precisely.

    Parameters
    ----------
    place : str
        Where the problem is, e.g. ``"site.toml: environment.max_speed"``.
    message : str
        What was expected, phrased as advice.
    """

    def __init__(self, place: str, message: str):
        self.place = place
        self.message = message
        super().__init__(f"{place}: {message}" if place else message)


def file_path(path, place: str = "path"):
    """``path`` as a :class:`pathlib.Path`, or an :class:`InputError` if it is not a file name at all."""
    import os
    from pathlib import Path

    if isinstance(path, bool) or not isinstance(path, (str, os.PathLike)) or not str(path).strip():
        raise InputError(place, f"expected a file name, got {path!r}")
    return Path(path)


def read_text(path, expected: str, kind: str | None = None) -> str:
    """The text of a user's file; any failure to read it becomes one :class:`InputError` line.

    Parameters
    ----------
    path : str or os.PathLike
    expected : str
        What the file should be, for the message, e.g. ``"a TOML file"``.
    kind : str, optional
        A key of :data:`numerology.budget.MAX_FILE_BYTES`: at most that many bytes are read (a pipe
        or a device is read up to the limit, never to exhaustion).
    """
    from . import budget

    path = file_path(path)
    limit = budget.MAX_FILE_BYTES[kind] if kind else None
    try:
        with open(path, "rb") as handle:
            if limit is not None:  # a regular file too large is refused before it is read
                import os
                import stat

                status = os.fstat(handle.fileno())
                if stat.S_ISREG(status.st_mode):
                    budget.check_file_size(kind, status.st_size, str(path))
            data = handle.read() if limit is None else handle.read(limit + 1)
    except IsADirectoryError:
        raise InputError(str(path), f"is a folder; expected {expected}") from None
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the name
        raise InputError(str(path), f"cannot be read ({getattr(exc, 'strerror', None) or exc})") from None
    if limit is not None:
        budget.check_file_size(kind, len(data), str(path))
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(str(path), f"is not UTF-8 text; expected {expected}") from None
