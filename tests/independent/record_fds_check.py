"""Recompute one Monte-Carlo record's FDS and ERS from its samples, independently of vibsynth's durability code.

Run from the repository root (numpy and scipy only for the computation; vibsynth is used to produce
the outputs being checked: the severity JSON and the record's samples):

    python tests/independent/record_fds_check.py [--record 0] [--fn 100,200,400]

Independent path, per natural frequency fn:

1. the record x (g) is upsampled 8 x by band-limited polyphase interpolation
   (scipy.signal.resample_poly), so the response's peaks fall on samples;
2. the relative displacement z of a base-excited oscillator (Q) is
   Z/A = -1 / (s^2 + 2 zeta wn s + wn^2), A in m/s^2 (g0 = 9.80665 m/s^2), discretized by the
   bilinear (Tustin) transform (scipy.signal.cont2discrete) at the upsampled rate and run with
   scipy.signal.lfilter;
3. rainflow counting of z by the three-point stack method of ASTM E1049-85 (2017), section 5.4.4,
   written here from the standard (half cycles for the residue);
4. Miner's sum D = sum n_i (range_i / 2)^b, and ERS = (2 pi fn)^2 max|z| / g0.

Compared with `vibsynth severity ... --records N --json` (fds_each_record, ers_each_record_g).

References: ASTM E1049-85 (2017) "Standard practices for cycle counting in fatigue analysis";
M. A. Miner, J. Appl. Mech. 12, A159-A164 (1945); scipy.signal (lfilter, cont2discrete,
resample_poly).
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys

import numpy as np
from scipy import signal

G0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
UPSAMPLE = 8


def turning_points(z: np.ndarray) -> np.ndarray:
    """First point, every local extremum (plateaus collapsed), last point."""
    keep = np.concatenate([[True], np.diff(z) != 0])
    z = z[keep]
    if z.size < 3:
        return z
    d = np.diff(z)
    extremum = np.concatenate([[True], d[1:] * d[:-1] < 0, [True]])
    return z[extremum]


def astm_rainflow(points) -> tuple[np.ndarray, np.ndarray]:
    """Ranges and counts (1 or 0.5) by ASTM E1049-85 section 5.4.4 (rainflow counting)."""
    ranges, counts = [], []
    stack: list = []
    for point in points:
        stack.append(float(point))
        while len(stack) >= 3:
            x = abs(stack[-1] - stack[-2])
            y = abs(stack[-2] - stack[-3])
            if x < y:
                break
            if len(stack) == 3:  # Y contains the starting point: a half cycle, drop the start
                ranges.append(y)
                counts.append(0.5)
                stack.pop(0)
            else:  # a full cycle: drop both points of Y
                ranges.append(y)
                counts.append(1.0)
                last = stack.pop()
                stack.pop()
                stack.pop()
                stack.append(last)
    for a, b in zip(stack[:-1], stack[1:]):  # the residue: half cycles
        ranges.append(abs(b - a))
        counts.append(0.5)
    return np.asarray(ranges), np.asarray(counts)


def relative_displacement(x_g: np.ndarray, rate_hz: float, fn_hz: float, q: float) -> np.ndarray:
    """Relative displacement (m) of a base-excited oscillator, from base acceleration in g."""
    up = signal.resample_poly(x_g, UPSAMPLE, 1) * G0
    fs = rate_hz * UPSAMPLE
    wn = 2.0 * math.pi * fn_hz
    zeta = 1.0 / (2.0 * q)
    num, den, _ = signal.cont2discrete(([-1.0], [1.0, 2.0 * zeta * wn, wn * wn]), 1.0 / fs, method="bilinear")
    return signal.lfilter(np.ravel(num), den, up)


def record_severity(x_g: np.ndarray, rate_hz: float, fn_hz, q: float, b: float) -> tuple[np.ndarray, np.ndarray]:
    """Damage (m^b, K = C = 1, amplitude = half range) and ERS (g) of one record at each fn."""
    damage, ers = [], []
    for fn in np.atleast_1d(fn_hz):
        z = relative_displacement(x_g, rate_hz, float(fn), q)
        ranges, counts = astm_rainflow(turning_points(z))
        damage.append(float(np.sum(counts * (0.5 * ranges) ** b)))
        ers.append((2.0 * math.pi * fn) ** 2 * float(np.max(np.abs(z))) / G0)
    return np.asarray(damage), np.asarray(ers)


def compare(profile: str, duration_s: float, records: int, record: int, fn_hz, q: float, b: float,
            rate_hz: float, seed: int) -> dict:
    """Run `vibsynth severity --records` and recompute record `record` independently; the ratios."""
    fn_text = [f"{f:g}" for f in fn_hz]
    command = [sys.executable, "-m", "vibsynth", "severity", profile, "--duration", f"{duration_s:g}",
               "--records", str(records), "--record-rate", f"{rate_hz:g}", "--seed", str(seed), "--q", f"{q:g}",
               "--b", f"{b:g}", "--fn-min", fn_text[0], "--fn-max", fn_text[-1], "--points", str(len(fn_text)),
               "--json"]
    result = subprocess.run(command, capture_output=True, text=True, check=True)
    data = json.loads(result.stdout)
    from vibsynth.generate.plan import make_plan  # to remake the record's samples (an output being checked)
    from vibsynth.montecarlo import record_samples
    from vibsynth.profile.files import read_profile

    plan = make_plan(read_profile(profile), duration_s, rate_hz)
    x = record_samples(plan, seed, record)
    fn = np.asarray(data["fn_hz"])
    damage, ers = record_severity(x, rate_hz, fn, q, b)
    scale = data["record_damage_scale"]
    return {
        "fn_hz": fn.tolist(),
        "fds_ratio": (np.asarray(data["fds_each_record"][record]) / (damage * scale)).tolist(),
        "ers_ratio": (np.asarray(data["ers_each_record_g"][record]) / ers).tolist(),
        "rate_hz": rate_hz, "samples": int(x.size),
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--profile", default="bench-flat")
    parser.add_argument("--duration", type=float, default=8.0)
    parser.add_argument("--records", type=int, default=2)
    parser.add_argument("--record", type=int, default=0)
    parser.add_argument("--fn", default="100,200,400")
    parser.add_argument("--q", type=float, default=10.0)
    parser.add_argument("--b", type=float, default=8.0)
    parser.add_argument("--rate", type=float, default=5120.0)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    fn = [float(v) for v in args.fn.split(",")]
    if len(fn) > 2:  # the command line takes a log grid: ask for the ends and count
        grid = np.geomspace(fn[0], fn[-1], len(fn))
        if not np.allclose(grid, fn, rtol=1e-6):
            parser.error("--fn must be log-spaced (e.g. 100,200,400)")
    out = compare(args.profile, args.duration, args.records, args.record, fn, args.q, args.b, args.rate, args.seed)
    for f, d, e in zip(out["fn_hz"], out["fds_ratio"], out["ers_ratio"]):
        print(f"fn {f:8.4g} Hz (fn/rate {f / args.rate:.3f}): FDS vibsynth / independent {d:.5f}, "
              f"ERS {e:.5f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
