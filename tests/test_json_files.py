"""The JSON the tool writes: sidecars and report.json against their JSON Schemas, the naming rule, 0.1 sidecars.

References used here: JSON Schema draft 2020-12 (validated with the `jsonschema` package, an independent
implementation); SHA-256 (FIPS 180-4) computed with Python's hashlib; ISO 8601 times parsed by
datetime.fromisoformat.  The profile is the bundled invented `bench-flat` preset.
"""

from __future__ import annotations

import contextlib
import datetime
import hashlib
import io
import json
import os
import shutil
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pytest

jsonschema = pytest.importorskip("jsonschema")
referencing = pytest.importorskip("referencing")

from vibsynth import jobs  # noqa: E402
from vibsynth.cli.main import main  # noqa: E402
from vibsynth.errors import VibsynthWarning  # noqa: E402
from vibsynth.io import atomic  # noqa: E402
from vibsynth.io.drivefile import open_drive, sidecar_path  # noqa: E402
from vibsynth.io.schemas import load_schema  # noqa: E402
from vibsynth.io.sidecar import Sidecar  # noqa: E402
from vibsynth.profile.files import read_profile  # noqa: E402

V0_1 = Path(__file__).parent / "data" / "v0_1"

#: Keys of the published contract the naming rule does not rename (sidecar: unit, scale, rate, seed, options, profile).
CONTRACT_KEYS = {"unit", "scale", "rate", "seed", "options", "profile"}


def _validator(name: str):
    registry = referencing.Registry().with_resources(
        (schema["$id"], referencing.Resource.from_contents(schema))
        for schema in (load_schema("sidecar"), load_schema("report"))
    )
    schema = load_schema(name)
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema, registry=registry)


def _quiet_main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _strings(value):
    if isinstance(value, dict):
        for item in value.values():
            yield from _strings(item)
    elif isinstance(value, list):
        for item in value:
            yield from _strings(item)
    elif isinstance(value, str):
        yield value


def _check_naming_rule(data: dict, blocks=("options", "plan", "profile"), siblings_too: bool = True) -> None:
    # null rather than empty strings, anywhere
    assert "" not in list(_strings(data))
    # no key at two levels (top level and the blocks below it; for the sidecar, not in two blocks either)
    levels = {"top": set(data)} | {block: set(data.get(block) or {}) for block in blocks}
    names = sorted(levels)
    for i, first in enumerate(names):
        for second in names[i + 1:]:
            if siblings_too or "top" in (first, second):
                assert not (levels[first] & levels[second]), (first, second, levels[first] & levels[second])


@pytest.mark.parametrize("name, extra", [
    ("g.npy", ()),
    ("g.flac", ("--ramp", "0.5")),
    ("three.csv", ("--quantities", "acceleration,velocity,displacement")),
    ("k.wav", ("--kurtosis", "5")),
    ("b.npy", ("--kurtosis", "5", "--kurtosis-model", "bursts", "--burst", "0.2")),
])
def test_written_sidecars_follow_the_schema_and_the_naming_rule(tmp_path, name, extra):
    path = tmp_path / name
    status, _, err = _quiet_main(["generate", "bench-flat", "-o", path, "--duration", 4, "--rate", 5120, "--seed", 3,
                                  *extra])
    assert status == 0, err
    data = json.loads(sidecar_path(path).read_text())
    _validator("sidecar").validate(data)
    _check_naming_rule(data)
    assert data["schema_version"] == 2 and data["duration_s"] == data["samples"] / data["rate"]
    # The dataclass reads back exactly what it wrote.
    assert Sidecar.from_dict(data).to_dict() == data
    assert (data["transform"] is not None) == ("--kurtosis" in extra and "bursts" not in extra)
    assert ("modulation" in data) == ("bursts" in extra)  # the burst model's envelope, recorded with its time scale


