"""From a recording to a test profile: measure, judge stationarity, fit breakpoints.

:func:`derive_record` reads a recording in chunks (two passes, constant memory)
and measures

* the ASD by Welch's method (Hann, 50 % overlap; the resolution chosen for the
  record: the finest whose estimate keeps :data:`DERIVE_TARGET_DOF` degrees of
  freedom, at most a quarter of the lowest band frequency);
* g RMS, mean, skewness, kurtosis, crest factor; clipped flat tops (a warning:
  a clipped recording understates its kurtosis);
* stationarity: the reverse-arrangements test (Bendat & Piersol) on the mean
  squares of :data:`STATIONARITY_WINDOWS` successive windows;
* the response kurtosis spectrum: the kurtosis of the relative displacement of
  base-excited oscillators (Q 10 by default) over a grid of natural
  frequencies in the band (:func:`response_kurtosis_spectrum`);
* the burst time scale (:func:`burst_time_scale`), when the record is peaky;

and fits a breakpoint profile of N points to the measured ASD
(:func:`fit_breakpoints`): ``mean`` (least squares on log-log axes) or
``envelope`` (never below the measured lines by more than a stated margin).

References
----------
Welch, P. D., IEEE Trans. Audio Electroacoust. AU-15(2), 1967.
Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed., Wiley 2010 (section
4.5.2 reverse arrangements; section 12.4 stationarity of mean squares).
Smallwood, D. O., "Generating non-Gaussian vibration for testing purposes",
Sound and Vibration 39(10), 2005; Kihm, F., Rizzi, S. A., Ferguson, N. S. &
Halfpenny, A., RASD 2013 (response kurtosis).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from vibsynth.errors import InputError, VibsynthWarning

__all__ = [
    "BreakpointFit",
    "DerivedRecord",
    "ResponseKurtosis",
    "burst_time_scale",
    "derive_record",
    "fit_breakpoints",
    "response_kurtosis_spectrum",
]

#: Degrees of freedom the derive Welch estimate aims at (90 % limits about -1.0/+1.2 dB).
DERIVE_TARGET_DOF = 120.0
#: Fewest degrees of freedom derive accepts; a shorter recording is refused (common practice, no source).
MIN_DERIVE_DOF = 16.0
#: Lines the Welch resolution must give below the lowest band frequency: resolution <= lowest / 4.
LINES_BELOW_LOWEST = 4.0
#: Successive windows whose mean squares the stationarity test compares (Bendat & Piersol use 20 to 100).
STATIONARITY_WINDOWS = 40
#: Significance level of the stationarity test (two-sided).
STATIONARITY_SIGNIFICANCE = 0.05
#: Dynamic range, dB below the ASD's peak, within which the band is found when none is given.
BAND_DYNAMIC_RANGE_DB = 40.0
#: Natural frequencies of the response kurtosis spectrum by default.
RESPONSE_POINTS = 12
#: Amplification Q of the response kurtosis spectrum by default (common practice, no source).
DEFAULT_RESPONSE_Q = 10.0
#: |kurtosis - 3| and |skewness| below which a record is called Gaussian (common practice, no source).
GAUSSIAN_KURTOSIS_BAND = 0.2
GAUSSIAN_SKEWNESS_BAND = 0.2
#: Samples at the record's peak magnitude (within 1e-6) that mark clipped flat tops.
CLIPPED_MIN_SAMPLES = 8
#: Highest natural frequency of the response spectrum, as a fraction of the sample rate (the filters' limit).
MAX_FN_FRACTION = 0.3
#: Mean-square windows per lowest-frequency period used for the burst time scale (window = 2 / lowest frequency).
BURST_WINDOW_PERIODS = 2.0


# ---------------------------------------------------------------------------- response kurtosis
@dataclass(frozen=True)
class ResponseKurtosis:
    """Kurtosis of SDOF responses to one record over a grid of natural frequencies.

    Attributes
    ----------
    fn_hz : numpy.ndarray
        Natural frequencies, Hz.
    kurtosis : numpy.ndarray
        Pearson kurtosis of the relative-displacement response at each (3: Gaussian).
    q : float
        Amplification of every oscillator.
    input_kurtosis : float
        Pearson kurtosis of the record itself.
    """

    fn_hz: np.ndarray
    kurtosis: np.ndarray
    q: float
    input_kurtosis: float

    def to_dict(self) -> dict:
        """JSON-ready values (keys carry units).

        Examples
        --------
        >>> ResponseKurtosis(np.array([100.0]), np.array([3.1]), 10.0, 3.0).to_dict()["kurtosis"]
        [3.1]

        References
        ----------
        Kihm, Rizzi, Ferguson & Halfpenny (2013).
        """
        return {"q": self.q, "input_kurtosis": self.input_kurtosis, "fn_hz": [float(f) for f in self.fn_hz],
                "kurtosis": [float(k) for k in self.kurtosis]}


class _PowerSums:
    """Streaming raw power sums of several rows (for mean, variance, kurtosis)."""

    def __init__(self, rows: int):
        self.n = np.zeros(rows)
        self.s = np.zeros((4, rows))

    def update(self, block: np.ndarray, first: np.ndarray) -> None:
        # block: (rows, m); only samples at index >= first[row] (relative to this block) count
        for row in range(block.shape[0]):
            x = block[row, int(first[row]):]
            if x.size:
                self.n[row] += x.size
                x2 = x * x
                self.s[0, row] += x.sum()
                self.s[1, row] += x2.sum()
                self.s[2, row] += (x2 * x).sum()
                self.s[3, row] += (x2 * x2).sum()

    def kurtosis(self) -> np.ndarray:
        n = np.maximum(self.n, 1)
        m1, m2, m3, m4 = (self.s[k] / n for k in range(4))
        var = m2 - m1**2
        c4 = m4 - 4 * m1 * m3 + 6 * m1**2 * m2 - 3 * m1**4
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(var > 0, c4 / var**2, np.nan)


class _ResponseAccumulator:
    """Response kurtosis of a bank of oscillators, fed in chunks (the start-up transient left out)."""

    def __init__(self, fn_hz, q: float, rate_hz: float):
        from vibsynth.durability.filters import SdofFilterBank

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", VibsynthWarning)
            self.bank = SdofFilterBank(fn_hz, q, rate_hz, kind="relative_displacement")
        fn = np.asarray(fn_hz, dtype=float)
        # five decay times Q / (pi fn) from rest, plus the equalizer's delay
        self.skip = np.ceil(5.0 * q / (math.pi * fn) * rate_hz).astype(np.int64) + self.bank.delay_samples
        self.sums = _PowerSums(fn.size)
        self.position = 0

    def update(self, chunk: np.ndarray) -> None:
        out = self.bank.filter_chunk(chunk)
        first = np.clip(self.skip - self.position, 0, out.shape[1])
        self.sums.update(out, first)
        self.position += out.shape[1]

    def kurtosis(self) -> np.ndarray:
        return self.sums.kurtosis()


def default_response_grid(band_low_hz: float, band_high_hz: float, rate_hz: float,
                          points: int = RESPONSE_POINTS) -> np.ndarray:
    """Log-spaced natural frequencies over the band, capped at 0.3 x the sample rate, Hz.

    Examples
    --------
    >>> default_response_grid(20.0, 2000.0, 10240.0, 3).round(1).tolist()
    [20.0, 200.0, 2000.0]

    References
    ----------
    Log-spaced grids as in fatigue damage spectra (common practice, no source).
    """
    high = min(float(band_high_hz), MAX_FN_FRACTION * float(rate_hz))
    low = float(band_low_hz)
    if not (0 < low < high):
        raise InputError(f"band {low:g}-{high:g} Hz leaves no natural frequency below 0.3 x the rate", "fn_hz")
    grid = np.geomspace(low, high, int(points))
    grid[0], grid[-1] = low, high
    return grid


def response_kurtosis_spectrum(x, rate_hz: float, fn_hz, q: float = DEFAULT_RESPONSE_Q) -> ResponseKurtosis:
    """Kurtosis of the relative-displacement response of base-excited oscillators to a record.

    Parameters
    ----------
    x : array_like or iterable of array_like
        The record in g, one array or chunks of it.
    rate_hz : float
        Sample rate, Hz.
    fn_hz : array_like
        Natural frequencies, Hz (each at most 0.3 x the rate for accuracy).
    q : float
        Amplification Q (default 10).

    Returns
    -------
    ResponseKurtosis
        The response of each oscillator starts from rest; its first five
        decay times ``5 Q / (pi fn)`` are left out.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> result = response_kurtosis_spectrum(rng.standard_normal(200_000), 5120.0, [100.0, 500.0])
    >>> bool(np.all(np.abs(result.kurtosis - 3.0) < 0.2))
    True

    References
    ----------
    Smallwood, D. O., "An improved recursive formula for calculating shock
    response spectra", Shock and Vibration Bulletin 51, 1981 (the filters);
    Kihm, Rizzi, Ferguson & Halfpenny (2013): response kurtosis of
    non-Gaussian drives.
    """
    fn = np.atleast_1d(np.asarray(fn_hz, dtype=float))
    if isinstance(x, np.ndarray) or (isinstance(x, (list, tuple)) and x and np.isscalar(x[0])):
        chunks = [np.asarray(x, dtype=np.float64)]
    else:
        chunks = x
    acc = _ResponseAccumulator(fn, float(q), float(rate_hz))
    moments = _PowerSums(1)
    for chunk in chunks:
        c = np.asarray(chunk, dtype=np.float64).ravel()
        acc.update(c)
        moments.update(c.reshape(1, -1), np.zeros(1))
    return ResponseKurtosis(fn_hz=fn, kurtosis=acc.kurtosis(), q=float(q), input_kurtosis=float(moments.kurtosis()[0]))


# ---------------------------------------------------------------------------- burst time scale
def burst_time_scale(mean_squares, window_s: float, kurtosis: float) -> float | None:
    """Burst duration (s) of a record from the mean squares of short successive windows.

    For ``x = a(t) u(t)`` with a log-normal envelope ``a = c exp(sigma g)`` the
    covariance of ``a^2`` at lag ``tau`` is ``E[a^2]^2 (exp(4 sigma^2 rho_g) - 1)``
    with ``exp(4 sigma^2) = kurtosis / 3``; so
    ``rho_g(tau) = ln(1 + C(tau) / mu^2) / ln(kurtosis / 3)``, estimated from
    the windows' mean squares at lags of one window and more (lag 0 holds the
    Gaussian carrier's own scatter).  The burst duration is the integral scale
    of a Gaussian correlation ``exp(-pi tau^2 / T^2)`` through the lag where
    ``rho_g`` falls to one half: ``T = tau_half sqrt(pi / ln 2)``.

    Parameters
    ----------
    mean_squares : array_like
        Mean square of each successive window (g^2).
    window_s : float
        Window length, s.
    kurtosis : float
        The record's Pearson kurtosis.

    Returns
    -------
    float or None
        ``T`` in s; None when the kurtosis is not above 3.2, when the
        correlation is below one half already at one window (peaks shorter
        than the windows, as a memoryless transform makes them: no bursts),
        or when it never falls to one half within a quarter of the record.

    Examples
    --------
    >>> burst_time_scale(np.ones(100), 0.1, 3.0) is None
    True

    References
    ----------
    Smallwood (2005) (the product model); Bendat & Piersol (2010), chapter 8
    (autocovariance estimates).
    """
    k = float(kurtosis)
    m = np.asarray(mean_squares, dtype=float)
    if not (math.isfinite(k) and k > 3.0 + GAUSSIAN_KURTOSIS_BAND) or m.size < 16:
        return None
    mu = float(np.mean(m))
    d = m - mu
    lags = max(2, m.size // 4)
    cov = np.array([float(np.mean(d[: m.size - j] * d[j:])) for j in range(1, lags)])
    rho = np.log(np.maximum(1.0 + cov / mu**2, 1e-12)) / math.log(k / 3.0)
    below = np.nonzero(rho < 0.5)[0]
    if below.size == 0:
        return None
    j = int(below[0])  # rho at lag j + 1 windows is the first below one half
    if j == 0:  # no correlation left at one window (two lowest-frequency periods): peaks too short to be bursts
        return None
    r0, r1 = rho[j - 1], rho[j]
    tau_half = window_s * (j + (r0 - 0.5) / (r0 - r1))
    return float(tau_half * math.sqrt(math.pi / math.log(2.0)))


# ---------------------------------------------------------------------------- breakpoint fits
@dataclass(frozen=True)
class BreakpointFit:
    """A breakpoint profile fitted to a measured ASD.

    Attributes
    ----------
    frequencies_hz, asd_g2_per_hz : numpy.ndarray
        The breakpoints (Hz, g^2/Hz).
    method : str
        ``mean`` or ``envelope``.
    margin_db : float
        Envelope: the fit may lie this far below a measured line, dB.
    log_error_rms_db : float
        RMS over the fitted lines of ``10 log10(fit / measured)``, dB.
    worst_below_db : float
        Largest amount by which the fit lies below a measured line, dB (>= 0).
    worst_above_db : float
        Largest amount by which the fit lies above a measured line, dB (>= 0).
    """

    frequencies_hz: np.ndarray
    asd_g2_per_hz: np.ndarray
    method: str
    margin_db: float
    log_error_rms_db: float
    worst_below_db: float
    worst_above_db: float

    def to_dict(self) -> dict:
        """JSON-ready values (keys carry units).

        Examples
        --------
        >>> fit = fit_breakpoints([10.0, 100.0, 1000.0], [0.01, 0.02, 0.01], 2)
        >>> fit.to_dict()["points"]
        2

        References
        ----------
        See :func:`fit_breakpoints`.
        """
        return {"method": self.method, "points": int(self.frequencies_hz.size), "margin_db": self.margin_db,
                "log_error_rms_db": self.log_error_rms_db, "worst_below_db": self.worst_below_db,
                "worst_above_db": self.worst_above_db,
                "breakpoints": [{"frequency_hz": float(f), "asd_g2_per_hz": float(a)}
                                for f, a in zip(self.frequencies_hz, self.asd_g2_per_hz)]}


def _hat_basis(u: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Piecewise-linear interpolation matrix: values at ``knots`` -> values at ``u`` (rows)."""
    basis = np.zeros((u.size, knots.size))
    index = np.clip(np.searchsorted(knots, u, side="right") - 1, 0, knots.size - 2)
    t = (u - knots[index]) / (knots[index + 1] - knots[index])
    rows = np.arange(u.size)
    basis[rows, index] = 1.0 - t
    basis[rows, index + 1] = t
    return basis


