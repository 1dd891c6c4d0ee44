"""How high will the peaks go?  Largest peak, exceedances and crest factor: theory beside Monte-Carlo.

For a drive of duration T made from a profile, for the Gaussian drive and for
a non-Gaussian one (kurtosis/skewness by cubic Hermite transform, or clipping),
this module predicts

* the largest ``|x|`` in T (mean, standard deviation, 5 % and 95 % points), in
  units of the drive's RMS (sigma) and in g;
* the probability that a sample lies beyond ``k`` sigma, ``k = 1 .. 6``;
* the crest factor (largest ``|x|`` over the RMS),

from theory and from a Monte-Carlo of N records made by the drive synthesis
pipeline itself (:class:`vibsynth.generate.pipeline.Synthesizer`), side by side.

Theory
------
The drive is ``x = sigma g(u)`` with ``u`` a stationary unit-variance Gaussian
process (``g`` the identity for the Gaussian drive) and ``g`` monotone, so
``|x| <= a sigma`` for the whole record exactly when ``u`` stays between
``g^-1(-a)`` and ``g^-1(a)``.  High levels are crossed as Poisson streams
(Rice; Cramer & Leadbetter), so

    P(max |x| <= a sigma) = exp(-T [r(g^-1(a)) + r(-g^-1(-a))])

with ``r(v)`` the rate of up-crossings of level ``v`` by ``u``: this is the
Gaussian extreme mapped through ``g`` (Winterstein's approach to the extremes
of a translation process).  Two rates are used:

``continuous`` (the physical, band-limited signal)
    Rice: ``r(v) = nu0 exp(-v^2/2)`` with ``nu0 = sqrt(m2/m0)`` of ``u``'s
    spectrum.  For the Gaussian drive the mean and standard deviation are
    Davenport's closed forms with ``2 nu0 T`` crossings (both signs).
``sampled`` (what the samples of a file at the given rate show)
    ``r(v) = fs P(u_n < v < u_(n+1)) = 2 fs T_Owen(v, sqrt((1 - rho1)/(1 + rho1)))``
    with ``rho1`` the correlation of ``u`` at one sample (Owen's T function);
    it tends to Rice's rate as the rate grows.  A file sampled at 2.56 x the
    top frequency shows peaks a few percent lower than the continuous signal
    it represents; this is the column the Monte-Carlo is compared with.

Exceedance per sample: ``P(|x| > k sigma) = Phi(-g^-1(k)) + Phi(g^-1(-k))``.
The expected crest factor is the expected largest peak in sigma.  ``u``'s
spectrum is the generator's: the target for the Gaussian drive, the
pre-compensated spectrum for a non-Gaussian one.

Agreement (tested in tests/test_peaks.py)
----------------------------------------
:data:`PEAK_TOLERANCE_RELATIVE` and :data:`EXCEEDANCE_TOLERANCE_RELATIVE` state
how far the Monte-Carlo may lie from the sampled theory; see
:meth:`PeakRow.agreement`.

References
----------
.. [1] S. O. Rice, "Mathematical analysis of random noise", Bell Syst. Tech.
       J. 23 (1944) and 24 (1945).
.. [2] A. G. Davenport, "Note on the distribution of the largest value of a
       random function with application to gust loading", Proc. Instn Civ.
       Engrs 28, 187-196 (1964).
.. [3] S. R. Winterstein, "Nonlinear vibration models for extremes and
       fatigue", J. Eng. Mech. 114(10), 1988.
.. [4] H. Cramer and M. R. Leadbetter, *Stationary and Related Stochastic
       Processes*, Wiley 1967 (Poisson limit of high-level crossings).
.. [5] D. B. Owen, "Tables for computing bivariate normal probabilities",
       Ann. Math. Statist. 27(4), 1956 (``Phi2(h, h; rho) = Phi(h) - 2 T(h, a)``).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from vibsynth._checks import DEFAULT_PEAK_RECORDS, RATE_MARGIN_FACTOR
from vibsynth._checks import default_rate_hz as _default_rate_hz
from vibsynth.errors import InputError
from vibsynth.analysis.extremes import (
    LargestPeak,
    _continuous_rate,
    largest_peak_from_crossing_rate,
    sampled_crossing_rate_hz,
    davenport_expected_largest_peak_sigma,
    davenport_largest_peak_std_sigma,
)
from vibsynth.generate.design import make_nongaussian_plan
from vibsynth.generate.plan import make_plan
from vibsynth.generate.seeds import root_seed_sequence, seed_entropy
from vibsynth.montecarlo import map_records, record_synthesizer
from vibsynth.profile.asd import AsdProfile
from vibsynth.transforms.choice import gaussian_level, transform_record

__all__ = [
    "DEFAULT_RECORDS",
    "EXCEEDANCE_TOLERANCE_RELATIVE",
    "K_SIGMA_LEVELS",
    "LargestPeak",
    "MonteCarloPeaks",
    "PEAK_TOLERANCE_RELATIVE",
    "PeakReport",
    "PeakRow",
    "PeakTheoryRow",
    "default_rate_hz",
    "largest_peak_from_crossing_rate",
    "monte_carlo_peaks",
    "peak_report",
    "peak_theory_row",
    "sampled_crossing_rate_hz",
]

#: Levels (multiples of the RMS) of the exceedance table.
K_SIGMA_LEVELS = (1.0, 2.0, 3.0, 4.0, 5.0, 6.0)

#: Monte-Carlo records by default (the command line shows the same constant).
DEFAULT_RECORDS = DEFAULT_PEAK_RECORDS

#: The Monte-Carlo mean of the largest peak lies within 3 standard errors of the
#: records' scatter plus this fraction of the sampled-theory mean (model error of
#: the Poisson crossing approximation; measured in tests/test_peaks.py).
PEAK_TOLERANCE_RELATIVE = 0.01

#: Exceedance fractions agree within 3 (correlation-inflated) standard errors plus
#: this fraction of the theory, on levels expected to hold at least
#: :data:`EXCEEDANCE_MIN_COUNT` samples over all records.
EXCEEDANCE_TOLERANCE_RELATIVE = 0.02

#: Exceedance levels with fewer expected samples than this are reported, not compared.
EXCEEDANCE_MIN_COUNT = 400

#: Samples per chunk in the Monte-Carlo.
_CHUNK_SAMPLES = 1 << 18

#: Relative slack when counting samples beyond k sigma (a clipped sample sits at
#: the limit to within rounding).
_LEVEL_SLACK = 1e-9

#: Points of the level grid the largest-peak distribution is integrated on.

#: Sample-rate multiple of the top frequency used by default (common practice, no source).
DEFAULT_RATE_FACTOR = RATE_MARGIN_FACTOR


def default_rate_hz(profile: AsdProfile) -> float:
    """Default Monte-Carlo rate: the one default-rate rule of the package (:func:`vibsynth._checks.default_rate_hz`).

    The smallest common rate (1024, 2048, 4096, 5120, 8192, ... Hz) at least
    2.56 x the top frequency, as ``vibsynth run`` uses.

    Parameters
    ----------
    profile : AsdProfile

    Returns
    -------
    float
        Sample rate in Hz.

    Examples
    --------
    >>> from vibsynth.profile.files import read_profile
    >>> default_rate_hz(read_profile("bench-flat"))
    5120.0

    References
    ----------
    2.56 x the top frequency is common practice for anti-alias margins (no source).
    """
    return _default_rate_hz(profile.frequency_max_hz)


# ---------------------------------------------------------------------------
# Crossing rates and the largest-peak distribution
# ---------------------------------------------------------------------------


# ---------------------------------------------------------------------------
# Theory rows
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class PeakTheoryRow:
    """Theory for one drive (Gaussian or transformed).

    Attributes
    ----------
    label : str
        ``gaussian`` or a description of the transform.
    rms_g : float
        Drive RMS (the target g RMS), g.
    gaussian_zero_upcrossing_rate_hz : float
        Rice's ``sqrt(m2/m0)`` of the Gaussian stream u, Hz.
    lag_one_correlation : float
        Correlation of u between successive samples.
    continuous : LargestPeak
        Largest |x| of the continuous (band-limited) signal.
    sampled : LargestPeak
        Largest |x| over the samples at the rate.
    exceedance : tuple of float
        ``P(|x| > k sigma)`` for k in :data:`K_SIGMA_LEVELS`.
    crest_factor_limit : float or None
        Hard bound on the crest factor (clipping), else None.
    transform : dict or None
        The transform's parameters (None for the Gaussian drive).
    """

    label: str
    rms_g: float
    gaussian_zero_upcrossing_rate_hz: float
    lag_one_correlation: float
    continuous: LargestPeak
    sampled: LargestPeak
    exceedance: tuple
    crest_factor_limit: float | None = None
    transform: dict | None = None

    def to_dict(self) -> dict:
        """Plain data for JSON."""
        return {
            "label": self.label,
            "rms_g": self.rms_g,
            "gaussian_zero_upcrossing_rate_hz": self.gaussian_zero_upcrossing_rate_hz,
            "lag_one_correlation": self.lag_one_correlation,
            "largest_peak_continuous": self.continuous.to_dict(self.rms_g),
            "largest_peak_sampled": self.sampled.to_dict(self.rms_g),
            "crest_factor_expected_continuous": self.continuous.mean_sigma,
            "crest_factor_expected_sampled": self.sampled.mean_sigma,
            "crest_factor_limit": self.crest_factor_limit,
            "exceedance": [{"k_sigma": k, "probability": p} for k, p in zip(K_SIGMA_LEVELS, self.exceedance)],
            "transform": self.transform,
        }


def _line_moments(line_spectrum, resolution_hz: float, rate_hz: float) -> tuple[float, float]:
    """Rice's nu0 (Hz) and the lag-one correlation of a line spectrum on ``k * resolution_hz``."""
    spectrum = np.asarray(line_spectrum, dtype=np.float64)
    frequencies = np.arange(spectrum.size) * resolution_hz
    m0 = float(np.sum(spectrum))
    m2 = float(np.sum(frequencies**2 * spectrum))
    rho1 = float(np.sum(spectrum * np.cos(2.0 * np.pi * frequencies / rate_hz))) / m0
    return math.sqrt(m2 / m0), rho1


