"""Published numerologies against the standards' own numbers.

Every check names its source. Integer sample counts must match exactly;
durations computed from them are compared at a few ULP (FLOAT_RTOL), and
values that a standard prints rounded are compared within half a unit of
their last printed digit.
"""

import math
import re

import pytest
from numpy.testing import assert_allclose

from numerology.design import Design, designs_to_arrays
from numerology.errors import InputError
from conftest import design_json_to_mapping

from numerology import arrangement
from numerology.presets import (
    DAB_SAMPLE_RATE_HZ,
    PRESETS,
    WIFI_LONG_TRAINING_SYMBOLS,
    WIFI_PACKET_DATA_SYMBOLS,
    WIFI_SHORT_TRAINING_SYMBOLS,
    WIFI_SIGNAL_SYMBOLS,
    Preset,
    get_preset,
)

microsecond = 1e-6
millisecond = 1e-3
mbit_per_s = 1e6
#: A few ULP: the durations below are one or two float operations on exact integers.
FLOAT_RTOL = 1e-13


def test_presets_are_declared_with_names_and_sources():
    assert len(PRESETS) >= 20
    for name, preset in PRESETS.items():
        assert isinstance(preset, Preset)
        assert re.fullmatch(r"[a-z0-9.-]+", name), name  # typeable: no slashes, spaces or capitals
        assert preset.name == preset.design.name == name
        assert preset.source and preset.design.source == preset.source
        assert preset.description
        assert str(preset) == str(preset.design)


def test_get_preset_suggests_close_names():
    assert get_preset("lte-20-normal") is PRESETS["lte-20-normal"]
    with pytest.raises(ValueError, match=r"unknown preset 'lte-20-norml'; did you mean 'lte-20-normal'"):
        get_preset("lte-20-normal"[:-2] + "l")
    with pytest.raises(InputError, match=r"--preset: unknown preset 'dvbt-8k-1/4'; did you mean 'dvbt-8k-g4'"):
        get_preset("dvbt-8k-1/4", place="--preset")
    with pytest.raises(InputError, match="known presets: wifi, lte-normal, "):
        get_preset("zzzz")


@pytest.mark.parametrize("name", sorted(PRESETS))
def test_every_preset_survives_the_json_round_trip(name):
    """to_json -> design-file mapping -> the same Design, for each preset (identity)."""
    from numerology.design import DERIVED_JSON_KEYS, design_from_mapping

    design = PRESETS[name].design
    mapping = design_json_to_mapping(design.to_json(), DERIVED_JSON_KEYS)
    assert design_from_mapping(mapping, name) == design


def test_arrays_of_all_presets_match_the_scalars():
    designs = [preset.design for preset in PRESETS.values()]
    arrays = designs_to_arrays(designs)
    assert_allclose(arrays.data_re_per_second, [d.data_re_per_second for d in designs], rtol=0, atol=0)
    assert_allclose(arrays.overhead, [d.overhead for d in designs], rtol=0, atol=0)


# --- IEEE 802.11a/g and 802.11p -----------------------------------------------

# (modulation bits, code rate, 20 MHz rate, 10 MHz rate in Mbit/s, data bits per symbol N_DBPS):
# IEEE Std 802.11-2016 cl. 17, Table 17-4.
WIFI_RATES = [
    (1, 1 / 2, 6, 3, 24),
    (1, 3 / 4, 9, 4.5, 36),
    (2, 1 / 2, 12, 6, 48),
    (2, 3 / 4, 18, 9, 72),
    (4, 1 / 2, 24, 12, 96),
    (4, 3 / 4, 36, 18, 144),
    (6, 2 / 3, 48, 24, 192),
    (6, 3 / 4, 54, 27, 216),
]


def wifi_data_subcarriers_in_a_data_symbol(design: Design) -> float:
    """Undo the packet average of the preset: data subcarriers in one data symbol (48 expected)."""
    return design.data_subcarriers_per_symbol * design.symbols_per_slot / WIFI_PACKET_DATA_SYMBOLS


@pytest.mark.parametrize("name, useful_us, gi_us, symbol_us",
                         [("wifi-20", 3.2, 0.8, 4.0), ("wifi-p-10", 6.4, 1.6, 8.0)])
