"""Monte-Carlo OFDM link written from the signal model: transmitter, channel and an independent receiver.

:class:`LinkSimulation` sends random QAM frames of a design through a
time-varying tapped-delay-line channel, adds noise and oscillator
impairments, and runs a receiver of its own. It measures what the analytic
model (``numerology.link``) predicts, with confidence intervals, so that the
two can disagree. Nothing here calls the model's estimation, correlation or
interference code: the two share only the *declarations* of what is sent and
what a receiver may use (the :class:`~numerology.design.Design`, the pilot
arrangement of ``numerology.arrangement`` with its :func:`schedule`, and the
channel of the :class:`~numerology.environment.Environment`: taps, line of
sight, Doppler spectrum and maximum Doppler).

Transmitter
    Used subcarriers ``k = -ceil(N_u/2) .. -1, 1 .. floor(N_u/2)`` (DC left
    empty; a comb offset counts used subcarriers from the lowest one, as the
    arrangement does). A frame is what one evaluation span of the arrangement
    needs: one slot (``slot`` pilots), one packet (``packet``), one pattern
    period with the past and look-ahead symbols whose pilots the receiver may
    use (``stream``), a few symbols (``differential``), preceded by the
    symbols whose samples a late echo carries into it. Pilot-bearing symbols
    carry known unit-modulus QPSK pilots on their comb, ``pilot_boost_db``
    above the data; the other subcarriers of such a symbol carry data only
    when ``pilot_data_shared``, else nothing. Data are random unit-power
    square QAM. Each symbol is the N-point IFFT of its subcarriers at
    ``f_s = N df`` with an N_cp-sample cyclic prefix.

Channel
    ``r(t) = sum_c h_c(t) x(t - tau_c)`` over *components*: one per tap of the
    environment's profile (its scattered part) and, with a line of sight, one
    more at the first arrival (power ``los_fraction``, the environment's
    whole-channel K). A tap delay is applied exactly, fractional part
    included, as the subcarrier phase ramp ``exp(-j 2 pi k tau f_s / N)``
    (ideal band-limited interpolation of the periodic waveform); where a
    late path reaches back past the cyclic prefix, the window's first
    samples come from the previous symbol (inter-symbol interference).
    Scattered gains are sums of ``SINUSOIDS`` complex sinusoids with random
    phases and Doppler frequencies drawn by stratified sampling of the
    spectrum: ``f_D cos(alpha)`` with stratified uniform angles for the
    Clarke/Jakes spectrum (random-angle sum of sinusoids, Zheng & Xiao
    [ZX2003]_), stratified uniform on ``[-f_D, f_D]`` for ``flat``
    (Patzold [P2002]_). The line of sight is one sinusoid at ``+f_D`` with a
    random phase (``rician``); ``tracked`` shifts every frequency by minus the
    centroid ``los_fraction f_D``. Each frame is an independent realisation.
    Over each FFT window a sinusoid is expanded exactly in Legendre
    polynomials (``exp(j z u) = sum_q (2q+1) j^q j_q(z) P_q(u)``, Rayleigh's
    plane-wave expansion, ``z = pi f T_u``), cut where the neglected power is
    below ``LEGENDRE_TAIL`` of the power of the gain's variation over the
    window; so the Doppler inter-carrier interference is that of the
    sample-level channel.

Oscillator and noise
    A frequency offset and Wiener phase noise (3-dB linewidth beta: increment
    variance ``2 pi beta / f_s`` per sample) multiply the received samples;
    complex white Gaussian noise of variance ``10^(-SNR/10)`` per resource
    element (the data have unit power) is added after the FFT, which is
    equivalent in distribution to white noise on the samples. Phase-noise
    masks are not synthesised.

Receiver (its own arithmetic; LMMSE with genie second-order statistics)
    The FFT window starts after the cyclic prefix of the first arrival. For
    each data symbol the receiver takes the pilots that
    :func:`numerology.arrangement.schedule` allows (a slot's own reference
    signals, a packet's training block averaged and held, a stream's past
    pilots and look-ahead; at most ``RECEIVER_PILOT_SYMBOLS`` pilot-bearing
    symbols, the nearest) and forms the linear MMSE estimate of the channel's
    components (tap domain: the whole band at once). Its statistics are
    computed here from the channel as simulated: each component's delay and
    power, and the autocorrelation of its window-averaged gain, the expectation
    over the generator's random frequencies of ``D(f)^2 exp(j 2 pi f lag)``
    (``D`` the window average of a sinusoid) by quadrature; the oscillator's
    frequency offset and phase-noise decorrelation multiply it; the noise plus
    interference on the pilots is worked out from the same channel (Doppler
    and oscillator leakage ``1 - D^2``, the part of each late echo's samples
    that belongs to the previous symbol). In a data symbol that carries
    pilots, the common phase is then estimated from those pilots (the angle of
    ``sum y_p conj(H_hat_p x_p)``) and removed; a symbol without pilots has no
    common-phase estimate of its own. ``estimator="linear"`` instead takes
    least squares at the pilots, linear interpolation across frequency (the
    outermost pilot held beyond the comb), then linearly in time between the
    nearest usable pilot-bearing symbols before and after (or the nearest one
    held), a training block averaged first. ``differential`` designs use the
    previous symbol as the reference, scaled by its Wiener factor.

Measured figures (ratios of sums over the data resource elements of the span)
    * ``interference``: ``sum |Y - Hbar X|^2 / sum |Hbar X|^2`` without noise
      and oscillator, ``Hbar`` the true channel of the symbol (the window
      average of each component's gain, over the window samples that carry
      the current symbol): Doppler and echo interference over useful power;
    * ``estimation_mse``: ``sum |H - H_hat|^2 / sum |H|^2``, ``H`` the true
      channel as received (the oscillator's window average included) and
      ``H_hat`` the receiver's estimate after its common-phase correction;
    * ``sinr_eff``: ``sum |H_hat X|^2 / sum |Y - H_hat X|^2``: what the
      one-tap equaliser keeps over everything it leaves;
    * ``bit_error_ratio`` (QPSK, Gray mapping: the signs of the equalised
      symbol).

    Confidence intervals treat frames as independent batches: the ratio
    estimator's delta-method standard error [Cochran1977]_ and a Student-t
    quantile.

References
----------
.. [ZX2003] Y. R. Zheng, C. Xiao, "Simulation models with correct
   statistical properties for Rayleigh fading channels", IEEE Trans.
   Commun. 51(6), 2003, pp. 920-928 (from memory).
.. [P2002] M. Patzold, *Mobile Fading Channels*, Wiley, 2002, ch. 5
   (Monte-Carlo method for the Doppler frequencies; from memory).
.. [Kay1993] S. M. Kay, *Fundamentals of Statistical Signal Processing:
   Estimation Theory*, Prentice Hall, 1993, ch. 12 (linear MMSE estimator).
.. [AS1964] M. Abramowitz, I. A. Stegun, *Handbook of Mathematical Functions*,
   1964, 10.1.2 and 10.1.47 (spherical Bessel series, plane-wave expansion).
.. [Cochran1977] W. G. Cochran, *Sampling Techniques*, 3rd ed., Wiley,
   1977, sect. 6.4 (variance of a ratio estimator).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.special as sp
import scipy.stats

from . import arrangement
from .design import Design
from .environment import Environment
from .errors import InputError

__all__ = ["LinkSimulation", "SimulationResult", "simulate_link", "fading_gains", "QAM_ORDERS", "FIGURES"]

#: Sinusoids per scattered component.
SINUSOIDS = 32
#: Neglected power of the per-window Legendre expansion, relative to the power of the gain's variation.
LEGENDRE_TAIL = 1e-4
#: Highest Legendre order allowed (f_D T_u up to about 10).
MAX_LEGENDRE_ORDER = 96
#: Pilot-bearing symbols the receiver combines for one data symbol, at most (the nearest). The link model
#: states the same receiver (a test keeps the two equal); the simulator does not read the model's constant.
RECEIVER_PILOT_SYMBOLS = 4
#: Confidence level of the intervals.
CONFIDENCE = 0.95
#: Square QAM orders for the data.
QAM_ORDERS = (4, 16, 64, 256)
#: Symbols per frame of a differential design (each frame an independent realisation).
DIFFERENTIAL_SYMBOLS = 8
#: Working memory of one batch of frames, bytes (about).
BATCH_BYTES = 48 * 2**20
#: Frames in a batch, at most.
MAX_BATCH_FRAMES = 64
#: Smallest noise-plus-interference the receiver assumes on a pilot (keeps a noiseless static channel's
#: normal equations regular; far below any error that is measured).
NOISE_FLOOR = 1e-13
#: The figures measured, in report order.
FIGURES = ("interference", "estimation", "sinr_eff")
#: Receivers: the two of ``rules.estimator``, and ``perfect`` (the true channel as received: checks of the
#: channel and the noise alone).
ESTIMATORS = ("lmmse", "linear", "perfect")


def _db(x: float) -> float:
    return 10.0 * math.log10(x) if x > 0 else -math.inf


def _real(place: str, value, *, low=None, allow_inf=False) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(place, f"expected a number, got {value!r}")
    value = float(value)
    ok = (math.isfinite(value) or (allow_inf and value == math.inf)) and (low is None or value >= low)
    if not ok:
        bound = "" if low is None else f" >= {low:g}"
        raise InputError(place, f"expected a finite number{bound}, got {value!r}")
    return value


def _count(place: str, value, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low:
        raise InputError(place, f"expected a whole number >= {low}, got {value!r}")
    return int(value)


# --- fading ----------------------------------------------------------------------------------


def _frequencies(uniforms: np.ndarray, max_doppler_hz: float, spectrum: str) -> np.ndarray:
    """Doppler frequencies of the scattered sinusoids from uniforms (..., I): stratified in their last axis."""
    count = uniforms.shape[-1]
    strata = (np.arange(count) + uniforms) / count
    if spectrum == "flat":
        return max_doppler_hz * (2.0 * strata - 1.0)  # uniform on [-f_D, f_D]
    return max_doppler_hz * np.cos(2.0 * np.pi * strata)  # f_D cos(alpha): Clarke's U-shaped spectrum


def _spectrum_name(spectrum) -> str:
    if spectrum not in ("classical", "flat", "rician", "tracked"):
        raise InputError("doppler_spectrum", f"expected classical, flat, rician or tracked, got {spectrum!r}")
    return spectrum


def fading_gains(times_s, max_doppler_hz, spectrum="classical", k_factor=0.0, *, realisations=1,
                 sinusoids=SINUSOIDS, seed=0):
    """Unit-power fading gains of one component pair (scattered plus line of sight) at given times.

    The simulator's generator on its own, to check its statistics: a line of
    sight of power ``K/(K+1)`` at ``+f_D`` (``rician``; ``tracked`` shifts all
    by minus the centroid) plus the scattered sum of sinusoids.

    Parameters
    ----------
    times_s : array_like
        Sample times in s (1-D).
    max_doppler_hz : float
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : {"classical", "flat", "rician", "tracked"}
    k_factor : float
        Linear K-factor (``rician`` and ``tracked`` only).
    realisations, sinusoids, seed : int

    Returns
    -------
    numpy.ndarray of complex, shape ``(realisations, len(times_s))``

    Examples
    --------
    >>> g = fading_gains([0.0, 1e-3], 0.0, realisations=3)
    >>> g.shape, bool(np.all(np.abs(g[:, 0] - g[:, 1]) < 1e-12))
    ((3, 2), True)
    """
    t = np.asarray(times_s, dtype=float)
    f_d = _real("max_doppler_hz", max_doppler_hz, low=0.0)
    spectrum = _spectrum_name(spectrum)
    k = _real("k_factor", k_factor, low=0.0, allow_inf=True)
    n = _count("realisations", realisations, 1)
    m = _count("sinusoids", sinusoids, 1)
    los = 0.0 if spectrum in ("classical", "flat") else (1.0 if k == math.inf else k / (k + 1.0))
    rng = np.random.default_rng(seed)
    freqs = _frequencies(rng.random((n, m)), f_d, spectrum)
    phases = 2.0 * np.pi * rng.random((n, m + 1))
    freqs = np.concatenate([freqs, np.full((n, 1), f_d)], axis=1)
    if spectrum == "tracked":
        freqs = freqs - los * f_d
    amps = np.full(m + 1, math.sqrt((1.0 - los) / m))
    amps[-1] = math.sqrt(los)
    out = np.empty((n, t.size), dtype=complex)
    chunk = max(1, 2**21 // max(1, (m + 1) * t.size))
    for first in range(0, n, chunk):
        rows = slice(first, first + chunk)
        out[rows] = np.einsum("c,rct->rt", amps, np.exp(1j * (2.0 * np.pi * freqs[rows, :, None] * t
                                                              + phases[rows, :, None])))
    return out


def _legendre_order(max_abs_freq_hz: float, useful_symbol_s: float) -> int:
    """Smallest order Q whose neglected power is below LEGENDRE_TAIL of the variation's power.

    For ``exp(j z u)`` the power of order q is ``(2q+1) j_q(z)^2`` (they sum
    to 1); the orders >= 1 carry the variation over the window.
    """
    z = math.pi * max_abs_freq_hz * useful_symbol_s
    if z == 0.0:
        return 0
    q = np.arange(MAX_LEGENDRE_ORDER + 48)
    power = (2 * q + 1) * sp.spherical_jn(q, z) ** 2
    tail = np.cumsum(power[::-1])[::-1]
    for order in range(MAX_LEGENDRE_ORDER + 1):
        if tail[order + 1] <= LEGENDRE_TAIL * tail[1]:
            return order
    raise InputError("environment.max_doppler_hz",
                     f"f_D T_u = {max_abs_freq_hz * useful_symbol_s:.3g} is too large to simulate "
                     "(the channel changes completely within a symbol); use a wider subcarrier spacing")


#: Below this argument the spherical Bessel functions come from their power series (A&S 10.1.2).
SERIES_Z = 0.1
SERIES_TERMS = 7


def _spherical_bessel(order: int, z: np.ndarray) -> np.ndarray:
    """``j_q(z)`` for q = 0 .. order on a new last axis (power series for small arguments, else scipy)."""
    q = np.arange(order + 1)
    if not float(np.max(np.abs(z), initial=0.0)) < SERIES_Z:
        return sp.spherical_jn(q, z[..., None])
    shape = (order + 1,) + (1,) * z.ndim
    half_square = -0.5 * z * z
    total = np.ones((order + 1,) + z.shape)
    for k in range(SERIES_TERMS, 0, -1):  # Horner: sum_k (-z^2/2)^k / (k! (2q+3)...(2q+2k+1))
        total *= half_square
        total *= (1.0 / (k * (2 * q + 2 * k + 1))).reshape(shape)
        total += 1.0
    for order_q in range(1, order + 1):  # times z^q / (2q+1)!!
        total[order_q:] *= z / (2 * order_q + 1)
    return np.moveaxis(total, 0, -1)


# --- the channel's own statistics, as the receiver computes them -------------------------------


def _window_factor(freqs_hz, n: int, fs: float):
    """``D(f)``: the average over an N-sample window of ``exp(j 2 pi f t)`` about its centre (real)."""
    x = np.pi * np.asarray(freqs_hz, dtype=float) / fs
    small = np.abs(np.sin(x)) < 1e-300
    return np.where(small, 1.0, np.sin(n * x) / (n * np.where(small, 1.0, np.sin(x))))


def _quadrature(kind: str, max_doppler_hz: float, reach_s: float):
    """Nodes (Hz) and weights of the expectation over a scattered component's random frequency.

    ``classical``: ``f_D cos(2 pi u)``, u uniform: the midpoint rule in u
    (periodic and smooth: it converges geometrically); ``flat``: uniform on
    [-f_D, f_D], Gauss-Legendre. Enough nodes for lags up to ``reach_s``.
    """
    count = 64 + 4 * int(math.ceil(2.0 * math.pi * max_doppler_hz * reach_s))
    if kind == "flat":
        x, w = np.polynomial.legendre.leggauss(count)
        return max_doppler_hz * x, w / 2.0
    u = (np.arange(count) + 0.5) / count
    return max_doppler_hz * np.cos(2.0 * np.pi * u), np.full(count, 1.0 / count)


@dataclass(frozen=True, eq=False)
class _Channel:
    """The simulated channel as components: delay (samples from the first arrival), power, kind."""

    delays: np.ndarray  # samples
    powers: np.ndarray
    los: np.ndarray  # bool: the line-of-sight component
    max_doppler_hz: float
    spectrum: str
    shift_hz: float  # frequency shift of every component (tracked: minus the centroid)
    los_hz: float  # line-of-sight frequency before the shift


def _channel(environment: Environment, fs: float) -> _Channel:
    delays_s, powers = (np.asarray(v, dtype=float) for v in environment.taps)
    keep = powers > 0
    delays_s, powers = delays_s[keep], powers[keep] / powers[keep].sum()
    spectrum = _spectrum_name(environment.doppler_spectrum)
    los = float(environment.los_fraction) if spectrum in ("rician", "tracked") else 0.0
    first = int(np.argmin(delays_s))
    scattered = powers.copy()
    scattered[first] = max(scattered[first] - los, 0.0)
    delays = (delays_s - delays_s[first]) * fs
    comp_delays, comp_powers, comp_los = [], [], []
    if los > 0:
        comp_delays.append(0.0), comp_powers.append(los), comp_los.append(True)
    for d, p in zip(delays, scattered):
        if p > 1e-15:
            comp_delays.append(float(d)), comp_powers.append(float(p)), comp_los.append(False)
    f_d = float(environment.max_doppler_hz)
    return _Channel(np.array(comp_delays), np.array(comp_powers), np.array(comp_los, dtype=bool), f_d, spectrum,
                    -los * f_d if spectrum == "tracked" else 0.0, f_d)


def _correlations(channel: _Channel, lags_s: np.ndarray, n: int, fs: float) -> np.ndarray:
    """``E h_c(t + lag) h_c(t)^* / p_c`` of each component's window-averaged gain: array (lags, C).

    The expectation over the generator's random Doppler frequency of
    ``D(f)^2 exp(j 2 pi f lag)`` (line of sight: its one frequency).
    """
    lags_s = np.asarray(lags_s, dtype=float)
    reach = float(np.max(np.abs(lags_s), initial=0.0)) + n / fs
    kind = "flat" if channel.spectrum == "flat" else "classical"
    nodes, weights = _quadrature(kind, channel.max_doppler_hz, reach)
    nodes = nodes + channel.shift_hz
    scattered = (np.exp(2j * np.pi * lags_s[:, None] * nodes[None, :])
                 * (weights * _window_factor(nodes, n, fs) ** 2)[None, :]).sum(axis=1)
    f_los = channel.los_hz + channel.shift_hz
    los = np.exp(2j * np.pi * lags_s * f_los) * _window_factor(f_los, n, fs) ** 2
    return np.where(channel.los[None, :], los[:, None], scattered[:, None])


def _leakage(channel: _Channel, n: int, fs: float) -> np.ndarray:
    """Each component's power fraction not in its window average: ``E (1 - D(f)^2)`` (Doppler leakage)."""
    kind = "flat" if channel.spectrum == "flat" else "classical"
    nodes, weights = _quadrature(kind, channel.max_doppler_hz, n / fs)
    scattered = float(np.sum(weights * (1.0 - _window_factor(nodes + channel.shift_hz, n, fs) ** 2)))
    los = 1.0 - float(_window_factor(channel.los_hz + channel.shift_hz, n, fs)) ** 2
    return np.where(channel.los, los, scattered)


