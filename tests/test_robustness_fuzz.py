"""Fuzzing (hypothesis) of the profile readers, the drive sidecar reader and the option parsing.

The law checked for every input: the tool either accepts it, or refuses it with its own
input error (vibsynth.errors.InputError in the library; exit status 2 and one stderr line on
the command line).  No other exception escapes, no traceback is printed, and a refused run
leaves no file behind.  A profile that is accepted is usable: every overall figure is a
finite number and it survives a write/read round trip unchanged (TOML 1.0 and RFC 4180
text, exact float repr).

Huge values (products of two options beyond a float, budgets beyond the machine) are
checked separately in test_huge_values_are_refused_in_one_line and
test_huge_memory_budget_is_cut_to_the_machine.

Examples are kept few (the whole file runs in seconds); under CI (CI=true) hypothesis loads
its derandomized 'ci' profile, so CI runs are reproducible while local runs keep exploring.
Successful generate runs are bounded to a few seconds of samples by the value strategies.
The profile is invented.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vibsynth.cli.main import main
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile
from vibsynth.profile.files import format_csv_profile, format_toml_profile, parse_csv_profile, parse_toml_profile, read_profile

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test
RATE = 5120

FUZZ = settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
FUZZ_CLI = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def _quiet_main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _assert_usable(profile: AsdProfile) -> None:
    """An accepted profile gives finite figures and survives a TOML and a CSV round trip exactly."""
    summary = profile.summary()
    for key in ("grms", "mean_square", "velocity_rms", "displacement_rms", "displacement_peak_to_peak_3sigma",
                "zero_upcrossing_rate", "peak_rate", "irregularity_factor"):
        assert math.isfinite(summary[key]) and summary[key] > 0, (key, summary[key])
    assert np.all(np.diff(profile.frequencies_hz) > 0) and np.all(profile.asd_g2_per_hz > 0)
    json.dumps(summary, allow_nan=False)  # the info --json output is standard JSON
    for text, parse in ((format_toml_profile(profile), parse_toml_profile), (format_csv_profile(profile), parse_csv_profile)):
        again = parse(text, "round-trip")
        np.testing.assert_array_equal(again.frequencies_hz, profile.frequencies_hz)
        np.testing.assert_array_equal(again.asd_g2_per_hz, profile.asd_g2_per_hz)


def _accepts_or_input_error(parse, text: str):
    try:
        profile = parse(text, "fuzz")
    except InputError as error:
        line = error.one_line()
        assert "\n" not in line and line.startswith("fuzz")
        return None
    _assert_usable(profile)
    return profile


# ----------------------------------------------------------------------------- TOML
def _toml_value(value) -> str:
    """TOML 1.0 text for a scalar or a flat array (inf/nan spelled as TOML spells them)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)  # JSON string escapes are valid TOML basic-string escapes
    return "[" + ", ".join(_toml_value(v) for v in value) + "]"


SCALARS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=1e-6, max_value=1e5),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.integers(min_value=1, max_value=20000),
    st.booleans(),
    st.text(max_size=6),
    st.lists(st.floats(min_value=1, max_value=100), max_size=3),
)
POINT_KEYS = st.sampled_from(["frequency", "asd", "slope_db_per_octave", "asdd", "Frequency"])
TOP_KEYS = st.sampled_from(["name", "description", "unit", "level_db", "grms", "notes", "units", "breakpoint"])
UNITS = st.sampled_from(['"g^2/Hz"', '"(m/s^2)^2/Hz"', '"g2/hz"', '"g/Hz"', "3", '"m^2/s^4/Hz"'])


