"""Published OFDM numerologies, each declared once with its source.

Every preset is a :class:`~numerology.design.Design` plus where it comes from
and the channel bandwidth the standard defines it for. The sample counts are
the standards' own integers. What a standard does not fix (an FFT size for a
given bandwidth) is an explicit modelling choice, stated beside the preset.

Channel bandwidths
------------------
A standard defines its numerology for a set of channel bandwidths (LTE 1.4
to 20 MHz, NR a number of resource blocks per bandwidth and spacing, 802.11
20, 10 and 5 MHz, DVB-T 6, 7 and 8 MHz). A *family* (``lte-normal``,
``nr-mu1``, ``wifi``, ``dvbt-8k-g4``, ...) holds one preset per bandwidth;
:func:`preset_for` picks the one for a requirement's bandwidth, or says
which it uses when the standard has none for it. A preset's occupancy is
the standard's: its design carries ``channel_bandwidth_hz``, and the rule
``fits_channel`` then asks that channel to fit the licensed bandwidth, not
its subcarriers to fit the requirement's default occupancy. A few names pin
one bandwidth (``lte-20-normal``, ``wifi-20``, ``wifi-p-10``).

Pilot arrangements
------------------
Each preset carries its standard's pilot arrangement
(``numerology.arrangement``): the scope (what a receiver may use), the
pilot-bearing symbols and the comb, as the standard places them:

* LTE cell reference signals of antenna port 0 (a stream: cell-wide):
  symbols 0 and 4 of each 7-symbol slot (0 and 3 of 6 with the extended
  prefix), every 6th subcarrier, the second symbol shifted by 3;
* NR DM-RS type 1 (per slot, precoded): front-loaded in symbol 2 with one
  additional position (symbol 11 of 14; symbol 9 of 12 with the extended
  prefix), every other subcarrier (one CDM group), no data beside them (two
  CDM groups without data), 3 dB above the data;
* 802.11a/p: two long training symbols at the start of each packet, held
  over the packet (the 4 pilot tones of each data symbol only track phase);
* DVB-T scattered pilots (a stream): every 12th carrier, moving by 3 each
  symbol, boosted to 16/9 of the data power;
* DAB: differential detection, a phase reference symbol per frame.

The pilots' true average overhead (a second antenna port's reference
signals, continual pilots, signalling carriers, the packet's other preamble
fields) goes into ``reserved_subcarriers``, computed by :func:`_reserved_for`,
so that ``data_subcarriers_per_symbol`` equals the published data count.

References
----------
.. [1] IEEE Std 802.11-2016, clause 17 (OFDM PHY): Table 17-4 (rate-dependent
   parameters), Table 17-5 (timing-related parameters), 17.3.5.4 (number of
   data symbols), 17.4.3 (TXTIME). Table and sub-clause numbers from memory.
.. [2] 3GPP TS 36.211, Table 6.12-1 (CP lengths) and sect. 6.10.1.2 (cell-specific
   reference signals); 3GPP TS 36.104, Table 5.6-1 (N_RB per bandwidth).
.. [3] 3GPP TS 38.211, sect. 4.2-4.3 and 5.3.1 (numerologies, CP lengths),
   Table 7.4.1.1.2-3 (DMRS positions, from memory); TS 38.101-1 and TS 38.101-2,
   Table 5.3.2-1 (maximum transmission bandwidth configuration N_RB, from memory).
.. [4] ETSI EN 300 744 (DVB-T), sect. 4.4 (OFDM frame parameters, guard intervals),
   sect. 4.5.3 (scattered pilots); carrier counts confirmed, clause numbers of
   4.4 from memory.
.. [5] ETSI EN 300 401 (DAB), sect. 14 (transmission frame, mode parameters);
   from memory; the frame sums are checked in the tests.
.. [6] 3GPP TS 38.101-1 and TS 38.101-2, Table 5.3.2-1 (maximum transmission
   bandwidth configuration N_RB per channel bandwidth and subcarrier
   spacing; from memory).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, replace

from . import arrangement
from .design import Design, non_pilot_subcarriers
from .errors import InputError

#: 802.11a/g/p packet assumed for the preamble-based pilot model: a 1500-byte
#: PSDU at N_DBPS = 96 (16-QAM 1/2) needs ceil((16 + 8 x 1500 + 6) / 96) = 126
#: data symbols (SERVICE 16 bits, tail 6 bits; IEEE 802.11-2016 17.3.5.4).
WIFI_PACKET_DATA_SYMBOLS = 126

#: 802.11a/g/p preamble: short training (2 symbol durations), long training (2: the channel estimate),
#: then SIGNAL (1); 20 us at 20 MHz, 40 us at 10 MHz (IEEE 802.11-2016 17.3.3).
WIFI_SHORT_TRAINING_SYMBOLS = 2
WIFI_LONG_TRAINING_SYMBOLS = 2
WIFI_SIGNAL_SYMBOLS = 1


@dataclass(frozen=True)
class Preset:
    """A published numerology for one channel bandwidth.

    Parameters
    ----------
    name : str
        Short typeable name, e.g. ``"lte-normal-10mhz"``.
    source : str
        Standard and clause/table the numbers come from.
    design : Design
        The numerology (its ``channel_bandwidth_hz`` is the standard's channel).
    description : str
        What it is, and every modelling choice made to express it as a Design.
    family : str
        The family it belongs to (one preset per channel bandwidth).
    """

    name: str
    source: str
    design: Design
    description: str
    family: str = ""

    @property
    def channel_bandwidth_hz(self) -> float:
        return self.design.channel_bandwidth_hz

    def __str__(self) -> str:
        return str(self.design)


def _reserved_for(used_subcarriers, symbols, period, freq_spacing, data_shared, data_subcarriers):
    """Reserved subcarriers per symbol that make the design carry ``data_subcarriers`` on average.

    ``reserved = used (1 - pilot fraction) - data``, through the same
    function as :attr:`Design.data_subcarriers_per_symbol`; the subtraction
    there then gives back ``data_subcarriers`` exactly (Sterbenz: the
    operands are within a factor of two).
    """
    fraction = float(arrangement.pilot_fraction(symbols, period, freq_spacing, data_shared))
    return non_pilot_subcarriers(used_subcarriers, fraction) - data_subcarriers


def _mhz(bandwidth_hz: float) -> str:
    return f"{bandwidth_hz / 1e6:g}mhz"


def _preset(family: str, bandwidth_hz: float, source: str, description: str, **design) -> Preset:
    name = f"{family}-{_mhz(bandwidth_hz)}"
    return Preset(name=name, source=source, family=family, description=description,
                  design=Design(name=name, source=source, channel_bandwidth_hz=bandwidth_hz, **design))


def _smallest_fft(channel_bandwidth_hz: float, spacing_hz: float) -> int:
    """The smallest power-of-two FFT whose sample rate spans the channel (an implementation convention)."""
    return 1 << max(3, math.ceil(math.log2(channel_bandwidth_hz / spacing_hz - 1e-9)))


# --- IEEE 802.11a/g/p: 20, 10 and 5 MHz channels -------------------------------


def _wifi(bandwidth_hz: float) -> Preset:
    # The packet as the model sees it: long training (the channel estimate), SIGNAL, data; the short training
    # that precedes it is time without data once per packet (an extra prefix of 2 symbol durations).
    packet = WIFI_LONG_TRAINING_SYMBOLS + WIFI_SIGNAL_SYMBOLS + WIFI_PACKET_DATA_SYMBOLS  # 129
    durations = packet + WIFI_SHORT_TRAINING_SYMBOLS  # 131 symbol durations per packet
    used = 52  # 48 data + 4 pilot subcarriers, DC unused
    data = 48 * WIFI_PACKET_DATA_SYMBOLS / packet  # data subcarriers per symbol, packet average
    training = arrangement.mask_from_symbols(range(WIFI_LONG_TRAINING_SYMBOLS))
    spacing = bandwidth_hz / 64
    return _preset(
        "wifi", bandwidth_hz,
        "IEEE Std 802.11-2016 cl. 17, Tables 17-4 and 17-5, 17.3.3 (preamble); 10 MHz: 802.11p",
        f"IEEE 802.11a/g/p OFDM in a {bandwidth_hz / 1e6:g} MHz channel: {spacing / 1e3:g} kHz, 64-point FFT at the "
        "channel bandwidth, GI 16 samples, 52 used subcarriers (48 data + 4 pilots). "
        "802.11 estimates the channel once per packet from the two long training symbols and holds it; the "
        "4 pilot tones of each data symbol only track the common phase. Modelled as packets of "
        f"{WIFI_LONG_TRAINING_SYMBOLS} long training + {WIFI_SIGNAL_SYMBOLS} SIGNAL + {WIFI_PACKET_DATA_SYMBOLS} "
        f"data symbols (symbols_per_slot = {packet}; a 1500-byte PSDU at 16-QAM 1/2: change the packet length "
        "in a design file to study others), the short training as an extra prefix of "
        f"{WIFI_SHORT_TRAINING_SYMBOLS} symbol durations per packet; SIGNAL and the pilot tones are reserved "
        f"subcarriers, so data_subcarriers_per_symbol is the packet average 48 x {WIFI_PACKET_DATA_SYMBOLS}/{packet}.",
        subcarrier_spacing_hz=spacing,
        fft_size=64,
        sample_rate_hz=bandwidth_hz,
        cp_samples=16,
        used_subcarriers=used,
        pilot_freq_spacing=1,
        pilot_time_spacing=int(arrangement.max_gap(training, packet)),
        pilot_shift=0,
        symbols_per_slot=packet,
        reserved_subcarriers=_reserved_for(used, training, packet, 1, False, data),
        cp_extra_samples=WIFI_SHORT_TRAINING_SYMBOLS * 80,
        cp_extra_period_s=durations * 80 / bandwidth_hz,
        pilot_scope="packet",
        pilot_symbols=training,
        pilot_period=packet,
        pilot_data_shared=False,
    )


# --- LTE ---------------------------------------------------------------------

_LTE_SOURCE = "3GPP TS 36.211 Table 6.12-1 and sect. 6.10.1.2; TS 36.104 Table 5.6-1"

#: LTE channel bandwidth -> (resource blocks N_RB (TS 36.104 Table 5.6-1), FFT size (an implementation
#: convention: the sample rate is a multiple of 1.92 MHz)).
LTE_BANDWIDTHS = {1.4e6: (6, 128), 3e6: (15, 256), 5e6: (25, 512), 10e6: (50, 1024), 15e6: (75, 1536),
                  20e6: (100, 2048)}


def _lte(extended: bool, bandwidth_hz: float) -> Preset:
    n_rb, fft = LTE_BANDWIDTHS[bandwidth_hz]
    used = 12 * n_rb  # DC unused
    symbols_per_slot = 6 if extended else 7
    # two antenna ports of cell-specific reference signals: 8 REs per resource block (12 subcarriers) per slot
    data = used * (1 - 8 / (12 * symbols_per_slot))
    second = symbols_per_slot - 3  # l = N_symb - 3 (TS 36.211 sect. 6.10.1.2)
    symbols = arrangement.mask_from_symbols([0, second])
    cp = (512 if extended else 144) * fft // 2048  # in samples of the 2048-point clock, scaled
    extra = 0 if extended else 16 * fft // 2048
    return _preset(
        "lte-extended" if extended else "lte-normal", bandwidth_hz,
        _LTE_SOURCE,
        f"LTE downlink, {bandwidth_hz / 1e6:g} MHz, {'extended' if extended else 'normal'} CP: 15 kHz, {fft}-point FFT "
        f"at {fft * 15e3 / 1e6:g} MHz (the FFT size is an implementation convention), {n_rb} resource blocks = "
        f"{used} used subcarriers, {symbols_per_slot} symbols per 0.5 ms slot. Cell reference signals of antenna "
        f"port 0, broadcast in every slot: symbols 0 and {second}, every 6th subcarrier, the second symbol "
        "shifted by 3 (a stream: the receiver may use past pilots and its look-ahead). Overhead counts 2 ports "
        "(8 REs per resource block per slot: port 1 as reserved); the control region, synchronisation and "
        "broadcast channels are not counted.",
        subcarrier_spacing_hz=15e3,
        fft_size=fft,
        cp_samples=cp,
        used_subcarriers=used,
        pilot_freq_spacing=6,
        pilot_time_spacing=int(arrangement.max_gap(symbols, symbols_per_slot)),
        pilot_shift=3,
        symbols_per_slot=symbols_per_slot,
        reserved_subcarriers=_reserved_for(used, symbols, symbols_per_slot, 6, True, data),
        cp_extra_samples=extra,
        cp_extra_period_s=0.5e-3 if extra else 0.0,
        pilot_scope="stream",
        pilot_symbols=symbols,
        pilot_period=symbols_per_slot,
    )


# --- 5G NR -------------------------------------------------------------------

#: DM-RS power over the data's with two CDM groups without data: 3 dB (3GPP TS 38.214 Table 4.1-1; from memory).
NR_DMRS_BOOST_DB = 3.0

_NR_SOURCE = (
    "3GPP TS 38.211 sect. 4.2, 5.3.1 and Table 7.4.1.1.2-3 (from memory); "
    "TS 38.101-1/-2 Table 5.3.2-1 (N_RB, from memory)"
)

#: mu -> {channel bandwidth in MHz: N_RB}: TS 38.101-1 Table 5.3.2-1 (FR1: 15, 30, 60 kHz) and TS 38.101-2
#: Table 5.3.2-1 (FR2: 120 kHz); from memory. 240 kHz has no data table in Rel-15 (SS/PBCH only): the
#: entry is illustrative, 132 RB spanning the same 380.16 MHz as 264 RB at 120 kHz.
NR_RESOURCE_BLOCKS = {
    0: {5: 25, 10: 52, 15: 79, 20: 106, 25: 133, 30: 160, 40: 216, 50: 270},
    1: {5: 11, 10: 24, 15: 38, 20: 51, 25: 65, 30: 78, 40: 106, 50: 133, 60: 162, 70: 189, 80: 217, 90: 245,
        100: 273},
    2: {10: 11, 15: 18, 20: 24, 25: 31, 30: 38, 40: 51, 50: 65, 60: 79, 70: 93, 80: 107, 90: 121, 100: 135},
    3: {50: 32, 100: 66, 200: 132, 400: 264},
    4: {400: 132},
}
#: The bandwidth each NR family is shown with by default, MHz.
NR_DEFAULT_MHZ = {0: 20, 1: 40, 2: 100, 3: 400, 4: 400}


def _nr(mu: int, bandwidth_mhz: int, extended: bool = False) -> Preset:
    # kappa T_c = 64 / (480 kHz x 4096) = 1 / 30.72 MHz; at f_s = N x 15 kHz x 2^mu the
    # normal CP 144 kappa 2^-mu T_c is 144 N / 2048 samples and the extra 16 kappa T_c is 16 N 2^mu / 2048.
    n_rb = NR_RESOURCE_BLOCKS[mu][bandwidth_mhz]
    spacing = 15e3 * 2**mu
    fft_size = _smallest_fft(bandwidth_mhz * 1e6, spacing)
    used = 12 * n_rb
    symbols = 12 if extended else 14
    cp = (512 if extended else 144) * fft_size // 2048
    extra = 0 if extended else 16 * fft_size * 2**mu // 2048
    dmrs = arrangement.mask_from_symbols([2, 9 if extended else 11])  # l0 = 2 plus one additional position
    data = used * (1 - 2 / symbols)  # no data in the DMRS symbols (two CDM groups without data)
    band = "TS 38.101-2" if mu == 3 else ("illustrative" if mu == 4 else "TS 38.101-1")
    return _preset(
        f"nr-mu{mu}" + ("-extended" if extended else ""), bandwidth_mhz * 1e6,
        _NR_SOURCE,
        f"5G NR, mu = {mu}: {spacing / 1e3:g} kHz, {bandwidth_mhz} MHz with N_RB = {n_rb} ({band}), "
        f"{fft_size}-point FFT (an implementation choice), {'extended CP 512' if extended else 'normal CP 144'} "
        f"kappa 2^-mu T_c = {cp} samples"
        + ("" if extended else f", +16 kappa T_c = {extra} samples each 0.5 ms")
        + f", {symbols} symbols per slot. DM-RS type 1, single-symbol, mapping type A with one additional "
        f"position: symbols 2 and {9 if extended else 11} of each slot (from memory), usable only inside "
        "their slot (precoded); the receiver's layer uses one CDM group (every 2nd subcarrier); two CDM groups "
        "without data, so the DM-RS symbols carry no data and the DM-RS is 3 dB above the data "
        "(TS 38.214 Table 4.1-1, from memory). PDCCH, CSI-RS, PT-RS and SSB are not counted.",
        subcarrier_spacing_hz=spacing,
        fft_size=fft_size,
        cp_samples=cp,
        used_subcarriers=used,
        pilot_freq_spacing=2,
        pilot_time_spacing=int(arrangement.max_gap(dmrs, symbols)),
        pilot_shift=0,
        symbols_per_slot=symbols,
        reserved_subcarriers=_reserved_for(used, dmrs, symbols, 2, False, data),
        cp_extra_samples=extra,
        cp_extra_period_s=0.0 if extended else 0.5e-3,
        pilot_scope="slot",
        pilot_symbols=dmrs,
        pilot_period=symbols,
        pilot_boost_db=NR_DMRS_BOOST_DB,
        pilot_data_shared=False,
    )


# --- DVB-T (6, 7 and 8 MHz channels) -----------------------------------------

#: DVB-T elementary period T = 7/64 us in 8 MHz channels (EN 300 744 sect. 4.4); it scales as 8 MHz / channel.
DVBT_SAMPLE_RATE_HZ = 64e6 / 7

#: Scattered and continual pilots at amplitude 4/3, power 16/9 of the data (EN 300 744 sect. 4.5.2).
DVBT_PILOT_BOOST_DB = 10 * math.log10(16 / 9)

#: mode -> (FFT size, carriers K = K_max + 1, data carriers per symbol) (EN 300 744 sect. 4.4).
_DVBT_MODES = {"8k": (8192, 6817, 6048), "2k": (2048, 1705, 1512)}
DVBT_BANDWIDTHS = (6e6, 7e6, 8e6)


def _dvbt(mode: str, guard_denominator: int, bandwidth_hz: float) -> Preset:
    fft_size, carriers, data = _DVBT_MODES[mode]
    rate = DVBT_SAMPLE_RATE_HZ * bandwidth_hz / 8e6
    return _preset(
        f"dvbt-{mode}-g{guard_denominator}", bandwidth_hz,
        "ETSI EN 300 744 sect. 4.4 and 4.5.3",
        f"DVB-T {mode} mode, {bandwidth_hz / 1e6:g} MHz channel, guard interval 1/{guard_denominator}: elementary "
        f"period {1e6 / rate:.6g} us, {fft_size}-point FFT, {carriers} carriers of which {data} carry data in "
        "every symbol, 68 symbols per frame (symbols_per_slot). Scattered pilots (a stream) every 12th carrier, "
        "moving by 3 each symbol (lattice D_f = 12, D_t = 1, shift = 3), boosted to 16/9 of the data power "
        "(EN 300 744 sect. 4.5.2). reserved_subcarriers = carriers x 11/12 - "
        f"data = {carriers} x 11/12 - {data} covers the continual pilots and TPS carriers not on the "
        "lattice (and the lattice's rounding of the edge carrier), so the average data count is exact.",
        subcarrier_spacing_hz=rate / fft_size,
        fft_size=fft_size,
        sample_rate_hz=rate,
        cp_samples=fft_size // guard_denominator,
        used_subcarriers=carriers,
        pilot_freq_spacing=12,
        pilot_time_spacing=1,
        pilot_shift=3,
        symbols_per_slot=68,
        reserved_subcarriers=_reserved_for(carriers, 1, 1, 12, True, data),
        pilot_scope="stream",
        pilot_boost_db=DVBT_PILOT_BOOST_DB,
    )


# --- DAB ---------------------------------------------------------------------

#: DAB elementary period T = 1/2.048 MHz (EN 300 401 sect. 14).
DAB_SAMPLE_RATE_HZ = 2.048e6
#: The DAB ensemble block, 1.536 MHz (EN 300 401; from memory).
DAB_BLOCK_HZ = 1.536e6

#: mode -> (FFT size T_u/T, carriers K, guard T_g/T, null symbol T_null/T, symbols per frame L,
#: frame duration in s); EN 300 401 sect. 14, from memory.
_DAB_MODES = {
    1: (2048, 1536, 504, 2656, 76, 96e-3),
    2: (512, 384, 126, 664, 76, 24e-3),
    3: (256, 192, 63, 345, 153, 24e-3),
    4: (1024, 768, 252, 1328, 76, 48e-3),
}


def _dab(mode: int) -> Preset:
    fft_size, carriers, guard, null, symbols, frame_s = _DAB_MODES[mode]
    return _preset(
        f"dab-mode{mode}", DAB_BLOCK_HZ,
        "ETSI EN 300 401 sect. 14 (from memory)",
        f"DAB transmission mode {mode} in its 1.536 MHz block: {DAB_SAMPLE_RATE_HZ / fft_size / 1e3:g} kHz, "
        f"{carriers} carriers, guard {guard} T, {symbols} symbols per {frame_s * 1e3:g} ms frame after a "
        f"{null} T null symbol. The null symbol is modelled as an extra CP once per frame (cp_extra_samples, "
        "cp_extra_period_s). DAB detects differential QPSK against the previous symbol: no channel estimate "
        "(scope differential); the phase reference symbol at the start of each frame carries no data.",
        subcarrier_spacing_hz=DAB_SAMPLE_RATE_HZ / fft_size,
        fft_size=fft_size,
        sample_rate_hz=DAB_SAMPLE_RATE_HZ,
        cp_samples=guard,
        used_subcarriers=carriers,
        pilot_freq_spacing=1,
        pilot_time_spacing=symbols,
        pilot_shift=0,
        symbols_per_slot=symbols,
        cp_extra_samples=null,
        cp_extra_period_s=frame_s,
        pilot_scope="differential",
        pilot_symbols=1,
        pilot_period=symbols,
        pilot_data_shared=False,
    )


def _declare():
    """(families: name -> {channel bandwidth: Preset}, default bandwidth of each family)."""
    families: dict[str, dict[float, Preset]] = {}
    defaults: dict[str, float] = {}

    def add(presets, default):
        for preset in presets:
            families.setdefault(preset.family, {})[preset.channel_bandwidth_hz] = preset
        defaults[presets[0].family] = default

    add([_wifi(b) for b in (20e6, 10e6, 5e6)], 20e6)
    add([_lte(False, b) for b in LTE_BANDWIDTHS], 20e6)
    add([_lte(True, b) for b in LTE_BANDWIDTHS], 20e6)
    for mu, table in NR_RESOURCE_BLOCKS.items():
        add([_nr(mu, b) for b in table], NR_DEFAULT_MHZ[mu] * 1e6)
    add([_nr(2, b, extended=True) for b in NR_RESOURCE_BLOCKS[2]], 100e6)
    for mode in _DVBT_MODES:
        for guard in (4, 8, 16, 32):
            add([_dvbt(mode, guard, b) for b in DVBT_BANDWIDTHS], 8e6)
    for mode in _DAB_MODES:
        add([_dab(mode)], DAB_BLOCK_HZ)
    return families, defaults


#: Family name -> {channel bandwidth (Hz): Preset}.
FAMILIES, _DEFAULT_BANDWIDTH = _declare()

#: Names that pin one bandwidth of a family (the names of earlier releases).
PINNED = {"lte-20-normal": ("lte-normal", 20e6), "lte-20-extended": ("lte-extended", 20e6),
          "wifi-20": ("wifi", 20e6), "wifi-p-10": ("wifi", 10e6)}


def _named(preset: Preset, name: str) -> Preset:
    """The same preset under another name (its design renamed too)."""
    return replace(preset, name=name, design=replace(preset.design, name=name))


#: Every preset by name: each family (its default bandwidth), each family member
#: (``family-<bandwidth>MHz``) and the pinned names.
PRESETS: dict[str, Preset] = {
    **{family: _named(members[_DEFAULT_BANDWIDTH[family]], family) for family, members in FAMILIES.items()},
    **{p.name: p for members in FAMILIES.values() for p in members.values()},
    **{name: _named(FAMILIES[family][bandwidth], name) for name, (family, bandwidth) in PINNED.items()},
}


def get_preset(name: str, place: str = "preset") -> Preset:
    """Return the preset called ``name``.

    Parameters
    ----------
    name : str
        A key of :data:`PRESETS`, e.g. ``"lte-20-normal"`` or ``"dvbt-8k-g4"``.
    place : str, optional
        Where the name came from, for the error message.

    Returns
    -------
    Preset

    Raises
    ------
    InputError
        (a ValueError) for an unknown name, with the closest names.

    Examples
    --------
    >>> get_preset("nr-mu1").design.cp_samples
    144
    """
    try:
        return PRESETS[name]
    except (KeyError, TypeError):
        pass
    known = list(FAMILIES) + list(PINNED)
    close = difflib.get_close_matches(str(name), list(PRESETS), n=3, cutoff=0.5)
    hint = f"did you mean {' or '.join(repr(c) for c in close)}?" if close else "known presets: " + ", ".join(known)
    raise InputError(place, f"unknown preset {name!r}; {hint}")


def preset_for(name: str, bandwidth_hz: float, place: str = "preset") -> tuple[Preset, str]:
    """The preset ``name`` for a channel of ``bandwidth_hz``, and a note when it is not that bandwidth's.

    A family name (``nr-mu1``) takes the member the standard defines for the
    bandwidth; without one, the widest member that fits (or the narrowest),
    and the note says which. A member's or a pinned name keeps its own
    bandwidth, and the note says so when it differs from the requirement's.

    Examples
    --------
    >>> p, note = preset_for("lte-normal", 10e6)
    >>> p.design.used_subcarriers, p.design.fft_size, note
    (600, 1024, '')
    """
    preset = get_preset(name, place)
    members = FAMILIES[preset.family]
    wanted = next((b for b in members if math.isclose(b, bandwidth_hz, rel_tol=1e-9)), None)
    if name in FAMILIES:
        if wanted is not None:
            return members[wanted], ""
        fitting = [b for b in sorted(members) if b <= bandwidth_hz]
        preset = members[fitting[-1] if fitting else min(members)]
    elif math.isclose(preset.channel_bandwidth_hz, bandwidth_hz, rel_tol=1e-9):
        return preset, ""
    offered = ", ".join(f"{b / 1e6:g}" for b in sorted(members))
    return preset, (f"{name} is defined for channels of {offered} MHz; evaluated in its "
                    f"{preset.channel_bandwidth_hz / 1e6:g} MHz channel against the requirement's "
                    f"{bandwidth_hz / 1e6:g} MHz")
