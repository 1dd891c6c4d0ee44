"""Base motion that starts and ends at rest: velocity/displacement columns with a displacement taper.

References checked against (outside the project):
* scipy.integrate.cumulative_trapezoid: the integral of the velocity column is the displacement
  column, and an FE-style integration of the acceleration from rest ends near rest (trapezoidal
  rule error O(dt^2): Press et al., *Numerical Recipes*, 3rd ed., 2007, sec. 4.1);
* scipy.signal.welch: the acceleration ASD between the tapers is the target's within 0.5 dB
  (Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import scipy.integrate
import scipy.signal

from vibsynth.cli.main import main
from vibsynth.errors import InputError
from vibsynth.generate.frames import rest_taper
from vibsynth.generate.pipeline import generate_samples
from vibsynth.generate.plan import default_rest_taper_s
from vibsynth.profile.files import read_profile

G0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
ALL = ("acceleration", "velocity", "displacement")
CASES = [("bench-flat", 5120.0), ("harbour-crane-cab", 1024.0)]


def _record(name, rate, duration=60.0, seed=2, **options):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return generate_samples(read_profile(name), duration, rate, seed=seed, quantities=ALL, **options)


@pytest.mark.parametrize("name, rate", CASES)
def test_all_columns_start_and_end_at_rest(name, rate):
    # before: v[0] = 1.4 sigma, x[0] = -0.23 mm wherever the random phases put them
    r = _record(name, rate)
    profile = read_profile(name)
    scales = np.array([profile.grms, profile.velocity_rms_m_s, profile.displacement_rms_m])
    for row in (r[0], r[-1]):
        assert np.all(np.abs(row) <= 1e-12 * scales)  # zero to rounding


@pytest.mark.parametrize("name, rate", CASES)
def test_columns_are_derivatives_and_integrate_from_rest(name, rate):
    r = _record(name, rate)
    a, v, x = r[:, 0] * G0, r[:, 1], r[:, 2]
    profile = read_profile(name)
    dt = 1.0 / rate
    # the displacement column is the integral of the velocity column from rest (trapezoid, 1 % of RMS;
    # the rule's error on lines up to rate/2.56 is what remains)
    x_from_v = scipy.integrate.cumulative_trapezoid(v, dx=dt, initial=0.0)
    assert np.max(np.abs(x_from_v - x)) < 0.01 * profile.displacement_rms_m
    # an FE code integrating the acceleration twice from rest ends at rest (small drift: 1 % of the RMS)
    v_fe = scipy.integrate.cumulative_trapezoid(a, dx=dt, initial=0.0)
    x_fe = scipy.integrate.cumulative_trapezoid(v_fe, dx=dt, initial=0.0)
    assert abs(v_fe[-1]) < 0.01 * profile.velocity_rms_m_s
    assert abs(x_fe[-1]) < 0.01 * profile.displacement_rms_m
    assert np.max(np.abs(x_fe - x)) < 0.02 * profile.displacement_rms_m


@pytest.mark.parametrize("name, rate", CASES)
def test_asd_between_the_tapers_is_the_target(name, rate):
    profile = read_profile(name)
    r = _record(name, rate, duration=120.0)
    taper = int(round(default_rest_taper_s(profile) * rate))
    middle = r[taper:-taper, 0]
    # between the tapers the acceleration is the untapered record's, sample for sample
    np.testing.assert_array_equal(middle, _record(name, rate, duration=120.0, rest_taper_s=0.0)[taper:-taper, 0])
    f, s = scipy.signal.welch(middle, fs=rate, nperseg=int(4 * rate / profile.frequency_min_hz))
    # third-octave averages (IEC 61260 band edges, base-2 approximation) from 1.5 x the lowest frequency
    edges = 1.5 * profile.frequency_min_hz * 2.0 ** (np.arange(0, 60) / 3.0)
    edges = edges[edges <= profile.frequency_max_hz / 1.2]
    for lo, hi in zip(edges[:-1], edges[1:]):
        band = (f >= lo) & (f < hi)
        db = 10.0 * np.log10(np.mean(s[band]) / np.mean(profile.evaluate(f[band])))
        # 0.5 dB: the brief's tolerance, beside the third-octave average's spread
        assert abs(db) < 0.5, (lo, hi, db)


def test_ramp_is_the_taper_and_refusals():
    profile = read_profile("bench-flat")
    with_ramp = _record("bench-flat", 5120.0, duration=10.0, ramp_s=0.5)
    with_taper = _record("bench-flat", 5120.0, duration=10.0, rest_taper_s=0.5)
    np.testing.assert_array_equal(with_ramp, with_taper)
    off = _record("bench-flat", 5120.0, duration=10.0, rest_taper_s=0.0)
    assert abs(off[0, 1]) > 1e-6 * profile.velocity_rms_m_s  # without it the columns start anywhere
    with pytest.raises(InputError) as caught:
        _record("bench-flat", 5120.0, duration=1.0, rest_taper_s=0.6)
    assert caught.value.source == "rest_taper"
    with pytest.raises(InputError) as caught:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            generate_samples(profile, 10.0, 5120.0, seed=1, rest_taper_s=0.5)
    assert caught.value.source == "rest_taper"


def test_taper_derivatives_are_exact():
    # the analytic derivatives of the quintic match numpy.gradient of w to the step's second order
    w, dw, ddw = rest_taper(2001, 1000.0)
    assert w[0] == 0.0 and dw[0] == 0.0 and ddw[0] == 0.0 and w[-1] == 1.0 and dw[-1] == 0.0 and ddw[-1] == 0.0
    np.testing.assert_allclose(np.gradient(w, 1e-3)[1:-1], dw[1:-1], atol=1e-5 * np.max(dw))
    np.testing.assert_allclose(np.gradient(dw, 1e-3)[1:-1], ddw[1:-1], atol=1e-4 * np.max(np.abs(ddw)))


def test_sidecar_records_the_taper(tmp_path):
    out = tmp_path / "motion.npy"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        status = main(["generate", "bench-flat", "--duration", "4", "--rate", "5120", "--seed", "1",
                       "--quantities", "accel,velocity,displacement", "--ramp", "0.25", "-o", str(out), "--quiet"])
    assert status == 0
    sidecar = json.loads((tmp_path / "motion.npy.json").read_text())
    assert sidecar["plan"]["rest_taper_s"] == pytest.approx(0.25)
    # the taper is the record's fade: verification judges the part between
    assert sidecar["ramp_in_s"] == pytest.approx(0.25) and sidecar["ramp_out_s"] == pytest.approx(0.25)
    data = np.load(out)
    assert np.all(data[0] == 0.0) or np.max(np.abs(data[0])) < 1e-12
