"""The lowest DFT lines of a long record from block moments, against scipy.fft.

External references used below:
- scipy.fft.rfft / scipy.fft.irfft (pocketfft) for the DFT lines and the record they make;
- the whole-record frequency-domain high-pass written out here with scipy.fft (rfft, the
  response on the lines, irfft) for the periodic spill high-pass;
- Taylor's remainder bound |x|^P / P! for e^(ix) (Abramowitz & Stegun, *Handbook of
  Mathematical Functions*, 4.2.1 and 3.6.4) for the number of terms.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.fft

from vibsynth.generate.highpass import HIGHPASS_PASS_FRACTION, HIGHPASS_STOP_FRACTION, SpillHighpass, periodic_highpass
from vibsynth.generate.lowband import LOWBAND_MIN_SAMPLES, add_low_lines, block_plan, low_lines


def _record(samples, seed=1):
    rng = np.random.default_rng(seed)
    return rng.standard_normal(samples) * 2.5 + 0.3


@pytest.mark.parametrize("samples, lines", [(1 << 20, 400), (3 << 19, 2500), (2_048_000, 3000), (1 << 22, 6228),
                                            ((1 << 20) + 1, 300)])  # the last: blocks of 17, odd count
def test_low_lines_are_the_rfft_lines(samples, lines):
    y = _record(samples)
    plan = block_plan(samples, lines)
    assert plan is not None
    reference = scipy.fft.rfft(y)[:lines]
    got = low_lines(y, lines, plan, workers=2)
    # rounding of either method: a few 1e-16 of sqrt(N) x RMS (the size of a line of white noise)
    assert np.max(np.abs(got - reference)) <= 1e-13 * math.sqrt(samples) * np.std(y)


@pytest.mark.parametrize("samples, lines", [(1 << 20, 400), (2_048_000, 3000)])
def test_added_lines_are_the_irfft_of_those_lines(samples, lines):
    y = _record(samples, 2)
    rng = np.random.default_rng(3)
    values = (rng.standard_normal(lines) + 1j * rng.standard_normal(lines)) * math.sqrt(samples)
    spectrum = np.zeros(samples // 2 + 1, dtype=complex)
    spectrum[:lines] = values
    reference = y + scipy.fft.irfft(spectrum, n=samples)
    got = add_low_lines(y.copy(), values, block_plan(samples, lines), workers=2)
    assert np.max(np.abs(got - reference)) <= 1e-13 * np.std(reference)


def test_block_plan_bounds_the_taylor_remainder_and_refuses_what_it_cannot_do():
    block, terms = block_plan(1 << 24, 6228)
    assert (1 << 24) % block == 0
    theta = math.pi * 6227 * block / (1 << 24)  # largest |a_k s_r|
    assert theta**terms / math.factorial(terms) <= 1e-20  # Taylor remainder of e^(ix) (A&S 4.2.1)
    assert block_plan(LOWBAND_MIN_SAMPLES - 2, 10) is None  # short records: whole-record FFTs
    assert block_plan(1_048_583, 10) is None  # a prime length: no block divides it
    assert block_plan(1 << 20, 1 << 17) is None  # too many lines for a short expansion


def test_results_do_not_depend_on_the_threads():
    y = _record(1 << 21, 4)
    plan = block_plan(y.size, 900)
    lines = [low_lines(y, 900, plan, workers) for workers in (1, 2, 3)]
    assert all(np.array_equal(lines[0], other) for other in lines[1:])
    added = [add_low_lines(y.copy(), lines[0], plan, workers) for workers in (1, 2, 3)]
    assert all(np.array_equal(added[0], other) for other in added[1:])


@pytest.mark.parametrize("samples", [1 << 21, 40 * 51200])
def test_long_periodic_high_pass_is_the_whole_record_fft_filter(samples):
    rate_hz = 51200.0
    highpass = SpillHighpass(HIGHPASS_PASS_FRACTION * 20.0, HIGHPASS_STOP_FRACTION * 20.0, rate_hz)
    rng = np.random.default_rng(5)
    u = rng.standard_normal(samples)
    y = u + 0.2 * (u**2 - 1.0) + 0.05 * (u**3 - 3.0 * u)  # a transformed record: power down to 0 Hz
    # reference: the exact circular high-pass with scipy.fft on every line
    spectrum = scipy.fft.rfft(y)
    spectrum *= highpass.response(np.arange(spectrum.size) * rate_hz / samples)
    reference = scipy.fft.irfft(spectrum, n=samples)
    strided = np.repeat(y[:, None], 2, axis=1)[:, 0]  # the same samples in a non-contiguous view
    assert np.array_equal(periodic_highpass(strided, highpass), periodic_highpass(y.copy(), highpass))  # layout-free
    got = periodic_highpass(y, highpass, workers=2)
    assert got is y  # a long record is filtered in place
    assert np.max(np.abs(got - reference)) <= 1e-13 * np.std(reference)
    # the lines below the stop edge are gone (rounding only), the band untouched
    lines = np.abs(scipy.fft.rfft(got))
    stop = int(highpass.stop_edge_hz * samples / rate_hz)
    assert np.max(lines[:stop]) <= 1e-11 * math.sqrt(samples) * np.std(got)


def test_short_periodic_high_pass_keeps_the_whole_record_fft():
    samples, rate_hz = 20480, 5120.0
    highpass = SpillHighpass(19.0, 10.0, rate_hz)
    y = _record(samples, 6)
    spectrum = scipy.fft.rfft(y)
    top = math.ceil(19.0 * samples / rate_hz) + 1
    spectrum[:top] *= highpass.response(np.arange(top) * rate_hz / samples)
    reference = scipy.fft.irfft(spectrum, n=samples, overwrite_x=True)
    got = periodic_highpass(y.copy(), highpass)
    assert np.array_equal(got, reference)  # the same operations, bit for bit
