"""Site sweeps: one design against many sites, each with its own channel.

A sites file is CSV, one site per row. Lines starting with ``#`` and blank
lines are ignored. The first other line is the header: each column is named
by its requirement key, with the unit of its numbers in brackets (any unit
pint understands for that quantity)::

    site,max_speed [km/h],rms_delay_spread [ns],profile,carrier [GHz],snr [dB]
    quay crane 1,12,180,,3.7,24

Columns (all optional; see :data:`COLUMNS`): ``site`` (an identifier),
``max_speed``, ``max_doppler``, ``max_excess_delay``, ``rms_delay_spread``,
``profile`` (a catalogue name, or ``none``), ``carrier``, ``snr [dB]``. An
absent column, or an empty cell, takes the requirement file's value. Each
site is evaluated exactly as ``api.check`` evaluates the requirement set
edited to that site's values (:meth:`Sites.requirements_for`), with one
convenience: a site that names a profile replaces the requirement's delay
shape (its ``profile``, ``profile_file`` or ``max_excess_delay``), keeping
its ``rms_delay_spread`` unless the site gives its own. The requirement
file's consistency rules hold per site: a profile fixes the max excess delay
(scale it with ``rms_delay_spread``, or set ``profile`` to ``none``), an rms
spread is at most half the max excess delay, a normalised profile needs an
rms spread.

A frequency error given relative to the carrier ("0.1 ppm") is taken of each
site's own carrier, as reading a requirement file with that carrier would.

A malformed row is reported with its line (:attr:`Sites.problems`) and the
other rows are still evaluated; a malformed header or an unreadable file is
an :class:`~numerology.errors.InputError`.

The evaluation is vectorised over sites: the environments are built as one
:class:`~numerology.environment.EnvironmentBatch` (each distinct profile
shape evaluated once, then stretched per site) and ``link.evaluate``
broadcasts the design against it, so a sweep gives the same numbers as
``check`` site by site.
"""

from __future__ import annotations

import csv
import difflib
import io
import itertools
import math
import operator
import re
from dataclasses import dataclass, field, fields, replace
from functools import lru_cache
from pathlib import Path

import numpy as np

from . import budget, delay, doppler, error_table, link, profiles
from .design import Design, DesignArrays
from .environment import WIDEBAND_FRACTION, EnvironmentBatch, derive_environment, line_of_sight_rows
from .errors import InputError, read_text
from .requirements import SCHEMA, Requirements
from .units import parse_either, parse_quantity

#: Columns of a sites file: name -> the requirement key it replaces (None: the site identifier).
COLUMNS = {
    "site": None,
    "max_speed": "environment.max_speed",
    "max_doppler": "environment.max_doppler",
    "max_excess_delay": "environment.max_excess_delay",
    "rms_delay_spread": "environment.rms_delay_spread",
    "profile": "environment.profile",
    "carrier": "environment.carrier",
    "snr": "radio.snr",
}
#: A profile cell with this word removes the requirement's profile for that site.
NO_PROFILE = "none"
_KEYS = {key.path: key for key in SCHEMA}
_HEADER_CELL = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*(?:\[\s*(.*?)\s*\])?\s*$")
_HEADER_EXAMPLE = "site,max_speed [km/h],rms_delay_spread [ns],snr [dB]"


# --- sites -------------------------------------------------------------------


@dataclass(frozen=True)
class Sites:
    """Sites read from a file (or made in memory), each with its requirement values in SI.

    Every array has one entry per valid site; rows with problems are left out
    and listed in :attr:`problems`. ``nan`` marks a value the site does not
    have (no speed when its Doppler is given, no rms delay spread, ...).
    """

    names: np.ndarray  # object: site identifiers ("line N" when the file has no site column)
    lines: np.ndarray  # int: line of each site in the file (0 for sites made in memory)
    speed_mps: np.ndarray
    max_doppler_hz: np.ndarray
    carrier_hz: np.ndarray
    snr_db: np.ndarray
    profile: np.ndarray  # object: catalogue profile name, or "" for none
    profile_file: np.ndarray  # object: path of the requirement's profile file, or ""
    rms_delay_spread_s: np.ndarray
    max_excess_delay_s: np.ndarray
    columns: tuple = ()  # the columns the file gave
    problems: tuple = ()  # (line, message), by line
    notes: tuple = ()  # remarks about the whole file
    path: str = "<memory>"

    @property
    def size(self) -> int:
        return int(self.names.size)

    def take(self, index) -> "Sites":
        """The sites at ``index`` (an integer array), every per-site array indexed."""
        n = self.size
        return replace(self, **{f.name: getattr(self, f.name)[index] for f in fields(self)
                                if isinstance(getattr(self, f.name), np.ndarray) and getattr(self, f.name).shape[:1] == (n,)})

    def requirements_for(self, req: Requirements, index: int) -> Requirements:
        """The requirement set edited to the values of the site at ``index``.

        ``api.check(sites.requirements_for(req, i), design)`` gives the numbers
        :func:`sweep` gives for that site (and the full report for it).
        """
        def value(array):
            x = array[index]
            if isinstance(x, str):
                return x or None
            return None if math.isnan(x) else float(x)

        edited = req
        for key, array in (("environment.carrier", self.carrier_hz), ("radio.snr", self.snr_db),
                           ("environment.max_speed", self.speed_mps), ("environment.max_doppler", self.max_doppler_hz),
                           ("environment.profile", self.profile), ("environment.profile_file", self.profile_file),
                           ("environment.rms_delay_spread", self.rms_delay_spread_s),
                           ("environment.max_excess_delay", self.max_excess_delay_s)):
            edited = edited.replace(key, value(array))
        if req.radio.frequency_error_hz and _given_as_ratio(req, "radio.frequency_error"):
            # as reading the file with this carrier would: "0.1 ppm" of the site's carrier
            edited = edited.replace("radio.frequency_error",
                                    req.radio.frequency_error_hz * edited.environment.carrier_hz
                                    / req.environment.carrier_hz)
        return edited

    def __str__(self) -> str:
        problems = f", {len(self.problems)} rows with problems" if self.problems else ""
        return f"{self.size} sites from {self.path}{problems}"