def _oscillator_correlation(lags_s, frequency_offset_hz: float, linewidth_hz: float):
    """``E exp(j (theta(t + lag) - theta(t)))``: the offset's rotation times the Wiener decay ``exp(-pi beta |lag|)``."""
    lags_s = np.asarray(lags_s, dtype=float)
    return np.exp(2j * np.pi * frequency_offset_hz * lags_s - np.pi * linewidth_hz * np.abs(lags_s))


def _oscillator_leakage(n: int, fs: float, frequency_offset_hz: float, linewidth_hz: float) -> float:
    """``1 - E |mean over the window of exp(j theta)|^2``: the oscillator's inter-carrier leakage."""
    lag = np.arange(-(n - 1), n)
    kept = np.sum((n - np.abs(lag)) * _oscillator_correlation(lag / fs, frequency_offset_hz, linewidth_hz)) / n**2
    return max(0.0, 1.0 - float(kept.real))


# --- the plan: everything that does not depend on the random draws ------------------------------


@dataclass(frozen=True)
class _Group:
    """Pilot-bearing symbols (frame indices) averaged into one observation, all on one comb."""

    symbols: tuple
    offset: int


@dataclass(frozen=True)
class _Target:
    symbol: int  # frame index
    data_offset: int  # own comb offset (-1: no pilots in the symbol)
    groups: tuple  # _Group, in time order
    span_index: int  # symbol of the span


