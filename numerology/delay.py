"""Power-delay profiles: delay moments, frequency correlation, echoes beyond the guard.

Pure functions on tapped-delay-line profiles. A profile is two arrays with the
taps on the LAST axis: ``delays_s`` (s) and ``powers`` (linear, any scale; each
function normalises them to sum 1). Leading axes broadcast, so a stack of
profiles, or one profile against an array of designs, needs no Python loop.

Delays are *excess* delays: every moment is measured from the first tap that
carries power (the first arrival), which is also where the receiver's FFT
window is assumed to be synchronised.

Conventions (definitions differ between Rappaport, Wireless Communications,
2nd ed., eqs. 5.38/5.39, Jakes 1974 and Tse & Viswanath 2005 ch. 2): the
coherence bandwidth is the first frequency lag where the magnitude of the
profile's frequency correlation falls to a stated ``correlation``; the rules
of thumb are returned beside it, never in its place.
"""

from __future__ import annotations

import math

import numpy as np

from .doppler import SPEED_OF_LIGHT_MPS  # exact by the SI definition of the metre

__all__ = [
    "mean_excess_delay_s",
    "rms_delay_spread_s",
    "rms_of_normalised",
    "max_excess_delay_s",
    "frequency_correlation",
    "coherence_bandwidth_hz",
    "exponential_coherence_bandwidth_hz",
    "coherence_bandwidth_rules_of_thumb",
    "exponential_profile",
    "two_ray_profile",
    "echo_weight",
    "echo_interference",
    "echo_interference_of",
    "path_difference_delay_s",
]

#: Grid points per 1/span when scanning for the first correlation crossing.
#: |R| changes by at most 2 pi (mean absolute delay deviation) <= pi * span per
#: Hz, so between grid points it moves by less than pi/64 = 0.05.
_SCAN_POINTS_PER_INVERSE_SPAN = 64
#: Lags scanned before giving up (and returning inf): 2**20 grid points, that is
#: up to 16384/span.
_SCAN_MAX_POINTS = 2**20
#: Relative width of the final bisection bracket.
_ROOT_RTOL = 1e-12


def _profile(delays_s, powers):
    """Broadcast a profile, normalise powers to sum 1, shift delays to the first tap.

    Returns (excess delays, normalised powers), both of the broadcast shape.
    Raises ValueError for non-finite values, negative powers or a zero total.
    """
    d = np.asarray(delays_s, dtype=float)
    p = np.asarray(powers, dtype=float)
    if d.ndim == 0 or p.ndim == 0:
        raise ValueError("delays_s and powers need at least one tap on their last axis")
    d, p = np.broadcast_arrays(d, p)
    if d.shape[-1] < 1:
        raise ValueError("a profile needs at least one tap")
    if not (np.all(np.isfinite(d)) and np.all(np.isfinite(p))):
        raise ValueError("delays_s and powers must be finite")
    if not np.all(p >= 0):
        raise ValueError("powers must be linear ratios >= 0")
    total = p.sum(axis=-1, keepdims=True)
    if not np.all(total > 0):
        raise ValueError("each profile needs a tap with power above 0")
    first = np.where(p > 0, d, np.inf).min(axis=-1, keepdims=True)
    return d - first, p / total


def rms_of_normalised(d, p):
    """Rms spread of delays d with powers p already summing to 1 (last axis), unchecked (for inner loops)."""
    mean = np.sum(p * d, axis=-1, keepdims=True)  # Rappaport eq. 5.35
    return np.sqrt(np.sum(p * (d - mean) ** 2, axis=-1))  # eqs. 5.36-5.37, as a central moment


def _scalar_or_array(x):
    return float(x) if np.ndim(x) == 0 else x