def test_wifi_timing(name, useful_us, gi_us, symbol_us):
    """T_u, GI and symbol: 3.2/0.8/4 us at 20 MHz, 6.4/1.6/8 us at 10 MHz (IEEE 802.11-2016 Table 17-5)."""
    d = PRESETS[name].design
    assert (d.fft_size, d.cp_samples, d.used_subcarriers) == (64, 16, 52)
    assert_allclose(d.useful_symbol_s, useful_us * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s, gi_us * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.symbol_s, symbol_us * microsecond, rtol=FLOAT_RTOL)


@pytest.mark.parametrize("bits, rate, mbps_20, mbps_10, ndbps", WIFI_RATES)
def test_wifi_rates(bits, rate, mbps_20, mbps_10, ndbps):
    """Data rate = 48 data subcarriers x bits x code rate / symbol (IEEE 802.11-2016 Table 17-4).

    The presets average the preamble over an assumed packet, so the data
    subcarriers of one data symbol are recovered from the packet average first.
    """
    for name, mbps in (("wifi-20", mbps_20), ("wifi-p-10", mbps_10)):
        d = PRESETS[name].design
        per_symbol = wifi_data_subcarriers_in_a_data_symbol(d)
        assert_allclose(per_symbol, 48, rtol=FLOAT_RTOL)
        assert_allclose(per_symbol * bits * rate, ndbps, rtol=FLOAT_RTOL)
        assert_allclose(per_symbol * bits * rate / d.symbol_s, mbps * mbit_per_s, rtol=FLOAT_RTOL)


@pytest.mark.parametrize("name, preamble_us, symbol_us", [("wifi-20", 20, 4), ("wifi-p-10", 40, 8)])
def test_wifi_packet_matches_txtime(name, preamble_us, symbol_us):
    """The assumed packet lasts TXTIME = T_PREAMBLE + T_SIGNAL + T_SYM x N_SYM (IEEE 802.11-2016 17.4.3,
    from memory), with N_SYM = ceil((16 + 8 x 1500 + 6) / 96) = 126 data symbols (17.3.5.4, from memory);
    its average data throughput is the N_SYM x N_DBPS data bits over TXTIME (calc)."""
    d = PRESETS[name].design
    assert WIFI_PACKET_DATA_SYMBOLS == math.ceil((16 + 8 * 1500 + 6) / 96)
    txtime_s = (preamble_us + symbol_us * WIFI_PACKET_DATA_SYMBOLS) * microsecond
    assert d.symbols_per_slot == WIFI_PACKET_DATA_SYMBOLS + WIFI_LONG_TRAINING_SYMBOLS + WIFI_SIGNAL_SYMBOLS
    assert WIFI_SHORT_TRAINING_SYMBOLS + WIFI_LONG_TRAINING_SYMBOLS + WIFI_SIGNAL_SYMBOLS == preamble_us / symbol_us
    assert_allclose(d.slot_s, txtime_s, rtol=FLOAT_RTOL)  # the short training is the packet's extra prefix
    assert_allclose(d.data_re_per_second * 4 * (1 / 2), WIFI_PACKET_DATA_SYMBOLS * 96 / txtime_s, rtol=FLOAT_RTOL)


# --- pilot arrangements as the standards place them -----------------------------------


def _pilots(name):
    d = PRESETS[name].design
    return (d.pilot_scope, arrangement.symbols_of(d.pilot_symbols), d.pilot_period, d.pilot_freq_spacing,
            d.pilot_shift, d.pilot_data_shared)


def test_lte_cell_reference_signals_of_port_0():
    """Symbols 0 and 4 of each 7-symbol slot (0 and 3 of 6, extended CP), every 6th subcarrier, the second
    shifted by 3; cell-wide, so a stream (3GPP TS 36.211 sect. 6.10.1.2)."""
    assert _pilots("lte-20-normal") == ("stream", (0, 4), 7, 6, 3, True)
    assert _pilots("lte-20-extended") == ("stream", (0, 3), 6, 6, 3, True)


def test_nr_dmrs_type_1_with_one_additional_position():
    """Type 1, mapping type A, l0 = 2 plus dmrs-AdditionalPosition pos1 (l = 11 of 14; 9 of 12 with the
    extended prefix), one CDM group on every other subcarrier, usable only in its slot, no data beside it
    and 3 dB above the data (3GPP TS 38.211 sect. 7.4.1.1.2 and Table 7.4.1.1.2-3; TS 38.214 Table 4.1-1;
    from memory)."""
    for mu in range(5):
        assert _pilots(f"nr-mu{mu}") == ("slot", (2, 11), 14, 2, 0, False)
        assert PRESETS[f"nr-mu{mu}"].design.pilot_boost_db == 3.0
    assert _pilots("nr-mu2-extended") == ("slot", (2, 9), 12, 2, 0, False)


