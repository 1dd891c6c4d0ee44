"""Ramp-invariant SDOF filters: Smallwood's coefficients, the exact transfer functions, a long drive."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.signal import cont2discrete, freqz

import vibsynth
from vibsynth.durability.filters import (SdofFilterBank, band_limit_equalizer, relative_displacement_coefficients,
                                         smallwood_acceleration_coefficients)
from vibsynth.durability.sdof import (acceleration_transmissibility_squared, relative_displacement_gain_squared,
                                      response_moments)
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

G0 = STANDARD_GRAVITY_M_S2


@pytest.mark.parametrize("fn, q, rate", [(100.0, 10.0, 4096.0), (1000.0, 10.0, 4096.0), (30.0, 50.0, 2048.0)])
def test_smallwood_is_the_ramp_invariant_transform(fn, q, rate):
    # Smallwood (1981) closed-form coefficients against scipy's triangle-hold ("foh") discretisation of
    # (2 zeta wn s + wn^2) / (s^2 + 2 zeta wn s + wn^2) (Franklin, Powell & Workman 1998, 6.3)
    b, a = smallwood_acceleration_coefficients(fn, q, rate)
    wn = 2.0 * math.pi * fn
    bb, aa, _ = cont2discrete(([wn / q, wn * wn], [1.0, wn / q, wn * wn]), 1.0 / rate, method="foh")
    np.testing.assert_allclose(b, np.squeeze(bb) / aa[0], rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(a, aa / aa[0], rtol=1e-12)


@pytest.mark.parametrize("fn", [50.0, 200.0, 400.0])
def test_filters_follow_the_exact_transfer_functions(fn):
    rate, q = 4096.0, 10.0
    f = np.linspace(1.0, rate / 20.0, 2000)
    for design, exact in ((smallwood_acceleration_coefficients, acceleration_transmissibility_squared),
                          (relative_displacement_coefficients,
                           lambda x, fn_, q_: relative_displacement_gain_squared(x, fn_, q_) * G0 ** 2)):
        b, a = design(fn, q, rate)
        _, h = freqz(b, a, worN=f, fs=rate)
        ratio = np.abs(h) ** 2 / exact(f, fn, q)
        # exact for inputs that are straight lines between samples; for a sine the triangle hold's
        # sinc^2(f/fs) roll-off remains (Franklin, Powell & Workman 1998, 6.3): within 2 % up to fs/20
        assert np.max(np.abs(ratio - 1.0)) < 0.02
        np.testing.assert_allclose(ratio, np.sinc(f / rate) ** 4, rtol=2e-3)


@pytest.mark.parametrize("fraction", [0.01, 0.05, 0.1, 0.2, 0.3])
def test_equalized_filters_give_the_exact_response_mean_square_of_a_band_limited_input(fraction):
    # flat input ASD up to 0.39 fs: sum of |H_d|^2 |E|^2 over the band against the exact |H|^2
    rate, q = 4096.0, 10.0
    fn = fraction * rate
    f = np.linspace(1.0, 0.39 * rate, 100_000)
    _, equalizer = freqz(band_limit_equalizer(), 1.0, worN=f, fs=rate)
    for design, exact in ((smallwood_acceleration_coefficients, acceleration_transmissibility_squared),
                          (relative_displacement_coefficients,
                           lambda x, fn_, q_: relative_displacement_gain_squared(x, fn_, q_) * G0 ** 2)):
        b, a = design(fn, q, rate)
        _, h = freqz(b, a, worN=f, fs=rate)
        ratio = np.sum(np.abs(h * equalizer) ** 2) / np.sum(exact(f, fn, q))
        assert ratio == pytest.approx(1.0, abs=0.01)


def test_streaming_in_chunks_equals_one_pass():
    x = np.random.default_rng(7).standard_normal(10_000)
    bank = SdofFilterBank([40.0, 300.0], 10.0, 2048.0)
    whole = bank.filter_chunk(x)
    bank.reset()
    cuts = [0, 1, 333, 4096, 9999, 10_000]
    parts = np.concatenate([bank.filter_chunk(x[i:j]) for i, j in zip(cuts, cuts[1:])], axis=1)
    np.testing.assert_allclose(parts, whole, rtol=0, atol=1e-12 * np.max(np.abs(whole)))


def test_response_rms_of_a_long_drive_matches_the_exact_integral_within_3_percent():
    profile = vibsynth.read_profile("bench-flat")
    rate = 8192.0
    x = vibsynth.generate_samples(profile, 60.0, rate, seed=11)
    fns = [50.0, 200.0, 800.0]
    for kind in ("acceleration", "relative_displacement"):
        bank = SdofFilterBank(fns, 10.0, rate, kind=kind)
        sums = np.zeros(len(fns))
        for start in range(0, x.size, 50_000):
            y = bank.filter_chunk(x[start:start + 50_000])
            sums += np.sum(y * y, axis=1)
        measured = np.sqrt(sums / x.size)
        exact = np.sqrt([response_moments(profile, fn, 10.0, kind=kind, powers=(0,))[0] for fn in fns])
        np.testing.assert_allclose(measured, exact, rtol=0.03)


def test_bank_refuses_fn_at_nyquist_and_warns_above_three_tenths_of_the_rate():
    with pytest.raises(InputError, match="fn_hz"):
        SdofFilterBank([600.0], 10.0, 1000.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        SdofFilterBank([400.0], 10.0, 1000.0)
    assert any(issubclass(w.category, VibsynthWarning) for w in caught)
    with pytest.raises(InputError, match="kind"):
        SdofFilterBank([10.0], 10.0, 1000.0, kind="velocity")
    assert AsdProfile([1.0, 2.0], [1.0, 1.0]).grms == pytest.approx(1.0)
