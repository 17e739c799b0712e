"""The advisory cache of quantity strings: SI values pint gave in earlier runs.

Importing pint costs about a fifth of a second, a large part of a short run, so
:func:`numerology.units.parse_quantity` keeps the SI value of every string pint
read (``"speed|120 km/h" -> 33.33...``) in a small file, and a run whose strings
are all known never imports pint.

The cache is *advisory*: whatever is in the file, the answer is the one pint
would give, or the cache is not used. Concretely:

* **one file per installation**: ``quantities-<id>.json`` in the cache folder,
  ``<id>`` a hash of :func:`installation` (this package's version and location,
  the installed pint's location, size and time, the file format), so two
  installations sharing a folder do not overwrite each other's entries;
* **bounded reading**: only a regular file of at most :data:`MAX_BYTES` is read,
  opened without blocking (a FIFO, a device, a folder or a link to one is
  ignored, never waited on), and JSON nested too deeply is ignored;
* **every entry checked before use**: ``[si, dimension, tag]`` with ``si`` a
  finite float (not a boolean, integer or string), ``dimension`` equal to the
  dimension in its key, and ``tag`` the HMAC-SHA256 of the key and the value's
  ``repr`` under the installation id. An edited value, ``true``, ``0``, ``NaN``
  or a value moved under another key fails the check and the string is read by
  pint instead. (The tag detects edits and corruption; it is no defence against
  someone who can run code as you, and need not be.)
* **checked against pint**: a run that imported pint anyway re-reads a sample
  of :data:`SAMPLE` entries of the file before adding its own; if pint
  disagrees with any of them, the old entries are dropped;
* **concurrent runs merge**: saving takes a lock file, re-reads the file and
  adds this run's entries to what is there (no run loses another's entries),
  then replaces the file atomically; a lock not obtained within
  :data:`LOCK_SECONDS` means this run's entries are simply not kept;
* **capped**: at most :data:`MAX_ENTRIES` entries, the oldest dropped first.

The folder is ``$NUMEROLOGY_CACHE_DIR`` (empty: no cache), else
``$XDG_CACHE_HOME/numerology`` or ``~/.cache/numerology``. The command line
saves only after a run that did not stop on bad input.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import math
import os
import stat
import tempfile
import time
from functools import lru_cache
from pathlib import Path

#: Version of the file layout; part of the installation id, so older files are never read.
FORMAT = 2
#: Largest cache file read, bytes (4096 entries take about 400 kB).
MAX_BYTES = 1 << 20
#: Most entries kept; beyond it the oldest are dropped.
MAX_ENTRIES = 4096
#: Entries of the file re-read by pint before a run that loaded pint adds its own.
SAMPLE = 8
#: How long a run waits for another run's save to finish before giving up its own, s.
LOCK_SECONDS = 2.0


def folder() -> Path | None:
    """The cache folder: ``$NUMEROLOGY_CACHE_DIR`` (empty: no cache), else ``$XDG_CACHE_HOME`` or ``~/.cache``."""
    chosen = os.environ.get("NUMEROLOGY_CACHE_DIR")
    if chosen == "":
        return None
    if chosen is None:
        base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
        chosen = os.path.join(base, "numerology")
    return Path(chosen)


@lru_cache(maxsize=1)
def installation() -> str:
    """This package (version, location) and the installed pint (location, size, time), without importing pint."""
    from importlib.util import find_spec

    from . import __version__

    try:
        spec = find_spec("pint")
        status = os.stat(spec.origin)
        pint_id = f"{spec.origin}:{status.st_size}:{status.st_mtime_ns}"
    except (AttributeError, TypeError, ValueError, OSError):
        pint_id = "unknown"
    return f"numerology {__version__} at {Path(__file__).resolve().parent}; pint {pint_id}; format {FORMAT}"


def cache_path() -> Path | None:
    """This installation's cache file (None when the cache is switched off)."""
    where = folder()
    if where is None:
        return None
    return where / f"quantities-{hashlib.sha256(installation().encode()).hexdigest()[:16]}.json"


def _tag(key: str, si: float) -> str:
    return hmac.new(installation().encode(), f"{key}\0{si!r}".encode(), hashlib.sha256).hexdigest()[:32]


def entry(key: str, si: float) -> list:
    """The stored form of one value: ``[si, dimension, tag]``."""
    return [si, key.split("|", 1)[0], _tag(key, si)]


