"""The burst model (``kurtosis_model="bursts"``): x = a(t) u(t) with a slowly varying envelope.

External references used below:
- scipy.stats.kurtosis (fisher=False) for input and response kurtosis;
- scipy.signal.welch for the drive's ASD;
- the SDOF response by scipy.signal.bilinear + scipy.signal.lfilter of the base-excitation transfer
  function H(s) = (2 zeta wn s + wn^2) / (s^2 + 2 zeta wn s + wn^2) (Thomson, *Theory of Vibration*),
  independent of the project's ramp-invariant filters;
- the product model's kurtosis = 3 E[a^4] / E[a^2]^2 (Smallwood 2005; Kihm, Rizzi, Ferguson & Halfpenny 2013),
  and the central-limit effect that makes a resonance's response to a memoryless-transformed broadband
  drive nearly Gaussian (Kihm et al. 2013);
- the log-envelope's stated Gaussian correlation exp(-pi tau^2 / T^2) (the model this project states).

The profile is an invented breakpoint table.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.signal
import scipy.stats

from vibsynth.cli.main import main
from vibsynth.errors import InputError
from vibsynth.generate.modulation import BurstEnvelope, default_burst_s
from vibsynth.generate.pipeline import generate_samples, iter_chunks, make_synthesizer
from vibsynth.io.drivefile import sidecar_path
from vibsynth.profile.asd import AsdProfile

PROFILE = AsdProfile([20, 80, 350, 2000], [0.01, 0.04, 0.04, 0.007], name="invented-bursts")  # invented
RATE = 5120.0


def _sdof_response(x, fn_hz: float, q: float, rate_hz: float) -> np.ndarray:
    """Absolute-acceleration response of a base-excited SDOF by the bilinear transform (prewarped at fn)."""
    wn = 2 * math.pi * fn_hz
    zeta = 1 / (2 * q)
    b, a = scipy.signal.bilinear([2 * zeta * wn, wn**2], [1, 2 * zeta * wn, wn**2], fs=rate_hz)
    return scipy.signal.lfilter(b, a, x)


@pytest.fixture(scope="module")
def long_drives():
    """120 s drives at kurtosis 6: burst model and transform model, same profile and seed."""
    bursts = generate_samples(PROFILE, 120.0, RATE, seed=21, kurtosis=6.0, kurtosis_model="bursts")
    transform = generate_samples(PROFILE, 120.0, RATE, seed=21, kurtosis=6.0)
    return bursts, transform


def test_burst_drive_holds_kurtosis_asd_and_its_peaks_survive_a_resonance(long_drives):
    bursts, transform = long_drives
    # input kurtosis within 5 % of the target (the acceptance value; product model, Smallwood 2005)
    assert scipy.stats.kurtosis(bursts, fisher=False) == pytest.approx(6.0, rel=0.05)
    # ASD by scipy.signal.welch within +/-1.5 dB of the target on at least 95 % of in-band lines
    f, pxx = scipy.signal.welch(bursts, RATE, nperseg=4096)
    band = (f >= 25) & (f <= 1900)
    error_db = 10 * np.log10(pxx[band] / PROFILE.evaluate(f[band]))
    assert np.mean(np.abs(error_db) <= 1.5) >= 0.95
    # g RMS: the closed-form integral of the profile (the envelope has E[a^2] = 1)
    assert np.std(bursts) == pytest.approx(PROFILE.grms, rel=0.02)
    # SDOF response kurtosis at mid-band (fn = 200 Hz, Q = 10) stays at least 5 with bursts ...
    settle = int(RATE)  # one second from rest, far beyond 5 Q / (pi fn)
    k_bursts = scipy.stats.kurtosis(_sdof_response(bursts, 200.0, 10.0, RATE)[settle:], fisher=False)
    assert k_bursts >= 5.0
    # ... and falls back near 3 with the memoryless transform: the resonance averages one-sample peaks
    # (central-limit effect, Kihm, Rizzi, Ferguson & Halfpenny 2013)
    k_transform = scipy.stats.kurtosis(_sdof_response(transform, 200.0, 10.0, RATE)[settle:], fisher=False)
    assert scipy.stats.kurtosis(transform, fisher=False) == pytest.approx(6.0, rel=0.05)
    assert abs(k_transform - 3.0) < 0.5
    assert k_bursts - k_transform > 1.5


def test_response_kurtosis_spectrum_matches_an_independent_filter(long_drives):
    from vibsynth.analysis.derive import response_kurtosis_spectrum

    bursts, transform = long_drives
    fns = [60.0, 200.0, 800.0]
    ours_b = response_kurtosis_spectrum(bursts, RATE, fns)
    ours_t = response_kurtosis_spectrum(transform, RATE, fns)
    for index, fn in enumerate(fns):
        settle = int(RATE)
        # relative displacement and absolute acceleration responses of a Q = 10 oscillator share their
        # kurtosis to within the estimate's scatter (both are narrow-band responses at fn)
        ref_b = scipy.stats.kurtosis(_sdof_response(bursts, fn, 10.0, RATE)[settle:], fisher=False)
        ref_t = scipy.stats.kurtosis(_sdof_response(transform, fn, 10.0, RATE)[settle:], fisher=False)
        assert ours_b.kurtosis[index] == pytest.approx(ref_b, abs=0.4)
        assert ours_t.kurtosis[index] == pytest.approx(ref_t, abs=0.3)
        assert ours_b.kurtosis[index] > 4.5 and ours_t.kurtosis[index] < 3.6


def test_envelope_moments_are_set_exactly_and_its_correlation_is_the_stated_one():
    envelope = BurstEnvelope(kurtosis=5.0, burst_s=0.5, rate_hz=1000.0, total_samples=2_000_000)
    a = envelope.values(np.random.SeedSequence(3), 0, envelope.total_samples)
    assert np.all(a > 0)
    # E[a^2] = 1 and kurtosis = 3 E[a^4] / E[a^2]^2 (Smallwood 2005's product model)
    assert np.mean(a**2) == pytest.approx(1.0, rel=2e-3)
    assert 3 * np.mean(a**4) / np.mean(a**2) ** 2 == pytest.approx(5.0, rel=0.01)
    # log-envelope correlation at lag T/2 is exp(-pi / 4) for the stated Gaussian correlation
    g = np.log(a)
    g -= g.mean()
    lag = 250  # samples: T / 2 at 1000 Hz
    rho = float(np.mean(g[:-lag] * g[lag:]) / np.mean(g * g))
    assert rho == pytest.approx(math.exp(-math.pi / 4), abs=0.05)


def test_burst_drive_does_not_depend_on_chunks_or_mode_of_reading():
    kwargs = dict(seed=4, kurtosis=5.0, kurtosis_model="bursts", burst_s=0.8, memory_budget_bytes=2**20)
    whole = generate_samples(PROFILE, 20.0, RATE, **kwargs)
    for chunk in (1000, 65536):
        pieces = np.concatenate(list(iter_chunks(PROFILE, 20.0, RATE, chunk_samples=chunk, **kwargs)))
        np.testing.assert_array_equal(pieces, whole)
    synthesizer, _ = make_synthesizer(PROFILE, 20.0, RATE, **kwargs)
    assert synthesizer.plan.mode == "overlap-add"
    np.testing.assert_array_equal(synthesizer.samples(30_000, 40_000)[:, 0], whole[30_000:40_000])
    other = generate_samples(PROFILE, 20.0, RATE, **{**kwargs, "seed": 5})
    assert not np.allclose(other, whole)


def test_default_burst_duration_is_five_decay_times_at_the_lowest_frequency():
    # decay time of a Q resonance: 2 Q / omega_n = Q / (pi fn) (Thomson, Theory of Vibration)
    assert default_burst_s(20.0) == pytest.approx(5 * 10 / (math.pi * 20.0))


@pytest.mark.parametrize("kwargs, name", [
    (dict(kurtosis=2.5), "kurtosis"),
    (dict(kurtosis=5.0, skewness=0.3), "kurtosis_model"),
    (dict(kurtosis=5.0, clip=4.0), "kurtosis_model"),
    (dict(kurtosis=5.0, loop=True), "kurtosis_model"),
    (dict(), "kurtosis"),
])
def test_burst_model_refuses_what_it_cannot_do(kwargs, name):
    with pytest.raises(InputError) as caught:
        generate_samples(PROFILE, 10.0, RATE, seed=1, kurtosis_model="bursts", **kwargs)
    assert caught.value.location == name or caught.value.source == name


def test_burst_s_without_the_burst_model_is_refused():
    with pytest.raises(InputError):
        generate_samples(PROFILE, 10.0, RATE, seed=1, kurtosis=5.0, burst_s=0.5)


def _main(capsys, *argv):
    status = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return status, out, err


def test_cli_records_the_envelope_and_reads_an_amplitude_table(tmp_path, capsys):
    profile = tmp_path / "field.toml"
    profile.write_text('name = "field"\ndescription = "Invented demo"\n\n[[breakpoints]]\nfrequency = 20.0\n'
                       'asd = 0.01\n\n[[breakpoints]]\nfrequency = 1000.0\nasd = 0.01\n\n'
                       '[amplitude]\nmodel = "bursts"\nkurtosis = 5.0\nskewness = 0.0\nburst_s = 0.4\n')
    drive = tmp_path / "d.npy"
    status, out, err = _main(capsys, "generate", profile, "-o", drive, "--duration", 30, "--rate", 4096, "--seed", 2)
    assert status == 0, err
    side = json.loads(sidecar_path(drive).read_text())
    assert side["options"]["kurtosis_model"] == "bursts" and side["options"]["burst_s"] == 0.4
    assert side["modulation"]["burst_s"] == 0.4 and side["modulation"]["kurtosis"] == 5.0
    x = np.load(drive)
    assert scipy.stats.kurtosis(x, fisher=False) == pytest.approx(5.0, rel=0.05)
    # options override the table: --kurtosis alone means the transform model, no envelope
    status, out, err = _main(capsys, "generate", profile, "-o", drive, "--duration", 30, "--rate", 4096, "--seed", 2,
                             "--kurtosis", 4)
    assert status == 0, err
    side = json.loads(sidecar_path(drive).read_text())
    assert side["options"]["kurtosis_model"] == "transform" and "modulation" not in side
    # --burst overrides the table's time scale
    status, out, err = _main(capsys, "generate", profile, "-o", drive, "--duration", 30, "--rate", 4096, "--seed", 2,
                             "--burst", 0.25)
    assert status == 0, err
    assert json.loads(sidecar_path(drive).read_text())["modulation"]["burst_s"] == 0.25
    # verify judges a burst drive's stationarity by the trend test, and passes it
    status, out, err = _main(capsys, "verify", drive, "--json")
    report = json.loads(out)
    assert status == 0, out
    stationarity = [c for c in report["criteria"] if c["name"] == "stationarity"][0]
    assert stationarity["pass"] and "measured_reverse_arrangements" in stationarity
    # ... and reports the response kurtosis of a non-Gaussian drive: the bursts survive the resonances
    # (product model with a slow envelope, Kihm, Rizzi, Ferguson & Halfpenny 2013)
    assert np.median(report["response_kurtosis"]["kurtosis"]) > 4.0
    # a Gaussian drive reports none
    status, out, err = _main(capsys, "generate", "parcel-conveyor", "-o", tmp_path / "g.npy", "--duration", 20,
                             "--rate", 2560, "--seed", 2)
    status, out, err = _main(capsys, "verify", tmp_path / "g.npy", "--json")
    assert "response_kurtosis" not in json.loads(out)


def test_cli_refuses_a_burst_model_without_kurtosis_in_one_line(tmp_path, capsys):
    status, out, err = _main(capsys, "generate", "parcel-conveyor", "-o", tmp_path / "x.npy", "--duration", 10,
                             "--rate", 2560, "--kurtosis-model", "bursts")
    assert status == 2
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "--kurtosis" in lines[0]
    assert not list(tmp_path.iterdir())
