"""Channel-estimation error from the pilots a receiver really has.

For one design and one channel, :func:`estimation_mse` gives the mean-square
error of the receiver's channel estimate, averaged over every data resource
element of the evaluation span (a slot, a packet, or one period of a broadcast
pattern; band edges and slot edges included), using exactly the pilots that
the design's arrangement and the receiver's allowance make available
(:func:`numerology.arrangement.schedule`).

Model (unit channel power; the wide-sense-stationary uncorrelated-scattering
tapped delay line of the environment)::

    H(t, k) = sum_c g_c(k) z_c(t),   E z_c(t + tau) z_c(t)^* = rho_c(tau),

with ``k`` the used subcarrier (0 .. N_u - 1, spacing df), the components
``c`` independent. The scattered taps share one Doppler spectrum; a line of
sight (``numerology.environment``: at the first arrival, power K/(K+1)) is a
component of its own with a rotating phase.

Estimators
----------
``lmmse``
    The linear MMSE (Wiener) estimate of H at each data element from *all*
    usable pilots of the span at once (the whole band, every usable pilot
    symbol; at most :data:`MAX_PILOT_SYMBOLS` pilot-bearing symbols, the
    nearest): the ideal 2-D interpolator of Hoeher, Kaiser and Robertson
    (ICASSP 1997) restricted to what the receiver may use. With pilots
    ``y = A z + w`` (noise variance s2 per pilot, the inverse pilot SINR),
    the error covariance of the components at a data symbol is::

        E = Q - S_nU A^H (A S_UU A^H + s2 I)^-1 A S_Un
          = Q - S_nU D^(1/2) (D^(1/2) S_UU D^(1/2) + s2 I)^-1 D^(1/2) S_Un,

    D = A^H A the block-diagonal Gram matrix of the pilot combs (push-through
    identity; Kay, Fundamentals of Statistical Signal Processing: Estimation
    Theory, ch. 12). The error summed over the data subcarriers is
    ``tr(E G_d)`` with G_d their Gram matrix. With the eigenvalues lambda_j
    and vectors w_j of ``D^(1/2) S_UU D^(1/2)``, and
    ``beta_j = b_j^H G_d b_j``, ``b_j = S_nU D^(1/2) w_j``::

        sum over data REs of |H - Hhat|^2 = N_d - sum_j beta_j / (lambda_j + s2),

    so one eigen-decomposition per distinct pilot set serves every pilot SINR
    (the candidates of a search differ mostly in it). Everything has the size
    of (pilot symbols) x (components), never of the band: a full-band
    estimate over 1272 subcarriers costs as little as over 12. The same sum
    is ``sum over targets of tr(x^H (M + s2 I)^-1 x G_d)`` (``M`` that
    matrix, ``x = D^(1/2) S_Un``): where the pilot symbols sit on different
    combs, a search asks each pilot set for about one pilot SINR, and a
    Cholesky factorisation per SINR asked is cheaper than the eigenvectors
    (:class:`DirectWeights`). Pilot symbols on one comb with a line of sight
    whose phase wanders (an oscillator's phase noise) make ``M`` a separable
    matrix plus an update of rank u, solved exactly by the Woodbury identity
    (:class:`WanderingWeights`).
``linear``
    A practical receiver: least-squares values at the pilots, linear
    interpolation across frequency inside each pilot-bearing symbol (the
    nearest pilot held beyond the band's outermost pilots), then linear
    interpolation in time between the nearest usable pilot-bearing symbols
    before and after the data symbol, or the nearest one held when only one
    side is usable; pilot symbols counted at the same time (a packet's
    training block) are averaged first. Its error is evaluated exactly at
    every data element.
``differential`` scope
    No estimate: the previous symbol is the reference. Its penalty is that
    of a one-symbol-old, noisy reference used with the best scaling,
    ``1 - |R(T_s)|^2 / (1 + s2)`` (R the channel's autocorrelation, s2 the
    reference symbol's noise and interference): noise counts about twice,
    and decorrelation sets a floor ``|R|^2 / (1 - |R|^2)`` (Proakis, Digital
    Communications, DPSK in Rayleigh fading; from memory).

Components
----------
The scattered taps are replaced by the eigenmodes of their covariance over
the used band (a Karhunen-Loeve basis, :func:`components`); the weakest
modes, together less than :data:`MODE_ENERGY_TOL` of the energy, are dropped
and their energy counted as estimation error (so the error is never
understated). Closely
spaced taps that the band cannot resolve collapse to a few modes.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import scipy.special as sp

from . import arrangement
from .grouping import distinct_rows
from .oscillator import phase_autocorrelation


def hermitian_eigen(m: np.ndarray):
    """Eigenvalues (ascending) and eigenvectors of Hermitian matrices, stacked on the leading axes.

    LAPACK's divide-and-conquer solver (``numpy.linalg.eigh``) can fail to converge on nearly
    degenerate matrices, which occur here when components of the channel are nearly equal;
    those stacks are done again one matrix at a time with the slower, more robust QR solver.
    """
    m = np.asarray(m)
    try:
        return np.linalg.eigh(m)
    except np.linalg.LinAlgError:
        import scipy.linalg

        flat = m.reshape((-1,) + m.shape[-2:])
        parts = [scipy.linalg.eigh(a, driver="ev", check_finite=False) for a in flat]
        value = np.stack([p[0] for p in parts]).reshape(m.shape[:-1])
        vector = np.stack([p[1] for p in parts]).reshape(m.shape)
        return value, vector


#: Pilot-bearing symbols that enter the estimate of one data symbol, at most (the nearest usable ones).
MAX_PILOT_SYMBOLS = 4
#: The weakest band eigenmodes of the scattered taps are dropped while their energy together stays below
#: this fraction of the channel power (-60 dB); it is counted as estimation error, never lost.
MODE_ENERGY_TOL = 1e-6
#: Eigenvalues of a comb's Gram matrix below this fraction of its largest are left out of its thin factor
#: (``Band.cluster_factors``): a comb of fewer subcarriers than components has a Gram matrix of lower rank,
#: whose other eigenvalues are round-off.
FACTOR_TOL = 1e-12
#: Comb Gram couplings below this fraction (of the geometric mean of the two diagonal entries) are
#: dropped: the components then fall apart into independent clusters (``Band.clusters``).
COUPLING = 0.02
#: Component kinds: scattered (the Doppler spectrum's diffuse part) and line of sight.
SCATTERED, LINE_OF_SIGHT = 0, 1


@dataclass(frozen=True)
class Components:
    """The channel over the used band as independent unit-power components.

    ``response(k)`` of component c at subcarrier k is ``sum_m E[m, c] exp(-j 2 pi k df tau_m)``
    over the taps m; ``kind`` says which time correlation each component follows.
    """

    delays_s: np.ndarray  # (M,) tap delays
    basis: np.ndarray  # (M, C) complex: tap amplitudes of each unit component
    kind: np.ndarray  # (C,) SCATTERED or LINE_OF_SIGHT


def gram(delays_a, delays_b, spacing_hz, start, step, count):
    """Gram matrix of two tap sets over a comb of subcarriers.

    ``G[a, b] = sum_{i < count} exp(j 2 pi (start + i step) df (tau_a - tau_b))``,
    in closed form (a geometric series, the Dirichlet kernel).

    Parameters
    ----------
    delays_a, delays_b : ndarray (A,), (B,)
        Tap delays in s.
    spacing_hz : float
        Subcarrier spacing df in Hz.
    start, step, count : int
        The comb: subcarriers start, start + step, ... (count of them).

    Returns
    -------
    ndarray (A, B) of complex

    Examples
    --------
    Two taps 0.5 us apart over 600 subcarriers at 15 kHz: the phase turns by
    2 pi 0.0075 per subcarrier, 4.5 turns over the band, so
    ``|G[0, 1]| = |sin(4.5 pi) / sin(0.0075 pi)| = 42.45``:

    >>> g = gram(np.array([0.0, 0.5e-6]), np.array([0.0, 0.5e-6]), 15e3, 0, 1, 600)
    >>> float(g[0, 0].real), round(float(abs(g[0, 1])), 2)
    (600.0, 42.45)
    """
    x = 2.0 * np.pi * spacing_hz * (np.asarray(delays_a, float)[:, None] - np.asarray(delays_b, float)[None, :])
    half = 0.5 * x * step
    s = np.sin(half)
    small = np.abs(s) < 1e-12
    ratio = np.where(small, count * np.cos(count * half) / np.where(small, np.cos(half), 1.0),
                     np.sin(count * half) / np.where(small, 1.0, s))
    return np.exp(1j * (x * start + half * (count - 1))) * ratio


def comb_count(used: int, offset: int, step: int) -> int:
    """Subcarriers offset, offset + step, ... below ``used``."""
    return max(0, (used - offset + step - 1) // step)


def components(delays_s, powers, los_fraction, spacing_hz, used) -> tuple[Components, float]:
    """Unit-power components of a channel over ``used`` subcarriers, and the energy dropped.

    The line of sight (power ``los_fraction``, at the earliest tap) is one
    component; the scattered part (``powers`` less the line of sight) is
    replaced by its eigenmodes over the used band: with P the scattered tap
    powers and G the band's Gram matrix, the modes are ``P^(1/2) v_m`` for the
    eigenvectors v_m of ``P^(1/2) G P^(1/2)``. Modes below
    :data:`MODE_ENERGY_TOL` of the channel power together are dropped; the
    returned energy (a fraction of the channel power) is what they held.
    """
    delays = np.asarray(delays_s, dtype=float)
    p = np.asarray(powers, dtype=float)
    p = p / p.sum()
    first = int(np.argmin(delays))
    scattered = p.copy()
    scattered[first] = max(scattered[first] - los_fraction, 0.0)
    root = np.sqrt(scattered)
    g_band = gram(delays, delays, spacing_hz, 0, 1, used) / used
    gamma, v = hermitian_eigen(root[:, None] * g_band * root[None, :])  # ascending
    gamma = np.clip(gamma, 0.0, None)
    keep = np.cumsum(gamma) > MODE_ENERGY_TOL
    dropped = float(np.sum(gamma[~keep]))
    basis = root[:, None] * v[:, keep]
    kind = np.full(basis.shape[1], SCATTERED)
    if los_fraction > 0:
        los = np.zeros((delays.size, 1))
        los[first, 0] = np.sqrt(los_fraction)
        basis = np.concatenate([los, basis], axis=1)
        kind = np.concatenate([[LINE_OF_SIGHT], kind])
    return Components(delays, basis.astype(complex), kind), dropped


def time_correlation(kind, lag_s, max_doppler_hz, spectrum, los_fraction, oscillator=None):
    """Autocorrelation of each component kind at the given lags: array (..., C).

    Scattered components follow the diffuse spectrum (Clarke/Jakes ``J0`` for
    ``classical``, ``rician`` and ``tracked``; ``sinc`` for ``flat``); the line
    of sight is a line at f_D (``rician``). ``tracked`` removes the mean
    Doppler shift ``K/(K+1) f_D`` from every component (``numerology.doppler``).
    ``max_doppler_hz`` broadcasts with ``lag_s``. ``oscillator`` (linewidth Hz,
    residual offset Hz, mask or None; the first two broadcast with ``lag_s``)
    multiplies every component by the phase's autocorrelation
    (``oscillator.phase_autocorrelation``): the receiver estimates the radio
    channel times the oscillator's phase, common to all components.
    """
    lag = np.asarray(lag_s, dtype=float)
    x = (np.asarray(max_doppler_hz, dtype=float) * lag)[..., None]
    if spectrum == "flat":
        scattered = np.sinc(2.0 * x) + 0j
    else:
        scattered = sp.j0(2.0 * np.pi * x) + 0j
    los = np.exp(2j * np.pi * x)
    if spectrum == "tracked":
        turn = np.exp(-2j * np.pi * los_fraction * x)  # the receiver removes the centroid P_los f_D
        scattered, los = scattered * turn, los * turn
    out = np.where(np.asarray(kind) == LINE_OF_SIGHT, los, scattered)
    if oscillator is not None and has_phase_variation(oscillator):
        linewidth, offset, mask = oscillator
        out = out * phase_autocorrelation(lag, linewidth, offset, mask)[..., None]
    return out


def has_phase_variation(oscillator) -> bool:
    """Whether an oscillator (linewidth, offset, mask) moves the phase at all."""
    linewidth, offset, mask = oscillator
    return bool(np.any(np.asarray(linewidth) != 0) or np.any(np.asarray(offset) != 0) or mask is not None)


def _random_phase(oscillator) -> bool:
    """Whether the oscillator's phase wanders randomly (phase noise), which no rank-one line of sight can follow."""
    if oscillator is None:
        return False
    linewidth, _, mask = oscillator
    return bool(np.any(np.asarray(linewidth) != 0) or mask is not None)