def mean_excess_delay_s(delays_s, powers):
    """Mean excess delay: the power-weighted first moment of the profile.

    Parameters
    ----------
    delays_s : array_like
        Tap delays in s, taps on the last axis.
    powers : array_like
        Linear tap powers (any scale), broadcasting with ``delays_s``.

    Returns
    -------
    float or ndarray
        sum p_k (tau_k - tau_0) / sum p_k in s, tau_0 the first tap with power.

    References
    ----------
    Rappaport, Wireless Communications, 2nd ed., eq. 5.35; ITU-R P.1407.

    Examples
    --------
    >>> round(mean_excess_delay_s([0, 1e-6, 2e-6, 5e-6], [0.01, 0.1, 0.1, 1]) * 1e6, 2)
    4.38
    """
    d, p = _profile(delays_s, powers)
    return _scalar_or_array(np.sum(p * d, axis=-1))  # Rappaport eq. 5.35


def rms_delay_spread_s(delays_s, powers):
    """Rms delay spread: square root of the profile's second central moment.

    Parameters
    ----------
    delays_s : array_like
        Tap delays in s, taps on the last axis.
    powers : array_like
        Linear tap powers (any scale), broadcasting with ``delays_s``.

    Returns
    -------
    float or ndarray
        The rms delay spread in s. Computed as a central moment (not as
        mean(tau^2) - mean(tau)^2) to avoid cancellation.

    References
    ----------
    Rappaport, Wireless Communications, 2nd ed., eqs. 5.36-5.37; ITU-R P.1407.

    Examples
    --------
    >>> round(rms_delay_spread_s([0, 1e-6, 2e-6, 5e-6], [0.01, 0.1, 0.1, 1]) * 1e6, 2)
    1.37
    """
    return _scalar_or_array(rms_of_normalised(*_profile(delays_s, powers)))


def max_excess_delay_s(delays_s, powers, threshold_db=30.0):
    """Maximum excess delay at a power threshold.

    Parameters
    ----------
    delays_s : array_like
        Tap delays in s, taps on the last axis (any order).
    powers : array_like
        Linear tap powers (any scale), broadcasting with ``delays_s``.
    threshold_db : float
        Taps weaker than the strongest tap by more than this (dB) are ignored.

    Returns
    -------
    float or ndarray
        Delay in s of the latest tap within ``threshold_db`` of the strongest,
        measured from the first tap with power.

    References
    ----------
    Rappaport, Wireless Communications, 2nd ed., sect. 5.4.1 (maximum excess
    delay (X dB)); ITU-R P.1407.

    Examples
    --------
    >>> round(max_excess_delay_s([0, 50e-9, 310e-9], [1.0, 0.5, 10**-3.2]) * 1e9, 3)
    50.0
    """
    if not threshold_db >= 0:
        raise ValueError(f"threshold_db must be >= 0, got {threshold_db!r}")
    d, p = _profile(delays_s, powers)
    floor = p.max(axis=-1, keepdims=True) * 10.0 ** (-threshold_db / 10.0)
    return _scalar_or_array(np.where(p >= floor, d, 0.0).max(axis=-1))


def frequency_correlation(freq_lag_hz, delays_s, powers):
    """Frequency correlation of a profile: R(df) = sum_k p_k exp(-j 2 pi df tau_k) / sum p_k.

    Parameters
    ----------
    freq_lag_hz : array_like
        Frequency lags in Hz; broadcasts against the profile's leading axes.
    delays_s : array_like
        Tap delays in s, taps on the last axis.
    powers : array_like
        Linear tap powers (any scale).

    Returns
    -------
    complex or ndarray of complex
        R(df). The delays are taken as given, so the phase of R carries the
        absolute delay; its magnitude does not depend on a delay offset.

    References
    ----------
    Bello, IEEE Trans. Commun. Syst. 11(4), 1963 (WSSUS: the frequency
    correlation is the Fourier transform of the power-delay profile);
    Jakes, Microwave Mobile Communications, 1974.

    Examples
    --------
    >>> r = frequency_correlation(0.5e6, [0.0, 1e-6], [1.0, 1.0])
    >>> round(abs(r), 12)
    0.0
    """
    d = np.asarray(delays_s, dtype=float)
    p = np.asarray(powers, dtype=float)
    _profile(d, p)  # validation only
    d, p = np.broadcast_arrays(d, p)
    p = p / p.sum(axis=-1, keepdims=True)
    f = np.asarray(freq_lag_hz, dtype=float)[..., None]
    r = np.sum(p * np.exp(-2j * np.pi * f * d), axis=-1)
    return complex(r) if r.ndim == 0 else r


