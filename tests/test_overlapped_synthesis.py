"""Work overlapped or fused for speed gives the same samples, bit for bit, as the plain sequence of stages.

- :func:`vibsynth.generate.pipeline.nongaussian_synthesizer` draws a periodic record's normals on a
  second thread while the design runs: the record must equal the one made by
  ``make_nongaussian_plan`` followed by ``Synthesizer`` (the serial path), with 1 and 2 workers,
  fixed and Rayleigh amplitudes, softening, hardening and clipping transforms, records long enough
  for the block-moment high-pass and short ones; also when the pre-drawn normals are for another
  band (they are then drawn again).
- :func:`vibsynth.generate.highpass.periodic_highpass` applies a memoryless stage before
  (``prepare``) and after (``finish``) the filter stretch by stretch: the result must equal the
  stage applied to the whole record first (bytes), and the high-pass written out with scipy.fft
  (rfft, the response on the lines, irfft) to rounding.
- A read-only spectrum is shared by a plan rather than copied, with the same values.

External references: scipy.fft.rfft / scipy.fft.irfft (pocketfft) for the whole-record
frequency-domain high-pass.  The profiles are invented demo data.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from concurrent.futures import Future

import numpy as np
import pytest
import scipy.fft

from vibsynth.errors import InputError
from vibsynth.generate.design import make_nongaussian_plan
from vibsynth.generate.frames import _draw_normals
from vibsynth.generate.highpass import SpillHighpass, periodic_highpass
from vibsynth.generate.pipeline import Synthesizer, make_synthesizer, nongaussian_synthesizer
from vibsynth.generate.plan import plan_synthesis
from vibsynth.generate.seeds import PERIODIC_STREAM, child_generator, root_seed_sequence
from vibsynth.profile.asd import AsdProfile
from vibsynth.transforms.choice import plan_transform

PROFILE = AsdProfile([20, 80, 350, 2000], [0.01, 0.04, 0.04, 0.005], name="invented-bracket")  # invented
RATE = 8192.0


def _serial(profile, base, options, seed):
    plan, _ = make_nongaussian_plan(profile, base, plan_transform(**options))
    return Synthesizer(plan, seed, 1).take_record()


@pytest.mark.parametrize("samples", [1 << 14, 1 << 20])  # the second: block-moment high-pass
@pytest.mark.parametrize("amplitude", ["fixed", "rayleigh"])
@pytest.mark.parametrize("options", [{"kurtosis": 6.0}, {"kurtosis": 2.5}, {"kurtosis": 5.0, "skewness": 0.4},
                                     {"clip": 3.0}])
def test_overlapped_draws_give_the_serial_record(samples, amplitude, options):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base = plan_synthesis(PROFILE, samples / RATE, RATE, amplitude=amplitude, memory_budget_bytes=1 << 40)
        reference = _serial(PROFILE, base, options, 5)
        for workers in (1, 2):
            synthesizer, design = nongaussian_synthesizer(PROFILE, base, plan_transform(**options), seed=5,
                                                          workers=workers)
            assert synthesizer.plan.mode == "periodic" and synthesizer.plan.transform is design.transform
            assert (synthesizer._drawn is not None) == (workers > 1)  # the overlapped path is the one tested
            record = synthesizer.take_record()
            assert record.tobytes() == reference.tobytes()
            # the pre-drawn lines are used once: the record made again (after take_record) is the same
            assert synthesizer.take_record().tobytes() == reference.tobytes()


def _kurtosis_6_reference(samples: int, seed: int):
    """The periodic plan of ``samples`` samples and its kurtosis-6 record made the plain serial way."""
    base = plan_synthesis(PROFILE, samples / RATE, RATE, memory_budget_bytes=1 << 40)
    return base, _serial(PROFILE, base, {"kurtosis": 6.0}, seed)


def test_library_entry_point_uses_the_overlap_and_keeps_the_samples():
    samples = 1 << 16
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, reference = _kurtosis_6_reference(samples, 9)
        synthesizer, single = make_synthesizer(PROFILE, samples / RATE, RATE, seed=9, kurtosis=6.0,
                                               memory_budget_bytes=1 << 40, workers=2)
    assert single and synthesizer._drawn is not None
    assert synthesizer.take_record().tobytes() == reference.tobytes()


def test_no_transform_is_refused_before_any_draw():
    base = plan_synthesis(PROFILE, 1.0, RATE, memory_budget_bytes=1 << 40)
    with pytest.raises(InputError, match="needs a transform"):
        nongaussian_synthesizer(PROFILE, base, None, seed=1, workers=2)


def test_normals_drawn_for_another_band_are_drawn_again():
    samples = 1 << 15
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base, reference = _kurtosis_6_reference(samples, 3)
        synthesizer, _ = nongaussian_synthesizer(PROFILE, base, plan_transform(kurtosis=6.0), seed=3, workers=2)
    lo, hi = synthesizer.plan._band
    wrong = Future()
    wrong.set_result(_draw_normals(child_generator(root_seed_sequence(3), PERIODIC_STREAM), samples // 2 + 1,
                                   (lo + 1, hi), "fixed"))
    synthesizer._drawn.result()
    synthesizer._drawn = wrong
    assert synthesizer.take_record().tobytes() == reference.tobytes()


def _softening(stretch):
    # a memoryless stage (a cubic of each sample, as the Hermite transform)
    stretch += 0.1 * (stretch * stretch * stretch - 3.0 * stretch)


def _scale(stretch):
    stretch *= 0.37


@pytest.mark.parametrize("samples", [1 << 12, 1 << 20, (1 << 20) + 6])  # whole FFTs, block moments, whole FFTs
@pytest.mark.parametrize("workers", [1, 2])
def test_stages_inside_the_highpass_equal_separate_passes(samples, workers):
    rate = 4096.0
    highpass = SpillHighpass(0.95 * 20.0, 0.5 * 20.0, rate)
    y = np.random.default_rng(4).standard_normal(samples)
    separate = y.copy()
    _softening(separate)
    separate = periodic_highpass(separate, highpass, workers)
    _scale(separate)
    fused = periodic_highpass(y.copy(), highpass, workers, prepare=_softening, finish=_scale)
    assert fused.tobytes() == separate.tobytes()
    # and against the whole-record high-pass written out with scipy.fft (rounding only)
    transformed = y.copy()
    _softening(transformed)
    spectrum = scipy.fft.rfft(transformed)
    spectrum *= highpass.response(np.arange(spectrum.size) * rate / samples)
    reference = scipy.fft.irfft(spectrum, n=samples) * 0.37
    # rounding of either method: a few 1e-16 of the record's RMS per operation (scipy.fft accuracy)
    assert np.max(np.abs(fused - reference)) <= 1e-12 * math.sqrt(np.mean(reference**2))


def test_a_read_only_spectrum_is_shared_with_the_same_values():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base = plan_synthesis(PROFILE, 2.0, RATE, memory_budget_bytes=1 << 40)
        plan, design = make_nongaussian_plan(PROFILE, base, plan_transform(kurtosis=6.0))
    assert plan.line_spectrum is design.line_spectrum and not plan.line_spectrum.flags.writeable
    writable = np.array(design.line_spectrum)
    copied = plan_synthesis(PROFILE, 2.0, RATE, memory_budget_bytes=1 << 40)
    rebuilt = dataclasses.replace(copied, line_spectrum=writable)
    assert rebuilt.line_spectrum is not writable  # a writeable array is copied (the caller may change it)
    assert rebuilt.line_spectrum.tobytes() == writable.tobytes()
    signed = writable.copy()
    signed[0] = -0.0
    signed.setflags(write=False)
    cleaned = dataclasses.replace(copied, line_spectrum=signed).line_spectrum
    assert cleaned is not signed and not np.signbit(cleaned[0])  # -0.0 at DC is cleaned to +0.0 as before