@dataclass(frozen=True)
class SpectralWeights:
    """What an estimation error needs beyond the pilot SINR (see the module docstring).

    ``1 - sum_j beta_j / (lambda_j + s2) / data`` for ``lmmse``; the linear
    estimator's error is ``bias + s2 * gain``; differential detection's
    ``1 - bias / (1 + s2)``.
    """

    kind: str  # "lmmse", "linear" or "differential"
    lam: np.ndarray
    beta: np.ndarray
    data: float  # data resource elements in the span
    bias: float = 0.0  # linear: error without noise (fraction); differential: |R(T_s)|^2
    gain: float = 0.0  # linear: noise gain

    def mse(self, noise_to_pilot):
        """Mean estimation error at the given noise-to-pilot power ratios (array)."""
        s2 = np.asarray(noise_to_pilot, dtype=float)
        if self.kind == "differential":
            return 1.0 - self.bias / (1.0 + s2)
        if self.kind == "linear":
            return self.bias + s2 * self.gain
        if self.data <= 0:
            return np.zeros(s2.shape)
        flat = s2.reshape(-1, 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            explained = np.sum(np.where(self.beta > 0, self.beta / (self.lam + flat), 0.0), axis=1)
        return np.clip(1.0 - explained.reshape(s2.shape) / self.data, 0.0, 1.0)


@dataclass(frozen=True)
class SeparableWeights:
    """Estimation error of a pattern whose pilot symbols share one comb, with a line of sight.

    The scattered components separate into a time and a frequency
    eigenproblem; the line of sight (one random amplitude turning at a known
    rate) enters exactly through a rank-one correction: with the scattered
    part's LMMSE given the line of sight, the error of each data element is
    the scattered error plus ``|g|^2 / (1 + q)``, ``q`` the line of sight's
    SNR after the scattered part is accounted for and ``g`` what of it the
    scattered estimator cannot tell apart (the law of total variance of
    jointly Gaussian variables; Sherman-Morrison). Arrays are per target
    group ``t`` (pilot-set shape), time eigen-index ``i`` and frequency
    eigen-index ``j``.
    """

    scattered: SpectralWeights  # the scattered part, s2-free (lam = l m, beta = a z)
    l: np.ndarray  # (T, u) time eigenvalues of each target's pilot set
    u_los: np.ndarray  # (T, u) U^H phi: the line of sight's time phasors in the time eigenbasis
    kappa: np.ndarray  # (T, u) conj(U^H rho) * U^H phi
    m: np.ndarray  # (J,) frequency eigenvalues of the scattered comb Gram
    v_los: np.ndarray  # (J,) V^H G_sL
    basis: np.ndarray  # (C_s, J) V
    schur: float  # u-free Schur complement of the line of sight's comb energy (not in the scattered span)
    g_data: np.ndarray  # (T, C, C) data Gram matrices (line of sight first)
    count: np.ndarray  # (T,) pilot symbols of each target
    data: float

    def mse(self, noise_to_pilot):
        s2 = np.asarray(noise_to_pilot, dtype=float)
        flat = s2.reshape(-1, 1, 1, 1)  # (n, T, u, J)
        base = self.scattered.mse(s2).reshape(-1)
        denominator = self.l[None, :, :, None] * self.m[None, None, None, :] + flat  # (n, T, u, J)
        live = self.m > 0
        # q: the line of sight's SNR with the scattered part accounted for (positive terms only)
        weight = np.abs(self.u_los) ** 2  # (T, u)
        has_time = self.l > 0
        v2 = np.abs(self.v_los) ** 2
        in_span = np.where(live, v2 / np.where(live, self.m, 1.0), 0.0)  # (J,)
        with np.errstate(divide="ignore", invalid="ignore"):
            q = (np.sum(np.where(has_time[None, :, :, None], weight[None, :, :, None] * in_span / denominator, 0.0),
                        axis=(2, 3))
                 + (self.count * self.schur + np.sum(np.where(has_time, 0.0, weight), axis=1) * in_span.sum())[None, :]
                 / s2.reshape(-1, 1))
        # g: the line of sight less what the scattered estimator attributes to the scattered part
        y = np.sum(self.kappa[None, :, :, None] / denominator, axis=2)  # (n, T, J)
        v = np.einsum("cj,ntj->ntc", self.basis, self.v_los * np.where(live, y, 0.0))  # (n, T, C_s)
        g_ll = self.g_data[:, 0, 0].real
        g_sl = self.g_data[:, 1:, 0]
        g_ss = self.g_data[:, 1:, 1:]
        energy = (g_ll[None] - 2 * np.einsum("ntc,tc->nt", np.conj(v), g_sl).real
                  + np.einsum("ntc,tcd,ntd->nt", np.conj(v), g_ss, v).real)
        # the scattered part's error counted the line of sight's energy as unexplained: replace it by its error
        los_error = np.sum(np.maximum(energy, 0.0) / (1.0 + q) - g_ll[None], axis=1) / self.data
        return np.clip(base + los_error, 0.0, 1.0).reshape(s2.shape)


class Band:
    """A channel over the used band of one numerology: its components and the Gram matrices of its pilot combs.

    Many designs share a band (same channel, spacing and used subcarriers)
    and differ in pilots, cyclic prefix and slot; the components and each
    comb's Gram matrix and its square root are worked out once per band.
    """

    def __init__(self, delays_s, powers, los_fraction, spacing_hz, used):
        self.spacing_hz, self.used = float(spacing_hz), int(used)
        self.components, self.dropped = components(delays_s, powers, los_fraction, spacing_hz, used)
        self.kinds = np.unique(self.components.kind)  # the component kinds present, ascending
        self._gram, self._root, self._eigen, self._clusters = {}, {}, {}, {}
        #: explained energies of coupled targets, per setting, target and design (:func:`_coupled_explained`)
        self.explained: dict = {}

    def comb_gram(self, step, offset):
        """Gram matrix of the components over the comb (step, offset); offset -1: the whole band."""
        key = (step, offset)
        if key not in self._gram:
            c = self.components
            if offset < 0:
                g = gram(c.delays_s, c.delays_s, self.spacing_hz, 0, 1, self.used)
            else:
                g = gram(c.delays_s, c.delays_s, self.spacing_hz, offset, step, comb_count(self.used, offset, step))
            self._gram[key] = c.basis.conj().T @ g @ c.basis
        return self._gram[key]

    def comb_eigen(self, step, offset, subset):
        """Eigenvalues and vectors of the comb Gram matrix restricted to a subset of the components.

        ``offset`` may be a tuple of offsets: then the :meth:`dominating_gram` of those combs.
        """
        key = (step, offset, subset.tobytes())
        if key not in self._eigen:
            g = self.dominating_gram(step, offset) if isinstance(offset, tuple) else self.comb_gram(step, offset)
            g = g[np.ix_(subset, subset)]
            self._eigen[key] = hermitian_eigen(0.5 * (g + g.conj().T))
        return self._eigen[key]

    def scattered_comb(self, step, offset):
        """(m, V): :meth:`comb_eigen` of the scattered components, eigenvalues below 1e-12 of the largest as 0."""
        key = ("scattered", step, offset)
        if key not in self._eigen:
            m, vectors = self.comb_eigen(step, offset, self.components.kind != LINE_OF_SIGHT)
            tol = 1e-12 * max(m.max(), 1e-300) if m.size else 0.0
            self._eigen[key] = (np.where(m > tol, m, 0.0), vectors)
        return self._eigen[key]

    def data_frequency_part(self, step, offset, data_offset):
        """The frequency part of a target's data in the separable form: ``z_j = m_j (V^H G_d V)_jj``.

        ``(m, V)`` of :meth:`scattered_comb` (step, offset), ``G_d`` the data's Gram matrix over the
        scattered components (the whole band less the comb at ``data_offset``; -1: the whole band).
        """
        key = ("data", step, offset, data_offset)
        if key not in self._eigen:
            m, vectors = self.scattered_comb(step, offset)
            scattered = self.components.kind != LINE_OF_SIGHT
            g_all = self.comb_gram(step, -1)
            g_d = g_all - (self.comb_gram(step, data_offset) if data_offset >= 0 else 0.0)
            self._eigen[key] = m * np.sum(np.conj(vectors) * (g_d[np.ix_(scattered, scattered)] @ vectors),
                                          axis=0).real
        return self._eigen[key]

    def data_frequency_parts(self, step, offset, data_offsets):
        """:meth:`data_frequency_part` of each data offset of a tuple, stacked: (T, J)."""
        key = ("data stack", step, offset, data_offsets)
        if key not in self._eigen:
            self._eigen[key] = np.stack([self.data_frequency_part(step, offset, o) for o in data_offsets])
        return self._eigen[key]

    def clusters(self, step, offsets):
        """Components the combs couple, grouped: a list of (k, c) index arrays, k clusters of c components.

        Two components are coupled when, on some comb, their Gram entry exceeds
        :data:`COUPLING` of the geometric mean of their own entries; clusters
        are the connected groups. In the band's eigenmode basis the combs couple
        modes only through pilot aliasing, so resolvable channels fall apart
        into small clusters; dropping the weak couplings changes the error only
        in second order (the data's Gram matrix is diagonal in that basis).
        """
        key = (step, tuple(offsets))
        if key not in self._clusters:
            size = self.components.basis.shape[1]
            linked = np.eye(size, dtype=bool)
            for offset in (-1, *offsets):  # the whole band too: the data's Gram must not couple clusters either
                g = self.comb_gram(step, offset)
                diag = np.sqrt(np.clip(np.diag(g).real, 1e-300, None))
                linked |= np.abs(g) > COUPLING * diag[:, None] * diag[None, :]
            label = np.arange(size)
            for _ in range(size):  # label propagation to the smallest index in each connected group
                new = np.min(np.where(linked, label[None, :], size), axis=1)
                if np.array_equal(new, label):
                    break
                label = new
            groups: dict = {}
            for index, lab in enumerate(label):
                groups.setdefault(int(lab), []).append(index)
            by_size: dict = {}
            for members in groups.values():
                by_size.setdefault(len(members), []).append(members)
            self._clusters[key] = [np.array(rows) for _, rows in sorted(by_size.items())]
        return self._clusters[key]

    def dominating_gram(self, step, offsets):
        """A Gram matrix at least each comb's (Loewner order): the mean of the combs' plus their excess over it.

        With G_o the Gram matrix of the comb at offset o and A their mean,
        ``A + sum_o (G_o - A)_+`` (positive parts) exceeds every G_o, since
        each positive part exceeds G_o - A and the others add positive
        semidefinite terms. Where the combs sample the channel alike (delays
        well within the comb's alias-free span), the excess is small.
        """
        key = ("dominating", step, tuple(offsets))
        if key not in self._gram:
            grams = [self.comb_gram(step, o) for o in offsets]
            mean = sum(grams) / len(grams)
            excess = np.zeros_like(mean)
            for g in grams:
                value, vector = hermitian_eigen(0.5 * ((g - mean) + (g - mean).conj().T))
                excess = excess + (vector * np.clip(value, 0.0, None)) @ vector.conj().T
            self._gram[key] = mean + excess
        return self._gram[key]

    def cluster_roots(self, step, offsets, members):
        """Hermitian square roots of the combs' Gram matrices restricted to clusters: (u, k, c, c).

        ``offsets`` the comb of each pilot symbol (u), ``members`` the (k, c) component indices of
        :meth:`clusters`; kept per band.
        """
        key = ("clusters", step, tuple(offsets), members.shape, members.tobytes())
        if key not in self._root:
            grams = np.stack([self.comb_gram(step, o) for o in offsets])  # (u, C, C)
            sub = grams[:, members[:, :, None], members[:, None, :]]  # (u, k, c, c)
            value, vector = hermitian_eigen(sub)
            self._root[key] = ((vector * np.sqrt(np.clip(value, 0.0, None))[..., None, :])
                               @ np.conj(np.swapaxes(vector, -1, -2)))
        return self._root[key]

    def cluster_factors(self, step, offsets, members):
        """Thin factors of the combs' Gram matrices restricted to clusters: F (u, k, c, r), ``F F^H = G``.

        Per pilot symbol and cluster, the eigenvectors of the Gram matrix scaled by the square roots of
        their eigenvalues, those below :data:`FACTOR_TOL` of the largest left out (a comb of fewer
        subcarriers than components has a Gram matrix of lower rank), padded with zero columns to the
        largest rank r of the stack. Kept per band.
        """
        key = ("factors", step, tuple(offsets), members.shape, members.tobytes())
        if key not in self._root:
            grams = np.stack([self.comb_gram(step, o) for o in offsets])  # (u, C, C)
            value, vector = hermitian_eigen(grams[:, members[:, :, None], members[:, None, :]])  # ascending
            kept = value > FACTOR_TOL * np.maximum(value.max(axis=-1, keepdims=True), 1e-300)
            rank = max(int(kept.sum(axis=-1).max()), 1)
            root = np.sqrt(np.where(kept, value, 0.0))
            self._root[key] = vector[..., -rank:] * root[..., None, -rank:]
        return self._root[key]

    def cluster_products(self, step, offsets, members):
        """The blocks of the coupled matrix per component kind: (Q, k, u, r, u, r), Q the kinds present.

        With ``F_i`` the factors of :meth:`cluster_factors` and ``E_q`` the diagonal selecting the
        components of kind q (``kinds``, ascending), entry ``[q, :, i, :, j, :]`` is ``F_i^H E_q F_j``.
        The components of one kind share one time correlation, so block (i, j) of the coupled matrix
        ``F_i^H diag(rho_ij) F_j`` (:func:`_pilot_set_explained`) is ``sum_q rho_ij,q F_i^H E_q F_j``: the
        products are the band's, a design only weights them (no matrix products per design).
        """
        key = ("products", step, tuple(offsets), members.shape, members.tobytes())
        if key not in self._root:
            factors = self.cluster_factors(step, offsets, members)  # (u, k, c, r)
            rows = np.conj(np.swapaxes(factors, -1, -2))  # (u, k, r, c): F_i^H
            kind = self.components.kind[members]  # (k, c)
            self._root[key] = np.stack([
                ((rows[:, None] * (kind == q)[:, None, :]) @ factors[None, :]).transpose(2, 0, 3, 1, 4)
                for q in self.kinds])
        return self._root[key]

    def los_frame(self, step, offset, data_offsets):
        """The band's part of :class:`WanderingWeights` for the comb (step, offset) (a tuple: the
        :meth:`dominating_gram` of those combs) and the data offsets given: gamma, eta, g_hat, b, g_ll."""
        key = ("los", step, offset, data_offsets)
        if key not in self._root:
            los_index = int(np.flatnonzero(self.components.kind == LINE_OF_SIGHT)[0])
            gamma, vectors = self.comb_eigen(step, offset, np.arange(self.components.kind.size))
            gamma = np.where(gamma > 1e-12 * max(gamma.max(), 1e-300), gamma, 0.0)
            root = np.sqrt(gamma)
            rows = root[:, None] * vectors.conj().T  # (J, C): diag(gamma^1/2) V^H
            g_all = self.comb_gram(step, -1)
            g_data = [g_all - (self.comb_gram(step, o) if o >= 0 else 0.0) for o in data_offsets]
            self._root[key] = (gamma, root * np.conj(vectors[los_index]),
                               np.stack([rows @ g @ rows.conj().T for g in g_data]),
                               np.stack([(rows @ g)[:, los_index] for g in g_data]),
                               np.array([g[los_index, los_index].real for g in g_data]))
        return self._root[key]

    def comb_root(self, step, offset):
        """The Hermitian square root of :meth:`comb_gram`."""
        key = (step, offset)
        if key not in self._root:
            value, vector = hermitian_eigen(self.comb_gram(step, offset))
            self._root[key] = (vector * np.sqrt(np.clip(value, 0.0, None))) @ vector.conj().T
        return self._root[key]


#: Diagonal loading of the genie's time correlation matrix in :func:`interpolation_floor` (a fraction of
#: the channel power); the bound subtracts what the loading can add (at most this much per pilot symbol).
GENIE_LOADING = 1e-9


def interpolation_floor(lags, symbol_s, max_doppler_hz, spectrum, los_fraction, oscillator=None):
    """Error of interpolating the channel in time from noiseless, full-band pilot symbols: a lower bound.

    A genie that observed every component of the channel without noise at the
    pilot-bearing symbols ``lags`` (every subcarrier, not only the comb) would
    still have to interpolate each component in time to the data symbol at lag
    0. Its LMMSE error for a component of time correlation rho is
    ``1 - c^H T^-1 c`` with ``T_ij = rho(l_i - l_j)`` and ``c_i = rho(l_i)``.
    The receiver's pilots are fewer and noisy observations of the same
    channel, and the LMMSE error can only grow as observations are removed or
    made noisier, so this error bounds the exact one (:func:`spectral_weights`)
    from below for the same pilot symbols; the screening of a search uses it
    to bound the SINR from above (``numerology.link.estimation_floor``).

    Parameters
    ----------
    lags : int array (n, u)
        Per case, the usable pilot-bearing symbols relative to the data symbol (u may be 0).
    symbol_s, max_doppler_hz, los_fraction : array (n,)
        Per case: symbol duration (cyclic prefix included), maximum Doppler, line-of-sight fraction.
    spectrum : str
        As :func:`time_correlation`.
    oscillator : (linewidth Hz, offset Hz, mask), optional
        Linewidth and offset arrays (n,) or scalars.

    Returns
    -------
    array (n, 2)
        The error of a scattered and of a line-of-sight component (a fraction of its power).

    Examples
    --------
    One pilot symbol, a Jakes channel: the error of holding it one symbol is 1 - J0(2 pi f_D T)^2.

    >>> e = interpolation_floor(np.array([[-1]]), [1e-3], [100.0], "classical", [0.0])
    >>> round(float(e[0, 0]), 6), round(float(1 - sp.j0(2 * np.pi * 0.1) ** 2), 6)
    (0.183303, 0.183303)
    """
    lag = np.asarray(lags, dtype=float)
    n, u = lag.shape
    if u == 0:
        return np.ones((n, 2))
    kinds = np.array([SCATTERED, LINE_OF_SIGHT])
    symbol_s = np.reshape(np.asarray(symbol_s, dtype=float), (-1, 1))
    lag_s = np.concatenate([(lag[:, :, None] - lag[:, None, :]).reshape(n, -1), lag], axis=1) * symbol_s
    los = np.reshape(np.asarray(los_fraction, dtype=float), (-1, 1, 1))
    rho = time_correlation(kinds, lag_s, np.reshape(max_doppler_hz, (-1, 1)), spectrum, los)
    if oscillator is not None and has_phase_variation(oscillator):
        # the oscillator's factor (a measured mask is an integral per lag) once per distinct lag and oscillator
        linewidth, offset, mask = oscillator
        triples = np.stack(np.broadcast_arrays(lag_s, np.reshape(linewidth, (-1, 1)), np.reshape(offset, (-1, 1))),
                           axis=-1)
        index, first = distinct_rows(triples)
        flat = triples.reshape(-1, 3)[first]
        rho = rho * phase_autocorrelation(flat[:, 0], flat[:, 1], flat[:, 2], mask)[index][..., None]
    rho = np.moveaxis(np.broadcast_to(rho, (n,) + rho.shape[1:]), -1, 1)  # (n, kind, u*u + u)
    t = rho[..., :u * u].reshape(n, 2, u, u)
    c = rho[..., u * u:]
    value, vector = hermitian_eigen(0.5 * (t + np.conj(np.swapaxes(t, -1, -2))) + GENIE_LOADING * np.eye(u))
    proj = np.abs(np.einsum("nkij,nki->nkj", np.conj(vector), c)) ** 2
    explained = np.sum(proj / np.maximum(value, GENIE_LOADING), axis=-1)
    # the loading raises the error by at most GENIE_LOADING per pilot symbol: taken off, the bound holds
    return np.clip(1.0 - explained - u * GENIE_LOADING, 0.0, 1.0)


def data_count(used: int, freq_spacing: int, target: arrangement.Target) -> int:
    """Data resource elements of one target symbol: the used subcarriers less its own pilots."""
    return used - (comb_count(used, target.data_offset, freq_spacing) if target.data_offset >= 0 else 0)


def spectral_weights(schedule: arrangement.Schedule, band: Band, symbol_s, max_doppler_hz, spectrum: str,
                     los_fraction: float, estimator: str = "lmmse", oscillator=None, coupled: str = "direct") -> list:
    """The s2-free part of the estimation error of designs sharing a pattern and a band (module docstring).

    Parameters
    ----------
    schedule : arrangement.Schedule
        Data symbols of the span and their usable pilots.
    band : Band
        The channel over the designs' used subcarriers.
    symbol_s, max_doppler_hz : array (n,)
        Symbol duration T_s (cyclic prefix included, s) and maximum Doppler (Hz) of each design.
    spectrum, los_fraction
        The time variation (see :func:`time_correlation`).
    estimator : {"lmmse", "linear"}
    oscillator : (linewidth Hz, offset Hz, mask), optional
        The oscillator's phase variation, common to the designs (see :func:`time_correlation`).
    coupled : {"direct", "eigen"}
        Pilot symbols on different combs (the coupled problem): ``direct`` gives :class:`DirectWeights`
        (a Cholesky factorisation per noise level asked for), ``eigen`` the spectral weights of one
        eigendecomposition per design (the reference; the same values to round-off).

    Returns
    -------
    list of SpectralWeights, SeparableWeights or DirectWeights
        One per design, in order.
    """
    symbol_s = np.atleast_1d(np.asarray(symbol_s, dtype=float))
    doppler = np.broadcast_to(np.asarray(max_doppler_hz, dtype=float), symbol_s.shape)
    if estimator == "linear":
        return [_linear_weights(schedule, band, t, f, spectrum, los_fraction, oscillator)
                for t, f in zip(symbol_s, doppler)]
    offsets = schedule.comb_offsets
    los_follows = not (band.components.kind == LINE_OF_SIGHT).any() or not _random_phase(oscillator)
    if len(offsets) <= 1 and los_follows:  # a rank-one line of sight, or none: the separable path is exact
        return _separable_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction,
                                  offsets[0] if offsets else 0, oscillator)
    if len(offsets) <= 1 and coupled == "direct":  # one comb, a wandering line of sight: a rank-u update
        return _wandering_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction,
                                  offsets[0] if offsets else 0, oscillator)
    total = float(sum(data_count(band.used, schedule.freq_spacing, t) for t in schedule.targets))
    n = symbol_s.size
    if coupled == "direct":
        problem = _CoupledProblem(schedule, band, symbol_s.copy(), np.array(doppler), spectrum, los_fraction,
                                  oscillator, total)
        return [DirectWeights(problem, i) for i in range(n)]
    lams, betas = [], []
    for m, x, g_sub in _coupled_parts(schedule, band, symbol_s, doppler, spectrum, los_fraction, oscillator):
        lam, beta = _eigen_terms(m, x, g_sub)
        betas.append(beta.reshape(n, -1))
        lams.append(lam.reshape(n, -1))
    lam = np.concatenate(lams, axis=1) if lams else np.zeros((n, 0))
    beta = np.concatenate(betas, axis=1) if betas else np.zeros((n, 0))
    return [SpectralWeights("lmmse", lam[i], beta[i], total) for i in range(n)]


