"""Determinism: the same seed and options give bitwise-identical drive files, whatever the process or chunk size.

The project's promise to its users (README): the same seed and options give identical samples, and
the output does not depend on the chunk size used to write it.  Each case writes the same
drive three ways and compares the files byte for byte (and the sidecars as JSON):

- in this process with the default chunk size of vibsynth.jobs;
- in this process with a prime chunk size (7919 samples), which splits every overlap-add
  frame and every write differently (the chunk lengths seen by the writer are recorded to
  prove it);
- in a fresh interpreter (one for all cases, calling the console script's entry point
  ``vibsynth.cli.main.main``) with another hash seed and single-threaded numerical libraries.

Non-Gaussian cases run only when ``vibsynth generate --help`` lists the option
(--kurtosis, --skewness, --clip); until then they are skipped with that reason.
The profile is invented (a bracket test, 20-2000 Hz).
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from vibsynth.cli.main import main
from vibsynth import jobs as drive_job
from vibsynth.io import drivefile
from vibsynth.io.drivefile import sidecar_path

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test
RATE = 5120
ODD_CHUNK = 7919  # prime: no frame length, hop or default chunk is a multiple of it


def _quiet_main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _generate_help() -> str:
    status, out, _ = _quiet_main(["generate", "--help"])
    assert status == 0
    return out


GENERATE_HELP = _generate_help()


def _needs(*options):
    missing = [option for option in options if option not in GENERATE_HELP]
    return pytest.mark.skipif(
        bool(missing),
        reason=f"`vibsynth generate --help` does not list {', '.join(missing)} yet (non-Gaussian drives not available)",
    )


#: (id, output name, options, planned mode, options the help must list)
CASES = [
    ("periodic-npy", "drive.npy", ("--duration", 6), "periodic", ()),
    ("overlap-add-flac-two-pass", "drive.flac", ("--duration", 12, "--memory-budget", 1), "overlap-add", ()),
    ("overlap-add-rayleigh-ramped-wav", "drive.wav",
     ("--duration", 12, "--memory-budget", 1, "--amplitude", "rayleigh", "--ramp", 1.5), "overlap-add", ()),
    ("periodic-csv-three-quantities", "drive.csv", ("--duration", 4, "--quantities", "accel,velocity,displacement"),
     "periodic", ()),
    ("kurtosis-overlap-add-npy", "drive.npy", ("--duration", 12, "--memory-budget", 1, "--kurtosis", 5), "overlap-add",
     ("--kurtosis",)),
    ("kurtosis-skewness-periodic-wav", "drive.wav", ("--duration", 6, "--kurtosis", 4.5, "--skewness", 0.3,
                                                     "--subtype", "pcm24"), "periodic", ("--kurtosis", "--skewness")),
    ("clip-overlap-add-flac", "drive.flac", ("--duration", 12, "--memory-budget", 1, "--clip", 3.5), "overlap-add",
     ("--clip",)),
]
GAUSSIAN = [pytest.param(*case[:4], id=case[0]) for case in CASES if not case[4]]
NON_GAUSSIAN = [pytest.param(*case[:4], id=case[0], marks=_needs(*case[4])) for case in CASES if case[4]]


@pytest.fixture(scope="module")
def profile_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("determinism") / "bracket.csv"
    path.write_text(PROFILE_CSV)
    return path


def _argv(profile_path, output: Path, options, seed: int = 11):
    return ["generate", profile_path, "-o", output, "--rate", RATE, "--seed", seed, "--quiet", *options]


def _in_process(argv, monkeypatch, chunk: int | None) -> list[int]:
    """Run generate here; return the lengths of the chunks the drive writer received."""
    lengths = []
    original = drivefile.DriveWriter.prepare  # every chunk passes here (DriveWriter.write calls it too)

    def recording_prepare(self, chunk_values, position):
        lengths.append(len(chunk_values))
        return original(self, chunk_values, position)

    with monkeypatch.context() as patch:
        patch.setattr(drivefile.DriveWriter, "prepare", recording_prepare)
        if chunk is not None:
            patch.setattr(drive_job, "CHUNK_SAMPLES", chunk)
        status, _, err = _quiet_main(argv)
    assert status == 0, err
    return lengths


_FRESH_RUNNER = """
import json, sys
from vibsynth.cli.main import main
for argv in json.loads(sys.argv[1]):
    status = main(argv)
    if status != 0:
        sys.exit(f"exit {status} for {argv}")
