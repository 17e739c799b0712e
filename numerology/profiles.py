"""Catalogue of published tapped-delay-line channel profiles, and a CSV loader for measured ones.

Each profile is declared once, below, with the document and table it comes
from. Delays are in s (or, for the normalised 3GPP TR 38.901 TDL tables, in
units of the rms delay spread; :meth:`Profile.scaled` turns them into
seconds). Powers are in dB relative to the strongest tap, as printed.

The 3GPP TR 38.901 TDL tables were written down from memory and accepted only
because each one's normalised rms spread computes to 1.000 (the check in
tests/test_profiles.py). TDL-D is left out: the table as recalled computes to
0.9937 and could not be checked against the standard (see
tests/reference/tr38901_tdl_d_recalled.csv).
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, replace

import numpy as np

from . import budget, delay
from .errors import InputError, read_text

__all__ = ["Profile", "CATALOGUE", "get_profile", "load_profile_csv"]

_NS = 1e-9


@dataclass(frozen=True)
class Profile:
    """A tapped-delay-line power-delay profile.

    Parameters
    ----------
    name : str
        Short name, e.g. ``"EVA"`` or ``"TDL-C @ 300 ns"``.
    delays_s : tuple of float
        Tap delays in s (in units of the rms spread if ``normalised``), in the
        order the source lists them.
    powers_db : tuple of float
        Tap powers in dB (relative; the scale does not matter). A line-of-sight
        first tap is given by its total power (specular plus diffuse part).
    source : str
        Document and table.
    stated_rms_delay_spread_s : float or None
        The rms spread the source states, in s; None for normalised profiles
        and measured files.
    normalised : bool
        True when the delays are in units of the rms spread and must be scaled.
    los_k_factor_db : float or None
        K-factor in dB of a line-of-sight first tap, None for Rayleigh taps.
    note : str
        Usual Doppler pairings, recorded discrepancies.
    """

    name: str
    delays_s: tuple[float, ...]
    powers_db: tuple[float, ...]
    source: str
    stated_rms_delay_spread_s: float | None = None
    normalised: bool = False
    los_k_factor_db: float | None = None
    note: str = ""

    def __post_init__(self):
        if len(self.delays_s) != len(self.powers_db) or len(self.delays_s) < 1:
            raise ValueError(f"profile {self.name}: need as many delays as powers, at least one")
        if not all(math.isfinite(x) and x >= 0 for x in self.delays_s):
            raise ValueError(f"profile {self.name}: delays must be finite and >= 0")
        if not all(math.isfinite(x) for x in self.powers_db):
            raise ValueError(f"profile {self.name}: powers must be finite")

    @property
    def powers(self) -> np.ndarray:
        """Linear tap powers normalised to sum 1."""
        lin = 10.0 ** (np.asarray(self.powers_db, dtype=float) / 10.0)
        return lin / lin.sum()

    @property
    def rms_delay_spread_s(self) -> float:
        """Rms delay spread computed from the taps, in s (or normalised units)."""
        return delay.rms_delay_spread_s(self.delays_s, self.powers)

    @property
    def mean_excess_delay_s(self) -> float:
        """Mean excess delay computed from the taps, in s (or normalised units)."""
        return delay.mean_excess_delay_s(self.delays_s, self.powers)

    @property
    def max_excess_delay_s(self) -> float:
        """Delay of the last tap within 30 dB of the strongest, from the first tap, in s."""
        return delay.max_excess_delay_s(self.delays_s, self.powers, 30.0)

    @property
    def span_s(self) -> float:
        """Last tap minus first tap, whatever its power, in s (or normalised units)."""
        return max(self.delays_s) - min(self.delays_s)

    def scaled(self, rms_delay_spread_s: float) -> Profile:
        """This profile with its delays scaled to a wanted rms delay spread.

        Parameters
        ----------
        rms_delay_spread_s : float
            Wanted rms delay spread in s (> 0). A normalised profile's delays
            are multiplied by it (3GPP TR 38.901 sect. 7.7.3); another
            profile's delays are stretched so that its computed rms equals it.

        Returns
        -------
        Profile
            Named like ``"TDL-C @ 300 ns"``, not normalised.

        Examples
        --------
        >>> p = get_profile("TDL-C").scaled(300e-9)
        >>> p.name, round(p.rms_delay_spread_s * 1e9, 1)
        ('TDL-C @ 300 ns', 300.0)
        """
        from .units import engineering

        sigma = float(rms_delay_spread_s)
        if not (sigma > 0 and math.isfinite(sigma)):
            raise ValueError(f"rms_delay_spread_s must be finite and > 0, got {rms_delay_spread_s!r}")
        if self.normalised:
            factor = sigma
        else:
            current = self.rms_delay_spread_s
            if current == 0:
                raise ValueError(f"profile {self.name} has no delay spread to scale")
            factor = sigma / current
        return replace(
            self,
            name=f"{self.name} @ {engineering(sigma, 's')}",
            delays_s=tuple(float(d) * factor for d in self.delays_s),
            stated_rms_delay_spread_s=sigma,
            normalised=False,
        )


def _ricean_tap_db(specular_db: float, diffuse_db: float) -> float:
    """Total power in dB of a tap listed as a specular line plus a diffuse part."""
    return 10.0 * math.log10(10.0 ** (specular_db / 10.0) + 10.0 ** (diffuse_db / 10.0))


def _ns(*values):
    return tuple(v * _NS for v in values)


# --- 3GPP TS 36.101 Annex B.2.1 (E-UTRA extended ITU models) -----------------
# Tables B.2.1-2..4 (table numbers from memory; tap values as published in TS 36.101 Annex B.2.1).
_LTE_NOTE = ("classical Doppler on every tap; usual pairings EPA5, EVA5, EVA70, ETU70, ETU300 "
             "(f_D in Hz, TS 36.101 Annex B.2.2)")

_PROFILES = [
    Profile("EPA", _ns(0, 30, 70, 90, 110, 190, 410),
            (0.0, -1.0, -2.0, -3.0, -8.0, -17.2, -20.8),
            "3GPP TS 36.101 Annex B.2.1, Table B.2.1-2 (Extended Pedestrian A)",
            43 * _NS, note=_LTE_NOTE),
    Profile("EVA", _ns(0, 30, 150, 310, 370, 710, 1090, 1730, 2510),
            (0.0, -1.5, -1.4, -3.6, -0.6, -9.1, -7.0, -12.0, -16.9),
            "3GPP TS 36.101 Annex B.2.1, Table B.2.1-3 (Extended Vehicular A)",
            357 * _NS, note=_LTE_NOTE),
    Profile("ETU", _ns(0, 50, 120, 200, 230, 500, 1600, 2300, 5000),
            (-1.0, -1.0, -1.0, 0.0, 0.0, 0.0, -3.0, -5.0, -7.0),
            "3GPP TS 36.101 Annex B.2.1, Table B.2.1-4 (Extended Typical Urban)",
            991 * _NS, note=_LTE_NOTE),
    # --- ITU-R M.1225 (1997) Annex 2, channel A of each test environment ----------
    # Tables 3-5 (table numbers and stated rms values from memory; taps as published in M.1225 Annex 2).
    Profile("ITU-IndoorA", _ns(0, 50, 110, 170, 290, 310),
            (0.0, -3.0, -10.0, -18.0, -26.0, -32.0),
            "ITU-R M.1225 Annex 2, Table 3 (indoor office, channel A)", 35 * _NS,
            note=("stated rms 35 ns is the environment's representative spread; "
                  "the taps give 37.0 ns. Indoor, 3 km/h (M.1225)")),
    Profile("ITU-IndoorB", _ns(0, 100, 200, 300, 500, 700),
            (0.0, -3.6, -7.2, -10.8, -18.0, -25.2),
            "ITU-R M.1225 Annex 2, Table 3 (indoor office, channel B)", 100 * _NS,
            note="indoor, 3 km/h (M.1225)"),
    Profile("ITU-PedA", _ns(0, 110, 190, 410),
            (0.0, -9.7, -19.2, -22.8),
            "ITU-R M.1225 Annex 2, Table 4 (outdoor to indoor and pedestrian, channel A)", 45 * _NS,
            note="pedestrian, 3 km/h (M.1225)"),
    Profile("ITU-PedB", _ns(0, 200, 800, 1200, 2300, 3700),
            (0.0, -0.9, -4.9, -8.0, -7.8, -23.9),
            "ITU-R M.1225 Annex 2, Table 4 (outdoor to indoor and pedestrian, channel B)", 750 * _NS,
            note=("stated rms 750 ns is the environment's representative spread; "
                  "the taps give 633.4 ns. Pedestrian, 3 km/h (M.1225)")),
    Profile("ITU-VehA", _ns(0, 310, 710, 1090, 1730, 2510),
            (0.0, -1.0, -9.0, -10.0, -15.0, -20.0),
            "ITU-R M.1225 Annex 2, Table 5 (vehicular, channel A)", 370 * _NS,
            note="vehicular, 120 km/h (M.1225); copies rounded to 0, 300, 700, 1100, 1700, 2500 ns are wrong"),
    Profile("ITU-VehB", _ns(0, 300, 8900, 12900, 17100, 20000),
            (-2.5, 0.0, -12.8, -10.0, -25.2, -16.0),
            "ITU-R M.1225 Annex 2, Table 5 (vehicular, channel B)", 4000 * _NS,
            note="vehicular, 120 km/h (M.1225)"),
    # --- 3GPP TR 38.901 sect. 7.7.2: TDL models, delays in units of the rms spread ---
    # Tap values from memory; each table's rms computes to 1.000 (tests/test_profiles.py).
    # Scale with Profile.scaled; example spreads 10-1000 ns in Table 7.7.3-1.
    Profile("TDL-A",
            (0.0000, 0.3819, 0.4025, 0.5868, 0.4610, 0.5375, 0.6708, 0.5750, 0.7618, 1.5375, 1.8978,
             2.2242, 2.1718, 2.4942, 2.5119, 3.0582, 4.0810, 4.4579, 4.5695, 4.7966, 5.0066, 5.3043,
             9.6586),
            (-13.4, 0.0, -2.2, -4.0, -6.0, -8.2, -9.9, -10.5, -7.5, -15.9, -6.6, -16.7, -12.4, -15.2,
             -10.8, -11.3, -12.7, -16.2, -18.3, -18.9, -16.6, -19.9, -29.7),
            "3GPP TR 38.901 sect. 7.7.2, Table 7.7.2-1 (TDL-A, NLOS; tap values from memory)",
            normalised=True, note="Rayleigh taps; scale to the wanted rms spread"),
    Profile("TDL-B",
            (0.0000, 0.1072, 0.2155, 0.2095, 0.2870, 0.2986, 0.3752, 0.5055, 0.3681, 0.3697, 0.5700,
             0.5283, 1.1021, 1.2756, 1.5474, 1.7842, 2.0169, 2.8294, 3.0219, 3.6187, 4.1067, 4.2790,
             4.7834),
            (0.0, -2.2, -4.0, -3.2, -9.8, -1.2, -3.4, -5.2, -7.6, -3.0, -8.9, -9.0, -4.8, -5.7, -7.5,
             -1.9, -7.6, -12.2, -9.8, -11.4, -14.9, -9.2, -11.3),
            "3GPP TR 38.901 sect. 7.7.2, Table 7.7.2-2 (TDL-B, NLOS; tap values from memory)",
            normalised=True, note="Rayleigh taps; scale to the wanted rms spread"),
    Profile("TDL-C",
            (0.0, 0.2099, 0.2219, 0.2329, 0.2176, 0.6366, 0.6448, 0.6560, 0.6584, 0.7935, 0.8213,
             0.9336, 1.2285, 1.3083, 2.1704, 2.7105, 4.2589, 4.6003, 5.4902, 5.6077, 6.3065, 6.6374,
             7.0427, 8.6523),
            (-4.4, -1.2, -3.5, -5.2, -2.5, 0.0, -2.2, -3.9, -7.4, -7.1, -10.7, -11.1, -5.1, -6.8, -8.7,
             -13.2, -13.9, -13.9, -15.8, -17.1, -16.0, -15.7, -21.6, -22.8),
            "3GPP TR 38.901 sect. 7.7.2, Table 7.7.2-3 (TDL-C, NLOS; tap values from memory)",
            normalised=True, note="Rayleigh taps; scale to the wanted rms spread"),
    Profile("TDL-E",
            (0.0, 0.5133, 0.5440, 0.5630, 0.5440, 0.7112, 1.9092, 1.9293, 1.9589, 2.6426, 3.7136,
             5.4524, 12.0034, 20.6519),
            # Tap 1 is listed as an LOS line at -0.03 dB plus a Rayleigh part at -22.03 dB (K = 22 dB).
            (_ricean_tap_db(-0.03, -22.03), -15.8, -18.1, -19.8, -22.9, -22.4, -18.6, -20.8, -22.6,
             -22.3, -25.6, -20.2, -29.8, -29.2),
            "3GPP TR 38.901 sect. 7.7.2, Table 7.7.2-5 (TDL-E, LOS; tap values from memory)",
            normalised=True, los_k_factor_db=22.0,
            note=("first tap: line of sight -0.03 dB plus Rayleigh -22.03 dB, stored as their total; "
                  "the printed 0.01-dB split moves the rms by 2.4e-4")),
]

#: Published profiles by the short name users type in requirement files.
CATALOGUE: dict[str, Profile] = {p.name: p for p in _PROFILES}


def get_profile(name: str) -> Profile:
    """A catalogue profile by name, ignoring case.

    Parameters
    ----------
    name : str
        A key of :data:`CATALOGUE`, e.g. ``"eva"`` or ``"TDL-C"``.

    Returns
    -------
    Profile

    Raises
    ------
    ValueError
        For an unknown name, listing the nearest known names.

    Examples
    --------
    >>> get_profile("epa").name
    'EPA'
    """
    by_lower = {key.lower(): key for key in CATALOGUE}
    key = by_lower.get(str(name).strip().lower())
    if key is not None:
        return CATALOGUE[key]
    near = difflib.get_close_matches(str(name).strip().lower(), list(by_lower), n=3, cutoff=0.5)
    hint = f"did you mean {', '.join(by_lower[n] for n in near)}? " if near else ""
    raise ValueError(f"unknown channel profile {name!r}; {hint}known profiles: {', '.join(CATALOGUE)}")


# --- measured profiles from CSV --------------------------------------------------

_HEADER_RE = re.compile(
    r"^\s*delay\s*\[\s*([A-Za-z\u00b5\u03bc]+)\s*\]\s*,\s*power\s*\[\s*dB\s*\]\s*$", re.IGNORECASE)
_HEADER_EXAMPLE = "delay [ns],power [dB]"
_MAX_POWER_DB = 60.0
_MIN_POWER_DB = -200.0
_MAX_DELAY_S = 10.0  # longer than any channel this tool models (underwater echoes last < 1 s)


def load_profile_csv(path) -> Profile:
    """Read a measured power-delay profile from a CSV file of taps.

    The file has a header row ``delay [<time unit>],power [dB]`` (the time unit
    is any pint time unit: s, ms, us, ns ...) and then one ``delay,power`` row
    per tap. Blank lines and lines starting with ``#`` are ignored. Rows are
    sorted by delay.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.

    Returns
    -------
    Profile
        Named after the file, with source ``"measured (file <name>)"``.

    Raises
    ------
    InputError
        Naming ``<path>:<line>`` and what was expected: unreadable file,
        missing header, a row that is not two finite numbers, a negative or
        absurd delay, a power outside -200..+60 dB, duplicate delays, no taps.
    """
    from .errors import file_path
    from .units import parse_quantity

    path = file_path(path)
    text = read_text(path, "a CSV file of taps (delay, power in dB)", "profile")
    factor = None
    rows = []  # (delay_s, power_db, line)
    seen = {}
    lines = text.splitlines()
    budget.check_rows("profile", sum(1 for x in lines if x.strip() and not x.lstrip().startswith("#")) - 1, str(path))
    for number, raw in enumerate(lines, start=1):
        line = raw.strip()
        place = f"{path}:{number}"
        if not line or line.startswith("#"):
            continue
        if factor is None:
            match = _HEADER_RE.match(line)
            if not match:
                raise InputError(place, f"expected a header row such as \"{_HEADER_EXAMPLE}\", got {_clip(line)!r}")
            unit = match.group(1).replace("\u03bc", "u").replace("\u00b5", "u")
            try:
                factor = parse_quantity(f"1 {unit}", "time", place)
            except InputError:
                raise InputError(place, f"the delay unit [{match.group(1)}] is not a time unit such as ns, us, ms or s") from None
            except Exception:
                raise InputError(place, f"could not read the delay unit [{match.group(1)}]") from None
            if not (factor > 0 and math.isfinite(factor)):
                raise InputError(place, f"the delay unit [{match.group(1)}] is not a time unit such as ns, us, ms or s")
            continue
        fields = [f.strip() for f in line.split(",")]
        if len(fields) != 2:
            raise InputError(place, f"expected two columns \"delay,power\", got {len(fields)} in {_clip(line)!r}")
        try:
            delay_value, power_db = float(fields[0]), float(fields[1])
        except ValueError:
            raise InputError(place, f"expected two numbers \"delay,power\", got {_clip(line)!r}") from None
        if not (math.isfinite(delay_value) and math.isfinite(power_db)):
            raise InputError(place, f"expected finite numbers, got {_clip(line)!r}")
        delay_s = delay_value * factor
        if not delay_s >= 0:
            raise InputError(place, f"delay must be >= 0 (measured from the first arrival), got {fields[0]}")
        if not delay_s <= _MAX_DELAY_S:
            raise InputError(place, f"delay {fields[0]} is more than {_MAX_DELAY_S:g} s: check the unit in the header")
        if not _MIN_POWER_DB <= power_db <= _MAX_POWER_DB:
            raise InputError(
                place, f"power {fields[1]} dB is outside {_MIN_POWER_DB:g}..+{_MAX_POWER_DB:g} dB: "
                       "give relative powers in dB, such as 0 for the strongest tap")
        if delay_s in seen:
            raise InputError(place, f"delay {fields[0]} repeats the tap on line {seen[delay_s]}: merge them into one tap")
        seen[delay_s] = number
        rows.append((delay_s, power_db))
    end = f"{path}:{len(lines)}"
    if factor is None:
        raise InputError(end, f"no header row; expected \"{_HEADER_EXAMPLE}\" followed by one row per tap")
    if not rows:
        raise InputError(end, "no taps; expected at least one \"delay,power\" row after the header")
    rows.sort(key=lambda r: r[0])
    return Profile(
        name=path.stem,
        delays_s=tuple(r[0] for r in rows),
        powers_db=tuple(r[1] for r in rows),
        source=f"measured (file {path.name})",
    )


def _clip(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[:limit] + "..."