def load_sites(path, req: Requirements, max_sites: int | None = None) -> Sites:
    """Read a sites file (see the module docstring).

    Parameters
    ----------
    path : str or Path
        The CSV file. It is only read.
    req : Requirements
        The requirement set whose values fill the columns and cells not given.
    max_sites : int, optional
        Most sites accepted (default :func:`numerology.budget.sites_that_fit`); a larger file is
        refused before its rows are read.

    Returns
    -------
    Sites
        The valid sites; malformed rows in ``problems`` as (line, message).

    Raises
    ------
    InputError
        If the file cannot be read, has no header or no rows, or its header
        is malformed (unknown column, missing or wrong unit, repeated column).
    """
    from .errors import file_path
    from .requirements import checked

    req = checked(req)
    where = str(file_path(path))
    if max_sites is not None and (isinstance(max_sites, bool) or not isinstance(max_sites, int) or max_sites < 1):
        raise InputError("max_sites", f"expected a whole number of at least 1, got {max_sites!r}")
    numbers, texts = _content_lines(Path(path))
    if not texts:
        raise InputError(where, f"has no header; expected a first row such as {_HEADER_EXAMPLE!r}")
    header = next(csv.reader([texts[0]]))
    columns = _parse_header(header, f"{where}: line {numbers[0]}")
    if len(texts) == 1:
        raise InputError(where, "has a header but no sites")
    budget.check_sites(len(texts) - 1, where, budget.sites_that_fit() if max_sites is None else max_sites)
    lines = numbers[1:]
    width = len(columns)
    flat, counts = _split_rows(texts[1:], lines, where)
    bad = counts != width
    names = ", ".join(name for name, _, _ in columns)
    problems: list = [(int(lines[i]), f"expected {width} values ({names}), got {counts[i]}") for i in np.flatnonzero(bad)]
    cells = _columns(flat, counts, width, bad)
    given = {}
    for j, (name, unit, factor) in enumerate(columns):
        given[name] = _read_column(name, unit, factor, cells[j], lines, problems, bad)
    return _resolve(req, given, lines, bad, problems, where)


def sites_from_values(req: Requirements, *, names=None, max_speed_mps=None, max_doppler_hz=None,
                      max_excess_delay_s=None, rms_delay_spread_s=None, profile=None, carrier_hz=None,
                      snr_db=None) -> Sites:
    """Sites made in memory from SI arrays (a grid for a map, a what-if list).

    Each argument is an array (or a scalar broadcast to the others); ``nan``
    (or ``""`` for ``profile``) takes the requirement's value, as an empty
    cell does. Problems are returned in ``Sites.problems`` with line 0 and
    the site's index in the message.

    Examples
    --------
    >>> from numerology.requirements import requirements_from_mapping
    >>> req = requirements_from_mapping({"environment": {"carrier": "2 GHz", "max_speed": "50 km/h",
    ...     "max_excess_delay": "2 us"}, "radio": {"bandwidth": "10 MHz", "snr": "20 dB"}})
    >>> sites = sites_from_values(req, max_speed_mps=[10.0, 30.0])
    >>> sites.size, sites.speed_mps.tolist(), sites.max_excess_delay_s.tolist()
    (2, [10.0, 30.0], [2e-06, 2e-06])
    """
    values = {"max_speed": max_speed_mps, "max_doppler": max_doppler_hz, "max_excess_delay": max_excess_delay_s,
              "rms_delay_spread": rms_delay_spread_s, "carrier": carrier_hz, "snr": snr_db}
    if not isinstance(req, Requirements):
        raise InputError("requirements", f"expected the Requirements that numerology.api.load returns, "
                                         f"got {type(req).__name__}")
    arrays = {}
    for name, value in values.items():
        if value is not None:
            try:
                arrays[name] = np.asarray(value, dtype=float)
            except (TypeError, ValueError):
                raise InputError(name, f"expected numbers in SI units, got {value!r}") from None
    if profile is not None:
        arrays["profile"] = np.asarray(profile, dtype=object)
    if names is not None:
        arrays["site"] = np.asarray(names, dtype=object)
    if not arrays:
        raise InputError("sites", "expected at least one array of site values")
    shape = np.broadcast_shapes(*(a.shape for a in arrays.values()))
    if len(shape) != 1:
        raise InputError("sites", f"expected one-dimensional arrays of site values, got shape {shape}")
    n = shape[0]
    problems: list = []
    bad = np.zeros(n, dtype=bool)
    lines = np.zeros(n, dtype=np.int64)
    given = {}
    for name, array in arrays.items():
        array = np.broadcast_to(array, shape)
        if name == "site":
            given[name] = np.array([str(x) for x in array], dtype=object)
        elif name == "profile":
            text = np.array(["" if x is None else str(x) for x in array], dtype=object)
            given[name] = _profile_values(text, lines, problems, bad, index_in_message=True)
        else:
            key = _KEYS[COLUMNS[name]]
            si = np.array(array, dtype=float)
            _check_range(name, key, si, ~np.isnan(si), si, "", 1.0, lines, problems, bad, index_in_message=True)
            given[name] = si
    return _resolve(req, given, lines, bad, problems, "<memory>")


def _content_lines(path: Path):
    """Line numbers (int array) and texts of the lines that are neither blank nor comments."""
    text = read_text(path, "a CSV file of sites", "sites")
    lines = text.splitlines()
    # Most lines start with a value: only those starting with a blank, '#' or nothing need a closer look.
    heads = np.array(list(map(_FIRST_CHARACTER, lines)), dtype=str)
    keep = (heads != "") & (heads != "#") & ~np.strings.isspace(heads)
    for i in np.flatnonzero(~keep & (heads != "")):
        line = lines[i]
        keep[i] = bool(line.strip()) and not line.lstrip().startswith("#")
    numbers = np.flatnonzero(keep) + 1
    texts = lines if keep.all() else [lines[i] for i in numbers - 1]
    return numbers, texts


_FIRST_CHARACTER = operator.itemgetter(slice(0, 1))


def _split_rows(texts: list, lines, where: str):
    """The cells of all rows in one flat list, and the number of cells of each row.

    CSV as the ``csv`` module reads it (comma separated, double quotes). Rows
    without a quote character are plain comma-separated text, which is what
    ``csv`` gives for them: then the whole body is split at once and the
    commas of each row are counted on its bytes.
    """
    body = "\n".join(texts)
    if '"' not in body:
        flat = body.replace("\n", ",").split(",")
        raw = np.frombuffer(body.encode("utf-8"), dtype=np.uint8)  # a comma or newline byte is never part of
        ends = np.append(np.flatnonzero(raw == ord("\n")), raw.size)  # a multi-byte character
        commas_before = np.searchsorted(np.flatnonzero(raw == ord(",")), ends)
        return flat, np.diff(commas_before, prepend=0) + 1
    odd = [i for i, text in enumerate(texts) if text.count('"') % 2]
    if odd:  # a quoted cell that goes on to the next line: rows would no longer be lines
        raise InputError(f"{where}: line {lines[odd[0]]}", "a line break inside quotes is not supported in a sites "
                                                           "file; keep each site on one line")
    reader = csv.reader(texts)
    try:
        rows = list(reader)
    except csv.Error as exc:  # e.g. a cell longer than the csv module's field limit
        raise InputError(f"{where}: line {lines[reader.line_num - 1]}", f"cannot be read as CSV ({exc})") from None
    counts = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    return list(itertools.chain.from_iterable(rows)), counts