def _lag_table(kinds, targets, symbol_s, doppler, spectrum, los_fraction, oscillator):
    """Each kind's time correlation, per design, at every lag the targets' pilots need: (table, reach).

    ``table`` (n, 4 reach + 1, K): row ``l + 2 reach`` is the lag of ``l`` symbols (differences between
    pilot symbols and lags from them to a target); ``reach`` the farthest pilot lag of any target.
    """
    reach = max((max(abs(l) for l in t.pilot_lags) for t in targets if t.pilot_lags), default=0)
    lags = np.arange(-2 * reach, 2 * reach + 1)
    return time_correlation(kinds, lags[None, :] * symbol_s[:, None], doppler[:, None], spectrum, los_fraction,
                            oscillator), reach


def _by_shape(targets) -> dict:
    """The targets with pilots, grouped by their pilot set's lag differences (one time eigenproblem each)."""
    groups: dict = {}
    for target in targets:
        if target.pilot_lags:
            lags = target.pilot_lags
            groups.setdefault(tuple(l - lags[0] for l in lags), []).append(target)
    return groups


@lru_cache(maxsize=4096)
def _shape_groups(schedule: arrangement.Schedule) -> tuple:
    """:func:`_by_shape` of a schedule's targets as arrays, kept per schedule: per pilot-set shape
    (shape, pilot lags (T, u), data offsets (T,) as a tuple)."""
    return tuple((shape, np.array([t.pilot_lags for t in group]), tuple(t.data_offset for t in group))
                 for shape, group in _by_shape(schedule.targets).items())


