"""Benchmark of non-Gaussian drives against Gaussian ones (not part of the test run).

Run:  python tests/bench/bench_nongaussian.py [--samples-log2 22] [--rounds 3] [--seeds 5] [--skip-stats]

Prints
- cost: seconds per record and the ratio non-Gaussian / Gaussian, for a periodic record
  (2^N samples in memory) and a streamed overlap-add record (2^N samples, chunks of 2^16), for
  kurtosis 6 (softening cubic), skewness 0.5 with kurtosis 4, kurtosis 2.5 (hardening form,
  Cardano per sample) and clip 3; planning (spectral compensation) is timed separately and
  included in the totals; best of several interleaved rounds (the machine may be shared);
- the compensation grid: time and predicted worst in-band deviation of the compensation on
  frame grids of 2^14 .. 2^22 samples (beyond COMPENSATION_MAX_FRAME_LENGTH the library caps the
  grid and interpolates; here the cap is lifted for the measurement), and the difference between
  the interpolated and the directly compensated spectrum on a 2^22-sample record;
- statistics per case over seeds: kurtosis, skewness (scipy.stats), share of in-band lines within
  +/-1.5 dB and worst deviation (scipy.signal.welch, 2 Hz lines), RMS error against the
  closed-form g RMS, crest factor; 2^21-sample records (512 s at 4096 Hz) in overlap-add mode.

The profile is an invented 20-1000 Hz plateau with gentle skirts, at 4096 Hz.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import scipy.signal
import scipy.stats

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from vibsynth.transforms import compensation  # noqa: E402
from vibsynth.generate.design import nongaussian_plan  # noqa: E402
from vibsynth.transforms.choice import plan_transform  # noqa: E402
from vibsynth.profile.asd import AsdProfile  # noqa: E402
from vibsynth.generate.pipeline import Synthesizer  # noqa: E402
from vibsynth.generate.plan import plan_synthesis  # noqa: E402

RATE_HZ = 4096.0
PROFILE = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01], name="invented-bench")
CASES = {
    "kurtosis 6": dict(kurtosis=6.0),
    "skewness 0.5, kurtosis 4": dict(skewness=0.5, kurtosis=4.0),
    "kurtosis 2.5 (hardening)": dict(kurtosis=2.5),
    "clip 3": dict(clip=3.0),
}
STAT_CASES = {
    "kurtosis 4": dict(kurtosis=4.0),
    "kurtosis 6": dict(kurtosis=6.0),
    "kurtosis 8": dict(kurtosis=8.0),
    "skewness 0.5, kurtosis 4": dict(skewness=0.5, kurtosis=4.0),
    "skewness 0.5": dict(skewness=0.5),
    "kurtosis 2.5": dict(kurtosis=2.5),
    "clip 3": dict(clip=3.0),
    "clip 2.5": dict(clip=2.5),
}


def drain(synthesizer) -> None:
    for _ in synthesizer.iter_chunks(1 << 16):
        pass


def cost(samples: int, rounds: int) -> None:
    duration = samples / RATE_HZ
    for mode, budget in (("periodic", 1 << 40), ("overlap-add", 1 << 20)):
        base = plan_synthesis(PROFILE, duration, RATE_HZ, memory_budget_bytes=budget)
        assert base.mode == mode
        synthesis = {name: float("inf") for name in ["gaussian", *CASES]}
        planning = {name: float("inf") for name in CASES}
        # interleaved rounds, best of each: the machine may be shared
        for _ in range(rounds):
            start = time.perf_counter()
            drain(Synthesizer(base, 1))
            synthesis["gaussian"] = min(synthesis["gaussian"], time.perf_counter() - start)
            for name, options in CASES.items():
                start = time.perf_counter()
                plan, design = nongaussian_plan(PROFILE, base, plan_transform(**options))
                planning[name] = min(planning[name], time.perf_counter() - start)
                start = time.perf_counter()
                drain(Synthesizer(plan, 1))
                synthesis[name] = min(synthesis[name], time.perf_counter() - start)
        gaussian = synthesis["gaussian"]
        print(f"{mode}, {samples} samples ({duration:g} s), frame {base.frame_length}: Gaussian {gaussian:.3f} s "
              f"({gaussian / samples * 1e9:.0f} ns/sample)")
        for name in CASES:
            total = planning[name] + synthesis[name]
            print(f"  {name:<26} synthesis {synthesis[name]:.3f} s ({synthesis[name] / gaussian:.2f} x Gaussian), "
                  f"planning {planning[name]:.3f} s, total {total / gaussian:.2f} x Gaussian")


def compensation_grid() -> None:
    transform = plan_transform(kurtosis=6.0)
    saved = compensation._MAX_LINES
    compensation._MAX_LINES = (1 << 22) + 1  # lift the cap for the measurement only
    try:
        results = {}
        for log2 in range(14, 23, 2):
            n = 1 << log2
            df = RATE_HZ / n
            target = PROFILE.evaluate(np.arange(n // 2 + 1) * df)
            start = time.perf_counter()
            result = compensation.compensate_spectrum(target, df, transform)
            seconds = time.perf_counter() - start
            results[n] = result
            print(f"  compensation on 2^{log2} samples ({df:.4g} Hz lines): {seconds:.2f} s, {result.iterations} "
                  f"updates, predicted worst in-band {result.max_abs_residual_db:.4f} dB")
    finally:
        compensation._MAX_LINES = saved
    # interpolated (library grid) against direct (2^22 grid) on a 2^22-sample periodic record
    n = 1 << 22
    base = plan_synthesis(PROFILE, n / RATE_HZ, RATE_HZ, memory_budget_bytes=1 << 40)
    _, design = nongaussian_plan(PROFILE, base, transform)
    band = results[n].gaussian_psd_per_hz > 0
    solved = design.transform  # pre-corrected for the high-pass; compare shapes for the same transform
    compensation._MAX_LINES = (1 << 22) + 1
    try:
        direct = compensation.compensate_spectrum(base.line_spectrum, RATE_HZ / n, solved)
    finally:
        compensation._MAX_LINES = saved
    ratio = design.line_spectrum[band] / direct.gaussian_psd_per_hz[band]
    inner = ratio[2:-2]  # without the two lines at each band edge (an edge line holds part of a bin)
    grid = design.compensation_frame_length.bit_length() - 1
    print(f"  interpolated (2^{grid} grid) vs direct (2^22 grid) compensated spectrum on a 2^22-sample record: "
          f"{10 * np.log10(ratio.min()):+.2e} to {10 * np.log10(ratio.max()):+.2e} dB, without the edge lines "
          f"{10 * np.log10(inner.min()):+.2e} to {10 * np.log10(inner.max()):+.2e} dB "
          f"(interpolated: {design.interpolated})")


def statistics(seeds: int) -> None:
    samples = 1 << 21
    print(f"statistics over seeds 1..{seeds}, {samples} samples at {RATE_HZ:g} Hz, overlap-add "
          "(mean [min, max] over seeds)")
    base = plan_synthesis(PROFILE, samples / RATE_HZ, RATE_HZ, memory_budget_bytes=1 << 20)
    for name, options in STAT_CASES.items():
        plan, design = nongaussian_plan(PROFILE, base, plan_transform(**options))
        rows = []
        for seed in range(1, seeds + 1):
            x = Synthesizer(plan, seed).samples()[:, 0]
            f, p = scipy.signal.welch(x, fs=RATE_HZ, nperseg=2048)
            res = f[1] - f[0]
            judged = (f >= 20 + 2 * res) & (f <= 1000 - 2 * res)
            db = 10 * np.log10(p[judged] / PROFILE.evaluate(f[judged]))
            rms = float(np.sqrt(np.mean(x**2)))
            rows.append((scipy.stats.kurtosis(x, fisher=False), scipy.stats.skew(x), np.mean(np.abs(db) <= 1.5),
                         float(np.max(np.abs(db))), 100 * (rms / PROFILE.grms - 1), float(np.max(np.abs(x))) / rms))
        table = np.array(rows)

        def cell(column, fmt, table=table):
            values = table[:, column]
            return f"{values.mean():{fmt}} [{values.min():{fmt}}, {values.max():{fmt}}]"

        print(f"  {name:<26} kurtosis {cell(0, '.3f')}  skewness {cell(1, '+.3f')}  within 1.5 dB "
              f"{cell(2, '.3f')}  worst {cell(3, '.2f')} dB  rms error {cell(4, '+.2f')} %  crest {cell(5, '.2f')}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples-log2", type=int, default=22)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--skip-stats", action="store_true")
    parser.add_argument("--skip-grid", action="store_true")
    options = parser.parse_args()
    cost(1 << options.samples_log2, options.rounds)
    if not options.skip_grid:
        print("compensation grid (kurtosis 6):")
        compensation_grid()
    if not options.skip_stats:
        statistics(options.seeds)


if __name__ == "__main__":
    main()