def test_the_schema_refuses_a_renamed_or_misspelt_key(tmp_path):
    """The schema test is not vacuous: a 0.1-style key or a wrong type is refused."""
    path = tmp_path / "g.npy"
    assert _quiet_main(["generate", "bench-flat", "-o", path, "--duration", 2, "--rate", 5120, "--seed", 1])[0] == 0
    data = json.loads(sidecar_path(path).read_text())
    validator = _validator("sidecar")
    for change in ({"frame_length": 4096}, {"rate": "5120"}, {"options": {**data["options"], "grms": 3.0}},
                   {"profile": {**data["profile"], "description": 5}}):
        assert not validator.is_valid({**data, **change}), change


def test_run_report_follows_the_schema_with_digests_and_relative_paths(tmp_path):
    folder = tmp_path / "run"
    status, _, err = _quiet_main(["run", "bench-flat", "-o", folder, "--duration", 20, "--seed", 2, "--format", "npy"])
    assert status == 0, err
    report = json.loads((folder / "report.json").read_text())
    _validator("report").validate(report)
    _check_naming_rule(report, blocks=("generation", "drive", "sidecar", "profile", "figures"), siblings_too=False)
    # SHA-256 (FIPS 180-4) by hashlib, of the files as they are in the folder.
    assert report["drive"]["sha256"] == hashlib.sha256((folder / report["drive"]["path"]).read_bytes()).hexdigest()
    side = folder / report["sidecar"]["path"]
    assert report["sidecar"]["sha256"] == hashlib.sha256(side.read_bytes()).hexdigest()
    for relative in report["figures"].values():
        assert not Path(relative).is_absolute() and (folder / relative).is_file()
    created = datetime.datetime.fromisoformat(report["created_utc"])
    assert created.utcoffset() == datetime.timedelta(0)
    assert report["verification"]["pass"] is True and "abort limits" in report["caution"]
    assert report["generation"]["rate_hz"] == json.loads(side.read_text())["rate"]


@pytest.mark.parametrize("name", ["gaussian-fixed-periodic.npy", "clip-3-periodic.npy"])
def test_drives_written_by_0_1_open_and_verify_against_their_sidecar_profile(tmp_path, name):
    raw = json.loads((V0_1 / f"{name}.json").read_text())
    assert raw["sidecar_version"] == 1 and "schema_version" not in raw  # really the 0.1 layout
    drive = open_drive(V0_1 / name)
    assert drive.sidecar.legacy and drive.samples == raw["samples"] and drive.rate_hz == raw["rate"]
    target = drive.sidecar.target_profile(str(drive.path))
    np.testing.assert_array_equal(target.frequencies_hz, [p["frequency"] for p in raw["profile"]["breakpoints"]])
    np.testing.assert_array_equal(target.asd_g2_per_hz, [p["asd"] for p in raw["profile"]["breakpoints"]])
    assert drive.sidecar.amplitude_targets()["clip"] == raw["options"]["clip"]
    status, out, err = _quiet_main(["verify", V0_1 / name, "--json"])
    assert status == 0, err
    result = json.loads(out)
    assert result["pass"] is True and result["profile"] == raw["profile"]["name"]
    # Independent check: the record's RMS (numpy) against the g RMS 0.1 recorded for the target, within 1 %.
    record = np.load(V0_1 / name, allow_pickle=False)
    assert np.sqrt(np.mean(record**2)) == pytest.approx(raw["profile"]["grms"], rel=0.01)
    if raw["options"]["clip"] is not None:  # the 0.1 clip target is judged: every sample within 3 x RMS
        assert "crest_factor" not in result["failed"]
        assert np.max(np.abs(record)) <= raw["options"]["clip"] * raw["profile"]["grms"] * (1 + 1e-9)
        assert result["compensation"]["achievable"] is True


def test_0_1_sidecar_converted_to_this_layout_validates(tmp_path):
    data = Sidecar.read(V0_1 / "clip-3-periodic.npy").to_dict()
    _validator("sidecar").validate(data)
    _check_naming_rule(data)


# ---------------------------------------------------------------------------- atomic writing
def _gone_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


