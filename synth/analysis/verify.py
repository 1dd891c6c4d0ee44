"""Independent verification of a record against an ASD profile.

The verifier judges a record only by its samples: it re-estimates the ASD by
Welch's method, measures the amplitude statistics, and compares both with the
target profile and with Gaussian theory.  It never imports the generator or
the non-Gaussian transforms, so it would catch their bugs instead of sharing
them.

Default verdict (widespread random-vibration test-specification practice,
from memory: ASD tolerance +/-3 dB, overall g RMS tolerance +/-10 %): every
criterion below holds.  Judged lines are those inside the target band, except
within two resolution widths of a band edge where the target drops to zero;
those edge lines are judged instead against what a Welch estimate of the target
shows there (the target seen through the Hann window), so a band missing at an
edge still fails.  The criteria, each listed in ``to_dict()["criteria"]`` with
its measured value and limit (unit-suffixed keys) and a ``group`` (the name in
``failed``):

* ``asd`` (lines), ``asd_edges`` (edge lines), ``asd_bands`` (share of the mean
  square per third-octave band) and ``crossing_rate`` (counted mean-level
  up-crossings against the sampled target process; a wrong sample rate shows
  here) -- group ``asd``;
* ``grms`` -- the overall g RMS;
* ``mean`` -- ``|mean|`` at most 5 % of the RMS;
* ``stationarity`` -- the mean square of short windows within chi-square limits
  for their bandwidth-time product (Bendat & Piersol 2010), worst window named;
* ``gaussian_kurtosis``, ``gaussian_tail_3_sigma``, ``gaussian_largest_peak``
  -- group ``gaussian``, when no amplitude target was asked;
* ``kurtosis``, ``skewness``, ``crest_factor`` -- when asked.

The statistical limits are set so that a Gaussian record matching the target
fails each of them with probability at most ``false_alarm_probability``
(0.001, shared among windows or bands by Bonferroni's inequality).

The Welch resolution follows the narrowest feature of the profile (a sixteenth
of the narrowest segment, of the band and an eighth of the lowest frequency)
as far as the record gives the aimed dof; a record too short to resolve a
feature is said so in ``asd.dof_note``, with the duration that would.

Everything in :meth:`Verification.to_dict` is plain JSON data: non-finite
numbers (a line with no power at all reads -inf dB) are written as ``null``.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np
import scipy.signal
from scipy import integrate
from scipy.stats import chi2, norm

from vibsynth.errors import InputError
from vibsynth.analysis.extremes import (
    davenport_expected_largest_peak_sigma,
    davenport_largest_peak_std_sigma,
    largest_peak_from_crossing_rate,
    sampled_crossing_rate_hz,
)
from vibsynth.profile.asd import AsdProfile
from vibsynth.analysis.record_input import check_rate_hz
from vibsynth.analysis.stats import (
    HeldRunAccumulator,
    LevelCrossingAccumulator,
    MomentAccumulator,
    WindowRmsAccumulator,
)
from vibsynth.analysis.welch import (
    DEFAULT_TARGET_DOF,
    WelchAccumulator,
    WelchEstimate,
    _samples_for_dof,
    choose_nperseg,
)


#: The amplitude histogram spans +/- this many standard deviations ...
HISTOGRAM_RANGE_SIGMA = 12
#: A run of identical consecutive samples longer than both of these is a dropout or a held value: at
#: least this many samples ...
HELD_RUN_MIN_SAMPLES = 8
#: ... and longer than this many periods of the profile's lowest frequency.  A 16-bit record holds a
#: value near a slow local peak of frequency f and amplitude A for sqrt(2 q / A) / (2 pi f) s (the
#: parabola through the peak stays within one step q = 2^-15 of full scale): 0.0012 / f at full scale,
#: 0.012 / f at 1 % of it; the limit is 4 times the latter (common practice, no source).
HELD_RUN_PERIODS_OF_LOWEST = 0.05
#: ... with this many bins per standard deviation.
HISTOGRAM_BINS_PER_SIGMA = 8


@dataclass(frozen=True)
class Criteria:
    """What a record must meet to pass.

    Parameters
    ----------
    tolerance_low_db, tolerance_high_db : float
        ASD tolerance band in dB around the target (default -3, +3; common
        test-specification practice, from memory).
    grms_tolerance_percent : float
        Allowed error of the overall g RMS, percent (default 10; common
        practice, from memory).
    min_fraction_within : float
        Fraction of judged lines that must lie inside the band (default 1.0:
        every line).  A value below 1 relaxes the rule; the report says so.
    edge_exclusion_resolutions : float
        Lines within this many resolution widths of a band edge are reported
        but not judged (default 2).
    kurtosis_target, skewness_target, crest_factor_limit : float or None
        Amplitude targets to judge (None: report only).
    kurtosis_tolerance_percent : float
        Allowed kurtosis error, percent of the target (default 5).
    skewness_tolerance : float
        Allowed absolute skewness error (default 0.1).
    crest_factor_tolerance_percent : float
        Allowed excess of the crest factor over its limit, percent (default 1).
    mean_limit_percent : float
        Largest ``|mean|`` allowed, percent of the RMS (default 5; common
        practice, no source: a drive carries no DC, and 5 % is far above what a
        band-limited Gaussian record's mean scatters by).
    crossing_rate_tolerance_percent : float
        Allowed error of the counted mean-level up-crossing rate against the
        sampled-process expectation, percent (default 3; common practice, no
        source), widened to four Poisson standard deviations of the expected
        count on short records.
    false_alarm_probability : float
        Probability that a Gaussian record matching the target fails one
        statistical criterion (stationarity, band shares, Gaussian checks)
        by chance (default 0.001; design choice); shared among windows or
        bands by Bonferroni's inequality.
    stationarity : bool
        Judge the RMS of short successive windows (default True).
    gaussian : bool
        When no amplitude target is given, judge kurtosis, the share beyond
        3 sigma and the largest sample against Gaussian theory (default True).
    burst_s : float or None
        A burst-model drive's envelope time scale, s (from its sidecar): its
        short-window RMS varies by design, so stationarity is judged instead
        by the reverse-arrangements test (a trend test, Bendat & Piersol) on
        the mean squares of windows of at least four burst durations.
    excluded_bands_hz : tuple of (float, float)
        Frequency ranges (Hz) left out of the line-by-line ASD rule, widened
        by the edge margin (tone lines and narrow bands of a mixed-mode
        record; set by :mod:`vibsynth.analysis.tones`).
    tone_tolerance_percent : float
        Allowed error of each tone's amplitude, percent (default 5; common
        practice, no source), widened to 5 standard deviations of the least-squares
        estimate on a short or noisy record.
    """

    tolerance_low_db: float = -3.0
    tolerance_high_db: float = 3.0
    grms_tolerance_percent: float = 10.0
    min_fraction_within: float = 1.0
    edge_exclusion_resolutions: float = 2.0
    kurtosis_target: float | None = None
    kurtosis_tolerance_percent: float = 5.0
    skewness_target: float | None = None
    skewness_tolerance: float = 0.1
    crest_factor_limit: float | None = None
    crest_factor_tolerance_percent: float = 1.0
    mean_limit_percent: float = 5.0
    crossing_rate_tolerance_percent: float = 3.0
    false_alarm_probability: float = 1e-3
    stationarity: bool = True
    gaussian: bool = True
    burst_s: float | None = None
    excluded_bands_hz: tuple = ()
    tone_tolerance_percent: float = 5.0

    def __post_init__(self):
        low, high = self.tolerance_low_db, self.tolerance_high_db
        if not (math.isfinite(low) and math.isfinite(high) and low < 0 < high):
            raise InputError(
                f"ASD tolerance band ({low:g}, {high:+g}) dB must have a negative lower and a positive upper limit",
                location="tolerance_db",
            )
        if not (math.isfinite(self.grms_tolerance_percent) and 0 < self.grms_tolerance_percent < 100):
            raise InputError(
                f"g RMS tolerance {self.grms_tolerance_percent:g} % must be between 0 and 100",
                location="grms_tolerance_percent",
            )
        if not (0 < self.min_fraction_within <= 1):
            raise InputError(
                f"fraction of lines within tolerance {self.min_fraction_within:g} must be in (0, 1]",
                location="min_fraction_within",
            )
        if not (math.isfinite(self.edge_exclusion_resolutions) and self.edge_exclusion_resolutions >= 0):
            raise InputError(
                f"edge exclusion {self.edge_exclusion_resolutions:g} resolution widths must be a finite number >= 0",
                location="edge_exclusion_resolutions",
            )
        for name, value in (
            ("kurtosis_target", self.kurtosis_target),
            ("crest_factor_limit", self.crest_factor_limit),
        ):
            if value is not None and not (math.isfinite(value) and value > 0):
                raise InputError(f"{name} {value:g} must be a finite number > 0", location=name)
        if self.skewness_target is not None and not math.isfinite(self.skewness_target):
            raise InputError(f"skewness_target {self.skewness_target:g} must be a finite number", location="skewness_target")
        for name, value in (
            ("kurtosis_tolerance_percent", self.kurtosis_tolerance_percent),
            ("skewness_tolerance", self.skewness_tolerance),
            ("crest_factor_tolerance_percent", self.crest_factor_tolerance_percent),
            ("mean_limit_percent", self.mean_limit_percent),
            ("crossing_rate_tolerance_percent", self.crossing_rate_tolerance_percent),
        ):
            if not (math.isfinite(value) and value >= 0):
                raise InputError(f"{name} {value:g} must be a finite number >= 0", location=name)

        if not (0.0 < self.false_alarm_probability < 0.5):
            raise InputError(
                f"false_alarm_probability {self.false_alarm_probability:g} must lie between 0 and 0.5",
                location="false_alarm_probability",
            )

    @property
    def amplitude_target(self) -> bool:
        """True when a kurtosis, skewness or crest factor was asked for."""
        return (self.kurtosis_target is not None or self.skewness_target is not None
                or self.crest_factor_limit is not None)

    @property
    def relaxed(self) -> bool:
        """True when the ASD rule lets some judged lines lie outside the band."""
        return self.min_fraction_within < 1

    def rule_text(self) -> dict:
        """The applied rule in words, per criterion."""
        if self.min_fraction_within >= 1:
            asd_rule = (
                f"every judged line within {self.tolerance_low_db:+g}/{self.tolerance_high_db:+g} dB of the target"
            )
        else:
            asd_rule = (
                f"at least {100 * self.min_fraction_within:g} % of judged lines within "
                f"{self.tolerance_low_db:+g}/{self.tolerance_high_db:+g} dB of the target (relaxed)"
            )
        rules = {
            "verdict": (
                "relaxed: pass when the relaxed ASD rule and every other criterion below hold"
                if self.relaxed
                else "default: pass when every criterion below holds"
            ),
            "asd": asd_rule,
            "grms": f"measured g RMS within +/-{self.grms_tolerance_percent:g} % of the target",
            "judged_lines": (
                f"lines inside the target band, except within {self.edge_exclusion_resolutions:g} "
                "resolution widths of a band edge and lines where the Hann window smooths a narrow feature of "
                "the target by more than 0.5 dB (both judged under asd_edges)"
            ),
        }
        alpha = f"{self.false_alarm_probability:g}"
        rules["asd_bands"] = (
            "mean square of each third-octave band (merged to at least 3 lines; the outer bands take in the "
            "edge lines) as a share of the whole band's, against the target's share as a Welch estimate would "
            f"show it: within {self.tolerance_low_db:+g}/{self.tolerance_high_db:+g} dB or the band's chi-square "
            f"limits at {alpha} overall, whichever is wider"
        )
        rules["asd_edges"] = (
            f"lines within {self.edge_exclusion_resolutions:g} resolution widths of a band edge, and lines where "
            "the window smooths a narrow feature of the target by more than 0.5 dB, within "
            f"{self.tolerance_low_db:+g}/{self.tolerance_high_db:+g} dB of what a Welch estimate of the target "
            "shows there (the target seen through the Hann window)"
        )
        rules["mean"] = f"|mean| at most {self.mean_limit_percent:g} % of the RMS"
        if self.stationarity and self.burst_s is not None:
            rules["stationarity"] = (
                f"no trend in the mean squares of windows of at least {BURST_WINDOWS:g} burst durations "
                f"({self.burst_s:.3g} s each): reverse-arrangements test at {alpha} (Bendat & Piersol)"
            )
        elif self.stationarity:
            rules["stationarity"] = (
                "mean square of each short window (at least 100 chi-square dof, Bendat & Piersol) against the "
                f"record's, within the chi-square limits at {alpha} over all windows"
            )
        rules["crossing_rate"] = (
            f"counted mean-level up-crossing rate within +/-{self.crossing_rate_tolerance_percent:g} % (or 4 "
            "Poisson standard deviations) of the rate the sampled Gaussian process has (Sheppard's formula)"
            + ("; reported, not judged, under the relaxed ASD rule (a band allowed to miss moves it)"
               if self.relaxed else "")
        )
        if self.relaxed:
            rules["asd_bands"] += "; bands holding at most the allowed share of lines may fail (relaxed)"
        if self.gaussian and not self.amplitude_target:
            rules["gaussian"] = (
                "no amplitude target: kurtosis within 4.5 standard deviations of 3 (variance 24/n sum rho^4), "
                "share beyond 3 sigma within 4.5 standard deviations of 0.27 %, largest sample within the "
                f"{alpha} limits of the sampled record's largest value"
            )
        if self.kurtosis_target is not None:
            rules["kurtosis"] = f"kurtosis within +/-{self.kurtosis_tolerance_percent:g} % of {self.kurtosis_target:g}"
        if self.skewness_target is not None:
            rules["skewness"] = f"skewness within +/-{self.skewness_tolerance:g} of {self.skewness_target:g}"
        if self.crest_factor_limit is not None:
            rules["crest_factor"] = (
                f"crest factor at most {self.crest_factor_limit:g} (+{self.crest_factor_tolerance_percent:g} %)"
            )
        return rules


@dataclass(frozen=True)
class AsdComparison:
    """Line-by-line comparison of a Welch estimate with the target profile.

    Attributes
    ----------
    frequencies_hz, measured_g2_per_hz, target_g2_per_hz, deviation_db : numpy.ndarray
        Per line: frequency (Hz), estimate and target (g^2/Hz), and
        ``10 log10(measured/target)`` (dB; NaN outside the band).
    judged, edge : numpy.ndarray of bool
        Lines judged against the tolerance; in-band lines only reported
        (near an edge).
    within : numpy.ndarray of bool
        Judged lines inside the tolerance band.
    window_bias : numpy.ndarray of bool
        In-band lines away from the edges where the Hann window visibly
        smooths the target (a notch or a sharp step narrower than a few
        lines: the smoothed target differs from the target by more than
        0.5 dB); like the edge lines, they are judged against the smoothed
        target, not in the line-by-line rule.
    expected_g2_per_hz : numpy.ndarray
        The target seen through the Hann window (what a Welch estimate of a
        record with exactly the target spectrum shows), g^2/Hz; 0 outside
        the band and its edge margin.
    max_deviation_db : float
        Signed deviation of largest magnitude over the judged lines, dB.
    max_deviation_frequency_hz : float
        Where it occurs, Hz.
    fraction_within_tolerance : float
        Share of judged lines inside the band.
    """

    frequencies_hz: np.ndarray
    measured_g2_per_hz: np.ndarray
    target_g2_per_hz: np.ndarray
    deviation_db: np.ndarray
    judged: np.ndarray
    edge: np.ndarray
    within: np.ndarray
    max_deviation_db: float
    max_deviation_frequency_hz: float
    fraction_within_tolerance: float
    window_bias: np.ndarray = None
    expected_g2_per_hz: np.ndarray = None

    @property
    def outside_ranges_hz(self) -> tuple:
        """Runs of adjacent judged lines outside the tolerance, as ``(first_hz, last_hz)`` pairs."""
        bad = np.flatnonzero(self.judged & ~self.within)
        if bad.size == 0:
            return ()
        breaks = np.flatnonzero(np.diff(bad) > 1)
        starts = np.concatenate(([bad[0]], bad[breaks + 1]))
        stops = np.concatenate((bad[breaks], [bad[-1]]))
        f = self.frequencies_hz
        return tuple((float(f[a]), float(f[b])) for a, b in zip(starts, stops))


def _describe_ranges(ranges, most: int = 4) -> str:
    parts = [f"{lo:g} Hz" if lo == hi else f"{lo:g}-{hi:g} Hz" for lo, hi in ranges[:most]]
    if len(ranges) > most:
        parts.append(f"and {len(ranges) - most} more ranges")
    return ", ".join(parts)


def _json_safe(value):
    """Plain JSON data: numpy scalars to Python numbers, non-finite floats to None."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