def _magnitude(freq_lag_hz, d, p):
    """abs(R) for frequency lags (P, C) and profiles (P, K) -> (P, C)."""
    phase = 2.0 * np.pi * freq_lag_hz[:, :, None] * d[:, None, :]
    re = np.einsum("pck,pk->pc", np.cos(phase), p)
    im = np.einsum("pck,pk->pc", np.sin(phase), p)
    return np.hypot(re, im)


def _correlation_floor(d, p):
    """A lower bound on abs(R) over the scanned lags, per profile: (P, K) -> (P,), all spans > 0.

    The scan ends at max_lag = 2**20/(64 span). Taps within w = span/2**20 of
    each other (a cluster of power P_C) keep their phases within pi/64 of
    each other up to max_lag, so abs(R) >= P_C cos(pi/64) - (1 - P_C) there;
    a single dominant tap gives abs(R) >= 2 p_max - 1 at every lag.
    """
    span = d.max(axis=-1, keepdims=True)
    order = np.argsort(d, axis=-1, kind="stable")
    rows, taps = d.shape
    # all profiles in one sorted 1-D array: delays / span in [0, 1], row r shifted by 2r
    flat = (np.take_along_axis(d, order, axis=-1) / span + 2.0 * np.arange(rows)[:, None]).ravel()
    cumulative = np.concatenate([[0.0], np.cumsum(np.take_along_axis(p, order, axis=-1).ravel())])
    width = _SCAN_POINTS_PER_INVERSE_SPAN / (64.0 * _SCAN_MAX_POINTS)  # w/span
    start = np.searchsorted(flat, flat, side="left")
    end = np.searchsorted(flat, flat + width, side="right")
    cluster = (cumulative[end] - cumulative[start]).reshape(rows, taps)
    bound = 2.0 * cluster.max(axis=-1) * math.cos(math.pi / 64) - 1.0
    return np.maximum(bound, 2.0 * p.max(axis=-1) - 1.0)