@pytest.mark.skipif(os.name != "posix", reason="stale clean-up uses POSIX kill(2)")
def test_every_writer_cleans_stale_partials_of_its_destination(tmp_path):
    gone = _gone_pid()
    long_ago = time.time() - 3600
    stale = [tmp_path / f".verify.json.{gone}.partial", tmp_path / f".asd.png.{gone}.1.partial",
             tmp_path / f".report.pdf.{gone}.partial", tmp_path / f".profile.toml.{gone}.partial"]
    kept = [tmp_path / f".verify.json.{os.getpid()}.9.partial",  # this process: not stale
            tmp_path / f".notes.txt.{gone}.partial"]  # another destination
    for path in stale + kept:
        path.write_bytes(b"x")
        os.utime(path, (long_ago, long_ago))
    drive = tmp_path / "d.npy"
    assert _quiet_main(["generate", "bench-flat", "-o", drive, "--duration", 4, "--rate", 5120, "--seed", 1])[0] == 0
    assert _quiet_main(["verify", drive, "--report", tmp_path])[0] == 0
    atomic.write_text_atomic(tmp_path / "profile.toml", "x")
    json.loads((tmp_path / "verify.json").read_text())
    assert [p for p in stale if p.exists()] == []
    assert all(p.exists() for p in kept)
    # one temporary-name scheme: nothing else is ever left behind
    leftovers = {p.name for p in tmp_path.iterdir() if p.name.startswith(".")}
    assert leftovers == {p.name for p in kept}


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = tmp_path / "report.json"
    target.write_text('{"old": true}\n')
    with pytest.raises(ValueError):
        atomic.write_json_atomic(target, {"bad": float("nan")})  # NaN is not JSON (RFC 8259)
    assert json.loads(target.read_text()) == {"old": True}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.json"]


# ---------------------------------------------------------------------------- the run job as a library call
def test_run_job_returns_its_warnings_and_issues_them_as_vibsynth_warnings(tmp_path):
    profile = read_profile("bench-flat")  # top frequency 2000 Hz: 4500 Hz is under 2.56 x 2000 = 5120 Hz
    request = jobs.RunRequest(str(tmp_path / "run"), jobs.DriveRequest(output="", duration_s=10.0, rate_hz=4500.0,
                                                                       seed=5), "npy", (-6.0, 6.0))
    with pytest.warns(VibsynthWarning) as caught:
        result = jobs.run_job(profile, request)
    assert result.warnings and any("2.56" in message for message in result.warnings)
    assert {str(w.message) for w in caught if issubclass(w.category, VibsynthWarning)} >= set(result.warnings)
    assert sorted(result.files) == sorted(p.name for p in result.folder.iterdir())
    assert result.report["warnings"] == list(result.warnings)


def test_run_job_refused_before_writing_leaves_no_folder(tmp_path):
    request = jobs.RunRequest(str(tmp_path / "run"), jobs.DriveRequest(output="", duration_s=10.0, rate_hz=3000.0),
                              "npy")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(Exception, match="rate"):
            jobs.run_job(read_profile("bench-flat"), request)  # 3000 Hz is under 2 x 2000 Hz
    assert list(tmp_path.iterdir()) == []


def test_0_1_drive_copied_without_its_sidecar_needs_the_rate(tmp_path):
    shutil.copyfile(V0_1 / "gaussian-fixed-periodic.npy", tmp_path / "bare.npy")
    status, _, err = _quiet_main(["verify", tmp_path / "bare.npy", "--profile", "bench-flat"])
    assert status == 2 and "--rate" in err


def test_writer_refuses_sidecar_keys_that_are_not_fields(tmp_path):
    from vibsynth.errors import InputError
    from vibsynth.io.drivefile import write_drive

    with pytest.raises(InputError, match="'frame_length'"):
        write_drive(tmp_path / "x.npy", [np.zeros(4)], rate_hz=100.0, samples=4, sidecar={"frame_length": 4})
    assert list(tmp_path.iterdir()) == []