def _coupled_parts(schedule, band, symbol_s, doppler, spectrum, los_fraction, oscillator):
    """The coupled LMMSE problem of n designs, one piece per (group of targets, size of cluster).

    Targets with the same pilot-set shape, pilot offsets and data offset form a group; components the
    combs couple form clusters (:meth:`Band.clusters`), k clusters of c components each. Yields

    ``m`` (n, k, uc, uc)
        ``D^(1/2) S_UU D^(1/2)`` of each cluster (u pilot symbols), made exactly Hermitian;
    ``x`` (n, T, k, uc, c)
        ``D^(1/2) S_Un`` of each of the group's T targets;
    ``g_sub`` (k, c, c)
        the data's Gram matrix of each cluster;

    so that the group's explained energy at noise s2 is ``sum_T tr(x^H (m + s2 I)^-1 x g_sub)``.
    """
    comps = band.components
    d_f, n = schedule.freq_spacing, symbol_s.size
    if not comps.basis.shape[1]:
        return
    offsets = schedule.comb_offsets
    groups: dict = {}  # (pilot-set shape, offsets, data offset) -> targets
    for target in schedule.targets:
        if target.pilot_lags:
            lags = target.pilot_lags
            groups.setdefault((tuple(l - lags[0] for l in lags), target.pilot_offsets, target.data_offset),
                              []).append(target)
    lag_table, reach = _lag_table(comps.kind, schedule.targets, symbol_s, doppler, spectrum, los_fraction,
                                  oscillator)  # (n, 4 reach + 1, C)
    clusters = band.clusters(d_f, offsets)
    g_all = band.comb_gram(d_f, -1)
    for (shape, pilot_offsets, data_offset), targets in groups.items():
        shape_lags = np.asarray(shape)
        u = shape_lags.size
        rho = lag_table[:, (shape_lags[:, None] - shape_lags[None, :]) + 2 * reach]  # (n, u, u, C)
        lags = np.array([t.pilot_lags for t in targets])  # (T, u)
        cross = lag_table[:, lags + 2 * reach]  # (n, T, u, C)
        g_data = g_all - (band.comb_gram(d_f, data_offset) if data_offset >= 0 else 0.0)
        for members in clusters:  # (k, c): k clusters of c components each
            k, c = members.shape
            halves = band.cluster_roots(d_f, pilot_offsets, members)  # (u, k, c, c)
            r = rho[..., members]  # (n, u, u, k, c)
            # block (i, j) of D^(1/2) S D^(1/2) per cluster: H_i diag(rho_ij) H_j
            blocks = ((halves[None, :, None] * r[..., None, :]) @ halves[None, None, :])  # (n, u, u, k, c, c)
            m = blocks.transpose(0, 3, 1, 4, 2, 5).reshape(n, k, u * c, u * c)
            x = halves[None, None] * cross[..., members][..., None, :]  # (n, T, u, k, c, c)
            x = x.transpose(0, 1, 3, 2, 4, 5).reshape(n, len(targets), k, u * c, c)
            g_sub = g_data[members[:, :, None], members[:, None, :]]  # (k, c, c)
            yield 0.5 * (m + np.conj(np.swapaxes(m, -1, -2))), x, g_sub


def _eigen_terms(m, x, g_sub):
    """Eigenvalues lambda_j and weights beta_j of :func:`_coupled_parts`' pieces: both (n, T, k, uc).

    ``g_sub`` (k, c, c), or (T, k, c, c): a data Gram matrix per target.

    With ``m = W diag(lambda) W^H`` and ``b = W^H x``, ``beta_j = (b g_sub b^H)_jj``: the explained
    energy at noise s2 is ``sum_j beta_j / (lambda_j + s2)`` (positive beta_j only).
    """
    lam, w = hermitian_eigen(m)  # (n, k, uc), (n, k, uc, uc)
    b = np.conj(np.swapaxes(w, -1, -2))[:, None] @ x  # (n, T, k, uc, c): rows w_j^H D^(1/2) S_Un
    beta = np.sum((b @ g_sub) * np.conj(b), axis=-1).real  # (n, T, k, uc)
    return np.broadcast_to(lam[:, None], beta.shape), beta


def _eigen_explained(m, x, g, s2):
    """The explained energy of each target of pieces (p, ...) at noise levels s2 (p,) through
    :func:`_eigen_terms` (``g`` (T, k, c, c): each target's data Gram matrix): (p, T)."""
    return _eigen_sum(*_eigen_terms(m, x, g), s2)


