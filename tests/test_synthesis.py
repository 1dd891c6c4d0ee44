"""Gaussian drive synthesis (vibsynth.generate: plan, frames, pipeline) against outside references.

References used below:
- DFT Parseval relation, sum x_n^2 = (1/N) sum |X_k|^2 (any DSP text, e.g.
  Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., sec. 8.5).
- scipy.signal.periodogram / scipy.signal.welch (density scaling) as the
  reference spectrum estimators; scipy.stats for moments and distributions.
- Gaussian moments: kurtosis 3, skewness 0 (Pearson).
- Rayleigh amplitudes: |X|^2 of a circular complex Gaussian is exponential
  (Papoulis, Probability, Random Variables and Stochastic Processes).
- Velocity/displacement ASD S_a g0^2/(2 pi f)^2 and /(2 pi f)^4 (Bendat & Piersol
  2010), evaluated in closed form by AsdProfile.

All profiles here are invented breakpoint tables.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.fft
import scipy.signal
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile
from vibsynth.generate.frames import raised_cosine_ramp, sine_window, synthesize_frame
from vibsynth.generate.pipeline import Synthesizer, make_synthesizer, generate_samples, iter_chunks
from vibsynth.generate.plan import plan_synthesis, rig_limit_check

# Invented profile: a bracket-mount random test, 20-2000 Hz, about 5.7 g RMS.
BRACKET = AsdProfile([20, 80, 350, 2000], [0.01, 0.04, 0.04, 0.005], name="invented-bracket")
# Invented narrow-band profile with a notch, to exercise the resolution choice.
NOTCHED = AsdProfile([50, 100, 110, 120, 400], [0.02, 0.02, 0.002, 0.02, 0.02], name="invented-notch")

RATE_HZ = 5120.0
SMALL_BUDGET = 1  # bytes: forces overlap-add


def _grid_spectrum(profile, rate_hz, frame_length):
    return profile.evaluate(np.arange(frame_length // 2 + 1) * rate_hz / frame_length)


# ------------------------------------------------------------------ frames
def test_fixed_frame_variance_equals_line_sum_exactly():
    n = 8192
    spectrum = _grid_spectrum(BRACKET, RATE_HZ, n)
    frame = synthesize_frame(spectrum, RATE_HZ, np.random.default_rng(11), "fixed")
    df = RATE_HZ / n
    # Parseval (Oppenheim & Schafer 8.5): mean square = sum S(f_k) df with |X_k| = N sqrt(S df / 2).
    expected = float(np.sum(spectrum[1:-1]) * df)
    assert np.mean(frame**2) == pytest.approx(expected, rel=1e-12)
    assert abs(np.mean(frame)) < 1e-12 * math.sqrt(expected)  # DC carries nothing


def test_periodogram_of_one_periodic_frame_is_the_target_at_every_line():
    n = 16384
    spectrum = _grid_spectrum(BRACKET, RATE_HZ, n)
    frame = synthesize_frame(spectrum, RATE_HZ, np.random.default_rng(5), "fixed")
    # Reference estimator: scipy.signal.periodogram, rectangular window, density scaling.
    frequencies, estimate = scipy.signal.periodogram(frame, RATE_HZ, window="boxcar", detrend=False, scaling="density")
    assert np.allclose(frequencies, np.arange(n // 2 + 1) * RATE_HZ / n)
    inner = slice(1, -1)
    np.testing.assert_allclose(estimate[inner], spectrum[inner], rtol=1e-9, atol=1e-12 * spectrum.max())
    outside = (frequencies < BRACKET.frequency_min_hz) | (frequencies > BRACKET.frequency_max_hz)
    assert np.all(estimate[outside] < 1e-20)


@settings(max_examples=25, deadline=None)
@given(
    st.lists(st.floats(0.01, 4.0), min_size=1, max_size=5),
    st.lists(st.floats(-2.0, 2.0), min_size=6, max_size=6),
    st.integers(0, 2**32 - 1),
)
def test_frame_law_holds_for_any_profile(log_gaps, log_levels, seed):
    """Parseval and the exact periodogram hold for any breakpoint table (property test)."""
    frequencies = 10.0 * np.exp(np.cumsum([0.0] + list(log_gaps)))
    frequencies = frequencies[frequencies < 2000.0]
    if frequencies.size < 2:
        frequencies = np.array([10.0, 1000.0])
    profile = AsdProfile(frequencies, 10.0 ** np.array(log_levels[: frequencies.size]), name="invented-random")
    n = 4096
    spectrum = _grid_spectrum(profile, RATE_HZ, n)
    if not np.any(spectrum[1:-1] > 0):
        return
    frame = synthesize_frame(spectrum, RATE_HZ, np.random.default_rng(seed), "fixed")
    assert np.mean(frame**2) == pytest.approx(np.sum(spectrum[1:-1]) * RATE_HZ / n, rel=1e-10)
    _, estimate = scipy.signal.periodogram(frame, RATE_HZ, window="boxcar", detrend=False)
    np.testing.assert_allclose(estimate[1:-1], spectrum[1:-1], rtol=1e-8, atol=1e-10 * spectrum.max())


def test_rayleigh_line_powers_are_exponential():
    """Gaussian amplitudes: |X_k|^2 / E|X_k|^2 ~ Exp(1) (circular complex Gaussian, Papoulis)."""
    n = 65536
    spectrum = _grid_spectrum(BRACKET, RATE_HZ, n)
    frame = synthesize_frame(spectrum, RATE_HZ, np.random.default_rng(2), "rayleigh")
    _, estimate = scipy.signal.periodogram(frame, RATE_HZ, window="boxcar", detrend=False)
    inside = spectrum > 0
    inside[0] = inside[-1] = False
    ratio = estimate[inside] / spectrum[inside]
    statistic, p_value = scipy.stats.kstest(ratio, "expon")
    assert p_value > 1e-3, statistic
    # ...while fixed amplitudes give ratio 1 at every line (previous test), Rayleigh ones scatter:
    assert np.std(ratio) == pytest.approx(1.0, abs=0.05)  # Exp(1) has unit standard deviation


def test_sine_window_is_power_complementary():
    # Princen & Bradley (1986): w[n]^2 + w[n + N/2]^2 = 1 for the sine window.
    w = sine_window(1024)
    np.testing.assert_allclose(w[:512] ** 2 + w[512:] ** 2, 1.0, rtol=0, atol=1e-15)


# ------------------------------------------------------------ long records
@pytest.mark.slow
@pytest.mark.parametrize(
    "amplitude, budget, samples",
    [("fixed", SMALL_BUDGET, 2**22), ("rayleigh", SMALL_BUDGET, 2**22), ("fixed", 2**31, 2**21), ("rayleigh", 2**31, 2**21)],
)
def test_long_record_matches_target_through_scipy_welch(amplitude, budget, samples):
    record = generate_samples(
        BRACKET, samples / RATE_HZ, RATE_HZ, seed=21, amplitude=amplitude, memory_budget_bytes=budget
    )
    assert record.shape == (samples,)
    # Overall g RMS against the closed-form profile value (AsdProfile.grms, exact log-log integral).
    assert np.sqrt(np.mean(record**2)) == pytest.approx(BRACKET.grms, rel=0.01)
    # Reference estimator: scipy.signal.welch, Hann, 50 % overlap, density; about 2000 averages here.
    frequencies, estimate = scipy.signal.welch(record, RATE_HZ, window="hann", nperseg=4096, scaling="density")
    band = (frequencies >= BRACKET.frequency_min_hz) & (frequencies <= BRACKET.frequency_max_hz)
    error_db = 10 * np.log10(estimate[band] / BRACKET.evaluate(frequencies[band]))
    assert np.mean(np.abs(error_db) <= 1.0) >= 0.95
    # Gaussian: Pearson kurtosis 3, skewness 0 (sampling spread here is below 0.01).
    assert scipy.stats.kurtosis(record, fisher=False) == pytest.approx(3.0, abs=0.1)
    assert abs(scipy.stats.skew(record)) <= 0.05


def test_overlap_add_variance_is_constant_across_the_frame():
    """Sample variance over many frames is the same at every position within a hop (w^2 + w'^2 = 1)."""
    plan = plan_synthesis(BRACKET, 200.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET)
    assert plan.mode == "overlap-add"
    record = Synthesizer(plan, 3).samples()[:, 0]
    hop = plan.hop
    blocks = record[: (record.size // hop) * hop].reshape(-1, hop)
    by_position = np.mean(blocks**2, axis=0)
    # Each position averages about 250 frames; compare thirds of the hop with each other.
    thirds = [np.mean(part) for part in np.array_split(by_position, 3)]
    assert max(thirds) / min(thirds) < 1.05
    assert np.mean(by_position) == pytest.approx(plan.line_variance, rel=0.02)


# ------------------------------------------------------------- determinism
def test_same_seed_identical_other_seed_uncorrelated():
    a = generate_samples(BRACKET, 20.0, RATE_HZ, seed=7)
    b = generate_samples(BRACKET, 20.0, RATE_HZ, seed=7)
    c = generate_samples(BRACKET, 20.0, RATE_HZ, seed=8)
    assert np.array_equal(a, b)
    plan = plan_synthesis(BRACKET, 20.0, RATE_HZ)
    assert plan.mode == "periodic"
    # Two fixed-amplitude random-phase records: r = sum S_k cos(d_k) / sum S_k with independent
    # uniform phase differences d_k; Var r = sum S_k^2 / (2 (sum S_k)^2) (E cos^2 = 1/2).
    s = plan.line_spectrum
    sigma = math.sqrt(np.sum(s**2) / (2 * np.sum(s) ** 2))
    r = np.corrcoef(a, c)[0, 1]
    assert abs(r) < 5 * sigma
    assert sigma < 0.01  # the check above is a real one


def test_generator_seed_is_reproducible_from_recorded_entropy():
    rng = np.random.default_rng(99)
    plan = plan_synthesis(BRACKET, 5.0, RATE_HZ)
    first = Synthesizer(plan, rng)
    again = Synthesizer(plan, first.seed)
    assert np.array_equal(first.samples(), again.samples())


@pytest.mark.parametrize("budget", [SMALL_BUDGET, 2**31], ids=["overlap-add", "periodic"])
def test_samples_do_not_depend_on_chunk_size(budget):
    duration = 30.0
    kwargs = dict(seed=4, memory_budget_bytes=budget, ramp_s=2.0)
    whole = generate_samples(BRACKET, duration, RATE_HZ, **kwargs)
    one_second = np.concatenate(list(iter_chunks(BRACKET, duration, RATE_HZ, chunk_samples=int(RATE_HZ), **kwargs)))
    seven_seconds = np.concatenate(
        list(iter_chunks(BRACKET, duration, RATE_HZ, chunk_samples=int(7 * RATE_HZ), **kwargs))
    )
    odd = np.concatenate(list(iter_chunks(BRACKET, duration, RATE_HZ, chunk_samples=12345, **kwargs)))
    assert np.array_equal(whole, one_second)
    assert np.array_equal(whole, seven_seconds)
    assert np.array_equal(whole, odd)


def test_any_stretch_can_be_made_alone():
    plan = plan_synthesis(BRACKET, 60.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET)
    whole = Synthesizer(plan, 12).samples()
    for start, stop in [(0, 1), (12345, 54321), (plan.total_samples - 777, plan.total_samples)]:
        alone = Synthesizer(plan, 12).samples(start, stop)
        assert np.array_equal(alone, whole[start:stop])


def test_overlap_add_is_the_windowed_sum_of_independent_frames():
    """Rebuild a stretch by hand from Synthesizer.frame(j): frame j starts at (j - 1) N/2, sine window."""
    plan = plan_synthesis(BRACKET, 30.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, spill_highpass=False)
    synthesizer = Synthesizer(plan, 5)
    n, hop = plan.frame_length, plan.hop
    w = sine_window(n)
    block = 3  # samples [3 hop, 4 hop) come from frames 3 and 4
    expected = synthesizer.frame(3)[hop:] * w[hop:] + synthesizer.frame(4)[:hop] * w[:hop]
    np.testing.assert_allclose(synthesizer.samples(block * hop, (block + 1) * hop)[:, 0], expected, rtol=0, atol=1e-12)


# ---------------------------------------------------- velocity/displacement
def test_velocity_and_displacement_integrate_exactly_and_match_closed_form():
    # the columns as integrated (no rest taper; the tapered ones: tests/test_rest_taper.py)
    columns = generate_samples(
        BRACKET, 120.0, RATE_HZ, seed=3, quantities=("acceleration", "velocity", "displacement"), rest_taper_s=0.0
    )
    acceleration, velocity, displacement = columns.T
    n = acceleration.size
    frequencies = scipy.fft.rfftfreq(n, 1 / RATE_HZ)
    i_omega = 2j * np.pi * frequencies
    # Spectral derivative of the periodic record: d/dt <-> multiply by i 2 pi f.
    dv = scipy.fft.irfft(scipy.fft.rfft(velocity) * i_omega, n) / STANDARD_GRAVITY_M_S2
    dd = scipy.fft.irfft(scipy.fft.rfft(displacement) * i_omega, n)
    scale = np.sqrt(np.mean(acceleration**2))
    assert np.max(np.abs(dv - acceleration)) < 1e-9 * scale
    assert np.max(np.abs(dd - velocity)) < 1e-9 * np.sqrt(np.mean(velocity**2))
    # No drift: zero mean, and halves of the record have the same RMS.
    for column in (velocity, displacement):
        rms = np.sqrt(np.mean(column**2))
        assert abs(np.mean(column)) < 1e-9 * rms
        first, second = np.array_split(column, 2)
        assert np.sqrt(np.mean(first**2)) == pytest.approx(np.sqrt(np.mean(second**2)), rel=0.05)
    # RMS against the profile's closed-form velocity and displacement RMS (Bendat & Piersol).
    assert np.sqrt(np.mean(velocity**2)) == pytest.approx(BRACKET.velocity_rms_m_s, rel=0.02)
    assert np.sqrt(np.mean(displacement**2)) == pytest.approx(BRACKET.displacement_rms_m, rel=0.02)


def test_velocity_columns_refused_beyond_the_memory_budget():
    with pytest.raises(InputError, match="give at most"):
        plan_synthesis(BRACKET, 600.0, RATE_HZ, quantities=("acceleration", "velocity"), memory_budget_bytes=2**20)


# ------------------------------------------------------------- ramps, loop
def test_ramps_are_raised_cosine_and_leave_the_steady_part_alone():
    plain = generate_samples(BRACKET, 10.0, RATE_HZ, seed=1)
    ramped = generate_samples(BRACKET, 10.0, RATE_HZ, seed=1, ramp_s=1.0)
    r = int(RATE_HZ)
    assert ramped[0] == 0.0 and ramped[-1] == 0.0
    np.testing.assert_array_equal(ramped[r:-r], plain[r:-r])
    # Raised cosine (Hann taper, Blackman & Tukey 1958): 0.5 (1 - cos(pi n / R)).
    n = np.arange(r)
    np.testing.assert_allclose(ramped[:r], plain[:r] * 0.5 * (1 - np.cos(np.pi * n / r)), rtol=1e-12, atol=0)
    np.testing.assert_allclose(ramped[-r:], plain[-r:] * raised_cosine_ramp(r)[::-1], rtol=1e-12, atol=0)


def test_loop_record_is_one_exact_period():
    record = generate_samples(BRACKET, 3.0, RATE_HZ, seed=6, loop=True)
    # The record is one period: its periodogram is the target at every line (scipy.signal.periodogram)...
    frequencies, estimate = scipy.signal.periodogram(record, RATE_HZ, window="boxcar", detrend=False)
    target = BRACKET.evaluate(frequencies)
    # Lines whose bin lies inside the band carry S(f_k) exactly; the two lines whose bin straddles a
    # band edge carry only the band's share of their bin (issue 10 item 2), so they are compared with
    # the weighted line spectrum instead.
    df = frequencies[1] - frequencies[0]
    interior = (frequencies - df / 2 >= BRACKET.frequency_min_hz) & (frequencies + df / 2 <= BRACKET.frequency_max_hz)
    interior[[0, -1]] = False
    assert np.count_nonzero(interior) == np.count_nonzero(target) - 2
    np.testing.assert_allclose(estimate[interior], target[interior], rtol=1e-8, atol=1e-10 * target.max())
    lines = BRACKET.line_spectrum(df, frequencies.size)
    np.testing.assert_allclose(estimate[1:-1], lines[1:-1], rtol=1e-8, atol=1e-10 * target.max())
    # ...so the wrap from the last sample to the first is an ordinary step, no seam.
    steps = np.diff(record)
    assert abs(record[0] - record[-1]) < 5 * np.sqrt(np.mean(steps**2))


def test_loop_beyond_budget_and_ramped_loop_are_refused():
    with pytest.raises(InputError, match="give at most"):
        plan_synthesis(BRACKET, 3600.0, RATE_HZ, loop=True, memory_budget_bytes=2**24)
    with pytest.raises(InputError, match="ramp"):
        plan_synthesis(BRACKET, 10.0, RATE_HZ, loop=True, ramp_in_s=1.0)


# --------------------------------------------------------------- validation
def test_rate_must_exceed_twice_the_top_frequency():
    with pytest.raises(InputError, match="twice the profile's top frequency"):
        plan_synthesis(BRACKET, 10.0, 4000.0)
    with pytest.warns(VibsynthWarning, match="2.56"):
        plan = plan_synthesis(BRACKET, 10.0, 4500.0)  # above 2x, below 2.56x (common practice)
    assert any("2.56" in message for message in plan.warnings)
    assert plan_synthesis(BRACKET, 10.0, 5120.0).warnings == ()


def test_duration_too_short_names_the_minimum():
    # Resolution needed: min(20 Hz, narrowest segment 60 Hz) / 8 = 2.5 Hz -> at least 1 / 2.5 Hz = 0.4 s.
    with pytest.raises(InputError, match=r"at least 0\.4 s"):
        plan_synthesis(BRACKET, 0.3, RATE_HZ)
    plan_synthesis(BRACKET, 0.4, RATE_HZ)


def test_frame_resolution_follows_the_narrowest_feature():
    # NOTCHED's narrowest segment is 10 Hz wide -> 1.25 Hz lines -> frame of 8192 at 5120 Hz (0.625 Hz).
    plan = plan_synthesis(NOTCHED, 600.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET)
    assert plan.resolution_hz <= 10.0 / 8
    assert plan.frame_length & (plan.frame_length - 1) == 0
    coarse = plan_synthesis(NOTCHED, 600.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, resolution_hz=0.1)
    assert coarse.resolution_hz <= 0.1


def test_rig_limits_refuse_with_the_excess():
    stroke_mm = BRACKET.displacement_peak_to_peak_3sigma_m * 1e3
    with pytest.raises(InputError, match="beyond the"):
        rig_limit_check(BRACKET, stroke_limit_mm=0.5 * stroke_mm)
    with pytest.raises(InputError, match="velocity limit"):
        rig_limit_check(BRACKET, velocity_limit_m_s=BRACKET.velocity_rms_m_s)
    rig_limit_check(BRACKET, stroke_limit_mm=1.01 * stroke_mm, velocity_limit_m_s=3.01 * BRACKET.velocity_rms_m_s)


class _Cube:
    """``g(u) = u^3`` behind the MemorylessTransform interface (not unit variance: the plan's output scale is used).

    Hermite expansion ``u^3 = He3(u) + 3 He1(u)``; moments of ``U^3`` for a standard normal U:
    mean 0, variance E[U^6] = 15, skewness 0, kurtosis E[U^12] / 15^2 = 10395 / 225 = 46.2
    (normal moments (2k - 1)!!, e.g. Papoulis, Probability, Random Variables and Stochastic Processes).
    """

    family = "cube"
    series_order = 3
    peak_limit = None

    def apply(self, u, out=None):
        return np.power(u, 3, out=out)

    def moments(self):
        return 0.0, 15.0, 0.0, 10395.0 / 225.0

    def output_variance(self):
        return 15.0

    def hermite_coefficients(self, n_max):
        a = np.zeros(n_max + 1)
        a[1], a[3] = 3.0, 1.0
        return a[: n_max + 1]

    def gaussian_level(self, y):
        return np.cbrt(y)


def test_transform_hook_is_applied_after_overlap_add_and_scaled():
    """A memoryless transform of the unit-variance stream, then the output scale (hook for non-Gaussian drives)."""
    plan = plan_synthesis(BRACKET, 100.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, spill_highpass=False)
    gaussian = Synthesizer(plan, 8).samples()[:, 0]
    unit = gaussian / plan.output_scale

    shaped = plan_synthesis(BRACKET, 100.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, transform=_Cube(),
                            output_scale=2.0, spill_highpass=False)
    out = Synthesizer(shaped, 8).samples()[:, 0]
    np.testing.assert_allclose(out, 2.0 * unit**3, rtol=1e-9, atol=1e-12)
    assert np.mean(unit**2) == pytest.approx(1.0, rel=0.02)  # the stream is made at unit variance


# ------------------------------------------------------ spill-over high-pass
def test_overlap_add_stream_is_the_fir_high_pass_of_the_windowed_sum():
    """Output sample n = x[n + D] - (h * x)[n + D] for the plain windowed sum x and the FIR low-pass h (2D + 1 taps).

    Reference: scipy.signal.fftconvolve (linear convolution), independent of the partitioned
    overlap-save used inside; also independent of the number of worker threads.
    """
    plan = plan_synthesis(BRACKET, 40.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET)
    raw = plan_synthesis(BRACKET, 60.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, spill_highpass=False)
    assert plan.spill_highpass is not None and raw.spill_highpass is None
    x = Synthesizer(raw, 6).samples()[:, 0]
    taps = plan.spill_highpass.lowpass_taps()
    d = taps.size // 2
    n = plan.total_samples
    expected = x[d : d + n] - scipy.signal.fftconvolve(x[: n + 2 * d], taps, mode="valid")
    out = Synthesizer(plan, 6, workers=3).samples()[:, 0]
    np.testing.assert_allclose(out, expected, rtol=0, atol=1e-12 * np.max(np.abs(x)))


def test_overlap_add_leakage_below_the_band_is_removed():
    """The sine window leaks the lowest band lines down to 0 Hz; the high-pass removes it (>= 60 dB below the stop edge).

    Reference: scipy.signal.welch (long segments) on the plain windowed sum and on the drive;
    the same seed, so the same frames.
    """
    plan = plan_synthesis(BRACKET, 200.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET)
    raw = plan_synthesis(BRACKET, 210.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, spill_highpass=False)
    stop_hz = plan.spill_highpass.stop_edge_hz
    pass_hz = plan.spill_highpass.pass_edge_hz
    d = plan.spill_highpass.half_length  # output sample n is sample n + D of the plain sum
    nperseg = int(16 * RATE_HZ)
    x = Synthesizer(raw, 9).samples()[:, 0][d : d + plan.total_samples]
    f, leaky = scipy.signal.welch(x, RATE_HZ, nperseg=nperseg)
    _, clean = scipy.signal.welch(Synthesizer(plan, 9).samples()[:, 0], RATE_HZ, nperseg=nperseg)
    below = (f > 0.5) & (f < stop_hz)
    # the plain sum's leakage below the band is far above the filtered record's floor
    assert np.mean(clean[below]) < 1e-3 * np.mean(leaky[below])
    # in band the two records agree line by line (response within 0.01 dB above the pass edge;
    # the same frames, so only the filter differs)
    band = (f >= max(pass_hz, BRACKET.frequency_min_hz)) & (f <= BRACKET.frequency_max_hz)
    ratio_db = 10 * np.log10(clean[band] / leaky[band])
    assert np.max(np.abs(ratio_db)) < 0.05


def test_worker_threads_do_not_change_the_samples():
    plan = plan_synthesis(BRACKET, 30.0, RATE_HZ, memory_budget_bytes=SMALL_BUDGET, amplitude="rayleigh", ramp_in_s=1.0,
                          ramp_out_s=1.0)
    one = np.concatenate(list(Synthesizer(plan, 2).iter_chunks(7919)))
    two = np.concatenate(list(Synthesizer(plan, 2, workers=2).iter_chunks(65536)))
    assert np.array_equal(one, two)
    with pytest.raises(InputError, match="workers"):
        Synthesizer(plan, 2, workers=0)


@pytest.mark.parametrize("kurtosis_model", [None, "bursts"])
def test_long_streams_made_in_stretches_on_threads_keep_every_sample(kurtosis_model):
    """A long high-passed linear stream on 2 or 3 threads is made in stretches of blocks, each whole on one
    thread (frames and filter); every sample equals the one-thread record bit for bit, whatever the
    stretch boundaries (2 and 3 threads cut it differently) and wherever a read starts.
    Reference: the sequential record of the same plan and seed (the samples depend only on the seed)."""
    profile = AsdProfile([20, 50, 400, 1000], [0.005, 0.04, 0.04, 0.01], name="invented-stretch")
    options = dict(seed=4, memory_budget_bytes=SMALL_BUDGET, ramp_s=0.5)
    if kurtosis_model:
        options.update(kurtosis=5.0, kurtosis_model=kurtosis_model)
    one, _ = make_synthesizer(profile, 300.0, 4096.0, workers=1, **options)
    blocks = one.plan.total_samples // one.block_samples
    whole = np.concatenate(list(one.iter_chunks(65536)))
    for workers in (2, 3):
        many, _ = make_synthesizer(profile, 300.0, 4096.0, workers=workers, **options)
        assert (many.plan.modulation is not None) == bool(kurtosis_model)
        stretches = many._filter_spans(0, blocks - 1)
        assert stretches is not None and len(stretches) >= 2 * workers  # the path under test is taken
        assert np.array_equal(np.concatenate(list(many.iter_chunks(50000))), whole)
        start = stretches[1][0] * many.block_samples + 123  # inside the second stretch
        assert np.array_equal(np.concatenate(list(many.iter_chunks(30000, start=start))), whole[start:])
