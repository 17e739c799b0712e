"""Oscillator impairments: carrier frequency offset and phase noise as OFDM inter-carrier interference.

Every ICI value here is a power ratio: the power a subcarrier loses to (and,
for equal-power subcarriers, receives from) the other subcarriers, relative to
its own power, over one useful symbol of length ``T_u = 1 / subcarrier spacing``.

A frequency component at ``nu`` that is constant over the FFT window keeps
the fraction ``sinc^2(nu T_u)`` of its power on its own subcarrier (numpy
sinc convention, ``sin(pi x) / (pi x)``), so it leaks ``1 - sinc^2(nu T_u)``.
That one kernel gives the CFO result and weights a phase-noise mask; Doppler
spectra (``numerology.doppler``) average it over their spectrum.

Phase noise is assumed corrected for its common phase error (CPE), the part
of the phase that is constant over one symbol and that pilots remove; what is
left is the ICI below.

References
----------
.. [Moose1994] P. H. Moose, "A technique for orthogonal frequency division
   multiplexing frequency offset correction", IEEE Trans. Commun. 42(10), 1994.
.. [Pollet1995] T. Pollet, M. Van Bladel, M. Moeneclaey, "BER sensitivity of
   OFDM systems to carrier frequency offset and Wiener phase noise", IEEE
   Trans. Commun. 43(2/3/4), 1995 (degradation formulas from memory).
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError
from .grouping import remembered

__all__ = [
    "cfo_ici",
    "cfo_degradation_db",
    "wiener_phase_noise_ici",
    "wiener_degradation_db",
    "mask_phase_noise_ici",
    "linewidth_for_ici",
]

# Taylor coefficients of 1 - sin(s)/s = sum_k (-1)^(k+1) s^(2k) / (2k+1)!, k >= 1.
_ONE_MINUS_SINC_COEFFS = np.array([(-1.0) ** (k + 1) / math.factorial(2 * k + 1) for k in range(1, 11)])
# Taylor coefficients of 1 - 2 (c - 1 + exp(-c)) / c^2 = sum_k (-1)^(k+1) 2 c^k / (k+2)!, k >= 1.
_WIENER_COEFFS = np.array([(-1.0) ** (k + 1) * 2.0 / math.factorial(k + 2) for k in range(1, 23)])

#: Grid density of the phase-noise mask integral, points per decade of offset.
MASK_POINTS_PER_DECADE = 400
#: Linear grid step, in units of 1/T_u, where the sinc^2 side lobes are resolved.
_MASK_LINEAR_STEP = 1.0 / 64.0
#: Above this normalised offset f T_u the sinc^2 side lobes are replaced by their mean.
#: n + 1/4 makes sin^2 equal its mean 1/2 there, so the weight is continuous.
_MASK_LOBE_LIMIT = 32.25


def _floats(place: str, value) -> np.ndarray:
    """Convert user input to a float64 array or raise InputError naming ``place``."""
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(place, f"expected a number or an array of numbers, got {value!r}") from None
    return arr


def _require(place: str, arr: np.ndarray, ok: np.ndarray, expected: str) -> None:
    """Raise InputError at ``place`` unless ``ok`` holds everywhere (NaN fails every check)."""
    if not np.all(ok):
        bad = np.asarray(arr)[~np.asarray(ok, dtype=bool)] if np.ndim(arr) else arr
        raise InputError(place, f"must be {expected}, got {np.ravel(bad)[0]!r}")


def _result(x: np.ndarray):
    """Plain Python scalar for 0-d results, the array otherwise."""
    x = np.asarray(x)
    return x.item() if x.ndim == 0 else x


def _one_minus_sinc_squared(y):
    """``1 - sinc^2(y)`` without cancellation near ``y = 0`` (numpy sinc convention)."""
    y = np.asarray(y, dtype=np.float64)
    s = np.pi * y
    small = np.abs(s) < 1.0
    s2 = np.where(small, s * s, 0.0)
    u_series = np.polynomial.polynomial.polyval(s2, np.concatenate(([0.0], _ONE_MINUS_SINC_COEFFS)))
    s_safe = np.where(small, 1.0, s)
    u_direct = 1.0 - np.sin(s_safe) / s_safe
    u = np.where(small, u_series, u_direct)  # u = 1 - sinc(y)
    return u * (2.0 - u)  # 1 - sinc^2 = (1 - sinc)(1 + sinc)


def cfo_ici(offset_hz, subcarrier_spacing_hz):
    """ICI power, relative to the signal, caused by a carrier frequency offset.

    ``ICI = 1 - sinc^2(e)`` with ``e = offset / spacing`` (numpy sinc,
    ``sin(pi e) / (pi e)``); about ``(pi e)^2 / 3`` for small ``e``.

    Parameters
    ----------
    offset_hz : float or array_like
        Residual carrier frequency offset in Hz (sign irrelevant).
    subcarrier_spacing_hz : float or array_like
        Subcarrier spacing in Hz, > 0.

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio.

    References
    ----------
    [Moose1994]_ (offset on a rectangular FFT window; the ``1 - sinc^2`` form
    is the usual statement of its result).

    Examples
    --------
    >>> round(cfo_ici(300.0, 15e3), 7)  # e = 0.02
    0.0013153
    """
    offset = _floats("offset_hz", offset_hz)
    spacing = _floats("subcarrier_spacing_hz", subcarrier_spacing_hz)
    _require("offset_hz", offset, np.isfinite(offset), "a finite frequency in Hz")
    _require("subcarrier_spacing_hz", spacing, (spacing > 0) & np.isfinite(spacing), "a finite spacing > 0 Hz")
    return _result(_one_minus_sinc_squared(offset / spacing))  # Moose 1994: 1 - sinc^2(e)


def cfo_degradation_db(offset_hz, subcarrier_spacing_hz, snr_db):
    """SNR degradation in dB from a carrier frequency offset (small-offset approximation).

    ``D = 10 / (3 ln 10) * (pi e)^2 * Es/N0`` dB, ``e = offset / spacing``.
    Valid while ``D`` is small (a fraction of a dB to about 1 dB).

    Parameters
    ----------
    offset_hz : float or array_like
        Residual carrier frequency offset in Hz.
    subcarrier_spacing_hz : float or array_like
        Subcarrier spacing in Hz, > 0.
    snr_db : float or array_like
        Symbol SNR Es/N0 in dB.

    Returns
    -------
    float or ndarray
        Degradation in dB.

    References
    ----------
    [Pollet1995]_ (CFO degradation formula, from memory).

    Examples
    --------
    >>> round(cfo_degradation_db(300.0, 15e3, 20.0), 3)
    0.572
    """
    offset = _floats("offset_hz", offset_hz)
    spacing = _floats("subcarrier_spacing_hz", subcarrier_spacing_hz)
    snr = _floats("snr_db", snr_db)
    _require("offset_hz", offset, np.isfinite(offset), "a finite frequency in Hz")
    _require("subcarrier_spacing_hz", spacing, (spacing > 0) & np.isfinite(spacing), "a finite spacing > 0 Hz")
    _require("snr_db", snr, np.isfinite(snr), "a finite SNR in dB")
    e = offset / spacing
    return _result(10.0 / (3.0 * np.log(10.0)) * (np.pi * e) ** 2 * 10.0 ** (snr / 10.0))  # Pollet 1995


def _wiener_ici_of_c(c):
    """Residual ICI ``1 - 2 (c - 1 + exp(-c)) / c^2`` for ``c = pi beta T_u >= 0``."""
    c = np.asarray(c, dtype=np.float64)
    small = c < 1.0
    c_small = np.where(small, c, 0.0)
    series = np.polynomial.polynomial.polyval(c_small, np.concatenate(([0.0], _WIENER_COEFFS)))
    c_safe = np.where(small, 1.0, c)
    closed = 1.0 - 2.0 * (c_safe + np.expm1(-c_safe)) / c_safe**2
    return np.where(small, series, closed)


def wiener_phase_noise_ici(linewidth_hz, useful_symbol_s):
    """Residual ICI of Wiener (free-running oscillator) phase noise after CPE correction.

    For a Wiener phase ``theta(t)`` with 3-dB linewidth ``beta``,
    ``E[exp(j(theta(t) - theta(s)))] = exp(-pi beta |t - s|)``. The power left
    on a subcarrier after removing the common phase is the mean over the symbol
    of ``exp(j theta)`` squared, so::

        ICI = 1 - (1/T^2) int_0^T int_0^T exp(-pi beta |t - s|) ds dt
            = 1 - 2 (c - 1 + exp(-c)) / c^2,      c = pi beta T_u
            = c/3 - c^2/12 + c^3/60 - ...          (series used for c < 1)

    Parameters
    ----------
    linewidth_hz : float or array_like
        3-dB linewidth ``beta`` (full width at half maximum of the Lorentzian
        oscillator spectrum) in Hz, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` (FFT window) in s, > 0.

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio, in [0, 1).

    References
    ----------
    Derived here from the Wiener model of [Pollet1995]_; the small-``c`` limit
    ``pi beta T_u / 3`` is the common first-order result.

    Examples
    --------
    >>> round(wiener_phase_noise_ici(15.0, 1 / 15e3), 9)  # beta T_u = 0.001
    0.001046376
    """
    beta = _floats("linewidth_hz", linewidth_hz)
    t_u = _floats("useful_symbol_s", useful_symbol_s)
    _require("linewidth_hz", beta, (beta >= 0) & np.isfinite(beta), "a finite linewidth >= 0 Hz")
    _require("useful_symbol_s", t_u, (t_u > 0) & np.isfinite(t_u), "a finite duration > 0 s")
    return _result(_wiener_ici_of_c(np.pi * beta * t_u))


def wiener_degradation_db(linewidth_hz, useful_symbol_s, snr_db):
    """SNR degradation in dB from Wiener phase noise (small-linewidth approximation).

    ``D = 11 / (6 ln 10) * (4 pi beta T_u) * Es/N0`` dB.

    Parameters
    ----------
    linewidth_hz : float or array_like
        3-dB linewidth ``beta`` in Hz, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0.
    snr_db : float or array_like
        Symbol SNR Es/N0 in dB.

    Returns
    -------
    float or ndarray
        Degradation in dB.

    References
    ----------
    [Pollet1995]_ (phase-noise degradation formula, from memory).

    Examples
    --------
    >>> round(wiener_degradation_db(15.0, 1 / 15e3, 20.0), 4)
    1.0005
    """
    beta = _floats("linewidth_hz", linewidth_hz)
    t_u = _floats("useful_symbol_s", useful_symbol_s)
    snr = _floats("snr_db", snr_db)
    _require("linewidth_hz", beta, (beta >= 0) & np.isfinite(beta), "a finite linewidth >= 0 Hz")
    _require("useful_symbol_s", t_u, (t_u > 0) & np.isfinite(t_u), "a finite duration > 0 s")
    _require("snr_db", snr, np.isfinite(snr), "a finite SNR in dB")
    return _result(11.0 / (6.0 * np.log(10.0)) * (4.0 * np.pi * beta * t_u) * 10.0 ** (snr / 10.0))  # Pollet 1995


def _check_mask(offsets_hz, levels_dbc_hz):
    offsets = _floats("offsets_hz", offsets_hz)
    levels = _floats("levels_dbc_hz", levels_dbc_hz)
    if offsets.ndim != 1 or offsets.size < 2:
        raise InputError("offsets_hz", f"expected a list of at least 2 offsets in Hz, got {offsets_hz!r}")
    if levels.shape != offsets.shape:
        raise InputError(
            "levels_dbc_hz", f"expected one level per offset ({offsets.size}), got {levels.size} values"
        )
    _require("offsets_hz", offsets, (offsets > 0) & np.isfinite(offsets), "finite offsets > 0 Hz")
    _require("levels_dbc_hz", levels, np.isfinite(levels), "finite levels in dBc/Hz")
    if not np.all(np.diff(offsets) > 0):
        raise InputError("offsets_hz", f"offsets must increase strictly, got {offsets.tolist()!r}")
    return offsets, levels


def mask_phase_noise_ici(offsets_hz, levels_dbc_hz, useful_symbol_s):
    """Residual ICI after CPE correction from a measured phase-noise mask (small-angle).

    The mask is the single-sideband phase noise ``L(f)`` in dBc/Hz at the given
    offsets. Between points it is interpolated linearly in dB against
    log-frequency (a straight line on the usual log plot); outside
    ``[offsets[0], offsets[-1]]`` it is taken as zero: the mask is **not**
    extrapolated, so noise beyond the last point (or below the first) is not
    counted, and a mask should extend past the subcarrier spacing. Under the
    small-angle approximation the two-sided phase spectrum equals ``L(|f|)``, and::

        ICI = 2 int L(f) (1 - sinc^2(f T_u)) df

    The weight ``1 - sinc^2(f T_u)`` vanishes near DC, which is how the common
    phase error (removed by the receiver) drops out.

    The integral runs on a fixed grid in ``y = f T_u``: logarithmic with
    ``MASK_POINTS_PER_DECADE`` points per decade, refined to steps of
    ``1/64`` in ``y`` up to ``y = 32.25`` to resolve the sinc side lobes, above
    which ``sin^2`` is replaced by its mean 1/2; trapezoidal rule in ``ln y``.
    Relative accuracy is about 1e-4 or better for masks with slopes down to
    -40 dB/decade.

    Parameters
    ----------
    offsets_hz : array_like
        Offsets from the carrier in Hz, strictly increasing, > 0, at least two.
    levels_dbc_hz : array_like
        ``L(f)`` at those offsets in dBc/Hz.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0 (the mask is common to all).

    Returns
    -------
    float or ndarray
        Linear ICI-to-signal power ratio, shaped like ``useful_symbol_s``.

    References
    ----------
    Small-angle phase-noise ICI integral (common practice, memory); the
    ``L(f)`` convention, ``L = S_phi / 2`` in dBc/Hz, is IEEE Std 1139 (from memory).

    Examples
    --------
    >>> ici = mask_phase_noise_ici([1e3, 1e4, 1e5, 1e6], [-80, -90, -100, -120], 1 / 30e3)
    >>> f"{ici:.3e}"
    '6.036e-05'
    """
    offsets, levels = _check_mask(offsets_hz, levels_dbc_hz)
    t_u = _floats("useful_symbol_s", useful_symbol_s)
    _require("useful_symbol_s", t_u, (t_u > 0) & np.isfinite(t_u), "a finite duration > 0 s")
    shape = t_u.shape
    if t_u.size == 0:
        return np.zeros(shape)
    # Designs share few symbol lengths: integrate once per distinct T_u.
    t_unique, inverse = np.unique(t_u.ravel(), return_inverse=True)
    t = t_unique.reshape(-1, 1)
    y_lo, y_hi = offsets[0] * t.min(), offsets[-1] * t.max()
    decades = np.log10(y_hi / y_lo)
    log_nodes = np.logspace(np.log10(y_lo), np.log10(y_hi), int(np.ceil(decades * MASK_POINTS_PER_DECADE)) + 1)
    lin_nodes = np.arange(1, int(_MASK_LOBE_LIMIT / _MASK_LINEAR_STEP) + 1) * _MASK_LINEAR_STEP
    nodes = np.union1d(log_nodes, lin_nodes)
    # A block of rows at a time: the rows are independent, and small blocks reuse memory the allocator
    # holds (fresh arrays of tens of MB cost more in page faults than in arithmetic).
    step = max(1, _MASK_BLOCK // nodes.size)
    ici = np.concatenate([_mask_rows(nodes, t[i:i + step], offsets, levels) for i in range(0, t.shape[0], step)])
    return _result(ici[inverse.ravel()].reshape(shape))


#: Elements (rows x grid nodes) of the mask integral worked out at once.
_MASK_BLOCK = 1 << 14


def _mask_rows(nodes, t, offsets, levels):
    """:func:`mask_phase_noise_ici` of the symbol lengths ``t`` (rows, 1) on the grid ``nodes`` (in y = f T_u)."""
    # Clipping to each row's range keeps the nodes sorted and puts nodes exactly on both mask ends;
    # the intervals outside collapse to zero width.
    y = np.clip(nodes[None, :], offsets[0] * t, offsets[-1] * t)
    # A row's clipped nodes repeat its end values (the rows ascend, so repeats are neighbours): the integrand
    # is worked out once per distinct point and copied to the repeats, the same numbers at a fraction of the
    # cost when the symbol lengths span decades (a spacing axis).
    fresh = np.ones(y.shape, dtype=bool)
    fresh[:, 1:] = y[:, 1:] != y[:, :-1]
    source = np.maximum.accumulate(np.where(fresh, np.arange(y.shape[1]), 0), axis=1)
    y_fresh, t_fresh = y[fresh], np.broadcast_to(t, y.shape)[fresh]
    level_db = np.interp(np.log(y_fresh / t_fresh), np.log(offsets), levels)
    weight = np.where(
        y_fresh <= _MASK_LOBE_LIMIT,
        _one_minus_sinc_squared(np.minimum(y_fresh, _MASK_LOBE_LIMIT)),
        1.0 - 0.5 / (np.pi * np.maximum(y_fresh, _MASK_LOBE_LIMIT)) ** 2,  # side lobes replaced by their mean
    )
    integrand, u = np.empty(y.shape), np.empty(y.shape)
    integrand[fresh] = 2.0 * 10.0 ** (level_db / 10.0) * weight * (y_fresh / t_fresh)  # 2 L(f) (1 - sinc^2) df/dln(f)
    u[fresh] = np.log(y_fresh)
    integrand, u = np.take_along_axis(integrand, source, axis=1), np.take_along_axis(u, source, axis=1)
    ici = np.sum(0.5 * (integrand[:, 1:] + integrand[:, :-1]) * np.diff(u, axis=1), axis=1)
    return ici


def phase_autocorrelation(lag_s, linewidth_hz=0.0, offset_hz=0.0, mask=None):
    """``E exp(j (theta(t + tau) - theta(t)))`` of the oscillator's phase at lags ``tau`` (complex array).

    The product of three independent parts: a residual frequency offset turns
    the phase by ``2 pi f_o tau``; Wiener phase noise of 3-dB linewidth beta
    decays as ``exp(-pi beta |tau|)`` (a Lorentzian spectrum); a measured mask
    ``L(f)`` gives a Gaussian phase difference of variance
    ``sigma^2(tau) = 8 int L(f) sin^2(pi f tau) df`` (small angle, the two-sided
    spectrum L(|f|) as in :func:`mask_phase_noise_ici`), hence
    ``exp(-sigma^2 / 2)``. The channel a receiver estimates is the radio channel
    times ``exp(j theta)``, so its time correlation carries this factor.

    Parameters
    ----------
    lag_s : array_like
        Lags tau in s.
    linewidth_hz, offset_hz : float or array_like
        Wiener 3-dB linewidth and residual frequency offset, Hz (broadcast with ``lag_s``).
    mask : tuple of (offsets_hz, levels_dbc_hz), optional
        A phase-noise mask (integrated on a log grid of 64 points per decade, trapezoidal).

    Returns
    -------
    ndarray of complex

    References
    ----------
    Wiener phase noise: the phase is a Brownian motion of increment variance 2 pi beta tau (common practice;
    the linewidth convention of :func:`wiener_phase_noise_ici`).

    Examples
    --------
    >>> r = phase_autocorrelation(1e-3, linewidth_hz=100.0)
    >>> round(float(r.real), 6)  # exp(-pi 100 Hz 1 ms)
    0.730403
    """
    tau = np.asarray(lag_s, dtype=float)
    beta = np.asarray(linewidth_hz, dtype=float)
    offset = np.asarray(offset_hz, dtype=float)
    out = np.exp(-np.pi * beta * np.abs(tau) + 2j * np.pi * offset * tau)
    if mask is not None:
        out = out * np.exp(-0.5 * _mask_phase_variance(*_check_mask(*mask), np.abs(tau)))
    return out


#: (mask, |lag|) -> the mask's phase-difference variance, within a process: the estimators ask for a few
#: hundred distinct lags (multiples of the symbol durations) tens of thousands of times.
_VARIANCE_CACHE: dict = {}


def _mask_phase_variance(offsets, levels, lag_s):
    """``sigma^2(tau)`` of :func:`phase_autocorrelation` at lags >= 0, once per distinct lag (each on its own)."""
    mask = (tuple(offsets.tolist()), tuple(levels.tolist()))
    if mask not in _VARIANCE_CACHE and len(_VARIANCE_CACHE) >= 64:
        _VARIANCE_CACHE.clear()
    known = _VARIANCE_CACHE.setdefault(mask, {})

    def integrate(missing):
        f = np.logspace(np.log10(offsets[0]), np.log10(offsets[-1]),
                        int(np.ceil(np.log10(offsets[-1] / offsets[0]) * MASK_POINTS_PER_DECADE)) + 1)
        level = 10.0 ** (np.interp(np.log(f), np.log(offsets), levels) / 10.0)
        integrand = 8.0 * level * np.sin(np.pi * f * np.array(missing).reshape(-1, 1)) ** 2 * f  # d/dln f
        return np.sum(0.5 * (integrand[:, 1:] + integrand[:, :-1]) * np.diff(np.log(f)), axis=1).tolist()

    return np.array(remembered(known, lag_s.ravel().tolist(), integrate), dtype=float).reshape(lag_s.shape)


def linewidth_for_ici(max_ici, useful_symbol_s):
    """Largest Wiener linewidth whose residual ICI stays at or below ``max_ici``.

    Inverse of :func:`wiener_phase_noise_ici` (which increases monotonically
    with ``c = pi beta T_u`` from 0 towards 1). Solved for ``c`` by bisection
    in ``log c`` inside the bracket ``3 m <= c <= 2 / (1 - m)``, which holds
    because ``1 - 2/c <= ICI(c) <= c/3``. ``max_ici >= 1`` gives ``inf``.

    Parameters
    ----------
    max_ici : float or array_like
        Allowed ICI-to-signal power ratio, >= 0.
    useful_symbol_s : float or array_like
        Useful symbol length ``T_u`` in s, > 0.

    Returns
    -------
    float or ndarray
        3-dB linewidth ``beta`` in Hz.

    Examples
    --------
    >>> round(linewidth_for_ici(1e-3, 1 / 15e3), 4)
    14.3347
    """
    m = _floats("max_ici", max_ici)
    t_u = _floats("useful_symbol_s", useful_symbol_s)
    _require("max_ici", m, m >= 0, "an ICI power ratio >= 0")
    _require("useful_symbol_s", t_u, (t_u > 0) & np.isfinite(t_u), "a finite duration > 0 s")
    m, t_u = np.broadcast_arrays(m, t_u)
    solvable = (m > 0) & (m < 1)
    target = np.where(solvable, m, 0.5)
    lo = np.log(3.0 * target)  # ICI(c) <= c/3, so ICI(3m) <= m
    hi = np.log(2.0 / (1.0 - target))  # ICI(c) >= 1 - 2/c, so ICI(2/(1-m)) >= m
    for _ in range(80):  # the log-bracket spans < 60 nepers, 80 halvings leave < 1e-22
        mid = 0.5 * (lo + hi)
        above = _wiener_ici_of_c(np.exp(mid)) > target
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    c = np.exp(0.5 * (lo + hi))
    c = np.where(solvable, c, np.where(m >= 1, np.inf, 0.0))
    return _result(c / (np.pi * t_u))