def _columns(flat: list, counts, width: int, bad):
    """The cells of each column (a list or an object array per column); rows of the wrong width get empty cells."""
    if not bad.any():
        return [flat[j::width] for j in range(width)]
    starts = np.cumsum(counts) - counts
    index = starts[:, None] + np.arange(width)
    index[bad] = len(flat)  # an empty cell, appended below
    table = np.array(flat + [""], dtype=object)[index]
    return [table[:, j] for j in range(width)]


def _distinct(values):
    """The distinct values (in order of first appearance) and each value's index among them.

    Hashing, not sorting: many cells repeat (few units, profiles, rounded
    numbers), and each distinct one is then looked at once.
    """
    index = dict(zip(dict.fromkeys(values), itertools.count()))
    return list(index), np.fromiter(map(index.__getitem__, values), dtype=np.intp, count=len(values))


def _parse_header(header: list, place: str) -> list:
    """[(column, unit, SI factor)] from the header cells."""
    out = []
    seen = set()
    for cell in header:
        match = _HEADER_CELL.match(cell)
        if not match:
            raise InputError(place, f"column {cell.strip()!r}: expected a name and its unit in brackets, "
                                    f"such as 'max_speed [km/h]'")
        name, unit = match.group(1).lower(), match.group(2)
        if name not in COLUMNS:
            close = difflib.get_close_matches(name, list(COLUMNS), n=1, cutoff=0.5)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise InputError(place, f"unknown column {name!r}{hint}; expected some of: {', '.join(COLUMNS)}")
        if name in seen:
            raise InputError(place, f"column {name!r} is given twice")
        seen.add(name)
        factor = 1.0
        if name in ("site", "profile"):
            if unit:
                raise InputError(place, f"column {name!r} takes no unit, got [{unit}]")
        elif name == "snr":
            if unit is None or unit.lower() != "db":
                raise InputError(place, "column 'snr' needs its unit: expected 'snr [dB]'")
            unit = "dB"
        else:
            key = _KEYS[COLUMNS[name]]
            if not unit:
                example = {"speed": "km/h", "frequency": "GHz" if name == "carrier" else "Hz", "time": "us"}
                raise InputError(place, f"column {name!r} needs its unit in brackets, such as "
                                        f"'{name} [{example[key.dimension]}]'")
            factor = parse_quantity(f"1 {unit}", key.dimension, f"{place}, column {name!r}")
            if not factor > 0:
                raise InputError(place, f"column {name!r}: expected a positive unit, got [{unit}]")
        out.append((name, unit, factor))
    return out


def _problem(problems, bad, lines, index, message, index_in_message=False):
    where = f"site {index + 1}: " if index_in_message else ""
    problems.append((int(lines[index]), where + message))
    bad[index] = True


def _read_column(name, unit, factor, cells, lines, problems, bad):
    """Convert one column of text cells: SI floats (nan where empty), names, or profile names."""
    if name == "site":
        return np.array(list(map(str.strip, cells)), dtype=object)
    if name == "profile":
        return _profile_values(cells, lines, problems, bad, strip=True)
    numbers, given = _numbers(cells)
    for i in np.flatnonzero(~given & ~bad):
        if cells[i].strip():
            _problem(problems, bad, lines, i, f"{name}: expected a number in {unit}, got {cells[i].strip()!r}")
    readable = given & ~bad
    key = _KEYS[COLUMNS[name]]
    si = numbers * factor
    _check_range(name, key, si, readable, numbers, unit, factor, lines, problems, bad)
    return np.where(readable, si, np.nan)


def _numbers(cells):
    """Floats of text cells and a mask of the cells that hold one.

    Python's ``float`` reads each distinct text once (surrounding blanks
    allowed); an empty or unreadable cell gives nan and False.
    """
    distinct, codes = _distinct(cells)
    values = np.full(len(distinct), np.nan)
    readable = np.zeros(len(distinct), dtype=bool)
    for i, text in enumerate(distinct):
        try:
            values[i] = float(text)
            readable[i] = True
        except ValueError:
            pass
    return values[codes], readable[codes]


def _check_range(name, key, si, mask, shown, unit, factor, lines, problems, bad, index_in_message=False):
    low_ok = si > key.low if key.low_open else si >= key.low
    fails = np.flatnonzero(mask & ~(low_ok & (si <= key.high)))  # written so that NaN fails too
    lower = "above" if key.low_open else "at least"
    unit_text = f" {unit}" if unit else ""
    for i in fails:
        _problem(problems, bad, lines, i,
                 f"{name}: {shown[i]:g}{unit_text} is out of range: expected {lower} {key.low / factor:g}{unit_text} "
                 f"and at most {key.high / factor:g}{unit_text}", index_in_message)


def _profile_values(text, lines, problems, bad, index_in_message=False, strip=False):
    """Catalogue names (canonical case), "none", or "" for an empty cell; each distinct cell looked up once."""
    distinct, codes = _distinct(text)
    canonical = np.empty(len(distinct), dtype=object)
    unknown = {}
    for i, raw in enumerate(distinct):
        value = raw.strip() if strip else raw
        if value == "" or value.lower() == NO_PROFILE:
            canonical[i] = value.lower()
        else:
            try:
                canonical[i] = profiles.get_profile(value).name
            except ValueError as exc:
                canonical[i] = ""
                unknown[i] = str(exc)
    if unknown:
        for i in np.flatnonzero(np.isin(codes, list(unknown))):
            _problem(problems, bad, lines, i, f"profile: {unknown[codes[i]]}", index_in_message)
    return canonical[codes]