def _eigen_sum(lam, beta, s2):
    """``sum_j beta_j / (lambda_j + s2)`` (positive beta_j) of :func:`_eigen_terms` per piece (p, T, ...) at
    its noise level s2 (p,): (p, T)."""
    flat = s2.reshape((-1,) + (1,) * (beta.ndim - 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(beta > 0, beta / (lam + flat), 0.0)
    return terms.reshape(terms.shape[:2] + (-1,)).sum(axis=2)


#: Designs of one pilot set sharing a symbol duration and a Doppler (so one coupled matrix M) at this many
#: noise levels or more are answered by one eigendecomposition of M (:func:`_eigen_terms`) rather than a
#: factorisation per level: about the cost of two (measured on the plan benchmark's 90-row pieces).
EIGEN_LEVELS = 3


#: Noise levels at most this small relative to the largest diagonal entry of a piece's matrix go to the
#: eigendecomposition rather than a Cholesky factorisation (``m + s2 I`` is then close to singular).
DIRECT_MIN_NOISE = 1e-10
#: From this size on (u r rows) the factor's triangular solves; below it one stacked LU solve.
DIRECT_TRIANGULAR = 64


def _per_target(targets: int, pilot_symbols: int) -> bool:
    """Whether T targets' own right-hand sides (T c columns) are no wider than the basis's (u c)."""
    return targets <= pilot_symbols


@dataclass(frozen=True)
class _Cluster:
    """One cluster size of a pilot set's coupled problem, for D designs and T targets.

    ``m`` (D, k, ur, ur) the coupled matrices ``M_ij = F_i^H diag(rho_ij) F_j`` (exactly Hermitian);
    ``rows`` (u, k, r, c) the factors' ``F_i^H``; ``onehot`` (k, c, Q) each component's kind;
    ``basis`` (D, Q, u, u) per design and kind, the eigenvectors of the pilot symbols' time correlation
    (any unitary basis where the solves take every target's own right-hand side);
    ``cross`` (D, T, u, Q) each target's time cross-correlation with the pilot symbols;
    ``grams`` (O, k, c, c) the data Gram matrices of the targets' data offsets, ``which`` (T,) a target's.

    A target's right-hand side is ``x_T = F^H diag(rho_T) = sum_l beta_T,l R_l`` (per component's
    kind), ``R_l`` the pilot symbols' factors combined by basis vector l. The solves take whichever
    is narrower: every target's own ``x_T`` (T c columns), or the ``R_l`` (u c columns) read by each
    target with its own coefficients (:meth:`explained`).
    """

    m: np.ndarray
    rows: np.ndarray
    onehot: np.ndarray
    basis: np.ndarray
    cross: np.ndarray
    grams: np.ndarray
    which: np.ndarray

    @property
    def per_target(self) -> bool:
        """Whether the solves take every target's own right-hand side (:func:`_per_target`)."""
        return _per_target(self.which.size, self.basis.shape[-1])

    def take(self, keep):
        """The same cluster for the designs ``keep`` (an index or a mask)."""
        return _Cluster(self.m[keep], self.rows, self.onehot, self.basis[keep], self.cross[keep], self.grams,
                        self.which)

    @property
    def beta(self) -> np.ndarray:
        """Each target's cross-correlation in the basis: ``beta = B^H rho_T`` per kind, (D, T, u, Q)."""
        return np.einsum("dqil,dtiq->dtlq", np.conj(self.basis), self.cross)

    def right(self):
        """The right-hand sides of the solves, (D, k, ur, T c) or (D, k, ur, u c) (:attr:`per_target`).

        Basis column (l, c) is ``sum_i B[q(c)][i, l] F_i^H e_c`` in block i of the rows.
        """
        if self.per_target:
            x = self.targets()  # (D, T, k, ur, c)
            return x.transpose(0, 2, 3, 1, 4).reshape(x.shape[0], x.shape[2], x.shape[3], -1)
        u, k, r, c = self.rows.shape
        spread = np.einsum("kcq,dqil->dkilc", self.onehot, self.basis)  # (D, k, i, l, c): B[q(c)][i, l]
        rhs = self.rows.transpose(1, 0, 2, 3)[None, :, :, :, None, :] * spread[:, :, :, None]  # (D, k, i, r, l, c)
        return rhs.reshape(self.m.shape[0], k, u * r, u * c)

    def targets(self):
        """Each target's right-hand side ``x_T = F^H diag(rho_T)``: (D, T, k, ur, c)."""
        u, k, r, c = self.rows.shape
        per = np.einsum("dtiq,kcq->dtikc", self.cross, self.onehot)  # rho_T of each component's kind
        x = self.rows[None, None] * per[:, :, :, :, None, :]  # (D, T, u, k, r, c)
        return x.transpose(0, 1, 3, 2, 4, 5).reshape(x.shape[0], x.shape[1], k, u * r, c)

    def explained(self, left, right):
        """Each target's explained energy ``tr(x_T^H (M + s2 I)^-1 x_T G_T)`` from ``left = (M + s2 I)^-1 R``
        and ``right = R`` (or both ``L^-1 R`` for a factor ``L``), R :meth:`right`: (D, T).

        Per target: ``tr(right_T^H left_T G_T)``. From the basis: ``sum beta_l conj(beta_m) S[l, m]`` with
        ``S[l, m] = tr(right_m^H left_l G)`` per kind and data offset. In the basis of the time
        correlation's eigenvectors a direction of small correlation, where ``left`` grows as 1/s2, is
        weighed by the target's own small coefficient along it: no two large terms cancel.
        """
        d, k, rows = left.shape[:3]
        c = self.rows.shape[-1]
        if self.per_target:
            t = self.which.size

            def each(a):  # (D, k, ur, T c) -> (D, T, k, ur, c)
                return a.reshape(d, k, rows, t, c).transpose(0, 3, 1, 2, 4)

            value = (each(left) @ self.grams[self.which]) * np.conj(each(right))
            return np.sum(value.real.reshape(d, t, -1), axis=2)
        u, q = self.basis.shape[-1], self.onehot.shape[-1]
        mask = self.onehot.transpose(0, 2, 1)[:, None, None]  # (k, 1, 1, Q, c)

        def by_kind(a):  # (D, k, ur, u c) -> (D, k, ur, u, Q, c): the columns of each kind
            return a.reshape(d, k, rows, u, 1, c) * mask

        def flat(a):  # (D, k, ur, u, Q, c) -> (D, u Q, k ur c)
            return a.transpose(0, 3, 4, 1, 2, 5).reshape(d, u * q, -1)

        far = np.swapaxes(np.conj(flat(by_kind(right))), -1, -2)
        near = by_kind(left).reshape(d, k, -1, c)
        s = np.stack([flat((near @ g).reshape(d, k, rows, u, q, c)) @ far for g in self.grams])
        s = s[self.which].transpose(1, 0, 2, 3).reshape(d, self.which.size, u, q, u, q)  # (D, T, u, Q, u, Q)
        beta = self.beta
        return np.einsum("dtlq,dtlqmp,dtmp->dt", beta, s, np.conj(beta)).real


def _direct_explained(piece: _Cluster, s2):
    """The explained energy ``tr(x_T^H (m + s2 I)^-1 x_T g_T)`` of each target T of a cluster: (D, T).

    A Cholesky factorisation ``m + s2 I = L L^H`` per design serves every target: the right-hand sides
    (:meth:`_Cluster.right`) are every target's own or, where the targets outnumber the pilot symbols,
    the pilot symbols' factors along the eigenvectors of the time correlation (u c columns however many
    targets), which each target reads with its own coefficients (:meth:`_Cluster.explained`). In that
    basis a term weighs a direction of small time correlation by the target's own small coefficient
    along it, so no two large terms cancel (the per-symbol basis would: its blocks grow as 1/s2 where the
    time correlation is nearly singular). Pairs whose noise is tiny against the matrix's scale
    (:data:`DIRECT_MIN_NOISE`), a failed factorisation or a result that is not finite: the
    eigendecomposition (:func:`_eigen_explained`), for those designs alone, so that a design's value never depends on the
    others asked with it (the same input gives the same JSON).
    """
    if s2.size > 1:
        try:
            return _direct_batch(piece, s2)
        except np.linalg.LinAlgError:  # some design failed: each on its own
            return np.concatenate([_direct_explained(piece.take(slice(i, i + 1)), s2[i:i + 1])
                                   for i in range(s2.size)])
    try:
        return _direct_batch(piece, s2)
    except np.linalg.LinAlgError:
        return _eigen_explained(piece.m, piece.targets(), piece.grams[piece.which], s2)


def _direct_batch(piece: _Cluster, s2):
    """:func:`_direct_explained` for a batch; raises LinAlgError if any design's factorisation fails."""
    import scipy.linalg

    m = piece.m
    scale = np.max(np.diagonal(m, axis1=-2, axis2=-1).real, axis=-1)  # (p, k)
    direct = np.all(s2[:, None] > DIRECT_MIN_NOISE * scale, axis=1)
    out = np.zeros((s2.size, piece.which.size))
    if direct.any():
        part = piece if direct.all() else piece.take(direct)
        a = part.m + s2[direct][:, None, None, None] * np.eye(m.shape[-1])
        low = np.linalg.cholesky(a)  # fails unless positive definite
        rhs = part.right()
        if m.shape[-1] >= DIRECT_TRIANGULAR:
            y = scipy.linalg.solve_triangular(low, rhs, lower=True, check_finite=False)  # L^-1 R
            value = part.explained(y, y)
        else:  # small matrices, many of them: one stacked solve (scipy would loop over the stack)
            value = part.explained(np.linalg.solve(a, rhs), rhs)
        if not np.all(np.isfinite(value)):
            raise np.linalg.LinAlgError("not finite")
        out[direct] = value
    if not direct.all():
        rest = piece.take(~direct)
        out[~direct] = _eigen_explained(rest.m, rest.targets(), piece.grams[piece.which], s2[~direct])
    return out


def _pilot_set(target) -> tuple:
    """The pilot set of a target, as the coupled matrix depends on it: (lag differences, comb offsets)."""
    lags = target.pilot_lags
    return tuple(l - lags[0] for l in lags), target.pilot_offsets


def _pilot_set_explained(band, setting, pilot_set, designs, targets):
    """The explained energy of each target sharing one pilot set, per design: (D, T).

    ``setting`` (comb step, comb offsets of the schedule, spectrum, line-of-sight fraction, oscillator);
    ``designs`` D triples (symbol duration, Doppler, noise level); ``targets`` T triples (pilot lags,
    pilot offsets, data offset) of the pilot set. The coupled matrix of a cluster (:func:`_coupled_parts`)
    is built from the band's :meth:`Band.cluster_products` weighted by each kind's time correlation,
    ``M_ij = sum_q rho_ij,q H_i E_q H_j``, and factorised once for all the targets (:class:`_Cluster`).
    """
    d_f, comb_offsets, spectrum, los_fraction, oscillator = setting
    shape, pilot_offsets = np.asarray(pilot_set[0]), pilot_set[1]
    symbol_s, doppler, s2 = (np.array(v, dtype=float) for v in zip(*designs))
    kinds = band.kinds
    lags = np.array([t[0] for t in targets])  # (T, u)
    reach = int(np.abs(lags).max())
    table = time_correlation(kinds, np.arange(-2 * reach, 2 * reach + 1)[None, :] * symbol_s[:, None],
                             doppler[:, None], spectrum, los_fraction, oscillator)  # (D, 4 reach + 1, Q)
    rho = table[:, (shape[:, None] - shape[None, :]) + 2 * reach]  # (D, u, u, Q)
    cross = table[:, lags + 2 * reach]  # (D, T, u, Q)
    u = shape.size
    if not _per_target(len(targets), u):  # the solves take the basis: the time correlation's eigenvectors
        per_kind = rho.transpose(0, 3, 1, 2)
        basis = hermitian_eigen(0.5 * (per_kind + np.conj(np.swapaxes(per_kind, -1, -2))))[1]  # (D, Q, u, u)
    else:  # each target's own right-hand side: any basis will do
        basis = np.broadcast_to(np.eye(u), (len(designs), kinds.size, u, u))
    g_all = band.comb_gram(d_f, -1)
    offsets = sorted({t[2] for t in targets})
    which = np.searchsorted(offsets, [t[2] for t in targets])
    g_data = [g_all - (band.comb_gram(d_f, o) if o >= 0 else 0.0) for o in offsets]
    out = np.zeros((len(designs), len(targets)))
    # designs that share M (symbol duration and Doppler) at EIGEN_LEVELS noise levels or more: the eigen form
    group, first = distinct_rows(np.stack([symbol_s, doppler], axis=1))
    count = np.bincount(group, minlength=first.size)
    shared = count[group] >= EIGEN_LEVELS
    alike = np.flatnonzero(count >= EIGEN_LEVELS)  # those groups
    position = np.searchsorted(alike, group[shared])
    for members in band.clusters(d_f, comb_offsets):  # (k, c): k clusters of c components each
        k, c = members.shape
        products = band.cluster_products(d_f, pilot_offsets, members)  # (Q, k, u, r, u, r)
        r = products.shape[-1]
        m = sum(rho[:, None, :, None, :, None, q] * products[q] for q in range(kinds.size))
        m = m.reshape(len(designs), k, u * r, u * r)
        rows = np.conj(np.swapaxes(band.cluster_factors(d_f, pilot_offsets, members), -1, -2))  # (u, k, r, c)
        onehot = (band.components.kind[members][..., None] == kinds).astype(float)  # (k, c, Q)
        grams = np.stack([g[members[:, :, None], members[:, None, :]] for g in g_data])  # (O, k, c, c)
        piece = _Cluster(0.5 * (m + np.conj(np.swapaxes(m, -1, -2))), rows, onehot, basis, cross, grams, which)
        if not shared.all():
            out[~shared] += _direct_explained(piece.take(~shared) if shared.any() else piece, s2[~shared])
        if shared.any():
            one = piece.take(first[alike])  # one design per group
            lam, weight = _eigen_terms(one.m, one.targets(), grams[which])
            out[shared] += _eigen_sum(lam[position], weight[position], s2[shared])
    return out


#: Explained energies a band keeps (:attr:`Band.explained`), at most; emptied beyond.
EXPLAINED_KEPT = 20_000


def _coupled_explained(asks) -> list:
    """Explained energies of coupled problems: for each (problem, rows, s2) of ``asks``, that of design
    ``rows[i]`` at noise ``s2[i]`` (p,).

    A design's energy is the sum over its targets with pilots of each target's
    ``tr(x^H (M + s2 I)^-1 x G_d)``, which depends only on the band, the setting (comb step and offsets,
    time variation, oscillator), the target's pilots and data offset and the design's symbol duration,
    Doppler and noise level. Each such value is worked out once and kept by the band: many structures
    (slot lengths, scopes, the comb bound's later exact evaluation) share targets. The missing ones are
    computed together per pilot set across every problem asked (one factorisation of M per design for
    all targets on that pilot set); a value depends on what is asked with it only through round-off.
    """
    values: dict = {}  # (band id, setting, target, design) -> explained energy
    work: dict = {}  # (band id, setting, pilot set) -> (band, {design: None}, {target: None})
    for problem, rows, s2 in asks:
        band, setting = problem.band, problem.setting
        for design in zip(problem.symbol_s[rows].tolist(), problem.doppler[rows].tolist(), s2.tolist()):
            for pilot_set, target in problem.targets:
                key = (setting, target, design)
                if (id(band),) + key in values:
                    continue
                known = band.explained.get(key)
                if known is not None:
                    values[(id(band),) + key] = known
                    continue
                _, designs, targets = work.setdefault((id(band), setting, pilot_set), (band, {}, {}))
                designs[design], targets[target] = None, None
    for (_, setting, pilot_set), (band, designs, targets) in work.items():
        designs, targets = list(designs), list(targets)
        energy = _pilot_set_explained(band, setting, pilot_set, designs, targets).tolist()
        if len(band.explained) + len(designs) * len(targets) > EXPLAINED_KEPT:
            band.explained.clear()
        for design, row in zip(designs, energy):
            for target, value in zip(targets, row):
                band.explained[(setting, target, design)] = values[(id(band), setting, target, design)] = value
    out = []
    for problem, rows, s2 in asks:
        head = (id(problem.band), problem.setting)
        out.append(np.array([sum(values[head + (target, design)] for _, target in problem.targets)
                             for design in zip(problem.symbol_s[rows].tolist(), problem.doppler[rows].tolist(),
                                               s2.tolist())]))
    return out


class _CoupledProblem:
    """What the coupled LMMSE of n designs sharing a pattern and a band is built from (:func:`_coupled_parts`).

    Compact on purpose: the schedule, the band (shared by every structure on it, as ``link`` keeps its
    bands), per design the symbol duration and the Doppler. The matrices (up to 168 x 168 complex per
    cluster and pilot set, ~0.5 MB) exist only while a batch of noise levels is answered
    (:func:`prepare_direct`); the targets' explained energies are kept by the band
    (:func:`_coupled_explained`), a few numbers per noise level asked, not the matrices.
    """

    def __init__(self, schedule, band, symbol_s, doppler, spectrum, los_fraction, oscillator, total):
        self.schedule, self.band, self.symbol_s, self.doppler = schedule, band, symbol_s, doppler
        self.spectrum, self.los_fraction, self.oscillator, self.total = spectrum, los_fraction, oscillator, total
        #: what a target's explained energy depends on beyond the band, its pilots and the design
        self.setting = (schedule.freq_spacing, schedule.comb_offsets, spectrum, los_fraction, oscillator)
        #: (pilot set, (pilot lags, pilot offsets, data offset)) of each target with pilots, in order
        self.targets = [(_pilot_set(t), (t.pilot_lags, t.pilot_offsets, t.data_offset))
                        for t in schedule.targets if t.pilot_lags and band.components.basis.shape[1]]

    def explained(self, rows, s2):
        """Explained energy of design ``rows[i]`` at noise ``s2[i]`` (pairs; rows may repeat): (p,)."""
        return _coupled_explained([(self, rows, s2)])[0]


class DirectWeights:
    """The LMMSE error of one design whose pilot symbols sit on different combs, answered per noise level.

    ``mse(s2) = 1 - sum_T tr(x^H (M + s2 I)^-1 x G) / data`` over the pieces of :func:`_coupled_parts`,
    the same number as :class:`SpectralWeights`' ``1 - sum_j beta_j / (lambda_j + s2) / data`` from the
    eigendecomposition of M (to round-off), for a Cholesky factorisation of ``M + s2 I`` per noise level
    instead of an eigendecomposition with vectors (several times cheaper; a search asks nearly every
    structure for one noise level). Each level's result is remembered. Where a batch asks the same M (symbol
    duration and Doppler) at :data:`EIGEN_LEVELS` levels or more (sites of one channel and speed at
    several SNRs), those come from one eigendecomposition instead: the same numbers to round-off (a value
    then depends on what was asked with it in its last digits; the same input still gives the same
    JSON, the batches being the same). Memory: see :class:`_CoupledProblem`. Ask many designs at once through
    :func:`prepare_direct` (one batch per pilot set, vectorised over the designs of every problem).
    """

    kind = "lmmse"

    def __init__(self, problem: _CoupledProblem, index: int):
        self.problem, self.index, self.data = problem, index, problem.total
        self.known: dict = {}  # noise level -> explained energy

    def mse(self, noise_to_pilot):
        """Mean estimation error at the given noise-to-pilot power ratios (array)."""
        s2 = np.asarray(noise_to_pilot, dtype=float)
        if self.data <= 0:
            return np.zeros(s2.shape)
        prepare_direct([(self, s2)])
        # a NaN level gives NaN, as the eigen form's arithmetic does
        explained = np.array([self.known.get(v, np.nan) for v in s2.ravel().tolist()]).reshape(s2.shape)
        return np.clip(1.0 - explained / self.data, 0.0, 1.0)


def prepare_direct(requests) -> None:
    """Answer (weights, noise levels) requests of :class:`DirectWeights` together; other weights are skipped.

    Per problem, the designs' new noise levels are gathered; the coupled problems are then answered
    together (:func:`_coupled_explained`), the wandering ones problem by problem.
    """
    levels: dict = {}  # id -> (weights, new levels)
    for weights, noise in requests:
        if not isinstance(weights, DirectWeights) or weights.data <= 0:
            continue
        entry = levels.setdefault(id(weights), (weights, set()))
        values = np.asarray(noise, dtype=float).ravel()
        if np.isposinf(values).any():
            weights.known[np.inf] = 0.0  # nothing explained, as the eigen form's beta / (lambda + inf)
        entry[1].update(v for v in values[np.isfinite(values)].tolist() if v not in weights.known)
    direct: dict = {}  # id(problem) -> (problem, [(weights, levels)])
    for weights, new in levels.values():
        if not new:
            continue
        direct.setdefault(id(weights.problem), (weights.problem, []))[1].append((weights, sorted(new)))
    asks = [(problem, np.concatenate([np.full(len(new), w.index) for w, new in items]),
             np.concatenate([np.asarray(new, dtype=float) for _, new in items])) for problem, items in direct.values()]
    coupled = [ask for ask in asks if isinstance(ask[0], _CoupledProblem)]
    answers = dict(zip([id(ask[0]) for ask in coupled], _coupled_explained(coupled)))
    for (problem, items), (_, rows, s2) in zip(direct.values(), asks):
        found = answers[id(problem)] if id(problem) in answers else problem.explained(rows, s2)
        explained = found.tolist()
        for w, new in items:
            w.known.update(zip(new, explained[:len(new)]))
            explained = explained[len(new):]


#: Elements of the stacked terms of :func:`estimation_errors` worked out at once, at most (memory).
STACKED_TERMS = 1 << 22


def estimation_errors(requests) -> list:
    """``weights.mse(noise)`` of each (weights, noise levels) request, many requests at once.

    The coupled problems' levels go together through :func:`prepare_direct`; the LMMSE spectral weights
    with the same number of terms are stacked, one row per (request, level), with per row the arithmetic
    of :meth:`SpectralWeights.mse` (the same digits); other weights are asked one by one.
    """
    prepare_direct(requests)
    out = [None] * len(requests)
    stacks: dict = {}  # number of terms -> requests
    for index, (weights, noise) in enumerate(requests):
        if type(weights) is SpectralWeights and weights.kind == "lmmse" and weights.data > 0:
            stacks.setdefault(weights.lam.size, []).append(index)
        else:
            out[index] = weights.mse(noise)
    for size, indices in stacks.items():
        levels = [np.asarray(requests[i][1], dtype=float) for i in indices]
        lam = np.stack([requests[i][0].lam for i in indices])
        beta = np.stack([requests[i][0].beta for i in indices])
        data = np.array([requests[i][0].data for i in indices])
        row = np.repeat(np.arange(len(indices)), [level.size for level in levels])
        s2 = np.concatenate([level.ravel() for level in levels])
        error = np.empty(s2.size)
        step = max(1, STACKED_TERMS // max(size, 1))
        for start in range(0, s2.size, step):
            part = row[start:start + step]
            b = beta[part]
            with np.errstate(divide="ignore", invalid="ignore"):
                explained = np.sum(np.where(b > 0, b / (lam[part] + s2[start:start + step, None]), 0.0), axis=1)
            error[start:start + step] = np.clip(1.0 - explained / data[part], 0.0, 1.0)
        ends = np.cumsum([level.size for level in levels])
        for i, level, end in zip(indices, levels, ends):
            out[i] = error[end - level.size:end].reshape(level.shape)
    return out


def staggered_bound(schedule: arrangement.Schedule, band: Band, symbol_s, max_doppler_hz, spectrum: str,
                    los_fraction: float, oscillator=None) -> list:
    """Weights of a lower bound of the LMMSE error when pilot symbols sit on different combs (screening).

    Pilot symbol i observes the channel's components a_i through its comb:
    in white noise of power s2, the observation is worth the information
    ``G_i / s2``, G_i the comb's Gram matrix (:meth:`Band.comb_gram`). A
    receiver that observed every pilot symbol through one matrix G at least
    each G_i (:meth:`Band.dominating_gram`) has more information, so its
    LMMSE error is no larger, at every noise level; and one comb for all pilot
    symbols separates into the time and frequency eigenproblems (the
    separable form), a few times cheaper than the coupled one of
    :func:`spectral_weights`. Where the combs sample the channel alike (the
    common case: echoes well within the comb's alias-free span), the bound is
    close to the exact error. A single comb: the exact weights (the separable
    form is then exact). Where a line of sight meets a randomly wandering
    oscillator phase (which the separable form's rank-one line of sight
    cannot follow), the same one comb in :class:`WanderingWeights`.
    """
    symbol_s = np.atleast_1d(np.asarray(symbol_s, dtype=float))
    doppler = np.broadcast_to(np.asarray(max_doppler_hz, dtype=float), symbol_s.shape)
    offset = _bound_comb(schedule.comb_offsets)
    if (band.components.kind == LINE_OF_SIGHT).any() and _random_phase(oscillator):
        return _wandering_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction, offset, oscillator)
    return _separable_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction, offset, oscillator)


def _bound_comb(offsets):
    """The comb of :func:`staggered_bound`: the offsets' dominating comb (a tuple), or the one comb there is."""
    return offsets if len(offsets) > 1 else (offsets[0] if offsets else 0)


def pattern_weights(jobs, band: Band, spectrum: str, los_fraction: float, estimator: str = "lmmse",
                    oscillator=None, coupled: str = "direct") -> list:
    """The weights of several patterns on one band: per job, :func:`staggered_bound` or :func:`spectral_weights`
    (``coupled`` as there).

    ``jobs``: (schedule, symbol durations (n,), Dopplers (n,), bounded), ``bounded`` asking for the comb
    bound. Jobs whose weights are the plain separable ones (no line of sight in the band, the LMMSE, one
    comb or the comb bound) are worked out together (:func:`_plain_separable`), the others one by one;
    either way each design gets the weights it would get alone.
    """
    out = [None] * len(jobs)
    plain = []
    no_los = not (band.components.kind == LINE_OF_SIGHT).any()
    for index, (schedule, symbol_s, doppler, bounded) in enumerate(jobs):
        offsets = schedule.comb_offsets
        if estimator == "lmmse" and no_los and (bounded or len(offsets) <= 1):
            plain.append((index, (schedule, _bound_comb(offsets), np.atleast_1d(np.asarray(symbol_s, dtype=float)),
                                  np.atleast_1d(np.asarray(doppler, dtype=float)))))
        elif bounded:
            out[index] = staggered_bound(schedule, band, symbol_s, doppler, spectrum, los_fraction, oscillator)
        else:
            out[index] = spectral_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction, estimator,
                                          oscillator, coupled)
    if plain:
        for (index, _), found in zip(plain, _plain_separable(band, [job for _, job in plain], spectrum, los_fraction,
                                                             oscillator)):
            out[index] = found
    return out


