"""Writing files safely: validate paths first, write atomically, never overwrite inputs."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import InputError


def output_path(path: str | None, option: str, suffixes: tuple, req=None) -> Path | None:
    """Check an output path before any work is done; None when not asked for."""
    if path is None:
        return None
    target = Path(path)
    if target.suffix.lower() not in suffixes:
        raise InputError(option, f"expected a file name ending in {' or '.join(suffixes)}, got {path!r}")
    if target.is_dir():
        raise InputError(option, f"{path!r} is a folder; expected a file name")
    parent = target.resolve().parent
    if not parent.is_dir():
        raise InputError(option, f"folder {str(parent)!r} does not exist")
    inputs = set()
    if req is not None:
        inputs.add(Path(req.path).resolve())
        for extra in (req.environment.profile_file, req.rules.mcs_table):
            if extra:
                inputs.add(Path(extra).resolve())
    if target.resolve() in inputs:
        raise InputError(option, f"refusing to overwrite the input file {path!r}")
    return target


def write_atomic(path: Path, data: bytes) -> None:
    """Write to a temporary file beside the target, then rename over it."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=str(path.resolve().parent))
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the file the permissions a plain open() would
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