def coherence_bandwidth_hz(delays_s, powers, correlation=0.5):
    """Coherence bandwidth: the first frequency lag where abs(R(df)) falls to ``correlation``.

    Parameters
    ----------
    delays_s : array_like
        Tap delays in s, taps on the last axis; a 2-D stack (profiles x taps)
        gives one bandwidth per profile.
    powers : array_like
        Linear tap powers (any scale).
    correlation : float
        The correlation level rho, 0 < rho < 1 (0.5 and 0.9 are usual).

    Returns
    -------
    float or ndarray
        The lag in Hz, to 1e-12 relative. ``inf`` for a single tap, for a
        profile whose strongest tap holds so much power p_max that
        abs(R) >= 2 p_max - 1 > rho at every lag, and if abs(R) stays above
        rho over the whole scanned range (up to 16384/span; a tight cluster of
        taps holding most of the power is recognised without scanning).

    Notes
    -----
    abs(R) is scanned on a grid of 64 points per 1/span (span = last minus
    first tap); between grid points it cannot move by more than
    pi/64 (its slope is at most 2 pi times the mean absolute delay
    deviation), so only a dip narrower than the grid step could be missed.
    The bracketing interval is then bisected, all profiles at once.

    References
    ----------
    Jakes, Microwave Mobile Communications, 1974; Rappaport, Wireless
    Communications, 2nd ed., sect. 5.4.2 (coherence bandwidth as a
    correlation level of the frequency correlation).

    Examples
    --------
    Two equal rays 1 us apart: abs(R) = abs(cos(pi df tau)) = 0.5 at 1/(3 tau).

    >>> round(coherence_bandwidth_hz([0.0, 1e-6], [1.0, 1.0], 0.5) / 1e3, 6)
    333.333333
    """
    rho = float(correlation)
    if not 0.0 < rho < 1.0:
        raise ValueError(f"correlation must be strictly between 0 and 1, got {correlation!r}")
    d, p = _profile(delays_s, powers)
    lead = d.shape[:-1]
    d = d.reshape(-1, d.shape[-1])
    p = p.reshape(-1, p.shape[-1])
    span = np.where(p > 0, d, 0.0).max(axis=-1)
    result = np.full(d.shape[0], np.inf)
    d = np.where(p > 0, d, 0.0)  # empty taps (even ahead of the first arrival) play no part
    searching = np.flatnonzero(span > 0)
    searching = searching[_correlation_floor(d[searching], p[searching]) <= rho]
    if searching.size:
        step = 1.0 / (_SCAN_POINTS_PER_INVERSE_SPAN * span[searching])
        upper = np.full(searching.size, np.nan)  # first grid lag with abs(R) <= rho
        most = max(8, 2**22 // (searching.size * d.shape[1]))  # (P, C, K) arrays stay below 32 MB
        start, chunk = 0, min(1024, most)
        while start < _SCAN_MAX_POINTS:  # loop over blocks of the lag grid, not over profiles
            todo = np.flatnonzero(np.isnan(upper))
            if todo.size == 0:
                break
            index = np.arange(start + 1, start + chunk + 1, dtype=float)
            lags = step[todo, None] * index
            below = _magnitude(lags, d[searching[todo]], p[searching[todo]]) <= rho
            hit = below.any(axis=1)
            first = below.argmax(axis=1)
            upper[todo[hit]] = lags[hit, first[hit]]
            start += chunk
            chunk = min(2 * chunk, most, _SCAN_MAX_POINTS - start)
        ok = ~np.isnan(upper)
        rows = searching[ok]
        hi = upper[ok]
        lo = hi - step[ok]  # abs(R) > rho there (previous grid point, or lag 0)
        dd, pp = d[rows], p[rows]
        for _ in range(200):  # bisection iterations, vectorised over profiles
            if np.all(hi - lo <= _ROOT_RTOL * hi):
                break
            mid = 0.5 * (lo + hi)
            below = _magnitude(mid[:, None], dd, pp)[:, 0] <= rho
            hi = np.where(below, mid, hi)
            lo = np.where(below, lo, mid)
        result[rows] = 0.5 * (lo + hi)
    return _scalar_or_array(result.reshape(lead))


def exponential_coherence_bandwidth_hz(rms_delay_spread_s, correlation=0.5):
    """Coherence bandwidth of the (continuous, one-sided) exponential profile, closed form.

    abs(R) = 1/sqrt(1 + (2 pi df sigma)^2), so df = sqrt(1/rho^2 - 1) / (2 pi sigma):
    0.2757/sigma at rho = 0.5 and 0.0771/sigma at rho = 0.9.

    Parameters
    ----------
    rms_delay_spread_s : array_like
        Rms delay spread sigma in s (> 0).
    correlation : float
        The correlation level rho, 0 < rho < 1.

    Returns
    -------
    float or ndarray
        Coherence bandwidth in Hz.

    References
    ----------
    Calc from the definition of the frequency correlation; the exponential profile exp(-tau/sigma)/sigma
    has the Fourier transform 1/(1 + j 2 pi df sigma).

    Examples
    --------
    >>> round(exponential_coherence_bandwidth_hz(1e-6, 0.5) / 1e3, 1)
    275.7
    """
    rho = float(correlation)
    if not 0.0 < rho < 1.0:
        raise ValueError(f"correlation must be strictly between 0 and 1, got {correlation!r}")
    sigma = np.asarray(rms_delay_spread_s, dtype=float)
    return _scalar_or_array(np.sqrt(1.0 / rho**2 - 1.0) / (2.0 * np.pi * sigma))


def coherence_bandwidth_rules_of_thumb(rms_delay_spread_s):
    """The usual rule-of-thumb coherence bandwidths for an rms delay spread.

    Parameters
    ----------
    rms_delay_spread_s : array_like
        Rms delay spread sigma in s.

    Returns
    -------
    dict[str, float or ndarray]
        Label -> coherence bandwidth in Hz.

    References
    ----------
    Rappaport, Wireless Communications, 2nd ed., eqs. 5.38 (1/(50 sigma),
    correlation 0.9) and 5.39 (1/(5 sigma), correlation 0.5); Jakes,
    Microwave Mobile Communications, 1974 (1/(2 pi sigma), envelope
    covariance 0.5).

    Examples
    --------
    >>> {k: round(v / 1e3, 1) for k, v in coherence_bandwidth_rules_of_thumb(1e-6).items()}
    {'1/(50 sigma), Rappaport eq. 5.38 (rho 0.9)': 20.0, '1/(5 sigma), Rappaport eq. 5.39 (rho 0.5)': 200.0, '1/(2 pi sigma), Jakes': 159.2}
    """
    sigma = np.asarray(rms_delay_spread_s, dtype=float)
    return {
        "1/(50 sigma), Rappaport eq. 5.38 (rho 0.9)": _scalar_or_array(1.0 / (50.0 * sigma)),
        "1/(5 sigma), Rappaport eq. 5.39 (rho 0.5)": _scalar_or_array(1.0 / (5.0 * sigma)),
        "1/(2 pi sigma), Jakes": _scalar_or_array(1.0 / (2.0 * np.pi * sigma)),
    }


def exponential_profile(rms_delay_spread_s, floor_db=30.0, num_taps=64):
    """A sampled, truncated exponential power-delay profile with an exact rms spread.

    The continuous profile exp(-tau/sigma) has rms spread sigma. Truncating it
    where it has fallen ``floor_db`` below the first tap and sampling it at
    ``num_taps`` equally spaced delays lowers the rms (to 0.977 sigma at 30 dB
    and 64 taps), so the delay axis is then stretched to make the rms of the
    returned taps equal ``rms_delay_spread_s``; the last tap stays
    ``floor_db`` below the first.

    Parameters
    ----------
    rms_delay_spread_s : float
        Wanted rms delay spread in s (> 0).
    floor_db : float
        Truncation level below the first tap, in dB (> 0).
    num_taps : int
        Number of taps (>= 2).

    Returns
    -------
    delays_s : ndarray
        Tap delays in s, starting at 0.
    powers : ndarray
        Linear tap powers summing to 1.

    References
    ----------
    ITU-R P.1407 (exponential decay of the power-delay profile);
    Rappaport, Wireless Communications, 2nd ed., sect. 5.4.

    Examples
    --------
    >>> d, p = exponential_profile(100e-9)
    >>> len(d), round(rms_delay_spread_s(d, p) * 1e9, 9)
    (64, 100.0)
    """
    sigma = float(rms_delay_spread_s)
    if not (sigma > 0 and math.isfinite(sigma)):
        raise ValueError(f"rms_delay_spread_s must be finite and > 0, got {rms_delay_spread_s!r}")
    if not (floor_db > 0 and math.isfinite(floor_db)):
        raise ValueError(f"floor_db must be finite and > 0, got {floor_db!r}")
    if int(num_taps) != num_taps or num_taps < 2:
        raise ValueError(f"num_taps must be an integer >= 2, got {num_taps!r}")
    tau_max = sigma * floor_db * math.log(10.0) / 10.0  # exp(-tau/sigma) = 10^(-floor/10)
    delays = np.linspace(0.0, tau_max, int(num_taps))
    powers = np.exp(-delays / sigma)
    powers /= powers.sum()
    delays *= sigma / rms_of_normalised(delays, powers)
    return delays, powers


def two_ray_profile(max_excess_delay_s, rms_delay_spread_s=None):
    """Two taps at 0 and ``max_excess_delay_s``.

    Parameters
    ----------
    max_excess_delay_s : float
        Delay of the echo in s (> 0).
    rms_delay_spread_s : float, optional
        Wanted rms spread sigma in s, 0 <= sigma <= max_excess_delay_s / 2.
        None gives equal powers (sigma = tau/2), the worst case for a given
        span: two transmitters of a single-frequency network.

    Returns
    -------
    delays_s : ndarray
        (0, tau) in s.
    powers : ndarray
        Linear powers (1 - p, p) summing to 1, with the echo fraction
        p = (1 - sqrt(1 - 4 sigma^2/tau^2)) / 2 <= 1/2, the root of
        tau sqrt(p (1 - p)) = sigma.

    Raises
    ------
    ValueError
        If sigma > tau/2 (no two-ray profile has that spread) or a value is
        negative or not finite.

    References
    ----------
    Rms of two taps: Rappaport, Wireless Communications, 2nd ed., eq. 5.36
    (calc). Single-frequency networks: ITU-R Report BT.2386.

    Examples
    --------
    >>> d, p = two_ray_profile(2e-6, 0.6e-6)
    >>> [round(float(x), 6) for x in p]
    [0.9, 0.1]
    """
    tau = float(max_excess_delay_s)
    if not (tau > 0 and math.isfinite(tau)):
        raise ValueError(f"max_excess_delay_s must be finite and > 0, got {max_excess_delay_s!r}")
    if rms_delay_spread_s is None:
        p = 0.5
    else:
        sigma = float(rms_delay_spread_s)
        if not (0 <= sigma <= tau / 2):
            raise ValueError(
                f"an rms delay spread of {sigma:g} s is not possible with two rays {tau:g} s apart: "
                f"it must lie between 0 and half the span ({tau / 2:g} s)")
        ratio = min(1.0, 4.0 * (sigma / tau) ** 2)
        p = 0.5 * (1.0 - math.sqrt(1.0 - ratio))  # tau sqrt(p (1 - p)) = sigma
    return np.array([0.0, tau]), np.array([1.0 - p, p])


def echo_weight(delay_s, guard_s, useful_symbol_s):
    """Fraction of an echo's power that is useful in the FFT window.

    w(t) = 1 for 0 <= t <= T_g; ((T_u + T_g - t)/T_u)^2 for T_g < t <= T_u + T_g;
    0 beyond; ((T_u + t)/T_u)^2 for -T_u <= t < 0 (an echo ahead of the window
    start); 0 below. The rest, 1 - w, is interference.

    Parameters
    ----------
    delay_s : array_like
        Echo delay t in s relative to the path the window is synchronised to.
    guard_s : array_like
        Guard interval (cyclic prefix) T_g in s.
    useful_symbol_s : array_like
        Useful symbol duration T_u = 1/subcarrier spacing in s.
        All three broadcast together.

    Returns
    -------
    float or ndarray
        w(t), between 0 and 1.

    References
    ----------
    EBU BPN 066 / EBU TR 024 sect. 2.4; ITU-R Report BT.2386 (formula from
    memory; a numpy OFDM simulation in the tests reproduces it).

    Examples
    --------
    >>> round(echo_weight(448e-6, 224e-6, 896e-6), 4)
    0.5625
    """
    t = np.asarray(delay_s, dtype=float)
    g = np.asarray(guard_s, dtype=float)
    tu = np.asarray(useful_symbol_s, dtype=float)
    late = ((tu + g - t) / tu) ** 2  # the window holds T_u + T_g - t of the current symbol
    early = ((tu + t) / tu) ** 2
    w = np.where(t < 0, np.where(t >= -tu, early, 0.0),
                 np.where(t <= g, 1.0, np.where(t <= tu + g, late, 0.0)))
    return _scalar_or_array(w)


def echo_interference(delays_s, powers, guard_s, useful_symbol_s):
    """Useful and interfering fractions of a profile's power for OFDM designs.

    The FFT window is synchronised to the first tap with power (delay 0 =
    first arrival), so no tap is a pre-echo; each tap then counts with the
    weight of :func:`echo_weight`.

    Parameters
    ----------
    delays_s : array_like
        Tap delays in s, taps on the last axis.
    powers : array_like
        Linear tap powers (any scale).
    guard_s : array_like
        Guard interval (cyclic prefix) of each design in s.
    useful_symbol_s : array_like
        Useful symbol duration of each design in s (> 0).

    Returns
    -------
    useful_fraction : float or ndarray
        sum w_i p_i / sum p.
    interference_fraction : float or ndarray
        sum (1 - w_i) p_i / sum p. Both are shaped like
        broadcast(guard_s, useful_symbol_s) for a 1-D profile, and like
        broadcast(guard_s, useful_symbol_s, profile leading axes) otherwise.

    Notes
    -----
    For a single profile (the solver's case: 1e5-1e6 designs against tens of
    taps) the sum is taken with prefix sums over the sorted taps and a binary
    search per design, O(designs log taps) time and O(designs) memory:
    with x = tau - T_g and u = x/T_u, 1 - w = 2u - u^2 for 0 < x <= T_u and 1
    beyond. A stack of profiles (the sites of a sweep) is evaluated by plain
    broadcasting of the same expression, u clipped to [0, 1].

    References
    ----------
    EBU TR 024 sect. 2.4; ITU-R Report BT.2386.

    Examples
    --------
    >>> u, i = echo_interference([0.0, 448e-6], [1.0, 1.0], 224e-6, 896e-6)
    >>> round(u, 5), round(i, 5)
    (0.78125, 0.21875)
    """
    return echo_interference_of(delays_s, powers)(guard_s, useful_symbol_s)


def echo_interference_of(delays_s, powers):
    """:func:`echo_interference` of one profile as a function of (guard_s, useful_symbol_s).

    The profile is checked, normalised, sorted and summed once: a caller that asks the same profile
    about many guards in turn (the guard rule's bisection) pays for that once. Same arithmetic, same
    values as :func:`echo_interference`.
    """
    d, p = _profile(delays_s, powers)
    if d.ndim == 1:
        order = np.argsort(d, kind="stable")
        d, p = d[order], p[order]
        zero = np.zeros(1)
        c0 = np.concatenate([zero, np.cumsum(p)])  # prefix sums of p, p tau, p tau^2
        c1 = np.concatenate([zero, np.cumsum(p * d)])
        c2 = np.concatenate([zero, np.cumsum(p * d * d)])

    def fractions(guard_s, useful_symbol_s):
        g = np.asarray(guard_s, dtype=float)
        tu = np.asarray(useful_symbol_s, dtype=float)
        if not np.all(tu > 0):
            raise ValueError("useful_symbol_s must be > 0")
        if not np.all(g >= 0):
            raise ValueError("guard_s must be >= 0")
        if d.ndim > 1:
            # Every tap with power lies at or after the first arrival, where 1 - w = 2u - u^2 with
            # u = (tau - T_g)/T_u clipped to [0, 1] (no pre-echo branch; taps before it have no power).
            u = np.clip((d - g[..., None]) / tu[..., None], 0.0, 1.0)
            interference = np.einsum("...k,...k->...", u * (2.0 - u), p)
        else:
            g, tu = np.broadcast_arrays(g, tu)
            lo = np.searchsorted(d, g, side="right")  # first tap with tau > T_g
            hi = np.searchsorted(d, g + tu, side="right")  # first tap with tau > T_g + T_u
            s0 = c0[hi] - c0[lo]
            s1 = c1[hi] - c1[lo] - g * s0  # sum p x over T_g < tau <= T_g + T_u
            s2 = (c2[hi] - c2[lo]) - 2.0 * g * (c1[hi] - c1[lo]) + g * g * s0  # sum p x^2
            interference = 2.0 * s1 / tu - s2 / tu**2 + (c0[-1] - c0[hi])  # 1 - w = 2u - u^2
            interference = np.clip(interference, 0.0, 1.0)
        useful = 1.0 - interference
        return _scalar_or_array(useful), _scalar_or_array(interference)

    return fractions


def path_difference_delay_s(path_difference_m, propagation_speed_mps=SPEED_OF_LIGHT_MPS):
    """Delay of an echo from its extra path length.

    Parameters
    ----------
    path_difference_m : array_like
        Extra path length in m.
    propagation_speed_mps : float
        Propagation speed in m/s (default the speed of light in vacuum,
        299 792 458 m/s; about 1500 m/s in sea water, 343 m/s in air).

    Returns
    -------
    float or ndarray
        Delay in s: 1 km of radio path is 3.336 us.

    References
    ----------
    SI brochure, 9th ed. (2019): c = 299 792 458 m/s exactly.

    Examples
    --------
    >>> round(path_difference_delay_s(1000.0) * 1e6, 3)
    3.336
    """
    return _scalar_or_array(np.asarray(path_difference_m, dtype=float) / propagation_speed_mps)
