"""`vibsynth batch`: plans, byte-identity with `vibsynth generate`, summaries, resuming, refusals.

References used below:
- `vibsynth generate` run sequentially in this process is the reference for every file a batch
  writes (the batch must not change a byte, whatever the number of Dask workers).
- hashlib.sha256 (FIPS 180-4) for the digests in the summary; the csv module (RFC 4180) reads
  summary.csv.
- scipy.stats.kurtosis(fisher=False) (Pearson kurtosis) and the crest factor max|x| / sqrt(mean x^2)
  (Bendat & Piersol, Random Data, 4th ed. 2010, sec. 3.2) computed from the written .npy files.
- Dask LocalCluster (dask.distributed) runs the workers.

Every profile and plan here is invented test data.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from vibsynth import batch as batches
from vibsynth.cli.main import main
from vibsynth.io.drivefile import sidecar_path

distributed = pytest.importorskip("distributed")

BRACKET_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket

#: Ten drives over seven jobs: presets and a profile file, every format, rescaling, non-Gaussian options.
PLAN = textwrap.dedent("""\
    title = "Invented test campaign"

    [defaults]
    duration_s = 3
    rate_hz = 5120
    tolerance_db = 6

    [[jobs]]
    name = "flat"
    profile = "bench-flat"
    format = "npy"
    seeds = [1, 2]

    [[jobs]]
    name = "bracket-m6"
    profile = "profiles/bracket.csv"
    format = "flac"
    level_db = -6
    figures = true                 # figures and report.pdf beside the verify.json
    seeds = [3]

    [[jobs]]
    name = "bracket-k5"
    profile = "profiles/bracket.csv"
    format = "npy"
    kurtosis = 4.5
    duration_s = 6
    seed_count = 2
    base_seed = 20

    [[jobs]]
    name = "conveyor-clip"
    profile = "parcel-conveyor"
    format = "wav"
    clip = 3.5
    grms = 2.0
    ramp_s = 0.25
    seeds = [7]

    [[jobs]]
    name = "conveyor-csv"
    profile = "parcel-conveyor"
    format = "csv"
    amplitude = "rayleigh"
    seeds = [8, 9]

    [[jobs]]
    name = "flat-frames"           # overlap-add: the record does not fit the memory budget
    profile = "bench-flat"
    format = "npy"
    duration_s = 20
    memory_budget_mb = 1
    seeds = [4]

    [[jobs]]
    name = "bracket-k4-frames"     # overlap-add, non-Gaussian
    profile = "profiles/bracket.csv"
    format = "flac"
    kurtosis = 4
    duration_s = 20
    memory_budget_mb = 1
    seeds = [5]
""")

#: Plan key -> the `vibsynth generate` option that sets the same thing.
GENERATE_OPTIONS = {"level_db": "--level-db", "grms": "--grms", "kurtosis": "--kurtosis", "clip": "--clip",
                    "ramp_s": "--ramp", "amplitude": "--amplitude", "memory_budget_mb": "--memory-budget"}


def _write_plan(folder: Path, text: str = PLAN) -> Path:
    (folder / "profiles").mkdir(parents=True, exist_ok=True)
    (folder / "profiles" / "bracket.csv").write_text(BRACKET_CSV)
    path = folder / "plan.toml"
    path.write_text(text)
    return path


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def two_workers():
    """A local Dask cluster of two single-threaded worker processes (its scheduler address)."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        yield cluster.scheduler_address


def test_plan_expands_seeds_and_defaults_and_hashes_each_job():
    plan = batches.parse_plan(PLAN, "plan.toml", "/campaign")
    assert [job.name for job in plan.jobs][:5] == ["flat", "bracket-m6", "bracket-k5", "conveyor-clip",
                                                   "conveyor-csv"]
    assert plan.task_count == 10
    k5 = plan.jobs[2]
    assert k5.seeds == (20, 21)  # seed_count 2 from base_seed 20
    assert k5.profile == "profiles/bracket.csv" and k5.profile_path == "/campaign/profiles/bracket.csv"
    assert plan.jobs[0].profile_path == "bench-flat"  # a preset
    assert plan.jobs[0].duration_s == 3.0 and k5.rate_hz == 5120.0 and k5.verify["tolerance_db"] == (-6.0, 6.0)
    assert k5.drive == {"kurtosis": 4.5} and k5.duration_s == 6.0  # the job's own key wins over [defaults]
    assert [k5.stem(seed) for seed in k5.seeds] == ["bracket-k5-seed20", "bracket-k5-seed21"]
    assert plan.jobs[3].definition() != plan.jobs[4].definition()


