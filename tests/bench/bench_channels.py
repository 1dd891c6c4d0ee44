"""Cost of a correlated three-channel drive against three single-channel drives, and its accuracy.

Run from a source checkout: ``python tests/bench/bench_channels.py`` (about a minute).  Prints
the wall-clock ratio (three-channel / three single-channel records of the same channels, same
mode, one thread) and, for the three-channel record, the 95th-percentile coherence and phase
errors of every pair and the ASD error of every channel, estimated with scipy.signal (Welch,
2.5 Hz lines) over the in-band lines 25-1950 Hz.  Timings are machine-dependent: no test
asserts them.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np
import scipy.signal

from vibsynth.generate.channels import make_channel_plan
from vibsynth.generate.pipeline import Synthesizer, make_synthesizer
from vibsynth.profile.multichannel import parse_any_toml

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from test_multichannel import THREE  # noqa: E402  (the suite's three-channel profile, one copy)

RATE = 5120.0


def _best(function, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def main(duration_s: float = 600.0) -> dict:
    profile = parse_any_toml(THREE, "three")
    results = {}
    for mode, budget in (("periodic", 1e12), ("overlap-add", 1.0)):
        plan = make_channel_plan(profile, duration_s, RATE, memory_budget_bytes=budget)
        assert plan.mode == mode
        three = _best(lambda: Synthesizer(plan, seed=1, workers=1).samples())
        plans = [make_synthesizer(c, duration_s, RATE, seed=1, memory_budget_bytes=budget, workers=1)[0].plan
                 for c in profile.channels]
        single = _best(lambda: [Synthesizer(p, seed=1, workers=1).samples() for p in plans])  # fresh: no cached record
        results[mode] = {"three_channel_s": three, "three_single_s": single, "ratio": three / single}
    x = Synthesizer(make_channel_plan(profile, duration_s, RATE, memory_budget_bytes=1.0), seed=11).samples()
    f, _ = scipy.signal.welch(x[:, 0], fs=RATE, nperseg=2048)
    band = (f >= 25.0) & (f <= 1950.0)
    errors = {}
    for a, b in ((0, 1), (0, 2), (1, 2)):
        pair = profile.pair_of(a, b)
        _, coherence = scipy.signal.coherence(x[:, a], x[:, b], fs=RATE, nperseg=2048)
        _, cross = scipy.signal.csd(x[:, a], x[:, b], fs=RATE, nperseg=2048)
        coherence_error = np.abs(coherence[band] - pair.coherence_at(f[band]))
        phase_error = np.abs((np.angle(cross[band], deg=True) - pair.phase_deg_at(f[band]) + 180) % 360 - 180)
        errors["-".join(profile.channel_names[i] for i in (a, b))] = {
            "coherence_error_median": float(np.median(coherence_error)),
            "coherence_error_95": float(np.quantile(coherence_error, 0.95)),
            "phase_error_median_deg": float(np.median(phase_error)),
            "phase_error_95_deg": float(np.quantile(phase_error, 0.95)),
        }
    for column, channel in enumerate(profile.channels):
        _, asd = scipy.signal.welch(x[:, column], fs=RATE, nperseg=2048)
        db = np.abs(10 * np.log10(asd[band] / channel.evaluate(f[band])))
        errors[profile.channel_names[column]] = {
            "asd_error_95_db": float(np.quantile(db, 0.95)),
            "grms_error_percent": float(100 * (np.sqrt(np.mean(x[:, column] ** 2)) / channel.grms - 1)),
        }
    results["accuracy_overlap_add_600s"] = errors
    return results


if __name__ == "__main__":
    print(json.dumps(main(), indent=2))
