"""Requirement files: the TOML language users write, read once into SI.

A requirement file has five tables. Each key is declared once in
:data:`SCHEMA` with its kind, unit dimension, default, allowed range, meaning
and (for design margins) the source of its default; the loader, the error
messages, the ``--json`` echo and the documentation all derive from that
declaration. Physical values are quantity strings ("3.5 GHz", "120 km/h",
"2.3 us", "50 Mbit/s", "18 dB"); plain numbers are only accepted for
dimensionless keys.

Loaded values live in frozen dataclasses whose field names carry the SI unit
suffix (``carrier`` -> ``carrier_hz``). Nothing here computes physics; that
is ``environment``'s job.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import numbers
import os
import tomllib
from dataclasses import dataclass, field, make_dataclass
from pathlib import Path
from typing import Any

from . import budget
from .errors import InputError, file_path, read_text
from .units import BARE_NUMBER_RULE, UnitSpellingError, parse_db, parse_either, parse_quantity, show_si

SUFFIX = {"frequency": "_hz", "time": "_s", "speed": "_mps", "length": "_m", "bitrate": "_bps", "db": "_db", "ratio": ""}

DOPPLER_SPECTRA = ("classical", "flat", "rician", "tracked")
OBJECTIVES = ("throughput", "robustness", "overhead", "latency")
ESTIMATORS = ("lmmse", "linear")
SPACING_FAMILIES = ("auto", "scalable", "range", "list")
FFT_FAMILIES = ("powers_of_two", "smooth")
PILOT_PATTERNS = ("rectangular", "staggered")
PILOT_SCOPES = ("slot", "stream", "packet")
EFFICIENCY_MODELS = ("table", "shannon")
GUARD_RULES = ("energy", "coverage")


@dataclass(frozen=True)
class Key:
    """Declaration of one requirement key.

    ``kind`` is one of ``quantity`` (with ``dimension``), ``db``, ``number``,
    ``integer``, ``choice`` (with ``choices``), ``path``, ``mask`` (phase-noise
    points), ``offset`` (a frequency or a ppm ratio of the carrier),
    ``quantity_list``, ``integer_list``, ``choice_list``.
    """

    section: str
    name: str
    kind: str
    meaning: str
    dimension: str = "ratio"
    default: Any = None
    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    choices: tuple = ()
    source: str = ""
    high_open: bool = False

    @property
    def field(self) -> str:
        if self.kind in ("quantity", "quantity_list"):
            return self.name + SUFFIX[self.dimension]
        if self.kind == "db":
            return self.name + "_db"
        if self.kind == "offset":
            return self.name + "_hz"
        return self.name

    @property
    def path(self) -> str:
        return f"{self.section}.{self.name}"


def _q(section, name, dimension, meaning, default=None, low=0.0, high=math.inf, low_open=True, source=""):
    return Key(section, name, "quantity", meaning, dimension, default, low, high, low_open, source=source)


#: Every key a requirement file may hold. Bounds reject non-physical and
#: absurd values; they are wide on purpose (acoustic modems and mmWave links
#: are both legitimate).
SCHEMA: tuple[Key, ...] = (
    # --- environment: the worst channel the link must survive -------------
    _q("environment", "carrier", "frequency", "carrier (centre) frequency", high=1e12),
    _q("environment", "max_speed", "speed", "largest relative speed between the two ends (both may move)",
       low_open=False, high=2e4),
    _q("environment", "max_doppler", "frequency", "largest Doppler shift, given directly instead of max_speed",
       low_open=False, high=1e7),
    _q("environment", "propagation_speed", "speed", "speed of the wave: light for radio, about 1500 m/s in sea water",
       default=299_792_458.0, low=1.0, high=3.0e8,
       source="the speed of light in vacuum, exact by the SI definition of the metre"),
    _q("environment", "max_excess_delay", "time", "longest echo that still matters, after the first arrival",
       low_open=False, high=1.0),
    _q("environment", "rms_delay_spread", "time", "rms delay spread (also scales a normalised profile)",
       low_open=False, high=1.0),
    Key("environment", "profile", "choice", "a tapped-delay-line profile from the built-in catalogue (numerology profiles)"),
    Key("environment", "profile_file", "path", "a CSV of taps: delay and relative power in dB (a measured profile)"),
    Key("environment", "doppler_spectrum", "choice", "shape of the Doppler spectrum", default="classical",
        choices=DOPPLER_SPECTRA, source="Clarke 1968; Jakes 1974: scattering from all directions around a moving "
                                        "terminal (the classical spectrum)"),
    Key("environment", "k_factor", "db", "Rician K-factor (line of sight over scattered power)", default=None,
        low=-40.0, high=60.0),
    # --- radio: what the hardware and the licence allow --------------------
    _q("radio", "bandwidth", "frequency", "channel bandwidth", high=1e11),
    Key("radio", "occupancy", "number", "usable fraction of the bandwidth (the rest is guard band)", default=0.9,
        low=0.0, high=1.0, low_open=True, source="common practice: LTE's 10 MHz channel carries 600 subcarriers of "
                                                 "15 kHz, 9 MHz (3GPP TS 36.104 Table 5.6-1)"),
    Key("radio", "snr", "db", "signal-to-noise ratio at the edge of coverage", low=-30.0, high=80.0),
    _q("radio", "oscillator_linewidth", "frequency", "3-dB linewidth of the oscillator (Wiener phase noise)",
       default=0.0, low_open=False, high=1e8,
       source="none stated: no phase noise is counted (give the oscillator's linewidth or mask)"),
    Key("radio", "phase_noise", "mask", "phase-noise mask: a list of [offset, level] pairs such as [\"10 kHz\", \"-90 dBc/Hz\"]"),
    Key("radio", "frequency_error", "offset", "residual carrier-frequency error after synchronisation (\"0.1 ppm\" or \"40 Hz\")",
        default=0.0, low=0.0, high=1e7, source="none stated: a perfect frequency lock is assumed"),
    _q("radio", "sample_clock", "frequency", "base clock the sample rate must be derived from (integer multiple or divisor)",
       high=1e12),
    # --- goals -------------------------------------------------------------
    _q("goals", "throughput", "bitrate", "net throughput needed at the edge of coverage", default=0.0,
       low_open=False, high=1e13, source="none stated: no throughput goal"),
    _q("goals", "max_latency", "time", "longest acceptable slot (the air-interface scheduling unit)", high=100.0),
    Key("goals", "max_overhead", "number", "largest fraction of resources spent on cyclic prefix and pilots",
        default=0.3, low=0.0, high=1.0, low_open=True,
        source="common practice: LTE and NR spend roughly 15 to 25 % on cyclic prefix and reference signals"),
    Key("goals", "objective", "choice", "how feasible designs are ranked", default="throughput", choices=OBJECTIVES),
    # --- rules: design margins, each with its default's source ---------------
    _q("rules", "cp_allowance", "time",
       "time added to the max excess delay for timing error and filter transients (default: 4 sample periods at the bandwidth)",
       low_open=False, high=1.0,
       source="common practice: transmit and receive filter transients of a few samples plus about one sample of timing error"),
    Key("rules", "guard_rule", "choice", "how the cyclic prefix is judged: the interference of the echoes beyond it "
        "(energy) or covering the max excess delay (coverage, stricter)", default="energy", choices=GUARD_RULES,
        source="common practice: guard intervals are sized by the interference of what lies beyond them (LTE's "
               "4.69 us prefix against ETU's 5 us tap, 3GPP TS 36.101 Annex B; EBU TR 024 sect. 2.4)"),
    Key("rules", "max_echo_interference", "db", "largest interference of echoes beyond the cyclic prefix (less the "
        "allowance) relative to the useful signal", default=-25.0, low=-100.0, high=0.0,
        source="common practice: the same self-interference budget as max_doppler_ici"),
    Key("rules", "max_doppler_ici", "db", "largest Doppler inter-carrier interference relative to the signal",
        default=-25.0, low=-100.0, high=0.0,
        source="common practice: keep self-interference about 25 dB below the signal so that 64-QAM is not floor-limited"),
    Key("rules", "max_oscillator_ici", "db", "largest phase-noise plus frequency-offset interference relative to the signal",
        default=-25.0, low=-100.0, high=0.0, source="common practice, as max_doppler_ici"),
    Key("rules", "pilot_oversampling", "number", "pilot lattice density over the 2-D sampling-theorem minimum, in each direction",
        default=1.0, low=1.0, high=100.0,
        source="Hoeher, Kaiser & Robertson, ICASSP 1997: 1 is the 2-D sampling theorem itself, the hard limit; "
               "beyond it the estimation error in the SINR budget decides (DVB-T's pattern samples a 200 us echo "
               "only 1.5 times over, yet estimates to about -25 dB)"),
    Key("rules", "flat_fading_factor", "number", "subcarrier spacing at most the coherence bandwidth divided by this",
        default=1.0, low=0.01, high=1000.0,
        source="common practice: neighbouring subcarriers fade together (correlation at least coherence_correlation)"),
    Key("rules", "quasi_static_factor", "number", "symbol duration at most the coherence time divided by this",
        default=5.0, low=0.01, high=1000.0,
        source="common practice (factors of 5 to 10 are in use): the channel is nearly static over a symbol"),
    Key("rules", "coherence_correlation", "number", "correlation level that defines coherence time and bandwidth",
        default=0.5, low=0.0, high=1.0, low_open=True, high_open=True,
        source="Rappaport, Wireless Communications 2nd ed., sect. 5.4 (0.5 and 0.9 in use)"),
    Key("rules", "delay_threshold", "db", "taps weaker than this (below the strongest) do not set the max excess delay",
        default=30.0, low=1.0, high=100.0, source="common practice; ITU-R P.1407 thresholds"),
    Key("rules", "estimator", "choice", "channel estimator the receiver uses (LMMSE over every usable pilot, or "
        "least squares with linear interpolation)", default="lmmse", choices=ESTIMATORS,
        source="Hoeher, Kaiser & Robertson, ICASSP 1997: the 2-D Wiener (LMMSE) filter, the best linear estimate "
               "(Kay, Estimation Theory, ch. 12)"),
    Key("rules", "estimation_lookahead", "integer",
        "symbols after a data symbol whose pilots the receiver still uses (stream and packet pilots; "
        "a slot is decoded whole)", default=3, low=0, high=62,
        source="common practice: broadcast receivers interpolate in time with a delay of about 3 symbols "
               "(the period of the DVB-T pilot pattern, ETSI EN 300 744 sect. 4.5.3)"),
    Key("rules", "estimation_memory", "integer",
        "symbols before a data symbol whose pilots the receiver still uses (stream pilots)", default=7, low=0,
        high=1000, source="common practice: channel smoothing over about one slot of past pilots"),
    Key("rules", "efficiency_model", "choice", "spectral efficiency from a modulation-and-coding table or a Shannon gap",
        default="table", choices=EFFICIENCY_MODELS,
        source="common practice: link adaptation picks the best entry of the receiver's modulation-and-coding table"),
    Key("rules", "shannon_gap", "db", "gap to capacity for the Shannon-gap model", default=3.0, low=0.0, high=20.0,
        source="common practice for modern LDPC/turbo codes at moderate block lengths"),
    Key("rules", "mcs_table", "path", "CSV of modulation-and-coding entries (name,bits_per_symbol,code_rate,required_sinr [dB])",
        source="none given: the built-in table (IEEE Std 802.11-2016 Table 17-4 rates plus 256-QAM 3/4 and 5/6, "
               "thresholds derived with a 5 dB gap to capacity; numerology.mcs)"),
    # --- search: the candidate space ----------------------------------------
    Key("search", "spacing_family", "choice", "how subcarrier spacings are drawn: auto is the scalable family when "
        "one of its spacings lies in the window of spacings the rules allow, else the finer lattice "
        "spacing_base x 2^(k/16) within the window (at most spacing_steps of them)", default="auto",
        choices=SPACING_FAMILIES),
    _q("search", "spacing_base", "frequency", "base of the scalable family base x 2^mu (and of the auto family's lattice)",
       default=15e3, high=1e10),
    Key("search", "spacing_exponents", "integer_list", "[lowest, highest] mu of the scalable family", default=(-4, 6),
        low=-20, high=20),
    _q("search", "spacing_min", "frequency", "lowest spacing of a free range", high=1e10),
    _q("search", "spacing_max", "frequency", "highest spacing of a free range", high=1e10),
    Key("search", "spacing_steps", "integer", "number of log-spaced spacings in a free range (at most, in the auto "
        "family's lattice)", default=64,
        low=2, high=100_000),
    Key("search", "spacings", "quantity_list", "explicit list of spacings", dimension="frequency", low=0.0, low_open=True,
        high=1e10),
    Key("search", "fft_sizes", "choice", "FFT sizes: powers of two, or 2^a 3^b 5^c", default="powers_of_two",
        choices=FFT_FAMILIES),
    Key("search", "min_fft_size", "integer", "smallest FFT size", default=64, low=8, high=2**22),
    Key("search", "max_fft_size", "integer", "largest FFT size", default=32768, low=8, high=2**22),
    Key("search", "pilot_scopes", "choice_list", "pilot arrangements to try: per-slot reference signals, "
        "broadcast (stream) pilots, packet training symbols", default=("slot", "stream"), choices=PILOT_SCOPES),
    Key("search", "pilot_patterns", "choice_list", "comb shapes to try (staggered: the comb moves between "
        "pilot-bearing symbols)", default=PILOT_PATTERNS, choices=PILOT_PATTERNS),
    Key("search", "pilot_symbols_per_slot", "integer_list",
        "pilot-bearing symbols per slot to try, spread evenly (slot pilots)", default=(1, 2, 3, 4), low=1, high=62),
    Key("search", "max_pilot_freq_spacing", "integer", "largest pilot spacing in subcarriers", default=48, low=1, high=4096),
    Key("search", "max_pilot_time_spacing", "integer", "largest pilot spacing in symbols", default=32, low=1, high=4096),
    Key("search", "symbols_per_slot", "integer_list", "slot lengths in symbols to try", default=(7, 14), low=1,
        high=10_000),
)

SECTIONS = ("environment", "radio", "goals", "rules", "search")
_BY_SECTION = {s: {k.name: k for k in SCHEMA if k.section == s} for s in SECTIONS}


def key(dotted_key: str) -> Key:
    """The declaration of a requirement key such as ``"goals.max_latency"``."""
    section, _, name = str(dotted_key).partition(".")
    declared = _BY_SECTION.get(section, {}).get(name)
    if declared is None:
        known = [k.path for k in SCHEMA]
        raise InputError("key", f"unknown requirement key {dotted_key!r}{_did_you_mean(dotted_key, known)}; "
                                "expected a dotted key such as 'goals.max_latency'")
    return declared


def _section_class(section: str):
    fields = [(k.field, Any, field(default=None)) for k in _BY_SECTION[section].values()]
    return make_dataclass(section.capitalize() + "Requirements", fields, frozen=True)


EnvironmentRequirements = _section_class("environment")
RadioRequirements = _section_class("radio")
GoalRequirements = _section_class("goals")
RuleSettings = _section_class("rules")
SearchSpace = _section_class("search")
_CLASSES = dict(zip(SECTIONS, (EnvironmentRequirements, RadioRequirements, GoalRequirements, RuleSettings, SearchSpace)))


@dataclass(frozen=True)
class Requirements:
    """A requirement file, read into SI (see :data:`SCHEMA`)."""

    environment: Any
    radio: Any
    goals: Any
    rules: Any
    search: Any
    path: str = "<memory>"
    given: tuple = ()  # the dotted keys the user wrote, as (key, text) pairs, for echoing back
    files: tuple = ()  # (path, content) of the files the requirement names, each read once when it is loaded

    def attached(self, path: str, read):
        """The content of a file the requirement names (read when the requirement was loaded).

        Every part of a run sees the same content, however long the run and whatever happens to the
        file meanwhile; a path not read at load time (a what-if's) is read now with ``read(path)``.
        """
        for known, content in self.files:
            if known == path:
                return content
        return read(path)

    def replace(self, dotted_key: str, value) -> "Requirements":
        """A copy with one key set to an SI value (used for what-ifs and relaxations)."""
        declared = key(dotted_key)
        table = dataclasses.replace(getattr(self, declared.section), **{declared.field: value})
        return dataclasses.replace(self, **{declared.section: table})

    def value(self, dotted_key: str):
        """The SI value of a key (its default when the file left it out)."""
        declared = key(dotted_key)
        return getattr(getattr(self, declared.section), declared.field)


# --- parsing -------------------------------------------------------------------


def _check_range(key: Key, value: float, place: str, text) -> float:
    low_ok = value > key.low if key.low_open else value >= key.low
    high_ok = value < key.high if key.high_open else value <= key.high
    if not (low_ok and high_ok):  # written so that NaN fails too
        lo = "above" if key.low_open else "at least"
        hi = "below" if key.high_open else "at most"
        read = f" (read as {show_si(value, key.dimension)})" if isinstance(text, str) and key.kind != "db" else ""
        raise InputError(place, f"{text!r}{read} is out of range: expected {lo} {_show(key, key.low)} and {hi} "
                                f"{_show(key, key.high)}")
    return value


def _show(key: Key, si: float) -> str:
    if math.isinf(si):
        return "inf"
    unit = {"frequency": "Hz", "time": "s", "speed": "m/s", "length": "m", "bitrate": "bit/s"}.get(key.dimension, "")
    if key.kind == "db":
        unit = "dB"
    if key.kind == "offset":
        unit = "Hz"
    return f"{si:g} {unit}".strip()


def _parse_value(key: Key, raw, place: str, base_dir: Path):
    kind = key.kind
    budget.check_list(key.path, raw, place)
    if kind == "quantity":
        return _check_range(key, parse_quantity(raw, key.dimension, place), place, raw)
    if kind == "db":
        return _check_range(key, parse_db(raw, place), place, raw)
    if kind == "number":
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            raise InputError(place, f"expected a plain number, got {raw!r}")
        return _check_range(key, float(raw), place, raw)
    if kind == "integer":
        if isinstance(raw, bool) or not isinstance(raw, int):
            raise InputError(place, f"expected a whole number, got {raw!r}")
        return int(_check_range(key, raw, place, raw))
    if kind == "choice":
        if not isinstance(raw, str):
            raise InputError(place, f"expected a name in quotes, got {raw!r}")
        choices = key.choices or _profile_names()
        match = {c.lower(): c for c in choices}.get(raw.strip().lower())
        if match is None:
            raise InputError(place, f"unknown value {raw!r}{_did_you_mean(raw, choices)}; expected one of: {', '.join(choices)}")
        return match
    if kind == "choice_list":
        if not isinstance(raw, list) or not raw:
            raise InputError(place, f"expected a non-empty list such as {list(key.choices)!r}, got {raw!r}")
        return tuple(_parse_value(Key(key.section, key.name, "choice", "", choices=key.choices), r, place, base_dir)
                     for r in raw)
    if kind == "integer_list":
        if not isinstance(raw, list) or not raw or any(isinstance(r, bool) or not isinstance(r, int) for r in raw):
            raise InputError(place, f"expected a non-empty list of whole numbers, got {raw!r}")
        return tuple(int(_check_range(key, r, place, r)) for r in raw)
    if kind == "quantity_list":
        if not isinstance(raw, list) or not raw:
            raise InputError(place, f"expected a non-empty list of quantities such as [\"15 kHz\", \"30 kHz\"], got {raw!r}")
        return tuple(_check_range(key, parse_quantity(r, key.dimension, place), place, r) for r in raw)
    if kind == "path":
        if not isinstance(raw, str) or not raw.strip():
            raise InputError(place, f"expected a file name in quotes, got {raw!r}")
        try:
            path = (base_dir / raw).resolve()
            found = path.is_file()
        except RuntimeError:  # Python < 3.13 reports a loop of symbolic links so
            raise InputError(place, f"{raw!r} is a loop of symbolic links") from None
        except (OSError, ValueError) as exc:  # a name too long for the system, with a NUL byte, a link loop
            raise InputError(place, f"expected a usable file name, got {raw!r} "
                                    f"({getattr(exc, 'strerror', None) or exc})") from None
        if not found:
            raise InputError(place, f"file {raw!r} not found (looked in {path.parent})")
        return str(path)
    if kind == "offset":
        value = _parse_offset(raw, place)
        if value[0] == "hz":
            _check_range(key, value[1], place, raw)
        return value
    if kind == "mask":
        return _parse_mask(raw, place)
    raise AssertionError(kind)  # pragma: no cover - schema error


def _parse_offset(raw, place):
    """A frequency ("40 Hz") or a ratio of the carrier ("0.1 ppm"); returned as ("hz"|"ratio", value)."""
    kind, value = "ratio", math.nan
    expected = "expected a non-negative frequency error such as \"40 Hz\" or \"0.1 ppm\""
    if isinstance(raw, str):
        try:
            float(raw)
        except ValueError:
            pass
        else:
            raise InputError(place, f"{expected}, got the bare number {raw!r}; {BARE_NUMBER_RULE}")
        try:
            dimension, value = parse_either(raw, ("frequency", "ratio"), place)
            kind = "hz" if dimension == "frequency" else "ratio"
        except UnitSpellingError:
            raise  # its advice on what to write is more useful than the generic line
        except InputError:
            pass
    elif isinstance(raw, (int, float)) and not isinstance(raw, bool):
        raise InputError(place, f"{expected}, got the bare number {raw!r}; {BARE_NUMBER_RULE}")
    if not (value >= 0) or math.isinf(value) or (kind == "ratio" and value > 1e-3):
        raise InputError(place, f"{expected}, got {raw!r}")
    return (kind, value)


def _parse_mask(raw, place):
    if not isinstance(raw, list) or len(raw) < 2:
        raise InputError(place, "expected at least two [offset, level] pairs such as [[\"1 kHz\", \"-80 dBc/Hz\"], [\"100 kHz\", \"-110 dBc/Hz\"]]")
    offsets, levels = [], []
    for i, pair in enumerate(raw):
        where = f"{place}[{i}]"
        if not isinstance(pair, list) or len(pair) != 2:
            raise InputError(where, f"expected an [offset, level] pair such as [\"10 kHz\", \"-90 dBc/Hz\"], got {pair!r}")
        offset = parse_quantity(pair[0], "frequency", where)
        level = parse_db(pair[1], where)
        if not offset > 0 or not -250 <= level <= 0:
            raise InputError(where, f"expected a positive offset and a level between -250 and 0 dBc/Hz, got {pair!r}")
        offsets.append(offset)
        levels.append(level)
    if any(b <= a for a, b in zip(offsets, offsets[1:])):
        raise InputError(place, "offsets must increase from one pair to the next")
    return (tuple(offsets), tuple(levels))


def _profile_names():
    from .profiles import CATALOGUE

    return tuple(CATALOGUE)


def _did_you_mean(word: str, options) -> str:
    close = difflib.get_close_matches(str(word), list(options), n=1, cutoff=0.5)
    if not close:
        close = difflib.get_close_matches(str(word).lower(), [o.lower() for o in options], n=1, cutoff=0.5)
    return f" (did you mean {close[0]!r}?)" if close else ""


def read_toml(path: str | Path, expected: str = "a TOML file", kind: str = "requirements") -> dict:
    """Read a TOML file; any failure becomes one :class:`InputError` line (``expected`` names the kind of file,
    ``kind`` its size budget in :data:`numerology.budget.MAX_FILE_BYTES`)."""
    text = read_text(path, expected, kind)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(str(path), f"is not valid TOML ({exc})") from None
    except RecursionError:  # tables or arrays nested hundreds deep
        raise InputError(str(path), "is not valid TOML for numerology (nested too deeply)") from None


def load_requirements(path: str | Path) -> Requirements:
    """Read and check a requirement file.

    Parameters
    ----------
    path : str or Path
        The TOML file. It is only read, never written.

    Returns
    -------
    Requirements
        Every value in SI; defaults filled in.

    Raises
    ------
    InputError
        For any problem, naming the file and the key path.
    """
    path = file_path(path)
    return requirements_from_mapping(read_toml(path), str(path), path.parent)


def requirements_from_mapping(data: dict, where: str = "<memory>", base_dir: Path | str = ".") -> Requirements:
    """Check a parsed TOML mapping and convert it to :class:`Requirements`.

    Raises
    ------
    InputError
        For anything that is not a mapping of the five tables with valid keys and values.
    """
    where = str(where)
    if not isinstance(data, dict):
        raise InputError(where, f"expected a mapping of tables such as {{'environment': {{...}}}}, "
                                f"got {type(data).__name__}")
    if not isinstance(base_dir, (str, os.PathLike)):
        raise InputError("base_dir", f"expected a folder name, got {base_dir!r}")
    base_dir = Path(base_dir)
    for section in data:
        if not isinstance(section, str) or section not in SECTIONS:
            raise InputError(f"{where}: [{_printable(section)}]",
                             f"unknown table{_did_you_mean(section, SECTIONS)}; expected one of: {', '.join(SECTIONS)}")
        if not isinstance(data[section], dict):
            raise InputError(f"{where}: {section}", f"expected a table [{section}], got a value")
    tables = {}
    given = []
    for section in SECTIONS:
        raw_table = data.get(section, {})
        keys = _BY_SECTION[section]
        for name in raw_table:
            if name not in keys:
                raise InputError(f"{where}: {section}.{_printable(name)}",
                                 f"unknown key{_did_you_mean(name, keys)}; expected one of: {', '.join(keys)}")
        values = {}
        for name, key in keys.items():
            place = f"{where}: {section}.{name}"
            if name in raw_table:
                values[key.field] = _parse_value(key, raw_table[name], place, base_dir)
                given.append((key.path, _echo(raw_table[name])))
            else:
                values[key.field] = key.default
            if key.kind == "offset" and isinstance(values[key.field], tuple):
                values[key.field] = _offset_to_hz(values[key.field], tables["environment"].carrier_hz, place)
        tables[section] = _CLASSES[section](**values)
    req = Requirements(**tables, path=where, given=tuple(given))
    _check_consistency(req, where)
    return dataclasses.replace(req, files=_named_files(req))


def _named_files(req: Requirements) -> tuple:
    """The profile and the MCS table a requirement names, read once (and checked now, before any work)."""
    from .mcs import load_mcs_table
    from .profiles import load_profile_csv

    files = []
    if req.environment.profile_file is not None:
        files.append((req.environment.profile_file, load_profile_csv(req.environment.profile_file)))
    if req.rules.mcs_table is not None:
        files.append((req.rules.mcs_table, load_mcs_table(req.rules.mcs_table)))
    return tuple(files)


def _printable(name) -> str:
    """A key name as written, or quoted with escapes if it holds a line break or other control character
    (or is not text at all: a mapping built in Python may have any keys)."""
    return name if isinstance(name, str) and name.isprintable() else repr(name)


def _echo(raw) -> str:
    return raw if isinstance(raw, str) else repr(raw)


def _check_consistency(req: Requirements, where: str) -> None:
    env, radio, search = req.environment, req.radio, req.search
    if env.carrier_hz is None:
        raise InputError(f"{where}: environment.carrier", "missing; expected a carrier frequency such as \"3.5 GHz\"")
    if (env.max_speed_mps is None) == (env.max_doppler_hz is None):
        what = "both are given; keep one" if env.max_speed_mps is not None else "neither is given"
        raise InputError(f"{where}: environment.max_speed",
                         f"{what}: expected either max_speed (\"120 km/h\") or max_doppler (\"400 Hz\")")
    delay_keys = [env.max_excess_delay_s, env.rms_delay_spread_s, env.profile, env.profile_file]
    if all(v is None for v in delay_keys):
        raise InputError(f"{where}: environment",
                         "no delay given: expected max_excess_delay and/or rms_delay_spread, or profile, or profile_file")
    if env.profile is not None and env.profile_file is not None:
        raise InputError(f"{where}: environment.profile_file", "both profile and profile_file are given; keep one")
    if env.profile is not None or env.profile_file is not None:
        if env.max_excess_delay_s is not None:
            raise InputError(f"{where}: environment.max_excess_delay",
                             "a profile already fixes the max excess delay; remove this key (scale with rms_delay_spread)")
    if env.max_excess_delay_s is not None and env.rms_delay_spread_s is not None:
        if not env.rms_delay_spread_s <= env.max_excess_delay_s / 2:
            raise InputError(f"{where}: environment.rms_delay_spread",
                             "an rms delay spread above half the max excess delay is impossible for any profile")
    if env.doppler_spectrum in ("rician", "tracked") and env.k_factor_db is None:
        raise InputError(f"{where}: environment.k_factor",
                         f"missing; the {env.doppler_spectrum} Doppler spectrum needs a K-factor such as \"6 dB\"")
    if radio.bandwidth_hz is None:
        raise InputError(f"{where}: radio.bandwidth", "missing; expected a channel bandwidth such as \"20 MHz\"")
    if radio.snr_db is None:
        raise InputError(f"{where}: radio.snr", "missing; expected the SNR at the edge of coverage such as \"18 dB\"")
    if radio.bandwidth_hz >= 2 * env.carrier_hz:
        raise InputError(f"{where}: radio.bandwidth", "is wider than twice the carrier; check that the carrier is not the sample rate")
    if radio.oscillator_linewidth_hz and radio.phase_noise is not None:
        raise InputError(f"{where}: radio.phase_noise", "both oscillator_linewidth and phase_noise are given; keep one")
    if search.spacing_family == "range" and (search.spacing_min_hz is None or search.spacing_max_hz is None
                                             or not search.spacing_min_hz < search.spacing_max_hz):
        raise InputError(f"{where}: search.spacing_min",
                         "the range family needs spacing_min < spacing_max, such as \"1 kHz\" and \"240 kHz\"")
    if search.spacing_family == "list" and search.spacings_hz is None:
        raise InputError(f"{where}: search.spacings", "the list family needs spacings = [\"15 kHz\", ...]")
    if search.spacing_family in ("scalable", "auto"):
        exps = search.spacing_exponents
        if len(exps) != 2 or exps[0] > exps[1]:
            raise InputError(f"{where}: search.spacing_exponents", f"expected [lowest, highest] such as [-4, 6], got {list(exps)}")
    if not search.min_fft_size <= search.max_fft_size:
        raise InputError(f"{where}: search.min_fft_size", "must not exceed max_fft_size")


def checked(req) -> Requirements:
    """``req`` itself if it is a :class:`Requirements` whose every value lies in its declared range.

    For the edge of the API: values set with :meth:`Requirements.replace` (a zero bandwidth, a
    negative speed, text where a number belongs) are refused as the file reader would refuse them.

    Raises
    ------
    InputError
        Naming the key and what was expected.
    """
    if not isinstance(req, Requirements):
        raise InputError("requirements", f"expected the Requirements that numerology.api.load returns, "
                                         f"got {type(req).__name__}")
    for declared in SCHEMA:
        value = getattr(getattr(req, declared.section), declared.field)
        if value is not None:
            _check_si(declared, value, f"{req.path}: {declared.path}")
    _check_consistency(req, req.path)
    return req


def _check_si(declared: Key, value, place: str) -> None:
    """One loaded (SI) value against its declaration."""
    def real(x):
        if isinstance(x, bool) or not isinstance(x, numbers.Real):
            raise InputError(place, f"expected a number in SI units, got {x!r}")
        return _check_range(declared, float(x), place, x)

    kind = declared.kind
    if kind in ("quantity", "db", "number", "offset"):
        real(value)
    elif kind == "integer":
        if not isinstance(value, numbers.Integral) or isinstance(value, bool):
            raise InputError(place, f"expected a whole number, got {value!r}")
        real(value)
    elif kind in ("integer_list", "quantity_list", "choice_list"):
        if not isinstance(value, (tuple, list)) or not value:
            raise InputError(place, f"expected a non-empty tuple, got {value!r}")
        for item in value:
            _check_si(Key(declared.section, declared.name, kind.removesuffix("_list"), "", declared.dimension,
                          None, declared.low, declared.high, declared.low_open, declared.choices,
                          high_open=declared.high_open), item, place)
    elif kind == "choice":
        if value not in (declared.choices or _profile_names()):
            raise InputError(place, f"unknown value {value!r}; expected one of: "
                                    f"{', '.join(declared.choices or _profile_names())}")
    elif kind == "path":
        if not isinstance(value, str):
            raise InputError(place, f"expected a file name, got {value!r}")
    elif kind == "mask":
        if not (isinstance(value, tuple) and len(value) == 2 and len(value[0]) == len(value[1]) >= 2):
            raise InputError(place, f"expected (offsets in Hz, levels in dBc/Hz), got {value!r}")


def _offset_to_hz(parsed, carrier_hz, place) -> float:
    """A frequency error in Hz; a ppm value is taken of the carrier."""
    kind, value = parsed
    if kind == "hz":
        return value
    if carrier_hz is None:
        raise InputError(place, "a relative error (ppm) needs environment.carrier")
    return value * carrier_hz


def _default_text(key: Key) -> str:
    d = key.default
    if d is None:
        return "-"
    if isinstance(d, tuple):
        return "[" + ", ".join(str(x) for x in d) + "]"
    if key.kind == "quantity":
        unit = {"speed": "m/s", "frequency": "Hz", "time": "s", "bitrate": "bit/s"}[key.dimension]
        return f"{d:g} {unit}"
    if key.kind == "db":
        return f"{d:g} dB"
    if key.kind == "offset":
        return f"{d:g} Hz"
    return str(d)


def reference_markdown() -> str:
    """The table of every requirement key (README's reference is generated from this)."""
    lines = []
    for section in SECTIONS:
        lines += ["", f"**[{section}]**", "", "| key | meaning | default | source of the default |", "|---|---|---|---|"]
        for key in _BY_SECTION[section].values():
            choices = f" ({' / '.join(key.choices)})" if key.choices else ""
            lines.append(f"| `{key.name}` | {key.meaning}{choices} | {_default_text(key)} | {key.source} |")
    return "\n".join(lines).strip() + "\n"