@pytest.mark.parametrize("text, words", [
    ('[[jobs]]\nprofile = "bench-flat"\nduration_s = 1\nrate_hz = 5120\nseeds = [1]\nkurtossis = 4\n',
     ["jobs[1]", "`kurtossis`", "did you mean 'kurtosis'"]),
    ('[[jobs]]\nname = "a"\nprofile = "bench-flat"\nduration_s = 1\nrate_hz = 5120\n',
     ["job 'a'", "`seeds` is missing"]),
    ('[[jobs]]\nname = "a"\nprofile = "bench-flat"\nduration_s = 1\nrate_hz = 5120\nseeds = [1, 1]\n',
     ["job 'a'", "each seed once"]),
    ('[[jobs]]\nname = "a"\nprofile = "bench-flat"\nduration_s = -1\nrate_hz = 5120\nseeds = [1]\n',
     ["job 'a'", "`duration_s`", "> 0"]),
    ('[[jobs]]\nname = "a"\nprofile = "bench-flat"\nduration_s = 1\nrate_hz = 5120\nseeds = [1]\nformat = "mp3"\n',
     ["job 'a'", "flac, wav, csv, npy"]),
    ('[[jobs]]\nname = "a"\nprofile = "x"\nduration_s = 1\nrate_hz = 5120\nseeds = [1]\n'
     '[[jobs]]\nname = "a"\nprofile = "x"\nduration_s = 1\nrate_hz = 5120\nseeds = [1]\n',
     ["jobs[2]", "also the name of jobs[1]"]),
    ('[[jobs]]\nname = "a"\nprofile = "x"\nduration_s = 1\nrate_hz = 5120\nseeds = [1]\ngrms = 1\nlevel_db = -3\n',
     ["job 'a'", "not both"]),
    ("title = 'no jobs'\n", ["no jobs"]),
])
def test_plan_errors_name_the_job_and_the_key(text, words):
    with pytest.raises(batches.InputError) as caught:
        batches.parse_plan(text, "plan.toml")
    line = caught.value.one_line()
    assert line.startswith("plan.toml")
    for word in words:
        assert word in line, line