def peak_theory_row(profile: AsdProfile, line_spectrum, resolution_hz: float, rate_hz: float, duration_s: float,
                    transform=None, label: str = "gaussian") -> PeakTheoryRow:
    """Largest peak, exceedances and crest factor of one drive from theory.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz (its g RMS is the drive's RMS).
    line_spectrum : array_like
        One-sided spectrum of the Gaussian stream u on lines ``k * resolution_hz``
        (any scale; the target for a Gaussian drive, the pre-compensated spectrum
        for a transformed one), U^2/Hz.
    resolution_hz : float
        Line spacing, Hz.
    rate_hz : float
        Sample rate of the record, Hz.
    duration_s : float
        Record duration, s.
    transform : HermiteTransform, ClipTransform or None
        Unit-variance memoryless transform (None: Gaussian drive).
    label : str
        Row label.

    Returns
    -------
    PeakTheoryRow

    References
    ----------
    Rice (1944/45); Davenport (1964); Winterstein (1988); Owen (1956).
    """
    duration = float(duration_s)
    nu0_lines, rho1 = _line_moments(line_spectrum, resolution_hz, rate_hz)
    # The Gaussian drive's continuous nu0 is the profile's closed-form Rice rate.
    nu0 = profile.zero_upcrossing_rate_hz if transform is None else nu0_lines
    if nu0 * duration <= 1.0:
        raise InputError(
            f"a {duration:g} s record holds {nu0 * duration:.3g} expected zero up-crossings; "
            "peak statistics need many (give a longer duration)",
            "duration_s",
        )
    limit = None
    if transform is not None and hasattr(transform, "crest_factor"):
        limit = float(transform.crest_factor)

    def levels_of(a):
        upper = gaussian_level(transform, a)
        lower = -gaussian_level(transform, -np.asarray(a, dtype=np.float64))
        return upper, lower

    def continuous_rate(a):
        upper, lower = levels_of(a)
        return _continuous_rate(upper, nu0) + _continuous_rate(lower, nu0)

    def sampled_rate(a):
        upper, lower = levels_of(a)
        return sampled_crossing_rate_hz(upper, rho1, rate_hz) + sampled_crossing_rate_hz(lower, rho1, rate_hz)

    continuous = largest_peak_from_crossing_rate(continuous_rate, duration, limit, "Poisson crossings, Rice rate, "
                                                 "Gaussian extreme mapped through the transform (Winterstein)")
    if transform is None:
        # Davenport's closed forms with 2 nu0 T crossings (|x|: both signs); quantiles from the same distribution.
        continuous = LargestPeak(
            davenport_expected_largest_peak_sigma(2.0 * nu0, duration),
            davenport_largest_peak_std_sigma(2.0 * nu0, duration),
            continuous.p05_sigma,
            continuous.p95_sigma,
            "Davenport (1964) with 2 nu0 T crossings (both signs), Rice nu0",
        )
    sampled = largest_peak_from_crossing_rate(sampled_rate, duration, limit,
                                              "Poisson crossings of the sampled sequence (Owen's T, lag-one "
                                              "correlation)" + ("" if transform is None else ", mapped through the transform"))
    k = np.asarray(K_SIGMA_LEVELS)
    upper, lower = levels_of(k)
    exceedance = special.ndtr(-upper) + special.ndtr(-lower)
    return PeakTheoryRow(
        label=label,
        rms_g=profile.grms,
        gaussian_zero_upcrossing_rate_hz=nu0,
        lag_one_correlation=rho1,
        continuous=continuous,
        sampled=sampled,
        exceedance=tuple(float(p) for p in exceedance),
        crest_factor_limit=limit,
        transform=None if transform is None else transform_record(transform),
    )


