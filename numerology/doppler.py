"""Doppler: maximum shift, Doppler spectrum models, coherence time and inter-carrier interference.

Conventions
-----------
``f_D`` is the maximum Doppler shift ``v f_c / c_p`` (relative speed ``v``,
carrier ``f_c``, propagation speed ``c_p``). A Doppler spectrum ``S(f)`` has
unit power, and its normalised autocorrelation is
``R(tau) = int S(f) exp(+j 2 pi f tau) df`` (so ``R(0) = 1`` and
``R(-tau) = conj(R(tau))``; a line at ``+nu`` gives ``exp(+j 2 pi nu tau)``).

Spectrum models (names in :data:`SPECTRA`). ``K`` is the linear Rician factor,
``P_los = K / (K + 1)``, ``P_dif = 1 / (K + 1)``; ``K`` is ignored by
``classical`` and ``flat``.

``classical``
    Clarke/Jakes U-shaped spectrum ``1 / (pi f_D sqrt(1 - (f/f_D)^2))`` on
    ``[-f_D, f_D]``; ``R = J0(2 pi f_D tau)``. Mean 0, rms spread ``f_D/sqrt(2)``.
``flat``
    Uniform on ``[-f_D, f_D]``; ``R = sinc(2 f_D tau)`` (numpy sinc,
    ``sin(pi x)/(pi x)``). Mean 0, rms spread ``f_D/sqrt(3)``.
``rician``
    A line-of-sight line of power ``P_los`` at ``+f_D`` (the worst arrival
    angle, along the motion) plus the classical spectrum with power ``P_dif``:
    ``R = P_los exp(j 2 pi f_D tau) + P_dif J0(2 pi f_D tau)``. Centroid
    ``P_los f_D``; rms spread ``f_D sqrt(P_dif (P_los + 1/2))``.
``tracked``
    The ``rician`` spectrum after the receiver has removed the bulk Doppler
    shift: shifted by minus its centroid ``mu = P_los f_D``, so
    ``R = exp(-j 2 pi mu tau) R_rician``. Centroid 0, same spread and same
    ``|R|`` as ``rician``; the line of sight now turns at ``f_D / (K + 1)``,
    so ``Re R`` (hence the coherence time) differs. ``K = 0`` gives
    ``classical``.

K is the whole channel's: line-of-sight power over all scattered power
(``numerology.environment`` places the line of sight at the first arrival).

References
----------
.. [Clarke1968] R. H. Clarke, "A statistical theory of mobile-radio
   reception", Bell Syst. Tech. J. 47(6), 1968.
.. [Jakes1974] W. C. Jakes (ed.), Microwave Mobile Communications, Wiley, 1974.
.. [Rappaport] T. S. Rappaport, Wireless Communications: Principles and
   Practice, 2nd ed., 2002, sect. 5.4.3 (coherence time).
.. [TseViswanath2005] D. Tse, P. Viswanath, Fundamentals of Wireless
   Communication, 2005, ch. 2.
.. [RussellStuber1995] M. Russell, G. L. Stuber, "Interchannel interference
   analysis of OFDM in a mobile environment", Proc. IEEE VTC 1995, pp. 820-824.
.. [LiCimini2001] Y. Li, L. J. Cimini, "Bounds on the interchannel
   interference of OFDM in time-varying impairments", IEEE Trans. Commun.
   49(3), 2001 (from memory).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.special as sp

from .errors import InputError
from .grouping import remembered
from .oscillator import _floats, _one_minus_sinc_squared, _require, _result

__all__ = [
    "SPEED_OF_LIGHT_MPS",
    "SOUND_SPEED_SEAWATER_MPS",
    "SPECTRA",
    "ICI_MONOTONE_LIMIT",
    "wavelength_m",
    "max_doppler_hz",
    "doppler_autocorrelation",
    "doppler_centroid_hz",
    "doppler_spread_hz",
    "coherence_time_s",
    "COHERENCE_DEFINITION",
    "coherence_time_rules_of_thumb",
    "doppler_ici",
    "doppler_ici_small_argument",
    "doppler_ici_bound",
    "doppler_ici_inverse",
]

#: Speed of light in vacuum, m/s: exact by the SI definition of the metre (1983), so every CODATA edition
#: (and scipy.constants.c) gives the same value; written out to spare importing scipy.constants at start-up.
SPEED_OF_LIGHT_MPS = 299_792_458.0
#: Nominal speed of sound in sea water, m/s (common practice; about 1450-1550 m/s with
#: temperature, salinity and depth).
SOUND_SPEED_SEAWATER_MPS = 1500.0
#: Names of the Doppler spectrum models (see the module docstring).
SPECTRA = ("classical", "flat", "rician", "tracked")

#: ``f_D T_u`` up to which every model's ICI increases with ``f_D T_u`` (see doppler_ici_inverse).
ICI_MONOTONE_LIMIT = 0.5

_J0_FIRST_ZERO_X = float(sp.jn_zeros(0, 1)[0]) / (2.0 * np.pi)  # f_D tau = 0.38274 where J0 first vanishes
_SEARCH_STEP_X = 1.0 / 512.0  # scan step in f_D tau for the first crossing of |R| = rho
_SEARCH_CAP_X = 64.0  # crossings later than 64 Doppler periods are not searched (reported as inf)
_SEARCH_BLOCK = 2048
_CHEBYSHEV_NODES = 48  # Gauss-Chebyshev nodes for the shifted classical spectrum (see _ici_normalised)
_GC_X = np.cos((2.0 * np.arange(1, _CHEBYSHEV_NODES + 1) - 1.0) * np.pi / (2.0 * _CHEBYSHEV_NODES))

# Series of the ICI in a = 2 pi f_D T_u, used for a <= 1 to avoid cancellation:
# classical: sum_k (-1)^(k+1) 2 (a/2)^(2k) / ((k!)^2 (2k+1)(2k+2)); flat: in a^(2k) with (2k+1)! for (k!)^2.
_CLASSICAL_COEFFS = np.array(
    [0.0] + [(-1.0) ** (k + 1) * 2.0 / (math.factorial(k) ** 2 * (2 * k + 1) * (2 * k + 2)) for k in range(1, 12)]
)
_FLAT_COEFFS = np.array(
    [0.0] + [(-1.0) ** (k + 1) * 2.0 / (math.factorial(2 * k + 1) * (2 * k + 1) * (2 * k + 2)) for k in range(1, 12)]
)


def _spectrum(spectrum) -> str:
    if spectrum not in SPECTRA:
        raise InputError("spectrum", f"expected one of {', '.join(SPECTRA)}, got {spectrum!r}")
    return spectrum


def _doppler(max_doppler_hz) -> np.ndarray:
    f_d = _floats("max_doppler_hz", max_doppler_hz)
    _require("max_doppler_hz", f_d, (f_d >= 0) & np.isfinite(f_d), "a finite Doppler >= 0 Hz")
    return f_d


def _los_power(k_factor, spectrum: str) -> np.ndarray:
    """Line-of-sight power fraction ``K/(K+1)`` (0 for classical and flat); K = inf allowed."""
    k = _floats("k_factor", k_factor)
    _require("k_factor", k, k >= 0, "a linear Rician K-factor >= 0")
    if spectrum in ("classical", "flat"):
        return np.zeros_like(k)
    return 1.0 - 1.0 / (1.0 + k)


def _symbol(useful_symbol_s) -> np.ndarray:
    t_u = _floats("useful_symbol_s", useful_symbol_s)
    _require("useful_symbol_s", t_u, (t_u > 0) & np.isfinite(t_u), "a finite duration > 0 s")
    return t_u


def wavelength_m(carrier_hz, propagation_speed_mps=SPEED_OF_LIGHT_MPS):
    """Wavelength ``c_p / f_c`` in m.

    Parameters
    ----------
    carrier_hz : float or array_like
        Carrier frequency in Hz, > 0.
    propagation_speed_mps : float or array_like
        Propagation speed in m/s, > 0: radio by default, or
        :data:`SOUND_SPEED_SEAWATER_MPS` for underwater acoustics.

    Returns
    -------
    float or ndarray
        Wavelength in m.

    Examples
    --------
    >>> round(wavelength_m(12e3, SOUND_SPEED_SEAWATER_MPS), 6)
    0.125
    """
    f_c = _floats("carrier_hz", carrier_hz)
    c_p = _floats("propagation_speed_mps", propagation_speed_mps)
    _require("carrier_hz", f_c, (f_c > 0) & np.isfinite(f_c), "a finite carrier > 0 Hz")
    _require("propagation_speed_mps", c_p, (c_p > 0) & np.isfinite(c_p), "a finite speed > 0 m/s")
    return _result(c_p / f_c)


def max_doppler_hz(speed_mps, carrier_hz, propagation_speed_mps=SPEED_OF_LIGHT_MPS):
    """Maximum Doppler shift ``f_D = v f_c / c_p`` in Hz.

    Parameters
    ----------
    speed_mps : float or array_like
        Relative speed of the two ends in m/s, >= 0 (for a reflection off a
        moving object pass twice its speed).
    carrier_hz : float or array_like
        Carrier frequency in Hz, > 0.
    propagation_speed_mps : float or array_like
        Propagation speed in m/s, > 0 (default: speed of light).

    Returns
    -------
    float or ndarray
        Maximum Doppler shift in Hz.

    References
    ----------
    [Jakes1974]_ ch. 1; [Rappaport]_ sect. 5.4.

    Examples
    --------
    >>> round(max_doppler_hz(120 / 3.6, 2e9), 1)
    222.4
    """
    v = _floats("speed_mps", speed_mps)
    _require("speed_mps", v, (v >= 0) & np.isfinite(v), "a finite speed >= 0 m/s")
    return _result(v / wavelength_m(carrier_hz, propagation_speed_mps))  # f_D = v / lambda


def _autocorrelation_x(x, spectrum: str, p_los):
    """R at the normalised lag ``x = f_D tau``."""
    if spectrum == "flat":
        return np.sinc(2.0 * x) + 0j
    z = 2.0 * np.pi * x
    if not np.any(p_los):  # no line of sight (classical, or K = 0): R = J0, and the complex exponential is costly
        return sp.j0(z) + 0j
    r = p_los * np.exp(1j * z) + (1.0 - p_los) * sp.j0(z)
    if spectrum == "tracked":
        r = r * np.exp(-1j * z * p_los)  # remove the centroid P_los f_D
    return r


def doppler_autocorrelation(lag_s, max_doppler_hz, spectrum="classical", k_factor=0.0):
    """Normalised complex autocorrelation ``R(tau)`` of a Doppler spectrum model.

    Parameters
    ----------
    lag_s : float or array_like
        Time lag ``tau`` in s (any sign).
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : str
        One of :data:`SPECTRA` (see the module docstring).
    k_factor : float or array_like
        Linear Rician K-factor, >= 0 (rician and tracked only).

    Returns
    -------
    complex or ndarray of complex128
        ``R(tau)`` with ``R(0) = 1``.

    References
    ----------
    [Clarke1968]_, [Jakes1974]_ (classical ``J0``).

    Examples
    --------
    >>> r = doppler_autocorrelation(1e-3, 100.0)
    >>> round(r.real, 6), r.imag
    (0.903713, 0.0)
    """
    spectrum = _spectrum(spectrum)
    tau = _floats("lag_s", lag_s)
    _require("lag_s", tau, np.isfinite(tau), "a finite lag in s")
    f_d = _doppler(max_doppler_hz)
    p_los = _los_power(k_factor, spectrum)
    return _result(_autocorrelation_x(f_d * tau, spectrum, p_los))


def doppler_centroid_hz(max_doppler_hz, spectrum, k_factor=0.0):
    """Power-weighted mean frequency of a Doppler spectrum model, Hz.

    ``P_los f_D`` for ``rician``; 0 for ``classical``, ``flat`` and ``tracked``.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : str
        One of :data:`SPECTRA`.
    k_factor : float or array_like
        Linear Rician K-factor, >= 0.

    Returns
    -------
    float or ndarray
        Centroid in Hz.

    Examples
    --------
    >>> doppler_centroid_hz(100.0, "rician", k_factor=3.0)
    75.0
    """
    spectrum = _spectrum(spectrum)
    f_d = _doppler(max_doppler_hz)
    p_los = _los_power(k_factor, spectrum)
    centroid = f_d * p_los if spectrum == "rician" else f_d * 0.0 * p_los
    return _result(centroid + 0.0)


def doppler_spread_hz(max_doppler_hz, spectrum, k_factor=0.0):
    """Rms Doppler spread about the centroid, Hz.

    ``f_D/sqrt(2)`` (classical), ``f_D/sqrt(3)`` (flat) and, for the Rician
    mixture (rician and tracked alike), ``f_D sqrt(P_dif (P_los + 1/2))``: the
    second moment ``P_los f_D^2 + P_dif f_D^2 / 2`` minus the squared centroid.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : str
        One of :data:`SPECTRA`.
    k_factor : float or array_like
        Linear Rician K-factor, >= 0.

    Returns
    -------
    float or ndarray
        Rms spread in Hz.

    Examples
    --------
    >>> round(doppler_spread_hz(100.0, "classical"), 4)
    70.7107
    """
    spectrum = _spectrum(spectrum)
    f_d = _doppler(max_doppler_hz)
    p_los = _los_power(k_factor, spectrum)
    if spectrum == "flat":
        return _result(f_d / np.sqrt(3.0) + 0.0 * p_los)
    return _result(f_d * np.sqrt((1.0 - p_los) * (p_los + 0.5)))  # K = 0: f_D / sqrt(2)


def _crossing_limit_x(spectrum: str, p_los: np.ndarray) -> np.ndarray:
    """A normalised lag ``x = f_D tau`` by which ``Re R`` has surely fallen below any level in (0, 1).

    classical: the first zero of J0; flat: sinc's first zero (x = 1/2); rician:
    x = 1/2, where the line of sight's ``cos`` is -1 and ``J0(pi) < 0``;
    tracked: the line of sight turns at ``f_D / (K + 1)`` after the centroid
    is removed, so its ``cos`` reaches -1 at ``x = (K + 1) / 2`` (``Re R`` is
    then below ``-P_los + P_dif``, negative for K > 0; for K = 0 tracked is
    classical).
    """
    if spectrum == "classical":
        return np.full(p_los.shape, _J0_FIRST_ZERO_X)
    if spectrum in ("flat", "rician"):
        return np.full(p_los.shape, 0.5)
    k_plus_1 = 1.0 / np.maximum(1.0 - p_los, 1e-300)
    return np.where(p_los > 0, np.maximum(0.5 * k_plus_1, _J0_FIRST_ZERO_X), _J0_FIRST_ZERO_X)


#: (spectrum, P_los, rho) -> the crossing of :func:`_first_crossing_x`, kept within a process (each pair's root
#: is worked out on its own, so a remembered one has the same digits).
_CROSSINGS: dict = {}


def _crossings(spectrum: str, pairs: np.ndarray) -> np.ndarray:
    """:func:`_first_crossing_x` of (P_los, rho) rows, each pair solved once within a process."""
    def solve(missing):
        rows = np.array([key[1:] for key in missing], dtype=float)
        return _first_crossing_x(spectrum, rows[:, 0], rows[:, 1]).tolist()

    keys = [(spectrum, p, r) for p, r in pairs.tolist()]
    return np.array(remembered(_CROSSINGS, keys, solve), dtype=float)


def _first_crossing_x(spectrum: str, p_los: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """First ``x = f_D tau`` with ``Re R(x) = rho``, per (p_los, rho) pair (1-D arrays).

    A scan up to the limit of :func:`_crossing_limit_x` (step 1/512 up to
    x = 64, then 8192 equal steps to the limit: a strong tracked line of
    sight turns slowly), then bisection to about 1e-16 relative.
    """
    x_lim = _crossing_limit_x(spectrum, p_los)
    lo = np.full_like(rho, np.nan)
    hi = np.full_like(rho, np.nan)
    fine_top = np.minimum(x_lim, _SEARCH_CAP_X)
    start = 0
    while True:
        todo = np.isnan(hi) & (fine_top > start * _SEARCH_STEP_X)
        if not todo.any():
            break
        grid = np.arange(start, start + _SEARCH_BLOCK + 1) * _SEARCH_STEP_X
        x = np.minimum(grid[None, :], fine_top[todo, None])  # the limit itself is always tested
        _bracket(x, spectrum, p_los, rho, todo, lo, hi)
        start += _SEARCH_BLOCK
    coarse = np.isnan(hi) & (x_lim > _SEARCH_CAP_X)
    if coarse.any():  # beyond x = 64: equal steps to the limit
        steps = np.linspace(0.0, 1.0, 8193)[None, :]
        x = _SEARCH_CAP_X + steps * (x_lim[coarse, None] - _SEARCH_CAP_X)
        _bracket(x, spectrum, p_los, rho, coarse, lo, hi)
    found = ~np.isnan(hi)
    lo_f, hi_f, p_f, r_f = lo[found], hi[found], p_los[found], rho[found]
    for _ in range(80):
        mid = 0.5 * (lo_f + hi_f)
        below = _autocorrelation_x(mid, spectrum, p_f).real <= r_f
        hi_f = np.where(below, mid, hi_f)
        lo_f = np.where(below, lo_f, mid)
    out = np.full_like(rho, np.inf)
    out[found] = 0.5 * (lo_f + hi_f)
    return out


def _bracket(x, spectrum, p_los, rho, rows_mask, lo, hi):
    """Record, for the rows of ``rows_mask``, the first grid interval of ``x`` where ``Re R`` falls to rho."""
    below = _autocorrelation_x(x, spectrum, p_los[rows_mask, None]).real <= rho[rows_mask, None]
    hit = below.any(axis=1)
    first = np.argmax(below, axis=1)  # > 0: Re R > rho at the block start (R(0) = 1 or checked before)
    rows = np.flatnonzero(rows_mask)[hit]
    hi[rows] = x[hit, first[hit]]
    lo[rows] = x[hit, np.maximum(first[hit] - 1, 0)]


def coherence_time_s(max_doppler_hz, spectrum="classical", k_factor=0.0, correlation=0.5):
    """Coherence time: the first lag where the real part of ``R(tau)`` falls to ``correlation``.

    ``Re R(tau)`` is what holding a channel value for ``tau`` costs:
    ``E|h(t + tau) - h(t)|^2 = 2 (1 - Re R(tau))`` (unit power). For the
    classical and flat spectra R is real and this is the usual definition
    (``|R| = rho``); with a line of sight it stays continuous in K and finite
    whenever the channel varies: an untracked line of sight (``rician``)
    turns at f_D and brings ``Re R`` down within half a Doppler period, and
    after tracking (``tracked``) it turns at ``f_D / (K + 1)``, so a strong
    line of sight gives a long coherence time, not an unbounded one. The root
    depends only on the spectrum, K and the level: a scan, then bisection to
    about 1e-16 in ``x = f_D tau`` (see ``_first_crossing_x``). ``f_D = 0``
    gives ``inf``.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    spectrum : str
        One of :data:`SPECTRA`.
    k_factor : float or array_like
        Linear Rician K-factor, >= 0.
    correlation : float or array_like
        The level ``rho``, 0 < rho < 1 (0.5 and 0.9 are common).

    Returns
    -------
    float or ndarray
        Coherence time in s.

    References
    ----------
    [Rappaport]_ sect. 5.4.3 (definition by a correlation level); classical:
    ``J0(2 pi f_D T_c) = rho`` gives 0.2421/f_D at 0.5 and 0.1020/f_D at 0.9.

    Examples
    --------
    >>> round(coherence_time_s(100.0) * 100.0, 4)
    0.2421
    >>> round(coherence_time_s(100.0, "rician", 1e6) * 100.0, 4)  # a pure line at f_D: cos = 0.5 at 1/6
    0.1667
    """
    spectrum = _spectrum(spectrum)
    f_d = _doppler(max_doppler_hz)
    p_los = _los_power(k_factor, spectrum)
    rho = _floats("correlation", correlation)
    _require("correlation", rho, (rho > 0) & (rho < 1), "a correlation level between 0 and 1 (exclusive)")
    # The crossing depends on (P_los, rho) only: solved once per distinct pair, then divided by each f_D.
    # (a sweep: one K and one level for every site, so one root for all, whatever the number of sites)
    p_los, rho = np.broadcast_arrays(p_los, rho)
    pairs, inverse = np.unique(np.stack([p_los.ravel(), rho.ravel()], axis=1), axis=0, return_inverse=True)
    x_c = _crossings(spectrum, pairs)[inverse.ravel()].reshape(p_los.shape)
    f_d, x_c = np.broadcast_arrays(f_d, x_c)
    with np.errstate(divide="ignore", over="ignore"):  # a denormal f_D gives an infinite coherence time
        t_c = np.where(f_d > 0, x_c / np.where(f_d > 0, f_d, 1.0), np.inf)
    return _result(t_c)


#: How the coherence time is defined, in words (``numerology env`` and the design note).
COHERENCE_DEFINITION = ("first lag where the real part of the Doppler autocorrelation falls to the level "
                        "(what holding a channel value costs: E|h(t+tau) - h(t)|^2 = 2 (1 - Re R(tau)))")


def coherence_time_rules_of_thumb(max_doppler_hz):
    """The common textbook coherence-time rules, to show beside the exact value.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0 (0 gives inf).

    Returns
    -------
    dict of str to float or ndarray
        Label (formula and source) -> coherence time in s:
        ``1/f_D``, ``9/(16 pi f_D)`` (envelope correlation 0.5) and their
        geometric mean ``0.423/f_D = sqrt(9/(16 pi))/f_D`` from [Rappaport]_
        sect. 5.4.3; ``1/(4 D_s)`` with ``D_s = 2 f_D`` from
        [TseViswanath2005]_ ch. 2.

    Examples
    --------
    >>> {k: round(v, 5) for k, v in coherence_time_rules_of_thumb(100.0).items()}  # doctest: +NORMALIZE_WHITESPACE
    {'1/f_D [Rappaport 5.4.3]': 0.01, '9/(16 pi f_D) [Rappaport 5.4.3]': 0.00179,
     '0.423/f_D [Rappaport 5.4.3]': 0.00423, '1/(4 D_s), D_s = 2 f_D [Tse & Viswanath ch. 2]': 0.00125}
    """
    f_d = _doppler(max_doppler_hz)
    with np.errstate(divide="ignore"):
        inv = np.where(f_d > 0, 1.0 / np.where(f_d > 0, f_d, 1.0), np.inf)
    return {
        "1/f_D [Rappaport 5.4.3]": _result(inv),
        "9/(16 pi f_D) [Rappaport 5.4.3]": _result(9.0 / (16.0 * np.pi) * inv),
        "0.423/f_D [Rappaport 5.4.3]": _result(np.sqrt(9.0 / (16.0 * np.pi)) * inv),  # 0.42314
        "1/(4 D_s), D_s = 2 f_D [Tse & Viswanath ch. 2]": _result(inv / 8.0),
    }


def _ici_classical(a):
    """``1 - 2 (I0(a) - J1(a)) / a`` with ``I0 = int_0^a J0`` (series for a <= 1)."""
    small = a <= 1.0
    a_safe = np.where(small, 1.0, a)
    closed = 1.0 - 2.0 * (sp.itj0y0(a_safe)[0] - sp.j1(a_safe)) / a_safe  # Russell & Stuber 1995, closed
    series = np.polynomial.polynomial.polyval(np.where(small, a, 0.0) ** 2 / 4.0, _CLASSICAL_COEFFS)
    return np.where(small, series, closed)


def _ici_flat(a):
    """``1 - 2 Si(a)/a + 2 (1 - cos a)/a^2`` (series for a <= 1)."""
    small = a <= 1.0
    a_safe = np.where(small, 1.0, a)
    closed = 1.0 - 2.0 * sp.sici(a_safe)[0] / a_safe + 2.0 * (1.0 - np.cos(a_safe)) / a_safe**2
    series = np.polynomial.polynomial.polyval(np.where(small, a, 0.0) ** 2, _FLAT_COEFFS)
    return np.where(small, series, closed)


def _ici_normalised(b, spectrum: str, p_los):
    """ICI as a function of ``b = f_D T_u`` (and P_los)."""
    b, p_los = np.broadcast_arrays(np.asarray(b, dtype=np.float64), np.asarray(p_los, dtype=np.float64))
    a = 2.0 * np.pi * b
    if spectrum == "classical":
        return _ici_classical(a) + 0.0 * p_los
    if spectrum == "flat":
        return _ici_flat(a) + 0.0 * p_los
    p_dif = 1.0 - p_los
    if spectrum == "rician":
        return p_los * _one_minus_sinc_squared(b) + p_dif * _ici_classical(a)  # line at +f_D, diffuse classical
    # tracked: line at f_D (1 - P_los), diffuse classical shifted by -P_los f_D. Gauss-Chebyshev
    # quadrature (Gauss quadrature for the Clarke weight 1/sqrt(1 - x^2)) of the shifted diffuse part:
    # exact for polynomials of degree < 96; the integrand is entire, error < 1e-13 for f_D T_u <= 1.
    shifted = _one_minus_sinc_squared(b[..., None] * (_GC_X - p_los[..., None])).mean(axis=-1)
    return p_los * _one_minus_sinc_squared(b * p_dif) + p_dif * shifted


def doppler_ici(max_doppler_hz, useful_symbol_s, spectrum="classical", k_factor=0.0):
    """Inter-carrier interference power relative to the signal, from Doppler.

    Exact for a wide-sense stationary channel and an FFT window of ``T_u``::

        ICI = 1 - int_{-1}^{1} (1 - |x|) Re R(x T_u) dx
            = int S(f) (1 - sinc^2(f T_u)) df

    With ``a = 2 pi f_D T_u``: classical ``1 - 2 (I0(a) - J1(a)) / a``
    (``I0`` = integral of ``J0`` from 0 to ``a``); flat
    ``1 - 2 Si(a)/a + 2 (1 - cos a)/a^2`` (derived here: the uniform average
    of ``1 - sinc^2`` over ``[-f_D, f_D]``); a line at ``nu`` gives
    ``1 - sinc^2(nu T_u)``; rician and tracked are the power-weighted mixture
    (the shifted diffuse part of tracked by fixed-node Gauss-Chebyshev
    quadrature). Power series replace the closed forms for ``a <= 1``.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u = 1 / subcarrier spacing`` in s, > 0.
    spectrum : str
        One of :data:`SPECTRA`.
    k_factor : float or array_like
        Linear Rician K-factor, >= 0.

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio.

    References
    ----------
    [RussellStuber1995]_ (classical; integral from memory, re-derived);
    classical and flat small-argument limits ``a^2/24`` and ``a^2/36``.

    Examples
    --------
    >>> f"{doppler_ici(100.0, 1e-3):.4e}"  # f_D T_u = 0.1
    '1.6288e-02'
    """
    spectrum = _spectrum(spectrum)
    f_d = _doppler(max_doppler_hz)
    t_u = _symbol(useful_symbol_s)
    p_los = _los_power(k_factor, spectrum)
    return _result(_ici_normalised(f_d * t_u, spectrum, p_los))


def doppler_ici_small_argument(max_doppler_hz, useful_symbol_s):
    """Small-argument ICI of the classical spectrum, ``(2 pi f_D T_u)^2 / 24``.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0.

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio.

    References
    ----------
    [RussellStuber1995]_ (leading term of the classical result).

    Examples
    --------
    >>> f"{doppler_ici_small_argument(10.0, 1e-3):.4e}"
    '1.6449e-04'
    """
    f_d = _doppler(max_doppler_hz)
    t_u = _symbol(useful_symbol_s)
    return _result((2.0 * np.pi * f_d * t_u) ** 2 / 24.0)


def doppler_ici_bound(max_doppler_hz, useful_symbol_s):
    """Upper bound on the Doppler ICI for any spectrum within ``[-f_D, f_D]``: ``(2 pi f_D T_u)^2 / 12``.

    It follows from ``1 - sinc^2(y) <= (pi y)^2 / 3`` and a second moment of
    at most ``f_D^2``; it also bounds ``tracked``, whose second moment is the
    Rician variance.

    Parameters
    ----------
    max_doppler_hz : float or array_like
        Maximum Doppler ``f_D`` in Hz, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0.

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio.

    References
    ----------
    [LiCimini2001]_ (from memory).

    Examples
    --------
    >>> f"{doppler_ici_bound(10.0, 1e-3):.4e}"
    '3.2899e-04'
    """
    f_d = _doppler(max_doppler_hz)
    t_u = _symbol(useful_symbol_s)
    return _result((2.0 * np.pi * f_d * t_u) ** 2 / 12.0)


def doppler_ici_inverse(max_ici, useful_symbol_s, spectrum="classical", k_factor=0.0):
    """Largest maximum Doppler whose ICI stays at or below ``max_ici``.

    Every model's ICI depends on ``f_D T_u`` alone (for a given K) and
    increases with it on ``0 <= f_D T_u <= 0.5``: it is the spectral average
    of ``1 - sinc^2(f T_u)``, which increases for ``|f T_u| <= 1``, and no
    model has power beyond ``2 f_D`` (tracked) or ``f_D`` (the others).
    The result is therefore capped at ``0.5 / T_u`` (:data:`ICI_MONOTONE_LIMIT`),
    returned when even that Doppler meets ``max_ici``; an OFDM design is far
    outside its useful range there anyway. Solved by bisection on
    ``f_D T_u`` to about 1e-19.

    Parameters
    ----------
    max_ici : float or array_like
        Allowed ICI-to-signal power ratio, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0.
    spectrum : str
        One of :data:`SPECTRA`.
    k_factor : float or array_like
        Linear Rician K-factor, >= 0.

    Returns
    -------
    float or ndarray
        Maximum Doppler in Hz.

    Examples
    --------
    >>> round(doppler_ici_inverse(1.6288e-2, 1e-3), 3)
    100.0
    """
    spectrum = _spectrum(spectrum)
    m = _floats("max_ici", max_ici)
    _require("max_ici", m, m >= 0, "an ICI power ratio >= 0")
    t_u = _symbol(useful_symbol_s)
    p_los = _los_power(k_factor, spectrum)
    m, t_u, p_los = np.broadcast_arrays(m, t_u, p_los)
    lo = np.zeros(m.shape)
    hi = np.full(m.shape, ICI_MONOTONE_LIMIT)
    for _ in range(64):
        mid = 0.5 * (lo + hi)
        above = _ici_normalised(mid, spectrum, p_los) > m
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    capped = _ici_normalised(ICI_MONOTONE_LIMIT, spectrum, p_los) <= m
    b = np.where(capped, ICI_MONOTONE_LIMIT, lo)
    return _result(b / t_u)