def test_wifi_preamble_held_over_the_packet():
    """Two long training symbols (the channel estimate) at the start of each packet, full band, no data
    beside them (IEEE 802.11-2016 17.3.3)."""
    for name in ("wifi-20", "wifi-p-10"):
        assert _pilots(name) == ("packet", (0, 1), 129, 1, 0, False)


def test_dvbt_scattered_pilots_and_dab_differential():
    """DVB-T: every 12th carrier moving by 3 each symbol, boosted to 16/9 (EN 300 744 sect. 4.5.2-4.5.3).
    DAB: differential detection, a phase reference symbol per frame (EN 300 401; from memory)."""
    d = PRESETS["dvbt-8k-g4"].design
    assert _pilots("dvbt-8k-g4") == ("stream", (0,), 1, 12, 3, True)
    assert_allclose(10 ** (d.pilot_boost_db / 10), 16 / 9, rtol=1e-12)
    assert _pilots("dab-mode1")[0] == "differential"


# --- LTE ---------------------------------------------------------------------------


def test_lte_normal_cp_slot():
    """7 symbols per 0.5 ms slot: 7 x 2048 + 6 x 144 + 160 = 15360 samples at 30.72 MHz
    (3GPP TS 36.211 Table 6.12-1: N_CP = 160 for l = 0 and 144 for l = 1..6, T_s = 1/30.72 MHz)."""
    d = PRESETS["lte-20-normal"].design
    assert d.sample_rate_hz == 30.72e6
    assert (d.cp_samples, d.cp_samples + d.cp_extra_samples, d.symbols_per_slot) == (144, 160, 7)
    assert d.symbols_per_slot * (d.fft_size + d.cp_samples) + d.cp_extra_samples == 15360
    assert_allclose(d.cp_extra_period_s * d.sample_rate_hz, 15360, rtol=FLOAT_RTOL)
    assert_allclose(d.slot_s, 0.5 * millisecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s, 4.6875 * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s + d.cp_extra_s, 160 / 30.72 * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s + d.cp_extra_s, 5.2083 * microsecond, atol=0.00005 * microsecond)  # printed to 4 decimals


def test_lte_extended_cp_slot():
    """Extended CP 512 samples = 16.67 us, 6 symbols per 0.5 ms slot (TS 36.211 Table 6.12-1)."""
    d = PRESETS["lte-20-extended"].design
    assert (d.cp_samples, d.cp_extra_samples, d.symbols_per_slot) == (512, 0, 6)
    assert d.symbols_per_slot * (d.fft_size + d.cp_samples) == 15360
    assert_allclose(d.slot_s, 0.5 * millisecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s, 16.667 * microsecond, atol=0.0005 * microsecond)  # 16.667 us as usually printed


@pytest.mark.parametrize("name", ["lte-20-normal", "lte-20-extended"])
def test_lte_bandwidth_and_reference_signal_overhead(name):
    """100 resource blocks at 20 MHz (TS 36.104 Table 5.6-1); two-port CRS take 8 of the 12 x N_symb resource
    elements of a resource block in each slot (TS 36.211 sect. 6.10.1.2: per port 2 REs per block in 2 symbols)."""
    d = PRESETS[name].design
    assert d.used_subcarriers == 100 * 12
    assert_allclose(d.occupied_bandwidth_hz, 18e6, rtol=FLOAT_RTOL)
    data_re_per_block_slot = d.data_subcarriers_per_symbol * d.symbols_per_slot / 100
    assert_allclose(data_re_per_block_slot, 12 * d.symbols_per_slot - 8, rtol=FLOAT_RTOL)


def test_lte_lattice_delay_reach():
    """Delay reach of the reference signals: T_u/6 = 11.1 us for one port's comb, T_u/3 = 22.2 us with the
    stagger of 3 used across symbols (calc from TS 36.211 sect. 6.10.1.2; lattice limits after Hoeher, Kaiser,
    Robertson, ICASSP 1997, from memory)."""
    d = PRESETS["lte-20-normal"].design
    assert_allclose(d.useful_symbol_s / d.pilot_freq_spacing, 11.1 * microsecond, atol=0.05 * microsecond)
    combined = math.gcd(d.pilot_freq_spacing, d.pilot_shift)
    assert_allclose(d.useful_symbol_s / combined, 22.2 * microsecond, atol=0.05 * microsecond)