def _resolve(req: Requirements, given: dict, lines, bad, problems: list, where: str) -> Sites:
    """Fill what the sites do not give from the requirement set; check each site's consistency."""
    env, radio = req.environment, req.radio
    n = lines.size

    def column(name, default):
        values = given.get(name)
        if values is None:
            return np.full(n, np.nan if default is None else default, dtype=float), np.zeros(n, dtype=bool)
        has = ~np.isnan(values)
        return np.where(has, values, np.nan if default is None else default), has

    def req_value(x):
        return np.nan if x is None else x

    site_speed, has_speed = column("max_speed", None)
    site_doppler, has_doppler = column("max_doppler", None)
    for i in np.flatnonzero(has_speed & has_doppler & ~bad):
        _problem(problems, bad, lines, i, "max_doppler: both max_speed and max_doppler are given; keep one")
    speed = np.where(has_speed, site_speed, np.where(has_doppler, np.nan, req_value(env.max_speed_mps)))
    doppler_hz = np.where(has_doppler, site_doppler, np.where(has_speed, np.nan, req_value(env.max_doppler_hz)))
    carrier, _ = column("carrier", env.carrier_hz)
    snr, _ = column("snr", radio.snr_db)
    rms, _ = column("rms_delay_spread", req_value(env.rms_delay_spread_s))
    site_max, has_max = column("max_excess_delay", None)
    cell = given.get("profile", np.full(n, "", dtype=object))
    empty = cell == ""
    named = ~empty & (cell != NO_PROFILE)
    profile = np.where(empty, env.profile or "", np.where(named, cell, "")).astype(object)
    profile_file = np.where(empty, env.profile_file or "", "").astype(object)
    # A site naming a profile replaces the requirement's delay shape, max excess delay included.
    max_delay = np.where(has_max, site_max, np.where(named, np.nan, req_value(env.max_excess_delay_s)))
    has_profile = named | (empty & bool(env.profile or env.profile_file))

    normalised = np.zeros(n, dtype=bool)
    for name in set(profile[has_profile].tolist()) - {""}:
        if profiles.get_profile(name).normalised:
            normalised |= profile == name
    checks = (
        (has_profile & has_max & named,
         lambda i: f"max_excess_delay: profile {profile[i]} fixes the max excess delay; leave this cell empty "
                   "(scale the profile with rms_delay_spread)"),
        (has_profile & has_max & ~named,
         lambda i: f"max_excess_delay: the requirement's profile {_profile_label(profile[i], profile_file[i])} fixes "
                   "the max excess delay; set profile to none on this row to use max_excess_delay instead"),
        (normalised & np.isnan(rms),
         lambda i: f"rms_delay_spread: missing; profile {profile[i]} is normalised and needs an rms delay spread"),
        (has_profile & (rms == 0), lambda i: "rms_delay_spread: must be above 0 s to scale a profile"),
        (~has_profile & np.isnan(max_delay) & np.isnan(rms),
         lambda i: "no delay given: expected max_excess_delay and/or rms_delay_spread, or a profile"),
        (~has_profile & ~(rms <= max_delay / 2) & ~np.isnan(rms) & ~np.isnan(max_delay),
         lambda i: "rms_delay_spread: an rms delay spread above half the max excess delay is impossible for any profile"),
        (radio.bandwidth_hz >= 2 * carrier,
         lambda i: f"carrier: the channel bandwidth ({radio.bandwidth_hz:g} Hz) is wider than twice this carrier"),
    )
    for mask, message in checks:
        for i in np.flatnonzero(mask & ~bad):
            _problem(problems, bad, lines, i, message(i))
    names = given.get("site")
    if names is None:
        label = "line {}".format if lines.all() else "site {}".format  # sites made in memory have no lines
        names = np.array(list(map(label, lines.tolist() if lines.all() else range(1, n + 1))), dtype=object)
    else:
        names = names.copy()
        empty = np.flatnonzero(names == "")
        names[empty] = list(map("line {}".format, lines[empty].tolist()))
        valid = np.flatnonzero(~bad)
        valid_names = names[valid].tolist()
        if len(set(valid_names)) < len(valid_names):
            _, codes = _distinct(valid_names)
            # _distinct numbers values in order of first appearance: a first use is a new largest index.
            first_use = codes > np.maximum.accumulate(np.concatenate([[-1], codes[:-1]]))
            first_line = lines[valid[first_use]]
            for k in np.flatnonzero(~first_use):
                i = valid[k]
                _problem(problems, bad, lines, i,
                         f"site: {names[i]!r} is already used on line {first_line[codes[k]]}")
    keep = ~bad
    notes = []
    return Sites(
        names=names[keep], lines=lines[keep], speed_mps=speed[keep], max_doppler_hz=doppler_hz[keep],
        carrier_hz=carrier[keep], snr_db=snr[keep], profile=profile[keep], profile_file=profile_file[keep],
        rms_delay_spread_s=rms[keep], max_excess_delay_s=max_delay[keep], columns=tuple(given),
        problems=tuple(sorted(problems, key=lambda p: p[0])), notes=tuple(notes), path=where)


def _profile_label(name, path):
    return name if name else Path(path).name


def _given_as_ratio(req: Requirements, dotted: str) -> bool:
    text = dict(req.given).get(dotted)
    if not isinstance(text, str):
        return False
    try:
        return parse_either(text, ("frequency", "ratio"), dotted)[0] == "ratio"
    except InputError:
        return True


# --- the environments of the sites ---------------------------------------------


def site_environments(req: Requirements, sites: Sites, notes: bool = True) -> EnvironmentBatch:
    """The environment of every site, as ``derive_environment`` gives it for the edited requirement set.

    Parameters
    ----------
    req : Requirements
    sites : Sites
    notes : bool
        Attach ``derive_environment``'s notes (worked out once per distinct
        combination of their causes); maps of many small grids leave them out.

    Returns
    -------
    EnvironmentBatch
        Shape ``(sites.size,)``. Every site's taps are one of a few profile
        shapes (a catalogue or file profile, an assumed exponential or two-ray
        profile, a bounded profile per distinct rms/span ratio) stretched by a
        factor: the delays are multiplied by it, the delay statistics too,
        and the coherence bandwidth is divided by it. Each shape is evaluated
        once, on its own taps; the sites only gather and scale.

    References
    ----------
    Bello, IEEE Trans. Commun. Syst. 11(4), 1963: the frequency correlation is
    the Fourier transform of the power-delay profile, so stretching the delays
    by a factor a compresses it by a (B_c scales as 1/a).
    """
    env, rules, radio = req.environment, req.rules, req.radio
    n = sites.size
    rho = rules.coherence_correlation
    c = env.propagation_speed_mps
    if n == 0:
        empty = np.zeros(0)
        k = 0.0 if env.k_factor_db is None else 10 ** (env.k_factor_db / 10)
        return EnvironmentBatch(empty, c, empty, empty, empty, env.doppler_spectrum, k, empty, empty, rho, empty,
                                np.zeros((0, 1)), np.zeros((0, 1)), np.zeros(0, dtype=object),
                                np.zeros(0, dtype=object), empty, empty, empty, empty, los_fraction=empty,
                                shape_id=np.zeros(0, dtype=np.intp), delay_scale=empty)
    # Doppler, as derive_environment: a wideband signal is evaluated at its upper band edge.
    carrier = sites.carrier_hz
    fraction = radio.bandwidth_hz / carrier
    doppler_carrier = np.where(fraction > WIDEBAND_FRACTION, carrier + radio.bandwidth_hz / 2, carrier)
    has_speed = ~np.isnan(sites.speed_mps)
    speed_or_zero = np.where(has_speed, sites.speed_mps, 0.0)
    f_d = np.where(has_speed, doppler.max_doppler_hz(speed_or_zero, doppler_carrier, c), sites.max_doppler_hz)
    speed = np.where(has_speed, sites.speed_mps, f_d * c / doppler_carrier)
    spectrum = env.doppler_spectrum

    shapes, shape, scale = _site_shapes(req, sites)
    los = shapes.los[shape]
    k_factor = los / (1.0 - los)
    delays = shapes.delays_s[shape] * scale[:, None]
    stated = sites.max_excess_delay_s
    max_excess = np.where(np.isnan(stated), shapes.max_excess_delay_s[shape] * scale, stated)
    batch = EnvironmentBatch(
        carrier_hz=carrier, propagation_speed_mps=c, wavelength_m=np.asarray(doppler.wavelength_m(carrier, c), float),
        speed_mps=speed, max_doppler_hz=f_d, doppler_spectrum=spectrum, k_factor=k_factor,
        doppler_centroid_hz=_array(doppler.doppler_centroid_hz(f_d, spectrum, k_factor), n),
        doppler_spread_hz=_array(doppler.doppler_spread_hz(f_d, spectrum, k_factor), n),
        coherence_correlation=rho, coherence_time_s=_array(doppler.coherence_time_s(f_d, spectrum, k_factor, rho), n),
        delays_s=delays, powers=shapes.powers[shape], profile_name=shapes.name[shape],
        profile_source=shapes.source[shape], mean_excess_delay_s=shapes.mean_excess_delay_s[shape] * scale,
        rms_delay_spread_s=shapes.rms_delay_spread_s[shape] * scale, max_excess_delay_s=max_excess,
        coherence_bandwidth_hz=shapes.coherence_bandwidth_hz[shape] / scale, notes=(), los_fraction=los,
        shape_id=shape, delay_scale=scale)
    return _with_notes(batch, req, sites, fraction, has_speed, shapes.cause[shape]) if notes else batch