# ---------------------------------------------------------------------------
# Monte-Carlo
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class MonteCarloPeaks:
    """Largest peaks and exceedances counted over N synthesized records.

    Attributes
    ----------
    largest_peak_sigma : numpy.ndarray
        Largest |x| of each record over the target RMS (dimensionless).
    crest_factor : numpy.ndarray
        Largest |x| of each record over that record's own RMS.
    rms_g : numpy.ndarray
        Each record's RMS, g.
    skewness, kurtosis : numpy.ndarray
        Each record's sample skewness and Pearson kurtosis.
    exceedance_counts : numpy.ndarray of int
        Samples with ``|x| > k sigma`` over all records, per k in :data:`K_SIGMA_LEVELS`.
    samples : int
        Samples over all records.
    """

    largest_peak_sigma: np.ndarray
    crest_factor: np.ndarray
    rms_g: np.ndarray
    skewness: np.ndarray
    kurtosis: np.ndarray
    exceedance_counts: np.ndarray
    samples: int

    @property
    def records(self) -> int:
        """Number of records."""
        return int(self.largest_peak_sigma.size)

    @property
    def exceedance(self) -> np.ndarray:
        """Fraction of samples beyond k sigma, per k."""
        return self.exceedance_counts / self.samples

    def largest_peak(self) -> LargestPeak:
        """Mean, standard deviation and 5/95 % points of the records' largest peaks."""
        values = self.largest_peak_sigma
        std = float(np.std(values, ddof=1)) if values.size > 1 else 0.0
        p05, p95 = np.percentile(values, [5.0, 95.0])
        return LargestPeak(float(np.mean(values)), std, float(p05), float(p95), f"Monte-Carlo, {values.size} records")

    def to_dict(self, rms_g: float) -> dict:
        """Plain data for JSON (``rms_g``: the target RMS, g)."""
        return {
            "records": self.records,
            "samples": self.samples,
            "largest_peak": self.largest_peak().to_dict(rms_g),
            "crest_factor_mean": float(np.mean(self.crest_factor)),
            "crest_factor_max": float(np.max(self.crest_factor)),
            "rms_g_mean": float(np.mean(self.rms_g)),
            "skewness_mean": float(np.mean(self.skewness)),
            "kurtosis_mean": float(np.mean(self.kurtosis)),
            "exceedance": [
                {"k_sigma": k, "fraction": float(c) / self.samples, "count": int(c)}
                for k, c in zip(K_SIGMA_LEVELS, self.exceedance_counts)
            ],
        }