@st.composite
def toml_documents(draw) -> str:
    lines = []
    for key in draw(st.lists(TOP_KEYS, unique=True, max_size=3)):
        lines.append(f"{key} = {draw(UNITS) if key == 'unit' else _toml_value(draw(SCALARS))}")
    frequency = draw(st.floats(min_value=0.01, max_value=100))
    for _ in range(draw(st.integers(min_value=0, max_value=6))):
        lines.append("[[breakpoints]]")
        keys = draw(st.lists(POINT_KEYS, unique=True, min_size=1, max_size=3))
        for key in keys:
            if key == "frequency" and draw(st.booleans()):
                frequency *= draw(st.floats(min_value=0.5, max_value=50))
                value = frequency
            elif key == "asd" and draw(st.booleans()):
                value = draw(st.floats(min_value=1e-8, max_value=10))
            elif key == "slope_db_per_octave" and draw(st.booleans()):
                value = draw(st.floats(min_value=-40, max_value=40))
            else:
                value = draw(SCALARS)
            lines.append(f"{key} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"


@FUZZ
@given(st.text(max_size=300))
def test_toml_reader_on_any_text(text):
    _accepts_or_input_error(parse_toml_profile, text)


@FUZZ
@given(toml_documents())
def test_toml_reader_on_profile_like_documents(text):
    _accepts_or_input_error(parse_toml_profile, text)


# ------------------------------------------------------------------------------ CSV
CSV_ALPHABET = "0123456789.,;\t -+eE#\nabcfginsxzHz^()/_"


@st.composite
def csv_tables(draw) -> str:
    separator = draw(st.sampled_from([",", ";", "\t", " ", ", ", "  "]))
    lines = []
    if draw(st.booleans()):
        lines.append(draw(st.sampled_from(["frequency_hz,asd_g2_per_hz", "f (Hz); ASD ((m/s^2)^2/Hz)", "Hz g2/Hz",
                                            "# invented table", "freq"])))
    numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.floats(min_value=1e-6, max_value=1e5),
                        st.integers(min_value=-5, max_value=10**6))
    frequency = draw(st.floats(min_value=0.1, max_value=50))
    for _ in range(draw(st.integers(min_value=0, max_value=8))):
        if draw(st.booleans()):
            frequency *= draw(st.floats(min_value=0.9, max_value=20))
            row = [repr(frequency), repr(draw(st.floats(min_value=1e-9, max_value=100)))]
        else:
            row = [repr(draw(numbers)) for _ in range(draw(st.integers(min_value=1, max_value=3)))]
        comment = draw(st.sampled_from(["", "", "  # note", "#"]))
        lines.append(separator.join(row) + comment)
    return "\n".join(lines) + draw(st.sampled_from(["", "\n", "\r\n"]))


@FUZZ
@given(st.text(alphabet=CSV_ALPHABET, max_size=300))
def test_csv_reader_on_any_text(text):
    _accepts_or_input_error(parse_csv_profile, text)


@FUZZ
@given(csv_tables())
def test_csv_reader_on_tables_of_numbers(text):
    _accepts_or_input_error(parse_csv_profile, text)


@FUZZ
@given(st.binary(max_size=200), st.sampled_from([".toml", ".csv", ".txt", ".dat"]))
def test_read_profile_on_any_bytes(tmp_path, data, suffix):
    path = tmp_path / f"profile{suffix}"
    path.write_bytes(data)
    try:
        profile = read_profile(path)
    except InputError as error:
        assert str(path) in error.one_line()
        return
    _assert_usable(profile)


# ------------------------------------------------------------------- option parsing
def _huge(text: str) -> bool:
    try:
        return abs(float(text)) > 1e15
    except ValueError:
        return False


GARBAGE = st.one_of(
    st.sampled_from(["", "nan", "inf", "-inf", "-0", "0", "1e-308", "abc", "--rate", "0x10",
                     "1_000", "\u0663", "1e999", " 5 ", "5,0", "-", "=", "None", "2**8"]),
    st.text(max_size=6),
).filter(lambda text: not _huge(text) or not math.isfinite(float(text)))


def _numbers(low: float, high: float):
    return st.floats(min_value=low, max_value=high).map(lambda v: f"{v:.6g}")


def _mostly(valid, special=None):
    """Nine in ten values from ``valid`` (to get past click into synth/), the rest special or garbage."""
    odd = GARBAGE if special is None else st.one_of(special, GARBAGE)
    return st.integers(min_value=0, max_value=9).flatmap(lambda pick: odd if pick == 0 else valid)