# --- 5G NR ---------------------------------------------------------------------------

# Normal CP 144 kappa 2^-mu T_c (TS 38.211 sect. 5.3.1): 4.6875, 2.34375, 1.171875, 0.5859375, 0.29296875 us.
NR_CP_US = [4.6875, 2.34375, 1.171875, 0.5859375, 0.29296875]
#: kappa T_c = 64 / (480 kHz x 4096) (TS 38.211 sect. 4.1).
KAPPA_TC_S = 64 / (480e3 * 4096)


@pytest.mark.parametrize("mu", range(5))
def test_nr_normal_cp(mu):
    """CP per mu, 14 symbols per slot, slot 1/2^mu ms including the extra 16 kappa T_c every 0.5 ms
    (TS 38.211 sect. 4.3.2 and 5.3.1)."""
    d = PRESETS[f"nr-mu{mu}"].design
    assert d.symbols_per_slot == 14
    assert_allclose(d.subcarrier_spacing_hz, 15e3 * 2**mu, rtol=0)
    assert_allclose(d.cp_s, NR_CP_US[mu] * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s, 144 * KAPPA_TC_S / 2**mu, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_extra_s, 16 * KAPPA_TC_S, rtol=FLOAT_RTOL)
    assert_allclose(d.slot_s, 1 * millisecond / 2**mu, rtol=FLOAT_RTOL)
    # a half subframe is 7 x 2^mu symbols plus one extra CP, in whole samples
    half_subframe_samples = d.fft_size * 15_000 * 2**mu // 2000
    assert d.fft_size * 15_000 * 2**mu % 2000 == 0
    assert 7 * 2**mu * (d.fft_size + d.cp_samples) + d.cp_extra_samples == half_subframe_samples


@pytest.mark.parametrize("mu, n_rb", [(0, 106), (1, 106), (2, 135), (3, 264)])
def test_nr_resource_blocks(mu, n_rb):
    """N_RB at 20 MHz (mu 0), 40 MHz (mu 1), 100 MHz (mu 2, FR1) and 400 MHz (mu 3, FR2): TS 38.101-1 and
    TS 38.101-2 Table 5.3.2-1, from memory."""
    d = PRESETS[f"nr-mu{mu}"].design
    assert d.used_subcarriers == 12 * n_rb
    assert d.used_subcarriers < d.fft_size


def test_nr_extended_cp():
    """Extended CP 512 kappa 2^-2 T_c = 4.1667 us at mu = 2, 12 symbols per 0.25 ms slot (TS 38.211 5.3.1)."""
    d = PRESETS["nr-mu2-extended"].design
    assert (d.symbols_per_slot, d.cp_extra_samples) == (12, 0)
    assert_allclose(d.cp_s, 512 * KAPPA_TC_S / 4, rtol=FLOAT_RTOL)
    assert_allclose(d.slot_s, 0.25 * millisecond, rtol=FLOAT_RTOL)


# --- DVB-T ----------------------------------------------------------------------------

# (bits per carrier, code rate, guard fraction denominator, net Mbit/s in 8 MHz):
# ETSI EN 300 744 table of useful bit rates.
DVBT_RATES = [
    (2, 1 / 2, 4, 4.976),
    (4, 3 / 4, 8, 16.588),
    (6, 2 / 3, 4, 19.906),
    (6, 3 / 4, 32, 27.144),
    (6, 7 / 8, 32, 31.668),
]
#: Reed-Solomon RS(204, 188) outer code (EN 300 744 sect. 4.3.2).
RS_FACTOR = 188 / 204


@pytest.mark.parametrize("mode", ["8k", "2k"])
@pytest.mark.parametrize("bits, rate, guard, mbps", DVBT_RATES)
def test_dvbt_useful_bitrates(mode, bits, rate, guard, mbps):
    """Net rate = data carriers per symbol x bits x code rate x 188/204 / symbol duration, the same for
    2k and 8k (EN 300 744 useful-bitrate table). Published to 3 decimals: half a unit of 1 kbit/s tolerance."""
    d = PRESETS[f"dvbt-{mode}-g{guard}"].design
    net_bps = d.data_subcarriers_per_symbol * bits * rate * RS_FACTOR / d.mean_symbol_s
    assert_allclose(net_bps, mbps * mbit_per_s, atol=0.0005 * mbit_per_s)