def compare_asd(estimate: WelchEstimate, profile: AsdProfile, criteria: Criteria = Criteria()) -> AsdComparison:
    """Compare a Welch ASD estimate with a profile, line by line.

    Parameters
    ----------
    estimate : WelchEstimate
        The estimate (g^2/Hz at ``estimate.frequencies_hz``).
    profile : AsdProfile
        The target.
    criteria : Criteria
        Tolerance band and edge exclusion.

    Returns
    -------
    AsdComparison

    Raises
    ------
    InputError
        When no line can be judged (resolution too coarse for the band).

    References
    ----------
    Tolerance-band comparison of a measured ASD with a reference spectrum, as
    in random-vibration test specifications (e.g. IEC 60068-2-64 speaks of
    tolerance bands on the ASD; from memory).
    """
    f = estimate.frequencies_hz
    target = profile.evaluate(f)
    in_band = (f >= profile.frequency_min_hz) & (f <= profile.frequency_max_hz)
    margin = criteria.edge_exclusion_resolutions * estimate.resolution_hz
    near_edge = in_band & ((f < profile.frequency_min_hz + margin) | (f > profile.frequency_max_hz - margin))
    expected = np.zeros(f.size)
    around = (f >= profile.frequency_min_hz - margin) & (f <= profile.frequency_max_hz + margin)
    expected[around] = _expected_welch_estimate(profile, estimate, f[around])
    with np.errstate(divide="ignore", invalid="ignore"):
        bias_db = np.abs(10.0 * np.log10(expected / np.where(in_band, target, 1.0)))
    # Lines near the outer edges follow the edge rule (edge_exclusion_resolutions), even when it is 0.
    inner = (f > profile.frequency_min_hz + 3 * estimate.resolution_hz) & (
        f < profile.frequency_max_hz - 3 * estimate.resolution_hz)
    window_bias = in_band & ~near_edge & inner & (bias_db > 0.5)
    excluded = np.zeros(f.size, dtype=bool)
    for low_hz, high_hz in criteria.excluded_bands_hz:  # tone lines, narrow bands: reported, not judged
        excluded |= (f >= low_hz - margin) & (f <= high_hz + margin)
    near_edge &= ~excluded
    window_bias &= ~excluded
    judged = in_band & ~near_edge & ~window_bias & ~excluded
    if not np.any(judged):  # every line is biased by the window: judge them all line by line instead
        window_bias = np.zeros(f.size, dtype=bool)
        judged = in_band & ~near_edge
    if not np.any(judged):
        raise InputError(
            f"no spectral line can be judged: resolution {estimate.resolution_hz:g} Hz is too coarse for the band "
            f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz; ask for a finer `resolution_hz` or a longer record",
            location="resolution_hz",
        )
    with np.errstate(divide="ignore", invalid="ignore"):
        deviation = np.where(in_band, 10.0 * np.log10(estimate.asd / np.where(in_band, target, 1.0)), np.nan)
    deviation = np.where(in_band & (estimate.asd <= 0), -np.inf, deviation)
    within = judged & (deviation >= criteria.tolerance_low_db) & (deviation <= criteria.tolerance_high_db)
    judged_dev = deviation[judged]
    worst = int(np.argmax(np.abs(judged_dev)))
    return AsdComparison(
        frequencies_hz=f,
        measured_g2_per_hz=estimate.asd,
        target_g2_per_hz=target,
        deviation_db=deviation,
        judged=judged,
        edge=near_edge,
        within=within,
        max_deviation_db=float(judged_dev[worst]),
        max_deviation_frequency_hz=float(f[judged][worst]),
        fraction_within_tolerance=float(np.count_nonzero(within) / np.count_nonzero(judged)),
        window_bias=window_bias,
        expected_g2_per_hz=expected,
    )