"""


@pytest.fixture(scope="module")
def fresh_outputs(tmp_path_factory, profile_path):
    """Every available case written once more by a fresh interpreter (one process for all, to save start-up time).

    Another hash seed and single-threaded numerical libraries there; same code as this process.
    """
    folder = tmp_path_factory.mktemp("fresh-interpreter")
    runs, outputs = [], {}
    for case_id, name, options, _, needs in CASES:
        if all(option in GENERATE_HELP for option in needs):
            outputs[case_id] = folder / f"{case_id}-{name}"
            runs.append([str(a) for a in _argv(profile_path, outputs[case_id], options)])
    env = dict(os.environ)
    env.update(PYTHONHASHSEED="12345", OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    result = subprocess.run([sys.executable, "-c", _FRESH_RUNNER, json.dumps(runs)], cwd=folder, env=env,
                            capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    return outputs


def _same_drive(reference: Path, other: Path) -> None:
    assert reference.read_bytes() == other.read_bytes(), f"{other.name} differs from {reference.name}"
    assert json.loads(sidecar_path(reference).read_text()) == json.loads(sidecar_path(other).read_text())


def _check_three_ways(tmp_path, monkeypatch, profile_path, fresh, name, options, mode):
    suffix = Path(name).suffix
    default = tmp_path / f"default{suffix}"
    odd = tmp_path / f"odd{suffix}"
    default_chunks = _in_process(_argv(profile_path, default, options), monkeypatch, None)
    odd_chunks = _in_process(_argv(profile_path, odd, options), monkeypatch, ODD_CHUNK)
    side = json.loads(sidecar_path(default).read_text())
    assert side["plan"]["mode"] == mode
    # The two in-process runs really were cut differently.
    assert max(odd_chunks) == ODD_CHUNK and max(default_chunks) > ODD_CHUNK
    assert sum(odd_chunks) == sum(default_chunks) == side["samples"]
    _same_drive(default, odd)
    _same_drive(default, fresh)
    return side


@pytest.mark.parametrize("case_id, name, options, mode", GAUSSIAN)
def test_gaussian_drive_is_bitwise_identical_across_processes_and_chunk_sizes(tmp_path, monkeypatch, profile_path,
                                                                                fresh_outputs, case_id, name, options,
                                                                                mode):
    _check_three_ways(tmp_path, monkeypatch, profile_path, fresh_outputs[case_id], name, options, mode)


@pytest.mark.parametrize("case_id, name, options, mode", NON_GAUSSIAN)
def test_non_gaussian_drive_is_bitwise_identical_across_processes_and_chunk_sizes(tmp_path, monkeypatch, profile_path,
                                                                                    fresh_outputs, case_id, name,
                                                                                    options, mode):
    side = _check_three_ways(tmp_path, monkeypatch, profile_path, fresh_outputs[case_id], name, options, mode)
    asked = dict(zip(options[::2], options[1::2]))
    for option in ("--kurtosis", "--skewness", "--clip"):
        if option in asked:
            assert side["options"][option.lstrip("-")] == pytest.approx(float(asked[option]))


def test_another_seed_gives_another_record(tmp_path, monkeypatch, profile_path):
    """The comparisons above are not vacuous: the samples do follow the seed."""
    first, second = tmp_path / "a.npy", tmp_path / "b.npy"
    _in_process(_argv(profile_path, first, ("--duration", 2), seed=11), monkeypatch, None)
    _in_process(_argv(profile_path, second, ("--duration", 2), seed=12), monkeypatch, None)
    a, b = np.load(first, allow_pickle=False), np.load(second, allow_pickle=False)
    assert a.shape == b.shape and not np.array_equal(a, b)