def _array(x, n):
    return np.broadcast_to(np.asarray(x, dtype=float), (n,)).copy()


#: Kinds of assumed or given delay profiles, as derive_environment chooses them.
_SINGLE, _EXPONENTIAL, _TWO_RAY, _BOUNDED_EXP, _BOUNDED_FLAT, _PROFILE = range(6)


@dataclass(frozen=True)
class _Shapes:
    """Profile shapes of unit scale, one per row (taps padded with zero power), and their statistics."""

    delays_s: np.ndarray  # (shapes, taps)
    powers: np.ndarray  # (shapes, taps), each row summing to 1
    name: np.ndarray  # object
    source: np.ndarray  # object
    cause: np.ndarray  # int: what derive_environment's notes depend on (the kind, and which profile)
    mean_excess_delay_s: np.ndarray
    rms_delay_spread_s: np.ndarray
    max_excess_delay_s: np.ndarray
    coherence_bandwidth_hz: np.ndarray
    los: np.ndarray  # line-of-sight share of the power (environment.line_of_sight)


def _site_shapes(req: Requirements, sites: Sites):
    """The distinct profile shapes of the sites, the shape of each site, and its stretch factor.

    A site's taps are ``delays_s[shape] * scale`` and ``powers[shape]``; its
    delay statistics are the shape's times ``scale`` and its coherence
    bandwidth the shape's divided by ``scale`` (round-off apart, what
    derive_environment gives from the stretched taps).
    """
    rules = req.rules
    rho = rules.coherence_correlation
    n = sites.size
    rms, span = sites.rms_delay_spread_s, sites.max_excess_delay_s
    labels, label = _distinct(list(zip(sites.profile.tolist(), sites.profile_file.tolist())))
    has_profile = np.array([name != "" or path != "" for name, path in labels], dtype=bool)[label]
    kind = np.full(n, _PROFILE)
    free = ~has_profile
    kind[free & np.isnan(span) & (rms == 0)] = _SINGLE
    kind[free & (span == 0)] = _SINGLE
    kind[free & np.isnan(span) & (rms > 0)] = _EXPONENTIAL
    kind[free & (span > 0) & np.isnan(rms)] = _TWO_RAY
    both = free & (span > 0) & (rms >= 0)
    shape = np.zeros(n, dtype=np.intp)
    scale = np.ones(n)
    rows = []  # (delays (m, k), powers (m, k), name(s), source, cause(s), coherence bandwidth (m,), LOS tap K)

    def add(sites_of, index, factor, *row):
        if not sites_of.any():  # an unused shape would only widen the padded taps of every site
            return
        shape[sites_of] = sum(len(r[5]) for r in rows) + index
        scale[sites_of] = factor
        rows.append(row)

    add(kind == _SINGLE, 0, 1.0, np.zeros((1, 1)), np.ones((1, 1)), "single path (no delay spread)", "given",
        _SINGLE, np.array([np.inf]), np.nan)
    d1, p1, bc1 = _unit_profile("exponential", rules.delay_threshold_db, rho)  # delays scale with the rms
    exponential = kind == _EXPONENTIAL
    add(exponential, 0, rms[exponential], d1[None], p1[None], "exponential", "assumed from rms_delay_spread",
        _EXPONENTIAL, np.array([bc1]), np.nan)
    d1, p1, bc1 = _unit_profile("two rays", 0.0, rho)
    two_ray = kind == _TWO_RAY
    add(two_ray, 0, span[two_ray], d1[None], p1[None], "two equal rays", "assumed from max_excess_delay", _TWO_RAY,
        np.array([bc1]), np.nan)
    if both.any():
        ratios, which = _distinct((rms[both] / span[both]).tolist())
        t, p, flat, bc = _bounded_profiles(np.array(ratios, dtype=float), rho)
        add(both, which, span[both], np.broadcast_to(t, p.shape), p,
            np.where(flat, "flat profile with two equal rays at its ends", "exponential"),
            "assumed from max_excess_delay and rms_delay_spread", np.where(flat, _BOUNDED_FLAT, _BOUNDED_EXP), bc,
            np.nan)
    for j, (name, path) in enumerate(labels):
        if not (name or path):
            continue
        on = label == j
        profile, d0, p0, bc0 = _template(profiles.get_profile(name) if name else
                                         req.attached(path, profiles.load_profile_csv), rho)
        sigma = rms[on]
        scaled = ~np.isnan(sigma)
        if profile.normalised:
            factor = np.where(scaled, sigma, 1.0)  # 3GPP TR 38.901 sect. 7.7.3: delays in units of the rms spread
        else:
            factor = np.where(scaled, sigma / profile.rms_delay_spread_s, 1.0)  # as Profile.scaled
        add(on, 0, factor, d0[None], p0[None], profile.name, profile.source, _PROFILE + 1 + j, np.array([bc0]),
            np.nan if profile.los_k_factor_db is None else profile.los_k_factor_db)

    width = max(r[0].shape[1] for r in rows)
    count = sum(len(r[5]) for r in rows)
    delays = np.zeros((count, width))
    powers = np.zeros((count, width))  # zero-power padding taps play no part
    columns = {key: np.empty(count, dtype=object) for key in ("name", "source")}
    cause = np.empty(count, dtype=np.int64)
    bandwidth = np.empty(count)
    tap_k = np.empty(count)
    start = 0
    for d, p, name, source, code, bc, k_tap in rows:
        part = slice(start, start + len(bc))
        delays[part, :d.shape[1]] = d
        powers[part, :p.shape[1]] = p
        columns["name"][part] = name
        columns["source"][part] = source
        cause[part] = code
        bandwidth[part] = bc
        tap_k[part] = k_tap
        start += len(bc)
    env = req.environment
    powers, los = line_of_sight_rows(delays, powers, env.doppler_spectrum, env.k_factor_db, tap_k)
    if np.any(los > 0):  # the line of sight changes the profile: its coherence bandwidth once more
        bandwidth = np.atleast_1d(delay.coherence_bandwidth_hz(delays, powers, rho))
        added = (los > 0) & np.isnan(tap_k)
        k_db = 10 * np.log10(np.where(added, los, 0.5) / (1 - np.where(added, los, 0.5)))
        columns["name"] = np.array([f"{n} + line of sight (K = {k:.3g} dB)" if a else n
                                    for n, a, k in zip(columns["name"], added, k_db)], dtype=object)
    shapes = _Shapes(delays, powers, columns["name"], columns["source"], cause,
                     np.atleast_1d(delay.mean_excess_delay_s(delays, powers)),
                     np.atleast_1d(delay.rms_delay_spread_s(delays, powers)),
                     np.atleast_1d(delay.max_excess_delay_s(delays, powers, rules.delay_threshold_db)), bandwidth, los)
    return shapes, shape, scale