def valid(key, stored) -> float | None:
    """The SI value of a stored entry if every check passes (see the module docstring), else None."""
    if not isinstance(key, str) or "|" not in key or not isinstance(stored, list) or len(stored) != 3:
        return None
    si, dimension, tag = stored
    if type(si) is not float or not math.isfinite(si) or dimension != key.split("|", 1)[0]:
        return None
    if not isinstance(tag, str) or not hmac.compare_digest(tag, _tag(key, si)):
        return None
    return si


def _read(path: Path) -> dict:
    """The raw entries of a cache file, or {} for anything but a small regular file of the expected layout."""
    try:
        descriptor = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except (OSError, ValueError):
        return {}
    try:
        status = os.fstat(descriptor)
        if not stat.S_ISREG(status.st_mode) or status.st_size > MAX_BYTES:
            return {}
        data = os.read(descriptor, MAX_BYTES + 1)
    except OSError:
        return {}
    finally:
        os.close(descriptor)
    if len(data) > MAX_BYTES:
        return {}
    try:
        document = json.loads(data.decode("utf-8"))
    except (ValueError, RecursionError):  # RecursionError: JSON nested thousands deep
        return {}
    if not isinstance(document, dict) or document.get("installation") != installation():
        return {}
    entries = document.get("entries")
    return entries if isinstance(entries, dict) else {}


@lru_cache(maxsize=1)
def _on_disk() -> dict:
    path = cache_path()
    return {} if path is None else _read(path)


def lookup(key: str) -> float | None:
    """The cached SI value of ``"dimension|text"``, or None (absent or failing a check)."""
    return valid(key, _on_disk().get(key))


#: Values pint gave in this process, not yet in the cache file.
_LEARNED: dict = {}


def learn(key: str, si: float) -> None:
    """Remember a value pint gave, for :func:`save`."""
    if type(si) is float and math.isfinite(si):
        _LEARNED[key] = si


def forget() -> None:
    """Drop what this process read and learned (the next lookup reads the file again)."""
    _on_disk.cache_clear()
    _LEARNED.clear()


def save() -> None:
    """Merge this run's values into the cache file (see the module docstring); any failure means no cache."""
    path = cache_path()
    if path is None or not _LEARNED:
        return
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with _locked(path.with_suffix(".lock")) as held:
            if held:
                _merge_and_write(path)
    except (OSError, ValueError, RecursionError):
        return
    forget()


def _merge_and_write(path: Path) -> None:
    entries = {key: stored for key, stored in _read(path).items() if valid(key, stored) is not None}
    if not _agrees_with_pint(entries):
        entries = {}
    for key, si in _LEARNED.items():
        entries.pop(key, None)  # re-inserted last: the newest entries are kept longest
        entries[key] = entry(key, si)
    if len(entries) > MAX_ENTRIES:
        entries = dict(list(entries.items())[-MAX_ENTRIES:])
    text = json.dumps({"installation": installation(), "entries": entries}, separators=(",", ":"))
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".quantities-", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(text)
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


def _agrees_with_pint(entries: dict) -> bool:
    """Whether pint gives the stored value for a sample of the entries (those not learned in this run)."""
    from .errors import InputError
    from .units import pint_value

    sample = [key for key in entries if key not in _LEARNED][:SAMPLE]
    for key in sample:
        dimension, text = key.split("|", 1)
        try:
            if pint_value(text, dimension, "cache") != entries[key][0]:
                return False
        except (InputError, KeyError):
            return False
    return True


class _locked:
    """An exclusive lock on ``path`` (``fcntl.flock``), tried for up to LOCK_SECONDS; ``held`` says if it was got."""

    def __init__(self, path: Path):
        self.path = path
        self.descriptor = None

    def __enter__(self) -> bool:
        try:
            import fcntl
        except ImportError:  # no POSIX locks: merge without one (a concurrent save may then be lost)
            return True
        self.descriptor = os.open(self.path, os.O_RDWR | os.O_CREAT | getattr(os, "O_NONBLOCK", 0), 0o600)
        deadline = time.monotonic() + LOCK_SECONDS
        while True:
            try:
                fcntl.flock(self.descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
                return True
            except OSError:
                if time.monotonic() > deadline:
                    return False
                time.sleep(0.01)

    def __exit__(self, *exc) -> None:
        if self.descriptor is not None:
            os.close(self.descriptor)  # closing releases the lock