def _qam(indices: np.ndarray, order: int) -> np.ndarray:
    """Unit-power square QAM points; for QPSK bit 0 is the sign of the real part, bit 1 of the imaginary."""
    side = int(round(math.sqrt(order)))
    levels = 2.0 * np.arange(side) - (side - 1)
    scale = math.sqrt(2.0 * (order - 1) / 3.0)
    return (levels[indices % side] + 1j * levels[indices // side]) / scale


class _Plan:
    """Layout, channel geometry and the receiver's weights of one design in one channel."""

    def __init__(self, design: Design, environment: Environment, snr_db: float, frequency_offset_hz: float,
                 linewidth_hz: float, estimator: str, lookahead: int, memory: int, qam_order: int):
        self.design = design
        self.n, self.ncp = design.fft_size, design.cp_samples
        self.fs = design.sample_rate_hz
        self.t_u = self.n / self.fs
        self.t_sym = (self.n + self.ncp) / self.fs
        self.used = design.used_subcarriers
        neg = (self.used + 1) // 2
        u = np.arange(self.used)
        self.k_phys = np.where(u < neg, u - neg, u - neg + 1)
        self.bins = self.k_phys % self.n
        self.qam_order = qam_order
        self.estimator = estimator
        self.frequency_offset_hz, self.linewidth_hz = frequency_offset_hz, linewidth_hz
        self.oscillator = frequency_offset_hz != 0 or linewidth_hz > 0
        self.noise_var = 0.0 if snr_db == math.inf else 10.0 ** (-snr_db / 10.0)
        self.boost = 10.0 ** (design.pilot_boost_db / 10.0)
        self.scope = design.pilot_scope

        ch = self.channel = _channel(environment, self.fs)
        self.components = ch.delays.size
        self.ramps = np.exp(-2j * np.pi * np.outer(ch.delays, self.k_phys) / self.n)  # (C, N_u)
        self.isi = ch.delays > self.ncp + 1e-9
        shift = abs(ch.shift_hz)
        self.order = _legendre_order(ch.max_doppler_hz + shift, self.t_u)
        window = np.arange(self.n)
        self.legendre = np.polynomial.legendre.legvander((2.0 * window - (self.n - 1)) / self.n, self.order).T
        # samples of each component's window that carry the current symbol (a late echo's first ones do not)
        self.current = window[None, :] >= (ch.delays[:, None] - self.ncp)
        self.current[~self.isi] = True
        self.current_mean = (self.current.astype(float) @ self.legendre.T) / self.n  # (C, Q+1)
        # window averages with the oscillator: the taps in the guard share one set of weights P_q / N, each late
        # echo has its own (its current-symbol samples only)
        self.window_group = np.cumsum(self.isi) * self.isi  # 0: in the guard; k: the k-th late echo
        masks = [np.ones(self.n)] + [self.current[c].astype(float) for c in np.flatnonzero(self.isi)]
        self.window_weights = np.concatenate([(mask * self.legendre).T for mask in masks], axis=1) / self.n
        self.pre = int(max(0, math.ceil((float(ch.delays.max(initial=0.0)) - self.ncp) / (self.n + self.ncp))))

        self._layout(lookahead, memory)
        self.total = self.pre + self.symbols
        read = {t.symbol for t in self.targets} | {s for t in self.targets for g in t.groups for s in g.symbols}
        if self.scope == "differential":
            read |= {t.symbol - 1 for t in self.targets}
        self.read = np.array(sorted(read))
        self.row = {int(symbol): i for i, symbol in enumerate(self.read)}
        self.is_pilot = np.zeros((self.total, self.used), dtype=bool)
        self.is_data = np.ones((self.total, self.used), dtype=bool)
        for symbol, offset in enumerate(self.offsets):
            if offset >= 0:
                comb = self._comb(int(offset))
                self.is_pilot[symbol, comb] = True
                self.is_data[symbol, comb] = False
                if not self.shared[symbol]:
                    self.is_data[symbol] = False
        self.matched = {int(o): np.ascontiguousarray(self.ramps[:, self._comb(int(o))].T.conj())
                        for o in set(self.offsets.tolist()) if o >= 0}
        # what the receiver takes as the noise plus interference on each pilot: its own sums
        fraction = self.current.mean(axis=1)
        leak = _leakage(ch, self.n, self.fs)
        doppler = float(np.sum(ch.powers * fraction**2 * leak))
        echo = float(np.sum(ch.powers * (1.0 - fraction**2)))
        osc = _oscillator_leakage(self.n, self.fs, frequency_offset_hz, linewidth_hz) if self.oscillator else 0.0
        self.disturbance = self.noise_var + doppler + echo + osc
        self.useful_powers = ch.powers * fraction**2  # each component's power in the window, as the receiver sees it
        if self.scope != "differential":
            self._weights()
        else:
            lag = np.array([0.0, self.t_sym])
            rho = _correlations(ch, lag, self.n, self.fs) * _oscillator_correlation(lag, frequency_offset_hz,
                                                                                    linewidth_hz)[:, None]
            total = rho @ self.useful_powers
            self.differential_scale = complex(total[1] / (total[0].real + self.disturbance))
        per_frame = (self.total + self.read.size * (6 + self.order + int(self.isi.sum()))) * self.n * 16
        self.batch = int(np.clip(BATCH_BYTES // max(per_frame, 1), 1, MAX_BATCH_FRAMES))

    # layout ---------------------------------------------------------------------------------
    def _comb(self, offset: int) -> np.ndarray:
        return np.arange(offset, self.used, self.design.pilot_freq_spacing)

    def _layout(self, lookahead: int, memory: int) -> None:
        d = self.design
        bits = arrangement.symbols_of(d.pilot_symbols)
        bits = tuple(b for b in bits if b < d.pilot_period)
        if self.scope == "differential":
            self.symbols = min(max(d.symbols_per_slot, 2), DIFFERENTIAL_SYMBOLS)
            self.offsets = np.full(self.pre + self.symbols, -1)
            self.offsets[self.pre] = 0  # the phase reference symbol: every used subcarrier known
            self.shared = np.zeros(self.pre + self.symbols, dtype=bool)
            self.comb_step = 1
            self.targets = tuple(_Target(self.pre + s, -1, (), s) for s in range(1, self.symbols))
            return
        self.comb_step = d.pilot_freq_spacing
        plan = arrangement.schedule(self.scope, d.pilot_symbols, d.pilot_period, d.pilot_shift, d.pilot_freq_spacing,
                                    d.symbols_per_slot, d.pilot_data_shared, lookahead, memory,
                                    RECEIVER_PILOT_SYMBOLS)
        if self.scope == "stream":
            low = min([0] + [t.symbol + min(t.pilot_lags) for t in plan.targets if t.pilot_lags])
            high = max([plan.span - 1] + [t.symbol + max(t.pilot_lags) for t in plan.targets if t.pilot_lags])
            first_time = low
            self.symbols = high - low + 1
        else:
            first_time = 0
            self.symbols = d.symbols_per_slot
        times = np.arange(-self.pre, self.symbols) + first_time  # stream time (or slot/packet symbol)
        offsets = np.full(times.size, -1)
        m = len(bits)
        for i, t in enumerate(times):
            if self.scope != "stream" and (t < 0 or t >= d.symbols_per_slot):
                continue  # an earlier slot or packet: an interference source only, as data
            period_index, r = divmod(int(t), d.pilot_period)
            if r in bits:
                j = period_index * m + bits.index(r) if self.scope == "stream" else \
                    sum(1 for tt in range(int(t)) if tt % d.pilot_period in bits)
                offsets[i] = (j * d.pilot_shift) % d.pilot_freq_spacing
        self.offsets = offsets
        self.shared = np.full(times.size, bool(d.pilot_data_shared) and d.pilot_freq_spacing > 1)
        index_of = {int(t): i for i, t in enumerate(times)}
        targets = []
        for target in plan.targets:
            n = index_of[target.symbol]
            groups = []
            lags = np.array(target.pilot_lags, dtype=int)
            for lag in sorted(set(lags.tolist())):
                count = int(np.sum(lags == lag))
                if self.scope == "packet":  # a training block: its first `count` symbols, averaged
                    end = n + lag
                    start = end
                    while start - 1 >= self.pre and offsets[start - 1] >= 0:
                        start -= 1
                    members = list(range(start, end + 1))[:count]
                else:
                    members = [n + lag]
                for offset in sorted({int(offsets[s]) for s in members}):
                    chosen = tuple(s for s in members if offsets[s] == offset)
                    if offset < 0:
                        raise AssertionError("the schedule names a symbol without pilots")
                    groups.append(_Group(chosen, offset))
            if target.data_offset != (int(offsets[n]) if offsets[n] >= 0 else -1):
                raise AssertionError("the schedule and the simulated layout disagree on a comb offset")
            targets.append(_Target(n, target.data_offset, tuple(groups), target.symbol))
        self.targets = tuple(targets)

    # receiver weights -----------------------------------------------------------------------
    def _weights(self) -> None:
        """LMMSE weights ``W = K_n (B K + S)^-1`` of every target (module docstring; Kay 1993, ch. 12).

        With z_g the matched-filter output of group g over its comb (``F^H y``),
        B the block-diagonal comb Gram matrices, K the components' covariance
        between groups and S the noise per group: the normal equations
        ``W (B K B + S B) = K_n B`` are solved by ``W = K_n (B K + S)^-1``
        (push-through), which stays regular where B is singular.
        """
        ch = self.channel
        lags = np.arange(-(self.total - 1), self.total) * self.t_sym
        rho = _correlations(ch, lags, self.n, self.fs)
        if self.oscillator:
            rho = rho * _oscillator_correlation(lags, self.frequency_offset_hz, self.linewidth_hz)[:, None]
        p = self.useful_powers
        reach = self.total - 1

        def cov(a, b):  # E h(a) h(b)^H as the diagonal of each component, averaged over the symbols of a and b
            return np.mean([rho[sa - sb + reach] for sa in a for sb in b], axis=0) * p

        self.grams = {}
        for offset in set(int(o) for o in self.offsets if o >= 0):
            f = self.ramps[:, self._comb(offset)].T  # (P, C)
            self.grams[offset] = f.conj().T @ f
        c = self.components
        self.weights = []
        for target in self.targets:
            groups = target.groups
            g = len(groups)
            if g == 0 or self.estimator != "lmmse":
                self.weights.append(None)
                continue
            k = np.zeros((g * c, g * c), dtype=complex)
            kn = np.zeros((c, g * c), dtype=complex)
            b = np.zeros((g * c, g * c), dtype=complex)
            s = np.zeros(g * c)
            for i, gi in enumerate(groups):
                rows = slice(i * c, (i + 1) * c)
                kn[:, rows] = np.diag(cov((target.symbol,), gi.symbols))
                b[rows, rows] = self.grams[gi.offset]
                s[rows] = max(self.disturbance, NOISE_FLOOR) / (self.boost * len(gi.symbols))
                for j, gj in enumerate(groups):
                    k[rows, j * c:(j + 1) * c] = np.diag(cov(gi.symbols, gj.symbols))
            self.weights.append(np.linalg.solve((b @ k + np.diag(s)).T, kn.T))  # W^T: (g C, C)


# --- one batch of frames --------------------------------------------------------------------------


def _ifft(values):
    return scipy.fft.ifft(values, axis=-1, overwrite_x=True, workers=1)


def _fft(values):
    return scipy.fft.fft(values, axis=-1, overwrite_x=True, workers=1)


def _gains(plan: _Plan, rng: np.random.Generator, frames: int) -> np.ndarray:
    """Legendre coefficients ``beta[f, c, s, q]`` of every component over every receive window of the frame.

    The sinusoids' phasors at the window centres advance by ``r = exp(j 2 pi f T_s)``
    from one window to the next: with ``s = B a + b`` the phasor is
    ``(phasor_0 r^(B a)) r^b``, two short running products, and the sum over
    the sinusoids is one small matrix product per frame and component.
    """
    ch = plan.channel
    c, count = plan.components, SINUSOIDS
    freqs = _frequencies(rng.random((frames, c, count)), ch.max_doppler_hz, ch.spectrum)
    phases = 2.0 * np.pi * rng.random((frames, c, count))
    amps = np.broadcast_to(np.sqrt(ch.powers / count)[None, :, None], freqs.shape).copy()
    if ch.los.any():  # the line of sight: one sinusoid at its frequency
        freqs[:, ch.los] = ch.los_hz
        amps[:, ch.los] = 0.0
        amps[:, ch.los, :1] = np.sqrt(ch.powers[ch.los])[None, :, None]
    freqs += ch.shift_hz
    symbols, order = plan.total, plan.order
    fine = max(1, math.isqrt(max(symbols - 1, 0)) + 1)
    coarse = -(-symbols // fine)
    q = np.arange(order + 1)
    expansion = _spherical_bessel(order, np.pi * plan.t_u * freqs) * ((2 * q + 1) * (1j**q))  # (F, C, I, Q+1)
    step = np.exp(2j * np.pi * plan.t_sym * freqs)
    powers = np.empty(freqs.shape + (fine,), dtype=complex)
    powers[..., 0] = 1.0
    for k in range(1, fine):
        powers[..., k] = powers[..., k - 1] * step
    merged = (expansion[..., :, None] * powers[..., None, :]).reshape(frames, c, count, (order + 1) * fine)
    starts = np.empty((frames, c, coarse, count), dtype=complex)
    centre0 = (plan.ncp + (plan.n - 1) / 2.0) / plan.fs
    starts[:, :, 0] = amps * np.exp(1j * (2.0 * np.pi * freqs * centre0 + phases))
    jump = powers[..., -1] * step
    for a in range(1, coarse):
        starts[:, :, a] = starts[:, :, a - 1] * jump
    beta = np.matmul(starts, merged).reshape(frames, c, coarse, order + 1, fine).transpose(0, 1, 2, 4, 3)
    return beta.reshape(frames, c, coarse * fine, order + 1)[:, :, :symbols]


def _to_bins(plan: _Plan, values: np.ndarray) -> np.ndarray:
    full = np.zeros(values.shape[:-1] + (plan.n,), dtype=complex)
    full[..., plan.bins] = values
    return full


def _oscillator_phasor(plan: _Plan, rng: np.random.Generator, frames: int) -> np.ndarray:
    """``exp(j theta)`` over the receive windows of the symbols read (F, R, N): frequency offset and Wiener noise.

    The Wiener phase advances over every sample, those between the windows
    read included (their increments are summed into one, of the gap's variance).
    """
    n, ncp, fs, read = plan.n, plan.ncp, plan.fs, plan.read
    rotation = np.exp(2j * np.pi * plan.frequency_offset_hz * ((read * (n + ncp) + ncp) / fs))[:, None] \
        * np.exp(2j * np.pi * plan.frequency_offset_hz * np.arange(n) / fs)[None, :]  # (R, N)
    if not plan.linewidth_hz > 0:
        return np.broadcast_to(rotation, (frames,) + rotation.shape)
    steps = rng.standard_normal((frames, read.size, n)) * math.sqrt(2.0 * np.pi * plan.linewidth_hz / fs)
    gaps = np.diff(read, prepend=read[0] - 1) * (n + ncp) - n + 1  # samples from the last one read, to this window
    steps[:, :, 0] *= np.sqrt(gaps)
    steps[:, 0, 0] = 0.0
    phase = np.cumsum(steps.reshape(frames, -1), axis=1).reshape(steps.shape)
    return np.exp(1j * phase) * rotation


def _batch(plan: _Plan, rng: np.random.Generator, frames: int) -> dict:
    """Per-frame sums of one batch of frames (see the module docstring for the figures).

    Every symbol of the frame is sent; only those the receiver reads
    (``plan.read``: the data symbols measured and the pilot-bearing symbols
    they use) are received, on axis 1 of the received arrays.
    """
    total, used, read = plan.total, plan.used, plan.read
    order = plan.qam_order
    data_index = rng.integers(0, order, size=(frames, total, used))
    pilot_index = rng.integers(0, 4, size=(frames, total, used))
    x = np.where(plan.is_pilot, _qam(pilot_index, 4) * math.sqrt(plan.boost),
                 np.where(plan.is_data, _qam(data_index, order), 0.0))
    beta = _gains(plan, rng, frames)  # (F, C, S, Q+1)

    inside = ~plan.isi
    # (F, R, C, Q+1): the components on the last axes, so that products with the ramps are BLAS matrix products
    gains = beta[:, :, read].transpose(0, 2, 1, 3)
    x_read = x[:, read]
    y_static = (np.ascontiguousarray(gains[:, :, inside, 0]) @ plan.ramps[inside]) * x_read  # order 0, in the guard
    varying = None
    if plan.order > 0 and inside.any():
        for q in range(1, plan.order + 1):
            part = _ifft(_to_bins(plan, (np.ascontiguousarray(gains[:, :, inside, q]) @ plan.ramps[inside]) * x_read))
            part *= plan.legendre[q]
            varying = part if varying is None else varying + part
    if plan.isi.any():
        spectrum = _to_bins(plan, x[:, np.unique(np.concatenate([read, read - 1]))])
        position = {int(symbol): i for i, symbol in enumerate(np.unique(np.concatenate([read, read - 1])))}
        now = np.array([position[int(symbol)] for symbol in read])
        before = np.array([position[int(symbol) - 1] for symbol in read])
        late = (np.arange(plan.n) + plan.ncp) % plan.n
        for c in np.flatnonzero(plan.isi):
            ramp = np.zeros(plan.n, dtype=complex)
            ramp[plan.bins] = plan.ramps[c]
            wave = _ifft(spectrum * ramp)  # the sent symbols, delayed by tau_c (periodic)
            part = np.where(plan.current[c], wave[:, now], wave[:, before][..., late])
            part *= np.ascontiguousarray(gains[:, :, c]) @ plan.legendre
            varying = part if varying is None else varying + part
    y_channel = y_static.copy()
    if varying is not None:
        y_channel += _fft(varying.copy())[..., plan.bins]
    # the true channel: each component's window average over the samples of the current symbol
    h_true = np.einsum("fscq,cq->fsc", gains, plan.current_mean) @ plan.ramps
    if plan.oscillator:
        phasor = _oscillator_phasor(plan, rng, frames)
        time = _ifft(_to_bins(plan, y_static))
        if varying is not None:
            time += varying
        time *= phasor
        y = _fft(time)[..., plan.bins]
        means = (phasor @ plan.window_weights).reshape(frames, read.size, -1, plan.order + 1)  # (F, R, groups, Q+1)
        h_rx = np.einsum("fscq,fscq->fsc", gains, means[:, :, plan.window_group]) @ plan.ramps
    else:
        y = y_channel.copy()
        h_rx = h_true
    x = x_read
    if plan.noise_var > 0:
        noise = rng.standard_normal((frames, read.size, used, 2)).view(complex)[..., 0]
        y += noise * math.sqrt(plan.noise_var / 2.0)

    sums = {key: np.zeros(frames) for key in ("interference", "useful_true", "estimation", "channel", "error",
                                              "kept", "bit_errors", "bits")}
    per_symbol = np.zeros((2, len(plan.targets)))
    tilde = {}

    def observation(symbol, offset):  # least squares at the pilots of one symbol, on one comb
        key = (symbol, offset)
        if key not in tilde:
            comb = plan._comb(offset)
            row = plan.row[symbol]
            tilde[key] = y[:, row, comb] / x[:, row, comb]
        return tilde[key]

    for index, target in enumerate(plan.targets):
        data = plan.is_data[target.symbol]
        n = plan.row[target.symbol]
        if plan.scope == "differential":
            previous = plan.row[target.symbol - 1]
            estimate = plan.differential_scale * (y[:, previous] / np.where(x[:, previous] == 0, 1.0, x[:, previous]))
        elif plan.estimator == "perfect":
            estimate = h_rx[:, n].copy()
        elif not target.groups:
            estimate = np.zeros((frames, used), dtype=complex)
        elif plan.estimator == "linear":
            estimate = _linear_estimate(plan, target, observation)
        else:
            z = np.concatenate([_group_mean([observation(s, g.offset) for s in g.symbols]) @ plan.matched[g.offset]
                                for g in target.groups], axis=1)
            estimate = (z @ plan.weights[index]) @ plan.ramps
        if target.data_offset >= 0 and plan.scope != "differential" and plan.estimator != "perfect":  # common phase from the symbol's own pilots
            comb = plan._comb(target.data_offset)
            c = np.sum(observation(target.symbol, target.data_offset) * np.conj(estimate[:, comb]), axis=1)
            estimate *= np.where(np.abs(c) > 0, c / np.where(np.abs(c) > 0, np.abs(c), 1.0), 1.0)[:, None]
        xd, yd = x[:, n, data], y[:, n, data]
        hd, hr, ed = h_true[:, n, data], h_rx[:, n, data], estimate[:, data]
        sums["interference"] += _energy(y_channel[:, n, data] - hd * xd)
        sums["useful_true"] += _energy(hd * xd)
        err = _energy(hr - ed)
        chan = _energy(hr)
        sums["estimation"] += err
        sums["channel"] += chan
        per_symbol[0, index] += err.sum()
        per_symbol[1, index] += chan.sum()
        sums["error"] += _energy(yd - ed * xd)
        sums["kept"] += _energy(ed * xd)
        if order == 4:
            equalised = yd * np.conj(ed)
            sent = data_index[:, target.symbol, data]
            sums["bit_errors"] += np.sum((equalised.real > 0) != (sent % 2 == 1), axis=1) \
                + np.sum((equalised.imag > 0) != (sent // 2 == 1), axis=1)
            sums["bits"] += 2 * int(data.sum())
    return {"sums": sums, "per_symbol": per_symbol}


def _group_mean(observations):
    """The average of a training block's observations (one symbol: itself, no copy)."""
    if len(observations) == 1:
        return observations[0]
    return sum(observations[1:], observations[0]) / len(observations)


def _energy(values: np.ndarray) -> np.ndarray:
    return np.sum(values.real**2 + values.imag**2, axis=-1)


def _linear_estimate(plan: _Plan, target: _Target, observation) -> np.ndarray:
    """Least squares at the pilots, linear across frequency, then linear in time (module docstring)."""
    position = plan.k_phys.astype(float)
    values = []
    times = []
    for group in target.groups:
        comb = plan._comb(group.offset)
        ls = _group_mean([observation(s, group.offset) for s in group.symbols])  # (F, P)
        grid = position[comb]
        if comb.size == 1:
            values.append(np.repeat(ls, plan.used, axis=1))
        else:
            slope_index = np.clip(np.searchsorted(grid, position) - 1, 0, comb.size - 2)
            frac = np.clip((position - grid[slope_index]) / (grid[slope_index + 1] - grid[slope_index]), 0.0, 1.0)
            values.append(ls[:, slope_index] * (1 - frac) + ls[:, slope_index + 1] * frac)
        times.append(max(group.symbols))
    times = np.array(times) - target.symbol
    before = np.flatnonzero(times <= 0)
    after = np.flatnonzero(times > 0)
    if before.size and (times[before[-1]] == 0 or not after.size):
        return values[before[-1]]
    if not before.size:
        return values[after[0]]
    a, b = times[before[-1]], times[after[0]]
    return values[before[-1]] * (b / (b - a)) + values[after[0]] * (-a / (b - a))


# --- results ------------------------------------------------------------------------------------------


def _ratio(num: np.ndarray, den: np.ndarray, confidence: float = CONFIDENCE):
    """Ratio of sums over frames and its confidence interval (delta method, Student t)."""
    value = float(num.sum() / den.sum()) if den.sum() > 0 else math.inf
    frames = num.size
    if frames < 2 or not math.isfinite(value):
        return value, (0.0, math.inf)
    residual = num - value * den
    se = math.sqrt(float(np.var(residual, ddof=1)) / frames) / float(den.mean())
    half = float(scipy.stats.t.ppf(0.5 + confidence / 2.0, frames - 1)) * se
    return value, (max(value - half, 0.0), value + half)


@dataclass(frozen=True)
class SimulationResult:
    """Measured link figures, linear power ratios with confidence intervals (level ``confidence``).

    ``interference``: Doppler + echo interference over useful power with the
    true channel; ``estimation_mse``: channel-estimation error over channel
    power; ``sinr_eff``: what the equaliser keeps over what it leaves;
    ``bit_error_ratio``: QPSK only (else None). ``estimation_by_symbol``:
    the estimation error of each data symbol of the span (frame order).
    """

    interference: float
    interference_ci: tuple
    estimation_mse: float
    estimation_mse_ci: tuple
    sinr_eff: float
    sinr_eff_ci: tuple
    bit_error_ratio: float | None
    bit_error_ratio_ci: tuple | None
    estimation_by_symbol: tuple
    frames: int
    symbols_per_frame: int
    data_per_frame: int
    snr_db: float
    frequency_offset_hz: float
    linewidth_hz: float
    estimator: str
    legendre_order: int
    seed: int
    confidence: float = CONFIDENCE

    @property
    def sinr_eff_db(self) -> float:
        return _db(self.sinr_eff)

    @property
    def estimation_mse_db(self) -> float:
        return _db(self.estimation_mse)

    @property
    def interference_db(self) -> float:
        return _db(self.interference)

    def __str__(self) -> str:
        return (f"simulated {self.frames} frames x {self.data_per_frame} data RE: "
                f"interference {self.interference_db:.2f} dB, estimation MSE {self.estimation_mse_db:.2f} dB, "
                f"SINR {self.sinr_eff_db:.2f} dB")


class LinkSimulation:
    """A simulation that can be continued: :meth:`run` adds frames, :meth:`result` reads what was measured.

    Batch ``b`` draws from ``numpy.random.default_rng([seed, b])`` and the batch
    size is fixed by the design, so the same seed and number of frames give
    the same figures whatever the calls.

    Parameters
    ----------
    design : Design
    environment : Environment
    snr_db : float
        Signal-to-noise ratio per resource element, dB (``math.inf``: no noise).
    frequency_offset_hz, linewidth_hz : float
        Residual frequency offset and Wiener phase-noise linewidth, Hz.
    estimator : {"lmmse", "linear"}
    lookahead, memory : int
        The receiver's allowance for stream pilots (symbols after and before).
    qam_order : int
        Square QAM order of the data (4: bit errors are counted).
    seed : int

    Raises
    ------
    InputError
        For invalid arguments or a Doppler too large to simulate.
    """

    def __init__(self, design, environment, snr_db, *, frequency_offset_hz=0.0, linewidth_hz=0.0, estimator="lmmse",
                 lookahead=3, memory=7, qam_order=4, seed=0):
        if not isinstance(design, Design):
            raise InputError("design", f"expected a numerology.design.Design, got {type(design).__name__}")
        if not isinstance(environment, Environment):
            raise InputError("environment",
                             f"expected a numerology.environment.Environment, got {type(environment).__name__}")
        snr_db = _real("snr_db", snr_db, allow_inf=True)
        frequency_offset_hz = _real("frequency_offset_hz", frequency_offset_hz)
        linewidth_hz = _real("linewidth_hz", linewidth_hz, low=0.0)
        if estimator not in ESTIMATORS:
            raise InputError("estimator", f"expected one of {', '.join(ESTIMATORS)}, got {estimator!r}")
        if qam_order not in QAM_ORDERS:
            raise InputError("qam_order", f"expected one of {', '.join(map(str, QAM_ORDERS))}, got {qam_order!r}")
        self.seed = _count("seed", seed, 0)
        self.plan = _Plan(design, environment, snr_db, frequency_offset_hz, linewidth_hz, estimator,
                          _count("lookahead", lookahead, 0), _count("memory", memory, 0), qam_order)
        self.snr_db, self.frequency_offset_hz, self.linewidth_hz = snr_db, frequency_offset_hz, linewidth_hz
        self.estimator = estimator
        self._sums: dict = {}
        self._per_symbol = np.zeros((2, len(self.plan.targets)))
        self._batches = 0
        self.frames = 0

    @property
    def batch_frames(self) -> int:
        """Frames simulated per batch (fixed by the design)."""
        return self.plan.batch

    def run(self, frames: int, progress=None) -> None:
        """Simulate about ``frames`` more frames, whole batches (the last one cut to ``frames``).

        ``progress(done, total)`` is called after each batch. A KeyboardInterrupt
        keeps every finished batch.
        """
        frames = _count("frames", frames, 1)
        goal = self.frames + frames
        while self.frames < goal:
            count = min(self.plan.batch, goal - self.frames)
            rng = np.random.default_rng([self.seed, self._batches])
            out = _batch(self.plan, rng, count)
            for key, value in out["sums"].items():
                self._sums.setdefault(key, []).append(value)
            self._per_symbol += out["per_symbol"]
            self._batches += 1
            self.frames += count
            if progress is not None:
                progress(self.frames, goal)

    def result(self) -> SimulationResult:
        """The figures measured so far (at least 2 frames)."""
        if self.frames < 2:
            raise InputError("frames", "at least 2 frames are needed for a confidence interval")
        s = {key: np.concatenate(value) for key, value in self._sums.items()}
        interference, interference_ci = _ratio(s["interference"], s["useful_true"])
        mse, mse_ci = _ratio(s["estimation"], s["channel"])
        sinr, sinr_ci = _ratio(s["kept"], s["error"])
        ber = ber_ci = None
        if self.plan.qam_order == 4 and s["bits"].sum() > 0:
            ber, ber_ci = _ratio(s["bit_errors"], s["bits"])
        by_symbol = tuple(float(e / c) if c > 0 else math.nan for e, c in self._per_symbol.T)
        return SimulationResult(
            interference=interference, interference_ci=interference_ci, estimation_mse=mse, estimation_mse_ci=mse_ci,
            sinr_eff=sinr, sinr_eff_ci=sinr_ci, bit_error_ratio=ber, bit_error_ratio_ci=ber_ci,
            estimation_by_symbol=by_symbol, frames=self.frames, symbols_per_frame=self.plan.symbols,
            data_per_frame=int(sum(int(np.count_nonzero(self._data_mask(t))) for t in self.plan.targets)),
            snr_db=self.snr_db, frequency_offset_hz=self.frequency_offset_hz, linewidth_hz=self.linewidth_hz,
            estimator=self.estimator, legendre_order=self.plan.order, seed=self.seed)

    def _data_mask(self, target: _Target) -> np.ndarray:
        mask = np.ones(self.plan.used, dtype=bool)
        if target.data_offset >= 0 and self.plan.scope != "differential":
            mask[self.plan._comb(target.data_offset)] = False
        return mask


def simulate_link(design, environment, snr_db, *, frames=64, progress=None, **options) -> SimulationResult:
    """Simulate ``frames`` frames of a design and return what was measured (see :class:`LinkSimulation`).

    Examples
    --------
    >>> from numerology.design import Design
    >>> from numerology.environment import Environment
    >>> env = Environment(2e9, 3e8, 0.15, 0.0, 0.0, "classical", 0.0, 0.0, 0.0, 0.5, math.inf,
    ...                   (0.0,), (1.0,), "flat", "", 0.0, 0.0, 0.0, math.inf)
    >>> r = simulate_link(Design("tiny", 15e3, 64, 8, 48, 4, 1, 0, 4), env, math.inf, frames=2)
    >>> r.interference < 1e-20, r.estimation_mse < 1e-9
    (True, True)
    """
    simulation = LinkSimulation(design, environment, snr_db, **options)
    simulation.run(frames, progress)
    return simulation.result()