@lru_cache(maxsize=64)
def _unit_profile(shape: str, floor_db: float, rho: float):
    """An assumed profile of unit scale (rms 1 s, or span 1 s for two rays) and its coherence bandwidth."""
    if shape == "exponential":
        d1, p1 = delay.exponential_profile(1.0, floor_db=floor_db)
    else:
        d1, p1 = delay.two_ray_profile(1.0, None)
    p1 = p1 / np.sum(p1)
    return d1, p1, float(delay.coherence_bandwidth_hz(d1, p1, rho))


@lru_cache(maxsize=64)
def _template(profile: profiles.Profile, rho: float):
    """A profile's taps (powers summing to 1) and coherence bandwidth, once per profile."""
    d0 = np.asarray(profile.delays_s, dtype=float)
    p0 = np.asarray(profile.powers, dtype=float)
    p0 = p0 / np.sum(p0)
    return profile, d0, p0, float(delay.coherence_bandwidth_hz(d0, p0, rho))


def _bounded_profiles(ratio, rho):
    """environment.bounded_shapes for many rms/span ratios, with each shape's coherence bandwidth on the unit span."""
    from .environment import bounded_shapes

    unit, powers, flat = bounded_shapes(ratio)
    bc = delay.coherence_bandwidth_hz(np.broadcast_to(unit, powers.shape), powers, rho)
    return unit, powers, flat, np.atleast_1d(bc)


def _with_notes(batch: EnvironmentBatch, req: Requirements, sites: Sites, fraction, has_speed, cause):
    """Attach the notes derive_environment gives, computed once per distinct combination of causes.

    ``cause``: per site, a small code of its delay-profile kind (and profile);
    the others are the carrier against the propagation speed and the
    fractional bandwidth (the note states its percentage).
    """
    import dataclasses

    n = sites.size
    if n == 0:
        return batch
    c = req.environment.propagation_speed_mps
    carrier = sites.carrier_hz
    wide = np.where(fraction > WIDEBAND_FRACTION, np.round(100 * fraction), -1)
    _, wide_code = _distinct(wide.tolist())
    key = (((c < 1e7) & (carrier > 1e7)) * 2 + ((c > 1e7) & (carrier < 1e6) & has_speed)).astype(np.int64)
    for code in (wide_code, cause):
        key = key * (int(code.max()) + 1) + code
        present = np.bincount(key) > 0
        key = (np.cumsum(present) - 1)[key]  # renumbered 0, 1, ...: the key stays small
    masks: dict = {}
    order: list = []  # one order of all texts that keeps each site's notes in derive_environment's order
    for j in range(int(key.max()) + 1):
        group = key == j
        previous = None
        for text in derive_environment(sites.requirements_for(req, int(np.argmax(group)))).notes:
            masks[text] = masks.get(text, np.zeros(n, dtype=bool)) | group
            if text not in order:
                order.insert(0 if previous is None else order.index(previous) + 1, text)
            previous = text
    return dataclasses.replace(batch, notes=tuple((text, masks[text]) for text in order))


# --- the sweep -------------------------------------------------------------------


@dataclass(frozen=True)
class SweepSummary:
    """How many sites pass, which rule fails most, and the worst site."""

    sites: int
    passed: int
    failures: dict  # rule -> number of sites where it fails, most first
    worst_site: str | None
    worst_line: int | None
    worst_rule: str | None
    worst_normalised: float | None  # the worst site's binding margin as capacity/demand - 1
    problems: int

    @property
    def failed(self) -> int:
        return self.sites - self.passed

    @property
    def most_failing_rule(self) -> str | None:
        return next(iter(self.failures), None)

    def __str__(self) -> str:
        text = f"{self.passed} of {self.sites} sites pass"
        if self.failures:
            text += "; failing: " + ", ".join(f"{rule} at {count}" for rule, count in self.failures.items())
        if self.worst_site is not None:
            text += f"; worst site {self.worst_site} ({self.worst_rule}, {_percent(self.worst_normalised)})"
        if self.problems:
            text += f"; {self.problems} rows with problems not evaluated"
        return text

    def to_json(self) -> dict:
        return {"sites": self.sites, "passed": self.passed, "failed": self.failed,
                "failures": dict(self.failures), "most_failing_rule": self.most_failing_rule,
                "worst_site": self.worst_site, "worst_line": self.worst_line, "worst_rule": self.worst_rule,
                "worst_normalised_margin": _finite(self.worst_normalised), "problems": self.problems}


def _percent(x):
    return "n/a" if x is None or not math.isfinite(x) else f"{100 * x:+.1f} %"


def _finite(x):
    return None if x is None or not math.isfinite(x) else float(x)