def _least_squares(u, v, w, knots):
    basis = _hat_basis(u, knots)
    sw = np.sqrt(w)
    values, *_ = np.linalg.lstsq(basis * sw[:, None], v * sw, rcond=None)
    residual = basis @ values - v
    return values, float(np.sum(w * residual**2))


def fit_breakpoints(frequencies_hz, asd_g2_per_hz, points: int, method: str = "mean",
                    margin_db: float = 0.0) -> BreakpointFit:
    """Fit N log-log breakpoints to a measured ASD, in the mean or as an envelope.

    The knots are chosen on log-frequency bins (about 200 over the band, the
    ASD averaged in each, so every octave weighs the same): greedy insertion
    of the knot that most reduces the squared log error, then sweeps that move
    each interior knot to its best bin.  ``mean`` keeps the least-squares
    values; ``envelope`` then solves a linear programme: the smallest area
    under the fit on log-log axes with the fit at or above every measured line
    less ``margin_db``.

    Parameters
    ----------
    frequencies_hz : array_like
        Measured line frequencies, Hz (> 0, increasing).
    asd_g2_per_hz : array_like
        Measured ASD at those lines, g^2/Hz (> 0).
    points : int
        Number of breakpoints N, 2 <= N <= number of lines; always honoured.
    method : {"mean", "envelope"}
    margin_db : float
        Envelope only: how far below a measured line the fit may lie, dB (>= 0).

    Returns
    -------
    BreakpointFit

    Examples
    --------
    >>> f = np.linspace(20, 2000, 1000)
    >>> s = np.where(f < 200, 0.01 * (f / 200) ** 1.0, 0.01)
    >>> fit = fit_breakpoints(f, s, 3)
    >>> fit.frequencies_hz.size, round(float(fit.log_error_rms_db), 2) < 0.1
    (3, True)

    References
    ----------
    Least squares on log-log axes (common practice, no source); linear
    programming by scipy.optimize.linprog (HiGHS).
    """
    f = np.asarray(frequencies_hz, dtype=float)
    s = np.asarray(asd_g2_per_hz, dtype=float)
    if f.ndim != 1 or f.shape != s.shape or f.size < 2 or np.any(f <= 0) or np.any(np.diff(f) <= 0):
        raise InputError("frequencies_hz must increase, be > 0 and match asd_g2_per_hz", "frequencies_hz")
    if np.any(~np.isfinite(s)) or np.any(s <= 0):
        raise InputError("the measured ASD must be finite and > 0 at every fitted line", "asd_g2_per_hz")
    if isinstance(points, bool) or int(points) != points or not 2 <= int(points) <= f.size:
        raise InputError(f"points {points!r} must be a whole number from 2 to {f.size} (the measured lines)", "points")
    if method not in ("mean", "envelope"):
        raise InputError(f"method {method!r} must be mean or envelope", "method")
    margin = float(margin_db)
    if not (math.isfinite(margin) and margin >= 0):
        raise InputError(f"margin_db {margin_db!r} must be a number of dB >= 0", "margin_db")
    n = int(points)
    u_all, v_all = np.log10(f), np.log10(s)
    # log-frequency bins: mean ASD in each, bin centre at the mean log frequency
    edges = np.linspace(u_all[0], u_all[-1], min(200, f.size) + 1)
    which = np.clip(np.searchsorted(edges, u_all, side="right") - 1, 0, edges.size - 2)
    counts = np.bincount(which, minlength=edges.size - 1)
    full = counts > 0
    u = (np.bincount(which, u_all, minlength=edges.size - 1)[full]) / counts[full]
    v = np.log10(np.bincount(which, s, minlength=edges.size - 1)[full] / counts[full])
    w = np.ones(u.size)
    candidates = u[1:-1]
    knots = [u_all[0], u_all[-1]]
    u_fit = np.concatenate(([u_all[0]], u, [u_all[-1]]))
    v_fit = np.concatenate(([v[0]], v, [v[-1]]))
    w_fit = np.concatenate(([0.25], w, [0.25]))
    while len(knots) < n:
        best, best_cost = None, math.inf
        for c in candidates:
            if c in knots:
                continue
            trial = np.sort(np.array(knots + [c]))
            if np.min(np.diff(trial)) <= 0:
                continue
            cost = _least_squares(u_fit, v_fit, w_fit, trial)[1]
            if cost < best_cost:
                best, best_cost = c, cost
        if best is None:  # fewer bins than points: split the widest gap
            gaps = np.diff(knots)
            i = int(np.argmax(gaps))
            best = 0.5 * (knots[i] + knots[i + 1])
        knots = sorted(knots + [float(best)])
    knots = np.array(knots)
    for _ in range(3):  # sweeps: move each interior knot to its best candidate between its neighbours
        moved = False
        for i in range(1, n - 1):
            lo, hi = knots[i - 1], knots[i + 1]
            options = candidates[(candidates > lo) & (candidates < hi)]
            best_cost = _least_squares(u_fit, v_fit, w_fit, knots)[1]
            for c in options:
                trial = knots.copy()
                trial[i] = c
                cost = _least_squares(u_fit, v_fit, w_fit, trial)[1]
                if cost < best_cost - 1e-12:
                    best_cost, knots, moved = cost, trial, True
        if not moved:
            break
    values, _ = _least_squares(u_fit, v_fit, w_fit, knots)
    if method == "envelope":
        values = _lp_envelope(u_all, v_all - margin / 10.0, knots)
    fitted = _hat_basis(u_all, knots) @ values
    error_db = 10.0 * (fitted - v_all)
    breakpoints_hz = 10.0**knots
    breakpoints_hz[0], breakpoints_hz[-1] = f[0], f[-1]  # exactly the measured ends (no rounding outside)
    return BreakpointFit(
        frequencies_hz=breakpoints_hz, asd_g2_per_hz=10.0**values, method=method,
        margin_db=margin if method == "envelope" else 0.0,
        log_error_rms_db=float(np.sqrt(np.mean(error_db**2))),
        worst_below_db=float(max(0.0, -np.min(error_db))), worst_above_db=float(max(0.0, np.max(error_db))),
    )