def _plain_separable(band, jobs, spectrum, los_fraction, oscillator) -> list[list[SpectralWeights]]:
    """:func:`_separable_weights` without a line of sight, for several patterns on one band at once.

    ``jobs``: (schedule, comb offset (a tuple: the dominating comb), symbol durations (n,), Dopplers (n,)).
    Per target and design the weights are the outer products of the time eigenvalues (of the pilot
    symbols' correlation, which depends on their lag differences only) with the comb's eigenvalues m,
    and of the target's projections |U^H rho|^2 with its data's frequency part z. The time correlations
    of every job's designs come from one lag table, and each pilot-set shape's time eigenproblems are
    solved in one stack over every job that has it (the search asks many patterns of one band together).
    Returns, per job, one :class:`SpectralWeights` per design.
    """
    sizes = [job[2].size for job in jobs]
    starts = np.concatenate([[0], np.cumsum(sizes)])
    table, reach = _lag_table(np.array([SCATTERED, LINE_OF_SIGHT]), [t for job in jobs for t in job[0].targets],
                              np.concatenate([job[2] for job in jobs]), np.concatenate([job[3] for job in jobs]),
                              spectrum, los_fraction, oscillator)  # (designs, 4 reach + 1, 2)
    combs = [band.scattered_comb(schedule.freq_spacing, offset)[0] for schedule, offset, _, _ in jobs]
    groups = [_shape_groups(job[0]) if m.size else () for job, m in zip(jobs, combs)]
    users: dict = {}  # pilot-set shape -> the jobs that have it
    for index, by_shape in enumerate(groups):
        for shape, _, _ in by_shape:
            users.setdefault(shape, []).append(index)
    time_eigen = {}  # (shape, job) -> time eigenvalues (n, u) and vectors (n, u, u) of the job's designs
    for shape, indices in users.items():
        shape_lags = np.asarray(shape)
        rows = np.concatenate([np.arange(starts[i], starts[i + 1]) for i in indices])
        r_s = table[rows][:, (shape_lags[:, None] - shape_lags[None, :]) + 2 * reach, 0]  # (rows, u, u)
        l_t, u_t = hermitian_eigen(0.5 * (r_s + np.conj(np.swapaxes(r_s, -1, -2))))  # (rows, u), (rows, u, u)
        l_t = np.where(l_t > 1e-12 * np.maximum(l_t.max(axis=-1, keepdims=True), 1e-300), l_t, 0.0)
        ends = np.cumsum([sizes[i] for i in indices])
        for i, end, size in zip(indices, ends, [sizes[i] for i in indices]):
            time_eigen[(shape, i)] = (l_t[end - size:end], u_t[end - size:end])
    out = []
    for index, ((schedule, offset, _, _), m, by_shape) in enumerate(zip(jobs, combs, groups)):
        n, own = sizes[index], table[starts[index]:starts[index + 1]]
        total = float(sum(data_count(band.used, schedule.freq_spacing, t) for t in schedule.targets))
        lams, betas = [], []
        for shape, lags, data_offsets in by_shape:  # lags (T, u)
            l_t, u_t = time_eigen[(shape, index)]
            rho = own[:, lags + 2 * reach, 0]  # (n, T, u): E h(t_i) h(n)^*
            a = np.abs(np.einsum("nij,nti->ntj", np.conj(u_t), rho)) ** 2  # (n, T, u)
            z = band.data_frequency_parts(schedule.freq_spacing, offset, data_offsets)  # (T, J)
            lams.append(np.broadcast_to(l_t[:, None, :, None] * m, a.shape + m.shape).reshape(n, -1))
            betas.append((a[..., None] * z[None, :, None, :]).reshape(n, -1))
        lam = np.concatenate(lams, axis=1) if lams else np.zeros((n, 0))
        beta = np.concatenate(betas, axis=1) if betas else np.zeros((n, 0))
        out.append([SpectralWeights("lmmse", lam[i], beta[i], total) for i in range(n)])
    return out