def _record_statistics(plan, entropy, thresholds, step, index: int) -> tuple:
    """Peak, power sums and exceedance counts of record ``index`` (spawn key ``(index,)``)."""
    synthesizer = record_synthesizer(plan, entropy, index)
    counts = np.zeros(len(thresholds), dtype=np.int64)
    peak, s1, s2, s3, s4, n = 0.0, 0.0, 0.0, 0.0, 0.0, 0
    for chunk in synthesizer.iter_chunks(_CHUNK_SAMPLES):
        x = chunk[:, 0]
        magnitude = np.abs(x)
        peak = max(peak, float(np.max(magnitude)))
        for position, threshold in enumerate(thresholds):
            counts[position] += int(np.count_nonzero(magnitude > threshold))
        square = x * x
        s1 += float(np.sum(x))
        s2 += float(np.sum(square))
        # numpy's pairwise sums, not BLAS dot products: the figures must not depend on the BLAS
        # library's thread count (Dask workers run BLAS single-threaded)
        s3 += float(np.sum(square * x))
        s4 += float(np.sum(square * square))
        n += x.size
        if step is not None:
            step(x.size)
    return peak, s1, s2, s3, s4, n, counts


def monte_carlo_peaks(plan, records: int, seed, rms_g: float, progress=None, design=None,
                      mapper=None) -> MonteCarloPeaks:
    """Synthesize N records of a plan and count their peaks and exceedances.

    Record ``i`` is made from the seed sequence ``SeedSequence(seed, spawn_key=(i,))``
    by :class:`vibsynth.generate.pipeline.Synthesizer`, exactly as a drive file is
    (the Monte-Carlo engine :func:`vibsynth.montecarlo.map_records`).
    Each record's figures depend only on ``i``, so the records may be made
    anywhere (``mapper``) with the same result, number for number.

    Parameters
    ----------
    plan : SynthesisPlan
        The drive's plan (Gaussian, or non-Gaussian from
        :func:`vibsynth.generate.design.nongaussian_plan`).
    records : int
        N, >= 1.
    seed : int
        Root seed (>= 0).
    rms_g : float
        The drive's RMS (target), g: the unit of the k-sigma levels.
    progress : callable, optional
        Called with a sample count after each chunk (after each block of records with ``mapper``).
    design : NonGaussianDesign, optional
        The non-Gaussian design that goes with ``plan`` (unused: the plan carries its transform).
    mapper : callable, optional
        ``mapper(function, blocks)``: the results of ``function`` over the blocks
        of record indices, in order (e.g. :func:`vibsynth.batch.dask_mapper`);
        default: one record after another in this process.

    Returns
    -------
    MonteCarloPeaks

    Examples
    --------
    >>> from vibsynth.generate.plan import make_plan
    >>> from vibsynth.profile.asd import AsdProfile
    >>> plan = make_plan(AsdProfile([20, 500], [0.01, 0.01], name="flat"), 1.0, 2048.0)
    >>> in_turn = monte_carlo_peaks(plan, 3, 1, 2.2)
    >>> mapped = monte_carlo_peaks(plan, 3, 1, 2.2, mapper=lambda f, blocks: map(f, blocks))
    >>> bool((in_turn.largest_peak_sigma == mapped.largest_peak_sigma).all())
    True

    References
    ----------
    Monte-Carlo simulation by spectral representation (Shinozuka & Jan 1972).
    """
    if isinstance(records, bool) or not isinstance(records, (int, np.integer)) or records < 1:
        raise InputError(f"records {records!r} must be a whole number >= 1", "records")
    entropy = seed_entropy(root_seed_sequence(seed))
    step = progress if progress is not None else (lambda samples: None)
    thresholds = np.asarray(K_SIGMA_LEVELS) * float(rms_g) * (1.0 + _LEVEL_SLACK)
    inline = mapper is None  # progress per chunk here; per record when the records are made elsewhere
    function = functools.partial(_record_statistics, plan, entropy, thresholds, step if inline else None)

    def counted():
        for result in map_records(function, int(records), mapper):
            if not inline:
                step(result[5])
            yield result

    results = counted()
    peaks, crests, rms, skews, kurts = [], [], [], [], []
    counts = np.zeros(len(K_SIGMA_LEVELS), dtype=np.int64)
    total = 0
    for peak, s1, s2, s3, s4, n, record_counts in results:
        counts += record_counts
        mean = s1 / n
        variance = s2 / n - mean**2
        third = s3 / n - 3 * mean * s2 / n + 2 * mean**3
        fourth = s4 / n - 4 * mean * s3 / n + 6 * mean**2 * s2 / n - 3 * mean**4
        record_rms = math.sqrt(s2 / n)
        peaks.append(peak / rms_g)
        crests.append(peak / record_rms)
        rms.append(record_rms)
        skews.append(third / variance**1.5)
        kurts.append(fourth / variance**2)
        total += n
    return MonteCarloPeaks(
        largest_peak_sigma=np.array(peaks),
        crest_factor=np.array(crests),
        rms_g=np.array(rms),
        skewness=np.array(skews),
        kurtosis=np.array(kurts),
        exceedance_counts=counts,
        samples=total,
    )