@dataclass(frozen=True)
class Verification:
    """Everything the verifier found about one record.

    Attributes
    ----------
    passed : bool
    failed : tuple of str
        Names of the failed criteria (``asd``, ``grms``, ``kurtosis``, ...).
    reasons : tuple of str
        One sentence per failed criterion.
    criteria : Criteria
    profile : AsdProfile
    estimate : WelchEstimate
    comparison : AsdComparison
    segment_message : str
        Non-empty when the default dof target could not be reached.
    statistics : dict
        Amplitude statistics (see :meth:`to_dict`).
    excerpt_t_s, excerpt_g : numpy.ndarray
        A short excerpt of the record around its largest absolute sample (s, g).
    histogram_edges_sigma, histogram_density : numpy.ndarray
        Amplitude density of ``(x - mean)/std``: bin edges (in standard
        deviations) and probability density per bin (1/sigma).
    checks : tuple of dict
        Every criterion: ``name``, ``group``, ``pass``, ``judged`` (False:
        reported only, e.g. the crossing rate under a relaxed ASD rule),
        ``measured_*`` and ``limit_*`` values (unit in the key), ``summary``
        and ``reason`` (one sentence each).
    window_rms_g : tuple of float
        RMS of successive windows (stationarity), g.
    window_s : float
        Their length, s.
    mixed : dict or None
        A mixed-mode record (tones, narrow bands, schedule): what
        :func:`vibsynth.analysis.tones.verify_mixed_record` measured; the
        estimate and ``statistics`` are then those of the random part (the
        tones removed, the schedule divided out).
    """

    passed: bool
    failed: tuple
    reasons: tuple
    criteria: Criteria
    profile: AsdProfile
    estimate: WelchEstimate
    comparison: AsdComparison
    segment_message: str
    statistics: dict
    excerpt_t_s: np.ndarray = field(repr=False)
    excerpt_g: np.ndarray = field(repr=False)
    window_rms_g: tuple = field(repr=False)
    window_s: float = 0.0
    histogram_edges_sigma: np.ndarray = field(default=None, repr=False)
    histogram_density: np.ndarray = field(default=None, repr=False)
    checks: tuple = ()
    mixed: dict | None = None

    @property
    def grms_target(self) -> float:
        """Target g RMS (profile), g."""
        return self.profile.grms

    @property
    def grms_measured(self) -> float:
        """Measured RMS about zero of the judged samples, g."""
        return self.statistics["rms"]

    @property
    def grms_error_percent(self) -> float:
        """``100 (measured/target - 1)``, percent."""
        return 100.0 * (self.grms_measured / self.grms_target - 1.0)

    def to_dict(self) -> dict:
        """The verification as plain data (the ``vibsynth verify --json`` contract).

        Every value is JSON-serialisable with ``allow_nan=False``: non-finite
        numbers (e.g. a worst deviation of -inf dB on a line with no power)
        are written as None.  ``asd.confidence_90_percent_db`` is the 90 %
        chi-square interval of an interior line relative to its estimate, in dB
        (it depends only on the degrees of freedom).
        """
        c = self.comparison
        nu = self.estimate.dof
        # Bendat & Piersol: true/estimate lies in [nu/chi2(0.95, nu), nu/chi2(0.05, nu)] with 90 % probability.
        confidence_db = [
            10.0 * math.log10(nu / chi2.ppf(0.95, nu)),
            10.0 * math.log10(nu / chi2.ppf(0.05, nu)),
        ]
        judged = c.judged
        return _json_safe({
            "pass": bool(self.passed),
            "failed": list(self.failed),
            "reasons": list(self.reasons),
            "rule": self.criteria.rule_text(),
            "profile": self.profile.name,
            "grms_target": self.grms_target,
            "grms_measured": self.grms_measured,
            "grms_error_percent": self.grms_error_percent,
            "grms_tolerance_percent": self.criteria.grms_tolerance_percent,
            "asd": {
                "tolerance_db": [self.criteria.tolerance_low_db, self.criteria.tolerance_high_db],
                "max_deviation_db": c.max_deviation_db,
                "max_deviation_frequency_hz": c.max_deviation_frequency_hz,
                "fraction_within_tolerance": c.fraction_within_tolerance,
                "min_fraction_within": self.criteria.min_fraction_within,
                "outside_ranges_hz": [list(r) for r in c.outside_ranges_hz],
                "lines_judged": int(np.count_nonzero(judged)),
                "lines_within": int(np.count_nonzero(c.within)),
                "lines_near_edge_not_judged": int(np.count_nonzero(c.edge)),
                "dof": self.estimate.dof,
                "segments": self.estimate.segments,
                "resolution_hz": self.estimate.resolution_hz,
                "confidence_90_percent_db": confidence_db,
                "edge_exclusion_resolutions": self.criteria.edge_exclusion_resolutions,
                "dof_note": self.segment_message,
            },
            "statistics": dict(self.statistics),
            "criteria": [{k: v for k, v in check.items() if k not in ("reason", "detail")} for check in self.checks],
            **({"mixed": self.mixed} if self.mixed is not None else {}),
        })


def _as_float_chunk(chunk) -> np.ndarray:
    """A 1-D float array; a single column or row (shape (n, 1) or (1, n)) is accepted, more channels are not."""
    array = np.asarray(chunk)
    if np.iscomplexobj(array):
        raise InputError("samples must be real numbers, got complex values", location="samples")
    array = np.asarray(array, dtype=float)
    if array.ndim == 2 and 1 in array.shape:
        array = array.reshape(-1)
    if array.ndim != 1:
        raise InputError(
            f"the record must be one channel (a 1-D array), got an array of shape {array.shape}; "
            "verify one channel at a time",
            location="samples",
        )
    return array