# Magnitudes stay below 1e15 so that generate runs stay short; far larger values are checked in
# test_huge_values_are_refused_in_one_line.
BIG = st.sampled_from(["1e9", "1e12", "-1e12", "1e-12", "123456789012"])
GENERATE_OPTIONS = {
    "--duration": _mostly(_numbers(0.05, 3), st.one_of(BIG, _numbers(-1, 0))),
    "--rate": _mostly(st.one_of(st.sampled_from(["4000", "4096", "5120", "8192", "10000", "5120.5"]),
                                _numbers(3000, 12000)), st.one_of(BIG, _numbers(-10, 100))),
    "--seed": _mostly(st.integers(min_value=0, max_value=2**80).map(str), st.sampled_from(["-1", "1.5"])),
    "--amplitude": _mostly(st.sampled_from(["fixed", "rayleigh", "FIXED", "gauss"])),
    "--resolution": _mostly(_numbers(0.1, 2000), BIG),
    "--quantities": _mostly(st.sampled_from(["acceleration", "accel,velocity", "vel", "disp,accel", "accel,accel",
                                             "accel,,velocity", "jerk", ",", "acc,vel,disp"])),
    "--subtype": _mostly(st.sampled_from(["float", "pcm24", "pcm16", "PCM24", "text"])),
    "--full-scale": _mostly(_numbers(0.1, 200), st.one_of(BIG, _numbers(-1, 0))),
    "--ramp": _mostly(_numbers(0, 2), st.one_of(BIG, _numbers(-1, 0))),
    "--stroke-limit": _mostly(_numbers(0.1, 5), st.one_of(BIG, _numbers(-1, 0))),
    "--velocity-limit": _mostly(_numbers(0.01, 1), st.one_of(BIG, _numbers(-1, 0))),
    "--grms": _mostly(_numbers(0.01, 100), st.one_of(BIG, _numbers(-1, 0))),
    "--level-db": _mostly(_numbers(-80, 80)),
    # A huge budget lets a huge periodic record be planned (and its line spectrum allocated) before the
    # disk-space check refuses it: that exhausts memory, so budgets stay small here (see the module notes).
    "--memory-budget": _mostly(_numbers(1, 64), _numbers(-1, 1)),
}
FLAGS = st.lists(st.sampled_from(["--loop", "--quiet", "--quiet", "--loop", "--quiet", "--no-such-flag", "-h"]),
                 unique=True, max_size=2)
OUTPUTS = st.sampled_from(["d.wav", "d.flac", "d.csv", "d.npy", "d.wav", "d.flac", "d.csv", "d.npy", "d.NPY", "d.mp3",
                           "d", "later/d.npy", ".", ".d.wav"])


@st.composite
def generate_argv(draw, profile: Path, folder: Path) -> list[str]:
    argv = ["generate", str(profile)]
    if draw(st.integers(min_value=0, max_value=19)):
        argv += ["-o", str(folder / draw(OUTPUTS))]
    names = draw(st.lists(st.sampled_from(sorted(GENERATE_OPTIONS)), unique=True, max_size=5))
    for required in ("--duration", "--rate"):
        if required not in names and draw(st.integers(min_value=0, max_value=19)):
            names.append(required)
    for name in draw(st.permutations(names)):
        argv += [name, draw(GENERATE_OPTIONS[name])]
    argv += draw(FLAGS)
    return argv


def _listing(folder: Path) -> list[str]:
    return sorted(os.path.relpath(os.path.join(r, n), folder) for r, ds, fs in os.walk(folder) for n in ds + fs)


def _check_cli_outcome(status, out, err, allowed=(0, 2)):
    assert status in allowed, (status, out, err)
    assert "Traceback" not in err and "Traceback" not in out
    if status == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("vibsynth"), err


@pytest.fixture(scope="module")
def profile_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("fuzz-profile") / "bracket.csv"
    path.write_text(PROFILE_CSV)
    return path


@FUZZ_CLI
@given(data=st.data())
def test_generate_option_parsing(profile_file, data):
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        argv = data.draw(generate_argv(profile_file, folder))
        status, out, err = _quiet_main(argv)
        _check_cli_outcome(status, out, err)
        listing = _listing(folder)
        assert not [name for name in listing if "partial" in name], listing
        if status == 2:
            assert listing == [], (argv, listing)
        for name in listing:
            if not name.endswith(".json"):
                assert sidecar_path(folder / name).exists()  # a written drive always has its sidecar