# ---------------------------------------------------------------------------
# The report
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class PeakRow:
    """Theory and (optionally) Monte-Carlo for one drive.

    Attributes
    ----------
    theory : PeakTheoryRow
    monte_carlo : MonteCarloPeaks or None
    rate_hz : float
        Sample rate of the records, Hz.
    """

    theory: PeakTheoryRow
    monte_carlo: MonteCarloPeaks | None = None
    rate_hz: float = 0.0

    def agreement(self) -> dict:
        """How far the Monte-Carlo lies from the sampled theory, against the stated tolerance.

        Returns
        -------
        dict
            ``largest_peak``: ``difference_sigma`` (MC mean minus theory),
            ``allowed_sigma`` (3 standard errors of the records' scatter plus
            :data:`PEAK_TOLERANCE_RELATIVE` of the theory), ``within``;
            ``exceedance``: per k, ``relative_difference``, ``allowed_relative``
            (3 standard errors of a Poisson count, inflated by
            ``sqrt(fs / (2 nu0))`` because the samples of one excursion beyond
            k sigma come in clusters of at most about half a zero-crossing
            period, plus :data:`EXCEEDANCE_TOLERANCE_RELATIVE`), ``compared``
            (False when fewer than :data:`EXCEEDANCE_MIN_COUNT` samples are
            expected) and ``within``.  None without a Monte-Carlo.

        References
        ----------
        Standard error of a mean; binomial counting error inflated for
        correlated samples (Bendat & Piersol 2010, effective number of
        independent samples ``2 B T``).
        """
        mc = self.monte_carlo
        if mc is None:
            return None
        theory = self.theory.sampled
        measured = mc.largest_peak()
        standard_error = measured.std_sigma / math.sqrt(max(mc.records, 1))
        allowed = 3.0 * standard_error + PEAK_TOLERANCE_RELATIVE * theory.mean_sigma
        difference = measured.mean_sigma - theory.mean_sigma
        rows = []
        # Neighbouring samples are correlated: a k-sigma excursion spans about fs / (2 nu0) samples
        # at most, so the effective number of independent samples is smaller by up to that factor.
        inflation = math.sqrt(max(1.0, self._samples_per_half_cycle()))
        for k, p, count in zip(K_SIGMA_LEVELS, self.theory.exceedance, mc.exceedance_counts):
            expected = p * mc.samples
            compared = expected >= EXCEEDANCE_MIN_COUNT
            relative = (count / expected - 1.0) if expected > 0 else (0.0 if count == 0 else math.inf)
            allowed_relative = (3.0 * inflation / math.sqrt(expected) if expected > 0 else math.inf) + \
                EXCEEDANCE_TOLERANCE_RELATIVE
            rows.append({
                "k_sigma": k,
                "expected_count": expected,
                "count": int(count),
                "relative_difference": relative,
                "allowed_relative": allowed_relative,
                "compared": bool(compared),
                "within": bool((not compared) or abs(relative) <= allowed_relative),
            })
        return {
            "largest_peak": {
                "theory_sampled_sigma": theory.mean_sigma,
                "monte_carlo_sigma": measured.mean_sigma,
                "difference_sigma": difference,
                "allowed_sigma": allowed,
                "within": abs(difference) <= allowed,
            },
            "exceedance": rows,
        }

    def _samples_per_half_cycle(self) -> float:
        return self.rate_hz / (2.0 * self.theory.gaussian_zero_upcrossing_rate_hz)

    def to_dict(self) -> dict:
        """Plain data for JSON."""
        data = {"theory": self.theory.to_dict()}
        if self.monte_carlo is not None:
            data["monte_carlo"] = self.monte_carlo.to_dict(self.theory.rms_g)
            data["agreement"] = self.agreement()
        return data


