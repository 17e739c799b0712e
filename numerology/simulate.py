"""Monte-Carlo OFDM link: measure what ``numerology.link`` predicts.

:func:`simulate_link` sends random QAM frames with a design's pilot lattice
through a time-varying tapped-delay-line channel drawn from an
:class:`~numerology.environment.Environment`, adds noise and oscillator
impairments, and runs a receiver that uses exactly the analytic model's
channel estimator (:func:`numerology.pilots.estimator_weights`). It returns
measured power ratios with confidence intervals (:class:`SimulationResult`).

Model, step by step (all vectorised over frames, symbols and subcarriers;
Python loops run only over blocks of frames, channel taps and polynomial
orders):

Transmitter
    Used subcarriers ``k = -ceil(N_u/2) .. -1, 1 .. floor(N_u/2)`` (DC left
    empty). Pilots sit on the lattice ``(k - k_low, l) = i (D_f, 0) + j (s,
    D_t)`` counted in subcarriers from the lowest used one (DC keeps its
    place in the count, so lattice lags are true frequency lags; a lattice
    point on DC carries no pilot), with known random QPSK values of unit
    power; every other used resource element carries random unit-power
    square QAM. Each symbol is the N-point IFFT of its subcarriers at the
    design's sample rate ``f_s = N df``, preceded by its cyclic prefix (the
    waveform is cyclically extended over ``N_cp`` samples).

Channel
    ``r(t) = sum_m h_m(t) x(t - tau_m)`` with the environment's taps. Each
    tap delay is applied *exactly*, fractional part included: the delayed
    waveform of a symbol is its ideal band-limited (periodic-sinc, Dirichlet
    kernel) interpolation, i.e. the subcarrier phase ramp
    ``exp(-j 2 pi k tau_m f_s / N)`` before the IFFT, and it is used over the
    symbol's own time span (cyclic prefix included, a rectangular window);
    where a late path reaches back past the start of the cyclic prefix, the
    samples come from the previous symbol's waveform (inter-symbol
    interference). These are the samples of the continuous-time
    rectangular-pulse OFDM signal that the analytic echo model assumes; a
    truncated windowed-sinc filter on the sample stream would add filter
    transients (inter-symbol interference of its own) that the model does
    not contain. Only the receiver's FFT windows are synthesised: the cyclic
    prefix samples are discarded by the receiver and never needed. For the
    taps inside the guard, the part of the response that is constant over a
    window (order 0 below) passes the IFFT and the receiver's FFT unchanged
    (they are inverse to round-off), so it is applied on the subcarriers;
    the within-window variation, late paths and the oscillator go through
    the time domain and the receiver's FFT.

Fading
    Every tap follows the environment's Doppler spectrum (the separable
    WSSUS assumption of the analytic model), scaled to the tap's power. Each
    tap gain is a sum of ``SINUSOIDS`` complex sinusoids with independent
    uniform random phases and random Doppler frequencies drawn by stratified
    sampling of the spectrum's distribution: for the classical spectrum,
    arrival angles ``alpha_i = 2 pi (i + u_i) / n`` with ``u_i`` uniform,
    ``f_i = f_D cos(alpha_i)`` (the random-angle, random-phase sum of
    sinusoids of Zheng & Xiao [ZX2002]_, [ZX2003]_); for ``flat``, stratified
    uniform frequencies on ``[-f_D, f_D]`` (the Monte-Carlo method of
    Patzold [P2002]_). ``rician`` adds a line-of-sight component of power
    ``K/(K+1)`` at ``+f_D`` with a random phase; ``tracked`` shifts
    everything by minus the centroid ``P_los f_D``. Random phases make the
    process wide-sense stationary [PB2001]_, and over the random frequencies
    its autocorrelation equals the model's (``J0``, ``sinc`` or the Rician
    mixture) exactly. Each frame is an independent realisation.

Time variation within a symbol
    Over each FFT window a sinusoid is expanded exactly in Legendre
    polynomials of the normalised time ``u`` (Rayleigh's plane-wave
    expansion, ``exp(j z u) = sum_q (2q+1) j^q j_q(z) P_q(u)``, ``j_q`` the
    spherical Bessel function, ``z = pi f T_u``). The series is cut where the
    neglected power is below ``LEGENDRE_TAIL`` (1e-4) of the power of the
    gain's variation over the window (the orders >= 1, which make the ICI),
    so the simulated Doppler ICI is exact to about 1e-4 relative; the gain
    is evaluated at every sample: the channel changes from sample to sample
    and the Doppler ICI is that of the sample-level channel. The time-varying
    frequency response over a
    window is ``H(u, k) = sum_q P_q(u) H_q(k)``, which lets the simulator
    synthesise all taps inside the guard with one IFFT per order ``q``.

Oscillator and noise
    A carrier frequency offset ``f_o`` and Wiener phase noise with 3-dB
    linewidth ``beta`` (increment variance ``2 pi beta / f_s`` per sample,
    so ``E exp(j(theta(t) - theta(s))) = exp(-pi beta |t - s|)``, the
    convention of :mod:`numerology.oscillator`) multiply the received
    samples. Phase-noise *masks* are not synthesised (see
    :mod:`numerology.verify`). Complex white Gaussian noise of variance
    ``10^(-SNR/10)`` per resource element (the received signal has unit
    mean power per resource element, so the noise-to-signal ratio is the
    analytic model's ``1/SNR``) is added after the FFT, which is equivalent
    in distribution to adding white noise to the samples; it is drawn only
    where the receiver reads it (every resource element of the measured
    symbols, and the pilots), by the Box-Muller transform (exact in
    distribution; single-precision uniforms, see :func:`_noise`).

Receiver
    FFT window synchronised to the first tap (the ``N`` samples after the
    cyclic prefix, as the analytic model assumes); with an oscillator
    impairment, ideal common-phase correction: each symbol is derotated by
    the phase of the mean of ``exp(j theta)`` over its window, the
    correction the analytic phase-noise and frequency-offset terms assume;
    pilot-based channel estimation with the analytic model's estimator and
    weights (finite-window LMMSE or linear, :func:`pilots.estimator_weights`
    with the model's correlations and pilot SINR); one-tap equalisation.

Measured figures (ratios of sums over the measured resource elements)
    * ``interference``: Doppler and echo interference with perfect channel
      knowledge, ``sum |Y - Hbar X|^2 / sum |Hbar X|^2`` without noise or
      oscillator, where the *true channel* ``Hbar(k)`` of a symbol is the
      time average over its FFT window of the time-varying frequency
      response (for a path reaching into the previous symbol, averaged over
      the window samples that carry the current symbol, which reproduces the
      EBU weighting); this is interference over useful power;
    * ``estimation_mse``: ``sum |Hhat - H|^2 / sum |H|^2`` with ``H`` the
      true channel as received (window average including the oscillator,
      after the common-phase correction), averaged uniformly over the
      positions of a lattice cell as :func:`pilots.estimation_mse` does;
    * ``sinr_eff``: ``sum |H X|^2 / sum |Y - Hhat X|^2`` over data resource
      elements: useful power over everything the one-tap equaliser leaves
      (noise, interference, oscillator ICI, estimation error). ``evm`` is the
      rms error vector of the equalised symbols weighted by the channel
      power, ``sqrt(1 / sinr_eff)`` (an unweighted mean of
      ``|Y/Hhat - X|^2`` is dominated by deep fades and has no finite
      expectation in Rayleigh fading).

    Only resource elements whose estimator finds all its pilots inside the
    simulated band and frame are measured: frames carry extra symbols before
    and after the measured ones, and the band edges are left out.
    Confidence intervals treat frames as independent batches: ratio
    estimator with a delta-method standard error [Cochran1977]_ and a
    Student-t quantile.

Numerics (none of these changes a figure beyond round-off)
    The subcarrier-domain arithmetic (static channel, received values,
    estimates, measurements) is complex128. What goes through the time
    domain (within-window variation, late paths, oscillator) is synthesised
    in complex64 with scipy's FFT on one core: it changes the figures by
    about 1e-7 relative (tested), against Monte-Carlo intervals of about
    1e-2. The sinusoids' phasors advance from window to window by a constant
    factor, so they are a running product rather than one complex
    exponential per window. The estimator's weights are applied one
    lattice cell at a time, as a dense matrix product (:func:`_cell_estimator`);
    products with few terms (the taps' ramps, the estimator weights) run as
    real BLAS products on interleaved (real, imaginary) pairs
    (:func:`_real_form`). Random numbers are raw 64-bit words of each
    frame's PCG64 generator, turned into bytes and uniforms with whole-array
    operations (:func:`_draw`). Sums over the measured resource elements
    are dot products after zeros are scattered where nothing is summed
    (:func:`_measured_power`). Without an oscillator the symbols around the
    measured ones are synthesised and transformed like the others, but on
    the subcarriers only their pilots are formed (:func:`_margin_pilots`).
    Large intermediates live in buffers reused from block to block
    (:class:`_Workspace`).

References
----------
.. [ZX2002] Y. R. Zheng, C. Xiao, "Improved models for the generation of
   multiple uncorrelated Rayleigh fading waveforms", IEEE Commun. Lett.
   6(6), 2002, pp. 256-258 (from memory).
.. [ZX2003] Y. R. Zheng, C. Xiao, "Simulation models with correct
   statistical properties for Rayleigh fading channels", IEEE Trans.
   Commun. 51(6), 2003, pp. 920-928 (from memory).
.. [PB2001] M. F. Pop, N. C. Beaulieu, "Limitations of sum-of-sinusoids
   fading channel simulators", IEEE Trans. Commun. 49(4), 2001 (from memory).
.. [P2002] M. Patzold, *Mobile Fading Channels*, Wiley, 2002, ch. 5
   (Monte-Carlo method for the Doppler frequencies; from memory).
.. [Clarke1968] R. H. Clarke, "A statistical theory of mobile-radio
   reception", Bell Syst. Tech. J. 47(6), 1968.
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

from . import delay, doppler, oscillator, pilots
from .design import Design
from .environment import Environment
from .errors import InputError

__all__ = ["SimulationResult", "simulate_link", "fading_gains", "QAM_ORDERS"]

#: Sinusoids per tap for the diffuse part of the fading.
SINUSOIDS = 32
#: Neglected power of the per-window Legendre expansion of a tap gain, relative to the power of
#: its variation over the window (orders >= 1, the part that makes the Doppler ICI).
LEGENDRE_TAIL = 1e-4
#: Highest Legendre order allowed (f_D T_u up to about 10).
MAX_LEGENDRE_ORDER = 96
#: Pilot window of the LMMSE estimator, as in the analytic model (link.estimation_error).
ESTIMATOR_WINDOW = (4, 4)
#: Confidence level of the reported intervals.
CONFIDENCE = 0.95
#: Square QAM orders for the data subcarriers.
QAM_ORDERS = (4, 16, 64, 256)
#: Working-memory budget of one block of frames, bytes.
BLOCK_BYTES = 96 * 2**20
#: Frames handled at a time by the steps before and after the block's FFTs (their arrays stay in the cache).
CACHE_FRAMES = 1
#: Received samples aimed at when the number of frames is not given ...
AUTO_SAMPLES = 2**25
#: ... within these bounds on the number of frames.
AUTO_FRAMES = (48, 256)

# Internal switches for the tests: "auto" picks the cheaper of the two exact ways to apply the
# taps inside the guard; "taps" forces one IFFT per tap, "orders" one IFFT per Legendre order.
_TAP_PATH = "auto"
# Complex type of the time-domain synthesis (the within-window variation, late paths, oscillator).
_TIME_DTYPE = np.complex64


@dataclass(frozen=True)
class SimulationResult:
    """Measured link figures of :func:`simulate_link`, linear power ratios with confidence intervals.

    Attributes
    ----------
    interference : float
        Doppler + echo interference over useful power with perfect channel knowledge.
    interference_ci : tuple of float
        (low, high) confidence interval of ``interference``.
    estimation_mse : float
        Normalised channel-estimation MSE, ``E|Hhat - H|^2 / E|H|^2``.
    estimation_mse_ci : tuple of float
    sinr_eff : float
        Effective SINR after one-tap equalisation with the estimated channel.
    sinr_eff_ci : tuple of float
    evm : float
        Channel-weighted rms EVM of the equalised data symbols, ``1/sqrt(sinr_eff)``.
    evm_ci : tuple of float
    tap_powers : tuple of float
        Measured mean power of each tap gain (environment powers sum to 1).
    frames : int
        Independent frames simulated.
    symbols_per_frame : int
        Measured symbols per frame (the simulator adds the estimator's margins).
    measured_per_frame : int
        Measured resource elements per frame (data and pilots).
    data_per_frame : int
        Measured data resource elements per frame (used for ``sinr_eff``).
    snr_db, frequency_offset_hz, linewidth_hz : float
        The impairments simulated.
    estimator : str
    pilot_snr : float
        Pilot SINR used to design the estimator weights (as the analytic model).
    legendre_order : int
        Highest order of the per-window expansion of the tap gains.
    seed : int
    confidence : float
        Level of the intervals.
    """

    interference: float
    interference_ci: tuple
    estimation_mse: float
    estimation_mse_ci: tuple
    sinr_eff: float
    sinr_eff_ci: tuple
    evm: float
    evm_ci: tuple
    tap_powers: tuple
    frames: int
    symbols_per_frame: int
    measured_per_frame: int
    data_per_frame: int
    snr_db: float
    frequency_offset_hz: float
    linewidth_hz: float
    estimator: str
    pilot_snr: float
    legendre_order: int
    seed: int
    confidence: float = CONFIDENCE

    @property
    def interference_db(self) -> float:
        """``interference`` in dB (-inf for 0)."""
        return _db(self.interference)

    @property
    def estimation_mse_db(self) -> float:
        """``estimation_mse`` in dB."""
        return _db(self.estimation_mse)

    @property
    def sinr_eff_db(self) -> float:
        """``sinr_eff`` in dB."""
        return _db(self.sinr_eff)

    @property
    def evm_db(self) -> float:
        """``evm`` as a power ratio in dB, ``20 log10(evm) = -sinr_eff_db``."""
        return 2.0 * _db(self.evm)

    def __str__(self) -> str:
        return (f"simulated {self.frames} frames x {self.measured_per_frame} RE: "
                f"interference {self.interference_db:.2f} dB, estimation MSE {self.estimation_mse_db:.2f} dB, "
                f"SINR {self.sinr_eff_db:.2f} dB, EVM {100 * self.evm:.3g} %")


def _db(x: float) -> float:
    return 10.0 * math.log10(x) if x > 0 else -math.inf


# --- input checks ----------------------------------------------------------------


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


# --- fading ----------------------------------------------------------------------


def _los_fraction(spectrum: str, k_factor: float) -> float:
    if spectrum in ("classical", "flat"):
        return 0.0
    return 1.0 - 1.0 / (1.0 + k_factor) if math.isfinite(k_factor) else 1.0


def _sos_parameters(strata_uniforms: np.ndarray, phase_uniforms: np.ndarray, max_doppler_hz: float, spectrum: str,
                    k_factor: float):
    """Frequencies (Hz), amplitudes and phases (rad) of realisations: arrays (..., taps, sinusoids + 1).

    From uniforms in [0, 1): ``strata_uniforms`` (..., taps, sinusoids) and
    ``phase_uniforms`` (..., taps, sinusoids + 1). Column ``sinusoids`` is
    the line-of-sight component (amplitude 0 without one). Amplitudes give
    unit power per tap.
    """
    sinusoids = strata_uniforms.shape[-1]
    p_los = _los_fraction(spectrum, k_factor)
    strata = (np.arange(sinusoids) + strata_uniforms) / sinusoids  # stratified uniform in [0, 1)
    phases = -np.pi + 2.0 * np.pi * phase_uniforms  # uniform in [-pi, pi)
    freqs = np.empty(phase_uniforms.shape)
    if spectrum == "flat":
        np.multiply(max_doppler_hz, 2.0 * strata - 1.0, out=freqs[..., :-1])  # uniform on [-f_D, f_D]
    else:
        np.multiply(max_doppler_hz, np.cos(2.0 * np.pi * strata), out=freqs[..., :-1])  # f_D cos(alpha): Clarke
    freqs[..., -1] = max_doppler_hz  # LOS at +f_D
    if spectrum == "tracked":
        freqs -= p_los * max_doppler_hz  # remove the centroid, as the receiver does
    amps = np.full(phase_uniforms.shape, math.sqrt((1.0 - p_los) / sinusoids))
    amps[..., -1] = math.sqrt(p_los)
    return freqs, amps, phases


def fading_gains(times_s, max_doppler_hz, spectrum="classical", k_factor=0.0, *, realisations=1,
                 sinusoids=SINUSOIDS, seed=0):
    """Unit-power fading gains from the simulator's generator, at given times.

    The same sum-of-sinusoids generator as :func:`simulate_link` (one tap per
    realisation); exposed to check its statistics.

    Parameters
    ----------
    times_s : array_like
        Sample times in s (1-D).
    max_doppler_hz : float
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : str
        One of :data:`numerology.doppler.SPECTRA`.
    k_factor : float
        Linear Rician K-factor (``rician`` and ``tracked``).
    realisations : int
        Independent realisations.
    sinusoids : int
        Sinusoids of the diffuse part.
    seed : int
        Seed of the numpy generator.

    Returns
    -------
    numpy.ndarray of complex
        Shape ``(realisations, len(times_s))``.

    References
    ----------
    [ZX2002]_, [ZX2003]_ (random angles and phases), [P2002]_.

    Examples
    --------
    >>> g = fading_gains([0.0, 1e-3], 0.0, realisations=3)
    >>> g.shape, bool(np.allclose(g[:, 0], g[:, 1]))
    ((3, 2), True)
    """
    t = np.asarray(times_s, dtype=float)
    f_d = _real("max_doppler_hz", max_doppler_hz, low=0.0)
    doppler._spectrum(spectrum)
    k = _real("k_factor", k_factor, low=0.0, allow_inf=True)
    n = _count("realisations", realisations, 1)
    m = _count("sinusoids", sinusoids, 1)
    rng = np.random.default_rng(seed)
    strata_uniforms = rng.random((n, m))
    freqs, amps, phases = _sos_parameters(strata_uniforms, rng.random((n, m + 1)), f_d, spectrum, k)
    out = np.empty((n, t.size), dtype=complex)
    chunk = max(1, 2**21 // max(1, (m + 1) * t.size))  # bound the (realisations, sinusoids, times) temporary
    for first in range(0, n, chunk):
        rows = slice(first, first + chunk)
        phase = 2.0 * np.pi * freqs[rows, :, None] * t + phases[rows, :, None]
        out[rows] = np.einsum("rc,rct->rt", amps[rows], np.exp(1j * phase))  # sum of sinusoids
    return out


def _legendre_order(max_abs_freq_hz: float, useful_symbol_s: float) -> int:
    """Smallest order Q whose neglected power is below LEGENDRE_TAIL of the variation power.

    For ``exp(j z u)`` the power of order q is ``(2q+1) j_q(z)^2`` (they sum to
    1); orders >= 1 carry the variation over the window.
    """
    z = math.pi * max_abs_freq_hz * useful_symbol_s
    if z == 0.0:
        return 0
    q = np.arange(MAX_LEGENDRE_ORDER + 48)
    power = (2 * q + 1) * sp.spherical_jn(q, z) ** 2
    tail = np.cumsum(power[::-1])[::-1]  # tail[q] = power of the orders >= q, without cancellation
    for order in range(MAX_LEGENDRE_ORDER + 1):
        if tail[order + 1] <= LEGENDRE_TAIL * tail[1]:
            return order
    raise InputError("environment.max_doppler_hz",
                     f"f_D T_u = {max_abs_freq_hz * useful_symbol_s:.3g} is too large to simulate "
                     "(the channel changes completely within a symbol); use a wider subcarrier spacing")


# --- the plan: everything that does not depend on the random draws -----------------


@dataclass(frozen=True, eq=False)
class _Plan:
    n: int
    ncp: int
    fs: float
    t_u: float
    k_phys: np.ndarray  # physical subcarrier of each grid column (DC included)
    neg: int  # used subcarriers below DC
    pos: int  # used subcarriers above DC
    pre: int  # extra symbols sent before the frame (sources of inter-symbol interference only)
    symbols: int  # received symbols per frame (margins + measured)
    measured_symbols: int
    symbol_table: np.ndarray  # (3 x 256) complex: nothing, data point, pilot point for each random byte
    symbol_table_time: np.ndarray  # the same in the time-domain type
    symbol_offset: np.ndarray  # (pre + symbols, columns) uint16: 0 (unused), 256 (data) or 512 (pilot)
    pilot_flat: np.ndarray  # flat indices of the received-frame pilots in (symbols, columns)
    first_measured: int  # first measured symbol of the received frame
    weight_all: np.ndarray  # (measured grid,) 1 on measured REs, else 0
    unmeasured: np.ndarray  # flat indices into the measured grid of the REs that are not measured
    measured_pilots: np.ndarray  # ... and of the measured pilots (measured, not data)
    not_data: np.ndarray  # ... and of both (the REs that are not measured data)
    cell_weight: float  # the weight of every measured RE in the cell average when they are all alike, else 0
    weight_cell: np.ndarray  # (2 x measured grid) equal weight per lattice-cell position (sum 1), for (re, im)
    measured_count: int
    data_count: int
    cell_pilots: np.ndarray  # (cells, U) pilot number of each cell's pilots; the pilot count means "none"
    cell_weights: np.ndarray  # (U, D_f D_t) estimator weight of each cell pilot for each cell position
    cell_weights_real: np.ndarray  # the same in real form (see _real_form)
    grid_to_cell: np.ndarray  # (measured grid,) index into the (cells, D_f D_t) estimates
    noise_count: int  # noise values per frame: the measured symbols' grid, then the other pilots
    extra_pilot_flat: np.ndarray  # flat indices of the pilots outside the measured symbols
    extra_pilot_rows: np.ndarray  # ... their symbols
    extra_pilot_cols: np.ndarray  # ... their grid columns
    extra_pilot_bins: np.ndarray  # ... their FFT bins
    extra_pilot_ramps: np.ndarray  # (taps inside the guard, extra pilots) ramps_cols at their columns
    pilots_before: int  # pilots before the measured symbols (the first of extra_pilot_flat)
    pilots_in_rows: np.ndarray  # flat indices into the measured symbols' grid of the pilots there
    delays: np.ndarray  # tap delays in samples (float)
    amplitudes: np.ndarray  # sqrt(tap powers)
    inside: np.ndarray  # indices of the taps inside the guard
    isi: np.ndarray  # bool per tap: reaches beyond the guard
    ramps: np.ndarray  # (taps, N): exp(-j 2 pi k tau f_s / N) per FFT bin
    ramps_cols: np.ndarray  # (taps, columns)
    ramps_inside: np.ndarray  # ramps_cols of the taps inside the guard in real form (see _real_form), float64
    ramps_inside_time: np.ndarray  # the same in the real type of the time-domain samples
    source_symbol: np.ndarray  # (taps, N) symbol offset q <= 0 of each window sample
    source_index: np.ndarray  # (taps, N) index into that symbol's periodic waveform
    current_mean: np.ndarray  # (taps, Q+1) mean over the window of P_q on current-symbol samples
    true_is_static: bool  # the true channel is the static gains (no late path, orders >= 1 average to zero)
    legendre: np.ndarray  # (Q+1, N) P_q(u_n)
    legendre_scaled: np.ndarray  # P_q(u_n) / N: the 1/N of the inverse FFT, folded in (see _fft)
    legendre_time: np.ndarray  # legendre_scaled in the real type of the time-domain samples
    time_dtype: type  # complex type of the time-domain synthesis
    per_tap: bool  # taps inside the guard synthesised one IFFT per tap (else one per Legendre order)
    order: int
    spectrum: str
    max_doppler_hz: float
    k_factor: float
    sinusoids: int
    noise_std: float
    frequency_offset_hz: float
    linewidth_hz: float
    block_frames: int


def _qam(indices: np.ndarray, order: int) -> np.ndarray:
    """Unit-power square QAM points (the bit mapping is irrelevant to power ratios)."""
    side = int(round(math.sqrt(order)))
    levels = 2.0 * np.arange(side) - (side - 1)
    scale = math.sqrt(2.0 * (order - 1) / 3.0)  # rms of the square constellation
    return (levels[indices % side] + 1j * levels[indices // side]) / scale


def _layout(used_subcarriers: int, fft_size: int):
    neg = (used_subcarriers + 1) // 2
    pos = used_subcarriers // 2
    k_phys = np.arange(-neg, pos + 1)
    return k_phys, k_phys % fft_size, k_phys != 0


def _predicted_terms(design: Design, environment: Environment, snr_db, frequency_offset_hz, linewidth_hz):
    """Noise, echo, Doppler and oscillator terms with the formulas of numerology.link (no mask)."""
    delays, powers = environment.taps
    _, echo_i = delay.echo_interference(delays, powers, design.cp_s, design.useful_symbol_s)
    echo_u = 1.0 - echo_i
    return {
        "noise": 0.0 if snr_db == math.inf else 10.0 ** (-snr_db / 10.0),
        "echo": echo_i / echo_u,
        "doppler": float(doppler.doppler_ici(environment.max_doppler_hz, design.useful_symbol_s,
                                             environment.doppler_spectrum, environment.k_factor)),
        "phase_noise": float(oscillator.wiener_phase_noise_ici(linewidth_hz, design.useful_symbol_s)),
        "frequency_offset": float(oscillator.cfo_ici(frequency_offset_hz, design.subcarrier_spacing_hz)),
    }


def _weights(design: Design, environment: Environment, pilot_snr: float, estimator: str):
    delays, powers = environment.taps
    f_d, spectrum, k = environment.max_doppler_hz, environment.doppler_spectrum, environment.k_factor

    def freq_correlation(lag_hz):
        return delay.frequency_correlation(lag_hz, delays, powers)

    def time_correlation(lag_s):
        return doppler.doppler_autocorrelation(lag_s, f_d, spectrum, k)

    d_f, d_t = design.pilot_freq_spacing, design.pilot_time_spacing
    cell = np.arange(d_f * d_t)
    return pilots.estimator_weights(d_f, d_t, design.pilot_shift, design.subcarrier_spacing_hz, design.symbol_s,
                                    freq_correlation, time_correlation, pilot_snr, cell % d_f, cell // d_f,
                                    estimator, ESTIMATOR_WINDOW)


def _lattice_class(l, col, design: Design):
    """Cell position p = l0 D_f + k0 of resource elements (l, col) (col counted from the lowest used subcarrier)."""
    d_f, d_t, s = design.pilot_freq_spacing, design.pilot_time_spacing, design.pilot_shift
    j = np.floor_divide(l, d_t)
    return (l - j * d_t) * d_f + np.mod(col - j * s, d_f)


def _dense_unique(keys: np.ndarray):
    """``np.unique(keys, return_inverse=True)`` for integers of a small range, by a presence table (no sort)."""
    low = int(keys.min())
    present = np.zeros(int(keys.max()) - low + 1, dtype=bool)
    present[keys - low] = True
    values = np.flatnonzero(present)
    rank = np.cumsum(present) - 1
    return values + low, rank[keys - low]


def _cell_estimator(pw, active: np.ndarray, design: Design, first: int, measured_symbols: int,
                    pilot_number: np.ndarray):
    """The channel estimator as one matrix product per lattice cell, with the weights of ``pw`` unchanged.

    A lattice cell is the ``D_f D_t`` positions that :func:`_lattice_class`
    numbers from one pilot (its origin). Each position interpolates from
    pilots at fixed offsets from the origin; over all positions these are
    ``U`` pilots (20 for a 4 x 4 LMMSE window on a 6 x 4 staggered lattice),
    so the estimates of a cell are its ``U`` pilots times a ``(U, D_f D_t)``
    weight matrix (zero where a position does not use a pilot), and the
    estimates of all cells of a block are one matrix product: about 25 times
    fewer gathered pilots than per resource element, and dense arithmetic.
    A pilot outside the band or on DC gets the number ``pilot count``, read
    as zero; resource elements that need one are not measured anyway.

    Returns ``(cell_pilots, cell_weights, grid_to_cell, complete, position)``:
    the pilot number of each cell's pilots (cells, U), the weight matrix, and
    for each resource element of the measured symbols (C order) its index
    into the flattened ``(cells, D_f D_t)`` estimates, whether every pilot
    its estimator uses is there, and its cell position (:func:`_lattice_class`).
    """
    d_f, d_t = design.pilot_freq_spacing, design.pilot_time_spacing
    rows, cols = pilot_number.shape
    positions = d_f * d_t
    position = np.broadcast_to(np.arange(positions)[:, None], active.shape)
    off_col = np.where(active, position % d_f + pw.subcarrier_offset, 0)  # pilot offsets from the origin
    off_row = np.where(active, position // d_f + pw.symbol_offset, 0)
    span = int(off_col.max() - off_col.min()) + 1
    key = (off_row - off_row.min()) * span + (off_col - off_col.min())
    union, slot = np.unique(key[active], return_inverse=True)
    union_row = union // span + off_row.min()
    union_col = union % span + off_col.min()
    cell_weights = np.zeros((union.size, positions), dtype=complex)
    np.add.at(cell_weights, (slot, position[active]), pw.weights[active])

    grid_row, grid_col = np.divmod(np.arange(measured_symbols * cols), cols)
    grid_row = grid_row + first
    cls = _lattice_class(grid_row, grid_col, design)
    origin_row = grid_row - cls // d_f
    origin_col = grid_col - cls % d_f
    cell_key = origin_row * (cols + d_f) + (origin_col + d_f)  # origin_col >= 1 - D_f
    cells, cell = _dense_unique(cell_key)
    pilot_row = (cells // (cols + d_f))[:, None] + union_row[None, :]
    pilot_col = (cells % (cols + d_f) - d_f)[:, None] + union_col[None, :]
    inside = (pilot_row >= 0) & (pilot_row < rows) & (pilot_col >= 0) & (pilot_col < cols)
    number = pilot_number[np.clip(pilot_row, 0, rows - 1), np.clip(pilot_col, 0, cols - 1)]
    present = inside & (number >= 0)
    cell_pilots = np.where(present, number, int(pilot_number.max()) + 1)
    needs = np.zeros(cell_weights.shape)  # which pilots each position uses
    needs[slot, position[active]] = 1.0
    complete = ((~present).astype(float) @ needs) == 0  # (cells, positions): every pilot it uses is there
    grid = cell * positions + cls
    return cell_pilots, cell_weights, grid, complete.ravel()[grid], cls


def _real_form(matrix: np.ndarray) -> np.ndarray:
    """The real (2K, 2N) matrix ``R`` with ``(a @ matrix).view(float) == a.view(float) @ R`` for complex ``a``.

    Rows 2m and 2m+1 take the real and imaginary part of ``a[..., m]``:
    ``(x + jy) M = x M + y (jM)``, and each complex row is stored as
    interleaved (real, imaginary) pairs. A complex product with few terms
    (K taps) runs faster as this real product in BLAS (about 0.7 times the
    time of the complex one here), with the same arithmetic.
    """
    real = np.empty((2 * matrix.shape[0], 2 * matrix.shape[1]))
    real[0::2] = np.ascontiguousarray(matrix).view(float)
    real[1::2] = np.ascontiguousarray(1j * matrix).view(float)
    return real


def _plan(design, environment, snr_db, frequency_offset_hz, linewidth_hz, estimator, symbols_per_frame,
          qam_order):
    n, ncp = design.fft_size, design.cp_samples
    fs = design.sample_rate_hz
    k_phys, bins, used = _layout(design.used_subcarriers, n)
    cols = k_phys.size

    # estimator: weights per lattice-cell position, exactly those of the analytic model
    terms = _predicted_terms(design, environment, snr_db, frequency_offset_hz, linewidth_hz)
    total = sum(terms.values())
    pilot_snr = math.inf if total == 0 else 1.0 / total  # as link.evaluate: pilots see every other term
    pw = _weights(design, environment, pilot_snr, estimator)
    active = pw.weights != 0
    dl = np.where(active, pw.symbol_offset, 0)
    margin_lo = int(max(0, -dl.min()))
    margin_hi = int(max(0, dl.max()))
    d_t = design.pilot_time_spacing
    if symbols_per_frame is None:
        symbols_per_frame = max(design.symbols_per_slot, d_t)
    measured_symbols = -(-symbols_per_frame // d_t) * d_t  # whole lattice periods: every cell position alike
    symbols = margin_lo + measured_symbols + margin_hi

    # taps: delays in samples from the first arrival (the window is synchronised to it)
    delays_s, powers = environment.taps
    keep = powers > 0
    delays_s, powers = delays_s[keep], powers[keep] / powers[keep].sum()
    delays = (delays_s - delays_s.min()) * fs
    isi = delays > ncp + 1e-9
    window = np.arange(n)
    # symbol offset q of each window sample: the sent symbol whose span (CP included) holds t - tau
    source_symbol = np.floor((window[None, :] - delays[:, None] + ncp) / (n + ncp)).astype(np.int64)
    source_symbol = np.where(isi[:, None], source_symbol, 0)
    source_index = np.mod(window[None, :] - source_symbol * ncp, n)
    pre = int(max(0, -source_symbol.min()))

    # Legendre expansion of the tap gains over each window
    p_los = _los_fraction(environment.doppler_spectrum, environment.k_factor)
    f_max = environment.max_doppler_hz * (1.0 + p_los if environment.doppler_spectrum == "tracked" else 1.0)
    order = _legendre_order(f_max, design.useful_symbol_s)
    u = (2.0 * window - (n - 1)) / n
    legendre = np.polynomial.legendre.legvander(u, order).T  # (Q+1, N)
    current = (source_symbol == 0)  # (taps, N)
    current_mean = current.astype(float) @ legendre.T / n  # (taps, Q+1)
    # a whole window is symmetric in u, so odd orders average to zero exactly for the taps inside the guard
    current_mean[np.ix_(~isi, np.arange(1, order + 1, 2))] = 0.0

    signed_bins = np.fft.fftfreq(n, 1.0 / n)
    ramps = np.exp(-2j * np.pi * np.outer(delays, signed_bins) / n)  # ideal fractional delay per subcarrier
    ramps_cols = ramps[:, bins]

    # pilot and data masks over the sent symbols (the lattice continues into the extra symbols)
    l_all = np.arange(-pre, symbols)[:, None]
    col = np.arange(cols)[None, :]
    on_lattice = (np.mod(l_all, d_t) == 0) & (np.mod(col - np.floor_divide(l_all, d_t) * design.pilot_shift,
                                                      design.pilot_freq_spacing) == 0)
    pilot_mask = on_lattice & used[None, :]
    data_mask = ~on_lattice & used[None, :]
    received_pilots = pilot_mask[pre:]
    pilot_number = np.full(received_pilots.shape, -1, dtype=np.int64)
    pilot_number[received_pilots] = np.arange(int(received_pilots.sum()))
    pilot_flat = np.flatnonzero(received_pilots)

    # measured resource elements: every used RE of the measured symbols whose estimator finds its pilots
    cell_pilots, cell_weights, grid_to_cell, complete, grid_class = _cell_estimator(pw, active, design, margin_lo,
                                                                        measured_symbols, pilot_number)
    grid_rows = np.flatnonzero(complete & np.tile(used, measured_symbols))  # measured grid, C order
    if not grid_rows.size:
        raise InputError("design", f"{design.name!r}: no resource element has every pilot its {estimator} estimator "
                                   "needs inside the used band; the band is narrower than the estimator's reach")
    # only the cells that hold a measured RE are estimated; the others' REs read cell 0 (never summed)
    positions = cell_weights.shape[1]
    kept = _dense_unique(grid_to_cell[grid_rows] // positions)[0]
    renumber = np.zeros(cell_pilots.shape[0], dtype=np.int64)
    renumber[kept] = np.arange(kept.size)
    cell_pilots = cell_pilots[kept]
    grid_to_cell = renumber[grid_to_cell // positions] * positions + grid_to_cell % positions
    cls = grid_class[grid_rows]
    counts = np.bincount(cls, minlength=pw.mse.size)
    weight_all = np.zeros(measured_symbols * cols)
    weight_all[grid_rows] = 1.0
    weight_cell = np.zeros(measured_symbols * cols)
    weight_cell[grid_rows] = 1.0 / (counts[cls] * np.count_nonzero(counts))  # each cell position alike, sum 1
    weight_data = weight_all * data_mask[pre + margin_lo:pre + margin_lo + measured_symbols].ravel()

    # noise is drawn where it is read: every RE of the measured symbols, then the other pilots
    pilot_row = pilot_flat // cols
    in_rows = (pilot_row >= margin_lo) & (pilot_row < margin_lo + measured_symbols)
    extra_pilot_flat = pilot_flat[~in_rows]
    symbol_table = np.concatenate([np.zeros(256), _qam(np.arange(256) % qam_order, qam_order),
                                   _qam(np.arange(256) % 4, 4)])
    symbol_offset = np.where(pilot_mask, 512, np.where(data_mask, 256, 0)).astype(np.uint16)
    time_dtype = np.dtype(_TIME_DTYPE).type
    taps_inside = np.flatnonzero(~isi)

    # memory: about (Q + 8) complex arrays of (symbols x N) per frame
    per_frame = (pre + symbols) * n * 16 * (order + 10)
    block_frames = max(1, BLOCK_BYTES // per_frame)
    return _Plan(
        n=n, ncp=ncp, fs=fs, t_u=design.useful_symbol_s, k_phys=k_phys, neg=int((k_phys < 0).sum()),
        pos=int((k_phys > 0).sum()), pre=pre, symbols=symbols, measured_symbols=measured_symbols,
        symbol_table=symbol_table, symbol_table_time=symbol_table.astype(time_dtype), symbol_offset=symbol_offset,
        pilot_flat=pilot_flat,
        first_measured=margin_lo, weight_all=weight_all, unmeasured=np.flatnonzero(weight_all == 0),
        measured_pilots=np.flatnonzero((weight_all != 0) & (weight_data == 0)),
        not_data=np.flatnonzero(weight_data == 0),
        cell_weight=float(weight_cell[grid_rows[0]]) if np.all(weight_cell[grid_rows] == weight_cell[grid_rows[0]])
        else 0.0, weight_cell=np.repeat(weight_cell, 2),
        measured_count=int(weight_all.sum()), data_count=int(weight_data.sum()), cell_pilots=cell_pilots,
        cell_weights=cell_weights, cell_weights_real=_real_form(cell_weights), grid_to_cell=grid_to_cell,
        noise_count=measured_symbols * cols + extra_pilot_flat.size,
        extra_pilot_flat=extra_pilot_flat, extra_pilot_rows=extra_pilot_flat // cols,
        extra_pilot_cols=extra_pilot_flat % cols, extra_pilot_bins=bins[extra_pilot_flat % cols],
        extra_pilot_ramps=ramps_cols[taps_inside][:, extra_pilot_flat % cols],
        pilots_before=int(np.count_nonzero(pilot_row < margin_lo)),
        pilots_in_rows=pilot_flat[in_rows] - margin_lo * cols, delays=delays, amplitudes=np.sqrt(powers),
        inside=taps_inside, isi=isi,
        ramps=ramps.astype(time_dtype), ramps_cols=ramps_cols, ramps_inside=_real_form(ramps_cols[taps_inside]),
        ramps_inside_time=_real_form(ramps_cols[taps_inside]).astype(np.finfo(time_dtype).dtype),
        source_symbol=source_symbol,
        source_index=source_index, current_mean=current_mean,
        true_is_static=not isi.any() and not current_mean[:, 1:].any(),
        legendre=legendre, legendre_scaled=legendre / n,
        legendre_time=(legendre / n).astype(np.finfo(time_dtype).dtype),
        time_dtype=time_dtype, per_tap=_TAP_PATH == "taps" or (_TAP_PATH == "auto" and taps_inside.size <= order),
        order=order, spectrum=environment.doppler_spectrum, max_doppler_hz=environment.max_doppler_hz,
        k_factor=environment.k_factor, sinusoids=SINUSOIDS, noise_std=math.sqrt(terms["noise"]),
        frequency_offset_hz=frequency_offset_hz, linewidth_hz=linewidth_hz, block_frames=block_frames,
    ), pilot_snr


# --- one block of frames ---------------------------------------------------------


class _Workspace:
    """Scratch arrays reused from one block of frames to the next.

    A fresh multi-megabyte numpy array is fresh memory from the operating
    system, and its first touch costs a page fault per 4 KiB: in the
    simulator that was about as long as the arithmetic. The block's large
    intermediates are written into these buffers instead (``out=``), each
    allocated at its first request; a shorter last block uses their first
    frames. Results never live here: every buffer is overwritten by the next
    block (or the next frames of the block).
    """

    def __init__(self):
        self._buffers = {}

    def __call__(self, name: str, frames: int, shape: tuple, dtype) -> np.ndarray:
        """Buffer ``name`` of shape ``(frames,) + shape``, uninitialised."""
        buffer = self._buffers.get(name)
        if buffer is None or buffer.shape[0] < frames or buffer.shape[1:] != shape or buffer.dtype != dtype:
            buffer = self._buffers[name] = np.empty((frames,) + shape, dtype=dtype)
        return buffer[:frames]


def _fft(values: np.ndarray, inverse: bool = False, scaled: bool = True) -> np.ndarray:
    """FFT (or inverse) over the last axis on one core; ``values`` may be overwritten (pocketfft in scipy).

    ``scaled=False`` leaves out the inverse's factor 1/N, for callers that
    multiply the samples by a window anyway and fold 1/N into it (one pass
    over the block less; exact for a power-of-two N).
    """
    if not inverse:
        return scipy.fft.fft(values, axis=-1, overwrite_x=True, workers=1)
    return scipy.fft.ifft(values, axis=-1, overwrite_x=True, workers=1, norm="backward" if scaled else "forward")


def _to_bins(values: np.ndarray, plan: _Plan, factor: np.ndarray = None, out: np.ndarray = None) -> np.ndarray:
    """Grid columns (..., columns) -> FFT bins (..., N) of the time-domain type, zero outside the used band.

    With ``factor`` (same grid) the bins hold ``values * factor``, formed without a temporary; ``out``
    receives them if given.
    """
    n, neg, pos = plan.n, plan.neg, plan.pos
    full = np.empty(values.shape[:-1] + (n,), dtype=plan.time_dtype) if out is None else out
    full[..., pos + 1:n - neg] = 0.0
    if factor is None:
        full[..., n - neg:] = values[..., :neg]  # negative frequencies
        full[..., :pos + 1] = values[..., neg:]  # DC (empty) and positive frequencies
    else:
        np.multiply(values[..., :neg], factor[..., :neg], out=full[..., n - neg:])
        np.multiply(values[..., neg:], factor[..., neg:], out=full[..., :pos + 1])
    return full


def _from_bins(full: np.ndarray, plan: _Plan, out: np.ndarray = None) -> np.ndarray:
    """FFT bins (..., N) -> grid columns (..., columns), complex128 (into ``out`` if given)."""
    if out is None:
        out = np.empty(full.shape[:-1] + (plan.k_phys.size,), dtype=complex)
    np.copyto(out[..., :plan.neg], full[..., plan.n - plan.neg:])
    np.copyto(out[..., plan.neg:], full[..., :plan.pos + 1])
    return out


def _accumulate(total, part):
    return part if total is None else np.add(total, part, out=total)


def _power(values: np.ndarray, weights2: np.ndarray) -> np.ndarray:
    """Per-frame weighted sum of |values|^2 (F, L), squares formed in ``values``; ``weights2`` repeats each
    weight for (re, im)."""
    flat = values.reshape(values.shape[0], -1).view(np.float64)
    return np.square(flat, out=flat) @ weights2


def _measured_power(values: np.ndarray, plan: _Plan, data: bool = False):
    """Per-frame sum of |values|^2 (F, measured grid) over the measured resource elements, and with
    ``data`` also over the measured data resource elements (a second array); with ``data="only"``, only that.

    ``values`` is overwritten: it is set to zero where it is not summed, then
    summed whole (a scatter of zeros to a tenth of it and one BLAS dot
    product, instead of squares and a product with a weight vector).
    """
    flat = values.view(np.float64)
    if data == "only":
        values[:, plan.not_data] = 0.0
        return np.vecdot(flat, flat)
    values[:, plan.unmeasured] = 0.0
    total = np.vecdot(flat, flat)
    if not data:
        return total
    values[:, plan.measured_pilots] = 0.0
    return total, np.vecdot(flat, flat)


def _measured_power_kept(values: np.ndarray, plan: _Plan):
    """:func:`_measured_power` with ``data=True`` without overwriting ``values``.

    The whole sum less the sums over the few resource elements that are not
    summed (gathered): for values of like size everywhere (a received
    signal) the difference loses about 1e-16 relative, not for values tiny
    where measured and large elsewhere (estimation errors: use
    :func:`_measured_power`).
    """
    flat = values.view(np.float64)
    unmeasured = np.take(values, plan.unmeasured, axis=1).view(np.float64)
    pilots_measured = np.take(values, plan.measured_pilots, axis=1).view(np.float64)
    total = np.vecdot(flat, flat) - np.vecdot(unmeasured, unmeasured)
    return total, total - np.vecdot(pilots_measured, pilots_measured)


def _cell_power(values: np.ndarray, plan: _Plan) -> np.ndarray:
    """Per-frame average of |values|^2 (F, measured grid) over the lattice-cell positions; overwrites ``values``."""
    if plan.cell_weight:  # every measured RE weighs the same (the usual case: whole periods, no edge effect)
        return plan.cell_weight * _measured_power(values, plan)
    return _power(values, plan.weight_cell)


@dataclass(frozen=True)
class _Draws:
    """The random numbers of a block of frames (leading axis: frame)."""

    index: np.ndarray  # (F, pre + S, columns) uint16: row of plan.symbol_table of each sent resource element
    freqs: np.ndarray  # (F, taps, sinusoids + 1) sum-of-sinusoids frequencies, Hz
    amps: np.ndarray  # amplitudes
    phases: np.ndarray  # phases, rad
    increments: np.ndarray  # (F, S, N) standard normal phase-noise increments, or None
    generators: tuple  # per frame, its bit generator, which draws the noise words last (see noise())
    noise_count: int  # noise values per frame, 0 for none

    def noise(self, frames: slice) -> np.ndarray:
        """Two random 32-bit words per noise value of some frames, (F, 2, noise values), or None.

        Drawn when needed, the last from each frame's generator: the words
        are then still in the processor's cache when they are converted.
        """
        if not self.noise_count:
            return None
        words = [bits.random_raw(self.noise_count).view(np.uint32).reshape(2, -1)
                 for bits in self.generators[frames]]
        return words[0][None] if len(words) == 1 else np.stack(words)


#: Random bits behind a double-precision uniform (as numpy's ``Generator.random``).
_DOUBLE_BITS = 53


def _draw(plan: _Plan, seeds, work: _Workspace) -> _Draws:
    """All random numbers of a block of frames; frame f draws from its own ``seeds[f]`` in a fixed order.

    So results do not depend on the block size. Each frame takes one run of
    64-bit words from its own PCG64 generator (numpy's default; raw words
    cost about 1.1 ns per 32 bits, three times less than numpy's uniform and
    integer samplers, which go through a function call per value): one byte
    per sent resource element, which selects its data or pilot point
    (:attr:`_Plan.symbol_table`); a double-precision uniform per fading
    parameter, from the top 53 bits of a word (exactly numpy's
    ``Generator.random``); then the phase-noise increments (numpy's normal
    sampler on the same generator); last, when the frame is measured, two
    32-bit words per noise value (Box-Muller, see :func:`_noise`), only where
    noise is read (:meth:`_Draws.noise`). Words are turned into values with
    whole-array operations.
    """
    frames = len(seeds)
    taps, sinusoids = plan.delays.size, plan.sinusoids
    sent = plan.symbol_offset.size
    byte_words = -(-sent // 8)
    fading_words = taps * (2 * sinusoids + 1)
    index = work("index", frames, plan.symbol_offset.shape, np.uint16)
    increments = work("increments", frames, (plan.symbols, plan.n), float) if plan.linewidth_hz > 0 else None
    fading = np.empty((frames, fading_words), dtype=np.uint64)
    generators = tuple(np.random.PCG64(seed) for seed in seeds)
    for f, bits in enumerate(generators):
        words = bits.random_raw(byte_words + fading_words)
        np.add(words[:byte_words].view(np.uint8)[:sent].reshape(plan.symbol_offset.shape), plan.symbol_offset,
               out=index[f])
        fading[f] = words[byte_words:]
        if increments is not None:
            np.random.Generator(bits).standard_normal(out=increments[f])
    uniforms = (fading >> np.uint64(64 - _DOUBLE_BITS)) * 2.0**-_DOUBLE_BITS
    freqs, amps, phases = _sos_parameters(uniforms[:, :taps * sinusoids].reshape(frames, taps, sinusoids),
                                          uniforms[:, taps * sinusoids:].reshape(frames, taps, sinusoids + 1),
                                          plan.max_doppler_hz, plan.spectrum, plan.k_factor)
    return _Draws(index, freqs, amps, phases, increments, generators, plan.noise_count if plan.noise_std > 0 else 0)


#: Random bits behind each single-precision uniform of the noise.
_NOISE_BITS = 24


def _noise(words: np.ndarray, std: float, work: _Workspace):
    """Complex white Gaussian noise of variance ``std**2``: real and imaginary parts (F, L), float32.

    ``words`` (F, 2, L, overwritten) holds two random 32-bit words for each value; the
    top 24 bits of each make a uniform ``u`` (resp. ``v``) in [0, 1),
    exactly a float32 (as numpy's single-precision ``Generator.random``).
    Box-Muller in polar form: ``|n|^2 = -std^2 ln(1 - u)`` is exponential
    and the phase ``2 pi v`` uniform, independent, which is the circular
    complex Gaussian exactly (G. E. P. Box, M. E. Muller, Ann. Math. Stat.
    29(2), 1958). Single precision suffices: the uniforms are multiples of
    2^-24, so ``|n|^2 / std^2`` is cut at 16.6 (probability 6e-8) and its
    steps are below 1e-7 relative; the noise is added to double-precision
    values.
    """
    frames, _, count = words.shape
    shifted = np.right_shift(words, 32 - _NOISE_BITS, out=words)
    integers = work("noise_integers", frames, (2, count), np.float32)
    np.copyto(integers, shifted.view(np.int32), casting="unsafe")  # exact: below 2^24 (int32 converts faster)
    step = 2.0**-_NOISE_BITS
    radius = np.multiply(integers[:, 0], np.float32(-step), out=work("noise_radius", frames, (count,), np.float32))
    radius += np.float32(1.0)  # 1 - u, exact
    np.log(radius, out=radius)
    radius *= np.float32(-std * std)
    np.sqrt(radius, out=radius)
    angle = integers[:, 1]
    angle *= np.float32(2.0 * np.pi * step)
    real = np.cos(angle, out=work("noise_real", frames, (count,), np.float32))
    real *= radius
    np.multiply(np.sin(angle, out=angle), radius, out=radius)
    return real, radius


#: Below this argument the spherical Bessel functions are summed from their power series.
SERIES_Z = 0.1
#: Terms of that series: each is at most z^2 / 6 of the one before (1.7e-3 at SERIES_Z), so 7 terms reach
#: 1e-19 at SERIES_Z; smaller arguments need fewer (SERIES_REACH).
SERIES_TERMS = 7
#: Size of the last term summed, relative to the first.
SERIES_REACH = 1e-19


def _spherical_bessel(order: int, z: np.ndarray) -> np.ndarray:
    """``j_q(z)`` for q = 0 .. order, on a new last axis.

    For ``max |z| < SERIES_Z`` (f_D T_u below 0.03: nearly every link) the
    power series ``j_q(z) = z^q / (2q+1)!! sum_k (-z^2/2)^k / (k! (2q+3)
    (2q+5) ... (2q+2k+1))`` (Abramowitz & Stegun 10.1.2), summed by Horner's
    rule, is exact to double precision and much cheaper than
    ``scipy.special.spherical_jn``, which is used otherwise.
    """
    q = np.arange(order + 1)
    largest = float(np.max(np.abs(z), initial=0.0))
    if not largest < SERIES_Z:
        return sp.spherical_jn(q, z[..., None])
    ratio = largest * largest / 6.0  # bound of a term over the one before
    terms = SERIES_TERMS
    if ratio > 0.0:
        terms = min(terms, max(1, math.ceil(math.log(SERIES_REACH) / math.log(ratio))))
    # order on the leading axis while summing: numpy's loops then run over z, not over the few orders
    shape = (order + 1,) + (1,) * z.ndim
    half_square = -0.5 * z * z
    total = np.ones((order + 1,) + z.shape)
    for k in range(terms, 0, -1):
        total *= half_square
        total *= (1.0 / (k * (2 * q + 2 * k + 1))).reshape(shape)
        total += 1.0
    for order_q in range(1, order + 1):  # z^q / (2q+1)!! by repeated products (a float power costs 40 ns)
        total[order_q:] *= z / (2 * order_q + 1)
    return np.moveaxis(total, 0, -1)


def _tap_gains(plan: _Plan, freqs: np.ndarray, amps: np.ndarray, phases: np.ndarray, work: _Workspace):
    """Legendre coefficients ``beta[f, m, s, q]`` of each tap over each receive window, and each tap's power.

    The sinusoids' phasors at the window centres advance by the same factor
    ``r = exp(j 2 pi f (N + N_cp) / f_s)`` from one window to the next, so
    they are products of powers of ``r`` rather than one complex exponential
    per window: with ``s = B a + b`` (B about sqrt(S)), the phasor of window
    ``s`` is ``(phasor_0 r^(B a)) r^b``, two short running products (round-off
    about 1e-16 per factor). The second factor is merged with the Legendre
    expansion first, ``G[b, q] = r^b E[q]`` (and a column of ones for the
    gain at the window centre), so that the sum over the sinusoids is one
    small matrix product per frame and tap, ``beta[a, b, q] = sum_c
    (phasor_0 r^(B a))_c G_c[b, q]``: no (windows x sinusoids) array is formed.
    """
    n, ncp, fs, symbols, order = plan.n, plan.ncp, plan.fs, plan.symbols, plan.order
    frames, taps, count = freqs.shape
    fine = max(1, math.isqrt(symbols - 1) + 1)
    coarse = -(-symbols // fine)
    step = np.exp((2j * np.pi * (n + ncp) / fs) * freqs)  # r, (F, taps, C)
    q = np.arange(order + 1)
    expansion = np.empty((frames, taps, count, order + 2), dtype=complex)
    np.multiply(_spherical_bessel(order, (np.pi * plan.t_u) * freqs), (2 * q + 1) * (1j ** q),
                out=expansion[..., :-1])  # exp(j z u) = sum (2q+1) j^q j_q(z) P_q(u)
    expansion[..., -1] = 1.0  # the window centre, u = 0: the sum of the phasors themselves
    powers = np.empty((frames, taps, count, fine), dtype=complex)  # r^b
    powers[..., 0] = 1.0
    for b in range(1, fine):
        np.multiply(powers[..., b - 1], step, out=powers[..., b])
    merged = np.multiply(expansion[..., None], powers[..., None, :],
                         out=work("phasor_fine", frames, (taps, count, order + 2, fine), complex))  # E[q] r^b
    starts = work("phasor_coarse", frames, (taps, coarse, count), complex)  # phasor_0 r^(B a), tap amplitude
    starts[:, :, 0] = amps * np.exp(1j * (2.0 * np.pi * freqs * ((ncp + (n - 1) / 2.0) / fs) + phases))
    starts[:, :, 0] *= plan.amplitudes[None, :, None]
    jump = powers[..., -1] * step  # r^B
    for a in range(1, coarse):
        np.multiply(starts[:, :, a - 1], jump, out=starts[:, :, a])
    gains = np.matmul(starts, merged.reshape(frames, taps, count, (order + 2) * fine),
                      out=work("tap_gains", frames, (taps, coarse, (order + 2) * fine), complex))
    gains = gains.reshape(frames, taps, coarse, order + 2, fine).transpose(0, 1, 2, 4, 3)
    gains = gains.reshape(frames, taps, coarse * fine, order + 2)[:, :, :symbols]  # (F, taps, S, Q+2), a copy
    centre_gain = gains[..., -1]  # h_m at the window centres
    tap_power = np.mean(np.square(centre_gain.real) + np.square(centre_gain.imag), axis=2)  # (F, taps)
    return gains[..., :-1], tap_power


def _varying_samples(plan: _Plan, beta: np.ndarray, index: np.ndarray, sent, work: _Workspace):
    """Time-domain samples (F, S, N) of what is not applied on the subcarriers, or None.

    That is the variation within the window (Legendre orders >= 1) of the
    taps inside the guard, and the whole response of the taps beyond it. In
    ``plan.time_dtype``: this part carries the interference, and single
    precision leaves a round-off of about 1e-14 of its power. ``index``:
    the rows of the symbol table sent (F, pre + S, columns); ``sent``: the
    sent points, or None where the one-IFFT-per-order path alone is used
    (it takes them a frame at a time).
    """
    order, pre, inside = plan.order, plan.pre, plan.inside
    frames = index.shape[0]
    samples = (plan.symbols, plan.n)
    varying = None
    if inside.size and order > 0 and not plan.per_tap:
        gains = np.take(beta, inside, axis=1).transpose(0, 3, 2, 1)  # (F, Q+1, S, taps)
        gains = gains.astype(plan.time_dtype, order="C")
        for q in range(1, order + 1):  # H(u, k) = sum_q P_q(u) H_q(k): one IFFT per order for all these taps
            wave = work(f"wave{min(q, 2)}", frames, samples, plan.time_dtype)
            for first in range(0, frames, CACHE_FRAMES):  # the products H_q X, a few frames at a time
                some = slice(first, first + CACHE_FRAMES)
                sent_index = index[some, pre:]
                count, shape = sent_index.shape[0], sent_index.shape[1:]
                main_time = work("main_time", count, shape, plan.time_dtype)
                _symbols(plan.symbol_table_time, sent_index, main_time)
                h_q = work("h_q", count, shape, plan.time_dtype)
                np.matmul(gains[some, q].view(plan.ramps_inside_time.dtype), plan.ramps_inside_time,
                          out=h_q.view(plan.ramps_inside_time.dtype))
                _to_bins(main_time, plan, h_q, out=wave[some])
            wave = _fft(wave, inverse=True, scaled=False)
            wave *= plan.legendre_time[q]  # P_q(u) / N
            varying = _accumulate(varying, wave)
    spectrum = None
    if (plan.per_tap and order > 0 and inside.size) or plan.isi.any():
        spectrum = _to_bins(sent, plan)
    for m in (inside if plan.per_tap and order > 0 else ()):
        wave = _fft(spectrum[:, pre:] * plan.ramps[m], inverse=True, scaled=False)
        wave *= beta[:, m, :, 1:] @ plan.legendre_scaled[1:]
        varying = _accumulate(varying, wave)
    for m in np.flatnonzero(plan.isi):
        wave = _fft(spectrum * plan.ramps[m], inverse=True, scaled=False)  # every sent symbol, delayed by tau_m
        source = pre + np.arange(plan.symbols)[:, None] + plan.source_symbol[m][None, :]
        part = wave[:, source, plan.source_index[m][None, :]]
        part *= beta[:, m] @ plan.legendre_scaled
        varying = _accumulate(varying, part)
    return varying


def _oscillator_phasor(plan: _Plan, increments: np.ndarray, frames: int) -> np.ndarray:
    """``exp(j theta)`` over every receive window (F, S, N): frequency offset and Wiener phase noise."""
    n, ncp, fs, symbols = plan.n, plan.ncp, plan.fs, plan.symbols
    t = (np.arange(symbols)[:, None] * (n + ncp) + ncp + np.arange(n)[None, :]) / fs
    phase = np.broadcast_to(2.0 * np.pi * plan.frequency_offset_hz * t, (frames, symbols, n)).copy()
    if plan.linewidth_hz > 0:
        steps = increments * math.sqrt(2.0 * np.pi * plan.linewidth_hz / fs)
        steps[:, :, 0] *= math.sqrt(ncp + 1.0)  # the gap across the cyclic prefix
        steps[:, 0, 0] = 0.0
        phase += np.cumsum(steps.reshape(frames, -1), axis=1).reshape(phase.shape)  # Wiener process
    return np.exp(1j * phase)


def _estimate(plan: _Plan, pilot_values: np.ndarray, work: _Workspace) -> np.ndarray:
    """Channel estimates (F, measured symbols x columns) from the received pilots over their symbols (F, pilots).

    The weights of :func:`pilots.estimator_weights`, applied one lattice cell
    at a time (:func:`_cell_estimator`); resource elements that are not
    measured get values that are never read. ``pilot_values`` may carry one
    more column, zero (:func:`_pilot_values`), read for a missing pilot.
    """
    frames, count = pilot_values.shape
    padded = pilot_values
    if count == plan.pilot_flat.size:
        padded = np.zeros((frames, count + 1), dtype=complex)  # the last one reads as "no pilot"
        padded[:, :-1] = pilot_values
    cell_pilots = np.take(padded, plan.cell_pilots, axis=1, mode="clip",
                          out=work("cell_pilots", frames, plan.cell_pilots.shape, complex))
    cells = work("cells", frames, (plan.cell_pilots.shape[0], plan.cell_weights.shape[1]), complex)
    np.matmul(cell_pilots.view(float), plan.cell_weights_real, out=cells.view(float))  # real form: see _real_form
    return np.take(cells.reshape(frames, -1), plan.grid_to_cell, axis=1, mode="clip",
                   out=work("estimate", frames, (plan.grid_to_cell.size,), complex))


def _pilot_values(plan: _Plan, y: np.ndarray, main: np.ndarray, margin, work: _Workspace) -> np.ndarray:
    """Received over sent values at the pilots, ``y conj(x)`` (unit-power points), and a zero column after them.

    ``y`` and ``main`` cover every symbol of the frame, or with ``margin``
    (:func:`_margin_pilots`) only the measured ones.
    """
    frames, count = y.shape[0], plan.pilot_flat.size
    values = work("pilot_values", frames, (count + 1,), complex)
    values[:, -1] = 0.0  # read for a pilot outside the band or on DC
    sent = work("pilots_sent", frames, (count,), complex)
    if margin is None:
        np.take(main.reshape(frames, -1), plan.pilot_flat, axis=1, mode="clip", out=sent)
        np.take(y.reshape(frames, -1), plan.pilot_flat, axis=1, mode="clip", out=values[:, :-1])
    else:  # pilots in the symbols before, in the measured ones, after
        before, inside = plan.pilots_before, plan.pilots_in_rows.size
        margin_y, margin_x = margin
        for out, rows, extra in ((sent, main, margin_x), (values[:, :-1], y, margin_y)):
            out[:, :before] = extra[:, :before]
            np.take(rows.reshape(frames, -1), plan.pilots_in_rows, axis=1, mode="clip",
                    out=out[:, before:before + inside])
            out[:, before + inside:] = extra[:, before:]
    values[:, :-1] *= np.conjugate(sent, out=sent)
    return values


def _margin_pilots(plan: _Plan, beta: np.ndarray, index: np.ndarray, bins, work: _Workspace):
    """Received values without noise and sent points at the pilots of the symbols around the measured ones.

    Nothing else of those symbols is read on the subcarriers (they are
    synthesised and transformed like the others: their samples reach the
    measured symbols), so only their pilots are formed: ``x (sum over the
    taps of beta_0 ramp) + bins``, the terms of :func:`_static_gains` and
    :func:`_without_noise` at these points. ``index``: the frame's symbol
    table rows (F, pre + S, columns); ``bins``: the FFT of the varying part
    (F, S, N) or None. Returns ``(y, x)``, each (F, extra pilots).
    """
    frames = index.shape[0]
    rows = plan.extra_pilot_rows
    sent = np.take(plan.symbol_table, index[:, plan.pre:].reshape(frames, -1)[:, plan.extra_pilot_flat], mode="clip")
    gains = beta[:, plan.inside[:, None], rows[None, :], 0]  # (F, taps, extra pilots)
    gains *= plan.extra_pilot_ramps
    received = gains.sum(axis=1)
    received *= sent
    if bins is not None:
        received += bins.reshape(frames, -1)[:, rows * plan.n + plan.extra_pilot_bins]
    return received, sent


def _static_gains(plan: _Plan, beta: np.ndarray, work: _Workspace) -> np.ndarray:
    """Order 0 of the taps inside the guard on the subcarriers (F, S, columns), for the symbols of ``beta``.

    It is constant over the window, so the IFFT and the receiver's FFT cancel
    for it and it is applied on the subcarriers.
    """
    gains = np.ascontiguousarray(np.take(beta[..., 0], plan.inside, axis=1).transpose(0, 2, 1))  # (F, S, taps)
    out = work("static", beta.shape[0], (beta.shape[2], plan.k_phys.size), complex)
    np.matmul(gains.view(float), plan.ramps_inside, out=out.view(float))  # real form: see _real_form
    return out


def _without_noise(plan: _Plan, main: np.ndarray, static: np.ndarray, bins, work: _Workspace, combine=True):
    """Received subcarriers without noise and oscillator, and their varying part.

    The static part ``main * static`` plus the used bins of ``bins``, the
    FFT of the time-domain part (F, S, N), or None when there is none.
    Returns ``(received, varying part on the grid or None)``; with
    ``combine=False``, ``received`` is the static part alone (the caller adds the varying part).
    """
    out = np.multiply(main, static, out=work("y_channel", main.shape[0], main.shape[1:], complex))
    if bins is None:
        return out, None
    part = _from_bins(bins, plan, out=work("from_bins", main.shape[0], main.shape[1:], complex))
    if combine:
        out += part
    return out, part


def _measure(plan: _Plan, beta, main, static, y_channel, part, y, reference, noise_words, work: _Workspace,
             margin=None) -> tuple:
    """Per-frame numerators and denominators of the measured figures, for a few frames.

    ``static``: the static gains (:func:`_static_gains`, F, S, columns; may
    be overwritten); ``y_channel``: received subcarriers without noise and
    oscillator (same shape), ``main * static + part`` with ``part`` its
    varying part (or None: zero; may be overwritten); ``y``: as received,
    before noise, or None without an oscillator: then ``y_channel`` holds
    the static part alone, ``part`` is added to it here once the useful
    power is measured, and the noise once the interference is measured (in
    place: ``y_channel`` is overwritten); ``reference``:
    the true channel as received on the measured symbols (F, measured grid;
    may be overwritten), or None for the window-average channel. These
    arrays cover every symbol of the frame, or with ``margin`` only the
    measured ones: ``margin`` is then :func:`_margin_pilots`' ``(y, x)`` of
    the pilots around them (y is overwritten). Returns ``(interference,
    useful, estimation error, channel power, error, useful data power)``,
    each of shape (F,).
    """
    frames, cols = main.shape[0], plan.k_phys.size
    measured = plan.measured_symbols * cols
    rows = slice(plan.first_measured, plan.first_measured + plan.measured_symbols) if margin is None else slice(None)

    # true channel: window average of the frequency response (current-symbol samples only)
    if plan.true_is_static:
        true_channel = static[:, rows]
    else:
        mean_gain = np.einsum("fmsq,mq->fsm", beta[:, :, rows], plan.current_mean)
        true_channel = np.matmul(mean_gain, plan.ramps_cols,
                                 out=work("true_channel", frames, (plan.measured_symbols, cols), complex))
    true_channel = true_channel.reshape(frames, measured)
    x = main[:, rows].reshape(frames, measured)
    scratch = work("scratch", frames, (measured,), complex)

    # useful power; interference with perfect channel knowledge, before noise and oscillator
    if y is None and plan.true_is_static:  # the static part in y_channel is exactly true_channel x
        useful, useful_data = _measured_power_kept(y_channel[:, rows].reshape(frames, measured), plan)
    else:
        useful, useful_data = _measured_power(np.multiply(true_channel, x, out=scratch), plan, data=True)
    if y is None:
        y = y_channel
        if part is not None:
            y += part
    if not plan.true_is_static:
        interference = _measured_power(np.subtract(y_channel[:, rows].reshape(frames, measured),
                                                   np.multiply(true_channel, x, out=scratch), out=scratch), plan)
    elif part is None:  # y_channel is the true channel times the symbols
        interference = np.zeros(frames)
    else:  # y_channel - true_channel x is the varying part, exactly
        interference = _measured_power(part[:, rows].reshape(frames, measured), plan)
    if reference is None:
        reference = true_channel
    else:
        useful_data = _measured_power(np.multiply(reference, x, out=scratch), plan, data="only")

    if noise_words is not None:  # measured symbols, then the other pilots
        real, imag = _noise(noise_words, plan.noise_std, work)
        grid = (frames, plan.measured_symbols, cols)
        np.add(y[:, rows].real, real[:, :measured].reshape(grid), out=y[:, rows].real)
        np.add(y[:, rows].imag, imag[:, :measured].reshape(grid), out=y[:, rows].imag)
        if margin is None:
            flat = y.reshape(frames, -1)
            flat.real[:, plan.extra_pilot_flat] += real[:, measured:]
            flat.imag[:, plan.extra_pilot_flat] += imag[:, measured:]
        else:
            margin[0].real += real[:, measured:]
            margin[0].imag += imag[:, measured:]

    # channel estimate with the analytic model's weights
    estimate = _estimate(plan, _pilot_values(plan, y, main, margin, work), work)
    if part is not None:  # the varying part is measured: its buffer serves as scratch (fewer arrays in the cache)
        scratch = part[:, rows].reshape(frames, measured)
    error = np.multiply(estimate, x, out=scratch)
    error -= y[:, rows].reshape(frames, measured)
    error = _measured_power(error, plan, data="only")
    estimation_error = _cell_power(np.subtract(estimate, reference, out=estimate), plan)
    channel_power = _cell_power(reference, plan)
    return interference, useful, estimation_error, channel_power, error, useful_data


def _symbols(table: np.ndarray, index: np.ndarray, out: np.ndarray) -> np.ndarray:
    """The sent points ``table[index]`` into ``out``.

    The indices are valid by construction; ``mode="clip"`` lets ``np.take``
    write into ``out`` unbuffered.
    """
    return np.take(table, index, mode="clip", out=out)


def _simulate_block(plan: _Plan, seeds, work: _Workspace) -> dict:
    """Measured sums of a block of frames.

    The time-domain synthesis and its FFTs run on the whole block; what
    follows the FFT runs ``CACHE_FRAMES`` frames at a time, so that its
    arrays stay in the processor's cache. For the same reason the sent
    points are looked up a frame at a time where no step needs the whole
    block's (a block's would be 5 MB for the benchmark).
    """
    draws = _draw(plan, seeds, work)
    frames = len(seeds)
    with_oscillator = plan.linewidth_hz > 0 or plan.frequency_offset_hz != 0
    # the sent symbols of the whole block where a step needs them all at once; else a frame at a time
    whole = with_oscillator or plan.isi.any() or (plan.per_tap and plan.order > 0 and plan.inside.size > 0)
    sent = _symbols(plan.symbol_table, draws.index, work("sent", frames, plan.symbol_offset.shape, complex)) \
        if whole else None
    beta, tap_power = _tap_gains(plan, draws.freqs, draws.amps, draws.phases, work)
    varying = _varying_samples(plan, beta, draws.index, sent, work)

    if with_oscillator:  # the whole signal goes through the time domain
        main = sent[:, plan.pre:]  # the received frame's own symbols
        rows = slice(plan.first_measured, plan.first_measured + plan.measured_symbols)
        static = _static_gains(plan, beta, work)
        received = _fft(_to_bins(main, plan, static), inverse=True)
        if varying is not None:
            received += varying
        y_channel, part = _without_noise(plan, main, static, None if varying is None else _fft(varying), work)
        rotation = _oscillator_phasor(plan, draws.increments, frames)
        received *= rotation
        y = _from_bins(_fft(received), plan)
        derotate = np.exp(-1j * np.angle(rotation.mean(axis=-1)))[..., None]  # mean of exp(j theta) per window
        y *= derotate  # ideal common-phase correction
        # true channel as received: window average of the response times the oscillator phasor
        rotation = rotation[:, rows]
        mean_osc = np.empty(beta[:, :, rows].shape, dtype=complex)
        mean_osc[:, plan.inside] = (rotation @ (plan.legendre.T / plan.n))[:, None]  # whole window: same for these
        for m in np.flatnonzero(plan.isi):
            weights = np.where(plan.source_symbol[m] == 0, 1.0, 0.0)[None, :] * plan.legendre / plan.n  # (Q+1, N)
            mean_osc[:, m] = rotation @ weights.T
        reference = ((np.einsum("fmsq,fmsq->fsm", beta[:, :, rows], mean_osc) @ plan.ramps_cols)
                     * derotate[:, rows]).reshape(frames, -1)
    else:
        bins = None if varying is None else _fft(varying)

    sums = np.empty((6, frames))
    rows = slice(plan.first_measured, plan.first_measured + plan.measured_symbols)
    for first in range(0, frames, CACHE_FRAMES):
        some = slice(first, first + CACHE_FRAMES)
        noise_words = draws.noise(some)
        if with_oscillator:
            main = sent[some, plan.pre:]
            parts = (static[some], y_channel[some], None if part is None else part[some], y[some], reference[some])
            sums[:, some] = _measure(plan, beta[some], main, *parts, noise_words, work)
            continue
        # the measured symbols on the subcarriers, and the pilots of the others
        index = draws.index[some, plan.pre + rows.start:plan.pre + rows.stop]
        main = _symbols(plan.symbol_table, index, work("main", index.shape[0], index.shape[1:], complex))
        gains = _static_gains(plan, beta[some, :, rows], work)
        varying_bins = None if bins is None else bins[some, rows]
        static_part, part = _without_noise(plan, main, gains, varying_bins, work, combine=False)
        margin = _margin_pilots(plan, beta[some], draws.index[some], None if bins is None else bins[some], work)
        sums[:, some] = _measure(plan, beta[some, :, rows], main, gains, static_part, part, None, None, noise_words,
                                 work, margin)
    return {"interference": sums[0:2], "estimation": sums[2:4], "error": sums[4:6], "tap_power": tap_power}


# --- statistics ------------------------------------------------------------------


def _ratio(num: np.ndarray, den: np.ndarray, confidence: float):
    """Ratio of sums over frames and its confidence interval (delta method, Student t)."""
    value = float(num.sum() / den.sum())
    frames = num.size
    residual = num - value * den
    se = math.sqrt(float(np.var(residual, ddof=1)) / frames) / float(den.mean())
    half = float(scipy.stats.t.ppf(0.5 + confidence / 2.0, frames - 1)) * se
    return value, (max(value - half, 0.0), value + half)


def simulate_link(design, environment, snr_db, *, frequency_offset_hz=0.0, linewidth_hz=0.0, estimator="lmmse",
                  frames=None, symbols_per_frame=None, qam_order=4, seed=0, progress=None):
    """Simulate an OFDM link through the environment's channel and measure its impairments.

    See the module docstring for the transmitter, channel, receiver and the
    definition of each measured figure.

    Parameters
    ----------
    design : Design
        The numerology (FFT size, CP, used subcarriers, pilot lattice). An
        extra CP on the first symbol of a period (LTE, NR) is ignored: every
        symbol has the ordinary CP, as in the analytic model's echo term.
        Reserved subcarriers carry data.
    environment : Environment
        Taps (delays in s, powers), maximum Doppler in Hz, spectrum, K-factor.
    snr_db : float
        Signal-to-noise ratio per resource element in dB; ``math.inf`` for no noise.
    frequency_offset_hz : float, optional
        Residual carrier frequency offset in Hz.
    linewidth_hz : float, optional
        3-dB linewidth of Wiener phase noise in Hz (>= 0).
    estimator : {"lmmse", "linear"}
        Channel estimator, as ``rules.estimator`` in the analytic model.
    frames : int, optional
        Independent frames (channel realisations), >= 2. Default: about
        ``AUTO_SAMPLES`` received samples in all, between ``AUTO_FRAMES``.
    symbols_per_frame : int, optional
        Measured symbols per frame, rounded up to whole pilot periods ``D_t``;
        the simulator adds the symbols the estimator needs on each side.
        Default: the larger of ``symbols_per_slot`` and ``D_t``.
    qam_order : int, optional
        Square QAM order of the data (4, 16, 64, 256).
    seed : int, optional
        Seed; each frame draws from its own child of ``numpy.random.SeedSequence(seed)``,
        so results do not depend on the block size.
    progress : callable, optional
        Called as ``progress(frames_done, frames_total)`` after each block.

    Returns
    -------
    SimulationResult

    Raises
    ------
    InputError
        For invalid arguments, a Doppler too large to simulate, or a band
        narrower than the estimator's reach.

    References
    ----------
    See the module docstring: [ZX2002]_, [ZX2003]_, [PB2001]_, [P2002]_,
    [Clarke1968]_, [Cochran1977]_.

    Examples
    --------
    >>> from numerology.design import Design
    >>> from numerology.environment import Environment
    >>> env = Environment(2e9, 3e8, 0.15, 0.0, 0.0, "classical", 0.0, 0.0, 0.0, 0.5, math.inf,
    ...                   (0.0,), (1.0,), "flat", "", 0.0, 0.0, 0.0, math.inf)
    >>> d = Design("tiny", 15e3, 64, 8, 48, 4, 1, 0, 4)
    >>> r = simulate_link(d, env, math.inf, frames=2)
    >>> r.interference < 1e-20, r.estimation_mse < 1e-9
    (True, True)
    """
    if not isinstance(design, Design):
        raise InputError("design", f"expected a numerology.design.Design, got {type(design).__name__}")
    if not isinstance(environment, Environment):
        raise InputError("environment",
                         f"expected a numerology.environment.Environment, got {type(environment).__name__}")
    snr_db = _real("snr_db", snr_db, allow_inf=True)
    if snr_db == -math.inf:
        raise InputError("snr_db", "expected a finite SNR in dB or inf")
    frequency_offset_hz = _real("frequency_offset_hz", frequency_offset_hz)
    linewidth_hz = _real("linewidth_hz", linewidth_hz, low=0.0)
    if estimator not in pilots.ESTIMATORS:
        raise InputError("estimator", f"expected one of {', '.join(pilots.ESTIMATORS)}, got {estimator!r}")
    if frames is not None:
        frames = _count("frames", frames, 2)
    if symbols_per_frame is not None:
        symbols_per_frame = _count("symbols_per_frame", symbols_per_frame, 1)
    if qam_order not in QAM_ORDERS:
        raise InputError("qam_order", f"expected one of {', '.join(map(str, QAM_ORDERS))}, got {qam_order!r}")
    seed = _count("seed", seed, 0)
    if progress is not None and not callable(progress):
        raise InputError("progress", "expected a callable progress(done, total) or None")

    plan, pilot_snr = _plan(design, environment, snr_db, frequency_offset_hz, linewidth_hz, estimator,
                            symbols_per_frame, qam_order)
    if frames is None:
        frames = int(np.clip(round(AUTO_SAMPLES / (plan.symbols * plan.n)), *AUTO_FRAMES))
    seeds = np.random.SeedSequence(seed).spawn(frames)
    work = _Workspace()
    parts = []
    for first in range(0, frames, plan.block_frames):
        parts.append(_simulate_block(plan, seeds[first:first + plan.block_frames], work))
        if progress is not None:
            progress(min(first + plan.block_frames, frames), frames)
    sums = {key: tuple(np.concatenate([p[key][i] for p in parts]) for i in range(2))
            for key in ("interference", "estimation", "error")}
    interference, interference_ci = _ratio(*sums["interference"], CONFIDENCE)
    mse, mse_ci = _ratio(*sums["estimation"], CONFIDENCE)
    error, error_ci = _ratio(*sums["error"], CONFIDENCE)
    sinr = 1.0 / error
    sinr_ci = (1.0 / error_ci[1], 1.0 / error_ci[0] if error_ci[0] > 0 else math.inf)
    tap_power = np.concatenate([p["tap_power"] for p in parts]).mean(axis=0)
    return SimulationResult(
        interference=interference, interference_ci=interference_ci,
        estimation_mse=mse, estimation_mse_ci=mse_ci,
        sinr_eff=sinr, sinr_eff_ci=sinr_ci,
        evm=math.sqrt(error), evm_ci=(math.sqrt(error_ci[0]), math.sqrt(error_ci[1])),
        tap_powers=tuple(float(p) for p in tap_power),
        frames=frames, symbols_per_frame=plan.measured_symbols, measured_per_frame=plan.measured_count,
        data_per_frame=plan.data_count, snr_db=snr_db, frequency_offset_hz=frequency_offset_hz,
        linewidth_hz=linewidth_hz, estimator=estimator, pilot_snr=pilot_snr, legendre_order=plan.order, seed=seed,
    )
