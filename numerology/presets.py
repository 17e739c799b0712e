"""Published OFDM numerologies, each declared once with its source.

Every preset is a :class:`~numerology.design.Design` plus where it comes from.
The sample counts are the standards' own integers. What a standard does not
fix (an FFT size for a given bandwidth, how an irregular pilot pattern maps
onto a lattice) is an explicit modelling choice, stated beside the preset.

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
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass

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
    """A published numerology.

    Parameters
    ----------
    name : str
        Short typeable name, e.g. ``"lte-20-normal"``.
    source : str
        Standard and clause/table the numbers come from.
    design : Design
        The numerology.
    description : str
        What it is, and every modelling choice made to express it as a Design.
    """

    name: str
    source: str
    design: Design
    description: str

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


def _preset(name: str, source: str, description: str, **design) -> Preset:
    return Preset(name=name, source=source, design=Design(name=name, source=source, **design), description=description)


# --- IEEE 802.11a/g and the 10 MHz (802.11p) channel -------------------------


def _wifi(name: str, sample_rate_hz: float, note: str) -> Preset:
    # The packet as the model sees it: long training (the channel estimate), SIGNAL, data; the short training
    # that precedes it is time without data once per packet (an extra prefix of 2 symbol durations).
    packet = WIFI_LONG_TRAINING_SYMBOLS + WIFI_SIGNAL_SYMBOLS + WIFI_PACKET_DATA_SYMBOLS  # 129
    durations = packet + WIFI_SHORT_TRAINING_SYMBOLS  # 131 symbol durations per packet
    used = 52  # 48 data + 4 pilot subcarriers, DC unused
    data = 48 * WIFI_PACKET_DATA_SYMBOLS / packet  # data subcarriers per symbol, packet average
    training = arrangement.mask_from_symbols(range(WIFI_LONG_TRAINING_SYMBOLS))
    return _preset(
        name,
        "IEEE Std 802.11-2016 cl. 17, Tables 17-4 and 17-5, 17.3.3 (preamble)",
        f"{note} 64-point FFT, GI 16 samples, 52 used subcarriers (48 data + 4 pilots). "
        "802.11 estimates the channel once per packet from the two long training symbols and holds it; the "
        "4 pilot tones of each data symbol only track the common phase. Modelled as packets of "
        f"{WIFI_LONG_TRAINING_SYMBOLS} long training + {WIFI_SIGNAL_SYMBOLS} SIGNAL + {WIFI_PACKET_DATA_SYMBOLS} "
        f"data symbols (symbols_per_slot = {packet}; a 1500-byte PSDU at 16-QAM 1/2: change the packet length "
        "in a design file to study others), the short training as an extra prefix of "
        f"{WIFI_SHORT_TRAINING_SYMBOLS} symbol durations per packet; SIGNAL and the pilot tones are reserved "
        f"subcarriers, so data_subcarriers_per_symbol is the packet average 48 x {WIFI_PACKET_DATA_SYMBOLS}/{packet}.",
        subcarrier_spacing_hz=sample_rate_hz / 64,
        fft_size=64,
        sample_rate_hz=sample_rate_hz,
        cp_samples=16,
        used_subcarriers=used,
        pilot_freq_spacing=1,
        pilot_time_spacing=int(arrangement.max_gap(training, packet)),
        pilot_shift=0,
        symbols_per_slot=packet,
        reserved_subcarriers=_reserved_for(used, training, packet, 1, False, data),
        cp_extra_samples=WIFI_SHORT_TRAINING_SYMBOLS * 80,
        cp_extra_period_s=durations * 80 / sample_rate_hz,
        pilot_scope="packet",
        pilot_symbols=training,
        pilot_period=packet,
        pilot_data_shared=False,
    )


# --- LTE ---------------------------------------------------------------------

_LTE_SOURCE = "3GPP TS 36.211 Table 6.12-1 and sect. 6.10.1.2; TS 36.104 Table 5.6-1"


def _lte(name: str, cp_samples: int, cp_extra_samples: int, symbols_per_slot: int) -> Preset:
    used = 1200  # 100 resource blocks x 12 at 20 MHz (TS 36.104 Table 5.6-1), DC unused
    # two antenna ports of cell-specific reference signals: 8 REs per resource block (12 subcarriers) per slot
    data = used * (1 - 8 / (12 * symbols_per_slot))
    second = 4 if symbols_per_slot == 7 else 3  # l = N_symb - 3 (TS 36.211 sect. 6.10.1.2)
    symbols = arrangement.mask_from_symbols([0, second])
    cp_label = "normal" if cp_extra_samples else "extended"
    return _preset(
        name,
        _LTE_SOURCE,
        f"LTE downlink, 20 MHz, {cp_label} CP: 15 kHz, 2048-point FFT at 30.72 MHz (the FFT size is an "
        f"implementation convention), 1200 used subcarriers, {symbols_per_slot} symbols per 0.5 ms slot. "
        f"Cell reference signals of antenna port 0, broadcast in every slot: symbols 0 and {second}, every 6th "
        "subcarrier, the second symbol shifted by 3 (a stream: the receiver may use past pilots and its "
        "look-ahead). Overhead counts 2 ports (8 REs per resource block per slot: port 1 as reserved); the "
        "control region, synchronisation and broadcast channels are not counted.",
        subcarrier_spacing_hz=15e3,
        fft_size=2048,
        cp_samples=cp_samples,
        used_subcarriers=used,
        pilot_freq_spacing=6,
        pilot_time_spacing=int(arrangement.max_gap(symbols, symbols_per_slot)),
        pilot_shift=3,
        symbols_per_slot=symbols_per_slot,
        reserved_subcarriers=_reserved_for(used, symbols, symbols_per_slot, 6, True, data),
        cp_extra_samples=cp_extra_samples,
        cp_extra_period_s=0.5e-3 if cp_extra_samples else 0.0,
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


def _nr(mu: int, bandwidth: str, n_rb: int, fft_size: int, band_note: str, extended: bool = False) -> Preset:
    # kappa T_c = 64 / (480 kHz x 4096) = 1 / 30.72 MHz; at f_s = N x 15 kHz x 2^mu the
    # normal CP 144 kappa 2^-mu T_c is 144 N / 2048 samples and the extra 16 kappa T_c is 16 N 2^mu / 2048.
    used = 12 * n_rb
    symbols = 12 if extended else 14
    cp = (512 if extended else 144) * fft_size // 2048
    extra = 0 if extended else 16 * fft_size * 2**mu // 2048
    dmrs = arrangement.mask_from_symbols([2, 9 if extended else 11])  # l0 = 2 plus one additional position
    data = used * (1 - 2 / symbols)  # no data in the DMRS symbols (two CDM groups without data)
    name = f"nr-mu{mu}" + ("-extended" if extended else "")
    return _preset(
        name,
        _NR_SOURCE,
        f"5G NR, mu = {mu}: {15 * 2**mu} kHz, {bandwidth} with N_RB = {n_rb} ({band_note}), "
        f"{fft_size}-point FFT (an implementation choice), {'extended CP 512' if extended else 'normal CP 144'} "
        f"kappa 2^-mu T_c = {cp} samples"
        + ("" if extended else f", +16 kappa T_c = {extra} samples each 0.5 ms")
        + f", {symbols} symbols per slot. DM-RS type 1, single-symbol, mapping type A with one additional "
        f"position: symbols 2 and {9 if extended else 11} of each slot (from memory), usable only inside "
        "their slot (precoded); the receiver's layer uses one CDM group (every 2nd subcarrier); two CDM groups "
        "without data, so the DM-RS symbols carry no data and the DM-RS is 3 dB above the data "
        "(TS 38.214 Table 4.1-1, from memory). PDCCH, CSI-RS, PT-RS and SSB are not counted.",
        subcarrier_spacing_hz=15e3 * 2**mu,
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


# --- DVB-T (8 MHz channel) ---------------------------------------------------

#: DVB-T elementary period T = 7/64 us in 8 MHz channels (EN 300 744 sect. 4.4).
DVBT_SAMPLE_RATE_HZ = 64e6 / 7

#: Scattered and continual pilots at amplitude 4/3, power 16/9 of the data (EN 300 744 sect. 4.5.2).
DVBT_PILOT_BOOST_DB = 10 * math.log10(16 / 9)

#: mode -> (FFT size, carriers K = K_max + 1, data carriers per symbol) (EN 300 744 sect. 4.4).
_DVBT_MODES = {"8k": (8192, 6817, 6048), "2k": (2048, 1705, 1512)}


def _dvbt(mode: str, guard_denominator: int) -> Preset:
    fft_size, carriers, data = _DVBT_MODES[mode]
    return _preset(
        f"dvbt-{mode}-g{guard_denominator}",
        "ETSI EN 300 744 sect. 4.4 and 4.5.3",
        f"DVB-T {mode} mode, 8 MHz channel, guard interval 1/{guard_denominator}: elementary period "
        f"7/64 us, {fft_size}-point FFT, {carriers} carriers of which {data} carry data in every symbol, "
        "68 symbols per frame (symbols_per_slot). Scattered pilots (a stream) every 12th carrier, moving "
        "by 3 each symbol (lattice D_f = 12, D_t = 1, shift = 3), boosted to 16/9 of the data power "
        "(EN 300 744 sect. 4.5.2). reserved_subcarriers = carriers x 11/12 - "
        f"data = {carriers} x 11/12 - {data} covers the continual pilots and TPS carriers not on the "
        "lattice (and the lattice's rounding of the edge carrier), so the average data count is exact.",
        subcarrier_spacing_hz=DVBT_SAMPLE_RATE_HZ / fft_size,
        fft_size=fft_size,
        sample_rate_hz=DVBT_SAMPLE_RATE_HZ,
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
        f"dab-mode{mode}",
        "ETSI EN 300 401 sect. 14 (from memory)",
        f"DAB transmission mode {mode}: {DAB_SAMPLE_RATE_HZ / fft_size / 1e3:g} kHz, {carriers} carriers, "
        f"guard {guard} T, {symbols} symbols per {frame_s * 1e3:g} ms frame after a {null} T null symbol. "
        "The null symbol is modelled as an extra CP once per frame (cp_extra_samples, cp_extra_period_s). "
        "DAB detects differential QPSK against the previous symbol: no channel estimate (scope "
        "differential); the phase reference symbol at the start of each frame carries no data.",
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


def _declare() -> dict[str, Preset]:
    presets = [
        _wifi("wifi-20", 20e6, "IEEE 802.11a/g, 20 MHz channel: 312.5 kHz, GI 0.8 us."),
        _wifi("wifi-p-10", 10e6, "IEEE 802.11 10 MHz channel (802.11p, vehicular): 156.25 kHz, GI 1.6 us."),
        _lte("lte-20-normal", cp_samples=144, cp_extra_samples=16, symbols_per_slot=7),
        _lte("lte-20-extended", cp_samples=512, cp_extra_samples=0, symbols_per_slot=6),
        _nr(0, "20 MHz", 106, 2048, "TS 38.101-1"),
        _nr(1, "40 MHz", 106, 2048, "TS 38.101-1"),
        _nr(2, "100 MHz", 135, 2048, "TS 38.101-1"),
        _nr(3, "400 MHz", 264, 4096, "TS 38.101-2"),
        _nr(4, "400 MHz", 132, 2048, "illustrative: Rel-15 uses 240 kHz only for SS/PBCH and has no "
            "N_RB table for it; 132 RB span the same 380.16 MHz as 264 RB at 120 kHz"),
        _nr(2, "100 MHz", 135, 2048, "TS 38.101-1", extended=True),
        *(_dvbt(mode, guard) for mode in _DVBT_MODES for guard in (4, 8, 16, 32)),
        *(_dab(mode) for mode in _DAB_MODES),
    ]
    return {preset.name: preset for preset in presets}


#: All presets by name.
PRESETS: dict[str, Preset] = _declare()


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
    close = difflib.get_close_matches(str(name), list(PRESETS), n=3, cutoff=0.5)
    hint = f"did you mean {' or '.join(repr(c) for c in close)}?" if close else "known presets: " + ", ".join(PRESETS)
    raise InputError(place, f"unknown preset {name!r}; {hint}")
