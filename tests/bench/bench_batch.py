"""vibsynth batch benchmark: 2 Dask workers against 1, Dask's per-task overhead, and a projection.

Run from the repository root with the test (or cluster) extra installed; not part of the test suite:

    python tests/bench/bench_batch.py            # eight 60 s jobs at 51.2 kHz, .flac (a few minutes)
    python tests/bench/bench_batch.py --quick    # eight 60 s jobs at 5120 Hz

Measures, in one run on one machine (ratios; absolute seconds for context only):

1. the same plan (eight jobs of 60 s, one seed each, generated and verified) on a local cluster of
   1 and of 2 single-threaded worker processes, each into a fresh folder; speedup = time(1) / time(2),
   cluster start-up timed apart (goal >= 1.6 x); --repeat pairs, the median one reported, and the
   median of the pairs during which no other process took CPU (on a shared machine others can take
   a whole core, which leaves two workers one core: the ratio then says nothing about the batch);
   the workers' CPU time and page faults per job, and the CPU other processes took meanwhile;
2. Dask's cost per task: the round trip of one empty task (submit to result), and the scheduler's
   throughput on 400 empty tasks spread over the workers;
3. the disk: sequential write rate with fsync (the limit when many workers write at once);
4. on paper: the speedup at 16 and 64 workers from (1)-(3), for these eight jobs and for a campaign
   of 1024 such jobs, and the worker count where the scheduler or the disk stops the scaling.

The profile is invented demo data (20-2000 Hz).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from vibsynth import batch as batches  # noqa: E402

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bench profile


def _noop(value):
    return value


def _warm():
    """Import what a task needs, so the timing compares work and not first imports."""
    import vibsynth.analysis.verify  # noqa: F401
    import vibsynth.generate.pipeline  # noqa: F401
    import vibsynth.jobs  # noqa: F401

    return True


def _usage():
    """CPU seconds (user + system) and minor page faults of this worker process so far."""
    import resource

    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime, usage.ru_minflt


def _machine_busy_s() -> float:
    """CPU seconds spent busy by the whole machine so far (all processes; /proc/stat, Linux only)."""
    try:
        with open("/proc/stat") as handle:
            fields = [int(v) for v in handle.readline().split()[1:]]
    except OSError:
        return float("nan")
    idle = fields[3] + fields[4]  # idle + iowait
    return (sum(fields[:8]) - idle) / os.sysconf("SC_CLK_TCK")


def plan_text(rate_hz: float, jobs: int = 8, duration_s: float = 60.0) -> str:
    lines = []
    for index in range(jobs):
        lines += ["[[jobs]]", f'name = "bench{index + 1}"', 'profile = "bench.csv"', f"duration_s = {duration_s}",
                  f"rate_hz = {rate_hz}", 'format = "flac"', f"seeds = [{index + 1}]", "tolerance_db = 6", ""]
    return "\n".join(lines)


def run_plan(folder: Path, plan_path: Path, workers: int) -> dict:
    plan = batches.read_plan(plan_path)
    prepared = batches.prepare_batch(plan, folder)
    started = time.perf_counter()
    with batches.dask_client(workers=workers) as client:
        client.wait_for_workers(workers)
        client.run(_warm)
        before = client.run(_usage)
        busy_before = _machine_busy_s()
        own_before = time.process_time()
        ready = time.perf_counter()
        result = batches.run_batch(prepared, client)
        done = time.perf_counter()
        own = time.process_time() - own_before
        busy = _machine_busy_s() - busy_before
        after = client.run(_usage)
    rows = result.rows
    worker_cpu = sum(after[key][0] - before[key][0] for key in after)
    faults = sum(after[key][1] - before[key][1] for key in after)
    assert all(row["status"] == "made" for row in rows), rows
    return {
        "workers": workers,
        "startup_s": ready - started,
        "batch_s": done - ready,
        "job_s": [row["wall_time_s"] for row in rows],
        "worker_cpu_s": worker_cpu,
        "worker_page_faults": faults,
        # CPU the rest of the machine (other processes) used meanwhile, in cores
        "others_cores": (busy - worker_cpu - own) / (done - ready),
        "client_cpu_s": own,
        "bytes": [(folder / row["file"]).stat().st_size for row in rows],
        "sha256": [row["sha256"] for row in rows],
    }


def task_overhead(workers: int = 2, tasks: int = 400) -> dict:
    with batches.dask_client(workers=workers) as client:
        client.wait_for_workers(workers)
        client.submit(_noop, 0, pure=False).result()  # warm
        trips = []
        for index in range(30):
            start = time.perf_counter()
            client.submit(_noop, index, pure=False).result()
            trips.append(time.perf_counter() - start)
        start = time.perf_counter()
        client.gather(client.map(_noop, range(tasks), pure=False))
        spread = time.perf_counter() - start
    return {"round_trip_s": statistics.median(trips), "per_task_s": spread / tasks, "tasks": tasks}


def disk_rate(folder: Path, megabytes: int = 256) -> float:
    block = os.urandom(1 << 20)
    path = folder / "disk-rate.bin"
    start = time.perf_counter()
    with open(path, "wb") as handle:
        for _ in range(megabytes):
            handle.write(block)
        handle.flush()
        os.fsync(handle.fileno())
    elapsed = time.perf_counter() - start
    path.unlink()
    return megabytes * (1 << 20) / elapsed


def projection(job_s: float, overhead_s: float, bytes_per_job: float, disk_bytes_s: float, jobs: int,
               workers: int) -> float:
    """Speedup over one worker: waves of jobs, the scheduler's cost per task, the disk's rate shared."""
    one = jobs * (job_s + overhead_s)
    per_wave = max(job_s, min(workers, jobs) * bytes_per_job / disk_bytes_s)  # the disk shared by a wave
    many = math.ceil(jobs / workers) * per_wave + jobs * overhead_s
    return one / many


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="5120 Hz instead of 51.2 kHz")
    parser.add_argument("--repeat", type=int, default=3,
                        help="pairs of runs (1 worker, then 2), the median pair reported (default 3)")
    args = parser.parse_args()
    rate = 5120.0 if args.quick else 51200.0
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryDirectory(prefix="vibsynth-bench-batch-") as tmp:
        tmp = Path(tmp)
        (tmp / "bench.csv").write_text(PROFILE_CSV)
        plan_path = tmp / "plan.toml"
        plan_path.write_text(plan_text(rate))
        pairs = []
        for index in range(max(1, args.repeat)):
            one = run_plan(tmp / f"one{index}", plan_path, 1)
            two = run_plan(tmp / f"two{index}", plan_path, 2)
            assert one["sha256"] == two["sha256"], "the files differ with the number of workers"
            pairs.append((one["batch_s"] / two["batch_s"], one, two))
        ratios = [pair[0] for pair in pairs]
        others = [(pair[1]["others_cores"], pair[2]["others_cores"]) for pair in pairs]
        capacities = [2 * pair[1]["worker_cpu_s"] / pair[2]["worker_cpu_s"] for pair in pairs]
        free = [ratio for ratio, (a, b) in zip(ratios, others) if max(a, b) < 0.1]  # no other process competed
        _, one, two = sorted(pairs, key=lambda pair: pair[0])[len(pairs) // 2]
        cost = task_overhead()
        disk = disk_rate(tmp)
    jobs = len(one["job_s"])
    # what two workers would give with both CPUs free: each job's CPU grows with contention (memory, caches)
    capacity = 2 * one["worker_cpu_s"] / two["worker_cpu_s"]
    speedup = one["batch_s"] / two["batch_s"]
    speedup_total = (one["startup_s"] + one["batch_s"]) / (two["startup_s"] + two["batch_s"])
    job_s = statistics.mean(one["job_s"])
    busy = (sum(one["job_s"]) / one["batch_s"], sum(two["job_s"]) / two["batch_s"])
    slowdown = statistics.mean(two["job_s"]) / job_s
    per_job_bytes = statistics.mean(one["bytes"])
    overhead = cost["per_task_s"]
    table = [
        ("8 jobs x 60 s, 1 worker", f"{one['batch_s']:.2f} s", f"start-up {one['startup_s']:.2f} s", ""),
        ("8 jobs x 60 s, 2 workers", f"{two['batch_s']:.2f} s", f"start-up {two['startup_s']:.2f} s", ""),
        ("speedup 2 vs 1 workers", f"{speedup:.2f} x", f"{speedup_total:.2f} x with start-up", ">= 1.6"),
        ("  every pair (median above)", " ".join(f"{r:.2f}" for r in ratios), "", "(context)"),
        ("    CPU others took, per pair", " ".join(f"{a:.1f}/{b:.1f}" for a, b in others), "cores, 1 / 2 workers",
         "(context)"),
        ("    speedup from CPU per job, per pair", " ".join(f"{c:.2f}" for c in capacities), "", "(context)"),
        ("  speedup, pairs with the CPUs free", f"{statistics.median(free):.2f} x" if free else "none",
         f"median of {len(free)} of {len(ratios)} (others < 0.1 core)", ">= 1.6"),
        ("  workers kept busy (sum job / wall)", f"{busy[0]:.2f} / {busy[1]:.2f}", "1 worker / 2 workers", "(context)"),
        ("  one job's time, 2 vs 1 workers", f"{slowdown:.2f} x", "CPU shared: > 1 under load", "(context)"),
        ("one job (generate + verify)", f"{job_s:.3f} s", f"{per_job_bytes / 1e6:.2f} MB .flac", ""),
        ("  CPU per job in the workers, 1 / 2", f"{one['worker_cpu_s'] / jobs:.3f} / {two['worker_cpu_s'] / jobs:.3f} s",
         "user + system", "(context)"),
        ("  page faults per job, 1 / 2", f"{one['worker_page_faults'] / jobs:.0f} / "
         f"{two['worker_page_faults'] / jobs:.0f}", "minor faults in the workers", "(context)"),
        ("  CPU taken by other processes", f"{one['others_cores']:.2f} / {two['others_cores']:.2f}",
         "cores, during 1 / 2 workers", "(context)"),
        ("  CPU of this process (client, scheduler)", f"{one['client_cpu_s']:.2f} / {two['client_cpu_s']:.2f} s",
         "during 1 / 2 workers", "(context)"),
        ("  speedup from CPU per job", f"{capacity:.2f} x", "2 x CPU/job(1) / CPU/job(2)", "(context)"),
        ("Dask round trip, one empty task", f"{cost['round_trip_s'] * 1e3:.2f} ms", "", ""),
        ("Dask cost per task, 400 spread", f"{overhead * 1e3:.3f} ms", f"{overhead / job_s * 100:.3f} % of a job", ""),
        ("disk write with fsync", f"{disk / 1e6:.0f} MB/s", "", ""),
        ("load average (1 min), before/after", f"{load_before:.1f} / {os.getloadavg()[0]:.1f}",
         f"on {batches.default_worker_count()} CPUs", "(context)"),
    ]
    limits = {
        "scheduler_workers": job_s / overhead,
        "disk_workers": disk * job_s / per_job_bytes,
    }
    paper = {}
    for jobs in (8, 1024):
        for workers in (16, 64):
            paper[f"{jobs}_jobs_{workers}_workers"] = projection(job_s, overhead, per_job_bytes, disk, jobs, workers)
            table.append((f"on paper: {jobs} jobs, {workers} workers",
                          f"{paper[f'{jobs}_jobs_{workers}_workers']:.1f} x", "", ""))
    table.append(("scaling stops (scheduler)", f"~{limits['scheduler_workers']:.0f} workers", "job time / task cost", ""))
    table.append(("scaling stops (disk)", f"~{limits['disk_workers']:.0f} workers", "disk rate x job time / file", ""))
    width = max(len(row[0]) for row in table) + 2
    value_width = max(14, max(len(row[1]) for row in table) + 2)
    print(f"{'measure':<{width}}{'value':<{value_width}}{'':<32}goal")
    for name, value, note, goal in table:
        print(f"{name:<{width}}{value:<{value_width}}{note:<32}{goal}")
    print(json.dumps({
        "rate_hz": rate, "one_worker": one, "two_workers": two, "speedup": speedup, "speedups": ratios,
        "others_cores_per_pair": others, "speedups_from_cpu_per_job": capacities,
        "speedups_with_the_cpus_free": free,
        "speedup_with_startup": speedup_total, "speedup_from_cpu_per_job": capacity,
        "workers_busy": busy, "job_time_ratio_2_vs_1": slowdown, "dask": cost, "disk_bytes_per_s": disk, "projection": paper,
        "limits_workers": limits, "cpus": batches.default_worker_count(),
        "load_average_before": load_before, "load_average_after": os.getloadavg()[0],
    }, indent=2, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