@dataclass(frozen=True)
class SweepResult:
    """One design evaluated at every site; arrays have one entry per site."""

    design: Design
    sites: Sites
    environment: EnvironmentBatch
    rules: tuple  # the applicable Rule objects, declaration order
    margin: dict  # rule name -> margin by the rule's convention (ratio or dB)
    normalised: dict  # rule name -> capacity / demand - 1
    passed: np.ndarray
    binding: np.ndarray  # index into rules of each site's binding rule
    net_throughput_bps: np.ndarray
    effective_sinr_db: np.ndarray
    requirements_path: str = field(default="<memory>")
    #: Where the estimation error of sites sharing a channel came from a table (``numerology.error_table``)
    estimation_table: "error_table.TableReport | None" = None
    #: True for each site whose estimation error was interpolated (its SINR within the table's guard)
    interpolated: np.ndarray | None = None

    @property
    def binding_rule(self) -> np.ndarray:
        """Name of each site's binding rule (smallest normalised margin)."""
        names = np.array([rule.name for rule in self.rules], dtype=object)
        return names[self.binding] if self.binding.size else np.array([], dtype=object)

    def summary(self) -> SweepSummary:
        n = self.sites.size
        counts = {rule.name: int(np.sum(self.margin[rule.name] < 0)) for rule in self.rules}
        failures = dict(sorted(((k, v) for k, v in counts.items() if v), key=lambda kv: -kv[1]))  # stable: ties keep order
        worst = None
        if n:
            worst_normalised = np.min(np.stack([self.normalised[r.name] for r in self.rules]), axis=0)
            worst = int(np.argmin(worst_normalised))
        return SweepSummary(
            sites=n, passed=int(np.sum(self.passed)), failures=failures,
            worst_site=None if worst is None else str(self.sites.names[worst]),
            worst_line=None if worst is None else int(self.sites.lines[worst]),
            worst_rule=None if worst is None else str(self.binding_rule[worst]),
            worst_normalised=None if worst is None else float(worst_normalised[worst]),
            problems=len(self.sites.problems))

    def __str__(self) -> str:
        return f"{self.design.name}: {self.summary()}"

    def margin_key(self, rule) -> str:
        """JSON key of a rule's margin: the rule name, with ``_db`` for dB margins."""
        return rule.name + ("_db" if rule.convention == "db" else "")

    def to_json(self) -> dict:
        """The sweep as JSON-ready values under unit-suffixed keys (non-finite values as None)."""
        env = self.environment
        binding = self.binding_rule
        margins = {self.margin_key(rule): self.margin[rule.name] for rule in self.rules}
        columns = {
            "passed": self.passed.tolist(), "binding_rule": binding.tolist(),
            "net_throughput_bps": self.net_throughput_bps.tolist(), "effective_sinr_db": self.effective_sinr_db.tolist(),
            "max_doppler_hz": env.max_doppler_hz.tolist(), "coherence_time_s": env.coherence_time_s.tolist(),
            "coherence_bandwidth_hz": env.coherence_bandwidth_hz.tolist(),
        }
        margin_lists = {key: values.tolist() for key, values in margins.items()}
        note_lists = [[] for _ in range(self.sites.size)]
        interpolated = np.zeros(self.sites.size, dtype=bool) if self.interpolated is None else self.interpolated
        for text, mask in env.notes:
            for i in np.flatnonzero(mask):
                note_lists[i].append(text)
        rows = []
        for i, (name, line) in enumerate(zip(self.sites.names.tolist(), self.sites.lines.tolist())):
            rows.append({
                "site": name, "line": line or None, "passed": columns["passed"][i],
                "binding_rule": columns["binding_rule"][i],
                "margins": {key: _finite(values[i]) for key, values in margin_lists.items()},
                "net_throughput_bps": _finite(columns["net_throughput_bps"][i]),
                "effective_sinr_db": _finite(columns["effective_sinr_db"][i]),
                "max_doppler_hz": _finite(columns["max_doppler_hz"][i]),
                "coherence_time_s": _finite(columns["coherence_time_s"][i]),
                "coherence_bandwidth_hz": _finite(columns["coherence_bandwidth_hz"][i]),
                "notes": note_lists[i],
                "estimation_interpolated": bool(interpolated[i]),
            })
        return {
            "design": self.design.to_json(),
            "requirements": self.requirements_path,
            "sites_file": self.sites.path,
            "rules": [{"name": rule.name, "convention": rule.convention, "margin_key": self.margin_key(rule)}
                      for rule in self.rules],
            "sites": rows,
            "summary": self.summary().to_json(),
            "problems": [{"line": line, "message": message} for line, message in self.sites.problems],
            "notes": list(self.sites.notes),
            "estimation_table": None if self.estimation_table is None else self.estimation_table.to_json(),
        }


def sweep(req: Requirements, design: Design, sites: Sites, tabulate: bool = True) -> SweepResult:
    """Evaluate one design at every site.

    Parameters
    ----------
    req : Requirements
        The requirement set the sites were read against.
    design : Design
    sites : Sites
        From :func:`load_sites` or :func:`sites_from_values`.
    tabulate : bool
        Sites sharing a channel or stretching one profile shape may take their estimation error from a table
        over the Doppler and the stretch (``numerology.error_table``: verdicts, binding rules and rates as the
        exact error gives them, SINRs within the table's guard). False: every site exact (the stretch limits' bisection).

    Returns
    -------
    SweepResult
        Per site: pass/fail, binding rule, each rule's margin, net
        throughput, effective SINR; the site environments (coherence time and
        bandwidth, notes).

    Raises
    ------
    InputError
        For a bad argument (requirements with a value out of range, a design that is not a
        :class:`Design`, sites that are not :class:`Sites`).

    Notes
    -----
    One call of ``link.evaluate`` with the design against the batch of site
    environments; the per-site SNR is passed as an array in ``radio.snr``.
    """
    from .requirements import checked

    req = checked(req)
    if not isinstance(design, Design):
        raise InputError("design", f"expected a numerology.design.Design, got {type(design).__name__}")
    if not isinstance(sites, Sites):
        raise InputError("sites", f"expected Sites from load_sites or sites_from_values, got {type(sites).__name__}")
    environment = site_environments(req, sites)
    rules = link.applicable_rules(req)
    n = sites.size
    if n == 0:
        empty = np.zeros(0)
        return SweepResult(design, sites, environment, rules, {r.name: empty for r in rules},
                           {r.name: empty for r in rules}, np.zeros(0, dtype=bool), np.zeros(0, dtype=np.int64),
                           empty, empty, req.path)
    designs = DesignArrays.from_designs([design])
    site_req = site_requirements(req, sites)
    evaluation = link.evaluate(designs, environment, site_req, tabulate=tabulate)
    table = evaluation.table
    report = None if table is None else table.report
    interpolated = np.zeros(n, dtype=bool)
    if table is not None and table.interpolated.any():
        evaluation, interpolated = _settled(designs, environment, req, site_req, sites, evaluation)
        settled = report.interpolated - int(np.count_nonzero(interpolated))
        report = replace(report, interpolated=report.interpolated - settled, exact=report.exact + settled,
                         settled=settled)

    def per_site(x):
        return np.broadcast_to(np.asarray(x, dtype=float), (n,)).copy()

    return SweepResult(
        design=design, sites=sites, environment=environment, rules=evaluation.rules,
        margin={name: per_site(v) for name, v in evaluation.margin.items()},
        normalised={name: per_site(v) for name, v in evaluation.normalised.items()},
        passed=np.broadcast_to(evaluation.passed, (n,)).copy(),
        binding=np.broadcast_to(evaluation.binding, (n,)).astype(np.int64),
        net_throughput_bps=per_site(evaluation.rate_bps), effective_sinr_db=per_site(evaluation.sinr_eff_db),
        requirements_path=req.path, estimation_table=report, interpolated=interpolated)


