"""The channel environment: from requirement bounds to what the design rules use.

``derive_environment`` turns the ``[environment]`` table (carrier, speed,
delay bounds or a profile) into an :class:`Environment`: wavelength, maximum
Doppler, Doppler spread, coherence time, the power-delay profile's taps and
statistics, and the coherence bandwidth, all in SI. Each quantity also gets a
:class:`Derivation` row (formula and source) for the reports.

When only delay bounds are given, a tapped profile is still needed for the
echo-beyond-guard term, so one is assumed and the assumption is stated:

* ``rms_delay_spread`` only: an exponential profile with that rms spread,
  truncated at ``rules.delay_threshold`` below the first tap;
* ``max_excess_delay`` only: two equal-power rays at 0 and the max excess
  delay, the worst case for a given span (two transmitters of a
  single-frequency network);
* both: a profile that spans exactly [0, max excess delay] with the given rms
  spread: an exponential decay fitted to the rms spread while that is
  possible (rms up to span/sqrt(12), where the decay becomes flat), beyond
  that a flat bed plus two equal rays at the ends (up to span/2, the largest
  rms any profile of that span can have).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from . import delay, doppler
from .errors import InputError
from .grouping import remembered
from .requirements import Requirements

#: Fractional bandwidth above which Doppler is a time scaling across the band
#: (common practice: a few per cent; wideband acoustic modems exceed it).
WIDEBAND_FRACTION = 0.02


@dataclass(frozen=True)
class Derivation:
    """One derived quantity, as shown by ``numerology env``."""

    key: str  # JSON key, with its unit suffix
    label: str
    value: float
    unit: str  # SI unit for display ("Hz", "s", "m", "m/s", "")
    formula: str
    source: str


@dataclass(frozen=True)
class Environment:
    """The deployment's worst channel, in SI.

    Attributes are the quantities the rules use; ``delays_s``/``powers`` are
    the taps of the power-delay profile (linear powers summing to 1).
    """

    carrier_hz: float
    propagation_speed_mps: float
    wavelength_m: float
    speed_mps: float
    max_doppler_hz: float
    doppler_spectrum: str
    k_factor: float
    doppler_centroid_hz: float
    doppler_spread_hz: float
    coherence_correlation: float
    coherence_time_s: float
    delays_s: tuple
    powers: tuple
    profile_name: str
    profile_source: str
    mean_excess_delay_s: float
    rms_delay_spread_s: float
    max_excess_delay_s: float
    coherence_bandwidth_hz: float
    notes: tuple = ()
    los_fraction: float = 0.0  # line-of-sight share of the channel power, at the first arrival

    @property
    def taps(self) -> tuple[np.ndarray, np.ndarray]:
        return np.asarray(self.delays_s), np.asarray(self.powers)

    def to_json(self) -> dict:
        """SI values under unit-suffixed keys."""
        return {
            "carrier_hz": self.carrier_hz,
            "propagation_speed_mps": self.propagation_speed_mps,
            "wavelength_m": self.wavelength_m,
            "speed_mps": self.speed_mps,
            "doppler_hz": self.max_doppler_hz,
            "doppler_spectrum": self.doppler_spectrum,
            "k_factor_db": _db(self.k_factor),
            "line_of_sight_fraction": self.los_fraction,
            "doppler_centroid_hz": self.doppler_centroid_hz,
            "doppler_spread_hz": self.doppler_spread_hz,
            "coherence_correlation": self.coherence_correlation,
            "coherence_time_s": _finite(self.coherence_time_s),
            "coherence_time_definition": doppler.COHERENCE_DEFINITION,
            "profile": {
                "name": self.profile_name,
                "source": self.profile_source,
                "delays_s": list(self.delays_s),
                "powers_db": [_db(p) for p in self.powers],
            },
            "mean_excess_delay_s": self.mean_excess_delay_s,
            "rms_delay_spread_s": self.rms_delay_spread_s,
            "max_excess_delay_s": self.max_excess_delay_s,
            "coherence_bandwidth_hz": _finite(self.coherence_bandwidth_hz),
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class EnvironmentBatch:
    """Many environments at once (the sites of a sweep, the points of a map).

    The attributes are those of :class:`Environment`. Those that differ from
    site to site are numpy arrays of one common :attr:`shape` (``(n_sites,)``
    for a sweep); ``delays_s`` and ``powers`` hold the taps on an extra last
    axis, ``shape + (n_taps,)``, padded with zero-power taps where a site has
    fewer. ``propagation_speed_mps``, ``doppler_spectrum``, ``k_factor`` and
    ``coherence_correlation`` are shared by all sites. ``notes`` holds
    ``(text, mask)`` pairs, ``mask`` a boolean array of :attr:`shape` saying
    which sites the note applies to, in the order ``derive_environment``
    gives them. ``link.evaluate`` accepts a batch in place of an
    :class:`Environment` and broadcasts the designs against :attr:`shape`
    (designs shaped ``(m, 1)`` against sites ``(n,)`` give ``(m, n)``).
    ``numerology.sweep.site_environments`` builds one from a requirement set.
    """

    carrier_hz: np.ndarray
    propagation_speed_mps: float
    wavelength_m: np.ndarray
    speed_mps: np.ndarray
    max_doppler_hz: np.ndarray
    doppler_spectrum: str
    k_factor: float
    doppler_centroid_hz: np.ndarray
    doppler_spread_hz: np.ndarray
    coherence_correlation: float
    coherence_time_s: np.ndarray
    delays_s: np.ndarray
    powers: np.ndarray
    profile_name: np.ndarray  # object array: the profile's name (without the per-site scaling)
    profile_source: np.ndarray  # object array
    mean_excess_delay_s: np.ndarray
    rms_delay_spread_s: np.ndarray
    max_excess_delay_s: np.ndarray
    coherence_bandwidth_hz: np.ndarray
    notes: tuple = ()
    los_fraction: np.ndarray | float = 0.0
    #: The profile shape each site stretches (an index; -1: not known) and its factor: the taps are the
    #: shape's delays times the factor (``numerology.sweep.site_environments``). Sites of one shape form a
    #: family whose estimation error a sweep may tabulate over the factor (``numerology.error_table``).
    shape_id: np.ndarray | int = -1
    delay_scale: np.ndarray | float = 1.0

    #: Attributes that hold one value per site (the taps add their own last axis).
    PER_SITE = ("carrier_hz", "wavelength_m", "speed_mps", "max_doppler_hz", "doppler_centroid_hz",
                "doppler_spread_hz", "coherence_time_s", "profile_name", "profile_source", "mean_excess_delay_s",
                "rms_delay_spread_s", "max_excess_delay_s", "coherence_bandwidth_hz", "los_fraction", "k_factor")
    #: Per-site attributes of the batch alone (an :class:`Environment` has no family).
    FAMILY = ("shape_id", "delay_scale")

    @property
    def shape(self) -> tuple[int, ...]:
        return np.shape(self.max_doppler_hz)

    @property
    def taps(self) -> tuple[np.ndarray, np.ndarray]:
        return self.delays_s, self.powers

    def reshape(self, shape) -> "EnvironmentBatch":
        """The same sites arranged in another shape (to broadcast against a grid of designs)."""
        import dataclasses

        shape = (shape,) if isinstance(shape, int) else tuple(shape)
        values = {key: np.reshape(np.broadcast_to(getattr(self, key), self.shape), shape)
                  for key in self.PER_SITE + self.FAMILY}
        taps = self.delays_s.shape[-1]
        values["delays_s"] = self.delays_s.reshape(shape + (taps,))
        values["powers"] = self.powers.reshape(shape + (taps,))
        values["notes"] = tuple((text, np.reshape(mask, shape)) for text, mask in self.notes)
        return dataclasses.replace(self, **values)

    def take(self, index) -> "EnvironmentBatch":
        """The sites at ``index`` (an integer array: a subset, a reordering or repeats) as a batch of their own."""
        import dataclasses

        index = np.asarray(index, dtype=np.intp)
        values = {key: np.asarray(getattr(self, key))[index] for key in self.PER_SITE}
        values.update({key: np.broadcast_to(getattr(self, key), self.shape)[index] for key in self.FAMILY})
        values["delays_s"] = self.delays_s[index]
        values["powers"] = self.powers[index]
        values["notes"] = tuple((text, np.asarray(mask)[index]) for text, mask in self.notes)
        return dataclasses.replace(self, **values)

    def notes_at(self, index) -> tuple:
        """The notes that apply to the site at ``index``."""
        return tuple(text for text, mask in self.notes if mask[index])

    def at(self, index) -> Environment:
        """The site at ``index`` as an :class:`Environment` (zero-power padding taps dropped)."""
        keep = self.powers[index] > 0
        values = {key: np.broadcast_to(getattr(self, key), self.shape)[index] for key in self.PER_SITE}
        values = {key: (value if isinstance(value, str) else float(value)) for key, value in values.items()}
        return Environment(
            propagation_speed_mps=self.propagation_speed_mps, doppler_spectrum=self.doppler_spectrum,
            coherence_correlation=self.coherence_correlation,
            delays_s=tuple(float(d) for d in self.delays_s[index][keep]),
            powers=tuple(float(p) for p in self.powers[index][keep]), notes=self.notes_at(index), **values)


def _db(x: float):
    return None if x <= 0 else 10 * math.log10(x)


def _finite(x: float):
    """JSON has no infinity: an unbounded value is written as null."""
    return None if math.isinf(x) else x


def derive_environment(req: Requirements, *, speed_mps: float | None = None,
                       max_excess_delay_s: float | None = None) -> Environment:
    """Derive the channel environment from a requirement set.

    Parameters
    ----------
    req : Requirements
        A loaded requirement file.
    speed_mps : float, optional
        Override of ``environment.max_speed`` in m/s (what-if).
    max_excess_delay_s : float, optional
        Override of the max excess delay in s (what-if): see
        :func:`what_if_requirements`, which says how the profile follows.

    Returns
    -------
    Environment
        With what-ifs, the environment of ``what_if_requirements(req, ...)``
        (its max excess delay the what-if's value exactly).
    """
    if speed_mps is not None or max_excess_delay_s is not None:
        analysed = what_if_requirements(req, speed_mps=speed_mps, max_excess_delay_s=max_excess_delay_s)
        found = _derive(analysed, max_excess_delay_s)
        if max_excess_delay_s is not None:
            found = dataclasses.replace(found, profile_name=f"{found.profile_name}, stretched to "
                                                            f"{max_excess_delay_s * 1e6:.4g} us (what-if)")
        return found
    return _derive(req, None)


def what_if_requirements(req: Requirements, *, speed_mps: float | None = None,
                         max_excess_delay_s: float | None = None) -> Requirements:
    """The requirement set a what-if analyses: the file's, with the what-if's values in their place.

    ``speed_mps`` becomes ``environment.max_speed`` (a given ``max_doppler``
    is dropped). ``max_excess_delay_s`` becomes the channel's max excess
    delay: a profile (catalogue or file) is stretched as a whole, its
    ``rms_delay_spread`` scaled so that the max excess delay of its taps (at
    ``rules.delay_threshold``) is the what-if's (every delay scales with the
    rms spread, 3GPP TR 38.901 sect. 7.7.3); given bounds are replaced, the
    rms spread in proportion to the max excess delay; a channel without spread
    (one path) becomes two equal rays that far apart. The plot and the stretch
    limits of a what-if read this requirement set, so they show what ``check``
    analysed.
    """
    if speed_mps is not None:
        req = req.replace("environment.max_speed", float(speed_mps)).replace("environment.max_doppler", None)
    if max_excess_delay_s is None:
        return req
    env = req.environment
    target = float(max_excess_delay_s)
    if env.profile is not None or env.profile_file is not None or env.max_excess_delay_s is None:
        current = _derive(req, None).max_excess_delay_s  # of the (given or assumed) taps
    else:
        current = env.max_excess_delay_s  # stated: the what-if replaces it
    if not current > 0:  # one path: two equal rays, the what-if apart
        for key in ("environment.profile", "environment.profile_file", "environment.rms_delay_spread"):
            req = req.replace(key, None)
        return req.replace("environment.max_excess_delay", target)
    factor = target / current
    if env.profile is not None or env.profile_file is not None:
        rms = env.rms_delay_spread_s
        if rms is None:  # the profile's own rms spread, the value Profile.scaled stretches from
            from . import profiles

            profile = (profiles.get_profile(env.profile) if env.profile is not None
                       else req.attached(env.profile_file, profiles.load_profile_csv))
            rms = profile.rms_delay_spread_s
        return req.replace("environment.rms_delay_spread", rms * factor)
    if env.max_excess_delay_s is not None:
        req = req.replace("environment.max_excess_delay", target)
    if env.rms_delay_spread_s is not None:
        req = req.replace("environment.rms_delay_spread", env.rms_delay_spread_s * factor)
    return req


def _derive(req: Requirements, stated_span: float | None) -> Environment:
    env, rules, radio = req.environment, req.rules, req.radio
    notes = []
    c = env.propagation_speed_mps
    if c < 1e7 and env.carrier_hz > 1e7:
        notes.append("propagation speed is acoustic but the carrier is a radio frequency: check both")
    if c > 1e7 and env.carrier_hz < 1e6 and env.max_speed_mps is not None:
        notes.append("carrier below 1 MHz with radio propagation speed: for acoustics set propagation_speed")
    fractional_bw = radio.bandwidth_hz / env.carrier_hz
    doppler_carrier_hz = env.carrier_hz
    if fractional_bw > WIDEBAND_FRACTION:
        # Doppler scales time: the highest frequency of the band sees the most.
        doppler_carrier_hz = env.carrier_hz + radio.bandwidth_hz / 2
        notes.append(f"wideband ({100 * fractional_bw:.0f} % of the carrier): Doppler is a time scaling; "
                     "evaluated at the upper band edge, and the receiver must resample")
    wavelength = float(doppler.wavelength_m(env.carrier_hz, c))
    speed_mps = env.max_speed_mps
    if speed_mps is not None:
        f_d = float(doppler.max_doppler_hz(speed_mps, doppler_carrier_hz, c))
    else:
        f_d = env.max_doppler_hz
        speed_mps = f_d * c / doppler_carrier_hz
    spectrum = env.doppler_spectrum
    rho = rules.coherence_correlation

    delays, powers, name, source, more, los_tap_k_db = _taps(req)
    notes.extend(more)
    delays = np.asarray(delays, dtype=float)
    powers = np.asarray(powers, dtype=float) / np.sum(powers)
    powers, los, name, more = line_of_sight(delays, powers, name, spectrum, env.k_factor_db, los_tap_k_db)
    notes.extend(more)
    k_factor = los / (1.0 - los)
    # A max excess delay the user states (or asks for) is used as given, not re-derived from assumed taps.
    stated_span = stated_span if stated_span is not None else env.max_excess_delay_s
    return Environment(
        carrier_hz=env.carrier_hz,
        propagation_speed_mps=c,
        wavelength_m=wavelength,
        speed_mps=float(speed_mps),
        max_doppler_hz=float(f_d),
        doppler_spectrum=spectrum,
        k_factor=k_factor,
        doppler_centroid_hz=float(doppler.doppler_centroid_hz(f_d, spectrum, k_factor)),
        doppler_spread_hz=float(doppler.doppler_spread_hz(f_d, spectrum, k_factor)),
        coherence_correlation=rho,
        coherence_time_s=float(doppler.coherence_time_s(f_d, spectrum, k_factor, rho)),
        delays_s=tuple(float(d) for d in delays),
        powers=tuple(float(p) for p in powers),
        profile_name=name,
        profile_source=source,
        mean_excess_delay_s=float(delay.mean_excess_delay_s(delays, powers)),
        rms_delay_spread_s=float(delay.rms_delay_spread_s(delays, powers)),
        max_excess_delay_s=float(stated_span if stated_span is not None
                                 else delay.max_excess_delay_s(delays, powers, rules.delay_threshold_db)),
        coherence_bandwidth_hz=float(delay.coherence_bandwidth_hz(delays, powers, rho)),
        notes=tuple(notes),
        los_fraction=float(los),
    )


def line_of_sight(delays, powers, name, spectrum, k_factor_db, los_tap_k_db):
    """Place the line of sight: (total tap powers, its share of the power, profile name, notes).

    K is the whole channel's: line-of-sight power over *all* scattered power.
    A profile whose first tap carries a line of sight (TR 38.901 TDL-D/E:
    ``los_tap_k_db`` is that tap's own K) gives K from its table; a given
    ``k_factor`` then rescales that line of sight. Any other profile is the
    scattered part, and a line of sight of share K/(K+1) is added at its first
    arrival. The classical and flat spectra have no line of sight.
    """
    tap_k = np.nan if los_tap_k_db is None else los_tap_k_db
    powers, los = line_of_sight_rows(np.asarray(delays, float)[None], np.asarray(powers, float)[None], spectrum,
                                     k_factor_db, np.array([tap_k]))
    powers, los = powers[0], float(los[0])
    if los <= 0:
        return powers, 0.0, name, []
    k_db = 10 * math.log10(los / (1 - los))
    if los_tap_k_db is not None and k_factor_db is None:
        note = (f"line of sight from the profile's first tap (K = {los_tap_k_db:g} dB on that tap): "
                f"K = {k_db:.3g} dB over all scattered power")
        return powers, los, name, [note]
    note = (f"line of sight at the first arrival with K = {k_db:.3g} dB over all scattered power "
            f"({100 * los:.3g} % of the power); the profile's taps are the scattered part")
    return powers, los, f"{name} + line of sight (K = {k_db:.3g} dB)", [note]


def line_of_sight_rows(delays, powers, spectrum, k_factor_db, los_tap_k_db):
    """:func:`line_of_sight` for many profiles: rows of taps (zero-power padding allowed), vectorised.

    ``los_tap_k_db`` holds, per row, the K of a line-of-sight first tap in the
    profile's own table, or NaN. Returns (total tap powers, line-of-sight share).
    """
    powers = np.array(powers, dtype=float)
    powers /= powers.sum(axis=-1, keepdims=True)
    rows = np.arange(powers.shape[0])
    if spectrum not in ("rician", "tracked"):
        return powers, np.zeros(rows.size)
    first = np.argmin(np.where(powers > 0, delays, np.inf), axis=-1)
    k1 = 10 ** (np.nan_to_num(np.asarray(los_tap_k_db, float), nan=-np.inf) / 10)
    table_los = powers[rows, first] * k1 / (k1 + 1)  # 0 where the profile has no line-of-sight tap
    if k_factor_db is None:
        return powers, table_los
    powers[rows, first] -= table_los  # the scattered part
    k = 10 ** (k_factor_db / 10)
    los = k / (k + 1)
    powers *= (1 - los) / powers.sum(axis=-1, keepdims=True)
    powers[rows, first] += los
    return powers, np.full(rows.size, los)


def _two_ray(max_excess_delay_s, rms_s):
    delays, powers = delay.two_ray_profile(max_excess_delay_s, rms_s)
    return np.asarray(delays, float), np.asarray(powers, float)


def _taps(req: Requirements):
    """The profile's taps, its name and source, and notes on any assumption."""
    from . import profiles

    env, rules = req.environment, req.rules
    where = req.path
    rms = env.rms_delay_spread_s
    if env.profile is not None or env.profile_file is not None:
        if env.profile is not None:
            profile = profiles.get_profile(env.profile)
        else:
            profile = req.attached(env.profile_file, profiles.load_profile_csv)  # read once, when req was loaded
        if profile.normalised and rms is None:
            raise InputError(f"{where}: environment.rms_delay_spread",
                             f"missing; profile {profile.name} is normalised and needs a wanted rms delay spread such as \"300 ns\"")
        notes = []
        if rms is not None:
            if rms == 0:
                raise InputError(f"{where}: environment.rms_delay_spread", "must be above 0 s to scale a profile")
            try:
                profile = profile.scaled(rms)
            except ValueError as exc:  # e.g. a single tap has no spread to scale
                raise InputError(f"{where}: environment.rms_delay_spread", f"cannot scale {profile.name}: {exc}") from None
        if profile.los_k_factor_db is not None and req.environment.doppler_spectrum in ("classical", "flat"):
            notes.append(f"{profile.name} has a line-of-sight first tap (K = {profile.los_k_factor_db:g} dB); "
                         "set doppler_spectrum = \"rician\" or \"tracked\" to model it")
        return profile.delays_s, profile.powers, profile.name, profile.source, notes, profile.los_k_factor_db
    tau_max = env.max_excess_delay_s
    if tau_max is None:
        if rms == 0:
            return (0.0,), (1.0,), "single path (no delay spread)", "given", [], None
        d, p = delay.exponential_profile(rms, floor_db=rules.delay_threshold_db)
        return d, p, f"exponential, rms {rms * 1e9:.4g} ns", "assumed from rms_delay_spread", [
            f"no profile given: an exponential profile with the given rms spread is assumed, "
            f"truncated {rules.delay_threshold_db:g} dB below the first tap"], None
    if tau_max == 0:
        return (0.0,), (1.0,), "single path (no delay spread)", "given", [], None
    if rms is None:
        d, p = _two_ray(tau_max, None)
        return d, p, "two equal rays", "assumed from max_excess_delay", [
            "no profile given: two equal-power rays at 0 and the max excess delay are assumed "
            "(the worst case for a given span)"], None
    d, p, shape = bounded_profile(tau_max, rms)
    return d, p, shape, "assumed from max_excess_delay and rms_delay_spread", [
        f"no profile given: {shape} assumed, spanning the max excess delay with the given rms spread"], None


#: Taps used to sample an assumed continuous profile.
ASSUMED_TAPS = 64


def bounded_profile(max_excess_delay_s: float, rms_delay_spread_s: float):
    """Taps spanning exactly [0, max excess delay] with a given rms delay spread.

    Parameters
    ----------
    max_excess_delay_s : float
        Span of the profile, in s.
    rms_delay_spread_s : float
        Wanted rms delay spread, in s; above 0 and at most half the span.

    Returns
    -------
    delays_s, powers, description
        ``ASSUMED_TAPS`` taps; linear powers summing to 1.

    Notes
    -----
    The shape depends on the ratio rms / span only: see :func:`bounded_shapes`.
    """
    def shapes(ratios):
        unit, powers, flat = bounded_shapes(np.array(ratios))
        return [(unit, p, bool(f)) for p, f in zip(powers, flat)]

    # the bisection per ratio, once within a process (a diagnosis derives dozens of copies)
    [(unit, powers, flat)] = remembered(_SHAPES, [float(rms_delay_spread_s / max_excess_delay_s)], shapes, 4096)
    description = "a flat profile with two equal rays at its ends" if flat else "an exponential profile"
    return unit * max_excess_delay_s, powers.copy(), description


#: rms / span ratio -> (unit delays, powers, flat) of :func:`bounded_shapes`, kept within a process.
_SHAPES: dict = {}


def bounded_shapes(ratio):
    """Profiles on a unit span [0, 1] with given rms spreads (rms / span ratios, vectorised).

    Parameters
    ----------
    ratio : ndarray (m,)
        Wanted rms delay spread over span, in (0, 1/2].

    Returns
    -------
    unit : ndarray (ASSUMED_TAPS,)
        Tap delays, evenly spaced over [0, 1].
    powers : ndarray (m, ASSUMED_TAPS)
        Linear powers summing to 1.
    flat : ndarray of bool (m,)
        True where the shape is the flat kind (see Notes).

    Notes
    -----
    Up to 1/sqrt(12) (about; the sampled flat profile's rms) the profile is an
    exponential decay exp(-a u) whose rate a is found by bisection on log(a)
    over [-30, 12] (60 halvings: to the last bit); above it, a flat bed plus
    two equal rays at 0 and 1, mixed so that the variance matches (two equal
    rays alone have rms 1/2).
    """
    ratio = np.asarray(ratio, dtype=float)
    unit = np.linspace(0.0, 1.0, ASSUMED_TAPS)
    flat_rms = float(delay.rms_delay_spread_s(unit, np.ones_like(unit)))
    exponential = ratio < flat_rms
    lo = np.full(ratio.size, -30.0)
    hi = np.full(ratio.size, 12.0)
    for _ in range(60):  # the rms falls as the rate grows
        mid = 0.5 * (lo + hi)
        p = np.exp(-np.exp(mid)[:, None] * unit)
        p /= p.sum(axis=-1, keepdims=True)
        too_wide = delay.rms_of_normalised(unit, p) > ratio
        lo = np.where(too_wide, mid, lo)
        hi = np.where(too_wide, hi, mid)
    decay = np.exp(-np.exp(0.5 * (lo + hi))[:, None] * unit)
    # variance of the mix: w / 4 (two rays) + (1 - w) flat_rms^2, both centred on 1/2
    w = (ratio**2 - flat_rms**2) / (1 / 4 - flat_rms**2)
    bed = np.broadcast_to((1 - w)[:, None] / ASSUMED_TAPS, decay.shape).copy()
    bed[:, 0] += w / 2
    bed[:, -1] += w / 2
    powers = np.where(exponential[:, None], decay, bed)
    return unit, powers / powers.sum(axis=-1, keepdims=True), ~exponential


def derivations(environment: Environment) -> list[Derivation]:
    """The derived quantities with their formulas and sources, for reports."""
    e = environment
    rho = e.coherence_correlation
    rows = [
        Derivation("wavelength_m", "wavelength", e.wavelength_m, "m", "lambda = c_p / f_c", "definition"),
        Derivation("speed_mps", "relative speed", e.speed_mps, "m/s", "given (or f_D lambda)", "requirement"),
        Derivation("doppler_hz", "maximum Doppler", e.max_doppler_hz, "Hz", "f_D = v / lambda",
                   "Rappaport, Wireless Communications 2nd ed., eq. 5.2"),
        Derivation("doppler_spread_hz", "rms Doppler spread", e.doppler_spread_hz, "Hz",
                   f"rms width of the {e.doppler_spectrum} spectrum", _spectrum_source(e.doppler_spectrum)),
        Derivation("coherence_time_s", "coherence time", e.coherence_time_s, "s",
                   f"Re R(T_c) = {rho:g}, R = Doppler autocorrelation: {doppler.COHERENCE_DEFINITION}",
                   _spectrum_source(e.doppler_spectrum)),
        Derivation("mean_excess_delay_s", "mean excess delay", e.mean_excess_delay_s, "s",
                   "sum p_k tau_k / sum p_k", "Rappaport 2nd ed., eq. 5.35"),
        Derivation("rms_delay_spread_s", "rms delay spread", e.rms_delay_spread_s, "s",
                   "sqrt(mean tau^2 - (mean tau)^2)", "Rappaport 2nd ed., eqs. 5.36-5.37"),
        Derivation("max_excess_delay_s", "max excess delay", e.max_excess_delay_s, "s",
                   "last tap within the delay threshold", "ITU-R P.1407"),
        Derivation("coherence_bandwidth_hz", "coherence bandwidth", e.coherence_bandwidth_hz, "Hz",
                   f"|R(B_c)| = {rho:g}, R = sum p_k exp(-j 2 pi df tau_k)", "Jakes 1974; exact root of the PDP's correlation"),
    ]
    return rows


def _spectrum_source(spectrum: str) -> str:
    return {
        "classical": "Clarke 1968 / Jakes 1974: R = J0(2 pi f_D tau)",
        "flat": "uniform spectrum: R = sinc(2 f_D tau)",
        "rician": "line of sight at +f_D plus Clarke diffuse part",
        "tracked": "Rician spectrum with its mean shift removed by the receiver",
    }[spectrum]


def rules_of_thumb(environment: Environment) -> list[tuple[str, str, float]]:
    """The common alternative definitions, shown beside our exact values."""
    rows = []
    if environment.max_doppler_hz > 0:
        for label, value in doppler.coherence_time_rules_of_thumb(environment.max_doppler_hz).items():
            rows.append(("coherence time", label, float(value)))
    if environment.rms_delay_spread_s > 0:
        for label, value in delay.coherence_bandwidth_rules_of_thumb(environment.rms_delay_spread_s).items():
            rows.append(("coherence bandwidth", label, float(value)))
    return rows
