"""Pilot lattices: density, 2-D aliasing limits and channel-estimation error.

A pilot lattice is fixed by three integers: ``freq_spacing`` D_f (subcarriers
between the pilots of one pilot-bearing symbol), ``time_spacing`` D_t (symbols
between pilot-bearing symbols) and ``shift`` s (frequency shift of the pilots
from one pilot-bearing symbol to the next; 0 gives a rectangular lattice).
Pilots sit at the resource elements (subcarrier k, symbol l)::

    (k, l) = i * (D_f, 0) + j * (s, D_t)        for all integers i, j

so the generator vectors are v1 = (D_f, 0) and v2 = (s, D_t), the pilot density
is 1 / (D_f D_t), and in physical units the generator matrix is
G = diag(df, T_s) [[D_f, s], [0, D_t]] with df the subcarrier spacing in Hz and
T_s = T_u + T_cp the symbol duration in s. DVB-T scattered pilots are
D_f = 12, s = 3, D_t = 1 (ETSI EN 300 744 sect. 4.5.3).

Sampling the time-varying transfer function on this lattice repeats its
delay-Doppler support on the reciprocal lattice G^-T (points in delay s,
Doppler Hz); the support must not overlap its replicas (Hoeher, Kaiser and
Robertson, ICASSP 1997; Fazel and Kaiser, *Multi-Carrier and Spread Spectrum
Systems*). :func:`aliasing_scale`, :func:`max_delay_for_lattice` and
:func:`max_doppler_for_lattice` answer that question exactly;
:func:`estimation_mse` and :func:`estimator_weights` give the error of a
linear or a finite-window Wiener (LMMSE) interpolator.

Everything is vectorised: integer lattice parameters broadcast with float
numerology and channel parameters, and the result has the broadcast shape.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .grouping import distinct_rows

__all__ = [
    "PilotWeights",
    "aliasing_scale",
    "correlation_lags",
    "estimation_mse",
    "estimation_mse_tabulated",
    "estimator_weights",
    "max_delay_for_lattice",
    "max_doppler_for_lattice",
    "pilot_density",
    "reciprocal_lattice_points",
]

#: Estimator names accepted by :func:`estimation_mse` and :func:`estimator_weights`.
ESTIMATORS = ("lmmse", "linear")

#: Relative slack in the boundary tests of the delay and Doppler limits: supports
#: that touch within this fraction count as touching, i.e. not aliased.
_TOUCH_RTOL = 1e-12

#: Floor on the noise-to-pilot power ratio used when *designing* the LMMSE
#: weights (100 dB pilot SNR). It keeps the noise-free limit well conditioned;
#: the MSE is always evaluated with the true noise.
_DESIGN_NOISE_FLOOR = 1e-10

#: Highest pilot SNR (linear, 60 dB) for the trace form of the cell-averaged LMMSE error: it computes
#: 1 - q with q close to 1, so round-off (~1e-12 absolute) would swamp the tiny errors of higher SNRs,
#: where the per-target form is used instead.
_TRACE_FORM_MAX_SNR = 1e6

#: Candidates of one lattice processed at once by the separable LMMSE average, and the fewest
#: candidates of one lattice worth that path (smaller groups go through the block path).
_GROUP_CHUNK = 512
_GROUP_MIN = 64

#: Complex values the per-row correlation factors of one lattice may take at once (64 MiB); beyond
#: it, each chunk of candidates builds the factors of its own rows only.
_FACTOR_BUDGET = 1 << 22

#: Targets (candidate x cell position) processed per block in estimation_mse.
_TARGETS_PER_BLOCK = 1 << 13

#: Candidate x index elements per block in the reciprocal-lattice scans.
_SCAN_ELEMENTS = 1 << 22


# --- input checks --------------------------------------------------------------


def _whole(name, value, low):
    """Integer-valued array >= low, as int64 (floats holding whole numbers pass)."""
    arr = np.asarray(value)
    if arr.dtype.kind not in "iuf":
        raise InputError(name, f"expected whole numbers >= {low}, got {value!r}")
    if arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise InputError(name, f"expected whole numbers >= {low}, got {value!r}")
    arr = arr.astype(np.int64)
    if np.any(arr < low):
        raise InputError(name, f"expected whole numbers >= {low}, got {value!r}")
    return arr


def _real(name, value, *, positive, allow_inf=False):
    """Float array, > 0 (positive) or >= 0, NaN always rejected."""
    arr = np.asarray(value)
    if arr.dtype.kind not in "iuf":
        raise InputError(name, f"expected a number, got {value!r}")
    arr = arr.astype(np.float64)
    ok = arr > 0 if positive else arr >= 0  # NaN fails both
    if not allow_inf:
        ok &= np.isfinite(arr)
    if not np.all(ok):
        what = "> 0" if positive else ">= 0"
        fin = "" if allow_inf else " and finite"
        raise InputError(name, f"expected values {what}{fin}, got {value!r}")
    return arr


def _lattice(freq_spacing, time_spacing, shift):
    """Checked integer lattice parameters (D_f, D_t, s), not yet broadcast."""
    d_f = _whole("freq_spacing", freq_spacing, 1)
    d_t = _whole("time_spacing", time_spacing, 1)
    s = _whole("shift", shift, 0)
    try:
        too_big = np.any(s >= d_f)
    except ValueError:
        raise InputError("shift", "does not broadcast with freq_spacing") from None
    if too_big:
        raise InputError("shift", f"expected 0 <= shift < freq_spacing, got shift {shift!r}, freq_spacing {freq_spacing!r}")
    return d_f, d_t, s


def _broadcast_flat(*arrays, extra_shape=()):
    """Broadcast arrays together (and with ``extra_shape``); return shape and 1-D copies."""
    try:
        shape = np.broadcast_shapes(*(np.shape(a) for a in arrays), tuple(extra_shape))
    except ValueError:
        raise InputError("pilot lattice", "the lattice, numerology and channel arrays do not broadcast together") from None
    return shape, [np.broadcast_to(a, shape).ravel() for a in arrays]


def _checked(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, *others, extra_shape=()):
    """Lattice, numerology and further real parameters, checked, broadcast together and flattened.

    ``others``: ``(name, value, positive, allow_inf)`` per further parameter.
    Returns ``(shape, [d_f, d_t, s, df, ts, *others])``.
    """
    d_f, d_t, s = _lattice(freq_spacing, time_spacing, shift)
    reals = [_real("subcarrier_spacing_hz", subcarrier_spacing_hz, positive=True),
             _real("symbol_s", symbol_s, positive=True)]
    reals += [_real(name, value, positive=positive, allow_inf=allow_inf) for name, value, positive, allow_inf in others]
    return _broadcast_flat(d_f, d_t, s, *reals, extra_shape=extra_shape)


def _ratio(numerator, denominator):
    """numerator / denominator for numerator >= 0, denominator >= 0, with 0/0 = 0 and x/0 = inf.

    0/0 = 0 is the limit of a vanishing support: a replica at zero offset on an
    axis overlaps on that axis whatever the support's width there.
    """
    numerator = np.asarray(numerator, dtype=np.float64)
    out = np.full(np.broadcast_shapes(numerator.shape, np.shape(denominator)), np.inf)
    with np.errstate(over="ignore"):  # a vanishing support: the ratio is rightly inf
        np.divide(numerator, denominator, out=out, where=np.asarray(denominator) > 0)
    return np.where(numerator == 0, 0.0, out)


# --- lattice geometry ----------------------------------------------------------


def pilot_density(freq_spacing, time_spacing):
    """Fraction of resource elements that carry pilots, 1 / (D_f D_t).

    Parameters
    ----------
    freq_spacing : int or array of int
        D_f, subcarriers between pilots in a pilot-bearing symbol (>= 1).
    time_spacing : int or array of int
        D_t, symbols between pilot-bearing symbols (>= 1).

    Returns
    -------
    float or ndarray
        The density, the inverse of the lattice determinant in resource elements.

    References
    ----------
    Hoeher, Kaiser, Robertson, "Two-dimensional pilot-symbol-aided channel
    estimation by Wiener filtering", Proc. IEEE ICASSP 1997 (lattice view).

    Examples
    --------
    >>> float(pilot_density(12, 1))
    0.08333333333333333
    """
    d_f = _whole("freq_spacing", freq_spacing, 1)
    d_t = _whole("time_spacing", time_spacing, 1)
    return 1.0 / (d_f * d_t)  # 1/|det| of [[D_f, s], [0, D_t]]


def reciprocal_lattice_points(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, index_max):
    """Points of the reciprocal lattice, by direct inversion of the generator matrix.

    The points are ``m u1 + n u2`` for ``|m|, |n| <= index_max`` where (u1, u2)
    are the columns of G^-T, G = [[D_f df, s df], [0, D_t T_s]] being the pilot
    lattice's generator in (Hz, s). They are where sampling on the pilot lattice
    repeats the channel's delay-Doppler spreading function. This function is a
    plain enumeration (for checks and plots); the limits below use an exact
    short scan instead.

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s = T_u + T_cp in s.
    index_max : int
        Largest absolute index m, n enumerated.

    Returns
    -------
    delay_s, doppler_hz : ndarray
        Coordinates of the points, each shaped ``broadcast + (2 index_max + 1,) * 2``,
        indexed ``[..., m + index_max, n + index_max]``.

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997 (2-D sampling of the
    transfer function); Fazel and Kaiser, *Multi-Carrier and Spread Spectrum
    Systems*, ch. on channel estimation (from memory).

    Examples
    --------
    A rectangular lattice repeats every 1/(D_f df) in delay:

    >>> tau, nu = reciprocal_lattice_points(4, 2, 0, 15e3, 1 / 14e3, 1)
    >>> round(float(tau[2, 1]) * 1e6, 3)
    16.667
    """
    shape, (d_f, d_t, s, df, ts) = _checked(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s)
    r = int(_whole("index_max", index_max, 0))
    g = np.zeros(d_f.shape + (2, 2))
    g[:, 0, 0] = d_f * df
    g[:, 0, 1] = s * df
    g[:, 1, 1] = d_t * ts
    u = np.linalg.inv(g).transpose(0, 2, 1)  # columns u1, u2 of G^-T, in (s, Hz)
    m = np.arange(-r, r + 1)
    mm, nn = np.meshgrid(m, m, indexing="ij")
    delay = u[:, 0, 0, None, None] * mm + u[:, 0, 1, None, None] * nn
    doppler = u[:, 1, 0, None, None] * mm + u[:, 1, 1, None, None] * nn
    out_shape = shape + mm.shape
    return delay.reshape(out_shape), doppler.reshape(out_shape)


def _scan_blocks(d_f, s):
    """Yield (m, r) blocks: m = 0..max(D_f) (1, B) and r(m) (n, B).

    In lattice units the reciprocal points are (m / (D_f df), (n D_f - m s) /
    (D_f D_t T_s)). For each m only the n nearest m s / D_f matters, leaving the
    Doppler offset r(m) / (D_f D_t T_s) with r(m) the distance of m s to the
    nearest multiple of D_f (r(0) = D_f: the m = 0, n = +-1 points). r has
    period P = D_f / gcd(s, D_f) <= D_f and r(P) = 0, so the point m = P,
    lying on the delay axis, dominates every m > P: m in 0..D_f is exhaustive.
    """
    n = d_f.size
    m_top = int(d_f.max()) if n else 0
    block = max(1, _SCAN_ELEMENTS // max(n, 1))
    for start in range(0, m_top + 1, block):
        m = np.arange(start, min(start + block, m_top + 1))[None, :]
        q = (m * s[:, None]) % d_f[:, None]
        r = np.minimum(q, d_f[:, None] - q)
        r = np.where(m == 0, d_f[:, None], r)
        yield m, r


def aliasing_scale(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, max_delay_s, max_doppler_hz):
    """Largest factor by which the channel's delay-Doppler support can grow before it aliases.

    The support is the rectangle [0, tau_max] x [-f_D, f_D]. Two copies offset
    by a reciprocal point (dtau, dnu) overlap iff abs(dtau) < tau_max and
    abs(dnu) < 2 f_D, so the scale is::

        g = min over nonzero reciprocal points of max(abs(dtau) / tau_max, abs(dnu) / (2 f_D))

    with 0/0 taken as 0 and x/0 as infinity (a zero-width support still aliases
    with a replica at zero offset on that axis); g is infinite when both are 0.
    ``g >= 1`` means no aliasing; ``g`` is the pilot oversampling factor.

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s = T_u + T_cp in s.
    max_delay_s : float or array
        Maximum excess delay tau_max in s (>= 0).
    max_doppler_hz : float or array
        Maximum Doppler frequency f_D in Hz (>= 0); the Doppler support is 2 f_D wide.

    Returns
    -------
    ndarray
        g, broadcast shape of the inputs.

    Notes
    -----
    Exact: the scan over m = 0..D_f with the nearest n (see ``_scan_blocks``)
    contains the minimiser. A rectangular lattice gives
    g = min(1 / (D_f df tau_max), 1 / (2 f_D D_t T_s)).

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997; Fazel and Kaiser,
    *Multi-Carrier and Spread Spectrum Systems* (2-D sampling theorem for
    pilot grids; from memory).

    Examples
    --------
    DVB-T 8k, guard 1/4 (T_u = 896 us, T_s = 1120 us), echoes to 224 us at 50 Hz:

    >>> round(float(aliasing_scale(12, 1, 3, 1 / 896e-6, 1120e-6, 224e-6, 50.0)), 4)
    1.3333
    """
    shape, (d_f, d_t, s, df, ts, tau, f_d) = _checked(
        freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s,
        ("max_delay_s", max_delay_s, False, False), ("max_doppler_hz", max_doppler_hz, False, False))
    delay_unit = (d_f * df * tau)[:, None]  # m / this = abs(dtau) / tau_max
    doppler_unit = (d_f * d_t * ts * 2.0 * f_d)[:, None]  # r / this = abs(dnu) / (2 f_D)
    if d_f.size == 0:
        return np.zeros(shape)
    m, r = _staircase(d_f, s)
    worst = np.maximum(_ratio(m, delay_unit), _ratio(r, doppler_unit))
    return worst.min(axis=1).reshape(shape)


def _staircase(d_f, s):
    """The reciprocal points that can be the nearest, as (m, r(m)) arrays (n, K), per candidate.

    Of the points (m, r(m)), m = 0..D_f (see ``_scan_blocks``), only those
    whose r is below every r of a smaller m can set the minimum of
    max(m / a, r / b) for any support (a, b): the others are dominated. The
    staircase depends on (D_f, s) only, so it is found once per distinct pair
    and padded by repeating its last point.
    """
    index, first = distinct_rows(np.stack([d_f, s], axis=1))
    steps = [_steps(int(d_f[i]), int(s[i])) for i in first]
    width = max(len(m) for m, _ in steps)
    m_table = np.empty((len(steps), width), dtype=np.int64)
    r_table = np.empty((len(steps), width), dtype=np.int64)
    for row, (m, r) in enumerate(steps):  # padded by repeating the last point
        m_table[row, :len(m)], m_table[row, len(m):] = m, m[-1]
        r_table[row, :len(r)], r_table[row, len(r):] = r, r[-1]
    return m_table[index], r_table[index]


_STEPS: dict = {}  # (D_f, s) -> the staircase (m, r): lattices recur across calls


def _steps(lat_f: int, lat_s: int):
    """The staircase of one lattice (D_f, s), remembered within a process."""
    found = _STEPS.get((lat_f, lat_s))
    if found is None:
        (m, r), = _scan_blocks(np.array([lat_f]), np.array([lat_s]))
        m, r = m[0], r[0]
        keep = r < np.minimum.accumulate(np.concatenate([[np.iinfo(np.int64).max], r[:-1]]))
        found = _STEPS.setdefault((lat_f, lat_s), (m[keep], r[keep]))
    return found


def max_delay_for_lattice(
    freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, max_doppler_hz, oversampling=1.0
):
    """Largest maximum excess delay the lattice resolves at a given Doppler.

    The largest tau_max with ``aliasing_scale(..., tau_max, f_D) >= oversampling``,
    i.e. the support scaled by ``oversampling`` does not alias: the smallest
    abs(dtau) / oversampling among the reciprocal points whose Doppler offset lies
    inside the scaled Doppler support (offset 0 included).

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s in s.
    max_doppler_hz : float or array
        Maximum Doppler f_D in Hz (>= 0).
    oversampling : float or array, optional
        Required scale factor (> 0), 1 for the bare Nyquist limit.

    Returns
    -------
    ndarray
        tau_max in s; NaN where the Doppler alone aliases
        (2 f_D oversampling > 1 / (D_t T_s)), so that no delay spread fits.

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997 (from memory).

    Examples
    --------
    DVB-T 8k scattered pilots at low Doppler reach T_u / 3:

    >>> round(float(max_delay_for_lattice(12, 1, 3, 1 / 896e-6, 1120e-6, 10.0)) * 1e6, 1)
    298.7
    """
    shape, (d_f, d_t, s, df, ts, f_d, over) = _checked(
        freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s,
        ("max_doppler_hz", max_doppler_hz, False, False), ("oversampling", oversampling, True, False))
    # r < 2 f_D (scaled) D_f D_t T_s  <=>  abs(dnu) < scaled Doppler width
    width = (2.0 * f_d * over * d_f * d_t * ts * (1.0 - _TOUCH_RTOL))[:, None]
    tau = np.full(d_f.shape, np.inf)
    for m, r in _scan_blocks(d_f, s):
        inside = (r == 0) | (r < width)
        dtau = np.where(inside, m / (d_f * df)[:, None], np.inf)
        tau = np.minimum(tau, dtau.min(axis=1))
    with np.errstate(over="ignore"):
        tau = np.where(tau > 0, tau / over, np.nan)
    return tau.reshape(shape)


def max_doppler_for_lattice(
    freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, max_delay_s, oversampling=1.0
):
    """Largest maximum Doppler frequency the lattice resolves at a given delay.

    Half the smallest abs(dnu) among the reciprocal points whose delay offset lies
    inside the delay support scaled by ``oversampling``, divided by
    ``oversampling``.

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s in s.
    max_delay_s : float or array
        Maximum excess delay tau_max in s (>= 0).
    oversampling : float or array, optional
        Required scale factor (> 0), 1 for the bare Nyquist limit.

    Returns
    -------
    ndarray
        f_D in Hz; NaN where the delay alone aliases, so that no Doppler fits.

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997 (from memory).

    Examples
    --------
    DVB-T 8k, guard 1/4, echoes beyond T_u/12: 1/(8 T_s).

    >>> round(float(max_doppler_for_lattice(12, 1, 3, 1 / 896e-6, 1120e-6, 200e-6)), 1)
    111.6
    """
    shape, (d_f, d_t, s, df, ts, tau, over) = _checked(
        freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s,
        ("max_delay_s", max_delay_s, False, False), ("oversampling", oversampling, True, False))
    # m < tau_max (scaled) D_f df  <=>  abs(dtau) < scaled delay width
    width = (tau * over * d_f * df * (1.0 - _TOUCH_RTOL))[:, None]
    f_max = np.full(d_f.shape, np.inf)
    for m, r in _scan_blocks(d_f, s):
        inside = (m == 0) | (m < width)
        dnu = np.where(inside, r / (d_f * d_t * ts)[:, None], np.inf)
        f_max = np.minimum(f_max, dnu.min(axis=1))
    with np.errstate(over="ignore"):
        f_max = np.where(f_max > 0, f_max / (2.0 * over), np.nan)
    return f_max.reshape(shape)


# --- estimators ----------------------------------------------------------------


@dataclass(frozen=True)
class PilotWeights:
    """Interpolation weights of a pilot-based channel estimator, per target.

    The estimate at the target resource element (k, l) is
    ``sum(weights * Y[k + subcarrier_offset, l + symbol_offset], axis=-1)``,
    Y being the received pilots divided by their known symbols (channel plus
    noise of power 1 / pilot_snr, channel power 1).

    Attributes
    ----------
    subcarrier_offset : ndarray of int
        Pilot subcarrier minus target subcarrier, shape ``(..., n_pilots)``.
    symbol_offset : ndarray of int
        Pilot symbol minus target symbol, same shape.
    weights : ndarray of complex
        Coefficients applied to the pilots, same shape.
    mse : ndarray of float
        E abs(H - Hhat)^2 / E abs(H)^2 at each target, shape ``(...)``.
    """

    subcarrier_offset: np.ndarray
    symbol_offset: np.ndarray
    weights: np.ndarray
    mse: np.ndarray

    def __str__(self) -> str:
        mean = f"{float(np.mean(self.mse)):.4g}" if self.mse.size else "n/a"
        return f"PilotWeights: {self.mse.size} targets x {self.weights.shape[-1]} pilots, mean MSE {mean}"


def _check_estimator(estimator, window):
    if estimator not in ESTIMATORS:
        raise InputError("estimator", f"expected one of {', '.join(ESTIMATORS)}, got {estimator!r}")
    try:
        n_f, n_t = window
    except (TypeError, ValueError):
        raise InputError("window", f"expected two whole numbers (n_f, n_t) >= 1, got {window!r}") from None
    for value in (n_f, n_t):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise InputError("window", f"expected two whole numbers (n_f, n_t) >= 1, got {window!r}")
    return (int(n_f), int(n_t)) if estimator == "lmmse" else (1, 1)


def _lag_bounds(d_f, d_t, s, reach):
    """Largest abs subcarrier and symbol lag any estimator can need, over all candidates.

    A window pilot (i, j) in lattice coordinates lies within n/2 + 1 lattice
    steps of the target's coordinates (a, b), so abs(k_p - k) <= (n_f + 1) D_f +
    (n_t + 1) s and abs(l_p - l) <= (n_t + 1) D_t; pilot-pilot lags are smaller.
    """
    n_f, n_t = reach
    k_max = int(((n_f + 1) * d_f + (n_t + 1) * s).max()) if d_f.size else 0
    l_max = int(((n_t + 1) * d_t).max()) if d_t.size else 0
    return k_max, l_max


def _correlation_table(name, func, unit, max_lag):
    """Two-sided table of a correlation callable at integer lags -max_lag..max_lag times unit.

    The callable is evaluated once, at the non-negative lags (shape (n_cand,
    max_lag + 1)); negative lags follow from R(-x) = conj(R(x)). Column
    max_lag + q holds lag q.
    """
    lags = np.arange(max_lag + 1)[None, :] * unit[:, None]
    try:
        values = np.broadcast_to(np.asarray(func(lags), dtype=np.complex128), lags.shape)
    except (ValueError, TypeError) as exc:
        raise InputError(name, f"must return an array shaped like its (n_candidates, n_lags) argument ({exc})") from None
    return _two_sided(name, values)


def _two_sided(name, values):
    """Checked one-sided correlations (n, max_lag + 1) as the two-sided table ``_lookup`` reads."""
    if not np.all(np.isfinite(values)):
        raise InputError(name, "returned a non-finite correlation")
    if np.any(np.abs(values[:, 0] - 1.0) > 1e-6):
        raise InputError(name, "must be normalised: 1 at zero lag")
    return np.concatenate([values[:, :0:-1].conj(), values], axis=1)


def _lookup(table, lag):
    """table[cand, lag] from a two-sided table; lag has the candidate axis first."""
    n, width = table.shape
    if lag.size and np.abs(lag).max() > width // 2:  # guards the bound in _lag_bounds
        raise RuntimeError("pilot estimator needs a correlation lag beyond the table")
    rows = (np.arange(n) * width + width // 2).reshape((n,) + (1,) * (lag.ndim - 1))
    return table.ravel()[rows + lag]


def _window_start(numerator, denominator, n):
    """Lowest of the n integers nearest numerator / denominator (a lattice coordinate)."""
    if n % 2 == 0:
        return numerator // denominator - n // 2 + 1  # floor(x) - n/2 + 1 .. floor(x) + n/2
    return (2 * numerator + denominator) // (2 * denominator) - n // 2  # round(x) -+ (n-1)/2


def _lmmse_window(d_f, d_t, s, f_table, t_table, tk, tl, window):
    """The LMMSE window of each target: offsets, target and pilot correlations.

    For flat candidates (n,) and targets (n, P): the n_f x n_t pilots (i, j)
    nearest the target's lattice coordinates (a, b), as subcarrier and symbol
    offsets from the target ``dk``, ``dl`` (n, P, W); ``r`` (n, P, W), r_p =
    E[h_p H*] (WSSUS product); and ``big_r`` (n, W, W), R_pq = E[h_p h_q*],
    the same for every target of a candidate.
    """
    n_f, n_t = window
    num_a = tk * d_t[:, None] - tl * s[:, None]  # a = num_a / (D_f D_t): target along v1
    ii, jj = (g.ravel() for g in np.meshgrid(np.arange(n_f), np.arange(n_t), indexing="ij"))
    pi = _window_start(num_a, (d_f * d_t)[:, None], n_f)[..., None] + ii
    pj = _window_start(tl, d_t[:, None], n_t)[..., None] + jj
    dk = pi * d_f[:, None, None] + pj * s[:, None, None] - tk[..., None]
    dl = pj * d_t[:, None, None] - tl[..., None]
    r = _lookup(f_table, dk) * _lookup(t_table, dl)
    di = ii[:, None] - ii[None, :]
    dj = jj[:, None] - jj[None, :]
    big_r = _lookup(f_table, di * d_f[:, None, None] + dj * s[:, None, None]) * _lookup(t_table, dj * d_t[:, None, None])
    return dk, dl, r, big_r


def _weights_core(d_f, d_t, s, snr, f_table, t_table, tk, tl, estimator, window):
    """Offsets, weights and MSE for flat candidates (n,) and targets (n, P)."""
    noise = np.where(np.isinf(snr), 0.0, 1.0 / snr)[:, None]  # noise / pilot power
    if estimator == "lmmse":
        dk, dl, r, big_r = _lmmse_window(d_f, d_t, s, f_table, t_table, tk, tl, window)
        eye = np.eye(big_r.shape[-1])
        design = big_r + np.maximum(noise, _DESIGN_NOISE_FLOOR)[..., None] * eye
        w = np.linalg.solve(design, r.transpose(0, 2, 1)).transpose(0, 2, 1)  # w = (R + I/snr)^-1 r, Wiener
        aw = w @ big_r.transpose(0, 2, 1) + noise[..., None] * w  # (R + I/snr) w
    else:
        num_a = tk * d_t[:, None] - tl * s[:, None]  # a = num_a / (D_f D_t): target along v1
        den_a = (d_f * d_t)[:, None]
        i0 = num_a // den_a
        j0 = tl // d_t[:, None]
        alpha = (num_a - i0 * den_a) / den_a  # fractional lattice coordinates in [0, 1)
        beta = (tl - j0 * d_t[:, None]) / d_t[:, None]
        upper = alpha + beta > 1.0
        # Triangle (0, v1, v2) below the v1-v2 diagonal, (v1 + v2, v1, v2) above it.
        corner = upper.astype(np.int64)
        pi = i0[..., None] + np.stack([corner, np.ones_like(corner), np.zeros_like(corner)], axis=-1)
        pj = j0[..., None] + np.stack([corner, np.zeros_like(corner), np.ones_like(corner)], axis=-1)
        w = np.where(
            upper[..., None],
            np.stack([alpha + beta - 1.0, 1.0 - beta, 1.0 - alpha], axis=-1),  # barycentric, upper
            np.stack([1.0 - alpha - beta, alpha, beta], axis=-1),  # barycentric, lower
        ).astype(np.complex128)
        dk = pi * d_f[:, None, None] + pj * s[:, None, None] - tk[..., None]
        dl = pj * d_t[:, None, None] - tl[..., None]
        r = _lookup(f_table, dk) * _lookup(t_table, dl)  # r_p = E[h_p H*], WSSUS product
        big_r = _lookup(f_table, dk[..., :, None] - dk[..., None, :]) * _lookup(t_table, dl[..., :, None] - dl[..., None, :])
        aw = np.einsum("npij,npj->npi", big_r, w) + noise[..., None] * w
    # MSE = 1 - 2 Re(w^H r) + w^H (R + I/snr) w, channel power 1
    mse = 1.0 - 2.0 * np.sum(w.conj() * r, axis=-1).real + np.sum(w.conj() * aw, axis=-1).real
    return dk, dl, w.conj(), np.maximum(mse, 0.0)  # clip round-off below 0


def _lower_inverse(low):
    """Inverses of a batch (axis 0) of real lower-triangular matrices, by recursive 2 x 2 blocking.

    inv([[L11, 0], [L21, L22]]) = [[X11, 0], [-X22 L21 X11, X22]] with X = inv(L):
    a few batched matrix products per level instead of one LAPACK call per
    matrix (numpy has no batched triangular inverse).
    """
    n = low.shape[-1]
    if n == 1:
        return 1.0 / low
    if n == 2:
        out = np.zeros_like(low)
        out[:, 0, 0] = 1.0 / low[:, 0, 0]
        out[:, 1, 1] = 1.0 / low[:, 1, 1]
        out[:, 1, 0] = -low[:, 1, 0] * out[:, 0, 0] * out[:, 1, 1]
        return out
    h, batch = n // 2, low.shape[0]
    if n == 2 * h:  # equal halves: one recursive call on both
        both = np.empty((2 * batch, h, h))
        both[:batch] = low[:, :h, :h]
        both[batch:] = low[:, h:, h:]
        both = _lower_inverse(both)
        x11, x22 = both[:batch], both[batch:]
    else:
        x11 = _lower_inverse(np.ascontiguousarray(low[:, :h, :h]))
        x22 = _lower_inverse(np.ascontiguousarray(low[:, h:, h:]))
    out = np.empty_like(low)
    out[:, :h, :h] = x11
    out[:, :h, h:] = 0.0
    out[:, h:, h:] = x22
    np.matmul(np.matmul(x22, low[:, h:, :h]), -x11, out=out[:, h:, :h])
    return out


def _trace_of_solve(a, s):
    """tr(a^-1 s) per batch item, for Hermitian positive-definite ``a`` and Hermitian ``s`` (axis 0: batch).

    ``a`` may be given by its top half only, shape (n, size // 2, size) for an
    even size: the rest follows from J a J = conj(a).

    The window's pilot-pilot matrix is centrohermitian, J a J = conj(a) with J
    the exchange matrix (the window is point-symmetric: reversing the pilot
    order negates every lag, and R(-x) = conj(R(x))). For even size 2m the
    unitary Q = [[I, jI], [J, -jJ]] / sqrt(2) makes b = Q^H a Q real
    symmetric (A. Lee, "Centrohermitian and skew-centrohermitian matrices",
    Linear Algebra Appl. 29, 1980, from memory); with P = a11 + a12 J and M = a11 - a12 J,
    b = [[Re P, -Im M], [Im P, Re M]]. As tr(a^-1 s) is real, it equals
    tr(b^-1 c) with c = Re(Q^H s Q), and b^-1 comes from a real Cholesky
    factor: tr(b^-1 c) = sum((X c) o X), X = L^-1. About four times fewer
    operations than a complex solve, and batched LAPACK Cholesky is cheap.
    Odd sizes (or a factorisation that fails) take the complex solve.
    """
    size = a.shape[-1]
    if size % 2 == 0:
        m, top, low = size // 2, slice(None, size // 2), slice(size // 2, None)
        rev = slice(size - 1, m - 1, -1)  # the second half, reversed (J applied)
        a11, a12j = a[:, top, top], a[:, top, rev]
        b = np.empty((a.shape[0], size, size))
        np.add(a11.real, a12j.real, out=b[:, top, top])  # Re P
        np.subtract(a12j.imag, a11.imag, out=b[:, top, low])  # -Im M
        np.add(a11.imag, a12j.imag, out=b[:, low, top])  # Im P
        np.subtract(a11.real, a12j.real, out=b[:, low, low])  # Re M
        s11, s12j, js21, js22j = s[:, top, top], s[:, top, rev], s[:, rev, top], s[:, rev, rev]
        u, v = s11 + js22j, s12j + js21
        w, x = s11 - js22j, s12j - js21
        c = np.empty(b.shape)
        np.add(u.real, v.real, out=c[:, top, top])
        np.subtract(x.imag, w.imag, out=c[:, top, low])
        np.add(w.imag, x.imag, out=c[:, low, top])
        np.subtract(u.real, v.real, out=c[:, low, low])
        try:
            inv_low = _lower_inverse(np.linalg.cholesky(b))
        except np.linalg.LinAlgError:
            pass  # not numerically positive definite: the general solve below copes
        else:
            return 0.5 * np.sum(np.matmul(inv_low, c) * inv_low, axis=(1, 2))
        if a.shape[1] < size:  # the whole matrix from its top half
            a = np.concatenate([a, a[:, ::-1, ::-1].conj()], axis=1)
    return np.einsum("nii->n", np.linalg.solve(a, s)).real


def _lmmse_cell_mean(d_f, d_t, s, snr, f_table, t_table, tk, tl, valid, window):
    """Cell-averaged LMMSE error without per-target weights (the same numbers as ``_weights_core``).

    The pilot-pilot matrix R is the same for every target of a candidate, so with
    A = R + noise I (the matrix the weights are designed with: on this path the
    pilot SNR is at most ``_TRACE_FORM_MAX_SNR``, so the design noise floor is
    inactive) and S = sum over targets of r r^H, the mean of
    MSE_t = 1 - r^H A^-1 r is 1 - tr(A^-1 S) / P: one trace per candidate
    instead of one solve per target.
    """
    noise = 1.0 / snr
    _, _, r, big_r = _lmmse_window(d_f, d_t, s, f_table, t_table, tk, tl, window)
    r = r * valid[..., None]  # padding targets contribute nothing
    a = big_r + noise[:, None, None] * np.eye(big_r.shape[-1])
    s_mat = np.matmul(r.transpose(0, 2, 1), r.conj())  # S = sum_t r_t r_t^H (batched BLAS, not einsum)
    return np.maximum(1.0 - _trace_of_solve(a, s_mat) / valid.sum(axis=1), 0.0)


def _lmmse_lattice_mean(d_f, d_t, s, snr, f_table, f_row, t_table, t_row, window):
    """Cell-averaged LMMSE error for candidates that share one lattice (even window), separably.

    Candidate c uses the frequency correlation ``f_table[f_row[c]]`` and the
    time correlation ``t_table[t_row[c]]`` (two-sided tables at whole lags).
    The average is taken over the coset representatives k = c_l .. c_l + D_f - 1
    for each symbol l = 0 .. D_t - 1, with c_l = ceil(l s / D_t): their lattice
    coordinates lie in [0, 1), so every target uses the same window of pilots
    (the error is the same on every coset, so any set of representatives gives
    the cell average). A target's correlation vector factorises,
    r[p] = F(kappa_p - k) T(lambda_p - l), so the sum of outer products over the
    targets is S = sum over c of A(c) o B(c) (elementwise), with A(c) summing
    the frequency parts over k = c .. c + D_f - 1 and B(c) the time parts over
    the symbols l with c_l = c; likewise R = R_F o R_T. The factors depend on
    one correlation each, so they are computed once per distinct table row
    (sites of a sweep share few), and each candidate only multiplies its
    factors; when all rows' factors would exceed ``_FACTOR_BUDGET``, each
    chunk of candidates builds those of its own rows (bounded memory). Then, as in ``_lmmse_cell_mean``, mean MSE = 1 - tr(A^-1 S) / P
    (pilot SNR up to ``_TRACE_FORM_MAX_SNR``, where the design and true noise
    coincide).
    """
    n_f, n_t = window
    i = np.arange(n_f) - n_f // 2 + 1  # floor(a) = 0: floor(a) - n/2 + 1 .. floor(a) + n/2
    j = np.arange(n_t) - n_t // 2 + 1
    ii, jj = (g.ravel() for g in np.meshgrid(i, j, indexing="ij"))
    kappa = ii * d_f + jj * s  # pilot subcarrier (lattice point (ii, jj))
    lam = jj * d_t  # pilot symbol
    symbols = np.arange(d_t)
    starts = -((-symbols * s) // d_t)  # c_l = ceil(l s / D_t)
    size = n_f * n_t
    rows = size // 2 if size % 2 == 0 else size  # R is centrohermitian: its top half is enough
    per_row = (np.unique(starts).size + 1) * size * size  # complex values of one row's factors

    def factors(f_rows, t_rows):
        """R_F (top rows), A_F(c) per frequency row; R_T (top rows), B_T(c) per time row."""
        f_tab, t_tab = f_table[f_rows], t_table[t_rows]
        r_f = _lookup(f_tab, (kappa[:rows, None] - kappa[None, :])[None])  # F(kappa_p - kappa_q)
        r_t = _lookup(t_tab, (lam[:rows, None] - lam[None, :])[None])  # T(lambda_p - lambda_q)
        k_all = np.arange(starts.max() + d_f)
        f_parts = _lookup(f_tab, (kappa[None, :] - k_all[:, None])[None])  # (n_F, K, W): F(kappa_p - k)
        t_parts = _lookup(t_tab, (lam[None, :] - symbols[:, None])[None])  # (n_T, D_t, W): T(lambda_p - l)
        a_f = np.stack([np.matmul(f_parts[:, c:c + d_f, :].transpose(0, 2, 1), f_parts[:, c:c + d_f, :].conj())
                        for c in np.unique(starts)], axis=1)  # sum_k f f^H
        b_t = np.stack([np.matmul(t_parts[:, starts == c, :].transpose(0, 2, 1), t_parts[:, starts == c, :].conj())
                        for c in np.unique(starts)], axis=1)  # sum_l tau tau^H
        return r_f, a_f, r_t, b_t

    # Candidates in order of their frequency correlation: where few distinct ones are shared by many
    # candidates (the sites of a sweep), each run multiplies one broadcast factor instead of gathering it.
    order = np.lexsort((t_row, f_row))  # by frequency row, then time row (gathers read nearby rows)
    f_sorted, t_sorted = f_row[order], t_row[order]
    f_used, t_used = np.unique(f_sorted), np.unique(t_sorted)
    shared = (f_used.size + t_used.size) * per_row <= _FACTOR_BUDGET
    if shared:  # every distinct row's factors at once
        common = factors(f_used, t_used)
    chunk = _GROUP_CHUNK if shared else max(16, min(_GROUP_CHUNK, _FACTOR_BUDGET // (2 * per_row)))
    diagonal = np.arange(rows)
    out = np.empty(snr.shape)
    for lo in range(0, snr.size, chunk):  # bounded memory: (chunk, W, W) per matrix
        fi, ti = f_sorted[lo:lo + chunk], t_sorted[lo:lo + chunk]
        if shared:
            r_f, a_f, r_t, b_t = common
            fi, ti = np.searchsorted(f_used, fi), np.searchsorted(t_used, ti)
        else:  # factors of this chunk's rows only
            f_here, fi = np.unique(fi, return_inverse=True)
            t_here, ti = np.unique(ti, return_inverse=True)
            r_f, a_f, r_t, b_t = factors(f_here, t_here)
        by_runs = f_used.size * 8 <= snr.size if shared else f_here.size * 8 <= fi.size
        big_r = np.empty((fi.size, rows, size), dtype=np.complex128)
        s_mat = np.empty((fi.size, size, size), dtype=np.complex128)
        if by_runs:
            runs = np.flatnonzero(np.diff(fi)) + 1
            edges = zip(np.r_[0, runs], np.r_[runs, fi.size])
        else:  # one run holding the whole chunk: gather the factors per candidate
            edges = [(0, fi.size)]
        for a, b in edges:
            f = fi[a] if by_runs else fi
            t = ti[a:b]
            np.multiply(r_f[f], r_t[t], out=big_r[a:b])  # R = R_F o R_T
            np.multiply(a_f[f, 0], b_t[t, 0], out=s_mat[a:b])  # S = sum over c of A_F(c) o B_T(c)
            for c in range(1, a_f.shape[1]):
                s_mat[a:b] += a_f[f, c] * b_t[t, c]
        big_r[:, diagonal, diagonal] += 1.0 / snr[order[lo:lo + chunk]][:, None]
        out[order[lo:lo + chunk]] = 1.0 - _trace_of_solve(big_r, s_mat) / (d_f * d_t)
    return np.maximum(out, 0.0)


def _prepare(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, pilot_snr, candidate_shape, lead_shape=()):
    try:
        extra = np.broadcast_shapes(tuple(candidate_shape), tuple(lead_shape))
    except (TypeError, ValueError):
        raise InputError(
            "candidate_shape", f"expected a shape that broadcasts with the candidates, got {candidate_shape!r}"
        ) from None
    return _checked(freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s,
                    ("pilot_snr", pilot_snr, True, True), extra_shape=extra)


def estimator_weights(
    freq_spacing,
    time_spacing,
    shift,
    subcarrier_spacing_hz,
    symbol_s,
    freq_correlation,
    time_correlation,
    pilot_snr,
    target_subcarrier,
    target_symbol,
    estimator="lmmse",
    window=(4, 4),
    candidate_shape=(),
):
    """Pilots and weights with which each estimator interpolates the channel at given targets.

    Resource elements are numbered from the pilot at (subcarrier 0, symbol 0).

    ``"lmmse"``: finite-window 2-D Wiener interpolator over the n_f x n_t
    pilots (i, j), in lattice coordinates, nearest the target's coordinates
    (a, b) = solution of (k, l) = a v1 + b v2: i runs over the n_f integers
    nearest a (for even n_f: floor(a) - n_f/2 + 1 .. floor(a) + n_f/2), j over
    the n_t nearest b, likewise. Weights w = (R + I/snr)^-1 r, with R the
    pilot-pilot and r the pilot-target correlations; the noise-to-pilot ratio
    used to *design* w is floored at 1e-10 (100 dB) for conditioning.

    ``"linear"``: piecewise-linear interpolation over the lattice triangle
    that contains the target: the cell with corners (floor(a), floor(b)) + {0,
    v1, v2, v1 + v2} is split along its v1-v2 diagonal, and the three corner
    pilots get the barycentric weights. With D_t = 1 every target has b = 0,
    so the estimator interpolates in frequency only, within one symbol.

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s in s.
    freq_correlation : callable
        R_f(lag_hz) = E[H(f + lag) H*(f)] / E abs(H)^2 (complex, 1 at lag 0), for
        example sum_k p_k exp(-j 2 pi lag tau_k) of a power-delay profile. It is
        called once with a 2-D float array of non-negative lags in Hz of shape
        (n_candidates, n_lags), candidates flattened in C order from the
        candidate shape (see Returns), and must return values broadcastable to
        that shape; per-candidate parameters enter as ``p.ravel()[:, None]``.
        Negative lags use R(-x) = conj(R(x)).
    time_correlation : callable
        R_t(lag_s) = E[H(t + lag) H*(t)] / E abs(H)^2, e.g. J0(2 pi f_D lag) for
        the classical spectrum; same contract, lags in s.
    pilot_snr : float or array
        Pilot power over noise power per resource element (linear, > 0, may be inf).
    target_subcarrier, target_symbol : int or array of int
        Target resource elements. Their leading axes (as many as the candidate
        shape has) are candidate axes; further trailing axes index targets.
    estimator : {"lmmse", "linear"}
    window : tuple of int
        (n_f, n_t) for ``"lmmse"``; ignored by ``"linear"``.
    candidate_shape : tuple of int, optional
        Extra shape the candidates broadcast to (for correlations that vary
        per candidate while the lattice does not).

    Returns
    -------
    PilotWeights
        Arrays shaped ``candidates + targets + (n_pilots,)`` (``mse``: without
        the last axis). The candidate shape is the broadcast of the lattice,
        numerology and SNR arguments, ``candidate_shape`` and the targets'
        leading axes.

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997 (2-D Wiener
    interpolation); Fazel and Kaiser, *Multi-Carrier and Spread Spectrum
    Systems* (from memory). MSE of a linear estimator: standard Wiener
    filtering result, e.g. Kay, *Fundamentals of Statistical Signal
    Processing: Estimation Theory*, ch. 12.

    Examples
    --------
    Linear interpolation half-way between two pilots of one symbol:

    >>> pw = estimator_weights(4, 1, 0, 15e3, 1e-3 / 14, lambda f: 1 + 0 * f,
    ...                        lambda t: 1 + 0 * t, float("inf"), 2, 0, "linear")
    >>> pw.subcarrier_offset.tolist(), pw.weights.real.tolist()
    ([-2, 2, -2], [0.5, 0.5, 0.0])
    """
    reach = _check_estimator(estimator, window)
    tk = _whole("target_subcarrier", target_subcarrier, np.iinfo(np.int64).min)
    tl = _whole("target_symbol", target_symbol, np.iinfo(np.int64).min)
    try:
        t_shape = np.broadcast_shapes(tk.shape, tl.shape)
    except ValueError:
        raise InputError("target_symbol", "does not broadcast with target_subcarrier") from None
    params = (freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, pilot_snr)
    try:
        base_ndim = len(np.broadcast_shapes(*(np.shape(a) for a in params), tuple(candidate_shape)))
    except (TypeError, ValueError):
        raise InputError("pilot lattice", "the lattice, numerology and SNR arrays do not broadcast together") from None
    lead, trail = (t_shape[:base_ndim], t_shape[base_ndim:]) if len(t_shape) > base_ndim else (t_shape, ())
    shape, (d_f, d_t, s, df, ts, snr) = _prepare(
        freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, pilot_snr, candidate_shape, lead
    )
    n = d_f.size
    n_targets = int(np.prod(trail))
    try:
        tk = np.broadcast_to(tk, shape + trail).reshape(n, n_targets)
        tl = np.broadcast_to(tl, shape + trail).reshape(n, n_targets)
    except ValueError:
        raise InputError("target_subcarrier", "its leading axes do not broadcast with the candidates") from None
    k_max, l_max = _lag_bounds(d_f, d_t, s, reach)
    f_table = _correlation_table("freq_correlation", freq_correlation, df, k_max)
    t_table = _correlation_table("time_correlation", time_correlation, ts, l_max)
    dk, dl, w, mse = _weights_core(d_f, d_t, s, snr, f_table, t_table, tk, tl, estimator, reach)
    out = shape + trail
    width = w.shape[-1]
    return PilotWeights(dk.reshape(out + (width,)), dl.reshape(out + (width,)), w.reshape(out + (width,)), mse.reshape(out))


def estimation_mse(
    freq_spacing,
    time_spacing,
    shift,
    subcarrier_spacing_hz,
    symbol_s,
    freq_correlation,
    time_correlation,
    pilot_snr,
    estimator="lmmse",
    window=(4, 4),
    candidate_shape=(),
):
    """Channel-estimation MSE averaged over one cell of the pilot lattice.

    The normalised error E abs(H - Hhat)^2 / E abs(H)^2 of the estimator of
    :func:`estimator_weights` (same pilots, same weights), averaged uniformly
    over the D_f D_t resource elements 0 <= k < D_f, 0 <= l < D_t, a complete
    set of representatives of the lattice's cosets (the error is the same at
    resource elements that differ by a lattice vector). The pilot itself is one
    of them: its estimate is noisy (LMMSE) or the raw pilot (linear).

    Parameters
    ----------
    freq_spacing, time_spacing, shift : int or array of int
        D_f >= 1, D_t >= 1 and 0 <= s < D_f.
    subcarrier_spacing_hz : float or array
        Subcarrier spacing df in Hz.
    symbol_s : float or array
        Symbol duration T_s in s.
    freq_correlation, time_correlation : callable
        Normalised frequency (lag in Hz) and time (lag in s) correlations; the
        contract is that of :func:`estimator_weights`: one call each with a
        (n_candidates, n_lags) array, candidates flattened in C order of the
        returned shape.
    pilot_snr : float or array
        Pilot power over noise power per resource element (linear, > 0, may be inf).
    estimator : {"lmmse", "linear"}
    window : tuple of int
        (n_f, n_t) pilots for ``"lmmse"``.
    candidate_shape : tuple of int, optional
        Extra shape the candidates broadcast to.

    Returns
    -------
    ndarray
        Mean MSE per candidate, shaped as the broadcast of the array arguments
        and ``candidate_shape``.

    References
    ----------
    Hoeher, Kaiser, Robertson, Proc. IEEE ICASSP 1997 (from memory).

    Examples
    --------
    A static, frequency-flat channel with an LMMSE over 16 pilots at 10 dB:
    every resource element has MSE 1 / (1 + 16 snr).

    >>> one = lambda lag: np.ones_like(lag)
    >>> round(float(estimation_mse(6, 2, 3, 15e3, 1e-3 / 14, one, one, 10.0)), 6)
    0.006211
    """
    reach = _check_estimator(estimator, window)
    shape, (d_f, d_t, s, df, ts, snr) = _prepare(
        freq_spacing, time_spacing, shift, subcarrier_spacing_hz, symbol_s, pilot_snr, candidate_shape
    )
    if d_f.size == 0:
        return np.zeros(shape)
    k_max, l_max = _lag_bounds(d_f, d_t, s, reach)
    f_table = _correlation_table("freq_correlation", freq_correlation, df, k_max)
    t_table = _correlation_table("time_correlation", time_correlation, ts, l_max)
    rows = np.arange(d_f.size)  # one table row per candidate
    return _cell_mean(d_f, d_t, s, snr, f_table, rows, t_table, rows, estimator, reach).reshape(shape)


def correlation_lags(freq_spacing, time_spacing, shift, estimator="lmmse", window=(4, 4)):
    """Largest subcarrier and symbol lags at which :func:`estimation_mse_tabulated` reads its tables.

    Returns ``(k_max, l_max)``: over all the given lattices, the frequency
    table must hold lags 0 .. k_max subcarrier spacings and the time table
    lags 0 .. l_max symbol durations.
    """
    reach = _check_estimator(estimator, window)
    d_f, d_t, s = _lattice(freq_spacing, time_spacing, shift)
    _, (d_f, d_t, s) = _broadcast_flat(d_f, d_t, s)
    return _lag_bounds(d_f, d_t, s, reach)


def estimation_mse_tabulated(
    freq_spacing,
    time_spacing,
    shift,
    pilot_snr,
    freq_table,
    freq_row,
    time_table,
    time_row,
    estimator="lmmse",
    window=(4, 4),
):
    """:func:`estimation_mse` with the correlations given as tables that candidates share.

    For sweeps and batches where many candidates share one frequency
    correlation (same power-delay profile and subcarrier spacing) or one time
    correlation (same Doppler spectrum and symbol duration): each distinct
    correlation is tabulated once, and the estimator's correlation factors are
    built once per table row rather than once per candidate.

    Parameters
    ----------
    freq_spacing, time_spacing, shift, pilot_snr : int, float or array
        As for :func:`estimation_mse`; they broadcast with ``freq_row`` and ``time_row``.
    freq_table : array (n_F, K + 1) of complex
        ``freq_table[r, q]`` = R_f(q df) of correlation r at lags q = 0 .. K
        subcarrier spacings (the candidate's own spacing), with
        K >= ``correlation_lags(...)[0]``; 1 at lag 0.
    freq_row : int or array of int
        Row of ``freq_table`` each candidate uses.
    time_table : array (n_T, L + 1) of complex
        ``time_table[r, q]`` = R_t(q T_s) at lags q = 0 .. L symbol durations,
        L >= ``correlation_lags(...)[1]``; 1 at lag 0.
    time_row : int or array of int
        Row of ``time_table`` each candidate uses.
    estimator, window
        As for :func:`estimation_mse`.

    Returns
    -------
    ndarray
        Mean MSE per candidate, shaped as the broadcast of the array arguments.
    """
    reach = _check_estimator(estimator, window)
    d_f, d_t, s = _lattice(freq_spacing, time_spacing, shift)
    snr = _real("pilot_snr", pilot_snr, positive=True, allow_inf=True)
    f_row = _whole("freq_row", freq_row, 0)
    t_row = _whole("time_row", time_row, 0)
    shape, (d_f, d_t, s, snr, f_row, t_row) = _broadcast_flat(d_f, d_t, s, snr, f_row, t_row)
    if d_f.size == 0:
        return np.zeros(shape)
    k_max, l_max = _lag_bounds(d_f, d_t, s, reach)
    f_table = _given_table("freq_table", freq_table, k_max, f_row)
    t_table = _given_table("time_table", time_table, l_max, t_row)
    return _cell_mean(d_f, d_t, s, snr, f_table, f_row, t_table, t_row, estimator, reach).reshape(shape)


def _given_table(name, table, max_lag, rows):
    """A caller's one-sided table (n, >= max_lag + 1), checked, as the two-sided table ``_lookup`` reads."""
    table = np.asarray(table)
    if table.ndim != 2 or table.dtype.kind not in "iufc":
        raise InputError(name, f"expected a 2-D array of correlations, got shape {table.shape}")
    if table.shape[1] < max_lag + 1:
        raise InputError(name, f"needs lags 0 .. {max_lag} (correlation_lags), has only {table.shape[1]} columns")
    if rows.size and rows.max() >= table.shape[0]:
        raise InputError(name, f"has {table.shape[0]} rows, a candidate asks for row {rows.max()}")
    return _two_sided(name, table[:, :max_lag + 1].astype(np.complex128))


def _cell_mean(d_f, d_t, s, snr, f_table, f_row, t_table, t_row, estimator, reach):
    """Mean MSE over the lattice cell for flat candidates, correlations from rows of two-sided tables."""
    n = d_f.size
    out = np.empty(n)
    todo = np.ones(n, dtype=bool)
    if estimator == "lmmse" and reach[0] % 2 == 0 and reach[1] % 2 == 0:
        fast = snr <= _TRACE_FORM_MAX_SNR
        members = np.flatnonzero(fast)
        inverse, first = distinct_rows(np.stack([d_f, d_t, s], axis=1)[members])
        lattices = np.stack([d_f, d_t, s], axis=1)[members[first]]
        counts = np.bincount(inverse, minlength=first.size)
        for g, (lat_f, lat_t, lat_s) in enumerate(lattices):
            if counts[g] < _GROUP_MIN:
                continue  # a small group costs more in Python than it saves: the block path takes it
            group = members[inverse == g]
            out[group] = _lmmse_lattice_mean(int(lat_f), int(lat_t), int(lat_s), snr[group], f_table, f_row[group],
                                             t_table, t_row[group], reach)
            todo[group] = False
    cells = d_f * d_t
    order = np.argsort(np.where(todo, cells, -1), kind="stable")[n - int(todo.sum()):]  # the rest, by cell size
    sorted_cells = cells[order]
    start = 0
    while start < order.size:
        # Largest block whose (candidates x largest cell) stays within the budget.
        padded = np.arange(1, order.size - start + 1) * sorted_cells[start:]
        stop = start + max(1, int(np.searchsorted(padded, _TARGETS_PER_BLOCK, side="right")))
        idx = order[start:stop]
        width = int(cells[idx].max())
        p = np.arange(width)[None, :]
        valid = p < cells[idx][:, None]
        tk = np.where(valid, p % d_f[idx][:, None], 0)  # cell position k = p mod D_f
        tl = np.where(valid, p // d_f[idx][:, None], 0)  # l = p div D_f
        f_block, t_block = f_table[f_row[idx]], t_table[t_row[idx]]
        if estimator == "lmmse" and np.all(snr[idx] <= _TRACE_FORM_MAX_SNR):
            out[idx] = _lmmse_cell_mean(d_f[idx], d_t[idx], s[idx], snr[idx], f_block, t_block, tk, tl, valid, reach)
        else:
            _, _, _, mse = _weights_core(d_f[idx], d_t[idx], s[idx], snr[idx], f_block, t_block, tk, tl, estimator,
                                         reach)
            out[idx] = np.sum(np.where(valid, mse, 0.0), axis=1) / cells[idx]
        start = stop
    return out
