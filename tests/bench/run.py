"""vibsynth benchmark: ratios against reference methods, measured in one run on one machine.

Run from the repository root (not part of the test suite):

    python tests/bench/run.py            # full run, a few minutes
    python tests/bench/run.py --quick    # smaller sizes, shorter streams

Prints a table and a JSON document. Every figure is a ratio of two timings (or
a memory peak) measured in this run on the same data, so the numbers are
comparable across machines; absolute seconds are shown for context only.

The floor is measured again right before each measure that is set against it
(best of ``--rounds``), and each ratio uses the floor measured next to it: on a
shared machine the floor's own time drifts by 10-15 % within minutes, which a
single floor at the start would put into every ratio.  The JSON keeps every
floor (``floors_s``) and their median (``floor_s``; before, the one floor of the
run); the table's first row gives their range.  A child process timed right
after the floor starts on memory the floor has just handed back, which on a
virtual machine whose host reclaims free memory is the slower case: the
whole-process ratios are the conservative ones.

Measures
--------
1. generate in memory, 2^24 samples, against the method's floor: one
   complex-to-real inverse FFT of that length plus the same number of normal
   draws (goal <= 1.5x);
2. generate streamed to .flac and .wav, one hour at 51.2 kHz: throughput
   against the floor's rate (goal >= 0.6x) and peak RSS of the process
   (goal < 256 MB, and flat when the duration doubles: half an hour vs one hour)
   and the growth of the machine's page cache while it runs (the file's and
   the sample cache's pages, which RSS does not count),
   with how the second pass got the record (the peak pass's samples kept in a
   temporary file, and its size, or made again);
3. verify against scipy.signal.welch on the same in-memory array
   (goal <= 1.0x), and verify from a file in constant memory (peak RSS);
4. non-Gaussian (kurtosis 6, compensated, planning included) against Gaussian generation
   (goal <= 1.3x), for one periodic record in memory and for an overlap-add stream, both through
   ``make_synthesizer`` (the entry point of generate_samples, iter_chunks and the command line);
   for the periodic record also planned first and then synthesized, as context;
5. a naive sum-of-sines synthesis of the same spectrum against ours, at
   growing sizes (shows the O(N^2) against O(N log N) scaling);
6. `vibsynth generate` of 2^24 samples at 51.2 kHz to .npy as a whole process
   (interpreter start-up, imports, planning, synthesis, writing the file and its
   sidecar), several repetitions after one untimed warm-up run (compiled modules
   cached, as on a user's machine), each against the floor measured just before
   it; min and median of those ratios (goal <= 1.5x).

`--only NAME[,NAME...]` runs a subset (the floor is always measured):
memory, nongaussian, verify, sines, parts, stream, process.

The profile is invented demo data (20-2000 Hz).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
import scipy.fft
from scipy import signal

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from vibsynth.jobs import default_workers  # noqa: E402
from vibsynth.io.drivefile import write_drive  # noqa: E402
from vibsynth.generate.design import nongaussian_plan  # noqa: E402
from vibsynth.transforms.choice import plan_transform  # noqa: E402
from vibsynth.profile.asd import AsdProfile  # noqa: E402
from vibsynth.generate.pipeline import Synthesizer, generate_samples, make_synthesizer  # noqa: E402
from vibsynth.generate.plan import plan_synthesis  # noqa: E402
from vibsynth.analysis.verify import verify_record  # noqa: E402
from vibsynth.analysis.welch import welch_asd  # noqa: E402

RATE_HZ = 51200.0
PROFILE = AsdProfile([20, 80, 350, 2000], [0.01, 0.04, 0.04, 0.005], name="invented-bench")
PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"

_CHILD = textwrap.dedent(
    """
    import resource, sys
    from vibsynth.cli.main import main
    status = main(sys.argv[1:])
    print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
    sys.exit(status)
    """
)
# A small launcher in between: Linux keeps the parent's peak RSS in a child's ru_maxrss after fork.  The
# launcher times the vibsynth process itself (its start-up included, the launcher's own start-up not).
SECTIONS = ("memory", "nongaussian", "verify", "sines", "parts", "stream", "process")
_LAUNCHER = ("import subprocess, sys, time; start = time.perf_counter(); status = subprocess.call(sys.argv[1:]); "
             "print(time.perf_counter() - start, flush=True); sys.exit(status)")


def best_of(job, rounds: int) -> float:
    """Smallest wall time of ``rounds`` runs (the least disturbed run on a shared machine), s."""
    best = float("inf")
    for _ in range(rounds):
        start = time.perf_counter()
        job()
        best = min(best, time.perf_counter() - start)
    return best


def page_cache_mb() -> float | None:
    """The machine's page cache now (``Cached`` of /proc/meminfo), MB; None where there is no /proc/meminfo."""
    try:
        with open("/proc/meminfo") as handle:
            for line in handle:
                if line.startswith("Cached:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        return None
    return None


def cli_child(argv: list[str], watch_page_cache: bool = False):
    """Run ``vibsynth ARGV`` in a fresh process; return (its peak RSS in MB, its wall time in s).

    With ``watch_page_cache``, also the largest growth of the machine's page cache while it ran
    (MB, sampled every 0.1 s; None without /proc/meminfo): the memory a streamed drive takes
    outside the process (its file, its sample cache), which peak RSS does not count.
    """
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    # as on a user's machine: Python keeps compiled modules (a shell that forbids it would time the compiler)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    base = page_cache_mb() if watch_page_cache else None
    growth = 0.0
    child = subprocess.Popen(
        [sys.executable, "-c", _LAUNCHER, sys.executable, "-c", _CHILD, *argv],
        env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    if base is not None:
        while child.poll() is None:
            growth = max(growth, (page_cache_mb() or base) - base)
            time.sleep(0.1)
    stdout, stderr = child.communicate()
    if child.returncode not in (0, 1):
        raise RuntimeError(f"vibsynth {' '.join(argv)} failed: {stderr.strip()}")
    rss_kb, wall = stdout.split()[-2:]
    if watch_page_cache:
        return int(rss_kb) * 1024 / 2**20, float(wall), (growth if base is not None else None)
    return int(rss_kb) * 1024 / 2**20, float(wall)


def sum_of_sines(profile: AsdProfile, samples: int, rate_hz: float, rng: np.random.Generator) -> np.ndarray:
    """Naive reference: one cosine per line, summed sample by sample in blocks (O(N^2))."""
    df = rate_hz / samples
    f = np.arange(1, samples // 2) * df
    amplitude = np.sqrt(2 * profile.evaluate(f) * df)
    keep = amplitude > 0
    f, amplitude = f[keep], amplitude[keep]
    phase = rng.uniform(0, 2 * np.pi, f.size)
    t = np.arange(samples) / rate_hz
    out = np.empty(samples)
    block = 4096
    for start in range(0, samples, block):
        tt = t[start:start + block, None]
        out[start:start + block] = np.cos(2 * np.pi * f[None, :] * tt + phase[None, :]) @ amplitude
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description="vibsynth benchmark: ratios measured in one run")
    parser.add_argument("--quick", action="store_true", help="smaller sizes and shorter streams")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--only", default="", help="comma-separated subset: " + ",".join(SECTIONS))
    parser.add_argument("--stream-seconds", type=float, default=None,
                        help="duration of the streamed .flac/.wav measure (default 3600, 300 with --quick)")
    parser.add_argument("--process-rounds", type=int, default=5,
                        help="repetitions of the whole-process generate to .npy")
    options = parser.parse_args()
    wanted = set(filter(None, options.only.split(","))) or set(SECTIONS)
    unknown = wanted - set(SECTIONS)
    if unknown:
        parser.error(f"--only: unknown section(s) {', '.join(sorted(unknown))}; known: {', '.join(SECTIONS)}")
    samples = 1 << (20 if options.quick else 24)
    stream_s = options.stream_seconds or (300.0 if options.quick else 3600.0)
    duration = samples / RATE_HZ
    rounds = options.rounds
    workers = default_workers()
    rows, results = [], {"workers": workers, "cpus": os.cpu_count()}

    rng = np.random.default_rng(0)
    lines = rng.standard_normal(samples // 2 + 1) + 1j * rng.standard_normal(samples // 2 + 1)
    floors = []

    def measure_floor() -> float:
        """The floor now: best of ``rounds`` inverse FFTs plus best of ``rounds`` normal draws, s."""
        seconds = (best_of(lambda: scipy.fft.irfft(lines, n=samples), rounds)
                   + best_of(lambda: rng.standard_normal(samples), rounds))
        floors.append(seconds)
        return seconds

    floor = measure_floor()
    floor_row = len(rows)
    rows.append(None)  # the floor's range, filled in at the end

    # 6. the whole process: `vibsynth generate` to .npy in a fresh interpreter, start-up included
    if "process" in wanted:
        with tempfile.TemporaryDirectory() as folder:
            folder = Path(folder)
            profile_path = folder / "bench.csv"
            profile_path.write_text(PROFILE_CSV)
            walls, ratios = [], []
            for round_index in range(options.process_rounds + 1):  # round 0 warms the caches, untimed
                out = folder / "whole.npy"
                floor = measure_floor() if round_index else floor
                _, wall = cli_child(["generate", str(profile_path), "-o", str(out), "--duration", repr(duration),
                                     "--rate", str(int(RATE_HZ)), "--seed", "1", "--quiet"])
                if np.load(out, mmap_mode="r").shape[0] != samples:
                    raise RuntimeError("whole-process generate wrote the wrong number of samples")
                if round_index:
                    walls.append(wall)
                    ratios.append(wall / floor)
            low, mid = min(ratios), float(np.median(ratios))
            results["generate_process_npy_x_floor_min"] = low
            results["generate_process_npy_x_floor_median"] = mid
            results["generate_process_npy_walls_s"] = walls
            results["generate_process_npy_x_floor_each"] = ratios
            rows.append(("generate to .npy, whole process (min/median)", f"{samples} samples",
                         f"{min(walls):.3f} / {float(np.median(walls)):.3f} s", f"{low:.2f} / {mid:.2f} x floor",
                         "<= 1.5"))

    # 1. in memory
    for amplitude in ("fixed", "rayleigh") if "memory" in wanted else ():
        floor = measure_floor()
        seconds = best_of(lambda: generate_samples(PROFILE, duration, RATE_HZ, seed=1, amplitude=amplitude,
                                                   memory_budget_bytes=1 << 40), rounds)
        ratio = seconds / floor
        results[f"generate_in_memory_{amplitude}_x_floor"] = ratio
        rows.append((f"generate in memory ({amplitude})", f"{samples} samples", f"{seconds:.3f} s",
                     f"{ratio:.2f} x floor", "<= 1.5"))

    # 4. non-Gaussian (kurtosis 6: planning with its spectral compensation, transform, spill high-pass)
    # against Gaussian generation of the same record: in memory (one periodic record) and streamed
    # (overlap-add, drained in chunks, on the drive job's default worker threads).  Both through the
    # library's entry point (make_synthesizer, as generate_samples, iter_chunks and the command line), which
    # draws a periodic record's normals while the design runs; the same samples made by planning first
    # and then synthesizing (no overlap) are timed as context.
    for mode, budget in ((("periodic", 1 << 40), ("overlap-add", 1)) if "nongaussian" in wanted else ()):
        def gaussian_job():
            synthesizer, _ = make_synthesizer(PROFILE, duration, RATE_HZ, seed=1, memory_budget_bytes=budget,
                                              workers=workers)
            for _ in synthesizer.iter_chunks(1 << 16):
                pass

        def kurtic_job():
            synthesizer, _ = make_synthesizer(PROFILE, duration, RATE_HZ, seed=1, memory_budget_bytes=budget,
                                              workers=workers, kurtosis=6.0)
            for _ in synthesizer.iter_chunks(1 << 16):
                pass

        def kurtic_sequential_job():
            base = plan_synthesis(PROFILE, duration, RATE_HZ, memory_budget_bytes=budget)
            plan, design = nongaussian_plan(PROFILE, base, plan_transform(kurtosis=6.0))
            for _ in Synthesizer(plan, 1, workers).iter_chunks(1 << 16):
                pass

        def planning_job():
            base = plan_synthesis(PROFILE, duration, RATE_HZ, memory_budget_bytes=budget)
            nongaussian_plan(PROFILE, base, plan_transform(kurtosis=6.0))

        gaussian = best_of(gaussian_job, rounds)
        kurtic = best_of(kurtic_job, rounds)
        ratio = kurtic / gaussian
        key = "in_memory" if mode == "periodic" else "streamed"
        results[f"nongaussian_over_gaussian_{key}"] = ratio
        rows.append((f"kurtosis 6 vs Gaussian ({mode})", f"{samples} samples", f"{kurtic:.3f} s / {gaussian:.3f} s",
                     f"{ratio:.2f} x", "<= 1.3"))
        if mode == "periodic":  # context: plan, then synthesize (nothing overlapped with the design)
            sequential = best_of(kurtic_sequential_job, rounds)
            results[f"nongaussian_sequential_over_gaussian_{key}"] = sequential / gaussian
            rows.append((f"  planned first, then synthesized ({mode})", "", f"{sequential:.3f} s",
                         f"{sequential / gaussian:.2f} x Gaussian", "(context)"))
        # breakdown (context only, timed on its own): the planning inside the non-Gaussian time
        planning = best_of(planning_job, rounds)
        results[f"nongaussian_planning_s_{key}"] = planning
        rows.append((f"  of which planning ({mode})", "", f"{planning:.3f} s", f"{planning / gaussian:.2f} x Gaussian",
                     "(context)"))

    # 3. verify against scipy.signal.welch on the same array
    if "verify" in wanted:
        x = generate_samples(PROFILE, duration, RATE_HZ, seed=2, memory_budget_bytes=1 << 40)
        nperseg = 8192
        t_scipy = best_of(lambda: signal.welch(x, fs=RATE_HZ, window="hann", nperseg=nperseg,
                                               noverlap=nperseg // 2, detrend="constant", scaling="density"), rounds)
        t_ours = best_of(lambda: welch_asd(x, RATE_HZ, nperseg), rounds)
        results["welch_over_scipy"] = t_ours / t_scipy
        rows.append(("Welch estimate vs scipy.signal.welch", f"{samples} samples", f"{t_ours:.3f} s",
                     f"{t_ours / t_scipy:.2f} x", "<= 1.0"))
        t_verify = best_of(lambda: verify_record(x, RATE_HZ, PROFILE, resolution_hz=RATE_HZ / nperseg), rounds)
        results["verify_over_scipy_welch"] = t_verify / t_scipy
        rows.append(("full verify (2 passes, stats) vs scipy welch", f"{samples} samples", f"{t_verify:.3f} s",
                     f"{t_verify / t_scipy:.2f} x", "(context)"))

    # 5. naive sum of sines
    if "sines" in wanted:
        for log2 in (10, 12, 14):
            n = 1 << log2
            t_naive = best_of(lambda: sum_of_sines(PROFILE, n, 8192.0, np.random.default_rng(1)), 1)
            t_fast = best_of(lambda: generate_samples(PROFILE, n / 8192.0, 8192.0, seed=1, resolution_hz=8192.0 / n,
                                                      memory_budget_bytes=1 << 40), rounds)
            results[f"sum_of_sines_over_ours_2^{log2}"] = t_naive / t_fast
            rows.append(("sum of sines vs ours", f"{n} samples", f"{t_naive:.3f} s", f"{t_naive / t_fast:.0f} x slower",
                         "(scaling)"))

    # 2a. the parts of a streamed drive, in this process: the overlap-add generator alone (no file), once
    if "parts" in wanted:
        # single-threaded and once on the default workers, and the drive writer alone (precomputed chunks)
        stream_plan = plan_synthesis(PROFILE, duration, RATE_HZ, memory_budget_bytes=1)
        floor = measure_floor()
        for threads in sorted({1, workers}):
            def drain(threads=threads):
                for _ in Synthesizer(stream_plan, 1, threads).iter_chunks(1 << 16):
                    pass

            seconds = best_of(drain, rounds)
            results[f"generator_streamed_{threads}_threads_x_floor"] = floor / seconds
            rows.append((f"overlap-add generator alone, {threads} thread(s)", f"{samples} samples", f"{seconds:.3f} s",
                         f"{floor / seconds:.2f} x floor rate", "(context)"))
        chunk = generate_samples(PROFILE, (1 << 16) / RATE_HZ, RATE_HZ, seed=3, memory_budget_bytes=1 << 40)
        with tempfile.TemporaryDirectory() as folder:
            for suffix in ("flac", "wav"):
                target = Path(folder) / f"writer.{suffix}"

                def write_only(target=target):
                    write_drive(target, (chunk for _ in range(samples >> 16)), rate_hz=RATE_HZ, samples=samples,
                                scale=float(np.max(np.abs(chunk))) * 1.001)

                seconds = best_of(write_only, rounds)
                results[f"writer_{suffix}_x_floor"] = floor / seconds
                rows.append((f"drive writer alone (.{suffix}, incl. fsync)", f"{samples} samples", f"{seconds:.3f} s",
                             f"{floor / seconds:.2f} x floor rate", "(context)"))

    # 2b. streamed to files, in a fresh process each
    if "stream" in wanted:
        with tempfile.TemporaryDirectory() as folder:
            folder = Path(folder)
            profile_path = folder / "bench.csv"
            profile_path.write_text(PROFILE_CSV)
            for suffix in ("flac", "wav"):
                # how the second pass gets the record (peak pass cached in a temporary file, or made again)
                plan = json.loads(subprocess.run(
                    [sys.executable, "-m", "vibsynth", "generate", str(profile_path), "-o",
                     str(folder / f"stream.{suffix}"), "--duration", str(stream_s), "--rate", str(int(RATE_HZ)),
                     "--seed", "1", "--dry-run", "--json"],
                    env=dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", "")),
                    capture_output=True, text=True, check=True).stdout)
                results[f"stream_{suffix}_peak_pass"] = plan.get("peak_pass")
                results[f"stream_{suffix}_cache_bytes"] = plan.get("cache_bytes", 0)
                peaks, cached = [], []
                for seconds in (stream_s / 2, stream_s):
                    out = folder / f"stream.{suffix}"
                    floor = measure_floor()
                    rss, wall, grown = cli_child(["generate", str(profile_path), "-o", str(out), "--duration",
                                                  str(seconds), "--rate", str(int(RATE_HZ)), "--seed", "1", "--quiet"],
                                                 watch_page_cache=True)
                    peaks.append(rss)
                    cached.append(grown)
                    total = seconds * RATE_HZ
                    # end to end: process start, peak pass (full scale from the record's peak) and encoding
                    throughput = (total / wall) / (samples / floor)
                    if seconds == stream_s:
                        results[f"stream_{suffix}_throughput_x_floor"] = throughput
                        results[f"stream_{suffix}_peak_rss_mb"] = rss
                        rows.append((f"generate streamed to .{suffix}", f"{seconds:g} s at 51.2 kHz", f"{wall:.1f} s",
                                     f"{throughput:.2f} x floor rate", ">= 0.6"))
                results[f"stream_{suffix}_rss_mb_half_then_full"] = peaks
                rows.append((f"  peak RSS .{suffix} (half, full duration)", "", "", f"{peaks[0]:.0f} / {peaks[1]:.0f} MB",
                             "< 256, flat"))
                if None not in cached:  # outside the process: the file's and the sample cache's pages
                    results[f"stream_{suffix}_page_cache_growth_mb_half_then_full"] = cached
                    rows.append((f"  page cache growth .{suffix} (half, full)", "", "",
                                 f"{cached[0]:.0f} / {cached[1]:.0f} MB", "(context)"))
                rows.append((f"  peak pass .{suffix}: {plan.get('peak_pass')}", "", "",
                             f"temporary {plan.get('cache_bytes', 0) / 1e9:.2f} GB", "(context)"))
            rss, wall = cli_child(["verify", str(folder / "stream.flac"), "--json"])
            results["verify_file_peak_rss_mb"] = rss
            rows.append(("verify from .flac file (streamed)", f"{stream_s:g} s at 51.2 kHz", f"{wall:.1f} s",
                         f"{rss:.0f} MB peak RSS", "constant memory"))

    results["floors_s"] = floors
    results["floor_s"] = float(np.median(floors))
    rows[floor_row] = ("floor: irfft + normal draws", f"{samples} samples",
                       f"{min(floors):.3f}-{max(floors):.3f} s", f"{len(floors)} measures", "reference")
    width = [max(len(str(r[i])) for r in rows + [("measure", "size", "time", "ratio", "goal")]) for i in range(5)]
    header = ("measure", "size", "time", "ratio", "goal")
    print("  ".join(h.ljust(w) for h, w in zip(header, width)))
    for row in rows:
        print("  ".join(str(c).ljust(w) for c, w in zip(row, width)))
    print(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