def _separable_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction, offset, oscillator=None):
    """Weights when every pilot symbol has the same comb (:class:`SeparableWeights`, or plain without LOS).

    ``offset`` a tuple of offsets: every pilot symbol observes the channel
    through the :meth:`Band.dominating_gram` of those combs (a lower bound, see
    :func:`staggered_bound`).
    """
    comps = band.components
    d_f, used, n = schedule.freq_spacing, band.used, symbol_s.size
    los = comps.kind == LINE_OF_SIGHT
    if not los.any():
        return _plain_separable(band, [(schedule, offset, symbol_s, doppler)], spectrum, los_fraction, oscillator)[0]
    scattered = ~los
    total = float(sum(data_count(used, d_f, t) for t in schedule.targets))
    m, vectors = band.scattered_comb(d_f, offset)  # scattered comb Gram = V diag(m) V^H
    targets = [t for t in schedule.targets]
    table, reach = _lag_table(np.array([SCATTERED, LINE_OF_SIGHT]), targets, symbol_s, doppler, spectrum,
                              los_fraction, oscillator)  # (n, 4 reach + 1, 2)
    z_of = {o: band.data_frequency_part(d_f, offset, o) for o in {t.data_offset for t in targets}}
    # a line of sight: its rank-one update on top of the scattered part, design by design
    g_comb = band.dominating_gram(d_f, offset) if isinstance(offset, tuple) else band.comb_gram(d_f, offset)
    g_all = band.comb_gram(d_f, -1)
    g_data_of = {o: g_all - (band.comb_gram(d_f, o) if o >= 0 else 0.0) for o in z_of}
    v_los = vectors.conj().T @ g_comb[np.ix_(scattered, los)][:, 0]
    live = m > 0
    schur = max(float(g_comb[np.ix_(los, los)][0, 0].real - np.sum(np.abs(v_los[live]) ** 2 / m[live])), 0.0)
    order = np.concatenate([np.flatnonzero(los), np.flatnonzero(scattered)])
    results = []
    for k in range(n):
        lam, beta, ls, ul, kap, gd, cnt = [], [], [], [], [], [], []
        eigen_cache = {}
        for target in targets:
            z = z_of[target.data_offset]
            if not target.pilot_lags or not m.size:
                ls.append(np.zeros(1)), ul.append(np.zeros(1, complex)), kap.append(np.zeros(1, complex))
                gd.append(g_data_of[target.data_offset][np.ix_(order, order)]), cnt.append(0)
                continue
            lags = np.asarray(target.pilot_lags)
            key = tuple(lags - lags[0])
            if key not in eigen_cache:
                r_s = table[k, (lags[:, None] - lags[None, :]) + 2 * reach, 0]
                eigen_cache[key] = hermitian_eigen(0.5 * (r_s + r_s.conj().T))
            l_t, u_t = eigen_cache[key]
            l_t = np.where(l_t > 1e-12 * max(l_t.max(), 1e-300), l_t, 0.0)
            rho = table[k, lags + 2 * reach, 0]  # E h(t_i) h(n)^*
            a = np.abs(u_t.conj().T @ rho) ** 2
            lam.append(np.outer(l_t, m).ravel())
            beta.append(np.outer(a, z).ravel())
            phi = table[k, lags + 2 * reach, 1]  # the line of sight at the pilots, relative to the target
            u_phi = u_t.conj().T @ phi
            ls.append(l_t)
            ul.append(u_phi)
            kap.append(np.conj(u_t.conj().T @ rho) * u_phi)
            gd.append(g_data_of[target.data_offset][np.ix_(order, order)])
            cnt.append(lags.size)
        base = SpectralWeights("lmmse", np.concatenate(lam) if lam else np.zeros(0),
                               np.concatenate(beta) if beta else np.zeros(0), total)
        width = max(x.size for x in ls)
        pad = lambda rows, fill=0.0: np.array([np.pad(r, (0, width - r.size), constant_values=fill) for r in rows])
        results.append(SeparableWeights(base, pad(ls), pad(ul), pad(kap), m, v_los, vectors, schur, np.array(gd),
                                        np.array(cnt, dtype=float), total))
    return results


