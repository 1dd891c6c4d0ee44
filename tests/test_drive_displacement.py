"""Drives safe to integrate: every drive's displacement RMS is the profile's, a clipped drive keeps its bound.

Displacement is measured as an outsider would, from the acceleration record alone:

* a periodic record is integrated twice in the frequency domain on the FFT of the whole record
  (multiply by -1/omega^2, DC removed, g0 = 9.80665 m/s^2); a periodic record makes this exact
  (Bendat & Piersol, *Random Data*, 4th ed., Wiley 2010, sec. 12.3: integration by division by
  (i omega) in the frequency domain);
* an overlap-add record does not loop, so the whole-record FFT of it would show the jump between
  its last and first samples, not the drive; it is judged by scipy.signal.welch with a Kaiser
  window of beta 20 (side lobes about 150 dB down: Kaiser & Schafer, "On the use of the I0-sinh
  window for spectrum analysis", IEEE Trans. ASSP 28(1), 1980), whose lines are integrated the same way.

The reference value is the closed-form displacement RMS of the target, sqrt(int S(f) g0^2/(2 pi f)^4 df)
(Bendat & Piersol 2010, the spectrum of a derivative).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.signal

from vibsynth.generate.highpass import smooth_bound_gain
from vibsynth.generate.pipeline import generate_samples
from vibsynth.profile.asd import AsdProfile
from vibsynth.profile.files import read_profile

G0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901, ISO 80000-3)
OVERLAP_ADD_BUDGET = 1 << 20  # bytes: a 120 s record then is made by overlap-add


def _periodic_displacement_rms_m(a_g: np.ndarray, rate_hz: float) -> float:
    a = (a_g - a_g.mean()) * G0
    spectrum = np.fft.rfft(a)
    f = np.fft.rfftfreq(a.size, 1.0 / rate_hz)
    x = np.zeros_like(spectrum)
    x[1:] = -spectrum[1:] / (2.0 * np.pi * f[1:]) ** 2
    return float(np.std(np.fft.irfft(x, n=a.size)))


def _welch_displacement_rms_m(a_g: np.ndarray, rate_hz: float, segment_s: float = 60.0) -> float:
    f, s = scipy.signal.welch(a_g * G0, fs=rate_hz, window=("kaiser", 20.0), nperseg=int(segment_s * rate_hz),
                              detrend=False)
    return float(np.sqrt(np.sum(s[1:] / (2.0 * np.pi * f[1:]) ** 4) * (f[1] - f[0])))


CASES = [
    ("bench-flat", 5120.0, dict(clip=2.5)),
    ("harbour-crane-cab", 1024.0, dict(clip=2.5)),
    ("flat-20-2000", 5120.0, dict(clip=3.5)),
    ("bench-flat", 5120.0, dict(kurtosis=6.0)),
    ("harbour-crane-cab", 1024.0, dict(kurtosis=6.0)),
    ("bench-flat", 5120.0, dict()),
]


def _profile(name):
    if name == "flat-20-2000":
        return AsdProfile([20.0, 2000.0], [0.01, 0.01])  # invented flat test profile
    return read_profile(name)


@pytest.mark.parametrize("mode", ["periodic", "overlap-add"])
@pytest.mark.parametrize("name, rate, options", CASES)
def test_displacement_rms_is_the_profiles(name, rate, options, mode):
    # Before the fix a clipped drive carried ~6e-9 g^2/Hz down to 0 Hz: bench-flat at clip 2.5,
    # 120 s, had 16.6 mm (periodic) where the profile needs 0.113 mm; harbour-crane-cab 6.4 mm vs 0.907 mm.
    profile = _profile(name)
    budget = dict(memory_budget_bytes=OVERLAP_ADD_BUDGET) if mode == "overlap-add" else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = generate_samples(profile, 120.0, rate, seed=3, **options, **budget)
    if mode == "periodic":
        measured = _periodic_displacement_rms_m(a, rate)
    else:
        measured = _welch_displacement_rms_m(a, rate)
    # 10 %: the brief's tolerance; the Welch estimate of the lowest octave has about 5 % spread
    assert measured == pytest.approx(profile.displacement_rms_m, rel=0.10)
    clip = options.get("clip")
    if clip is not None:
        # the hard bound: no sample beyond clip x the target g RMS, and the bound is reached (to 0.01 %)
        assert np.max(np.abs(a)) <= clip * profile.grms
        assert np.max(np.abs(a)) >= clip * profile.grms * (1.0 - 1e-4)


def test_clipped_drive_has_no_floor_below_the_band():
    # the defect's own signature: lines below the band's high-pass stop edge (half the lowest band
    # frequency, 10 Hz for bench-flat) hold no power beyond rounding in a periodic clipped record
    profile = read_profile("bench-flat")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = generate_samples(profile, 30.0, 5120.0, seed=11, clip=2.5)
    spectrum = np.abs(np.fft.rfft(a)) ** 2 * 2.0 / (a.size * 5120.0)  # one-sided periodogram, g^2/Hz
    f = np.fft.rfftfreq(a.size, 1.0 / 5120.0)
    below = spectrum[(f > 0) & (f < 10.0)]
    assert np.max(below) < 1e-9 * float(profile.evaluate(100.0))


def test_smooth_bound_gain_meets_the_bound_exactly_and_is_smooth():
    rng = np.random.default_rng(4)
    z = rng.standard_normal(20000)
    limit, w = 2.0, 200
    gain = smooth_bound_gain(z, limit, w, w, z.size - w)
    out = z[w:-w] * gain
    assert np.max(np.abs(out)) <= limit * (1.0 + 1e-15)
    assert np.all(gain <= 1.0) and np.all(gain > 0.0)
    # samples farther than W from every sample above the bound keep their value exactly
    over = np.flatnonzero(np.abs(z) > limit)
    far = np.ones(z.size, bool)
    for n in over:
        far[max(n - w + 1, 0) : n + w] = False
    np.testing.assert_array_equal(out[far[w:-w]], z[w:-w][far[w:-w]])
    # smooth: the gain's second difference is bounded by a Hann dip's, (pi / W)^2 / 2 x depth x dips
    assert np.max(np.abs(np.diff(gain, 2))) < over.size * 0.5 * (np.pi / w) ** 2