@pytest.mark.parametrize("mode, fft, carriers, data, useful_us", [("8k", 8192, 6817, 6048, 896),
                                                                  ("2k", 2048, 1705, 1512, 224)])
def test_dvbt_carriers_and_guards(mode, fft, carriers, data, useful_us):
    """Carriers, data carriers (exact), T_u and guard durations T_u/4 ... T_u/32: 224/112/56/28 us in 8k
    (EN 300 744 sect. 4.4). 6048 data carriers / 896 us = 6.75 Mbit/s per bit (calc)."""
    for guard in (4, 8, 16, 32):
        d = PRESETS[f"dvbt-{mode}-g{guard}"].design
        assert (d.fft_size, d.used_subcarriers, d.symbols_per_slot) == (fft, carriers, 68)
        assert d.data_subcarriers_per_symbol == data  # exact by construction of reserved_subcarriers
        assert_allclose(d.useful_symbol_s, useful_us * microsecond, rtol=FLOAT_RTOL)
        assert_allclose(d.cp_s, useful_us / guard * microsecond, rtol=FLOAT_RTOL)
        assert_allclose(d.data_re_per_second * (1 + 1 / guard), 6.75e6, rtol=FLOAT_RTOL)
        assert_allclose(1 / d.sample_rate_hz, 7 / 64 * microsecond, rtol=FLOAT_RTOL)  # elementary period
    if mode == "8k":
        got = [PRESETS[f"dvbt-8k-g{g}"].design.cp_s for g in (4, 8, 16, 32)]
        assert_allclose(got, [224 * microsecond, 112 * microsecond, 56 * microsecond, 28 * microsecond],
                        rtol=FLOAT_RTOL)


def test_dvbt_lattice_limits():
    """Scattered pilots reach echoes of T_u/12 = 74.7 us per symbol and T_u/3 = 298.7 us with time
    interpolation, and Doppler up to 1/(8 T_s) = 111.6 Hz in 8k at guard 1/4 (EN 300 744 sect. 4.5.3;
    Hoeher, Kaiser, Robertson, ICASSP 1997, from memory). The pattern at one carrier repeats every
    D_t x D_f / gcd(D_f, shift) symbols."""
    d = PRESETS["dvbt-8k-g4"].design
    combined = math.gcd(d.pilot_freq_spacing, d.pilot_shift)
    repeat = d.pilot_time_spacing * d.pilot_freq_spacing // combined
    assert repeat == 4
    assert_allclose(d.useful_symbol_s / d.pilot_freq_spacing, 74.7 * microsecond, atol=0.05 * microsecond)
    assert_allclose(d.useful_symbol_s / combined, 298.7 * microsecond, atol=0.05 * microsecond)
    assert_allclose(1 / (2 * repeat * d.symbol_s), 111.6, atol=0.05)


# --- DAB --------------------------------------------------------------------------------


@pytest.mark.parametrize("mode, spacing_hz, frame_ms", [(1, 1e3, 96), (2, 4e3, 24), (3, 8e3, 24), (4, 2e3, 48)])
def test_dab_frames(mode, spacing_hz, frame_ms):
    """L symbols + the null symbol fill the frame exactly, in periods T = 1/2.048 MHz (EN 300 401 sect. 14,
    from memory; the exact integer sums are the check)."""
    d = PRESETS[f"dab-mode{mode}"].design
    assert d.sample_rate_hz == DAB_SAMPLE_RATE_HZ
    assert d.subcarrier_spacing_hz == spacing_hz
    frame_samples = frame_ms * 2048
    assert d.symbols_per_slot * (d.fft_size + d.cp_samples) + d.cp_extra_samples == frame_samples
    assert_allclose(d.slot_s, frame_ms * millisecond, rtol=FLOAT_RTOL)


def test_dab_mode1_guard():
    """Mode I: 1536 carriers, 1 kHz, guard 504 T = 246 us (ETSI EN 300 401; 246 is rounded)."""
    d = PRESETS["dab-mode1"].design
    assert (d.used_subcarriers, d.cp_samples) == (1536, 504)
    assert_allclose(d.cp_s, 246 * microsecond, atol=0.5 * microsecond)