class WanderingWeights(DirectWeights):
    """Estimation error of a pattern whose pilot symbols share one comb, with a line of sight whose phase wanders.

    An oscillator's random phase gives the line of sight a time correlation
    ``R_L`` that no rank-one phasor follows (:class:`SeparableWeights` needs
    one), but every pilot symbol still sees the channel through the same comb
    (Gram matrix ``G = H^2``). With ``R_S`` the scattered components' time
    correlation between the pilot symbols, ``h = H e_L`` the line of sight's
    column and ``Delta = R_L - R_S``, the coupled matrix of
    :func:`_coupled_parts` is::

        M = R_S (x) G + Delta (x) h h^H,

    a separable matrix plus an update of rank u (pilot symbols), and each
    target's ``x = s (x) H + (l - s) (x) h e_L^T`` (``s``, ``l``: the scattered
    and line-of-sight correlations from the pilot symbols to the target). In
    the eigenbases ``R_S = Q diag(a) Q^H`` and ``G = V diag(gamma) V^H`` the
    separable part is diagonal, ``kappa_ij = 1 / (a_i gamma_j + s2)``, and the
    Woodbury identity in the form without ``Delta^-1``,
    ``(K^-1 + U Delta U^H)^-1 = K - K U Delta (I + U^H K U Delta)^-1 U^H K``,
    leaves a u x u solve per noise level and target (Golub and Van Loan,
    Matrix Computations, sect. 2.1.4). The explained energy of a target is::

        sum_ij kappa_ij |x_ij|_G^2 - tr(Delta' (I + diag(z) Delta')^-1 F),

    ``Delta' = Q^H Delta Q``, ``z_i = sum_j kappa_ij |eta_j|^2``, ``eta = V^H h``
    and ``F = P G_d P^H`` with ``P`` the rows ``sum_j kappa_ij conj(eta_j) x_ij``
    (:meth:`_WanderingProblem.explained` writes the terms out). The whole
    problem, without the clusters of :meth:`Band.clusters`: O(u c^2) per level
    instead of a factorisation of size u c. Answered per noise level and
    remembered, as :class:`DirectWeights` (whose ``mse`` it shares): the levels
    of many designs go together through :func:`prepare_direct`, and a level's
    value does not depend on what is asked with it (matrix products and solves
    matrix by matrix, sums over axes of fixed length).
    """


class _WanderingProblem:
    """What the :class:`WanderingWeights` of n designs sharing a pattern and a band are built from.

    ``groups``: per pilot-set shape, ``a`` (n, u) and ``delta`` (n, u, u) (R_S's eigenvalues and Delta in
    its eigenbasis), ``sigma`` and ``diff`` (n, T, u) (the targets' scattered correlations and the line of
    sight's excess over them, in that basis) and each target's data-offset index (T,); the band's part
    (:meth:`Band.los_frame`): gamma, eta (J,), g_hat (O, J, J), b (O, J), g_ll (O,).
    """

    def __init__(self, groups, gamma, eta, g_hat, b, g_ll, total):
        self.groups, self.gamma, self.eta, self.g_hat, self.b, self.g_ll = groups, gamma, eta, g_hat, b, g_ll
        self.total = total

    def explained(self, rows, s2):
        """Explained energy of design ``rows[i]`` at noise ``s2[i]`` (pairs): (p,)."""
        eta2 = np.abs(self.eta) ** 2
        alpha = np.diagonal(self.g_hat, axis1=-2, axis2=-1).real  # (O, J)
        out = np.zeros(s2.shape)
        for a, delta, sigma, diff, index in self.groups:
            a, delta, sigma, diff = a[rows], delta[rows], sigma[rows], diff[rows]
            # a noiseless pilot (s2 = 0) as the limit s2 -> 0+ (the error is continuous there)
            level = np.maximum(s2, 1e-12 * np.maximum(a.max(axis=-1) * self.gamma.max(), 1e-300))
            kappa = 1.0 / (a[:, :, None] * self.gamma + level[:, None, None])  # (p, u, J)
            z = kappa @ eta2  # (p, u)
            w = kappa * np.conj(self.eta)  # (p, u, J)
            wgw = ((w[:, None] @ self.g_hat) @ np.conj(np.swapaxes(w, -1, -2))[:, None])[:, index]  # (p, T, u, u)
            wb = np.swapaxes(w @ self.b.T, 1, 2)[:, index]  # (p, T, u)
            ka = np.swapaxes(kappa @ alpha.T, 1, 2)[:, index]  # (p, T, u)
            g_ll = self.g_ll[index][None, :, None]  # (1, T, 1)
            d = diff * z[:, None, :]
            c = sigma * wb
            first = np.sum(np.abs(sigma) ** 2 * ka + 2 * (sigma * np.conj(diff) * wb).real
                           + np.abs(diff) ** 2 * z[:, None, :] * g_ll, axis=-1)  # (p, T)
            f = (sigma[..., :, None] * np.conj(sigma)[..., None, :] * wgw
                 + c[..., :, None] * np.conj(d)[..., None, :] + d[..., :, None] * np.conj(c)[..., None, :]
                 + g_ll[..., None] * d[..., :, None] * np.conj(d)[..., None, :])
            core = np.eye(a.shape[1]) + z[:, :, None] * delta  # (p, u, u): I + diag(z) Delta'
            solved = np.linalg.solve(core[:, None], f)  # (p, T, u, u)
            second = np.trace(delta[:, None] @ solved, axis1=-2, axis2=-1).real
            out += np.sum(first - second, axis=1)
        return out


def _wandering_weights(schedule, band, symbol_s, doppler, spectrum, los_fraction, offset, oscillator):
    """:class:`WanderingWeights` of n designs sharing a single-comb pattern and a band with a line of sight."""
    d_f, used, n = schedule.freq_spacing, band.used, symbol_s.size
    total = float(sum(data_count(used, d_f, t) for t in schedule.targets))
    data_offsets = sorted({t.data_offset for t in schedule.targets})
    gamma, eta, g_hat, b, g_ll = band.los_frame(d_f, offset, tuple(data_offsets))
    table, reach = _lag_table(np.array([SCATTERED, LINE_OF_SIGHT]), schedule.targets, symbol_s, doppler, spectrum,
                              los_fraction, oscillator)  # (n, 4 reach + 1, 2)
    per_group = []
    for shape, group in _by_shape(schedule.targets).items():
        shape = np.asarray(shape)
        pair = table[:, (shape[:, None] - shape[None, :]) + 2 * reach]  # (n, u, u, 2)
        pair = 0.5 * (pair + np.conj(np.swapaxes(pair, 1, 2)))
        a, q = hermitian_eigen(pair[..., 0])  # (n, u), (n, u, u)
        a = np.where(a > 1e-12 * np.maximum(a.max(axis=-1, keepdims=True), 1e-300), a, 0.0)
        delta = np.conj(np.swapaxes(q, -1, -2)) @ (pair[..., 1] - pair[..., 0]) @ q
        lags = np.array([t.pilot_lags for t in group])  # (T, u)
        cross = table[:, lags + 2 * reach]  # (n, T, u, 2)
        sigma = np.einsum("nij,nti->ntj", np.conj(q), cross[..., 0])
        diff = np.einsum("nij,nti->ntj", np.conj(q), cross[..., 1] - cross[..., 0])
        index = np.array([data_offsets.index(t.data_offset) for t in group])
        per_group.append((a, 0.5 * (delta + np.conj(np.swapaxes(delta, -1, -2))), sigma, diff, index))
    problem = _WanderingProblem(tuple(per_group), gamma, eta, g_hat, b, g_ll, total)
    return [WanderingWeights(problem, i) for i in range(n)]


def _linear_weights(schedule, band, symbol_s, max_doppler_hz, spectrum, los_fraction, oscillator=None):
    """Error of least squares + linear interpolation (frequency, then time), split into bias and noise gain."""
    comps, dropped, spacing_hz, used = band.components, band.dropped, band.spacing_hz, band.used
    d_f = schedule.freq_spacing
    k_all = np.arange(used)
    response = np.exp(-2j * np.pi * spacing_hz * k_all[:, None] * comps.delays_s[None, :]) @ comps.basis  # (N_u, C)
    interpolated = {}

    def frequency_interpolation(offset):
        """(interpolated responses (N_u, C), noise gain per subcarrier (N_u,)) from the comb at ``offset``."""
        if offset not in interpolated:
            pilots = np.arange(offset, used, d_f)
            position = np.clip((k_all - offset) / d_f, 0.0, pilots.size - 1.0)
            low = np.minimum(np.floor(position).astype(int), pilots.size - 1)
            high = np.minimum(low + 1, pilots.size - 1)
            frac = position - low
            values = (1 - frac)[:, None] * response[pilots[low]] + frac[:, None] * response[pilots[high]]
            noise = (1 - frac) ** 2 + frac**2  # frac is 0 where the nearest pilot is held
            interpolated[offset] = (values, noise)
        return interpolated[offset]

    bias_sum, gain_sum, total = 0.0, 0.0, 0.0
    for target in schedule.targets:
        data = np.ones(used, dtype=bool)
        if target.data_offset >= 0:
            data[target.data_offset::d_f] = False
        total += data.sum()
        lags = np.asarray(target.pilot_lags)
        if lags.size == 0:
            bias_sum += data.sum()
            continue
        before = np.flatnonzero(lags <= 0)
        after = np.flatnonzero(lags > 0)
        picks = []
        if before.size:
            picks.append(int(before[-1]))
        if after.size and (not before.size or lags[before[-1]] < 0):
            picks.append(int(after[0]))
        if len(picks) == 2:
            a, b = lags[picks[0]], lags[picks[1]]
            alphas = [b / (b - a), -a / (b - a)]  # linear in time between the two
        else:
            alphas = [1.0]
        times = np.array([lags[i] for i in picks], dtype=float)
        values = [frequency_interpolation(target.pilot_offsets[i]) for i in picks]
        # symbols counted at the same time with the same comb (a training block) are averaged: less noise
        repeats = [sum(1 for l, o in zip(target.pilot_lags, target.pilot_offsets)
                       if l == lags[i] and o == target.pilot_offsets[i]) for i in picks]
        values = [(v, gain / r) for (v, gain), r in zip(values, repeats)]
        rho0 = time_correlation(comps.kind, times * symbol_s, max_doppler_hz, spectrum, los_fraction,
                                oscillator)  # (n, C)
        rho = time_correlation(comps.kind, (times[:, None] - times[None, :]) * symbol_s, max_doppler_hz, spectrum,
                               los_fraction, oscillator)  # (n, n, C)
        err = np.sum(np.abs(response) ** 2, axis=1)
        for s, (v_s, _) in enumerate(values):
            err -= 2.0 * alphas[s] * np.real(np.sum(response.conj() * v_s * rho0[s][None, :], axis=1))
            for t, (v_t, _) in enumerate(values):
                err += alphas[s] * alphas[t] * np.real(np.sum(v_s * v_t.conj() * rho[s, t][None, :], axis=1))
        noise = sum(alphas[s] ** 2 * values[s][1] for s in range(len(picks)))
        bias_sum += float(np.sum(err[data]))
        gain_sum += float(np.sum(noise[data]))
    if total <= 0:
        return SpectralWeights("linear", np.zeros(0), np.zeros(0), 0.0)
    return SpectralWeights("linear", np.zeros(0), np.zeros(0), float(total), bias=bias_sum / total + dropped,
                           gain=gain_sum / total)
