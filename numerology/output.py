"""Writing files safely: every output checked before any work, all written together, never over an input.

The contract (README, exit status 2: "nothing is written"):

* :func:`output_path` checks an output option before the command does any work: the suffix, a
  legal name (no NUL, not longer than the folder allows), no loop of symbolic links, an existing
  folder in which a file can really be created (tried: ``/proc``, a read-only or immutable folder
  fail here, not after the work), an existing target that is a regular file that may be replaced,
  and that the target is none of the run's input files. Inputs are compared by identity (device
  and inode of the file a path resolves to), not by name, so a link or a second name of an input
  is protected too.
* :func:`write_all` writes every output of a run to temporary files beside their targets first
  and renames them over the targets only when all are written: a failure leaves no output
  changed and no temporary file behind.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import InputError

#: Prefix of temporary files (short, so that a target name of the longest legal length still works).
_TEMPORARY_PREFIX = ".numerology-"


def identity(path) -> tuple | None:
    """(device, inode) of the file ``path`` resolves to, or None if there is none (or it cannot be read)."""
    try:
        status = os.stat(path)
    except (OSError, ValueError):
        return None
    return (status.st_dev, status.st_ino)


def input_identities(paths) -> dict:
    """(device, inode) -> path as given, for every input path that names an existing file."""
    found = {}
    for path in paths:
        if path:
            key = identity(path)
            if key is not None:
                found.setdefault(key, str(path))
    return found


def _resolved(path: Path, option: str) -> Path:
    try:
        return path.resolve()
    except RuntimeError:  # Python < 3.13: a loop of symbolic links
        raise InputError(option, f"{str(path)!r} is a loop of symbolic links") from None
    except (OSError, ValueError) as exc:
        raise InputError(option, f"{str(path)!r} cannot be used ({getattr(exc, 'strerror', None) or exc})") from None


def _name_max(folder: Path) -> int:
    try:
        return os.pathconf(folder, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):
        return 255


def output_path(path, option: str, suffixes: tuple, req=None, inputs=()) -> Path | None:
    """Check an output path before any work is done; the path to write, or None when not asked for.

    Parameters
    ----------
    path : str or os.PathLike or None
    option : str
        The option that names it, for messages (``"--markdown"``).
    suffixes : tuple of str
        Accepted suffixes, lower case (``(".md", ".markdown")``).
    req : Requirements, optional
        Its file and the files it names are inputs.
    inputs : iterable of paths, optional
        Other inputs of the run (a design file, a sites file).

    Raises
    ------
    InputError
        For any problem listed in the module docstring.
    """
    if path is None:
        return None
    if not isinstance(path, (str, os.PathLike)) or not str(path).strip():
        raise InputError(option, f"expected a file name, got {path!r}")
    text = str(path)
    if "\0" in text:
        raise InputError(option, f"expected a file name without NUL characters, got {text!r}")
    given = Path(text)
    if given.suffix.lower() not in suffixes:
        raise InputError(option, f"expected a file name ending in {' or '.join(suffixes)}, got {text!r}")
    target = _resolved(given, option)
    folder = target.parent
    if not folder.is_dir():
        raise InputError(option, f"folder {str(folder)!r} does not exist")
    limit = _name_max(folder)
    if len(os.fsencode(target.name)) > limit:
        raise InputError(option, f"the file name has {len(os.fsencode(target.name))} bytes; the folder "
                                 f"{str(folder)!r} allows at most {limit}")
    if target.is_dir():
        raise InputError(option, f"{text!r} is a folder; expected a file name")
    protected = input_identities([*_requirement_inputs(req), *inputs])
    if target.exists():
        if identity(target) in protected:
            raise InputError(option, f"refusing to overwrite the input file {protected[identity(target)]!r}"
                                     + ("" if str(protected[identity(target)]) == text else f" (as {text!r})"))
        if not target.is_file():
            raise InputError(option, f"{text!r} exists and is not a regular file (a device, pipe or socket)")
        try:  # opening for appending changes nothing, and fails where the file may not be written
            with open(target, "ab"):
                pass
        except OSError as exc:
            raise InputError(option, f"{text!r} cannot be replaced ({exc.strerror or exc})") from None
    _try_creating_a_file_in(folder, option)
    return target


def _requirement_inputs(req) -> list:
    if req is None:
        return []
    return [req.path, req.environment.profile_file, req.rules.mcs_table]


def _try_creating_a_file_in(folder: Path, option: str) -> None:
    """Create and remove a temporary file in ``folder``: the only sure test that outputs can be written there."""
    try:
        handle, probe = tempfile.mkstemp(dir=folder, prefix=_TEMPORARY_PREFIX, suffix=".probe")
    except OSError as exc:
        raise InputError(option, f"cannot write in folder {str(folder)!r} ({exc.strerror or exc})") from None
    os.close(handle)
    os.unlink(probe)


def write_all(outputs: dict) -> None:
    """Write ``{path: bytes}`` together: all to temporary files first, then each renamed over its target.

    Paths come from :func:`output_path`. A file gets the permissions a plain ``open()`` would give.
    """
    written = []
    try:
        for path, data in outputs.items():
            handle, temporary = tempfile.mkstemp(dir=Path(path).parent, prefix=_TEMPORARY_PREFIX, suffix=".tmp")
            written.append((temporary, path))
            with os.fdopen(handle, "wb") as stream:
                stream.write(data)
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(temporary, 0o666 & ~umask)  # mkstemp makes 0600
        for temporary, path in written:
            os.replace(temporary, path)
    except BaseException:
        for temporary, _ in written:
            if os.path.exists(temporary):
                os.unlink(temporary)
        raise


def write_atomic(path: Path, data: bytes) -> None:
    """Write one file atomically (see :func:`write_all`)."""
    write_all({Path(path): data})


def optional_module(name: str, option: str, extra: str):
    """Import an optional dependency for an output, or an InputError naming the option and the extra to install."""
    import importlib

    try:
        return importlib.import_module(name)
    except ImportError:
        raise InputError(option, f"needs {name}: pip install 'numerology[{extra}]'") from None
