"""Modulation and coding: bits per resource element as a function of SINR.

A table of modulation and coding entries, each with the SINR it needs, turns
an SINR into a spectral efficiency per resource element (link adaptation
picks the best entry that works). :func:`shannon_gap_efficiency` is the
smooth counterpart.

Where the default thresholds come from
--------------------------------------
The modulation and code-rate set is that of IEEE 802.11a/g (BPSK 1/2 ...
64-QAM 3/4; IEEE Std 802.11-2016 Table 17-4) extended with 256-QAM 3/4 and
5/6 (the two 256-QAM rates of 802.11ac). The standard specifies receiver
sensitivities, not SINR thresholds, so the thresholds here are **derived**,
not measured: each entry needs the SINR at which a code ``SHANNON_GAP_DB``
short of AWGN capacity delivers its efficiency,

    required_sinr_db = 10 log10(2^(bits x rate) - 1) + SHANNON_GAP_DB.

A gap of 5 dB is common practice (from memory) for a constraint-length-7
convolutional code with soft Viterbi decoding at a bit error ratio near 1e-5,
i.e. roughly 10 % packet errors for 1000-byte packets; an LDPC code sits
closer to capacity. Replace the table with :func:`load_mcs_table` when
measured thresholds for a real receiver are available.

References
----------
.. [1] IEEE Std 802.11-2016, Table 17-4 (modulation-dependent parameters).
.. [2] C. E. Shannon, "A mathematical theory of communication", Bell Syst.
   Tech. J. 27, 1948 (capacity log2(1 + SINR)).
.. [3] G. D. Forney Jr., G. Ungerboeck, "Modulation and coding for linear
   Gaussian channels", IEEE Trans. Inf. Theory 44(6), 1998 (the SNR gap to
   capacity).
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

import numpy as np

from . import budget
from .errors import InputError, file_path, read_text
from .units import parse_db

#: Gap to AWGN capacity assumed for the default table, in dB (common practice, see module docstring).
SHANNON_GAP_DB = 5.0

#: Header of an MCS table CSV file.
CSV_HEADER = ("name", "bits_per_symbol", "code_rate", "required_sinr [dB]")


@dataclass(frozen=True)
class McsEntry:
    """One modulation and coding scheme.

    Parameters
    ----------
    name : str
        E.g. ``"16-QAM 3/4"``.
    bits_per_symbol : int
        Coded bits per resource element (1 for BPSK, 2 for QPSK, ...).
    code_rate : float
        Code rate, in (0, 1].
    required_sinr_db : float
        Lowest SINR at which the entry is used, in dB.
    """

    name: str
    bits_per_symbol: int
    code_rate: float
    required_sinr_db: float

    def __post_init__(self):
        place = f"MCS entry {self.name!r}"
        if isinstance(self.bits_per_symbol, bool) or not isinstance(self.bits_per_symbol, int) \
                or not 1 <= self.bits_per_symbol <= 64:
            raise InputError(f"{place}: bits_per_symbol", f"expected a whole number from 1 to 64, "
                                                          f"got {self.bits_per_symbol!r}")
        if not 0 < self.code_rate <= 1:
            raise InputError(f"{place}: code_rate", f"expected a rate in (0, 1] such as 3/4, got {self.code_rate!r}")
        if not math.isfinite(self.required_sinr_db):
            raise InputError(f"{place}: required_sinr_db", f"expected a finite SINR in dB, "
                                                           f"got {self.required_sinr_db!r}")

    @property
    def efficiency(self) -> float:
        """Information bits per resource element (bit/s/Hz per subcarrier), bits x code rate."""
        return self.bits_per_symbol * self.code_rate


def gap_threshold_db(efficiency, gap_db: float = SHANNON_GAP_DB):
    """SINR at which a code ``gap_db`` short of capacity reaches ``efficiency``.

    Parameters
    ----------
    efficiency : float or array_like
        Bits per resource element.
    gap_db : float
        Gap to AWGN capacity, in dB.

    Returns
    -------
    float or numpy.ndarray
        ``10 log10(2^efficiency - 1) + gap_db``, in dB (the inverse of
        :func:`shannon_gap_efficiency` below its cap).

    References
    ----------
    Forney & Ungerboeck, IEEE Trans. Inf. Theory 44(6), 1998 (SNR gap).

    Examples
    --------
    >>> gap_threshold_db(1.0, gap_db=0.0)  # capacity of 1 bit needs SINR = 1 (0 dB)
    0.0
    """
    result = 10.0 * np.log10(np.exp2(np.asarray(efficiency, dtype=float)) - 1.0) + gap_db  # inverts log2(1 + S/G)
    return float(result) if result.ndim == 0 else result


def _entry(name: str, bits: int, rate: Fraction) -> McsEntry:
    return McsEntry(name, bits, float(rate), gap_threshold_db(bits * float(rate)))


#: 802.11a/g modulation and code rates plus 256-QAM 3/4 and 5/6, thresholds from a
#: SHANNON_GAP_DB gap to capacity (derived, not measured: see the module docstring).
DEFAULT_TABLE: tuple[McsEntry, ...] = (
    _entry("BPSK 1/2", 1, Fraction(1, 2)),
    _entry("BPSK 3/4", 1, Fraction(3, 4)),
    _entry("QPSK 1/2", 2, Fraction(1, 2)),
    _entry("QPSK 3/4", 2, Fraction(3, 4)),
    _entry("16-QAM 1/2", 4, Fraction(1, 2)),
    _entry("16-QAM 3/4", 4, Fraction(3, 4)),
    _entry("64-QAM 2/3", 6, Fraction(2, 3)),
    _entry("64-QAM 3/4", 6, Fraction(3, 4)),
    _entry("256-QAM 3/4", 8, Fraction(3, 4)),
    _entry("256-QAM 5/6", 8, Fraction(5, 6)),
)

#: Highest efficiency of :data:`DEFAULT_TABLE` (256-QAM 5/6), bits per resource element.
DEFAULT_MAX_EFFICIENCY = max(entry.efficiency for entry in DEFAULT_TABLE)


@lru_cache(maxsize=32)
def _ladder(table: tuple[McsEntry, ...]):
    """Thresholds in ascending order and, at each, the index of the best entry usable so far."""
    if not table:
        raise ValueError("an MCS table needs at least one entry")
    thresholds_db = np.array([entry.required_sinr_db for entry in table])
    efficiencies = np.array([entry.efficiency for entry in table])
    order = np.argsort(thresholds_db, kind="stable")
    sorted_eff = efficiencies[order]
    running_max = np.maximum.accumulate(sorted_eff)
    previous_max = np.concatenate(([-np.inf], running_max[:-1]))
    positions = np.arange(len(table))
    # the best entry so far is the first one that reached the running maximum
    best_position = np.maximum.accumulate(np.where(sorted_eff > previous_max, positions, 0))
    return thresholds_db[order], order[best_position], efficiencies


def selected_entry_index(sinr_db, table: tuple[McsEntry, ...] = DEFAULT_TABLE):
    """Index into ``table`` of the best entry whose required SINR is at most ``sinr_db``.

    Parameters
    ----------
    sinr_db : float or array_like
        SINR in dB.
    table : tuple of McsEntry
        Any order; the best (highest efficiency) usable entry is chosen.

    Returns
    -------
    int or numpy.ndarray of int
        -1 where no entry is usable (below the lowest threshold, or NaN).

    Examples
    --------
    >>> selected_entry_index([0.0, 2.0, 20.0])  # -1: below BPSK 1/2 (1.17 dB)
    array([-1,  0,  7])
    >>> DEFAULT_TABLE[7].name
    '64-QAM 3/4'
    """
    thresholds_db, best_index, _ = _ladder(tuple(table))
    sinr = np.asarray(sinr_db, dtype=float)
    position = np.searchsorted(thresholds_db, sinr, side="right") - 1  # last threshold <= sinr
    usable = (position >= 0) & ~np.isnan(sinr)
    index = np.where(usable, best_index[np.clip(position, 0, None)], -1)
    return int(index) if index.ndim == 0 else index


def spectral_efficiency(sinr_db, table: tuple[McsEntry, ...] = DEFAULT_TABLE):
    """Bits per resource element of the best usable entry at ``sinr_db`` (0 below the lowest).

    Parameters
    ----------
    sinr_db : float or array_like
        SINR in dB.
    table : tuple of McsEntry
        The MCS table.

    Returns
    -------
    float or numpy.ndarray
        Information bits per resource element; NaN where ``sinr_db`` is NaN.

    Examples
    --------
    >>> spectral_efficiency(19.0)  # 64-QAM 3/4 needs 18.35 dB with the default 5 dB gap
    4.5
    """
    _, _, efficiencies = _ladder(tuple(table))
    sinr = np.asarray(sinr_db, dtype=float)
    index = np.asarray(selected_entry_index(sinr, table))
    result = np.where(index >= 0, efficiencies[np.clip(index, 0, None)], 0.0)
    result = np.where(np.isnan(sinr), np.nan, result)
    return float(result) if result.ndim == 0 else result


def step_margin_db(sinr_db, table: tuple[McsEntry, ...] = DEFAULT_TABLE):
    """SINR above the threshold of the entry in use (dB): how far the rate is from dropping a step.

    Below the lowest threshold it is the (negative) distance to that threshold.

    Examples
    --------
    >>> round(float(step_margin_db(18.59)), 2)  # 64-QAM 3/4 needs 18.35 dB with the default gap
    0.24
    """
    thresholds_db, _, _ = _ladder(tuple(table))
    required = np.array([entry.required_sinr_db for entry in table])
    sinr = np.asarray(sinr_db, dtype=float)
    index = np.asarray(selected_entry_index(sinr, table))
    margin = np.where(index >= 0, sinr - required[np.clip(index, 0, None)], sinr - thresholds_db[0])
    return float(margin) if margin.ndim == 0 else margin


def required_sinr_for_db(efficiency, table: tuple[McsEntry, ...] = DEFAULT_TABLE):
    """The lowest SINR (dB) at which the table gives at least ``efficiency`` bits per element (inf if none).

    Examples
    --------
    >>> round(float(required_sinr_for_db(4.2)), 2)  # 64-QAM 3/4 (4.5 b) is the first entry with 4.2 b or more
    18.35
    """
    thresholds = np.array([entry.required_sinr_db for entry in table])
    efficiencies = np.array([entry.efficiency for entry in table])
    wanted = np.asarray(efficiency, dtype=float)
    # the entries by efficiency: those giving at least w are a suffix, and its least threshold the answer
    order = np.argsort(efficiencies, kind="stable")
    least = np.concatenate([np.minimum.accumulate(thresholds[order][::-1])[::-1], [np.inf]])
    result = least[np.searchsorted(efficiencies[order], wanted, side="left")]
    return float(result) if result.ndim == 0 else result


def shannon_gap_efficiency(sinr_db, gap_db: float = SHANNON_GAP_DB, max_efficiency: float = DEFAULT_MAX_EFFICIENCY):
    """Capacity with an SNR gap, capped: min(log2(1 + sinr / gap), max_efficiency).

    Parameters
    ----------
    sinr_db : float or array_like
        SINR in dB.
    gap_db : float
        Gap to AWGN capacity in dB (0 gives capacity itself).
    max_efficiency : float
        Cap in bits per resource element (the highest modulation and code rate).

    Returns
    -------
    float or numpy.ndarray
        Bits per resource element.

    References
    ----------
    Shannon (1948); Forney & Ungerboeck, IEEE Trans. Inf. Theory 44(6), 1998.

    Examples
    --------
    >>> shannon_gap_efficiency(0.0, gap_db=0.0, max_efficiency=10.0)  # log2(1 + 1)
    1.0
    """
    sinr = 10.0 ** (np.asarray(sinr_db, dtype=float) / 10.0)
    gap = 10.0 ** (gap_db / 10.0)
    result = np.minimum(np.log2(1.0 + sinr / gap), max_efficiency)  # log2(1 + SINR / Gamma)
    return float(result) if result.ndim == 0 else result


def _parse_rate(text: str, place: str) -> float:
    try:
        rate = Fraction(text.strip())
    except (ValueError, ZeroDivisionError):
        raise InputError(place, f"expected a code rate such as 3/4 or 0.75, got {text!r}") from None
    if not 0 < rate <= 1:
        raise InputError(place, f"expected a code rate in (0, 1] such as 3/4, got {text!r}")
    return float(rate)


def _parse_bits(text: str, place: str) -> int:
    try:
        bits = int(text.strip())
    except ValueError:
        raise InputError(place, f"expected a whole number of bits per symbol such as 4, got {text!r}") from None
    if not 1 <= bits <= 64:
        raise InputError(place, f"expected bits per symbol from 1 to 64, got {text!r}")
    return bits


def _parse_sinr(text: str, place: str) -> float:
    """A bare number is in dB (the column header says so); ``"13.5 dB"`` is accepted too."""
    try:
        value = float(text)
    except ValueError:
        return parse_db(text, place)
    return parse_db(value, place)


def load_mcs_table(path) -> tuple[McsEntry, ...]:
    """Read an MCS table from a CSV file.

    The first line is the header ``name,bits_per_symbol,code_rate,required_sinr [dB]``;
    each further line is one entry, e.g. ``16-QAM 3/4,4,3/4,13.5``. The code
    rate may be a fraction or a decimal; the SINR is in dB (a bare number or
    ``"13.5 dB"``). Blank lines and lines starting with ``#`` are skipped.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file (read only).

    Returns
    -------
    tuple of McsEntry
        In file order.

    Raises
    ------
    InputError
        Naming the file and line for an unreadable file, a wrong header, a bad
        row, a duplicate name, or an empty table.
    """
    path = file_path(path)
    place = str(path)
    text = read_text(path, "a CSV file of modulation-and-coding entries", "mcs")
    budget.check_rows("mcs", sum(1 for x in text.splitlines() if x.strip() and not x.lstrip().startswith("#")) - 1,
                      place)
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    entries: list[McsEntry] = []
    names: set = set()
    header_seen = False
    while True:
        start = reader.line_num + 1  # a quoted cell may span lines: name the line where the row starts
        line = f"{place}: line {start}"
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as error:
            raise InputError(line, f"not valid CSV: {error}") from None
        if not row or all(not cell.strip() for cell in row) or row[0].lstrip().startswith("#"):
            continue
        cells = [cell.strip() for cell in row]
        if not header_seen:
            if tuple(cells) != CSV_HEADER:
                raise InputError(line, f"expected the header {','.join(CSV_HEADER)!r}, got {','.join(cells)!r}")
            header_seen = True
            continue
        if len(cells) != len(CSV_HEADER):
            raise InputError(line, f"expected {len(CSV_HEADER)} columns ({','.join(CSV_HEADER)}), got {len(cells)}")
        name, bits, rate, sinr = cells
        if not name:
            raise InputError(line, "the name is empty")
        if name in names:
            raise InputError(line, f"the name {name!r} appears twice")
        names.add(name)
        entries.append(McsEntry(name, _parse_bits(bits, f"{line}: bits_per_symbol"),
                                _parse_rate(rate, f"{line}: code_rate"),
                                _parse_sinr(sinr, f"{line}: required_sinr")))
    if not entries:
        raise InputError(place, "the MCS table has no entries" if header_seen else
                         f"empty file; expected the header {','.join(CSV_HEADER)!r} and one line per entry")
    return tuple(entries)