VERIFY_OPTIONS = {
    "--profile": st.one_of(st.sampled_from(["bench-flat", "harbour-crane-cab", "{profile}", "nosuch", "x.toml"]), GARBAGE),
    "--level-db": st.one_of(_numbers(-80, 80), GARBAGE),
    "--tolerance": st.one_of(st.sampled_from(["3", "-2,3", "-2:+3", "3,-3", "1,2,3", " -1 , 1 ", "-inf,inf"]), GARBAGE,
                             st.lists(_numbers(-10, 10), min_size=1, max_size=3).map(",".join)),
    "--grms-tolerance": st.one_of(_numbers(-5, 120), GARBAGE),
    "--min-fraction": st.one_of(_numbers(-0.5, 1.5), GARBAGE),
    "--resolution": st.one_of(_numbers(1e-3, 5000), BIG, GARBAGE),
    "--dof": st.one_of(_numbers(-5, 1e4), st.sampled_from(["1e300"]), GARBAGE),
    "--rate": st.one_of(st.sampled_from(["5120", "5120.0", "4000"]), _numbers(1, 1e5), GARBAGE),
    "--scale": st.one_of(_numbers(-1, 100), GARBAGE),
}
DRIVES = ["good.npy", "good.wav", "good.csv", "bare.npy", "bare.wav", "missing.npy"]


@pytest.fixture(scope="module")
def drives(tmp_path_factory, profile_file):
    folder = tmp_path_factory.mktemp("fuzz-drives")
    for suffix in ("npy", "wav", "csv"):
        status, _, err = _quiet_main(["generate", profile_file, "-o", folder / f"good.{suffix}", "--duration", 2,
                                      "--rate", RATE, "--seed", 5, "--quiet"])
        assert status == 0, err
    for suffix in ("npy", "wav"):
        shutil.copyfile(folder / f"good.{suffix}", folder / f"bare.{suffix}")
    return folder


@FUZZ_CLI
@given(data=st.data())
def test_verify_option_parsing(drives, profile_file, data):
    before = _listing(drives)
    argv = ["verify", str(drives / data.draw(st.sampled_from(DRIVES)))]
    for name in data.draw(st.lists(st.sampled_from(sorted(VERIFY_OPTIONS)), unique=True, max_size=4)):
        argv += [name, data.draw(VERIFY_OPTIONS[name]).replace("{profile}", str(profile_file))]
    if data.draw(st.booleans()):
        argv.append("--json")
    status, out, err = _quiet_main(argv)
    _check_cli_outcome(status, out, err, allowed=(0, 1, 2))
    if status in (0, 1) and "--json" in argv:
        assert json.loads(out)["pass"] == (status == 0)
    assert _listing(drives) == before


INFO_OPTIONS = {
    "--grms": st.one_of(_numbers(-1, 1e3), BIG, GARBAGE),
    "--level-db": st.one_of(_numbers(-80, 80), GARBAGE),
    "--write": st.sampled_from(["p.toml", "p.csv", "p.xlsx", "later/p.toml", ".", "p"]),
}


@FUZZ_CLI
@given(data=st.data())
def test_info_option_parsing(profile_file, data):
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        argv = ["info", data.draw(st.sampled_from(["bench-flat", str(profile_file), "bench", ""]))]
        for option in data.draw(st.lists(st.sampled_from(sorted(INFO_OPTIONS)), unique=True, max_size=3)):
            value = data.draw(INFO_OPTIONS[option])
            argv += [option, str(folder / value) if option == "--write" else value]
        argv += data.draw(st.lists(st.sampled_from(["--json", "--inch"]), unique=True, max_size=2))
        status, out, err = _quiet_main(argv)
        _check_cli_outcome(status, out, err)
        if status == 2:
            assert _listing(folder) == []
        elif "--json" in argv:
            json.loads(out, parse_constant=lambda c: pytest.fail(f"non-standard JSON constant {c}"))


# -------------------------------------------------------------------- sidecar reader
JSON_VALUES = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(min_value=-(2**64), max_value=2**64),
              st.floats(allow_nan=False, allow_infinity=False), st.text(max_size=5)),
    lambda children: st.one_of(st.lists(children, max_size=3), st.dictionaries(st.text(max_size=5), children, max_size=3)),
    max_leaves=6,
)
SIDECAR_KEYS = ["unit", "scale", "rate", "samples", "format", "columns", "ramp_in_s", "ramp_out_s", "options", "profile"]