@dataclass(frozen=True)
class PeakReport:
    """Peaks of a profile's drive for one duration: Gaussian and (optionally) transformed rows."""

    profile: AsdProfile
    duration_s: float
    rate_hz: float
    records: int
    seed: int
    rows: tuple
    warnings: tuple = ()
    compensation: dict | None = None

    def to_dict(self) -> dict:
        """Plain data for JSON (the ``vibsynth peaks --json`` output)."""
        return {
            "profile": self.profile.name,
            "grms": self.profile.grms,
            "duration_s": self.duration_s,
            "rate_hz": self.rate_hz,
            "records": self.records,
            "seed": self.seed,
            "k_sigma_levels": list(K_SIGMA_LEVELS),
            "tolerance": {
                "largest_peak": f"Monte-Carlo mean within 3 standard errors + {100 * PEAK_TOLERANCE_RELATIVE:g} % of "
                "the sampled-record theory",
                "exceedance": f"within 3 standard errors (inflated for correlated samples) + "
                f"{100 * EXCEEDANCE_TOLERANCE_RELATIVE:g} % where at least {EXCEEDANCE_MIN_COUNT} samples are expected",
            },
            "rows": [row.to_dict() for row in self.rows],
            "compensation": self.compensation,
            "warnings": list(self.warnings),
        }