def _settled(designs, environment, req, site_req, sites, evaluation):
    """(The evaluation again, with the exact estimation error wherever the table's could change a verdict,
    True for each site whose error stays interpolated).

    Each interpolated error is trusted to its guard (``error_table.tabulate``: several times its cell's
    largest check). Every interpolated site whose verdict, binding rule or rate differs between its error
    lowered and raised by its guard is evaluated exactly; then all sites once more with the errors so settled
    (the pass/fail, binding rules and rates are then those of the exact errors, the SINRs within the guard).
    """
    n = sites.size
    error = np.broadcast_to(evaluation.estimation_error, (n,)).copy()
    guard = np.broadcast_to(evaluation.table.guard_db, (n,))
    factor = 10 ** (np.where(np.isnan(guard), 0.0, guard) / 10)
    low = link.evaluate(designs, environment, site_req, given_error=np.clip(error / factor, 0.0, 1.0))
    high = link.evaluate(designs, environment, site_req, given_error=np.clip(error * factor, 0.0, 1.0))
    interpolated = np.broadcast_to(evaluation.table.interpolated, (n,))
    doubtful = interpolated & (
        (np.broadcast_to(low.passed, (n,)) != np.broadcast_to(high.passed, (n,)))
        | (np.broadcast_to(low.binding, (n,)) != np.broadcast_to(high.binding, (n,)))
        | (np.broadcast_to(low.rate_bps, (n,)) != np.broadcast_to(high.rate_bps, (n,))))
    index = np.flatnonzero(doubtful)
    if index.size:
        exact = link.evaluate(designs, environment.take(index), site_requirements(req, sites.take(index)))
        error[index] = np.broadcast_to(exact.estimation_error, (index.size,))
    return link.evaluate(designs, environment, site_req, given_error=error), interpolated & ~doubtful


def site_requirements(req: Requirements, sites: Sites) -> Requirements:
    """The requirement set with the per-site values ``link.evaluate`` takes as arrays (one entry per site).

    The SNR of each site, and a frequency error given relative to the carrier
    ("0.1 ppm") taken of each site's own carrier.
    """
    site_req = req.replace("radio.snr", sites.snr_db)
    if req.radio.frequency_error_hz and _given_as_ratio(req, "radio.frequency_error"):
        # "0.1 ppm" is a fraction of each site's own carrier
        site_req = site_req.replace("radio.frequency_error",
                                    req.radio.frequency_error_hz * sites.carrier_hz / req.environment.carrier_hz)
    return site_req


def write_sweep_csv(path, result: SweepResult, sites_file: str | None = None) -> None:
    """Write the sweep as CSV and its metadata beside it as ``FILE.csv.json``, together and atomically.

    Validate the path first with ``output.output_path`` (a command does so before any work).
    The CSV (:func:`sweep_csv`) is plain: one header row, then one row per evaluated site, readable by
    any CSV reader without options; what does not fit in rows (the rows of the sites file that were not
    evaluated, notes, the design, the summary) is in the metadata document (:func:`sweep_csv_metadata`).
    """
    from .output import write_all
    from .render_json import document

    path = Path(path)
    meta = document("numerology.sweep_csv", sweep_csv_metadata(result, path.name, sites_file))
    write_all({path: sweep_csv(result).encode("utf-8"), metadata_path(path): meta.encode("utf-8")})


def metadata_path(path) -> Path:
    """The metadata file of a sweep CSV: ``FILE.csv.json`` beside ``FILE.csv``."""
    path = Path(path)
    return path.with_name(path.name + ".json")


#: First characters that make a spreadsheet evaluate a cell as a formula (OWASP, "CSV Injection").
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(text: str) -> str:
    """A text cell that spreadsheets show as text: a leading ``'`` before a formula's first character.

    Common practice (OWASP, "CSV Injection"): a site named ``=HYPERLINK(...)`` must not become a formula.
    Numbers written by numerology are not text cells and are left alone.
    """
    return "'" + text if text.startswith(_FORMULA_STARTS) else text


def _csv_columns(result: SweepResult) -> list:
    """(header, unit or None) of each CSV column."""
    return [("site", None), ("pass", None), ("binding_rule", None), ("net_throughput [Mbit/s]", "Mbit/s"),
            ("effective_sinr [dB]", "dB"),
            *[(f"{rule.name} margin [{'dB' if rule.convention == 'db' else '%'}]",
               "dB" if rule.convention == "db" else "%") for rule in result.rules],
            ("coherence_time [ms]", "ms"), ("coherence_bandwidth [MHz]", "MHz")]


def sweep_csv(result: SweepResult) -> str:
    """The per-site results as CSV text.

    Columns: site, pass (yes/no), binding_rule, net_throughput [Mbit/s], effective_sinr [dB], one
    margin column per rule (``[%]`` for ratio margins, ``[dB]`` for dB margins), coherence_time [ms],
    coherence_bandwidth [MHz]. Site names that a spreadsheet would evaluate are escaped
    (:func:`spreadsheet_safe`).
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([header for header, _ in _csv_columns(result)])
    columns = [
        [spreadsheet_safe(name) for name in map(str, result.sites.names.tolist())],
        np.where(result.passed, "yes", "no").tolist(),
        result.binding_rule.tolist(),
        _formatted(result.net_throughput_bps / 1e6),
        _formatted(result.effective_sinr_db),
        *[_formatted(result.margin[rule.name] * (100.0 if rule.convention == "ratio" else 1.0))
          for rule in result.rules],
        _formatted(result.environment.coherence_time_s * 1e3),
        _formatted(result.environment.coherence_bandwidth_hz / 1e6),
    ]
    writer.writerows(zip(*columns))
    return buffer.getvalue()


def sweep_csv_metadata(result: SweepResult, csv_name: str, sites_file: str | None = None) -> dict:
    """What goes with a sweep CSV: its columns and units, the design, the summary, rows not evaluated, notes."""
    return {
        "csv": csv_name,
        "requirements": result.requirements_path,
        "sites_file": sites_file if sites_file is not None else result.sites.path,
        "design": result.design.to_json(),
        "columns": [{"name": header, "unit": unit} for header, unit in _csv_columns(result)],
        "summary": result.summary().to_json(),
        "problems": [{"line": line, "message": message} for line, message in result.sites.problems],
        "notes": list(result.sites.notes),
        "estimation_table": None if result.estimation_table is None else result.estimation_table.to_json(),
    }


def _formatted(values) -> list:
    """Numbers to 6 significant digits; inf stays 'inf', nan becomes an empty cell."""
    return ["" if x != x else f"{x:.6g}" for x in np.asarray(values, dtype=float).tolist()]