@FUZZ
@given(data=st.data())
def test_sidecar_reader_on_altered_sidecars(tmp_path, drives, data):
    """Any change to a good sidecar is accepted (and the drive verifies), or refused as an InputError."""
    suffix = data.draw(st.sampled_from(["npy", "wav"]))
    path = tmp_path / f"drive.{suffix}"
    shutil.copyfile(drives / f"good.{suffix}", path)
    sidecar = json.loads(sidecar_path(drives / f"good.{suffix}").read_text())
    for key in data.draw(st.lists(st.sampled_from(SIDECAR_KEYS), unique=True, min_size=1, max_size=3)):
        if data.draw(st.integers(min_value=0, max_value=4)) == 0:
            sidecar.pop(key, None)
        elif key == "options":
            sidecar[key] = {data.draw(st.sampled_from(["kurtosis", "skewness", "clip"])): data.draw(JSON_VALUES)}
        else:
            sidecar[key] = data.draw(JSON_VALUES)
    sidecar_path(path).write_text(json.dumps(sidecar))
    status, out, err = _quiet_main(["verify", path])
    _check_cli_outcome(status, out, err, allowed=(0, 1, 2))
    try:
        open_drive(path)
    except InputError as error:
        assert status == 2 and error.one_line() in err


# --------------------------------------------------------------------- known overflow
@pytest.mark.parametrize("extra", [("--duration", "1e308"), ("--rate", "1e306", "--duration", "1000"),
                                   ("--resolution", "1e-308"), ("--ramp", "1e308")],
                         ids=["duration", "rate-x-duration", "resolution", "ramp"])
def test_huge_values_are_refused_in_one_line(tmp_path, profile_file, extra):
    argv = ["generate", profile_file, "-o", tmp_path / "d.npy", "--duration", 1, "--rate", RATE, *extra]
    status, out, err = _quiet_main(argv)
    _check_cli_outcome(status, out, err, allowed=(2,))
    assert os.listdir(tmp_path) == []


def test_huge_memory_budget_is_honoured_or_refused_never_switched(tmp_path, profile_file, monkeypatch):
    # The periodic/overlap-add choice comes from the options alone, never from the machine's memory,
    # so the same options give the same samples on every machine: a budget far above any machine's
    # memory makes a periodic record, recorded in the sidecar, written when the machine holds it ...
    argv = ["generate", profile_file, "-o", tmp_path / "d.npy", "--duration", 60, "--rate", RATE,
            "--memory-budget", "1e308", "--seed", 3]
    status, out, err = _quiet_main(argv)
    _check_cli_outcome(status, out, err, allowed=(0,))
    assert (tmp_path / "d.npy").exists()
    sidecar = json.loads(sidecar_path(tmp_path / "d.npy").read_text())
    assert sidecar["plan"]["mode"] == "periodic" and sidecar["options"]["memory_budget_mib"] == 1e308
    # ... the same samples as with the default budget (307200 samples x 48 bytes = 14 MiB: periodic too) ...
    status, out, err = _quiet_main(["generate", profile_file, "-o", tmp_path / "e.npy", "--duration", 60, "--rate", RATE,
                                    "--seed", 3])
    _check_cli_outcome(status, out, err, allowed=(0,))
    assert np.array_equal(np.load(tmp_path / "d.npy"), np.load(tmp_path / "e.npy"))
    # ... and refused in one line (exit 2, nothing written) on a machine that cannot hold it, instead of
    # silently switching to overlap-add (a machine of 1 MiB stands in for one too small for 14 MiB).
    from vibsynth.generate import _memory

    monkeypatch.setattr(_memory, "machine_memory_bytes", lambda: float(2**20))
    status, out, err = _quiet_main(argv[:3] + [tmp_path / "f.npy"] + argv[4:])
    _check_cli_outcome(status, out, err, allowed=(2,))
    assert "memory" in err and "--memory-budget" in err
    assert not (tmp_path / "f.npy").exists()
    assert sorted(os.listdir(tmp_path)) == sorted(["d.npy", "d.npy.json", "e.npy", "e.npy.json"])


@pytest.mark.parametrize("name", ["\r", "a\nb", "tab\there"])
def test_a_name_with_control_characters_is_escaped_in_the_one_error_line(tmp_path, name):
    """Found by test_verify_option_parsing: `--profile '\\r'` printed the carriage return itself, which
    split the error over two lines.  The name is shown escaped, as Python's repr writes it."""
    for argv in (["info", name], ["generate", name, "-o", tmp_path / "d.npy", "--duration", 1, "--rate", 1024]):
        status, out, err = _quiet_main(argv)
        lines = err.strip().splitlines()
        assert status == 2 and len(lines) == 1 and lines[0].startswith("vibsynth")
        assert repr(name) in lines[0]
    assert not any(tmp_path.iterdir())