def peak_report(profile: AsdProfile, duration_s: float, rate_hz: float | None = None, *, transform=None,
                records: int = DEFAULT_RECORDS, seed=0, amplitude: str = "fixed", progress=None,
                memory_budget_bytes: int | None = None, mapper=None) -> PeakReport:
    """Theory and Monte-Carlo of the largest peak, exceedances and crest factor of a profile's drive.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    duration_s : float
        Drive duration T, s.
    rate_hz : float, optional
        Sample rate, Hz (default :func:`default_rate_hz`).
    transform : HermiteTransform, ClipTransform or None
        Non-Gaussian transform (from :func:`vibsynth.transforms.choice.plan_transform`);
        None gives the Gaussian row only.
    records : int
        Monte-Carlo records per row (0: theory only).
    seed : int
        Root seed of the Monte-Carlo (record i uses spawn key (i,)).
    amplitude : {"fixed", "rayleigh"}
        Line amplitudes of the synthesized records (as for drive files).
    progress : callable, optional
        Called with a sample count after each synthesized chunk.
    memory_budget_bytes : int, optional
        Working memory for one periodic record (default the generator's).
    mapper : callable, optional
        Where the Monte-Carlo records are made (see :func:`monte_carlo_peaks`);
        the numbers are the same wherever.

    Returns
    -------
    PeakReport

    References
    ----------
    Rice (1944/45); Davenport (1964); Winterstein (1988); Owen (1956).
    """
    rate = default_rate_hz(profile) if rate_hz is None else float(rate_hz)
    if isinstance(records, bool) or not isinstance(records, (int, np.integer)) or records < 0:
        raise InputError(f"records {records!r} must be a whole number >= 0", "records")
    options = {"amplitude": amplitude}
    if memory_budget_bytes is not None:
        options["memory_budget_bytes"] = int(memory_budget_bytes)
    plan = make_plan(profile, duration_s, rate, **options)  # warnings are carried by the report
    seed_value = seed_entropy(root_seed_sequence(seed))
    plans = [("gaussian", plan, None, None)]
    compensation = None
    warnings = list(plan.warnings)
    if transform is not None:
        planned, design = make_nongaussian_plan(profile, plan, transform)
        record = design.transform_block()
        skewness = record.get("requested_skewness", record["skewness"])
        kurtosis = record.get("requested_kurtosis", record["kurtosis"])
        label = (f"clip {record['crest_factor']:g} x RMS" if record["family"] == "clip"
                 else f"skewness {0.0 if abs(skewness) < 1e-9 else skewness:.3g}, kurtosis {kurtosis:.3g}")
        # theory with the transform as asked: the drive's high-pass takes the applied (pre-corrected)
        # transform's moments back to the requested ones
        plans.append((label, planned, transform, design))
        compensation = design.compensation_record()
        warnings.extend(design.warnings())
    rows = []
    for label, each, each_transform, each_design in plans:
        theory = peak_theory_row(profile, each.line_spectrum, each.resolution_hz, rate, each.duration_s,
                                 each_transform, label)
        mc = (monte_carlo_peaks(each, records, seed_value, profile.grms, progress, each_design, mapper)
              if records else None)
        rows.append(PeakRow(theory, mc, rate))
    return PeakReport(
        profile=profile,
        duration_s=plan.duration_s,
        rate_hz=rate,
        records=int(records),
        seed=seed_value,
        rows=tuple(rows),
        warnings=tuple(dict.fromkeys(warnings)),
        compensation=compensation,
    )