def _check_skip(value, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or int(value) < 0:
        raise InputError(f"{name} must be a whole number of samples >= 0, got {value!r}", location=name)
    return int(value)


def verify_record(
    chunks,
    rate_hz: float,
    profile: AsdProfile,
    criteria: Criteria = Criteria(),
    n_samples: int | None = None,
    resolution_hz: float | None = None,
    target_dof: float | None = None,
    skip_start_samples: int = 0,
    skip_end_samples: int = 0,
    excerpt_s: float = 0.25,
) -> Verification:
    """Verify a record (in g) against an ASD profile: ASD, g RMS and amplitude statistics.

    Two streaming passes in constant memory: (1) Welch ASD estimate and moment
    statistics, (2) exceedances of k sigma and mean-level up-crossings.

    Parameters
    ----------
    chunks : numpy.ndarray or callable
        The record in g, as a 1-D array, or a callable with no argument that
        returns a fresh iterable of 1-D chunks each time (it is called twice).
    rate_hz : float
        Sample rate, Hz.
    profile : AsdProfile
        Target ASD, g^2/Hz.
    criteria : Criteria
        Tolerances and targets.
    n_samples : int, optional
        Samples in the record (required when ``chunks`` is a callable).
    resolution_hz : float, optional
        Welch line spacing wanted, Hz; by default the finest power-of-two
        segment giving ``target_dof`` (default 120) degrees of freedom.
    target_dof : float, optional
        Degrees of freedom aimed at.
    skip_start_samples, skip_end_samples : int
        Samples at the start and end left out of every measure (ramps).
    excerpt_s : float
        Length of the excerpt kept around the largest sample, s.

    Returns
    -------
    Verification
        Verdict, reasons, the Welch estimate and its line-by-line comparison,
        and ``statistics`` (all over the samples left after the skips):
        ``rms``, ``mean``, ``std``, ``peak``, ``maximum``, ``minimum`` (g);
        ``skewness``, ``kurtosis`` (Pearson), ``crest_factor`` (peak/rms);
        ``samples``, ``duration_s`` (s), ``rate_hz`` (Hz); ``exceedance``
        (fraction of samples with ``|x - mean| > k std`` against the Gaussian
        ``2 (1 - Phi(k))``); ``zero_upcrossing_rate_hz`` (counted mean-level
        up-crossings per s), ``zero_upcrossing_rate_rice_hz`` (Rice's
        ``sqrt(m2/m0)`` of the target, continuous time) and
        ``zero_upcrossing_rate_sampled_theory_hz`` (the same process sampled at
        ``rate_hz``, see :func:`sampled_upcrossing_rate_hz`; this is what the
        count should match); ``largest_peak_sigma`` (largest ``|x - mean|``
        over ``std``) and ``davenport_expected_peak_sigma`` /
        ``davenport_peak_std_sigma`` (Davenport's mean and standard deviation
        of that largest absolute value for a Gaussian record with the target's
        ``nu0`` and this duration, None when ``nu0 T <= 1``).  Since
        ``max |x| > a`` when either ``x`` up-crosses ``a`` or ``-x`` does, and
        both are Poisson streams of rate ``nu0 exp(-a^2/2)`` at high levels,
        the two-sided largest value uses Davenport's formula with ``2 nu0 T``
        crossings instead of ``nu0 T`` (about 0.15 sigma higher for
        ``nu0 T`` of a few thousand).  Davenport's figure is for the continuous
        signal; ``expected_peak_sampled_sigma`` / ``expected_peak_sampled_std_sigma``
        give the largest |x| the *samples* should show at ``rate_hz`` (Poisson
        crossings of the sampled Gaussian sequence, Owen's T): at 2.56 samples
        per cycle of the top frequency it is about 5 % lower, and it is what
        ``largest_peak_sigma`` should be compared with.

    Raises
    ------
    InputError
        Bad rate, skips, samples (non-finite, several channels, constant, too
        few for one Welch segment) or a band the resolution cannot judge.

    Examples
    --------
    >>> import numpy as np
    >>> from vibsynth.profile.asd import AsdProfile
    >>> profile = AsdProfile([20.0, 400.0], [0.01, 0.01], name="invented flat band")
    >>> rate, n = 2048.0, 1 << 16
    >>> f = np.fft.rfftfreq(n, 1 / rate)
    >>> phases = np.random.default_rng(1).uniform(0, 2 * np.pi, f.size)
    >>> x = np.fft.irfft(n * np.sqrt(profile.evaluate(f) * rate / n / 2) * np.exp(1j * phases), n)
    >>> result = verify_record(x, rate, profile)
    >>> result.passed, [c["name"] for c in result.to_dict()["criteria"]][:3]
    (True, ['asd', 'asd_bands', 'asd_edges'])
    >>> verify_record(x + 0.5, rate, profile).failed
    ('mean',)

    References
    ----------
    Welch, P. D. (1967), IEEE Trans. Audio Electroacoust. AU-15, 70-73;
    Bendat & Piersol (2010), chi-square limits; Rice (1944/45), zero
    up-crossing rate; Davenport, A. G. (1964), Proc. ICE 28, 187-196,
    expected largest peak; Lomnicki, Z. A. (1961), Metrika 4, 37-62, variance
    of the sample kurtosis of a linear process; Vanmarcke, E. H. (1975), J.
    Appl. Mech. 42, 215-220, clumping of crossings (envelope).
    """
    if isinstance(rate_hz, bool) or not isinstance(rate_hz, numbers.Real) or not (
        math.isfinite(rate_hz) and rate_hz > 0
    ):
        raise InputError(f"rate {rate_hz!r} Hz must be a finite number > 0", location="rate_hz")
    if callable(chunks):
        source = chunks
        if isinstance(n_samples, bool) or not isinstance(n_samples, numbers.Integral) or int(n_samples) < 1:
            raise InputError(
                f"n_samples (the record's length in samples, >= 1) is required when the record is given as a "
                f"chunk source, got {n_samples!r}",
                location="n_samples",
            )
        total = int(n_samples)
    else:
        array = _as_float_chunk(chunks)
        total = array.size

        def source():
            return (array,)

    skip_start = _check_skip(skip_start_samples, "skip_start_samples")
    skip_end = _check_skip(skip_end_samples, "skip_end_samples")
    mixed = getattr(profile, "mixed", None)
    if mixed is not None and not mixed.empty:  # tones, narrow bands, schedule: separate the parts first
        from vibsynth.analysis.tones import verify_mixed_record

        return verify_mixed_record(verify_record, source, total, rate_hz, profile, criteria, resolution_hz=resolution_hz,
                                   target_dof=target_dof, skip_start_samples=skip_start, skip_end_samples=skip_end,
                                   excerpt_s=excerpt_s)
    steady = total - skip_start - skip_end
    if steady <= 0:
        raise InputError(
            f"the record has {total} samples but its ramps take {skip_start + skip_end}; nothing left to verify",
            location="ramps",
        )
    if profile.frequency_max_hz >= rate_hz / 2:
        raise InputError(
            f"the record's rate {rate_hz:g} Hz cannot hold the profile's top frequency "
            f"{profile.frequency_max_hz:g} Hz (needs a rate above {2 * profile.frequency_max_hz:g} Hz)",
            location="rate_hz",
        )
    # By default the finest resolution considered is an eighth of the lowest band frequency and a
    # sixteenth of the band width and of the narrowest segment (so a notch or a narrow band is drawn
    # by enough lines); a longer record then buys more dof, not finer lines.
    finest = _feature_resolution_hz(profile)
    choice = choose_nperseg(
        steady,
        rate_hz,
        resolution_hz=resolution_hz,
        target_dof=target_dof,
        finest_resolution_hz=None if resolution_hz else max(finest, rate_hz / 2**20),
    )
    notes = [choice.message] if choice.message else []
    if not resolution_hz:
        choice, note = _resolve_features(profile, choice, steady, rate_hz, target_dof, criteria)
        if note:
            notes = [note]

    def steady_chunks():
        position = 0
        for chunk in source():
            x = _as_float_chunk(chunk)
            start, stop = position, position + x.size
            position = stop
            lo = max(start, skip_start)
            hi = min(stop, total - skip_end)
            if hi > lo:
                yield x[lo - start : hi - start], lo - skip_start
        if position != total:
            raise InputError(f"the record gave {position} samples where {total} were expected", location="samples")

    window_s = max(1.0, steady / rate_hz / 20.0)
    welch = WelchAccumulator(rate_hz, choice.nperseg)
    moments = MomentAccumulator(rate_hz, window_s)
    rho = _correlation_sequence(profile, float(rate_hz))
    short_windows = WindowRmsAccumulator(rate_hz, _stationarity_window_samples(rho, float(rate_hz), profile, steady))
    held = HeldRunAccumulator(rate_hz)
    peak_index, peak_abs = 0, -1.0
    for x, offset in steady_chunks():
        if not np.all(np.isfinite(x)):
            bad = offset + int(np.argmin(np.isfinite(x)))
            raise InputError(f"sample {bad + skip_start} is not a finite number", location="samples")
        welch.update(x)
        moments.update(x)
        short_windows.update(x)
        held.update(x)
        i = int(np.argmax(np.abs(x)))
        if abs(x[i]) > peak_abs:
            peak_abs, peak_index = abs(float(x[i])), offset + i
    estimate = welch.result()
    first = moments.result()
    if not first.std > 0:
        raise InputError("the record is constant (zero standard deviation); nothing to verify", location="samples")

    half = max(1, int(excerpt_s * rate_hz / 2))
    lo_ex, hi_ex = max(0, peak_index - half), min(steady, peak_index + half)
    excerpt = np.empty(hi_ex - lo_ex)
    crossings = LevelCrossingAccumulator(rate_hz, first.mean, first.std)
    edges = np.linspace(-HISTOGRAM_RANGE_SIGMA, HISTOGRAM_RANGE_SIGMA, 2 * HISTOGRAM_BINS_PER_SIGMA * HISTOGRAM_RANGE_SIGMA + 1)
    counts = np.zeros(edges.size - 1, dtype=np.int64)
    for x, offset in steady_chunks():
        crossings.update(x)
        counts += np.histogram((x - first.mean) / first.std, bins=edges)[0]
        a, b = max(lo_ex, offset), min(hi_ex, offset + x.size)
        if b > a:
            excerpt[a - lo_ex : b - lo_ex] = x[a - offset : b - offset]
    second = crossings.result()

    comparison = compare_asd(estimate, profile, criteria)
    duration = steady / rate_hz
    density = counts / (first.count * (edges[1] - edges[0]))
    nu0_theory = profile.zero_upcrossing_rate_hz
    rho1 = lag_one_correlation(profile, rate_hz)
    statistics = {
        "rms": first.rms,
        "mean": first.mean,
        "std": first.std,
        "skewness": first.skewness,
        "kurtosis": first.kurtosis,
        "crest_factor": first.crest_factor,
        "peak": first.peak,
        "maximum": first.maximum,
        "minimum": first.minimum,
        "samples": int(first.count),
        "duration_s": duration,
        "rate_hz": float(rate_hz),
        "skipped_start_samples": skip_start,
        "skipped_end_samples": skip_end,
        "exceedance": [
            {"k_sigma": k, "measured_fraction": frac, "gaussian_fraction": gauss}
            for k, frac, gauss in zip(second.levels_sigma, second.exceedance_fractions, second.gaussian_fractions)
        ],
        "zero_upcrossing_rate_hz": second.upcrossing_rate_hz,
        "zero_upcrossing_rate_rice_hz": nu0_theory,
        "zero_upcrossing_rate_sampled_theory_hz": _sheppard_upcrossing_rate_hz(rho1, rate_hz),
        "largest_peak_sigma": max(first.maximum - first.mean, first.mean - first.minimum) / first.std,
        "window_s": window_s,
        "window_rms_min": min(first.window_rms) if first.window_rms else first.rms,
        "window_rms_max": max(first.window_rms) if first.window_rms else first.rms,
    }
    if nu0_theory * duration > 1.0:
        # Largest |x - mean|: a level a is exceeded when x up-crosses a or -x does; at
        # high levels both are Poisson streams of rate nu0 exp(-a^2/2), so the count in
        # Davenport's (1964) formula doubles to 2 nu0 T.  nu0 is the target's (Rice).
        statistics["davenport_expected_peak_sigma"] = davenport_expected_largest_peak_sigma(2 * nu0_theory, duration)
        statistics["davenport_peak_std_sigma"] = davenport_largest_peak_std_sigma(2 * nu0_theory, duration)
    else:
        statistics["davenport_expected_peak_sigma"] = None
        statistics["davenport_peak_std_sigma"] = None
    # What the samples can show: at a few samples per cycle they miss the crests, so the
    # largest sample is lower than the continuous signal's largest value (about 5 % at
    # 2.56 samples per cycle of the top frequency).  Poisson crossings of each level by the
    # sampled sequence (Owen's T), both signs.
    if -1.0 < rho1 < 1.0:
        sampled = largest_peak_from_crossing_rate(
            lambda a: 2.0 * sampled_crossing_rate_hz(a, rho1, rate_hz), duration,
            method="Poisson crossings of the sampled Gaussian sequence (Owen's T), both signs",
        )
        statistics["expected_peak_sampled_sigma"] = sampled.mean_sigma
        statistics["expected_peak_sampled_std_sigma"] = sampled.std_sigma
    else:
        statistics["expected_peak_sampled_sigma"] = None
        statistics["expected_peak_sampled_std_sigma"] = None

    checks = _judge(criteria, profile, estimate, comparison, first, second, statistics, rho, rho1,
                    short_windows, float(rate_hz), skip_start, held)
    failed, reasons = [], []
    groups = list(dict.fromkeys(check["group"] for check in checks))  # in the order the criteria are listed
    for group in groups:
        bad = [c for c in checks if c["group"] == group and c["judged"] and not c["pass"]]
        if bad:
            failed.append(group)
            others = [c["name"] for c in bad[1:]]
            reasons.append(bad[0]["reason"] + (f" (also failed: {', '.join(others)})" if others else ""))

    return Verification(
        passed=not failed,
        failed=tuple(failed),
        reasons=tuple(reasons),
        checks=tuple(checks),
        criteria=criteria,
        profile=profile,
        estimate=estimate,
        comparison=comparison,
        segment_message="; ".join(notes),
        statistics=statistics,
        excerpt_t_s=(np.arange(lo_ex, hi_ex) + skip_start) / rate_hz,
        excerpt_g=excerpt,
        window_rms_g=tuple(first.window_rms),
        window_s=window_s,
        histogram_edges_sigma=edges,
        histogram_density=density,
    )


# --------------------------------------------------------------------------- theory of the sampled Gaussian record


def _feature_resolution_hz(profile: AsdProfile) -> float:
    """Finest line spacing worth having for this profile: 1/8 of the lowest frequency, 1/16 of the band and of the
    narrowest segment (a notch or a narrow step is then drawn by at least 16 lines)."""
    widths = np.diff(profile.frequencies_hz)
    return float(min(profile.frequency_min_hz / 8.0, (profile.frequency_max_hz - profile.frequency_min_hz) / 16.0,
                     float(np.min(widths)) / 16.0))


def _correlation_sequence(profile: AsdProfile, rate_hz: float) -> np.ndarray:
    """Correlation coefficients rho_h of the target process sampled at ``rate_hz``, lags 0, 1, ... N/2 samples.

    Wiener-Khinchin: the autocovariance is the cosine transform of the one-sided
    density, here an inverse real FFT of the target on a grid fine enough for its
    narrowest feature (Bendat & Piersol 2010).
    """
    df = _feature_resolution_hz(profile) / 2.0
    n = 1 << max(12, min(22, math.ceil(math.log2(rate_hz / df))))
    f = np.fft.rfftfreq(n, 1.0 / rate_hz)
    density = profile.evaluate(f)
    density[0] = 0.0
    r = np.fft.irfft(density, n)
    return r[: n // 2 + 1] / r[0]


def _sum_over_lags(rho: np.ndarray, power: int) -> float:
    """sum over all integer lags h of rho_h^power (rho_0 = 1)."""
    return float(1.0 + 2.0 * np.sum(rho[1:] ** power))


def _window_dof(rho: np.ndarray, samples: int) -> float:
    """Chi-square degrees of freedom of the mean square of ``samples`` successive samples of the Gaussian process.

    ``Var[ms]/sigma^4 = (2/M^2) sum_{|h|<M} (M - |h|) rho_h^2``; a chi-square
    with ``nu = 2 mean^2/Var`` dof has that variance (Satterthwaite 1946).  For
    long windows ``nu -> 2 B_s T`` with ``B_s`` the statistical bandwidth
    (Bendat & Piersol 2010, normalized random error 1/sqrt(B_s T) of a mean
    square estimate).
    """
    m = int(samples)
    h = np.arange(1, min(m, rho.size))
    r2 = rho[h] ** 2
    total = m + 2.0 * float(np.sum((m - h) * r2))
    return m * m / total


def _non_gaussian_window_dof(rho: np.ndarray, samples: int, kurtosis: float, skewness: float) -> float:
    """Chi-square dof of a window mean square for a record y = g(u) of a Gaussian u (Hermite expansion).

    ``Cov(y_0^2, y_h^2) = sum_j b_j^2 j! rho_h^j`` with ``sum_j b_j^2 j! = Var(y^2) = (kurtosis - 1) sigma^4``
    (Mehler's formula).  The linear term ``b_1^2 ~ (4/9) skewness^2 sigma^4`` (first-order Hermite model,
    Winterstein 1988) keeps ``|rho_h|``; the rest is bounded by ``rho_h^2`` times its share.  A Gaussian
    record (kurtosis 3, skewness 0) gives :func:`_window_dof`.
    """
    m = int(samples)
    h = np.arange(1, min(m, rho.size))
    weights = (m - h).astype(float)
    s2 = m + 2.0 * float(np.sum(weights * rho[h] ** 2))
    s1 = m + 2.0 * float(np.sum(weights * np.abs(rho[h])))
    k = max(3.0, float(kurtosis)) if math.isfinite(kurtosis) else 3.0
    b1 = min(k - 1.0 - 2.0, (4.0 / 9.0) * float(skewness) ** 2) if math.isfinite(skewness) else 0.0
    b1 = max(0.0, b1)
    variance = (b1 * s1 + (k - 1.0 - b1) * s2) / (m * m)
    return 2.0 / variance


def _stationarity_window_samples(rho: np.ndarray, rate_hz: float, profile: AsdProfile, steady: int) -> int:
    """Samples per stationarity window: at least two periods of the lowest frequency and 100 chi-square dof,
    at most an eighth of the record."""
    m = max(2, math.ceil(2.0 * rate_hz / profile.frequency_min_hz))
    cap = max(2, steady // 8)
    while m < cap and _window_dof(rho, m) < 100.0:
        m = int(math.ceil(m * 1.25))
    return min(m, cap)


def _largest_sample_limits(rho1: float, rate_hz: float, duration_s: float, alpha: float, q: float,
                           nu0_hz: float) -> tuple:
    """Levels (sigma) between which the largest |x - mean| of a Gaussian sampled record falls with prob. 1 - alpha.

    ``P(max |x| <= a) = exp(-T r(a))``.  Upper limit: ``r = 2 nu_s(a)`` with
    ``nu_s`` the up-crossing rate of level a by the sampled sequence (Owen's T;
    Poisson crossings, Cramer & Leadbetter 1967), which counts every crossing.
    Lower limit: crossings of a narrow-band process come in clumps, one per
    envelope excursion, so ``r`` is at most the envelope's up-crossing rate
    ``sqrt(2 pi) q nu0 a exp(-a^2/2)`` (Vanmarcke 1975, with the bandwidth
    factor ``q = sqrt(1 - m1^2/(m0 m2))``); the smaller rate gives the lower
    (safer) limit.
    """
    from scipy.optimize import brentq

    def poisson(a):
        return duration_s * 2.0 * float(sampled_crossing_rate_hz(np.array([a]), rho1, rate_hz)[0])

    def clumps(a):
        envelope = duration_s * math.sqrt(2 * math.pi) * q * nu0_hz * a * math.exp(-a * a / 2)
        return min(poisson(a), envelope) if a > 1.0 else poisson(a)

    def level(expected, count):
        if expected(0.0) <= count:
            return 0.0
        return brentq(lambda a: math.log(max(expected(a), 1e-300)) - math.log(count), 0.0, 40.0, xtol=1e-6)

    return level(clumps, -math.log(alpha / 2.0)), level(poisson, -math.log1p(-alpha / 2.0))


def _third_octave_bands(profile: AsdProfile, resolution_hz: float) -> list:
    """Third-octave bands from the lowest frequency, each merged until at least 3 lines wide."""
    lo, hi = profile.frequency_min_hz, profile.frequency_max_hz
    edges = [lo]
    while edges[-1] * 2 ** (1 / 3) < hi * (1 - 1e-9):
        edges.append(edges[-1] * 2 ** (1 / 3))
    edges.append(hi)
    bands = []
    start = edges[0]
    for stop in edges[1:]:
        if stop - start >= 3 * resolution_hz or stop == hi:
            bands.append([start, stop])
            start = stop
    if len(bands) > 1 and bands[-1][1] - bands[-1][0] < 3 * resolution_hz:
        bands[-2][1] = bands.pop()[1]
    return bands


def _expected_welch_estimate(profile: AsdProfile, estimate: WelchEstimate, frequencies_hz: np.ndarray) -> np.ndarray:
    """What a Welch estimate of a record with exactly the target spectrum shows at ``frequencies_hz``.

    ``E[S_hat(f)] = integral S(v) |W(f - v)|^2 dv / integral |W|^2`` with W the
    Hann window's transform (Bendat & Piersol 2010, bias of spectral density
    estimates; Harris 1978), summed on a grid of 1/16 line within +/-6 lines.
    """
    n = estimate.nperseg
    pad = 16
    window = scipy.signal.get_window("hann", n)
    power = np.abs(np.fft.fft(window, pad * n)) ** 2
    idx = np.arange(-6 * pad, 6 * pad + 1)
    kernel = power[idx % power.size]  # periodic: short segments wrap around
    kernel = kernel / kernel.sum()
    offsets = idx * (estimate.rate_hz / (pad * n))
    out = np.empty(frequencies_hz.size)
    for i in range(0, frequencies_hz.size, 2048):
        f = frequencies_hz[i:i + 2048]
        out[i:i + 2048] = profile.evaluate(np.abs(f[:, None] + offsets[None, :])) @ kernel
    return out


def _band_shares(profile: AsdProfile, estimate: WelchEstimate, criteria: Criteria) -> list:
    """Per band: measured and expected share of the in-band mean square, deviation and limits (dB)."""
    f = estimate.frequencies_hz
    res = estimate.resolution_hz
    margin = max(criteria.edge_exclusion_resolutions, 2.0) * res
    bands = _third_octave_bands(profile, res)
    lo_all, hi_all = profile.frequency_min_hz - margin, profile.frequency_max_hz + margin
    use = (f > 0) & (f >= lo_all) & (f <= hi_all)
    fu = f[use]
    measured = estimate.asd[use]
    expected = _expected_welch_estimate(profile, estimate, fu)
    total_m, total_e = float(np.sum(measured)), float(np.sum(expected))
    p_each = criteria.false_alarm_probability / (2.0 * max(len(bands), 1))
    rows = []
    for k, (a, b) in enumerate(bands):
        a_ext = lo_all if k == 0 else a
        b_ext = hi_all if k == len(bands) - 1 else b
        inside = (fu >= a_ext) & ((fu < b_ext) if k < len(bands) - 1 else (fu <= b_ext))
        lines = int(np.count_nonzero(inside))
        if lines == 0:
            continue
        share_m = float(np.sum(measured[inside])) / total_m if total_m > 0 else 0.0
        share_e = float(np.sum(expected[inside])) / total_e
        nu = estimate.dof * max(1.0, lines / 2.0)
        low = min(criteria.tolerance_low_db, 10 * math.log10(chi2.ppf(p_each, nu) / nu))
        high = max(criteria.tolerance_high_db, 10 * math.log10(chi2.isf(p_each, nu) / nu))
        deviation = 10 * math.log10(share_m / share_e) if share_m > 0 else -math.inf
        rows.append({"low_hz": a, "high_hz": b, "lines": lines, "measured_share": share_m,
                     "target_share": share_e, "deviation_db": deviation, "limit_low_db": low,
                     "limit_high_db": high, "pass": bool(low <= deviation <= high)})
    return rows


def floor_percent(fraction: float, digits: int = 1) -> str:
    """A share as a percentage rounded down, so anything short of all reads below 100.

    Parameters
    ----------
    fraction : float
        Share, 0 .. 1.
    digits : int
        Decimals shown (more are added, up to 6, until a share below 1 no
        longer reads 100).

    Returns
    -------
    str
        e.g. ``"99.9"`` for 12666/12669 (99.976 %), never ``"100.0"`` unless all.

    Examples
    --------
    >>> floor_percent(12666 / 12669)
    '99.9'
    >>> floor_percent(1.0)
    '100.0'

    References
    ----------
    Rounding toward zero of a reported share (common practice, no source).
    """
    value = 100.0 * float(fraction)
    while True:
        scale = 10 ** digits
        text = f"{math.floor(value * scale + 1e-9) / scale:.{digits}f}"
        if fraction >= 1 or float(text) < 100 or digits >= 6:
            return text
        digits += 1


def _judge(criteria, profile, estimate, comparison, first, second, statistics, rho, rho1, short_windows,
           rate_hz, skip_start, held=None):
    """Every criterion as a dict: name, group, pass, measured_* and limit_* (unit-suffixed), summary, reason."""
    checks = []
    alpha = criteria.false_alarm_probability
    n = int(first.count)
    duration = n / rate_hz

    def add(name, group, ok, summary, reason, judged=True, **values):
        checks.append({"name": name, "group": group, "pass": bool(ok), "judged": bool(judged), **values,
                       "summary": summary, "reason": reason})

    # --- ASD, line by line
    c = comparison
    judged = int(np.count_nonzero(c.judged))
    outside = int(np.count_nonzero(c.judged & ~c.within))
    ok = c.fraction_within_tolerance >= criteria.min_fraction_within
    add("asd", "asd", ok,
        f"{outside} of {judged} judged lines outside {criteria.tolerance_low_db:+g}/{criteria.tolerance_high_db:+g} "
        f"dB ({floor_percent(c.fraction_within_tolerance)} % within); worst {c.max_deviation_db:+.2f} dB at "
        f"{c.max_deviation_frequency_hz:g} Hz",
        f"ASD: {outside} of {judged} judged lines outside "
        f"{criteria.tolerance_low_db:+g}/{criteria.tolerance_high_db:+g} dB (at "
        f"{_describe_ranges(c.outside_ranges_hz)}); worst {c.max_deviation_db:+.2f} dB "
        f"at {c.max_deviation_frequency_hz:g} Hz"
        + (f"; {floor_percent(c.fraction_within_tolerance)} % within, at least "
           f"{100 * criteria.min_fraction_within:g} % required" if criteria.relaxed else ""),
        measured_max_deviation_db=c.max_deviation_db, measured_frequency_hz=c.max_deviation_frequency_hz,
        measured_lines_outside=outside, measured_lines_judged=judged,
        limit_low_db=criteria.tolerance_low_db, limit_high_db=criteria.tolerance_high_db,
        limit_fraction_within=criteria.min_fraction_within)

    # --- ASD, band shares (edge lines included)
    bands = _band_shares(profile, estimate, criteria)
    worst = min(bands, key=lambda r: min(r["deviation_db"] - r["limit_low_db"], r["limit_high_db"] - r["deviation_db"]))
    bad = [r for r in bands if not r["pass"]]
    # Under a relaxed line rule, bands holding at most the allowed share of lines may fail as well.
    bad_share = sum(r["lines"] for r in bad) / max(1, sum(r["lines"] for r in bands))
    ok = not bad or (criteria.relaxed and bad_share <= 1.0 - criteria.min_fraction_within)
    add("asd_bands", "asd", ok,
        f"{len(bands)} third-octave bands; worst {worst['deviation_db']:+.2f} dB at {worst['low_hz']:.4g}-"
        f"{worst['high_hz']:.4g} Hz (limits {worst['limit_low_db']:+.2f}/{worst['limit_high_db']:+.2f} dB)",
        f"ASD bands: share of the mean square in {len(bad)} of {len(bands)} bands off the target's; worst "
        f"{worst['deviation_db']:+.2f} dB at {worst['low_hz']:.4g}-{worst['high_hz']:.4g} Hz (limits "
        f"{worst['limit_low_db']:+.2f}/{worst['limit_high_db']:+.2f} dB)",
        measured_worst_deviation_db=worst["deviation_db"], measured_band_low_hz=worst["low_hz"],
        measured_band_high_hz=worst["high_hz"], limit_low_db=worst["limit_low_db"],
        limit_high_db=worst["limit_high_db"], bands=bands)

    # --- ASD, lines near a band edge, against the target as the Hann window shows it
    window_bias = c.window_bias if c.window_bias is not None else np.zeros(c.frequencies_hz.size, dtype=bool)
    edge = (c.edge | window_bias) & (c.frequencies_hz >= 2 * estimate.resolution_hz)
    if np.any(edge):
        f_edge = c.frequencies_hz[edge]
        expected_edge = (c.expected_g2_per_hz[edge] if c.expected_g2_per_hz is not None
                         else _expected_welch_estimate(profile, estimate, f_edge))
        with np.errstate(divide="ignore"):
            dev = 10.0 * np.log10(c.measured_g2_per_hz[edge] / expected_edge)
        j = int(np.argmax(np.abs(dev)))
        bad = (dev < criteria.tolerance_low_db) | (dev > criteria.tolerance_high_db)
        add("asd_edges", "asd", not np.any(bad),
            f"{f_edge.size} band-edge and narrow-feature lines against the target seen through the Hann "
            f"window; worst "
            f"{dev[j]:+.2f} dB at {f_edge[j]:g} Hz",
            f"ASD at band edges and narrow features: {int(np.count_nonzero(bad))} of {f_edge.size} such lines "
            "outside "
            f"{criteria.tolerance_low_db:+g}/{criteria.tolerance_high_db:+g} dB of what a Welch estimate of the "
            f"target shows there; worst {dev[j]:+.2f} dB at {f_edge[j]:g} Hz",
            measured_max_deviation_db=float(dev[j]), measured_frequency_hz=float(f_edge[j]),
            measured_lines_outside=int(np.count_nonzero(bad)), measured_lines=int(f_edge.size),
            limit_low_db=criteria.tolerance_low_db, limit_high_db=criteria.tolerance_high_db)

    # --- overall g RMS
    error = 100.0 * (first.rms / profile.grms - 1.0)
    ok = abs(error) <= criteria.grms_tolerance_percent
    add("grms", "grms", ok,
        f"{first.rms:.4g} g against {profile.grms:.4g} g ({error:+.1f} %)",
        f"g RMS: measured {first.rms:.4g} g against {profile.grms:.4g} g ({error:+.1f} %, "
        f"tolerance +/-{criteria.grms_tolerance_percent:g} %)",
        measured_error_percent=error, measured_g=first.rms, target_g=profile.grms,
        limit_percent=criteria.grms_tolerance_percent)

    # --- amplitude targets (asked for)
    if criteria.kurtosis_target is not None:
        k_error = 100.0 * (first.kurtosis / criteria.kurtosis_target - 1.0)
        ok = abs(k_error) <= criteria.kurtosis_tolerance_percent
        add("kurtosis", "kurtosis", ok, f"{first.kurtosis:.3f} against {criteria.kurtosis_target:g} ({k_error:+.1f} %)",
            f"kurtosis: measured {first.kurtosis:.3f} against {criteria.kurtosis_target:g} ({k_error:+.1f} %)",
            measured_kurtosis=first.kurtosis, target_kurtosis=criteria.kurtosis_target, measured_error_percent=k_error,
            limit_percent=criteria.kurtosis_tolerance_percent)
    if criteria.skewness_target is not None:
        ok = abs(first.skewness - criteria.skewness_target) <= criteria.skewness_tolerance
        add("skewness", "skewness", ok, f"{first.skewness:+.3f} against {criteria.skewness_target:+g}",
            f"skewness: measured {first.skewness:+.3f} against {criteria.skewness_target:+g}",
            measured_skewness=first.skewness, target_skewness=criteria.skewness_target,
            limit_absolute=criteria.skewness_tolerance)
    if criteria.crest_factor_limit is not None:
        limit = criteria.crest_factor_limit * (1 + criteria.crest_factor_tolerance_percent / 100.0)
        ok = first.crest_factor <= limit
        add("crest_factor", "crest_factor", ok, f"{first.crest_factor:.3f}, limit {criteria.crest_factor_limit:g}",
            f"crest factor: measured {first.crest_factor:.3f} above the limit {criteria.crest_factor_limit:g}",
            measured_crest_factor=first.crest_factor, limit_crest_factor=limit)

    # --- mean
    mean_percent = 100.0 * abs(first.mean) / first.rms
    ok = mean_percent <= criteria.mean_limit_percent
    add("mean", "mean", ok, f"|mean| {abs(first.mean):.3g} g, {mean_percent:.2f} % of the RMS",
        f"mean: {first.mean:+.4g} g is {mean_percent:.1f} % of the RMS (at most {criteria.mean_limit_percent:g} %)",
        measured_mean_g=first.mean, measured_percent_of_rms=mean_percent, limit_percent=criteria.mean_limit_percent)

    # --- dropouts and held values: a run of identical samples no continuous random record makes
    if criteria.stationarity and held is not None:
        limit_s = max(HELD_RUN_MIN_SAMPLES / rate_hz, HELD_RUN_PERIODS_OF_LOWEST / profile.frequency_min_hz)
        at_s = (held.start + skip_start) / rate_hz
        ok = held.longest_s <= limit_s
        add("held_samples", "stationarity", ok,
            f"longest run of identical samples {held.longest} ({1000 * held.longest_s:.3g} ms, at {at_s:.4g} s), "
            f"at most {1000 * limit_s:.3g} ms",
            f"dropout or held value: {held.longest} identical samples ({held.value:.4g} g) for "
            f"{1000 * held.longest_s:.3g} ms at {at_s:.4g} s (at most {1000 * limit_s:.3g} ms)",
            measured_longest_run_samples=held.longest, measured_longest_run_s=held.longest_s,
            measured_time_s=at_s, limit_s=limit_s)

    # --- stationarity: mean square of short windows against chi-square limits (Bendat & Piersol)
    rms_windows = np.asarray(short_windows.result())
    if criteria.stationarity and criteria.burst_s is not None:
        _judge_burst_stationarity(add, criteria, rms_windows, short_windows.window_s, alpha)
    elif criteria.stationarity and rms_windows.size >= 4:
        m = int(round(short_windows.window_s * rate_hz))
        nu = _non_gaussian_window_dof(rho, m, first.kurtosis, first.skewness)
        ratio = rms_windows ** 2 / float(np.mean(rms_windows ** 2))
        p_each = alpha / (2.0 * rms_windows.size)
        low, high = chi2.ppf(p_each, nu) / nu, chi2.isf(p_each, nu) / nu
        tail = np.minimum(chi2.cdf(nu * ratio, nu), chi2.sf(nu * ratio, nu))
        if first.kurtosis > 3.5:
            # Mean squares of a heavy-tailed record have a longer upper tail than a chi-square of the same
            # variance: take the upper limit from a lognormal of that variance instead (heavier tail).
            s_ln = math.sqrt(math.log1p(2.0 / nu))
            high = max(high, math.exp(-s_ln * s_ln / 2 + s_ln * float(norm.isf(p_each))))
        i = int(np.argmin(tail))
        start_s = (skip_start + i * m) / rate_hz
        ok = bool(np.all((ratio >= low) & (ratio <= high)))
        count = int(np.count_nonzero((ratio < low) | (ratio > high)))
        add("stationarity", "stationarity", ok,
            f"{rms_windows.size} windows of {short_windows.window_s:.3g} s ({nu:.0f} dof each); worst at "
            f"{start_s:.3f} s: RMS {math.sqrt(ratio[i]):.3f} of the record's (limits {math.sqrt(low):.3f}-"
            f"{math.sqrt(high):.3f})",
            f"stationarity: {count} of {rms_windows.size} windows of {short_windows.window_s:.3g} s outside the "
            f"chi-square limits; worst at {start_s:.3f} s with {math.sqrt(ratio[i]):.3f} times the record's RMS "
            f"(limits {math.sqrt(low):.3f}-{math.sqrt(high):.3f})",
            measured_worst_window_start_s=start_s, measured_worst_rms_ratio=math.sqrt(ratio[i]),
            measured_windows_outside=count, window_s=short_windows.window_s, windows=int(rms_windows.size),
            window_dof=nu, limit_low_rms_ratio=math.sqrt(low), limit_high_rms_ratio=math.sqrt(high))

    # --- zero up-crossing rate against the sampled Gaussian process (Rice; Sheppard)
    expected = statistics["zero_upcrossing_rate_sampled_theory_hz"]
    counted = second.upcrossing_rate_hz
    if criteria.skewness_target is None and expected > 0:
        limit = max(criteria.crossing_rate_tolerance_percent, 400.0 / math.sqrt(expected * duration))
        err = 100.0 * (counted / expected - 1.0)
        ok = abs(err) <= limit
        add("crossing_rate", "asd", ok,
            f"{counted:.4g} /s counted, {expected:.4g} /s expected at {rate_hz:g} Hz ({err:+.1f} %)",
            f"crossing rate: {counted:.4g} mean-level up-crossings per s counted, {expected:.4g} /s expected for "
            f"the target sampled at {rate_hz:g} Hz ({err:+.1f} %, tolerance +/-{limit:.3g} %): a wrong sample "
            "rate, a spectrum off the target or gaps in the record show here",
            judged=not criteria.relaxed,
            measured_rate_hz=counted, expected_rate_hz=expected, measured_error_percent=err, limit_percent=limit)

    # --- Gaussian expectations when no amplitude target was asked
    if criteria.gaussian and not criteria.amplitude_target:
        z = 4.5
        sd_k = math.sqrt(24.0 * _sum_over_lags(rho, 4) / n)
        lo_k, hi_k = 3.0 - z * sd_k, 3.0 + z * sd_k
        ok = lo_k <= first.kurtosis <= hi_k
        add("gaussian_kurtosis", "gaussian", ok,
            f"kurtosis {first.kurtosis:.3f}, Gaussian 3 +/- {z * sd_k:.3f}",
            f"kurtosis {first.kurtosis:.3f} is not Gaussian for this record (3 +/- {z * sd_k:.3f}: 4.5 standard "
            "deviations of the sample kurtosis)",
            measured_kurtosis=first.kurtosis, limit_low_kurtosis=lo_k, limit_high_kurtosis=hi_k)
        levels = list(second.levels_sigma)
        if 3.0 in levels:
            j = levels.index(3.0)
            share, gauss = second.exceedance_fractions[j], second.gaussian_fractions[j]
            sd_p = math.sqrt(gauss * (1 - gauss) * _sum_over_lags(rho, 2) / n)
            lo_p, hi_p = max(0.0, gauss - z * sd_p), gauss + z * sd_p
            ok = lo_p <= share <= hi_p
            add("gaussian_tail_3_sigma", "gaussian", ok,
                f"{100 * share:.3f} % of samples beyond 3 sigma, Gaussian {100 * gauss:.3f} +/- {100 * z * sd_p:.3f} %",
                f"share beyond 3 sigma {100 * share:.3f} % is not Gaussian (limits {100 * lo_p:.3f}-{100 * hi_p:.3f} %)",
                measured_percent=100 * share, limit_low_percent=100 * lo_p, limit_high_percent=100 * hi_p)
        if -1.0 < rho1 < 1.0:
            m0, m1, m2 = (profile.spectral_moment(k) for k in (0, 1, 2))
            q = math.sqrt(max(0.0, 1.0 - m1 * m1 / (m0 * m2)))
            lo_a, hi_a = _largest_sample_limits(rho1, rate_hz, duration, alpha, q, math.sqrt(m2 / m0))
            peak = statistics["largest_peak_sigma"]
            ok = lo_a <= peak <= hi_a
            add("gaussian_largest_peak", "gaussian", ok,
                f"largest sample {peak:.2f} sigma, limits {lo_a:.2f}-{hi_a:.2f} sigma",
                f"largest sample {peak:.2f} sigma is outside what a Gaussian record of {duration:.4g} s shows "
                f"({lo_a:.2f}-{hi_a:.2f} sigma)",
                measured_sigma=peak, limit_low_sigma=lo_a, limit_high_sigma=hi_a)
    return checks


#: Stationarity windows of a burst drive: at least this many burst durations each.
BURST_WINDOWS = 4.0


def _judge_burst_stationarity(add, criteria, rms_windows: np.ndarray, window_s: float, alpha: float) -> None:
    """Stationarity of a burst drive: reverse arrangements of mean squares over windows of >= 4 bursts."""
    from vibsynth.analysis.stationarity import MIN_WINDOWS, reverse_arrangements_test

    group = max(1, int(math.ceil(BURST_WINDOWS * criteria.burst_s / window_s)))
    count = rms_windows.size // group
    if count < MIN_WINDOWS:
        add("stationarity", "stationarity", True,
            f"not judged: {count} windows of {group * window_s:.3g} s (>= {BURST_WINDOWS:g} bursts of "
            f"{criteria.burst_s:.3g} s) are fewer than the {MIN_WINDOWS} the trend test needs",
            "", judged=False, windows=count, window_s=group * window_s)
        return
    squares = (rms_windows[: count * group] ** 2).reshape(count, group).mean(axis=1)
    test = reverse_arrangements_test(squares, alpha)
    add("stationarity", "stationarity", test.stationary,
        f"{count} windows of {group * window_s:.3g} s: {test.count} reverse arrangements "
        f"(limits {test.low:.0f}-{test.high:.0f}; burst drive, trend test)",
        f"stationarity: the mean squares of {count} windows of {group * window_s:.3g} s show a trend "
        f"({test.count} reverse arrangements, limits {test.low:.0f}-{test.high:.0f})",
        windows=count, window_s=group * window_s, measured_reverse_arrangements=test.count,
        limit_low_reverse_arrangements=test.low, limit_high_reverse_arrangements=test.high)


def _resolve_features(profile, choice, steady, rate_hz, target_dof, criteria):
    """Refine a dof-driven segment choice so the band's narrowest feature is resolved, or say the record is short.

    A feature (the narrowest segment, or the whole band) is resolved when it
    spans at least 4 lines and, for the band, when lines remain after the edge
    exclusion.  When the dof-driven choice is coarser than that, the note says
    so with the record length that would give the dof at the needed
    resolution; when it would leave no line to judge at all, the finer segment
    is used anyway (fewer dof, said in the note).
    """
    widths = np.diff(profile.frequencies_hz)
    k = int(np.argmin(widths))
    narrow = float(widths[k])
    band = profile.frequency_max_hz - profile.frequency_min_hz
    judge_res = band / (2.0 * criteria.edge_exclusion_resolutions + 3.0)
    needed = min(narrow / 4.0, judge_res)
    if choice.resolution_hz <= needed * (1 + 1e-9):
        return choice, ""
    aim = DEFAULT_TARGET_DOF if target_dof is None else float(target_dof)
    n_needed = 1 << max(1, math.ceil(math.log2(rate_hz / needed) - 1e-12))
    need_s = _samples_for_dof(aim, n_needed) / rate_hz
    feature = (f"the narrowest feature ({profile.frequencies_hz[k]:g}-{profile.frequencies_hz[k + 1]:g} Hz, "
               f"{narrow:g} Hz wide)" if narrow / 4.0 <= judge_res else
               f"the band ({profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz)")
    note = (f"record of {steady / rate_hz:g} s is too short to resolve {feature} at {aim:g} dof: that needs lines "
            f"of {rate_hz / n_needed:g} Hz and at least {need_s:.4g} s")
    if choice.resolution_hz > judge_res * (1 + 1e-9) and n_needed <= steady:
        n_judge = 1 << max(1, math.ceil(math.log2(rate_hz / judge_res) - 1e-12))
        finer = choose_nperseg(steady, rate_hz, resolution_hz=rate_hz / n_judge, target_dof=aim)
        note += f"; judged at {finer.resolution_hz:g} Hz with only {finer.dof:.1f} dof"
        return finer, note
    return choice, note + f"; judged at {choice.resolution_hz:g} Hz ({choice.dof:.0f} dof)"


def sampled_upcrossing_rate_hz(profile: AsdProfile, rate_hz: float) -> float:
    """Expected mean-level up-crossings per second of the *sampled* Gaussian process.

    A sampled record shows a crossing only as a sign change between two
    successive samples; for a stationary Gaussian sequence the probability of a
    sign change is ``arccos(rho_1)/pi`` with ``rho_1`` the correlation at one
    sample lag (Sheppard's formula), so up-crossings occur at
    ``rate_hz arccos(rho_1) / (2 pi)`` per second.  As ``rate_hz`` grows this
    tends to Rice's ``sqrt(m2/m0)``; at 4 samples per cycle of the top
    frequency it is a few percent lower, which is what a counted record shows.

    Parameters
    ----------
    profile : AsdProfile
        One-sided ASD (g^2/Hz).
    rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    float
        Up-crossings per second, 1/s.

    References
    ----------
    Sheppard, W. F. (1899), Phil. Trans. R. Soc. A 192, 101-167 (orthant
    probability of the bivariate normal); Kedem, B. (1994), *Time Series
    Analysis by Higher Order Crossings*, IEEE Press (zero-crossing rate of a
    sampled Gaussian process).
    """
    rate = check_rate_hz(rate_hz)
    return _sheppard_upcrossing_rate_hz(lag_one_correlation(profile, rate), rate)


def _sheppard_upcrossing_rate_hz(rho1: float, rate_hz: float) -> float:
    """Mean-level up-crossings per second of a sampled Gaussian sequence with lag-one correlation ``rho1``."""
    return float(rate_hz) * math.acos(rho1) / (2 * math.pi)


def lag_one_correlation(profile: AsdProfile, rate_hz: float) -> float:
    """Correlation coefficient of successive samples of the target process at ``rate_hz``.

    ``rho_1 = integral S(f) cos(2 pi f / rate_hz) df / m0`` (Wiener-Khinchin),
    integrated per log-log segment by adaptive quadrature.

    Parameters
    ----------
    profile : AsdProfile
        One-sided ASD (g^2/Hz).
    rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    float
        rho_1, dimensionless, in [-1, 1].

    References
    ----------
    Wiener-Khinchin theorem (Bendat & Piersol 2010): the autocorrelation is
    the cosine transform of the one-sided spectral density.
    """
    lag_s = 1.0 / float(rate_hz)
    correlation = 0.0
    for f1, f2 in zip(profile.frequencies_hz[:-1], profile.frequencies_hz[1:]):
        value, _ = integrate.quad(
            lambda f: float(profile.evaluate(f)) * math.cos(2 * math.pi * f * lag_s), f1, f2, limit=200
        )
        correlation += value
    return max(-1.0, min(1.0, correlation / profile.mean_square_g2))

