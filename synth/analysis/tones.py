"""Separating the parts of a mixed-mode record: tones by least squares, the random part, the schedule's steps.

A mixed-mode record is modelled as ``x(t) = g(t) (sum_k tone_k(t) + r(t))``
with ``g`` the level schedule's gain (1 without a schedule), each tone
``A_k(t) cos(2 pi c_k(t) - phi_k)`` on its known phase law ``c_k``
(:meth:`vibsynth.profile.mixed.Sweep.cycles`), and ``r`` the random part
(broadband and narrow bands).

1. One streaming pass accumulates, in windows of ``W`` samples, the normal
   equations of the least-squares fit of ``g(t) cos(2 pi c_k(t))`` and
   ``g(t) sin(2 pi c_k(t))`` (every tone jointly, the commanded amplitude
   shape along a sweep included) to the record; the mean square of each
   schedule step's plateau; the mean square of ``x / g``; and short-window
   RMS values.  Fixed tones are solved over the whole record (amplitude) and
   over its two halves (the phase drift between them gives the frequency);
   swept tones window by window (amplitude along the sweep).
2. The random part ``r = x / g - sum of the fitted tones`` is then verified by
   :func:`vibsynth.analysis.verify.verify_record` against the broadband target,
   with the tone lines and the narrow bands left out of the line-by-line rule.
3. Criteria are added for each part: ``tone_amplitude`` (and
   ``tone_frequency``) per fixed tone, ``swept_tone_amplitude`` per swept tone
   (worst window), ``narrow_band`` per band (its mean square in the Welch
   estimate above the broadband target), ``total_rms`` and ``schedule_step``
   per step (RMS of the plateau against the level times the total target).
   The random part's criteria keep their names; their reasons start with
   "random part:".

With narrow bands, a kurtosis or skewness target of the background is
judged on the random part as ``3 + (K - 3) s^4`` and ``S s^3`` (``s^2`` the
background's share of the random variance; cumulants of independent parts
add, Kendall & Stuart, *The Advanced Theory of Statistics*, vol. 1).

Tolerances: tone amplitude 5 % (common practice, no source) widened to five
standard deviations of the least-squares estimate, ``sigma_A^2 = S(f) / T``
for a tone in a random background of one-sided ASD ``S`` over ``T`` seconds
(the white-noise Cramer-Rao bound ``2 sigma^2 / N``, Kay 1993, written with
``S = 2 sigma^2 / f_s``); tone frequency 0.1 % likewise widened; schedule
steps and the total RMS use the g RMS tolerance.

References
----------
Kay, S. M., *Fundamentals of Statistical Signal Processing: Estimation Theory*,
Prentice Hall 1993, sec. 3.11 and 7.10 (least squares and the Cramer-Rao bound
for sinusoidal amplitude and frequency); Bendat, J. S. & Piersol, A. G.,
*Random Data*, 4th ed., Wiley 2010 (Welch estimates, mean square in a band).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from vibsynth.profile.mixed import MixedParts

#: Longest window for swept-tone amplitudes, s.
SWEEP_WINDOW_S = 1.0
#: Windows of the RMS-over-time trace of a scheduled record.
RMS_TRACE_WINDOWS = 400


def _basis(parts: MixedParts, t: np.ndarray, gain: np.ndarray) -> np.ndarray:
    """(m, 2K) columns ``g a_k(t)/a_k(0) cos(2 pi c_k)``, ``... sin(2 pi c_k)`` for every tone."""
    columns = np.empty((t.size, 2 * len(parts.tones)))
    for k, tone in enumerate(parts.tones):
        cycles = tone.sweep.cycles(t)
        phase = 2.0 * np.pi * (cycles - np.floor(cycles))
        shape = gain
        if tone.amplitude_points:
            shape = gain * tone.amplitude_g(tone.sweep.frequency_hz(t)) / tone.peak_g
        columns[:, 2 * k] = shape * np.cos(phase)
        columns[:, 2 * k + 1] = shape * np.sin(phase)
    return columns


def _solve(gram: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    if gram.size == 0:
        return np.zeros(0)
    solution, *_ = np.linalg.lstsq(gram, rhs, rcond=1e-10)
    return solution


@dataclasses.dataclass
class ToneFit:
    """What the least-squares pass found: coefficients per window and over the whole record."""

    window_samples: int
    window_starts: list
    window_gram: list
    window_rhs: list
    coefficients: np.ndarray
    window_coefficients: list


def fit_tones(chunks, total: int, rate_hz: float, parts: MixedParts, skip_start: int, skip_end: int) -> dict:
    """Least-squares fit of the tones and the step/total mean squares of a mixed-mode record (one streaming pass).

    Parameters
    ----------
    chunks : callable
        Returns a fresh iterable of 1-D chunks of the record, g.
    total : int
        Samples in the record.
    rate_hz : float
        Sample rate, Hz.
    parts : vibsynth.profile.mixed.MixedParts
        The commanded tones and schedule.
    skip_start, skip_end : int
        Samples left out at the start and end (the fade ramps).

    Returns
    -------
    dict
        ``fit`` (:class:`ToneFit`), ``halves`` (coefficients of each half),
        ``plateau_mean_square`` and ``plateau_samples`` per step, ``normalised_mean_square``
        (of ``x / g``), ``gain_moments`` (mean g^2, mean g^4), ``trace`` (window RMS), ``peak_g``.

    Examples
    --------
    >>> from vibsynth.profile.mixed import Sweep, Tone
    >>> t = np.arange(4096) / 1024.0
    >>> x = 2.0 * np.cos(2 * np.pi * 50.0 * t - 0.3)
    >>> out = fit_tones(lambda: [x], x.size, 1024.0, MixedParts(tones=(Tone(Sweep(50.0), 2.0),)), 0, 0)
    >>> round(float(np.hypot(*out["fit"].coefficients[:2])), 6)
    2.0

    References
    ----------
    Kay (1993), linear least squares (normal equations) for sinusoidal amplitudes.
    """
    steady_lo, steady_hi = skip_start, total - skip_end
    steady = steady_hi - steady_lo
    n_coef = 2 * len(parts.tones)
    window = max(1, min(int(round(SWEEP_WINDOW_S * rate_hz)), steady // 8 if steady >= 8 else steady))
    n_windows = -(-steady // window)
    grams = [np.zeros((n_coef, n_coef)) for _ in range(n_windows)]
    rhs = [np.zeros(n_coef) for _ in range(n_windows)]
    schedule = parts.schedule
    plateaus = schedule.plateaus_s() if schedule is not None else []
    plateau_sum = np.zeros(len(plateaus))
    plateau_count = np.zeros(len(plateaus), dtype=np.int64)
    trace_window = max(1, steady // RMS_TRACE_WINDOWS)
    trace_sum = np.zeros(-(-steady // trace_window))
    trace_count = np.zeros(trace_sum.size, dtype=np.int64)
    norm_sum, gain2_sum, gain4_sum, peak = 0.0, 0.0, 0.0, 0.0
    position = 0
    for chunk in chunks():
        x = np.asarray(chunk, dtype=float).reshape(-1)
        start, stop = position, position + x.size
        position = stop
        lo, hi = max(start, steady_lo), min(stop, steady_hi)
        if hi <= lo:
            continue
        seg = x[lo - start : hi - start]
        t = np.arange(lo, hi, dtype=float) / rate_hz
        gain = schedule.gain(t) if schedule is not None else np.ones(seg.size)
        peak = max(peak, float(np.max(np.abs(seg))))
        norm_sum += float(np.sum((seg / gain) ** 2))
        gain2_sum += float(np.sum(gain**2))
        gain4_sum += float(np.sum(gain**4))
        for k, (a, b) in enumerate(plateaus):
            ia, ib = max(lo, int(math.ceil(a * rate_hz))), min(hi, int(math.ceil(b * rate_hz)))
            if ib > ia:
                piece = x[ia - start : ib - start]
                plateau_sum[k] += float(np.dot(piece, piece))
                plateau_count[k] += piece.size
        rel = np.arange(lo, hi) - steady_lo
        np.add.at(trace_sum, rel // trace_window, seg * seg)
        np.add.at(trace_count, rel // trace_window, 1)
        if n_coef:
            basis = _basis(parts, t, gain)
            first_w, last_w = (lo - steady_lo) // window, (hi - 1 - steady_lo) // window
            for w in range(first_w, last_w + 1):
                a = max(lo, steady_lo + w * window) - lo
                b = min(hi, steady_lo + (w + 1) * window) - lo
                block = basis[a:b]
                grams[w] += block.T @ block
                rhs[w] += block.T @ seg[a:b]
    gram_all = sum(grams) if grams else np.zeros((n_coef, n_coef))
    rhs_all = sum(rhs) if rhs else np.zeros(n_coef)
    coefficients = _solve(gram_all, rhs_all)
    half = max(1, n_windows // 2)
    halves = (_solve(sum(grams[:half]), sum(rhs[:half])),
              _solve(sum(grams[half:]), sum(rhs[half:])) if n_windows > 1 else np.zeros(n_coef))
    half_centres_s = ((steady_lo + half * window / 2) / rate_hz,
                      (steady_lo + (half * window + steady) / 2) / rate_hz)
    swept = [k for k, tone in enumerate(parts.tones) if tone.sweep.swept]
    fixed = [k for k in range(len(parts.tones)) if k not in swept]
    fixed_cols = [c for k in fixed for c in (2 * k, 2 * k + 1)]
    swept_cols = [c for k in swept for c in (2 * k, 2 * k + 1)]
    window_coefficients = []
    for w in range(n_windows):
        beta = coefficients.copy()
        if swept_cols:
            g, r = grams[w], rhs[w] - grams[w][:, fixed_cols] @ coefficients[fixed_cols]
            beta[swept_cols] = _solve(g[np.ix_(swept_cols, swept_cols)], r[swept_cols])
        window_coefficients.append(beta)
    fit = ToneFit(window, [steady_lo + w * window for w in range(n_windows)], grams, rhs, coefficients,
                  window_coefficients)
    trace_rms = np.sqrt(trace_sum / np.maximum(trace_count, 1))
    return {
        "fit": fit,
        "halves": halves,
        "half_centres_s": half_centres_s,
        "plateau_mean_square": plateau_sum / np.maximum(plateau_count, 1),
        "plateau_samples": plateau_count,
        "normalised_mean_square": norm_sum / max(steady, 1),
        "gain_moments": (gain2_sum / max(steady, 1), gain4_sum / max(steady, 1)),
        "trace_t_s": (steady_lo + (np.arange(trace_rms.size) + 0.5) * trace_window) / rate_hz,
        "trace_rms_g": trace_rms,
        "peak_g": peak,
        "steady_s": steady / rate_hz,
    }


def residual_chunks(chunks, rate_hz: float, parts: MixedParts, fit: ToneFit, skip_start: int):
    """The random part ``x / g - fitted tones``, chunk by chunk (a generator over ``chunks()``).

    Samples before ``skip_start`` pass unchanged (divided by the gain); the
    windows' coefficients are used inside the steady part.

    Examples
    --------
    >>> from vibsynth.profile.mixed import Sweep, Tone
    >>> t = np.arange(4096) / 1024.0
    >>> x = 2.0 * np.cos(2 * np.pi * 50.0 * t)
    >>> parts = MixedParts(tones=(Tone(Sweep(50.0), 2.0),))
    >>> f = fit_tones(lambda: [x], x.size, 1024.0, parts, 0, 0)["fit"]
    >>> float(np.max(np.abs(np.concatenate(list(residual_chunks(lambda: [x], 1024.0, parts, f, 0)))))) < 1e-9
    True

    References
    ----------
    Kay (1993), least-squares residual.
    """
    schedule = parts.schedule
    position = 0
    n_windows = len(fit.window_starts)
    for chunk in chunks():
        x = np.asarray(chunk, dtype=float).reshape(-1)
        start = position
        position += x.size
        t = np.arange(start, position, dtype=float) / rate_hz
        gain = schedule.gain(t) if schedule is not None else np.ones(x.size)
        out = x / gain
        if parts.tones:
            basis = _basis(parts, t, np.ones(x.size))
            index = np.clip((np.arange(start, position) - skip_start) // fit.window_samples, 0, n_windows - 1)
            for w in np.unique(index):
                mask = index == w
                out[mask] -= basis[mask] @ fit.window_coefficients[w]
        yield out


def _amp_phase(beta: np.ndarray, k: int) -> tuple[float, float]:
    a, b = beta[2 * k], beta[2 * k + 1]
    return float(math.hypot(a, b)), float(math.atan2(b, a))


def verify_mixed_record(verify, source, total: int, rate_hz: float, profile, criteria, *, resolution_hz=None,
                        target_dof=None, skip_start_samples: int = 0, skip_end_samples: int = 0, excerpt_s: float = 0.25):
    """Verify a mixed-mode record part by part (see the module docstring).

    Parameters
    ----------
    verify : callable
        :func:`vibsynth.analysis.verify.verify_record` (passed in to keep one verifier).
    source : callable
        Returns a fresh iterable of 1-D chunks, g (called three times or more).
    total : int
        Samples in the record.
    rate_hz : float
        Sample rate, Hz.
    profile : AsdProfile
        Target, with ``profile.mixed`` (tones, narrow bands, schedule).
    criteria : vibsynth.analysis.verify.Criteria
    resolution_hz, target_dof, skip_start_samples, skip_end_samples, excerpt_s
        As for :func:`vibsynth.analysis.verify.verify_record`.

    Returns
    -------
    vibsynth.analysis.verify.Verification
        The random part's verification with the parts' criteria added and
        ``mixed`` holding the measured parts.

    Examples
    --------
    >>> from vibsynth.analysis.verify import verify_record
    >>> from vibsynth.profile.asd import AsdProfile
    >>> from vibsynth.profile.mixed import Sweep, Tone
    >>> rate, n = 2048.0, 1 << 16
    >>> profile = AsdProfile([20.0, 400.0], [0.01, 0.01], mixed=MixedParts(tones=(Tone(Sweep(100.0), 2.0),)))
    >>> f = np.fft.rfftfreq(n, 1 / rate)
    >>> phases = np.random.default_rng(1).uniform(0, 2 * np.pi, f.size)
    >>> x = np.fft.irfft(n * np.sqrt(profile.evaluate(f) * rate / n / 2) * np.exp(1j * phases), n)
    >>> x += 2.0 * np.cos(2 * np.pi * 100.0 * np.arange(n) / rate)
    >>> result = verify_record(x, rate, profile)
    >>> result.passed, round(result.mixed["tones"][0]["measured_peak_g"], 1)
    (True, 2.0)

    References
    ----------
    Kay (1993); Bendat & Piersol (2010); see the module docstring.
    """
    parts: MixedParts = profile.mixed
    random_profile = dataclasses.replace(profile, mixed=None)
    measured = fit_tones(source, total, rate_hz, parts, skip_start_samples, skip_end_samples)
    fit = measured["fit"]
    steady_s = measured["steady_s"]
    mean_g2, mean_g4 = measured["gain_moments"]
    weight = mean_g4 / mean_g2**2 if mean_g2 > 0 else 1.0

    # --- the random part, tone lines and narrow bands left out of the line rule
    excluded = []
    for tone in parts.tones:
        if not tone.sweep.swept:
            excluded.append((tone.frequency_hz, tone.frequency_hz))
    for band in parts.narrow_bands:
        excluded.append(band.frequency_range_hz())
    inner_criteria = dataclasses.replace(criteria, excluded_bands_hz=tuple(criteria.excluded_bands_hz) + tuple(excluded))
    if parts.narrow_bands and criteria.amplitude_target:
        # The random part holds the (Gaussian) narrow bands as well: cumulants of independent parts add, so
        # kurtosis 3 + (K - 3) s^4 and skewness S s^3 with s^2 the background's share of the variance; a clip
        # level bounds the background alone, so the crest factor is reported, not judged.
        share = random_profile.grms**2 / (random_profile.grms**2 + sum(b.rms_g**2 for b in parts.narrow_bands))
        inner_criteria = dataclasses.replace(
            inner_criteria,
            kurtosis_target=None if criteria.kurtosis_target is None else 3.0 + (criteria.kurtosis_target - 3.0) * share**2,
            skewness_target=None if criteria.skewness_target is None else criteria.skewness_target * share**1.5,
            crest_factor_limit=None)
    inner = verify(lambda: residual_chunks(source, rate_hz, parts, fit, skip_start_samples), rate_hz, random_profile,
                   inner_criteria, n_samples=total, resolution_hz=resolution_hz, target_dof=target_dof,
                   skip_start_samples=skip_start_samples, skip_end_samples=skip_end_samples, excerpt_s=excerpt_s)
    checks = []
    for check in inner.checks:
        check = dict(check)
        check["part"] = "random"
        check["reason"] = "random part: " + check["reason"]
        if parts.narrow_bands and check["name"] in ("grms", "asd_bands", "crossing_rate", "gaussian_largest_peak",
                                                    "gaussian_kurtosis", "gaussian_tail_3_sigma", "stationarity"):
            # the broadband target does not hold the narrow bands' power: judged by total_rms and narrow_band
            check["judged"] = False
            check["summary"] += " (not judged: the broadband target does not describe the narrow bands; see narrow_band and total_rms)"
        checks.append(check)

    def add(name, part, ok, summary, reason, **values):
        checks.append({"name": name, "group": name, "pass": bool(ok), "judged": True, "part": part, **values,
                       "summary": summary, "reason": reason})

    # --- tones
    tones_out = []
    estimate = inner.estimate
    for k, tone in enumerate(parts.tones):
        label = f"tone {k + 1} ({tone.frequency_hz:g} Hz{' swept' if tone.sweep.swept else ''})"
        background = float(random_profile.evaluate(np.array([tone.frequency_hz]))[0])
        for band in parts.narrow_bands:
            lo, hi = band.frequency_range_hz()
            if lo <= tone.frequency_hz <= hi:
                background += band.asd_g2_per_hz
        entry = {"part": label, "frequency_hz": tone.frequency_hz, "target_peak_g": tone.peak_g}
        if not tone.sweep.swept:
            amplitude, phase = _amp_phase(fit.coefficients, k)
            sigma = math.sqrt(max(background, 0.0) * weight / max(steady_s, 1e-12))
            limit = max(criteria.tone_tolerance_percent, 500.0 * sigma / tone.peak_g)
            error = 100.0 * (amplitude / tone.peak_g - 1.0)
            ok = abs(error) <= limit
            add("tone_amplitude", label, ok,
                f"{label}: {amplitude:.4g} g peak against {tone.peak_g:.4g} g ({error:+.2f} %, limit +/-{limit:.3g} %)",
                f"{label}: amplitude {amplitude:.4g} g peak against {tone.peak_g:.4g} g ({error:+.2f} %, "
                f"limit +/-{limit:.3g} %)",
                measured_peak_g=amplitude, target_peak_g=tone.peak_g, measured_error_percent=error,
                limit_percent=limit)
            entry.update(measured_peak_g=amplitude, error_percent=error, measured_phase_deg=math.degrees(-phase))
            a1, p1 = _amp_phase(measured["halves"][0], k)
            a2, p2 = _amp_phase(measured["halves"][1], k)
            spacing = measured["half_centres_s"][1] - measured["half_centres_s"][0]
            if a1 > 0 and a2 > 0 and spacing > 0:
                drift = (p2 - p1 + math.pi) % (2.0 * math.pi) - math.pi
                frequency = tone.frequency_hz - drift / (2.0 * math.pi * spacing)
                f_error = 100.0 * (frequency / tone.frequency_hz - 1.0)
                sigma_f = math.sqrt(2.0) * 2.0 * sigma / tone.peak_g / (2.0 * math.pi * spacing)
                f_limit = max(0.1, 500.0 * sigma_f / tone.frequency_hz)
                add("tone_frequency", label, abs(f_error) <= f_limit,
                    f"{label}: {frequency:.6g} Hz ({f_error:+.4f} %, limit +/-{f_limit:.3g} %)",
                    f"{label}: frequency {frequency:.6g} Hz against {tone.frequency_hz:g} Hz ({f_error:+.4f} %, "
                    f"limit +/-{f_limit:.3g} %)",
                    measured_frequency_hz=frequency, target_frequency_hz=tone.frequency_hz,
                    measured_error_percent=f_error, limit_percent=f_limit)
                entry.update(measured_frequency_hz=frequency, frequency_error_percent=f_error)
        else:
            worst, worst_f, rows = 0.0, None, []
            for w, start in enumerate(fit.window_starts):
                stop = min(start + fit.window_samples, total - skip_end_samples)
                t_mid = 0.5 * (start + stop) / rate_hz
                f_mid = float(tone.sweep.frequency_hz(np.array([t_mid]))[0])
                if tone.amplitude_points:
                    shape = float(tone.amplitude_g(np.array([f_mid]))[0])
                    amplitude = _amp_phase(fit.window_coefficients[w], k)[0] * shape / tone.peak_g
                else:
                    shape = tone.peak_g
                    amplitude = _amp_phase(fit.window_coefficients[w], k)[0]
                err = 100.0 * (amplitude / shape - 1.0)
                rows.append((t_mid, f_mid, amplitude, shape))
                if abs(err) > abs(worst):
                    worst, worst_f = err, f_mid
            window_s = fit.window_samples / rate_hz
            bg = max(background, float(np.max(random_profile.asd_g2_per_hz)))
            sigma = math.sqrt(bg * weight / window_s)
            limit = max(criteria.tone_tolerance_percent, 500.0 * sigma / tone.max_peak_g)
            # the whole sweep at once: the commanded law and amplitude shape, one scale factor
            overall = 100.0 * (_amp_phase(fit.coefficients, k)[0] / tone.peak_g - 1.0)
            overall_limit = max(criteria.tone_tolerance_percent,
                                500.0 * math.sqrt(bg * weight / max(steady_s, 1e-12)) / tone.peak_g)
            ok = abs(worst) <= limit and abs(overall) <= overall_limit
            add("swept_tone_amplitude", label, ok,
                f"{label}: {overall:+.2f} % over the sweep (limit +/-{overall_limit:.3g} %); worst window {worst:+.2f} % "
                f"at {worst_f or 0:.4g} Hz ({len(rows)} windows of {window_s:g} s, limit +/-{limit:.3g} %)",
                f"{label}: amplitude along the sweep off by {overall:+.2f} % overall (limit +/-{overall_limit:.3g} %), "
                f"{worst:+.2f} % in the worst window at {worst_f or 0:.4g} Hz (limit +/-{limit:.3g} %)",
                measured_error_percent=overall, limit_percent=overall_limit,
                measured_worst_window_error_percent=worst, measured_frequency_hz=worst_f,
                limit_window_percent=limit, measured_windows=len(rows))
            entry.update(error_percent=overall, worst_error_percent=worst, windows=[
                {"t_s": t_, "frequency_hz": f_, "measured_peak_g": a_, "target_peak_g": s_} for t_, f_, a_, s_ in rows])
        tones_out.append(entry)

    # --- narrow bands: mean square above the broadband target over the band's range
    bands_out = []
    df = estimate.resolution_hz
    f = estimate.frequencies_hz
    for j, band in enumerate(parts.narrow_bands):
        label = f"narrow band {j + 1} ({band.frequency_hz:g} Hz)"
        lo, hi = band.frequency_range_hz()
        lo, hi = lo - 2 * df, hi + 2 * df
        inside = (f >= lo) & (f <= hi)
        excess = float(np.sum(estimate.asd[inside] - random_profile.evaluate(f[inside])) * df)
        rms = math.sqrt(max(excess, 0.0))
        error = 100.0 * (rms / band.rms_g - 1.0)
        limit = criteria.grms_tolerance_percent
        add("narrow_band", label, abs(error) <= limit,
            f"{label}: {rms:.4g} g RMS against {band.rms_g:.4g} g ({error:+.2f} %, limit +/-{limit:g} %)",
            f"{label}: RMS {rms:.4g} g against {band.rms_g:.4g} g ({error:+.2f} %, limit +/-{limit:g} %)",
            measured_rms_g=rms, target_rms_g=band.rms_g, measured_error_percent=error, limit_percent=limit)
        bands_out.append({"part": label, "measured_rms_g": rms, "target_rms_g": band.rms_g, "error_percent": error})

    # --- the sum, at 0 dB
    total_target = parts.total_rms_g(random_profile.grms)
    total_measured = math.sqrt(measured["normalised_mean_square"])
    error = 100.0 * (total_measured / total_target - 1.0)
    limit = criteria.grms_tolerance_percent
    add("total_rms", "sum", abs(error) <= limit,
        f"sum of the parts at 0 dB: {total_measured:.4g} g RMS against {total_target:.4g} g ({error:+.2f} %)",
        f"sum of the parts: RMS {total_measured:.4g} g at 0 dB against {total_target:.4g} g ({error:+.2f} %, "
        f"limit +/-{limit:g} %)",
        measured_rms_g=total_measured, target_rms_g=total_target, measured_error_percent=error, limit_percent=limit)

    # --- schedule steps
    steps_out = []
    if parts.schedule is not None:
        for k, ((level, duration), (a, b)) in enumerate(zip(parts.schedule.steps, parts.schedule.plateaus_s())):
            label = f"step {k + 1} ({level:+g} dB)"
            count = int(measured["plateau_samples"][k])
            if count == 0:
                continue
            rms = math.sqrt(measured["plateau_mean_square"][k])
            target = total_target * 10.0 ** (level / 20.0)
            error = 100.0 * (rms / target - 1.0)
            add("schedule_step", label, abs(error) <= limit,
                f"{label}: {rms:.4g} g RMS against {target:.4g} g ({error:+.2f} %)",
                f"{label}: RMS {rms:.4g} g against {target:.4g} g ({error:+.2f} %, limit +/-{limit:g} %)",
                measured_rms_g=rms, target_rms_g=target, measured_error_percent=error, limit_percent=limit,
                measured_start_s=a, measured_stop_s=b)
            steps_out.append({"part": label, "level_db": level, "start_s": a, "stop_s": b, "measured_rms_g": rms,
                              "target_rms_g": target, "error_percent": error})

    failed, reasons = [], []
    for group in dict.fromkeys(c["group"] for c in checks):
        bad = [c for c in checks if c["group"] == group and c["judged"] and not c["pass"]]
        if bad:
            failed.append(group)
            others = [c.get("part", c["name"]) for c in bad[1:]]
            reasons.append(bad[0]["reason"] + (f" (also failed: {', '.join(others)})" if others else ""))
    trace_target = None
    if parts.schedule is not None:
        trace_target = (total_target * parts.schedule.gain(measured["trace_t_s"])).tolist()
    mixed = {
        "tones": tones_out,
        "narrow_bands": bands_out,
        "schedule_steps": steps_out,
        "random_grms_target_g": random_profile.grms,
        "total_rms_target_g": total_target,
        "total_rms_measured_g": total_measured,
        "record_peak_g": measured["peak_g"],
        "tone_peak_sum_g": parts.peak_sum_g,
        "rms_trace": {"t_s": measured["trace_t_s"].tolist(), "rms_g": measured["trace_rms_g"].tolist(),
                      "target_g": trace_target},
        "note": "statistics and the ASD estimate describe the random part: the fitted tones removed and the "
                "schedule's gain divided out",
    }
    return dataclasses.replace(inner, passed=not failed, failed=tuple(failed), reasons=tuple(reasons),
                               checks=tuple(checks), criteria=criteria, profile=profile, mixed=mixed)


def mark_parts_on_asd(ax, result) -> None:
    """Mark the tones (vertical lines, measured amplitude) and narrow bands (shaded) on an ASD plot (matplotlib axes).

    The plotted estimate is the random part's (tones removed); each tone is
    drawn where it was commanded, labelled with its measured amplitude.

    Examples
    --------
    >>> # called by vibsynth.analysis.figures.asd_figure for a mixed-mode verification
    >>> callable(mark_parts_on_asd)
    True

    References
    ----------
    matplotlib ``Axes.axvline`` / ``Axes.axvspan``.
    """
    parts = result.profile.mixed
    for k, (tone, measured) in enumerate(zip(parts.tones, result.mixed["tones"])):
        lo, hi = tone.sweep.range_hz()
        text = (f"tone {k + 1}: {measured['measured_peak_g']:.3g} g pk"
                if "measured_peak_g" in measured else f"tone {k + 1}: swept {lo:g}-{hi:g} Hz")
        if hi > lo:
            ax.axvspan(lo, hi, color="#c9a227", alpha=0.12, lw=0, label=text)
        else:
            ax.axvline(lo, color="#c9a227", lw=1.2, ls=(0, (2, 2)), label=text)
    for k, band in enumerate(parts.narrow_bands):
        lo, hi = band.frequency_range_hz()
        ax.axvspan(lo, hi, color="#6a8caf", alpha=0.15, lw=0,
                   label=f"narrow band {k + 1}")


def draw_schedule_on_rms(ax, result) -> None:
    """Draw a mixed-mode record's RMS over time and its scheduled target on an RMS plot (matplotlib axes).

    Examples
    --------
    >>> callable(draw_schedule_on_rms)
    True

    References
    ----------
    matplotlib ``Axes.plot``.
    """
    trace = result.mixed["rms_trace"]
    t, rms = np.asarray(trace["t_s"]), np.asarray(trace["rms_g"])
    if rms.size == 0:
        return
    ax.plot(t, rms, color="#7a4e2d", lw=0.9, label="record RMS (all parts, with the schedule)")
    top = float(rms.max())
    if trace["target_g"] is not None:
        target = np.asarray(trace["target_g"])
        ax.plot(t, target, color="#2d5f7a", lw=1.3, ls=(0, (5, 2)), label="scheduled target (all parts)")
        top = max(top, float(target.max()))
    low, high = ax.get_ylim()
    ax.set_ylim(low, max(high, 1.15 * top))


__all__ = ["ToneFit", "draw_schedule_on_rms", "fit_tones", "mark_parts_on_asd", "residual_chunks",
           "verify_mixed_record"]