def _lp_envelope(u: np.ndarray, floor: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Knot values (log10) of the lowest-area piecewise-linear curve at or above ``floor`` at every ``u``."""
    from scipy.optimize import linprog

    basis = _hat_basis(u, knots)
    widths = np.diff(knots)
    area = np.zeros(knots.size)  # trapezoid area on log-log axes is linear in the knot values
    area[:-1] += widths / 2
    area[1:] += widths / 2
    result = linprog(area, A_ub=-basis, b_ub=-floor, bounds=[(None, None)] * knots.size, method="highs")
    if not result.success:  # pragma: no cover - the LP is always feasible (raise every knot high enough)
        raise InputError(f"the envelope fit failed ({result.message})", "method")
    return result.x + 1e-9  # a hair above, so rounding never puts the fit below a touching line


# ---------------------------------------------------------------------------- the derive job
@dataclass
class DerivedRecord:
    """What :func:`derive_record` measured and fitted (JSON-ready through :meth:`to_dict`)."""

    source: str
    rate_hz: float
    samples: int
    duration_s: float
    mean_g: float
    grms_g: float
    std_g: float
    skewness: float
    kurtosis: float
    crest_factor: float
    peak_g: float
    band_hz: tuple
    welch: dict
    frequencies_hz: np.ndarray
    asd_g2_per_hz: np.ndarray
    stationarity: dict
    response: ResponseKurtosis
    burst_s: float | None
    fit: BreakpointFit
    clipped_samples: int
    warnings: list = field(default_factory=list)

    @property
    def stationary(self) -> bool:
        """The stationarity judgement (no trend in the windows' mean squares; Bendat & Piersol 4.5.2)."""
        return bool(self.stationarity["stationary"])

    @property
    def amplitude_model(self) -> str:
        """``gaussian``, ``bursts`` or ``transform``: how a drive should reproduce the record's amplitudes.

        Gaussian within 0.2 of kurtosis 3 and skewness 0 (common practice, no
        source); bursts when a burst time scale was found (Smallwood 2005);
        else a memoryless transform (Winterstein 1988).  A record judged not
        stationary gets ``gaussian``: its kurtosis then measures changes of
        level (a 6 dB step alone gives about 4), not peakiness a drive should
        copy; split the recording into stationary parts instead.
        """
        if not self.stationary:
            return "gaussian"
        if abs(self.kurtosis - 3.0) <= GAUSSIAN_KURTOSIS_BAND and abs(self.skewness) <= GAUSSIAN_SKEWNESS_BAND:
            return "gaussian"
        if self.kurtosis > 3.0 and self.burst_s is not None and abs(self.skewness) <= GAUSSIAN_SKEWNESS_BAND:
            return "bursts"
        return "transform"

    def amplitude_section(self) -> dict:
        """The ``[amplitude]`` table of the written profile (see :func:`vibsynth.profile.files.parse_amplitude_section`).

        Examples
        --------
        >>> callable(DerivedRecord.amplitude_section)
        True

        References
        ----------
        Smallwood (2005) for the burst parameters.
        """
        table = {"model": self.amplitude_model, "kurtosis": round(self.kurtosis, 4),
                 "skewness": round(self.skewness, 4), "crest_factor": round(self.crest_factor, 4),
                 "source": f"measured by vibsynth derive from {self.source}"}
        if table["model"] == "bursts":
            table["burst_s"] = round(float(self.burst_s), 4)
        return table

    def profile(self, name: str = "derived", description: str = ""):
        """The fitted breakpoints as an :class:`~vibsynth.profile.asd.AsdProfile` (Hz, g^2/Hz).

        Examples
        --------
        >>> callable(DerivedRecord.profile)
        True

        References
        ----------
        See :func:`fit_breakpoints`.
        """
        from vibsynth.profile.asd import AsdProfile

        return AsdProfile(self.fit.frequencies_hz, self.fit.asd_g2_per_hz, name=name,
                          description=description or f"Derived from {self.source}")

    def to_dict(self, profile_path: str | None = None) -> dict:
        """JSON keys: grms, kurtosis, skewness, stationary, profile_path, and the rest with units.

        Examples
        --------
        >>> callable(DerivedRecord.to_dict)
        True

        References
        ----------
        RFC 8259 (JSON).
        """
        return {
            "source": self.source,
            "profile_path": profile_path,
            "grms": self.grms_g,
            "kurtosis": self.kurtosis,
            "skewness": self.skewness,
            "stationary": self.stationary,
            "mean_g": self.mean_g,
            "crest_factor": self.crest_factor,
            "peak_g": self.peak_g,
            "rate_hz": self.rate_hz,
            "samples": self.samples,
            "duration_s": self.duration_s,
            "band_hz": list(self.band_hz),
            "welch": self.welch,
            "stationarity": self.stationarity,
            "response_kurtosis": self.response.to_dict(),
            "burst_s": self.burst_s,
            "amplitude": self.amplitude_section(),
            "fit": self.fit.to_dict(),
            "clipped_samples": self.clipped_samples,
            "warnings": list(self.warnings),
        }


def _find_band(frequencies: np.ndarray, asd: np.ndarray) -> tuple[float, float]:
    """Band of a measured ASD: within BAND_DYNAMIC_RANGE_DB of its peak, leakage steps at the edges left out."""
    first = 3  # lines 0-2 hold the Hann window's leakage of each segment's removed mean
    if asd.size <= first + 8:
        raise InputError("the recording gives too few frequency lines to find a band; give the band", "band")
    peak = first + int(np.argmax(asd[first:]))
    top = float(asd[peak])
    if not top > 0:
        raise InputError("the recording has no power at any frequency above 0 Hz", "band")
    floor = top * 10.0 ** (-BAND_DYNAMIC_RANGE_DB / 10.0)
    lo = hi = peak  # the contiguous stretch around the peak within the dynamic range
    while lo > first and asd[lo - 1] >= floor:
        lo -= 1
    while hi < asd.size - 1 and asd[hi + 1] >= floor:
        hi += 1
    # step inward past the skirts (window leakage, a burst envelope's spread): an edge line lies within 3 dB of
    # the median of the sixth of an octave inside it
    half_power = 10.0 ** (-3.0 / 10.0)

    def inside_span(k: int) -> int:
        return max(2, int(frequencies[k] * (2.0 ** (1.0 / 6.0) - 1.0) / (frequencies[1] - frequencies[0])))

    while hi - lo > 8 and asd[lo] < half_power * float(np.median(asd[lo + 1 : lo + 1 + inside_span(lo)])):
        lo += 1
    while hi - lo > 8 and asd[hi] < half_power * float(np.median(asd[max(lo, hi - inside_span(hi)) : hi])):
        hi -= 1
    return float(frequencies[lo]), float(frequencies[hi])


def derive_record(drive, *, band_hz: tuple | None = None, points: int = 8, method: str = "mean",
                  margin_db: float = 0.0, q: float = DEFAULT_RESPONSE_Q, fn_hz=None,
                  chunk_samples: int = 1 << 18) -> DerivedRecord:
    """Measure a recording and fit a breakpoint profile to it (two streaming passes).

    Parameters
    ----------
    drive : vibsynth.io.drivefile.DriveFile
        The recording, opened with :func:`vibsynth.io.drivefile.open_drive` (values in g).
    band_hz : (float, float), optional
        Band to fit, Hz (default: where the ASD lies within 40 dB of its peak).
    points : int
        Breakpoints of the fitted profile (default 8).
    method : {"mean", "envelope"}
        See :func:`fit_breakpoints`.
    margin_db : float
        Envelope margin, dB.
    q : float
        Amplification of the response kurtosis oscillators (default 10).
    fn_hz : array_like, optional
        Natural frequencies of the response kurtosis spectrum (default
        :data:`RESPONSE_POINTS` log-spaced over the band, at most 0.3 x the rate).
    chunk_samples : int
        Samples per read.

    Returns
    -------
    DerivedRecord

    Raises
    ------
    InputError
        A recording too short for the band's lowest frequency (the message
        gives the length needed), a constant recording, non-finite samples
        (from the reader), a band outside the record's frequencies.

    Warns
    -----
    VibsynthWarning
        Clipped flat tops (the kurtosis is then understated); an estimate with
        fewer degrees of freedom than aimed at; a non-stationary record.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from vibsynth.io.drivefile import write_drive, open_drive
    >>> x = np.random.default_rng(2).standard_normal(60_000)
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "rec.npy"
    >>> _ = write_drive(path, [x], rate_hz=2000.0, samples=x.size)
    >>> result = derive_record(open_drive(path), band_hz=(20.0, 500.0), points=4)
    >>> result.fit.frequencies_hz.size, round(result.grms_g, 1)
    (4, 1.0)

    References
    ----------
    Welch (1967); Bendat & Piersol (2010), sections 4.5.2 and 12.4; see the module docstring.
    """
    from vibsynth.analysis.stationarity import reverse_arrangements_test
    from vibsynth.analysis.stats import MomentAccumulator, WindowRmsAccumulator
    from vibsynth.analysis.welch import WelchAccumulator, choose_nperseg

    rate = float(drive.rate_hz)
    where = str(drive.path)
    start, stop = drive.steady_range
    n = stop - start
    found: list[str] = []

    def note(message: str) -> None:
        found.append(message)
        warnings.warn(f"{where}: {message}", VibsynthWarning, stacklevel=3)

    if n < 64:
        raise InputError(f"holds {n} samples; a recording needs thousands to be measured", where)
    window_samples = max(1, n // STATIONARITY_WINDOWS)
    moments = MomentAccumulator(rate)
    windows = WindowRmsAccumulator(rate, window_samples)
    coarse = choose_nperseg(n, rate, target_dof=DERIVE_TARGET_DOF) if band_hz is None else None
    coarse_welch = WelchAccumulator(rate, min(coarse.nperseg, n)) if coarse is not None and coarse.segments else None
    for chunk in drive.iter_chunks(chunk_samples, start, stop):
        moments.update(chunk)
        windows.update(chunk)
        if coarse_welch is not None:
            coarse_welch.update(chunk)
    first = moments.result()
    if not first.std > 0 or not math.isfinite(first.kurtosis):
        raise InputError(f"is constant (every sample {first.mean:g} g): there is no vibration to measure", where)
    if first.std < 1e-9 * max(abs(first.mean), 1e-300):
        raise InputError(f"varies by {first.std:.3g} g about a mean of {first.mean:g} g: too little to measure", where)

    # ---- band and resolution
    if band_hz is None:
        estimate = coarse_welch.result()
        low, high = _find_band(estimate.frequencies_hz, estimate.asd)
    else:
        low, high = (float(b) for b in band_hz)
        if not (0 < low < high <= rate / 2):
            raise InputError(f"band {low:g}-{high:g} Hz must lie between 0 and half the rate ({rate / 2:g} Hz)",
                             "band")
    coarsest = low / LINES_BELOW_LOWEST
    needed = choose_nperseg(max(n, 2), rate, resolution_hz=coarsest)
    if needed.segments < 1 or needed.dof < MIN_DERIVE_DOF:
        from vibsynth.analysis.welch import _samples_for_dof

        need_s = _samples_for_dof(MIN_DERIVE_DOF, needed.nperseg) / rate
        raise InputError(
            f"the recording's {n / rate:g} s are too short for a lowest frequency of {low:g} Hz: "
            f"{MIN_DERIVE_DOF:g} degrees of freedom at {rate / needed.nperseg:g} Hz resolution (<= {low:g} / "
            f"{LINES_BELOW_LOWEST:g} Hz) need at least {need_s:.3g} s",
            where,
        )
    choice = choose_nperseg(n, rate, target_dof=DERIVE_TARGET_DOF, coarsest_resolution_hz=coarsest)
    if not choice.target_reached:
        choice = needed
        note(f"the estimate has {choice.dof:.0f} degrees of freedom, fewer than the {DERIVE_TARGET_DOF:g} aimed at: "
             "the ASD scatters more (a longer recording would steady it)")

    # ---- second pass: fine Welch, response kurtosis, burst windows, flat tops
    grid = default_response_grid(low, high, rate) if fn_hz is None else np.atleast_1d(np.asarray(fn_hz, float))
    response = _ResponseAccumulator(grid, float(q), rate)
    welch = WelchAccumulator(rate, choice.nperseg)
    burst_window = max(1, int(round(BURST_WINDOW_PERIODS / low * rate)))
    squares = WindowRmsAccumulator(rate, burst_window)
    peak = first.peak
    at_peak = 0
    for chunk in drive.iter_chunks(chunk_samples, start, stop):
        centred = chunk - first.mean
        welch.update(chunk)
        response.update(centred)
        squares.update(centred)
        at_peak += int(np.count_nonzero(np.abs(chunk) >= peak * (1.0 - 1e-6)))
    estimate = welch.result()
    if at_peak >= CLIPPED_MIN_SAMPLES:
        note(f"{at_peak} samples sit at the peak magnitude {peak:.4g} g: flat tops of a clipped recording "
             "(the measured kurtosis and crest factor understate the vibration's); re-record with more headroom")

    # ---- stationarity: reverse arrangements on the mean squares of successive windows
    rms = np.asarray(windows.result())
    test = reverse_arrangements_test(rms**2, STATIONARITY_SIGNIFICANCE)
    stationarity = {"method": "reverse arrangements of window mean squares (Bendat & Piersol 4.5.2)",
                    "window_s": window_samples / rate, **test.to_dict()}
    if not test.stationary:
        note(f"not stationary: the mean squares of {test.windows} windows of {window_samples / rate:.3g} s show a "
             f"trend ({test.count} reverse arrangements, {test.low:.0f}-{test.high:.0f} expected at "
             f"{STATIONARITY_SIGNIFICANCE:g}); split the recording into stationary parts")

    # ---- fit
    lines = (estimate.frequencies_hz >= low * (1 - 1e-9)) & (estimate.frequencies_hz <= high * (1 + 1e-9))
    f, s = estimate.frequencies_hz[lines], np.asarray(estimate.asd)[lines]
    if f.size < 2:
        raise InputError(f"the band {low:g}-{high:g} Hz holds fewer than two lines at {estimate.resolution_hz:g} Hz",
                         "band")
    if np.any(s <= 0):
        raise InputError(f"the ASD is zero at some line in {low:g}-{high:g} Hz; give a narrower band", "band")
    fit = fit_breakpoints(f, s, min(int(points), f.size), method=method, margin_db=margin_db)
    ms = np.asarray(squares.result()) ** 2
    burst = burst_time_scale(ms, burst_window / rate, first.kurtosis)
    return DerivedRecord(
        source=where, rate_hz=rate, samples=n, duration_s=n / rate, mean_g=first.mean, grms_g=first.rms,
        std_g=first.std, skewness=first.skewness, kurtosis=first.kurtosis, crest_factor=first.crest_factor,
        peak_g=first.peak, band_hz=(low, high),
        welch={"resolution_hz": estimate.resolution_hz, "segments": estimate.segments, "dof": estimate.dof,
               "nperseg": estimate.nperseg, "window": "hann", "overlap_fraction": 0.5},
        frequencies_hz=f, asd_g2_per_hz=s, stationarity=stationarity,
        response=ResponseKurtosis(fn_hz=grid, kurtosis=response.kurtosis(), q=float(q),
                                  input_kurtosis=first.kurtosis),
        burst_s=burst, fit=fit, clipped_samples=at_peak, warnings=found,
    )