def test_batch_on_two_workers_is_byte_identical_to_generate(tmp_path, monkeypatch, capsys, two_workers):
    plan_path = _write_plan(tmp_path / "campaign")
    out = tmp_path / "out"
    status = main(["batch", str(plan_path), "-o", str(out), "--scheduler", two_workers, "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    summary = json.loads(captured.out)
    assert summary == json.loads((out / "summary.json").read_text())
    assert "CAUTION" in captured.err

    # the reference: `vibsynth generate`, one job after another, from the plan's folder
    monkeypatch.chdir(plan_path.parent)
    plan = batches.read_plan(plan_path)
    reference = tmp_path / "reference"
    reference.mkdir()
    compared = 0
    for job in plan.jobs:
        for seed in job.seeds:
            name = f"{job.name}-seed{seed}.{job.file_format}"
            argv = ["generate", job.profile, "-o", str(reference / name), "--duration", str(job.duration_s),
                    "--rate", str(job.rate_hz), "--seed", str(seed), "-q"]
            for key, option in GENERATE_OPTIONS.items():
                value = {**job.drive, "grms": job.grms, "level_db": job.level_db}.get(key)
                if value is not None:
                    argv += [option, str(value)]
            assert main(argv) == 0, capsys.readouterr().err
            assert (out / name).read_bytes() == (reference / name).read_bytes(), name
            assert sidecar_path(out / name).read_bytes() == sidecar_path(reference / name).read_bytes(), name
            compared += 1
    assert compared == 10
    modes = {json.loads(sidecar_path(out / f"{name}-seed{seed}.{fmt}").read_text())["plan"]["mode"]
             for name, seed, fmt in (("flat-frames", 4, "npy"), ("bracket-k4-frames", 5, "flac"))}
    assert modes == {"overlap-add"}

    # summary rows: complete, in plan order, digests and statistics from the files themselves
    rows = summary["results"]
    assert [(r["job"], r["seed"]) for r in rows] == [(j.name, s) for j in plan.jobs for s in j.seeds]
    assert summary["counts"] == {"drives": 10, "made": 10, "verified_only": 0, "done_earlier": 0, "passed": 10,
                                 "failed": 0, "errors": 0}
    for row in rows:
        for key in ("job", "seed", "file", "sha256", "pass", "grms_error_percent", "worst_db", "kurtosis",
                    "crest_factor", "wall_time_s"):
            assert row[key] is not None, (row["file"], key)
        assert not Path(row["file"]).is_absolute()
        assert row["sha256"] == _sha256(out / row["file"])  # FIPS 180-4 via hashlib
        assert row["pass"] is True and row["status"] == "made" and row["wall_time_s"] > 0
        record = json.loads((out / row["verify_file"]).read_text())
        assert record["pass"] is True and record["batch"]["seed"] == row["seed"]
        if row["file"].endswith(".npy"):  # no ramps: the whole record is judged
            x = np.load(out / row["file"])
            assert row["kurtosis"] == pytest.approx(scipy.stats.kurtosis(x, fisher=False), rel=1e-9)
            assert row["crest_factor"] == pytest.approx(np.max(np.abs(x)) / np.sqrt(np.mean(x**2)), rel=1e-9)
    report = out / "bracket-m6-seed3.report"
    assert (report / "report.pdf").read_bytes()[:5] == b"%PDF-"  # PDF magic number (ISO 32000)
    assert (report / "asd.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (RFC 2083)
    assert json.loads((report / "verify.json").read_text())["pass"] is True
    assert not (out / "flat-seed1.report").exists()
    k5 = [r["kurtosis"] for r in rows if r["job"] == "bracket-k5"]
    assert len(k5) == 2 and all(abs(k - 4.5) < 0.5 for k in k5)  # passed the verifier's +-10 % kurtosis check
    with open(out / "summary.csv", newline="") as handle:
        table = list(csv.DictReader(handle))
    assert [(t["job"], int(t["seed"]), t["file"], t["sha256"], t["pass"]) for t in table] == [
        (r["job"], r["seed"], r["file"], r["sha256"], "true") for r in rows]
    assert float(table[0]["worst_db"]) == pytest.approx(rows[0]["worst_db"], rel=1e-12)

    # a rerun makes nothing; a lost verify.json is remade from the drive, which is not rewritten
    lost = out / rows[0]["verify_file"]
    lost.unlink()
    drive = out / rows[0]["file"]
    before = drive.stat()
    status = main(["batch", str(plan_path), "-o", str(out), "--scheduler", two_workers, "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    again = json.loads(captured.out)
    assert [r["status"] for r in again["results"]] == ["verified"] + ["done earlier"] * 9
    assert [r["sha256"] for r in again["results"]] == [r["sha256"] for r in rows]
    after = drive.stat()
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)
    assert lost.exists()


def test_killed_batch_resumes_without_touching_finished_files(tmp_path, capsys):
    plan_path = _write_plan(tmp_path / "campaign", textwrap.dedent("""\
        [[jobs]]
        name = "long"
        profile = "profiles/bracket.csv"
        duration_s = 20
        rate_hz = 5120
        format = "npy"
        seed_count = 8
        tolerance_db = 6
    """))
    out = tmp_path / "out"
    process = subprocess.Popen([sys.executable, "-m", "vibsynth", "batch", str(plan_path), "-o", str(out),
                                "--workers", "1"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                               start_new_session=True)
    try:
        deadline = time.monotonic() + 120
        while not list(out.glob("*.verify.json")):
            assert process.poll() is None, process.stderr.read().decode()
            assert time.monotonic() < deadline, "no drive finished in 120 s"
            time.sleep(0.02)
    finally:
        os.killpg(process.pid, signal.SIGKILL)  # the batch and its Dask workers, at once
        process.wait()
    finished = {}
    for record in out.glob("*.verify.json"):
        drive = out / record.name.replace(".verify.json", ".npy")
        for path in (drive, sidecar_path(drive), record):
            info = path.stat()
            finished[path.name] = (info.st_ino, info.st_mtime_ns, info.st_size)
    assert 1 <= len(finished) // 3 < 8  # killed mid-way
    assert not (out / "summary.json").exists()

    status = main(["batch", str(plan_path), "-o", str(out), "--workers", "2", "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    summary = json.loads(captured.out)
    for name, stamp in finished.items():
        info = (out / name).stat()
        assert (info.st_ino, info.st_mtime_ns, info.st_size) == stamp, name
    statuses = {r["file"]: r["status"] for r in summary["results"]}
    assert len(statuses) == 8 and all(r["pass"] for r in summary["results"])
    for name, status_text in statuses.items():
        expected = "done earlier" if name in finished else ("made", "verified")
        assert status_text in expected, (name, status_text)
    visible = {p.name for p in out.iterdir() if not p.name.startswith(".")}
    assert visible == {"summary.json", "summary.csv"} | {
        f"long-seed{s}{suffix}" for s in range(1, 9) for suffix in (".npy", ".npy.json", ".verify.json")}
    for row in summary["results"]:
        assert row["sha256"] == _sha256(out / row["file"])


@pytest.mark.parametrize("job, words", [
    ('name = "typo"\nprofile = "parcel-conveyer"\nrate_hz = 5120\n', ["job 'typo' (jobs[2])", "parcel-conveyor"]),
    ('name = "slow"\nprofile = "bench-flat"\nrate_hz = 3000\n', ["job 'slow' (jobs[2])", "rate"]),
])
def test_bad_job_is_refused_before_anything_runs(tmp_path, capsys, job, words):
    plan_path = _write_plan(tmp_path, textwrap.dedent("""\
        [[jobs]]
        name = "good"
        profile = "bench-flat"
        duration_s = 2
        rate_hz = 5120
        format = "npy"
        seeds = [1]

        [[jobs]]
        duration_s = 2
        format = "npy"
        seeds = [1, 2]
    """) + job)
    out = tmp_path / "out"
    status = main(["batch", str(plan_path), "-o", str(out), "--workers", "1"])
    captured = capsys.readouterr()
    assert status == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("vibsynth: error: ") and str(plan_path) in lines[0], lines
    for word in words:
        assert word in lines[0], lines[0]
    assert not out.exists()  # nothing ran, nothing left behind
    assert "CAUTION" not in captured.err


def test_a_drive_from_another_job_definition_is_never_overwritten(tmp_path, capsys):
    plan_path = _write_plan(tmp_path, '[[jobs]]\nname = "flat"\nprofile = "bench-flat"\nduration_s = 2\n'
                                      'rate_hz = 5120\nformat = "npy"\nseeds = [1]\n')
    out = tmp_path / "out"
    out.mkdir()
    assert main(["generate", "bench-flat", "-o", str(out / "flat-seed1.npy"), "--duration", "2", "--rate", "5120",
                 "--seed", "1", "--level-db", "-3", "-q"]) == 0
    before = (out / "flat-seed1.npy").read_bytes()
    capsys.readouterr()
    status = main(["batch", str(plan_path), "-o", str(out), "--workers", "1"])
    captured = capsys.readouterr()
    assert status == 2
    assert "flat-seed1.npy exists with another `options`" in captured.err and "job 'flat'" in captured.err
    assert (out / "flat-seed1.npy").read_bytes() == before
    assert sorted(p.name for p in out.iterdir()) == ["flat-seed1.npy", "flat-seed1.npy.json"]


def test_without_dask_one_line_says_what_to_install(tmp_path, capsys, monkeypatch):
    plan_path = _write_plan(tmp_path, '[[jobs]]\nprofile = "bench-flat"\nduration_s = 2\nrate_hz = 5120\n'
                                      'seeds = [1]\n')
    monkeypatch.setitem(sys.modules, "distributed", None)  # `import distributed` raises ImportError
    status = main(["batch", str(plan_path), "-o", str(tmp_path / "out")])
    captured = capsys.readouterr()
    assert status == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "pip install 'vibsynth[cluster]'" in lines[0], lines
    assert not (tmp_path / "out").exists()


def test_batch_help_loads_neither_numpy_nor_dask():
    code = ("import sys\nfrom vibsynth.cli.main import main\nassert main(['batch', '--help']) == 0\n"
            "print(sorted(m for m in ('numpy', 'scipy', 'distributed', 'dask') if m in sys.modules))\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip().endswith("[]")
    assert "--scheduler" in result.stdout and "pip install 'vibsynth[cluster]'" in result.stdout


def test_readme_plan_example_is_a_valid_plan(tmp_path):
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    section = text[text.index("### Batches on Dask"):]
    example = section[section.index("```toml") + len("```toml"):section.index("```", section.index("```toml") + 7)]
    plan = batches.parse_plan(example, "README.md")
    assert [job.seeds for job in plan.jobs] == [(1, 2, 3), (100, 101, 102, 103)]
    prepared = batches.prepare_batch(plan, tmp_path / "out")  # every profile read, every drive planned
    assert [task.drive_name for task in prepared.tasks][:2] == ["conveyor-m6-seed1.flac", "conveyor-m6-seed2.flac"]
    assert len(prepared.tasks) == 7 and not prepared.done


def test_peaks_monte_carlo_on_two_workers_gives_the_numbers_of_one(capsys):
    argv = ["peaks", "bench-flat", "--duration", "2", "--rate", "5120", "--records", "6", "--kurtosis", "5",
            "--seed", "3", "--json"]
    assert main(argv) == 0
    alone = json.loads(capsys.readouterr().out)
    assert main(argv + ["--workers", "2"]) == 0
    spread = json.loads(capsys.readouterr().out)
    assert spread == alone  # every record from its own spawn key: the same figures, to the last bit
    monte_carlo = [row["monte_carlo"] for row in alone["rows"]]
    assert [m["records"] for m in monte_carlo] == [6, 6]
    # the records are real: the non-Gaussian row's mean kurtosis is above the Gaussian's (3, Pearson)
    assert monte_carlo[1]["kurtosis_mean"] > monte_carlo[0]["kurtosis_mean"] + 0.5


def _worker_threads_and_allocator() -> dict:
    import dask

    import vibsynth.analysis.welch as welch

    return {"omp": os.environ.get("OMP_NUM_THREADS"), "openblas": os.environ.get("OPENBLAS_NUM_THREADS"),
            "malloc_trim": os.environ.get("MALLOC_TRIM_THRESHOLD_"), "fft_threads": welch._fft_workers(),
            "profiler": dask.config.get("distributed.worker.profile.enabled")}


def test_local_workers_run_each_job_single_threaded_with_the_default_allocator(tmp_path, monkeypatch):
    """One thread per job in a worker (frames, BLAS, FFT); glibc's dynamic mmap threshold left on.

    Reference: glibc mallopt(3): setting M_TRIM_THRESHOLD (MALLOC_TRIM_THRESHOLD_) disables the dynamic
    adjustment of the mmap threshold, so large arrays are mapped and faulted in afresh each time.
    """
    # what a cluster started with Dask's defaults leaves in the environment of the process that started it
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    plan = batches.parse_plan('[[jobs]]\nprofile = "bench-flat"\nduration_s = 2\nrate_hz = 5120\nseeds = [1, 2]\n')
    prepared = batches.prepare_batch(plan, tmp_path / "out")
    assert [task.request.workers for task in prepared.tasks] == [1, 1]  # no frame threads inside a job
    with batches.dask_client(workers=1) as client:
        (seen,) = client.run(_worker_threads_and_allocator).values()
    assert seen == {"omp": "1", "openblas": "1", "malloc_trim": None, "fft_threads": 1, "profiler": False}
    assert os.environ["MALLOC_TRIM_THRESHOLD_"] == "65536"  # this process's environment is put back


def test_arrays_that_reach_a_worker_misaligned_are_realigned_before_use():
    """Dask may deliver an array at any byte offset; numpy sums a misaligned float64 array by a buffered
    path with other rounding, so the task's arrays are realigned first (the sums then equal this process's)."""
    import dataclasses
    import functools

    values = np.random.default_rng(3).standard_normal(100_003)
    raw = np.zeros(values.nbytes + 16, dtype=np.uint8)
    misaligned = raw[3:3 + values.nbytes].view(np.float64)  # byte offset 3: not aligned for float64
    misaligned[:] = values
    assert not misaligned.flags.aligned

    @dataclasses.dataclass(frozen=True)
    class Holder:
        samples: np.ndarray

    task = functools.partial(np.sum, Holder(misaligned))
    fixed = batches._realigned(task)
    assert fixed.args[0].samples.flags.aligned
    assert np.array_equal(fixed.args[0].samples, values)
    assert float(np.sum(fixed.args[0].samples)) == float(np.sum(values))  # bit for bit, as in this process
    assert batches._call_realigned(lambda holder: float(np.sum(holder.samples)), Holder(misaligned)) == \
        float(np.sum(values))
